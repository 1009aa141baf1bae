"""Figures of the predictive model's benchmark cases, written or compared as JSON.

    CYCLESIM_THREADS=1 python benchmarks/predictive_figures.py --write before.json
    CYCLESIM_THREADS=1 python benchmarks/predictive_figures.py --check before.json

The cases of ``benchmarks/emissions.py --predictive``: the demo at one point and as a 41-point
spark sweep (advance 0..40 deg), with the entrainment burn on one zone, on two zones, and on two
zones with the NO model.  ``--check`` runs them on the code as it is and prints, per variant and
figure, the largest relative difference from the stored file; it exits 1 where net IMEP or CA50
moves by more than 1e-12 relative (CA50 against its magnitude in degrees), NO by more than 1e-9,
or a cycle count changes (a speed change is to leave the results as they are).
"""

from __future__ import annotations

import argparse
import json
import math
import sys

VARIANTS = {
    "entrainment_one_zone": ["burn.model=entrainment", "emissions.model=none"],
    "entrainment_two_zones": ["burn.model=entrainment", "simulation.zones=two", "emissions.model=none"],
    "entrainment_two_zones_no": ["burn.model=entrainment", "simulation.zones=two", "emissions.model=zeldovich_no"],
}
KEYS = ("imep_net_bar", "ca50_deg", "no_ppm_wet", "no_ppm_dry", "no_g_per_kWh", "burned_element_temperature_max_K",
        "burned_zone_temperature_max_K", "cycles_to_converge")
LIMITS = {"imep_net_bar": 1e-12, "ca50_deg": 1e-12, "no_ppm_wet": 1e-9, "no_ppm_dry": 1e-9, "no_g_per_kWh": 1e-9}
"""Largest relative change each gated figure may take."""


def figures() -> dict:
    import cyclesim

    out = {}
    for name, ov in VARIANTS.items():
        cases = [cyclesim.load_config("demo", ov)]
        cases += [cyclesim.load_config("demo", ov + [f"burn.spark_advance_deg={a}"]) for a in range(0, 41)]
        res = cyclesim.simulate(cases)
        out[name] = [{k: (float(r.summary[k]) if k in r.summary else None) for k in KEYS} for r in res]
    return out


def _rel(a, b) -> float:
    if a is None or b is None:
        return 0.0 if a is b else math.inf
    if math.isnan(a) and math.isnan(b):
        return 0.0
    return abs(a - b) / max(abs(b), 1e-300) if a != b else 0.0


def check(stored: dict, now: dict) -> tuple[dict, bool]:
    worst: dict = {}
    ok = True
    for name, rows in stored.items():
        w = worst.setdefault(name, {})
        for old, new in zip(rows, now[name]):
            for k in KEYS:
                d = _rel(new[k], old[k])
                if k == "cycles_to_converge" and d:
                    ok = False
                if d > LIMITS.get(k, math.inf):
                    ok = False
                w[k] = max(w.get(k, 0.0), d)
    return worst, ok


def main() -> None:
    ap = argparse.ArgumentParser()
    g = ap.add_mutually_exclusive_group(required=True)
    g.add_argument("--write", metavar="FILE")
    g.add_argument("--check", metavar="FILE")
    a = ap.parse_args()
    now = figures()
    if a.write:
        with open(a.write, "w") as f:
            json.dump(now, f, indent=1)
        return
    with open(a.check) as f:
        stored = json.load(f)
    worst, ok = check(stored, now)
    print(json.dumps({"largest_relative_change": worst, "within_limits": ok}, indent=2))
    sys.exit(0 if ok else 1)


if __name__ == "__main__":
    main()
