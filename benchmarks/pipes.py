"""Speed of the pipe solver (cyclesim.pipes), printed as JSON.

    python benchmarks/pipes.py              # 30-cell pipes, batches of 1 and 40
    python benchmarks/pipes.py --cells 30 60

Cell updates per second (sub-steps times cells, over the process's CPU time and
over wall time, which a loaded machine inflates; the first call's compilation
excluded; "kernel only": one call over a cycle, without a Python call per crank step) for an intake-like runner (air at 300 K, constant gamma)
and an exhaust-like one (burned gas at 900 K from the project's NASA-7 data,
Newton recovery of T), each 0.4 m long, between a pulsing valve end and an
open end, in a batch of 1 and of 40 cases.  Then what the rate implies for the
target of the wave-action issue: one operating point at 1500 rpm with one
intake and one exhaust runner of 30 cells to periodic steady state, counted as
12 cycles (plain repetition needs 8-20), sub-steps from each runner's own CFL
step.  The valve end changes every 0.5 crank degree, as a coupled cylinder would.
"""

from __future__ import annotations

import argparse
import json
import time

import numpy as np

from cyclesim import fuels, pipes
from cyclesim.pipes import _jit


def _runner(B, n, exhaust):
    gas = pipes.fuel_mixture(fuels.get_fuel("isooctane"), np.ones(B)) if exhaust else None
    pipe = pipes.Pipes(np.full(B, 0.4), 0.035, n, gas=gas, roughness_m=2e-5,
                       wall_temperature_K=500.0 if exhaust else 320.0, n_cases=B)
    T = 900.0 if exhaust else 300.0
    pipe.set_state(1e5, T, burned_fraction=1.0 if exhaust else 0.0)
    return pipe, T


def _rate(B, n, exhaust, speed_rpm=1500.0, cycles=1.0):
    pipe, T = _runner(B, n, exhaust)
    ends = pipes.closed_ends(B)
    pipes.set_end(ends, 1, pipe.face_area[:, -1], 1e5, T, burned_fraction=1.0 if exhaust else 0.0)
    step_s = 0.5 / (6.0 * speed_rpm)                         # 0.5 crank degree
    n_steps = int(round(cycles * 720 / 0.5))
    area = pipe.face_area[0, 0]
    pipe.advance(step_s, ends)                               # compile / warm
    cells = 0
    t0, c0 = time.perf_counter(), time.process_time()
    for i in range(n_steps):
        phase = 2 * np.pi * i / 1440
        open_frac = max(np.sin(phase), 0.0)                  # a valve open half the cycle
        p_cyl = 1e5 * (1.0 + (3.0 if exhaust else -0.3) * open_frac)
        pipes.set_end(ends, 0, 0.5 * area * open_frac, p_cyl, 1100.0 if exhaust else 320.0,
                      burned_fraction=1.0)
        r = pipe.advance(step_s, ends)
        cells += int(r["steps"].sum()) * n
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    steps_per_cycle = cells / n / B / cycles
    # the kernel alone: one call over a whole cycle, no per-crank-step Python
    t1 = time.process_time()
    r = pipe.advance(cycles * 720 * step_s, ends)
    kernel = int(r["steps"].sum()) * n / (time.process_time() - t1)
    return cells / cpu, cells / wall, kernel, steps_per_cycle, wall


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cells", type=int, nargs="+", default=[30])
    args = ap.parse_args(argv)
    out = {"compiled": _jit.COMPILED, "runs": []}
    for n in args.cells:
        for exhaust in (False, True):
            for B in (1, 40):
                rate, rate_wall, kernel, spc, wall = _rate(B, n, exhaust, cycles=1.0 if B == 1 else 0.25)
                out["runs"].append({"cells": n, "runner": "exhaust" if exhaust else "intake", "batch": B,
                                    "cell_updates_per_cpu_s": round(rate), "cell_updates_per_wall_s": round(rate_wall),
                                    "kernel_only_per_cpu_s": round(kernel), "substeps_per_cycle": round(spc),
                                    "wall_s": round(wall, 3)})
    single = [r for r in out["runs"] if r["batch"] == 1 and r["cells"] == args.cells[0]]
    work = sum(r["substeps_per_cycle"] * r["cells"] for r in single)         # both runners, one cycle
    secs = sum(r["substeps_per_cycle"] * r["cells"] / r["cell_updates_per_cpu_s"] for r in single)
    kern = sum(r["substeps_per_cycle"] * r["cells"] / r["kernel_only_per_cpu_s"] for r in single)
    out["target_1500rpm"] = {"cell_updates_per_cycle": work,
                             "cpu_s_per_cycle_crank_step_calls": round(secs, 4),
                             "cpu_s_for_12_cycles_crank_step_calls": round(12 * secs, 3),
                             "cpu_s_for_12_cycles_kernel_only": round(12 * kern, 3), "target_s": 1.0}
    print(json.dumps(out, indent=1))


if __name__ == "__main__":
    main()
