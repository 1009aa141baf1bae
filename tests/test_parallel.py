"""Chunks of cases on several processes or a Dask cluster give the serial results, bit for bit.

A case's figures do not depend on its batch-mates and a chunk is batched the
same way wherever it runs, so a sweep split across worker processes must give
exactly the table of a run in one process: summaries are compared bit for bit
(float repr round-trips exactly), traces with array equality, files as text.
These check plumbing, not physics, so they use the closed-cycle demo on a
1 deg step.
"""

from __future__ import annotations

import argparse
import multiprocessing
import pickle
import sys

import numpy as np
import pytest

from cyclesim.config import load_config
from cyclesim.errors import ConfigError, CyclesimError
from cyclesim.parallel import (
    AUTO_MIN_CASES,
    available_cpus,
    parse_workers,
    plan_execution,
    resolve_workers,
    run_chunk,
    run_chunks,
)
from cyclesim.studies.sweep import read_sweep_csv, sweep

FAST = ["simulation.step_deg=1.0"]
SPARK = "burn.spark_advance_deg"

HEAT_PLUGIN = '''
import os
import numpy as np
from cyclesim import hookimpl
from cyclesim.params import Param
from cyclesim.roles import WallHeatTransfer

class FixedCoefficient(WallHeatTransfer):
    """A fixed heat-transfer coefficient (test plug-in)."""
    name = "fixed_h"
    summary = "fixed heat-transfer coefficient"
    params = (Param("h_W_per_m2K", "W/(m^2 K)", 400.0, "coefficient", 0, 1e5),)
    references = ("test plug-in",)
    def coefficient(self, s):
        return self.p.h_W_per_m2K * np.ones_like(s.T)

class AbortingCoefficient(WallHeatTransfer):
    """Ends its process at the first call (stands for a worker killed mid-chunk)."""
    name = "abort_h"
    summary = "ends the process"
    params = ()
    references = ("test plug-in",)
    def coefficient(self, s):
        os._exit(3)

@hookimpl
def cyclesim_register_submodels():
    return [FixedCoefficient, AbortingCoefficient]
'''


@pytest.fixture(scope="module")
def base():
    return load_config("demo_closed", FAST)


@pytest.fixture(scope="module")
def cases():
    return [load_config("demo_closed", [*FAST, f"{SPARK}={a}", f"operating.ivc_pressure_bar={p}"])
            for a in (12, 20, 28) for p in (0.9, 1.1)]


@pytest.fixture(scope="module")
def serial_chunks(cases):
    chunks = [cases[0:2], cases[2:3], cases[3:6]]
    return chunks, run_chunks(chunks, backend="serial")


@pytest.fixture
def plugin_config(tmp_path):
    (tmp_path / "parheat.py").write_text(HEAT_PLUGIN)
    cfg = tmp_path / "fixed_h.yaml"
    cfg.write_text("extends: demo_closed\nplugins: [parheat.py]\nheat_transfer: {model: fixed_h}\n")
    return cfg


def bits(summary: dict) -> dict:
    """Every figure as the exact text of its float (NaN included), nested dicts flattened."""
    out = {}
    for k, v in summary.items():
        if isinstance(v, dict):
            out.update({f"{k}.{kk}": repr(vv) for kk, vv in v.items()})
        else:
            out[k] = repr(v)
    return out


def assert_same_results(a, b):
    assert len(a) == len(b)
    for ra, rb in zip(a, b):
        assert ra.name == rb.name and ra.error == rb.error and ra.warnings == rb.warnings
        assert bits(ra.summary) == bits(rb.summary)
        assert ra.trace.keys() == rb.trace.keys()
        for k in ra.trace:
            assert np.array_equal(ra.trace[k], rb.trace[k], equal_nan=True), k


# -- cases and results cross process boundaries ---------------------------


def test_cases_and_results_survive_pickling(cases):
    from cyclesim.solve.batch import batch_key
    from cyclesim.config import flat_inputs
    from cyclesim.registry import get_registry

    case = cases[3]
    back = pickle.loads(pickle.dumps(case))
    assert flat_inputs(back) == flat_inputs(case)
    reg = get_registry(case.plugins)
    assert batch_key(back, reg) == batch_key(case, reg)
    res = run_chunk([case])[0]
    res2 = pickle.loads(pickle.dumps(res))
    assert bits(res2.summary) == bits(res.summary) and res2.summary
    assert_same_results([res], [res2])


# -- worker counts and the choice of backend -------------------------------


def test_workers_are_auto_or_a_whole_number():
    assert parse_workers("auto") == "auto" and parse_workers(" AUTO ") == "auto"
    assert parse_workers("3") == 3 and parse_workers(2) == 2
    for bad in ("0", "-2", "two", 0, True, 1.5):
        with pytest.raises(ConfigError, match="--workers"):
            parse_workers(bad)
    assert resolve_workers("auto") == available_cpus()
    assert resolve_workers("auto", n_chunks=1) == 1
    assert resolve_workers(8, n_chunks=3) == 3
    assert resolve_workers(2, n_chunks=10) == 2


def test_small_sweeps_run_serial_large_ones_on_all_cores():
    cpus = available_cpus()
    assert plan_execution(AUTO_MIN_CASES, 1) == ("serial", 1)
    assert plan_execution(AUTO_MIN_CASES, 4) == ("serial", 1)           # few cases: no pool start-up
    two = ("process", 2) if cpus >= 2 else ("serial", 1)
    assert plan_execution(AUTO_MIN_CASES + 1, 2) == two
    assert plan_execution(1000, 16) == (("process", min(cpus, 16)) if cpus >= 2 else ("serial", 1))
    assert plan_execution(1000, 16, workers=1) == ("serial", 1)
    assert plan_execution(1000, 1) == ("serial", 1)                      # one chunk: nothing to share
    assert plan_execution(10, 5, workers=2) == ("process", 2)
    assert plan_execution(10, 5, workers=2, backend="serial") == ("serial", 1)
    assert plan_execution(10, 5, scheduler="tcp://127.0.0.1:8786") == ("dask", 5)
    assert plan_execution(10, 5, workers=2, backend="dask") == ("dask", 2)
    with pytest.raises(ConfigError, match="needs --backend dask"):
        plan_execution(10, 5, backend="process", scheduler="tcp://127.0.0.1:8786")
    with pytest.raises(ConfigError, match="--backend 'threads'"):
        plan_execution(10, 5, backend="threads")


# -- the process backend -----------------------------------------------------


def test_process_workers_give_the_serial_results_bit_for_bit(serial_chunks):
    chunks, serial = serial_chunks
    seen = []
    par = run_chunks(chunks, workers=2, backend="process", on_result=lambda k, res: seen.append((k, len(res))))
    assert sorted(seen) == [(0, 2), (1, 1), (2, 3)]                      # each chunk handed over once
    for a, b in zip(serial, par):                                        # returned in chunk order
        assert_same_results(a, b)


def test_run_cases_shares_out_whole_batches_and_matches_simulate():
    import cyclesim
    from cyclesim.parallel import batch_chunks, run_cases

    cs = [load_config("demo_closed", [f"simulation.step_deg={h}", f"{SPARK}={a}"])
          for a in (14, 22, 30) for h in (1.0, 2.0)]                    # two crank grids, interleaved
    chunks = batch_chunks(cs)
    assert chunks == [[0, 2, 4], [1, 3, 5]]                              # one per batch, finer step first
    assert batch_chunks(cs, max_size=2) == [[0, 2], [4], [1, 3], [5]]
    assert_same_results(run_cases(cs, workers=2), cyclesim.simulate(cs))


def test_forkserver_workers_load_plugins_listed_by_path(plugin_config):
    cs = [load_config(plugin_config, [*FAST, f"heat_transfer.h_W_per_m2K={h}"]) for h in (0, 300, 900, 2000)]
    chunks = [cs[:2], cs[2:]]
    serial = run_chunks(chunks, backend="serial")
    par = run_chunks(chunks, workers=2, backend="process", start="forkserver")
    for a, b in zip(serial, par):
        assert_same_results(a, b)
    flat = [r for ch in par for r in ch]
    assert all(r.ok and r.models["heat_transfer"] == "fixed_h" for r in flat)
    imep = [r.summary["imep_closed_bar"] for r in flat]
    assert imep == sorted(imep, reverse=True) and imep[0] > imep[-1]     # more wall heat, less work


def test_a_worker_that_dies_is_one_error_line(plugin_config):
    bad = load_config(plugin_config, [*FAST, "heat_transfer.model=abort_h"])
    good = load_config(plugin_config, FAST)
    with pytest.raises(CyclesimError, match="worker process died") as exc:
        run_chunks([[bad], [good]], workers=2, backend="process")
    assert "\n" not in str(exc.value)


# -- sweeps and spark studies -------------------------------------------------


def test_parallel_sweep_streams_rows_and_writes_the_serial_files(base, tmp_path):
    vary = [(SPARK, "10:30:5"), ("operating.ivc_pressure_bar", [0.9, 1.1])]    # 10 cases, 4 chunks
    ser = sweep(base, vary, out=tmp_path / "s", chunk_size=3, workers=1)
    counts = []

    def look(done, total, elapsed):
        path = tmp_path / "p" / "sweep.csv"
        counts.append((done, len(read_sweep_csv(path)[1]) if path.exists() else 0))

    par = sweep(base, vary, out=tmp_path / "p", chunk_size=3, workers=2, progress=look)
    assert counts[0] == (0, 0) and counts[-1] == (10, 10)
    assert all(done == written for done, written in counts)              # rows on disk as chunks finish
    assert len(counts) == 1 + 4                                          # once at the start, once per chunk
    for name in ("sweep.csv", "sweep.json"):
        assert (tmp_path / "p" / name).read_text() == (tmp_path / "s" / name).read_text()
    assert par.columns == ser.columns
    assert_same_results(ser.results, par.results)


def test_interrupted_parallel_sweep_resumes_to_the_full_table(base, tmp_path):
    out = tmp_path / "r"
    vary = [(SPARK, "10:40:5")]                                          # 7 cases, chunks of 2

    def stop(done, total, elapsed):
        if done >= 2:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        sweep(base, vary, out=out, chunk_size=2, workers=2, progress=stop)
    assert not multiprocessing.active_children()                        # the workers were ended
    kept = [r["case"] for r in read_sweep_csv(out / "sweep.csv")[1]]
    assert 2 <= len(kept) < 7 and len(set(kept)) == len(kept)
    res = sweep(base, vary, out=out, resume=True, chunk_size=2, workers=2)
    fresh = sweep(base, vary, chunk_size=2, workers=1)
    assert [r["case"] for r in res.rows] == list(range(7))
    for r, f in zip(res.rows, fresh.rows):
        assert {k: repr(v) for k, v in r.items()} == {k: repr(v) for k, v in f.items()}


def test_spark_study_passes_workers_through(tmp_path):
    from cyclesim.studies.spark import spark_study

    kw = dict(overrides=FAST, chunk_size=2, plots=False)
    ser = spark_study("demo_closed", "10:40:5", workers=1, **kw)
    par = spark_study("demo_closed", "10:40:5", workers=2, backend="process", **kw)
    assert ser.mbt_deg is not None and repr(par.mbt_deg) == repr(ser.mbt_deg)
    assert repr(par.retard_limit_deg) == repr(ser.retard_limit_deg)
    assert_same_results(ser.table.results, par.table.results)


def test_bad_parallel_options_fail_before_the_out_folder_is_touched(base, tmp_path):
    out = tmp_path / "o"
    out.mkdir()
    (out / "sweep.csv").write_text("case\n0\n")
    with pytest.raises(ConfigError, match="--workers"):
        sweep(base, [(SPARK, "10,20")], out=out, force=True, workers=0)
    with pytest.raises(ConfigError, match="--backend"):
        sweep(base, [(SPARK, "10,20")], out=out, force=True, backend="gpu")
    assert (out / "sweep.csv").read_text() == "case\n0\n"


def test_command_line_options():
    from cyclesim.cli.studies import add_parsers

    ap = argparse.ArgumentParser(prog="cyclesim")
    add_parsers(ap.add_subparsers(dest="command", required=True))
    a = ap.parse_args(["sweep", "demo_closed", "--vary", f"{SPARK}=10:20:5", "--out", "x", "--workers", "auto"])
    assert (a.workers, a.backend, a.scheduler) == ("auto", None, None)
    a = ap.parse_args(["spark", "--out", "x", "--workers", "2", "--backend", "dask",
                       "--scheduler", "tcp://127.0.0.1:8786"])
    assert (a.workers, a.backend, a.scheduler) == (2, "dask", "tcp://127.0.0.1:8786")
    for bad in (["--workers", "0"], ["--workers", "many"], ["--backend", "gpu"]):
        with pytest.raises(SystemExit):
            ap.parse_args(["sweep", "--vary", f"{SPARK}=10", "--out", "x", *bad])


# -- the dask backend -----------------------------------------------------------


def test_dask_backend_without_the_extra_says_how_to_install_it(monkeypatch, cases):
    monkeypatch.setitem(sys.modules, "distributed", None)             # as if not installed
    with pytest.raises(ConfigError, match=r'pip install "cyclesim\[dask\]"'):
        run_chunks([cases[:1]], backend="dask")


@pytest.fixture(scope="module")
def dask_cluster():
    distributed = pytest.importorskip("distributed")
    import dask

    with dask.config.set({"distributed.comm.timeouts.connect": "20s",
                          "distributed.comm.timeouts.tcp": "30s",
                          "distributed.scheduler.work-stealing": False}):
        cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                           host="127.0.0.1", dashboard_address=None)
        try:
            yield cluster
        finally:
            cluster.close(timeout=20)


def test_dask_cluster_gives_the_in_process_results_exactly(dask_cluster, base, tmp_path, serial_chunks,
                                                          plugin_config):
    from distributed import Client

    chunks, serial = serial_chunks
    seen = []
    plug = [[load_config(plugin_config, [*FAST, f"heat_transfer.h_W_per_m2K={h}"])] for h in (100, 1500)]
    with Client(dask_cluster, timeout="20s") as client:
        par = run_chunks(chunks, backend="dask", client=client, on_result=lambda k, r: seen.append(k))
        plug_par = run_chunks(plug, backend="dask", client=client)
    assert sorted(seen) == [0, 1, 2]
    for a, b in zip(serial, par):
        assert_same_results(a, b)
    for a, b in zip(run_chunks(plug, backend="serial"), plug_par):      # plug-in by path, loaded by the workers
        assert_same_results(a, b)
        assert b[0].ok and b[0].models["heat_transfer"] == "fixed_h"

    vary = [(SPARK, "10:30:5")]
    ser = sweep(base, vary, out=tmp_path / "s", chunk_size=2, workers=1)
    das = sweep(base, vary, out=tmp_path / "d", chunk_size=2, backend="dask",
                scheduler=dask_cluster.scheduler_address)
    for name in ("sweep.csv", "sweep.json"):
        assert (tmp_path / "d" / name).read_text() == (tmp_path / "s" / name).read_text()
    assert_same_results(ser.results, das.results)
    assert np.isfinite(das.column("imep_closed_bar")).all() and len(das.rows) == 5


def test_an_unreachable_scheduler_is_one_error_line(monkeypatch, cases):
    pytest.importorskip("distributed")
    import socket

    import cyclesim.parallel as par

    with socket.socket() as s:                                          # a free port nobody listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    monkeypatch.setattr(par, "DASK_CONNECT_TIMEOUT", "2s")
    with pytest.raises(CyclesimError, match="no Dask scheduler answered") as exc:
        run_chunks([cases[:1]], backend="dask", scheduler=f"tcp://127.0.0.1:{port}")
    assert "\n" not in str(exc.value)
