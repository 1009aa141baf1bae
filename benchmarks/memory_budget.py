"""Estimated against measured peak memory of runs, the figures behind cyclesim.solve.budget.

    python benchmarks/memory_budget.py          # about a minute on 2 cores

Each line runs one request in a fresh process and prints the estimate of cyclesim.solve.budget, the
peak resident memory measured (ru_maxrss) and their ratio; an estimate is meant to lie above
the measurement (ratio > 1) and within about a factor 2 of it.
"""

from __future__ import annotations

import json
import subprocess
import sys

SIMULATE = """
import json, resource, sys
import cyclesim
from cyclesim.solve.budget import batch_bytes, steps_per_cycle
from cyclesim.config import case_with, load_config
cfg, rpm, n = sys.argv[1], float(sys.argv[2]), int(sys.argv[3])
base = load_config(cfg, [f"operating.speed_rpm={rpm}"])
cases = [case_with(base, {"burn.spark_advance_deg": 10 + i}) for i in range(n)]
est = batch_bytes(steps_per_cycle(base), n)
ok = all(r.ok for r in cyclesim.simulate(cases))
print(json.dumps({"estimate": est, "peak": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024, "ok": ok}))
"""

TRACES = """
import json, resource, sys
from cyclesim.solve import budget
from cyclesim.traces.synthesis import synthesize, output_grid
from cyclesim.config import load_config
n, res = int(sys.argv[1]), float(sys.argv[2])
case = load_config("demo")
out, fine = output_grid(res)
est = budget.trace_bytes(n, 720 / fine + 1, 720 / out + 1)
synthesize(case, n, resolution_deg=res)
print(json.dumps({"estimate": est, "peak": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024, "ok": True}))
"""


def measure(code: str, *args) -> dict:
    r = subprocess.run([sys.executable, "-c", code, *map(str, args)], capture_output=True, text=True, check=True)
    return json.loads(r.stdout.strip().splitlines()[-1])


def main() -> None:
    rows = []
    for cfg, rpm, n in (("demo", 3000, 1), ("demo", 200, 1), ("demo", 200, 8), ("demo", 100, 1), ("demo", 100, 8)):
        m = measure(SIMULATE, cfg, rpm, n)
        rows.append({"request": f"simulate {cfg} {rpm} rpm x {n}", **m})
    for n, res in ((50, 2.0), (500, 2.0), (500, 0.2)):
        m = measure(TRACES, n, res)
        rows.append({"request": f"traces demo {n} cycles at {res} deg", **m})
    for r in rows:
        print(f"{r['request']:<36s} estimate {r['estimate'] / 2**20:8.0f} MiB  measured {r['peak'] / 2**20:8.0f} MiB"
              f"  ratio {r['estimate'] / r['peak']:.2f}")


if __name__ == "__main__":
    main()
