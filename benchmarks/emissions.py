"""Cost of the NO model (emissions.model=zeldovich_no) per operating point, printed as JSON.

    python benchmarks/emissions.py [--repeat 3]
    CYCLESIM_THREADS=1 python benchmarks/emissions.py --predictive [--repeat 5]
    CYCLESIM_THREADS=1 python benchmarks/emissions.py --phases [--repeat 5]

``--predictive`` prints only the cost of the predictive model against the prescribed one: the
entrainment burn with two zones and NO (``burn.model=entrainment``, ``simulation.zones=two``, NO on)
against the one-zone Wiebe burn without NO (the demo as shipped, ``emissions.model=none``), on the
demo at one point and as a 41-point spark sweep (advance 0..40 deg, one batch), with the two steps
between them (entrainment one zone, entrainment two zones, both without NO): median CPU times of
the process after a warm-up run of each, per point and per cycle (the cycles each case needs to
settle differ between the models), and their ratios to the Wiebe case beside the target
(:data:`TARGET_RATIO`, per point and per cycle, one point and the sweep) and whether each is met.

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

import numpy as np

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


PRESCRIBED = ["emissions.model=none"]
PREDICTIVE = {
    "entrainment_one_zone": ["burn.model=entrainment", "emissions.model=none"],
    "entrainment_two_zones": ["burn.model=entrainment", "simulation.zones=two", "emissions.model=none"],
    "entrainment_two_zones_no": ["burn.model=entrainment", "simulation.zones=two"] + ON,
}


TARGET_RATIO = 2.0
"""The predictive model's cost target against the one-zone Wiebe case (per cycle and per point)."""


def predictive(repeat: int) -> dict:
    """The predictive model's cost against the one-zone Wiebe case (see the module notes)."""
    out: dict = {}
    variants = {"wiebe_one_zone": PRESCRIBED, **PREDICTIVE}
    for name, ov in variants.items():
        one = [cyclesim.load_config("demo", ov)]
        sweep = [cyclesim.load_config("demo", ov + [f"burn.spark_advance_deg={a}"]) for a in range(0, 41)]
        first = cyclesim.simulate(one)[0]                 # compile / warm the caches
        res = cyclesim.simulate(sweep)
        assert first.error is None and first.cycle_loop == "compiled", (name, first.error, first.cycle_loop)
        cyc1 = first.summary["cycles_to_converge"]
        cyc41 = sum(r.summary["cycles_to_converge"] for r in res if r.error is None)
        t1 = _time(lambda: cyclesim.simulate(one), repeat)
        t41 = _time(lambda: cyclesim.simulate(sweep), repeat)
        out[name] = {"one_point_s": round(t1, 4), "one_point_cycles": cyc1,
                     "one_point_per_cycle_ms": round(1e3 * t1 / cyc1, 2),
                     "sweep41_s": round(t41, 3), "sweep41_per_point_ms": round(1e3 * t41 / 41, 1),
                     "sweep41_cycles": cyc41, "sweep41_per_cycle_ms": round(1e3 * t41 / cyc41, 2),
                     "loop": first.cycle_loop}
    base = out["wiebe_one_zone"]
    for name in PREDICTIVE:
        r = out[name]
        r["ratio_one_point"] = round(r["one_point_s"] / base["one_point_s"], 2)
        r["ratio_one_point_per_cycle"] = round(r["one_point_per_cycle_ms"] / base["one_point_per_cycle_ms"], 2)
        r["ratio_sweep41"] = round(r["sweep41_s"] / base["sweep41_s"], 2)
        r["ratio_sweep41_per_cycle"] = round(r["sweep41_per_cycle_ms"] / base["sweep41_per_cycle_ms"], 2)
    last = out[list(PREDICTIVE)[-1]]
    out["target"] = {"ratio": TARGET_RATIO, "model": list(PREDICTIVE)[-1],
                     **{f"{k}_met": bool(last[k] <= TARGET_RATIO) for k in
                        ("ratio_one_point", "ratio_one_point_per_cycle", "ratio_sweep41", "ratio_sweep41_per_cycle")}}
    return out


def _least_ms(fn, repeat):
    """Least process CPU time of ``repeat`` calls [ms]."""
    best = float("inf")
    for _ in range(repeat):
        t = time.process_time()
        fn()
        best = min(best, time.process_time() - t)
    return round(1e3 * best, 2)


def phases(repeat: int) -> dict:
    """Where the predictive model (entrainment, two zones, NO) spends a run, one point and the
    41-point sweep: the integration, the results (the two-zone trace columns and the NO model in
    them) and the NO model's steps (zones from the trace, burned-mass elements, the NO integration)."""
    from cyclesim.api import _registry_for, results_from_trace
    from cyclesim.combustion import burned_zones as bz
    from cyclesim.combustion import zeldovich as z
    from cyclesim.results.figures import derived_trace
    from cyclesim.results.zone_trace import two_zone_columns
    from cyclesim.solve.batch import build_batch
    from cyclesim.solve.solver import integrate
    from cyclesim_plugins.emissions import tables_for

    ov = PREDICTIVE["entrainment_two_zones_no"]
    sets = {"one_point": [cyclesim.load_config("demo", ov)],
            "sweep41": [cyclesim.load_config("demo", ov + [f"burn.spark_advance_deg={a}"]) for a in range(0, 41)]}
    out = {}
    for name, cases in sets.items():
        cyclesim.simulate(cases)
        reg = _registry_for(cases)
        b = build_batch(cases, reg)
        tr = integrate(b)
        res = results_from_trace(b, tr, reg)
        em = b.models["emissions"]
        zn, el = em.last_zones, em.last_elements
        trace = {k: np.stack([r.trace[k] for r in res]) for k in res[0].trace}
        idx = em.window(trace)
        d = derived_trace(b, tr)
        out[name] = {
            "simulate": _least_ms(lambda: cyclesim.simulate(cases), repeat),
            "integrate": _least_ms(lambda: integrate(b), repeat),
            "results_from_trace": _least_ms(lambda: results_from_trace(b, tr, reg), repeat),
            "two_zone_columns": _least_ms(lambda: two_zone_columns(b, tr, d), repeat),
            "no_zone_history": _least_ms(lambda: em.zone_history(trace, idx), repeat),
            "no_burned_elements": _least_ms(lambda: bz.burned_elements(b.gas, zn, em.count, em.T_wall), repeat),
            "no_integration": _least_ms(lambda: z.integrate_growing_elements(
                zn.t, zn.p, el.T, el.x, em.T_freeze, *tables_for(b.gas)), repeat),
        }
    out["unit"] = "ms, least process CPU time over the repeats"
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--predictive", action="store_true",
                    help="only the predictive model (entrainment, two zones, NO) against one-zone Wiebe")
    ap.add_argument("--phases", action="store_true",
                    help="only where the predictive model's run spends its time (one point, 41-point sweep)")
    a = ap.parse_args()
    if a.phases:
        print(json.dumps(phases(a.repeat), indent=2))
        return
    if a.predictive:
        print(json.dumps(predictive(a.repeat), indent=2))
        return
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
