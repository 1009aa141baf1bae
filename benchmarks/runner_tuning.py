"""Runners solved in one dimension: volumetric efficiency and torque against speed, the tuned speed
against the intake runner's length, and the speed of a run.

    python benchmarks/runner_tuning.py [--lengths 280,400,560,800] [--speeds 2000:7500:50] [--quick]

Prints, on the demo engine (one cylinder; exhaust on its plenum so that the intake's tuning shows):

1. VE [%] and brake torque [N m] against speed for the plenum (no runner), for each intake
   runner length, and for configs/demo_runners.yaml (intake and exhaust runners);
2. per length, the tuned speed (:func:`cyclesim.pipes.tuning.peak_speed`: the vertex of the
   parabola through the highest point and its two neighbours) and the Helmholtz estimate's
   frequency ratio f_H / (N / 60) there; the exponent b of N_t ~ L^b fitted in log-log with its
   standard error, against the estimate stated in advance (:mod:`cyclesim.pipes.tuning`:
   Helmholtz, b = -1/2 +- 0.2; the organ-pipe estimate b = -1 stated before the quick run was
   refuted by it, b = -0.48);
3. one operating point of demo_runners at 1500 and 6000 rpm in-process: wall time, cycles to
   converge and the pipe cell updates per second.

The full study (the defaults) runs lengths the quick run (350, 500, 700 mm, speeds 1000 rpm
apart: ``--quick``) did not, with speeds 50 rpm apart: the VE curve of a runner has several
humps (waves left from the cycle before: a 1-D open end reflects them without loss), some
300-500 rpm wide, so coarse speeds can miss the highest one.
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np

from cyclesim.pipes.tuning import EXPONENT_TOLERANCE, HELMHOLTZ_EXPONENT, fit_exponent, peak_speed


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


def helmholtz_ratio(length_mm: float, speed_rpm: float, diameter_mm: float = 38.0) -> float:
    """f_H / (N / 60) of the demo cylinder at mid-stroke with an intake runner of ``length_mm``
    at ``speed_rpm`` (:func:`cyclesim.pipes.tuning.helmholtz_frequency_hz`; the plenum's sound
    speed, air at its temperature, gamma 1.4)."""
    import cyclesim
    from cyclesim.pipes.tuning import helmholtz_frequency_hz

    c = cyclesim.load_config("demo")
    bore, stroke, r = c.engine.bore_mm * 1e-3, c.engine.stroke_mm * 1e-3, c.engine.compression_ratio
    vd = math.pi / 4 * bore ** 2 * stroke
    v_mid = vd * (r + 1) / (2 * (r - 1))
    a = math.pi / 4 * (diameter_mm * 1e-3) ** 2
    sound = math.sqrt(1.4 * 287.0 * c.operating.intake_temperature_K)
    return float(helmholtz_frequency_hz(sound, a, length_mm * 1e-3, v_mid)) / (speed_rpm / 60.0)


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
    updates = float((rec["substeps_total"][0] * rec["cells"][0]).sum())
    return {"speed_rpm": speed_rpm, "seconds": dt, "cpu_seconds": cpu, "cycles": int(tr.cycles[0]), "converged": bool(tr.converged[0]),
            "cell_updates_per_s": updates / dt, "cell_updates_per_cpu_s": updates / cpu, "loop": tr.loop,
            "substeps": rec["substeps_total"][0].tolist()}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--lengths", default="280,400,560,800")
    ap.add_argument("--speeds", default="2000:7500:50")
    ap.add_argument("--quick", action="store_true",
                    help="the quick run: lengths 350,500,700, speeds 3000:7000:1000, no speed points")
    a = ap.parse_args(argv)
    lengths = [float(x) for x in ("350,500,700" if a.quick else a.lengths).split(",")]
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
    peaks = []
    for L in lengths:
        ve = res[f"L={L:g} mm"][0]
        n, inside = peak_speed(speeds, ve)
        peaks.append(n)
        print(f"tuned speed at L = {L:g} mm: {n:.0f} rpm (VE {100 * ve.max():.1f} %"
              + ("" if inside else ", at the sweep's end: not resolved")
              + f"), f_H / (N/60) = {helmholtz_ratio(L, n):.2f}")
    b, se = fit_exponent(lengths, peaks)
    ok = abs(b - HELMHOLTZ_EXPONENT) <= EXPONENT_TOLERANCE
    print(f"fitted exponent of N_t ~ L^b: b = {b:.3f} +- {se:.3f} (standard error); stated estimate"
          f" Helmholtz {HELMHOLTZ_EXPONENT:g} +- {EXPONENT_TOLERANCE:g}: {'within' if ok else 'OUTSIDE'}"
          " (organ-pipe -1)")
    if not a.quick:
        for n in (1500.0, 6000.0):
            r = speed_point(n)
            print(f"demo_runners at {n:.0f} rpm: {r['seconds']:.2f} s in-process, {r['cycles']} cycles"
                  f" (converged {r['converged']}), {r['cell_updates_per_s'] / 1e6:.2f} M cell updates/s")
    return 0 if math.isfinite(b) else 1


if __name__ == "__main__":
    raise SystemExit(main())
