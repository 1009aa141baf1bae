"""Knock-limited advance and the full-load curve of demo_turbo with one zone and with two zones.

    CYCLESIM_THREADS=2 python benchmarks/two_zone_knock.py [--skip-curve]

Prints JSON: for ``simulation.zones`` one and two, the spark study of demo_turbo on 10..20 deg
BTDC in 1-deg steps (as ``cyclesim spark demo_turbo --advance 10:20:1 [--set simulation.zones=two]``):
MBT, knock-limited advance and recommended advance; then the 7-speed full-load curve at
knock-limited spark, enriched to a 1250 K exhaust limit and boost-matched to 1.6 bar on the demo
compressor map (as ``cyclesim map demo_turbo --full-load-only --exhaust-limit-K 1250 --boost-bar 1.6
--compressor-map demo_compressor_map [--set simulation.zones=two]``), per speed the spark, what set
it, lambda, BMEP and exhaust temperature, with the wall time of each study.

Results are estimates; approach spark limits gradually with knock detection, within the
manufacturer's limits, following the test cell's procedures.
"""

from __future__ import annotations

import argparse
import json
import time

CAUTION = ("estimates only: approach spark limits gradually with knock detection, within the manufacturer's"
           " limits, following the test cell's procedures")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--skip-curve", action="store_true", help="the spark study only")
    a = ap.parse_args()
    import cyclesim
    from cyclesim.studies.maps import full_load_curve
    from cyclesim.studies.spark import spark_study

    out: dict = {}
    for zones in ("one", "two"):
        ov = [f"simulation.zones={zones}"]
        cyclesim.run("demo_turbo", ov)          # compile / load the cached loop
        t = time.perf_counter()
        st = spark_study("demo_turbo", "10:20:1", overrides=ov, plots=False)
        row = {"mbt_deg": st.mbt_deg, "knock_limited_deg": st.knock_limited_deg,
               "knock_status": st.knock_status, "recommended_deg": st.recommended_deg,
               "spark_study_s": round(time.perf_counter() - t, 1)}
        if not a.skip_curve:
            t = time.perf_counter()
            fl = full_load_curve("demo_turbo", overrides=ov, plots=False, exhaust_limit_K=1250.0, boost_bar=1.6,
                                 boost_options={"compressor_map": "demo_compressor_map"})
            row["full_load_s"] = round(time.perf_counter() - t, 1)
            row["full_load_cases"] = fl.cases_run
            row["full_load"] = [
                {k: (round(r[k], 2) if isinstance(r[k], float) else r[k]) for k in
                 ("speed_rpm", "spark_advance_deg", "spark_limit", "lambda", "bmep_bar", "exhaust_temperature_K",
                  "intake_pressure_bar", "boost_limit") if k in r}
                for r in fl.rows]
        out[f"zones={zones}"] = row
    out["caution"] = CAUTION
    print(json.dumps(out, indent=1, default=float))


if __name__ == "__main__":
    main()
