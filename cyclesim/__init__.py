"""cyclesim: crank-angle simulation of a real four-stroke spark-ignition cycle.

The public Python API lives in :mod:`cyclesim.api` and is re-exported here
lazily, so ``import cyclesim`` stays fast (no plotting library is imported
until a plot is drawn).
"""

from __future__ import annotations

import pluggy

__version__ = "0.1.0"

hookimpl = pluggy.HookimplMarker("cyclesim")
"""Marker for hook implementations in plug-in packages."""

_API = {"load_config", "simulate", "run", "Case", "CaseResult", "case_with", "load_cases"}
__all__ = sorted(_API | {"hookimpl", "__version__"})


def __getattr__(name):  # lazy re-export of the API
    if name in _API:
        from . import api

        return getattr(api, name)
    raise AttributeError(f"module 'cyclesim' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | _API)
