"""Engine maps: full-load torque and power against speed, part-load maps with the spark per point.

>>> from cyclesim.studies.maps import full_load_curve, part_load_map
>>> fl = full_load_curve("demo", [2000, 3000, 4000, 5000], out="fullload")
>>> pm = part_load_map("demo", [2000, 3000, 4000], [0.4, 0.7, 0.98], spark="mbt", out="map")

* :func:`full_load_curve`: the case at each speed at its own (wide-open)
  intake pressure and spark, in as few batches as the integration step allows.
* :func:`part_load_map`: a grid of speed x intake pressure (the load).  With
  ``spark="mbt"`` every point is simulated at a coarse grid of spark advances
  (all points and advances together, batched), MBT is read from the torque
  curve by the spark study's fit (:func:`cyclesim.studies.spark.fit_torque_peak`)
  and every point is run once more at its MBT; ``spark="fixed"`` keeps the
  case's advance.  Contour plots of BSFC and brake efficiency over speed and
  BMEP, of BMEP over speed and intake pressure, and of the spark advance.

Below ``simulation.step_reference_rpm`` (3000 rpm by default) the step
shrinks with the square of the speed, so the low speeds cost most; override
``simulation.step_deg`` (e.g. 1.0) for a quick look.  The recommended advance
is MBT only: the map knows no knock limit unless the case has a knock model
and the user reads it with a spark study at the point (see the caution).
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Sequence

import numpy as np

from ..config import Case, case_with, resolve_case
from ..errors import ConfigError
from ..output import CAUTION, atomic_write_text, write_rows_csv
from ..output import plain as _plain
from .spark import SPARK_CAUTION, fit_torque_peak
from .sweep import parse_values

__all__ = ["full_load_curve", "part_load_map", "MapResult", "DEFAULT_SPEEDS", "DEFAULT_LOADS", "DEFAULT_ADVANCES"]

DEFAULT_SPEEDS = (2000.0, 2500.0, 3000.0, 3500.0, 4000.0, 4500.0)
DEFAULT_LOADS = (0.4, 0.55, 0.7, 0.85, 0.98)
DEFAULT_ADVANCES = (10.0, 17.0, 24.0, 31.0, 38.0, 45.0)
FIGURES = ("imep_net_bar", "imep_gross_bar", "pmep_bar", "fmep_bar", "bmep_bar", "torque_Nm", "power_kW",
           "bsfc_g_per_kWh", "eta_brake", "volumetric_efficiency", "exhaust_temperature_K", "p_max_bar",
           "ca50_deg", "residual_fraction")


@dataclass
class MapResult:
    """Rows of a full-load curve or part-load map (one per point) and notes."""

    kind: str
    rows: list
    columns: list
    notes: list = field(default_factory=list)
    files: list = field(default_factory=list)
    base_config: str = ""
    caution: str = CAUTION

    def column(self, name: str) -> np.ndarray:
        return np.array([np.nan if r.get(name) is None else float(r[name]) for r in self.rows])

    def figures(self) -> dict:
        return _plain({"caution": self.caution, "spark_caution": SPARK_CAUTION if self.kind == "part_load" else None,
                       "base_config": self.base_config, "kind": self.kind, "columns": self.columns,
                       "rows": self.rows, "notes": self.notes, "files": [Path(f).name for f in self.files]})

    def text(self) -> str:
        if self.kind == "full_load":
            lines = [f"full-load curve: {self.base_config}",
                     f"  {'speed rpm':>10s}{'torque N m':>12s}{'power kW':>10s}{'BMEP bar':>10s}{'BSFC g/kWh':>12s}"
                     f"{'vol. eff. %':>12s}"]
            for r in self.rows:
                lines.append(f"  {r['speed_rpm']:10.0f}{_f(r, 'torque_Nm', '.1f', 12)}{_f(r, 'power_kW', '.1f', 10)}"
                             f"{_f(r, 'bmep_bar', '.2f', 10)}{_f(r, 'bsfc_g_per_kWh', '.0f', 12)}"
                             f"{_f(r, 'volumetric_efficiency', '.1f', 12, 100)}")
        else:
            lines = [f"part-load map: {self.base_config}",
                     f"  {'speed rpm':>10s}{'p_in bar':>9s}{'spark BTDC':>11s}{'BMEP bar':>10s}{'BSFC g/kWh':>12s}"
                     f"{'eta_b %':>9s}"]
            for r in self.rows:
                lines.append(f"  {r['speed_rpm']:10.0f}{r['intake_pressure_bar']:9.2f}"
                             f"{_f(r, 'spark_advance_deg', '.1f', 11)}{_f(r, 'bmep_bar', '.2f', 10)}"
                             f"{_f(r, 'bsfc_g_per_kWh', '.0f', 12)}{_f(r, 'eta_brake', '.1f', 9, 100)}")
        for n in self.notes:
            lines.append(f"note: {n}")
        lines.append(f"CAUTION: {self.caution}")
        return "\n".join(lines)


def _f(r, k, spec, w, scale=1.0):
    v = r.get(k)
    if v is None or not math.isfinite(v):
        return f"{'-':>{w}s}"
    return f"{format(v * scale, spec):>{w}s}"




def _base(case, overrides):
    case, label = resolve_case(case, overrides)
    if case.simulation.mode != "full":
        raise ConfigError("maps need simulation.mode: full (brake figures need the whole cycle)")
    return case, label


def _numbers(name, values, default):
    vals = parse_values(name, values) if values is not None else list(default)
    try:
        vals = [float(v) for v in vals]
    except (TypeError, ValueError):
        raise ConfigError(f"{name} {values!r}: expected numbers") from None
    if not vals or not all(math.isfinite(v) and v > 0 for v in vals):
        raise ConfigError(f"{name} {values!r}: expected positive numbers")
    return vals


def _row(res, extra: dict) -> dict:
    row = dict(extra)
    row["error"] = res.error or ""
    for k in FIGURES:
        row[k] = None if res.error else res.summary.get(k)
    row["spark_advance_deg"] = row.get("spark_advance_deg", None if res.error else res.summary.get("spark_advance_deg"))
    row["warnings"] = "; ".join(res.warnings)
    return row


def full_load_curve(case: Case | str | Path = "demo", speeds=None, *, overrides: Sequence[str] = (),
                    out: str | Path | None = None, plots: bool = True) -> MapResult:
    """Full-load torque and power against speed (the case's intake pressure and spark at every speed).

    Parameters
    ----------
    case : Case, str or Path
        The full-load case (or a config path / name with ``overrides``).
    speeds : sequence of float or str, optional
        Engine speeds [rpm] (list, ``"a,b,c"`` or ``"start:stop:step"``; default 1500..6000 by 750).
    out : str or Path, optional
        Folder for ``full_load.csv``, ``full_load.json`` and ``full_load.png``.
    """
    from ..api import simulate

    case, label = _base(case, overrides)
    sp = _numbers("speeds", speeds, (1500.0, 2250.0, 3000.0, 3750.0, 4500.0, 5250.0, 6000.0))
    res = simulate([case_with(case, {"operating.speed_rpm": n}) for n in sp])
    rows = [_row(r, {"speed_rpm": n, "intake_pressure_bar": case.operating.intake_pressure_bar}) for n, r in zip(sp, res)]
    cols = ["speed_rpm", "intake_pressure_bar", "spark_advance_deg", *FIGURES, "error", "warnings"]
    m = MapResult("full_load", rows, cols, base_config=label)
    bad = [r for r in rows if r["error"]]
    if bad:
        m.notes.append(f"{len(bad)} point(s) failed: " + "; ".join(f"{r['speed_rpm']:g} rpm: {r['error']}" for r in bad))
    tq = m.column("torque_Nm")
    pw = m.column("power_kW")
    if np.isfinite(tq).any():
        i, j = int(np.nanargmax(tq)), int(np.nanargmax(pw))
        m.notes.append(f"peak torque {tq[i]:.1f} N m at {sp[i]:g} rpm; peak power {pw[j]:.1f} kW at {sp[j]:g} rpm"
                       " (on the speeds simulated)")
    m.notes.append("the spark advance, mixture, intake and exhaust pressure are the case's at every speed"
                   " (a real full-load curve is calibrated per speed, and its exhaust back pressure rises"
                   " with the flow)")
    if out is not None:
        _write(m, Path(out), "full_load", plots, _plot_full_load)
    return m


def part_load_map(case: Case | str | Path = "demo", speeds=None, loads=None, spark: str = "mbt",
                  advances=None, *, overrides: Sequence[str] = (), out: str | Path | None = None,
                  plots: bool = True) -> MapResult:
    """Part-load map over speed x intake pressure, with MBT spark per point or the case's spark.

    Parameters
    ----------
    case : Case, str or Path
        Base case (or a config path / name with ``overrides``).
    speeds : sequence of float or str, optional
        Engine speeds [rpm] (default :data:`DEFAULT_SPEEDS`).
    loads : sequence of float or str, optional
        Intake plenum pressures [bar] (default :data:`DEFAULT_LOADS`).
    spark : {"mbt", "fixed"}
        MBT per point from a coarse advance grid, or the case's advance everywhere.
    advances : sequence of float or str, optional
        Spark advances tried per point with ``spark="mbt"`` [deg BTDC] (default :data:`DEFAULT_ADVANCES`).
    out : str or Path, optional
        Folder for ``part_load_map.csv``/``.json`` and the contour plots.
    """
    from ..api import simulate

    if spark not in ("mbt", "fixed"):
        raise ConfigError(f"spark {spark!r}: expected 'mbt' or 'fixed'")
    case, label = _base(case, overrides)
    sp = _numbers("speeds", speeds, DEFAULT_SPEEDS)
    ld = _numbers("loads", loads, DEFAULT_LOADS)
    points = [(n, p) for n in sp for p in ld]
    notes = []
    mbt = {}
    if spark == "mbt":
        if "spark_advance_deg" not in case.submodels["burn"].params:
            raise ConfigError(f"burn model {case.submodels['burn'].model!r} has no spark advance: use spark='fixed'")
        adv = _numbers("advances", advances, DEFAULT_ADVANCES)
        if len(adv) < 3:
            raise ConfigError("advances: at least 3 are needed to find MBT")
        adv = sorted(adv)
        grid = [case_with(case, {"operating.speed_rpm": n, "operating.intake_pressure_bar": p,
                                "burn.spark_advance_deg": a}) for n, p in points for a in adv]
        res = simulate(grid)
        for k, (n, p) in enumerate(points):
            rr = res[k * len(adv):(k + 1) * len(adv)]
            t = np.array([np.nan if r.error else r.summary["torque_Nm"] for r in rr])
            ok = np.isfinite(t)
            if ok.sum() < 3:
                mbt[(n, p)] = (None, "fewer than 3 advances ran")
                continue
            fit = fit_torque_peak(np.array(adv)[ok], t[ok])
            if fit["bracketed"]:
                mbt[(n, p)] = (fit["mbt_deg"], "MBT (fit)")
            else:
                a_edge = float(np.array(adv)[ok][0 if fit["edge"] == "low" else -1])
                mbt[(n, p)] = (a_edge, f"best advance at the {'lower' if fit['edge'] == 'low' else 'upper'} end"
                                       " of the grid (MBT lies outside it)")
        final = []
        for n, p in points:
            a, _ = mbt[(n, p)]
            final.append(case_with(case, {"operating.speed_rpm": n, "operating.intake_pressure_bar": p,
                                         **({"burn.spark_advance_deg": a} if a is not None else {})}))
        notes.append(f"MBT per point from advances {', '.join(f'{a:g}' for a in adv)} deg BTDC, read by the"
                     " spark study's torque fit; each point then runs at its MBT")
    else:
        final = [case_with(case, {"operating.speed_rpm": n, "operating.intake_pressure_bar": p}) for n, p in points]
        notes.append("the case's spark advance at every point")
    res = simulate(final)
    rows = []
    for (n, p), r in zip(points, res):
        extra = {"speed_rpm": n, "intake_pressure_bar": p}
        if spark == "mbt":
            a, how = mbt[(n, p)]
            extra["spark_source"] = how
        rows.append(_row(r, extra))
    cols = ["speed_rpm", "intake_pressure_bar", "spark_advance_deg", *( ["spark_source"] if spark == "mbt" else []),
            *FIGURES, "error", "warnings"]
    m = MapResult("part_load", rows, cols, notes=notes, base_config=label)
    edge = [r for r in rows if r.get("spark_source", "").startswith("best advance")]
    if edge:
        m.notes.append(f"{len(edge)} point(s) have MBT outside the advance grid: widen advances")
    bad = [r for r in rows if r["error"]]
    if bad:
        m.notes.append(f"{len(bad)} point(s) failed (see the error column)")
    m.notes.append(f"the exhaust pressure is the case's {float(case.operating.exhaust_pressure_bar):g} bar at"
                   " every point (a real exhaust system's back pressure falls with the flow at light load,"
                   " which leaves less residual gas)")
    if case.submodels["burn"].model in FIXED_DURATION_BURNS:
        m.notes.append(f"burn model {case.submodels['burn'].model!r} keeps its delay and duration at every"
                       " point, so MBT moves little with load; burn.model=wiebe_flame scales them with the"
                       " flame speed (dilution, load, speed)")
    m.notes.append(f"recommended advances are MBT only, no knock limit: {SPARK_CAUTION}")
    if out is not None:
        _write(m, Path(out), "part_load_map", plots, _plot_part_load)
    return m


FIXED_DURATION_BURNS = ("wiebe", "double_wiebe", "wiebe_ca50")
"""Burn models whose delay and duration do not follow the operating point."""


def _write(m: MapResult, out: Path, stem: str, plots: bool, plotter) -> None:
    out.mkdir(parents=True, exist_ok=True)
    write_rows_csv(out / f"{stem}.csv", m.rows, m.columns)
    files = [out / f"{stem}.csv"]
    if plots:
        files.extend(plotter(m, out))
    files.append(out / f"{stem}.json")
    m.files = files
    atomic_write_text(out / f"{stem}.json", json.dumps(m.figures(), indent=2) + "\n")


def _plot_full_load(m: MapResult, out: Path) -> list[Path]:
    from ..plots import _plt, _save

    plt = _plt()
    n = m.column("speed_rpm")
    fig, ax = plt.subplots(figsize=(7, 4.2))
    ax.plot(n, m.column("torque_Nm"), "o-", color="tab:blue", label="torque")
    ax.set_xlabel("engine speed [rpm]")
    ax.set_ylabel("brake torque [N m]", color="tab:blue")
    ax2 = ax.twinx()
    ax2.plot(n, m.column("power_kW"), "s-", color="tab:red", label="power")
    ax2.set_ylabel("brake power [kW]", color="tab:red")
    ax2.grid(False)
    ax.set_title(f"{m.base_config}: full-load torque and power")
    return [_save(fig, out / "full_load.png")]


def _plot_part_load(m: MapResult, out: Path) -> list[Path]:
    from ..plots import _plt, _save

    plt = _plt()
    n = m.column("speed_rpm")
    p = m.column("intake_pressure_bar")
    bmep = m.column("bmep_bar")
    files = []
    ok = np.isfinite(bmep)

    def contour(x, y, z, title, zlabel, ylabel, name, fmt="%.0f"):
        good = ok & np.isfinite(z) & np.isfinite(y)
        fig, ax = plt.subplots(figsize=(7, 4.6))
        if good.sum() >= 3 and len(set(x[good])) > 1 and len(set(np.round(y[good], 9))) > 1:
            try:
                cs = ax.tricontourf(x[good], y[good], z[good], levels=12, cmap="viridis")
                fig.colorbar(cs, ax=ax, label=zlabel)
                cl = ax.tricontour(x[good], y[good], z[good], levels=8, colors="k", linewidths=0.5)
                ax.clabel(cl, fontsize=7, fmt=fmt)
            except (ValueError, RuntimeError):
                sc = ax.scatter(x[good], y[good], c=z[good], cmap="viridis")
                fig.colorbar(sc, ax=ax, label=zlabel)
        else:
            sc = ax.scatter(x[good], y[good], c=z[good], cmap="viridis")
            fig.colorbar(sc, ax=ax, label=zlabel)
        ax.plot(x[good], y[good], "k.", ms=3)
        ax.set_xlabel("engine speed [rpm]")
        ax.set_ylabel(ylabel)
        ax.set_title(title)
        files.append(_save(fig, out / name))

    contour(n, bmep, m.column("bsfc_g_per_kWh"), f"{m.base_config}: BSFC [g/kWh]", "BSFC [g/kWh]", "BMEP [bar]",
            "map_bsfc.png")
    contour(n, bmep, 100 * m.column("eta_brake"), "brake efficiency [%]", "brake efficiency [%]", "BMEP [bar]",
            "map_eta_brake.png", "%.1f")
    contour(n, p, bmep, "BMEP [bar]", "BMEP [bar]", "intake pressure [bar]", "map_bmep.png", "%.1f")
    contour(n, p, m.column("spark_advance_deg"), "spark advance [deg BTDC]", "spark advance [deg BTDC]",
            "intake pressure [bar]", "map_spark.png")
    return files
