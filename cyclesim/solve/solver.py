"""Batched crank-angle integration of the single-zone cylinder first law.

State per case (rows of an array of shape (n_state, B)):

=====  =========  ==================================================
row    name       meaning
=====  =========  ==================================================
0      m          cylinder mass [kg]
1      T          temperature [K]
2      m_b        burned-gas mass (residual, EGR, products) [kg]
3      x_b        burn progress of the current charge [-]
4      W          piston work  integral p dV [J]
5      Q_w        heat from gas to walls [J]
6      m_bb       mass leaked past the rings [kg]
7      H_bb       absolute enthalpy leaked [J]
8      mu_bb      fresh-charge (unburned) part of the leaked mass [kg]
9      m_int      net mass in through the intake valves [kg]
10     H_int      absolute enthalpy in through the intake valves [J]
11     mu_int     fresh-charge part of it [kg]
12     m_exh      net mass in through the exhaust valves [kg] (negative)
13     H_exh      absolute enthalpy in through the exhaust valves [J]
14     mu_exh     fresh-charge part of it [kg]
15     Q_burn     chemical energy released by combustion [J]
16     m_ibuf     gas pushed back into the intake port, re-inducted first [kg]
17     mb_ibuf    its burned-gas part [kg]
18     H_ibuf     its absolute enthalpy [J]
=====  =========  ==================================================

followed by the states the chosen submodels declare.  Gas that flows back
from the cylinder into the intake port during valve overlap or before
intake valve closing waits in the port (rows 16-18) and is the first to
return, so backflow raises the residual fraction as on a real engine; only
then does the intake draw from the plenum.  Energies are
absolute (formation enthalpy included), so the first law needs no separate
heat-release term: turning fresh charge into burned gas at constant
temperature lowers the internal energy by the heat of reaction.

Integration is Kutta's third-order Runge-Kutta on a fixed crank-angle grid
(three stages: the step's start, middle and end).  It replaced the classical
fourth-order scheme: the trace's kinks (valve events, choking, flow
reversal) keep both at about second order in the step, and on the demo and
three other operating points the three-stage scheme is as accurate or more
against a tenfold finer step, for three right-hand sides a step instead of
four.
The grid depends only on the case's own settings, never on its batch-mates,
so one case gives the same figures alone and inside any batch.  Per-case
switches (valve events, combustion phase) are masks.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ..loops.balance import burned_mass_rate, exhaust_inflow, first_law, plenum_inflow, port_buffer
from ..loops import zones as _zones
from ..errors import ConfigError, CyclesimError, PluginError, SolverError
from ..loops.layout import CORE  # the state's names, declared once  # noqa: F401
from ..loops.layout import CORE_ROWS as IDX  # noqa: F401
from ..roles import GasState
from .stepper import CYCLE_TABLEAU as TABLEAU  # noqa: F401 - the cycle loops' scheme
from .cycle_trace import CycleTrace  # noqa: F401 - re-exported: the solver's output
from .events import initial_sub as _initial_sub
from .hermite import hermite, hermite_grid, interval_of, is_uniform  # noqa: F401 - re-exported
from .cycle_grid import (CLOSED_STEP_FACTOR, EVENT_FINE_DEG, MIN_FEATURE_STEPS,  # noqa: F401 - re-exported
                         closed_step_factor, grid_for)
from .periodic import COARSE_CYCLES, COARSE_SCHEDULE, COARSE_STEP_MAX_DEG, CylinderSystem, solve  # noqa: F401
from .cycle_run import LOOP_RERUN  # noqa: F401 - re-exported

_M, _T = IDX["m"], IDX["T"]
_LAW_ROWS = tuple(IDX[k] for k in ("m", "T", "m_b", "W", "H_bb", "H_int", "H_exh"))
"""The state rows of :func:`cyclesim.loops.balance.first_law`'s rates, in its order."""


def raised_at(exc: BaseException, model=None) -> str:
    """Where an exception was raised, as `` (in name, file.py:line)``: the innermost frame in the
    file of ``model``'s class where there is one, else the innermost frame."""
    import os
    import traceback

    frames = traceback.extract_tb(exc.__traceback__)
    if not frames:
        return ""
    # the files that define the model's class (its methods' code), also for a plug-in file
    # loaded by path, which is not in sys.modules
    classes = [c for c in type(model).__mro__ if c.__module__ not in ("cyclesim.roles", "builtins")] \
        if model is not None else []
    src = {os.path.realpath(v.__code__.co_filename) for c in classes for v in vars(c).values()
           if hasattr(v, "__code__")}
    own = [f for f in frames if os.path.realpath(f.filename) in src]
    f = (own or frames)[-1]
    return f" (in {f.name}, {os.path.basename(f.filename)}:{f.lineno})"


class _RHS:
    """Right-hand side for one batch; the hot loop of the whole program."""

    port_buffer = True
    """False: the intake side draws from the plenum without the port buffer (numpy loop only; a
    reference for the runners' checks)."""

    def __init__(self, batch, mode: str):
        self.b = batch
        self.mode = mode
        g = batch.gas
        self.gas = g
        self.B = batch.B
        m = batch.models
        self.burn = m["burn"]
        self.ht = m["heat_transfer"]
        self.bb = m["blowby"]
        self.vf = m["valve_flow"]
        self.bnd = m["boundary"]
        self.knock = m["knock"]
        self.omega = 6.0 * batch.operating.speed_rpm          # deg/s
        self.dt_dth = 1.0 / self.omega                        # s/deg
        self.eta_c = np.asarray(self.burn.combustion_efficiency(), dtype=float) * np.ones(self.B)
        self.soc = np.asarray(self.burn.start_deg(), dtype=float) * np.ones(self.B)
        self.ivc = batch.valves.ivc_deg
        self.evo = batch.valves.evo_deg
        self.Sp = batch.geometry.mean_piston_speed(batch.operating.speed_rpm)
        self.Tw = (batch.walls.head_temperature_K * np.ones(self.B),
                   batch.walls.piston_temperature_K * np.ones(self.B),
                   batch.walls.liner_temperature_K * np.ones(self.B))
        # submodel states
        self.sub_specs = []   # (role, model, StateVar)
        for role in ("burn", "heat_transfer", "blowby", "valve_flow", "boundary", "knock"):
            for sv in m[role].states():
                self.sub_specs.append((role, m[role], sv))
        # simulation.zones: two: the unburned and burned zones' own states (cyclesim.loops.zones)
        self.zones = getattr(batch.simulation, "zones", "one") == "two"
        self.zone_specs = [(_zones.ZONE_ROLE, None, sv) for sv in _zones.ZONE_STATES] if self.zones else []
        self.names = CORE + tuple(f"{r}.{sv.name}" for r, _, sv in self.sub_specs + self.zone_specs)
        self.n = len(self.names)
        self.failed: list[Any] = [None] * self.B
        self.alive = np.ones(self.B, dtype=bool)
        self.all_alive = True
        self.p_ivc = np.full(self.B, np.nan)
        self.T_ivc = np.full(self.B, np.nan)
        self.V_ivc = np.full(self.B, np.nan)
        self._plenum_cache: dict | None = None
        self.valve_source = None   # StepValveFlows of the runners' sides (cyclesim.solve.valve_source)
        self.sub_names = self.names[len(CORE):]
        self._shape_B = (self.B,)
        self._zeros = np.zeros(self.B)
        self._all_closed = np.ones(self.B, dtype=bool)
        # smoothing mass of the port buffer [kg]: large enough that the buffer's drain
        # is not stiff at the step, small against the trapped mass
        self._buf_scale = 1e-2 * batch.geometry.Vd * 1.1 * np.ones(self.B)
        self._dh298 = np.asarray(self.gas.h298_u - self.gas.h298_b, float) * np.ones(self.B)
        if self.zones:
            self.zone_tab = _zones.ZoneTables(self.gas)
            self._zone_rows = [self.names.index(f"{_zones.ZONE_ROLE}.{sv.name}") for sv in _zones.ZONE_STATES]
            self._T_wall_mean = sum(self.Tw) / 3.0
            self._case = np.arange(self.B)
            # no flame where the fuel is cut: the charge stays one (unburned) zone
            self._flame = ~(np.asarray(getattr(batch.operating, "fuel_cut", False), bool) * np.ones(self.B, bool))

    def plenums(self, theta: float, sub):
        cache = self._plenum_cache
        if cache is not None and getattr(self.bnd, "constant", False):
            return cache
        if cache is not None and getattr(self.bnd, "fixed_gas", False):
            try:
                p_i = self.bnd.intake(theta, sub)[0]
                p_e = self.bnd.exhaust(theta, sub)[0]
            except CyclesimError:
                raise
            except Exception as exc:  # noqa: BLE001
                raise PluginError(f"boundary model {self.bnd.name!r} raised {type(exc).__name__} at crank"
                                  f" angle {theta:.2f} deg: {exc}") from exc
            ci, ce = cache["int"], cache["exh"]
            return {"int": (np.asarray(p_i, float) * np.ones(self.B),) + ci[1:],
                    "exh": (np.asarray(p_e, float) * np.ones(self.B),) + ce[1:]}
        g = self.gas
        try:
            p_i, T_i, y_i = self.bnd.intake(theta, sub)
            p_e, T_e = self.bnd.exhaust(theta, sub)
        except CyclesimError:
            raise
        except Exception as exc:  # noqa: BLE001
            raise PluginError(f"boundary model {self.bnd.name!r} raised {type(exc).__name__} at crank"
                              f" angle {theta:.2f} deg: {exc}") from exc
        ones = np.ones(self.B)
        p_i, T_i, y_i, p_e, T_e = (np.asarray(a, float) * ones for a in (p_i, T_i, y_i, p_e, T_e))
        # plenum gas properties: density from p = rho R T (two fixed-point passes)
        out = {}
        for key, p, T, y in (("int", p_i, T_i, y_i), ("exh", p_e, T_e, ones)):
            rho = p / (287.0 * T)
            for _ in range(3):
                mp = g.mixture(T, rho, y)
                rho = p / (mp.R * T)
            mp = g.mixture(T, rho, y)
            out[key] = (p, T, y, mp.R, mp.gamma, mp.u + mp.R * T)
        self._plenum_cache = out
        return out

    # -- the right-hand side ----------------------------------------------
    def _shape(self, x, role: str, what: str) -> np.ndarray:
        if type(x) is np.ndarray and x.shape == self._shape_B:
            return x
        x = np.asarray(x, dtype=float)
        if x.ndim == 0:
            return np.full(self.B, float(x))
        if x.shape != self._shape_B:
            model = self.b.models[role]
            raise PluginError(
                f"{role} model {model.name!r}: {what} returned shape {x.shape}, expected ({self.B},)"
            )
        return x

    def _nonfinite(self, theta: float, parts: list, out: np.ndarray) -> np.ndarray:
        """Stop the cases whose derivatives are not finite, naming the submodel responsible."""
        bad = ~np.isfinite(out).all(axis=0)
        for i in np.flatnonzero(bad & self.alive):
            culprit = None
            for role, what, arr in parts:
                if arr is not None and not np.isfinite(arr[i]):
                    culprit = (role, what)
                    break
            if culprit:
                model = self.b.models[culprit[0]]
                msg = (f"{culprit[0]} model {model.name!r} returned a non-finite {culprit[1]} at crank angle"
                       f" {theta:.2f} deg")
            else:
                msg = (f"solver: non-finite state derivative at crank angle {theta:.2f} deg"
                       f" (gas properties out of range?)")
            self.failed[i] = msg
        self.kill(bad)
        out[:, bad] = 0.0
        return out

    def _bad_state(self, theta: float, y: np.ndarray) -> np.ndarray:
        """Stop the cases whose mass is not positive or whose mass or temperature is not finite
        (within a step's stages too); a harmless stand-in state."""
        bad = ~(np.isfinite(y[_T]) & np.isfinite(y[_M]) & (y[_M] > 0.0))
        for i in np.flatnonzero(bad & self.alive):
            if np.isfinite(y[_M, i]) and y[_M, i] <= 0.0:
                self.failed[i] = (f"solver: the cylinder emptied within a step at crank angle {theta:.2f} deg"
                                  f" (mass {y[_M, i]:.3g} kg): the flow through the valves changes the cylinder"
                                  f" faster than the step resolves; reduce simulation.step_deg, or check the"
                                  f" valve areas and plenum pressures")
            else:
                self.failed[i] = (f"solver: state became non-finite at crank angle {theta:.2f} deg;"
                                  f" try a smaller simulation.step_deg")
        self.kill(bad)
        y = np.where(bad[None, :], 1.0, y)
        y[_T] = np.where(bad, 1000.0, y[_T])
        y[IDX["m_b"]] = y[IDX["m_b"]] * 0.5
        return y

    def __call__(self, theta: float, y: np.ndarray, geo: tuple, valves_open: bool = True) -> np.ndarray:
        """Crank-angle derivatives (n_state, B) at ``theta``.

        ``geo`` holds the per-point arrays ``(V, dV, A_head, A_piston, A_liner)`` and
        optionally ``(closed, burning, any_burning)`` precomputed for the grid point.
        """
        if len(geo) == 5:
            V, dV, Ah, Ap, Al = geo
            closed = burning = None
            any_burn = True
        else:
            V, dV, Ah, Ap, Al, closed, burning, any_burn = geo
        # one product catches a non-finite mass or temperature of any case, the least mass an emptied one
        if not math.isfinite(float(np.dot(y[_M], y[_T]))) or not float(y[_M].min()) > 0.0:
            y = self._bad_state(theta, y)
        m = y[_M]
        T = y[_T]
        mb = y[IDX["m_b"]]
        xb = y[IDX["x_b"]]
        B = self.B
        rho = m / V
        yb = np.minimum(np.maximum(mb / m, 0.0), 1.0)
        mp = self.gas.mixture(T, rho, yb)
        R = mp.R
        RT = R * T
        p = rho * RT
        u = mp.u
        h = u + RT
        ncore = len(CORE)
        sub = {nm: y[ncore + i] for i, nm in enumerate(self.sub_names)}
        full = self.mode == "full"
        flows = full and (valves_open or self.valve_source is not None)
        if full:
            pl = self.plenums(theta, sub)
            p_i, T_i, y_i, R_i, g_i, h_i = pl["int"]
            p_e, T_e, y_e, R_e, g_e, h_e = pl["exh"]
            if closed is None:
                th = theta if theta < 360.0 else theta - 720.0
                closed = (th >= self.ivc) & (th < self.evo)
        else:
            p_i = T_i = y_i = R_i = g_i = h_i = p_e = T_e = R_e = g_e = h_e = None
            closed = self._all_closed
        if burning is None:
            burning = (theta >= self.soc) & closed
            any_burn = bool(burning.any())
        T_u = self._zeros
        if self.zones:
            # the two zones' pressure and temperatures from U, V and the zone states
            m_bz, s_u = y[self._zone_rows[0]], y[self._zone_rows[1]]
            p, T_u, T_b, y_u, active, _ = _zones.cylinder_zones(
                self.gas, self.zone_tab, self._case, m, V, m * u, mb, m_bz, s_u, p, T, self.T_ivc, self.p_ivc,
                closed)
            h = np.where(active, u + p / rho, h)
        s = _new_state()
        s.theta = theta
        s.omega_deg = self.omega
        s.V = V
        s.dV = dV
        s.A_head = Ah
        s.A_piston = Ap
        s.A_liner = Al
        s.Sp = self.Sp
        s.m = m
        s.T = T
        s.p = p
        s.T_u = T_u
        s.rho = rho
        s.R = R
        s.cv = mp.cv
        s.cp = mp.cp
        s.gamma = mp.gamma
        s.y_b = yb
        s.x_b = xb
        s.burning = burning
        s.closed = closed
        s.p_ivc = self.p_ivc
        s.T_ivc = self.T_ivc
        s.V_ivc = self.V_ivc
        s.T_wall_head, s.T_wall_piston, s.T_wall_liner = self.Tw
        s.p_int = p_i
        s.T_int = T_i
        s.R_int = R_i
        s.gamma_int = g_i
        s.y_b_int = y_i
        s.p_exh = p_e
        s.T_exh = T_e
        s.R_exh = R_e
        s.gamma_exh = g_e
        s.mdot_int = s.mdot_exh = s.mdot_blowby = s.Qdot_wall = None
        s.sub = sub
        s.geometry = self.b.geometry
        s.gas = self.gas
        stage = ("burn", "rate")
        try:
            # the rate only matters where a case burns (it is masked below)
            dxb = self._shape(self.burn.rate(s), "burn", "burn rate") if any_burn else None
            stage = ("heat_transfer", "heat_flow")
            Qw = self._shape(self.ht.heat_flow(s), "heat_transfer", "heat flow")
            stage = ("blowby", "mass_flow")
            mbb = np.maximum(self._shape(self.bb.mass_flow(s), "blowby", "mass flow"), 0.0)
            if flows:
                stage = ("valve_flow", "mass_flows")
                mi, me = self.vf.mass_flows(s)
                mi = self._shape(mi, "valve_flow", "intake mass flow")
                me = self._shape(me, "valve_flow", "exhaust mass flow")
                ext = self.valve_source
                if ext is not None:
                    mi = ext.mdot_int if ext.has_int else mi
                    me = ext.mdot_exh if ext.has_exh else me
            else:
                mi = me = self._zeros
            s.mdot_int, s.mdot_exh, s.mdot_blowby, s.Qdot_wall = mi, me, mbb, Qw
            subd = []
            for role, model, sv in self.sub_specs:
                stage = (role, "derivatives")
                d = model.derivatives(s)
                val = d.get(sv.name) if hasattr(d, "get") else None
                if val is None:
                    raise PluginError(
                        f"{role} model {model.name!r}: derivatives() gave no value for state {sv.name!r}")
                subd.append(self._shape(val, role, f"derivative of {sv.name}"))
        except (PluginError, SolverError):
            raise
        except Exception as exc:  # noqa: BLE001
            model = self.b.models[stage[0]]
            raise PluginError(
                f"{stage[0]} model {model.name!r} raised {type(exc).__name__} in {stage[1]}() at crank"
                f" angle {theta:.2f} deg{raised_at(exc, model)}: {exc or '(no message)'}"
            ) from exc

        dt = self.dt_dth
        out = np.zeros((self.n, B))
        mul = np.multiply
        if dxb is not None:
            dxb = np.where(burning, dxb, 0.0)
            dm_burn = burned_mass_rate(self.eta_c, dxb, xb, m, mb)
            out[IDX["x_b"]] = dxb
            mul(dm_burn, self._dh298, out=out[IDX["Q_burn"]])
        else:
            dxb = dm_burn = self._zeros
        fbb = mul(mbb, dt, out=out[IDX["m_bb"]])
        fi = fe = self._zeros
        yin_i = hin_i = yin_e = hin_e = None
        if flows:
            fi = mul(mi, dt, out=out[IDX["m_int"]])
            fe = mul(me, dt, out=out[IDX["m_exh"]])
            ext = self.valve_source
            if ext is not None and ext.has_int:
                # a runner's step: its gas, no port buffer (the runner holds the backflow)
                yin_i, hin_i = ext.y_int, ext.h_int
                mul(fi, 1.0 - yin_i, out=out[IDX["mu_int"]])
            elif mi.any() and not self.port_buffer:
                yin_i, hin_i = plenum_inflow(fi, y_i, h_i, yb, h)
                mul(fi, 1.0 - yin_i, out=out[IDX["mu_int"]])
            elif mi.any():
                # the intake-port buffer of backflowed gas returns first (cyclesim.loops.balance.port_buffer)
                yin_i, hin_i, *buf = port_buffer(fi, y[IDX["m_ibuf"]], y[IDX["mb_ibuf"]], y[IDX["H_ibuf"]],
                                                 self._buf_scale, y_i, h_i, yb, h)
                out[IDX["m_ibuf"]], out[IDX["mb_ibuf"]], out[IDX["H_ibuf"]] = buf
                mul(fi, 1.0 - yin_i, out=out[IDX["mu_int"]])
            yin_e, hin_e = (ext.y_exh, ext.h_exh) if ext is not None and ext.has_exh else \
                exhaust_inflow(fe, h_e, yb, h)
            mul(fe, 1.0 - yin_e, out=out[IDX["mu_exh"]])
        # no flow through a valve: its inflow carries the cylinder's own gas (zero times it)
        yin_i = yb if yin_i is None else yin_i
        hin_i = h if hin_i is None else hin_i
        yin_e = yb if yin_e is None else yin_e
        hin_e = h if hin_e is None else hin_e
        dQ = mul(Qw, dt, out=out[IDX["Q_w"]])
        rates = first_law(m, V, dV, p, u, mp.u_T, mp.u_lnrho, mp.u_y, yb, h, dm_burn, fi, yin_i, hin_i,
                          fe, yin_e, hin_e, fbb, dQ)
        for r, val in zip(_LAW_ROWS, rates):
            out[r] = val
        mul(fbb, 1.0 - yb, out=out[IDX["mu_bb"]])
        for k, val in enumerate(subd):
            mul(val, dt, out=out[ncore + k])
        if self.zones:
            out[self._zone_rows] = _zones.zone_rates(closed, m, m_bz, y_u, T_u, T_b, self._T_wall_mean,
                                                     dm_burn * self._flame, fbb, dQ,
                                                     self._burned_area(s, T_u, y_u, m_bz))
        if not math.isfinite(float(out.sum())):
            parts = [("burn", "burn rate", dxb), ("heat_transfer", "heat flow", Qw),
                     ("blowby", "mass flow", mbb), ("valve_flow", "intake mass flow", mi),
                     ("valve_flow", "exhaust mass flow", me)]
            parts += [(r, f"derivative of {sv.name}", v) for (r, _, sv), v in zip(self.sub_specs, subd)]
            out = self._nonfinite(theta, parts, out)
        if not self.all_alive:
            out[:, ~self.alive] = 0.0
        return out

    def _burned_area(self, s, T_u, y_u, m_bz):
        """The burned zone's share [-] of the wall area where the burn's flame geometry gives it, else
        None (:meth:`cyclesim.roles.BurnRate.burned_wall_share`)."""
        V_b = s.V - (s.m - m_bz) * self.zone_tab.R_u(y_u, self._case) * T_u / s.p
        try:
            a = self.burn.burned_wall_share(s, V_b)
        except Exception as exc:  # noqa: BLE001
            raise PluginError(f"burn model {self.burn.name!r} raised {type(exc).__name__} in burned_wall_share():"
                              f" {exc}") from exc
        return None if a is None else self._shape(a, "burn", "burned wall share")

    def fun(self, theta: float, y: np.ndarray) -> np.ndarray:
        """dy/dtheta (n_state, B) at crank angle ``theta`` [deg], in the shape of scipy.integrate's
        ``fun(t, y)``: the geometry at ``theta``, the valve, burn and closed-part masks derived there
        (the cycle loop precomputes the same at its grid points)."""
        g = self.b.geometry
        ones = np.ones(self.B)
        geo = (g.volume(theta) * ones, g.dV_dtheta(theta) * ones, *(np.asarray(a) * ones for a in g.areas(theta)))
        with np.errstate(all="ignore"):
            return self(theta, y, geo)

    def kill(self, bad: np.ndarray) -> None:
        """Mark cases (bool mask (B,)) as stopped: their derivatives are zero from now on."""
        self.alive &= ~bad
        self.all_alive = bool(self.alive.all())


def _new_state() -> GasState:
    """An empty GasState, filled slot by slot in the right-hand side (faster than keywords)."""
    return GasState.__new__(GasState)


def _initial_state(batch, rhs: _RHS, theta0: float, mode: str) -> np.ndarray:
    g = batch.gas
    geo = batch.geometry
    op = batch.operating
    V = geo.volume(theta0) * np.ones(batch.B)
    if mode == "closed":
        p = op.ivc_pressure_bar * 1e5
        T = op.ivc_temperature_K * np.ones(batch.B)
        yb = op.residual_fraction * np.ones(batch.B)
    else:
        p = op.exhaust_pressure_bar * 1e5
        T = op.exhaust_temperature_K * np.ones(batch.B)
        yb = np.ones(batch.B)
    rho = p / (287.0 * T)
    for _ in range(4):
        rho = p / (g.mixture(T, rho, yb).R * T)
    m = rho * V
    if mode == "full" and getattr(batch.simulation, "start", "plain") == "estimate":
        from .residual_start import start_state   # simulation.start: the ideal-cycle residual

        m, T, yb, _ = start_state(batch, V, rhs, plain=(m, T, yb))
    y = np.zeros((rhs.n, batch.B))
    y[0], y[1], y[2] = m, T, yb * m
    _initial_sub(rhs, y)
    if mode == "closed":
        rhs.p_ivc, rhs.T_ivc, rhs.V_ivc = p * np.ones(batch.B), T.copy(), V.copy()
    return y



def integrate(batch, progress=None, initial: np.ndarray | None = None,
              cycles: int | None = None, step_scale: float = 1.0, _max_cycles: int | None = None,
              events: tuple = ()) -> CycleTrace:
    """Integrate a batch: one closed cycle, or full cycles to periodic steady state.

    Parameters
    ----------
    batch : Batch
    progress : callable, optional
        Called with the cycle number after each cycle.
    initial : ndarray (n_state, B), optional
        Full mode: the state at -360 deg to start from (e.g. the end state of a
        previous cycle, for cycles coupled through their residual gas).
    cycles : int, optional
        Full mode: run exactly this many cycles and report the last one, without
        the convergence test (and without acceleration).
    step_scale : float
        Multiplier of the step (the coarse start-up cycles use 4 and 2).
    events : tuple of CycleEvent
        Events beyond IVC, EVO and spark (:mod:`cyclesim.solve.events`), e.g. the creation of state
        during the cycle; an event that acts in Python runs the numpy loop.

    Notes
    -----
    The parts: the cylinder system :class:`_RHS` (``fun(theta, y)``), the stepper
    (:mod:`cyclesim.solve.stepper`), one cycle on the grid (:mod:`cyclesim.solve.cycle_run`, compiled where
    numba is installed and every submodel of the batch has a compiled form, else the numpy loop,
    which is the reference), the events (:mod:`cyclesim.solve.events`) and the periodic-steady-state
    driver (:mod:`cyclesim.solve.periodic`).
    """
    from ..config.runners import has_runners

    runners = None
    if has_runners(batch.cases[0]):
        # the pipe package (its compiled kernels loaded at import) only for a batch with runners:
        # build_runners gives None for a batch whose first case has none
        from ..pipes.runners import build_runners

        runners = build_runners(batch)
    if runners is not None and initial is not None and not runners.carried:
        raise ConfigError("runners: a run from a given cylinder state needs the runners' state too: keep the"
                          " batch's runners (cyclesim.pipes.runners.carry_runners) and set their rows"
                          " (cyclesim.traces.synthesis.one_cycle)")
    system = CylinderSystem(batch, _RHS, _initial_state, tuple(events), runners)
    return solve(system, progress, initial, cycles, step_scale, _max_cycles)


def _interp_at(theta, Yr, Fr, at):
    return hermite(theta, Yr, Fr, np.asarray(at, float))
