"""Cycles to periodic steady state with and without acceleration, per demo config and speed.

    python benchmarks/periodic_cycles.py [--tolerance 5e-4]

Prints, for the full-cycle demo configs at 800, 3000 and 6000 rpm, the cycles each method ran
(start-up cycles included), the accelerated starts, and the largest relative difference of the
summary figures between the two methods.
"""

from __future__ import annotations

import argparse
import json

CONFIGS = ("demo", "demo_turbo", "demo_part_load")
SPEEDS_RPM = (800, 3000, 6000)


def compare(tolerance: float | None = None) -> list[dict]:
    import math

    import cyclesim
    from cyclesim.config import load_config

    rows = []
    extra = [f"simulation.tolerance={tolerance}"] if tolerance else []
    for cfg in CONFIGS:
        for n in SPEEDS_RPM:
            res = {}
            for method in ("plain", "anderson"):
                case = load_config(cfg, [f"operating.speed_rpm={n}", f"simulation.periodic={method}"] + extra)
                res[method] = cyclesim.simulate([case])[0]
            a, p = res["anderson"].summary, res["plain"].summary
            diffs = [abs(a[k] - p[k]) / max(abs(p[k]), 1e-300) for k in p if k != "cycles_to_converge"
                     and isinstance(p[k], float) and math.isfinite(p[k]) and p[k] != 0.0]
            rows.append({"config": cfg, "speed_rpm": n,
                         "cycles_plain": int(p["cycles_to_converge"]), "cycles_anderson": int(a["cycles_to_converge"]),
                         "imep_net_rel_diff": abs(a["imep_net_bar"] / p["imep_net_bar"] - 1),
                         "largest_rel_diff": max(diffs)})
    return rows


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--tolerance", type=float, default=None, help="simulation.tolerance (default: the config's)")
    args = ap.parse_args(argv)
    for r in compare(args.tolerance):
        print(json.dumps(r))


if __name__ == "__main__":
    main()
