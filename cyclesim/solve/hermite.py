"""Cubic Hermite interpolation of the solver's states between its grid points.

The solver stores each state and its crank-angle derivative at every grid point; the cubic
Hermite interpolant through both is third-order accurate, like the integration, and is how
figures between points (burn angles, peaks, values at IVC) and resampled output are read
(common practice; basis functions as in Press et al. 2007, Numerical Recipes, 3rd ed.,
sec. 3.5).
"""

from __future__ import annotations

import numpy as np

from .resample import hermite_rows, linear_rows, weighted_rows


def interval_of(theta: np.ndarray, at) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Grid interval index, its width [deg] and the local coordinate 0..1 of angles ``at``.

    ``theta`` (N+1,) is increasing, uniform or not; angles outside it extrapolate the
    end intervals.
    """
    a = np.asarray(at, float)
    N = len(theta) - 1
    i = np.clip(np.searchsorted(theta, a, side="right") - 1, 0, N - 1)
    h = theta[i + 1] - theta[i]
    return i, h, (a - theta[i]) / h


def basis(h, t):
    """The cubic Hermite basis in an interval of width ``h`` [deg] at local coordinate ``t`` (0..1):
    ``(h00, h10 h, h01, h11 h)``, the weights of the start value, start slope, end value and end
    slope (Press et al. 2007, Numerical Recipes, 3rd ed., sec. 3.5); every interpolant here uses it."""
    return (2 * t**3 - 3 * t**2 + 1, (t**3 - 2 * t**2 + t) * h, -2 * t**3 + 3 * t**2, (t**3 - t**2) * h)


def hermite(theta: np.ndarray, Yr: np.ndarray, Fr: np.ndarray, at) -> np.ndarray:
    """Cubic Hermite interpolation of one state row (B, N+1) at per-case angles ``at`` (B,)."""
    a = np.asarray(at, float) * np.ones(Yr.shape[0])
    i, h, t = interval_of(theta, a)
    h00, h10h, h01, h11h = basis(h, t)
    r = np.arange(Yr.shape[0])
    return h00 * Yr[r, i] + h10h * Fr[r, i] + h01 * Yr[r, i + 1] + h11h * Fr[r, i + 1]


def hermite_grid(theta: np.ndarray, Yr: np.ndarray, Fr: np.ndarray, grid: np.ndarray,
                 derivative: bool = False) -> np.ndarray:
    """Hermite interpolation of a row (B, N+1) onto a common grid (n,) -> (B, n).

    With ``derivative`` the derivative of the interpolant [unit/deg] instead.
    """
    i, h, t = interval_of(theta, np.asarray(grid, float))
    if derivative:
        d00 = (6 * t**2 - 6 * t) / h
        d10 = 3 * t**2 - 4 * t + 1
        d01 = (-6 * t**2 + 6 * t) / h
        d11 = 3 * t**2 - 2 * t
        return d00 * Yr[:, i] + d10 * Fr[:, i] + d01 * Yr[:, i + 1] + d11 * Fr[:, i + 1]
    h00, h10h, h01, h11h = basis(h, t)
    return h00 * Yr[:, i] + h10h * Fr[:, i] + h01 * Yr[:, i + 1] + h11h * Fr[:, i + 1]


def is_uniform(theta: np.ndarray) -> bool:
    """Whether the grid has one step (to rounding)."""
    d = np.diff(theta)
    return bool(d.size == 0 or np.ptp(d) <= 1e-9 * max(abs(d[0]), 1.0))


class HermiteBasis:
    """The cubic Hermite interpolant from a solver grid ``theta`` (N+1,) onto an output grid
    ``grid`` (n,), its basis evaluated once for every row interpolated.

    The same interval, basis functions and order of the sums as :func:`hermite_grid`, so the
    values are identical to the digit.  Also the linear interpolant of the slopes
    (:meth:`linear`), as ``numpy.interp`` gives it, from the same intervals.
    """

    def __init__(self, theta: np.ndarray, grid: np.ndarray):
        i, h, t = interval_of(theta, np.asarray(grid, float))
        self.n = t.size
        self.i, self.i1 = i, i + 1
        self.h00, self.h10h, self.h01, self.h11h = basis(h, t)
        self._tmp = np.empty(t.size)
        self.grid = np.asarray(grid, float)
        self.theta = np.asarray(theta, float)
        self.dx = self.grid - self.theta[i]
        self.dth = self.theta[i + 1] - self.theta[i]
        self.at_end = self.grid >= self.theta[-1]
        self._h, self._t = h, t
        self._slope_basis = None

    def row(self, y: np.ndarray, f: np.ndarray, out: np.ndarray) -> np.ndarray:
        """Values on the output grid into ``out`` (n,) from values ``y`` and slopes ``f`` [per deg]
        (N+1,) of one row; the working arrays are one row long."""
        tmp = self._tmp
        np.take(y, self.i, out=out)
        out *= self.h00
        np.take(f, self.i, out=tmp)
        tmp *= self.h10h
        out += tmp
        np.take(y, self.i1, out=tmp)
        tmp *= self.h01
        out += tmp
        np.take(f, self.i1, out=tmp)
        tmp *= self.h11h
        out += tmp
        return out

    def rows(self, Yr: np.ndarray, Fr: np.ndarray) -> np.ndarray:
        """Values on the output grid (B, n) of a row (B, N+1) and its slopes [per deg]."""
        got = hermite_rows(self, Yr, Fr)         # the same arithmetic in one compiled pass
        if got is not None:
            return got
        i, i1 = self.i, self.i1
        return self.h00 * Yr[:, i] + self.h10h * Fr[:, i] + self.h01 * Yr[:, i1] + self.h11h * Fr[:, i1]

    def derivative(self, Yr: np.ndarray, Fr: np.ndarray) -> np.ndarray:
        """The derivative of the interpolant [unit/deg] on the output grid (B, n) of a row (B, N+1)
        and its slopes, as :func:`hermite_grid` with ``derivative`` gives it (the same weights and
        order of the sums)."""
        if self._slope_basis is None:
            h, t = self._h, self._t
            self._slope_basis = ((6 * t**2 - 6 * t) / h, 3 * t**2 - 4 * t + 1, (-6 * t**2 + 6 * t) / h,
                                 3 * t**2 - 2 * t)
        w = self._slope_basis
        got = weighted_rows(self.i, w, Yr, Fr)
        if got is not None:
            return got
        i, i1 = self.i, self.i1
        return w[0] * Yr[:, i] + w[1] * Fr[:, i] + w[2] * Yr[:, i1] + w[3] * Fr[:, i1]

    def linear(self, Fr: np.ndarray) -> np.ndarray:
        """Linear interpolation (B, n) of a row (B, N+1) known at the solver's points, in the form
        of ``numpy.interp`` (the slope of the interval times the distance from its start, plus
        its start value; the end value at and beyond the last point)."""
        got = linear_rows(self, Fr)
        if got is not None:
            return got
        i, i1 = self.i, self.i1
        th = self.theta
        slope = (Fr[:, i1] - Fr[:, i]) / (th[i1] - th[i])
        out = slope * self.dx + Fr[:, i]
        if self.at_end.any():
            out[:, self.at_end] = Fr[:, -1:]
        return out
