"""How a run stops: SIGTERM taken like Ctrl-C, and worker processes that end with their parent.

On the command line a SIGTERM (``kill PID``, a job scheduler ending the job)
raises :class:`Terminated`, a :class:`KeyboardInterrupt`, in the main thread,
so it takes the path of Ctrl-C: a sweep keeps the rows it has written, says
how to resume, and ends its workers.

A worker process of a parallel sweep calls :func:`end_with_parent` when it
starts: on Linux the kernel sends it SIGKILL when its parent ends
(``prctl(PR_SET_PDEATHSIG)``); elsewhere a watcher thread ends it once it has
been re-parented (its parent id changed).  So a parent killed by SIGKILL
leaves no worker behind.  (A worker started by a *forkserver* is the child of
that server, which itself ends when the caller does.)
"""

from __future__ import annotations

import contextlib
import os
import signal
import sys
import threading
from typing import Iterator

__all__ = ["Terminated", "terminate_as_interrupt", "end_with_parent", "WATCH_INTERVAL_S"]

WATCH_INTERVAL_S = 0.5
"""How often a worker's watcher thread looks whether its parent is still there [s]."""

_PR_SET_PDEATHSIG = 1     # from <linux/prctl.h>


class Terminated(KeyboardInterrupt):
    """SIGTERM received: handled as an interruption (``signum`` says which signal)."""

    signum = signal.SIGTERM


def _raise_terminated(signum, frame):  # noqa: ARG001 - signal handler signature
    raise Terminated()


@contextlib.contextmanager
def terminate_as_interrupt() -> Iterator[None]:
    """Within the block, SIGTERM raises :class:`Terminated` in the main thread (restored after).

    Does nothing outside the main thread, where no signal handler can be set.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGTERM, _raise_terminated)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def _parent_death_signal() -> bool:
    """Ask the Linux kernel for SIGKILL when the parent ends; False where that is not available."""
    if not sys.platform.startswith("linux"):
        return False
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        return libc.prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0) == 0
    except (OSError, AttributeError):
        return False


def _watch(parent: int) -> None:
    import time

    while True:
        time.sleep(WATCH_INTERVAL_S)
        if os.getppid() != parent:
            os._exit(1)


def end_with_parent(expected_parent: int | None = None) -> None:
    """Make this (worker) process end when its parent process ends.

    Call once, early in the worker.  ``expected_parent``: the id its parent had
    when it was started (a forked worker's parent is the caller), to catch a
    parent that ended before the request took effect.  SIGTERM is reset to its
    default first (a forked worker inherits its parent's handler): the parent
    ends its workers with SIGTERM when it is interrupted.
    """
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    parent = os.getppid()
    kernel_watch = _parent_death_signal()
    if expected_parent is not None and os.getppid() != expected_parent:
        os._exit(1)                   # the parent ended before the request took effect
    if not kernel_watch:
        threading.Thread(target=_watch, args=(parent,), name="cyclesim-parent-watch", daemon=True).start()
