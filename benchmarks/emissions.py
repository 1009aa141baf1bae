"""Cost of the NO model (emissions.model=zeldovich_no) per operating point, printed as JSON.

    python benchmarks/emissions.py [--repeat 3]

Times the demo point without and with the NO model, alone (B = 1) and as a batch of 8 points
(a lambda sweep, one batch as a sweep runs it), after one warm-up run (the loop's compilation
and the NO tables are built once per process).  Also prints the NO of the demo against spark
advance and lambda, and against the number of elements and the integration step, and the time to
build the NO tables of one new mixture (once per charge and process; a lambda sweep pays it per
lambda).  Times are the median CPU time of the process (CYCLESIM_THREADS=1 for one core).
"""

from __future__ import annotations

import argparse
import json
import statistics
import time

import cyclesim

ON = ["emissions.model=zeldovich_no"]


def _time(fn, repeat):
    """Median CPU time of this process [s] (steadier than wall time on a shared machine)."""
    out = []
    for _ in range(repeat):
        t = time.process_time()
        fn()
        out.append(time.process_time() - t)
    return statistics.median(out)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args()
    cyclesim.run("demo")
    cyclesim.run("demo", ON)
    lams = [0.85, 0.9, 0.95, 1.0, 1.05, 1.1, 1.2, 1.3]
    batch = [cyclesim.load_config("demo", [f"operating.lambda={v}"]) for v in lams]
    batch_on = [cyclesim.load_config("demo", ON + [f"operating.lambda={v}"]) for v in lams]
    fig = {
        "one_point_off_s": _time(lambda: cyclesim.run("demo"), a.repeat),
        "one_point_on_s": _time(lambda: cyclesim.run("demo", ON), a.repeat),
        "batch8_off_s": _time(lambda: cyclesim.simulate(batch), a.repeat),
        "batch8_on_s": _time(lambda: cyclesim.simulate(batch_on), a.repeat),
    }
    fig["one_point_ratio"] = fig["one_point_on_s"] / fig["one_point_off_s"]
    fig["batch8_ratio"] = fig["batch8_on_s"] / fig["batch8_off_s"]
    fig["batch8_no_cost_per_point_s"] = (fig["batch8_on_s"] - fig["batch8_off_s"]) / len(lams)
    fig["one_point_no_cost_of_a_point"] = fig["one_point_ratio"] - 1.0
    fig["batch8_no_cost_of_a_point"] = fig["batch8_ratio"] - 1.0
    # the NO tables of one new mixture (built once per charge and process, then cached)
    from cyclesim.gas import thermo
    from cyclesim.fuels import BUILTIN_FUELS
    from cyclesim_plugins.emissions import NO_TABLE_P_PA, NO_TABLE_T_K
    from cyclesim.combustion.zeldovich import no_table
    b, _ = thermo.fresh_charge_elements(BUILTIN_FUELS["gasoline"], 1.0 / 1.01)
    fig["no_table_build_s"] = _time(lambda: no_table(b, NO_TABLE_T_K, NO_TABLE_P_PA), a.repeat)
    res = cyclesim.simulate(batch_on)
    fig["no_ppm_wet_vs_lambda"] = {f"{v:g}": round(r.summary["no_ppm_wet"], 1) for v, r in zip(lams, res)}
    adv = [40, 32, 28, 24, 20, 16, 12, 8, 4]
    res = cyclesim.simulate([cyclesim.load_config("demo", ON + [f"burn.spark_advance_deg={s}"]) for s in adv])
    fig["no_ppm_wet_vs_spark_advance_deg"] = {str(s): round(r.summary["no_ppm_wet"], 1) for s, r in zip(adv, res)}
    fig["torque_Nm_vs_spark_advance_deg"] = {str(s): round(r.summary["torque_Nm"], 2) for s, r in zip(adv, res)}
    fig["no_g_per_kWh_vs_spark_advance_deg"] = {str(s): round(r.summary["no_g_per_kWh"], 2) for s, r in zip(adv, res)}
    for key, vals in (("emissions.count", [10, 20, 40]), ("emissions.step_deg", [0.5, 1.0])):
        fig[f"no_ppm_wet_vs_{key}"] = {str(v): round(cyclesim.run("demo", ON + [f"{key}={v}"]).summary["no_ppm_wet"], 1)
                                       for v in vals}
    print(json.dumps(fig, indent=2))


if __name__ == "__main__":
    main()
