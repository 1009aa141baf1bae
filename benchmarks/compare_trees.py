"""Old tree against new tree: the same timing script run in both, interleaved, median of N.

    python benchmarks/compare_trees.py /path/to/old/tree            # new tree: this one
    python benchmarks/compare_trees.py OLD NEW --repeat 5 --no-grid
    python benchmarks/compare_trees.py OLD --own-run                # each tree's own run.py --quick

By default ``benchmarks/tree_probe.py`` of *this* tree (public API only) is run with each tree's
interpreter (``<tree>/.venv/bin/python``, else ``--python-old`` / ``--python-new``) from a
temporary folder, so both trees do exactly the same work; every figure comes in CPU time and in
wall time.  ``--own-run`` runs each tree's own ``benchmarks/run.py --quick`` instead and compares
the numeric figures both print (wall clock, as that script gives them) beside the whole process's
CPU time.  Runs alternate old/new, and the order flips every round so a drift in the machine's
load falls on both.  The load average (``os.getloadavg``) is printed beside every run.

On a shared machine CPU time is the meaningful figure: the wall clock also measures the other
users of the cores, the CPU time only this work (it still moves by a few percent when caches and
memory bandwidth are shared).  The verdict is issue 19's rule: a figure more than 5 % slower in
the new tree (median new / median old > 1.05) fails.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
PROBE = HERE / "tree_probe.py"
LIMIT = 1.05


def _python(tree: Path, given: str | None) -> str:
    if given:
        return given
    py = tree / ".venv" / "bin" / "python"
    if not py.exists():
        sys.exit(f"error: no interpreter at {py} (give --python-old / --python-new)")
    return str(py)


def run_once(py: str, tree: Path, own_run: bool, extra: list[str], env: dict) -> dict:
    """One run of the timing script in ``tree``: its figures (JSON) and the process's CPU time."""
    if own_run:
        cmd, cwd = [py, str(tree / "benchmarks" / "run.py"), "--quick", *extra], str(tree)
    else:
        cmd, cwd = [py, str(PROBE), *extra], tempfile.mkdtemp(prefix="cyclesim-probe-")
    r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    out = subprocess.run(cmd, cwd=cwd, env=env, capture_output=True, text=True)
    r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    if out.returncode:
        sys.exit(f"error: {' '.join(cmd)} failed in {tree}: {out.stderr.strip().splitlines()[-1:]}")
    figs = json.loads(out.stdout)
    figs = {k: float(v) for k, v in figs.items()
            if isinstance(v, (int, float)) and not isinstance(v, bool)}
    figs["whole_script_cpu_s"] = r1.ru_utime + r1.ru_stime - r0.ru_utime - r0.ru_stime
    return figs


def _is_timing(key: str) -> bool:
    return key.endswith(("_s", "_ms")) and "ratio" not in key and "speedup" not in key


def table(old: list[dict], new: list[dict]) -> list[tuple]:
    """Rows (figure, median old, median new, new/old, verdict) for the timing figures in both."""
    keys = [k for k in old[0] if k in new[0] and _is_timing(k)]
    rows = []
    for k in keys:
        mo = statistics.median(r[k] for r in old if k in r)
        mn = statistics.median(r[k] for r in new if k in r)
        ratio = mn / mo if mo else float("nan")
        rows.append((k, mo, mn, ratio, "ok" if ratio <= LIMIT else "SLOWER >5%"))
    # CPU figures first, then wall: CPU time is the one to judge by on a shared machine
    rows.sort(key=lambda r: (0 if "cpu" in r[0] else 1, r[0]))
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("old", type=Path)
    ap.add_argument("new", type=Path, nargs="?", default=HERE.parent)
    ap.add_argument("--repeat", "-n", type=int, default=5, help="runs of each tree (default 5)")
    ap.add_argument("--own-run", action="store_true", help="each tree's own benchmarks/run.py --quick")
    ap.add_argument("--no-grid", action="store_true", help="probe without the 1000-case grid")
    ap.add_argument("--python-old")
    ap.add_argument("--python-new")
    ap.add_argument("--json", type=Path, help="also write every run's figures here")
    args = ap.parse_args(argv)
    trees = {"old": args.old.resolve(), "new": args.new.resolve()}
    pys = {"old": _python(trees["old"], args.python_old), "new": _python(trees["new"], args.python_new)}
    extra = ["--no-grid"] if (args.no_grid and not args.own_run) else []
    env = dict(os.environ)
    env.pop("PYTHONPATH", None)
    env.pop("VIRTUAL_ENV", None)
    runs: dict = {"old": [], "new": []}
    loads: dict = {"old": [], "new": []}
    print(f"old: {trees['old']}\nnew: {trees['new']}\nCYCLESIM_THREADS={env.get('CYCLESIM_THREADS', '(unset)')}"
          f"  script: {'each tree`s benchmarks/run.py --quick' if args.own_run else PROBE.name}")
    for i in range(args.repeat):
        for side in (("old", "new") if i % 2 == 0 else ("new", "old")):
            load = os.getloadavg()[0]
            figs = run_once(pys[side], trees[side], args.own_run, extra, env)
            runs[side].append(figs)
            loads[side].append(load)
            print(f"  run {i + 1}/{args.repeat} {side}: load {load:.2f}, "
                  f"script CPU {figs['whole_script_cpu_s']:.2f} s", flush=True)
    print(f"\nload average (1 min) at the runs: old median {statistics.median(loads['old']):.2f}, "
          f"new median {statistics.median(loads['new']):.2f}  (uptime: {os.getloadavg()})")
    print(f"{'figure':38s} {'old':>10s} {'new':>10s} {'new/old':>8s}  verdict (<= {LIMIT:.2f})")
    for k, mo, mn, ratio, verdict in table(runs["old"], runs["new"]):
        print(f"{k:38s} {mo:10.4g} {mn:10.4g} {ratio:8.3f}  {verdict}")
    if args.json:
        args.json.write_text(json.dumps({"trees": {k: str(v) for k, v in trees.items()},
                                         "runs": runs, "loads": loads}, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
