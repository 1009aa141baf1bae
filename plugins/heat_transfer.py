"""Wall heat-transfer correlations: none, Woschni, Hohenberg, Annand.

Each submodel returns a spatially averaged coefficient h [W/(m^2 K)]; the
role base class turns it into a heat flow with the wall areas and wall
temperatures of the current state.
"""

from __future__ import annotations

import numpy as np

from cyclesim.kernel_ops import fresh_charge, where, where_lazy
from cyclesim.params import Param, StateVar
from cyclesim.roles import GasState, WallHeatTransfer

SIGMA_SB = 5.670374419e-8
"""Stefan-Boltzmann constant [W/(m^2 K^4)] (CODATA 2018, exact in SI 2019)."""

WOSCHNI_FORMS = {
    "original": (129.8, 1e-5, -0.53),    # Woschni 1967 (SAE 670931): p in bar
    "heywood": (3.26, 1e-3, -0.55),      # Heywood 1988, eq. 12.19: p in kPa
}
"""Published forms of Woschni's coefficient: (constant, bar or kPa per Pa, temperature exponent)
of ``h = C B^-0.2 p^0.8 T^e w^0.8`` [W/(m^2 K)] with B [m], T [K], w [m/s]."""


WOSCHNI_C1 = {"open": (6.18, 0.417), "closed": (2.28, 0.308)}
"""Woschni's (1967) C1 = c + c_s v_s / Sp by phase: gas exchange (``open``) and the closed part
of the cycle (``closed``); (c, c_s) [-], the swirl terms c_s from memory."""

WOSCHNI_C2 = 3.24e-3
"""Woschni's (1967) combustion-term constant C2 during combustion and expansion [m/(s K)]."""


def woschni_combustion_velocity(c2, Vd, T_r, p_r, V_r, dp):
    """The combustion term ``C2 Vd T_r / (p_r V_r) dp`` of Woschni's gas velocity [m/s], which is
    ``w = C1 Sp`` plus this term (Woschni 1967; Heywood 1988, eq. 12.19).

    Parameters
    ----------
    c2 : float or ndarray
        C2 (:data:`WOSCHNI_C2` while burning) [m/(s K)].
    Vd : float or ndarray
        Displaced volume [m^3].
    T_r, p_r, V_r : float or ndarray
        Reference state (intake valve closing) [K], [Pa], [m^3].
    dp : float or ndarray
        Pressure rise over the motored pressure, clamped at 0 by the caller [Pa].
    """
    return c2 * Vd * T_r / (p_r * V_r) * dp


def woschni_prefactor(bore_m, multiplier=1.0, form: str = "original"):
    """The factor ``multiplier C B^-0.2 (p unit / Pa)^0.8`` of Woschni's coefficient [SI].

    Parameters
    ----------
    bore_m : float or ndarray
        Bore [m].
    multiplier : float or ndarray
        Calibration factor [-].
    form : str
        ``original`` or ``heywood`` (:data:`WOSCHNI_FORMS`).
    """
    c, unit, _ = WOSCHNI_FORMS[form]
    return multiplier * (c * bore_m ** -0.2) * unit ** 0.8


def woschni_coefficient(k, p, w, T, form: str = "original"):
    """Woschni's coefficient ``k (p w)^0.8 T^e`` [W/(m^2 K)], the one implementation.

    Parameters
    ----------
    k : float or ndarray
        :func:`woschni_prefactor` [SI].
    p : float or ndarray
        Gas pressure [Pa].
    w : float or ndarray
        Characteristic gas velocity [m/s].
    T : float or ndarray
        Gas temperature [K].
    form : str
        ``original`` (T^-0.53) or ``heywood`` (T^-0.55).
    """
    return woschni_h(k, p, w, T, WOSCHNI_FORMS[form][2])


def woschni_h(k, p, w, T, t_exp):
    """:func:`woschni_coefficient` with the form's temperature exponent ``t_exp`` given (a kernel helper)."""
    return k * (p * w) ** 0.8 * T ** t_exp


def woschni_motored_pressure(p_ivc, V_ivc, V, T_mot, T_ivc):
    """Pressure of the charge motored from IVC, ``p_ivc (V_ivc / V) (T_mot / T_ivc)`` [Pa]."""
    return p_ivc * (V_ivc / V) * (T_mot / T_ivc)


def woschni_firing_velocity(c2, Vd, p, p_ivc, V_ivc, V, T_mot, T_ivc):
    """Woschni's combustion term [m/s] where the cylinder is closed and burning: ``C2 Vd T_r /
    (p_r V_r) (p - p_mot)`` with the rise over the motored pressure clamped at 0, and 0 where the
    IVC state is not yet known (the step that crosses intake closing gives a non-finite term)."""
    dp = np.maximum(p - woschni_motored_pressure(p_ivc, V_ivc, V, T_mot, T_ivc), 0.0)
    comb = woschni_combustion_velocity(c2, Vd, T_ivc, p_ivc, V_ivc, dp)
    return where(np.isfinite(comb), comb, 0.0)


def woschni_kernel(p, T, V, Sp, closed, burning, p_ivc, T_ivc, V_ivc, T_mot, k, c1_closed, c1_open, c2, Vd,
                   t_exp):
    """Woschni's coefficient [W/(m^2 K)] in the cycle: the kernel of :class:`Woschni` (arrays on the
    Python path, floats in the compiled loop).  ``T_mot`` is the model's integrated motored
    temperature [K]; the combustion term (:func:`woschni_firing_velocity`) counts only while the
    cylinder is closed and burning, and is computed only there (:func:`where_lazy`)."""
    w = where(closed, c1_closed, c1_open) * Sp
    w = w + where_lazy(closed & burning, woschni_firing_velocity, (c2, Vd, p, p_ivc, V_ivc, V, T_mot, T_ivc), 0.0)
    return woschni_h(k, p, w, T, t_exp)


def woschni_compression_rate(gas, T_mot, dV, omega_deg, V):
    """``-(R / cv) T_mot (dV/dt) / V`` [K/s] with R and cv of the fresh charge at ``T_mot``."""
    _, cv, R = fresh_charge(gas, T_mot)
    return -(R / cv) * T_mot * (dV * omega_deg) / V


def woschni_motored_rate(T_mot, gas, dV, omega_deg, V, closed):
    """dT_mot/dt [K/s] of the charge motored from IVC (:func:`woschni_compression_rate`), zero
    outside the closed part (and computed only inside it): the state kernel of :class:`Woschni`
    (isentropic compression of an ideal gas, Heywood 1988, sec. 3.4)."""
    return where_lazy(closed, woschni_compression_rate, (gas, T_mot, dV, omega_deg, V), 0.0)


def hohenberg_kernel(V, p, T, Sp, multiplier):
    """Hohenberg's coefficient ``130 V^-0.06 p[bar]^0.8 T^-0.4 (Sp + 1.4)^0.8`` [W/(m^2 K)] times
    ``multiplier``: the kernel of :class:`Hohenberg` (V [m^3], p [Pa], T [K], Sp [m/s])."""
    return multiplier * 130.0 * V ** -0.06 * (p * 1e-5) ** 0.8 * T ** -0.4 * (Sp + 1.4) ** 0.8


_MULTIPLIER = Param(
    "multiplier", "-", 1.0, "factor on the heat-transfer coefficient (calibration)",
    min=0.0, max=10.0,
)


class NoHeatTransfer(WallHeatTransfer):
    """Adiabatic walls: no heat transfer."""

    name = "none"
    summary = "adiabatic walls (no heat transfer)"
    compiled_form = "none"

    def coefficient(self, s: GasState) -> np.ndarray:
        return np.zeros(self.B)

    def heat_flow(self, s: GasState) -> np.ndarray:
        return np.zeros(self.B)


class Woschni(WallHeatTransfer):
    """Woschni (1967) correlation with phase-dependent gas velocity.

    ``h = 129.8 B^-0.2 p^0.8 T^-0.53 w^0.8`` with B the bore [m], p the
    cylinder pressure [bar], T the gas temperature [K], and the characteristic
    gas velocity [m/s]

    ``w = C1 Sp + C2 (Vd T_r) / (p_r V_r) (p - p_mot)``.

    ========================== ============================ =================
    phase                      C1 [-]                       C2 [m/(s K)]
    ========================== ============================ =================
    gas exchange (not closed)  6.18 + 0.417 v_s / Sp        0
    compression (no burning)   2.28 + 0.308 v_s / Sp        0
    combustion and expansion   2.28 + 0.308 v_s / Sp        3.24e-3
    ========================== ============================ =================

    Notes
    -----
    Form: the original paper's (Woschni 1967), coefficient 129.8 with p in
    bar and temperature exponent -0.53, rather than Heywood's (1988, eq.
    12.19) restatement 3.26 p[kPa]^0.8 T^-0.55; the two differ by the factor
    T^-0.02, i.e. Heywood's gives 13-15 % lower values at 1000-2500 K.

    Reference state ``p_r, V_r, T_r`` = the state at intake valve closing
    (``s.p_ivc``, ``s.V_ivc``, ``s.T_ivc``).  The motored pressure is that of
    the trapped charge compressed and expanded adiabatically from IVC,
    ``p_mot = p_ivc (V_ivc / V) (T_mot / T_ivc)``, where ``T_mot`` is an
    integrated state of this submodel (``heat_transfer.T_mot``):

    ``dT_mot/dt = -(R / cv) T_mot (dV/dt) / V``

    with R and cv of the unburned mixture at ``T_mot``
    (``ctx.gas.unburned(T) -> (u, cv, R)``); its derivative is zero outside
    the closed part of the cycle.  The state is declared with
    ``initial="T_ivc"`` and ``reset_at_ivc=True``: the solver sets it to the
    cylinder temperature at each intake valve closing.  A negative
    ``p - p_mot`` (heavy heat loss late in the expansion) is clamped to 0
    so ``w`` stays positive.

    Swirl (optional): ``v_s = pi B R_s N / 60`` is the swirl (paddle-wheel)
    velocity for a swirl ratio ``R_s``, so ``v_s / Sp = pi B R_s / (2 S)``;
    swirl constants 0.417 and 0.308 are from memory (Woschni 1967).

    Validity: fitted to motored and fired engines with bores of about
    0.1-0.3 m; for small high-speed SI engines it is commonly calibrated
    with ``multiplier`` (common practice).
    """

    name = "woschni"
    summary = "Woschni 1967 (original form, T^-0.53), phase-dependent C1/C2, motored pressure integrated"
    kernel = woschni_kernel
    state_kernel = woschni_motored_rate
    params = (
        _MULTIPLIER,
        Param("swirl_ratio", "-", 0.0, "swirl ratio (swirl speed / engine speed)", min=0.0, max=10.0),
        Param(
            "c2_m_per_sK", "m/(s K)", WOSCHNI_C2,
            "combustion-term constant C2 during combustion and expansion", min=0.0, max=0.05,
        ),
    )
    references = (
        "Woschni G. (1967) A universally applicable equation for the instantaneous heat "
        "transfer coefficient in the internal combustion engine. SAE 670931. doi:10.4271/670931",
        "Heywood J.B. (1988) Internal Combustion Engine Fundamentals, McGraw-Hill, sec. 12.4.",
    )

    STATE = "T_mot"

    def __init__(self, values, ctx) -> None:
        super().__init__(values, ctx)
        g = ctx.geometry
        self._Vd = g.Vd
        vs_over_sp = np.pi * g.bore_m * self.p.swirl_ratio / (2.0 * g.stroke_m)
        (o, o_s), (c, c_s) = WOSCHNI_C1["open"], WOSCHNI_C1["closed"]
        self._c1_open = o + o_s * vs_over_sp
        self._c1_closed = c + c_s * vs_over_sp
        self._k = woschni_prefactor(g.bore_m, self.p.multiplier)

    def pack(self) -> dict:
        """The kernel's parameters (:func:`woschni_kernel`) by name."""
        return {"k": self._k, "c1_closed": self._c1_closed, "c1_open": self._c1_open,
                "c2": self.p.c2_m_per_sK, "Vd": self._Vd, "t_exp": WOSCHNI_FORMS["original"][2]}

    C1 = WOSCHNI_C1
    C2 = WOSCHNI_C2
    combustion_velocity = staticmethod(woschni_combustion_velocity)

    @staticmethod
    def correlation(bore_m, p, T, w, multiplier=1.0, form: str = "original"):
        """Woschni's coefficient [W/(m^2 K)] from bore [m], pressure [Pa], temperature [K] and gas
        velocity [m/s] (:func:`woschni_coefficient`), for users outside the cycle (the trace analyser)."""
        if form not in WOSCHNI_FORMS:
            raise ValueError(f"woschni form {form!r}: unknown; choose {' or '.join(WOSCHNI_FORMS)}")
        return woschni_coefficient(woschni_prefactor(bore_m, multiplier, form), p, w, T, form)

    def states(self):
        return (StateVar(self.STATE, "K", initial="T_ivc", reset_at_ivc=True),)

    def motored_pressure(self, s: GasState) -> np.ndarray:
        """Pressure of the same charge motored from IVC [Pa] (B,)."""
        T_mot = s.sub[f"{self.role}.{self.STATE}"]
        return woschni_motored_pressure(s.p_ivc, s.V_ivc, s.V, T_mot, s.T_ivc)


class Hohenberg(WallHeatTransfer):
    """Hohenberg (1979) correlation.

    ``h = 130 V^-0.06 p^0.8 T^-0.4 (Sp + 1.4)^0.8``, V the cylinder volume
    [m^3], p [bar], T [K], Sp the mean piston speed [m/s].

    Notes
    -----
    Units of the constant 130 (V in m^3, p in bar) are from memory.  Derived
    from direct-injection diesel measurements; widely used for SI engines
    with a calibration ``multiplier`` (common practice).
    """

    name = "hohenberg"
    summary = "Hohenberg 1979: 130 V^-0.06 p[bar]^0.8 T^-0.4 (Sp+1.4)^0.8"
    kernel = hohenberg_kernel
    params = (_MULTIPLIER,)
    references = (
        "Hohenberg G.F. (1979) Advanced approaches for heat transfer calculations. "
        "SAE 790825. doi:10.4271/790825",
    )

    def pack(self) -> dict:
        """The kernel's parameter (:func:`hohenberg_kernel`) by name."""
        return {"multiplier": self.p.multiplier}


def air_viscosity(T):
    """Dynamic viscosity of air by Sutherland's law [Pa s].

    Parameters
    ----------
    T : array_like
        Temperature [K].

    Notes
    -----
    ``mu = 1.458e-6 T^1.5 / (T + 110.4)`` (U.S. Standard Atmosphere 1976,
    constants from memory).  Fitted to air near atmospheric temperatures;
    used for the whole cycle, burned gas included, as an approximation, which
    is the usual level of detail of Annand's correlation (common practice).
    """
    return sutherland_viscosity(np.asarray(T, dtype=float))


def sutherland_viscosity(T):
    """:func:`air_viscosity` in kernel form (arrays or floats) [Pa s]."""
    return 1.458e-6 * T ** 1.5 / (T + 110.4)


def annand_convective(T, rho, cp, Sp, multiplier, a, b, prandtl_number, bore):
    """Annand's convective coefficient ``multiplier a (k / B) Re^b`` [W/(m^2 K)] with
    ``k = mu cp / Pr``, ``Re = rho Sp B / mu`` (kernel form)."""
    mu = sutherland_viscosity(T)
    k = mu * cp / prandtl_number
    Re = rho * Sp * bore / mu
    return multiplier * a * k / bore * Re ** b


def annand_radiation(closed, burning, multiplier, radiation_factor):
    """Annand's radiation constant c [W/(m^2 K^4)]: ``multiplier radiation_factor sigma`` while the
    cylinder is closed and burning, else 0 (kernel form)."""
    return where(closed & burning, multiplier * radiation_factor * SIGMA_SB, 0.0)


def annand_heat_flow(T, rho, cp, Sp, closed, burning, A_head, A_piston, A_liner, T_wall_head, T_wall_piston,
                     T_wall_liner, multiplier, a, b, radiation_factor, prandtl_number, bore):
    """Heat flow to the walls [W] by Annand's correlation, ``sum A (h_c (T - T_w) + c (T^4 - T_w^4))``
    per surface with its own wall temperature: the heat-flow kernel of :class:`Annand`."""
    hc = annand_convective(T, rho, cp, Sp, multiplier, a, b, prandtl_number, bore)
    c = annand_radiation(closed, burning, multiplier, radiation_factor)
    T4 = T ** 4
    q = A_head * (hc * (T - T_wall_head) + c * (T4 - T_wall_head ** 4))
    q = q + A_piston * (hc * (T - T_wall_piston) + c * (T4 - T_wall_piston ** 4))
    return q + A_liner * (hc * (T - T_wall_liner) + c * (T4 - T_wall_liner ** 4))


class Annand(WallHeatTransfer):
    """Annand (1963) correlation with optional radiation.

    ``h = a (k / B) Re^b + c (T^4 - T_w^4) / (T - T_w)``,
    ``Re = rho Sp B / mu``.

    Notes
    -----
    Gas properties: viscosity from Sutherland's law for air
    (:func:`air_viscosity`), conductivity ``k = mu cp / Pr`` with the
    mixture's cp and a constant Prandtl number (0.7 default, air-like gases,
    common practice).

    Defaults (from memory, Annand 1963): ``a`` 0.49 with 0.35 <= a <= 0.8
    increasing with the intensity of charge motion; ``b`` 0.7; radiation
    ``c = 0.075 sigma`` for SI engines (0.576 sigma for diesels), applied only
    while the cylinder is closed and burning.  Radiation is evaluated per
    surface with its own wall temperature in :meth:`heat_flow`;
    :meth:`coefficient` reports the convective part plus the radiative part
    at the area-weighted mean wall temperature.
    """

    name = "annand"
    summary = "Annand 1963: a (k/B) Re^0.7 + radiation during combustion"
    heat_flow_kernel = annand_heat_flow
    params = (
        Param("a", "-", 0.49, "convective constant (0.35-0.8 in the original)", min=0.05, max=2.0),
        Param("b", "-", 0.7, "Reynolds-number exponent", min=0.5, max=0.9),
        Param(
            "radiation_factor", "-", 0.075,
            "radiation constant c as a fraction of the Stefan-Boltzmann constant", min=0.0, max=1.0,
        ),
        Param("prandtl_number", "-", 0.7, "gas Prandtl number for the conductivity", min=0.3, max=1.5),
        _MULTIPLIER,
    )
    references = (
        "Annand W.J.D. (1963) Heat transfer in the cylinders of reciprocating internal "
        "combustion engines. Proc. IMechE 177(36), 973-996 (pages from memory).",
        "U.S. Standard Atmosphere (1976), NOAA/NASA/USAF: Sutherland constants for air viscosity.",
    )

    def __init__(self, values, ctx) -> None:
        super().__init__(values, ctx)
        self._bore = ctx.geometry.bore_m

    def pack(self) -> dict:
        """The heat-flow kernel's parameters (:func:`annand_heat_flow`) by name."""
        p = self.p
        return {"multiplier": p.multiplier, "a": p.a, "b": p.b, "radiation_factor": p.radiation_factor,
                "prandtl_number": p.prandtl_number, "bore": self._bore}

    def convective(self, s: GasState) -> np.ndarray:
        """Convective coefficient a (k/B) Re^b [W/(m^2 K)] (B,)."""
        p = self.p
        return annand_convective(s.T, s.rho, s.cp, s.Sp, p.multiplier, p.a, p.b, p.prandtl_number, self._bore)

    def coefficient(self, s: GasState) -> np.ndarray:
        A = s.A_head + s.A_piston + s.A_liner
        Tw = (s.A_head * s.T_wall_head + s.A_piston * s.T_wall_piston + s.A_liner * s.T_wall_liner) / A
        # (T^4 - Tw^4) / (T - Tw) written without the division
        c = annand_radiation(np.asarray(s.closed), np.asarray(s.burning), self.p.multiplier, self.p.radiation_factor)
        return self.convective(s) + c * (s.T + Tw) * (s.T**2 + Tw**2)


SUBMODELS = [NoHeatTransfer, Woschni, Hohenberg, Annand]
