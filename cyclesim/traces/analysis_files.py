"""Files of an analysis: the per-cycle table, the set summary and the mean fired cycle."""

from __future__ import annotations

import json
import warnings
from dataclasses import asdict
from pathlib import Path

import numpy as np

from ..output import atomic_write_text, plain, write_rows_csv
from .analysis import AnalysisResult
from .analysis_settings import BAR
from .export import CRANK_CONVENTION

__all__ = ["write_analysis"]


def _cell(v) -> str | bool:
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, str):
        return v
    return "" if not np.isfinite(v) else f"{float(v):.8g}"


def write_analysis(result: AnalysisResult, out) -> list[Path]:
    """Write ``analysis_cycles.csv``, ``analysis_summary.json`` and ``analysis_mean_cycle.csv`` into ``out``.

    The per-cycle table has the cycle's class (``cycle_class``: fired, partial burn or
    misfire); the summary's statistics and the mean cycle are over the fired cycles only
    (misfires and partial burns excluded), or over every cycle where none fired.
    """
    out = Path(out)
    per = result.per_cycle
    n = len(per["imep_net_bar"])
    cols = ["cycle"] + list(per)
    rows = [{"cycle": k + 1, **{c: _cell(per[c][k]) for c in per}} for k in range(n)]
    files = [out / "analysis_cycles.csv", out / "analysis_summary.json", out / "analysis_mean_cycle.csv"]
    write_rows_csv(files[0], rows, cols)
    doc = {
        "crank_angle": CRANK_CONVENTION + " (corrected by tdc.offset_deg)",
        "units": "in each key's name; n_* and *_cov dimensionless",
        "statistics": plain(result.stats),
        "tdc": plain(result.tdc),
        "settings": plain(asdict(result.settings)),
        "warnings": list(result.warnings),
    }
    atomic_write_text(files[1], json.dumps(doc, indent=2) + "\n")
    sel = fired_selection(result)
    pm = np.mean(result.pressure_pa[sel], axis=0) / BAR
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)      # all-NaN columns outside IVC..EVO
        qm = np.nanmean(result.heat_release_J[sel], axis=0)
    mrows = [{"crank_deg": f"{t:.6g}", "pressure_bar": f"{p:.8g}",
              "apparent_heat_release_J": "" if not np.isfinite(q) else f"{q:.8g}"}
             for t, p, q in zip(result.theta_deg, pm, qm)]
    write_rows_csv(files[2], mrows, ["crank_deg", "pressure_bar", "apparent_heat_release_J"])
    return files


def fired_selection(result: AnalysisResult) -> np.ndarray:
    """Mask of the fired cycles (every cycle where none fired) [bool (n_cycles,)]."""
    cls = np.asarray(result.per_cycle["cycle_class"])
    fired = cls == "fired"
    return fired if fired.any() else np.ones(cls.size, bool)
