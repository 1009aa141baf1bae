"""Where the compiled cycles of a grid spend their steps, and what a third cycle would report, as JSON.

    python benchmarks/cycle_steps.py                # the benchmark's 1000-case grid (about 10 s CPU)
    python benchmarks/cycle_steps.py --cases 200    # its first 200 cases

For each kind of grid one integration sets up (the start-up cycles at 4 and 2 times the step and
the fine cycles), the steps of one cycle: in all, with a valve open (gas exchange, at the step or
twice it) and with every valve shut (the longer closed-part step), and the CPU time of the
compiled cycles on that grid, per case.  Then the cycles each case ran to settle (start-up
included), and for the settling test judged one cycle earlier (the first fine cycle against the
last start-up cycle, at a different step): how many cases would pass it, and how far the figures
of that first fine cycle are from those reported (net IMEP and trapped mass, relative; the
settling tolerance is ``simulation.tolerance``).  CPU time: set ``CYCLESIM_THREADS=1``.
"""

from __future__ import annotations

import argparse
import json
import time

import numpy as np

SAME_WORK = ["emissions.model=none"]


def grid_cases(n: int | None = None):
    from cyclesim.config import load_config

    cases = [load_config("demo", [f"operating.speed_rpm={s}", f"operating.intake_pressure_bar={p}",
                                  f"burn.spark_advance_deg={a}"] + SAME_WORK)
             for s in np.linspace(1500, 6000, 10) for p in np.linspace(0.4, 1.0, 10)
             for a in np.linspace(10, 40, 10)]
    return cases[:n] if n else cases


def measure(cases) -> dict:
    import cyclesim
    from cyclesim.solve import cycle_run, periodic

    cyclesim.simulate(cases[:2])                      # warm: the compiled loop, gas tables
    grids: dict = {}
    plain_init, plain_cycle = cycle_run.CycleRunner.__init__, cycle_run.CycleRunner.cycle
    plain_run = periodic.run_cycles
    scale_now = [1.0]

    def run_cycles(system, progress, initial, cycles, step_scale, max_cycles):
        scale_now[0] = step_scale
        return plain_run(system, progress, initial, cycles, step_scale, max_cycles)

    def init(self, batch, rhs, pts, *a, **k):
        plain_init(self, batch, rhs, pts, *a, **k)
        steps = np.diff(pts.theta)
        h = float(steps.min())
        g = grids.setdefault(f"x{scale_now[0]:g}", {"cycles": 0, "case_cycles": 0, "cpu_s": 0.0})
        g.update(steps_per_cycle=int(steps.size), steps_at_the_step=int(np.sum(steps < 1.5 * h)),
                 steps_at_twice=int(np.sum((steps >= 1.5 * h) & (steps < 3 * h))),
                 steps_longer=int(np.sum(steps >= 3 * h)), step_deg=round(h, 6))
        self._bench_grid = g

    def cycle(self, y, Y, F):
        t = time.process_time()
        try:
            return plain_cycle(self, y, Y, F)
        finally:
            g = self._bench_grid
            g["cpu_s"] += time.process_time() - t
            g["cycles"] += 1
            g["case_cycles"] += y.shape[1]

    cycle_run.CycleRunner.__init__, cycle_run.CycleRunner.cycle = init, cycle
    periodic.run_cycles = run_cycles
    t0 = time.process_time()
    try:
        res = cyclesim.simulate(cases)
    finally:
        cycle_run.CycleRunner.__init__, cycle_run.CycleRunner.cycle = plain_init, plain_cycle
        periodic.run_cycles = plain_run
    total = time.process_time() - t0
    for g in grids.values():
        g["cpu_ms_per_case_cycle"] = round(1e3 * g.pop("cpu_s") / max(g["case_cycles"], 1), 4)
    cycles = [int(r.summary["cycles_to_converge"]) for r in res if r.ok]
    return {"cases": len(cases), "simulate_cpu_s": round(total, 3), "grids": grids,
            "cycles_to_converge": {str(k): cycles.count(k) for k in sorted(set(cycles))},
            "judged_one_cycle_earlier": earlier(cases)}


def earlier(cases) -> dict:
    """The settling test on the first fine cycle against the last start-up cycle."""
    from cyclesim.api import _registry_for
    from cyclesim.solve.batch import build_batch
    from cyclesim.solve.periodic import COARSE_CYCLES
    from cyclesim.solve.solver import integrate

    reg = _registry_for(cases)
    passed = n = 0
    worst_imep = worst_m = 0.0
    for k in range(0, len(cases), 100):
        b = build_batch(cases[k:k + 100], reg)
        tr = integrate(b)
        tol = float(b.simulation.tolerance)
        imep = np.array([h[0] for h in tr.history])    # (cycles, B): net work per volume, per cycle
        m = np.array([h[1] for h in tr.history])
        c0, c1 = COARSE_CYCLES - 1, COARSE_CYCLES     # last start-up cycle, first fine cycle
        d_i = np.abs(imep[c1] - imep[c0]) / np.maximum(np.abs(imep[c1]), 1e3)
        d_m = np.abs(m[c1] - m[c0]) / np.abs(m[c1])
        ok = (d_i < tol) & (d_m < tol)
        # the reported cycle of each case: its last (cycles counts the start-up ones)
        last = tr.cycles.astype(int) - 1
        cols = np.arange(b.B)
        rep_i, rep_m = imep[last, cols], m[last, cols]
        e_i = np.abs(imep[c1] / rep_i - 1.0)
        e_m = np.abs(m[c1] / rep_m - 1.0)
        passed += int(ok.sum())
        n += b.B
        if ok.any():
            worst_imep = max(worst_imep, float(e_i[ok].max()))
            worst_m = max(worst_m, float(e_m[ok].max()))
    return {"cases_passing": passed, "of": n,
            "their_first_fine_cycle_vs_reported": {"imep_net_rel_max": worst_imep, "trapped_mass_rel_max": worst_m}}


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--cases", type=int, default=None)
    args = ap.parse_args(argv)
    print(json.dumps(measure(grid_cases(args.cases)), indent=1))


if __name__ == "__main__":
    main()
