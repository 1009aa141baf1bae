"""Spark advance per operating point for maps and full-load curves: MBT, knock-limited or fixed.

>>> from cyclesim.studies.point_spark import choose_spark
>>> picks = choose_spark(points, make_case, "knock_limited")     # {point: SparkPick}

The rule is the spark study's (:mod:`cyclesim.studies.spark`): the recommended
advance is the most retarded of MBT, the knock-limited advance less
``knock_margin_deg`` and, where a limit is given, the advance at which peak
pressure reaches it.  MBT is read by the spark study's torque fit
(:func:`~cyclesim.studies.curve_reading.fit_torque_peak`) and refined on a finer grid
round it; the knock-limited advance is where the knock model's integral
reaches 1 (:func:`~cyclesim.studies.curve_reading.crossing_up`), bracketed by
bisection until the last advance without knock and the first with it lie
within ``search_step_deg``.

The knock criterion is the knock model's own: onset predicted
(``knock_onset_deg`` finite), which the model reports only where the unburned
share at onset is above its cut-off ``knock.min_unburned_fraction``.  The
chosen advance never exceeds the last advance seen without knock, so a
knock-limited point does not knock at its advance and does knock at that
advance plus the margin plus the search step (knock onset advances with the
spark, common practice).

Every pick records what limited it (:data:`LIMITS`), the knock-limited advance,
the retard from it (``knock_margin_deg``) and the knock model's own margin
``1 - max I`` at the chosen advance.  A point whose MBT lies beyond the advance
range is ``"MBT not found (clamp)"``: its advance is the range's end and it is
left out of contours.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import ConfigError
from .curve_reading import crossing_up, fit_torque_peak

__all__ = ["choose_spark", "SparkPick", "SPARK_MODES", "LIMITS", "default_spark_mode", "check_spark_mode",
           "CaseRunner", "ADVANCE_RANGE_DEG", "DEFAULT_ADVANCES"]

SPARK_MODES = ("mbt", "knock_limited", "fixed")
ADVANCE_RANGE_DEG = (-10.0, 80.0)
"""Spark advances [deg BTDC] the search stays within (80: the spark parameter's upper bound)."""
DEFAULT_ADVANCES = (10.0, 17.0, 24.0, 31.0, 38.0, 45.0)
EXTEND_ROUNDS = 4
"""Rounds of two more advances past the end of the grid where a point's best torque lies."""
MBT_REFINE_DEG = (-4.0, -2.0, 2.0, 4.0)
"""Offsets [deg] from the first MBT estimate run to refine it (the fit then uses every advance run)."""

LIMIT_MBT = "MBT"
LIMIT_KNOCK = "knock"
LIMIT_CLAMP = "spark clamp"
LIMIT_PMAX = "peak pressure"
LIMIT_FIXED = "fixed (config)"
LIMIT_NO_MBT = "MBT not found (clamp)"
LIMIT_FAILED = "failed"
LIMITS = (LIMIT_MBT, LIMIT_KNOCK, LIMIT_CLAMP, LIMIT_PMAX, LIMIT_FIXED, LIMIT_NO_MBT, LIMIT_FAILED)
"""What set a point's spark (the mixture and boost limits are added by the studies that set those)."""


def default_spark_mode(case) -> str:
    """``knock_limited`` where the case has a knock model, else ``mbt``."""
    return "mbt" if case.submodels["knock"].model == "none" else "knock_limited"


def check_spark_mode(mode, case) -> str:
    """The spark mode to use (None: :func:`default_spark_mode`); ConfigError on a bad one."""
    if mode is None:
        return default_spark_mode(case)
    if mode not in SPARK_MODES:
        raise ConfigError(f"spark {mode!r}: expected one of {', '.join(SPARK_MODES)}")
    if mode != "fixed":
        from ..registry import spark_param

        try:
            spark_param(case, f"spark {mode!r}")
        except ConfigError as e:
            raise ConfigError(f"{e}: use spark='fixed'") from None
    if mode == "knock_limited" and case.submodels["knock"].model == "none":
        raise ConfigError("spark 'knock_limited' needs a knock model: add --set knock.model=livengood_wu,"
                          " or use spark 'mbt'")
    return mode


@dataclass
class SparkPick:
    """The advance chosen for one point and what set it."""

    advance_deg: float | None
    limit: str
    mbt_deg: float | None = None
    knock_limit_deg: float | None = None
    """Advance at which the knock criterion is first met [deg BTDC] (None: not within the advances run)."""
    knock_margin_deg: float | None = None
    """Retard of the chosen advance from the knock-limited advance [deg]."""
    in_contours: bool = True
    knock_free_to_deg: float | None = None
    """Largest advance run without knock where none knocked [deg BTDC] (the knock margin is at least
    this less the chosen advance)."""
    tried: dict = field(default_factory=dict)
    """advance -> (torque [N m], knock integral max [-], knocks [bool], peak pressure [bar])."""

    def columns(self) -> dict:
        return {"spark_advance_deg": self.advance_deg, "spark_limit": self.limit, "mbt_deg": self.mbt_deg,
                "knock_limit_deg": self.knock_limit_deg, "knock_margin_deg": self.knock_margin_deg,
                "knock_free_to_deg": self.knock_free_to_deg}


class CaseRunner:
    """``simulate`` with a tqdm progress bar that counts cases (a bar on stderr only where asked)."""

    def __init__(self, desc: str, progress: bool | None = None):
        import sys

        if progress is None:
            progress = bool(getattr(sys.stderr, "isatty", lambda: False)())
        self.bar = None
        if progress:
            from tqdm import tqdm

            self.bar = tqdm(total=0, desc=desc, unit="case", leave=False, dynamic_ncols=True)
        self.cases = 0

    def __call__(self, cases):
        from ..api import simulate

        cases = list(cases)
        if self.bar is not None:
            self.bar.total += len(cases)
            self.bar.refresh()
        res = simulate(cases)
        self.cases += len(cases)
        if self.bar is not None:
            self.bar.update(len(cases))
        return res

    def close(self):
        if self.bar is not None:
            self.bar.close()
            self.bar = None


def _figs(r) -> tuple:
    if r.error:
        return (math.nan, math.nan, False, math.nan)
    s = r.summary
    onset = s.get("knock_onset_deg")
    knocks = onset is not None and math.isfinite(onset)
    imax = s.get("knock_integral_max")
    return (float(s["torque_Nm"]), math.nan if imax is None else float(imax), knocks,
            float(s.get("p_max_bar", math.nan)))


def choose_spark(points, make_case, mode: str, *, advances=None, knock_margin_deg: float = 2.0,
                 search_step_deg: float = 0.25, p_max_limit_bar: float | None = None,
                 advance_range=ADVANCE_RANGE_DEG, run=None, fixed_advance=None) -> dict:
    """Choose the spark advance of every point (all points' cases batched together).

    Parameters
    ----------
    points : sequence of hashable
        The operating points.
    make_case : callable (point, advance_deg) -> Case
        The point's case at an advance [deg BTDC].
    mode : {"mbt", "knock_limited", "fixed"}
    advances : sequence of float, optional
        Starting grid [deg BTDC].  The default :data:`DEFAULT_ADVANCES` is continued past its end
        where MBT lies beyond it, within ``advance_range``; a grid given here is kept as given.
    knock_margin_deg : float
        Retard kept from the knock-limited advance [deg].
    search_step_deg : float
        Bracket width [deg] to which the knock limit is bisected.
    p_max_limit_bar : float, optional
        Peak cylinder pressure limit [bar].
    advance_range : (float, float)
        Least and largest advance allowed [deg BTDC] (the spark clamp).
    run : callable, optional
        ``run(cases) -> results`` (default :class:`CaseRunner` without a bar).
    fixed_advance : float, optional
        With ``mode="fixed"``: the advance [deg BTDC] (default: the case's own).

    Returns
    -------
    dict
        point -> :class:`SparkPick`.
    """
    if mode not in SPARK_MODES:
        raise ConfigError(f"spark {mode!r}: expected one of {', '.join(SPARK_MODES)}")
    if not knock_margin_deg >= 0 or not search_step_deg > 0:
        raise ConfigError(f"knock margin {knock_margin_deg!r} deg / search step {search_step_deg!r} deg:"
                          " expected >= 0 and > 0")
    run = run or CaseRunner("spark", progress=False)
    points = list(points)
    lo_lim, hi_lim = (float(v) for v in advance_range)
    if mode == "fixed":
        from ..registry import spark_param

        out = {}
        for pt in points:
            c = make_case(pt, fixed_advance)
            try:
                a = c.submodels["burn"].params.get(spark_param(c, "spark"))
            except ConfigError:
                a = None
            out[pt] = SparkPick(None if a is None else float(a), LIMIT_FIXED)
        return out
    tried = {pt: {} for pt in points}

    def run_grid(todo):
        todo = [(pt, round(float(a), 6)) for pt, a in todo]
        todo = list(dict.fromkeys((pt, a) for pt, a in todo if a not in tried[pt] and lo_lim <= a <= hi_lim))
        if not todo:
            return
        for (pt, a), r in zip(todo, run([make_case(pt, a) for pt, a in todo])):
            tried[pt][a] = _figs(r)

    user_grid = advances is not None
    adv = sorted(float(a) for a in (advances if user_grid else DEFAULT_ADVANCES))
    if len(adv) < 3:
        raise ConfigError("advances: at least 3 are needed to find MBT")
    run_grid([(pt, a) for pt in points for a in adv])
    step = float(np.median(np.diff(adv)))

    def fit(pt):
        a_s = np.array(sorted(tried[pt]))
        t = np.array([tried[pt][a][0] for a in a_s])
        ok = np.isfinite(t)
        return (fit_torque_peak(a_s[ok], t[ok]) if ok.sum() >= 3 else None), a_s[ok]

    # MBT: continue the grid where the best torque lies at its end (within the range)
    for round_ in range(EXTEND_ROUNDS + 1):
        more = []
        for pt in points:
            f, a_ok = fit(pt)
            if not user_grid and f is not None and not f["bracketed"] and round_ < EXTEND_ROUNDS:
                if f["edge"] == "low":
                    more += [(pt, a_ok[0] - step), (pt, a_ok[0] - 2 * step)]
                else:
                    more += [(pt, a_ok[-1] + step), (pt, a_ok[-1] + 2 * step)]
                if f["edge"] == "low" and a_ok[0] > lo_lim:
                    more.append((pt, lo_lim))
                if f["edge"] == "high" and a_ok[-1] < hi_lim:
                    more.append((pt, hi_lim))
        if not more:
            break
        run_grid(more)
    # refine MBT on a 2-deg grid round the first estimate
    first = {pt: fit(pt)[0] for pt in points}
    run_grid([(pt, f["mbt_deg"] + d) for pt, f in first.items() if f is not None and f["bracketed"]
              for d in MBT_REFINE_DEG])
    mbt = {}
    for pt in points:
        f, _ = fit(pt)
        mbt[pt] = f["mbt_deg"] if f is not None and f["bracketed"] else None

    picks = {}
    kl = {pt: None for pt in points}
    last_clear = {pt: None for pt in points}
    if mode == "knock_limited":
        # bisect the knock limit where it could set the spark
        for _ in range(40):
            todo = []
            for pt in points:
                br = _bracket(tried[pt])
                if br is None:
                    continue
                a_lo, a_hi = br
                if a_lo is None:        # knock at every advance run: try the range's least advance
                    if a_hi > lo_lim:
                        todo.append((pt, lo_lim))
                    continue
                if a_hi is None:
                    continue
                if mbt[pt] is not None and a_lo >= mbt[pt] + knock_margin_deg:
                    continue            # knock is well beyond MBT: it does not set the spark
                if a_hi - a_lo > search_step_deg:
                    todo.append((pt, 0.5 * (a_lo + a_hi)))
            if not todo:
                break
            run_grid(todo)
        for pt in points:
            br = _bracket(tried[pt])
            if br is None:
                continue
            a_lo, a_hi = br
            last_clear[pt] = a_lo
            if a_hi is not None and a_lo is not None:
                a_s = np.array([a_lo, a_hi])
                imax = np.array([tried[pt][a_lo][1], tried[pt][a_hi][1]])
                x, status = crossing_up(a_s, imax, 1.0) if np.isfinite(imax).all() else (None, "never")
                kl[pt] = float(x) if status == "crossed" else float(a_hi)
            elif a_hi is not None:
                kl[pt] = float(a_hi)       # knocks at the least advance of the range
    for pt in points:
        t = tried[pt]
        if not any(math.isfinite(v[0]) for v in t.values()):
            picks[pt] = SparkPick(None, LIMIT_FAILED, in_contours=False, tried=t)
            continue
        cand = {}
        if mbt[pt] is not None:
            cand[LIMIT_MBT] = mbt[pt]
        if mode == "knock_limited" and kl[pt] is not None:
            cand[LIMIT_KNOCK] = kl[pt] - knock_margin_deg
        if p_max_limit_bar is not None:
            a_s = np.array(sorted(t))
            x, status = crossing_up(a_s, np.array([t[a][3] for a in a_s]), float(p_max_limit_bar))
            if status == "crossed":
                cand[LIMIT_PMAX] = x
            elif status == "always":
                cand[LIMIT_PMAX] = lo_lim
        if not cand or (mbt[pt] is None and LIMIT_KNOCK not in cand and LIMIT_PMAX not in cand):
            f, a_ok = fit(pt)
            edge = hi_lim if f is None or f.get("edge") != "low" else lo_lim
            a_best = max((a for a in t if math.isfinite(t[a][0])), key=lambda a: t[a][0])
            picks[pt] = SparkPick(float(a_best if lo_lim <= a_best <= hi_lim else edge), LIMIT_NO_MBT,
                                  in_contours=False, tried=t)
            continue
        by = min(cand, key=cand.get)
        a = float(cand[by])
        if by == LIMIT_KNOCK and last_clear[pt] is not None:
            a = min(a, float(last_clear[pt]))
        if a < lo_lim:
            a, by = lo_lim, LIMIT_CLAMP
        elif a > hi_lim:
            a, by = hi_lim, LIMIT_CLAMP
        if by == LIMIT_KNOCK and last_clear[pt] is None:
            a, by = lo_lim, LIMIT_CLAMP     # knock at the least advance allowed
        a = math.floor(a * 1000.0) / 1000.0     # to 0.001 deg, rounded towards retard
        margin = None if kl[pt] is None else kl[pt] - a
        free = None
        if mode == "knock_limited" and kl[pt] is None and last_clear[pt] is not None:
            free = float(last_clear[pt])
        picks[pt] = SparkPick(a, by, mbt_deg=mbt[pt], knock_limit_deg=kl[pt], knock_margin_deg=margin,
                              in_contours=by not in (LIMIT_NO_MBT, LIMIT_FAILED), knock_free_to_deg=free, tried=t)
    return picks


def _bracket(t: dict):
    """(last advance without knock below the first with it, first advance with knock) of the advances
    run (either None where there is none); None where no case of the point ran."""
    a_s = sorted(a for a in t if math.isfinite(t[a][0]))
    if not a_s:
        return None
    knocking = [a for a in a_s if t[a][2]]
    if not knocking:
        return (a_s[-1], None)
    a_hi = knocking[0]
    clear = [a for a in a_s if a < a_hi]
    return (clear[-1] if clear else None, a_hi)
