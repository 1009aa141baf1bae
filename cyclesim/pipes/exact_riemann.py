"""Exact solution of the Riemann problem of the Euler equations, ideal gas of constant gamma.

Toro (2009), *Riemann Solvers and Numerical Methods for Fluid Dynamics*, 3rd
ed., ch. 4: the star pressure solves ``f_L(p) + f_R(p) + u_R - u_L = 0`` (eqs.
4.5-4.9) by Newton iteration from the two-rarefaction guess, and the solution is
sampled along ``x/t`` (sec. 4.5).  A reference for the pipe solver's tests.
"""

from __future__ import annotations

import numpy as np


def _f(p, rho, pk, c, g):
    """Toro (2009) eq. 4.6/4.7 and its derivative: shock for p > pk, rarefaction otherwise."""
    if p > pk:
        A = 2.0 / ((g + 1.0) * rho)
        Bk = (g - 1.0) / (g + 1.0) * pk
        q = np.sqrt(A / (p + Bk))
        return (p - pk) * q, q * (1.0 - 0.5 * (p - pk) / (Bk + p))
    r = p / pk
    return 2.0 * c / (g - 1.0) * (r ** ((g - 1.0) / (2.0 * g)) - 1.0), \
        r ** (-(g + 1.0) / (2.0 * g)) / (rho * c)


def star_state(left, right, gamma=1.4, tol=1e-14):
    """Star-region pressure [Pa] and velocity [m/s] of states ``(rho, u, p)`` left and right."""
    (rl, ul, pl), (rr, ur, pr) = left, right
    g = gamma
    cl, cr = np.sqrt(g * pl / rl), np.sqrt(g * pr / rr)
    z = (g - 1.0) / (2.0 * g)
    p = ((cl + cr - 0.5 * (g - 1.0) * (ur - ul)) / (cl / pl ** z + cr / pr ** z)) ** (1.0 / z)
    for _ in range(100):
        fl, dl = _f(p, rl, pl, cl, g)
        fr, dr = _f(p, rr, pr, cr, g)
        step = (fl + fr + ur - ul) / (dl + dr)
        p_new = max(p - step, 1e-12 * p)
        if abs(p_new - p) <= tol * 0.5 * (p_new + p):
            p = p_new
            break
        p = p_new
    fl, _ = _f(p, rl, pl, cl, g)
    fr, _ = _f(p, rr, pr, cr, g)
    return p, 0.5 * (ul + ur) + 0.5 * (fr - fl)


def sample(left, right, speeds, gamma=1.4):
    """Density, velocity and pressure at ``x/t = speeds`` [m/s] (Toro 2009, sec. 4.5)."""
    (rl, ul, pl), (rr, ur, pr) = left, right
    g = gamma
    ps, us = star_state(left, right, g)
    out = np.empty((3, np.size(speeds)))
    for n, S in enumerate(np.atleast_1d(speeds)):
        if S <= us:
            rho, u, p, sgn = rl, ul, pl, 1.0
        else:
            rho, u, p, sgn = rr, ur, pr, -1.0
        c = np.sqrt(g * p / rho)
        # mirror the right side onto the left: x -> -x, u -> -u
        s, uu, ust = sgn * S, sgn * u, sgn * us
        if ps > p:                                            # shock
            sk = uu - c * np.sqrt((g + 1.0) / (2.0 * g) * ps / p + (g - 1.0) / (2.0 * g))
            if s <= sk:
                out[:, n] = rho, u, p
            else:
                r = ps / p
                out[:, n] = rho * (r + (g - 1.0) / (g + 1.0)) / ((g - 1.0) / (g + 1.0) * r + 1.0), us, ps
        else:                                                 # rarefaction
            c_star = c * (ps / p) ** ((g - 1.0) / (2.0 * g))
            head, tail = uu - c, ust - c_star
            if s <= head:
                out[:, n] = rho, u, p
            elif s >= tail:
                out[:, n] = rho * (ps / p) ** (1.0 / g), us, ps
            else:
                f = 2.0 / (g + 1.0) + (g - 1.0) / ((g + 1.0) * c) * (uu - s)
                out[:, n] = rho * f ** (2.0 / (g - 1.0)), sgn * (2.0 / (g + 1.0) * (c + 0.5 * (g - 1.0) * uu + s)), \
                    p * f ** (2.0 * g / (g - 1.0))
    return out
