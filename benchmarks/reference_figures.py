"""Summary figures of the demo configs and the benchmark's cases, written or compared as JSON.

    python benchmarks/reference_figures.py --write benchmarks/reference_figures.json
    python benchmarks/reference_figures.py --check benchmarks/reference_figures.json

The stored file holds the figures the cycle loop gave before the loop was rebuilt from the
submodels' own kernels; ``--check`` runs the same cases on the code as it is now and reports
the largest relative difference of every group, failing (exit 1) where a fixed-cycle figure
moves by more than 1e-9 relative, a converged figure by more than 1e-6, or a cycle count
changes.

Groups:
- ``fixed``: every demo config with convergence off (``tolerance`` 1e-12) and 6 cycles, so
  each case runs exactly its cycle count, by plain repetition (``simulation.periodic: plain``:
  an accelerated start would change the sixth cycle of a case that is not settled);
- ``converged``: the demo configs as shipped (periodic steady state by the tolerance);
- ``fixed_python``: the ``fixed`` group on the Python path (``CYCLESIM_KERNEL=python``);
- ``spark41``, ``closed41``, ``grid``: the benchmark's spark sweep, closed-cycle batch and a
  27-point corner set of its 1000-case grid, as shipped (converged).
"""

from __future__ import annotations

import argparse
import json
import math
import sys

CONFIGS = ("demo", "demo_turbo", "demo_closed", "demo_part_load")
FIXED = ["simulation.tolerance=1e-12", "simulation.max_cycles=6", "simulation.periodic=plain"]


def cases():
    import numpy as np

    from cyclesim.config import load_config

    groups = {
        "fixed": [(c, load_config(c, FIXED)) for c in CONFIGS],
        "converged": [(c, load_config(c)) for c in CONFIGS],
        "spark41": [(f"demo@{a}", load_config("demo", [f"burn.spark_advance_deg={a}"])) for a in range(0, 41)],
        "closed41": [(f"demo_closed@{a}", load_config("demo_closed", [f"burn.spark_advance_deg={a}"]))
                     for a in range(0, 41)],
    }
    grid = []
    for n in np.linspace(1500, 6000, 3):
        for p in np.linspace(0.4, 1.0, 3):
            for a in np.linspace(10, 40, 3):
                grid.append((f"demo@{n:g}rpm,{p:g}bar,{a:g}deg",
                             load_config("demo", [f"operating.speed_rpm={n}", f"operating.intake_pressure_bar={p}",
                                                  f"burn.spark_advance_deg={a}"])))
    groups["grid"] = grid
    return groups


def figures():
    import os

    import cyclesim

    out = {}
    groups = cases()
    groups["fixed_python"] = groups["fixed"]
    for group, items in groups.items():
        if group == "fixed_python":
            os.environ["CYCLESIM_KERNEL"] = "python"
        try:
            res = cyclesim.simulate([c for _, c in items])
        finally:
            os.environ.pop("CYCLESIM_KERNEL", None)
        out[group] = {}
        for (name, _), r in zip(items, res):
            if r.error:
                out[group][name] = {"error": r.error}
                continue
            out[group][name] = {k: v for k, v in r.summary.items()
                                if isinstance(v, (int, float)) and not isinstance(v, bool)}
    return out


def rel(a, b) -> float:
    if isinstance(a, int) and isinstance(b, int):
        return 0.0 if a == b else math.inf
    if not (math.isfinite(a) and math.isfinite(b)):
        return 0.0 if (a == b or (math.isnan(a) and math.isnan(b))) else math.inf
    return abs(a - b) / max(abs(a), abs(b), 1e-300) if a != b else 0.0


def compare(ref: dict, new: dict) -> tuple[dict, list]:
    """Largest relative difference per group, and the failures (group, case, key, ref, new)."""
    worst: dict = {}
    bad: list = []
    for group, items in ref.items():
        tol = 1e-9 if group.startswith("fixed") else 1e-6
        w = 0.0
        for name, figs in items.items():
            got = new.get(group, {}).get(name)
            if got is None or ("error" in figs) != ("error" in got):
                bad.append((group, name, "error", figs.get("error"), got and got.get("error")))
                continue
            for k, v in figs.items():
                if k == "error":
                    continue
                g = got.get(k)
                if g is None:
                    bad.append((group, name, k, v, None))
                    continue
                d = rel(float(v), float(g)) if not (k == "cycles_to_converge") else (0.0 if v == g else math.inf)
                # figures that are zero to rounding (e.g. a knock integral without knock) compare absolutely
                if abs(v) < 1e-12 and abs(g) < 1e-12:
                    d = 0.0
                w = max(w, d)
                if d > tol:
                    bad.append((group, name, k, v, g))
        worst[group] = w
    return worst, bad


def main(argv=None) -> int:
    ap = argparse.ArgumentParser()
    g = ap.add_mutually_exclusive_group(required=True)
    g.add_argument("--write", metavar="JSON")
    g.add_argument("--check", metavar="JSON")
    args = ap.parse_args(argv)
    new = figures()
    if args.write:
        with open(args.write, "w") as fh:
            json.dump(new, fh, indent=1, sort_keys=True)
        print(f"wrote {args.write}")
        return 0
    with open(args.check) as fh:
        ref = json.load(fh)
    worst, bad = compare(ref, new)
    for group, w in worst.items():
        print(f"{group:10s} largest relative difference {w:.3g}")
    for b in bad[:20]:
        print("DIFFERS", *b)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
