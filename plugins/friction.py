"""Mechanical friction correlations, as friction mean effective pressure (FMEP).

All return Pa.  Pumping work is counted by the cycle itself, except in
correlations fitted to total motored friction (``includes_pumping = True``).
"""

from __future__ import annotations

import numpy as np

from cyclesim.params import Param
from cyclesim.roles import Friction, FrictionInputs

_BAR = 1e5
_KPA = 1e3
P_ATM = 101325.0
"""Standard atmosphere [Pa], the reference of the ring gas-loading term."""


class NoFriction(Friction):
    """Frictionless engine."""

    name = "none"
    summary = "no mechanical friction"

    def fmep(self, f: FrictionInputs) -> dict[str, np.ndarray]:
        return {"total": np.zeros(self.B)}


class ChenFlynn(Friction):
    """Chen & Flynn (1965): FMEP = A + B p_max + C Sp + D Sp^2.

    Notes
    -----
    Fitted to motored and fired data of diesel engines; applied to SI
    engines the coefficients should be calibrated.  Default coefficients
    (from memory, values commonly used with this form in cycle simulation,
    not read in the 1965 paper): A = 0.4 bar, B = 0.005 (per unit of peak
    pressure), C = 0.09 bar s/m, D = 9e-4 bar s^2/m^2.  With them a
    2-litre-class SI engine at 3000 rpm (Sp about 9 m/s, p_max about 60 bar)
    gets about 1.6 bar.
    """

    name = "chen_flynn"
    summary = "Chen-Flynn 1965: A + B p_max + C Sp + D Sp^2 (fitted to diesel data)"
    params = (
        Param("constant_bar", "bar", 0.4, "constant term A", min=0.0, max=5.0),
        Param("peak_pressure_factor", "-", 0.005, "coefficient B of peak cylinder pressure", min=0.0, max=0.1),
        Param("speed_coef_bar_s_per_m", "bar s/m", 0.09, "coefficient C of mean piston speed", min=0.0, max=1.0),
        Param(
            "speed_sq_coef_bar_s2_per_m2", "bar s^2/m^2", 9e-4,
            "coefficient D of mean piston speed squared", min=0.0, max=0.1,
        ),
    )
    references = (
        "Chen S.K., Flynn P.F. (1965) Development of a single cylinder compression ignition "
        "research engine. SAE 650733. doi:10.4271/650733",
    )

    def fmep(self, f: FrictionInputs) -> dict[str, np.ndarray]:
        p = self.p
        return {
            "constant": np.broadcast_to(p.constant_bar * _BAR, (self.B,)).copy(),
            "peak_pressure": p.peak_pressure_factor * f.p_max,
            "piston_speed": (p.speed_coef_bar_s_per_m * f.Sp + p.speed_sq_coef_bar_s2_per_m2 * f.Sp**2) * _BAR,
        }


class BarnesMoss(Friction):
    """Barnes-Moss total motored friction of 4-cylinder SI engines (pumping included).

    ``fmep[bar] = 0.97 + 0.15 (N/1000) + 0.05 (N/1000)^2``, N [rpm].

    Notes
    -----
    As given by Heywood (1988, eq. 13.15, from memory) for 4-cylinder SI
    engines of 845-2000 cm^3 at wide-open throttle, motored: it contains the
    pumping loss, so ``includes_pumping = True`` and the cycle's PMEP is not
    added to it again.
    """

    name = "barnes_moss"
    summary = "Barnes-Moss total motored FMEP of 4-cyl SI engines, INCLUDES pumping (Heywood eq. 13.15)"
    includes_pumping = True
    params = (
        Param("constant_bar", "bar", 0.97, "constant term", min=0.0, max=5.0),
        Param("linear_bar", "bar", 0.15, "coefficient of N/1000 rpm", min=0.0, max=2.0),
        Param("quadratic_bar", "bar", 0.05, "coefficient of (N/1000 rpm)^2", min=0.0, max=1.0),
    )
    references = (
        "Heywood J.B. (1988) Internal Combustion Engine Fundamentals, McGraw-Hill, "
        "eq. 13.15 (Barnes-Moss correlation; from memory).",
    )

    def fmep(self, f: FrictionInputs) -> dict[str, np.ndarray]:
        n = np.asarray(f.speed_rpm, dtype=float) / 1000.0
        p = self.p
        return {"total": (p.constant_bar + p.linear_bar * n + p.quadratic_bar * n**2) * _BAR}


class Components(Friction):
    """Component friction model after Patton, Nitschke & Heywood (1989), updated by Sandoval & Heywood (2003).

    Terms in the published form, FMEP [kPa] with bore B, stroke S, bearing
    diameters D and lengths L, valve lift L_v [mm], speed N [rpm], mean
    piston speed Sp [m/s], n_c cylinders, oil-viscosity ratio
    ``v = sqrt(mu / mu0)``:

    crankshaft
        seals ``C_s D_mb / (B^2 S n_c)``; hydrodynamic main bearings
        ``C_mb v N D_mb^3 L_mb n_mb / (B^2 S n_c)``; turbulent oil
        dissipation ``C_t D_mb^2 N^2 n_mb / n_c``.
    reciprocating
        piston skirt ``C_ps v Sp / B``; rings ``C_r (1 + N_r / N) / B^2``;
        ring gas loading ``C_g (p_i / p_atm) (0.088 r_c + 0.182
        r_c^(1.33 - K Sp))``; connecting-rod bearings
        ``C_rb v N D_rb^3 L_rb / (B^2 S)`` (one per cylinder).
    valvetrain
        camshaft bearings ``C_cb v N n_cb / (B^2 S n_c)``; flat followers
        ``C_ff (1 + 1000 / N) n_v / (S n_c)``; roller followers
        ``C_rf N n_v / (S n_c)``; oscillating hydrodynamic
        ``C_oh v L_v^1.5 N^0.5 n_v / (B S n_c)``; oscillating mixed
        ``C_om (1 + 500 / N) L_v n_v / (S n_c)``.
    auxiliaries
        oil and water pumps, alternator ``a0 + a1 N + a2 N^2``.
    accessory_load
        a constant ``accessory_load_bar``.

    Here ``n_v`` is the total number of valves (valves per cylinder x n_c),
    ``n_mb = n_c + 1`` main bearings (inline engine), ``n_cb = camshafts x
    (n_c + 1)`` camshaft bearings, ``r_c`` the compression ratio, ``p_i`` the
    intake plenum pressure.

    Notes
    -----
    All default coefficients are from memory (Sandoval & Heywood 2003 and
    Patton et al. 1989, not checked here): C_s 1.22e5, C_mb 3.03e-4,
    C_t 1.35e-10, C_ps 2.94e2, C_r 4.06e4 with N_r = 500 rpm, C_g 6.89,
    K 2.38e-2 s/m, C_rb 3.03e-4, C_cb 244, valvetrain defaults for double
    overhead cams with direct-acting flat (bucket) followers C_ff 133,
    C_rf 0, C_oh 0.5, C_om 10.7, auxiliaries 6.23 + 5.22e-3 N - 1.79e-7 N^2.
    Bearing and valve dimensions default to proportions of the bore typical
    of passenger-car engines (common practice): main bearing D 0.65 B,
    L 0.25 B; rod bearing D 0.56 B, L 0.21 B; valve lift 0.105 B.
    Fitted to passenger-car SI engines of the 1980s-2000s, about
    1000-6000 rpm; with the defaults a 2-litre 4-cylinder engine at
    2000-3000 rpm gets about 1 bar at full load.
    """

    name = "components"
    summary = "component friction (crankshaft, reciprocating, valvetrain, auxiliaries) after Patton-Nitschke-Heywood 1989 / Sandoval-Heywood 2003"
    params = (
        Param("oil_viscosity_ratio", "-", 1.0, "oil viscosity / reference oil viscosity", min=0.05, max=20.0),
        Param("main_bearing_diameter_to_bore", "-", 0.65, "main bearing diameter / bore", min=0.2, max=1.5),
        Param("main_bearing_length_to_bore", "-", 0.25, "main bearing length / bore", min=0.05, max=1.0),
        Param("rod_bearing_diameter_to_bore", "-", 0.56, "connecting-rod bearing diameter / bore", min=0.2, max=1.5),
        Param("rod_bearing_length_to_bore", "-", 0.21, "connecting-rod bearing length / bore", min=0.05, max=1.0),
        Param("valve_lift_to_bore", "-", 0.105, "maximum valve lift / bore", min=0.0, max=0.5),
        Param("valves_per_cylinder", "-", 4, "number of valves per cylinder", min=1, max=6, kind="int"),
        Param("camshafts", "-", 2, "number of camshafts (bearings: n_c + 1 each)", min=0, max=4, kind="int"),
        Param("seal_coef_kPa", "kPa mm^2", 1.22e5, "crankshaft seal coefficient C_s", min=0.0),
        Param("main_bearing_coef_kPa", "kPa min/mm", 3.03e-4, "hydrodynamic main-bearing coefficient C_mb", min=0.0),
        Param("turbulent_coef_kPa", "kPa min^2/mm^2", 1.35e-10, "turbulent oil-dissipation coefficient C_t", min=0.0),
        Param("skirt_coef_kPa", "kPa mm s/m", 2.94e2, "piston-skirt coefficient C_ps", min=0.0),
        Param("ring_coef_kPa", "kPa mm^2", 4.06e4, "ring-tension coefficient C_r", min=0.0),
        Param("ring_speed_rpm", "rpm", 500.0, "speed N_r of the ring term's (1 + N_r/N)", min=0.0),
        Param("gas_loading_coef_kPa", "kPa", 6.89, "ring gas-pressure loading coefficient C_g", min=0.0),
        Param("gas_loading_speed_s_per_m", "s/m", 2.38e-2, "piston-speed constant K of the gas-loading term", min=0.0),
        Param("rod_bearing_coef_kPa", "kPa min/mm", 3.03e-4, "connecting-rod bearing coefficient C_rb", min=0.0),
        Param("cam_bearing_coef_kPa", "kPa mm^3 min", 244.0, "camshaft-bearing coefficient C_cb", min=0.0),
        Param("flat_follower_coef_kPa", "kPa mm", 133.0, "flat-follower coefficient C_ff", min=0.0),
        Param("roller_follower_coef_kPa", "kPa mm min", 0.0, "roller-follower coefficient C_rf", min=0.0),
        Param("valve_hydrodynamic_coef_kPa", "kPa mm^0.5 min^0.5", 0.5, "oscillating hydrodynamic coefficient C_oh", min=0.0),
        Param("valve_mixed_coef_kPa", "kPa", 10.7, "oscillating mixed-lubrication coefficient C_om", min=0.0),
        Param("aux_constant_kPa", "kPa", 6.23, "auxiliaries constant a0"),
        Param("aux_linear_kPa_per_rpm", "kPa/rpm", 5.22e-3, "auxiliaries coefficient a1 of N"),
        Param("aux_quadratic_kPa_per_rpm2", "kPa/rpm^2", -1.79e-7, "auxiliaries coefficient a2 of N^2"),
        Param("accessory_load_bar", "bar", 0.0, "constant extra accessory load", min=0.0, max=5.0),
    )
    references = (
        "Patton K.J., Nitschke R.G., Heywood J.B. (1989) Development and evaluation of a friction "
        "model for spark-ignition engines. SAE 890836. doi:10.4271/890836",
        "Sandoval D., Heywood J.B. (2003) An improved friction model for spark-ignition engines. "
        "SAE 2003-01-0725. doi:10.4271/2003-01-0725",
    )

    GROUPS = {
        "crankshaft": ("crank_seals", "main_bearings", "crank_turbulent"),
        "reciprocating": ("piston_skirt", "piston_rings", "ring_gas_loading", "rod_bearings"),
        "valvetrain": ("cam_bearings", "flat_followers", "roller_followers", "valve_hydrodynamic", "valve_mixed"),
        "auxiliaries": ("auxiliaries",),
        "accessory_load": ("accessory_load",),
    }

    def breakdown(self, f: FrictionInputs) -> dict[str, np.ndarray]:
        """Every term of the model [Pa] by name (each (B,))."""
        p, g = self.p, f.geometry
        B = g.bore_m * 1e3
        S = g.stroke_m * 1e3
        N = np.asarray(f.speed_rpm, dtype=float)
        Sp = np.asarray(f.Sp, dtype=float)
        nc = np.asarray(f.n_cylinders, dtype=float)
        v = np.sqrt(p.oil_viscosity_ratio)
        D_mb, L_mb = p.main_bearing_diameter_to_bore * B, p.main_bearing_length_to_bore * B
        D_rb, L_rb = p.rod_bearing_diameter_to_bore * B, p.rod_bearing_length_to_bore * B
        L_v = p.valve_lift_to_bore * B
        n_mb = nc + 1.0
        n_cb = p.camshafts * (nc + 1.0)
        n_v = p.valves_per_cylinder * nc
        rc = g.compression_ratio
        kpa = {
            "crank_seals": p.seal_coef_kPa * D_mb / (B**2 * S * nc),
            "main_bearings": p.main_bearing_coef_kPa * v * N * D_mb**3 * L_mb * n_mb / (B**2 * S * nc),
            "crank_turbulent": p.turbulent_coef_kPa * D_mb**2 * N**2 * n_mb / nc,
            "piston_skirt": p.skirt_coef_kPa * v * Sp / B,
            "piston_rings": p.ring_coef_kPa * (1.0 + p.ring_speed_rpm / N) / B**2,
            "ring_gas_loading": p.gas_loading_coef_kPa * (np.asarray(f.p_intake) / P_ATM)
            * (0.088 * rc + 0.182 * rc ** (1.33 - p.gas_loading_speed_s_per_m * Sp)),
            "rod_bearings": p.rod_bearing_coef_kPa * v * N * D_rb**3 * L_rb / (B**2 * S),
            "cam_bearings": p.cam_bearing_coef_kPa * v * N * n_cb / (B**2 * S * nc),
            "flat_followers": p.flat_follower_coef_kPa * (1.0 + 1000.0 / N) * n_v / (S * nc),
            "roller_followers": p.roller_follower_coef_kPa * N * n_v / (S * nc),
            "valve_hydrodynamic": p.valve_hydrodynamic_coef_kPa * v * L_v**1.5 * np.sqrt(N) * n_v / (B * S * nc),
            "valve_mixed": p.valve_mixed_coef_kPa * (1.0 + 500.0 / N) * L_v * n_v / (S * nc),
            "auxiliaries": p.aux_constant_kPa + p.aux_linear_kPa_per_rpm * N + p.aux_quadratic_kPa_per_rpm2 * N**2,
        }
        out = {k: np.broadcast_to(x * _KPA, (self.B,)).astype(float) for k, x in kpa.items()}
        out["accessory_load"] = np.broadcast_to(p.accessory_load_bar * _BAR, (self.B,)).astype(float)
        return out

    def fmep(self, f: FrictionInputs) -> dict[str, np.ndarray]:
        terms = self.breakdown(f)
        return {grp: sum(terms[k] for k in keys) for grp, keys in self.GROUPS.items()}

    FITTED_PISTON_SPEED_M_PER_S = 20.0
    """Mean piston speed beyond that of the production engines the terms were fitted to (about
    20 m/s; from memory): the speed terms grow with its square there and are extrapolated."""

    def warnings(self, trace) -> list[list[str]]:
        """Mean piston speed beyond the correlation's fitted range."""
        Sp = np.asarray(self.ctx.geometry.mean_piston_speed(self.ctx.speed_rpm), float) * np.ones(self.B)
        lim = self.FITTED_PISTON_SPEED_M_PER_S
        return [[f"friction model 'components': mean piston speed {s:.1f} m/s is beyond the about {lim:g} m/s"
                 f" of the engines its terms were fitted to (from memory); FMEP is extrapolated"] if s > lim else []
                for s in Sp]


SUBMODELS = [NoFriction, ChenFlynn, BarnesMoss, Components]
