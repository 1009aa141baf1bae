"""The CPUs this process may run on: the one count that thread and worker defaults start from."""

from __future__ import annotations

import os


def available_cpus() -> int:
    """CPUs this process may run on (its affinity mask where the system has one)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)
