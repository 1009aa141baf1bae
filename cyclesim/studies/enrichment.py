"""Spark and mixture of a set of operating points: the spark rule of
:mod:`cyclesim.studies.point_spark`, and optional enrichment to hold an exhaust-temperature limit.

>>> from cyclesim.studies.enrichment import settle_points
>>> sol = settle_points(points, make_case, "knock_limited", exhaust_limit_K=1223, lambda_floor=0.75)

The exhaust temperature is the cycle's enthalpy-averaged gas temperature at the
exhaust valve (``exhaust_temperature_K``, the quantity the boost study takes as
the turbine inlet temperature).  Enrichment cools it (the excess fuel absorbs
heat and releases less of its energy), retarding the spark heats it, and the
cooler, richer end gas moves the knock limit; so spark and lambda are found together: at each lambda the spark is
chosen by the spark rule, the point is run at that spark, and lambda follows a
secant step on ``T_exh(lambda) - limit`` (Illinois-safeguarded inside its
bracket) until the exhaust temperature is within ``tolerance_K`` of the limit.
At those points the periodic steady state is settled to a tighter tolerance
(:data:`TIGHT_SETTLE_TOLERANCE`) so that the temperature is read to well
within ``tolerance_K``.  Where the limit is still exceeded at ``lambda_floor``
the point runs at the floor and is marked ``"exhaust temperature (lambda at
floor)"``: the limit is not held there.  Each enriched point records the BSFC it
costs: its BSFC against the BSFC at the case's own lambda and the same spark rule.

Full-load enrichment for component protection is common practice in spark
ignition engines (lambda about 0.75-0.9 at rated power, Heywood 1988 §7.1 and
fig. 7-3, from memory).  All results are model estimates.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from ..config import case_with
from ..errors import ConfigError
from ..registry import spark_param
from .point_spark import SparkPick, choose_spark, CaseRunner

__all__ = ["settle_points", "PointSolution", "LIMIT_EXHAUST", "TIGHT_SETTLE_TOLERANCE"]

LIMIT_EXHAUST = "exhaust temperature (lambda at floor)"
TIGHT_SETTLE_TOLERANCE = 5e-5
"""Periodic steady-state tolerance (relative change of net IMEP and trapped mass) at enriched points."""
MAX_MIXTURE_ITERATIONS = 8


@dataclass
class PointSolution:
    """Spark, lambda and the final result of one point."""

    pick: SparkPick
    lambda_: float
    result: object
    limit: str
    enriched: bool = False
    limit_held: bool | None = None
    bsfc_cost_g_per_kWh: float | None = None
    iterations: int = 0
    notes: list = field(default_factory=list)

    def columns(self) -> dict:
        d = self.pick.columns()
        d["spark_limit"] = self.limit
        d["lambda"] = self.lambda_
        d["enriched"] = self.enriched
        d["exhaust_limit_held"] = self.limit_held
        d["enrichment_bsfc_cost_g_per_kWh"] = self.bsfc_cost_g_per_kWh
        d["in_contours"] = self.pick.in_contours
        return d


def _t_exh(r) -> float:
    if r is None or r.error:
        return math.nan
    v = r.summary.get("exhaust_temperature_K")
    return math.nan if v is None else float(v)


def settle_points(points, make_case, spark_mode: str, *, exhaust_limit_K: float | None = None,
                  lambda_floor: float = 0.75, tolerance_K: float = 2.0, run=None, **spark_options) -> dict:
    """Spark (and, with ``exhaust_limit_K``, lambda) of every point, and its final result.

    Parameters
    ----------
    points : sequence of hashable
    make_case : callable (point, overrides: dict) -> Case
        The point's case with ``overrides`` (the burn model's spark parameter, ``operating.lambda``,
        ``simulation.tolerance``) applied.
    spark_mode : {"mbt", "knock_limited", "fixed"}
    exhaust_limit_K : float, optional
        Exhaust-temperature limit [K]; None: the case's lambda everywhere.
    lambda_floor : float
        Richest lambda allowed [-].
    tolerance_K : float
        The secant stops within this of the limit [K] (the check holds it to 5 K).
    run : callable, optional
        ``run(cases) -> results`` (default: :class:`~cyclesim.studies.point_spark.CaseRunner`).
    spark_options
        Passed to :func:`~cyclesim.studies.point_spark.choose_spark`.

    Returns
    -------
    dict
        point -> :class:`PointSolution`.
    """
    if exhaust_limit_K is not None and not exhaust_limit_K > 0:
        raise ConfigError(f"exhaust temperature limit {exhaust_limit_K!r} K: expected a positive number")
    if not 0.3 <= lambda_floor <= 1.5:
        raise ConfigError(f"lambda floor {lambda_floor!r}: expected a number in 0.3..1.5")
    run = run or CaseRunner("points", progress=False)
    points = list(points)
    lam0 = {pt: float(make_case(pt, {}).operating.__dict__["lambda"]) for pt in points}

    def solve(pts, lam, tight=False):
        """Spark by the rule at each point's lambda, then the point run at it."""
        extra = {"simulation.tolerance": TIGHT_SETTLE_TOLERANCE} if tight else {}

        def mk(pt, a):
            ov = {"operating.lambda": lam[pt], **extra}
            c = make_case(pt, ov)
            if a is None:
                return c
            return make_case(pt, {**ov, "burn." + spark_param(c, "spark"): a})

        picks = choose_spark(pts, mk, spark_mode, run=run, **spark_options)
        final = run([mk(pt, picks[pt].advance_deg) for pt in pts])
        return picks, dict(zip(pts, final))

    picks, res = solve(points, lam0)
    sol = {pt: PointSolution(picks[pt], lam0[pt], res[pt], picks[pt].limit) for pt in points}
    if exhaust_limit_K is None:
        return sol
    limit = float(exhaust_limit_K)
    hot = [pt for pt in points if _t_exh(res[pt]) > limit + tolerance_K and lam0[pt] > lambda_floor]
    hot_at_floor = [pt for pt in points if _t_exh(res[pt]) > limit + tolerance_K and lam0[pt] <= lambda_floor]
    for pt in hot_at_floor:
        sol[pt].limit, sol[pt].limit_held = LIMIT_EXHAUST, False
    if not hot:
        for pt in points:
            if pt not in hot_at_floor and math.isfinite(_t_exh(res[pt])):
                sol[pt].limit_held = True
        return sol
    base_bsfc = {pt: res[pt].summary.get("bsfc_g_per_kWh") for pt in hot}
    # bracket: (lambda, T - limit) with T above the limit (lean side) and below it (rich side)
    lean = {pt: (lam0[pt], _t_exh(res[pt]) - limit) for pt in hot}
    rich = {pt: None for pt in hot}
    # first step from a slope of the order of the trade's: about 7 K per 0.01 lambda near
    # stoichiometric (measured on the demo engines; only a first guess)
    lam = {pt: max(lambda_floor, lam0[pt] - lean[pt][1] / 700.0) for pt in hot}
    side = {pt: 0 for pt in hot}
    done = {}
    todo = list(hot)
    for it in range(1, MAX_MIXTURE_ITERATIONS + 1):
        picks, res = solve(todo, lam, tight=True)
        nxt = []
        for pt in todo:
            f = _t_exh(res[pt]) - limit
            s = sol[pt]
            s.pick, s.lambda_, s.result, s.limit, s.iterations = picks[pt], lam[pt], res[pt], picks[pt].limit, it
            s.enriched = True
            if not math.isfinite(f):
                s.notes.append("the point failed during enrichment")
                done[pt] = False
                continue
            if abs(f) <= tolerance_K:
                done[pt] = True
                continue
            if f > 0 and lam[pt] <= lambda_floor + 1e-9:
                s.limit, done[pt] = LIMIT_EXHAUST, False
                continue
            if f > 0:
                lean[pt] = (lam[pt], f)
                if side[pt] == 1 and rich[pt] is not None:     # Illinois: halve the stale end
                    rich[pt] = (rich[pt][0], rich[pt][1] / 2)
                side[pt] = 1
            else:
                rich[pt] = (lam[pt], f)
                if side[pt] == -1:
                    lean[pt] = (lean[pt][0], lean[pt][1] / 2)
                side[pt] = -1
            (l1, f1), r = lean[pt], rich[pt]
            if r is None:
                # no point under the limit yet: secant through the lean end and this one,
                # towards the floor
                new = lam[pt] - f * (l1 - lam[pt]) / (f1 - f) if f1 != f and l1 != lam[pt] else lam[pt] - f / 700.0
                new = max(lambda_floor, min(new, lam[pt] - 1e-3))
            else:
                l2, f2 = r
                new = l2 - f2 * (l1 - l2) / (f1 - f2)
                new = min(max(new, min(l1, l2)), max(l1, l2))
            lam[pt] = new
            nxt.append(pt)
        todo = nxt
        if not todo:
            break
    for pt in hot:
        s = sol[pt]
        held = abs(_t_exh(s.result) - limit) <= tolerance_K or _t_exh(s.result) < limit
        s.limit_held = bool(held) if pt in done else False
        if pt not in done:
            s.notes.append(f"exhaust temperature not within {tolerance_K:g} K of the limit after"
                           f" {MAX_MIXTURE_ITERATIONS} mixture iterations")
        if s.limit_held is False and s.limit != LIMIT_EXHAUST and s.lambda_ <= lambda_floor + 1e-9:
            s.limit = LIMIT_EXHAUST
        b0, b1 = base_bsfc.get(pt), (None if s.result.error else s.result.summary.get("bsfc_g_per_kWh"))
        s.bsfc_cost_g_per_kWh = None if b0 is None or b1 is None else float(b1 - b0)
    for pt in points:
        if pt not in hot and sol[pt].limit_held is None and math.isfinite(_t_exh(sol[pt].result)):
            sol[pt].limit_held = _t_exh(sol[pt].result) <= limit + tolerance_K
    return sol


def with_overrides(case, base: dict):
    """``make_case`` for :func:`settle_points` from a case and the point's own overrides."""
    return lambda pt, ov: case_with(case, {**base[pt], **ov})
