"""Bounded work: the memory a run will take, estimated before anything is allocated.

A simulated batch holds its state and slopes at every crank step of a cycle for every case, so
its memory grows with the steps per cycle (``simulation.step_deg``, finer below
``simulation.step_reference_rpm``) times the cases in the batch; a synthetic trace set holds
every cycle on its synthesis grid.  Each is estimated here from the config and the request alone
and compared with a memory budget: a batch over it is split into smaller batches where that is
enough (results do not depend on batch-mates), and otherwise refused with one line that gives
the estimate and the option that reduces it.

The budget is per process (each ``--workers`` process has its own): :data:`DEFAULT_BUDGET_GIB`
unless the environment variable :data:`BUDGET_ENV` gives another number of GiB.
"""

from __future__ import annotations

import math
import os
from typing import Sequence

from ..errors import ConfigError, CyclesimError

BUDGET_ENV = "CYCLESIM_MEMORY_GIB"
"""Environment variable: memory budget of one process [GiB]."""

DEFAULT_BUDGET_GIB = 8.0
"""Default budget [GiB]: two worker processes stay within 16 GiB of a 24 GiB machine."""

# Measured on the demo config (peak resident memory of one `simulate` call, 2 cores, numba loop):
# 211 MB at 200 rpm with one case (92,160 steps per cycle), 527 MB with 8 cases, 1593 MB with 32;
# 360 MB at 100 rpm with one case (368,640 steps).  That is about 170 MB for the process and its
# tables, some 50 bytes per step and 480 bytes per step and case; the constants below carry a
# quarter more for margin.
SIM_BASE_BYTES = 2.0e8
SIM_BYTES_PER_STEP = 64.0
SIM_BYTES_PER_CASE_STEP = 600.0

# A synthetic trace set holds every cycle on its synthesis grid (at most 0.05 deg, so at least
# 14,400 points a cycle): pressure, temperature, gamma and wall heat, the measured copies and
# each cycle's case and record.  Measured (peak resident memory of `cyclesim traces demo`):
# 325 MB for 50 cycles and 696 MB for 500 at --resolution 2, 343 MB and 694 MB at 0.2, i.e.
# about 57 bytes per synthesis point and cycle whatever the output step; the constants carry a
# quarter more for margin.
TRACE_BASE_BYTES = 3.5e8
"""The trace command's process, its steady-state run, writers and plot (325 MB measured at 50 cycles)."""
TRACE_BYTES_PER_FINE_SAMPLE = 72.0
TRACE_BYTES_PER_OUTPUT_SAMPLE = 24.0
TRACE_BYTES_PER_CYCLE = 20e3


class WorkBudgetError(CyclesimError):
    """A run would need more memory than the budget allows."""


def budget_bytes() -> float:
    """The memory budget of this process [bytes] (:data:`BUDGET_ENV`, else the default)."""
    text = os.environ.get(BUDGET_ENV, "").strip()
    if not text:
        return DEFAULT_BUDGET_GIB * 2**30
    try:
        gib = float(text)
    except ValueError:
        gib = float("nan")
    if not (math.isfinite(gib) and gib > 0):
        raise ConfigError(f"{BUDGET_ENV}={text[:20]!r}: expected a number of GiB > 0")
    return gib * 2**30


def size_text(n_bytes: float) -> str:
    """``'6.2 GiB'``-style size."""
    for unit, f in (("TiB", 2**40), ("GiB", 2**30), ("MiB", 2**20)):
        if n_bytes >= f:
            return f"{n_bytes / f:.3g} {unit}"
    return f"{n_bytes / 2**10:.3g} KiB"


def steps_per_cycle(case) -> int:
    """Most crank steps of one simulated cycle of a case (full: 720 deg, closed: IVC to EVO)."""
    from ..config import effective_step_deg

    sim = case.simulation
    h = effective_step_deg(sim, float(case.operating.speed_rpm))
    span = 720.0 if sim.mode == "full" else float(case.valves.evo_deg - case.valves.ivc_deg)
    return max(int(math.ceil(span / h)), 8)


def batch_bytes(n_steps: int, n_cases: int) -> float:
    """Estimated peak memory [bytes] of simulating ``n_cases`` cases together on ``n_steps`` steps."""
    return SIM_BASE_BYTES + n_steps * (SIM_BYTES_PER_STEP + SIM_BYTES_PER_CASE_STEP * n_cases)


def _refusal(what: str, need: float, budget: float, reduce: str) -> WorkBudgetError:
    return WorkBudgetError(f"{what} needs about {size_text(need)} of memory, more than the budget of"
                           f" {size_text(budget)} ({BUDGET_ENV}); {reduce}")


def cases_that_fit(n_steps: int, budget: float) -> int:
    """Most cases whose batch on ``n_steps`` steps is estimated within ``budget`` [bytes] (may be 0)."""
    room = budget - SIM_BASE_BYTES - n_steps * SIM_BYTES_PER_STEP
    return int(room // (n_steps * SIM_BYTES_PER_CASE_STEP)) if room > 0 else 0


def cases_per_batch(cases: Sequence) -> int:
    """How many of these cases (one batch's worth, sharing a grid) fit in the budget together.

    Raises WorkBudgetError when not even one does."""
    n = max(steps_per_cycle(c) for c in cases)
    budget = budget_bytes()
    k = cases_that_fit(n, budget)
    if k < 1:
        c = cases[0]
        raise _refusal(f"one case at {float(c.operating.speed_rpm):g} rpm ({n:,} crank steps per cycle)",
                       batch_bytes(n, 1), budget,
                       "raise simulation.step_deg, or simulation.step_reference_rpm = 0 for no finer step"
                       " at low speed, or raise the budget")
    return k


def check_batch(cases: Sequence) -> None:
    """Refuse a batch whose estimated memory is over the budget (before it is allocated)."""
    k = cases_per_batch(cases)
    if len(cases) > k:
        n = max(steps_per_cycle(c) for c in cases)
        raise _refusal(f"a batch of {len(cases)} cases ({n:,} crank steps per cycle)",
                       batch_bytes(n, len(cases)), budget_bytes(),
                       f"simulate at most {k} of them together, raise simulation.step_deg or raise the budget")


def trace_bytes(n_cycles: int, n_fine: float, n_out: float) -> float:
    """Estimated peak memory [bytes] of a synthetic trace set: ``n_cycles`` cycles of ``n_fine``
    synthesis and ``n_out`` output samples each."""
    return TRACE_BASE_BYTES + n_cycles * _trace_cycle_bytes(n_fine, n_out)


def _trace_cycle_bytes(n_fine: float, n_out: float) -> float:
    return n_fine * TRACE_BYTES_PER_FINE_SAMPLE + n_out * TRACE_BYTES_PER_OUTPUT_SAMPLE + TRACE_BYTES_PER_CYCLE


def check_traces(n_cycles: int, n_fine: float, n_out: float) -> None:
    """Refuse a synthetic trace set over the budget: ``n_cycles`` cycles of ``n_fine`` synthesis and
    ``n_out`` output samples each."""
    per_cycle = _trace_cycle_bytes(n_fine, n_out)
    need = trace_bytes(n_cycles, n_fine, n_out)
    budget = budget_bytes()
    if need > budget:
        most = max(int((budget - TRACE_BASE_BYTES) // per_cycle), 0)
        raise _refusal(f"traces: {n_cycles:,} cycles of {n_out:,.0f} samples ({n_fine:,.0f} synthesis"
                       f" points each)", need, budget,
                       (f"use fewer cycles (at most about {most:,} at this resolution) or a coarser"
                        f" --resolution / lower --sample-rate, or raise the budget" if most >= 1 else
                        "even one cycle is over it: use a coarser --resolution or a lower --sample-rate"))


def trace_chunk(case, n_cycles: int, n_fine: float, n_out: float, chunk: int) -> int:
    """Cycles of a trace set simulated per batch: at most ``chunk``, and as many as fit in what the
    set's own arrays leave of the budget.  Raises WorkBudgetError when not even one does."""
    n = steps_per_cycle(case)
    room = budget_bytes() - trace_bytes(n_cycles, n_fine, n_out) + SIM_BASE_BYTES   # one process base
    k = cases_that_fit(n, room)
    if k < 1:
        raise _refusal(f"traces: {n_cycles:,} cycles at {float(case.operating.speed_rpm):g} rpm ({n:,} crank steps"
                       f" per cycle)", trace_bytes(n_cycles, n_fine, n_out) + batch_bytes(n, 1) - SIM_BASE_BYTES,
                       budget_bytes(), "use fewer cycles or raise simulation.step_deg, or raise the budget")
    return max(1, min(int(chunk), k))
