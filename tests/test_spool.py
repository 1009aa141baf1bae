"""Trace arrays handed from worker processes through a file in memory (cyclesim.spool): the same
bytes come back, and no file is left behind."""

from __future__ import annotations

import os
import pickle
from types import SimpleNamespace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

import cyclesim.spool as spool_mod
from cyclesim.config import load_config
from cyclesim.parallel import run_chunks
from cyclesim.spool import Spooled, TraceSpool, pack

from test_parallel import assert_same_results

needs_shm = pytest.mark.skipif(TraceSpool.create().folder is None and not os.path.isdir("/dev/shm"),
                               reason="no memory file system (/dev/shm) here")


def _results(traces):
    return [SimpleNamespace(name=f"c{i}", trace=dict(t)) for i, t in enumerate(traces)]


_arrays = hnp.arrays(
    dtype=st.sampled_from([np.float64, np.float32, np.int64, np.bool_, np.complex128, np.dtype(">f8")]),
    shape=hnp.array_shapes(min_dims=0, max_dims=3, min_side=0, max_side=6))


@needs_shm
@settings(max_examples=40, deadline=None)
@given(st.lists(st.dictionaries(st.sampled_from(["p", "T", "mfb", "n", "flag"]), _arrays, max_size=4),
                min_size=1, max_size=4))
def test_pack_and_unpack_give_the_same_bytes(traces):
    spool = TraceSpool.create()
    old = spool_mod.MIN_BYTES
    spool_mod.MIN_BYTES = 0            # spool even the smallest chunk
    try:
        packed = pack(_results(traces), spool.folder)
        _, path = packed
        if sum(v.nbytes for t in traces for v in t.values()) == 0:
            assert path is None                              # nothing worth a file
            return
        assert path is not None and os.path.exists(path)
        packed = pickle.loads(pickle.dumps(packed))          # as the pool sends it
        for r in packed[0]:
            assert all(isinstance(v, Spooled) for v in r.trace.values())
        back = spool.unpack(packed)
        assert not os.path.exists(path)
        for r, t in zip(back, traces):
            assert r.trace.keys() == t.keys()
            for k, v in t.items():
                got = r.trace[k]
                assert got.dtype == v.dtype and got.shape == v.shape
                assert got.tobytes() == v.tobytes()
                assert got.flags.writeable and got.flags.c_contiguous
    finally:
        spool_mod.MIN_BYTES = old
        spool.remove()
    assert not os.path.exists(spool.folder)


def test_without_a_folder_or_below_the_threshold_the_arrays_stay_in_the_results():
    big = {"p": np.arange(1.0, 1e5)}
    res = _results([big])
    assert pack(res, None) == (res, None)
    assert res[0].trace["p"] is big["p"]
    spool = TraceSpool.create()
    try:
        small = _results([{"p": np.arange(10.0), "note": "kept"}])
        assert pack(small, spool.folder)[1] is None or spool.folder is None
        assert isinstance(small[0].trace["p"], np.ndarray)
    finally:
        spool.remove()


def test_non_array_entries_are_left_as_they_are():
    spool = TraceSpool.create()
    if spool.folder is None:
        pytest.skip("no memory file system here")
    try:
        res = _results([{"p": np.linspace(0, 1, 70000), "label": "x", "obj": np.array([None, 1], dtype=object)}])
        packed = pack(res, spool.folder)
        assert packed[1] is not None
        assert packed[0][0].trace["label"] == "x" and packed[0][0].trace["obj"].dtype == object
        back = spool.unpack(packed)
        np.testing.assert_array_equal(back[0].trace["p"], np.linspace(0, 1, 70000))
    finally:
        spool.remove()


@needs_shm
def test_process_workers_spool_their_traces_and_give_the_serial_results(monkeypatch):
    # full-cycle cases whose traces pass the threshold; fork workers inherit the threshold set here
    monkeypatch.setattr(spool_mod, "MIN_BYTES", 0)
    made = []
    real_create = TraceSpool.create

    def create():
        s = real_create()
        made.append(s.folder)
        return s

    monkeypatch.setattr(TraceSpool, "create", staticmethod(create))
    cases = [load_config("demo_closed", ["simulation.step_deg=1.0", f"burn.spark_advance_deg={a}"])
             for a in (10, 20, 30, 40)]
    chunks = [cases[:2], cases[2:]]
    serial = run_chunks(chunks, backend="serial")
    par = run_chunks(chunks, workers=2, backend="process", start="fork")
    for a, b in zip(serial, par):
        assert_same_results(a, b)
    assert made and all(f is None or not os.path.exists(f) for f in made)
