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


SUBMODELS = [ConstantPlenums]
