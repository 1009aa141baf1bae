"""Step-halving self-check: does a result depend on the crank step?

Run on request (``CYCLESIM_STEP_CHECK=1``, or :func:`step_check` from Python) and in
``benchmarks/run.py``: each case is simulated again at half its ``simulation.step_deg`` and
the net IMEP (closed cycles: the closed-part IMEP) of the two runs compared.  A change above
:data:`IMEP_BOUND` says the step does not resolve the case (a burn shorter than its model
declares, a plug-in whose derivatives jump); the case then gets a warning naming the change.

Halving the step of an explicit third-order scheme that is in its asymptotic range moves a
result by about 7/8 of its error (Richardson, common practice), so the change is a fair
estimate of the error at the coarser step.
"""

from __future__ import annotations

import os
from typing import Sequence

ENV = "CYCLESIM_STEP_CHECK"
IMEP_BOUND = 2e-3
"""Largest accepted relative change of IMEP between the step and half of it [-] (0.2 %)."""


def requested() -> bool:
    """Whether ``CYCLESIM_STEP_CHECK`` asks for the check (``1``, ``true``, ``yes`` or ``on``)."""
    return os.environ.get(ENV, "").strip().lower() in ("1", "true", "yes", "on")


def _imep(res) -> float | None:
    s = res.summary
    for key in ("imep_net_bar", "imep_closed_bar"):
        v = s.get(key)
        if isinstance(v, float):
            return v
    return None


def step_check(cases: Sequence, results: Sequence | None = None, *, simulate) -> list[float | None]:
    """Relative change of IMEP [-] of each case when its step is halved (None: a run failed).

    ``results`` are the cases' results at their own step, if already computed; ``simulate`` runs
    a list of cases (:func:`cyclesim.simulate`; passed in, as the API calls this check).  A case
    whose change passes :data:`IMEP_BOUND` gets a warning in its result.
    """
    from ..config import case_with

    cases = list(cases)
    if results is None:
        results = simulate(cases, refine=False)
    halves = []
    for c in cases:
        h = case_with(c, {"simulation.step_deg": float(c.simulation.step_deg) / 2.0})
        h.name = c.name
        halves.append(h)
    fine = simulate(halves, refine=False)
    out: list[float | None] = []
    for res, f, c in zip(results, fine, cases):
        a, b = _imep(res), _imep(f)
        if res.error or f.error or a is None or b is None or b == 0.0:
            out.append(None)
            continue
        d = abs(a / b - 1.0)
        out.append(d)
        if d > IMEP_BOUND:
            res.warnings.append(
                f"step self-check: IMEP moves by {100 * d:.2f} % when simulation.step_deg is halved"
                f" ({c.simulation.step_deg:g} -> {c.simulation.step_deg / 2:g} deg), more than"
                f" {100 * IMEP_BOUND:.1f} %: reduce simulation.step_deg, or check that the burn model"
                f" declares its shortest feature (shortest_feature_deg_for)")
    return out
