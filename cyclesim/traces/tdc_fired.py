"""TDC phasing from fired cycles: the compression polytrope fitted with its phase.

For a set with no motored cycles the offset is fitted to the compression stroke before the
spark, where the gas is compressed nearly polytropically:

    p_meas(theta) + c = K V(theta - d)^-n

with the mean over the fired cycles of the pegged pressure ``p_meas`` on the labelled angle
``theta``, the pegging constant c, the polytropic exponent n, the scale K and the offset d
(true TDC at labelled angle d; true angle = labelled - d) fitted together by nonlinear least
squares.  A fixed exponent would absorb the phasing: a shift of the volume curve and a
change of n bend log p - log V alike, so n has to be free, and the pegging constant with it
(the same correlation through the low-pressure end).  A gain error of the sensor scales K
only.

The 95 % interval is the least-squares one (Student t, the Jacobian's covariance scaled by
the residual variance; e.g. Seber & Wild 1989, Nonlinear Regression, sec. 5.1, from
memory), widened for the serial correlation of the residuals by the factor
sqrt((1 + r1) / (1 - r1)) of a first-order autoregressive error (r1 the lag-1
autocorrelation; common practice for correlated residuals).  Systematic departures from a
polytrope (heat loss growing towards TDC, blowby, the sensor's own delay of a recessed
mount, a few hundredths of a degree) are not in the interval; a sensor's delay is by
nature indistinguishable from a TDC offset on compression data.
"""

from __future__ import annotations

import numpy as np

from ..errors import CyclesimError

__all__ = ["fit_tdc_fired", "MAX_INTERVAL_WIDTH_DEG", "WINDOW_DEG"]

#: An estimate whose 95 % interval is wider than this is refused [deg].
MAX_INTERVAL_WIDTH_DEG = 0.3
#: Labelled crank-angle window of the compression fit [deg] (after IVC, before the spark of
#: the built-in configs' part and full load; common practice).
WINDOW_DEG = (-120.0, -45.0)


def fit_tdc_fired(theta, p_mean_pa, volume, window_deg=WINDOW_DEG, n_cycles: int = 1,
                  max_width_deg: float = MAX_INTERVAL_WIDTH_DEG) -> dict:
    """Fit the TDC offset, pegging constant and compression exponent to a mean fired cycle.

    Parameters
    ----------
    theta : ndarray (n,)
        Labelled crank angle [deg].
    p_mean_pa : ndarray (n,)
        Mean pressure of the fired cycles (pegged or not: the constant is fitted) [Pa].
    volume : callable
        V(true crank angle [deg]) [m^3].
    window_deg : (float, float)
        Labelled window of the fit [deg]; must end before combustion starts.
    n_cycles : int
        Cycles in the mean (reported only).
    max_width_deg : float
        The widest 95 % interval accepted [deg].

    Returns
    -------
    dict
        ``offset_deg``, ``interval_deg`` (lo, hi), ``width_deg``, ``n_compression``,
        ``peg_constant_bar`` (c), ``residual_rms_bar``, ``lag1_correlation``,
        ``n_cycles_fit``, ``window_deg``.

    Raises
    ------
    CyclesimError
        Where the fit fails or its interval is wider than ``max_width_deg`` (the reason named).
    """
    from scipy.optimize import least_squares
    from scipy.stats import t as student_t

    th = np.asarray(theta, float)
    p = np.asarray(p_mean_pa, float)
    a, b = window_deg
    m = (th >= a) & (th <= b) & np.isfinite(p)
    if m.sum() < 20:
        raise CyclesimError(f"TDC from fired cycles: the window {a:g}..{b:g} deg holds {int(m.sum())} samples"
                            " (needs 20)")
    t, y = th[m], p[m] / 1e5
    # start: n and K from log p - log V at d = 0 and c = 0
    V0 = np.asarray(volume(t), float)
    ok = y > 0
    n0, lk0 = (-np.polyfit(np.log(V0[ok]), np.log(y[ok]), 1)) if ok.sum() > 3 else (1.3, 0.0)
    lk0 = -lk0

    def model(x):
        lk, n, c, d = x
        return np.exp(lk - n * np.log(np.asarray(volume(t - d), float))) - c

    def res(x):
        return model(x) - y

    x0 = np.array([lk0, n0, 0.0, 0.0])
    sol = least_squares(res, x0, x_scale=np.array([0.1, 0.01, 0.05, 0.1]), method="lm")
    if not sol.success:
        raise CyclesimError(f"TDC from fired cycles: the compression fit did not converge ({sol.message})")
    r = sol.fun
    dof = r.size - 4
    s2 = float(r @ r) / dof
    J = sol.jac
    try:
        cov = np.linalg.inv(J.T @ J) * s2
    except np.linalg.LinAlgError:
        raise CyclesimError("TDC from fired cycles: offset, exponent and pegging constant cannot be told apart"
                            " on this window") from None
    r1 = float(np.corrcoef(r[:-1], r[1:])[0, 1]) if r.size > 3 else 0.0
    r1 = min(max(r1, 0.0), 0.99)
    inflate = np.sqrt((1.0 + r1) / (1.0 - r1))
    sd = float(np.sqrt(max(cov[3, 3], 0.0))) * inflate
    half = float(student_t.ppf(0.975, dof)) * sd
    d = float(sol.x[3])
    out = {"offset_deg": d, "interval_deg": (d - half, d + half), "width_deg": 2.0 * half,
           "n_compression": float(sol.x[1]), "peg_constant_bar": float(sol.x[2]),
           "residual_rms_bar": float(np.sqrt(s2)), "lag1_correlation": r1,
           "n_cycles_fit": int(n_cycles), "window_deg": (float(a), float(b))}
    if not np.isfinite(half) or 2.0 * half > max_width_deg:
        raise CyclesimError(
            f"TDC from fired cycles refused: the 95 % interval of the offset is {2.0 * half:.2f} deg wide"
            f" (more than {max_width_deg:g} deg; offset {d:+.2f} deg, residual {1e3 * np.sqrt(s2):.1f} mbar rms,"
            f" lag-1 correlation {r1:.2f}, {int(n_cycles)} cycles): the compression does not fix the phase"
            " closely enough (more cycles, less noise, or motored cycles with --tdc-correct)")
    return out
