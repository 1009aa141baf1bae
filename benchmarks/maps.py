"""Speed of the knock-aware maps, printed as JSON beside the targets (2-core machine).

    python benchmarks/maps.py

* ``full_load_turbo_7_s``: a 7-speed full-load curve of demo_turbo (1500..6000 rpm) at
  knock-limited spark with enrichment to a 1250 K exhaust-temperature limit and a turbocharger
  matched to 1.6 bar at every speed on the demo compressor map;
* ``part_load_42_s``: a 42-point part-load map of demo (7 speeds x 6 intake pressures) at MBT.

The compiled loop is warmed once before timing (its first compile is not part of a study).
"""

from __future__ import annotations

import json
import os
import time

os.environ.setdefault("CYCLESIM_THREADS", "2")

TARGETS = {"full_load_turbo_7_s": 60.0, "part_load_42_s": 30.0}


def main() -> None:
    import cyclesim
    from cyclesim.studies.maps import full_load_curve, part_load_map

    cyclesim.run("demo_turbo")      # compile / load the cached loop
    out = {}
    t = time.perf_counter()
    fl = full_load_curve("demo_turbo", exhaust_limit_K=1250.0, boost_bar=1.6,
                         boost_options={"compressor_map": "demo_compressor_map"})
    out["full_load_turbo_7_s"] = time.perf_counter() - t
    out["full_load_turbo_7_cases"] = fl.cases_run
    out["full_load_turbo_7_rows"] = [
        {k: (round(r[k], 3) if isinstance(r[k], float) else r[k]) for k in
         ("speed_rpm", "spark_advance_deg", "spark_limit", "lambda", "bmep_bar", "exhaust_temperature_K",
          "intake_pressure_bar", "boost_limit")}
        for r in fl.rows]
    t = time.perf_counter()
    pm = part_load_map("demo", [1500, 2250, 3000, 3750, 4500, 5250, 6000], [0.3, 0.45, 0.6, 0.75, 0.9, 1.0])
    out["part_load_42_s"] = time.perf_counter() - t
    out["part_load_42_cases"] = pm.cases_run
    out["targets"] = TARGETS
    out["threads"] = os.environ.get("CYCLESIM_THREADS")
    print(json.dumps(out, indent=1))


if __name__ == "__main__":
    main()
