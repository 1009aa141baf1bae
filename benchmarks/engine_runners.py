"""The multi-cylinder engine with runners, and the demo_turbo full-load curve with and without runners.

    python benchmarks/engine_runners.py [--engine] [--full-load] [--speeds 1500:6000:750] [--spark fixed]
                                        [--cold-start] [--anderson-memory N]

--engine (default with neither flag): one point of configs/demo_engine_runners.yaml (four cylinders,
each with its intake runner from the shared plenum and its exhaust runner into its branch's
collector) in-process: wall and CPU time, coupled cycles to settle, and the convergence table
(per coupled cycle: the largest relative change of the plenum and collector traces, and each
cylinder's relative change of volumetric efficiency and net IMEP from the cycle before); then the
same engine without runners (configs/demo.yaml's 0-D manifolds) for comparison.  The coupled cycles
with runners start from the 0-D engine's settled state (its coupled cycles are printed);
``--cold-start`` starts them from the operating point's constant pressures instead, and
``--anderson-memory`` sets the pairs the traces' acceleration keeps (default 8), for comparison.

--full-load: the single-cylinder full-load curve of demo_turbo (cyclesim.studies.maps.full_load_curve)
without runners and with demo_runners' intake and exhaust runners: torque [N m] and VE [%] against
speed.  ``--spark fixed`` (default) keeps the config's spark at every speed, so the two curves
differ only by the runners; ``--spark knock_limited`` sets each point's spark as the map does
(several times slower).
"""

from __future__ import annotations

import argparse
import time

import numpy as np

RUNNERS = ("intake.runner.length_mm=300", "intake.runner.diameter_mm=38", "intake.runner.cells=30",
           "intake.runner.roughness_mm=0.0015", "intake.runner.entry_loss=0.05",
           "exhaust.runner.length_mm=400", "exhaust.runner.diameter_mm=34", "exhaust.runner.cells=30",
           "exhaust.runner.roughness_mm=0.0015", "exhaust.runner.wall_temperature_K=700",
           "exhaust.runner.entry_loss=0.5")
"""configs/demo_runners.yaml's runners, as overrides of another config."""


def _speeds(text: str) -> list[float]:
    a, b, c = (float(x) for x in text.split(":"))
    return [float(x) for x in np.arange(a, b + 0.5 * c, c)]


def engine_point(config: str, overrides=()) -> None:
    from cyclesim.engine import run_engine

    t0, c0 = time.perf_counter(), time.process_time()
    eng = run_engine(config, list(overrides))
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    e = eng.engine
    print(f"{config} {' '.join(overrides)}")
    start = (f" after a 0-D start of {e['lumped_start_coupled_cycles']}" if "lumped_start_coupled_cycles" in e
             else "")
    print(f"  wall {wall:.1f} s, CPU {cpu:.1f} s, coupled cycles {e['coupled_cycles']}{start}, runners {e['runners']},"
          f" brake torque {e['brake_torque_Nm']:.2f} N m, air {e['air_flow_g_per_s']:.2f} g/s")
    ve = [r.summary["volumetric_efficiency"] for r in eng.cylinder_results]
    print("  VE per cylinder [%]: " + " ".join(f"{100 * v:.2f}" for v in ve)
          + "   net IMEP [bar]: " + " ".join(f"{c['imep_net_bar']:.3f}" for c in eng.cylinders))
    for w in eng.warnings:
        print(f"  warning: {w}")
    n = len(eng.cylinders)
    print("  cycle  manifolds | " + " ".join(f"dVE c{k + 1:<3d}" for k in range(n)) + " | "
          + " ".join(f"dIMEP c{k + 1:<2d}" for k in range(n)))
    for r in eng.coupling_history:
        print(f"  {r['cycle']:5d}  {r['manifold_change']:9.1e} | "
              + " ".join(f"{x:9.1e}" for x in r["ve_change"]) + " | "
              + " ".join(f"{x:9.1e}" for x in r["imep_change"]))


def full_load(speeds, spark: str) -> None:
    from cyclesim.studies.maps import full_load_curve

    curves = {}
    for label, ov in (("no runners", ()), ("runners", RUNNERS)):
        t0 = time.perf_counter()
        m = full_load_curve("demo_turbo", speeds, overrides=list(ov), spark=spark, plots=False)
        curves[label] = (m.column("torque_Nm"), m.column("volumetric_efficiency"))
        print(f"demo_turbo full-load curve, {label}: {time.perf_counter() - t0:.1f} s wall")
    print(f"  speed rpm | torque N m: none  runners | VE %: none  runners   (spark {spark})")
    (tq0, ve0), (tq1, ve1) = curves["no runners"], curves["runners"]
    for i, n in enumerate(speeds):
        print(f"  {n:9.0f} | {tq0[i]:17.1f} {tq1[i]:8.1f} | {100 * ve0[i]:10.1f} {100 * ve1[i]:8.1f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--engine", action="store_true")
    ap.add_argument("--full-load", action="store_true")
    ap.add_argument("--speeds", default="1500:6000:750")
    ap.add_argument("--spark", default="fixed", choices=("fixed", "mbt", "knock_limited"))
    ap.add_argument("--cold-start", action="store_true", help="coupled cycles from constant traces")
    ap.add_argument("--anderson-memory", type=int, default=None, metavar="N")
    a = ap.parse_args()
    from cyclesim.engine import runner_links

    runner_links.LUMPED_START = not a.cold_start
    if a.anderson_memory is not None:
        runner_links.ANDERSON_MEMORY = a.anderson_memory
    if a.engine or not a.full_load:
        engine_point("configs/demo_engine_runners.yaml")
        engine_point("demo")
    if a.full_load:
        full_load(_speeds(a.speeds), a.spark)


if __name__ == "__main__":
    main()
