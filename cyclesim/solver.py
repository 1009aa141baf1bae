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
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .errors import CyclesimError, PluginError, SolverError
from .layout import CORE  # the state's names, declared once  # noqa: F401
from .layout import CORE_ROWS as IDX  # noqa: F401
from .layout import TOTALS as _TOTALS  # running totals, reset at the start of a cycle
from .roles import GasState
from .stepper import KUTTA3, TABLEAU, combine  # noqa: F401


@dataclass
class CycleTrace:
    """Raw solver output for one batch on the integration grid.

    ``Y`` and ``F`` have shape (n_state, B, N+1): states and their crank-angle
    derivatives [unit/deg] at each grid point ``theta`` (N+1,).
    """

    theta: np.ndarray
    Y: np.ndarray
    F: np.ndarray
    names: tuple[str, ...]
    cycles: np.ndarray          # (B,) cycles run to the reported one
    converged: np.ndarray       # (B,) bool
    history: list               # per cycle: (imep_net (B,), m_trapped (B,))
    failed: list                # per case: None or message
    ivc_state: dict = field(default_factory=dict)
    loop: str = ""              # the cycle loop that ran: "compiled", or "numpy (why)"

    def row(self, name: str) -> int:
        return self.names.index(name)


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
        self.names = CORE + tuple(f"{r}.{sv.name}" for r, _, sv in self.sub_specs)
        self.n = len(self.names)
        self.failed: list[Any] = [None] * self.B
        self.alive = np.ones(self.B, dtype=bool)
        self.all_alive = True
        self.p_ivc = np.full(self.B, np.nan)
        self.T_ivc = np.full(self.B, np.nan)
        self.V_ivc = np.full(self.B, np.nan)
        self._plenum_cache: dict | None = None
        self.sub_names = self.names[len(CORE):]
        self._shape_B = (self.B,)
        self._zeros = np.zeros(self.B)
        self._all_closed = np.ones(self.B, dtype=bool)
        # smoothing mass of the port buffer [kg]: large enough that the buffer's drain
        # is not stiff at the step, small against the trapped mass
        self._buf_scale = 1e-2 * batch.geometry.Vd * 1.1 * np.ones(self.B)
        self._dh298 = np.asarray(self.gas.h298_u - self.gas.h298_b, float) * np.ones(self.B)

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
        bad = ~(np.isfinite(y[1]) & np.isfinite(y[0]) & (y[0] > 0.0))
        for i in np.flatnonzero(bad & self.alive):
            if np.isfinite(y[0, i]) and y[0, i] <= 0.0:
                self.failed[i] = (f"solver: the cylinder emptied within a step at crank angle {theta:.2f} deg"
                                  f" (mass {y[0, i]:.3g} kg): the flow through the valves changes the cylinder"
                                  f" faster than the step resolves; reduce simulation.step_deg, or check the"
                                  f" valve areas and plenum pressures")
            else:
                self.failed[i] = (f"solver: state became non-finite at crank angle {theta:.2f} deg;"
                                  f" try a smaller simulation.step_deg")
        self.kill(bad)
        y = np.where(bad[None, :], 1.0, y)
        y[1] = np.where(bad, 1000.0, y[1])
        y[2] = y[2] * 0.5
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
        if not math.isfinite(float(np.dot(y[0], y[1]))) or not float(y[0].min()) > 0.0:
            y = self._bad_state(theta, y)
        m = y[0]
        T = y[1]
        mb = y[2]
        xb = y[3]
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
        flows = full and valves_open
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
            # burn: fraction of the *remaining* fresh charge, so blowby cannot burn charge twice
            eta = self.eta_c
            dxb = np.where(burning, dxb, 0.0)
            # the floor of the denominator keeps the rate bounded when x_b reaches 1 between grid
            # points (it only slows the last 0.1 % of a burn)
            dm_burn = eta * dxb / np.maximum(1.0 - eta * xb, 1e-3) * np.maximum(m - mb, 0.0)
            out[3] = dxb
            mul(dm_burn, self._dh298, out=out[15])
        else:
            dxb = dm_burn = self._zeros
        fbb = mul(mbb, dt, out=out[6])
        if flows and not mi.any():
            # intake shut for every case: only the exhaust valves exchange gas
            fe = mul(me, dt, out=out[12])
            ine = fe > 0
            yin_e = np.where(ine, 1.0, yb)
            dHe = mul(fe, np.where(ine, h_e, h), out=out[13])
            mul(fe, 1.0 - yin_e, out=out[14])
            dm = fe - fbb
            dmb = dm_burn + fe * yin_e - fbb * yb
            dHflow = dHe
        elif flows:
            fi = mul(mi, dt, out=out[9])
            fe = mul(me, dt, out=out[12])
            inn = fi > 0
            # intake-port buffer of backflowed gas: returns first (smooth share w); with an
            # empty buffer w = 0 and the plenum gas alone comes in
            mq = np.maximum(y[16], 0.0)
            w = mq / (mq + self._buf_scale)
            mq_safe = np.where(mq > 0, mq, 1.0)
            yq = np.minimum(np.maximum(y[17] / mq_safe, 0.0), 1.0)
            hq = y[18] / mq_safe
            yin_i = np.where(inn, w * yq + (1.0 - w) * y_i, yb)
            hin_i = np.where(inn, w * hq + (1.0 - w) * h_i, h)
            wfi = w * fi
            np.negative(np.where(inn, wfi, fi), out=out[16])      # >0 leaves the buffer; <0 enters
            np.negative(np.where(inn, wfi * yq, fi * yb), out=out[17])
            np.negative(np.where(inn, wfi * hq, fi * h), out=out[18])
            ine = fe > 0
            yin_e = np.where(ine, 1.0, yb)
            hin_e = np.where(ine, h_e, h)
            dm = fi + fe - fbb
            dmb = dm_burn + fi * yin_i + fe * yin_e - fbb * yb
            dHi = mul(fi, hin_i, out=out[10])
            dHe = mul(fe, hin_e, out=out[13])
            mul(fi, 1.0 - yin_i, out=out[11])
            mul(fe, 1.0 - yin_e, out=out[14])
            dHflow = dHi + dHe
        else:
            dm = -fbb
            dmb = dm_burn - fbb * yb
            dHflow = 0.0
        dHbb = mul(fbb, h, out=out[7])
        dQ = mul(Qw, dt, out=out[5])
        pdV = mul(p, dV, out=out[4])
        dU = dHflow - pdV - dQ - dHbb
        dlnrho = dm / m - dV / V
        dy = (dmb - yb * dm) / m
        out[0] = dm
        out[1] = ((dU - u * dm) / m - mp.u_lnrho * dlnrho - mp.u_y * dy) / mp.u_T
        out[2] = dmb
        mul(fbb, 1.0 - yb, out=out[8])
        for k, val in enumerate(subd):
            mul(val, dt, out=out[ncore + k])
        if not math.isfinite(float(out.sum())):
            parts = [("burn", "burn rate", dxb), ("heat_transfer", "heat flow", Qw),
                     ("blowby", "mass flow", mbb), ("valve_flow", "intake mass flow", mi),
                     ("valve_flow", "exhaust mass flow", me)]
            parts += [(r, f"derivative of {sv.name}", v) for (r, _, sv), v in zip(self.sub_specs, subd)]
            out = self._nonfinite(theta, parts, out)
        if not self.all_alive:
            out[:, ~self.alive] = 0.0
        return out

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


def _initial_sub(rhs: _RHS, y: np.ndarray, which=None) -> None:
    k = len(CORE)
    for role, model, sv in rhs.sub_specs:
        if which is None or sv.reset_at_ivc:
            if isinstance(sv.initial, str):
                src = {"T_ivc": y[1]}.get(sv.initial)
                if src is None:
                    raise PluginError(f"{role} state {sv.name!r}: unknown initial value {sv.initial!r}")
                val = src if which is None else np.where(which, src, y[k])
            else:
                init = np.asarray(sv.initial, float) * np.ones(rhs.B)
                val = init if which is None else np.where(which, init, y[k])
            y[k] = val
        k += 1


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
    y = np.zeros((rhs.n, batch.B))
    y[0], y[1], y[2] = m, T, yb * m
    _initial_sub(rhs, y)
    if mode == "closed":
        rhs.p_ivc, rhs.T_ivc, rhs.V_ivc = p * np.ones(batch.B), T.copy(), V.copy()
    return y


EVENT_FINE_DEG = 20.0
"""With a valve open the step is ``simulation.step_deg`` within this many degrees of a valve
opening or closing and while intake and exhaust are both open (overlap); elsewhere in the
strokes with a valve open (the flow is smooth there) it is twice the step.  On the demo this
moves net IMEP, peak pressure and PMEP by less than 5e-6 (relative or bar) and cuts the
cycle's cost by about a quarter; against a tenfold finer step net IMEP stays within 2.8e-5
(relative) on the demo and at 1500 rpm / 0.4 bar, 2000 / 0.6, 3000 / 0.5 and 6000 rpm
(measured).  A 10 deg margin was measured slower, not faster."""
CLOSED_STEP_FACTOR = 4
"""While every valve of a batch is shut the step is this many times ``simulation.step_deg``.

The gas exchange sets the step (flow through an open valve is the fastest process); with the
valves shut the cylinder state changes smoothly, and on the demo the closed part at four times
the step changes net IMEP, peak pressure and the burn angles by less than 1e-5 (relative or
degrees) against a tenfold finer step.  The coarse steps lie on the fine lattice, so refining
``step_deg`` refines every part of the cycle alike."""


MIN_FEATURE_STEPS = 16
"""Fewest steps across a model's shortest feature (``shortest_feature_deg_for``): the longer
closed-part step is taken only as far as this allows."""


def closed_step_factor(case, classes: dict) -> int:
    """Multiple of the step used where all valves are shut, for one case.

    :data:`CLOSED_STEP_FACTOR`, capped by every chosen submodel's
    ``closed_step_limit_for(params, step)`` and so that :data:`MIN_FEATURE_STEPS` steps span
    its ``shortest_feature_deg_for(params)``; ``classes`` maps role -> submodel class.
    Depends only on the case's own settings (cases share a batch only if it is equal).
    """
    from .config import effective_step_deg

    step = effective_step_deg(case.simulation, float(case.operating.speed_rpm))
    k = CLOSED_STEP_FACTOR
    for role, cls in classes.items():
        params = case.submodels[role].params
        lim = cls.closed_step_limit_for(params, step)
        if lim is not None:
            k = max(1, min(k, int(lim)))
        feature = cls.shortest_feature_deg_for(params)
        if feature is not None:
            k = max(1, min(k, int(float(feature) / (MIN_FEATURE_STEPS * step))))
    return k


def grid_for(batch, mode: str, step_scale: float = 1.0) -> np.ndarray:
    """Crank grid [deg] of one cycle: -360..360 (full) or IVC..EVO (closed).

    Full mode: the step ``h`` (``simulation.step_deg``, scaled for low speed and by
    ``step_scale``) near valve events and in the overlap (:data:`EVENT_FINE_DEG`), ``2 h``
    elsewhere while any valve of any case of the batch is open, and
    ``CLOSED_STEP_FACTOR * h`` on the stretches of that lattice where all are shut.
    Closed mode: uniform at ``CLOSED_STEP_FACTOR * h``.  A submodel's
    ``closed_step_limit`` caps the factor.
    """
    from .config import effective_step_deg

    h = effective_step_deg(batch.simulation, float(batch.operating.speed_rpm[0])) * step_scale
    k = getattr(batch, "_closed_step_k", None)       # fixed by the cases' settings: once per batch
    if k is None:
        classes = {role: type(model) for role, model in batch.models.items()}
        k = min(closed_step_factor(c, classes) for c in batch.cases)
        batch._closed_step_k = k
    if mode == "full":
        n = max(int(round(720.0 / h)), 8)
        fine = np.linspace(-360.0, 360.0, n + 1)
        if k <= 1 or n % k:
            return fine
        half = np.linspace(-360.0, 360.0, 2 * n + 1)
        areas = batch.models["valve_flow"].flow_area(half)
        # where any case of the batch has its intake (ai) or exhaust (ae) valves open
        ai = (np.asarray(areas["intake"]) > 0).any(axis=0)
        ae = (np.asarray(areas["exhaust"]) > 0).any(axis=0)
        opn = ai | ae
        # coarse interval c spans fine nodes c k .. (c+1) k, i.e. half points 2ck .. 2(c+1)k
        nc = n // k
        cuts = opn[: 2 * k * nc].reshape(nc, 2 * k).any(axis=1) | opn[2 * k::2 * k][:nc]
        shut = ~cuts
        j = np.arange(n + 1)
        inner = (j % k != 0) & shut[np.minimum(j // k, nc - 1)]
        if EVENT_FINE_DEG > 0 and k % 2 == 0:
            chg = np.zeros(half.size, dtype=bool)
            for a in (ai, ae):
                d = np.flatnonzero(a[1:] != a[:-1])
                for i0 in d:
                    chg[np.abs(half - half[i0]) <= EVENT_FINE_DEG] = True
            ev = chg | (ai & ae)
            # blocks of two fine intervals (half points 4c .. 4c+4) away from events: one double step
            nb = n // 2
            evb = ev[: 4 * nb].reshape(nb, 4).any(axis=1) | ev[4::4][:nb]
            mid_inner = (j % 2 == 1) & ~evb[np.minimum(j // 2, nb - 1)]
            inner = inner | mid_inner
        return fine[~inner]
    a = float(batch.valves.ivc_deg[0])
    b = float(batch.valves.evo_deg[0])
    H = h * k
    n = max(int(math.ceil((b - a) / H - 1e-9)), 8)
    return np.linspace(a, b, n + 1)


def _points(theta: np.ndarray) -> np.ndarray:
    """Grid points and step midpoints, interleaved (2N+1,)."""
    pts = np.empty(2 * len(theta) - 1)
    pts[0::2] = theta
    pts[1::2] = 0.5 * (theta[:-1] + theta[1:])
    return pts


COARSE_SCHEDULE = ((4.0, 1), (2.0, 1))
"""Full mode, from the default start state: (step multiple, cycles) run first (cheap), then the
fine cycles until settled.  The residual state converges by a factor of about 30 per cycle: the
first cycle at four times the step takes the state from the exhaust conditions to within a
few per cent, one at twice the step close to the periodic state, and the fine cycles settle in
two or three.  The schedule depends only on the case's own settings, so batch-mates do not
affect a result."""
COARSE_CYCLES = sum(n for _, n in COARSE_SCHEDULE)
LOOP_RERUN = "compiled (a cycle re-run on the numpy loop to stop a failing case)"
"""CycleTrace.loop of an integration whose compiled loop handed a cycle to the numpy loop."""
COARSE_STEP_MAX_DEG = 2.0
"""Largest start-up step [deg] (the demo's 0.5 deg step gives 2 deg, then 1 deg)."""


def integrate(batch, progress=None, initial: np.ndarray | None = None,
              cycles: int | None = None, step_scale: float = 1.0, _max_cycles: int | None = None) -> CycleTrace:
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
        the convergence test.
    step_scale : float
        Multiplier of the step (the coarse start-up cycles use 4 and 2).

    Notes
    -----
    Each cycle runs on the compiled loop where numba is installed and every submodel of the
    batch has a compiled form (:mod:`cyclesim.kernel`), else on the numpy loop here
    (``_python_cycle``), which is the reference; the bookkeeping between cycles (convergence,
    the reported cycle, the IVC state) is the same for both.
    """
    mode = batch.simulation.mode
    coarse = None
    if mode == "full" and initial is None and cycles is None and COARSE_CYCLES > 0 \
            and int(batch.simulation.max_cycles) > COARSE_CYCLES + 1:
        fresh = _initial_state(batch, _RHS(batch, mode), -360.0, mode)
        start = None
        history: list = []
        reran = False
        from .config import effective_step_deg

        h0 = effective_step_deg(batch.simulation, float(batch.operating.speed_rpm[0])) * step_scale
        for scale, n_cyc in COARSE_SCHEDULE:
            # the start-up step stays within COARSE_STEP_MAX_DEG (explicit steps through an open
            # valve lose stability beyond a few degrees), never below the fine step
            scale = max(1.0, min(scale, COARSE_STEP_MAX_DEG / h0))
            coarse = integrate(batch, initial=start, cycles=n_cyc, step_scale=scale * step_scale)
            start = coarse.end_state.copy()
            bad = np.array([f is not None for f in coarse.failed]) | ~np.isfinite(start).all(axis=0)
            start[:, bad] = fresh[:, bad]         # a case that failed a coarse cycle starts afresh
            start[_TOTALS] = 0.0
            history += coarse.history
            reran = reran or coarse.loop == LOOP_RERUN
        tr = integrate(batch, progress=progress, initial=start, cycles=None, step_scale=step_scale,
                       _max_cycles=int(batch.simulation.max_cycles) - COARSE_CYCLES)
        tr.cycles = tr.cycles + COARSE_CYCLES
        tr.history = history + tr.history
        if reran:
            tr.loop = LOOP_RERUN
        return tr
    rhs = _RHS(batch, mode)
    theta = grid_for(batch, mode, step_scale)
    N = len(theta) - 1
    steps = np.diff(theta)
    # geometry, valve and combustion masks at grid points and midpoints, computed once
    half = _points(theta)
    geo = batch.geometry
    B = batch.B
    # geometry of the distinct cases (one row where a batch shares its engine), columns per point
    geo_u, geo_rows = geo.distinct()
    Gu = [np.ascontiguousarray(np.broadcast_to(a, (geo_u.B, 2 * N + 1)).T)
          for a in (geo_u.volume(half), geo_u.dV_dtheta(half), *geo_u.areas(half))]
    if mode == "full":
        thw = np.where(half < 360.0, half, half - 720.0)[:, None]
        closed_pts = (thw >= rhs.ivc[None, :]) & (thw < rhs.evo[None, :])
    else:
        closed_pts = np.ones((2 * N + 1, B), dtype=bool)
    burning_pts = (half[:, None] >= rhs.soc[None, :]) & closed_pts
    th_pts = half.tolist()
    geo_pts: list = []

    def point_geometry():
        if not geo_pts:
            Gc = [np.ascontiguousarray(a[:, geo_rows]) for a in Gu]   # (2N+1, B): one row per point
            any_burning = burning_pts.any(axis=1).tolist()
            geo_pts.extend((Gc[0][j], Gc[1][j], Gc[2][j], Gc[3][j], Gc[4][j], closed_pts[j],
                            burning_pts[j], any_burning[j]) for j in range(2 * N + 1))
        return geo_pts

    # where no valve of any case is open, the valve-flow terms are skipped
    if mode == "full":
        areas = batch.models["valve_flow"].flow_area(half)
        op_ = (np.asarray(areas["intake"]) > 0).any(axis=0) | (np.asarray(areas["exhaust"]) > 0).any(axis=0)
        op_ = op_ | np.roll(op_, 1) | np.roll(op_, -1)
        open_at = [bool(v) for v in op_]
    else:
        open_at = [False] * (2 * N + 1)

    tab = TABLEAU
    nodes = [int(v) for v in tab.arrays()[4]]

    def _python_cycle(y):
        """One cycle on the Python path from ``y``, into Y and F; returns the end state."""
        geo_pts = point_geometry()
        with np.errstate(all="ignore"):
            for i in range(N):
                th = th_pts[2 * i]
                tn = th_pts[2 * i + 2]
                h = float(steps[i])
                # the scheme is data (cyclesim.stepper.TABLEAU): stages at the grid's points
                ks: list = []
                for st in range(tab.stages):
                    j = 2 * i + nodes[st]
                    ys = y if st == 0 else combine(y, h, tab.a[st], tab.a_den[st], ks)
                    ks.append(rhs(th_pts[j], ys, geo_pts[j], open_at[j]))
                    if st == 0:
                        Y[:, :, i] = y
                        F[:, :, i] = ks[0]
                y = combine(y, h, tab.b, tab.b_den, ks)
                y0, y1 = y[0], y[1]
                ok = (y0 > 0.0) & (y0 < math.inf) & (y1 > 50.0) & (y1 < 8000.0)  # NaN fails all
                if not ok.all():
                    bad = ~ok & rhs.alive
                    for j in np.flatnonzero(bad):
                        rhs.failed[j] = (
                            f"solver: state left the physical range at crank angle {tn:.2f} deg"
                            f" (T = {y[1, j]:.4g} K, m = {y[0, j]:.4g} kg); try a smaller"
                            f" simulation.step_deg or check the submodel parameters"
                        )
                    rhs.kill(bad)
                    y[:, bad] = Y[:, bad, i]
                if mode == "full":
                    hit = (ivc > th) & (ivc <= tn)
                    if hit.any():
                        w = (ivc - th) / h
                        V_i = geo.volume_at(ivc)
                        T_i = (1 - w) * Y[1, :, i] + w * y[1]
                        m_i = (1 - w) * Y[0, :, i] + w * y[0]
                        yb_i = np.clip(((1 - w) * Y[2, :, i] + w * y[2]) / m_i, 0, 1)
                        rho_i = m_i / V_i
                        p_i = rho_i * batch.gas.mixture(T_i, rho_i, yb_i).R * T_i
                        rhs.p_ivc = np.where(hit, p_i, rhs.p_ivc)
                        rhs.T_ivc = np.where(hit, T_i, rhs.T_ivc)
                        rhs.V_ivc = np.where(hit, V_i, rhs.V_ivc)
                        _initial_sub(rhs, y, which=hit)
            Y[:, :, N] = y
            F[:, :, N] = rhs(th_pts[2 * N], y, geo_pts[2 * N], open_at[2 * N])
            return y

    # the compiled cycle where numba is installed and every submodel has a compiled form
    import cyclesim.kernel as kernel

    compiled, loop = kernel.prepare(batch, rhs, half, Gu, geo_rows, closed_pts, burning_pts, open_at)
    y = _initial_state(batch, rhs, theta[0], mode)
    if initial is not None:
        if initial.shape != y.shape:
            raise SolverError(f"initial state has shape {initial.shape}, expected {y.shape}")
        y = np.array(initial, dtype=float)
    n = rhs.n
    Y = np.empty((n, B, N + 1))
    F = np.empty((n, B, N + 1))
    Yfinal = np.empty_like(Y)
    Ffinal = np.empty_like(F)
    cycles_run = np.zeros(B, dtype=int)
    ivc_final = {"p": np.full(B, np.nan), "T": np.full(B, np.nan), "V": np.full(B, np.nan)}
    converged = np.zeros(B, dtype=bool)
    done = np.zeros(B, dtype=bool)
    history = []
    max_cycles = int(batch.simulation.max_cycles) if mode == "full" else 1
    if _max_cycles is not None and mode == "full":
        max_cycles = _max_cycles
    if cycles is not None and mode == "full":
        max_cycles = int(cycles)
    tol = float(batch.simulation.tolerance)
    Vd = geo.Vd * np.ones(B)
    ivc = batch.valves.ivc_deg
    prev = None
    with np.errstate(all="ignore"):
        for cyc in range(1, max_cycles + 1):
            if mode == "full":
                y[_TOTALS] = 0.0
                y[3] = 0.0
            if compiled is not None and rhs.all_alive and compiled.cycle(y, Y, F):
                y = Y[:, :, N].copy()
            else:
                kernel._used["python"] += 1
                if compiled is not None:
                    loop = LOOP_RERUN
                y = _python_cycle(y)
            if progress is not None:
                progress(cyc)
            if mode == "closed":
                Yfinal, Ffinal = Y, F
                cycles_run[:] = 1
                converged[:] = True
                break
            imep = Y[4, :, N] / Vd
            m_tr = _interp_at(theta, Y[0], F[0], ivc)
            history.append((imep.copy(), m_tr.copy()))
            if cycles is not None:
                newly = ~done if cyc == max_cycles else np.zeros(B, dtype=bool)
            elif prev is not None:
                d_imep = np.abs(imep - prev[0]) / np.maximum(np.abs(imep), 1e3)
                d_m = np.abs(m_tr - prev[1]) / np.abs(m_tr)
                newly = (~done) & (d_imep < tol) & (d_m < tol)
            else:
                newly = np.zeros(B, dtype=bool)
            if cycles is None:
                newly |= (~done) & (~rhs.alive)
            if cyc == max_cycles:
                newly |= ~done
            if newly.any():
                if newly.all():
                    Yfinal, Ffinal = Y, F           # every case ends with this cycle: no copy
                else:
                    Yfinal[:, newly] = Y[:, newly]
                    Ffinal[:, newly] = F[:, newly]
                # the IVC state of the reported cycle (a case done early keeps its own, not that
                # of the cycles its batch-mates still run)
                for key, arr in (("p", rhs.p_ivc), ("T", rhs.T_ivc), ("V", rhs.V_ivc)):
                    ivc_final[key] = np.where(newly, arr, ivc_final[key])
                cycles_run[newly] = cyc
                if cycles is not None:
                    converged[newly] = rhs.alive[newly]
                else:
                    settled = (np.ones(B, dtype=bool) if cyc < max_cycles
                               else _settled(imep, m_tr, prev, tol))
                    converged[newly] = rhs.alive[newly] & settled[newly]
                done |= newly
            if done.all():
                break
            prev = (imep, m_tr)
            # the next cycle starts from this one's end state (residual gas carried over)
    trace = CycleTrace(theta, Yfinal, Ffinal, rhs.names, cycles_run, converged, history, rhs.failed, loop=loop)
    trace.end_state = Yfinal[:, :, -1].copy()
    trace.ivc_state = ivc_final if mode == "full" else {"p": rhs.p_ivc, "T": rhs.T_ivc, "V": rhs.V_ivc}
    return trace


def _settled(imep, m_tr, prev, tol):
    if prev is None:
        return np.zeros_like(imep, dtype=bool)
    return (np.abs(imep - prev[0]) / np.maximum(np.abs(imep), 1e3) < tol) & (
        np.abs(m_tr - prev[1]) / np.abs(m_tr) < tol
    )


def interval_of(theta: np.ndarray, at) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Grid interval index, its width [deg] and the local coordinate 0..1 of angles ``at``.

    ``theta`` (N+1,) is increasing, uniform or not; angles outside it extrapolate the
    end intervals.
    """
    a = np.asarray(at, float)
    N = len(theta) - 1
    i = np.clip(np.searchsorted(theta, a, side="right") - 1, 0, N - 1)
    h = theta[i + 1] - theta[i]
    return i, h, (a - theta[i]) / h


def hermite(theta: np.ndarray, Yr: np.ndarray, Fr: np.ndarray, at) -> np.ndarray:
    """Cubic Hermite interpolation of one state row (B, N+1) at per-case angles ``at`` (B,)."""
    a = np.asarray(at, float) * np.ones(Yr.shape[0])
    i, h, t = interval_of(theta, a)
    h00 = 2 * t**3 - 3 * t**2 + 1
    h10 = t**3 - 2 * t**2 + t
    h01 = -2 * t**3 + 3 * t**2
    h11 = t**3 - t**2
    r = np.arange(Yr.shape[0])
    return h00 * Yr[r, i] + h10 * h * Fr[r, i] + h01 * Yr[r, i + 1] + h11 * h * Fr[r, i + 1]


def _interp_at(theta, Yr, Fr, at):
    return hermite(theta, Yr, Fr, np.asarray(at, float))


def hermite_grid(theta: np.ndarray, Yr: np.ndarray, Fr: np.ndarray, grid: np.ndarray,
                 derivative: bool = False) -> np.ndarray:
    """Hermite interpolation of a row (B, N+1) onto a common grid (n,) -> (B, n).

    With ``derivative`` the derivative of the interpolant [unit/deg] instead.
    """
    i, h, t = interval_of(theta, np.asarray(grid, float))
    if derivative:
        d00 = (6 * t**2 - 6 * t) / h
        d10 = 3 * t**2 - 4 * t + 1
        d01 = (-6 * t**2 + 6 * t) / h
        d11 = 3 * t**2 - 2 * t
        return d00 * Yr[:, i] + d10 * Fr[:, i] + d01 * Yr[:, i + 1] + d11 * Fr[:, i + 1]
    h00 = 2 * t**3 - 3 * t**2 + 1
    h10 = t**3 - 2 * t**2 + t
    h01 = -2 * t**3 + 3 * t**2
    h11 = t**3 - t**2
    return h00 * Yr[:, i] + h10 * h * Fr[:, i] + h01 * Yr[:, i + 1] + h11 * h * Fr[:, i + 1]


def is_uniform(theta: np.ndarray) -> bool:
    """Whether the grid has one step (to rounding)."""
    d = np.diff(theta)
    return bool(d.size == 0 or np.ptp(d) <= 1e-9 * max(abs(d[0]), 1.0))
