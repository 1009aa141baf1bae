"""Speed of the pipe solver (cyclesim.pipes), printed as JSON.

    python benchmarks/pipes.py              # 30-cell runners, batches of 1 and 40, 1500 and 6000 rpm
    python benchmarks/pipes.py --cells 30 60

An intake runner (air at 300 K, constant gamma; valve at x = L, open end to
1 bar at x = 0) and an exhaust runner (burned gas from the project's NASA-7
data, Newton recovery of T; valve at x = 0, open end at x = L), each 0.4 m
long and 35 mm across, as one pipe system advanced through the coupling
surface (``cyclesim.pipes.advance_crank_step``) every 0.5 crank degree with an
invented cylinder: valve areas opening and shutting over 240 degrees, a
cylinder pressure of a few bar at exhaust opening falling to about 1 bar.
Figures: cell updates (sub-steps times cells) per CPU second and per wall
second (a loaded machine inflates wall time; the first call's compilation is
excluded), the sub-steps per cycle, the CPU time per cycle, and for the kernel
alone (one call over a cycle with the ends held) its rate.

Target of the wave-action issue, item 6, restated for the pipes alone: one
operating point with an intake and an exhaust runner of about 30 cells to
periodic steady state within 1 s at 1500 rpm and 0.3 s at 6000 rpm, counted as
``--cycles`` cycles (default 12; plain repetition of cycles needs 8-20), less
the cylinder's own time for those cycles (the recorded ``one_point_s`` per
``one_point_cycles`` of ``benchmarks/after_run.json``), leaves the pipes' budget
per cycle printed beside their time per cycle.
"""

from __future__ import annotations

import argparse
import json
import pathlib
import time

import numpy as np

from cyclesim import fuels, pipes
from cyclesim.pipes import _jit

HERE = pathlib.Path(__file__).resolve().parent
TARGETS_S = {1500.0: 1.0, 6000.0: 0.3}


def _system(B, n):
    intake = pipes.Pipes(np.full(B, 0.4), 0.035, n, roughness_m=2e-5, wall_temperature_K=320.0, n_cases=B)
    intake.set_state(1e5, 300.0)
    pipes.set_end(intake.ends, 0, intake.face_area[:, 0], 1e5, 300.0)
    gas = pipes.fuel_mixture(fuels.get_fuel("isooctane"), np.ones(B))
    exhaust = pipes.Pipes(np.full(B, 0.4), 0.035, n, gas=gas, roughness_m=2e-5, wall_temperature_K=500.0,
                          n_cases=B)
    exhaust.set_state(1e5, 800.0, burned_fraction=1.0)
    pipes.set_end(exhaust.ends, 1, exhaust.face_area[:, -1], 1e5, 800.0, burned_fraction=1.0)
    return pipes.PipeSystem([intake, exhaust], [1, 0])


def _cylinder(theta):
    """Invented valve area fractions and cylinder state at crank angle ``theta`` [deg, 0 = exhaust opening]."""
    exh = max(np.sin(np.pi * theta / 240.0), 0.0) if theta < 240 else 0.0
    th_i = theta - 220.0
    inl = max(np.sin(np.pi * th_i / 240.0), 0.0) if 0 <= th_i < 240 else 0.0
    p = 1e5 * (1.0 + 3.0 * np.exp(-theta / 40.0)) if theta < 240 else 0.9e5
    T = 1100.0 if theta < 260 else 400.0
    return inl, exh, p, T


def _run(B, n, speed_rpm, cycles=1.0):
    system = _system(B, n)
    area = system.runners[0].face_area[0, 0]
    step_deg = 0.5
    step_s = step_deg / (6.0 * speed_rpm)
    n_steps = int(round(cycles * 720 / step_deg))
    pipes.advance_crank_step(system, step_s, np.zeros((B, 2)), 1e5, 800.0, 1.0)    # compile / warm
    cda = np.empty((B, 2))
    updates = 0
    t0, c0 = time.perf_counter(), time.process_time()
    for i in range(n_steps):
        inl, exh, p, T = _cylinder((i * step_deg) % 720.0)
        cda[:, 0] = 0.5 * area * inl
        cda[:, 1] = 0.5 * area * exh
        r = pipes.advance_crank_step(system, step_s, cda, p, T, 1.0 if T > 500 else 0.1)
        updates += int(r["steps"].sum()) * n
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    # the kernel alone: each runner over a whole cycle in one call, its ends held
    t1 = time.process_time()
    kern = 0
    for pipe in system.runners:
        kern += int(pipe.advance(cycles * 720 * step_s)["steps"].sum()) * n
    kernel_rate = kern / (time.process_time() - t1)
    return {"cells": n, "batch": B, "speed_rpm": speed_rpm,
            "cell_updates_per_cpu_s": round(updates / cpu), "cell_updates_per_wall_s": round(updates / wall),
            "kernel_only_per_cpu_s": round(kernel_rate),
            "substeps_per_cycle_per_case": round(updates / n / B / cycles),
            "cpu_s_per_cycle_per_case": round(cpu / cycles / B, 4),
            "fallback_steps": int(sum(p.fallback_steps.sum() for p in system.runners))}


def _cylinder_s_per_cycle():
    try:
        rec = json.loads((HERE / "after_run.json").read_text())
        return float(rec["one_point_s"]) / float(rec["one_point_cycles"])
    except (OSError, KeyError, ValueError, ZeroDivisionError):
        return None


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cells", type=int, nargs="+", default=[30])
    ap.add_argument("--cycles", type=float, default=12.0, help="cycles counted to periodic steady state")
    args = ap.parse_args(argv)
    out = {"compiled": _jit.COMPILED, "runs": []}
    for n in args.cells:
        for speed in TARGETS_S:
            for B in (1, 40):
                out["runs"].append(_run(B, n, speed, cycles=1.0 if B == 1 else 0.25))
    cyl = _cylinder_s_per_cycle()
    out["cylinder_s_per_cycle_recorded"] = cyl
    targets = {}
    for speed, target in TARGETS_S.items():
        run = next(r for r in out["runs"] if r["batch"] == 1 and r["speed_rpm"] == speed
                   and r["cells"] == args.cells[0])
        budget = None if cyl is None else (target - args.cycles * cyl) / args.cycles
        targets[f"{speed:.0f}_rpm"] = {
            "point_target_s": target, "cycles": args.cycles,
            "pipes_cpu_s_per_cycle": run["cpu_s_per_cycle_per_case"],
            "pipes_cpu_s_for_the_cycles": round(args.cycles * run["cpu_s_per_cycle_per_case"], 3),
            "pipes_budget_s_per_cycle": None if budget is None else round(budget, 4),
            "within_budget": None if budget is None else run["cpu_s_per_cycle_per_case"] <= budget}
    out["target_pipes_alone"] = targets
    print(json.dumps(out, indent=1))


if __name__ == "__main__":
    main()
