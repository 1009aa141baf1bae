"""Wiebe burn law whose parameters are interpolated from a calibrated burn table.

The table is the CSV that :func:`cyclesim.calibration.write_burn_table` writes: one row
per calibrated operating point with ``speed_rpm``, ``intake_pressure_bar`` and
any of ``ignition_delay_deg``, ``duration_deg``, ``m``, ``a``,
``combustion_efficiency``.  Each case takes these by piecewise-linear
interpolation in (speed, intake pressure) over the Delaunay triangulation of
the table's points (scipy ``LinearNDInterpolator``), speed scaled by 1000 rpm
per bar so both axes weigh alike; outside the points' convex hull the nearest
point's values are used (no extrapolation).  With all points at one intake
pressure (or one speed) the interpolation is 1-D; one point gives constants.
Columns missing from the table keep the config's value.  The spark timing
stays a parameter (``spark_advance_deg``), so spark sweeps work as with
``wiebe``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, Mapping

import numpy as np

from cyclesim.config import CORE_SCHEMA
from cyclesim.params import Param
from cyclesim.tables import read_table

from cyclesim_plugins.wiebe import P_A, P_DELAY, P_EFF, P_M, P_SPARK, Wiebe

TABLE_COLUMNS = ("ignition_delay_deg", "duration_deg", "m", "a", "combustion_efficiency")
SPEED_SCALE_RPM_PER_BAR = 1000.0


def read_burn_table(path: Path) -> dict[str, np.ndarray]:
    """Columns of a burn-table CSV (lines starting with # skipped) as float arrays.

    Read by :func:`cyclesim.tables.read_table`: every value finite and within the range the
    ``wiebe_table`` parameter of the same name declares, each (speed, intake pressure) point
    once; the message names the file and the line."""
    ranges = {p.name: p for p in WiebeTable.params if p.name in TABLE_COLUMNS}
    op = {p.name: p for p in CORE_SCHEMA["operating"]}
    ranges["speed_rpm"] = op["speed_rpm"]
    ranges["intake_pressure_bar"] = op["intake_pressure_bar"]
    tab = read_table(path, "burn.table", ("speed_rpm", "intake_pressure_bar"), TABLE_COLUMNS,
                     unique=("speed_rpm", "intake_pressure_bar"), ranges=ranges)
    return tab.columns


def interpolate(table: Mapping[str, np.ndarray], speed_rpm, intake_bar, column: str) -> np.ndarray:
    """One column interpolated at the cases' (speed, intake pressure), (B,)."""
    x = np.asarray(table["speed_rpm"], float) / SPEED_SCALE_RPM_PER_BAR
    y = np.asarray(table["intake_pressure_bar"], float)
    v = np.asarray(table[column], float)
    qx = np.atleast_1d(np.asarray(speed_rpm, float)) / SPEED_SCALE_RPM_PER_BAR
    qy = np.broadcast_to(np.asarray(intake_bar, float), qx.shape)
    if v.size == 1:
        return np.full(qx.shape, v[0])
    if np.ptp(y) == 0 or np.ptp(x) == 0:
        t, tq = (x, qx) if np.ptp(y) == 0 else (y, qy)
        o = np.argsort(t)
        return np.interp(tq, t[o], v[o])
    from scipy.interpolate import LinearNDInterpolator, NearestNDInterpolator

    pts = np.column_stack([x, y])
    q = np.column_stack([qx, qy])
    try:
        lin = LinearNDInterpolator(pts, v)(q)
    except Exception:  # noqa: BLE001  (collinear points: no triangulation)
        lin = np.full(qx.shape, np.nan)
    near = NearestNDInterpolator(pts, v)(q)
    return np.where(np.isfinite(lin), lin, near)


class WiebeTable(Wiebe):
    """Single Wiebe burn law with delay, duration and form interpolated from a burn table.

    Parameters
    ----------
    values : mapping
        ``table`` (CSV path, relative to the config's folder), ``spark_advance_deg``
        [deg before TDC] and fallbacks for the columns the table lacks.
    ctx : SetupContext
        Uses ``speed_rpm`` and ``operating.intake_pressure_bar`` (B,).
    """

    @classmethod
    def shortest_feature_deg_for(cls, params):
        """The table's durations are not known before set-up: 0 keeps the fine step."""
        return 0.0

    name = "wiebe_table"
    summary = "Wiebe function with parameters interpolated in speed and intake pressure from a burn table"
    params = (
        Param("table", "-", "burn_table.csv", "burn-table CSV written by 'cyclesim fit' (burn_table)",
              kind="path", sweepable=False),
        P_SPARK,
        P_DELAY,
        Param("duration_deg", "deg", 50.0, "burn duration where the table has none",
              min=0.0, max=360.0, min_exclusive=True),
        P_A,
        P_M,
        P_EFF,
    )

    def __init__(self, values: Mapping[str, Any], ctx) -> None:
        path = Path(str(values["table"]))
        if not path.is_absolute() and getattr(ctx, "base_dir", None) is not None:
            path = Path(ctx.base_dir) / path
        tab = read_burn_table(path)
        speed = np.broadcast_to(np.asarray(ctx.speed_rpm, float), (ctx.B,))
        p_in = np.broadcast_to(np.asarray(ctx.operating.intake_pressure_bar, float), (ctx.B,))
        vals = dict(values)
        for c in TABLE_COLUMNS:
            if c in tab:
                vals[c] = interpolate(tab, speed, p_in, c)
        super().__init__(vals, ctx)


SUBMODELS = [WiebeTable]

