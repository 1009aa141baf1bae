"""Cost per case of the figures and of the trace output of a 41-case closed-cycle batch at 0.1 deg.

    python benchmarks/closed_output_cost.py [--repeat 21]

Prints, per case [ms]: the integration, the figures (compute_figures, from the integrated
states), the output trace (output_trace, Hermite-interpolated onto the 0.1 deg grid), the
submodels' figures from that trace, and the whole post-processing (results_from_trace); medians
of ``--repeat`` runs in this process.
"""

from __future__ import annotations

import argparse
import json
import statistics
import time


def _median_ms(fn, repeat: int, per: int) -> float:
    ts = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
    return 1e3 * statistics.median(ts) / per


def measure(repeat: int = 21) -> dict:
    import cyclesim
    from cyclesim.api import _registry_for, model_figures, results_from_trace
    from cyclesim.solve.batch import build_batch
    from cyclesim.config import load_config
    from cyclesim.results.figures import compute_figures, derived_trace, output_trace
    from cyclesim.solve.solver import integrate

    cases = [load_config("demo_closed", [f"burn.spark_advance_deg={a}", "simulation.output_step_deg=0.1"])
             for a in range(41)]
    reg = _registry_for(cases)
    cyclesim.simulate(cases)                      # warm caches
    batch = build_batch(cases, reg)
    tr = integrate(batch)
    d = derived_trace(batch, tr)
    cols = output_trace(batch, tr, d, 0.1)
    n = len(cases)
    return {
        "integrate_ms_per_case": _median_ms(lambda: integrate(batch), repeat, n),
        "derived_trace_ms_per_case": _median_ms(lambda: derived_trace(batch, tr), repeat, n),
        "figures_ms_per_case": _median_ms(lambda: compute_figures(batch, tr, d), repeat, n),
        "output_trace_ms_per_case": _median_ms(lambda: output_trace(batch, tr, d, 0.1), repeat, n),
        "model_figures_ms_per_case": _median_ms(lambda: model_figures(batch, cols), repeat, n),
        "results_from_trace_ms_per_case": _median_ms(lambda: results_from_trace(batch, tr, reg), repeat, n),
        "simulate_ms_per_case": _median_ms(lambda: cyclesim.simulate(cases), max(5, repeat // 3), n),
    }


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=21)
    args = ap.parse_args(argv)
    print(json.dumps(measure(args.repeat), indent=1))


if __name__ == "__main__":
    main()
