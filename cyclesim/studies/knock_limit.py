"""Statistical knock limit: the spark advance at which a stated share of cycles knock.

Real engines knock cycle by cycle: the fast-burning cycles of the
cycle-to-cycle spread reach end-gas autoignition first.  For each advance of a
grid, ``n_cycles`` cycles with the burn spread of
:class:`cyclesim.traces.synthesis.CycleVariation` are simulated (independent
cycles, all advances and cycles in as few batches as possible) with the
chosen knock model, and the share of knocking cycles is interpolated to the
stated share.

Results are model estimates: on a real engine approach the knock limit
gradually, with knock detection, within the manufacturer's limits and the
test cell's procedures.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..config import Case, case_with
from ..errors import ConfigError


@dataclass
class KnockLimit:
    """Knocking share against advance and the interpolated statistical knock limit."""

    advances_deg: np.ndarray
    knocking_share: np.ndarray
    share: float
    limit_deg: float | None
    n_cycles: int
    notes: list = field(default_factory=list)

    def as_dict(self) -> dict:
        return {
            "advances_deg": [float(a) for a in self.advances_deg],
            "knocking_share": [float(k) for k in self.knocking_share],
            "share": self.share,
            "statistical_knock_limit_deg": self.limit_deg,
            "n_cycles_per_advance": self.n_cycles,
            "notes": list(self.notes),
        }


def statistical_knock_limit(case: Case, advances, n_cycles: int = 50, share: float = 0.05,
                            variation=None) -> KnockLimit:
    """Least spark advance [deg BTDC] at which ``share`` of the cycles knock.

    Parameters
    ----------
    case : Case
        Operating point with an active knock model (``knock.model`` not ``none``).
    advances : sequence of float
        Spark advances [deg BTDC] to simulate, ascending.
    n_cycles : int
        Cycles per advance.
    share : float
        Share of knocking cycles that defines the limit [-], e.g. 0.05.
    variation : CycleVariation, optional
        Burn spread (seeded); the same draws are used at every advance.
    """
    from ..api import _registry_for
    from ..traces.synthesis import CycleVariation, _run_cycles, draw_parameters

    if case.submodels["knock"].model == "none":
        raise ConfigError("knock limit: knock.model is 'none'; choose a knock model, e.g. livengood_wu")
    from ..registry import spark_param

    spark = "burn." + spark_param(case, "knock limit")
    if not 0 < share < 1:
        raise ConfigError(f"knock limit: share = {share!r}: expected a number between 0 and 1")
    if int(n_cycles) < 1:
        raise ConfigError(f"knock limit: n_cycles = {n_cycles!r}: expected at least 1")
    adv = np.asarray(sorted(float(a) for a in advances))
    if adv.size < 2:
        raise ConfigError(f"knock limit: {adv.size} advance(s) given: at least 2 are needed to bracket the limit")
    var = variation or CycleVariation()
    registry = _registry_for([case])
    from ..solve.batch import build_batch
    from ..traces.synthesis import settle

    bases = [case_with(case, {spark: float(a)}) for a in adv]
    mean = settle(build_batch(bases, registry))          # all mean cycles in one batch
    for k, msg in enumerate(mean.failed):
        if msg:
            raise ConfigError(f"knock limit: mean cycle at {adv[k]:g} deg failed: {msg}")
    cases, starts = [], []
    for k, base in enumerate(bases):
        changes, _, _ = draw_parameters(base, n_cycles, var)
        cases += [case_with(base, ch) for ch in changes]
        starts += [mean.end_rows[:, k]] * n_cycles
    _, _, _, figs = _run_cycles(cases, registry, np.stack(starts, axis=1))
    onset = np.asarray(figs.get("knock_onset_deg", np.full(len(cases), np.nan)), float).reshape(len(adv), n_cycles)
    shares = np.isfinite(onset).mean(axis=1)
    limit = None
    notes = []
    above = np.flatnonzero(shares >= share)
    if above.size == 0:
        notes.append(f"fewer than {100 * share:g} % of cycles knock at every advance up to {adv[-1]:g} deg")
    elif above[0] == 0:
        notes.append(f"at least {100 * share:g} % of cycles knock already at {adv[0]:g} deg: limit below the grid")
    else:
        j = above[0]
        a0, a1, s0, s1 = adv[j - 1], adv[j], shares[j - 1], shares[j]
        limit = float(a0 + (share - s0) * (a1 - a0) / (s1 - s0)) if s1 > s0 else float(a1)
    if share * n_cycles < 3:
        notes.append(f"{100 * share:g} % of {n_cycles} cycles is {share * n_cycles:.2g} knocking cycle(s) per"
                     f" advance: too few to place the limit reliably; simulate at least {int(np.ceil(3 / share))}"
                     " cycles per advance")
    notes.append("model estimate: approach knock limits gradually on a real engine, with knock detection")
    return KnockLimit(adv, shares, share, limit, n_cycles, notes)
