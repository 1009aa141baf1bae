"""What a trace file states about its engine, compared with the engine config of an analysis.

A recording's metadata may state the engine's geometry and the operating point
(``bore_m``, ``stroke_m``, ``conrod_m``, ``compression_ratio``, ``pin_offset_m``,
``speed_rpm``, ``intake_pressure_pa``, as :mod:`cyclesim.traces.synthesis` writes them).
The analyser takes the geometry, valve events, walls and mixture from the config given
with ``--engine``; a config of another engine gives wrong volumes (IMEP, exponents and the
heat release follow them) without any error, so the two are compared and each value that
differs beyond its tolerance is named.
"""

from __future__ import annotations

import math

__all__ = ["TOLERANCES", "engine_mismatches", "mismatch_warning"]

#: key of the file's metadata -> (label, unit, factor from SI to the unit, relative tolerance, absolute
#: tolerance in the unit).  Geometry within 0.5 % (a drawing's dimensions; common practice), speed
#: within 1 %, the intake set point within 5 % (a logged set point, not a measured mean).
TOLERANCES = {
    "bore_m": ("bore", "mm", 1e3, 0.005, 0.0),
    "stroke_m": ("stroke", "mm", 1e3, 0.005, 0.0),
    "conrod_m": ("connecting rod", "mm", 1e3, 0.005, 0.0),
    "compression_ratio": ("compression ratio", "-", 1.0, 0.005, 0.0),
    "pin_offset_m": ("pin offset", "mm", 1e3, 0.0, 0.05),
    "speed_rpm": ("speed", "rpm", 1.0, 0.01, 0.0),
    "intake_pressure_pa": ("intake pressure", "bar", 1e-5, 0.05, 0.0),
}


def _config_values(case) -> dict:
    e, op = case.section("engine"), case.section("operating")
    return {
        "bore_m": e.bore_mm / 1e3, "stroke_m": e.stroke_mm / 1e3, "conrod_m": e.conrod_mm / 1e3,
        "compression_ratio": e.compression_ratio, "pin_offset_m": e.pin_offset_mm / 1e3,
        "speed_rpm": op.speed_rpm, "intake_pressure_pa": op.intake_pressure_bar * 1e5,
    }


def engine_mismatches(meta: dict | None, case) -> list[tuple[str, float, float, str]]:
    """Values the file states that differ from the config beyond :data:`TOLERANCES`.

    Parameters
    ----------
    meta : dict
        The trace file's metadata (:attr:`cyclesim.traces.export.TraceSet.meta`).
    case : cyclesim.config.Case
        The engine config of the analysis.

    Returns
    -------
    list of (label, value in the file, value in the config, unit)
        In the units of :data:`TOLERANCES`; keys the file does not state are not compared.
    """
    meta = meta or {}
    cfg = _config_values(case)
    out = []
    for key, (label, unit, f, rel, ab) in TOLERANCES.items():
        try:
            a = float(meta[key])
        except (KeyError, TypeError, ValueError):
            continue
        b = float(cfg[key])
        if not (math.isfinite(a) and math.isfinite(b)):
            continue
        a, b = a * f, b * f
        if abs(a - b) > max(rel * abs(b), ab, 1e-12):
            out.append((label, a, b, unit))
    return out


def mismatch_warning(mismatches, file_name: str, engine_name: str) -> str | None:
    """One warning line naming each mismatch, or None where there is none."""
    if not mismatches:
        return None
    parts = [f"{label} {a:.6g} {unit} in the file, {b:.6g} {unit} in the config" if unit != "-"
             else f"{label} {a:.6g} in the file, {b:.6g} in the config" for label, a, b, unit in mismatches]
    return (f"engine mismatch: {file_name} and --engine {engine_name} differ: " + "; ".join(parts)
            + ". The analysis uses the config's geometry, valve events, walls and mixture (and the file's"
              " speed): check that --engine is the engine of the recording")
