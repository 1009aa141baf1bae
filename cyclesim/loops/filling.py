"""Filling and emptying of a lumped volume (a manifold) through one orifice, in kernel form.

The multi-cylinder engine's manifolds (:mod:`cyclesim.engine.manifolds`) are isothermal volumes whose
pressure follows their mass balance,

    dp/dphi = k (q_in - q_out),    k = R T / V  [J/(kg m^3) = Pa/kg],

with the cylinders' flows given per crank interval and the orifice flow to or from the outside
(:func:`cyclesim.kernel_ops.orifice_flow`, Heywood 1988, App. C) at the manifold's own pressure
(filling and emptying, Heywood 1988, sec. 14.3; from memory).  A lap is 720 deg of implicit-Euler
steps of that balance.

One source for both paths: the functions below are plain arithmetic on floats or on arrays of
rows.  The engine's Python path runs :func:`lap` on numpy arrays (one row per manifold); the
compiled path (:func:`cyclesim.loops._compiled.manifold_lap`) is :func:`lap` compiled by numba,
where :func:`step_rows` loops over the rows on floats (:func:`register_compiled`).  Importing this
module does not import numba.
"""

from __future__ import annotations

import numpy as np

import cyclesim.kernel_ops as kernel_ops

NEWTON_PASSES = 2
"""Newton passes per implicit-Euler step on ``x - p - h r(x)`` (the rate is smooth over one
degree: two passes leave a residual far below the lap's periodicity tolerance)."""
P_FLOOR = 1e3
"""Lowest manifold pressure a Newton pass may return [Pa] (keeps a wild first pass physical)."""


def boundary_flow(intake, cda, p, T_m, R_m, g_m, p_out, T_out, R_out, g_out, omega, dp_lin):
    """Flow through the manifold's orifice per crank degree [kg/deg], counted positive in the
    direction of its duty: into the manifold from the outside when ``intake`` (a throttle fed from
    the supply ``p_out, T_out``), out of it to the outside otherwise (an exhaust restriction).

    ``p, T_m, R_m, g_m``: the manifold's pressure [Pa], temperature [K], gas constant [J/(kg K)]
    and ratio of specific heats [-]; ``omega``: crank speed [deg/s]; floats or arrays of rows.
    """
    if intake:
        return kernel_ops.orifice_flow(cda, p_out, T_out, R_out, g_out, p, T_m, R_m, g_m, dp_lin) / omega
    return kernel_ops.orifice_flow(cda, p, T_m, R_m, g_m, p_out, T_out, R_out, g_out, dp_lin) / omega


def pressure_rate(intake, x, k, cda, T_m, R_m, g_m, p_out, T_out, R_out, g_out, omega, Q, pref, Z, shift, dp,
                  dp_lin):
    """``(dp/dphi [Pa/deg], its slope in p [1/deg])`` of a manifold at pressure ``x`` [Pa].

    ``Q`` [kg/deg]: the cylinders' flow in the interval, out of an intake manifold (drawn in
    proportion to the manifold pressure about the reference ``pref`` [Pa] they saw, a Newton-like
    estimate of their response) or into an exhaust manifold.  The orifice flow's slope is a
    forward difference over ``dp`` [Pa].

    ``Z`` [kg/(Pa deg)]: the admittance of pipes whose open ends meet the volume (runners,
    :func:`cyclesim.engine.runner_links.far_end_admittance`): they answer the volume's swings
    about the pressure they saw by an extra outflow ``Z (x - pref - shift)``, ``shift`` [Pa] the
    lap's mean of ``x - pref`` (so the term adds nothing over a cycle).  With ``Z = 0`` (lumped
    cylinders' flows) ``pref`` of an exhaust manifold and ``shift`` are unused, and the rate is
    the plain filling-and-emptying balance bit for bit.
    """
    q = boundary_flow(intake, cda, x, T_m, R_m, g_m, p_out, T_out, R_out, g_out, omega, dp_lin)
    dq = (boundary_flow(intake, cda, x + dp, T_m, R_m, g_m, p_out, T_out, R_out, g_out, omega, dp_lin) - q) / dp
    swing = Z * (x - pref - shift)
    if intake:
        return k * (q - Q * x / pref - swing), k * (dq - Q / pref - Z)
    return k * (Q - swing - q), -k * (Z + dq)


def implicit_step(p, h, k, cda, T_m, R_m, g_m, p_out, T_out, R_out, g_out, omega, Q, pref, Z, shift, intake, dp,
                  dp_lin):
    """Manifold pressure [Pa] one step ``h`` [deg] on from ``p`` [Pa]: the implicit-Euler equation
    ``x = p + h r(x)`` by :data:`NEWTON_PASSES` Newton passes from ``x = p``, each held above
    :data:`P_FLOOR`."""
    x = p
    for _ in range(NEWTON_PASSES):
        r, dr = pressure_rate(intake, x, k, cda, T_m, R_m, g_m, p_out, T_out, R_out, g_out, omega, Q, pref, Z,
                              shift, dp, dp_lin)
        g = x - p - h * r
        x = np.maximum(x - g / (1.0 - h * dr), P_FLOOR)
    return x


def step_rows(out, j, h, k, cda, T_m, R_m, g_m, p_out, T_out, R_out, g_out, omega, Q, pref, Z, shift, intake, dp,
              dp_lin):
    """``out[:, j + 1]`` from ``out[:, j]``: one :func:`implicit_step` of every row (arrays of rows
    for the per-manifold arguments; ``R_out, g_out, g_m, h, dp, dp_lin`` shared floats)."""
    out[:, j + 1] = implicit_step(out[:, j], h, k, cda, T_m, R_m, g_m, p_out, T_out, R_out, g_out, omega,
                                  Q[:, j], pref[:, j], Z, shift, intake, dp, dp_lin)


def lap(p0, h, k, A, T_m, R_m, g_m, p_amb, T_amb, R_amb, g_amb, omega, Q, pref, Z, shift, intake, dp, dp_lin):
    """Manifold pressures over one lap [Pa], (rows, n + 1) from ``p0`` (rows,), for the cylinders'
    flows ``Q`` (rows, n) per step of ``h`` [deg]: ``A`` the orifice's effective area [m^2] to the
    outside at ``p_amb, T_amb`` (gas ``R_amb, g_amb``), the manifold at ``T_m`` (gas ``R_m, g_m``),
    ``k = R T / V`` [Pa/kg] (see :func:`pressure_rate` for ``pref``, ``Z`` and ``shift`` (rows,),
    and ``intake``)."""
    n = Q.shape[1]
    out = np.empty((p0.shape[0], n + 1))
    out[:, 0] = p0
    for j in range(n):
        step_rows(out, j, h, k, A, T_m, R_m, g_m, p_amb, T_amb, R_amb, g_amb, omega, Q, pref, Z, shift, intake, dp,
                  dp_lin)
    return out


_registered = False


def register_compiled() -> None:
    """Teach numba these functions (inlined, on floats) and the compiled :func:`step_rows` (a loop
    over the rows calling :func:`implicit_step` on each row's floats); called before
    :func:`lap` is compiled."""
    global _registered
    if _registered:
        return
    kernel_ops.register_compiled()
    from numba.extending import overload, register_jitable

    for fn in (boundary_flow, pressure_rate, implicit_step):
        register_jitable(inline="always")(fn)

    @overload(step_rows)
    def _step_rows_floats(out, j, h, k, cda, T_m, R_m, g_m, p_out, T_out, R_out, g_out, omega, Q, pref, Z, shift,
                          intake, dp, dp_lin):
        def impl(out, j, h, k, cda, T_m, R_m, g_m, p_out, T_out, R_out, g_out, omega, Q, pref, Z, shift, intake, dp,
                 dp_lin):
            for e in range(out.shape[0]):
                out[e, j + 1] = implicit_step(out[e, j], h, k[e], cda[e], T_m[e], R_m[e], g_m, p_out[e], T_out[e],
                                              R_out, g_out, omega[e], Q[e, j], pref[e, j], Z[e], shift[e], intake,
                                              dp, dp_lin)
        return impl

    _registered = True
