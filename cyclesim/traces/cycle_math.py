"""Cycle arithmetic of the analyser: the volume function, window means, p dV, the pressure peak,
polytropic slopes.  Plain functions of arrays; no analyser settings."""

from __future__ import annotations

import numpy as np

from ..errors import CyclesimError

__all__ = ["VolumeFunction"]


class VolumeFunction:
    """Cylinder volume V(theta) [m^3] and dV/dtheta from a Geometry or a sampled V(theta)."""

    def __init__(self, geometry_or_volume, theta=None, bore_m=None):
        from ..cylinder.geometry import Geometry

        self.geometry = None
        if isinstance(geometry_or_volume, Geometry):
            if geometry_or_volume.B != 1:
                raise CyclesimError("analyse: give a Geometry of one case")
            self.geometry = geometry_or_volume
            self.bore_m = float(geometry_or_volume.bore_m[0])
            self.Vd = float(geometry_or_volume.Vd[0])
            return
        from scipy.interpolate import CubicSpline

        V = np.asarray(geometry_or_volume, float)
        th = np.asarray(theta, float)
        if V.shape != th.shape:
            raise CyclesimError(f"volume array has {V.size} samples, crank grid {th.size}")
        if not np.all(V > 0):
            raise CyclesimError("volume array: every volume must be > 0 m^3")
        if abs(th[-1] - th[0] - 720.0) < 1e-9:
            tt, vv = th, V.copy()
            vv[-1] = vv[0]
        else:
            tt, vv = np.append(th, th[0] + 720.0), np.append(V, V[0])
        self._cs = CubicSpline(tt, vv, bc_type="periodic")
        self._t0 = tt[0]
        self.bore_m = bore_m
        self.Vd = float(V.max() - V.min())

    def _wrap(self, th):
        return (np.asarray(th, float) - self._t0) % 720.0 + self._t0

    def __call__(self, th) -> np.ndarray:
        if self.geometry is not None:
            return self.geometry.volume(np.asarray(th, float))[0]
        return self._cs(self._wrap(th))

    def derivative(self, th) -> np.ndarray:
        """dV/dtheta [m^3/deg]."""
        if self.geometry is not None:
            return self.geometry.dV_dtheta(np.asarray(th, float))[0]
        return self._cs(self._wrap(th), 1)

    def second_derivative_at_tdc(self) -> float:
        h = 1e-3
        d = self.derivative(np.array([-h, h]))
        return float((d[1] - d[0]) / (2 * h))


def _interp(th, y, at):
    return float(np.interp(at, th, y))


def _window_mean(th, y, a, b):
    if b <= a:
        return _interp(th, y, a)
    m = (th >= a) & (th <= b)
    if not m.any():
        raise CyclesimError(f"window {a:g}..{b:g} deg holds no sample")
    return float(np.mean(y[m]))


def _pdv(th, p, V, a=None, b=None):
    """Trapezoidal integral of p dV [J] between angles a and b (whole record if None)."""
    if a is None:
        return float(np.sum(0.5 * (p[1:] + p[:-1]) * np.diff(V)))
    m = (th > a) & (th < b)
    tt = np.concatenate([[a], th[m], [b]])
    pp = np.concatenate([[np.interp(a, th, p)], p[m], [np.interp(b, th, p)]])
    return tt, pp


def _peak(th, p):
    i = int(np.argmax(p))
    if 0 < i < p.size - 1:
        y0, y1, y2 = p[i - 1], p[i], p[i + 1]
        den = y0 - 2 * y1 + y2
        if den < 0:
            u = 0.5 * (y0 - y2) / den
            h = th[i + 1] - th[i]
            return float(th[i] + u * h), float(y1 - 0.25 * (y0 - y2) * u)
    return float(th[i]), float(p[i])


def _slope_loglog(th, p, V, a, b):
    m = (th >= a) & (th <= b) & (p > 0)
    if m.sum() < 3:
        return np.nan
    x, y = np.log(V[m]), np.log(p[m])
    return float(-np.polyfit(x, y, 1)[0])
