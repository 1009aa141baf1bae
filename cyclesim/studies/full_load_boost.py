"""Boost on the full-load curve: the turbocharger matched at each speed at the spark and mixture
the engine would run there.

For each speed the turbocharger is matched (:func:`cyclesim.studies.boost.boost_match`) at the
point's current spark advance and lambda; its intake temperature after the intercooler, exhaust
back pressure and turbine inlet temperature go into the point, whose spark (and, with an
exhaust-temperature limit, lambda) is then chosen again
(:func:`cyclesim.studies.enrichment.settle_points`).  The two alternate until the spark moves by
less than :data:`SPARK_SETTLED_DEG` and lambda by less than :data:`LAMBDA_SETTLED` (at most
:data:`MAX_PASSES` passes).  Where the turbine cannot drive the compressor to the target boost even
with the wastegate closed, the highest boost it reaches is found by bisection (to
:data:`BOOST_RESOLUTION_BAR`) and the point runs there, marked ``"boost not reached"``.

What binds at each speed is recorded: the spark limit (MBT, knock, ...), the mixture limit, and the
boost limit (target reached, boost not reached, surge, choke, off the compressor map).
"""

from __future__ import annotations

import math

from ..config import case_with
from ..errors import SolverError
from ..registry import spark_param
from .enrichment import settle_points, with_overrides

__all__ = ["boosted_points", "SPARK_SETTLED_DEG", "LAMBDA_SETTLED", "MAX_PASSES"]

SPARK_SETTLED_DEG = 0.5
LAMBDA_SETTLED = 0.005
MAX_PASSES = 3
BOOST_RESOLUTION_BAR = 0.02


def _match(case, boost_bar, boost_options):
    from .boost import boost_match

    return boost_match(case, boost_bar, **boost_options)


def _reached_boost(case, target, boost_options):
    """The match at the target, or at the highest boost the turbine reaches (bisection)."""
    br = _match(case, target, boost_options)
    if br.reached:
        return br, "target reached"
    lo, hi = float(boost_options.get("ambient_pressure_bar", 1.0)) + 0.02, target
    best = None
    while hi - lo > BOOST_RESOLUTION_BAR:
        mid = 0.5 * (lo + hi)
        b = _match(case, mid, boost_options)
        if b.reached:
            lo, best = mid, b
        else:
            hi = mid
    if best is None:
        best = _match(case, lo, boost_options)
    return best, "boost not reached"


def _boost_limit(br, how):
    s = br.state
    if s.get("map_on_map") is False:
        return how + "; off the compressor map"
    if s.get("map_surge_margin") is not None and s["map_surge_margin"] < 0:
        return how + "; surge"
    if s.get("map_choke_margin") is not None and s["map_choke_margin"] < 0:
        return how + "; choke"
    return how


def boosted_points(case, points, spark_mode, boost_bar, boost_options, *, run, spark_options,
                   exhaust_limit_K=None, lambda_floor=0.75):
    """Spark, mixture and turbocharger of every full-load speed, iterated together.

    Returns ``(solutions, boost)``: point -> :class:`~cyclesim.studies.enrichment.PointSolution`,
    and point -> dict of the turbocharger state (``boost_bar``, ``boost_limit``, ``T_intake_K``,
    ``p3_bar``, the compressor map's margins where a map is given, ``passes``).
    """
    spark_key = spark_param(case, "full-load boost match")
    spark = {pt: float(case.submodels["burn"].params[spark_key]) for pt in points}
    lam = {pt: float(case.operating.__dict__["lambda"]) for pt in points}
    boost, sol = {}, None
    for k in range(1, MAX_PASSES + 1):
        base = {}
        for pt in points:
            c = case_with(case, {"operating.speed_rpm": pt[0], "burn." + spark_key: spark[pt],
                                 "operating.lambda": lam[pt]})
            try:
                br, how = _reached_boost(c, boost_bar, boost_options)
            except SolverError as e:
                raise SolverError(f"full-load boost match at {pt[0]:g} rpm: {e}") from None
            s = br.state
            boost[pt] = {"boost_bar": br.boost_pressure_bar, "boost_limit": _boost_limit(br, how),
                         "T_intake_K": s["T_intake_K"], "p3_bar": s["p3_bar"], "T3_K": s["T3_K"],
                         "wastegate_share": s["wastegate_share"], "eta_compressor": s["eta_compressor"],
                         "compressor_corrected_flow_kg_per_s": s.get("map_corrected_flow_kg_per_s"),
                         "compressor_pressure_ratio": s["compressor_pressure_ratio"],
                         "surge_margin": s.get("map_surge_margin"), "choke_margin": s.get("map_choke_margin"),
                         "turbocharger_speed_rpm": s.get("turbocharger_speed_rpm"), "passes": k}
            base[pt] = {"operating.speed_rpm": pt[0], "operating.intake_pressure_bar": br.boost_pressure_bar,
                        "operating.intake_temperature_K": s["T_intake_K"],
                        "operating.exhaust_pressure_bar": s["p3_bar"],
                        "operating.exhaust_temperature_K": min(max(s["T3_K"], 250.0), 2000.0)}
        sol = settle_points(points, with_overrides(case, base), spark_mode, exhaust_limit_K=exhaust_limit_K,
                            lambda_floor=lambda_floor, run=run, **spark_options)
        moved = 0.0
        for pt in points:
            a = sol[pt].pick.advance_deg
            if a is not None:
                moved = max(moved, abs(a - spark[pt]), abs(sol[pt].lambda_ - lam[pt]) * SPARK_SETTLED_DEG / LAMBDA_SETTLED)
                spark[pt] = a
            lam[pt] = sol[pt].lambda_
        for pt in points:
            boost[pt]["p_exh_bar"] = base[pt]["operating.exhaust_pressure_bar"]
        if moved < SPARK_SETTLED_DEG:
            break
    for pt in points:
        boost[pt]["settled"] = bool(moved < SPARK_SETTLED_DEG) if not math.isnan(moved) else False
    return sol, boost
