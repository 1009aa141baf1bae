"""Each case's trace columns are its own (cyclesim.api.results_from_trace hands out rows of one block
per column instead of a copy per case and column)."""

from __future__ import annotations

import itertools

import numpy as np

import cyclesim
from cyclesim.config import load_config


def test_trace_columns_are_independent_and_writable():
    cases = [load_config("demo_closed", [f"burn.spark_advance_deg={a}", "simulation.output_step_deg=0.1"])
             for a in (10, 20, 30)]
    res = cyclesim.simulate(cases)
    alone = cyclesim.simulate([cases[1]])[0]
    before = {k: v.copy() for k, v in res[1].trace.items()}
    for k, v in res[1].trace.items():
        assert np.array_equal(v, alone.trace[k], equal_nan=True), k   # a row of the batch is the case alone
    # writing into one case's columns leaves its batch-mates' and its other columns unchanged
    for k in res[0].trace:
        res[0].trace[k][...] = -1.0
    for k, v in res[1].trace.items():
        assert np.array_equal(v, before[k], equal_nan=True), k
    cols = list(res[1].trace.values())
    assert all(c.flags.writeable for c in cols)
    assert not any(np.shares_memory(a, b) for a, b in itertools.combinations(cols, 2))
    assert not any(np.shares_memory(a, b) for a in res[1].trace.values() for b in res[2].trace.values())
