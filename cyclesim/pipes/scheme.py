"""MUSCL-Hancock finite-volume step of a batch of pipes, compiled (numba) or vectorised (numpy).

Both drivers call the same elementwise physics of :mod:`cyclesim.pipes.kernels`;
they differ only in looping: the compiled one runs case by case and cell by
cell, the numpy one over whole (case, cell) arrays with cases that have reached
their end time frozen (time step zero).  Each case's time step comes from its
own CFL condition, so a case gives the same result alone and in any batch.

Scheme (Toro 2009, ch. 14 and 16): piecewise-linear reconstruction of the
primitive variables (rho, u, p, Y) with the monotonised-central limiter, Hancock
half step with area change and wall sources, HLLC fluxes, explicit update of
cell totals; second order in smooth flow, first order at shocks; an end cell's slope is
limited from its two inward differences.  Area change is well balanced: the pressure force of
the walls, ``p_bar (A_right - A_left)``, uses the mean of the same half-step
face pressures that enter the fluxes, so a pipe at rest with uniform pressure
stays at rest to rounding.
"""

from __future__ import annotations

import numpy as np

import cyclesim.pipes.kernels as k
from ._jit import COMPILED, compiled_kernels

# rows of the conserved state Q (B, NQ, N): cell totals
MASS, MOMENTUM, ENERGY, BURNED = 0, 1, 2, 3
NQ = 4
# rows of the per-cell geometry G (B, NG, N)
G_VOLUME, G_AREA_SLOPE, G_DIAMETER, G_REL_ROUGHNESS = 0, 1, 2, 3
NG = 4
# columns of the per-case parameters P (B, NP)
(P_DX, P_FRICTION, P_FIXED_FANNING, P_LOSS_PER_LENGTH, P_WALL_T, P_PRANDTL, P_HEAT, P_CFL,
 P_R_FRESH, P_R_BURNED) = range(10)
NP = 10
# columns of the end conditions E (B, 2, NE); end 0 at x = 0, end 1 at x = L
E_CDA, E_P, E_T, E_Y, E_K = range(5)
NE = 5
# columns of the integrated end fluxes (B, 2, NF), into the pipe
F_MASS, F_ENERGY, F_BURNED = 0, 1, 2
NF = 3


def _advance_numpy(Q, G, Af, P, E, C, t_mid, n_newton, n_iter, duration, max_steps):
    """Advance every case by its ``duration`` [s] (arrays as in :func:`advance`); numpy over (case, cell)."""
    B, _, N = Q.shape
    acc = np.zeros((B, 2, NF))
    steps = np.zeros(B, dtype=np.int64)
    t = np.zeros(B)
    col = lambda a: a[:, None]  # noqa: E731 - per case, broadcast over cells
    cf = np.moveaxis(C[:, 0], 0, -1)[..., None]      # (2, 6, B, 1)
    cb = np.moveaxis(C[:, 1], 0, -1)[..., None]
    cf1, cb1 = cf[..., 0], cb[..., 0]                # (2, 6, B) for the end conditions
    V, ax, D, rough = G[:, G_VOLUME], G[:, G_AREA_SLOPE], G[:, G_DIAMETER], G[:, G_REL_ROUGHNESS]
    dx = col(P[:, P_DX])
    Rf, Rb = col(P[:, P_R_FRESH]), col(P[:, P_R_BURNED])
    wall = (col(P[:, P_FRICTION]), col(P[:, P_FIXED_FANNING]), col(P[:, P_LOSS_PER_LENGTH]), col(P[:, P_WALL_T]),
            col(P[:, P_PRANDTL]), col(P[:, P_HEAT]))
    dA = Af[:, 1:] - Af[:, :-1]
    while True:
        active = t < duration
        if not active.any():
            break
        if (steps >= max_steps).any():
            raise _too_many_steps(int(max_steps))
        rho, u, p, Y, T, g, c = k.primitives(Q[:, MASS], Q[:, MOMENTUM], Q[:, ENERGY], Q[:, BURNED], V,
                                             cf, cb, Rf, Rb, t_mid, n_newton)
        dt_cfl = P[:, P_CFL] * P[:, P_DX] / np.max(np.abs(u) + c, axis=1)
        rest = duration - t
        last = dt_cfl >= rest
        dt = np.where(active, np.where(last, rest, dt_cfl), 0.0)
        t = np.where(active, np.where(last, duration, t + dt), t)
        steps += active
        slopes = []
        for w in (rho, u, p, Y):
            d = np.diff(w, axis=1)
            s = np.zeros_like(w)
            s[:, 1:-1] = k.limited_slope(d[:, :-1], d[:, 1:])
            s[:, 0] = k.limited_slope(d[:, 0], d[:, 1])              # end cells: the stencil shifted inwards
            s[:, -1] = k.limited_slope(d[:, -1], d[:, -2])
            slopes.append(s)
        _, _, s_u, s_p = k.cell_sources(rho, u, p, Y, cf, cb, Rf, Rb, t_mid, D, rough, *wall)
        hdt = col(0.5 * dt)
        rl, ul, pl, yl, rr, ur, pr, yr = k.predict(rho, u, p, Y, g, *slopes, ax, s_u, s_p, hdt, dx)
        El, cl = k.total_energy(rl, ul, pl, yl, cf, cb, Rf, Rb, t_mid)
        Er, cr = k.total_energy(rr, ur, pr, yr, cf, cb, Rf, Rb, t_mid)
        F = np.empty((4, B, N + 1))
        fi = k.hllc_flux(rr[:, :-1], ur[:, :-1], pr[:, :-1], Er[:, :-1], yr[:, :-1], cr[:, :-1],
                         rl[:, 1:], ul[:, 1:], pl[:, 1:], El[:, 1:], yl[:, 1:], cl[:, 1:])
        for q in range(4):
            F[q, :, 1:-1] = fi[q] * Af[:, 1:-1]
        for end, (side, j, face) in enumerate(((-1.0, 0, 0), (1.0, N - 1, N))):
            st = (rl, ul, pl, yl) if side < 0 else (rr, ur, pr, yr)
            gj = k.total_energy  # sound speed of the face state gives its gamma
            _, cj = gj(st[0][:, j], st[1][:, j], st[2][:, j], st[3][:, j], cf1, cb1, Rf[:, 0], Rb[:, 0], t_mid)
            gam = cj * cj * st[0][:, j] / st[2][:, j]
            ef = k.end_flux(st[0][:, j], st[1][:, j], st[2][:, j], st[3][:, j], gam, side, Af[:, face],
                            E[:, end, E_CDA], E[:, end, E_P], E[:, end, E_T], E[:, end, E_Y], E[:, end, E_K],
                            cf1, cb1, Rf[:, 0], Rb[:, 0], t_mid, n_iter)
            for q in range(4):
                F[q, :, face] = ef[q]
            sgn = -side
            acc[:, end, F_MASS] += sgn * dt * ef[0]
            acc[:, end, F_ENERGY] += sgn * dt * ef[2]
            acc[:, end, F_BURNED] += sgn * dt * ef[3]
        rh, uh, ph, yh = 0.5 * (rl + rr), 0.5 * (ul + ur), 0.5 * (pl + pr), 0.5 * (yl + yr)
        s_mom, s_E, _, _ = k.cell_sources(rh, uh, ph, yh, cf, cb, Rf, Rb, t_mid, D, rough, *wall)
        dtc = col(dt)
        Q[:, MASS] -= dtc * (F[0, :, 1:] - F[0, :, :-1])
        Q[:, MOMENTUM] -= dtc * (F[1, :, 1:] - F[1, :, :-1] - ph * dA - V * s_mom)
        Q[:, ENERGY] -= dtc * (F[2, :, 1:] - F[2, :, :-1] - V * s_E)
        Q[:, BURNED] -= dtc * (F[3, :, 1:] - F[3, :, :-1])
    return acc, steps


def _too_many_steps(n):
    from ..errors import SolverError

    return SolverError(f"pipe: more than {n} sub-steps in one advance (time step collapsed; "
                       "check the end conditions and the state)")


if COMPILED:
    from numba import njit

    kc = compiled_kernels()

    @njit(cache=True)
    def _advance_compiled(Q, G, Af, P, E, C, t_mid, n_newton, n_iter, duration, max_steps):
        B, _, N = Q.shape
        acc = np.zeros((B, 2, NF))
        steps = np.zeros(B, dtype=np.int64)
        W = np.empty((7, N))            # rho, u, p, Y, T, gamma, c
        S = np.empty((4, N))            # limited slopes
        L = np.empty((5, N))            # left face: rho, u, p, Y, E ; then c below
        R = np.empty((5, N))
        cl = np.empty(N)
        cr = np.empty(N)
        F = np.empty((4, N + 1))
        for b in range(B):
            cf = C[b, 0]
            cb = C[b, 1]
            dx = P[b, P_DX]
            Rf = P[b, P_R_FRESH]
            Rb = P[b, P_R_BURNED]
            fr, ff, kl, tw, prn, hs = (P[b, P_FRICTION], P[b, P_FIXED_FANNING], P[b, P_LOSS_PER_LENGTH],
                                       P[b, P_WALL_T], P[b, P_PRANDTL], P[b, P_HEAT])
            t = 0.0
            T_end = duration[b]
            while t < T_end:
                if steps[b] >= max_steps:
                    return acc, steps, b
                vmax = 0.0
                for i in range(N):
                    r_, u_, p_, y_, T_, g_, c_ = kc.primitives(
                        Q[b, MASS, i], Q[b, MOMENTUM, i], Q[b, ENERGY, i], Q[b, BURNED, i],
                        G[b, G_VOLUME, i], cf, cb, Rf, Rb, t_mid, n_newton)
                    W[0, i] = r_
                    W[1, i] = u_
                    W[2, i] = p_
                    W[3, i] = y_
                    W[4, i] = T_
                    W[5, i] = g_
                    W[6, i] = c_
                    vmax = max(vmax, abs(u_) + c_)
                dt_cfl = P[b, P_CFL] * dx / vmax
                rest = T_end - t
                if dt_cfl >= rest:
                    dt = rest
                    t = T_end
                else:
                    dt = dt_cfl
                    t = t + dt
                steps[b] += 1
                for q in range(4):
                    S[q, 0] = kc.limited_slope(W[q, 1] - W[q, 0], W[q, 2] - W[q, 1])
                    S[q, N - 1] = kc.limited_slope(W[q, N - 1] - W[q, N - 2], W[q, N - 2] - W[q, N - 3])
                    for i in range(1, N - 1):
                        S[q, i] = kc.limited_slope(W[q, i] - W[q, i - 1], W[q, i + 1] - W[q, i])
                hdt = 0.5 * dt
                for i in range(N):
                    D = G[b, G_DIAMETER, i]
                    rg = G[b, G_REL_ROUGHNESS, i]
                    _, _, s_u, s_p = kc.cell_sources(W[0, i], W[1, i], W[2, i], W[3, i], cf, cb, Rf, Rb,
                                                    t_mid, D, rg, fr, ff, kl, tw, prn, hs)
                    rl, ul, pl, yl, rr, ur, pr, yr = kc.predict(
                        W[0, i], W[1, i], W[2, i], W[3, i], W[5, i], S[0, i], S[1, i], S[2, i], S[3, i],
                        G[b, G_AREA_SLOPE, i], s_u, s_p, hdt, dx)
                    L[0, i] = rl
                    L[1, i] = ul
                    L[2, i] = pl
                    L[3, i] = yl
                    R[0, i] = rr
                    R[1, i] = ur
                    R[2, i] = pr
                    R[3, i] = yr
                    L[4, i], cl[i] = kc.total_energy(rl, ul, pl, yl, cf, cb, Rf, Rb, t_mid)
                    R[4, i], cr[i] = kc.total_energy(rr, ur, pr, yr, cf, cb, Rf, Rb, t_mid)
                for i in range(1, N):
                    f0, f1, f2, f3 = kc.hllc_flux(R[0, i - 1], R[1, i - 1], R[2, i - 1], R[4, i - 1],
                                                 R[3, i - 1], cr[i - 1],
                                                 L[0, i], L[1, i], L[2, i], L[4, i], L[3, i], cl[i])
                    a = Af[b, i]
                    F[0, i] = f0 * a
                    F[1, i] = f1 * a
                    F[2, i] = f2 * a
                    F[3, i] = f3 * a
                for end in range(2):
                    if end == 0:
                        side, j, face = -1.0, 0, 0
                        rj, uj, pj, yj, cj = L[0, 0], L[1, 0], L[2, 0], L[3, 0], cl[0]
                    else:
                        side, j, face = 1.0, N - 1, N
                        rj, uj, pj, yj, cj = R[0, j], R[1, j], R[2, j], R[3, j], cr[j]
                    # a closed end needs no pressure iteration (its state is exact without)
                    n_it = n_iter if E[b, end, E_CDA] > 0.0 else 0
                    f0, f1, f2, f3 = kc.end_flux(rj, uj, pj, yj, cj * cj * rj / pj, side, Af[b, face],
                                                E[b, end, E_CDA], E[b, end, E_P], E[b, end, E_T],
                                                E[b, end, E_Y], E[b, end, E_K], cf, cb, Rf, Rb, t_mid, n_it)
                    F[0, face] = f0
                    F[1, face] = f1
                    F[2, face] = f2
                    F[3, face] = f3
                    sgn = -side
                    acc[b, end, F_MASS] += sgn * dt * f0
                    acc[b, end, F_ENERGY] += sgn * dt * f2
                    acc[b, end, F_BURNED] += sgn * dt * f3
                for i in range(N):
                    rh = 0.5 * (L[0, i] + R[0, i])
                    uh = 0.5 * (L[1, i] + R[1, i])
                    ph = 0.5 * (L[2, i] + R[2, i])
                    yh = 0.5 * (L[3, i] + R[3, i])
                    s_mom, s_E, _, _ = kc.cell_sources(rh, uh, ph, yh, cf, cb, Rf, Rb, t_mid,
                                                      G[b, G_DIAMETER, i], G[b, G_REL_ROUGHNESS, i],
                                                      fr, ff, kl, tw, prn, hs)
                    Vi = G[b, G_VOLUME, i]
                    Q[b, MASS, i] -= dt * (F[0, i + 1] - F[0, i])
                    Q[b, MOMENTUM, i] -= dt * (F[1, i + 1] - F[1, i] - ph * (Af[b, i + 1] - Af[b, i])
                                               - Vi * s_mom)
                    Q[b, ENERGY, i] -= dt * (F[2, i + 1] - F[2, i] - Vi * s_E)
                    Q[b, BURNED, i] -= dt * (F[3, i + 1] - F[3, i])
        return acc, steps, -1


def advance_arrays(Q, G, Af, P, E, C, t_mid, n_newton, n_iter, duration, max_steps=1_000_000):
    """Advance the pipes of a batch in place by ``duration`` [s] per case; see :func:`cyclesim.pipes.advance`.

    Returns the time-integrated fluxes into the pipe through each end (B, 2, NF)
    [kg, J, kg] and the sub-steps taken per case (B,).
    """
    duration = np.ascontiguousarray(duration, dtype=float)
    if COMPILED:
        acc, steps, failed = _advance_compiled(Q, G, Af, P, E, C, float(t_mid), int(n_newton), int(n_iter),
                                               duration, int(max_steps))
        if failed >= 0:
            raise _too_many_steps(int(max_steps))
        return acc, steps
    return _advance_numpy(Q, G, Af, P, E, C, float(t_mid), int(n_newton), int(n_iter), duration,
                          int(max_steps))
