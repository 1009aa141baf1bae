"""The ``intake.runner`` and ``exhaust.runner`` keys: a runner solved in one dimension, or none.

``intake: {runner: none}`` (or no ``intake`` section) keeps the plenum at the valves as before;
a mapping of the keys below puts a round pipe between the valves and the plenum (intake: the
operating point's intake pressure, temperature and EGR fraction; exhaust: its exhaust pressure
and temperature) solved by :mod:`cyclesim.pipes`.  The runner stands for all of the cylinder's
valves of that side (their effective areas added).
"""

from __future__ import annotations

import math
from types import SimpleNamespace
from typing import Any, Mapping

from ..errors import ConfigError
from ..params import REQUIRED, Param, validate_section

P = Param

RUNNER_SIDES = ("intake", "exhaust")
MIN_RUNNER_CELLS = 4
"""Fewest cells of a runner (the scheme's reconstruction needs four)."""

RUNNER_SCHEMA: tuple[Param, ...] = (
    P("length_mm", "mm", REQUIRED, "runner length from the valves to the plenum (intake) or the exhaust"
      " system's plenum (exhaust)", 0, 10000, min_exclusive=True),
    P("diameter_mm", "mm", 35.0, "inner diameter of a straight runner", 0, 500, min_exclusive=True),
    P("diameter_valve_end_mm", "mm", None, "inner diameter at the valve end of a tapered runner (default"
      " diameter_mm)", 0, 500, min_exclusive=True),
    P("diameter_far_end_mm", "mm", None, "inner diameter at the plenum end of a tapered runner (default"
      " diameter_mm)", 0, 500, min_exclusive=True),
    P("cells", "-", 30, "cells along the runner (ignored where cell_mm is given)", MIN_RUNNER_CELLS, 2000,
      kind="int"),
    P("cell_mm", "mm", None, "cell length instead of a cell count (cells = length / cell_mm, rounded up,"
      f" at least {MIN_RUNNER_CELLS})", 0, 10000, min_exclusive=True),
    P("roughness_mm", "mm", 0.0015, "wall roughness height for the Fanning factor (0.0015 mm: drawn tube,"
      " common practice)", 0, 5),
    P("wall_temperature_K", "K", None, "wall temperature for the wall heat (default: the plenum's"
      " temperature, intake_temperature_K or exhaust_temperature_K)", 200, 1500),
    P("entry_loss", "-", 0.0, "loss coefficient of the plenum end on flow into the runner (dynamic heads of"
      " stagnation pressure; about 0.05 for a bellmouth, 0.5 for a sharp edge, common practice)", 0, 2),
    P("bend_loss", "-", 0.0, "total loss coefficient of the runner's bends, spread over its length", 0, 10),
    P("stations_mm", "mm", None, "positions along the runner, from its valve end, where the trace gives the"
      " pressure and the gas velocity (the cell holding each; columns <side>_runner_at_<x>mm_pressure_bar"
      " and _velocity_m_per_s); each at most length_mm", 0, 10000, kind="list"),
)
"""Keys of ``intake.runner`` and ``exhaust.runner``."""

SIDE_KEYS = ("runner",)


def validate_runners(raw: Mapping) -> dict[str, SimpleNamespace | None]:
    """The runners of a raw config: ``{"intake": ns or None, "exhaust": ns or None}``.

    Each namespace has every key of :data:`RUNNER_SCHEMA` filled in and ``n_cells`` (int).
    """
    out: dict[str, SimpleNamespace | None] = {}
    for side in RUNNER_SIDES:
        sec = raw.get(side)
        if sec is None:
            out[side] = None
            continue
        if not isinstance(sec, Mapping):
            raise ConfigError(f"{side}: expected a mapping with 'runner' (none or its keys), got {sec!r}")
        for key in sec:
            if key not in SIDE_KEYS:
                raise ConfigError(f"{side}.{key}: unknown key; allowed: {', '.join(SIDE_KEYS)}")
        out[side] = runner_from(sec.get("runner"), f"{side}.runner")
    return out


def runner_from(value: Any, where: str) -> SimpleNamespace | None:
    """One runner's keys validated (None for ``none`` or an absent runner)."""
    if value is None or (isinstance(value, str) and value.strip().lower() == "none"):
        return None
    if not isinstance(value, Mapping):
        raise ConfigError(f"{where}: expected none or a mapping of runner keys (length_mm, diameter_mm, ...),"
                          f" got {value!r}")
    ns = SimpleNamespace(**validate_section(value, RUNNER_SCHEMA, where))
    if ns.cell_mm is not None:
        ns.n_cells = max(MIN_RUNNER_CELLS, int(math.ceil(ns.length_mm / ns.cell_mm - 1e-9)))
    else:
        ns.n_cells = int(ns.cells)
    if ns.n_cells > 2000:
        raise ConfigError(f"{where}.cell_mm = {ns.cell_mm:g}: gives {ns.n_cells} cells, at most 2000")
    ns.stations_mm = tuple(ns.stations_mm or ())
    for x in ns.stations_mm:
        if x > ns.length_mm:
            raise ConfigError(f"{where}.stations_mm: {x:g} mm lies beyond the runner's length_mm = {ns.length_mm:g}")
    if len(set(ns.stations_mm)) != len(ns.stations_mm):
        raise ConfigError(f"{where}.stations_mm: a position is given twice ({list(ns.stations_mm)})")
    return ns


def has_runners(case) -> bool:
    """True where the case has a runner on either side."""
    return any(v is not None for v in getattr(case, "runners", {}).values())


def station_cell(ns: SimpleNamespace, x_mm: float) -> int:
    """The cell (0 at the valve end) that holds position ``x_mm`` of a validated runner (the last
    cell for its far end)."""
    return min(ns.n_cells - 1, int(x_mm / ns.length_mm * ns.n_cells))


def runner_diameters_m(ns: SimpleNamespace) -> tuple[float, float]:
    """(valve end, far end) inner diameters [m] of a validated runner."""
    d = ns.diameter_mm
    d0 = ns.diameter_valve_end_mm if ns.diameter_valve_end_mm is not None else d
    d1 = ns.diameter_far_end_mm if ns.diameter_far_end_mm is not None else d
    return d0 * 1e-3, d1 * 1e-3
