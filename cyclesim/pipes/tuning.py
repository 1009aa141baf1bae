"""The tuned speed of an intake runner and its dependence on the runner's length.

The tuned speed is the engine speed of the volumetric-efficiency maximum over a speed sweep
(:func:`peak_speed`); over several runner lengths L its power law N_t ~ L^b is fitted in
log-log (:func:`fit_exponent`).

Estimate stated before the full-resolution study (:data:`HELMHOLTZ_EXPONENT`): the
Helmholtz-resonator estimate of the intake's tuning, b = -1/2.  The runner is the resonator's
neck (area A, length L), the cylinder at mid-stroke, V = V_d (r + 1) / (2 (r - 1)), its volume,
so f_H = c / (2 pi) sqrt(A / (L V)) (:func:`helmholtz_frequency_hz`), and the tuned speed is a
fixed ratio of f_H to the engine's rotational frequency (Engelman 1973, ASME paper 73-WA/DGP-2;
Heywood 1988 sec. 7.6; from memory, not checkable here).  The organ-pipe estimate stated
before the quick study, b = -1 (a fixed number of wave round trips 2 L / c in the intake event),
was refuted by it (b = -0.48 from speeds 1000 rpm apart at 350, 500 and 700 mm): with the valve
open the runner's gas moves as one slug against the cylinder's compliance, as in a resonator.
"""

from __future__ import annotations

import math

import numpy as np

HELMHOLTZ_EXPONENT = -0.5
"""Exponent b of N_t ~ L^b of the Helmholtz-resonator estimate (Engelman 1973; Heywood 1988 sec. 7.6;
from memory)."""
EXPONENT_TOLERANCE = 0.2
"""The fitted exponent is checked within this of :data:`HELMHOLTZ_EXPONENT` (the wave-action issue's bound)."""


def peak_speed(speeds_rpm, ve) -> tuple[float, bool]:
    """Speed [rpm] of the volumetric-efficiency maximum: the vertex of the parabola through the
    highest point and its two neighbours.  Returns ``(speed, interior)``; ``interior`` is False
    where the highest point is an end of the sweep (the vertex is then that end's speed)."""
    x = np.asarray(speeds_rpm, dtype=float)
    y = np.asarray(ve, dtype=float)
    if x.shape != y.shape or x.size < 3 or np.any(np.diff(x) <= 0):
        raise ValueError("peak_speed: needs at least three increasing speeds and one value per speed")
    i = int(np.argmax(y))
    if i == 0 or i == x.size - 1:
        return float(x[i]), False
    a, b, _ = np.polyfit(x[i - 1:i + 2], y[i - 1:i + 2], 2)
    return float(-b / (2.0 * a)), True


def fit_exponent(lengths_mm, peaks_rpm) -> tuple[float, float]:
    """Exponent b of ``peaks ~ lengths^b`` by least squares in log-log and its standard error
    (from the residuals; nan with only two lengths)."""
    x = np.log(np.asarray(lengths_mm, dtype=float))
    y = np.log(np.asarray(peaks_rpm, dtype=float))
    if x.size < 2 or x.shape != y.shape:
        raise ValueError("fit_exponent: needs at least two lengths and one peak per length")
    xm = x - x.mean()
    b = float(np.dot(xm, y - y.mean()) / np.dot(xm, xm))
    if x.size < 3:
        return b, math.nan
    r = y - y.mean() - b * xm
    return b, float(math.sqrt(np.dot(r, r) / (x.size - 2) / np.dot(xm, xm)))


def helmholtz_frequency_hz(sound_speed_m_s, neck_area_m2, neck_length_m, volume_m3):
    """Helmholtz resonator frequency f = c / (2 pi) sqrt(A / (L V)) [Hz], without end correction
    (a one-dimensional runner has none)."""
    return sound_speed_m_s / (2.0 * math.pi) * np.sqrt(neck_area_m2 / (neck_length_m * volume_m3))
