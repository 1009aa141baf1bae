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
* Both take the exhaust back pressure from each point's flow (``exhaust="flow"``,
  the default): the config's ``operating.exhaust_pressure_bar`` holds at the
  config's own operating point, and the drop across the exhaust system to
  ambient grows with the square of the flow, iterated with the cylinder (so
  light load keeps less residual gas and high speed pumps harder);
  ``exhaust="fixed"`` keeps the config's value everywhere.

Below ``simulation.step_reference_rpm`` (3000 rpm by default) the step
shrinks with the speed (see :func:`cyclesim.config.effective_step_deg`), so the low speeds cost most; override
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
from ..errors import ConfigError, CyclesimError
from ..output import CAUTION, atomic_write_text, write_rows_csv
from ..output import plain as _plain
from .spark import SPARK_CAUTION, fit_torque_peak
from .sweep import WARNING_SEPARATOR, parse_values

__all__ = ["full_load_curve", "part_load_map", "MapResult", "DEFAULT_SPEEDS", "DEFAULT_LOADS", "DEFAULT_ADVANCES"]

DEFAULT_SPEEDS = (2000.0, 2500.0, 3000.0, 3500.0, 4000.0, 4500.0)
DEFAULT_LOADS = (0.4, 0.55, 0.7, 0.85, 0.98)
DEFAULT_ADVANCES = (10.0, 17.0, 24.0, 31.0, 38.0, 45.0)
MBT_EXTEND_ROUNDS = 4
"""With the default advances: rounds of two more advances past the end where a point's best torque lies."""
MBT_SEARCH_RANGE_DEG = (-10.0, 80.0)
"""Spark advances [deg BTDC] the continued grid stays within (80: the spark parameter's upper bound)."""
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
                     f"{'vol. eff. %':>12s}{'p_exh bar':>10s}"]
            for r in self.rows:
                lines.append(f"  {r['speed_rpm']:10.0f}{_f(r, 'torque_Nm', '.1f', 12)}{_f(r, 'power_kW', '.1f', 10)}"
                             f"{_f(r, 'bmep_bar', '.2f', 10)}{_f(r, 'bsfc_g_per_kWh', '.0f', 12)}"
                             f"{_f(r, 'volumetric_efficiency', '.1f', 12, 100)}{_f(r, 'exhaust_pressure_bar', '.3f', 10)}")
        else:
            lines = [f"part-load map: {self.base_config}",
                     f"  {'speed rpm':>10s}{'p_in bar':>9s}{'p_exh bar':>10s}{'spark BTDC':>11s}{'BMEP bar':>10s}"
                     f"{'BSFC g/kWh':>12s}{'eta_b %':>9s}{'residual %':>11s}"]
            for r in self.rows:
                lines.append(f"  {r['speed_rpm']:10.0f}{r['intake_pressure_bar']:9.2f}"
                             f"{_f(r, 'exhaust_pressure_bar', '.3f', 10)}"
                             f"{_f(r, 'spark_advance_deg', '.1f', 11)}{_f(r, 'bmep_bar', '.2f', 10)}"
                             f"{_f(r, 'bsfc_g_per_kWh', '.0f', 12)}{_f(r, 'eta_brake', '.1f', 9, 100)}"
                             f"{_f(r, 'residual_fraction', '.1f', 11, 100)}")
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
    row["warnings"] = WARNING_SEPARATOR.join(res.warnings)
    return row


EXHAUST_MODES = ("flow", "fixed")
EXHAUST_TOLERANCE_BAR = 1e-3
"""Back pressure from the flow: largest change [bar] between passes at which it counts as settled."""
EXHAUST_MAX_PASSES = 6


def _exhaust_flow(res) -> float:
    """Mass flow out through one cylinder's exhaust valves [kg/s]: inducted mass per cycle times
    cycles per second (four-stroke: speed / 120)."""
    return res.summary["inducted_mass_mg"] * 1e-6 * float(res.inputs["operating.speed_rpm"]) / 120.0


class _BackPressure:
    """Exhaust back pressure that follows the flow through a fixed restriction to ambient.

    The case's ``operating.exhaust_pressure_bar`` is the back pressure at the case's own flow
    ``mdot_ref``; downstream of the valves (manifold, catalyst, silencers) the pressure drop of a
    fixed turbulent restriction grows with the square of the flow,
    ``p = p_amb + (p_case - p_amb) (mdot / mdot_ref)^2`` (Bernoulli: ``dp = mdot^2 / (2 rho (Cd A)^2)``,
    at the density of the reference; common practice).  ``p_amb`` is
    ``multi_cylinder.ambient_pressure_bar``.
    """

    def __init__(self, case, mode: str):
        if mode not in EXHAUST_MODES:
            raise ConfigError(f"exhaust {mode!r}: expected one of {', '.join(EXHAUST_MODES)}")
        self.mode = mode
        self.p_case = float(case.operating.exhaust_pressure_bar)
        self.p_amb = float(case.section("multi_cylinder").ambient_pressure_bar)
        self.n_ref = float(case.operating.speed_rpm)
        self.pin_ref = float(case.operating.intake_pressure_bar)
        self.m_ref = None
        if mode == "flow" and self.p_case <= self.p_amb:
            raise ConfigError(f"exhaust 'flow': operating.exhaust_pressure_bar = {self.p_case:g} must exceed the"
                              f" ambient {self.p_amb:g} bar (multi_cylinder.ambient_pressure_bar), or use exhaust 'fixed'")

    def law(self, mdot) -> float:
        return self.p_amb + (self.p_case - self.p_amb) * (float(mdot) / self.m_ref) ** 2

    def settle(self, case, points):
        """Back pressure per (speed, intake pressure) point, iterated with the cylinder until it
        moves by less than :data:`EXHAUST_TOLERANCE_BAR`; returns ({point: bar}, {point: result of the
        last pass}, passes).  Fixed mode: the case's pressure, no simulation."""
        from ..api import simulate

        if self.mode == "fixed":
            return {pt: self.p_case for pt in points}, None, 0
        if self.m_ref is None:
            ref = simulate([case])[0]
            if ref.error:
                raise CyclesimError(f"exhaust back pressure from the flow: the case itself failed: {ref.error}")
            self.m_ref = _exhaust_flow(ref)
        # first guess: the flow scaled from the case by intake pressure and speed
        p = {pt: self.law(self.m_ref * pt[1] / self.pin_ref * pt[0] / self.n_ref) for pt in points}
        for k in range(1, EXHAUST_MAX_PASSES + 1):
            res = simulate([case_with(case, {"operating.speed_rpm": pt[0], "operating.intake_pressure_bar": pt[1],
                                             "operating.exhaust_pressure_bar": p[pt]})
                            for pt in points])
            last = dict(zip(points, res))
            new = {pt: (p[pt] if r.error else self.law(_exhaust_flow(r))) for pt, r in last.items()}
            change = max(abs(new[pt] - p[pt]) for pt in points)
            if change < EXHAUST_TOLERANCE_BAR:
                return p, last, k
            p = new
        return p, last, EXHAUST_MAX_PASSES

    def note(self, passes: int) -> str:
        if self.mode == "fixed":
            return (f"the exhaust pressure is the case's {self.p_case:g} bar at every point (exhaust 'fixed'; a real"
                    " exhaust system's back pressure follows the flow)")
        return (f"exhaust back pressure from each point's flow through a fixed restriction to"
                f" {self.p_amb:g} bar: {self.p_case:g} bar at the case's own flow"
                f" ({1e3 * self.m_ref:.1f} g/s per cylinder), growing with the square of the flow;"
                f" settled in {passes} pass(es) to {EXHAUST_TOLERANCE_BAR:g} bar")


def check_map_inputs(case: Case | str | Path = "demo", speeds=None, loads=None, spark: str = "mbt",
                     advances=None, *, overrides: Sequence[str] = (), exhaust: str = "flow") -> None:
    """Raise the ConfigError that :func:`full_load_curve` or :func:`part_load_map` would raise on
    these inputs, before any simulation (so a command line can refuse them before it writes)."""
    if spark not in ("mbt", "fixed"):
        raise ConfigError(f"spark {spark!r}: expected 'mbt' or 'fixed'")
    case, _ = _base(case, overrides)
    _numbers("speeds", speeds, DEFAULT_SPEEDS)
    _numbers("loads", loads, DEFAULT_LOADS)
    if spark == "mbt":
        _numbers("advances", advances, DEFAULT_ADVANCES)
    _BackPressure(case, exhaust)


def full_load_curve(case: Case | str | Path = "demo", speeds=None, *, overrides: Sequence[str] = (),
                    out: str | Path | None = None, plots: bool = True, exhaust: str = "flow") -> MapResult:
    """Full-load torque and power against speed (the case's intake pressure and spark at every speed).

    Parameters
    ----------
    case : Case, str or Path
        The full-load case (or a config path / name with ``overrides``).
    speeds : sequence of float or str, optional
        Engine speeds [rpm] (list, ``"a,b,c"`` or ``"start:stop:step"``; default 1500..6000 by 750).
    out : str or Path, optional
        Folder for ``full_load.csv``, ``full_load.json`` and ``full_load.png``.
    exhaust : {"flow", "fixed"}
        Exhaust back pressure from each speed's flow (see :class:`_BackPressure`), or the case's
        ``operating.exhaust_pressure_bar`` at every speed.
    """
    from ..api import simulate

    case, label = _base(case, overrides)
    sp = _numbers("speeds", speeds, (1500.0, 2250.0, 3000.0, 3750.0, 4500.0, 5250.0, 6000.0))
    bp = _BackPressure(case, exhaust)
    pin = float(case.operating.intake_pressure_bar)
    points = [(n, pin) for n in sp]
    p_exh, last, passes = bp.settle(case, points)
    if last is None:
        res = simulate([case_with(case, {"operating.speed_rpm": n}) for n in sp])
    else:
        res = [last[pt] for pt in points]
    rows = [_row(r, {"speed_rpm": n, "intake_pressure_bar": pin, "exhaust_pressure_bar": p_exh[(n, pin)],
                     "exhaust_flow_g_per_s": None if r.error else 1e3 * _exhaust_flow(r)})
            for n, r in zip(sp, res)]
    cols = ["speed_rpm", "intake_pressure_bar", "exhaust_pressure_bar", "exhaust_flow_g_per_s", "spark_advance_deg",
            *FIGURES, "error", "warnings"]
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
    m.notes.append("the spark advance, mixture and intake pressure are the case's at every speed"
                   " (a real full-load curve is calibrated per speed)")
    m.notes.append(bp.note(passes))
    if out is not None:
        _write(m, Path(out), "full_load", plots, _plot_full_load)
    return m


def part_load_map(case: Case | str | Path = "demo", speeds=None, loads=None, spark: str = "mbt",
                  advances=None, *, overrides: Sequence[str] = (), out: str | Path | None = None,
                  plots: bool = True, exhaust: str = "flow") -> MapResult:
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
        from ..registry import get_registry, spark_param

        if not get_registry(tuple(case.plugins)).submodel_class("burn", case.submodels["burn"].model).spark_param:
            raise ConfigError(f"burn model {case.submodels['burn'].model!r} has no spark advance: use spark='fixed'")
        spark_key = "burn." + spark_param(case, "maps")
        adv = _numbers("advances", advances, DEFAULT_ADVANCES)
        if len(adv) < 3:
            raise ConfigError("advances: at least 3 are needed to find MBT")
        adv = sorted(adv)
    bp = _BackPressure(case, exhaust)
    # the back pressure of each point from its flow at the case's spark (kept for the MBT runs)
    p_exh, last, passes = bp.settle(case, points)

    def at(n, p, **more):
        return case_with(case, {"operating.speed_rpm": n, "operating.intake_pressure_bar": p,
                                "operating.exhaust_pressure_bar": p_exh[(n, p)], **more})

    if spark == "mbt":
        tried = {pt: {} for pt in points}           # per point: advance -> torque (nan: failed)

        def run_grid(todo):
            todo = [(pt, a) for pt, a in todo if a not in tried[pt]]
            for (pt, a), r in zip(todo, simulate([at(*pt, **{spark_key: a}) for pt, a in todo])):
                tried[pt][a] = np.nan if r.error else r.summary["torque_Nm"]

        run_grid([(pt, a) for pt in points for a in adv])
        # with the default grid, a point whose best torque lies at an end of it gets the grid
        # continued past that end (a slow part-load burn puts MBT beyond 45 deg), within the
        # spark parameter's range
        step = float(np.median(np.diff(adv)))
        lo_lim, hi_lim = MBT_SEARCH_RANGE_DEG
        fits = {}
        for round_ in range(MBT_EXTEND_ROUNDS + 1):
            more = []
            for pt in points:
                a_s = np.array(sorted(tried[pt]))
                t = np.array([tried[pt][a] for a in a_s])
                ok = np.isfinite(t)
                fits[pt] = fit_torque_peak(a_s[ok], t[ok]) if ok.sum() >= 3 else None
                f = fits[pt]
                if advances is None and f is not None and not f["bracketed"] and round_ < MBT_EXTEND_ROUNDS:
                    low = f["edge"] == "low"
                    edge, sign = (a_s[ok][0], -1.0) if low else (a_s[ok][-1], 1.0)
                    more += [(pt, float(a)) for a in (edge + sign * step, edge + 2 * sign * step)
                             if lo_lim <= a <= hi_lim]
            if not more:
                break
            run_grid(more)
        for pt in points:
            f = fits[pt]
            if f is None:
                mbt[pt] = (None, "fewer than 3 advances ran")
            elif f["bracketed"]:
                mbt[pt] = (f["mbt_deg"], "MBT (fit)")
            else:
                a_s = sorted(a for a, v in tried[pt].items() if np.isfinite(v))
                a_edge = float(a_s[0] if f["edge"] == "low" else a_s[-1])
                mbt[pt] = (a_edge, f"best advance at the {'lower' if f['edge'] == 'low' else 'upper'} end"
                                   " of the grid (MBT lies outside it)")
        extended = sorted({a for pt in points for a in tried[pt]} - set(adv))
        final = []
        for n, p in points:
            a, _ = mbt[(n, p)]
            final.append(at(n, p, **({spark_key: a} if a is not None else {})))
        notes.append(f"MBT per point from advances {', '.join(f'{a:g}' for a in adv)} deg BTDC, read by the"
                     " spark study's torque fit; each point then runs at its MBT")
        if extended:
            notes.append(f"where MBT lay past the grid's end the grid was continued for that point"
                         f" ({', '.join(f'{a:g}' for a in extended)} deg BTDC)")
        res = simulate(final)
    else:
        res = [last[pt] for pt in points] if last is not None else simulate([at(n, p) for n, p in points])
        notes.append("the case's spark advance at every point")
    notes.append(bp.note(passes) + (" (found at the case's spark, kept at MBT)" if spark == "mbt"
                                    and bp.mode == "flow" else ""))
    rows = []
    for (n, p), r in zip(points, res):
        extra = {"speed_rpm": n, "intake_pressure_bar": p, "exhaust_pressure_bar": p_exh[(n, p)],
                 "exhaust_flow_g_per_s": None if r.error else 1e3 * _exhaust_flow(r)}
        if spark == "mbt":
            a, how = mbt[(n, p)]
            extra["spark_source"] = how
        rows.append(_row(r, extra))
    cols = ["speed_rpm", "intake_pressure_bar", "exhaust_pressure_bar", "exhaust_flow_g_per_s", "spark_advance_deg",
            *(["spark_source"] if spark == "mbt" else []),
            *FIGURES, "error", "warnings"]
    m = MapResult("part_load", rows, cols, notes=notes, base_config=label)
    edge = [r for r in rows if r.get("spark_source", "").startswith("best advance")]
    if edge:
        m.notes.append(f"{len(edge)} point(s) have MBT outside the advance grid: widen advances")
    bad = [r for r in rows if r["error"]]
    if bad:
        m.notes.append(f"{len(bad)} point(s) failed (see the error column)")
    if spark == "mbt" and case.submodels["burn"].model in FIXED_DURATION_BURNS:
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
    contour(n, p, m.column("spark_advance_deg"), "MBT spark advance [deg BTDC]", "spark advance [deg BTDC]",
            "intake pressure [bar]", "map_spark.png", "%.1f")
    return files
