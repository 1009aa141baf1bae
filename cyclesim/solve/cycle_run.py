"""One cycle of a batch on its grid: the compiled loop where it can run, else the numpy loop.

:class:`CycleRunner` holds what one integration's cycles share (the cylinder system, the grid's
per-point data, the events, the compiled cycle if any) and runs a cycle from a start state into
the trace arrays ``Y`` and ``F`` (states and their crank-angle derivatives at the grid points).
The numpy loop steps the cylinder system by the Runge-Kutta tableau (:mod:`cyclesim.solve.stepper`),
its stages combined by the functions generated from the tableau (:func:`cyclesim.loops.tableau.stage_functions`,
the text the compiled loop has written in), applying the events after each step
(:mod:`cyclesim.solve.events`); the compiled loop does the same in machine code
(:mod:`cyclesim.solve.kernel`).
"""

from __future__ import annotations

import math

import numpy as np

from .events import CycleEvents, StepContext
from ..loops.tableau import stage_functions
from .stepper import CYCLE_TABLEAU
from .valve_source import RunnerCoupling

LOOP_RERUN = "compiled (a cycle re-run on the numpy loop to stop a failing case)"
"""CycleTrace.loop of an integration whose compiled loop handed a cycle to the numpy loop."""


class CycleRunner:
    """The cycles of one integration.

    Parameters
    ----------
    batch : Batch
    rhs : the cylinder system (``cyclesim.solve.solver._RHS``), called at the grid's points
    pts : CyclePoints
        The grid and its per-point data (:func:`cyclesim.solve.cycle_grid.cycle_points`).
    events : CycleEvents
    """

    def __init__(self, batch, rhs, pts, events: CycleEvents, runners=None):
        import cyclesim.solve.kernel as kernel

        self.batch = batch
        self.rhs = rhs
        self.pts = pts
        self.events = events
        self.tableau = CYCLE_TABLEAU
        self.th_pts = pts.half.tolist()
        self.full = rhs.mode == "full"
        # runners (cyclesim.pipes.runners): advanced each crank step, inside the compiled loop
        # (cyclesim.pipes.loop_step) or between the numpy loop's steps
        self.coupling = RunnerCoupling(rhs, pts, runners) if runners is not None and self.full else None
        self.pipe_record = None
        why = events.why_not_compiled()
        if not getattr(rhs, "port_buffer", True):
            self.compiled, self.loop = None, "numpy (port buffer off)"
        elif why is None:
            self.compiled, self.loop = kernel.prepare(batch, rhs, pts, self.coupling)
        else:
            self.compiled, self.loop = None, f"numpy ({why})"

    def cycle(self, y: np.ndarray, Y: np.ndarray, F: np.ndarray) -> np.ndarray:
        """One cycle from ``y`` into ``Y``, ``F`` (n_state, B, N+1); returns the end state."""
        import cyclesim.solve.kernel as kernel

        if self.compiled is not None and self.rhs.all_alive:
            cpl = self.coupling
            saved = None
            if cpl is not None:
                cpl.start_cycle()
                saved = cpl.save()
            if self.compiled.cycle(y, Y, F):
                if cpl is not None:
                    self.pipe_record = cpl.finish_compiled()
                return Y[:, :, self.pts.N].copy()
            if cpl is not None:
                cpl.restore(saved)
        kernel._used["python"] += 1
        if self.compiled is not None:
            self.loop = LOOP_RERUN
        with np.errstate(all="ignore"):
            return self.python_cycle(y, Y, F)

    def python_cycle(self, y: np.ndarray, Y: np.ndarray, F: np.ndarray) -> np.ndarray:
        """One cycle on the numpy loop (the reference)."""
        rhs, pts, tab, th_pts = self.rhs, self.pts, self.tableau, self.th_pts
        geo_pts = pts.per_point()
        open_at = pts.open_at
        rows = stage_functions(tab)
        stage_rows, step_row = rows.stage, rows.step
        # each stage after the first: (its row, its grid point's offset from the step's start)
        later = [(stage_rows[st], int(v)) for st, v in enumerate(tab.arrays()[4]) if st > 0]
        steps = pts.steps.tolist()
        N = pts.N
        cpl = self.coupling
        if cpl is not None:
            cpl.start_cycle()
        acting = self._steps_with_events(th_pts, N)
        stop = self._stop_unphysical
        for i in range(N):
            j0 = 2 * i
            h = steps[i]
            if cpl is not None:
                cpl.step(i, y, geo_pts[j0][0], h)
            k = rhs(th_pts[j0], y, geo_pts[j0], open_at[j0])
            Y[:, :, i] = y
            F[:, :, i] = k
            ks = [k]
            for row, node in later:
                j = j0 + node
                ks.append(rhs(th_pts[j], row(y, h, *ks), geo_pts[j], open_at[j]))
            y = step_row(y, h, *ks)
            stop(y, Y[:, :, i], th_pts[j0 + 2])
            if i in acting:
                self.events.after_step(StepContext(self.batch, rhs, th_pts[j0], th_pts[j0 + 2], h, Y[:, :, i], y))
        Y[:, :, N] = y
        F[:, :, N] = rhs(th_pts[2 * N], y, geo_pts[2 * N], open_at[2 * N])
        if cpl is not None:
            self.pipe_record = cpl.finish_cycle()
        return y

    def _steps_with_events(self, th_pts, N: int) -> frozenset:
        """The steps (indices) that cross the angle of an acting event for some case, found once per
        cycle from the events' angles (``theta0 < angle <= theta1``, as
        :meth:`cyclesim.solve.events.CycleEvents.after_step` tests it within the step)."""
        actions = self.events.actions
        if not actions:
            return frozenset()
        pts = np.asarray(th_pts[0:2 * N + 1:2], dtype=float)
        t0, t1 = pts[:-1, None], pts[1:, None]
        hit = np.zeros(N, dtype=bool)
        for ev in actions:
            a = np.asarray(ev.angle_deg(), dtype=float).reshape(1, -1)   # (B,) or one angle for all
            hit |= ((a > t0) & (a <= t1)).any(axis=1)
        return frozenset(np.flatnonzero(hit).tolist())

    def _stop_unphysical(self, y: np.ndarray, y_prev: np.ndarray, tn: float) -> None:
        """Stop the cases whose end-of-step state left the physical range (they keep the state of
        the step's start)."""
        rhs = self.rhs
        y0, y1 = y[0], y[1]
        ok = (y0 > 0.0) & (y0 < math.inf) & (y1 > 50.0) & (y1 < 8000.0)  # NaN fails all
        if ok.all():
            return
        bad = ~ok & rhs.alive
        for j in np.flatnonzero(bad):
            rhs.failed[j] = (
                f"solver: state left the physical range at crank angle {tn:.2f} deg"
                f" (T = {y[1, j]:.4g} K, m = {y[0, j]:.4g} kg); try a smaller"
                f" simulation.step_deg or check the submodel parameters"
            )
        rhs.kill(bad)
        y[:, bad] = y_prev[:, bad]
