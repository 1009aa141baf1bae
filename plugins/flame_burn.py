"""A Wiebe burn whose timing responds to flame speed and turbulence (superseded by ``entrainment``).

Superseded: the predictive burn ``entrainment`` (:mod:`.entrainment_burn`) computes the burn
from the flame itself and needs no reference state copied from a run.

The shape of burning is a single Wiebe function (see :mod:`.wiebe`); its
flame-development angle (spark to start of the Wiebe burn) and its duration
scale with the laminar flame speed of the charge at spark (Metghalchi &
Keck 1982) and with the mean piston speed, which sets the turbulence.

The function :func:`laminar_flame_speed` gives the Metghalchi-Keck burning velocity of
fuel-air mixtures diluted with burned gas, from :mod:`cyclesim.combustion.laminar_flame`
(one copy of the correlation; Rhodes-Keck dilution).
"""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from cyclesim.combustion import laminar_flame as lf
from cyclesim.combustion.laminar_flame import metghalchi_keck
from cyclesim.kernel_ops import fresh_charge, where
from cyclesim.params import Param
from cyclesim.roles import BurnRate, SetupContext

from .knock import log_mean_of
from .wiebe import CYCLE_END_DEG, P_A, P_EFF, P_M, P_SPARK

ATM_PA = lf.P_REF_PA
"""One standard atmosphere [Pa]."""
T0_K = lf.MK_T0_K
"""Reference temperature of the Metghalchi-Keck correlation [K]."""

MK_FUELS = {name: lf.FUEL_CODES[name] for name in ("gasoline", "isooctane", "methanol", "propane")}
"""Fuels with Metghalchi-Keck coefficients -> their row in :data:`laminar_flame.MK_CONSTANTS`."""

MK_RANGE = {"p_atm": (0.4, 50.0), "T_K": (298.0, 700.0), "phi": (0.8, 1.5), "f": (0.0, 0.2)}
"""Conditions Metghalchi & Keck measured (from memory)."""

VISCOSITY_T_EXPONENT = 0.7
"""Dynamic viscosity of the charge taken as ~ T^0.7 (common practice for air)."""


def laminar_flame_speed(phi: Any, T_u: Any, p: Any, f_dil: Any = 0.0,
                        fuel: str = "gasoline") -> np.ndarray:
    """Laminar burning velocity [m/s] by Metghalchi & Keck (1982) with Rhodes & Keck (1985)
    dilution: :func:`cyclesim.combustion.laminar_flame.metghalchi_keck` for a fuel by name
    (``gasoline`` (indolene), ``isooctane``, ``methanol``, ``propane``); ``phi`` [-], ``T_u`` [K],
    ``p`` [Pa], ``f_dil`` the burned-gas mass fraction of the charge [-]."""
    try:
        c = lf.MK_CONSTANTS[MK_FUELS[fuel]]
    except KeyError:
        raise ValueError(f"no flame-speed data for fuel {fuel!r}; known: {', '.join(MK_FUELS)}") from None
    return metghalchi_keck(np.asarray(phi, dtype=float), np.asarray(T_u, dtype=float), np.asarray(p, dtype=float),
                           np.asarray(f_dil, dtype=float), c[0], c[1], c[2])


def mk_flame_speed(phi, T_u, p, f_dil, phi_m, b_m, b_phi):
    """:func:`laminar_flame_speed` in kernel form [m/s], the fuel's coefficients ``phi_m``,
    ``b_m``, ``b_phi`` [-, cm/s, cm/s] given (:func:`cyclesim.combustion.laminar_flame.metghalchi_keck`)."""
    return metghalchi_keck(phi, T_u, p, f_dil, phi_m, 1e-2 * b_m, 1e-2 * b_phi)


def isentropic_compression(gas: Any, T0: Any, p0: Any, v_ratio: Any,
                           iterations: int = 4) -> tuple[np.ndarray, np.ndarray]:
    """Fresh-charge state after isentropic compression by a volume ratio.

    Parameters
    ----------
    gas : cyclesim.solve.gas_tables.GasTables
        Property tables (``gas.unburned(T) -> (u, cv, R)``), arrays (B,).
    T0, p0 : ndarray (B,)
        Temperature [K] and pressure [Pa] at the start.
    v_ratio : ndarray (B,)
        Volume ratio V0 / V [-].
    iterations : int
        Fixed-point passes.

    Returns
    -------
    (T, p) : tuple of ndarray (B,)
        Temperature [K] and pressure [Pa] after compression.

    Notes
    -----
    ``integral of cv dT/T = R ln(V0/V)`` with cv at the logarithmic mean
    temperature ``(T - T0)/ln(T/T0)`` (exact for cv linear in T), solved by fixed-point iteration from ``cv/R = 2.5``;
    ``p = p0 (V0/V)(T/T0)``.
    """
    return compression_state(gas, np.asarray(T0, dtype=float), np.asarray(p0, dtype=float),
                             np.log(np.asarray(v_ratio, dtype=float)), iterations)


def compression_state(gas, T0, p0, lnv, iterations):
    """:func:`isentropic_compression` from ``lnv = ln(V0 / V)`` in kernel form (arrays or floats;
    ``gas`` as :func:`cyclesim.kernel_ops.fresh_charge` takes it): (T [K], p [Pa])."""
    T = T0 * np.exp(lnv / 2.5)
    for _ in range(iterations):
        _, cv, R = fresh_charge(gas, log_mean_of(T0, T))
        T = T0 * np.exp(R / cv * lnv)
    return T, p0 * np.exp(lnv) * T / T0


def flame_length(s_l, T, p, visc, visc_exp):
    """Laminar scale G [s/m]: ``T^visc_exp / p / S_L`` (nu/S_L up to a constant) where ``visc`` is
    nonzero, else ``1 / S_L``; S_L floored at 1e-4 m/s (kernel form)."""
    s_l = np.maximum(s_l, 1e-4)
    return where(visc != 0.0, T ** visc_exp / p / s_l, 1.0 / s_l)


def flame_angles(T_s, p_s, T_c, p_c, f, phi, phi_m, b_m, b_phi, visc, visc_exp, G_ref,
                 G_ref_dur, delay_ref, dur_ref, kd, sd, kb, sb, speed_ratio):
    """(S_L at spark [m/s], development angle [deg], Wiebe duration [deg]) from the charge at spark
    (T_s, p_s) and at TDC (T_c, p_c) and its dilution f (kernel form; see :class:`WiebeFlame`)."""
    s_l = mk_flame_speed(phi, T_s, p_s, f, phi_m, b_m, b_phi)
    g = flame_length(s_l, T_s, p_s, visc, visc_exp) / G_ref
    g_c = flame_length(mk_flame_speed(phi, T_c, p_c, f, phi_m, b_m, b_phi),
                       T_c, p_c, visc, visc_exp) / G_ref_dur
    return s_l, delay_ref * g ** kd * speed_ratio ** sd, dur_ref * g_c ** kb * speed_ratio ** sb


def wiebe_flame_rate(theta, y_b, x_b, p_ivc, T_ivc, V_ivc, gas, spark, delay_ref, dur_ref, a, m, eff, kd, sd,
                     kb, sb, visc, phi, V_spark, speed_ratio, G_ref, phi_m, b_m, b_phi,
                     visc_exp, V_tdc, G_ref_dur):
    """dx_b/dtheta [1/deg] of the flame-speed scaled Wiebe burn: the kernel of :class:`WiebeFlame`.

    The charge at spark and at TDC is isentropic from the IVC state (:func:`compression_state`),
    its dilution ``f`` from the single-zone state; the development angle and duration scale with
    the laminar scale there (:func:`flame_length`) and with the piston speed; zero before the
    development angle has passed and from :data:`CYCLE_END_DEG`."""
    T_s, p_s = compression_state(gas, T_ivc, p_ivc, np.log(V_ivc / V_spark), 4)
    T_c, p_c = compression_state(gas, T_ivc, p_ivc, np.log(V_ivc / V_tdc), 4)
    f = 1.0 - (1.0 - y_b) / np.maximum(1.0 - eff * x_b, 1e-9)
    f = np.minimum(np.maximum(f, 0.0), 1.0)
    _, delay, dur = flame_angles(T_s, p_s, T_c, p_c, f, phi, phi_m, b_m, b_phi, visc,
                                 visc_exp, G_ref, G_ref_dur, delay_ref, dur_ref, kd, sd, kb, sb, speed_ratio)
    u = (theta - spark - delay) / dur
    on = (u > 0.0) & (theta < CYCLE_END_DEG)
    up = where(on, u, 0.0)
    um = up ** m
    r = a * (m + 1.0) / dur * um * np.exp(-a * um * up)
    return where(on & np.isfinite(r), r, 0.0)


def _arr(value: Any, B: int) -> np.ndarray:
    return np.broadcast_to(np.asarray(value, dtype=float), (B,)).copy()


class WiebeFlame(BurnRate):
    """Wiebe burn with development angle and duration scaled by flame speed and piston speed.

    Parameters
    ----------
    values : mapping
        See ``params``: spark advance, reference development angle and
        duration, Wiebe ``a`` and ``m``, combustion efficiency, the reference
        state (mean piston speed, pressure and unburned temperature at
        spark, lambda, burned-gas fraction), the four exponents, the
        viscosity switch and the fuel's flame-speed data.
    ctx : SetupContext
        Batch set-up context (uses ``gas``, ``geometry``, ``speed_rpm``,
        ``events``).

    Notes
    -----
    *Scaling law.*  With ``G = nu / S_L`` (a laminar flame length scale;
    ``nu`` the kinematic viscosity, ~ T^1.7 / p from mu ~ T^0.7) and ``Sp`` the
    mean piston speed,

        theta_d  = theta_d,ref  (G_s/G_s,ref)^k_d (Sp/Sp_ref)^s_d
        dtheta_b = dtheta_b,ref (G_c/G_c,ref)^k_b (Sp/Sp_ref)^s_b

    where ``theta_d`` is spark to start of the Wiebe burn and ``dtheta_b``
    the Wiebe duration [deg]; ``G_s`` is evaluated at the unburned charge at
    spark, where the flame kernel develops, and ``G_c`` at the unburned charge
    compressed to TDC, about where the rapid burn happens.  The rapid burn's
    conditions do not depend on when the spark came: scaled at the spark state
    instead, an earlier spark (lower pressure) would lengthen the whole burn and
    hold CA50 back, and MBT would sit at a CA50 far after the 8-10 deg ATDC found
    at every load (Heywood 1988 sec. 9.2.2, common practice).  Defaults k_d = 2/3, k_b = 1/3,
    s_d = s_b = 1/3 follow the flame-development and rapid-burning angle
    correlations of Hires, Tabaczynski & Novak (1978), as discussed by
    Heywood (1988) section 9.3 (exponents from memory): a burn time
    ~ 1/u' ~ 1/Sp alone would leave the crank-angle duration independent of
    speed; the measured angles increase weakly with speed, here as Sp^(1/3).
    With ``viscosity_scaling`` false, ``G = 1/S_L``.

    *Spark and TDC states.*  The unburned charge at spark (and at TDC) is
    estimated by isentropic compression of the IVC state (``p_ivc``, ``T_ivc``,
    ``V_ivc``) to the volume at spark (at TDC) with the fresh-charge properties
    (nothing has burned yet at spark; at TDC it is the charge ahead of the flame
    as if unburned).  This neglects heat loss and blowby during compression (a few
    kelvin at the demo point) but needs no extra state and is a pure function
    of the cycle's IVC state, so the burn law of each cycle is fixed at IVC
    and is the same whether a case runs alone or in a batch.  The dilution
    ``f`` (residual plus EGR) is recovered exactly from the single-zone
    state, ``1 - y_b = (1 - f)(1 - eta x_b)`` in the closed cycle.

    *Why frozen at spark.*  The Wiebe shape already contains the in-cycle
    change of flame speed and flame area of the engine it was fitted to;
    rescaling it along the burn by the local flame speed would count that
    change twice and would no longer reproduce the fitted Wiebe burn at the
    reference point.  So, as in Wiebe-duration correlations, the angles are
    scaled once per cycle.  At the reference state the law is exactly the
    plain ``wiebe`` law with ``ignition_delay_deg = ref_ignition_delay_deg``
    and ``duration_deg = ref_duration_deg``.

    *Defaults.*  The reference state is that of the built-in demo (3000 rpm,
    stroke 81.5 mm: Sp = 8.15 m/s; lambda 1; residual 4.9 %; isentropic
    spark state at 24 deg BTDC 11.26 bar, 643.4 K; isentropic TDC state 19.83 bar,
    732.6 K, as the law itself reports them at the demo point), with the demo's
    burn (delay 9 deg, duration 48 deg, a = 5, m = 2).

    Burning starts (for the solver's ``burning`` flag) at the spark; the rate
    is zero until the development angle has passed.  The law has no closed
    form on a crank grid (it depends on the IVC state), so
    :meth:`fraction` returns None.
    """

    @classmethod
    def shortest_feature_deg_for(cls, params):
        """Half the reference duration [deg]: the scaled duration may shrink that far."""
        return 0.5 * float(params["ref_duration_deg"])

    name = "wiebe_flame"
    kernel = wiebe_flame_rate
    spark_param = "spark_advance_deg"
    summary = ("superseded by entrainment: Wiebe burn with development angle and duration scaled by"
               " the Metghalchi-Keck flame speed at spark and the mean piston speed")
    params = (
        P_SPARK,
        Param("ref_ignition_delay_deg", "deg", 9.0,
              "spark to start of burning at the reference state", min=0.0, max=60.0),
        Param("ref_duration_deg", "deg", 48.0, "Wiebe burn duration at the reference state",
              min=0.0, max=360.0, min_exclusive=True),
        P_A,
        P_M,
        P_EFF,
        Param("ref_mean_piston_speed_m_per_s", "m/s", 8.15, "mean piston speed of the reference state",
              min=0.0, max=40.0, min_exclusive=True),
        Param("ref_pressure_bar", "bar", 11.26, "pressure of the unburned charge at spark, reference state",
              min=0.0, max=300.0, min_exclusive=True),
        Param("ref_unburned_temperature_K", "K", 643.4,
              "temperature of the unburned charge at spark, reference state",
              min=150.0, max=1500.0),
        Param("ref_tdc_pressure_bar", "bar", 19.83,
              "pressure of the unburned charge compressed to TDC, reference state", min=0.0, max=600.0,
              min_exclusive=True),
        Param("ref_tdc_unburned_temperature_K", "K", 732.6,
              "temperature of the unburned charge compressed to TDC, reference state", min=150.0, max=2000.0),
        Param("ref_lambda", "-", 1.0, "air-fuel equivalence ratio of the reference state",
              min=0.3, max=3.0),
        Param("ref_burned_fraction", "-", 0.049,
              "burned-gas (residual plus EGR) mass fraction of the reference state",
              min=0.0, max=0.45),
        Param("delay_flame_exponent", "-", 2.0 / 3.0,
              "exponent k_d on the laminar length scale nu/S_L for the development angle",
              min=-3.0, max=3.0),
        Param("delay_speed_exponent", "-", 1.0 / 3.0,
              "exponent s_d on the mean piston speed for the development angle", min=-3.0, max=3.0),
        Param("duration_flame_exponent", "-", 1.0 / 3.0,
              "exponent k_b on the laminar length scale nu/S_L for the burn duration",
              min=-3.0, max=3.0),
        Param("duration_speed_exponent", "-", 1.0 / 3.0,
              "exponent s_b on the mean piston speed for the burn duration", min=-3.0, max=3.0),
        Param("viscosity_scaling", "-", True,
              "scale with nu/S_L (true) or with 1/S_L alone (false)", kind="bool", sweepable=False),
        Param("fuel_flame_data", "-", lf.AUTO,
              "Metghalchi-Keck coefficients to use; 'auto': the config's fuel where they cover it, else"
              " gasoline's with a warning",
              kind="choice", choices=(lf.AUTO,) + tuple(MK_FUELS), sweepable=False),
    )
    references = (
        "Metghalchi, M., Keck, J. C. (1982). Burning velocities of mixtures of air with "
        "methanol, isooctane, and indolene at high pressure and temperature. Combustion and "
        "Flame 48, 191-210 (coefficients from memory, as in Heywood 1988, table 9.3).",
        "Hires, S. D., Tabaczynski, R. J., Novak, J. M. (1978). The prediction of ignition "
        "delay and combustion intervals for a homogeneous charge, spark ignition engine. "
        "SAE 780232 (exponents from memory).",
        "Heywood, J. B. (1988). Internal Combustion Engine Fundamentals, McGraw-Hill, "
        "ch. 9 (burn angles, Wiebe function).",
        "Wiebe, I. I. (1970). Brennverlauf und Kreisprozess von Verbrennungsmotoren. VEB "
        "Verlag Technik, Berlin (bibliographic details from memory).",
    )

    def __init__(self, values: Mapping[str, Any], ctx: SetupContext) -> None:
        super().__init__(values, ctx)
        B = self.B
        p = self.p
        fuel = getattr(ctx.gas, "fuel", None)
        self.fuel, self.flame_fuel_note = lf.flame_fuel(str(p.fuel_flame_data), getattr(fuel, "name", None),
                                                        MK_FUELS)
        self.spark = -_arr(p.spark_advance_deg, B)
        self.delay_ref = _arr(p.ref_ignition_delay_deg, B)
        self.dur_ref = _arr(p.ref_duration_deg, B)
        self.a = _arr(p.a, B)
        self.m = _arr(p.m, B)
        self.eff = _arr(p.combustion_efficiency, B)
        self.kd = _arr(p.delay_flame_exponent, B)
        self.sd = _arr(p.delay_speed_exponent, B)
        self.kb = _arr(p.duration_flame_exponent, B)
        self.sb = _arr(p.duration_speed_exponent, B)
        self.visc = bool(p.viscosity_scaling)
        self.phi = _arr(ctx.gas.phi, B)
        self.V_spark = ctx.geometry.volume_at(self.spark)
        self.V_tdc = ctx.geometry.volume_at(np.zeros(B))
        Sp = ctx.geometry.mean_piston_speed(ctx.speed_rpm) * np.ones(B)
        self.speed_ratio = Sp / _arr(p.ref_mean_piston_speed_m_per_s, B)
        p_ref = _arr(p.ref_pressure_bar, B) * 1e5
        T_ref = _arr(p.ref_unburned_temperature_K, B)
        phi_ref, f_ref = 1.0 / _arr(p.ref_lambda, B), _arr(p.ref_burned_fraction, B)
        s_ref = laminar_flame_speed(phi_ref, T_ref, p_ref, f_ref, self.fuel)
        self.G_ref = self._length(s_ref, T_ref, p_ref)
        p_ref_c = _arr(p.ref_tdc_pressure_bar, B) * 1e5
        T_ref_c = _arr(p.ref_tdc_unburned_temperature_K, B)
        self.G_ref_dur = self._length(laminar_flame_speed(phi_ref, T_ref_c, p_ref_c, f_ref, self.fuel),
                                      T_ref_c, p_ref_c)

    # -- the law -----------------------------------------------------------
    def _length(self, s_l: np.ndarray, T: np.ndarray, p: np.ndarray) -> np.ndarray:
        """Laminar scale G: nu/S_L up to a constant factor, or 1/S_L [s/m] (:func:`flame_length`)."""
        return flame_length(s_l, T, p, 1.0 if self.visc else 0.0, 1.0 + VISCOSITY_T_EXPONENT)

    def spark_state(self, p_ivc, T_ivc, V_ivc) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Unburned charge at spark and at TDC (T_s, p_s, T_c, p_c [K, Pa]) (B,), isentropic from IVC."""
        T_s, p_s = isentropic_compression(self.ctx.gas, T_ivc, p_ivc, V_ivc / self.V_spark)
        T_c, p_c = isentropic_compression(self.ctx.gas, T_ivc, p_ivc, V_ivc / self.V_tdc)
        return T_s, p_s, T_c, p_c

    def angles(self, T_s, p_s, f, T_c, p_c) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(S_L at spark [m/s], development angle [deg], Wiebe duration [deg]) (B,), from the
        charge at spark (T_s, p_s) and at TDC (T_c, p_c) and its dilution f (:func:`flame_angles`)."""
        k = self.pack()
        return flame_angles(T_s, p_s, T_c, p_c, f, *(k[n] for n in (
            "phi", "phi_m", "b_m", "b_phi", "visc", "visc_exp", "G_ref", "G_ref_dur",
            "delay_ref", "dur_ref", "kd", "sd", "kb", "sb", "speed_ratio")))

    # -- role interface ------------------------------------------------------
    def start_deg(self) -> np.ndarray:
        """Start of combustion for the solver [deg] (B,): the spark (the rate is zero before the delay ends)."""
        return self.spark.copy()

    def spark_deg(self) -> np.ndarray:
        """Spark timing as a crank angle [deg] (negative = before TDC) (B,)."""
        return self.spark.copy()

    def pack(self) -> dict:
        """The kernel's parameters (:func:`wiebe_flame_rate`) by name."""
        phi_m, b_m, b_phi = lf.MK_CONSTANTS[MK_FUELS[self.fuel]] * np.array([1.0, 100.0, 100.0])
        return {"spark": self.spark, "delay_ref": self.delay_ref, "dur_ref": self.dur_ref, "a": self.a,
                "m": self.m, "eff": self.eff, "kd": self.kd, "sd": self.sd, "kb": self.kb, "sb": self.sb,
                "visc": 1.0 if self.visc else 0.0, "phi": self.phi, "V_spark": self.V_spark,
                "speed_ratio": self.speed_ratio, "G_ref": self.G_ref, "phi_m": phi_m, "b_m": b_m,
                "b_phi": b_phi, "visc_exp": 1.0 + VISCOSITY_T_EXPONENT, "V_tdc": self.V_tdc,
                "G_ref_dur": self.G_ref_dur}

    def combustion_efficiency(self) -> np.ndarray:
        """Fraction of the charge's fuel energy that is released (B,) [-]."""
        return self.eff.copy()

    # -- end-of-run figures ----------------------------------------------------
    def _from_trace(self, trace: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
        th = np.asarray(trace["crank_deg"], float)
        p = np.asarray(trace["pressure_bar"], float) * 1e5
        th = np.broadcast_to(th, p.shape)
        T = np.asarray(trace["temperature_K"], float)
        yb = np.asarray(trace["burned_gas_fraction"], float)
        xb = np.asarray(trace["mfb"], float)
        ivc = _arr(self.ctx.events.ivc, self.B)
        evo = _arr(self.ctx.events.evo, self.B)
        at = lambda a, x: np.array([np.interp(x[b], th[b], a[b]) for b in range(self.B)])  # noqa: E731
        p_ivc, T_ivc, f = at(p, ivc), at(T, ivc), at(yb, ivc)
        V_ivc = self.ctx.geometry.volume_at(ivc)
        T_s, p_s, T_c, p_c = self.spark_state(p_ivc, T_ivc, V_ivc)
        s_l, delay, dur = self.angles(T_s, p_s, f, T_c, p_c)
        return {"T_s": T_s, "p_s": p_s, "T_c": T_c, "p_c": p_c, "f": f, "s_l": s_l, "delay": delay, "dur": dur,
                "x_evo": at(xb, evo), "evo": evo}

    def figures(self, trace: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
        """Flame speed and charge state at spark, the charge compressed to TDC, development angle and
        Wiebe duration."""
        d = self._from_trace(trace)
        return {
            "laminar_flame_speed_at_spark_m_per_s": d["s_l"],
            "unburned_temperature_at_spark_K": d["T_s"],
            "unburned_pressure_at_spark_bar": d["p_s"] / 1e5,
            "unburned_temperature_at_tdc_K": d["T_c"],
            "unburned_pressure_at_tdc_bar": d["p_c"] / 1e5,
            "flame_development_angle_deg": d["delay"],
            "flame_burn_duration_deg": d["dur"],
        }

    def warnings(self, trace: Mapping[str, np.ndarray]) -> list[list[str]]:
        """Flame-speed data of another fuel than the charge's; correlation outside its measured range;
        incomplete burn at EVO."""
        out: list[list[str]] = [[] if self.flame_fuel_note is None else [self.flame_fuel_note]
                                for _ in range(self.B)]
        d = self._from_trace(trace)
        r = MK_RANGE
        checks = (
            ("pressure at spark", d["p_s"] / ATM_PA, r["p_atm"], "atm"),
            ("unburned temperature at spark", d["T_s"], r["T_K"], "K"),
            ("equivalence ratio", self.phi, r["phi"], ""),
            ("burned-gas fraction", d["f"], r["f"], ""),
        )
        for what, val, (lo, hi), unit in checks:
            for b in np.flatnonzero((val < lo) | (val > hi)):
                out[b].append(
                    f"burn law: {what} {val[b]:.3g}{' ' + unit if unit else ''} is outside the"
                    f" {lo:g}-{hi:g}{' ' + unit if unit else ''} measured by Metghalchi & Keck"
                    " (range from memory)"
                )
        for b in np.flatnonzero(d["s_l"] <= 0.0):
            out[b].append("burn law: the flame-speed correlation gives no positive speed for this mixture")
        for b in np.flatnonzero(d["x_evo"] < 0.99):
            out[b].append(
                f"burn law: only {100 * d['x_evo'][b]:.1f} % burned at exhaust valve opening"
                f" ({d['evo'][b]:g} deg); the rest of the charge leaves unburned"
            )
        return out


SUBMODELS = [WiebeFlame]
