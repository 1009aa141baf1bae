"""Compile a plain physics function with numba together with the module functions it calls."""

from __future__ import annotations

import types


def njit_with_callees(fn, module, callees=()):
    """``numba.njit(fn)`` where the named module-level ``callees`` are compiled first."""
    import numba

    env = dict(vars(module))
    for name in callees:
        env[name] = numba.njit(env[name])
    f = types.FunctionType(fn.__code__, env, fn.__name__, fn.__defaults__)
    return numba.njit(f)
