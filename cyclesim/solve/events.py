"""Events of the cycle: crank angles, per case, at which something happens.

An event has an angle per case (``angle_deg()``, shape (B,)).  The cycle loops use events in
two ways:

- as *masks*: the valves are shut from intake valve closing (:class:`IVCCapture`) to exhaust
  valve opening (:class:`ExhaustOpening`), and the charge burns after the spark
  (:class:`Spark`) while they are shut; the masks are evaluated once per integration at the
  grid's points (:func:`cyclesim.solve.cycle_grid.cycle_points`);
- as *actions*: after the step that crosses a case's angle (``theta0 < angle <= theta1``)
  the numpy loop calls ``apply(ctx, hit)``, which may change that step's end state of the cases
  in ``hit``.  :class:`IVCCapture` records the cylinder state at IVC and resets the submodel
  states declared ``reset_at_ivc``; :class:`StateCreation` is the hook for state that comes
  into being during the cycle (e.g. a burned-mass element opened at its ignition angle: a row
  declared dormant is given its value there).

An event the compiled loop performs itself says so (``compiled = True``); an integration with
an event that it does not runs on the numpy loop (:meth:`CycleEvents.why_not_compiled`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

from ..errors import PluginError
from ..loops.layout import CORE


@dataclass
class StepContext:
    """What an event's action sees: one step of the numpy loop.

    Attributes
    ----------
    batch : Batch
    rhs : the cylinder system (``cyclesim.solve.solver._RHS``)
    theta0, theta1 : float
        The step's start and end [deg].
    h : float
        The step [deg].
    y0 : ndarray (n_state, B)
        State at the step's start (read only).
    y : ndarray (n_state, B)
        State at the step's end; an action writes the columns of its cases.
    """

    batch: object
    rhs: object
    theta0: float
    theta1: float
    h: float
    y0: np.ndarray
    y: np.ndarray

    def weight(self, angle) -> np.ndarray:
        """Where ``angle`` (B,) lies within the step, 0 (start) .. 1 (end) [-]."""
        return (np.asarray(angle, float) - self.theta0) / self.h


class CycleEvent:
    """Base of the cycle's events: an angle per case, and an optional action."""

    name = "event"
    compiled = False
    """Whether the compiled loop performs this event itself."""
    has_action = True

    def angle_deg(self) -> np.ndarray:
        """The event's crank angle per case [deg], shape (B,)."""
        raise NotImplementedError

    def apply(self, ctx: StepContext, hit: np.ndarray) -> None:
        """Act on the cases ``hit`` (bool (B,)) whose angle the step ``ctx`` crossed."""


class IVCCapture(CycleEvent):
    """Intake valve closing: the closed part starts; the cylinder's pressure, temperature and
    volume there are kept (for the heat-transfer and knock models), and submodel states
    declared ``reset_at_ivc`` take their initial value.  State at IVC by linear interpolation
    within the step, as the compiled loop does."""

    name = "IVC"
    compiled = True

    def __init__(self, batch, rhs):
        self.batch = batch
        self.rhs = rhs
        self._ivc = np.asarray(batch.valves.ivc_deg, float) * np.ones(batch.B)

    def angle_deg(self) -> np.ndarray:
        return self._ivc

    def apply(self, ctx: StepContext, hit: np.ndarray) -> None:
        rhs, y, Y0 = self.rhs, ctx.y, ctx.y0
        ivc = self._ivc
        w = ctx.weight(ivc)
        V_i = self.batch.geometry.volume_at(ivc)
        T_i = (1 - w) * Y0[1] + w * y[1]
        m_i = (1 - w) * Y0[0] + w * y[0]
        yb_i = np.clip(((1 - w) * Y0[2] + w * y[2]) / m_i, 0, 1)
        rho_i = m_i / V_i
        p_i = rho_i * self.batch.gas.mixture(T_i, rho_i, yb_i).R * T_i
        rhs.p_ivc = np.where(hit, p_i, rhs.p_ivc)
        rhs.T_ivc = np.where(hit, T_i, rhs.T_ivc)
        rhs.V_ivc = np.where(hit, V_i, rhs.V_ivc)
        initial_sub(rhs, y, which=hit)


class ExhaustOpening(CycleEvent):
    """Exhaust valve opening: the closed part (and the burn) ends.  A mask only."""

    name = "EVO"
    compiled = True
    has_action = False

    def __init__(self, batch):
        self._evo = np.asarray(batch.valves.evo_deg, float) * np.ones(batch.B)

    def angle_deg(self) -> np.ndarray:
        return self._evo


class Spark(CycleEvent):
    """Start of combustion (the burn model's ``start_deg``): the burn rate counts from here while
    the valves are shut.  A mask only."""

    name = "spark"
    compiled = True
    has_action = False

    def __init__(self, rhs):
        self._soc = np.asarray(rhs.soc, float)

    def angle_deg(self) -> np.ndarray:
        return self._soc


class StateCreation(CycleEvent):
    """State that comes into being at an angle of the cycle.

    Parameters
    ----------
    name : str
    angle_deg : array (B,) or float
        Where the state is created, per case [deg].
    rows : sequence of str
        The state's names (``role.state``, as in ``CycleTrace.names``): rows the submodel declares,
        dormant (constant) until created.
    create : callable
        ``create(ctx, hit) -> sequence of arrays (B,)``: the rows' values at the step's end for the
        cases in ``hit`` (e.g. the burned mass at that angle for a new burned-mass element).
    """

    def __init__(self, name: str, angle_deg, rows: Sequence[str], create: Callable):
        self.name = name
        self._angle = np.asarray(angle_deg, float)
        self.rows = tuple(rows)
        self.create = create
        self._idx: tuple[int, ...] | None = None

    def angle_deg(self) -> np.ndarray:
        return self._angle

    def apply(self, ctx: StepContext, hit: np.ndarray) -> None:
        if self._idx is None:
            names = ctx.rhs.names
            missing = [r for r in self.rows if r not in names]
            if missing:
                raise PluginError(f"event {self.name!r}: no state {', '.join(missing)} (states: {', '.join(names)})")
            self._idx = tuple(names.index(r) for r in self.rows)
        vals = self.create(ctx, hit)
        if len(vals) != len(self._idx):
            raise PluginError(f"event {self.name!r}: create() gave {len(vals)} values for {len(self._idx)} rows")
        for k, v in zip(self._idx, vals):
            ctx.y[k] = np.where(hit, v, ctx.y[k])


class CycleEvents:
    """The events of one integration: IVC, EVO and spark, and any others added."""

    def __init__(self, batch, rhs, extra: Sequence[CycleEvent] = ()):
        self.ivc = IVCCapture(batch, rhs)
        self.evo = ExhaustOpening(batch)
        self.spark = Spark(rhs)
        self.full = rhs.mode == "full"
        self.extra = tuple(extra)

    @property
    def actions(self) -> tuple[CycleEvent, ...]:
        """Events the numpy loop acts on after each step (IVC only in a full cycle)."""
        own = (self.ivc,) if self.full else ()
        return own + tuple(e for e in self.extra if e.has_action)

    def closed_at(self, pts: np.ndarray) -> np.ndarray:
        """Valves shut at the points ``pts`` [deg] (-360..360), per case: (len(pts), B)."""
        thw = np.where(pts < 360.0, pts, pts - 720.0)[:, None]
        return (thw >= self.ivc.angle_deg()[None, :]) & (thw < self.evo.angle_deg()[None, :])

    def burning_at(self, pts: np.ndarray, closed: np.ndarray) -> np.ndarray:
        """Burning at the points: after the spark, valves shut: (len(pts), B)."""
        return (pts[:, None] >= self.spark.angle_deg()[None, :]) & closed

    def why_not_compiled(self) -> str | None:
        """The reason the compiled loop cannot run these events, or None."""
        own = [e.name for e in self.extra if not e.compiled]
        return f"event {', '.join(own)} acts in Python" if own else None

    def after_step(self, ctx: StepContext) -> None:
        """Apply the events whose angle the step crossed."""
        t1 = ctx.theta1
        for ev in self.actions:
            a = ev.angle_deg()
            hit = (a > ctx.theta0) & (a <= t1)
            if hit.any():
                ev.apply(ctx, hit)


def initial_sub(rhs, y: np.ndarray, which=None) -> None:
    """Give the submodel states their initial values (all, or where ``which`` (B,) holds those
    declared ``reset_at_ivc``)."""
    k = len(CORE)
    for role, model, sv in rhs.sub_specs + getattr(rhs, "zone_specs", []):
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
