"""Figures read between the grid points: peaks of the trace rows found off the grid."""

from __future__ import annotations

import numpy as np
import pytest

import cyclesim
from cyclesim.results.figures import hermite_peak, parabola_peak


def test_parabola_peak_is_exact_for_a_parabola_on_a_non_uniform_grid():
    # the vertex of y = -(x - 2.2)^2 + 3 (a parabola through any three points is itself)
    th = np.array([0.0, 1.0, 2.5, 3.0, 5.0])
    y = -(th - 2.2) ** 2 + 3.0
    t, v = parabola_peak(th, np.vstack([y, y[::-1]]))
    assert t[0] == pytest.approx(2.2, abs=1e-12) and v[0] == pytest.approx(3.0, abs=1e-12)
    # a peak at the window's edge stays on the grid
    t, v = parabola_peak(th, (th * 1.0)[None, :], hi=3.0)
    assert t[0] == 3.0 and v[0] == 3.0


def test_hermite_peak_is_exact_for_a_cubic():
    # Hermite interpolation with exact slopes reproduces a cubic, so its maximum is the cubic's:
    # y = -x^3 + 3x on [0, 2] peaks at x = 1, y = 2 (calculus)
    th = np.linspace(0.0, 2.0, 5)
    y, dy = -th**3 + 3 * th, -3 * th**2 + 3
    t, v = hermite_peak(th, y[None, :], dy[None, :])
    assert t[0] == pytest.approx(1.0, abs=1e-9) and v[0] == pytest.approx(2.0, abs=1e-12)


def test_rate_and_temperature_peaks_move_smoothly_with_the_spark():
    # one degree of advance moves the angle of the largest pressure-rise rate by about a degree
    # (the burn moves with the spark): read off a 2-deg grid it would jump in whole grid steps
    res = cyclesim.simulate([cyclesim.load_config("demo_closed", [f"burn.spark_advance_deg={a}"])
                             for a in (20.0, 20.5, 21.0, 21.5, 22.0)])
    t = np.array([r.summary["theta_dp_max_deg"] for r in res])
    steps = -np.diff(t)
    assert np.all((steps > 0.2) & (steps < 0.8))
    T = np.array([r.summary["T_max_K"] for r in res])
    assert np.all(np.diff(T) > 0)                    # earlier burn, hotter peak (smoothly)
