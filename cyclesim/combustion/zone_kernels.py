"""Scalar kernels of the burned zones and burned-mass elements (one source, compiled or plain).

The loops of :func:`cyclesim.combustion.burned_zones.decompose_two_zone` and
:func:`~cyclesim.combustion.burned_zones.burned_elements`, written case by case and point by point
on plain arrays so that numba compiles them as they are (:mod:`cyclesim.combustion._jit`).  The
physics and its notes are in :mod:`cyclesim.combustion.burned_zones`; the gas properties come
from the solver's tables through ``mix_at`` (``gas`` below is the tuple
:meth:`cyclesim.solve.gas_tables.GasTables._compiled_consts` returns).  SI units.
"""

from __future__ import annotations

import math

import numpy as np

from ..loops.zone_solve import burned_gas, solve_T_p, solve_T_p_from

if "jit" not in globals():          # the plain form; the compiled loader sets both first
    def jit(fn):
        return fn

    mix_at = None
    """The scalar gas look-up (set by :func:`cyclesim.combustion._jit.kernels`)."""

@jit
def burned_props(gt, off, gc, nRm1, uc4, b, T, rho):
    """Burned gas of case ``b`` at T [K], rho [kg/m^3]: (u, u_T, u_lnrho, R, R_T, R_lnrho) [SI]
    (:func:`cyclesim.loops.zone_solve.burned_gas` on the case's tables)."""
    return burned_gas((gt, off[b], gc, nRm1, uc4, b), T, rho)


@jit
def unburned_props(gt, off, gc, nRm1, uc4, b, T, p, y_u, R_u):
    """Unburned zone (fresh charge, burned-gas fraction ``y_u``) at T [K], p [Pa]: (u, h, R, cp).

    ``R_u`` > 0 [J/(kg K)] sets the density of the look-up; otherwise it is found from the fresh
    charge's gas constant first (the residual's dissociation, the only density dependence, is
    negligible at unburned temperatures).
    """
    if not R_u > 0.0:
        R_u = mix_at(gt, off[b], gc, nRm1, uc4, b, T, p / (uc4[2 * b, 0, 1] * T), y_u)[4]
    r = mix_at(gt, off[b], gc, nRm1, uc4, b, T, p / (R_u * T), y_u)
    return r[0], r[0] + r[4] * T, r[4], r[1] + r[4]


@jit
def solve_tp(gt, off, gc, nRm1, uc4, b, target, p, T0, lr0, enthalpy):
    """Burned gas of enthalpy (or internal energy) ``target`` [J/kg] at ``p`` [Pa], case ``b``:
    :func:`cyclesim.loops.zone_solve.solve_T_p` (the one burned-gas T(h, p) solve) on the case's
    tables, from ``T0`` [K] and ``lr0`` [ln kg/m^3].  Returns ``(T, ln rho, u, h, dlnv_dlnp_s,
    dT_dlnp_s)``, the last two the isentropic d ln v / d ln p [-] and dT / d ln p [K] there.
    """
    return solve_T_p((gt, off[b], gc, nRm1, uc4, b), target, p, T0, lr0, enthalpy)


@jit
def solve_tp_points(gt, off, gc, nRm1, uc4, case, target, p, T0, enthalpy, T_out):
    """:func:`solve_tp` at N points (case ``case[k]``, from ``T0[k]``), temperatures into ``T_out``."""
    for k in range(target.shape[0]):
        T_out[k] = solve_tp(gt, off, gc, nRm1, uc4, case[k], target[k], p[k], T0[k],
                            math.log(p[k] / (290.0 * T0[k])), enthalpy)[0]


@jit
def decompose(gt, off, gc, nRm1, uc4, V, p, U, m, x, Q_w, T, y_u, T_wall, k0, x_resolved,
              T_u, T_b, p2, U_b, Q_u, h_u):
    """Unburned and burned zones at one pressure, case by case (arrays (B, n); outputs filled).

    Inputs: volume V [m^3], pressure p [Pa], internal energy U [J], mass m [kg], burned-zone
    fraction x [-] and cumulative wall heat Q_w [J] of the one-zone trace, its temperature T [K];
    y_u (B,) the unburned zone's burned-gas fraction, T_wall (B,) [K], k0 (B,) the last point with
    no burned zone, x_resolved the fraction below which the burned zone is not resolved.
    Outputs: zone temperatures T_u, T_b [K] (T_b NaN before the burn), the two-zone pressure p2
    [Pa], the burned zone's energy U_b [J] (NaN where unresolved), the unburned zone's cumulative
    heat Q_u [J] and enthalpy h_u [J/kg].
    """
    B, n = p.shape
    nan = math.nan
    for b in range(B):
        yu = y_u[b]
        Tw = T_wall[b]
        T_u[b, 0] = T[b, 0]
        p2[b, 0] = p[b, 0]
        T_b[b, 0] = nan
        U_b[b, 0] = nan
        Q_u[b, 0] = 0.0
        h_u[b, 0] = unburned_props(gt, off, gc, nRm1, uc4, b, T[b, 0], p[b, 0], yu, -1.0)[1]
        Tb_prev = 2400.0
        R_prev = -1.0
        for j in range(1, n):
            before = j <= k0[b]
            xs = x[b, j]
            m_u = (1.0 - xs) * m[b, j]
            m_b = xs * m[b, j]
            a_b = math.sqrt(xs)
            Tb_w = T_b[b, j - 1] if math.isfinite(T_b[b, j - 1]) else Tb_prev
            # the wall heat of the step split by wetted area and temperature excess
            wu = (1.0 - a_b) * max(T_u[b, j - 1] - Tw, 0.0)
            wb = a_b * max(Tb_w - Tw, 0.0)
            share = wu / (wu + wb) if wu + wb > 0.0 else 1.0
            dQ_u = (Q_w[b, j] - Q_w[b, j - 1]) * share
            Q_u[b, j] = Q_u[b, j - 1] + dQ_u
            Tu0 = T_u[b, j - 1]
            p0 = p2[b, j - 1]
            _, _, R_u, cp_u = unburned_props(gt, off, gc, nRm1, uc4, b, Tu0, p0, yu, R_prev)
            R_prev = R_u
            kappa = R_u / cp_u
            q = dQ_u / (max(m_u, 1e-300) * cp_u)
            resolved = (not before) and xs >= x_resolved
            T_b[b, j] = nan
            U_b[b, j] = nan
            p2[b, j] = p[b, j]
            if resolved:
                # Newton on (ln p, T_b): the burned zone's energy and its equation of state, the
                # unburned zone on its isentrope (with its heat share) at that pressure
                ratio = p2[b, j - 1] / p[b, j - 1] if (math.isfinite(T_b[b, j - 1]) and j - 1 > k0[b]) else 1.0
                lnp = math.log(p[b, j] * ratio)
                lnp0 = math.log(p0)
                lo = math.log(0.5 * p[b, j])
                hi = math.log(2.0 * p[b, j])
                Tb = Tb_w
                mb = max(m_b, 1e-300)
                for _ in range(30):
                    pp = math.exp(lnp)
                    Tu = Tu0 * math.exp(kappa * (lnp - lnp0)) - q
                    dTu = kappa * (Tu + q)
                    uu, _, Ru, cpu = unburned_props(gt, off, gc, nRm1, uc4, b, Tu, pp, yu, R_u)
                    Vu = m_u * Ru * Tu / pp
                    Vb = max(V[b, j] - Vu, 1e-3 * V[b, j])
                    rb = mb / Vb
                    dlr = m_u * Ru * (dTu - Tu) / pp / Vb
                    eb = (U[b, j] - m_u * uu) / mb
                    deb = -m_u * (cpu - Ru) * dTu / mb
                    u, u_T, u_lr, R, R_T, R_lr = burned_props(gt, off, gc, nRm1, uc4, b,
                                                              min(max(Tb, 300.0), 5000.0), rb)
                    f1 = u - eb
                    f2 = math.log(rb * R * Tb) - lnp
                    a11 = u_T
                    a12 = u_lr * dlr - deb
                    a21 = R_T / R + 1.0 / Tb
                    a22 = (1.0 + R_lr / R) * dlr - 1.0
                    det = a11 * a22 - a12 * a21
                    dT = -(f1 * a22 - a12 * f2) / det
                    dL = -(a11 * f2 - a21 * f1) / det
                    Tb = min(max(Tb + dT, 300.0), 5000.0)
                    lnp = min(max(lnp + dL, lo), hi)
                    if abs(dL) <= 1e-12 and abs(dT) <= 1e-9 * Tb:
                        break
                pb = math.exp(lnp)
                Tu = Tu0 * math.exp(kappa * (lnp - lnp0)) - q
                uu = unburned_props(gt, off, gc, nRm1, uc4, b, Tu, pb, yu, R_u)[0]
                p2[b, j] = pb
                T_u[b, j] = Tu
                T_b[b, j] = Tb
                U_b[b, j] = U[b, j] - m_u * uu
            else:
                T_u[b, j] = Tu0 * math.exp(kappa * math.log(p[b, j] / p0)) - q
            if before:
                T_u[b, j] = T[b, j]
            h_u[b, j] = unburned_props(gt, off, gc, nRm1, uc4, b, T_u[b, j], p2[b, j], yu, R_u)[1]
            if not before and not resolved:
                # the burned zone as its own first flame: its temperature for the heat split
                Tf = solve_tp(gt, off, gc, nRm1, uc4, b, h_u[b, j], p2[b, j], Tb_prev,
                              math.log(p2[b, j] / (290.0 * Tb_prev)), True)[0]
                Tb_prev = Tf
                T_b[b, j] = Tf


@jit
def elements(gt, off, gc, nRm1, uc4, p, m, x, h_u, U_b, T_wall, T_out, x_out, Q):
    """Burned-mass elements, case by case: fills T_out, x_out (B, N, n) [K], [-] and Q (B, n) [J].

    Element k takes the mass burned while x passes the k-th of N equal slices of its final value,
    at the flame enthalpy ``h_u`` [J/kg]; elements follow the equilibrium isentrope (dh = v dp,
    trapezoidal in v); where the burned zone's energy ``U_b`` [J] is resolved, its part not in the
    elements' work and birth enthalpy is removed from them in proportion to m_k max(T_k - T_wall, 1 K)
    at constant pressure, and Q accumulates the enthalpy they give up.
    """
    B, N, n = T_out.shape
    nan = math.nan
    for b in range(B):
        x_end = x[b, n - 1]
        Tw = T_wall[b]
        xk = np.zeros(N)
        h = np.zeros(N)
        Tk = np.full(N, 2400.0)
        lr = np.zeros(N)
        kv = np.zeros(N)
        kT = np.zeros(N)          # isentropic dT/d ln p [K]: the predictor of the next solve
        u = np.zeros(N)
        hh = np.zeros(N)
        ev = np.zeros((N, 6))     # the burned gas at each element's state (its solve's last look-up)
        ok = np.zeros(N, dtype=np.bool_)
        g = (gt, off[b], gc, nRm1, uc4, b)
        Q[b, 0] = 0.0
        for k in range(N):
            T_out[b, k, 0] = nan
            x_out[b, k, 0] = 0.0
        for j in range(1, n):
            Q[b, j] = Q[b, j - 1]
            p0 = p[b, j - 1]
            p1 = p[b, j]
            lo = x[b, j - 1]
            hi = x[b, j]
            live = 0
            dlnp = math.log(p1 / p0)
            for k in range(N):
                had = xk[k] > 0.0
                if had:
                    v0 = math.exp(-lr[k])
                    v1 = v0 * math.exp(kv[k] * dlnp)
                    h[k] = h[k] + 0.5 * (p1 - p0) * (v0 + v1)
                dx = min(hi, x_end * (k + 1) / N) - max(lo, x_end * k / N)
                if dx > 0.0:
                    h[k] = (xk[k] * h[k] + dx * h_u[b, j]) / (xk[k] + dx)
                    xk[k] = xk[k] + dx
                if xk[k] > 0.0:
                    live += 1
                    T0 = Tk[k] + kT[k] * dlnp if had else 2400.0
                    L0 = lr[k] - kv[k] * dlnp if had else math.log(p1 / (290.0 * 2400.0))
                    Tk[k], lr[k], u[k], _, kv[k], kT[k], ok[k], e = solve_T_p_from(
                        g, h[k], p1, T0, L0, True, burned_gas(g, T0, math.exp(L0)))
                    ev[k, 0], ev[k, 1], ev[k, 2], ev[k, 3], ev[k, 4], ev[k, 5] = e
                    hh[k] = h[k]
            if live > 0 and math.isfinite(U_b[b, j]):
                mm = m[b, j]
                D = U_b[b, j]
                w = 0.0
                for k in range(N):
                    if xk[k] > 0.0:
                        D -= xk[k] * u[k] * mm
                        w += xk[k] * mm * max(Tk[k] - Tw, 1.0)
                scale = D / w if w > 0.0 else D
                for k in range(N):
                    if xk[k] > 0.0:
                        du = scale * max(Tk[k] - Tw, 1.0)
                        # from the state of the isentropic step, whose last look-up is there
                        first = ((ev[k, 0], ev[k, 1], ev[k, 2], ev[k, 3], ev[k, 4], ev[k, 5]) if ok[k]
                                 else burned_gas(g, Tk[k], math.exp(lr[k])))
                        Tk[k], lr[k], _, h2, kv[k], kT[k], _, _ = solve_T_p_from(g, u[k] + du, p1, Tk[k], lr[k],
                                                                                 False, first)
                        Q[b, j] -= xk[k] * (h2 - hh[k]) * mm
                        h[k] = h2
            for k in range(N):
                T_out[b, k, j] = Tk[k] if xk[k] > 0.0 else nan
                x_out[b, k, j] = xk[k]
