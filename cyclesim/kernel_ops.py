"""Helpers for submodel kernels: one function body for numpy arrays and for compiled scalars.

A kernel (a submodel's physics as a plain function, see ``Submodel.kernel``) is called with
arrays (B,) on the Python path and with floats in the compiled loop.  ``numpy``'s ufuncs
(``np.exp``, ``np.maximum``, ...) serve both; a per-case choice goes through :func:`where`,
which numba compiles to a plain select on floats (``np.where`` would make a 0-d array there).
"""

from __future__ import annotations

import numpy as np


def where(condition, x, y):
    """``x`` where ``condition`` holds, else ``y`` (``np.where`` on arrays; a select on floats)."""
    return np.where(condition, x, y)


try:  # the compiled form of where(), registered with numba where it is installed
    from numba.core import types as _types
    from numba.extending import overload as _overload

    @_overload(where)
    def _where_scalar(condition, x, y):
        if isinstance(condition, _types.Boolean) and isinstance(x, _types.Number) and isinstance(y, _types.Number):
            def impl(condition, x, y):
                return x if condition else y
            return impl
        return None
except ImportError:  # pragma: no cover - numba is optional
    pass
