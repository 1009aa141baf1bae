"""Helpers for submodel kernels: one function body for numpy arrays and for compiled scalars.

A kernel (a submodel's physics as a plain function, see ``Submodel.kernel``) is called with
arrays (B,) on the Python path and with floats in the compiled loop.  ``numpy``'s ufuncs
(``np.exp``, ``np.maximum``, ...) serve both; a per-case choice goes through :func:`where`,
which numba compiles to a plain select on floats (``np.where`` would make a 0-d array there).
Fresh-charge properties at any temperature come from :func:`fresh_charge` with the kernel
argument ``gas`` (the batch's gas tables on the Python path, the case's polynomial in the loop).
"""

from __future__ import annotations

import numpy as np


_select = getattr(np.where, "_implementation", np.where)
"""``np.where`` without numpy's ``__array_function__`` dispatch (the kernels get plain arrays and
floats, for which the dispatch finds no override); ``np.where`` itself where numpy has no such
attribute."""


def where(condition, x, y):
    """``x`` where ``condition`` holds, else ``y`` (``np.where`` on arrays; a select on floats)."""
    return _select(condition, x, y)


def fresh_charge(gas, T):
    """Fresh-charge ``(u [J/kg], cv [J/(kg K)], R [J/(kg K)])`` at ``T`` [K]: ``gas.unburned(T)``
    on the Python path; in the compiled loop ``gas`` is the case's polynomial and this the same
    polynomial evaluated for one case."""
    return gas.unburned(T)


def max_above(x, bound, f, arg):
    """``max(x, f(arg))`` for a function f known to stay below ``bound``: numpy evaluates f on
    every element; the compiled loop skips f where ``x >= bound`` (the result is x there alike)."""
    return np.maximum(x, f(arg))


_registered = False


def register_compiled() -> None:
    """Teach numba the compiled form of :func:`where` (a select on floats); called by the generated
    loops before they compile, so that importing this module does not import numba."""
    global _registered
    if _registered:
        return
    from numba.core import types
    from numba.extending import overload

    @overload(where)
    def _where_scalar(condition, x, y):
        if isinstance(condition, types.Boolean) and isinstance(x, types.Number) and isinstance(y, types.Number):
            def impl(condition, x, y):
                return x if condition else y
            return impl
        return None

    @overload(fresh_charge)
    def _fresh_charge_scalar(gas, T):
        if isinstance(gas, types.BaseTuple) and isinstance(T, types.Number):
            from cyclesim.loops._compiled import _fresh

            def impl(gas, T):
                u, R, cv = _fresh(gas[0], gas[1], T, gas[2])
                return u, cv, R
            return impl
        return None

    @overload(max_above)
    def _max_above_scalar(x, bound, f, arg):
        if isinstance(x, types.Number):
            def impl(x, bound, f, arg):
                return x if x >= bound else max(x, f(arg))
            return impl
        return None

    _registered = True


def wall_heat_flow(h, T, A_head, A_piston, A_liner, T_wall_head, T_wall_piston, T_wall_liner):
    """Heat flow from the gas to the walls [W] for one coefficient h [W/(m^2 K)] on head, piston and
    liner, ``h sum A (T - T_wall)`` (Newton's law of cooling, common practice); kernel form."""
    return h * (A_head * (T - T_wall_head) + A_piston * (T - T_wall_piston) + A_liner * (T - T_wall_liner))
