"""Reading a spark sweep's curves: the torque maximum from a local least-squares polynomial,
the first upward crossing of a level, and linear interpolation at one abscissa (pure functions on
arrays, used by the spark study, the point spark search and the uncertainty study)."""

from __future__ import annotations

import numpy as np

from ..errors import CyclesimError


def fit_torque_peak(advance_deg: np.ndarray, torque: np.ndarray, window_fraction: float = 0.03) -> dict:
    """Advance and value of the torque maximum from a local least-squares polynomial.

    Parameters
    ----------
    advance_deg : array (n,)
        Spark advances, ascending [deg before TDC].
    torque : array (n,)
        Torque (or IMEP) at each advance [N m or bar].
    window_fraction : float
        Points whose torque is within this fraction of the highest are fitted
        (a contiguous run around the highest point; at least the highest point
        and its two neighbours) [-].

    Returns
    -------
    dict
        ``bracketed`` (False when the highest point is at an end of the
        sweep: then the maximum lies outside it and ``mbt_deg`` is None),
        ``edge`` ("low"/"high" when not bracketed), ``mbt_deg``, ``best``,
        ``degree``, ``window_deg`` (lo, hi), ``coef`` (power-series
        coefficients in advance, lowest first), ``poly`` (callable).

    Notes
    -----
    Near its maximum the torque-advance curve is flat and skewed (it falls
    faster with over-advance than with retard), so a parabola through a few
    percent of torque puts the maximum too early.  The degree rises with the
    points in the window: quadratic for 3-4, cubic for 5-6, quartic from 7,
    always leaving at least two degrees of freedom for the least squares
    (except with 3 points, where the parabola interpolates).
    """
    a = np.asarray(advance_deg, float)
    t = np.asarray(torque, float)
    n = len(a)
    if n < 3:
        raise CyclesimError(f"spark study: {n} valid advance(s); at least 3 are needed to find MBT")
    k = int(np.argmax(t))
    if k == 0 or k == n - 1:
        return {"bracketed": False, "edge": "low" if k == 0 else "high", "mbt_deg": None,
                "best": float(t[k]), "degree": None, "window_deg": None, "coef": None, "poly": None}
    level = t[k] * (1.0 - window_fraction) if t[k] >= 0 else t[k] * (1.0 + window_fraction)
    lo = k
    while lo > 0 and t[lo - 1] >= level:
        lo -= 1
    hi = k
    while hi < n - 1 and t[hi + 1] >= level:
        hi += 1
    lo, hi = min(lo, k - 1), max(hi, k + 1)
    npts = hi - lo + 1
    deg = 4 if npts >= 7 else 3 if npts >= 5 else 2
    P = np.polynomial.Polynomial.fit(a[lo: hi + 1], t[lo: hi + 1], deg)
    cand = [a[lo], a[hi]]
    for r in P.deriv().roots():
        if abs(r.imag) < 1e-9 and a[lo] <= r.real <= a[hi]:
            cand.append(float(r.real))
    vals = [float(P(c)) for c in cand]
    j = int(np.argmax(vals))
    mbt, best = float(cand[j]), vals[j]
    conv = P.convert()
    return {"bracketed": True, "edge": None, "mbt_deg": mbt, "best": best, "degree": deg,
            "window_deg": (float(a[lo]), float(a[hi])), "coef": [float(c) for c in conv.coef],
            "poly": P}


def crossing_up(x: np.ndarray, y: np.ndarray, level: float) -> tuple[float | None, str]:
    """Least ``x`` at which ``y`` reaches ``level``, rising with ``x``, linearly interpolated.

    Returns ``(x_cross, status)`` with status ``"crossed"``, ``"always"``
    (``y >= level`` already at the first point: x_cross None) or ``"never"``
    (``y < level`` everywhere: x_cross None).  NaN entries count as below the
    level.
    """
    x = np.asarray(x, float)
    y = np.where(np.isfinite(np.asarray(y, float)), np.asarray(y, float), -np.inf)
    above = y >= level
    if not above.any():
        return None, "never"
    i = int(np.argmax(above))
    if i == 0:
        return None, "always"
    y0 = y[i - 1]
    if not np.isfinite(y0):
        return float(x[i]), "crossed"
    w = (level - y0) / (y[i] - y0)
    return float(x[i - 1] + w * (x[i] - x[i - 1])), "crossed"


def interp_at(x: np.ndarray, y: np.ndarray, at: float) -> float | None:
    ok = np.isfinite(y)
    if ok.sum() < 2 or at is None:
        return None
    xs, ys = x[ok], y[ok]
    if not xs[0] <= at <= xs[-1]:
        return None
    if len(xs) >= 4:
        from scipy.interpolate import CubicSpline

        return float(CubicSpline(xs, ys)(at))
    return float(np.interp(at, xs, ys))


# --------------------------------------------------------------------------
# Result
# --------------------------------------------------------------------------
