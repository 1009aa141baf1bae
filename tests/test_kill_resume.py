"""Killing a sweep loses nothing and leaves nothing running; --resume completes it exactly.

A command-line sweep of the full-cycle demo (16 spark advances, 2 per chunk,
about 0.1 s a case) is stopped once a few rows are on disk: by SIGKILL (no
clean-up possible) in one process and with two worker processes, and by
SIGTERM (handled like Ctrl-C).  The workers seen before the stop must be gone
within a few seconds (a zombie awaiting its reaper counts as gone), and
``--resume`` must end with the rows of an uninterrupted run, bit for bit (the
tool's own contract: a case's figures do not depend on where or with whom it
ran).  Exit status 128 + signal number after a handled signal is the POSIX
shells' convention (common practice).
"""

from __future__ import annotations

import json
import signal
import subprocess
import sys

import pytest

from cyclesim.studies.sweep import read_sweep_csv

import proc_tools as pt

pytestmark = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")

ARGS = ["sweep", "demo", "--vary", "burn.spark_advance_deg=0:30:2", "--chunk", "2", "--no-progress"]


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """The uninterrupted run's sweep.csv rows and sweep.json rows."""
    where = tmp_path_factory.mktemp("ref")
    done = pt.run([*ARGS, "--out", "ref"], where)
    assert done.returncode == 0, done.stderr
    return read_sweep_csv(where / "ref" / "sweep.csv")[1], json.loads((where / "ref" / "sweep.json").read_text())


def stop_midway(tmp_path, sig, extra=(), min_rows=4, want_workers=0):
    """Start the sweep, send ``sig`` once ``min_rows`` rows are written; (process, workers seen, its stderr).

    Workers left running would keep the run's output pipes open: the wait for its end is bounded, and
    any worker still there is ended (by its id) before the test fails.
    """
    proc = pt.start([*ARGS, "--out", "k", *extra], tmp_path)
    csv = tmp_path / "k" / "sweep.csv"
    workers: dict = {}
    try:
        pt.wait_for(lambda: pt.csv_rows(csv) >= min_rows and len(pt.children(proc.pid)) >= want_workers,
                    proc=proc, what=f"{min_rows} rows and {want_workers} workers")
        workers = pt.children(proc.pid)
        rows = pt.csv_rows(csv)
        proc.send_signal(sig)
        try:
            out, err = proc.communicate(timeout=30)
        except subprocess.TimeoutExpired:
            left = pt.alive(workers)
            raise AssertionError(f"the stopped run's output stays open: workers {left} still run") from None
    finally:
        pt.end(proc)
        pt.kill_all(workers)
    assert rows < 16, "the sweep finished before it could be stopped"
    return proc, workers, err


def resume_matches(tmp_path, reference, extra=()):
    done = pt.run([*ARGS, "--out", "k", "--resume", *extra], tmp_path)
    assert done.returncode == 0, done.stderr
    rows, data = reference
    assert read_sweep_csv(tmp_path / "k" / "sweep.csv")[1] == rows
    assert json.loads((tmp_path / "k" / "sweep.json").read_text())["rows"] == data["rows"]


def test_sigkill_of_a_serial_sweep_then_resume(tmp_path, reference):
    proc, workers, err = stop_midway(tmp_path, signal.SIGKILL)
    assert proc.returncode == -signal.SIGKILL and workers == {}
    resume_matches(tmp_path, reference)        # the dead run's lock file is taken over


def test_sigkill_of_a_parallel_sweep_leaves_no_worker_and_resumes(tmp_path, reference):
    proc, workers, err = stop_midway(tmp_path, signal.SIGKILL, ["--workers", "2"], want_workers=2)
    assert proc.returncode == -signal.SIGKILL and len(workers) >= 2
    assert pt.wait_gone(workers, timeout=5.0) == []
    resume_matches(tmp_path, reference, ["--workers", "2"])


def test_sigterm_of_a_parallel_sweep_is_an_interruption(tmp_path, reference):
    proc, workers, err = stop_midway(tmp_path, signal.SIGTERM, ["--workers", "2"], want_workers=2)
    assert proc.returncode == 128 + signal.SIGTERM, err
    lines = err.strip().splitlines()
    assert lines[-1] == "cyclesim: terminated" and "Traceback" not in err
    assert "run again with --resume to continue" in lines[-2]
    assert pt.wait_gone(workers, timeout=5.0) == []
    resume_matches(tmp_path, reference)
