"""Spark-advance study: MBT from a fit, the flat top of the torque curve, knock and pressure limits.

>>> from cyclesim.studies.spark import spark_study
>>> st = spark_study("demo", advances="10:40:2", out="spark")
>>> print(st.text())

The study sweeps ``burn.spark_advance_deg`` and reads the torque curve:

* **MBT** (minimum advance for best torque, here the advance of maximum fitted
  torque) from a least-squares polynomial through the points within a few
  percent of the highest torque (degree 2 to 4 with the number of points),
  so it falls between grid points.
* the **least advance within** ``torque_fraction`` of best torque: the most
  retarded advance whose torque (the fit inside its window, a monotone
  piecewise-cubic through the points outside it) is at least
  ``(1 - torque_fraction)`` times the best torque.
* torque loss [%] at each advance relative to the best (fitted) torque, as a
  column ``torque_loss_pct`` of the table.
* CA50, angle and value of peak pressure and the largest pressure-rise rate at
  MBT, interpolated between the advances (cubic spline).
* the **knock-limited advance** when the knock model reports
  ``knock_onset_deg``: the least advance at which knock onset occurs, found
  where ``knock_integral_max`` crosses 1 between two advances (linear
  interpolation).  With ``knock_min_unburned`` only knock with at least that share
  of the charge still unburned at onset counts.
* the **recommended advance**: the most retarded of MBT, knock-limited advance
  minus ``knock_margin_deg``, and the advances at which peak pressure and the
  pressure-rise rate reach ``p_max_limit_bar`` and ``dp_limit_bar_per_deg``.

Burn models that fix the phasing by CA50 (``wiebe_ca50``) have no spark
advance to sweep: the study refuses them with a message pointing to a sweep of
``burn.ca50_deg`` instead.

Torque is the brake torque ``torque_Nm``; where a case has none (closed-cycle
mode) the study uses net, then closed-cycle IMEP.
"""

from __future__ import annotations

import contextlib
import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from ..config import Case, resolve_case
from ..errors import ConfigError, CyclesimError
from ..output import CAUTION, atomic_write_text
from ..results.outdir import folder_lock
from .sweep import CSV_NAME, JSON_NAME, SweepResult, parse_values, sweep
from .sweep_files import write_failed
from .spark_console import case_warning_groups
from .knock_onset import model_cutoff, unburned_at_onset
from .curve_reading import crossing_up, fit_torque_peak, interp_at  # noqa: F401 - re-exported for callers of the study

__all__ = ["spark_study", "SparkStudy", "fit_torque_peak", "crossing_up", "SPARK_CAUTION"]

KEY = "burn.spark_advance_deg"
SPARK_CAUTION = (
    "MBT and knock-limited timings are model estimates: on a real engine approach them gradually"
    " with knock detection, within the manufacturer's limits and the test cell's procedures"
)
TORQUE_KEYS = ("torque_Nm", "imep_net_bar", "imep_closed_bar")
_LABELS = {"torque_Nm": "brake torque", "imep_net_bar": "net IMEP", "imep_closed_bar": "closed-cycle IMEP"}


@dataclass
class SparkStudy:
    """Figures of a spark-advance study (advances in deg before firing TDC).

    Attributes
    ----------
    table : SweepResult
        One row per advance, with ``torque_loss_pct`` added.
    torque_key : str
        Column used as torque (``torque_Nm`` unless the cases have none).
    mbt_deg : float or None
        Advance of maximum fitted torque; None if the maximum lies outside
        the sweep.
    best_torque : float
        Fitted torque at MBT (or the highest computed if not bracketed).
    retard_limit_deg : float or None
        Least advance within ``torque_fraction`` of best torque.
    torque_fraction : float
    ca50_at_mbt_deg, theta_pmax_at_mbt_deg, p_max_at_mbt_bar, dp_max_at_mbt_bar_per_deg : float or None
    knock_limited_deg : float or None
        Least advance at which knock onset occurs (None: no knock model, or
        no knock in the sweep, or knock everywhere; see ``notes``).
    knock_status : str
        ``"no model"``, ``"crossed"``, ``"never"`` or ``"always"``.
    pmax_limited_deg, dp_limited_deg : float or None
        Advances at which peak pressure / pressure-rise rate reach their limits.
    recommended_deg : float or None
        The most retarded of the candidates in ``candidates``.
    recommended_by : str
        Which candidate set it.
    candidates : dict
        Name -> advance of each limit taken into account.
    fit : dict
        Polynomial degree, window and coefficients of the torque fit.
    notes : list of str
    files : list of Path
    """

    table: SweepResult
    torque_key: str
    mbt_deg: float | None
    best_torque: float
    retard_limit_deg: float | None
    torque_fraction: float
    ca50_at_mbt_deg: float | None = None
    theta_pmax_at_mbt_deg: float | None = None
    p_max_at_mbt_bar: float | None = None
    dp_max_at_mbt_bar_per_deg: float | None = None
    knock_limited_deg: float | None = None
    knock_status: str = "no model"
    knock_margin_deg: float = 2.0
    pmax_limited_deg: float | None = None
    dp_limited_deg: float | None = None
    recommended_deg: float | None = None
    recommended_by: str = ""
    candidates: dict = field(default_factory=dict)
    fit: dict = field(default_factory=dict)
    statistical_knock: dict | None = None
    notes: list = field(default_factory=list)
    warning_groups: list = field(default_factory=list)
    """The cases' warnings by kind with the advances that gave them (spark_console.case_warning_groups)."""
    files: list = field(default_factory=list)
    base_config: str = ""
    caution: str = SPARK_CAUTION
    config_advance_deg: float | None = None
    spark_key: str = KEY
    """The swept key: ``burn.`` + the burn model's ``spark_param`` (its spark contract)."""
    """The spark advance of the config the study started from [deg BTDC]."""

    def knock_at_limit(self) -> dict:
        """Knock onset [deg ATDC] and unburned share [-] at the least swept advance with onset
        (empty where no case knocks or the cases report no onset)."""
        if "knock_onset_deg" not in self.table.columns:
            return {}
        adv = self.table.column(self.spark_key)
        onset = self.table.column("knock_onset_deg")
        ok = np.isfinite(adv) & np.isfinite(onset)
        if not ok.any():
            return {}
        j = np.flatnonzero(ok)[np.argmin(adv[ok])]
        out = {"advance_deg": float(adv[j]), "onset_deg": float(onset[j])}
        if "knock_unburned_fraction_at_onset" in self.table.columns:
            out["unburned"] = _f(self.table.column("knock_unburned_fraction_at_onset")[j])
        return out

    def torque_at(self, advance_deg) -> np.ndarray:
        """Torque model used by the study: the fit inside its window, a monotone cubic outside."""
        a = np.atleast_1d(np.asarray(advance_deg, float))
        return _torque_model(self)(a)

    def figures(self) -> dict:
        """Every figure as JSON-ready data."""
        tk = self.torque_key
        adv = self.table.column(self.spark_key)
        fit = {k: v for k, v in self.fit.items() if k != "poly"}
        return {
            "caution": self.caution,
            "general_caution": CAUTION,
            "base_config": self.base_config,
            "torque_key": tk,
            "mbt_deg": self.mbt_deg,
            f"best_{tk}": self.best_torque,
            "torque_fraction": self.torque_fraction,
            "retard_limit_deg": self.retard_limit_deg,
            "ca50_at_mbt_deg": self.ca50_at_mbt_deg,
            "theta_pmax_at_mbt_deg": self.theta_pmax_at_mbt_deg,
            "p_max_at_mbt_bar": self.p_max_at_mbt_bar,
            "dp_max_at_mbt_bar_per_deg": self.dp_max_at_mbt_bar_per_deg,
            "knock_limited_deg": self.knock_limited_deg,
            "knock_status": self.knock_status,
            "knock_at_limit": self.knock_at_limit(),
            "config_advance_deg": self.config_advance_deg,
            "knock_margin_deg": self.knock_margin_deg,
            "pmax_limited_deg": self.pmax_limited_deg,
            "dp_limited_deg": self.dp_limited_deg,
            "recommended_deg": self.recommended_deg,
            "recommended_by": self.recommended_by,
            "statistical_knock": self.statistical_knock,
            "candidates_deg": dict(self.candidates),
            "fit": fit,
            "notes": list(self.notes),
            "warnings_grouped": list(self.warning_groups),
            "advances_deg": [_f(v) for v in adv],
            tk: [_f(v) for v in self.table.column(tk)],
            "torque_loss_pct": [_f(v) for v in self.table.column("torque_loss_pct")],
            "files": [Path(f).name for f in self.files],
        }

    def text(self) -> str:
        """A short readable report (ends with the caution)."""
        tk = self.torque_key
        unit = {"torque_Nm": "N m"}.get(tk, "bar")
        adv = self.table.column(self.spark_key)
        lines = [f"spark advance study: {self.base_config}, advances {np.nanmin(adv):g} to {np.nanmax(adv):g} deg BTDC"
                 f" ({len(adv)} cases, {len(self.table.failed)} failed)"]

        def row(label, v, u="deg BTDC", spec=".1f"):
            lines.append(f"  {label:<40s}{'-' if v is None else format(v, spec):>9s}  {u}")

        row("MBT (from the fitted torque curve)", self.mbt_deg)
        row(f"best {_LABELS.get(tk, tk)}", self.best_torque, unit, ".2f")
        row(f"least advance within {100 * self.torque_fraction:g} % of best", self.retard_limit_deg)
        row("CA50 at MBT", self.ca50_at_mbt_deg, "deg ATDC")
        row("angle of peak pressure at MBT", self.theta_pmax_at_mbt_deg, "deg ATDC")
        row("peak pressure at MBT", self.p_max_at_mbt_bar, "bar")
        if self.knock_status != "no model":
            row("knock-limited advance", self.knock_limited_deg)
            at = self.knock_at_limit()
            if at:
                row("  onset at the first knocking advance", at["onset_deg"], "deg ATDC")
                if at.get("unburned") is not None:
                    row("  charge unburned at that onset", 100 * at["unburned"], "%", ".0f")
            if self.knock_limited_deg is not None and self.config_advance_deg is not None:
                row("  margin of the config's spark", self.knock_limited_deg - self.config_advance_deg,
                    "deg (positive: retarded of the limit)", "+.1f")
        if self.pmax_limited_deg is not None:
            row("peak-pressure limit reached at", self.pmax_limited_deg)
        if self.dp_limited_deg is not None:
            row("pressure-rise limit reached at", self.dp_limited_deg)
        row("recommended advance", self.recommended_deg)
        if self.recommended_deg is not None and self.mbt_deg is not None:
            loss = 100.0 * (1.0 - float(self.torque_at(self.recommended_deg)[0]) / self.best_torque)
            row(f"  {_LABELS.get(tk, tk)} lost there", loss, "% of best", ".1f")
        if self.recommended_by:
            lines.append(f"  (set by: {self.recommended_by})")
        from .spark_console import spark_table_lines, spark_warning_lines

        lines += spark_table_lines(self) + spark_warning_lines(self)
        for n in self.notes:
            lines.append(f"note: {n}")
        lines.append(f"CAUTION: {self.caution}.")
        return "\n".join(lines)


def _f(v) -> float | None:
    v = float(v)
    return v if math.isfinite(v) else None


def _torque_model(st: SparkStudy):
    adv = st.table.column(st.spark_key)
    tq = st.table.column(st.torque_key)
    ok = np.isfinite(adv) & np.isfinite(tq)
    order = np.argsort(adv[ok])
    xs, ys = adv[ok][order], tq[ok][order]
    from scipy.interpolate import PchipInterpolator

    pchip = PchipInterpolator(xs, ys, extrapolate=False)
    poly = st.fit.get("poly")
    win = st.fit.get("window_deg")

    def model(a):
        out = np.asarray(pchip(a), float)
        if poly is not None and win is not None:
            inside = (a >= win[0]) & (a <= win[1])
            out = np.where(inside, poly(a), out)
        return out

    return model


def _least_within(st: SparkStudy, a_min: float) -> tuple[float | None, str]:
    """Most retarded advance (<= MBT) whose modelled torque is >= (1 - fraction) * best."""
    from scipy.optimize import brentq

    target = st.best_torque * (1.0 - st.torque_fraction)
    model = _torque_model(st)
    grid = np.linspace(a_min, st.mbt_deg, 4001)
    t = model(grid)
    below = np.flatnonzero(t < target)
    if len(below) == 0:
        return None, "always"
    j = int(below[-1])
    if j == len(grid) - 1:
        return st.mbt_deg, "crossed"
    f = lambda a: float(model(np.array([a]))[0]) - target  # noqa: E731
    return float(brentq(f, grid[j], grid[j + 1], xtol=1e-6)), "crossed"


# --------------------------------------------------------------------------
# The study
# --------------------------------------------------------------------------


def _check_burn_model(case: Case) -> str:
    """The swept key of the spark timing (``burn.`` + the burn model's ``spark_param``)."""
    from ..registry import get_registry, spark_param

    from ..results.motoring import is_motored_config

    if is_motored_config(case):
        raise ConfigError("the case is motored (operating.fuel_cut, or burn.model 'none'): no fuel burns and spark"
                          " timing changes nothing; `cyclesim run` gives the motored figures")
    ch = case.submodels["burn"]
    cls = get_registry(tuple(case.plugins)).submodel_class("burn", ch.model)
    names = [p.name for p in cls.params]
    if not cls.spark_param:
        hint = " sweep burn.ca50_deg instead (cyclesim sweep --vary burn.ca50_deg=0:20:1)" if "ca50_deg" in names else ""
        raise ConfigError(
            f"burn.model = {ch.model!r} sets the burn phasing without a spark advance, so spark advance"
            f" cannot be swept; use burn.model=wiebe (or another spark-timed model), or{hint or ' vary its phasing key'}"
        )
    return "burn." + spark_param(case, "spark study")


def _knock(st: SparkStudy, table: SweepResult, adv: np.ndarray, ok: np.ndarray, knock_min_unburned) -> None:
    if "knock_onset_deg" not in table.columns:
        st.knock_status = "no model"
        st.notes.append("no knock model active (knock.model = none): knock-limited advance not estimated")
        return
    onset = table.column("knock_onset_deg")[ok]
    a = adv[ok]
    if knock_min_unburned is not None:
        share = unburned_at_onset(table, ok, onset)
        if share is None:
            st.notes.append("knock_min_unburned ignored: the unburned share at knock onset is not available"
                            " for every case (no knock_unburned_fraction_at_onset figure and no trace)")
        else:
            level = np.where(np.isfinite(onset), share, 0.0)
            x, status = crossing_up(a, level, float(knock_min_unburned))
            st.knock_limited_deg, st.knock_status = x, status
            crit = f"at least {100 * knock_min_unburned:g} % of the charge unburned at onset"
            st.notes.append(f"knock counted with {crit}")
            cut = model_cutoff(table)
            if cut is not None and knock_min_unburned <= cut:
                st.notes.append(f"--knock-min-unburned {knock_min_unburned:g} is at or below the knock model's own"
                                f" cut-off (knock.min_unburned_fraction = {cut:g}: the integral stops there), so"
                                f" it changes nothing; raise it above {cut:g} to count only heavier knock")
            _knock_notes(st, status, a, crit)
            return
    if "knock_integral_max" in table.columns and np.isfinite(table.column("knock_integral_max")[ok]).any():
        x, status = crossing_up(a, table.column("knock_integral_max")[ok], 1.0)
    else:
        knocks = np.isfinite(onset).astype(float)
        x, status = crossing_up(a, knocks, 1.0)
        if status == "crossed":
            x = float(a[int(np.argmax(knocks >= 1.0))])
            st.notes.append("knock-limited advance is the first advance swept with knock onset"
                            " (no knock_integral_max figure to interpolate)")
    st.knock_limited_deg, st.knock_status = x, status
    _knock_notes(st, status, a)


def _knock_notes(st: SparkStudy, status: str, a: np.ndarray, criterion: str = "") -> None:
    what = f"no knock onset with {criterion}" if criterion else "no knock onset"
    if status == "never":
        st.notes.append(f"{what} up to {a.max():g} deg BTDC: knock-limited advance is beyond the sweep")
    elif status == "always":
        st.notes.append(f"knock onset{' with ' + criterion if criterion else ''} already at {a.min():g} deg BTDC,"
                        " the least advance swept: the knock limit lies below the sweep")


_LIMIT_UNITS = {"p_max_bar": "bar", "dp_dtheta_max_bar_per_deg": "bar/deg"}


def _limit(st, label, col, limit, table, adv) -> tuple[float | None, str]:
    """Advance at which a rising figure reaches its limit: (advance, status of crossing_up)."""
    if limit is None:
        return None, "none"
    if col not in table.columns:
        st.notes.append(f"{label} limit ignored: the cases report no {col}")
        return None, "none"
    x, status = crossing_up(adv, table.column(col), float(limit))
    if status == "always":
        st.notes.append(f"{label} already reaches {limit:g} {_LIMIT_UNITS.get(col, '')} at the least advance"
                        f" swept ({adv.min():g} deg BTDC)")
    elif status == "never":
        st.notes.append(f"{label} stays below {limit:g} {_LIMIT_UNITS.get(col, '')} over the whole sweep")
    return x, status


def spark_study(
    base: Case | str | Path = "demo",
    advances: Any = "0:40:1",
    overrides: Sequence[str] = (),
    out: str | Path | None = None,
    torque_fraction: float = 0.01,
    knock_margin_deg: float = 2.0,
    p_max_limit_bar: float | None = None,
    dp_limit_bar_per_deg: float | None = None,
    knock_min_unburned: float | None = None,
    *,
    fit_window_fraction: float = 0.03,
    resume: bool = False,
    force: bool = False,
    chunk_size: int = 64,
    progress=None,
    plots: bool = True,
    traces: int = 8,
    workers: int | str | None = None,
    backend: str | None = None,
    scheduler: str | None = None,
    knock_cycles: int = 0,
    knock_cycle_share: float = 0.05,
) -> SparkStudy:
    """Sweep spark advance and read MBT, the flat top, knock and pressure limits.

    With ``knock_cycles`` > 0 (and a knock model), ``knock_cycles`` cycles with
    cycle-to-cycle variation are also simulated at each advance of the sweep and
    the statistical knock limit (the advance at which ``knock_cycle_share`` of the
    cycles knock) replaces the mean cycle's limit in the recommendation.

    Parameters
    ----------
    base : Case, str or Path
        Base case, or a config path / built-in name (with ``overrides``).
    advances : str or list
        Spark advances [deg before TDC]: ``"start:stop:step"``, ``"a,b,c"`` or a list.
    overrides : list of str
        ``key=value`` changes to the base config.
    out : str or Path, optional
        Folder for ``spark_study.json``, ``sweep.csv``, ``sweep.json`` and the plots.
    torque_fraction : float
        Torque fraction for the least advance within it of best torque [-].
    knock_margin_deg : float
        Retard kept from the knock-limited advance [deg].
    p_max_limit_bar : float, optional
        Peak-pressure limit [bar].
    dp_limit_bar_per_deg : float, optional
        Limit of the largest pressure-rise rate [bar/deg].
    knock_min_unburned : float, optional
        Count knock only when at least this share of the charge is unburned at onset [-].
    fit_window_fraction : float
        Points within this fraction of the highest torque enter the MBT fit [-].
    resume, force, chunk_size, progress
        As for :func:`cyclesim.studies.sweep.sweep`.
    plots : bool
        With ``out``: write the PNG plots.
    traces : int
        Number of pressure traces overlaid in the trace plot.
    workers, backend, scheduler
        Where the cases run, as for :func:`cyclesim.studies.sweep.sweep`.

    Returns
    -------
    SparkStudy
    """
    if not 0.0 < torque_fraction < 1.0:
        raise ConfigError(f"--torque-fraction {torque_fraction!r}: expected a number between 0 and 1")
    if knock_margin_deg < 0:
        raise ConfigError(f"--knock-margin {knock_margin_deg!r}: expected >= 0 deg")
    if knock_min_unburned is not None and not 0.0 <= knock_min_unburned < 1.0:
        raise ConfigError(f"--knock-min-unburned {knock_min_unburned!r}: expected a number in [0, 1)")
    for name, v in (("--pmax-limit", p_max_limit_bar), ("--dp-limit", dp_limit_bar_per_deg)):
        if v is not None and not v > 0:
            raise ConfigError(f"{name} {v!r}: expected a positive number")
    if isinstance(knock_cycles, bool) or not isinstance(knock_cycles, int) or knock_cycles < 0:
        raise ConfigError(f"--knock-cycles {knock_cycles!r}: expected a whole number >= 0")
    if not 0.0 < knock_cycle_share <= 1.0:
        raise ConfigError(f"--knock-cycle-share {knock_cycle_share!r}: expected a number in (0, 1]")
    case, label = resolve_case(base, overrides)
    key = _check_burn_model(case)
    vals = parse_values(key, advances)
    for v in vals:
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise ConfigError(f"--advance {advances!r}: {v!r} is not a spark advance (expected degrees before"
                              " TDC as start:stop:step or a,b,c)")
    if len(vals) < 3:
        raise ConfigError(f"--advance {advances!r}: at least 3 advances are needed to find MBT")
    options = {"torque_fraction": torque_fraction, "knock_margin_deg": knock_margin_deg,
               "p_max_limit_bar": p_max_limit_bar, "dp_limit_bar_per_deg": dp_limit_bar_per_deg,
               "knock_min_unburned": knock_min_unburned, "fit_window_fraction": fit_window_fraction,
               "knock_cycles": int(knock_cycles or 0), "knock_cycle_share": knock_cycle_share}
    # the sweep and the study's own files: one writer in the folder for the whole study
    with folder_lock(out) if out is not None else contextlib.nullcontext():
        return _spark_study(case, label, key, vals, options, overrides, None if out is None else Path(out), resume,
                            force, chunk_size, progress, plots, traces, (workers, backend, scheduler))


def _spark_study(case: Case, label: str, key: str, vals: list, options: dict, overrides: Sequence[str], out: Path | None,
                 resume: bool, force: bool, chunk_size: int, progress, plots: bool, traces: int,
                 where: tuple) -> SparkStudy:
    torque_fraction, knock_margin_deg = options["torque_fraction"], options["knock_margin_deg"]
    p_max_limit_bar, dp_limit_bar_per_deg = options["p_max_limit_bar"], options["dp_limit_bar_per_deg"]
    knock_min_unburned, fit_window_fraction = options["knock_min_unburned"], options["fit_window_fraction"]
    knock_cycles, knock_cycle_share = options["knock_cycles"], options["knock_cycle_share"]
    workers, backend, scheduler = where
    table = sweep(case, [(key, vals)], out=out, resume=resume, force=force, chunk_size=chunk_size,
                  progress=progress, label=label, workers=workers, backend=backend, scheduler=scheduler,
                  study="spark", study_options=options)
    table.metadata["overrides"] = list(overrides)

    tk = next((k for k in TORQUE_KEYS if k in table.columns and np.isfinite(table.column(k)).any()), None)
    if tk is None:
        errs = [r["error"] for r in table.rows if r.get("error")]
        raise CyclesimError("spark study: no case gave a torque" + (f"; first error: {errs[0]}" if errs else ""))
    adv_all = table.column(key)
    tq_all = table.column(tk)
    ok = np.isfinite(adv_all) & np.isfinite(tq_all)
    # the table keeps the case order; the curve is read in ascending advance
    okidx = np.flatnonzero(ok)[np.argsort(adv_all[ok], kind="stable")]
    adv_s, tq_s = adv_all[okidx], tq_all[okidx]
    fit = fit_torque_peak(adv_s, tq_s, fit_window_fraction)
    st = SparkStudy(table=table, torque_key=tk, mbt_deg=fit["mbt_deg"], best_torque=fit["best"],
                    retard_limit_deg=None, torque_fraction=torque_fraction, knock_margin_deg=knock_margin_deg,
                    fit=fit, base_config=label,
                    config_advance_deg=float(case.submodels["burn"].params[key[len("burn."):]]), spark_key=key)
    nfail = len(table.failed)
    if nfail:
        st.notes.append(f"{nfail} case(s) failed and are left out of the curve (see the error column)")
    table.add_column("torque_loss_pct", [100.0 * (1.0 - t / st.best_torque) if np.isfinite(t) else None
                                         for t in tq_all])

    def sorted_col(name):
        return table.column(name)[okidx] if name in table.columns else np.full(len(okidx), np.nan)

    if fit["bracketed"]:
        st.retard_limit_deg, status = _least_within(st, float(adv_s[0]))
        if status == "always":
            st.notes.append(f"torque stays within {100 * torque_fraction:g} % of best down to {adv_s[0]:g} deg BTDC,"
                            " the least advance swept")
        m = st.mbt_deg
        st.ca50_at_mbt_deg = interp_at(adv_s, sorted_col("ca50_deg"), m)
        st.theta_pmax_at_mbt_deg = interp_at(adv_s, sorted_col("theta_pmax_deg"), m)
        st.p_max_at_mbt_bar = interp_at(adv_s, sorted_col("p_max_bar"), m)
        st.dp_max_at_mbt_bar_per_deg = interp_at(adv_s, sorted_col("dp_dtheta_max_bar_per_deg"), m)
    elif fit["edge"] == "high":
        st.notes.append(f"torque still rises at {adv_s[-1]:g} deg BTDC, the largest advance swept:"
                        " MBT lies beyond the sweep; widen --advance")
    else:
        st.notes.append(f"torque falls from {adv_s[0]:g} deg BTDC, the least advance swept, on:"
                        " MBT lies below the sweep; widen --advance")

    # limits ---------------------------------------------------------------
    sub = SweepResult(rows=[table.rows[i] for i in okidx], columns=table.columns,
                      results=[table.results[i] for i in okidx], keys=table.keys)
    _knock(st, sub, adv_s, np.ones(len(okidx), bool), knock_min_unburned)
    if knock_cycles and knock_cycles > 0 and st.knock_status != "no model":
        from .knock_limit import statistical_knock_limit

        kl = statistical_knock_limit(case, adv_s,
                                     n_cycles=int(knock_cycles), share=float(knock_cycle_share))
        st.statistical_knock = kl.as_dict()
        st.notes.extend(n for n in kl.notes if not n.startswith("model estimate"))
        if kl.limit_deg is not None:
            st.knock_limited_deg, st.knock_status = kl.limit_deg, "crossed"
            st.notes.append(f"knock-limited advance from {knock_cycles} cycles per advance: the advance at which"
                            f" {100 * knock_cycle_share:g} % of the cycles knock")
        elif kl.knocking_share[0] >= knock_cycle_share:
            st.knock_status = "always"
    st.warning_groups = case_warning_groups(sub.results, adv_s)
    st.pmax_limited_deg, p_status = _limit(st, "peak pressure", "p_max_bar", p_max_limit_bar, sub, adv_s)
    st.dp_limited_deg, dp_status = _limit(st, "pressure-rise rate", "dp_dtheta_max_bar_per_deg",
                                          dp_limit_bar_per_deg, sub, adv_s)

    blocked = []
    cand: dict[str, float] = {}
    if fit["bracketed"]:
        cand["MBT"] = st.mbt_deg
    elif fit["edge"] == "low":
        blocked.append("MBT lies below the sweep")
    if st.knock_status == "crossed":
        cand[f"knock-limited advance - {knock_margin_deg:g} deg margin"] = st.knock_limited_deg - knock_margin_deg
    elif st.knock_status == "always":
        blocked.append("knock occurs at every advance swept")
    for label_, v, status in (("peak-pressure limit", st.pmax_limited_deg, p_status),
                              ("pressure-rise limit", st.dp_limited_deg, dp_status)):
        if status == "always":
            blocked.append(f"the {label_} is reached at every advance swept")
        elif v is not None:
            cand[label_] = v
    st.candidates = cand
    if blocked:
        st.notes.append("no recommended advance: " + "; ".join(blocked))
    elif cand:
        by = min(cand, key=cand.get)
        st.recommended_deg, st.recommended_by = float(cand[by]), by
        if st.knock_status == "no model":
            st.recommended_by += "; NOT checked against knock (no knock model)"
            st.notes.append("knock is not modelled (knock.model: none), so the recommended advance is not"
                            " checked against a knock limit: choose a knock model, and on the engine approach"
                            " it from the retarded side with knock detection")
        if st.recommended_deg < adv_s[0]:
            st.notes.append(f"recommended advance {st.recommended_deg:.1f} deg lies below the sweep")
    else:
        st.notes.append("no recommended advance: MBT lies beyond the sweep and no other limit was reached")

    if out is not None:
        try:
            table.to_csv(out / CSV_NAME)
            table.to_json(out / JSON_NAME)
            files = [out / CSV_NAME, out / JSON_NAME]
            if plots:
                files.extend(plot_spark_study(st, out, traces=traces))
            files.append(out / "spark_study.json")
            st.files = files
            atomic_write_text(out / "spark_study.json", json.dumps(st.figures(), indent=2) + "\n")
        except OSError as exc:
            raise write_failed(out, exc, len(table.rows), len(table.rows)) from None
    return st


# --------------------------------------------------------------------------
# Plots
# --------------------------------------------------------------------------


def plot_spark_study(st: SparkStudy, out: Path, traces: int = 8) -> list[Path]:
    """Torque with fit and markers, peak pressure and its angle, CA50, pressure traces, and knock
    onset with the unburned share at onset where a knock model ran."""
    from ..plots import _plt, _save

    plt = _plt()
    out = Path(out)
    t = st.table
    adv = t.column(st.spark_key)
    ok = np.isfinite(adv) & np.isfinite(t.column(st.torque_key))
    o = np.argsort(adv[ok])
    a = adv[ok][o]

    def col(name):
        return t.column(name)[ok][o] if name in t.columns else np.full(len(a), np.nan)

    files = []
    unit = "N m" if st.torque_key == "torque_Nm" else "bar"
    fig, ax = plt.subplots(figsize=(7, 4.2))
    ax.plot(a, col(st.torque_key), "o", color="tab:blue", ms=4, label="simulated")
    if st.fit.get("poly") is not None:
        lo, hi = st.fit["window_deg"]
        xx = np.linspace(lo, hi, 200)
        ax.plot(xx, st.fit["poly"](xx), "-", color="tab:blue", lw=1.2,
                label=f"fit (degree {st.fit['degree']})")
    if st.mbt_deg is not None:
        ax.axvline(st.mbt_deg, color="tab:green", ls="--", lw=1, label=f"MBT {st.mbt_deg:.1f}")
        ax.plot([st.mbt_deg], [st.best_torque], "*", color="tab:green", ms=10)
    if st.retard_limit_deg is not None:
        ax.axvline(st.retard_limit_deg, color="tab:olive", ls=":", lw=1,
                   label=f"within {100 * st.torque_fraction:g} % at {st.retard_limit_deg:.1f}")
    if st.knock_limited_deg is not None:
        ax.axvline(st.knock_limited_deg, color="tab:red", ls="-.", lw=1, label=f"knock limit {st.knock_limited_deg:.1f}")
    if st.recommended_deg is not None:
        ax.axvline(st.recommended_deg, color="tab:orange", lw=4, alpha=0.35, zorder=1,
                   label=f"recommended {st.recommended_deg:.1f}")
    ax.set_xlabel("spark advance [deg BTDC]")
    ax.set_ylabel(f"{_LABELS.get(st.torque_key, st.torque_key)} [{unit}]")
    ax.set_title(f"{st.base_config}: torque vs spark advance")
    ax.legend(fontsize=8)
    files.append(_save(fig, out / "spark_torque.png"))

    fig, ax = plt.subplots(figsize=(7, 4.2))
    ax.plot(a, col("p_max_bar"), "o-", color="tab:red", ms=3, label="peak pressure")
    ax.set_xlabel("spark advance [deg BTDC]")
    ax.set_ylabel("peak pressure [bar]", color="tab:red")
    ax2 = ax.twinx()
    ax2.plot(a, col("theta_pmax_deg"), "s-", color="tab:purple", ms=3, label="angle of peak pressure")
    ax2.set_ylabel("angle of peak pressure [deg ATDC]", color="tab:purple")
    ax2.grid(False)
    if st.mbt_deg is not None:
        ax.axvline(st.mbt_deg, color="tab:green", ls="--", lw=1)
    ax.set_title("peak pressure and its angle")
    files.append(_save(fig, out / "spark_peak_pressure.png"))

    fig, ax = plt.subplots(figsize=(7, 4.2))
    ax.plot(a, col("ca50_deg"), "o-", color="tab:blue", ms=3, label="CA50")
    if st.mbt_deg is not None and st.ca50_at_mbt_deg is not None:
        ax.plot([st.mbt_deg], [st.ca50_at_mbt_deg], "*", color="tab:green", ms=10,
                label=f"at MBT: CA50 {st.ca50_at_mbt_deg:.1f} deg ATDC")
    ax.axhline(0, color="0.6", lw=0.6, ls=":")
    ax.set_xlabel("spark advance [deg BTDC]")
    ax.set_ylabel("CA50 [deg ATDC]")
    ax.set_title("50 % mass-burned angle vs spark advance")
    ax.legend(fontsize=8)
    files.append(_save(fig, out / "spark_ca50.png"))

    idx = [int(i) for i in np.flatnonzero(ok)[o] if t.results[int(i)] is not None and t.results[int(i)].trace]
    if idx:
        pick = sorted(set(np.linspace(0, len(idx) - 1, min(traces, len(idx))).round().astype(int)))
        chosen = [idx[k] for k in pick]
        cmap = plt.get_cmap("viridis")
        av = [adv[i] for i in chosen]
        lo, hi = min(av), max(av)
        fig, ax = plt.subplots(figsize=(7.5, 4.4))
        for i in chosen:
            tr = t.results[i].trace
            th, p = tr["crank_deg"], tr["pressure_bar"]
            w = (th >= -60) & (th <= 100)
            c = cmap(0.0 if hi == lo else (adv[i] - lo) / (hi - lo))
            ax.plot(th[w], p[w], color=c, lw=1.1, label=f"{adv[i]:g}")
        ax.axvline(0, color="0.6", lw=0.6, ls=":")
        ax.set_xlabel("crank angle [deg ATDC]")
        ax.set_ylabel("cylinder pressure [bar]")
        ax.set_title("cylinder pressure by spark advance")
        ax.legend(title="advance [deg BTDC]", fontsize=7, ncol=2)
        files.append(_save(fig, out / "spark_pressure_traces.png"))
    from ..plots.burn_no import plot_spark_burn_no
    from .spark_knock_plot import plot_knock_onset

    bp = plot_spark_burn_no(st, out)
    if bp is not None:
        files.append(bp)
    kp = plot_knock_onset(st, out)
    if kp is not None:
        files.append(kp)
    return files
