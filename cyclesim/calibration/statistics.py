"""Covariance at the solution: classical and HAC (Newey & West 1987) estimates, confidence intervals and the separability checks."""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from ..errors import ConfigError
from .problem import NUISANCE_TERMS


CORRELATION_LIMIT = 0.95
"""|correlation| above which two fitted parameters count as not separable by the data."""

RESIDUAL_CORRELATION_LIMIT = 0.1
"""An effective sample size below this share of the residual count raises a warning."""

SENSITIVITY_LIMIT = 1e-3
"""A parameter whose 1 % change moves the weighted residual RMS by less than this
share of the residual RMS itself counts as flat (the data do not see it)."""


# --------------------------------------------------------------------------
# Statistics
# --------------------------------------------------------------------------


def _hac(J: np.ndarray, r: np.ndarray, segments: Sequence[int]):
    """Newey-West sandwich 'meat' and the effective sample size.

    Lags are taken within each residual segment (one per record and target),
    in crank-angle order.
    """
    p = J.shape[1]
    S = np.zeros((p, p))
    n_eff = 0.0
    L_used = 0
    o = 0
    for n in segments:
        rs, Js = r[o:o + n], J[o:o + n]
        o += n
        c0 = float(rs @ rs) / n
        if c0 <= 0 or n < 4:
            continue
        L = n // 4
        acf = np.array([float(rs[l:] @ rs[:-l]) / n / c0 for l in range(1, L + 1)])
        neg = np.flatnonzero(acf <= 0)
        L = int(neg[0]) + 1 if neg.size else L
        L_used = max(L_used, L)
        G = Js * rs[:, None]
        Sseg = G.T @ G
        for l in range(1, L + 1):
            w = 1.0 - l / (L + 1.0)
            Gl = G[l:].T @ G[:-l]
            Sseg += w * (Gl + Gl.T)
        S += Sseg
        tau = 1.0 + 2.0 * float(np.sum((1.0 - np.arange(1, L + 1) / (L + 1.0)) * acf[:L]))
        n_eff += n / max(tau, 1.0)
    return S, n_eff, L_used


def _clip_interval(low, high, lo, hi):
    """Confidence limits clipped to the allowed range [lo, hi]; and which were clipped.

    A symmetric interval that crosses a bound (a multiplier below 0) states values the
    parameter cannot take; it is cut at the bound (the interval then no longer has its
    nominal coverage, which the bound warning says).
    """
    low, high = np.asarray(low, float), np.asarray(high, float)
    lo, hi = np.asarray(lo, float), np.asarray(hi, float)
    clipped = (low < lo) | (high > hi)
    return np.maximum(low, lo), np.minimum(high, hi), clipped


def _statistics(J: np.ndarray, r: np.ndarray, x: np.ndarray, lo, hi, names, segments, level: float,
                covariance: str, n_nuisance: int = 0, systematic=()) -> dict:
    """Covariance, intervals and identifiability of a solution.

    ``n_nuisance`` profiled-out measurement terms use up degrees of freedom.
    ``systematic`` is a sequence of ``(sd, v)``: a systematic error of standard
    uncertainty ``sd`` that moves the residual vector by ``v`` per unit; its
    first-order effect on the parameters, ``g = -(J^T J)^-1 J^T v``, adds
    ``sd^2 g g^T`` to the covariance (a type-B component combined with the
    statistical one in quadrature, JCGM 100:2008 (GUM) sec. 5.1).
    """
    from scipy import stats

    n, p = J.shape
    warnings: list[str] = []
    ssr = float(r @ r)
    dof = max(n - p - int(n_nuisance), 1)
    s2 = ssr / dof
    # column scaling for a meaningful condition number
    cn = np.linalg.norm(J, axis=0)
    scale = np.where(cn > 0, cn, 1.0)
    Js = J / scale
    sv = np.linalg.svd(Js, compute_uv=False)
    cond = float(sv[0] / sv[-1]) if sv[-1] > 0 else np.inf
    singular = not np.isfinite(cond) or cond > 1e8
    A = Js.T @ Js
    Ainv_s = np.linalg.pinv(A, rcond=1e-14) if singular else np.linalg.inv(A)
    Ainv = Ainv_s / np.outer(scale, scale)
    C_classic = s2 * Ainv
    S, n_eff, L = _hac(J, r, segments)
    C_hac = Ainv @ S @ Ainv * n / dof
    if covariance == "classical":
        C, dof_t = C_classic, dof
    elif covariance == "hac":
        C, dof_t = C_hac, max(n_eff - p, 1.0)
    else:
        raise ConfigError(f"fit: covariance = {covariance!r}: choose classical or hac")
    C_sys = np.zeros((p, p))
    for sd_k, v in systematic:
        g = -Ainv @ (J.T @ v)
        C_sys += float(sd_k) ** 2 * np.outer(g, g)
    C_stat = C
    C = C_stat + C_sys
    if np.any(np.diag(C_sys) > 0):
        # Welch-Satterthwaite effective dof of the combined variance (GUM sec. G.4), the
        # type-B part taken as exactly known (infinite dof)
        v_stat, v_all = np.diag(C_stat), np.diag(C)
        with np.errstate(invalid="ignore", divide="ignore"):
            dof_j = np.where(v_stat > 0, dof_t * (v_all / v_stat) ** 2, np.inf)
        dof_t = float(min(np.min(dof_j), 1e6))
    sd = np.sqrt(np.maximum(np.diag(C), 0.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = C / np.outer(sd, sd)
    corr = np.where(np.isfinite(corr), corr, 0.0)
    np.fill_diagonal(corr, 1.0)
    tq = float(stats.t.ppf(0.5 + level / 2.0, dof_t))
    # flat parameters: effect of a 1 % change on the weighted residual RMS
    rms = math.sqrt(ssr / n) if n else 0.0
    delta = 0.01 * np.maximum(np.abs(x), 0.01 * np.where(np.isfinite(hi - lo), hi - lo, 1.0))
    sens = cn * delta / math.sqrt(max(n, 1))
    ref = max(rms, 1e-12)
    for j, nm in enumerate(names):
        if sens[j] < SENSITIVITY_LIMIT * ref or cn[j] == 0:
            warnings.append(
                f"{nm}: flat: a 1 % change moves the fit by {sens[j]:.2e} (residual RMS {rms:.2e});"
                f" the data cannot determine it")
    if singular:
        warnings.append(
            f"J^T J is singular or nearly so (condition number of the scaled Jacobian {cond:.3g}):"
            f" some combination of {', '.join(names)} is not determined by the data")
    # identifiability is a property of the data (the statistical part): a systematic term common to
    # all parameters (TDC phasing, IVC pressure) correlates their errors without making them inseparable
    sd_st = np.sqrt(np.maximum(np.diag(C_stat), 0.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr_st = C_stat / np.outer(sd_st, sd_st)
    corr_st = np.where(np.isfinite(corr_st), corr_st, 0.0)
    for i in range(p):
        for j in range(i + 1, p):
            if abs(corr_st[i, j]) > CORRELATION_LIMIT:
                warnings.append(
                    f"{names[i]} and {names[j]}: correlation {corr_st[i, j]:+.3f} (|r| > {CORRELATION_LIMIT}):"
                    f" the data cannot tell them apart; fix one of them or add data that separates them")
    if n_eff and n_eff < RESIDUAL_CORRELATION_LIMIT * n:
        warnings.append(
            f"the residuals are strongly serially correlated (effective sample size {n_eff:.0f} of {n}):"
            f" a smooth misfit (model error or a measurement flaw) dominates the noise; the intervals"
            f" then rest on few effective samples, and a flaw the model lacks biases the values"
            f" (consider the nuisance terms {', '.join(NUISANCE_TERMS)})")
    eps = 1e-9 * np.maximum(np.where(np.isfinite(hi - lo), hi - lo, 1.0), 1.0)
    for j, nm in enumerate(names):
        if x[j] <= lo[j] + eps[j] or x[j] >= hi[j] - eps[j]:
            warnings.append(f"{nm} = {x[j]:g} lies at its bound [{lo[j]:g}, {hi[j]:g}]: its interval is not reliable")
    ci_low, ci_high, clipped = _clip_interval(x - tq * sd, x + tq * sd, lo, hi)
    return {
        "covariance": C, "covariance_classical": C_classic, "covariance_hac": C_hac,
        "covariance_systematic": C_sys,
        "stderr": sd, "correlation": corr, "ci_low": ci_low, "ci_high": ci_high, "ci_clipped": clipped,
        "t_quantile": tq, "dof": float(dof_t), "s2": s2, "rms": rms, "n": n, "n_eff": n_eff,
        "hac_lag": L, "condition_number": cond, "sensitivity": sens, "warnings": warnings,
        "stderr_systematic": np.sqrt(np.maximum(np.diag(C_sys), 0.0)),
    }
