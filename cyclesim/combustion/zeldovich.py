"""Nitric oxide by the extended Zeldovich mechanism, with the tool's own equilibrium.

Reactions (Heywood 1988, section 11.2.1)

    1.  O + N2 = NO + N
    2.  N + O2 = NO + O
    3.  N + OH = NO + H

With N in steady state and O, O2, OH, H, N2 at equilibrium, the one-way
equilibrium rates R1 = k1+ [O]e [N2]e, R2 = k2- [NO]e [O]e and
R3 = k3- [NO]e [H]e give (Heywood 1988, eq. 11.8)

    d[NO]/dt = 2 R1 (1 - a^2) / (1 + a R1/(R2 + R3)),   a = [NO]/[NO]e.

The forms R2 = k2- [NO]e [O]e, R3 = k3- [NO]e [H]e (equal at equilibrium to
k2+ [N]e [O2]e and k3+ [N]e [OH]e) are used, so [N]e, [O2]e and [OH]e are not
needed; the rate vanishes exactly at the tool's equilibrium NO, to which a
held state relaxes.

Rate constants (Heywood 1988, table 11.1, citing Hanson & Salimian 1984 in
Gardiner (ed.), *Combustion Chemistry*; **from memory**), cm^3/(mol s):

    k1+ = 7.6e13 exp(-38000/T)       k1- = 1.6e13
    k2+ = 6.4e9 T exp(-3150/T)       k2- = 1.5e9 T exp(-19500/T)
    k3+ = 4.1e13                     k3- = 2.0e14 exp(-23650/T)

Only the thermal route is modelled.  In a GRI-Mech 3.0 reactor started from
NO-free equilibrium products (2400-2800 K, 20-60 bar, phi 1) the routes
through N2O, NNH and HNO add 20-40 % to it (the N2O route alone 5-9 %), and
GRI's k1+ is about 1.5 times Heywood's (tests/test_zeldovich.py).

Equilibrium inputs come from :func:`cyclesim.gas.equilibrium.equilibrate_tv`
(its species include NO and N); :func:`equilibrium_tp` finds the density
for a given pressure.  For burned-mass elements, :func:`no_table` tabulates
ln R1, ln(R2 + R3) and ln [NO]e per unit density against T and ln p once per
mixture, and :func:`integrate_elements` integrates each element's NO between
its birth and its freeze-out.

Physics functions take floats or numpy arrays, SI units (concentrations in
mol/m^3, rates in mol/(m^3 s)), and compile with numba as they are.
"""

from __future__ import annotations

import math

import numpy as np

import cyclesim.gas.equilibrium as equilibrium
import cyclesim.gas.thermo as thermo

if "jit" not in globals():          # the plain form; cyclesim.combustion._jit compiles a second copy
    def jit(fn):
        return fn

_CM3 = 1e-6  # cm^3/mol -> m^3/mol
_I = {s: i for i, s in enumerate(equilibrium.SPECIES)}
I_O, I_H, I_N2, I_NO, I_H2O = _I["O"], _I["H"], _I["N2"], _I["NO"], _I["H2O"]


def k1f(T):
    """k1+ of O + N2 -> NO + N [m^3/(mol s)] (Heywood 1988, table 11.1, from memory)."""
    return 7.6e13 * _CM3 * np.exp(-38000.0 / T)


def k2r(T):
    """k2- of NO + O -> N + O2 [m^3/(mol s)] (Heywood 1988, table 11.1, from memory)."""
    return 1.5e9 * _CM3 * T * np.exp(-19500.0 / T)


def k3r(T):
    """k3- of NO + H -> N + OH [m^3/(mol s)] (Heywood 1988, table 11.1, from memory)."""
    return 2.0e14 * _CM3 * np.exp(-23650.0 / T)


def one_way_rates(T, c_o, c_n2, c_h, c_no_e):
    """R1, R2 + R3 [mol/(m^3 s)] from equilibrium concentrations [mol/m^3] at T [K]."""
    return k1f(T) * c_o * c_n2, c_no_e * (k2r(T) * c_o + k3r(T) * c_h)


def no_rate(c_no, c_no_e, r1, r23):
    """d[NO]/dt [mol/(m^3 s)] (Heywood 1988, eq. 11.8) at [NO] = ``c_no`` [mol/m^3]."""
    a = c_no / c_no_e
    return 2.0 * r1 * (1.0 - a * a) / (1.0 + a * r1 / r23)


def equilibrium_tp(T, p, b, iterations: int = 30):
    """Equilibrium at temperature ``T`` [K] and pressure ``p`` [Pa] (arrays broadcast).

    Fixed-point iteration on the density rho = p / (R T) with the
    equilibrium gas constant, to 1e-11 (the equilibrium's own tolerance: below it the
    iteration stalls at about 4e-12), in about eight steps.

    Returns
    -------
    n : ndarray (N, 12)
        Species amounts [mol/kg], columns :data:`cyclesim.gas.equilibrium.SPECIES`.
    rho : ndarray (N,)
        Density [kg/m^3].
    """
    T, p = np.broadcast_arrays(np.asarray(T, dtype=float).ravel(),
                               np.asarray(p, dtype=float).ravel())
    T, p = T.copy(), p.copy()
    n0 = np.asarray(list(thermo.complete_products(b).values()))
    rho = p / (thermo.R_U * float(np.sum(n0)) * T)
    lam = None
    for _ in range(iterations):
        res = equilibrium.equilibrate_tv(T, rho, b, lam0=lam)
        lam = res.lam
        new = p / (thermo.R_U * res.n.sum(axis=1) * T)
        done = np.max(np.abs(new / rho - 1.0)) < 1e-11
        rho = new
        if done:
            break
    res = equilibrium.equilibrate_tv(T, rho, b, lam0=lam)
    return res.n, rho


def no_table(b, T_grid_K, p_grid_Pa):
    """Tabulate the Zeldovich inputs of a mixture (element amounts ``b`` [mol/kg]) on a T, p grid.

    Returns
    -------
    tuple of plain arrays
        ``(T_grid [K], lnp_grid [ln Pa], ln_w, ln_K, ln_ne, n_tot, n_h2o)``, the last five
        shaped (len(T_grid), len(p_grid)): ln(R1/rho) with R1/rho in mol/(kg s);
        ln(R1/(R2 + R3)); ln [NO]e/rho with [NO]e/rho in mol/kg; total and water amounts
        of the equilibrium gas [mol/kg].
    """
    Tg = np.asarray(T_grid_K, dtype=float)
    pg = np.asarray(p_grid_Pa, dtype=float)
    TT, PP = np.meshgrid(Tg, pg, indexing="ij")
    n, rho = equilibrium_tp(TT.ravel(), PP.ravel(), b)
    c = n * rho[:, None]
    r1, r23 = one_way_rates(TT.ravel(), c[:, I_O], c[:, I_N2], c[:, I_H], c[:, I_NO])
    shape = TT.shape
    return (Tg, np.log(pg), np.log(r1 / rho).reshape(shape), np.log(r1 / r23).reshape(shape),
            np.log(n[:, I_NO]).reshape(shape), n.sum(axis=1).reshape(shape),
            n[:, I_H2O].reshape(shape))


@jit
def _cell(Tg, lpg, T, lp):
    """Cell (i, j) of the (T, ln p) grid holding a point and its weights (u, v), clamped to the grid."""
    i = min(max(np.searchsorted(Tg, T) - 1, 0), Tg.size - 2)
    j = min(max(np.searchsorted(lpg, lp) - 1, 0), lpg.size - 2)
    u = min(max((T - Tg[i]) / (Tg[i + 1] - Tg[i]), 0.0), 1.0)
    v = min(max((lp - lpg[j]) / (lpg[j + 1] - lpg[j]), 0.0), 1.0)
    return i, j, u, v


@jit
def _bilinear(tab, i, j, u, v):
    """Bilinear interpolation of ``tab`` in cell (i, j) with weights (u, v)."""
    return ((1 - u) * (1 - v) * tab[i, j] + u * (1 - v) * tab[i + 1, j]
            + (1 - u) * v * tab[i, j + 1] + u * v * tab[i + 1, j + 1])


@jit
def _interp(Tg, lpg, tab, T, lp):
    """Bilinear interpolation in (T, ln p), clamped to the grid (scalar T, lp)."""
    i, j, u, v = _cell(Tg, lpg, T, lp)
    return _bilinear(tab, i, j, u, v)


def implicit_a(a0, s, K):
    """Solve a - a0 = s (1 - a^2)/(1 + a K) for a >= 0 (backward Euler in a = [NO]/[NO]e).

    ``s`` = dt 2 R1/[NO]e >= 0 [-], ``K`` = R1/(R2 + R3) [-].  Newton from a0; the
    root lies between a0 and 1, so the step never overshoots equilibrium.
    """
    lo, hi = min(a0, 1.0), max(a0, 1.0)
    a = a0
    for _ in range(60):
        g = (a - a0) * (1.0 + a * K) - s * (1.0 - a * a)
        dg = (1.0 + a * K) + (a - a0) * K + 2.0 * s * a
        a_new = min(max(a - g / dg, lo), hi)
        if abs(a_new - a) <= 1e-15 * max(a_new, 1e-300):
            return a_new
        a = a_new
    return a


def no_step(n_no, dt, T, p, Tg, lpg, ln_w, ln_K, ln_ne):
    """NO amount [mol/kg] after ``dt`` [s] at fixed T [K] and p [Pa], from ``n_no`` [mol/kg].

    dn/dt = (2 R1/rho)(1 - a^2)/(1 + a K), a = n/ne, with the table of :func:`no_table`.
    """
    lp = math.log(p)
    w = math.exp(_interp(Tg, lpg, ln_w, T, lp))
    K = math.exp(_interp(Tg, lpg, ln_K, T, lp))
    ne = math.exp(_interp(Tg, lpg, ln_ne, T, lp))
    return ne * implicit_a(n_no / ne, dt * 2.0 * w / ne, K)


def integrate_elements(t, p, T, birth, T_freeze, Tg, lpg, ln_w, ln_K, ln_ne):
    """NO of burned-mass elements between birth and freeze-out [mol/kg].

    Parameters
    ----------
    t : ndarray (n_t,)
        Times [s], increasing.
    p : ndarray (n_t,)
        Cylinder pressure [Pa].
    T : ndarray (n_el, n_t)
        Element temperatures [K] (ignored before birth).
    birth : ndarray (n_el,) of int
        Time index at which each element is born (with no NO).
    T_freeze : float
        An element freezes (its NO is held) once, after its birth, its
        temperature has fallen below this [K].
    Tg, lpg, ln_w, ln_K, ln_ne
        The table of :func:`no_table`.

    Returns
    -------
    ndarray (n_el, n_t)
        NO of each element [mol/kg], 0 before its birth.  Each step uses the
        mean of its end temperatures and pressures (backward Euler in a).
    """
    n_el, n_t = T.shape
    out = np.zeros((n_el, n_t))
    for e in range(n_el):
        n = 0.0
        frozen = False
        for k in range(birth[e] + 1, n_t):
            if not frozen:
                Tm = 0.5 * (T[e, k - 1] + T[e, k])
                if Tm < T_freeze:
                    frozen = True
                else:
                    pm = 0.5 * (p[k - 1] + p[k])
                    n = no_step(n, t[k] - t[k - 1], Tm, pm, Tg, lpg, ln_w, ln_K, ln_ne)
            out[e, k] = n
    return out


def mean_no_ppm(n_no, mass, n_tot, n_h2o):
    """Mass-weighted NO of elements as ppm by volume, wet and dry.

    Parameters
    ----------
    n_no, mass, n_tot, n_h2o : ndarray (n_el,)
        Element NO [mol/kg], masses [kg], total and water amounts [mol/kg].

    Returns
    -------
    (float, float)
        NO [ppm] wet and dry (water removed).
    """
    m = mass / mass.sum()
    no = (m * n_no).sum()
    tot = (m * n_tot).sum()
    return 1e6 * no / tot, 1e6 * no / (tot - (m * n_h2o).sum())


# -- burned-mass elements that grow while they burn ---------------------------------------


@jit
def implicit_a_closed(a0, s, K):
    """The root of :func:`implicit_a` in closed form (scalars).

    a - a0 = s (1 - a^2)/(1 + a K) is the quadratic (K + s) a^2 + (1 - a0 K) a - (a0 + s) = 0,
    whose product of roots is negative: its one positive root, written without cancellation.
    """
    bq = 1.0 - a0 * K
    c = a0 + s
    if not c > 0.0:
        return 0.0
    d = math.sqrt(bq * bq + 4.0 * (K + s) * c)
    if bq >= 0.0:
        return 2.0 * c / (bq + d)
    return (d - bq) / (2.0 * (K + s))


@jit
def grow_elements(t, p, T, x, T_freeze, Tg, lpg, ln_w, ln_K, ln_ne, no, frozen_at):
    """The loop of :func:`integrate_growing_elements`, case by case and element by element
    (fills ``no`` (B, N, n) [mol/kg] and ``frozen_at`` (B, N))."""
    B, N, n = T.shape
    for b in range(B):
        for e in range(N):
            cur = 0.0
            fz = n
            no[b, e, 0] = 0.0
            for k in range(1, n):
                if x[b, e, k - 1] > 0.0 and fz == n:
                    Tm = 0.5 * (T[b, e, k - 1] + T[b, e, k])
                    if Tm < T_freeze[b]:
                        fz = k
                    else:
                        lp = math.log(0.5 * (p[b, k - 1] + p[b, k]))
                        i, j, u, v = _cell(Tg, lpg, Tm, lp)
                        w = math.exp(_bilinear(ln_w[b], i, j, u, v))
                        K = math.exp(_bilinear(ln_K[b], i, j, u, v))
                        ne = math.exp(_bilinear(ln_ne[b], i, j, u, v))
                        cur = ne * implicit_a_closed(cur / ne, (t[b, k] - t[b, k - 1]) * 2.0 * w / ne, K)
                if x[b, e, k] > x[b, e, k - 1]:
                    cur = cur * x[b, e, k - 1] / x[b, e, k]
                no[b, e, k] = cur
            frozen_at[b, e] = fz


def integrate_growing_elements(t, p, T, x, T_freeze, Tg, lpg, ln_w, ln_K, ln_ne):
    """NO of burned-mass elements that take in NO-free burned gas while they burn [mol/kg].

    Parameters
    ----------
    t, p : ndarray (B, n)
        Times [s] (increasing) and pressure [Pa].
    T : ndarray (B, N, n)
        Element temperatures [K] (NaN before birth).
    x : ndarray (B, N, n)
        Element masses (any common scale, e.g. a fraction of the cylinder mass) [-].
    T_freeze : float or ndarray (B,)
        An element freezes (its NO is held) once, after its birth, the mean temperature of a
        step falls below this [K].
    Tg, lpg : ndarray
        Grid of the tables [K], [ln Pa].
    ln_w, ln_K, ln_ne : ndarray (B, nT, np)
        Each case's table of :func:`no_table`.

    Returns
    -------
    no : ndarray (B, N, n)
        NO of each element [mol/kg], 0 before its birth.  A step integrates the element's NO
        at the mean of its end temperatures and pressures (the implicit step of
        :func:`no_step`, in closed form), then dilutes it by the burned gas the element took in.
    frozen_at : ndarray (B, N) of int
        Index at which each element froze (n if it never did).

    Notes
    -----
    The loop is :func:`grow_elements`, compiled by numba where it runs
    (:mod:`cyclesim.combustion._jit`).
    """
    from . import zeldovich
    from ._jit import kernels

    B, N, n = T.shape
    c = np.ascontiguousarray
    no = np.empty((B, N, n))
    frozen_at = np.empty((B, N), dtype=np.int64)
    kernels(zeldovich).grow_elements(
        c(t, dtype=float), c(p, dtype=float), c(T, dtype=float), c(x, dtype=float),
        c(np.broadcast_to(np.asarray(T_freeze, dtype=float), (B,))), c(Tg, dtype=float), c(lpg, dtype=float),
        c(ln_w, dtype=float), c(ln_K, dtype=float), c(ln_ne, dtype=float), no, frozen_at)
    return no, frozen_at
