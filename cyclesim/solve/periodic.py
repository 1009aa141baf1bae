"""The periodic-steady-state driver: cycles repeated, or accelerated, until settled.

One full cycle maps the state at its start (-360 deg: the residual gas's mass, burned part and
temperature, the gas waiting in the intake port, the submodel states carried over) to the
state at its end, ``x -> F(x)``; the periodic state is the fixed point ``x = F(x)``.

- ``simulation.periodic: plain`` repeats cycles, each from the end state of the one before;
- ``anderson`` (the default) takes the next start by Anderson acceleration of the cycle map
  (:mod:`cyclesim.solve.anderson`, Walker & Ni 2011) where the plain iteration contracts slowly
  (:data:`ACCELERATE_ABOVE`).

Either way every cycle is integrated in full and the settling test is the same: net IMEP and
trapped mass change by less than ``simulation.tolerance`` from one cycle to the next.  A case
that passes it on a cycle that began from an accelerated state runs one more plain cycle (from
that cycle's own end state), and the test is judged again on it; so the reported cycle always
starts from the end state of the cycle before it.  Each case's iteration uses only its own
cycles: it gives the same result alone and in any batch.

From the default start (the exhaust conditions) a full cycle runs the start-up schedule
(:data:`COARSE_SCHEDULE`) first.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

from .anderson import Anderson
from .cycle_grid import cycle_points
from .cycle_run import LOOP_RERUN, CycleRunner
from .cycle_trace import CycleTrace
from ..errors import SolverError
from .events import CycleEvents
from .hermite import hermite
from ..loops.layout import CORE, CORE_ROWS, TOTALS

COARSE_SCHEDULE = ((4.0, 1), (2.0, 1))
"""Full mode, from the default start state: (step multiple, cycles) run first (cheap), then the
fine cycles until settled.  The residual state converges by a factor of about 30 per cycle: the
first cycle at four times the step takes the state from the exhaust conditions to within a
few per cent, one at twice the step close to the periodic state, and the fine cycles settle in
two or three.  The schedule depends only on the case's own settings, so batch-mates do not
affect a result."""
COARSE_CYCLES = sum(n for _, n in COARSE_SCHEDULE)
COARSE_STEP_MAX_DEG = 2.0
"""Largest start-up step [deg] (the demo's 0.5 deg step gives 2 deg, then 1 deg)."""

PERIODIC_METHODS = ("anderson", "plain")
ANDERSON_MEMORY = 3
"""Differences of earlier cycles the acceleration keeps per case (Walker & Ni 2011 report
small memories, 1-5, as effective on their fixed-point problems)."""
ACCELERATE_ABOVE = 0.1
"""A case's next start is accelerated where its figures' change shrank by less than this factor
over the last cycle (plain repetition contracting slowly); where plain repetition already
contracts tenfold or more per cycle (the demo at 3000 rpm: about 30), it is kept.  Measured on
the demo configs at 800, 3000 and 6000 rpm (benchmarks/periodic_cycles.py): accelerating every
cycle cost up to two cycles more at tolerances of 1e-6 (the confirming plain cycle), a threshold
of 0.05 up to two, this one none (and one fewer at 1e-9 on the part-load demo at 800 rpm)."""

CARRIED = ("m", "T", "m_b", "m_ibuf", "mb_ibuf", "H_ibuf")
"""Core rows carried from one cycle to the next (the others are totals, reset at the start)."""


@dataclass
class CylinderSystem:
    """What the driver needs of a batch's cylinder model.

    Attributes
    ----------
    batch : Batch
    make_rhs : callable
        ``make_rhs(batch, mode)``: a fresh cylinder system (``cyclesim.solve.solver._RHS``).
    initial_state : callable
        ``initial_state(batch, rhs, theta0, mode)``: the default start state (n_state, B).
    extra_events : sequence of CycleEvent
        Events beyond IVC, EVO and spark (:mod:`cyclesim.solve.events`).
    """

    batch: object
    make_rhs: Callable
    initial_state: Callable
    extra_events: Sequence = ()
    runners: object = None
    """The batch's runners (:class:`cyclesim.pipes.runners.RunnerSet`) or None: their state runs on
    from cycle to cycle, through the start-up cycles too."""

    @property
    def mode(self) -> str:
        return self.batch.simulation.mode

    @property
    def method(self) -> str:
        return getattr(self.batch.simulation, "periodic", "anderson")


def solve(system: CylinderSystem, progress=None, initial=None, cycles=None, step_scale=1.0,
          max_cycles=None) -> CycleTrace:
    """Integrate a batch: one closed cycle, or full cycles to periodic steady state
    (arguments as :func:`cyclesim.solve.solver.integrate`)."""
    b = system.batch
    # the compiled cycle's batch-only inputs are shared by the grids of this integration only: between
    # integrations a caller may change the batch (the engine driver sets lumped wall temperatures)
    b.__dict__["_compiled_consts"] = {}
    if system.mode == "full" and initial is None and cycles is None and COARSE_CYCLES > 0 \
            and int(b.simulation.max_cycles) > COARSE_CYCLES + 1:
        start, history, reran = _startup(system, step_scale)
        tr = run_cycles(system, progress, start, None, step_scale, int(b.simulation.max_cycles) - COARSE_CYCLES)
        tr.cycles = tr.cycles + COARSE_CYCLES
        tr.history = history + tr.history
        if reran:
            tr.loop = LOOP_RERUN
        return tr
    return run_cycles(system, progress, initial, cycles, step_scale, max_cycles)


def _startup(system: CylinderSystem, step_scale: float):
    """The start-up cycles at longer steps: (start state of the fine cycles, their history, whether
    a cycle was re-run on the numpy loop)."""
    from ..config import effective_step_deg

    b = system.batch
    fresh = None       # the default start state, made only if a case fails a start-up cycle
    start = None
    history: list = []
    reran = False
    h0 = effective_step_deg(b.simulation, float(b.operating.speed_rpm[0])) * step_scale
    for scale, n_cyc in COARSE_SCHEDULE:
        # the start-up step stays within COARSE_STEP_MAX_DEG (explicit steps through an open
        # valve lose stability beyond a few degrees), never below the fine step
        scale = max(1.0, min(scale, COARSE_STEP_MAX_DEG / h0))
        coarse = run_cycles(system, None, start, n_cyc, scale * step_scale, None)
        start = coarse.end_state.copy()
        bad = np.array([f is not None for f in coarse.failed]) | ~np.isfinite(start).all(axis=0)
        if bad.any():                         # a case that failed a coarse cycle starts afresh
            if fresh is None:
                fresh = system.initial_state(b, system.make_rhs(b, "full"), -360.0, "full")
            start[:, bad] = fresh[:, bad]
        start[TOTALS] = 0.0
        history += coarse.history
        reran = reran or coarse.loop == LOOP_RERUN
    return start, history, reran


def run_cycles(system: CylinderSystem, progress, initial, cycles, step_scale, max_cycles) -> CycleTrace:
    """Cycles on one grid from ``initial`` (or the default start) until every case is settled,
    has run ``cycles`` (exactly, without the test), or has run the most cycles allowed."""
    b = system.batch
    mode = system.mode
    rhs = system.make_rhs(b, mode)
    events = CycleEvents(b, rhs, system.extra_events)
    pts = cycle_points(b, mode, events, step_scale)
    runner = CycleRunner(b, rhs, pts, events, system.runners)
    if initial is not None and mode == "full":
        # a given start needs no default one (with simulation.start: estimate that is the
        # residual estimate, dearer than a cycle)
        if initial.shape != (rhs.n, b.B):
            raise SolverError(f"initial state has shape {initial.shape}, expected {(rhs.n, b.B)}")
        y = np.array(initial, dtype=float)
    else:
        y = system.initial_state(b, rhs, pts.theta[0], mode)
        if initial is not None:
            if initial.shape != y.shape:
                raise SolverError(f"initial state has shape {initial.shape}, expected {y.shape}")
            y = np.array(initial, dtype=float)
    if mode == "closed":
        return _closed_cycle(runner, y, progress)
    n_max = int(b.simulation.max_cycles) if max_cycles is None else int(max_cycles)
    if cycles is not None:
        n_max = int(cycles)
    book = Settling(b, rhs, pts, fixed=cycles is not None, runner=runner)
    # with runners every cycle starts from the end of the one before (the runners' state is not
    # part of the accelerated start)
    accel = Acceleration(rhs) if system.method == "anderson" and cycles is None and runner.coupling is None \
        else None
    bufs = Buffers((rhs.n, b.B, pts.N + 1))
    with np.errstate(all="ignore"):
        for cyc in range(1, n_max + 1):
            y[TOTALS] = 0.0
            y[CORE_ROWS["x_b"]] = 0.0
            Y, F = bufs.now()
            y = runner.cycle(y, Y, F)
            if progress is not None:
                progress(cyc)
            book.slot_now = bufs.slot
            settled = book.judge(cyc, n_max, Y, F, accel)
            if book.done.all():
                break
            if accel is not None:
                y = accel.next_start(Y[:, :, 0], y, book, settled)
            bufs.next_cycle(book)
    book.assemble(bufs)
    tr = CycleTrace(pts.theta, book.Y, book.F, rhs.names, book.cycles_run, book.converged, book.history,
                    rhs.failed, loop=runner.loop)
    tr.end_state = book.Y[:, :, -1].copy()
    tr.ivc_state = book.ivc
    tr.accelerated = accel.count if accel is not None else np.zeros(b.B, dtype=int)
    tr.reported_from_accelerated = book.from_accelerated
    tr.runners = book.pipe_report
    return tr


def _closed_cycle(runner: CycleRunner, y: np.ndarray, progress) -> CycleTrace:
    rhs, pts = runner.rhs, runner.pts
    B = y.shape[1]
    Y = np.empty((rhs.n, B, pts.N + 1))
    F = np.empty_like(Y)
    with np.errstate(all="ignore"):
        runner.cycle(y, Y, F)
    if progress is not None:
        progress(1)
    tr = CycleTrace(pts.theta, Y, F, rhs.names, np.ones(B, dtype=int), np.ones(B, dtype=bool), [],
                    rhs.failed, loop=runner.loop)
    tr.end_state = Y[:, :, -1].copy()
    tr.ivc_state = {"p": rhs.p_ivc, "T": rhs.T_ivc, "V": rhs.V_ivc}
    tr.accelerated = np.zeros(B, dtype=int)
    tr.reported_from_accelerated = np.zeros(B, dtype=bool)
    return tr


class Settling:
    """The settling test and the reported cycle of each case.

    Parameters
    ----------
    fixed : bool
        Run a fixed number of cycles: every case reports the last, without the test.
    """

    def __init__(self, batch, rhs, pts, fixed: bool, runner=None):
        B = batch.B
        self.rhs = rhs
        self.runner = runner
        self.pipe_report = None      # the reported cycle's runner record per case (with runners)
        self.pipe_ok = np.ones(B, dtype=bool)
        self.theta = pts.theta
        self.fixed = fixed
        self.tol = float(batch.simulation.tolerance)
        self.Vd = batch.geometry.Vd * np.ones(B)
        self.ivc_deg = batch.valves.ivc_deg
        self.Y = self.F = None
        self.cycles_run = np.zeros(B, dtype=int)
        self.converged = np.zeros(B, dtype=bool)
        self.done = np.zeros(B, dtype=bool)
        self.ivc = {"p": np.full(B, np.nan), "T": np.full(B, np.nan), "V": np.full(B, np.nan)}
        self.history: list = []
        self.prev = None
        self.change = np.full(B, np.inf)        # largest relative change of the last cycle
        self.change_before = np.full(B, np.inf)
        self.from_accelerated = np.zeros(B, dtype=bool)   # per case: its reported cycle began accelerated
        self.slot = np.full(B, -1)      # per done case: the buffer (Buffers) that holds its reported cycle
        self.slot_now = 0               # the buffer of the cycle being judged

    def judge(self, cyc: int, n_max: int, Y, F, accel) -> np.ndarray:
        """Book cycle ``cyc`` (in ``Y``, ``F``): the cases it settles, those done with it.

        Returns the cases whose test passed (before a confirming plain cycle is asked for)."""
        N = self.theta.size - 1
        rhs = self.rhs
        imep = Y[CORE_ROWS["W"], :, N] / self.Vd
        m_tr = hermite(self.theta, Y[0], F[0], self.ivc_deg)
        self.history.append((imep.copy(), m_tr.copy()))
        B = imep.size
        passed = np.zeros(B, dtype=bool)
        if self.fixed:
            newly = ~self.done if cyc == n_max else np.zeros(B, dtype=bool)
        else:
            if self.prev is not None:
                d_imep = np.abs(imep - self.prev[0]) / np.maximum(np.abs(imep), 1e3)
                d_m = np.abs(m_tr - self.prev[1]) / np.abs(m_tr)
                passed = (~self.done) & (d_imep < self.tol) & (d_m < self.tol)
                self.change_before, self.change = self.change, np.maximum(d_imep, d_m)
            rec = self.runner.pipe_record if self.runner is not None else None
            if rec is not None:
                # the runners' cycle-mean valve-end pressures repeat
                # (cyclesim.pipes.runners.RunnerSet.settle_change)
                self.pipe_ok = rec["change"] < self.tol
                passed &= self.pipe_ok
                self.change = np.maximum(self.change, rec["change"])
            # a case whose cycle began from an accelerated start confirms on a plain cycle
            newly = passed & ~accel.from_accelerated if accel is not None else passed.copy()
            newly |= (~self.done) & (~rhs.alive)
        if cyc == n_max:
            newly |= ~self.done
        if newly.any():
            self._report(newly, cyc, n_max, Y, F, imep, m_tr)
            if accel is not None:
                self.from_accelerated[newly] = accel.from_accelerated[newly]
        self.prev = (imep, m_tr)
        return passed

    def _report(self, newly, cyc, n_max, Y, F, imep, m_tr) -> None:
        rhs = self.rhs
        # the reported cycle stays in the buffer it was written to (Buffers): nothing copied here
        self.slot[newly] = self.slot_now
        # the IVC state of the reported cycle (a case done early keeps its own, not that
        # of the cycles its batch-mates still run)
        for key, arr in (("p", rhs.p_ivc), ("T", rhs.T_ivc), ("V", rhs.V_ivc)):
            self.ivc[key] = np.where(newly, arr, self.ivc[key])
        rec = self.runner.pipe_record if self.runner is not None else None
        if rec is not None:
            self._report_runners(newly, rec)
        self.cycles_run[newly] = cyc
        if self.fixed:
            self.converged[newly] = rhs.alive[newly]
        else:
            settled = np.ones(imep.size, dtype=bool) if cyc < n_max else \
                _settled(imep, m_tr, self.prev, self.tol) & self.pipe_ok
            self.converged[newly] = rhs.alive[newly] & settled[newly]
        self.done |= newly


    def assemble(self, bufs: "Buffers") -> None:
        """The reported cycles of every case in one pair of arrays (``self.Y``, ``self.F``): the buffer
        that holds most of them, the others' copied into it."""
        counts = [int(np.count_nonzero(self.slot == k)) for k in (0, 1)]
        base = int(np.argmax(counts))
        self.Y, self.F = bufs.pairs[base]
        if counts[1 - base]:
            _copy_cases(bufs.pairs[base], bufs.pairs[1 - base], np.flatnonzero(self.slot == 1 - base))

    def _report_runners(self, newly, rec) -> None:
        """Copy the runner record of cycle ``rec`` into the report of the cases ``newly`` done."""
        if self.pipe_report is None:
            self.pipe_report = _copy_record(rec)
            return
        _put_record(self.pipe_report, rec, newly)


class Buffers:
    """The arrays a batch's cycles are written into: states and slopes (n_state, B, N+1) of one cycle,
    and a second pair once some cases are done while others run on.

    A done case's reported cycle stays in the pair it was written to; the next cycle goes to the other
    pair.  Before a pair is written again, the reported cycles it holds move to the pair of the cycle
    just judged (whose columns of done cases are free), so two pairs always suffice and each case's
    trace is copied at most once per cycle its batch-mates still run, typically never.  (Copying every
    done case's trace out after each cycle cost about a tenth of a 100-case batch's integration.)
    """

    def __init__(self, shape: tuple):
        self.shape = shape
        self.pairs: list = [(np.empty(shape), np.empty(shape)), None]
        self.slot = 0

    def now(self) -> tuple:
        """The pair the next cycle is written to."""
        return self.pairs[self.slot]

    def next_cycle(self, book: Settling) -> None:
        """Choose the pair of the next cycle, keeping every reported cycle of ``book``."""
        here = self.slot
        if not (book.slot == here).any():
            return                      # no reported cycle in this pair: the next cycle overwrites it
        other = 1 - here
        if self.pairs[other] is None:
            self.pairs[other] = (np.empty(self.shape), np.empty(self.shape))
        else:
            moving = np.flatnonzero(book.slot == other)
            _copy_cases(self.pairs[here], self.pairs[other], moving)
            book.slot[moving] = here
        self.slot = other


def _copy_cases(dst: tuple, src: tuple, cases: np.ndarray) -> None:
    """Copy the columns ``cases`` of the pair ``src`` into ``dst`` (one case's rows at a time: no
    temporary of the whole selection)."""
    for b in cases:
        for d, s in zip(dst, src):
            d[:, b] = s[:, b]


def _copy_record(rec):
    if isinstance(rec, dict):
        return {k: _copy_record(v) for k, v in rec.items()}
    return rec.copy() if isinstance(rec, np.ndarray) else rec


def _put_record(dst, src, rows):
    for k, v in src.items():
        if isinstance(v, dict):
            _put_record(dst[k], v, rows)
        elif isinstance(v, np.ndarray):
            dst[k][rows] = v[rows]


def _settled(imep, m_tr, prev, tol):
    if prev is None:
        return np.zeros_like(imep, dtype=bool)
    return (np.abs(imep - prev[0]) / np.maximum(np.abs(imep), 1e3) < tol) & (
        np.abs(m_tr - prev[1]) / np.abs(m_tr) < tol
    )


class Acceleration:
    """The next start state of each case by Anderson acceleration of the cycle map, in scaled
    variables (masses per cylinder mass, temperature per temperature, enthalpy per cylinder mass
    times 1 MJ/kg, other carried states per their size)."""

    def __init__(self, rhs):
        self.rows = np.array([CORE_ROWS[n] for n in CARRIED] +
                             [len(CORE) + k for k, (_, _, sv) in enumerate(rhs.sub_specs) if not sv.reset_at_ivc])
        self.rhs = rhs
        self.aa = Anderson(ANDERSON_MEMORY)
        self.scale = None
        B = rhs.B
        self.from_accelerated = np.zeros(B, dtype=bool)
        self.count = np.zeros(B, dtype=int)

    def _scale_of(self, x: np.ndarray) -> np.ndarray:
        m, T = np.abs(x[0]), np.abs(x[1])
        s = np.maximum(np.abs(x), 1.0)
        for k, name in enumerate(CARRIED):
            s[k] = T if name == "T" else (m * 1e6 if name.startswith("H") else m)
        return np.where(s > 0, s, 1.0)

    def next_start(self, start: np.ndarray, end: np.ndarray, book: Settling, passed: np.ndarray) -> np.ndarray:
        """The next cycle's start from this cycle's ``start`` and ``end`` (n_state, B)."""
        rows = self.rows
        if self.scale is None:
            self.scale = self._scale_of(start[rows])
        s = self.scale
        x, fx = start[rows] / s, end[rows] / s
        confirm = passed & self.from_accelerated
        self.aa.reset(confirm | ~self.rhs.alive)
        slow = book.change > ACCELERATE_ABOVE * book.change_before
        want = slow & ~passed & ~book.done & self.rhs.alive
        nxt = self.aa.step(x, fx, want) * s
        use = want & self.aa.last & _physical(nxt) & np.isfinite(nxt).all(axis=0)
        y = end.copy()
        y[np.ix_(rows, use)] = nxt[:, use]
        self.from_accelerated = use
        self.count += use
        return y


def _physical(x: np.ndarray) -> np.ndarray:
    """Carried states (rows of :data:`CARRIED` first) a cycle can start from."""
    m, T, mb, mq, mbq = x[0], x[1], x[2], x[3], x[4]
    return (m > 0) & (T > 200.0) & (T < 5000.0) & (mb >= 0) & (mb <= m) & (mq >= 0) & (mbq >= 0) & (mbq <= mq)
