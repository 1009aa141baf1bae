"""Engine maps: full-load torque and power against speed, part-load maps, with the spark per point.

>>> from cyclesim.studies.maps import full_load_curve, part_load_map
>>> fl = full_load_curve("demo_turbo", out="fullload", exhaust_limit_K=1223)
>>> pm = part_load_map("demo", [2000, 3000, 4000], [0.4, 0.7, 0.98], spark="mbt", out="map")

* :func:`full_load_curve`: the case at each speed at its own (wide-open)
  intake pressure, with the spark per speed and, with ``exhaust_limit_K``,
  enrichment to hold the exhaust temperature.
* :func:`part_load_map`: a grid of speed x intake pressure (the load).
* Spark (both): ``"knock_limited"`` (the default where the case has a knock
  model), ``"mbt"`` (the default without one) or ``"fixed"`` (the case's
  advance), by the spark study's rule (:mod:`cyclesim.studies.point_spark`);
  every point records its spark, what limited it, its knock margin in degrees
  and the knock model's own margin.  Mixture: :mod:`cyclesim.studies.enrichment`.
* Both take the exhaust back pressure from each point's flow (``exhaust="flow"``,
  the default): the config's ``operating.exhaust_pressure_bar`` holds at the
  config's own operating point, and the drop across the exhaust system to
  ambient grows with the square of the flow, iterated with the cylinder at the
  case's spark (so light load keeps less residual gas and high speed pumps
  harder); ``exhaust="fixed"`` keeps the config's value everywhere.

Below ``simulation.step_reference_rpm`` (3000 rpm by default) the step
shrinks with the speed (see :func:`cyclesim.config.effective_step_deg`), so the low speeds cost most; override
``simulation.step_deg`` (e.g. 1.0) for a quick look.  Knock-limited advances
are model estimates (see the caution).
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
from .enrichment import settle_points, with_overrides
from .map_console import group_warnings, map_text
from .point_spark import DEFAULT_ADVANCES, LIMIT_NO_MBT, CaseRunner, check_spark_mode
from .spark import SPARK_CAUTION
from .sweep import WARNING_SEPARATOR, parse_values

__all__ = ["full_load_curve", "part_load_map", "MapResult", "DEFAULT_SPEEDS", "DEFAULT_LOADS", "DEFAULT_ADVANCES"]

DEFAULT_SPEEDS = (2000.0, 2500.0, 3000.0, 3500.0, 4000.0, 4500.0)
DEFAULT_LOADS = (0.4, 0.55, 0.7, 0.85, 0.98)
FIGURES = ("imep_net_bar", "imep_gross_bar", "pmep_bar", "fmep_bar", "bmep_bar", "torque_Nm", "power_kW",
           "bsfc_g_per_kWh", "eta_brake", "volumetric_efficiency", "exhaust_temperature_K", "p_max_bar",
           "ca50_deg", "residual_fraction", "burn_0_10_deg", "burn_10_90_deg", "no_ppm_wet", "no_ppm_dry",
           "no_g_per_kWh")


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
    exhaust_limit_K: float | None = None
    full_load: object = None
    """A full-load curve drawn on (and bounding) a part-load map."""
    cases_run: int = 0

    def column(self, name: str) -> np.ndarray:
        return np.array([np.nan if r.get(name) is None else float(r[name]) for r in self.rows])

    def figures(self) -> dict:
        return _plain({"caution": self.caution, "spark_caution": SPARK_CAUTION,
                       "base_config": self.base_config, "kind": self.kind, "columns": self.columns,
                       "rows": self.rows, "notes": self.notes, "warnings_grouped": group_warnings(self),
                       "cases_run": self.cases_run, "exhaust_limit_K": self.exhaust_limit_K, "files": [Path(f).name for f in self.files]})

    def text(self) -> str:
        """The console table, the warnings grouped by kind, the notes and the caution."""
        return map_text(self)


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


def check_map_inputs(case: Case | str | Path = "demo", speeds=None, loads=None, spark: str | None = None,
                     advances=None, *, overrides: Sequence[str] = (), exhaust: str = "flow",
                     exhaust_limit_K: float | None = None, lambda_floor: float = 0.75) -> None:
    """Raise the ConfigError that :func:`full_load_curve` or :func:`part_load_map` would raise on
    these inputs, before any simulation (so a command line can refuse them before it writes)."""
    case, _ = _base(case, overrides)
    mode = check_spark_mode(spark, case)
    _numbers("speeds", speeds, DEFAULT_SPEEDS)
    _numbers("loads", loads, DEFAULT_LOADS)
    if mode != "fixed":
        _numbers("advances", advances, DEFAULT_ADVANCES)
    if exhaust_limit_K is not None and not exhaust_limit_K > 0:
        raise ConfigError(f"exhaust temperature limit {exhaust_limit_K!r} K: expected a positive number")
    if not 0.3 <= lambda_floor <= 1.5:
        raise ConfigError(f"lambda floor {lambda_floor!r}: expected a number in 0.3..1.5")
    _BackPressure(case, exhaust)


def _run_points(what, case, points, bp, mode, advances, knock_margin_deg, exhaust_limit_K, lambda_floor,
                p_max_limit_bar, progress):
    """Settle each point's back pressure, then its spark and mixture: (solutions, rows, passes, cases run)."""
    run = CaseRunner(what, progress)
    try:
        p_exh, _, passes = bp.settle(case, points)
        sol = _solve_points(case, points, p_exh, mode, advances, knock_margin_deg, exhaust_limit_K, lambda_floor,
                            p_max_limit_bar, run)
    finally:
        run.close()
    return sol, [_point_row(pt, p_exh, sol[pt]) for pt in points], passes, run.cases


def _solve_points(case, points, p_exh, mode, advances, knock_margin_deg, exhaust_limit_K, lambda_floor,
                  p_max_limit_bar, run):
    """Spark (and mixture) of every (speed, intake pressure) point, then each point's row data."""
    base = {pt: {"operating.speed_rpm": pt[0], "operating.intake_pressure_bar": pt[1],
                 "operating.exhaust_pressure_bar": p_exh[pt]} for pt in points}
    adv = None if advances is None else sorted(_numbers("advances", advances, DEFAULT_ADVANCES))
    return settle_points(points, with_overrides(case, base), mode, exhaust_limit_K=exhaust_limit_K,
                         lambda_floor=lambda_floor, run=run, advances=adv, knock_margin_deg=knock_margin_deg,
                         p_max_limit_bar=p_max_limit_bar)


def _point_row(pt, p_exh, s) -> dict:
    r = s.result
    extra = {"speed_rpm": pt[0], "intake_pressure_bar": pt[1], "exhaust_pressure_bar": p_exh[pt],
             "exhaust_flow_g_per_s": None if r.error else 1e3 * _exhaust_flow(r), **s.columns()}
    row = _row(r, extra)
    for k in ("knock_integral_margin", "knock_onset_deg", "knock_unburned_fraction_at_onset", "fuel_mass_mg"):
        row[k] = None if r.error else r.summary.get(k)
    row["spark_advance_deg"] = extra["spark_advance_deg"]
    row["spark_note"] = "; ".join(s.notes)
    return row


SPARK_COLUMNS = ("spark_advance_deg", "spark_limit", "mbt_deg", "knock_limit_deg", "knock_margin_deg", "knock_free_to_deg",
                 "knock_integral_margin", "knock_onset_deg", "knock_unburned_fraction_at_onset", "lambda",
                 "enriched", "exhaust_limit_held", "enrichment_bsfc_cost_g_per_kWh", "in_contours")


def _columns(first):
    return ["speed_rpm", "intake_pressure_bar", *first, "exhaust_pressure_bar", "exhaust_flow_g_per_s",
            *SPARK_COLUMNS, *FIGURES, "fuel_mass_mg", "error", "spark_note", "warnings"]


def _spark_notes(m: "MapResult", mode, knock_margin_deg, exhaust_limit_K, lambda_floor, case) -> None:
    m.exhaust_limit_K = exhaust_limit_K
    if mode == "knock_limited":
        m.notes.append(f"spark per point: the more retarded of MBT and the knock-limited advance less"
                       f" {knock_margin_deg:g} deg (the spark study's rule); knock is the knock model's onset"
                       f" ({case.submodels['knock'].model}, with its own unburned-share cut-off)")
    elif mode == "mbt":
        m.notes.append("spark per point: MBT from the spark study's torque fit, refined on a 2-deg grid round it"
                       + ("" if case.submodels["knock"].model != "none" else
                          "; NOT checked against knock (knock.model: none)"))
    else:
        m.notes.append("the case's spark advance at every point")
    if exhaust_limit_K is not None:
        m.notes.append(f"mixture: enriched where needed to hold the exhaust temperature (enthalpy average at the"
                       f" exhaust valve) at {exhaust_limit_K:g} K, lambda floor {lambda_floor:g}")
    else:
        m.notes.append("mixture: the case's lambda at every point (no exhaust-temperature limit given)")


def full_load_curve(case: Case | str | Path = "demo", speeds=None, *, overrides: Sequence[str] = (),
                    out: str | Path | None = None, plots: bool = True, exhaust: str = "flow",
                    spark: str | None = None, advances=None, knock_margin_deg: float = 2.0,
                    exhaust_limit_K: float | None = None, lambda_floor: float = 0.75,
                    p_max_limit_bar: float | None = None, progress: bool | None = False,
                    boost_bar: float | None = None, boost_options: dict | None = None) -> MapResult:
    """Full-load torque and power against speed at the case's intake pressure (or a matched
    turbocharger's boost), with the spark (and mixture) per speed.

    Parameters
    ----------
    case : Case, str or Path
        The full-load case (or a config path / name with ``overrides``).
    speeds : sequence of float or str, optional
        Engine speeds [rpm] (list, ``"a,b,c"`` or ``"start:stop:step"``; default 1500..6000 by 750).
    out : str or Path, optional
        Folder for ``full_load.csv``, ``full_load.json`` and the plots.
    exhaust : {"flow", "fixed"}
        Exhaust back pressure from each speed's flow (see :class:`_BackPressure`), or the case's
        ``operating.exhaust_pressure_bar`` at every speed.
    spark : {"mbt", "knock_limited", "fixed"}, optional
        Spark per speed (see :mod:`cyclesim.studies.point_spark`); default knock-limited where the
        case has a knock model, else MBT.
    advances : sequence of float or str, optional
        Starting advance grid [deg BTDC].
    knock_margin_deg : float
        Retard kept from the knock-limited advance [deg].
    exhaust_limit_K, lambda_floor : float, optional
        Enrichment to hold the exhaust temperature [K], down to lambda ``lambda_floor``
        (see :mod:`cyclesim.studies.enrichment`).
    p_max_limit_bar : float, optional
        Peak-pressure limit of the spark [bar].
    progress : bool or None
        A tqdm bar on stderr (None: where stderr is a terminal).
    boost_bar : float, optional
        Target intake pressure [bar] of a turbocharger matched at every speed at the point's spark
        and mixture (:mod:`cyclesim.studies.full_load_boost`); the exhaust back pressure is then the
        turbine's and ``exhaust`` is not used.
    boost_options : dict, optional
        Keyword arguments of :func:`cyclesim.studies.boost.boost_match` (efficiencies, turbine
        area, ``compressor_map``, ...).
    """
    case, label = _base(case, overrides)
    if boost_bar is not None:
        return _boosted_full_load(case, label, speeds, mode=check_spark_mode(spark, case), out=out, plots=plots,
                                  advances=advances, knock_margin_deg=knock_margin_deg,
                                  exhaust_limit_K=exhaust_limit_K, lambda_floor=lambda_floor,
                                  p_max_limit_bar=p_max_limit_bar, progress=progress, boost_bar=boost_bar,
                                  boost_options=dict(boost_options or {}))
    mode = check_spark_mode(spark, case)
    sp = _numbers("speeds", speeds, (1500.0, 2250.0, 3000.0, 3750.0, 4500.0, 5250.0, 6000.0))
    bp = _BackPressure(case, exhaust)
    pin = float(case.operating.intake_pressure_bar)
    points = [(n, pin) for n in sp]
    sol, rows, passes, cases_run = _run_points("full-load curve", case, points, bp, mode, advances,
                                               knock_margin_deg, exhaust_limit_K, lambda_floor, p_max_limit_bar,
                                               progress)
    m = MapResult("full_load", rows, _columns([]), base_config=label)
    bad = [r for r in rows if r["error"]]
    if bad:
        m.notes.append(f"{len(bad)} point(s) failed: " + "; ".join(f"{r['speed_rpm']:g} rpm: {r['error']}" for r in bad))
    tq = m.column("torque_Nm")
    pw = m.column("power_kW")
    if np.isfinite(tq).any():
        i, j = int(np.nanargmax(tq)), int(np.nanargmax(pw))
        m.notes.append(f"peak torque {tq[i]:.1f} N m at {sp[i]:g} rpm; peak power {pw[j]:.1f} kW at {sp[j]:g} rpm"
                       " (on the speeds simulated)")
    _spark_notes(m, mode, knock_margin_deg, exhaust_limit_K, lambda_floor, case)
    m.notes.append(f"the intake pressure is the case's {pin:g} bar at every speed (no boost control)")
    m.notes.append(bp.note(passes) + (" (found at the case's spark and lambda)" if bp.mode == "flow" else ""))
    m.cases_run = cases_run
    if mode != "fixed":
        m.notes.append(f"{SPARK_CAUTION}")
    if out is not None:
        from ..plots.maps import plot_full_load

        _write(m, Path(out), "full_load", plots, plot_full_load)
    return m


def part_load_map(case: Case | str | Path = "demo", speeds=None, loads=None, spark: str | None = None,
                  advances=None, *, overrides: Sequence[str] = (), out: str | Path | None = None,
                  plots: bool = True, exhaust: str = "flow", knock_margin_deg: float = 2.0,
                  exhaust_limit_K: float | None = None, lambda_floor: float = 0.75,
                  p_max_limit_bar: float | None = None, full_load: "MapResult | None" = None,
                  progress: bool | None = False) -> MapResult:
    """Part-load map over speed x intake pressure, with the spark per point.

    Parameters
    ----------
    case : Case, str or Path
        Base case (or a config path / name with ``overrides``).
    speeds : sequence of float or str, optional
        Engine speeds [rpm] (default :data:`DEFAULT_SPEEDS`).
    loads : sequence of float or str, optional
        Intake plenum pressures [bar] (default :data:`DEFAULT_LOADS`).
    spark : {"mbt", "knock_limited", "fixed"}, optional
        Spark per point (default knock-limited where the case has a knock model, else MBT).
    advances : sequence of float or str, optional
        Starting advance grid per point [deg BTDC] (default :data:`DEFAULT_ADVANCES`, continued
        where MBT lies beyond it; a grid given is kept as given).
    out : str or Path, optional
        Folder for ``part_load_map.csv``/``.json`` and the contour plots.
    knock_margin_deg, exhaust_limit_K, lambda_floor, p_max_limit_bar, progress
        As for :func:`full_load_curve`.
    full_load : MapResult, optional
        A full-load curve of the same engine: its BMEP line is drawn on the BSFC map and bounds it.
    """
    case, label = _base(case, overrides)
    mode = check_spark_mode(spark, case)
    sp = _numbers("speeds", speeds, DEFAULT_SPEEDS)
    ld = _numbers("loads", loads, DEFAULT_LOADS)
    points = [(n, p) for n in sp for p in ld]
    bp = _BackPressure(case, exhaust)
    sol, rows, passes, cases_run = _run_points("part-load map", case, points, bp, mode, advances,
                                               knock_margin_deg, exhaust_limit_K, lambda_floor, p_max_limit_bar,
                                               progress)
    m = MapResult("part_load", rows, _columns([]), base_config=label)
    m.full_load = full_load
    _spark_notes(m, mode, knock_margin_deg, exhaust_limit_K, lambda_floor, case)
    ext = sorted({a for s in sol.values() for a in s.pick.tried} - set(DEFAULT_ADVANCES))
    if mode != "fixed" and advances is None and any(a > max(DEFAULT_ADVANCES) or a < min(DEFAULT_ADVANCES)
                                                    for a in ext):
        m.notes.append("where MBT lay past the grid's end the grid was continued for that point")
    m.notes.append(bp.note(passes) + (" (found at the case's spark, kept at the chosen spark)"
                                      if mode != "fixed" and bp.mode == "flow" else ""))
    noclamp = [r for r in rows if r["spark_limit"] == LIMIT_NO_MBT]
    if noclamp:
        m.notes.append(f"{len(noclamp)} point(s): MBT not found within the advances run (clamp); left out of"
                       " the contours: widen the advances")
    bad = [r for r in rows if r["error"]]
    if bad:
        m.notes.append(f"{len(bad)} point(s) failed (see the error column)")
    if mode != "fixed" and case.submodels["burn"].model in FIXED_DURATION_BURNS:
        m.notes.append(f"burn model {case.submodels['burn'].model!r} keeps its delay and duration at every"
                       " point, so MBT moves little with load; burn.model=wiebe_flame scales them with the"
                       " flame speed (dilution, load, speed)")
    m.cases_run = cases_run
    m.notes.append(SPARK_CAUTION)
    if out is not None:
        from ..plots.maps import plot_part_load

        _write(m, Path(out), "part_load_map", plots, plot_part_load)
    return m


BOOST_COLUMNS = ("boost_limit", "boost_target_bar", "intake_temperature_K", "wastegate_share", "eta_compressor",
                 "compressor_pressure_ratio", "compressor_corrected_flow_kg_per_s", "surge_margin", "choke_margin",
                 "turbocharger_speed_rpm", "boost_passes")


def _boosted_full_load(case, label, speeds, *, mode, out, plots, advances, knock_margin_deg, exhaust_limit_K,
                       lambda_floor, p_max_limit_bar, progress, boost_bar, boost_options):
    from .full_load_boost import MAX_PASSES, boosted_points

    if not boost_bar > 0:
        raise ConfigError(f"boost {boost_bar!r} bar: expected a positive number")
    if "compressor_map" in boost_options and boost_options["compressor_map"] is not None:
        from .boost import _compressor_map

        boost_options["compressor_map"] = _compressor_map(boost_options["compressor_map"])
    sp = _numbers("speeds", speeds, (1500.0, 2250.0, 3000.0, 3750.0, 4500.0, 5250.0, 6000.0))
    points = [(n, float(boost_bar)) for n in sp]
    adv = None if advances is None else sorted(_numbers("advances", advances, DEFAULT_ADVANCES))
    run = CaseRunner("full-load curve with boost", progress)
    try:
        sol, boost = boosted_points(case, points, mode, float(boost_bar), boost_options, run=run,
                                    spark_options={"advances": adv, "knock_margin_deg": knock_margin_deg,
                                                   "p_max_limit_bar": p_max_limit_bar},
                                    exhaust_limit_K=exhaust_limit_K, lambda_floor=lambda_floor)
    finally:
        run.close()
    rows = []
    for pt in points:
        b = boost[pt]
        r = _point_row(pt, {pt: b["p_exh_bar"]}, sol[pt])
        r["intake_pressure_bar"] = b["boost_bar"]
        r.update({"boost_limit": b["boost_limit"], "boost_target_bar": float(boost_bar),
                  "intake_temperature_K": b["T_intake_K"], "wastegate_share": b["wastegate_share"],
                  "eta_compressor": b["eta_compressor"], "compressor_pressure_ratio": b["compressor_pressure_ratio"],
                  "compressor_corrected_flow_kg_per_s": b["compressor_corrected_flow_kg_per_s"],
                  "surge_margin": b["surge_margin"], "choke_margin": b["choke_margin"],
                  "turbocharger_speed_rpm": b["turbocharger_speed_rpm"], "boost_passes": b["passes"]})
        rows.append(r)
    m = MapResult("full_load", rows, _columns([]) + list(BOOST_COLUMNS), base_config=label)
    _spark_notes(m, mode, knock_margin_deg, exhaust_limit_K, lambda_floor, case)
    cm = boost_options.get("compressor_map")
    m.notes.append(f"boost: a turbocharger matched at every speed to {boost_bar:g} bar at the point's spark and"
                   f" mixture, alternated with them up to {MAX_PASSES} passes; compressor efficiency "
                   + (f"from the map {cm.name}" if cm is not None else
                      f"fixed at {boost_options.get('eta_compressor', 0.72):g} (no compressor map: surge and"
                      " choke not checked)"))
    short = [r for r in rows if r["boost_limit"].startswith("boost not reached")]
    if short:
        m.notes.append("boost not reached at " + ", ".join(f"{r['speed_rpm']:g} rpm ({r['intake_pressure_bar']:.2f}"
                                                            " bar)" for r in short)
                       + ": the turbine cannot drive the compressor there with the wastegate closed")
    unsettled = [r for r in rows if r["boost_passes"] == MAX_PASSES]
    if unsettled:
        m.notes.append(f"spark and turbocharger still moving after {MAX_PASSES} passes at "
                       + ", ".join(f"{r['speed_rpm']:g} rpm" for r in unsettled))
    m.cases_run = run.cases
    m.notes.append(SPARK_CAUTION)
    if out is not None:
        from ..plots.maps import plot_full_load

        def plotter(m_, out_):
            files = plot_full_load(m_, out_)
            if cm is not None:
                from .compressor_map import plot_compressor_map

                op = [{"corrected_flow_kg_per_s": r["compressor_corrected_flow_kg_per_s"],
                       "pressure_ratio": r["compressor_pressure_ratio"], "label": f"{r['speed_rpm']:g}"}
                      for r in m_.rows if r["compressor_corrected_flow_kg_per_s"] is not None]
                files.append(plot_compressor_map(cm, out_ / "compressor_map.png", op,
                                                 title=f"{label}: full-load operating line on {cm.name}"))
            return files

        _write(m, Path(out), "full_load", plots, plotter)
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
