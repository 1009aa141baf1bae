"""Runners solved in one dimension: volumetric efficiency and torque against speed, the tuned speed
against the intake runner's length, and the speed of a run.

    python benchmarks/runner_tuning.py [--lengths 350,500,700] [--speeds 3000:7000:500] [--quick]

Prints, on the demo engine (one cylinder; exhaust on its plenum so that the intake's tuning shows):

1. VE [%] and brake torque [N m] against speed for the plenum (no runner), for each intake
   runner length, and for configs/demo_runners.yaml (intake and exhaust runners);
2. per length, the speed of the VE peak (a parabola through the highest point and its two
   neighbours) and the exponent b of N_peak ~ L^b fitted in log-log; the estimate stated in
   advance is the organ-pipe one, b = -1 (a fixed number of wave round trips 2 L / c in the
   intake event; Heywood 1988 sec. 7.6, Winterbone & Pearson 1999 ch. 6; from memory);
3. one operating point of demo_runners at 1500 and 6000 rpm in-process: wall time, cycles to
   converge and the pipe cell updates per second.
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np


def _speeds(text: str) -> list[float]:
    a, b, c = (float(x) for x in text.split(":"))
    return list(np.arange(a, b + 0.5 * c, c))


SETTLE = ("simulation.tolerance=0.0005", "simulation.max_cycles=15")
"""Settling of every point here: demo_runners' tolerance (the demo's)."""


def sweep(lengths_mm, speeds, extra=SETTLE):
    """{label: (VE (n,), torque (n,))} over ``speeds`` for the plenum and each intake length."""
    import cyclesim

    out = {}
    for label, over in [("plenum", [])] + [(f"L={L:g} mm", [f"intake.runner.length_mm={L}",
                                                            "intake.runner.diameter_mm=38",
                                                            "intake.runner.entry_loss=0.05"])
                                           for L in lengths_mm]:
        cases = [cyclesim.load_config("demo", over + list(extra) + [f"operating.speed_rpm={n:g}"]) for n in speeds]
        res = cyclesim.simulate(cases)
        out[label] = (np.array([r.summary["volumetric_efficiency"] for r in res]),
                      np.array([r.summary["torque_Nm"] for r in res]),
                      np.array([r.summary["cycles_to_converge"] for r in res]))
    return out


def peak_speed(speeds, ve) -> float:
    """Speed of the VE peak: the vertex of the parabola through the highest point and its neighbours."""
    i = int(np.argmax(ve))
    i = min(max(i, 1), len(ve) - 2)
    x, y = np.asarray(speeds[i - 1:i + 2], float), ve[i - 1:i + 2]
    a, b, _ = np.polyfit(x, y, 2)
    return float(-b / (2 * a)) if a < 0 else float(x[1])


def fitted_exponent(lengths_mm, peaks) -> float:
    return float(np.polyfit(np.log(lengths_mm), np.log(peaks), 1)[0])


def speed_point(speed_rpm: float) -> dict:
    import cyclesim
    from cyclesim.registry import get_registry
    from cyclesim.solve.batch import build_batch
    from cyclesim.solve.solver import integrate

    case = cyclesim.load_config("demo_runners", [f"operating.speed_rpm={speed_rpm:g}"])
    t = time.perf_counter()
    c = time.process_time()
    batch = build_batch([case], get_registry(()))
    tr = integrate(batch)
    dt = time.perf_counter() - t
    cpu = time.process_time() - c
    rec = tr.runners
    updates = float((rec["substeps_total"][0] * rec["cells"]).sum())
    return {"speed_rpm": speed_rpm, "seconds": dt, "cpu_seconds": cpu, "cycles": int(tr.cycles[0]), "converged": bool(tr.converged[0]),
            "cell_updates_per_s": updates / dt, "loop": tr.loop}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--lengths", default="350,500,700")
    ap.add_argument("--speeds", default="3000:7000:500")
    ap.add_argument("--quick", action="store_true", help="fewer speeds (3000:7000:1000), no speed points")
    a = ap.parse_args(argv)
    lengths = [float(x) for x in a.lengths.split(",")]
    speeds = _speeds("3000:7000:1000" if a.quick else a.speeds)
    t0 = time.perf_counter()
    res = sweep(lengths, speeds)
    import cyclesim

    both = cyclesim.simulate([cyclesim.load_config("demo_runners", list(SETTLE) + [f"operating.speed_rpm={n:g}"])
                              for n in speeds])
    res["demo_runners"] = (np.array([r.summary["volumetric_efficiency"] for r in both]),
                           np.array([r.summary["torque_Nm"] for r in both]),
                           np.array([r.summary["cycles_to_converge"] for r in both]))
    print(f"sweep: {time.perf_counter() - t0:.0f} s")
    print("speed_rpm " + " ".join(f"{n:>8.0f}" for n in speeds))
    for label, (ve, tq, cyc) in res.items():
        print(f"VE %  {label:<14s}" + " ".join(f"{100 * v:8.1f}" for v in ve))
        print(f"T Nm  {label:<14s}" + " ".join(f"{v:8.1f}" for v in tq))
        print(f"cyc   {label:<14s}" + " ".join(f"{v:8.0f}" for v in cyc))
    peaks = [peak_speed(speeds, res[f"L={L:g} mm"][0]) for L in lengths]
    for L, n in zip(lengths, peaks):
        print(f"tuned speed at L = {L:g} mm: {n:.0f} rpm")
    b = fitted_exponent(lengths, peaks)
    print(f"fitted exponent of N_peak ~ L^b: b = {b:.2f} (organ-pipe estimate -1, Helmholtz -0.5)")
    if not a.quick:
        for n in (1500.0, 6000.0):
            r = speed_point(n)
            print(f"demo_runners at {n:.0f} rpm: {r['seconds']:.2f} s in-process, {r['cycles']} cycles"
                  f" (converged {r['converged']}), {r['cell_updates_per_s'] / 1e6:.2f} M cell updates/s")
    return 0 if math.isfinite(b) else 1


if __name__ == "__main__":
    raise SystemExit(main())
