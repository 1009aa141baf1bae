"""Accuracy of the integration step, printed as JSON: what a coarser default step would cost.

    python benchmarks/step_accuracy.py                  # steps 0.5 and 1.0 deg
    python benchmarks/step_accuracy.py --steps 0.25 0.5 1.0

For the three built-in demo engines at six operating points each (the config's own point, 1500 rpm
at 0.4 bar, 2000 rpm at 0.6 bar, 6000 rpm, 40 and 5 deg spark advance), every step's largest error
against a tenfold finer step than the default's (``simulation.step_deg = 0.05``), beside the bounds
of benchmarks/run.py: net IMEP and peak pressure within 0.05 %, burn angles and the angle of peak
pressure within 0.05 deg, PMEP within 0.005 bar.  Also the time of one fine cycle per case in a
100-case batch at each step and its number of grid points (the valve events and the burn keep
parts of the grid fine, so doubling the step does not halve the cost).  About 15 s on 2 cores.
"""

from __future__ import annotations

import argparse
import json
import time

BOUNDS = {"imep_net_rel": 5e-4, "p_max_rel": 5e-4, "angles_deg": 0.05, "pmep_bar": 0.005}
POINTS = {
    "own point": [],
    "1500 rpm, 0.4 bar": ["operating.speed_rpm=1500", "operating.intake_pressure_bar=0.4"],
    "2000 rpm, 0.6 bar": ["operating.speed_rpm=2000", "operating.intake_pressure_bar=0.6"],
    "6000 rpm": ["operating.speed_rpm=6000"],
    "advance 40 deg": ["burn.spark_advance_deg=40"],
    "advance 5 deg": ["burn.spark_advance_deg=5"],
}
ANGLES = ("ca10_deg", "ca50_deg", "ca90_deg", "theta_pmax_deg")


def errors(s: dict, ref: dict) -> dict:
    return {
        "imep_net_rel": abs(s["imep_net_bar"] / ref["imep_net_bar"] - 1),
        "p_max_rel": abs(s["p_max_bar"] / ref["p_max_bar"] - 1),
        "angles_deg": max(abs(s[k] - ref[k]) for k in ANGLES),
        "pmep_bar": abs(s["pmep_bar"] - ref["pmep_bar"]),
    }


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--steps", type=float, nargs="+", default=[0.5, 1.0])
    args = ap.parse_args(argv)

    import numpy as np

    import cyclesim
    from cyclesim.api import _registry_for
    from cyclesim.solve.batch import build_batch
    from cyclesim.config import load_config
    from cyclesim.solve.solver import grid_for, integrate

    out: dict = {"bounds": BOUNDS, "reference_step_deg": 0.05, "steps": {}}
    for h in args.steps:
        worst = {k: 0.0 for k in BOUNDS}
        where = {k: "" for k in BOUNDS}
        for cfg in ("demo", "demo_part_load", "demo_turbo"):
            for label, sets in POINTS.items():
                ref = cyclesim.simulate([load_config(cfg, sets + ["simulation.step_deg=0.05"])])[0].summary
                s = cyclesim.simulate([load_config(cfg, sets + [f"simulation.step_deg={h}"])])[0].summary
                for k, v in errors(s, ref).items():
                    if v > worst[k]:
                        worst[k], where[k] = v, f"{cfg}, {label}"
        cases = [load_config("demo", [f"burn.spark_advance_deg={10 + 0.2 * i}", f"simulation.step_deg={h}"])
                 for i in range(100)]
        batch = build_batch(cases, _registry_for(cases))
        start = integrate(batch).end_state
        ts = []
        for _ in range(3):
            t0 = time.perf_counter()
            integrate(batch, initial=start.copy(), cycles=1)
            ts.append(time.perf_counter() - t0)
        out["steps"][f"{h:g}"] = {
            "worst_error": worst,
            "at": where,
            "within_bounds": {k: worst[k] <= BOUNDS[k] for k in BOUNDS},
            "fine_cycle_per_case_in_100_batch_ms": 1e3 * float(np.median(ts)) / 100,
            "grid_points_per_fine_cycle": int(len(grid_for(batch, "full"))),
        }
    print(json.dumps(out, indent=2))


if __name__ == "__main__":
    main()
