"""Helpers of the tests that start, watch and kill command-line runs (Linux /proc)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

ENV = {**os.environ, "CYCLESIM_THREADS": "1", "PYTHONFAULTHANDLER": "1"}


def start(args: list[str], cwd: Path) -> subprocess.Popen:
    """``cyclesim ARGS`` as a child process (its own interpreter), output captured."""
    return subprocess.Popen([sys.executable, "-m", "cyclesim", *args], cwd=cwd, env=ENV,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def run(args: list[str], cwd: Path, timeout: float = 120.0) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "cyclesim", *args], cwd=cwd, env=ENV, capture_output=True,
                          text=True, timeout=timeout)


def _stat(pid: int) -> list[str] | None:
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    return text.rsplit(")", 1)[1].split()     # state, ppid, ... (fields after the command name)


def children(pid: int) -> dict[int, str]:
    """Live child processes of ``pid``: {pid: start time} (the start time tells a reused id)."""
    out = {}
    for d in os.listdir("/proc"):
        if d.isdigit():
            f = _stat(int(d))
            if f is not None and int(f[1]) == pid and f[0] != "Z":
                out[int(d)] = f[19]
    return out


def alive(procs: dict[int, str]) -> list[int]:
    """Which of ``procs`` (from :func:`children`) still run (a zombie or a reused id does not count)."""
    out = []
    for pid, start_time in procs.items():
        f = _stat(pid)
        if f is not None and f[0] != "Z" and f[19] == start_time:
            out.append(pid)
    return out


def wait_gone(procs: dict[int, str], timeout: float = 5.0) -> list[int]:
    """Wait until none of ``procs`` runs; the ones still running after ``timeout`` s."""
    end = time.monotonic() + timeout
    while True:
        left = alive(procs)
        if not left or time.monotonic() > end:
            return left
        time.sleep(0.05)


def csv_rows(path: Path) -> int:
    try:
        return max(len(path.read_text().splitlines()) - 1, 0)
    except OSError:
        return 0


def wait_for(test, timeout: float = 60.0, proc: subprocess.Popen | None = None, what: str = "") -> None:
    """Poll ``test()`` every 20 ms until it is true; fail if ``proc`` ends first or time runs out."""
    end = time.monotonic() + timeout
    while not test():
        if proc is not None and proc.poll() is not None:
            out, err = proc.communicate()
            raise AssertionError(f"the run ended (exit {proc.returncode}) before {what}: {err[-2000:]}")
        if time.monotonic() > end:
            raise AssertionError(f"timed out waiting for {what}")
        time.sleep(0.02)


def end(proc: subprocess.Popen) -> None:
    """Make sure a started run is over (for the tests' cleanup)."""
    if proc.poll() is None:
        proc.send_signal(signal.SIGKILL)
    try:
        proc.communicate(timeout=10)
    except subprocess.TimeoutExpired:      # its pipes held open by processes it left
        pass


def kill_all(procs: dict[int, str]) -> None:
    """End those of ``procs`` (from :func:`children`) that still run, each by its id."""
    for pid in alive(procs):
        try:
            os.kill(pid, signal.SIGKILL)
        except OSError:
            pass
