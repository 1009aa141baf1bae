"""Intake and exhaust plenum states seen by the valves.

``constant``: both plenums hold the operating point's pressures and
temperatures for the whole cycle (large plenums, no wave action).  The intake
charge may carry recirculated exhaust (EGR) as a burned-gas mass fraction; the
exhaust plenum holds burned gas.
"""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from cyclesim.errors import ConfigError
from cyclesim.roles import Boundary, SetupContext

BAR = 1.0e5
"""One bar [Pa]."""


def _operating_value(op: Any, key: str, B: int, default: float | None = None) -> np.ndarray:
    """Read ``operating.<key>`` as a float array (B,), or raise ConfigError if absent."""
    value = getattr(op, key, None)
    if value is None:
        if default is None:
            raise ConfigError(f"operating.{key}: missing value, needed by boundary.constant")
        value = default
    return np.broadcast_to(np.asarray(value, dtype=float), (B,)).copy()


def _frozen(a: np.ndarray) -> np.ndarray:
    a.flags.writeable = False
    return a


class ConstantPlenums(Boundary):
    """Intake and exhaust plenums at constant pressure and temperature.

    Parameters
    ----------
    values : mapping
        No parameters.
    ctx : SetupContext
        Uses ``operating.intake_pressure_bar`` [bar], ``intake_temperature_K``
        [K], ``egr_fraction`` [-] (burned-gas mass fraction of the intake
        charge, 0 if absent), ``exhaust_pressure_bar`` [bar] and
        ``exhaust_temperature_K`` [K], each (B,).

    Notes
    -----
    The returned arrays are read-only and shared between calls (the hot loop
    must not mutate them).
    """

    name = "constant"
    summary = "intake and exhaust plenums at the operating point's constant pressure and temperature"
    params = ()
    references = ("common practice: plenums large enough that their state does not change within a cycle",)
    constant = True  # the solver may evaluate the plenum gas properties once
    compiled_form = "constant"

    def __init__(self, values: Mapping[str, Any], ctx: SetupContext) -> None:
        super().__init__(values, ctx)
        op = ctx.operating
        B = self.B
        self.p_int = _operating_value(op, "intake_pressure_bar", B) * BAR
        self.T_int = _operating_value(op, "intake_temperature_K", B)
        self.y_b_int = _operating_value(op, "egr_fraction", B, default=0.0)
        self.p_exh = _operating_value(op, "exhaust_pressure_bar", B) * BAR
        self.T_exh = _operating_value(op, "exhaust_temperature_K", B)
        for key, arr in (("intake_pressure_bar", self.p_int), ("intake_temperature_K", self.T_int),
                         ("exhaust_pressure_bar", self.p_exh),
                         ("exhaust_temperature_K", self.T_exh)):
            if not np.all(np.isfinite(arr) & (arr > 0.0)):
                raise ConfigError(f"operating.{key}: must be > 0, got {arr}")
        if not np.all((self.y_b_int >= 0.0) & (self.y_b_int < 1.0)):
            raise ConfigError(f"operating.egr_fraction: must lie in [0, 1), got {self.y_b_int}")
        for a in (self.p_int, self.T_int, self.y_b_int, self.p_exh, self.T_exh):
            _frozen(a)

    def intake(self, theta: float, sub: Mapping[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Intake plenum: pressure [Pa], temperature [K], burned-gas mass fraction [-], each (B,)."""
        return self.p_int, self.T_int, self.y_b_int

    def exhaust(self, theta: float, sub: Mapping[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
        """Exhaust plenum: pressure [Pa], temperature [K], each (B,)."""
        return self.p_exh, self.T_exh


class ManifoldTraces(ConstantPlenums):
    """Intake and exhaust pressures that follow a periodic crank-angle trace per case.

    Parameters
    ----------
    values : mapping
        No parameters.
    ctx : SetupContext
        As for ``constant``: the operating point's pressures are the traces
        until :meth:`set_traces` replaces them; temperatures and the EGR share
        stay at the operating point's values.

    Notes
    -----
    The multi-cylinder engine (:mod:`cyclesim.engine`) sets each cylinder's
    traces from its shared manifolds between cycles, already shifted into the
    cylinder's own crank frame.  Pressures are interpolated linearly on the
    trace grid, periodic over 720 deg.
    """

    name = "manifold_trace"
    summary = "intake and exhaust pressures following a periodic crank-angle trace (set by the engine model)"
    references = ("common practice: filling-and-emptying manifolds seen by each cylinder as a pressure trace",)
    constant = False
    fixed_gas = True  # only the pressures change
    compiled_form = "pressure_trace"       # the loop reads pressures_at() on its grid

    def __init__(self, values: Mapping[str, Any], ctx: SetupContext) -> None:
        super().__init__(values, ctx)
        self._grid = None

    def set_traces(self, theta0: float, step: float, p_int: np.ndarray, p_exh: np.ndarray) -> None:
        """Set the traces: pressures [Pa] of shape (B, n) at ``theta0 + step * j``, periodic over 720 deg."""
        p_int = np.asarray(p_int, float)
        p_exh = np.asarray(p_exh, float)
        if p_int.shape != p_exh.shape or p_int.ndim != 2 or p_int.shape[0] != self.B:
            raise ValueError(f"manifold traces: expected two arrays of shape ({self.B}, n), got "
                             f"{p_int.shape} and {p_exh.shape}")
        if not (np.isfinite(p_int).all() and np.isfinite(p_exh).all() and (p_int > 0).all() and (p_exh > 0).all()):
            raise ValueError("manifold traces: pressures must be finite and > 0")
        n = p_int.shape[1]
        if abs(n * step - 720.0) > 1e-9 * 720:
            raise ValueError(f"manifold traces: {n} points at {step} deg do not span 720 deg")
        # one extra column closes the period; rows (n+1, B) for a cheap row lookup
        self._grid = (float(theta0), float(step), n,
                      np.ascontiguousarray(np.hstack([p_int, p_int[:, :1]]).T),
                      np.ascontiguousarray(np.hstack([p_exh, p_exh[:, :1]]).T))

    def _at(self, theta: float, which: int) -> np.ndarray:
        theta0, step, n, pi, pe = self._grid
        x = ((theta - theta0) % 720.0) / step
        j = min(int(x), n - 1)
        w = x - j
        tab = pi if which == 0 else pe
        return tab[j] + w * (tab[j + 1] - tab[j])

    def pressures_at(self, theta_deg: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Intake and exhaust pressures [Pa] (n, B) at crank angles (n,), as :meth:`intake` and
        :meth:`exhaust` give them one angle at a time."""
        th = np.asarray(theta_deg, dtype=float)
        if self._grid is None:
            return (np.broadcast_to(self.p_int, (th.size, self.B)).copy(),
                    np.broadcast_to(self.p_exh, (th.size, self.B)).copy())
        theta0, step, n, pi, pe = self._grid
        x = np.mod(th - theta0, 720.0) / step
        j = np.minimum(x.astype(np.intp), n - 1)
        w = (x - j)[:, None]
        return pi[j] + w * (pi[j + 1] - pi[j]), pe[j] + w * (pe[j + 1] - pe[j])

    def intake(self, theta: float, sub: Mapping[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        if self._grid is None:
            return self.p_int, self.T_int, self.y_b_int
        return self._at(theta, 0), self.T_int, self.y_b_int

    def exhaust(self, theta: float, sub: Mapping[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
        if self._grid is None:
            return self.p_exh, self.T_exh
        return self._at(theta, 1), self.T_exh


SUBMODELS = [ConstantPlenums, ManifoldTraces]
