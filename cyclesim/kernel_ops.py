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


_any = np.logical_or.reduce
"""``condition.any()`` in one call (without numpy's Python-level method wrapper)."""


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


def where_lazy(condition, f, args, otherwise):
    """``f(*args)`` where ``condition`` holds, else ``otherwise`` (a number), computing ``f`` only
    where it is used: numpy evaluates f on every element, and not at all where no element holds
    (the result is then ``otherwise`` for all, as a number); the compiled loop evaluates f only for
    a case whose condition holds.  For a term that most of the cycle leaves unused (Woschni's
    combustion velocity outside the burn)."""
    try:
        hit = _any(condition, axis=None)
    except (TypeError, ValueError):     # a plain bool or a 0-d value
        hit = bool(condition)
    if not hit:
        return otherwise
    return _select(condition, f(*args), otherwise)


_registered = False


def compiled_wanted() -> bool:
    """True where kernels are compiled by numba in this process: numba importable, and neither
    ``CYCLESIM_KERNEL=python`` nor ``NUMBA_DISABLE_JIT`` set (the plain path otherwise)."""
    import os

    if os.environ.get("CYCLESIM_KERNEL", "auto").strip().lower() == "python":
        return False
    if os.environ.get("NUMBA_DISABLE_JIT", "0").strip() not in ("", "0"):
        return False
    try:
        import numba  # noqa: F401
    except Exception:  # noqa: BLE001 - a missing or broken numba: the plain path
        return False
    return True


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
            def impl(gas, T):
                uc4, b, T_mid = gas
                u, R, cv = fresh_charge_poly(uc4[2 * b + (1 if T > T_mid else 0)], T)
                return u, cv, R
            return impl
        return None

    from numba.extending import register_jitable

    for fn in (fresh_charge_poly, table_coords, hermite_cubic, along_lnrho, blend, frozen_cp_gamma,
               critical_ratio_of, flux_below_one, isentropic_flux, outflow, orifice_flow):
        register_jitable(inline="always")(fn)

    @overload(max_above)
    def _max_above_scalar(x, bound, f, arg):
        if isinstance(x, types.Number):
            def impl(x, bound, f, arg):
                return x if x >= bound else max(x, f(arg))
            return impl
        return None

    @overload(where_lazy)
    def _where_lazy_scalar(condition, f, args, otherwise):
        if isinstance(condition, types.Boolean):
            def impl(condition, f, args, otherwise):
                return f(*args) if condition else otherwise
            return impl
        return None

    _registered = True


def wall_heat_flow(h, T, A_head, A_piston, A_liner, T_wall_head, T_wall_piston, T_wall_liner):
    """Heat flow from the gas to the walls [W] for one coefficient h [W/(m^2 K)] on head, piston and
    liner, ``h sum A (T - T_wall)`` (Newton's law of cooling, common practice); kernel form."""
    return h * (A_head * (T - T_wall_head) + A_piston * (T - T_wall_piston) + A_liner * (T - T_wall_liner))


# -- the gas-property tables' arithmetic (cyclesim.solve.gas_tables.GasTables), written once: the
# numpy lookup runs these on arrays (one call on a block of quantities where it can), the compiled
# loop (cyclesim.loops._compiled._fresh, _mix_at) on floats, quantity by quantity --------------


def fresh_charge_poly(c, T):
    """Fresh-charge ``(u [J/kg], R [J/(kg K)], cv [J/(kg K)])`` at ``T`` [K] from its NASA-7
    polynomial block ``c``: ``c[k, 0]`` the coefficient of ``T^k`` in u, ``c[k, 2]`` in cv
    (``c[5, 2]`` is 0), ``c[0, 1]`` the gas constant (McBride, Gordon and Reno 1993, NASA TM-4513,
    eqs. 2-4: u = h - R T of the mixture's polynomial).  ``c`` is (6, 4) with ``T`` a float, or
    (6, 4, N) with ``T`` (N,).  Powers of T summed in rising order."""
    T2 = T * T
    T3 = T2 * T
    T4 = T3 * T
    u = c[0, 0] + T * c[1, 0] + T2 * c[2, 0] + T3 * c[3, 0] + T4 * c[4, 0] + (T4 * T) * c[5, 0]
    cv = c[0, 2] + T * c[1, 2] + T2 * c[2, 2] + T3 * c[3, 2] + T4 * c[4, 2]
    return u, c[0, 1], cv


def table_coords(T, rho, T0, inv_dT, lr0, x_hi, z_hi):
    """Position in a burned-gas table uniform in T and ln(rho): ``x`` [-] in temperature steps from
    ``T0`` [K] and ``z`` = ln(rho) - ``lr0`` [-], clamped into the table (NaN, a state out of range,
    maps to the first node)."""
    x = np.fmin(np.fmax((T - T0) * inv_dT, 0.0), x_hi)
    z = np.fmin(np.fmax(np.log(rho) - lr0, 0.0), z_hi)
    return x, z


def hermite_cubic(c0, c1, c2, c3, t):
    """``c0 + c1 t + c2 t^2 + c3 t^3`` by Horner's rule: a table cell's cubic Hermite polynomial in the
    local variable ``t`` in [0, 1] (cubic Hermite interpolation, common practice)."""
    return c0 + t * (c1 + t * (c2 + t * c3))


def along_lnrho(f, slope, dz):
    """A node value ``f`` moved ``dz`` along ln(rho) with its ``slope`` (linear in ln(rho))."""
    return f + dz * slope


def blend(fresh, burned, y):
    """Mass-weighted mix of a fresh-charge and a burned-gas property at burned fraction ``y`` [-]:
    ``fresh + y (burned - fresh)``."""
    return fresh + y * (burned - fresh)


def frozen_cp_gamma(cv, R):
    """``(cp, gamma)`` of the mixture from ``cv`` and ``R`` [J/(kg K)]: cp = cv + R, gamma = cp / cv
    (the frozen ideal-gas relations, Heywood 1988, sec. 4.2)."""
    cp = cv + R
    return cp, cp / cv


# -- compressible flow through a restriction (cyclesim.cylinder.flow documents the laws): kernel form,
# run on arrays by the valve and ring-leakage models and compiled by the cycle loop and the
# multi-cylinder engine's manifold laps -----------------------------------------------------


def isentropic_flux(pressure_ratio, gamma):
    """:func:`cyclesim.cylinder.flow.flow_function` in plain elementwise arithmetic (scalars or arrays, compiles with numba).

    ``pressure_ratio`` above 1 counts as 1, below the critical ratio as critical (choked).
    """
    return flux_below_one(np.minimum(pressure_ratio, 1.0), gamma)


def flux_below_one(pressure_ratio, gamma):
    """:func:`isentropic_flux` for ``pressure_ratio`` <= 1 given (no clamp from above) [-]."""
    inv_g = 1.0 / gamma
    e = 1.0 - inv_g                                  # (g-1)/g
    # the critical ratio is below exp(-1/2) = 0.60653 for every g > 1: above 0.6066 the flow is
    # subsonic without computing it
    pr = max_above(pressure_ratio, 0.6066, critical_ratio_of, gamma)
    pg = pr ** inv_g
    return pg * np.sqrt(np.maximum((2.0 / e) * (1.0 - pr / pg), 0.0))   # pr^e = pr / pr^(1/g)


def critical_ratio_of(gamma):
    """:func:`cyclesim.cylinder.flow.critical_pressure_ratio` in kernel form, ``(2 / (g + 1))^(1 / (1 - 1/g))`` [-]."""
    return (2.0 / (gamma + 1.0)) ** (1.0 / (1.0 - 1.0 / gamma))


def orifice_flow(cd_area, p1, T1, R1, gamma1, p2, T2, R2, gamma2, dp_lin):
    """:func:`cyclesim.cylinder.flow.orifice_mass_flow` in kernel form (plain elementwise arithmetic on arrays or floats,
    compiles with numba) [kg/s], positive from side 1 to side 2."""
    forward = p1 >= p2
    mdot = outflow(cd_area, np.maximum(p1, p2), where(forward, T1, T2), where(forward, R1, R2),
                   where(forward, gamma1, gamma2), np.minimum(p1, p2), dp_lin)
    return where(forward, mdot, -mdot)


def outflow(cd_area, p0, T0, R0, g0, pd, dp_lin):
    """:func:`cyclesim.cylinder.flow.orifice_outflow` with ``pd = min(p0, p_downstream)`` given, in kernel form (plain
    elementwise arithmetic on arrays or floats, compiles with numba) [kg/s]."""
    # relative pressure drop 0..1 (p0 > 0 for every physical state; a zero p0 gives zero flow)
    x = 1.0 - pd / np.maximum(p0, 1e-300)
    # one evaluation of the isentropic flux at pr = 1 - max(x, dp_lin), choked below critical
    psi = flux_below_one(1.0 - np.maximum(x, dp_lin), g0)       # dp_lin > 0: below 1
    psi = psi * np.minimum(x * (1.0 / dp_lin), 1.0)
    return cd_area * p0 / np.sqrt(R0 * T0) * psi
