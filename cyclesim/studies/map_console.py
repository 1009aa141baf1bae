"""Console text of full-load curves and part-load maps: a short table per point, the warnings grouped
by kind with their counts and the points they concern, the notes and the caution."""

from __future__ import annotations

import math

from ..results.warning_groups import group_labelled, warning_lines

__all__ = ["map_text", "group_labelled", "group_warnings", "warning_lines", "knock_margin_text"]

_SHORT_LIMITS = {"exhaust temperature (lambda at floor)": "T_exh, lambda floor", "fixed (config)": "fixed"}

_FULL = (("speed rpm", "speed_rpm", ".0f", 1, 9), ("spark BTDC", "spark_advance_deg", ".1f", 1, 11),
         ("limited by", "spark_limit", "s", 1, 22), ("knock mgn deg", "knock_margin_deg", ".1f", 1, 14),
         ("1-Imax", "knock_integral_margin", ".2f", 1, 7), ("lambda", "lambda", ".3f", 1, 7),
         ("T_exh K", "exhaust_temperature_K", ".0f", 1, 8), ("BMEP bar", "bmep_bar", ".2f", 1, 9),
         ("torque N m", "torque_Nm", ".1f", 1, 11), ("power kW", "power_kW", ".1f", 1, 9),
         ("BSFC g/kWh", "bsfc_g_per_kWh", ".0f", 1, 11), ("vol.eff %", "volumetric_efficiency", ".1f", 100, 10),
         ("p_exh bar", "exhaust_pressure_bar", ".3f", 1, 10))
_PART = (("speed rpm", "speed_rpm", ".0f", 1, 9), ("p_in bar", "intake_pressure_bar", ".2f", 1, 9),
         ("spark BTDC", "spark_advance_deg", ".1f", 1, 11), ("limited by", "spark_limit", "s", 1, 22),
         ("knock mgn deg", "knock_margin_deg", ".1f", 1, 14), ("1-Imax", "knock_integral_margin", ".2f", 1, 7),
         ("lambda", "lambda", ".3f", 1, 7), ("T_exh K", "exhaust_temperature_K", ".0f", 1, 8),
         ("BMEP bar", "bmep_bar", ".2f", 1, 9), ("BSFC g/kWh", "bsfc_g_per_kWh", ".0f", 1, 11),
         ("eta_b %", "eta_brake", ".1f", 100, 8), ("residual %", "residual_fraction", ".1f", 100, 11))


_BOOST = (("speed rpm", "speed_rpm", ".0f", 1, 9), ("boost bar", "intake_pressure_bar", ".3f", 1, 10),
          ("boost: what binds", "boost_limit", "s", 1, 30), ("T_in K", "intake_temperature_K", ".0f", 1, 7),
          ("wastegate %", "wastegate_share", ".0f", 100, 12), ("eta_c", "eta_compressor", ".3f", 1, 7),
          ("surge mgn %", "surge_margin", ".0f", 100, 12), ("choke mgn %", "choke_margin", ".0f", 100, 12),
          ("turbo rpm", "turbocharger_speed_rpm", ".0f", 1, 10))


_BURN_NO = (("0-10 deg", "burn_0_10_deg", ".1f", 1, 9), ("10-90 deg", "burn_10_90_deg", ".1f", 1, 10),
            ("NO ppm", "no_ppm_wet", ".0f", 1, 8), ("NO g/kWh", "no_g_per_kWh", ".2f", 1, 10))
"""Burn angles and NO, shown where some point has them (NO with an emissions model)."""


def _with_burn_no(rows, cols):
    def has(key):
        return any(isinstance(r.get(key), (int, float)) and math.isfinite(r[key]) for r in rows)
    return tuple(cols) + tuple(c for c in _BURN_NO if has(c[1]))


def _table(rows, cols) -> list[str]:
    out = ["  " + "".join(f"{h:>{w}s}" if s != "s" else f"  {h:<{w - 2}s}" for h, _, s, _, w in cols)]
    for r in rows:
        out.append("  " + "".join(_cell(r, k, s, sc, w) for _, k, s, sc, w in cols))
    return out


def knock_margin_text(row) -> str | None:
    """The knock margin [deg] as text: its value, or "> x" where no advance run up to the chosen one
    plus x knocked (None where neither is known)."""
    v = row.get("knock_margin_deg")
    if v is not None and math.isfinite(v):
        return f"{v:.1f}"
    free, a = row.get("knock_free_to_deg"), row.get("spark_advance_deg")
    if free is not None and a is not None:
        return f"> {free - a:.0f}"
    return None


def _cell(row, key, spec, scale, width):
    if key == "knock_margin_deg":
        t = knock_margin_text(row)
        return f"{t or '-':>{width}s}"
    v = row.get(key)
    if spec == "s":
        text = _SHORT_LIMITS.get(v, v) if v else "-"
        return f"  {text:<{width - 2}s}"
    if v is None or isinstance(v, bool) or not math.isfinite(float(v)):
        return f"{'-':>{width}s}"
    return f"{format(float(v) * scale, spec):>{width}s}"


def group_warnings(m) -> list[dict]:
    """The points' warnings and errors of a map, one entry per kind (:func:`group_labelled`)."""
    from .sweep_files import WARNING_SEPARATOR

    def items():
        for r in m.rows:
            label = (f"{r['speed_rpm']:g} rpm / {r['intake_pressure_bar']:.2f} bar" if m.kind == "part_load"
                     else f"{r['speed_rpm']:g} rpm")
            msgs = [w for w in (r.get("warnings") or "").split(WARNING_SEPARATOR) if w]
            if r.get("error"):
                msgs.append(f"failed: {r['error']}")
            if r.get("spark_note"):
                msgs.extend(n for n in r["spark_note"].split("; ") if n)
            if r.get("exhaust_limit_held") is False:
                msgs.append("exhaust-temperature limit not held (lambda at its floor)")
            if r.get("spark_limit") == "MBT not found (clamp)":
                msgs.append("MBT not found within the advance range (clamp): left out of the contours")
            yield label, msgs

    return group_labelled(items())


def map_text(m) -> str:
    """The console report of a :class:`cyclesim.studies.maps.MapResult`."""
    cols = _FULL if m.kind == "full_load" else _PART
    what = "full-load curve" if m.kind == "full_load" else "part-load map"
    lines = [f"{what}: {m.base_config} ({len(m.rows)} points, {m.cases_run} cases run)",
             *_table(m.rows, _with_burn_no(m.rows, cols))]
    if "boost_limit" in m.columns:
        lines.append("turbocharger at each speed:")
        lines.extend(_table(m.rows, _BOOST))
    lines.extend(warning_lines(group_warnings(m), len(m.rows)))
    for n in m.notes:
        lines.append(f"note: {n}")
    lines.append(f"CAUTION: {m.caution}")
    return "\n".join(lines)
