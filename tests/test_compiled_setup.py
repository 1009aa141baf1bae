"""The compiled cycle's batch-only inputs are packed once per batch and shared by its grids
(cyclesim.solve.kernel._BatchConsts); each grid keeps its own case block."""

from __future__ import annotations

import numpy as np
import pytest

from cyclesim.api import _registry_for
from cyclesim.config import load_config
from cyclesim.solve import kernel
from cyclesim.solve.batch import build_batch
from cyclesim.solve.solver import integrate

pytestmark = pytest.mark.skipif(kernel.compiled_module() is None, reason="numba does not run here")


def test_grids_share_the_batch_constants_and_keep_their_own_case_block():
    cases = [load_config("demo", [f"burn.spark_advance_deg={a}", "emissions.model=none"]) for a in (15, 30)]
    reg = _registry_for(cases)
    b = build_batch(cases, reg)
    made = []
    plain = kernel.Compiled.__init__

    def init(self, *a, **k):
        plain(self, *a, **k)
        made.append(self)

    kernel.Compiled.__init__ = init
    try:
        tr = integrate(b)
        first = dict(b.__dict__["_compiled_consts"])
        again = integrate(b)                    # the same batch once more: packed afresh
        # a change of the batch between integrations is seen (the engine driver sets the walls)
        b.walls.head_temperature_K = np.asarray(b.walls.head_temperature_K, float) + 50.0
        hotter = integrate(b)
    finally:
        kernel.Compiled.__init__ = plain
    assert len(made) == 9                       # 2 start-up grids and the fine grid, three times
    assert len(first) == 1
    for k in (0, 3, 6):                         # one integration's grids share, the next packs again
        assert all(c.TB is made[k].TB and c.reset is made[k].reset for c in made[k:k + 3])
    assert made[3].TB is not made[0].TB
    assert not np.array_equal(hotter.Y[5], tr.Y[5])           # the wall heat follows the walls
    assert len({id(c.CB) for c in made}) == len(made)      # the IVC rows are written per grid
    fresh = integrate(build_batch(cases, reg))
    for t in (tr, again):
        assert np.array_equal(t.Y, fresh.Y) and np.array_equal(t.F, fresh.F)
        assert np.array_equal(t.cycles, fresh.cycles)
