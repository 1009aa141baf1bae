"""Burn table: fitted Wiebe parameters of several operating points as rows (CSV) for the wiebe_table burn model."""

from __future__ import annotations

from pathlib import Path
from typing import Sequence


# --------------------------------------------------------------------------
# Burn table
# --------------------------------------------------------------------------

_BURN_COLUMNS = ("spark_advance_deg", "ignition_delay_deg", "duration_deg", "m", "a", "ca50_deg",
                 "burn_10_90_deg", "combustion_efficiency")


def burn_table(fits: Sequence) -> list[dict]:
    """Burn parameters of calibrated operating points against speed and load.

    Parameters
    ----------
    fits : sequence of FitResult, or a PointsFit
        One per operating point.

    Returns
    -------
    list of dict
        One row per point: ``speed_rpm``, ``intake_pressure_bar`` (the load
        coordinate), ``imep_bar`` (simulated, from the fitted case; closed-cycle
        IMEP in closed mode), the burn model, every burn parameter of that
        model, and for fitted ones ``<name>_stderr``.
    """
    from .fitting import PointsFit

    if isinstance(fits, PointsFit):
        fits = fits.points
    rows = []
    for f in fits:
        c = f.case
        ch = c.submodels["burn"]
        row = {"speed_rpm": float(c.operating.speed_rpm),
               "intake_pressure_bar": float(c.operating.intake_pressure_bar),
               "lambda": float(getattr(c.operating, "lambda")),
               "imep_bar": f.summary.get("imep_net_bar", f.summary.get("imep_closed_bar", float("nan"))),
               "burn_model": ch.model}
        for k in _BURN_COLUMNS:
            if k in ch.params and ch.params[k] is not None:
                row[k] = float(ch.params[k])
                key = f"burn.{k}"
                if key in f.params:
                    row[f"{k}_stderr"] = float(f.stderr[f.params.index(key)])
        rows.append(row)
    return rows


def write_burn_table(rows: Sequence[dict], path) -> Path:
    """Write a burn table (see :func:`burn_table`) as CSV with a units comment line."""
    from ..output import atomic_write_text

    cols: list[str] = []
    for r in rows:
        for k in r:
            if k not in cols:
                cols.append(k)
    lines = ["# burn parameters per operating point; units in the column names (deg, bar, rpm; m, a,"
             " lambda, combustion_efficiency dimensionless); crank angle 0 = firing TDC",
             ",".join(cols)]
    for r in rows:
        vals = []
        for k in cols:
            v = r.get(k, "")
            vals.append(f"{v:.8g}" if isinstance(v, float) else str(v))
        lines.append(",".join(vals))
    atomic_write_text(Path(path), "\n".join(lines) + "\n")
    return Path(path)
