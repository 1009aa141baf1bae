"""Compressor map: speed lines of pressure ratio against corrected mass flow, with efficiency.

An open CSV layout (one table, comment lines for the reference state)::

    # cyclesim compressor map
    # reference_temperature_K: 298.15
    # reference_pressure_bar: 1.0
    corrected_speed_rpm,corrected_flow_kg_per_s,pressure_ratio,efficiency
    80000,0.030,1.45,0.66
    80000,0.045,1.40,0.72
    ...

* each row is a point of a speed line (rows of one line share ``corrected_speed_rpm``); within a
  line the rows run from the surge end (least flow) to the choke end (most flow);
* the **surge line** is the first point of every speed line, the **choke line** the last;
* corrected flow ``m_c = m sqrt(T1 / T_ref) / (p1 / p_ref)`` and corrected speed
  ``N_c = N / sqrt(T1 / T_ref)`` (the usual similarity parameters of turbomachinery, e.g. Dixon &
  Hall, *Fluid Mechanics and Thermodynamics of Turbomachinery*, 7th ed. 2014, ch. 1; from memory).

At an operating point (corrected flow, pressure ratio) the efficiency and corrected speed are
interpolated linearly on a triangulation of the map's points (scipy's ``LinearNDInterpolator``);
outside the map they are not defined and the point is said to be off the map.  The surge margin is
``(m_c - m_surge(PR)) / m_c`` and the choke margin ``(m_choke(PR) - m_c) / m_c``, with the surge and
choke lines interpolated in pressure ratio.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import ConfigError

__all__ = ["CompressorMap", "load_compressor_map", "MapPoint"]

COLUMNS = ("corrected_speed_rpm", "corrected_flow_kg_per_s", "pressure_ratio", "efficiency")


@dataclass
class MapPoint:
    """The map read at one operating point."""

    corrected_flow_kg_per_s: float
    pressure_ratio: float
    efficiency: float | None
    corrected_speed_rpm: float | None
    surge_margin: float | None
    choke_margin: float | None
    on_map: bool

    def as_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass
class CompressorMap:
    """Speed lines of a compressor map (SI inside; the CSV keeps its own units in its header)."""

    speed_rpm: np.ndarray
    flow: np.ndarray
    pr: np.ndarray
    eta: np.ndarray
    t_ref_K: float
    p_ref_bar: float
    name: str = ""
    lines: dict = field(default_factory=dict)

    def __post_init__(self):
        from scipy.interpolate import LinearNDInterpolator

        pts = np.column_stack([self.flow, self.pr])
        self._eta = LinearNDInterpolator(pts, self.eta)
        self._speed = LinearNDInterpolator(pts, self.speed_rpm)
        self.lines = {}
        for s in sorted(set(self.speed_rpm)):
            sel = self.speed_rpm == s
            self.lines[float(s)] = (self.flow[sel], self.pr[sel], self.eta[sel])
        surge = np.array([(f[0], p[0]) for f, p, _ in self.lines.values()])
        choke = np.array([(f[-1], p[-1]) for f, p, _ in self.lines.values()])
        self.surge_line = surge[np.argsort(surge[:, 1])]
        self.choke_line = choke[np.argsort(choke[:, 1])]

    def corrected_flow(self, m_kg_per_s, T1_K, p1_bar) -> float:
        """Corrected mass flow [kg/s] of an actual flow at the inlet state."""
        return float(m_kg_per_s) * math.sqrt(T1_K / self.t_ref_K) / (p1_bar / self.p_ref_bar)

    def at(self, corrected_flow, pressure_ratio) -> MapPoint:
        """Efficiency, corrected speed and surge / choke margins at an operating point."""
        mc, pr = float(corrected_flow), float(pressure_ratio)
        eta = float(self._eta(mc, pr))
        spd = float(self._speed(mc, pr))
        on = math.isfinite(eta)

        def line_flow(line):
            if pr < line[0, 1] or pr > line[-1, 1]:
                return None
            return float(np.interp(pr, line[:, 1], line[:, 0]))

        ms, mch = line_flow(self.surge_line), line_flow(self.choke_line)
        return MapPoint(mc, pr, eta if on else None, spd if on else None,
                        None if ms is None else (mc - ms) / mc, None if mch is None else (mch - mc) / mc, on)


def load_compressor_map(path: str | Path) -> CompressorMap:
    """Read a compressor map CSV (layout in the module docstring); ConfigError on a malformed one."""
    import csv

    p = Path(path)
    if not p.is_file():
        from importlib import resources

        built_in = Path(str(resources.files("cyclesim.configs"))) / (str(path) if str(path).endswith(".csv") else f"{path}.csv")
        if not built_in.is_file():
            raise ConfigError(f"compressor map {path}: no such file")
        p = built_in
    meta, rows = {}, []
    with p.open(newline="") as fh:
        lines = [ln for ln in fh]
    body = []
    for ln in lines:
        s = ln.strip()
        if s.startswith("#"):
            if ":" in s:
                k, v = s[1:].split(":", 1)
                meta[k.strip()] = v.strip()
        elif s:
            body.append(s)
    reader = csv.DictReader(body)
    if reader.fieldnames is None or tuple(f.strip() for f in reader.fieldnames) != COLUMNS:
        raise ConfigError(f"compressor map {p.name}: expected the columns {', '.join(COLUMNS)}")
    for i, r in enumerate(reader, start=2):
        try:
            rows.append([float(r[c]) for c in COLUMNS])
        except (TypeError, ValueError):
            raise ConfigError(f"compressor map {p.name}, data row {i - 1}: expected four numbers") from None
    try:
        t_ref = float(meta["reference_temperature_K"])
        p_ref = float(meta["reference_pressure_bar"])
    except (KeyError, ValueError):
        raise ConfigError(f"compressor map {p.name}: give '# reference_temperature_K: ...' and"
                          " '# reference_pressure_bar: ...' comment lines") from None
    a = np.array(rows, float)
    if len(a) < 6 or len(set(a[:, 0])) < 2:
        raise ConfigError(f"compressor map {p.name}: at least two speed lines of three points are needed")
    if not (np.all(a[:, 1] > 0) and np.all(a[:, 2] >= 1.0) and np.all((a[:, 3] > 0) & (a[:, 3] <= 1))):
        raise ConfigError(f"compressor map {p.name}: flows must be > 0, pressure ratios >= 1 and"
                          " efficiencies in (0, 1]")
    for s in set(a[:, 0]):
        f = a[a[:, 0] == s, 1]
        if len(f) < 3 or np.any(np.diff(f) <= 0):
            raise ConfigError(f"compressor map {p.name}: speed line {s:g} rpm needs at least three points"
                              " in rising flow (surge end first)")
    return CompressorMap(a[:, 0], a[:, 1], a[:, 2], a[:, 3], t_ref, p_ref, name=p.name)


def plot_compressor_map(cmap: CompressorMap, path: Path, operating=(), title: str = "") -> Path:
    """Speed lines, efficiency contours, surge and choke lines and the operating points."""
    from ..plots import _plt, _save

    plt = _plt()
    fig, ax = plt.subplots(figsize=(7.4, 5.0))
    try:
        cs = ax.tricontourf(cmap.flow, cmap.pr, 100 * cmap.eta, levels=10, cmap="viridis", alpha=0.55)
        fig.colorbar(cs, ax=ax, label="isentropic efficiency [%]")
    except (ValueError, RuntimeError):
        pass
    for s, (f, p, _) in cmap.lines.items():
        ax.plot(f, p, "-", color="0.25", lw=1)
        ax.annotate(f"{s / 1000:g}k rpm", (f[-1], p[-1]), fontsize=7, xytext=(3, 0), textcoords="offset points")
    ax.plot(cmap.surge_line[:, 0], cmap.surge_line[:, 1], "-", color="tab:red", lw=2, label="surge line")
    ax.plot(cmap.choke_line[:, 0], cmap.choke_line[:, 1], "--", color="tab:blue", lw=1.5, label="choke end")
    if len(operating):
        op = np.array([(o["corrected_flow_kg_per_s"], o["pressure_ratio"]) for o in operating])
        ax.plot(op[:, 0], op[:, 1], "o-", color="k", ms=5, lw=1.5, label="operating line")
        for o in operating:
            if o.get("label"):
                ax.annotate(o["label"], (o["corrected_flow_kg_per_s"], o["pressure_ratio"]), fontsize=7,
                            xytext=(4, -10), textcoords="offset points")
    ax.set_xlabel(f"corrected mass flow [kg/s] (at {cmap.t_ref_K:g} K, {cmap.p_ref_bar:g} bar)")
    ax.set_ylabel("total pressure ratio [-]")
    ax.set_title(title or f"compressor map {cmap.name}")
    ax.legend(fontsize=8, loc="upper left")
    return _save(fig, Path(path))
