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

Positivity: where a cell's second-order update would leave it without positive
mass or with its temperature below ``POSITIVITY_T_FRACTION`` of its value at
the start of the sub-step, the faces of that cell take the first-order Rusanov
flux of the cell averages (positive under a CFL condition; Perthame and Shu
1996) and the cell its wall sources and wall pressure of time n, an a
posteriori limiting in the manner of MOOD (Clain, Diot and Loubere 2011,
J. Comput. Phys. 230, 4028); where even that fails, the case's sub-step is
halved and taken again (at most ``MAX_CUTS`` times).  An end whose face state leaves the pipe at
or above its sound speed takes the interior's own flux (:func:`outflow_flux`), not the
characteristic end solve, which assumes a subsonic interior.  Fluxes stay single valued
per face, so conservation is untouched.
"""

from __future__ import annotations

import numpy as np

import cyclesim.pipes.kernels as k
from ._jit import COMPILED, FASTMATH, compiled_kernels

# rows of the conserved state Q (B, NQ, N): cell totals
MASS, MOMENTUM, ENERGY, BURNED = 0, 1, 2, 3
NQ = 4
# rows of the per-cell geometry G (B, NG, N)
G_VOLUME, G_AREA_SLOPE, G_DIAMETER, G_ROUGH_TERM = 0, 1, 2, 3
NG = 4
# columns of the per-case parameters P (B, NP)
(P_DX, P_FRICTION, P_FIXED_FANNING, P_LOSS_PER_LENGTH, P_WALL_T, P_COLBURN, P_HEAT, P_CFL,
 P_R_FRESH, P_R_BURNED) = range(10)
NP = 10
# columns of the end conditions E (B, 2, NE); end 0 at x = 0, end 1 at x = L
E_CDA, E_P, E_T, E_Y, E_K = range(5)
NE = 5
# columns of the integrated end fluxes (B, 2, NF), into the pipe
F_MASS, F_ENERGY, F_BURNED = 0, 1, 2
NF = 3

POSITIVITY_T_FRACTION = 0.2
"""A cell whose updated temperature would fall below this fraction of its temperature at the start of
the sub-step (or whose mass would not stay positive) takes the first-order fallback [-]."""
MAX_CUTS = 30
"""Halvings of a case's sub-step before the advance gives up."""


def _advance_numpy(Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, duration, max_steps, whole=None, left=None):
    """Advance every case by its ``duration`` [s] (arrays as in :func:`advance_arrays`); numpy over (case, cell)."""
    B, _, N = Q.shape
    acc = np.zeros((B, 2, NF))
    steps = np.zeros(B, dtype=np.int64)
    fallbacks = np.zeros(B, dtype=np.int64)
    cut = np.zeros(B)
    t = np.zeros(B)
    if whole is not None:
        left[whole] = 0.0
    col = lambda a: a[:, None]  # noqa: E731 - per case, broadcast over cells
    cf = np.moveaxis(C[:, 0], 0, -1)[..., None]      # (2, 6, B, 1)
    cb = np.moveaxis(C[:, 1], 0, -1)[..., None]
    cf1, cb1 = cf[..., 0], cb[..., 0]                # (2, 6, B) for the end conditions
    V, ax, D, rough = G[:, G_VOLUME], G[:, G_AREA_SLOPE], G[:, G_DIAMETER], G[:, G_ROUGH_TERM]
    dx = col(P[:, P_DX])
    Rf, Rb = col(P[:, P_R_FRESH]), col(P[:, P_R_BURNED])
    wall = (col(P[:, P_FRICTION]), col(P[:, P_FIXED_FANNING]), col(P[:, P_LOSS_PER_LENGTH]), col(P[:, P_WALL_T]),
            col(P[:, P_COLBURN]), col(P[:, P_HEAT]))
    dA = Af[:, 1:] - Af[:, :-1]
    ends = ((-1.0, 0, 0), (1.0, N - 1, N))

    def update(F, ph, s_mom, s_E, dtc):
        Qn = np.empty_like(Q)
        Qn[:, MASS] = Q[:, MASS] - dtc * (F[0, :, 1:] - F[0, :, :-1])
        Qn[:, MOMENTUM] = Q[:, MOMENTUM] - dtc * (F[1, :, 1:] - F[1, :, :-1] - ph * dA - V * s_mom)
        Qn[:, ENERGY] = Q[:, ENERGY] - dtc * (F[2, :, 1:] - F[2, :, :-1] - V * s_E)
        Qn[:, BURNED] = Q[:, BURNED] - dtc * (F[3, :, 1:] - F[3, :, :-1])
        return Qn

    while True:
        active = t < duration
        if not active.any():
            break
        if (steps >= max_steps).any():
            raise _too_many_steps(int(max_steps))
        if (cut > MAX_CUTS).any():
            raise _lost_positivity()
        rho, u, p, Y, T, g, c = k.primitives(Q[:, MASS], Q[:, MOMENTUM], Q[:, ENERGY], Q[:, BURNED], V,
                                             cf, cb, Rf, Rb, t_mid, n_newton, Tc)
        Tc[:] = T
        dt_cfl = P[:, P_CFL] * P[:, P_DX] / np.max(np.abs(u) + c, axis=1) * 0.5 ** cut
        rest = duration - t
        if whole is not None:
            stop = active & whole & (dt_cfl > rest)
            if stop.any():                      # whole sub-steps only: the rest is left over
                left[stop] = rest[stop]
                duration = np.where(stop, t, duration)
                active = active & ~stop
                if not active.any():
                    break
                rest = duration - t
        last = dt_cfl >= rest
        dt = np.where(active, np.where(last, rest, dt_cfl), 0.0)
        slopes = []
        for w in (rho, u, p, Y):
            d = np.diff(w, axis=1)
            sl = np.zeros_like(w)
            sl[:, 1:-1] = k.limited_slope(d[:, :-1], d[:, 1:])
            sl[:, 0] = k.limited_slope(d[:, 0], d[:, 1])              # end cells: the stencil shifted inwards
            sl[:, -1] = k.limited_slope(d[:, -1], d[:, -2])
            slopes.append(sl)
        R = k.mixture_R(Y, Rf, Rb)
        _, _, s_u, s_p = k.sources_at(rho, u, T, R / (g - 1.0), R, D, rough, *wall)
        hdt = col(0.5 * dt)
        rl, ul, pl, yl, rr, ur, pr, yr = k.predict(rho, u, p, Y, g, *slopes, ax, s_u, s_p, hdt, dx)
        El, cl = k.total_energy(rl, ul, pl, yl, cf, cb, Rf, Rb, t_mid)
        Er, cr = k.total_energy(rr, ur, pr, yr, cf, cb, Rf, Rb, t_mid)
        F = np.empty((4, B, N + 1))
        fi = k.hllc_flux(rr[:, :-1], ur[:, :-1], pr[:, :-1], Er[:, :-1], yr[:, :-1], cr[:, :-1],
                         rl[:, 1:], ul[:, 1:], pl[:, 1:], El[:, 1:], yl[:, 1:], cl[:, 1:])
        for q in range(4):
            F[q, :, 1:-1] = fi[q] * Af[:, 1:-1]
        for end, (side, j, face) in enumerate(ends):
            st = (rl, ul, pl, yl) if side < 0 else (rr, ur, pr, yr)
            rj, uj, pj, yj = (w[:, j] for w in st)
            _, cj = k.total_energy(rj, uj, pj, yj, cf1, cb1, Rf[:, 0], Rb[:, 0], t_mid)
            ef = _end_or_outflow(rj, uj, pj, yj, cj, side, Af[:, face], E[:, end], cf1, cb1, Rf[:, 0], Rb[:, 0],
                                 t_mid, n_iter, Pe[:, end])
            Pe[:, end] = ef[4]
            for q in range(4):
                F[q, :, face] = ef[q]
        rh, uh, ph, yh = 0.5 * (rl + rr), 0.5 * (ul + ur), 0.5 * (pl + pr), 0.5 * (yl + yr)
        s_mom, s_E, _, _ = k.cell_sources(rh, uh, ph, yh, cf, cb, Rf, Rb, t_mid, D, rough, *wall)
        dtc = col(dt)
        Qn = update(F, ph, s_mom, s_E, dtc)
        bad = ~k.positive(Qn[:, MASS], Qn[:, MOMENTUM], Qn[:, ENERGY], Qn[:, BURNED], POSITIVITY_T_FRACTION * T,
                          cf, cb, t_mid) & col(active)
        if bad.any():
            fallbacks += bad.any(axis=1)
            flag = np.zeros((B, N + 1), dtype=bool)
            flag[:, 1:] |= bad
            flag[:, :-1] |= bad
            E0, c0 = k.total_energy(rho, u, p, Y, cf, cb, Rf, Rb, t_mid)
            F1 = np.empty_like(F)
            fr = k.rusanov_flux(rho[:, :-1], u[:, :-1], p[:, :-1], E0[:, :-1], Y[:, :-1], c0[:, :-1],
                                rho[:, 1:], u[:, 1:], p[:, 1:], E0[:, 1:], Y[:, 1:], c0[:, 1:])
            for q in range(4):
                F1[q, :, 1:-1] = fr[q] * Af[:, 1:-1]
            for end, (side, j, face) in enumerate(ends):
                ef = _end_or_outflow(rho[:, j], u[:, j], p[:, j], Y[:, j], c[:, j], side, Af[:, face], E[:, end],
                                     cf1, cb1, Rf[:, 0], Rb[:, 0], t_mid, n_iter, Pe[:, end])
                Pe[:, end] = np.where(flag[:, face], ef[4], Pe[:, end])
                for q in range(4):
                    F1[q, :, face] = ef[q]
            F = np.where(flag[None], F1, F)
            s_mom0, s_E0, _, _ = k.sources_at(rho, u, T, R / (g - 1.0), R, D, rough, *wall)
            Qn = update(F, np.where(bad, p, ph), np.where(bad, s_mom0, s_mom), np.where(bad, s_E0, s_E), dtc)
            bad = ~k.positive(Qn[:, MASS], Qn[:, MOMENTUM], Qn[:, ENERGY], Qn[:, BURNED],
                              POSITIVITY_T_FRACTION * T, cf, cb, t_mid) & col(active)
        fail = bad.any(axis=1)
        ok = active & ~fail
        Q[ok] = Qn[ok]
        okd = np.where(ok, dt, 0.0)
        for end, (side, j, face) in enumerate(ends):
            sgn = -side
            acc[:, end, F_MASS] += sgn * okd * F[0, :, face]
            acc[:, end, F_ENERGY] += sgn * okd * F[2, :, face]
            acc[:, end, F_BURNED] += sgn * okd * F[3, :, face]
        t = np.where(ok, np.where(last, duration, t + dt), t)
        cut = np.where(fail, cut + 1.0, np.where(ok, 0.0, cut))
        steps += active
    return acc, steps, fallbacks


def outflow_flux(rho, u, p, Y, area, cf, cb, Rf, Rb, t_mid):
    """Fluxes through a pipe end where the gas leaves it supersonically, as :func:`cyclesim.pipes.kernels.end_flux`
    returns them (in +x times ``area``; the end's pressure last): the interior state's own Euler fluxes.

    With the outflow at or above the sound speed every characteristic leaves the pipe, so nothing
    outside reaches the end (a transmissive boundary; Toro 2009, sec. 6.3.3, from memory).  The
    characteristic end solve assumes a subsonic interior; applied to a supersonic end cell its
    sonic state is hotter and denser than the cell and takes out more than the cell holds, which
    drained such cells to the temperature floor (harsh nozzles larger than the pipe's end)."""
    e, _ = k.energy(p / (rho * k.mixture_R(Y, Rf, Rb)), Y, cf, cb, t_mid)
    m = rho * u * area
    return m, (rho * u * u + p) * area, m * (e + p / rho + 0.5 * u * u), m * Y, p


def _end_or_outflow(rj, uj, pj, yj, cj, side, area, Ej, cf, cb, Rf, Rb, t_mid, n_iter, p_guess):
    """End fluxes (numpy, per case): :func:`cyclesim.pipes.kernels.end_flux`, or :func:`outflow_flux`
    where the face state leaves the pipe at or above its sound speed through an open nozzle."""
    ef = k.end_flux(rj, uj, pj, yj, cj * cj * rj / pj, side, area, Ej[:, E_CDA], Ej[:, E_P], Ej[:, E_T],
                    Ej[:, E_Y], Ej[:, E_K], cf, cb, Rf, Rb, t_mid, n_iter, p_guess)
    sup = (Ej[:, E_CDA] > 0.0) & (side * uj >= cj)
    if not sup.any():
        return ef
    of = outflow_flux(rj, uj, pj, yj, area, cf, cb, Rf, Rb, t_mid)
    return tuple(np.where(sup, o, e) for o, e in zip(of, ef))


def _too_many_steps(n):
    from ..errors import SolverError

    return SolverError(f"pipe: more than {n} sub-steps in one advance (time step collapsed; "
                       "check the end conditions and the state)")


def _lost_positivity():
    from ..errors import SolverError

    return SolverError(f"pipe: a cell stays without positive pressure after {MAX_CUTS} halvings of the "
                       "sub-step (check the end conditions and the state)")


if COMPILED:
    from numba import njit

    kc = compiled_kernels()

    @njit(cache=True, error_model="numpy", fastmath=FASTMATH)
    def _outflow_flux(rho, u, p, Y, area, cf, cb, Rf, Rb, t_mid):
        """:func:`outflow_flux` on scalars, compiled."""
        e, _ = kc.energy(p / (rho * kc.mixture_R(Y, Rf, Rb)), Y, cf, cb, t_mid)
        m = rho * u * area
        return m, (rho * u * u + p) * area, m * (e + p / rho + 0.5 * u * u), m * Y, p

    @njit(cache=True, error_model="numpy", fastmath=FASTMATH)
    def _end_into(F, face, side, end, rj, uj, pj, yj, gj, b, Af, E, Pe, cf, cb, Rf, Rb, t_mid, n_iter):
        """Flux of end ``end`` from the face state (rj, uj, pj, yj, gamma gj) into column ``face`` of F."""
        n_it = n_iter if E[b, end, E_CDA] > 0.0 else 0      # a closed end needs no pressure iteration
        if E[b, end, E_CDA] > 0.0 and side * uj * abs(side * uj) >= gj * pj / rj:
            # supersonic outflow: every characteristic leaves the pipe, the face is the interior state
            f0, f1, f2, f3, pb = _outflow_flux(rj, uj, pj, yj, Af[b, face], cf, cb, Rf, Rb, t_mid)
        else:
            f0, f1, f2, f3, pb = kc.end_flux(rj, uj, pj, yj, gj, side, Af[b, face], E[b, end, E_CDA],
                                            E[b, end, E_P], E[b, end, E_T], E[b, end, E_Y], E[b, end, E_K],
                                            cf, cb, Rf, Rb, t_mid, n_it, Pe[b, end])
        Pe[b, end] = pb
        F[0, face] = f0
        F[1, face] = f1
        F[2, face] = f2
        F[3, face] = f3

    @njit(cache=True, error_model="numpy", fastmath=FASTMATH)
    def _update_cell(Qn, Q, F, b, i, dt, ph, s_mom, s_E, Vi, dA):
        Qn[MASS, i] = Q[b, MASS, i] - dt * (F[0, i + 1] - F[0, i])
        Qn[MOMENTUM, i] = Q[b, MOMENTUM, i] - dt * (F[1, i + 1] - F[1, i] - ph * dA - Vi * s_mom)
        Qn[ENERGY, i] = Q[b, ENERGY, i] - dt * (F[2, i + 1] - F[2, i] - Vi * s_E)
        Qn[BURNED, i] = Q[b, BURNED, i] - dt * (F[3, i + 1] - F[3, i])

    @njit(cache=True, error_model="numpy", fastmath=FASTMATH)
    def _advance_compiled(Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, duration, max_steps, whole, left):
        B = Q.shape[0]
        acc = np.zeros((B, 2, NF))
        steps = np.zeros(B, dtype=np.int64)
        fallbacks = np.zeros(B, dtype=np.int64)
        for b in range(B):
            why = advance_case(b, Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, duration[b], max_steps,
                               acc, steps, fallbacks, whole[b], left)
            if why >= 0:
                return acc, steps, fallbacks, b, why
        return acc, steps, fallbacks, -1, 0

    @njit(cache=True, error_model="numpy", fastmath=FASTMATH)
    def advance_case(b, Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, T_end, max_steps, acc, steps,
                     fallbacks, whole, left):
        """Advance case ``b`` of the arrays by ``T_end`` [s], adding its end fluxes to ``acc[b]`` (2, NF)
        and its sub-steps to ``steps[b]`` and ``fallbacks[b]``; -1 done, 0 too many sub-steps, 1 lost
        positivity (the compiled form of :func:`advance_arrays` for one case, called by the cycle loop too).
        With ``whole`` only whole CFL sub-steps are taken: the advance stops before a sub-step that
        would pass ``T_end`` and writes the time left over [s] to ``left[b]``."""
        N = Q.shape[2]
        W = np.empty((7, N))            # rho, u, p, Y, T, gamma, c
        S = np.empty((4, N))            # limited slopes
        L = np.empty((5, N))            # left face: rho, u, p, Y, E
        R = np.empty((5, N))
        cl = np.empty(N)
        cr = np.empty(N)
        F = np.empty((4, N + 1))
        Qn = np.empty((4, N))
        PH = np.empty(N)                # wall pressure of the update
        SM = np.empty(N)                # momentum and energy sources of the update
        SE = np.empty(N)
        bad = np.zeros(N, dtype=np.bool_)
        cf = C[b, 0]
        cb = C[b, 1]
        dx = P[b, P_DX]
        Rf = P[b, P_R_FRESH]
        Rb = P[b, P_R_BURNED]
        fr, ff, kl, tw, prn, hs = (P[b, P_FRICTION], P[b, P_FIXED_FANNING], P[b, P_LOSS_PER_LENGTH],
                                   P[b, P_WALL_T], P[b, P_COLBURN], P[b, P_HEAT])
        t = 0.0
        cut = 0
        if whole:
            left[b] = 0.0
        while t < T_end:
            if steps[b] >= max_steps:
                return 0
            if cut > MAX_CUTS:
                return 1
            steps[b] += 1
            vmax = 0.0
            for i in range(N):
                r_, u_, p_, y_, T_, g_, c_ = kc.primitives(
                    Q[b, MASS, i], Q[b, MOMENTUM, i], Q[b, ENERGY, i], Q[b, BURNED, i],
                    G[b, G_VOLUME, i], cf, cb, Rf, Rb, t_mid, n_newton, Tc[b, i])
                Tc[b, i] = T_
                W[0, i] = r_
                W[1, i] = u_
                W[2, i] = p_
                W[3, i] = y_
                W[4, i] = T_
                W[5, i] = g_
                W[6, i] = c_
                vmax = max(vmax, abs(u_) + c_)
            dt = P[b, P_CFL] * dx / vmax * 0.5 ** cut
            rest = T_end - t
            if whole and dt > rest:
                steps[b] -= 1                   # not taken
                left[b] = rest
                return -1
            last = dt >= rest
            if last:
                dt = rest
            for q in range(4):
                S[q, 0] = kc.limited_slope(W[q, 1] - W[q, 0], W[q, 2] - W[q, 1])
                S[q, N - 1] = kc.limited_slope(W[q, N - 1] - W[q, N - 2], W[q, N - 2] - W[q, N - 3])
                for i in range(1, N - 1):
                    S[q, i] = kc.limited_slope(W[q, i] - W[q, i - 1], W[q, i + 1] - W[q, i])
            hdt = 0.5 * dt
            for i in range(N):
                D = G[b, G_DIAMETER, i]
                rg = G[b, G_ROUGH_TERM, i]
                Ri = kc.mixture_R(W[3, i], Rf, Rb)
                _, _, s_u, s_p = kc.sources_at(W[0, i], W[1, i], W[4, i], Ri / (W[5, i] - 1.0), Ri, D, rg,
                                               fr, ff, kl, tw, prn, hs)
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
                ph = 0.5 * (pl + pr)
                s_mom, s_E, _, _ = kc.cell_sources(0.5 * (rl + rr), 0.5 * (ul + ur), ph, 0.5 * (yl + yr),
                                                  cf, cb, Rf, Rb, t_mid, D, rg, fr, ff, kl, tw, prn, hs)
                PH[i] = ph
                SM[i] = s_mom
                SE[i] = s_E
            for i in range(1, N):
                f0, f1, f2, f3 = kc.hllc_flux(R[0, i - 1], R[1, i - 1], R[2, i - 1], R[4, i - 1],
                                             R[3, i - 1], cr[i - 1],
                                             L[0, i], L[1, i], L[2, i], L[4, i], L[3, i], cl[i])
                a = Af[b, i]
                F[0, i] = f0 * a
                F[1, i] = f1 * a
                F[2, i] = f2 * a
                F[3, i] = f3 * a
            _end_into(F, 0, -1.0, 0, L[0, 0], L[1, 0], L[2, 0], L[3, 0], cl[0] * cl[0] * L[0, 0] / L[2, 0],
                      b, Af, E, Pe, cf, cb, Rf, Rb, t_mid, n_iter)
            j = N - 1
            _end_into(F, N, 1.0, 1, R[0, j], R[1, j], R[2, j], R[3, j], cr[j] * cr[j] * R[0, j] / R[2, j],
                      b, Af, E, Pe, cf, cb, Rf, Rb, t_mid, n_iter)
            n_bad = 0
            for i in range(N):
                Vi = G[b, G_VOLUME, i]
                _update_cell(Qn, Q, F, b, i, dt, PH[i], SM[i], SE[i], Vi, Af[b, i + 1] - Af[b, i])
                bad[i] = not kc.positive(Qn[MASS, i], Qn[MOMENTUM, i], Qn[ENERGY, i], Qn[BURNED, i],
                                         POSITIVITY_T_FRACTION * W[4, i], cf, cb, t_mid)
                n_bad += bad[i]
            if n_bad > 0:
                fallbacks[b] += 1
                # first-order faces around the cells that lost positivity; their sources of time n
                for f in range(N + 1):
                    if not ((f > 0 and bad[f - 1]) or (f < N and bad[f])):
                        continue
                    if f == 0:
                        _end_into(F, 0, -1.0, 0, W[0, 0], W[1, 0], W[2, 0], W[3, 0], W[5, 0],
                                  b, Af, E, Pe, cf, cb, Rf, Rb, t_mid, n_iter)
                    elif f == N:
                        _end_into(F, N, 1.0, 1, W[0, j], W[1, j], W[2, j], W[3, j], W[5, j],
                                  b, Af, E, Pe, cf, cb, Rf, Rb, t_mid, n_iter)
                    else:
                        i0 = f - 1
                        E0 = W[0, i0] * kc.energy(W[4, i0], W[3, i0], cf, cb, t_mid)[0] \
                            + 0.5 * W[0, i0] * W[1, i0] * W[1, i0]
                        E1 = W[0, f] * kc.energy(W[4, f], W[3, f], cf, cb, t_mid)[0] \
                            + 0.5 * W[0, f] * W[1, f] * W[1, f]
                        f0, f1, f2, f3 = kc.rusanov_flux(W[0, i0], W[1, i0], W[2, i0], E0, W[3, i0], W[6, i0],
                                                        W[0, f], W[1, f], W[2, f], E1, W[3, f], W[6, f])
                        a = Af[b, f]
                        F[0, f] = f0 * a
                        F[1, f] = f1 * a
                        F[2, f] = f2 * a
                        F[3, f] = f3 * a
                for i in range(N):
                    if bad[i]:
                        Ri = kc.mixture_R(W[3, i], Rf, Rb)
                        s_mom, s_E, _, _ = kc.sources_at(W[0, i], W[1, i], W[4, i], Ri / (W[5, i] - 1.0), Ri,
                                                         G[b, G_DIAMETER, i], G[b, G_ROUGH_TERM, i],
                                                         fr, ff, kl, tw, prn, hs)
                        PH[i] = W[2, i]
                        SM[i] = s_mom
                        SE[i] = s_E
                n_bad = 0
                for i in range(N):
                    _update_cell(Qn, Q, F, b, i, dt, PH[i], SM[i], SE[i], G[b, G_VOLUME, i],
                                 Af[b, i + 1] - Af[b, i])
                    bad[i] = not kc.positive(Qn[MASS, i], Qn[MOMENTUM, i], Qn[ENERGY, i], Qn[BURNED, i],
                                             POSITIVITY_T_FRACTION * W[4, i], cf, cb, t_mid)
                    n_bad += bad[i]
                if n_bad > 0:
                    cut += 1                                # take the sub-step again, halved
                    continue
            cut = 0
            for q in range(4):
                for i in range(N):
                    Q[b, q, i] = Qn[q, i]
            acc[b, 0, F_MASS] += dt * F[0, 0]
            acc[b, 0, F_ENERGY] += dt * F[2, 0]
            acc[b, 0, F_BURNED] += dt * F[3, 0]
            acc[b, 1, F_MASS] -= dt * F[0, N]
            acc[b, 1, F_ENERGY] -= dt * F[2, N]
            acc[b, 1, F_BURNED] -= dt * F[3, N]
            t = T_end if last else t + dt
        return -1


def advance_arrays(Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, duration, max_steps=1_000_000, whole=None,
                   left=None):
    """Advance the pipes of a batch in place by ``duration`` [s] per case; see :meth:`cyclesim.pipes.Pipes.advance`.

    ``Tc`` (B, N) holds each cell's last temperature [K], the start of its
    Newton steps, and ``Pe`` (B, 2) each end's last pressure [Pa], the start of
    its pressure solve (0: none); both are updated.  Returns the time-integrated fluxes into the
    pipe through each end (B, 2, NF) [kg, J, kg], the sub-steps taken per case
    (B,) (those taken again after a halving included) and the sub-steps per
    case that needed the first-order fallback (B,).

    ``whole`` (B,) bool, where given: those cases take whole CFL sub-steps only and stop before
    one that would pass their ``duration``; the time left over [s] goes to ``left`` (B,) (0 where
    a case's whole sub-steps ended on its duration), which the other cases leave as it is.
    """
    duration = np.ascontiguousarray(duration, dtype=float)
    if whole is not None:
        whole = np.ascontiguousarray(whole, dtype=bool)
    if COMPILED:
        w = whole if whole is not None else np.zeros(duration.shape[0], dtype=np.bool_)
        lft = left if left is not None else np.zeros(duration.shape[0])
        acc, steps, fallbacks, failed, why = _advance_compiled(Q, G, Af, P, E, C, Tc, Pe, float(t_mid), int(n_newton),
                                                               int(n_iter), duration, int(max_steps), w, lft)
        if failed >= 0:
            raise _lost_positivity() if why else _too_many_steps(int(max_steps))
        return acc, steps, fallbacks
    with np.errstate(all="ignore"):
        return _advance_numpy(Q, G, Af, P, E, C, Tc, Pe, float(t_mid), int(n_newton), int(n_iter), duration,
                              int(max_steps), whole, left)
