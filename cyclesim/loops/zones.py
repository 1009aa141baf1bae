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

The arithmetic of the solve and of the zone rates is written once, in kernel form, in
:mod:`cyclesim.loops.zone_solve`: the functions here run it on arrays (the numpy loop, the trace),
the compiled loop on floats (:mod:`cyclesim.loops.loopgen` writes it in).

All arrays: any shape, a case index ``case`` of the same shape picks each point's tables; SI.
"""

from __future__ import annotations

import numpy as np

from ..params import StateVar
from . import zone_points, zone_solve as _k
from .kernel_copy import compiled_wanted, kernels
from .zone_points import MIN_POINTS
from .zone_solve import OPEN_FADE_DEG, X_BIRTH, X_BORN, X_MERGE  # noqa: F401 - the zones' constants

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


def unburned_heat_share(x, T_u, T_b, T_wall, area_b=None):
    """The unburned zone's share [-] of the wall heat (:func:`cyclesim.loops.zone_solve.unburned_heat_share`;
    ``area_b`` None: no flame geometry, x^(1/2))."""
    return _k.unburned_heat_share(x, T_u, T_b, T_wall, -1.0 if area_b is None else area_b)


# -- burned gas at a pressure ---------------------------------------------------------------
def solve_T_p(gas, target, p, T0, enthalpy, lr0=None):
    """Burned-gas state of enthalpy (or internal energy) ``target`` [J/kg] at ``p`` [Pa], arrays
    (B,) or (B, n): :func:`cyclesim.loops.zone_solve.solve_T_p` (from ``lr0`` [ln(kg/m^3)], default
    the density of R = 290 J/(kg K) at ``T0``).  Returns ``(T, ln rho, u, h, dlnv_dlnp_s)``."""
    T = np.array(T0, dtype=float, copy=True)
    lr = np.log(p) - np.log(290.0 * T) if lr0 is None else np.array(lr0, dtype=float, copy=True)
    return _k.solve_T_p(gas, target, p, T, lr, enthalpy)[:5]


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
        got = getattr(gas, "_zone_tables", None)     # the gas's tables do not change: built once
        if got is not None:
            self.__dict__.update(got)
            return
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
        try:
            gas._zone_tables = dict(self.__dict__)
        except AttributeError:       # a gas object that takes no attributes: built each time
            pass

    def R_u(self, y_u, case):
        """Gas constant [J/(kg K)] of the unburned zone of burned-gas fraction ``y_u`` [-]."""
        return _k.unburned_R(y_u, self.R_f[case], self.R_r[case])

    def args(self, case):
        """The tables as :func:`cyclesim.loops.zone_solve.solve` takes them, for points of cases
        ``case``: (phi_f, phi_r, k0, T0, dT, n, R_f, R_r)."""
        return (self._flat_f, self._flat_r, case * self.n, self.T0, self.dT, self.n, self.R_f[case],
                self.R_r[case])

    def phi(self, T, y_u, case):
        """(phi [J/(kg K)], d phi/dT = cp/T [J/(kg K^2)]) of the unburned zone at ``T`` [K]."""
        return _k.zone_phi(self._flat_f, self._flat_r, case * self.n, self.T0, self.dT, self.n, T, y_u)

    def unburned_T(self, target, y_u, case, T0):
        """Temperature [K] where the zone's phi equals ``target`` [J/(kg K)] (Newton from ``T0``)."""
        return _k.unburned_T(self._flat_f, self._flat_r, case * self.n, self.T0, self.dT, self.n, target, y_u,
                             np.asarray(T0, dtype=float))

    def unburned_target(self, s_u, p, T_ivc, p_ivc, y_u, case):
        """The phi [J/(kg K)] the unburned zone has at ``p`` [Pa] with entropy ``s_u`` [J/(kg K)]
        above its IVC state (T_ivc [K], p_ivc [Pa])."""
        return self.phi(T_ivc, y_u, case)[0] + self.R_u(y_u, case) * np.log(p / p_ivc) + s_u


# -- the solve (cyclesim.loops.zone_solve, on arrays) ----------------------------------------
def solve(gas, tab: ZoneTables, case, m, V, U, m_bz, y_u, s_u, p1, T_ivc, p_ivc, active, born):
    """Pressure and zone temperatures of a two-zone cylinder (:func:`cyclesim.loops.zone_solve.solve`).

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
    return _k.solve(gas, *tab.args(case), m, V, U, m_bz, y_u, s_u, p1, T_ivc, p_ivc, active, born)


def masks(closed, m, m_bz):
    """(active, born): where two zones are resolved, where the burned zone exists (bool arrays)."""
    x = m_bz / m
    born = closed & (x > X_BORN) & (x < X_MERGE)
    return born & (x >= X_BIRTH), born


unburned_fraction_burned = _k.unburned_fraction_burned


def cylinder_zones(gas, tab: ZoneTables, case, m, V, U, m_b, m_bz, s_u, p1, T, T_ivc, p_ivc, closed):
    """The two-zone cylinder at a state: (p [Pa], T_u [K], T_b [K], y_u [-], active, born)
    (:func:`cyclesim.loops.zone_solve.cylinder_zones` on arrays; ``case`` each point's case).

    Outside the closed part both zone temperatures are the mixture's; once merged the burned zone's
    is the mixture's; before the burn the unburned zone is the whole charge on its entropy; once
    merged both are the mixture's (:func:`cyclesim.results.zone_trace.two_zone_columns` blanks the
    unburned zone there).
    """
    arrays = np.broadcast_arrays(case, m, V, U, m_b, m_bz, s_u, p1, T, T_ivc, p_ivc, closed)
    if arrays[0].size >= MIN_POINTS and getattr(gas, "_compiled_consts", None) is not None and compiled_wanted():
        return _zones_points(gas, tab, arrays)
    return _k.cylinder_zones(gas, *tab.args(case), m, V, U, m_b, m_bz, s_u, p1, T, T_ivc, p_ivc, closed)


def _zones_points(gas, tab: ZoneTables, arrays):
    """:func:`cylinder_zones` by the compiled point loop (:mod:`cyclesim.loops.zone_points`): the
    pressure and zone temperatures there, the masks and y_u on arrays as before."""
    shape = arrays[0].shape
    case, m, V, U, m_b, m_bz, s_u, p1, T, T_ivc, p_ivc, closed = (np.ascontiguousarray(a).ravel() for a in arrays)
    out = [np.empty(case.size) for _ in range(3)]
    kernels(zone_points).cylinder_zones_points(
        *gas._compiled_consts(), tab._flat_f, tab._flat_r, int(tab.n), float(tab.T0), float(tab.dT), tab.R_f,
        tab.R_r, case.astype(np.int64), *(a.astype(float) for a in (m, V, U, m_b, m_bz, s_u, p1, T, T_ivc, p_ivc)),
        closed.astype(np.bool_), *out)
    y_u = _k.unburned_fraction_burned(m, m_b, m_bz)
    active, born = masks(closed, m, m_bz)
    return tuple(a.reshape(shape) for a in (*out, y_u, active, born))


def zone_rates(closed, m, m_bz, y_u, T_u, T_b, T_wall, dm_burn, fbb, dQ, area_b=None):
    """Rates of the zone states (d m_bz [kg/deg], d s_u [J/(kg K deg)]):
    :func:`cyclesim.loops.zone_solve.zone_rates` (``area_b`` None: no flame geometry)."""
    return _k.zone_rates(closed, m, m_bz, y_u, T_u, T_b, T_wall, dm_burn, fbb, dQ,
                         -1.0 if area_b is None else area_b)
