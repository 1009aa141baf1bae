"""A closed-form first estimate of the cylinder state at the cycle start (-360 deg).

The periodic full cycle starts at gas-exchange TDC with the cylinder full of residual gas.
The plain start takes that gas at the exhaust plenum's pressure and temperature, all burned.
This module estimates it instead from the ideal four-stroke cycle with gas exchange (Heywood
1988, *Internal Combustion Engine Fundamentals*, sec. 5.4 [from memory for the section]),
evaluated with the batch's own gas properties rather than a constant gamma:

1. the residual (clearance volume ``Vc`` at the exhaust pressure ``p_e``, temperature ``T_r``)
   mixes with the fresh charge (intake temperature and pressure ``T_i``, ``p_i``) into the
   trapped charge at IVC at ``p_i``; the energy balance of that open system,
   ``m_1 u_1 = m_r u_r + m_a h_i - p_i (V_ivc - Vc)``, is for a constant-property gas
   Heywood's ``T_1 = (1 - x_r) T_i + x_r T_r [1 - (gamma - 1)/gamma (1 - p_i/p_e)]``
   (derived again here; :func:`mixing_temperature_ideal` is that closed form, the test's
   check of the general balance);
2. adiabatic compression at frozen composition from ``V_ivc`` to ``Vc``;
3. adiabatic burning at constant volume at TDC (absolute energies, so the heat of reaction
   needs no separate term), of the fraction the burn model's ``combustion_efficiency`` sets;
4. adiabatic expansion to ``V_evo``;
5. blowdown: the gas left in the cylinder expands isentropically from the EVO pressure to
   ``p_e``, which gives ``T_r`` (Heywood sec. 5.4 [from memory]); the residual mass is
   ``m_r = p_e Vc / (R T_r)`` plus the overlap backflow, and ``x_r = m_r / m_1``.

Steps 1-5 run once from the plain start's ``T_r`` (:data:`ITERATIONS`), then ``x_r`` is updated
from the final ``T_r``; each is algebra on the gas tables.  The ideal cycle has no wall heat
loss, and its residual comes out 300-700 K too hot on the demo engine (measured); so, given the right-hand side, the expansion and the exhaust stroke (at
``p_e``) lose heat to the walls at the rate the batch's own heat-transfer model gives for the
estimated states, at :data:`HEAT_POINTS` points a stroke.  The ideal cycle also misses the
burned gas pushed into the intake port during the valve overlap, which dominates the residual
when throttled at low speed (a quarter of the trapped mass on the part-load demo at 800 rpm
against a twelfth in the clearance volume); :func:`overlap_backflow` adds it.  ``python
benchmarks/residual_start.py`` prints the errors.  The estimate is a start state, not a
result: the cycles that follow settle it exactly as they settle the plain one.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..loops.layout import CORE_ROWS

ITERATIONS = 1
"""Passes of the residual -> trapped charge -> residual chain before a last update of the
residual fraction from the final residual temperature.  A second pass moves the start
temperature by at most 1.1 % and the residual fraction by at most 0.001 on the demo configs at
800, 3000 and 6000 rpm (measured), and doubles the cost."""

SUBSTEPS = 3
"""Log-volume (or log-pressure) sub-steps of each adiabatic process (gamma varies with T)."""

HEAT_POINTS = 3
"""Wall-heat evaluations over the expansion and over the exhaust stroke."""


@dataclass
class ResidualEstimate:
    """The estimate per case (arrays of shape (B,))."""

    residual_fraction: np.ndarray
    """Residual (burned) mass over trapped mass at IVC [-]."""
    residual_temperature_K: np.ndarray
    """Residual-gas temperature at exhaust TDC [K]."""
    trapped_temperature_K: np.ndarray
    """Trapped-charge temperature at IVC [K]."""
    evo_temperature_K: np.ndarray
    """Gas temperature at EVO [K]."""
    evo_pressure_pa: np.ndarray
    """Cylinder pressure at EVO [Pa]."""
    burned_fraction: np.ndarray
    """Burned mass fraction of the gas after combustion (and so of the residual) [-]."""


def mixing_temperature_ideal(x_r, T_i, T_r, p_i, p_e, gamma):
    """Trapped-charge temperature [K] of the ideal cycle with a constant-property gas.

    ``T_1 = (1 - x_r) T_i + x_r T_r [1 - (gamma - 1)/gamma (1 - p_i/p_e)]``: the energy balance
    ``m_1 c_v T_1 = m_r c_v T_r + m_a c_p T_i - p_i (V_1 - V_c)`` with ``p_i V_1 = m_1 R T_1``
    and ``p_e V_c = m_r R T_r`` (Heywood 1988, sec. 5.4 [from memory]).
    """
    return (1 - x_r) * T_i + x_r * T_r * (1 - (gamma - 1) / gamma * (1 - p_i / p_e))


def _adiabatic_volume(gas, T, m, V0, V1, y, substeps=None):
    """Temperature after an adiabatic reversible volume change V0 -> V1 at frozen burned
    fraction ``y``: d ln T = -(R/c_v) d ln V, in :data:`SUBSTEPS` midpoint steps."""
    n = SUBSTEPS if substeps is None else substeps
    dl = np.log(V1 / V0) / n
    lnV = np.log(V0)
    for _ in range(n):
        rho = m / np.exp(lnV)
        g = gas.mixture(T, rho, y)
        Tm = T * np.exp(-0.5 * g.R / g.cv * dl)
        gm = gas.mixture(Tm, m / np.exp(lnV + 0.5 * dl), y)
        T = T * np.exp(-gm.R / gm.cv * dl)
        lnV = lnV + dl
    return T


def _adiabatic_pressure(gas, T, p0, p1, y):
    """Temperature after an isentropic expansion p0 -> p1 of the burned gas at frozen
    composition: d ln T = (R/c_p) d ln p, in :data:`SUBSTEPS` midpoint steps."""
    dl = np.log(p1 / p0) / SUBSTEPS
    lnp = np.log(p0)
    for _ in range(SUBSTEPS):
        g = gas.mixture(T, np.exp(lnp) / (287.0 * T), y)
        Tm = T * np.exp(0.5 * g.R / g.cp * dl)
        rho_m = np.exp(lnp + 0.5 * dl) / (g.R * Tm)
        gm = gas.mixture(Tm, rho_m, y)
        T = T * np.exp(gm.R / gm.cp * dl)
        lnp = lnp + dl
    return T


def _temperature_at_energy(gas, u_target, T, rho, y, steps=6):
    """T with u(T, rho, y) = ``u_target`` (Newton from ``T``)."""
    for _ in range(steps):
        g = gas.mixture(T, rho, y)
        T = np.clip(T + (u_target - g.u) / g.cv, 200.0, 3900.0)
    return T


def trapped_charge(gas, m_r, u_r, p_i, V1, Vc, h_i, y_egr, T1, x_r, passes=3):
    """Mass [kg], temperature [K] and burned fraction [-] of the charge trapped at IVC.

    The residual (mass ``m_r`` [kg], internal energy ``u_r`` [J/kg]) and fresh charge of
    enthalpy ``h_i`` [J/kg] (EGR mass fraction ``y_egr``) fill ``V1`` [m^3] at the intake
    pressure ``p_i`` [Pa], the piston having swept ``V1 - Vc`` at ``p_i``:
    ``m_1 u_1 = m_r u_r + m_a h_i - p_i (V1 - Vc)`` with ``m_1 = p_i V1 / (R T_1)``; ``T1`` and
    ``x_r`` are the first guesses.  For a constant-property gas this is
    :func:`mixing_temperature_ideal`.
    """
    for _ in range(passes):
        mp = gas.mixture(T1, p_i / (287.0 * T1), np.clip(x_r + (1 - x_r) * y_egr, 0, 1))
        m1 = p_i * V1 / (mp.R * T1)
        m_a = np.maximum(m1 - m_r, 1e-3 * m1)
        y1 = np.clip((m_r + m_a * y_egr) / m1, 0, 1)
        u1 = (m_r * u_r + m_a * h_i - p_i * (V1 - Vc)) / m1
        T1 = _temperature_at_energy(gas, u1, T1, m1 / V1, y1, steps=2)
        x_r = m_r / m1
    return m1, T1, y1


def _wall_heat_per_deg(rhs, batch, theta, m, T, y):
    """Heat from the gas to the walls [J/deg] (B,) at crank angle ``theta`` [deg] for the
    cylinder state (m [kg], T [K], burned fraction y [-]), from the batch's own heat-transfer
    model through the right-hand side ``rhs`` (valve flows off; only its wall-heat row is read)."""
    geo = batch.geometry
    V = geo.volume(theta).reshape(-1) * np.ones(batch.B)
    dV = geo.dV_dtheta(theta).reshape(-1) * np.ones(batch.B)
    areas = tuple(a.reshape(-1) * np.ones(batch.B) for a in geo.areas(theta))
    z = np.zeros((rhs.n, batch.B))
    z[0], z[1], z[2], z[3] = m, T, y * m, 1.0
    from .events import initial_sub as _initial_sub

    _initial_sub(rhs, z)
    with np.errstate(all="ignore"):
        q = rhs(float(theta), z, (V, dV) + areas, False)[CORE_ROWS["Q_w"]]
    return np.where(np.isfinite(q), q, 0.0)


OVERLAP_POINTS = 16
"""Crank-angle points over the valve overlap for the backflow integral."""


def overlap_areas(batch):
    """Crank angles [deg] (B, n) over the valve overlap (IVO to EVC, around gas-exchange TDC)
    and the effective area [m^2] (B, n) of the intake and exhaust openings in series,
    ``A = (A_i^-2 + A_e^-2)^-1/2`` (two restrictions in series at the same flow, common
    practice), from the valve-flow model's effective areas."""
    v = batch.valves
    a = np.asarray(v.ivo_deg, float) * np.ones(batch.B)
    b = np.asarray(v.evc_deg, float) * np.ones(batch.B) - 720.0
    th = a[:, None] + (np.maximum(b - a, 0.0)[:, None]) * np.linspace(0.0, 1.0, OVERLAP_POINTS)[None, :]
    # a batch shares its valve timing (the batch key), so one grid serves every case
    areas = batch.models["valve_flow"].flow_area(th[0])
    Ai = np.asarray(areas["intake"], float)
    Ae = np.asarray(areas["exhaust"], float)
    with np.errstate(divide="ignore"):
        A = np.where((Ai > 0) & (Ae > 0), 1.0 / np.sqrt(1.0 / np.maximum(Ai, 1e-30) ** 2
                                                          + 1.0 / np.maximum(Ae, 1e-30) ** 2), 0.0)
    return th, A


def overlap_backflow(batch, T_r, R, gamma, th=None, A=None):
    """Burned gas [kg] (B,) pushed from the exhaust port through the cylinder into the intake port
    over the valve overlap, where the exhaust pressure exceeds the intake pressure: the
    compressible orifice flow (:func:`cyclesim.cylinder.flow.orifice_outflow`, Heywood 1988 app. C) of
    gas at ``T_r`` [K] (gas constant ``R``, ``gamma``) from ``p_e`` to ``p_i`` through the
    series area of :func:`overlap_areas`, integrated over the overlap's duration.  It returns
    to the cylinder first in the intake stroke, so it adds to the residual.  The cylinder
    pressure lies between the two, so this is an upper bound of the simple kind (Fox, Cheng &
    Heywood 1993, SAE 931025, model the same mechanism with a flow term in (overlap area /
    speed) x sqrt(p_e - p_i) [from memory]).
    """
    from ..cylinder.flow import orifice_outflow

    if th is None:
        th, A = overlap_areas(batch)
    op = batch.operating
    one = np.ones(batch.B)
    p_e = op.exhaust_pressure_bar * 1e5 * one
    p_i = op.intake_pressure_bar * 1e5 * one
    mdot = orifice_outflow(A, p_e[:, None], T_r[:, None], R[:, None], gamma[:, None], p_i[:, None])
    dt = (th[:, -1] - th[:, 0]) / (OVERLAP_POINTS - 1) / (6.0 * op.speed_rpm * one)
    return np.trapezoid(mdot, axis=1) * dt


def estimate(batch, rhs=None) -> ResidualEstimate:
    """The ideal-cycle residual state of every case of a full-cycle ``batch``.

    With ``rhs`` (the batch's right-hand side, :class:`cyclesim.solve.solver._RHS`) the expansion
    and the exhaust stroke lose heat to the walls at the rate the batch's heat-transfer model
    gives for the estimated states (:data:`HEAT_POINTS` evaluations per stroke); without it
    the cycle is adiabatic.
    """
    g = batch.gas
    op = batch.operating
    geo = batch.geometry
    B = batch.B
    one = np.ones(B)
    p_i = op.intake_pressure_bar * 1e5 * one
    p_e = op.exhaust_pressure_bar * 1e5 * one
    T_i = op.intake_temperature_K * one
    y_egr = np.asarray(op.egr_fraction, float) * one
    eta_c = np.asarray(batch.models["burn"].combustion_efficiency(), float) * one
    Vc = geo.Vc * one
    V1 = geo.volume_at(batch.valves.ivc_deg) * one
    evo = np.asarray(batch.valves.evo_deg, float) * one
    V4 = geo.volume_at(evo) * one
    h_i = g.enthalpy_unburned(T_i)
    T_r = op.exhaust_temperature_K * one
    x_r = 0.05 * one
    T1 = T_i.copy()
    th_o, A_o = overlap_areas(batch)
    for _ in range(ITERATIONS):
        rho_r = p_e / (g.mixture(T_r, p_e / (287.0 * T_r), one).R * T_r)
        mp_r = g.mixture(T_r, rho_r, one)
        u_r = mp_r.u
        m_r = rho_r * Vc + overlap_backflow(batch, T_r, mp_r.R, mp_r.gamma, th_o, A_o)
        # 1. trapped charge at IVC
        m1, T1, y1 = trapped_charge(g, m_r, u_r, p_i, V1, Vc, h_i, y_egr, T1, x_r)
        x_r = m_r / m1
        # 2. compression, 3. burning at TDC, 4. expansion to EVO
        T2 = _adiabatic_volume(g, T1, m1, V1, Vc, y1)
        y3 = y1 + eta_c * (1 - y1)
        u2 = g.mixture(T2, m1 / Vc, y1).u
        T3 = _temperature_at_energy(g, u2, 2.5 * T2, m1 / Vc, y3, steps=4)
        if rhs is None:
            T4 = _adiabatic_volume(g, T3, m1, Vc, V4, y3)
        else:
            T4 = T3
            th = np.linspace(0.0, evo, HEAT_POINTS + 1)
            for k in range(HEAT_POINTS):
                Va, Vb = geo.volume_at(th[k]) * one, geo.volume_at(th[k + 1]) * one
                q = _wall_heat_per_deg(rhs, batch, float(np.mean(0.5 * (th[k] + th[k + 1]))), m1, T4, y3)
                T4 = _adiabatic_volume(g, T4, m1, Va, Vb, y3, substeps=1)
                T4 = T4 - q * (th[k + 1] - th[k]) / (m1 * g.mixture(T4, m1 / Vb, y3).cv)
        p4 = g.pressure(T4, m1 / V4, y3)
        # 5. blowdown to p_e, then the exhaust stroke at p_e
        T_r = _adiabatic_pressure(g, T4, p4, np.minimum(p_e, p4), y3)
        if rhs is not None:
            th = np.linspace(evo, 360.0, HEAT_POINTS + 1)
            for k in range(HEAT_POINTS):
                tm = float(np.mean(0.5 * (th[k] + th[k + 1])))
                mp = g.mixture(T_r, p_e / (287.0 * T_r), y3)
                m = p_e * geo.volume_at(tm) / (mp.R * T_r)
                q = _wall_heat_per_deg(rhs, batch, tm, m, T_r, y3)
                T_r = T_r - q * (th[k + 1] - th[k]) / (m * mp.cp)
    # the residual fraction from the final T_r (the chain's T_r no longer changes it)
    rho_r = p_e / (g.mixture(T_r, p_e / (287.0 * T_r), one).R * T_r)
    mp_r = g.mixture(T_r, rho_r, one)
    m_r = rho_r * Vc + overlap_backflow(batch, T_r, mp_r.R, mp_r.gamma, th_o, A_o)
    m1, T1, _ = trapped_charge(g, m_r, mp_r.u, p_i, V1, Vc, h_i, y_egr, T1, x_r, passes=2)
    return ResidualEstimate(m_r / m1, T_r, T1, T4, p4, y3)


def start_state(batch, V0, rhs=None, plain=None):
    """Cylinder mass [kg], temperature [K] and burned fraction [-] at the cycle start (B,),
    with the residual at the exhaust pressure in the volume ``V0`` [m^3], and the estimate.

    ``plain`` = (m, T, y) of the plain start: a case whose estimate is not a physical state
    (non-finite, or outside 200-4000 K) keeps it, and so does the whole batch where a submodel
    refuses the estimated states (the estimate is None then).
    """
    from ..errors import CyclesimError

    try:
        with np.errstate(all="ignore"):
            est = estimate(batch, rhs)
    except (CyclesimError, ArithmeticError, ValueError):
        if plain is None:
            raise
        return (*plain, None)
    p_e = batch.operating.exhaust_pressure_bar * 1e5 * np.ones(batch.B)
    y0 = est.burned_fraction
    T = est.residual_temperature_K
    rho = p_e / (287.0 * T)
    with np.errstate(all="ignore"):
        for _ in range(3):
            rho = p_e / (batch.gas.mixture(T, rho, y0).R * T)
    m = rho * V0
    if plain is not None:
        ok = np.isfinite(m) & (m > 0) & np.isfinite(T) & (T > 200.0) & (T < 4000.0) & (y0 >= 0) & (y0 <= 1)
        m, T, y0 = (np.where(ok, a, b) for a, b in zip((m, T, y0), plain))
    return m, T, y0, est
