"""The output folder: one writer at a time, proven writable before any work, write failures in one line.

The contract is cyclesim.results.outdir's (a lock file holding the process id; a live
holder refuses a second run, a dead one is taken over) and cyclesim.studies.
sweep's (rows on disk kept on a failed write, the message says how to resume).
Unwritable folders are made in ways that stop root too, since the tests run as
root where chmod does not: a path whose parent is a regular file, an
immutable folder (``chattr +i``, skipped where the file system has no such
flag), and a writer replaced in-process by one that fails the way a full or
read-only disk does.  Plumbing checks: the closed-cycle demo on a 1 deg step.
"""

from __future__ import annotations
from cli_helpers import error_lines

import errno
import os
import shutil
import subprocess
import sys
import textwrap

import pytest

from cyclesim.cli import main
from cyclesim.config import load_config
from cyclesim.errors import CyclesimError
from cyclesim.results.outdir import LOCK_NAME, folder_lock, made_by_lock
from cyclesim.studies import sweep_files
from cyclesim.studies.sweep import SweepResult, read_sweep_csv, sweep

import proc_tools as pt

FAST = ["simulation.step_deg=1.0"]
SPARK = "burn.spark_advance_deg"
linux_only = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")

HOLDER = textwrap.dedent("""
    import sys, time
    from cyclesim.results.outdir import folder_lock
    with folder_lock(sys.argv[1]):
        print("held", flush=True)
        if sys.argv[2] == "die":
            import os
            os._exit(0)          # ends without releasing, as a killed process does
        time.sleep(60)
""")


@pytest.fixture(scope="module")
def base():
    return load_config("demo_closed", FAST)


def hold(folder, how="sleep"):
    """A separate process that takes the folder's lock (and sleeps, or dies holding it)."""
    p = subprocess.Popen([sys.executable, "-c", HOLDER, str(folder), how], stdout=subprocess.PIPE, text=True,
                         env=pt.ENV)
    assert p.stdout.readline().strip() == "held"
    return p


def no_simulation(monkeypatch):
    import cyclesim.parallel as par

    def refuse(*a, **k):
        raise AssertionError("simulated although the folder could not be written")

    monkeypatch.setattr(par, "run_chunks", refuse)


# -- the lock ---------------------------------------------------------------------


def test_a_folder_held_by_a_live_process_is_refused_naming_it(base, tmp_path, capsys):
    out = tmp_path / "busy"
    p = hold(out)
    try:
        with pytest.raises(CyclesimError, match=f"in use by another cyclesim run \\(process {p.pid}\\b"):
            sweep(base, [(SPARK, "10,20")], out=out)
        assert main(["run", "demo_closed", "--set", "simulation.step_deg=1.0", "--out", str(out)]) == 2
        err = capsys.readouterr().err.strip()
        assert len(error_lines(err)) == 1 and f"process {p.pid}" in err
        assert sorted(f.name for f in out.iterdir()) == [LOCK_NAME]      # nothing written by the refused runs
    finally:
        p.kill()
        p.wait()


def test_a_lock_left_by_a_dead_process_is_taken_over(base, tmp_path):
    out = tmp_path / "stale"
    p = hold(out, "die")
    p.wait()
    assert f"pid={p.pid}" in (out / LOCK_NAME).read_text()             # left behind
    res = sweep(base, [(SPARK, "10,20")], out=out, resume=True)
    assert len(res.rows) == 2 and not (out / LOCK_NAME).exists()          # released at the end


def test_the_lock_is_reentrant_and_forked_children_do_not_hold_it(tmp_path):
    out = tmp_path / "re"
    with folder_lock(out):
        with folder_lock(out / "." ):                                     # the same folder, spelt differently
            assert (out / LOCK_NAME).exists()
        assert (out / LOCK_NAME).exists()                                 # still held by the outer block
        assert f"pid={os.getpid()}" in (out / LOCK_NAME).read_text()
        pid = os.fork()
        if pid == 0:                                                      # child: must not pass for the holder
            try:
                with folder_lock(out):
                    os._exit(1)
            except CyclesimError:
                os._exit(0)
            os._exit(2)
        _, status = os.waitpid(pid, 0)
        assert os.waitstatus_to_exitcode(status) == 0
        assert (out / LOCK_NAME).exists()                                 # the child's exit did not release it
    assert not out.exists()                                              # made by the lock, left empty: removed


@linux_only
def test_two_sweeps_into_one_folder_the_second_is_refused(tmp_path):
    argv = ["sweep", "demo", "--vary", f"{SPARK}=0:46:2", "--chunk", "2", "--out", "two", "--no-progress"]
    first = pt.start(argv, tmp_path)
    try:
        pt.wait_for(lambda: pt.csv_rows(tmp_path / "two" / "sweep.csv") >= 2, proc=first, what="the first rows")
        second = pt.run([*argv[:-1], "--force", "--no-progress"], tmp_path)
        assert second.returncode == 2
        err = second.stderr.strip().splitlines()
        assert len(err) == 1 and err[0].startswith("cyclesim: error: --out two: in use by another cyclesim run")
        assert f"(process {first.pid}," in err[0] and "wait until it ends" in err[0]
        out, err = first.communicate(timeout=120)
        assert first.returncode == 0, err
    finally:
        pt.end(first)
    cols, rows = read_sweep_csv(tmp_path / "two" / "sweep.csv")
    assert [r[SPARK] for r in rows] == list(range(0, 47, 2))              # the first sweep's table, whole


def test_a_command_whose_folder_the_lock_made_cleans_it_after_a_failure(tmp_path, capsys):
    out = tmp_path / "never"
    assert main(["run", "nosuch_config", "--out", str(out)]) == 2
    assert not out.exists()
    with folder_lock(out):
        assert made_by_lock(out)
    assert not made_by_lock(out)


# -- writable before anything runs -------------------------------------------------


def test_an_impossible_folder_is_refused_before_anything_runs(base, tmp_path, monkeypatch, capsys):
    (tmp_path / "afile").write_text("not a folder")
    out = tmp_path / "afile" / "sub"                                      # parent is a regular file: even root fails
    no_simulation(monkeypatch)
    with pytest.raises(CyclesimError, match="cannot create the folder"):
        sweep(base, [(SPARK, "10,20")], out=out)
    assert main(["sweep", "demo_closed", "--vary", f"{SPARK}=10,20", "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(error_lines(err)) == 1 and "Traceback" not in err
    assert main(["run", "demo_closed", "--out", str(tmp_path / "afile")]) == 2
    assert "exists and is not a folder" in capsys.readouterr().err


def _immutable(folder) -> bool:
    if shutil.which("chattr") is None:
        return False
    return subprocess.run(["chattr", "+i", str(folder)], capture_output=True).returncode == 0


def test_an_immutable_folder_is_refused_before_anything_runs(base, tmp_path, monkeypatch):
    out = tmp_path / "ro"
    out.mkdir()
    if not _immutable(out):
        pytest.skip("no chattr +i on this file system")
    try:
        no_simulation(monkeypatch)
        with pytest.raises(CyclesimError, match=r"--out .*ro: cannot write there \(Operation not permitted\)"):
            sweep(base, [(SPARK, "10,20")], out=out)
        assert list(out.iterdir()) == []
    finally:
        subprocess.run(["chattr", "-i", str(out)], check=True)


# -- failures mid-run ------------------------------------------------------------------


def test_a_write_that_fails_mid_sweep_keeps_the_rows_and_says_how_to_resume(base, tmp_path, monkeypatch, capsys):
    out = tmp_path / "mid"
    real = sweep_files.CsvSink.add
    calls = []

    def fails_second_time(self, *a, **k):
        calls.append(1)
        if len(calls) >= 2:            # the folder turns read-only after the first chunk
            raise PermissionError(errno.EACCES, "Permission denied", str(self.path))
        return real(self, *a, **k)

    monkeypatch.setattr(sweep_files.CsvSink, "add", fails_second_time)
    with pytest.raises(CyclesimError) as exc:
        sweep(base, [(SPARK, "10:40:5")], out=out, chunk_size=2)
    msg = str(exc.value)
    assert "\n" not in msg and "Permission denied" in msg and "after 4 of 7 cases" in msg
    assert "2 finished rows are kept" in msg and "--resume" in msg
    assert [r["case"] for r in read_sweep_csv(out / "sweep.csv")[1]] == [0, 1]
    calls.clear()
    argv = ["sweep", "demo_closed", "--set", "simulation.step_deg=1.0", "--vary", f"{SPARK}=10:40:5",
            "--chunk", "2", "--out", str(tmp_path / "cli")]
    assert main(argv) == 2
    err = capsys.readouterr().err.strip()
    assert len(error_lines(err)) == 1 and err.startswith("cyclesim: error: --out") and "--resume" in err
    monkeypatch.undo()
    res = sweep(base, [(SPARK, "10:40:5")], out=out, chunk_size=2, resume=True)
    assert res.results[:2] == [None, None] and res.rows == sweep(base, [(SPARK, "10:40:5")]).rows


def test_a_final_write_that_fails_keeps_every_row(base, tmp_path, monkeypatch):
    out = tmp_path / "end"

    def full_disk(self, path=None):
        raise OSError(errno.ENOSPC, "No space left on device", str(path))

    monkeypatch.setattr(SweepResult, "to_json", full_disk)
    with pytest.raises(CyclesimError, match="No space left on device.*after 3 of 3 cases; 3 finished rows are kept"):
        sweep(base, [(SPARK, "10,20,30")], out=out)
    monkeypatch.undo()
    ran = []
    sweep(base, [(SPARK, "10,20,30")], out=out, resume=True, progress=lambda d, t, e: ran.append(d))
    assert ran == [3] and (out / "sweep.json").exists()                 # nothing simulated again


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_a_folder_made_immutable_mid_sweep_keeps_the_rows_and_resumes(tmp_path):
    probe = tmp_path / "probe"
    probe.mkdir()
    if not _immutable(probe):
        pytest.skip("no chattr +i on this file system")
    subprocess.run(["chattr", "-i", str(probe)], check=True)
    argv = ["sweep", "demo", "--vary", f"{SPARK}=0:30:2", "--chunk", "2", "--out", "imm", "--no-progress"]
    out = tmp_path / "imm"
    run = pt.start(argv, tmp_path)
    try:
        pt.wait_for(lambda: pt.csv_rows(out / "sweep.csv") >= 2, proc=run, what="the first rows")
        assert _immutable(out)          # no new file from now on (appends to sweep.csv still go through)
        stdout, err = run.communicate(timeout=120)
    finally:
        pt.end(run)
        subprocess.run(["chattr", "-i", str(out)], check=True)
    assert run.returncode == 2
    lines = error_lines(err)
    assert len(lines) == 1 and "Traceback" not in err
    assert "Operation not permitted" in lines[0] and "16 finished rows are kept" in lines[0]
    assert "--resume" in lines[0]
    again = pt.run([*argv, "--resume"], tmp_path)
    assert again.returncode == 0, again.stderr
    assert len(read_sweep_csv(out / "sweep.csv")[1]) == 16 and (out / "sweep.json").exists()
