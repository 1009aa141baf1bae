"""The first estimate of the residual state (simulation.start = estimate) against the settled one.

    python benchmarks/residual_start.py

For the three full-cycle demo configs at 800, 3000 and 6000 rpm it prints, as JSON:

- the settled state (plain start, run to periodic steady state): residual fraction at IVC,
  cylinder temperature and mass at the cycle start (-360 deg);
- the errors of the plain start (exhaust plenum pressure and temperature, all burned) and of the
  estimate (:mod:`cyclesim.solve.residual_start`) against it;
- cycles to converge with each start, with the solver's own driver (coarse start-up cycles first)
  and with fine cycles alone from the start state (``integrate(initial=...)``), which shows what
  the start is worth to a driver without start-up cycles;
- the estimate's cost per case [ms] (median of 20 calls; the machine is shared, so noisy).
"""

from __future__ import annotations

import json
import statistics
import time

import numpy as np

CONFIGS = ("demo", "demo_part_load", "demo_turbo")
SPEEDS_RPM = (800, 3000, 6000)


def settled_residual(tr, batch) -> float:
    """Burned-gas (residual plus EGR) mass fraction at IVC of the reported cycle [-]."""
    from cyclesim.solve.solver import _interp_at

    ivc = batch.valves.ivc_deg
    m = _interp_at(tr.theta, tr.Y[0], tr.F[0], ivc)
    mb = _interp_at(tr.theta, tr.Y[2], tr.F[2], ivc)
    return float(mb[0] / m[0])


def point(cfg: str, speed_rpm: float) -> dict:
    from cyclesim.api import _registry_for
    from cyclesim.solve.batch import build_batch
    from cyclesim.config import load_config
    from cyclesim.solve.residual_start import start_state
    from cyclesim.solve.solver import _RHS, _initial_state, integrate

    out: dict = {}
    starts = {}
    for start in ("plain", "estimate"):
        case = load_config(cfg, [f"operating.speed_rpm={speed_rpm}", f"simulation.start={start}"])
        batch = build_batch([case], _registry_for([case]))
        tr = integrate(batch)
        y0 = _initial_state(batch, _RHS(batch, "full"), -360.0, "full")
        fine = integrate(batch, initial=y0)
        starts[start] = (y0[:, 0], tr, batch)
        out[f"cycles_{start}"] = int(tr.cycles[0])
        out[f"cycles_fine_only_{start}"] = int(fine.cycles[0])
    y_end, tr, batch = starts["plain"][1].end_state[:, 0], starts["plain"][1], starts["plain"][2]
    out["settled"] = {"residual_fraction_ivc": settled_residual(tr, batch),
                      "start_temperature_K": float(y_end[1]), "start_mass_mg": float(y_end[0] * 1e6)}
    V0 = batch.geometry.volume(-360.0)
    rhs = _RHS(batch, "full")
    _, _, _, est = start_state(batch, V0, rhs)
    ts = []
    for _ in range(20):
        t0 = time.perf_counter()
        start_state(batch, V0, rhs)
        ts.append(time.perf_counter() - t0)
    out["estimate_ms"] = 1e3 * statistics.median(ts)
    out["estimate_residual_fraction_ivc"] = float(est.residual_fraction[0])
    out["residual_fraction_error"] = float(est.residual_fraction[0]) - out["settled"]["residual_fraction_ivc"]
    for start in ("plain", "estimate"):
        y0 = starts[start][0]
        out[f"{start}_temperature_error_rel"] = float(y0[1] / y_end[1] - 1)
        out[f"{start}_mass_error_rel"] = float(y0[0] / y_end[0] - 1)
        out[f"{start}_burned_fraction_error"] = float(y0[2] / y0[0] - y_end[2] / y_end[0])
    return out


def main() -> None:
    import cyclesim
    from cyclesim.config import load_config

    cyclesim.simulate([load_config("demo")])     # warm the caches (gas tables, compiled loop)
    res = {f"{cfg}@{n}": point(cfg, n) for cfg in CONFIGS for n in SPEEDS_RPM}
    summary = {
        "max_abs_temperature_error_rel": {s: max(abs(v[f"{s}_temperature_error_rel"]) for v in res.values())
                                          for s in ("plain", "estimate")},
        "max_abs_residual_fraction_error_estimate": max(abs(v["residual_fraction_error"])
                                                        for v in res.values()),
        "estimate_never_more_cycles": all(v["cycles_estimate"] <= v["cycles_plain"] for v in res.values()),
        "estimate_never_more_fine_only_cycles": all(
            v["cycles_fine_only_estimate"] <= v["cycles_fine_only_plain"] for v in res.values()),
        "estimate_ms_median": float(np.median([v["estimate_ms"] for v in res.values()])),
    }
    print(json.dumps({"points": res, "summary": summary}, indent=1))


if __name__ == "__main__":
    main()
