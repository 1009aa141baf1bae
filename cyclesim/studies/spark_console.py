"""Console text of the spark study: a short table of the swept advances and the cases' warnings
grouped by kind with their counts and the advances that gave them (the grouping of the map console,
:func:`cyclesim.studies.map_console.group_labelled`)."""

from __future__ import annotations

import math

import numpy as np

from .map_console import group_labelled, warning_lines

__all__ = ["case_warning_groups", "spark_table_lines", "spark_warning_lines", "MAX_ROWS"]

MAX_ROWS = 12
"""At most this many advances in the console table (evenly picked, the recommended one kept)."""


def case_warning_groups(results, advances) -> list[dict]:
    """The cases' own warnings grouped by kind, with the advances [deg BTDC] that gave each (the knock
    model's per-case onset lines left out: the study reports knock itself, in its table and plot)."""
    def items():
        for r, a in zip(results, advances):
            if r is None:
                continue
            msgs = [w for w in r.warnings if not w.startswith("knock model: end-gas autoignition predicted")]
            if r.error:
                msgs.append(f"failed: {r.error}")
            yield f"{a:g} deg", msgs

    return group_labelled(items())


def _pick(n: int, keep: int | None) -> list[int]:
    if n <= MAX_ROWS:
        return list(range(n))
    idx = set(np.linspace(0, n - 1, MAX_ROWS - (keep is not None)).round().astype(int).tolist())
    if keep is not None:
        idx.add(keep)
    return sorted(idx)


def _fmt(v, spec, scale=1.0, width=9):
    if v is None or isinstance(v, bool) or not math.isfinite(float(v)):
        return f"{'-':>{width}s}"
    return f"{format(float(v) * scale, spec):>{width}s}"


def spark_table_lines(st) -> list[str]:
    """The short table: advance, torque, its loss from best, CA50, peak pressure, with a knock
    model the knock onset and the unburned share at onset, the 0-10 % and 10-90 % burn angles and,
    with an emissions model, NO."""
    t = st.table
    adv = t.column(st.spark_key)
    order = [int(i) for i in np.argsort(adv) if np.isfinite(adv[int(i)])]
    if not order:
        return []
    knock = st.knock_status != "no model" and "knock_onset_deg" in t.columns
    unit = "N m" if st.torque_key == "torque_Nm" else "bar"
    cols = [("spark BTDC", st.spark_key, ".1f", 1), (f"torque {unit}" if unit == "N m" else "IMEP bar", st.torque_key, ".2f", 1),
            ("loss %", "torque_loss_pct", ".1f", 1), ("CA50 ATDC", "ca50_deg", ".1f", 1), ("p_max bar", "p_max_bar", ".1f", 1)]
    if knock:
        cols += [("onset ATDC", "knock_onset_deg", ".1f", 1), ("unburned %", "knock_unburned_fraction_at_onset", ".0f", 100)]
    cols += [("0-10 deg", "burn_0_10_deg", ".1f", 1), ("10-90 deg", "burn_10_90_deg", ".1f", 1)]
    if "no_ppm_wet" in t.columns and np.isfinite(t.column("no_ppm_wet")).any():
        cols += [("NO ppm", "no_ppm_wet", ".0f", 1), ("NO g/kWh", "no_g_per_kWh", ".2f", 1)]
    cols = [c for c in cols if c[1] in t.columns]
    rec = None
    if st.recommended_deg is not None:
        rec = int(np.argmin([abs(adv[i] - st.recommended_deg) for i in order]))
    pick = _pick(len(order), rec)
    w = 12
    lines = ["  " + "".join(f"{h:>{w}s}" for h, *_ in cols)]
    for k in pick:
        i = order[k]
        cells = "".join(_fmt(t.column(key)[i], spec, sc, w) for _, key, spec, sc in cols)
        lines.append("  " + cells + ("   <- nearest the recommended advance" if k == rec else ""))
    if len(pick) < len(order):
        lines.append(f"  ({len(pick)} of {len(order)} advances shown; all in sweep.csv)")
    return lines


def spark_warning_lines(st) -> list[str]:
    """Console lines of the study's grouped case warnings."""
    return warning_lines(st.warning_groups, len(st.table.rows), "advances")
