"""TDC phasing from fired cycles: the first law of the compression before the spark, fitted with its phase.

For a set with no motored cycles the offset d (true TDC at labelled angle d; true angle =
labelled - d) is fitted to the compression stroke between IVC and the spark, where the charge
is closed and nothing burns, so its gross heat release must stay zero:

    Q(theta) = m [u(T(theta)) - u(T(theta_a))] + integral_a^theta p dV
               + a H_T(theta) - b H_1(theta) - q0 = 0

with p = p_mean + c the mean of the fired cycles' pegged pressure plus a pegging constant c,
V = V(theta - d), T from p V = m R(T) T, u and R of the fresh charge with its residual share
(the analyser's gas tables, NASA-7 data), and the wall heat written as Woschni's coefficient
h (Woschni 1967, SAE 670931, the compression-stroke form with C2 = 0; the analyser's own
correlation) over the area A in two parts, H_T = integral h A T dtheta and
H_1 = integral h A dtheta [per the lumped law q = h A (T - T_w)], whose weights a and b are
fitted: a is the Woschni multiplier and b / a the mean wall temperature.  d and c are fitted
by nonlinear least squares, a, b and the level q0 with them.  Residuals are weighted by
(gamma - 1) / V, which turns the release into the pressure it stands for, so the noise of the
mean pressure enters with equal weight along the window.

Why this model and not a polytrope.  A polytrope p + c = K V(theta - d)^-n with n free (a
fixed n absorbs phasing) leaves d nearly undetermined on a window that ends before the spark:
on 10-cycle sets its 95 % interval was 8-22 deg wide, and ending the window nearer TDC to
narrow it biased it, because wall heat bends the compression away from any polytrope.  The
first law with a fixed gas table and the wall heat's shape from Woschni fixes what the free
exponent left open; freeing the two wall-heat weights lets the size of the wall heat, the
mean wall temperature, and an error of the assumed residual share (it moves the gas's
specific heats much as a wall-heat change does) be fitted instead of being absorbed by d.
Measured on the demo's noise-free compression from the simulator (spark 24 deg BTDC, window
-126..-30 deg): d = +0.013 deg with blowby and the residual share assumed 0.07 (the
simulator's is about 0.05); +0.023 deg without blowby; with the residual share right and no
blowby -0.011 deg.  With the analyser's single wall temperature (only the multiplier fitted, or
fixed at 1) the same traces gave -0.03 to -0.12 deg, and an adiabatic trace with the residual
share wrong and no wall heat fitted +0.35 deg.

The interval.  The 95 % interval is the least-squares one (Student t, the Jacobian's
covariance scaled by the residual variance; Seber & Wild 1989, Nonlinear Regression, sec. 5.1,
from memory), widened for serial correlation of the residuals by sqrt((1 + r1) / (1 - r1)) of a
first-order autoregressive error (r1 the lag-1 autocorrelation, clipped at 0; common practice).
The residuals of the mean of 300 demo cycles are white (r1 0.00-0.05 measured) and their rms
is the noise of the mean (2.3 mbar from 0.04 bar per sample), so the asymptotic interval is
the statistical one.  Not in the interval: what the model leaves out (blowby, the
correlation's own shape; the few hundredths of a degree measured above) and a delay of the
sensor itself (a recessed mount's passage resonance delays the signal by 2 zeta / omega_n,
0.05 deg for 12 kHz and zeta 0.1 at 3000 rpm; second-order low-pass, common practice), which
on compression data cannot be told from a TDC offset.  Where the mount is known, its delay is
given (``sensor_delay_deg``; ``cyclesim analyse --sensor-delay-us``) and taken off the phase
found.  Measured on 300-cycle demo sets with a 12 kHz, zeta 0.1 passage: the phase found lies
+0.053 / +0.057 deg (two seeds) beyond the one found without the resonance, against the
2 zeta / omega_n = 0.048 deg predicted.

The window ends ``SPARK_MARGIN_DEG`` before the spark where the spark advance is known (the
engine config's ``burn.spark_advance_deg``), else at ``WINDOW_END_DEG``; it starts
``IVC_MARGIN_DEG`` after IVC.  The information on d grows steeply towards TDC: on 300 demo
cycles (0.04 bar noise at 0.2 deg) the interval is about 0.18 deg wide for a window ending at
-26 deg and 0.30 deg at -30 deg.

Coverage (``python benchmarks/tdc_fired_coverage.py``): on 10 seeded sets of 300 cycles per
offset (0.2, 0.5, 1.0 deg; the demo at full load, 0.2 deg, default flaws plus 0.04 bar noise,
-2 % gain, a 12 kHz passage whose delay is given) the interval held the truth in 9, 10 and 10
sets, 0.16-0.20 deg wide, mean error +0.01 deg; without the delay given 8, 8 and 9 (mean error
+0.06 deg).  300 cycles is a usual recording for combustion statistics (common practice); at
100 cycles the width is about 0.3 deg and the estimate is often refused.
"""

from __future__ import annotations

import numpy as np

from ..errors import CyclesimError

__all__ = ["fit_tdc_fired", "fired_window", "compression_release", "MAX_INTERVAL_WIDTH_DEG", "WINDOW_END_DEG", "SPARK_MARGIN_DEG",
           "IVC_MARGIN_DEG"]

#: An estimate whose 95 % interval is wider than this is refused [deg].
MAX_INTERVAL_WIDTH_DEG = 0.3
#: End of the window where the spark is not known [deg] (labelled; before the spark of the
#: built-in configs at part and full load).
WINDOW_END_DEG = -40.0
#: The window ends this far before the spark [deg] (labelled angle: it also leaves room for a
#: TDC offset of a degree or so).
SPARK_MARGIN_DEG = 2.0
#: The window starts this far after IVC [deg] (the valve's last flow over).
IVC_MARGIN_DEG = 10.0
#: Temperature grid of the gas-property lookup [K] (first, last, step).
_T_GRID = (200.0, 1600.0, 2.0)


def fired_window(ivc_deg: float, spark_advance_deg: float | None) -> tuple[float, float]:
    """Labelled window [deg] of the compression fit: from IVC + margin to the spark - margin."""
    end = WINDOW_END_DEG if spark_advance_deg is None else -float(spark_advance_deg) - SPARK_MARGIN_DEG
    return float(ivc_deg) + IVC_MARGIN_DEG, float(end)


def _gas_lookup(gas, rho: float, burned_fraction: float):
    """u(T) [J/kg] and R(T) [J/(kg K)] of the charge on a temperature grid (fixed density and
    burned share: below about 1000 K the properties hardly depend on density)."""
    Tg = np.arange(*_T_GRID)
    mp = gas.mixture_points(Tg, np.full(Tg.shape, rho), np.full(Tg.shape, burned_fraction))
    return Tg, np.asarray(mp.u, float), np.asarray(mp.R, float)


def compression_release(p, V, mass: float, lookup) -> tuple[np.ndarray, np.ndarray]:
    """Apparent release [J] of a closed charge from the first sample, and its temperature [K].

    ``Q = m [u(T) - u(T_0)] + integral p dV`` (trapezoid) with T from ``p V = m R(T) T``;
    ``lookup`` = (T grid [K], u [J/kg], R [J/(kg K)]) of the charge (:func:`_gas_lookup`).
    Zero along an isentrope of the same gas; minus the wall heat lost otherwise.
    """
    Tg, ug, Rg = lookup
    T = p * V / (mass * float(np.interp(500.0, Tg, Rg)))
    for _ in range(4):
        T = p * V / (mass * np.interp(T, Tg, Rg))
    u = np.interp(T, Tg, ug)
    W = np.concatenate([[0.0], np.cumsum(0.5 * (p[1:] + p[:-1]) * np.diff(V))])
    return mass * (u - u[0]) + W, T


def fit_tdc_fired(theta, p_cycles_pa, volume, gas, mass_kg, burned_fraction: float, wall_heat,
                  window_deg, T_start_K: float = 350.0, sensor_delay_deg: float = 0.0,
                  max_width_deg: float = MAX_INTERVAL_WIDTH_DEG) -> dict:
    """Fit the TDC offset and the pegging constant to the fired cycles' compression.

    Parameters
    ----------
    theta : ndarray (n,)
        Labelled crank angle [deg].
    p_cycles_pa : ndarray (n_cycles, n) or (n,)
        Pegged pressure of the fired cycles (or their mean) [Pa].
    volume : callable
        V(true crank angle [deg]) [m^3].
    gas : cyclesim.solve.gas_tables.GasTables
        Property tables of the charge (``mixture_points``).
    mass_kg : float or None
        Trapped mass [kg]; None: from the mean pressure at the window's start and ``T_start_K``.
    burned_fraction : float
        Burned-gas mass share of the charge (residual plus EGR) [-].
    wall_heat : callable
        ``wall_heat(th, p, V, T, T_wall)`` -> cumulative Woschni wall heat [J] over the samples
        with multiplier 1 and wall temperature ``T_wall`` [K].
    window_deg : (float, float)
        Labelled window of the fit [deg]; must end before the spark.
    T_start_K : float
        Assumed gas temperature at the window's start where the mass is not given [K].
    sensor_delay_deg : float
        Known delay of the pressure signal behind the chamber [deg] (a recessed mount's passage:
        2 zeta / omega_n at the set's speed); the phase fitted is the offset plus this delay, so
        it is taken off the offset.
    max_width_deg : float
        The widest 95 % interval accepted [deg].

    Returns
    -------
    dict
        ``offset_deg`` (labelling offset: the fitted phase less the sensor delay), ``interval_deg``
        (lo, hi), ``width_deg``, ``phase_deg`` (fitted), ``sensor_delay_deg``, ``peg_constant_bar`` (c),
        ``woschni_multiplier_fit`` (a), ``wall_temperature_fit_K`` (b / a),
        ``residual_rms_bar`` (as pressure), ``lag1_correlation``, ``n_cycles_fit``, ``window_deg``.

    Raises
    ------
    CyclesimError
        Where the fit fails or its interval is wider than ``max_width_deg`` (the reason named).
    """
    from scipy.optimize import least_squares
    from scipy.stats import t as student_t

    th = np.asarray(theta, float)
    P = np.atleast_2d(np.asarray(p_cycles_pa, float))
    n_cycles = P.shape[0]
    p_mean = np.mean(P, axis=0)
    a, b = (float(v) for v in window_deg)
    m = (th >= a) & (th <= b) & np.isfinite(p_mean)
    if not a < b or m.sum() < 20:
        raise CyclesimError(f"TDC from fired cycles: the window {a:g}..{b:g} deg holds {int(m.sum())} samples"
                            " (needs 20; the spark too early or the resolution too coarse)")
    t, pw = th[m], p_mean[m]
    V0 = np.asarray(volume(t), float)
    if mass_kg is None:
        Tg0, _, Rg0 = _gas_lookup(gas, 1.0, float(burned_fraction))
        mass_kg = pw[0] * V0[0] / (float(np.interp(T_start_K, Tg0, Rg0)) * float(T_start_K))
    mass = float(mass_kg)
    Tg, ug, Rg = _gas_lookup(gas, mass / float(np.mean(V0)), float(burned_fraction))
    weight = 0.35 / 1e5          # (gamma - 1) / V per volume: the release as pressure [bar]

    lookup = (Tg, ug, Rg)

    def parts(d, c):
        p = pw + c
        V = np.asarray(volume(t - d), float)
        q, T = compression_release(p, V, mass, lookup)
        h_T = wall_heat(t - d, p, V, T, 0.0)
        h_1 = h_T - wall_heat(t - d, p, V, T, 1.0)
        return q, h_T, h_1, V

    def res(x):
        d, c_bar, q0, ka, kb = x
        q, h_T, h_1, V = parts(d, c_bar * 1e5)
        return (q + ka * h_T - 500.0 * kb * h_1 - q0) * weight / V

    x0 = np.array([0.0, 0.0, 0.0, 1.0, 1.0])
    try:
        sol = least_squares(res, x0, x_scale=np.array([0.1, 0.05, 1.0, 0.3, 0.3]))
    except (ValueError, FloatingPointError) as exc:
        raise CyclesimError(f"TDC from fired cycles: the compression fit failed ({exc})") from None
    if not sol.success or not np.all(np.isfinite(sol.x)):
        raise CyclesimError(f"TDC from fired cycles: the compression fit did not converge ({sol.message})")
    r = sol.fun
    dof = r.size - x0.size
    s2 = float(r @ r) / dof
    J = sol.jac
    try:
        cov = np.linalg.inv(J.T @ J) * s2
    except np.linalg.LinAlgError:
        raise CyclesimError("TDC from fired cycles: offset, pegging constant and wall heat cannot be told apart"
                            " on this window") from None
    r1 = float(np.corrcoef(r[:-1], r[1:])[0, 1]) if r.size > 3 else 0.0
    r1 = min(max(r1, 0.0), 0.99) if np.isfinite(r1) else 0.0
    inflate = np.sqrt((1.0 + r1) / (1.0 - r1))
    sd = float(np.sqrt(max(cov[0, 0], 0.0))) * inflate
    half = float(student_t.ppf(0.975, dof)) * sd
    phase = float(sol.x[0])
    d = phase - float(sensor_delay_deg)
    ka, kb = float(sol.x[3]), float(sol.x[4])
    out = {"offset_deg": d, "interval_deg": (d - half, d + half), "width_deg": 2.0 * half,
           "phase_deg": phase, "sensor_delay_deg": float(sensor_delay_deg),
           "peg_constant_bar": float(sol.x[1]), "woschni_multiplier_fit": ka,
           "wall_temperature_fit_K": 500.0 * kb / ka if ka else float("nan"),
           "residual_rms_bar": float(np.sqrt(s2)), "lag1_correlation": r1,
           "n_cycles_fit": int(n_cycles), "window_deg": (a, b)}
    if not np.isfinite(half) or 2.0 * half > max_width_deg:
        raise CyclesimError(
            f"TDC from fired cycles refused: the 95 % interval of the offset is {2.0 * half:.2f} deg wide"
            f" (more than {max_width_deg:g} deg; offset {d:+.2f} deg, residual {1e3 * np.sqrt(s2):.1f} mbar rms,"
            f" lag-1 correlation {r1:.2f}, {int(n_cycles)} cycles, window {a:g}..{b:g} deg): the compression"
            " before the spark does not fix the phase closely enough (more cycles, less noise, a window"
            " nearer the spark, or motored cycles with --tdc-correct)")
    return out
