"""Before/after table of two ``benchmarks/run.py`` outputs (timings: after / before).

    python benchmarks/compare.py benchmarks/before_run.json benchmarks/after_run.json
"""

from __future__ import annotations

import json
import sys


def rows(before: dict, after: dict):
    for k, v in before.items():
        w = after.get(k)
        if isinstance(v, (int, float)) and not isinstance(v, bool) and isinstance(w, (int, float)):
            yield k, float(v), float(w), (w / v if v else float("nan"))
    for k, w in after.items():
        if k not in before and isinstance(w, (int, float)) and not isinstance(w, bool):
            yield k, float("nan"), float(w), float("nan")


def main(argv=None) -> int:
    a, b = (argv or sys.argv[1:])[:2]
    with open(a) as fa, open(b) as fb:
        before, after = json.load(fa), json.load(fb)
    print(f"{'figure':45s} {'before':>12s} {'after':>12s} {'after/before':>13s}")
    for k, v, w, r in rows(before, after):
        print(f"{k:45s} {v:12.5g} {w:12.5g} {r:13.3f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
