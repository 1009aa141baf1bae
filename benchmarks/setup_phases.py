"""Where one simulate() spends its time outside the compiled cycle, phase by phase, as JSON.

    python benchmarks/setup_phases.py                 # one point, closed 41, spark sweep 41, and
                                                      # the closed 41 of the Cantera comparison
    python benchmarks/setup_phases.py --repeat 30

Each figure is the least process CPU time [ms] over ``--repeat`` calls of that phase alone on
the same batch (CPU time and the least of many calls: on a shared machine wall-clock medians
move by tens of percent from run to run, the least CPU time by a few).  ``integrate`` includes
the compiled cycles (``compiled_cycle`` is one of them, fine grid); ``cycle_setup`` is the
per-grid set-up a full integration repeats for each of its grids (coarse start-up and fine),
measured on a batch whose once-per-batch look-ups (the loop, the fine lattice's valve areas) are
already made, as they are for the second and later grids of a run.  ``grids_per_run`` and
``cycles_per_run`` count what one simulate() call sets up and runs, ``all_cycles_in_run`` is the
least CPU time of all its cycles together (the rest of ``simulate`` is set-up, figures, output).
Set ``CYCLESIM_THREADS=1`` for figures that compare from one version to the next.
"""

from __future__ import annotations

import argparse
import json
import time

import numpy as np

SAME_WORK = ["emissions.model=none"]


def _least_ms(fn, repeat: int) -> float:
    best = float("inf")
    for _ in range(repeat):
        t = time.process_time()
        fn()
        best = min(best, time.process_time() - t)
    return 1e3 * best


def _in_one_run(cases, repeat: int) -> dict:
    """Within one simulate() call: the grids set up, the cycles run, and the least CPU time [ms]
    of all its compiled cycles together (the rest of the call is set-up, figures and output)."""
    import cyclesim
    from cyclesim.solve import cycle_run

    counts = {"grids": 0, "cycles": 0}
    spent = [0.0]
    plain_init, plain_cycle = cycle_run.CycleRunner.__init__, cycle_run.CycleRunner.cycle

    def init(self, *a, **k):
        counts["grids"] += 1
        plain_init(self, *a, **k)

    def cycle(self, *a, **k):
        counts["cycles"] += 1
        t = time.process_time()
        try:
            return plain_cycle(self, *a, **k)
        finally:
            spent[0] += time.process_time() - t

    cycle_run.CycleRunner.__init__, cycle_run.CycleRunner.cycle = init, cycle
    best = float("inf")
    try:
        for _ in range(repeat):
            counts.update(grids=0, cycles=0)
            spent[0] = 0.0
            cyclesim.simulate(cases)
            best = min(best, spent[0])
    finally:
        cycle_run.CycleRunner.__init__, cycle_run.CycleRunner.cycle = plain_init, plain_cycle
    return {"grids_per_run": counts["grids"], "cycles_per_run": counts["cycles"],
            "all_cycles_in_run": 1e3 * best}


def phases(cases, repeat: int) -> dict:
    import cyclesim
    from cyclesim.api import _registry_for, results_from_trace
    from cyclesim.results.figures import compute_figures, derived_trace, output_trace
    from cyclesim.solve.batch import build_batch, group_cases
    from cyclesim.solve.cycle_grid import cycle_points
    from cyclesim.solve.cycle_run import CycleRunner
    from cyclesim.solve.events import CycleEvents
    from cyclesim.solve.periodic import CylinderSystem
    from cyclesim.solve.solver import _RHS, _initial_state, integrate

    cyclesim.simulate(cases)                         # warm: gas tables, the compiled loop
    reg = _registry_for(cases)
    b = build_batch(cases, reg)
    tr = integrate(b)
    d = derived_trace(b, tr)
    mode = b.simulation.mode
    system = CylinderSystem(b, _RHS, _initial_state, (), None)
    rhs = system.make_rhs(b, mode)
    events = CycleEvents(b, rhs, ())
    pts = cycle_points(b, mode, events, 1.0)
    runner = CycleRunner(b, rhs, pts, events, None)
    y = _initial_state(b, rhs, pts.theta[0], mode)
    Y = np.empty((rhs.n, b.B, pts.N + 1))
    F = np.empty_like(Y)
    step = float(b.simulation.output_step_deg) or None
    out = {
        "simulate": _least_ms(lambda: cyclesim.simulate(cases), repeat),
        "group_cases": _least_ms(lambda: group_cases(cases, reg), repeat),
        "build_batch": _least_ms(lambda: build_batch(cases, reg), repeat),
        "integrate": _least_ms(lambda: integrate(b), repeat),
        "cycle_setup": _least_ms(lambda: CycleRunner(b, system.make_rhs(b, mode), cycle_points(
            b, mode, CycleEvents(b, rhs, ()), 1.0), events, None), repeat),
        "cycle_points": _least_ms(lambda: cycle_points(b, mode, events, 1.0), repeat),
        "compiled_cycle": None,
        "results_from_trace": _least_ms(lambda: results_from_trace(b, tr, reg), repeat),
        "derived_trace": _least_ms(lambda: derived_trace(b, tr), repeat),
        "compute_figures": _least_ms(lambda: compute_figures(b, tr, d), repeat),
        "output_trace": _least_ms(lambda: output_trace(b, tr, d, step), repeat),
    }
    if runner.compiled is not None:
        out["compiled_cycle"] = _least_ms(lambda: runner.compiled.cycle(y.copy(), Y, F), repeat)
    out.update(_in_one_run(cases, repeat))
    return {k: (None if v is None else round(v, 3)) for k, v in out.items()}


def main(argv=None):
    from cyclesim.config import load_config

    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=15)
    args = ap.parse_args(argv)
    sets = {
        "one_point": [load_config("demo", SAME_WORK)],
        "closed_41": [load_config("demo_closed", [f"burn.spark_advance_deg={a}"] + SAME_WORK) for a in range(41)],
        "spark_sweep_41": [load_config("demo", [f"burn.spark_advance_deg={a}"] + SAME_WORK) for a in range(41)],
    }
    # the closed cycle the Cantera comparison times (benchmarks/run.py): 0.1 deg output, methane
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
    from cantera_cycle import cases as cantera_cases

    sets["closed_cantera_41"] = cantera_cases()
    res = {name: phases(cases, args.repeat) for name, cases in sets.items()}
    res["unit"] = "ms, least process CPU time over the repeats"
    print(json.dumps(res, indent=1))


if __name__ == "__main__":
    main()
