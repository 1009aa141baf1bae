"""Two zones in the running cycle: the unburned and the burned gas at one pressure.

Design
------
The cylinder's state stays what the one-zone cylinder integrates (mass, temperature, burned
mass, ...), and its first law stays the one of :mod:`cyclesim.loops.balance`, written once.  The
temperature row then stands for the cylinder's total internal energy: ``U = m u(T, rho, y_b)``
of the mixture tables, integrated as before; only the pressure in ``p dV`` and the enthalpy of
the leaking gas become the two zones' (``h = u + p / rho``, the mass-weighted enthalpy of the
zones).  Two states are added, declared here (:data:`ZONE_STATES`), neither needing dp/dt:

* ``m_bz`` [kg], the burned zone's mass: the charge burned this cycle with the residual it
  carried, ``dm_bz = dm_burn / (1 - y_u) - fbb m_bz / m`` (blowby from the zones in proportion
  to their mass), zero at IVC;
* ``s_u`` [J/(kg K)], the unburned zone's specific entropy from its value at IVC,
  ``ds_u = -dQ_u / (m_u T_u)``: the zone is frozen, so only its heat loss changes it (mass
  leaving it, to the flame or past the rings, leaves at its own entropy).

At every evaluation :func:`solve` finds p, T_u, T_b from ``U = m_u u_u(T_u) + m_b u_b(T_b,
rho_b)``, ``V = (m_u R_u T_u + m_b R_b T_b) / p`` and ``s_u(T_u, p)`` (Newton on ln p with the
zones' states nested; a fixed number of passes, branch-free, so it runs on arrays of any
shape).  The alternative, the zone temperatures as states, needs dp/dt in both zone equations
and writes the energy balance a second time; the form here leaves the energy of a run closing
exactly as in one zone, since U is integrated by the same first law.

Zones: the unburned zone is the fresh charge with the residual and EGR it holds (burned-gas
fraction ``y_u``, constant over the closed part), frozen; the burned zone is the tool's
equilibrium burned gas (the solver's burned-gas table).  While the burned zone holds less than
:data:`X_BIRTH` of the cylinder mass it is being born: its temperature is the constant-pressure
adiabatic flame temperature of the unburned gas and the pressure the one-zone mixture's (the
burned zone's energy is there the small difference of two large ones); above :data:`X_MERGE`
the zones merge (the mixture is then the burned gas).  Outside the closed part the cylinder is
one zone.

Wall heat between the zones: in proportion to A_z (T_z - T_wall), the burned zone's share of the
wall area from the burn's flame geometry where it has one (``BurnRate.burned_wall_share``: the
``entrainment`` burn's spherical flame in the chamber, cyclesim/combustion/flame_geometry.py),
else ``x^(1/2)`` with x its mass fraction (the form of Ferguson's two-zone model, Ferguson &
Kirkpatrick 2015, ch. 4, from memory), :func:`unburned_heat_share`; the total is the heat-transfer
model's, evaluated at the mixture temperature and the two-zone pressure.

All arrays: any shape, a case index ``case`` of the same shape picks each point's tables; SI.
"""

from __future__ import annotations

import numpy as np

from ..params import StateVar

X_BIRTH = 1e-3
"""Burned-zone mass fraction [-] below which the zone is born at the flame temperature."""

X_MERGE = 0.999
"""Burned-zone mass fraction [-] above which the two zones merge into one."""

OPEN_FADE_DEG = 5.0
"""Crank angle [deg] over which the burned-zone mass fades while the valves are open."""

X_BORN = 1e-12
"""Burned-zone mass fraction [-] from which the zone exists."""

ZONES = ("one", "two")
"""Values of ``simulation.zones``."""

ZONE_STATES = (
    StateVar("m_bz", "kg", 0.0, True, {"meaning": "burned-zone mass (the charge burned this cycle and its residual)"}),
    StateVar("s_u", "J/(kg K)", 0.0, True, {"meaning": "unburned-zone specific entropy from its value at IVC"}),
)
"""The two-zone cylinder's own states, after the submodels' (rows ``zones.<name>``)."""

ZONE_ROLE = "zones"
"""The prefix of the zone states' names in the state layout."""

_PHI_GRID = (200.0, 3500.0, 5.0)   # first, last, step [K] of the entropy tables
_NEWTON_P = 8                      # passes on ln p
_NEWTON_T = 4                      # passes on each zone temperature per pressure pass

_TOL_T = 1e-11  # relative tolerance of the burned-gas temperature solves [-]


def unburned_heat_share(x, T_u, T_b, T_wall, area_b=None):
    """The unburned zone's share [-] of the wall heat: A_u (T_u - T_w) over the sum of both zones',
    with A_b/A = ``area_b`` where given (the flame geometry's wetted share), else x^(1/2), and
    A_u/A = 1 - A_b/A (x the burned-zone mass fraction [-]); temperatures [K].  1 where neither
    zone is hotter than the wall."""
    a_b = np.sqrt(np.clip(x, 0.0, 1.0)) if area_b is None else np.clip(area_b, 0.0, 1.0)
    wu = (1.0 - a_b) * np.maximum(T_u - T_wall, 0.0)
    wb = a_b * np.maximum(T_b - T_wall, 0.0)
    tot = wu + wb
    return np.where(tot > 0, wu / np.where(tot > 0, tot, 1.0), 1.0)


# -- burned gas at a pressure ---------------------------------------------------------------
def _burned(gas, T, rho):
    T = np.asarray(T, dtype=float)
    if T.ndim == 1:
        return gas.burned(T, rho)
    return gas.burned(T, np.broadcast_to(rho, T.shape))


def solve_T_p(gas, target, p, T0, enthalpy, lr0=None):
    """Burned-gas state of enthalpy (or internal energy) ``target`` [J/kg] at ``p`` [Pa].

    Newton on (T, ln rho) together, with the equation of state p = rho R(T, rho) T as the second
    equation: one table look-up per iteration.  Returns ``(T, ln rho, u, h, dlnv_dlnp_s)``, the
    last the isentropic d ln v / d ln p [-] there.  Arrays (B,) or (B, n).
    """
    T = np.array(T0, dtype=float, copy=True)
    lnp = np.log(p)
    lr = lnp - np.log(290.0 * T) if lr0 is None else np.array(lr0, dtype=float, copy=True)
    for _ in range(40):
        u, u_T, u_lr, R, R_T, R_lr = _burned(gas, T, np.exp(lr))
        h = u + R * T
        h_T, h_L = u_T + R + T * R_T, u_lr + T * R_lr
        f1 = (h if enthalpy else u) - target
        a11, a12 = (h_T, h_L) if enthalpy else (u_T, u_lr)
        f2 = lr + np.log(R * T) - lnp
        a21, a22 = R_T / R + 1.0 / T, 1.0 + R_lr / R
        det = a11 * a22 - a12 * a21
        dT = -(f1 * a22 - a12 * f2) / det
        dL = -(a11 * f2 - a21 * f1) / det
        if np.all(np.abs(dT) <= _TOL_T * T) and np.all(np.abs(dL) <= 1e-12):
            break
        T = np.clip(T + dT, 200.0, 6000.0)
        lr = lr + dL
    # isentrope (dh = v dp = R T d ln p): solve for dT, dL per unit d ln p
    RT = R * T
    c1, c2 = h_T - RT * a21, h_L - RT * a22
    dL_s = 1.0 / (a22 - a21 * c2 / c1)
    return T, lr, u, h, -dL_s


def flame_temperature(gas, h_u, p, T0=None):
    """Constant-pressure adiabatic flame temperature [K] of unburned gas of enthalpy ``h_u``
    [J/kg] at ``p`` [Pa]: the burned gas of the same enthalpy (Newton from ``T0``)."""
    return solve_T_p(gas, h_u, p, np.full(np.shape(h_u), 2400.0) if T0 is None else T0, True)[0]


# -- the unburned zone's entropy ------------------------------------------------------------
class ZoneTables:
    """Per-case entropy functions of the unburned zone's two parts, built once per batch.

    ``phi_f(T)`` and ``phi_r(T)`` = integral of cp/T dT [J/(kg K)] of the fresh charge and of the
    burned gas it holds (residual, EGR), from the gas tables' cv and R (trapezoidal rule on
    :data:`_PHI_GRID`, a 5 K step); the zone's entropy at (T, p) is
    ``(1 - y_u) phi_f + y_u phi_r - R_u ln p`` up to a constant, with ``R_u`` its gas constant
    (frozen: constant).  Read by linear interpolation (its slope is the exact derivative used by
    the Newton passes).
    """

    def __init__(self, gas):
        T0, T1, dT = _PHI_GRID
        n = int(round((T1 - T0) / dT)) + 1
        Tn = T0 + dT * np.arange(n)
        B = gas.B
        TT = np.broadcast_to(Tn, (B, n)).copy()
        _, cv_f, R_f = gas.unburned(TT)
        rho_ref = 101325.0 / (290.0 * TT)
        _, u_T_r, _, R_r, _, _ = gas.burned(TT, rho_ref)
        self.R_f = np.asarray(R_f[:, 0], float)
        self.R_r = np.asarray(R_r[:, 0], float)  # the residual's gas constant at its low temperature
        self.T0, self.dT, self.n = T0, dT, n
        out = []
        for cp in (cv_f + R_f, u_T_r + R_r):
            g = cp / TT
            out.append(np.concatenate([np.zeros((B, 1)), np.cumsum(0.5 * (g[:, 1:] + g[:, :-1]) * dT, axis=1)],
                                      axis=1))
        self.phi_f, self.phi_r = out
        self._flat_f = self.phi_f.ravel()
        self._flat_r = self.phi_r.ravel()

    def R_u(self, y_u, case):
        """Gas constant [J/(kg K)] of the unburned zone of burned-gas fraction ``y_u`` [-]."""
        return (1.0 - y_u) * self.R_f[case] + y_u * self.R_r[case]

    def phi(self, T, y_u, case):
        """(phi [J/(kg K)], d phi/dT = cp/T [J/(kg K^2)]) of the unburned zone at ``T`` [K]."""
        # fmax/fmin take NaN (no IVC state yet) into the table; the caller masks those points
        x = np.fmin(np.fmax((T - self.T0) / self.dT, 0.0), self.n - 1 - 1e-9)
        i = x.astype(np.intp)
        t = x - i
        k = case * self.n + i
        f0, f1 = self._flat_f[k], self._flat_f[k + 1]
        r0, r1 = self._flat_r[k], self._flat_r[k + 1]
        v0 = f0 + y_u * (r0 - f0)
        v1 = f1 + y_u * (r1 - f1)
        return v0 + t * (v1 - v0), (v1 - v0) / self.dT

    def unburned_T(self, target, y_u, case, T0):
        """Temperature [K] where the zone's phi equals ``target`` [J/(kg K)] (Newton from ``T0``)."""
        T = np.asarray(T0, dtype=float)
        for _ in range(_NEWTON_T):
            f, fT = self.phi(T, y_u, case)
            T = np.clip(T - (f - target) / fT, 200.0, 3500.0)
        return T

    def unburned_target(self, s_u, p, T_ivc, p_ivc, y_u, case):
        """The phi [J/(kg K)] the unburned zone has at ``p`` [Pa] with entropy ``s_u`` [J/(kg K)]
        above its IVC state (T_ivc [K], p_ivc [Pa])."""
        return self.phi(T_ivc, y_u, case)[0] + self.R_u(y_u, case) * np.log(p / p_ivc) + s_u


# -- the solve ------------------------------------------------------------------------------
def _mixture(gas, T, rho, y):
    if np.ndim(T) == 1:
        return gas.mixture(T, rho, y)
    return gas.mixture_grid(T, rho, y)


def solve(gas, tab: ZoneTables, case, m, V, U, m_bz, y_u, s_u, p1, T_ivc, p_ivc, active, born):
    """Pressure and zone temperatures of a two-zone cylinder.

    Parameters
    ----------
    gas : cyclesim.solve.gas_tables.GasTables
    tab : ZoneTables
    case : ndarray of int
        Each point's case (its tables).
    m, V, U : ndarray
        Cylinder mass [kg], volume [m^3] and absolute internal energy [J].
    m_bz : ndarray
        Burned-zone mass [kg].
    y_u : ndarray
        Burned-gas fraction of the unburned zone [-].
    s_u : ndarray
        Unburned-zone entropy above its IVC state [J/(kg K)].
    p1 : ndarray
        The one-zone pressure of the same m, V, U [Pa] (the first estimate).
    T_ivc, p_ivc : ndarray
        The cylinder's state at IVC [K, Pa].
    active : ndarray of bool
        Where two zones are resolved (the solve's result is used there only).
    born : ndarray of bool
        Where the burned zone exists (resolved or being born: its temperature is given there).

    Returns
    -------
    p, T_u, T_b : ndarray
        The pressure [Pa] (``p1`` where not active), the unburned-zone temperature [K] (on its
        entropy at that pressure), the burned-zone temperature [K] (NaN where not ``born``).
    """
    lnp = np.log(p1)
    m_u = np.maximum(m - m_bz, 1e-300)
    m_b = np.where(active, np.maximum(m_bz, 1e-300), 1.0)
    R_u = tab.R_u(y_u, case)
    base = tab.phi(T_ivc, y_u, case)[0]
    cp_ivc = tab.phi(T_ivc, y_u, case)[1] * T_ivc
    T_u = T_ivc * np.exp(R_u / cp_ivc * (lnp - np.log(p_ivc)))
    T_b = np.full(np.shape(lnp), 2400.0)
    for _ in range(_NEWTON_P):
        p = np.exp(lnp)
        T_u = tab.unburned_T(base + R_u * (lnp - np.log(p_ivc)) + s_u, y_u, case, T_u)
        mp = _mixture(gas, T_u, p / (R_u * T_u), y_u)
        cp_u = mp.u_T + R_u
        V_u = m_u * R_u * T_u / p
        V_b = np.where(active, np.maximum(V - V_u, 1e-6 * V), V)
        rho_b = m_b / V_b
        T_b = p * V_b / (m_b * _burned(gas, T_b, rho_b)[3])
        for _ in range(2):
            _, _, _, R_b, R_T, _ = _burned(gas, T_b, rho_b)
            g = np.log(rho_b * R_b * T_b) - lnp
            T_b = np.clip(T_b * np.exp(-g / (1.0 + T_b * R_T / R_b)), 250.0, 5500.0)
        u_b, u_Tb, u_lr, _, _, _ = _burned(gas, T_b, rho_b)
        F = m_u * mp.u + m_b * u_b - U
        dlnT_u = R_u / cp_u
        dV_u = V_u * (dlnT_u - 1.0)
        dlnrho_b = dV_u / V_b
        dF = m_u * mp.u_T * T_u * dlnT_u + m_b * (u_Tb * T_b * (1.0 - dlnrho_b) + u_lr * dlnrho_b)
        lnp = np.where(active, lnp - F / dF, lnp)
    p = np.where(active, np.exp(lnp), p1)
    T_u = tab.unburned_T(base + R_u * np.log(p / p_ivc) + s_u, y_u, case, T_u)
    seed = born & ~active
    if np.any(seed):
        mp = _mixture(gas, T_u, p / (R_u * T_u), y_u)
        T_ad = flame_temperature(gas, mp.u + R_u * T_u, p, np.where(np.isfinite(T_b), T_b, 2400.0))
        T_b = np.where(seed, T_ad, T_b)
    return p, T_u, np.where(born, T_b, np.nan)


def masks(closed, m, m_bz):
    """(active, born): where two zones are resolved, where the burned zone exists (bool arrays)."""
    x = m_bz / m
    born = closed & (x > X_BORN) & (x < X_MERGE)
    return born & (x >= X_BIRTH), born


def unburned_fraction_burned(m, m_b, m_bz):
    """Burned-gas (residual, EGR) fraction [-] of the unburned zone: ``(m_b - m_bz)/(m - m_bz)``."""
    return np.clip((m_b - m_bz) / np.maximum(m - m_bz, 1e-300), 0.0, 0.999)


def cylinder_zones(gas, tab: ZoneTables, case, m, V, U, m_b, m_bz, s_u, p1, T, T_ivc, p_ivc, closed):
    """The two-zone cylinder at a state: (p [Pa], T_u [K], T_b [K], y_u [-], active, born).

    ``m, V, U, m_b`` the cylinder's mass [kg], volume [m^3], absolute internal energy [J] and
    burned-gas mass [kg]; ``m_bz, s_u`` the zone states; ``p1, T`` the one-zone pressure [Pa] and
    mixture temperature [K]; ``closed`` where the valves are shut.  Outside the closed part both
    zone temperatures are the mixture's; once merged the burned zone's is the mixture's; before
    the burn the unburned zone is the whole charge on its entropy; once merged both are the
    mixture's (:func:`cyclesim.results.zone_trace.two_zone_columns` blanks the unburned zone there).
    """
    y_u = unburned_fraction_burned(m, m_b, m_bz)
    active, born = masks(closed, m, m_bz)
    ref = closed & np.isfinite(T_ivc) & np.isfinite(p_ivc)   # no IVC state yet: the present one
    p, T_u, T_b = solve(gas, tab, case, m, V, U, m_bz, y_u, s_u, p1, np.where(ref, T_ivc, T),
                        np.where(ref, p_ivc, p1), active, born)
    merged = closed & (m_bz >= X_MERGE * m)
    T_u = np.where(closed & ~merged, T_u, T)
    T_b = np.where(born, T_b, np.where(merged | ~closed, T, np.nan))
    return p, T_u, T_b, y_u, active, born


def zone_rates(closed, m, m_bz, y_u, T_u, T_b, T_wall, dm_burn, fbb, dQ, area_b=None):
    """Crank-angle rates of the zone states (:data:`ZONE_STATES`): (d m_bz [kg/deg], d s_u
    [J/(kg K deg)]) from the charge burned ``dm_burn`` [kg/deg], the blowby ``fbb`` [kg/deg] and
    the wall heat ``dQ`` [J/deg] (its unburned share by :func:`unburned_heat_share`, with the
    burned zone's share of the wall area ``area_b`` [-] where the burn's flame geometry gives it)."""
    x = m_bz / m
    share = unburned_heat_share(x, T_u, np.where(np.isfinite(T_b), T_b, T_u), T_wall, area_b)
    m_u = np.maximum(m - m_bz, 1e-300)
    # valves open: one zone; the zone states fade out (over OPEN_FADE_DEG) so that the step that
    # crosses the next IVC, before they are reset there, sees no burned zone left
    d_mbz = np.where(closed, dm_burn / (1.0 - y_u) - fbb * x, -m_bz / OPEN_FADE_DEG)
    d_su = np.where(closed, np.where(x < X_MERGE, -dQ * share / (m_u * T_u), 0.0), 0.0)
    return d_mbz, d_su
