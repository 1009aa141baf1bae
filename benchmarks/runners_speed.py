"""Speed of a run with runners (configs/demo_runners.yaml: 300 mm intake, 400 mm exhaust, 30 cells
each) against the wave-action issue's targets, and the halved-cell check.

    python benchmarks/runners_speed.py [--repeat 3] [--workers 2] [--no-sweep] [--no-cells]

Prints, each beside its target:

1. one operating point to periodic steady state in-process at 1500 and 6000 rpm (median of
   ``--repeat`` runs after one untimed run that loads the compiled loop): wall seconds and the
   process's CPU seconds (one thread: the wall time on an idle core), cycles to
   converge (start-up cycles included), pipe cell updates per wall and per CPU second, the
   runners' sub-steps, and the loop it ran on;
2. a 41-point speed sweep 1500-6000 rpm on ``--workers`` worker processes (wall time of
   :func:`cyclesim.parallel.run_cases`, the workers' start included, and the workers' CPU time);
3. volumetric efficiency and brake torque at 30 and at 60 cells per runner (1500, 3000, 4500,
   6000 rpm) and their relative change (target below 0.5 %).

The machine's load (``os.getloadavg``) is printed first: on a shared machine the times scale with it.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

TARGET_POINT_S = {1500.0: 1.0, 6000.0: 0.3}
TARGET_SWEEP_S = 20.0
TARGET_CELL_CHANGE = 0.005


def one_point(speed_rpm: float, repeat: int) -> dict:
    from runner_tuning import speed_point

    speed_point(speed_rpm)                       # untimed: loads (or compiles) the loop
    runs = [speed_point(speed_rpm) for _ in range(repeat)]
    out = dict(runs[-1])
    out["seconds"] = statistics.median(r["seconds"] for r in runs)
    out["cpu_seconds"] = statistics.median(r["cpu_seconds"] for r in runs)
    out["cell_updates_per_s"] = statistics.median(r["cell_updates_per_s"] for r in runs)
    out["cell_updates_per_cpu_s"] = statistics.median(r["cell_updates_per_cpu_s"] for r in runs)
    return out


def sweep(workers: int) -> tuple[float, list]:
    import cyclesim
    from cyclesim.parallel import run_cases

    speeds = np.linspace(1500.0, 6000.0, 41)
    cases = [cyclesim.load_config("demo_runners", [f"operating.speed_rpm={n:g}"]) for n in speeds]
    t = time.perf_counter()
    c0 = os.times()
    res = run_cases(cases, workers=workers, max_chunk=(len(cases) + workers - 1) // workers)
    c1 = os.times()
    cpu = (c1.children_user - c0.children_user) + (c1.children_system - c0.children_system)
    return time.perf_counter() - t, cpu, res


def cell_check(speeds=(1500.0, 3000.0, 4500.0, 6000.0)) -> list[dict]:
    import cyclesim

    rows = []
    for n in speeds:
        got = {}
        for cells in (30, 60):
            case = cyclesim.load_config("demo_runners", [f"operating.speed_rpm={n:g}", f"intake.runner.cells={cells}",
                                                         f"exhaust.runner.cells={cells}"])
            got[cells] = cyclesim.simulate([case])[0].summary
        ve = {c: s["volumetric_efficiency"] for c, s in got.items()}
        tq = {c: s["torque_Nm"] for c, s in got.items()}
        rows.append({"speed_rpm": n, "ve_30": ve[30], "ve_60": ve[60], "torque_30": tq[30], "torque_60": tq[60],
                     "ve_change": abs(ve[60] / ve[30] - 1.0), "torque_change": abs(tq[60] / tq[30] - 1.0)})
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--no-sweep", action="store_true")
    ap.add_argument("--no-cells", action="store_true")
    a = ap.parse_args(argv)
    print("load average (1, 5, 15 min): " + ", ".join(f"{x:.2f}" for x in os.getloadavg())
          + f" on {os.cpu_count()} CPUs")
    ok = True
    for n, target in TARGET_POINT_S.items():
        r = one_point(n, a.repeat)
        ok &= r["seconds"] <= target
        print(f"one point {n:.0f} rpm: {r['seconds']:.3f} s in-process (target {target:g} s; CPU time of the"
              f" process {r['cpu_seconds']:.3f} s), {r['cycles']} cycles"
              f" (converged {r['converged']}), {r['cell_updates_per_s'] / 1e6:.2f} M cell updates per wall s"
              f" ({r['cell_updates_per_cpu_s'] / 1e6:.2f} M per CPU s; sub-steps intake, exhaust"
              f" {r['substeps'][0]:.0f}, {r['substeps'][1]:.0f}), loop {r['loop']}")
    if not a.no_sweep:
        dt, cpu, res = sweep(a.workers)
        errors = sum(r.error is not None for r in res)
        cyc = [r.summary.get("cycles_to_converge", 0) for r in res]
        ok &= dt <= TARGET_SWEEP_S and errors == 0
        print(f"41-point speed sweep 1500-6000 rpm on {a.workers} workers: {dt:.1f} s (target {TARGET_SWEEP_S:g} s;"
              f" the workers' CPU time {cpu:.1f} s, over {a.workers} idle cores {cpu / a.workers:.1f} s),"
              f" {errors} errors, cycles {min(cyc):.0f}-{max(cyc):.0f}")
    if not a.no_cells:
        print("speed_rpm  VE30 %   VE60 %  dVE %   T30 Nm   T60 Nm  dT %   (target < 0.5 %)")
        for r in cell_check():
            ok &= max(r["ve_change"], r["torque_change"]) < TARGET_CELL_CHANGE
            print(f"{r['speed_rpm']:8.0f} {100 * r['ve_30']:7.2f} {100 * r['ve_60']:7.2f} {100 * r['ve_change']:6.3f}"
                  f" {r['torque_30']:8.2f} {r['torque_60']:8.2f} {100 * r['torque_change']:6.3f}")
    print("all targets met" if ok else "some targets not met")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
