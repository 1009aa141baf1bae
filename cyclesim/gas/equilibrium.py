"""Chemical equilibrium of C-H-O-N-Ar burned gas at given temperature and density.

Method
------
Element potentials (the dual of Gibbs/Helmholtz minimisation; Reynolds 1986,
"The element potential method for chemical equilibrium analysis: implementation
in the interactive program STANJAN", Stanford University, from memory).  At
fixed T and V an ideal-gas mixture is in equilibrium when every species'
chemical potential is the sum of its atoms' element potentials.  With
concentrations c_j [mol/m^3] this reads

    c_j = (p0 / (R T)) exp(-g°_j(T)/(R T) + sum_k a_kj lambda_k)

and the element balances  sum_j a_kj c_j = rho b_k  (b_k element amounts
[mol/kg]) are four equations for the four unknown dimensionless potentials
lambda_k of C, H, O, N (argon is inert and taken as given).  They are solved
by a damped Newton method on the logarithms of the element balances, which
keeps the equations well scaled from trace to major elements, vectorised over
any number of (T, rho) points.  The start is the complete-combustion
composition (:func:`cyclesim.gas.thermo.complete_products`) fitted by weighted
least squares.

Species: CO2, H2O, N2, O2, CO, H2, OH, H, O, NO, N, AR, the set of Olikara &
Borman (1975, SAE 750468, from memory) without their fuel-specific extras.
Condensed phases (water, soot) are not considered.

Analytic sensitivities (:func:`equilibrium_properties`) give the equilibrium
u_T and u_lnrho, composition shift included, from one more linear solve with
the converged Jacobian.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

import cyclesim.gas.thermo as thermo
from ..errors import SolverError

SPECIES = ("CO2", "H2O", "N2", "O2", "CO", "H2", "OH", "H", "O", "NO", "N", "AR")
"""Burned-gas species, in the column order of results."""

_REACTIVE = SPECIES[:-1]
_ELEM4 = ("C", "H", "O", "N")
# element-species matrix a_kj for C, H, O, N over the reactive species
_A = np.array(
    [[thermo.NASA7[s][5].get(e, 0.0) for s in _REACTIVE] for e in _ELEM4], dtype=float
)
_LOW, _HIGH, _TMID = thermo.nasa7_arrays(_REACTIVE)
_LOW_AR, _HIGH_AR, _TMID_AR = thermo.nasa7_arrays(["AR"])
_CARRIER = _A > 0
_CO2, _H2O, _CO, _H2 = (_REACTIVE.index(s) for s in ("CO2", "H2O", "CO", "H2"))
_REDOX_DIR = np.array([-2.0, -0.5, 1.0, 0.0])  # (C, H, O, N) shift keeping CO2, H2O, N2
_REDOX_SIGMA = _REDOX_DIR @ _A  # ln c_j change per unit shift (O2 +2, CO -1, ...)
_STEP_MAX = 2.0
_EPS_I = 1e-12 * np.eye(4)  # largest Newton change of a potential per iteration [-]


class EquilibriumResult(NamedTuple):
    """Solution at N points.

    n : ndarray (N, 12)
        Species amounts [mol/kg], columns :data:`SPECIES`.
    lam : ndarray (N, 4)
        Dimensionless element potentials of C, H, O, N [-].
    iterations : int
        Newton iterations used.
    """

    n: np.ndarray
    lam: np.ndarray
    iterations: int


def _g_RT(T: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """g°/RT, h/RT, cp/R of the reactive species, shape (N, 11)."""
    cp, h, s = thermo._dimless_many(_LOW, _HIGH, _TMID, T)
    return h - s, h, cp


def _prepare(T, rho, b):
    T = np.asarray(T, dtype=float).ravel()
    rho = np.asarray(rho, dtype=float).ravel()
    N = max(T.size, rho.size)
    T = np.broadcast_to(T, (N,))
    rho = np.broadcast_to(rho, (N,))
    b = np.broadcast_to(np.asarray(b, dtype=float), (N, 5))
    if np.any(T <= 0) or np.any(rho <= 0):
        raise ValueError("temperature and density must be positive")
    return T, rho, b


def _start(lnc0: np.ndarray, rho: np.ndarray, b: np.ndarray, ln_b: np.ndarray) -> np.ndarray:
    """Start potentials: fit to the complete-combustion majors, then fix the redox balance.

    1. Weighted least squares of ln c_j = lnc0_j + a_j.lambda on the
       complete-combustion composition (rich: water-gas shift in equilibrium
       at T); species it lacks get a negligible weight.  At low temperature
       this is already the solution.
    2. Near stoichiometric the majors (CO2, H2O, N2) leave one direction free:
       shifting the oxygen potential by d with lambda_C - 2d and lambda_H - d/2
       keeps them fixed and scales the oxidising (O2, O, OH, NO) against the
       reducing (CO, H2, H) species.  The oxygen excess over complete
       combustion, E = b_O - 2 b_C - b_H/2, fixes d: a one-dimensional
       monotonic equation solved by Newton on its logarithmic form.
    """
    # water-gas shift at its equilibrium at T (Kc = Kp, no change in moles)
    k_wgs = np.exp(-(lnc0[:, _CO2] + lnc0[:, _H2] - lnc0[:, _CO] - lnc0[:, _H2O]))
    prod = thermo.complete_products(b, np.clip(k_wgs, 1e-30, 1e30))
    guess = np.stack([prod.get(s, np.zeros(len(rho))) for s in _REACTIVE], axis=1)
    total = guess.sum(axis=1, keepdims=True)
    present = guess > 0
    guess = np.where(present, guess, 1e-6 * total) * rho[:, None]
    w = np.where(present, 1.0, 1e-8)
    rhs = np.log(guess) - lnc0
    Aw = _A[None, :, :] * w[:, None, :]  # (N, 4, 11)
    M = Aw @ _A.T
    v = np.einsum("nkj,nj->nk", Aw, rhs)
    lam = np.linalg.solve(M, v[..., None])[..., 0]
    # redox direction and the oxygen-excess balance along it
    lnc = lnc0 + lam @ _A
    sig = _REDOX_SIGMA
    pos, neg = sig > 0, sig < 0
    b4 = np.exp(ln_b)
    E = b4[:, 2] - 2 * b4[:, 0] - 0.5 * b4[:, 1]
    e_pos = np.maximum(E, 0.0)
    e_neg = np.maximum(-E, 0.0)
    lw = lnc + np.log(np.abs(sig) + (sig == 0))  # ln(|sigma_j| c_j)
    d = np.zeros(len(rho))
    for _ in range(60):
        x = lw + d[:, None] * sig
        m = x.max(axis=1, keepdims=True)
        ex = np.exp(x - m)
        P = (ex * pos).sum(axis=1)
        Q = (ex * neg).sum(axis=1)
        P1 = (ex * pos * np.abs(sig)).sum(axis=1)
        Q1 = (ex * neg * np.abs(sig)).sum(axis=1)
        sc = np.exp(-m[:, 0])
        Pt = P + e_neg * sc
        Qt = Q + e_pos * sc
        with np.errstate(divide="ignore"):
            g = np.log(Pt) - np.log(Qt)
        gp = P1 / Pt + Q1 / Qt
        step = -g / gp
        step = np.clip(np.nan_to_num(step, nan=0.0), -20.0, 20.0)
        d += step
        if np.abs(step).max() < 1e-6:
            break
    return lam + d[:, None] * _REDOX_DIR


def _balance(lnc: np.ndarray, ln_b: np.ndarray):
    """Log-residuals of the element balances and their Jacobian (scaled, overflow-safe)."""
    x = lnc[:, None, :]
    m = np.where(_CARRIER, x, -np.inf).max(axis=2)  # largest carrier of each element
    e = _A * np.exp(np.minimum(x - m[:, :, None], 0.0))  # (N, 4, 11)
    S = e.sum(axis=2)
    G = np.log(S) + m - ln_b
    J = (e @ _A.T) / S[:, :, None]
    return G, J, e, S


def equilibrate_tv(
    T, rho, b, *, lam0: np.ndarray | None = None, tol: float = 1e-11, max_iter: int = 100
) -> EquilibriumResult:
    """Equilibrium composition at temperature ``T`` and density ``rho``.

    Parameters
    ----------
    T : array_like (N,)
        Temperature [K].
    rho : array_like (N,)
        Density [kg/m^3] (broadcast against ``T``).
    b : array_like (5,) or (N, 5)
        Element amounts [mol/kg] of C, H, O, N, Ar (:data:`cyclesim.gas.thermo.ELEMENTS`).
    lam0 : ndarray (N, 4), optional
        Start potentials (e.g. a neighbouring solution).
    tol : float
        Convergence limit on the log of every element balance [-].
    max_iter : int
        Newton iteration limit; not converging raises SolverError.

    Returns
    -------
    EquilibriumResult
    """
    T, rho, b = _prepare(T, rho, b)
    g, _, _ = _g_RT(T)
    lnc0 = np.log(thermo.P_REF / (thermo.R_U * T))[:, None] - g
    # elements absent from the mixture (e.g. carbon in hydrogen) get a trace amount
    b = b.copy()
    b[:, :4] = np.maximum(b[:, :4], 1e-14 * b[:, :4].sum(axis=1, keepdims=True))
    ln_b = np.log(b[:, :4] * rho[:, None])
    lam = _start(lnc0, rho, b, ln_b) if lam0 is None else np.array(lam0, dtype=float)
    for it in range(1, max_iter + 1):
        lnc = lnc0 + lam @ _A
        G, J, _, _ = _balance(lnc, ln_b)
        err = np.abs(G).max(axis=1)
        if err.max() < tol:
            break
        # tiny diagonal shift: directions with no influence on the balances
        # (e.g. the redox direction at low T near phi = 1) are left alone
        step = -np.linalg.solve(J + _EPS_I, G[..., None])[..., 0]
        big = np.abs(step).max(axis=1)
        step *= np.minimum(1.0, _STEP_MAX / np.maximum(big, 1e-300))[:, None]
        lam = lam + step
    else:
        bad = int(np.argmax(err))
        raise SolverError(
            f"equilibrium did not converge at T = {T[bad]:.1f} K, rho = {rho[bad]:.4g} kg/m^3"
            f" (element-balance error {err[bad]:.2e})"
        )
    n = np.empty((T.size, len(SPECIES)))
    n[:, :-1] = np.exp(lnc) / rho[:, None]
    n[:, -1] = b[:, 4]
    return EquilibriumResult(n, lam, it)


def equilibrium_properties(T, rho, b, lam0: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Equilibrium burned-gas properties and their exact partial derivatives.

    Parameters
    ----------
    T, rho, b
        As :func:`equilibrate_tv`.

    Returns
    -------
    dict of ndarray (N,)
        ``u`` [J/kg] absolute internal energy; ``u_T`` [J/(kg K)] at constant
        rho (composition shift included); ``u_lnrho`` [J/kg] at constant T;
        ``R`` [J/(kg K)]; ``R_T`` [J/(kg K^2)]; ``R_lnrho`` [J/(kg K)];
        ``cv_frozen`` [J/(kg K)]; and ``n`` (N, 12) [mol/kg].

    Notes
    -----
    Differentiating ln c_j = ln(p0/RT) - g°_j/RT + a_j.lambda and holding the
    element balances fixed gives the potentials' sensitivities from the
    balance Jacobian M_kl = sum_j a_kj a_lj c_j:
    M dlambda/dT = -sum_j a_kj c_j (h_j/(R T^2) - 1/T) and
    M dlambda/dln(rho) = rho b.
    """
    T, rho, b = _prepare(T, rho, b)
    res = equilibrate_tv(T, rho, b, lam0=lam0)
    g, h, cp = _g_RT(T)
    lnc = np.log(thermo.P_REF / (thermo.R_U * T))[:, None] - g + res.lam @ _A
    _, J, e, S = _balance(lnc, np.zeros((T.size, 4)))  # J = M / S row-wise, as in Newton
    dlnc_T0 = (h - 1.0) / T[:, None]  # explicit part of d ln c_j / dT
    # right-hand sides divided by S_k like J's rows: -sum_j a_kj c_j dlnc0_j / S_k and rho b_k / S_k
    rhs_T = -np.einsum("nkj,nj->nk", e, dlnc_T0) / S
    rhs_r = np.ones_like(rhs_T)  # rho b_k / S_k = 1 at convergence
    sol = np.linalg.solve(J + _EPS_I, np.stack([rhs_T, rhs_r], axis=2))
    dlnc_T = dlnc_T0 + sol[:, :, 0] @ _A
    dlnn_r = sol[:, :, 1] @ _A - 1.0  # d ln n_j / d ln rho at constant T
    n = res.n[:, :-1]
    RT = thermo.R_U * T[:, None]
    u_j = RT * (h - 1.0)  # J/mol
    cv_j = thermo.R_U * (cp - 1.0)
    cpa, ha, _ = thermo._dimless_many(_LOW_AR, _HIGH_AR, _TMID_AR, T)
    n_ar = res.n[:, -1]
    u_ar = thermo.R_U * T * (ha[:, 0] - 1.0)
    cv_ar = thermo.R_U * (cpa[:, 0] - 1.0)
    u = (n * u_j).sum(axis=1) + n_ar * u_ar
    cv_frozen = (n * cv_j).sum(axis=1) + n_ar * cv_ar
    u_T = cv_frozen + (n * u_j * dlnc_T).sum(axis=1)
    u_lnrho = (n * u_j * dlnn_r).sum(axis=1)
    R = thermo.R_U * res.n.sum(axis=1)
    R_T = thermo.R_U * (n * dlnc_T).sum(axis=1)
    R_lnrho = thermo.R_U * (n * dlnn_r).sum(axis=1)
    return {
        "u": u, "u_T": u_T, "u_lnrho": u_lnrho, "R": R, "R_T": R_T,
        "R_lnrho": R_lnrho, "cv_frozen": cv_frozen, "n": res.n,
    }


def mole_fractions(n: np.ndarray) -> dict[str, np.ndarray]:
    """Mole fractions [-] by species from amounts ``n`` (N, 12) [mol/kg]."""
    x = n / n.sum(axis=1, keepdims=True)
    return {s: x[:, i] for i, s in enumerate(SPECIES)}
