"""The timing figures of ``benchmarks/run.py`` through the public API only, as JSON.

    python benchmarks/tree_probe.py [--no-grid] [--repeat 3]

Every figure is given twice: ``<name>_wall_s`` (median wall clock of ``--repeat`` calls) and
``<name>_cpu_s`` (median process CPU time of the same calls, user + system).  Only
``cyclesim.simulate`` and ``cyclesim.config.load_config`` are used, so the script runs unchanged
against an older tree of the package (``benchmarks/compare_trees.py`` runs it in two trees).  The
NO model is switched off where the tree has one (``emissions.model=none``), so both trees do the
same work.  The cases are those of ``benchmarks/run.py``: one point, the 41-point spark sweep,
the closed 41-case batch at the demo's output step, a 100-case batch and the 1000-case grid.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import time

SAME_WORK = ["emissions.model=none"]


def _cfg(name, overrides=()):
    from cyclesim.config import load_config

    try:
        return load_config(name, list(overrides) + SAME_WORK)
    except Exception:       # a tree without the NO model: the override names no known section
        return load_config(name, list(overrides))


def _both(fn, repeat: int) -> tuple[float, float]:
    """Median wall and median CPU seconds of ``repeat`` calls of ``fn``."""
    wall, cpu = [], []
    for _ in range(repeat):
        t, c = time.perf_counter(), time.process_time()
        fn()
        cpu.append(time.process_time() - c)
        wall.append(time.perf_counter() - t)
    return statistics.median(wall), statistics.median(cpu)


def _child_both(cmd: list[str], repeat: int) -> tuple[float, float]:
    """Median wall and CPU seconds (the child's, user + system) of a whole process."""
    import resource

    wall, cpu = [], []
    for _ in range(repeat):
        r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
        t = time.perf_counter()
        subprocess.run(cmd, capture_output=True, check=True)
        wall.append(time.perf_counter() - t)
        r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
        cpu.append(r1.ru_utime + r1.ru_stime - r0.ru_utime - r0.ru_stime)
    return statistics.median(wall), statistics.median(cpu)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--no-grid", action="store_true", help="skip the 1000-case grid")
    args = ap.parse_args(argv)
    import numpy as np

    import cyclesim

    res: dict = {}

    def put(name, wc):
        res[f"{name}_wall_s"], res[f"{name}_cpu_s"] = wc

    base = _cfg("demo")
    cyclesim.simulate([base])                 # warm caches (gas tables, the compiled loop)
    put("one_point", _both(lambda: cyclesim.simulate([base]), max(5, args.repeat)))
    spark = [_cfg("demo", [f"burn.spark_advance_deg={a}"]) for a in range(0, 41)]
    put("spark_sweep_41", _both(lambda: cyclesim.simulate(spark), args.repeat))
    closed1 = _cfg("demo_closed")
    closed41 = [_cfg("demo_closed", [f"burn.spark_advance_deg={a}"]) for a in range(0, 41)]
    cyclesim.simulate([closed1])
    put("closed_41", _both(lambda: cyclesim.simulate(closed41), max(5, args.repeat)))
    b100 = [_cfg("demo", [f"burn.spark_advance_deg={10 + 0.2 * i}"]) for i in range(100)]
    put("batch100", _both(lambda: cyclesim.simulate(b100), args.repeat))
    if not args.no_grid:
        grid = [_cfg("demo", [f"operating.speed_rpm={n}", f"operating.intake_pressure_bar={p}",
                              f"burn.spark_advance_deg={a}"])
                for n in np.linspace(1500, 6000, 10) for p in np.linspace(0.4, 1.0, 10)
                for a in np.linspace(10, 40, 10)]
        put("grid_1000", _both(lambda: cyclesim.simulate(grid), 1))
    cli = [sys.executable, "-m", "cyclesim", "run", "demo"]
    same = cli + ["--set", SAME_WORK[0]]
    # a tree without the NO model rejects the override (exit 2): it runs the demo as it is
    ok = subprocess.run(same, capture_output=True).returncode == 0
    put("cli_run", _child_both(same if ok else cli, args.repeat))
    res["threads"] = os.environ.get("CYCLESIM_THREADS", "default")
    print(json.dumps(res))
    return 0


if __name__ == "__main__":
    sys.exit(main())
