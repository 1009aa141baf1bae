"""Compile a plain physics function with numba together with the module functions it calls."""

from __future__ import annotations

import types


def njit_with_callees(fn, module, callees=()):
    """``numba.njit(fn)`` with the named module-level ``callees`` compiled first (leaves first),
    each seeing the compiled versions of those before it."""
    import numba

    env = dict(vars(module))

    def rebind(f):
        return numba.njit(types.FunctionType(f.__code__, env, f.__name__, f.__defaults__))

    for name in callees:
        env[name] = rebind(env[name])
    return rebind(fn)
