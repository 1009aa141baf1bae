"""Checks of a measured trace set before it is analysed or fitted.

A cylinder-pressure cycle rises from the gas-exchange level to a peak near firing TDC, motored
or fired (compression alone multiplies the pressure by about r^1.3 near TDC; Heywood 1988,
*Internal Combustion Engine Fundamentals*, ch. 2 and fig. 9-2): its largest excursion from its
median is upward.  A signal whose largest excursion points down has been negated (a charge
amplifier's sign, a swapped channel) and would be analysed into a nonsense heat release, so it
is refused; so is a stated engine speed that is not positive.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputFileError

__all__ = ["check_measured"]


def check_measured(ts, source) -> None:
    """Refuse a trace set with a stated speed <= 0 or a pressure signal that peaks downward.

    Parameters
    ----------
    ts : cyclesim.traces.export.TraceSet
    source : str or Path
        The file, for the message.
    """
    if math.isfinite(ts.speed_rpm) and ts.speed_rpm <= 0:
        raise InputFileError(f"{source}: speed_rpm = {ts.speed_rpm:g}: expected the engine speed, > 0 rpm")
    P = np.asarray(ts.pressure_pa, float)
    ok = np.all(np.isfinite(P), axis=1)
    if not ok.any():
        return                                   # no complete cycle: the readers say what is missing
    P = P[ok]
    med = np.median(P, axis=1)
    up = float(np.sum(P.max(axis=1) - med))
    down = float(np.sum(med - P.min(axis=1)))
    if down > up:
        raise InputFileError(
            f"{source}: the pressure signal peaks downward (its lowest values lie further below the median"
            " than its highest above it): is it negated? A cylinder pressure rises to its peak near TDC")
