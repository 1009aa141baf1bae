"""Unburned and burned zones, and burned-mass elements, from a finished one-zone cycle.

Two steps, each replaceable (a two-zone cylinder, ``simulation.zones: two``, gives its
:class:`ZoneHistory` directly from its trace, :func:`zones_from_trace`):

1. :func:`decompose_two_zone` splits the one-zone trace into an unburned and a burned zone at
   one pressure.  The unburned zone (fresh charge plus the residual and EGR it holds, frozen)
   follows its isentrope from the state it shares with the whole charge at the start of the
   burn (before it the charge *is* the unburned zone, so this is the isentrope from IVC with
   all the wall heat), losing its share of the wall heat.  The burned zone holds the rest of
   the mixture's volume and internal energy; the pressure at which both zones fill the volume
   is solved at each point (Newton on the pressure and the burned-zone temperature).
2. :func:`burned_elements` resolves the burned zone into ``count`` burned-mass elements.
   Element k takes the mass burned while the burned-zone fraction passes the k-th of ``count``
   equal slices of its final value; each piece is born at the constant-pressure adiabatic
   flame temperature of the unburned gas at that moment (h_b(T_ad, p) = h_u(T_u, p), the
   tool's equilibrium burned gas) and mixes into its element at constant pressure; the
   elements then follow the equilibrium isentrope with the pressure
   (dh = v dp, trapezoidal in v).

Heat-loss split
---------------
Between the zones: in proportion to A_z (T_z - T_wall), with the burned zone's share of the
wall area A_b/A = x^(1/2) and A_u/A = 1 - x^(1/2), x its mass fraction (the form of Ferguson's
two-zone model, Ferguson & Kirkpatrick 2015, ch. 4, from memory); the sum is the one-zone heat
flow of the trace.  Among the elements: the burned zone's energy not accounted for by the
elements' own (isentropic) work and birth enthalpy is removed from them, split in proportion to
m_k max(T_k - T_wall, 1 K) (one film coefficient and one wetted area per unit mass for all
elements: a stated choice, common practice for want of a flame geometry); at constant pressure
their enthalpy falls by the heat they lose, their internal energy by that less the work of their
contraction.  So the mass-weighted internal energy of the elements equals the burned zone's at every resolved point
to the temperature solve's tolerance (about 1e-12).

While the burned zone holds less than :data:`X_RESOLVED` of the charge its energy is the small
difference of two large ones (a 1 K error in the unburned zone would move it by tens of
kelvin): there the zone is taken as its elements, adiabatic, at the trace pressure.

All arrays carry a leading case axis B; SI units.  The loops are the scalar kernels of
:mod:`cyclesim.combustion.zone_kernels`, compiled by numba where it runs (:mod:`cyclesim.combustion._jit`);
the functions here prepare their arrays and return the named tuples.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from ..loops.zones import solve_T_p as _solve_T_p  # noqa: F401 - re-exported

X_RESOLVED = 0.02
"""Burned-zone mass fraction [-] below which the zone is its elements' own (see the notes)."""

X_NONE = 1e-12
"""Burned-zone fraction [-] below which there is none: the rounding noise of the trace's burned-gas
fraction before the burn (about 1e-17), which would otherwise start the zones wherever the window
starts (and so make a case's NO depend on its batch-mates)."""

_TOL_T = 1e-11  # relative tolerance of the temperature solves at density [-]


class ZoneHistory(NamedTuple):
    """Two zones at one pressure over the burn window, arrays (B, n).

    theta : ndarray (n,)
        Crank angle [deg].
    t : ndarray (B, n)
        Time [s] from theta = 0.
    p : ndarray (B, n)
        Pressure [Pa] (both zones).
    m : ndarray (B, n)
        Cylinder mass [kg].
    x : ndarray (B, n)
        Burned-zone mass fraction [-], non-decreasing.
    T_u, T_b : ndarray (B, n)
        Zone temperatures [K] (T_b NaN before the burn).
    h_u : ndarray (B, n)
        Absolute enthalpy of the unburned zone [J/kg] (the flame's enthalpy).
    U_b : ndarray (B, n)
        Absolute internal energy of the burned zone [J]; NaN where it is not resolved
        (before the burn and below :data:`X_RESOLVED`).
    y_u : ndarray (B,)
        Burned-gas (residual plus EGR) mass fraction of the unburned zone [-].
    Q_u : ndarray (B, n) or None
        Cumulative heat from the unburned zone to the walls [J], from the first point.
    """

    theta: np.ndarray
    t: np.ndarray
    p: np.ndarray
    m: np.ndarray
    x: np.ndarray
    T_u: np.ndarray
    T_b: np.ndarray
    h_u: np.ndarray
    U_b: np.ndarray
    y_u: np.ndarray
    Q_u: np.ndarray | None = None


def _mix(gas, T, rho, y):
    """Mixture properties of (B,) or (B, n) arrays."""
    if np.ndim(T) == 1:
        return gas.mixture(T, rho, y)
    return gas.mixture_grid(T, rho, y)


def burned_state_p(gas, T, p, rho0=None):
    """Burned gas at ``T`` [K] and ``p`` [Pa], arrays (B,) or (B, n).

    Returns ``(rho, u, h, cp_eq)``: density [kg/m^3], absolute internal energy and enthalpy
    [J/kg], and dh/dT at constant p [J/(kg K)] (composition shift included).
    """
    rho = p / (290.0 * T) if rho0 is None else rho0
    for _ in range(3):   # rho = p/(R(T, rho) T); R varies with ln rho by under 1 % per decade
        u, u_T, u_lr, R, R_T, R_lr = gas.burned(T, rho)
        rho = p / (R * T)
    u, u_T, u_lr, R, R_T, R_lr = gas.burned(T, rho)
    # along constant p: d ln rho/dT = -(1/T + R_T/R) / (1 + R_lr/R)
    dlr = -(1.0 / T + R_T / R) / (1.0 + R_lr / R)
    h = u + R * T
    cp = u_T + R + T * R_T + (u_lr + T * R_lr) * dlr
    return rho, u, h, cp


def _kernels():
    from . import zone_kernels
    from ._jit import kernels

    return kernels(zone_kernels)


def _gas_consts(gas) -> tuple:
    """The gas tables as the scalar kernels take them (cyclesim.solve.gas_tables)."""
    return gas._compiled_consts()


def _solve_points(gas, target, p, T0, enthalpy):
    """Temperature [K] of burned gas of enthalpy (or internal energy) ``target`` [J/kg] at ``p``
    [Pa], arrays (B,) or (B, n), by :func:`cyclesim.combustion.zone_kernels.solve_tp`."""
    target = np.asarray(target, dtype=float)
    shape = target.shape
    B = gas.B
    case = np.broadcast_to(np.arange(B).reshape((B,) + (1,) * (len(shape) - 1)), shape).ravel()
    out = np.empty(target.size)
    _kernels().solve_tp_points(*_gas_consts(gas), np.ascontiguousarray(case, dtype=np.int64),
                               np.ascontiguousarray(target.ravel()),
                               np.ascontiguousarray(np.broadcast_to(np.asarray(p, float), shape).ravel()),
                               np.ascontiguousarray(np.broadcast_to(np.asarray(T0, float), shape).ravel()),
                               bool(enthalpy), out)
    return out.reshape(shape)


def solve_T_hp(gas, h, p, T0):
    """Burned-gas temperature [K] of enthalpy ``h`` [J/kg] at ``p`` [Pa] (Newton from ``T0``)."""
    return _solve_points(gas, h, p, T0, True)


def solve_T_up(gas, u, p, T0):
    """Burned-gas temperature [K] of internal energy ``u`` [J/kg] at ``p`` [Pa] (Newton)."""
    return _solve_points(gas, u, p, T0, False)


def solve_T_urho(gas, u, rho, T0):
    """Burned-gas temperature [K] of internal energy ``u`` [J/kg] at density ``rho`` (B,)."""
    T = np.array(T0, dtype=float, copy=True)
    for _ in range(30):
        uu, u_T = gas.burned(T, rho)[:2]
        dT = (u - uu) / u_T
        T = np.clip(T + dT, 200.0, 6000.0)
        if np.all(np.abs(dT) <= _TOL_T * T):
            break
    return T


def _unburned(gas, T, p, y_u, R_u=None):
    """Unburned zone (fresh charge with burned-gas fraction ``y_u``) at T, p: (u, h, R, cp).

    ``R_u`` [J/(kg K)], if given, sets the density of the look-up (the residual's dissociation,
    the only density dependence, is negligible at unburned temperatures).
    """
    if R_u is None:
        R0 = np.asarray(gas.R_unburned, float)
        R0 = R0.reshape(R0.shape + (1,) * (np.ndim(T) - 1))     # (B,) against (B,) or (B, n)
        mp = _mix(gas, T, p / (R0 * T), y_u)
        R_u = mp.R
    mp = _mix(gas, T, p / (R_u * T), y_u)
    return mp.u, mp.u + mp.R * T, mp.R, mp.u_T + mp.R


def flame_temperature(gas, h_u, p, T0=None):
    """Constant-pressure adiabatic flame temperature [K] of unburned gas of enthalpy ``h_u``."""
    return solve_T_hp(gas, h_u, p, np.full(np.shape(h_u), 2400.0) if T0 is None else T0)


def _first_burn(x):
    """Index of the last point with no burned zone, per case (B,)."""
    started = x > 0.0
    k = np.argmax(started, axis=1) - 1
    return np.where(started.any(axis=1), np.maximum(k, 0), x.shape[1] - 1)


def decompose_two_zone(gas, theta, speed_rpm, V, p, T, m, y, Q_w, T_wall):
    """Two zones at one pressure from a one-zone trace over the closed part (see the module notes).

    Parameters
    ----------
    gas : cyclesim.solve.gas_tables.GasTables
    theta : ndarray (n,)
        Crank angle [deg], from IVC (or the start of the burn) to EVO.
    speed_rpm : ndarray (B,)
    V, p, T, m, y : ndarray (B, n)
        Volume [m^3], pressure [Pa], mean temperature [K], mass [kg], burned-gas mass
        fraction [-] of the one-zone cylinder.
    Q_w : ndarray (B, n)
        Cumulative heat to the walls [J].
    T_wall : ndarray (B,)
        Mean wall temperature [K].

    Returns
    -------
    ZoneHistory
    """
    B, n = p.shape
    t = np.radians(theta)[None, :] / (2 * np.pi * np.asarray(speed_rpm, float)[:, None] / 60.0)
    y_u = np.clip(y[:, 0], 0.0, 0.999)
    x = np.clip((y - y_u[:, None]) / (1.0 - y_u[:, None]), 0.0, 1.0)
    x = np.maximum.accumulate(np.where(x > X_NONE, x, 0.0), axis=1)
    U = m * _mix(gas, T, m / V, y).u
    out = [np.empty((B, n)) for _ in range(6)]
    T_u, T_b, p2, U_b, Q_u, h_u = out
    c = np.ascontiguousarray
    _kernels().decompose(*_gas_consts(gas), c(V, dtype=float), c(p, dtype=float), c(U), c(m, dtype=float), c(x),
                         c(Q_w, dtype=float), c(T, dtype=float), c(y_u),
                         c(np.broadcast_to(np.asarray(T_wall, float), (B,))),
                         c(_first_burn(x), dtype=np.int64), X_RESOLVED, T_u, T_b, p2, U_b, Q_u, h_u)
    return ZoneHistory(theta, t, p2, m, x, T_u, T_b, h_u, U_b, y_u, Q_u)


class Elements(NamedTuple):
    """Burned-mass elements over the burn window.

    T : ndarray (B, N, n)
        Element temperatures [K], NaN before birth.
    x : ndarray (B, N, n)
        Element mass as a fraction of the cylinder mass [-] (sums to the zone's x).
    born : ndarray (B, N, n) of bool
        True where the element holds mass.
    Q : ndarray (B, n)
        Cumulative heat the elements gave up at constant pressure [J] (their enthalpy drop in the
        heat-loss step): the burned zone's heat loss, plus the small difference between the
        zone's and the elements' volume work.
    """

    T: np.ndarray
    x: np.ndarray
    born: np.ndarray
    Q: np.ndarray


def element_energy(gas, el: Elements, zones: ZoneHistory, j: int) -> np.ndarray:
    """Mass-weighted internal energy of the elements at point ``j`` [J] (B,)."""
    B, N, _ = el.T.shape
    T = np.where(el.born[:, :, j], el.T[:, :, j], 2000.0)
    p = np.broadcast_to(zones.p[:, j:j + 1], (B, N))
    _, u, _, _ = burned_state_p(gas, T, p)
    return (np.where(el.born[:, :, j], el.x[:, :, j] * u, 0.0)).sum(axis=1) * zones.m[:, j]


def burned_elements(gas, zones: ZoneHistory, count: int, T_wall) -> Elements:
    """Burned-mass elements of a zone history (see the module notes)."""
    B, n = zones.p.shape
    N = int(count)
    T_out = np.empty((B, N, n))
    x_out = np.empty((B, N, n))
    Q = np.empty((B, n))
    c = np.ascontiguousarray
    _kernels().elements(*_gas_consts(gas), c(zones.p, dtype=float), c(zones.m, dtype=float),
                        c(zones.x, dtype=float), c(zones.h_u, dtype=float), c(zones.U_b, dtype=float),
                        c(np.broadcast_to(np.asarray(T_wall, float), (B,))), T_out, x_out, Q)
    return Elements(T_out, x_out, x_out > 0, Q)


def zones_from_trace(gas, theta, speed_rpm, V, p, m, m_bz, y, T_u, T_b, s_u):
    """:class:`ZoneHistory` of a two-zone run from its own trace columns (B, n): volume [m^3],
    pressure [Pa], mass [kg], burned-zone mass [kg], burned-gas fraction of the cylinder [-], the
    zone temperatures [K] and the unburned zone's entropy above IVC [J/(kg K)]; ``theta`` (n,)
    [deg], from the start of the closed part or the burn.  The unburned zone's burned-gas fraction
    is its value at the first point; its heat to the walls is ``-m_u T_u ds_u`` summed by the
    trapezoidal rule; the burned zone's energy is given from :data:`X_RESOLVED` on, as in
    :func:`decompose_two_zone`."""
    B, n = p.shape
    t = np.radians(theta)[None, :] / (2 * np.pi * np.asarray(speed_rpm, float)[:, None] / 60.0)
    x = np.clip(m_bz / m, 0.0, 1.0)
    m_u = m - m_bz
    y_u = np.clip((y[:, 0] * m[:, 0] - m_bz[:, 0]) / m_u[:, 0], 0.0, 0.999)
    yu = np.broadcast_to(y_u[:, None], (B, n))
    u_u, h_u, R_u, _ = _unburned(gas, T_u, p, yu)
    V_b = np.maximum(V - m_u * R_u * T_u / p, 1e-300)
    resolved = np.isfinite(T_b) & (x >= X_RESOLVED)
    T_bs = np.where(resolved, T_b, 2000.0)
    u_b = gas.burned(T_bs, np.where(resolved, np.maximum(m_bz, 1e-300) / V_b, 1.0))[0]
    U_b = np.where(resolved, m_bz * u_b, np.nan)
    w = m_u * T_u
    dQ = -0.5 * (w[:, 1:] + w[:, :-1]) * np.diff(s_u, axis=1)
    Q_u = np.concatenate([np.zeros((B, 1)), np.cumsum(dQ, axis=1)], axis=1)
    return ZoneHistory(theta, t, p, m, np.maximum.accumulate(x, axis=1), T_u, T_b, h_u, U_b, y_u, Q_u)
