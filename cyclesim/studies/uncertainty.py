"""Prediction with uncertainty: propagate a calibration's covariance through a sweep.

>>> from cyclesim.studies.uncertainty import propagate
>>> res = propagate("cal/calibrated.yaml", "cal/calibration.json", study="spark",
...                 vary="10:40:2", n_samples=64, out="predict")
>>> res.table()[0]

The fitted parameters are drawn from the multivariate normal distribution of
the calibration (mean = fitted values, covariance from ``calibration.json``),
truncated to their bounds: a draw outside the allowed range is rejected and
drawn again (the normal restricted to the allowed range, the posterior of a flat
prior on it), so no probability piles up on a bound.  A parameter whose fitted
value lies at a bound then has all its samples on one side of it, and a figure
that moves monotonically with it has its nominal value at the edge of its band:
the result's ``notes`` say so.  Every sample is run at every sweep point, all as one
:func:`cyclesim.simulate` call (the cases share submodels, so they form few
batches).  For each sweep point and figure the result holds the mean over the
samples, the value of the calibrated (nominal) case, and the empirical
quantiles ``lower``/``upper`` (default 5 % and 95 %).  ``study="spark"`` sweeps
``burn.spark_advance_deg`` and also gives the distribution of MBT (the advance
of maximum torque from :func:`cyclesim.studies.curve_reading.fit_torque_peak`).

Sampling: the quantiles of n samples carry their own sampling error, about
``sqrt(q (1 - q) / n) / f(x_q)`` (the asymptotic variance of a sample quantile;
e.g. David & Nagaraja 2003, *Order Statistics*, sec. 10.2); with 64 samples
a 5-95 % band is good to roughly a fifth of its half-width.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from ..config import Case, case_with, load_config
from ..errors import ConfigError, CyclesimError
from ..output import CAUTION, atomic_write_text
from .sweep import parse_values

__all__ = ["propagate", "UncertaintyResult", "sample_parameters", "FIGURES"]

FIGURES = ("torque_Nm", "imep_net_bar", "imep_closed_bar", "ca50_deg", "p_max_bar", "theta_pmax_deg",
           "ca10_deg", "ca90_deg", "burn_0_10_deg", "burn_10_90_deg", "bsfc_g_per_kWh", "no_ppm_wet",
           "no_g_per_kWh")
"""Figures summarised per sweep point (those the cases report)."""

SPARK_KEY = "burn.spark_advance_deg"
"""The spark key of the built-in burn models (another burn model: ``burn.`` + its ``spark_param``)."""


def _load_calibration(cal) -> dict:
    if isinstance(cal, Mapping):
        return dict(cal)
    p = Path(cal)
    try:
        return json.loads(p.read_text(encoding="utf-8"))
    except OSError as exc:
        raise CyclesimError(f"{p}: cannot read the calibration ({exc.strerror or exc})") from exc
    except json.JSONDecodeError as exc:
        raise CyclesimError(f"{p}: not JSON ({exc.msg}, line {exc.lineno})") from exc
    except UnicodeDecodeError:
        raise CyclesimError(f"{p}: not a calibration (not UTF-8 text)") from None


def read_calibration(cal, case: Case | None = None) -> dict:
    """A calibration (``calibration.json`` path or its content), checked by :func:`check_calibration`."""
    out = _load_calibration(cal)
    check_calibration(out, case, "calibration" if isinstance(cal, Mapping) else str(cal))
    return out


def check_calibration(cal: Mapping, case: Case | None = None, where: str = "calibration") -> None:
    """Refuse a calibration that ``cyclesim fit`` could not have written, in one line.

    It must name its ``parameters`` (each a model parameter a fit may estimate, see
    :func:`cyclesim.calibration.check_calibratable`, when ``case`` is given), their fitted ``values``
    (finite) and a ``covariance``: square, finite, symmetric and positive semi-definite, as any
    covariance matrix is (e.g. Seber & Lee 2003, *Linear Regression Analysis*, sec. 1.3); the
    eigenvalues may fall below zero only by rounding (1e-9 of the largest).
    """
    if not isinstance(cal, Mapping):
        raise CyclesimError(f"{where}: expected a JSON object written by 'cyclesim fit', got {type(cal).__name__}")
    missing = [k for k in ("parameters", "values", "covariance") if k not in cal]
    if missing:
        raise CyclesimError(f"{where}: lacks {', '.join(missing)} (expected the calibration.json written by"
                            " 'cyclesim fit')")
    keys = cal["parameters"]
    if not isinstance(keys, list) or not keys or not all(isinstance(k, str) for k in keys):
        raise CyclesimError(f"{where}: parameters: expected a list of config keys")
    try:
        vals = np.asarray(cal["values"], float)
        C = np.asarray(cal["covariance"], float)
    except (TypeError, ValueError):
        raise CyclesimError(f"{where}: values and covariance must be numbers") from None
    if vals.shape != (len(keys),) or not np.all(np.isfinite(vals)):
        raise CyclesimError(f"{where}: values: expected {len(keys)} finite numbers, one per parameter")
    if C.shape != (len(keys), len(keys)) or not np.all(np.isfinite(C)):
        raise CyclesimError(f"{where}: covariance: expected a finite {len(keys)} x {len(keys)} matrix")
    scale = max(float(np.max(np.abs(C))), 1e-300)
    if not np.allclose(C, C.T, rtol=1e-6, atol=1e-12 * scale):
        raise CyclesimError(f"{where}: covariance is not symmetric")
    if np.any(np.diag(C) < 0) or float(np.linalg.eigvalsh(0.5 * (C + C.T)).min()) < -1e-9 * scale:
        raise CyclesimError(f"{where}: covariance is not positive semi-definite (a negative variance):"
                            " not a covariance matrix")
    for b in ("lower_bounds", "upper_bounds"):
        if cal.get(b) is not None and (not isinstance(cal[b], list) or len(cal[b]) != len(keys)):
            raise CyclesimError(f"{where}: {b}: expected {len(keys)} entries (null for none)")
    if case is not None:
        from ..calibration import check_calibratable

        for k in keys:
            try:
                check_calibratable(case, k, case.simulation.mode)
            except CyclesimError as exc:
                raise CyclesimError(f"{where}: {exc}") from None


MAX_DRAW_ROUNDS = 200
"""Rounds of rejection sampling before the remaining draws are reflected into the range."""


def _bounds(cal: Mapping, p: int) -> tuple[np.ndarray, np.ndarray]:
    lo = np.array([-np.inf if v is None else v for v in cal.get("lower_bounds") or [None] * p], float)
    hi = np.array([np.inf if v is None else v for v in cal.get("upper_bounds") or [None] * p], float)
    return lo, hi


def sample_parameters(cal: Mapping, n_samples: int, seed: int = 1,
                      info: dict | None = None) -> tuple[list[str], np.ndarray]:
    """Draw parameter sets from the calibration's multivariate normal, truncated to the bounds.

    Returns the keys and an array (n_samples, p).  The covariance is factored
    by its eigen-decomposition (negative eigenvalues from rounding set to 0),
    so a singular covariance (a combination the data did not determine) is
    sampled along its determined directions only.  Draws with a parameter
    outside its bounds are rejected and drawn again (a truncated multivariate
    normal); if after :data:`MAX_DRAW_ROUNDS` rounds too few were accepted
    (the range holds a tiny share of the distribution), the rest are reflected
    at the bounds.  ``info``, if given, receives ``acceptance`` (share of
    draws inside the bounds [-]) and ``reflected`` (number of reflected draws).
    """
    keys = list(cal["parameters"])
    mean = np.asarray(cal["values"], float)
    C = np.asarray(cal["covariance"], float)
    if C.shape != (len(keys), len(keys)):
        raise CyclesimError(f"calibration: covariance has shape {C.shape} for {len(keys)} parameters")
    if n_samples < 2:
        raise ConfigError(f"predict: n_samples = {n_samples}: need at least 2")
    C = 0.5 * (C + C.T)
    w, V = np.linalg.eigh(C)
    L = V * np.sqrt(np.clip(w, 0.0, None))
    rng = np.random.default_rng(seed)
    lo, hi = _bounds(cal, len(keys))
    if np.any(lo > hi):
        raise CyclesimError("calibration: a lower bound lies above its upper bound")
    got, drawn = [], 0
    need = n_samples
    for _ in range(MAX_DRAW_ROUNDS):
        Z = mean + rng.standard_normal((max(need, 16), len(keys))) @ L.T
        drawn += Z.shape[0]
        ok = np.all((Z >= lo) & (Z <= hi), axis=1)
        got.append(Z[ok][:need])
        need -= int(min(ok.sum(), need))
        if need == 0:
            break
    n_ok = n_samples - need
    X = np.concatenate(got) if got else np.zeros((0, len(keys)))
    if need:
        # the range holds a tiny share of the distribution: reflect the remaining draws into it
        Z = mean + rng.standard_normal((need, len(keys))) @ L.T
        for _ in range(8):
            Z = np.where(Z < lo, 2 * lo - Z, Z)
            Z = np.where(Z > hi, 2 * hi - Z, Z)
        X = np.concatenate([X, np.clip(Z, lo, hi)])
    if info is not None:
        info["acceptance"] = n_ok / max(drawn, 1) if n_ok else 0.0
        info["reflected"] = int(need)
    return keys, X


@dataclass
class UncertaintyResult:
    """Bands of the figures over a sweep.

    Attributes
    ----------
    key : str
        The swept key.
    values : list
        Its values (sweep points).
    figures : dict of str -> dict of ndarray
        Per figure: ``mean``, ``nominal``, ``lower``, ``upper``, ``sd`` over
        the sweep points (NaN where no sample ran).
    samples : ndarray (n_samples, p)
        The parameter draws; ``params`` names their columns.
    params : list of str
    quantiles : (float, float)
    n_failed : int
        Cases that failed (excluded from the statistics).
    mbt : dict
        ``study="spark"``: MBT of the nominal case and ``mean``, ``lower``,
        ``upper`` over the samples [deg before TDC].
    study : str
    notes : list of str
        How the samples were drawn where bounds mattered, and sweep points whose
        nominal value lies outside its band (with the reason).
    """

    key: str
    values: list
    figures: dict
    samples: np.ndarray
    params: list
    quantiles: tuple
    n_failed: int = 0
    mbt: dict = field(default_factory=dict)
    study: str = "sweep"
    notes: list = field(default_factory=list)

    def table(self) -> list[dict]:
        """One row per sweep point with ``<fig>``, ``<fig>_mean``, ``<fig>_p05``, ``<fig>_p95`` columns."""
        lo, hi = (f"p{round(100 * q):02d}" for q in self.quantiles)
        rows = []
        for i, v in enumerate(self.values):
            row = {self.key: v}
            for f, d in self.figures.items():
                row[f] = float(d["nominal"][i])
                row[f"{f}_mean"] = float(d["mean"][i])
                row[f"{f}_{lo}"] = float(d["lower"][i])
                row[f"{f}_{hi}"] = float(d["upper"][i])
            rows.append(row)
        return rows

    def write(self, out, plots: bool = True) -> list[Path]:
        """``prediction.csv``, ``prediction.json`` and the band plots into ``out``."""
        out = Path(out)
        out.mkdir(parents=True, exist_ok=True)
        rows = self.table()
        cols = list(rows[0])
        lines = [f"# prediction with uncertainty: nominal (calibrated) value, sample mean and the"
                 f" {100 * self.quantiles[0]:g}-{100 * self.quantiles[1]:g} % band of {len(self.samples)}"
                 f" parameter samples; units in the column names",
                 f"# {CAUTION}", ",".join(cols)]
        for r in rows:
            lines.append(",".join("" if isinstance(r[c], float) and not math.isfinite(r[c]) else
                                  (f"{r[c]:.8g}" if isinstance(r[c], float) else str(r[c])) for c in cols))
        files = [out / "prediction.csv", out / "prediction.json"]
        atomic_write_text(files[0], "\n".join(lines) + "\n")
        doc = {"key": self.key, "values": self.values, "study": self.study, "quantiles": list(self.quantiles),
               "parameters": self.params, "samples": self.samples.tolist(), "n_failed": self.n_failed,
               "notes": list(self.notes),
               "mbt": {k: (None if isinstance(v, float) and not math.isfinite(v) else v) for k, v in self.mbt.items()},
               "rows": [{k: (None if isinstance(v, float) and not math.isfinite(v) else v) for k, v in r.items()}
                        for r in rows],
               "caution": CAUTION}
        atomic_write_text(files[1], json.dumps(doc, indent=2) + "\n")
        if plots:
            files += plot_bands(self, out)
        return files


def _resolve(case) -> Case:
    return case if isinstance(case, Case) else load_config(case)


def propagate(calibrated, calibration, study: str = "sweep", vary: Any = None, n_samples: int = 64,
              seed: int = 1, quantiles: tuple = (0.05, 0.95), out=None, plots: bool = True) -> UncertaintyResult:
    """Run a sweep for parameter sets drawn from a calibration's covariance.

    Parameters
    ----------
    calibrated : Case, str or Path
        The calibrated config (``calibrated.yaml``) or case.
    calibration : str, Path or mapping
        ``calibration.json`` (or its content): parameters, values, covariance, bounds.
    study : {"sweep", "spark"}
        A sweep of ``vary``; or a spark sweep (``vary`` = advances, default
        ``"10:40:2"``) with the MBT distribution.
    vary : str, mapping or (key, spec)
        ``"key=spec"``, ``{key: spec}`` or ``(key, spec)``; spec as in
        :func:`cyclesim.studies.sweep.parse_values` (``"10:40:2"``, ``"1,2,3"``).
        For ``study="spark"`` a bare spec of advances [deg before TDC].
    n_samples : int
        Number of parameter samples.
    seed : int
        Seed of the sampling.
    quantiles : (float, float)
        Lower and upper quantile of the band [-].
    out : path, optional
        Write the table, JSON and plots here.

    Returns
    -------
    UncertaintyResult
    """
    from ..api import simulate

    base = _resolve(calibrated)
    cal = read_calibration(calibration, base)
    key, spec = _parse_vary(vary, study, _spark_key(base) if study == "spark" else SPARK_KEY)
    values = parse_values(key, spec)
    info: dict = {}
    params, X = sample_parameters(cal, n_samples, seed, info)
    notes = _sampling_notes(cal, params, info)
    nominal = {k: float(v) for k, v in zip(params, cal["values"])}
    sets = [nominal] + [{k: float(v) for k, v in zip(params, row)} for row in X]
    cases = []
    for s in sets:
        for v in values:
            cases.append(case_with(base, {**s, key: v}))
    results = simulate(cases)
    S, N = len(sets), len(values)
    n_failed = sum(1 for r in results if not r.ok)
    figs: dict[str, dict] = {}
    avail = [f for f in FIGURES if any(r.ok and f in r.summary for r in results)]
    q_lo, q_hi = quantiles
    for f in avail:
        A = np.array([[results[i * N + j].summary.get(f, np.nan) if results[i * N + j].ok else np.nan
                       for j in range(N)] for i in range(S)], float)
        smp = A[1:]
        with np.errstate(all="ignore"):
            import warnings

            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                figs[f] = {"nominal": A[0], "mean": np.nanmean(smp, axis=0), "sd": np.nanstd(smp, axis=0, ddof=1),
                           "lower": np.nanquantile(smp, q_lo, axis=0), "upper": np.nanquantile(smp, q_hi, axis=0)}
    mbt: dict = {}
    if study == "spark":
        from .curve_reading import fit_torque_peak

        tk = next((f for f in ("torque_Nm", "imep_net_bar", "imep_closed_bar") if f in figs), None)
        if tk is not None:
            adv = np.asarray(values, float)
            vals = []
            for i in range(S):
                y = np.array([results[i * N + j].summary.get(tk, np.nan) if results[i * N + j].ok else np.nan
                              for j in range(N)])
                if np.all(np.isfinite(y)):
                    pk = fit_torque_peak(adv, y)
                    vals.append(pk["mbt_deg"] if pk.get("bracketed") else np.nan)
                else:
                    vals.append(np.nan)
            v = np.asarray(vals[1:], float)
            ok = np.isfinite(v)
            mbt = {"torque_figure": tk, "nominal_deg": vals[0],
                   "mean_deg": float(np.mean(v[ok])) if ok.any() else float("nan"),
                   "lower_deg": float(np.quantile(v[ok], q_lo)) if ok.any() else float("nan"),
                   "upper_deg": float(np.quantile(v[ok], q_hi)) if ok.any() else float("nan"),
                   "bracketed_share": float(ok.mean())}
    notes += _outside_notes(figs, values, key, cal, params)
    res = UncertaintyResult(key, values, figs, X, params, tuple(quantiles), n_failed, mbt, study, notes)
    if out is not None:
        res.write(out, plots=plots)
    return res


def _at_bound(cal: Mapping, params: list) -> list[tuple[str, float, str]]:
    """Parameters whose calibrated value lies at a bound: (key, value, 'lower'/'upper')."""
    mean = np.asarray(cal["values"], float)
    lo, hi = _bounds(cal, len(params))
    sd = np.sqrt(np.maximum(np.diag(np.asarray(cal["covariance"], float)), 0.0))
    out = []
    for j, k in enumerate(params):
        tol = 1e-6 * max(abs(mean[j]), sd[j], 1e-12)
        if np.isfinite(lo[j]) and mean[j] <= lo[j] + tol:
            out.append((k, float(mean[j]), "lower"))
        elif np.isfinite(hi[j]) and mean[j] >= hi[j] - tol:
            out.append((k, float(mean[j]), "upper"))
    return out


def _sampling_notes(cal: Mapping, params: list, info: dict) -> list[str]:
    notes = []
    mean = np.asarray(cal["values"], float)
    lo, hi = _bounds(cal, len(params))
    sd = np.sqrt(np.maximum(np.diag(np.asarray(cal["covariance"], float)), 0.0))
    near = [k for j, k in enumerate(params)
            if sd[j] > 0 and (mean[j] - lo[j] < 3 * sd[j] or hi[j] - mean[j] < 3 * sd[j])]
    if near:
        notes.append(f"{', '.join(near)}: within 3 standard errors of a bound; samples drawn from the normal"
                     f" distribution truncated to the allowed range (draws outside rejected; acceptance"
                     f" {100 * info.get('acceptance', 1.0):.0f} %)")
    if info.get("reflected"):
        notes.append(f"{info['reflected']} samples reflected at the bounds (the allowed range holds too small"
                     f" a share of the distribution for rejection)")
    for k, v, side in _at_bound(cal, params):
        notes.append(f"{k} = {v:g} lies at its {side} bound: all its samples lie on one side of it, so a"
                     f" figure that moves monotonically with it has its nominal value at the edge of its band")
    return notes


def _outside_notes(figs: dict, values: list, key: str, cal: Mapping, params: list) -> list[str]:
    """Sweep points whose nominal value lies outside the band, per figure."""
    notes = []
    at = _at_bound(cal, params)
    for f, d in figs.items():
        nom, lo_, hi_ = (np.asarray(d[c], float) for c in ("nominal", "lower", "upper"))
        with np.errstate(invalid="ignore"):
            tol = 1e-9 * np.maximum(np.abs(nom), 1.0)
            out = np.isfinite(nom) & np.isfinite(lo_) & ((nom < lo_ - tol) | (nom > hi_ + tol))
        if out.any():
            pts = ", ".join(f"{values[i]:g}" if isinstance(values[i], (int, float)) else str(values[i])
                            for i in np.flatnonzero(out))
            why = (f"because {', '.join(k for k, _, _ in at)} lies at a bound" if at else
                   "the figure depends non-linearly on the parameters (the sample distribution is skewed)")
            notes.append(f"{f}: the nominal value lies outside its band at {key} = {pts}: {why}")
    return notes


def _spark_key(case) -> str:
    from ..registry import spark_param

    return "burn." + spark_param(case, "predict (spark study)")


def _parse_vary(vary, study: str, spark_key: str = SPARK_KEY) -> tuple[str, Any]:
    if study not in ("sweep", "spark"):
        raise ConfigError(f"predict: study = {study!r}: choose sweep or spark")
    if study == "spark":
        if vary is None:
            return spark_key, "10:40:2"
        if isinstance(vary, str) and "=" not in vary:
            return spark_key, vary
    if vary is None:
        raise ConfigError("predict: give the swept key and values, e.g. burn.spark_advance_deg=10:40:2")
    if isinstance(vary, str):
        k, _, spec = vary.partition("=")
        if not k.strip() or not spec.strip():
            raise ConfigError(f"--vary {vary!r}: expected key=values, e.g. operating.speed_rpm=1500:6000:500")
        key, spec = k.strip(), spec.strip()
    elif isinstance(vary, Mapping):
        if len(vary) != 1:
            raise ConfigError("predict: vary one key (a band plot has one x axis)")
        (key, spec), = vary.items()
    else:
        key, spec = vary
    if study == "spark" and key != spark_key:
        raise ConfigError(f"predict: the spark study sweeps {spark_key}, not {key}")
    return key, spec


def plot_bands(res: UncertaintyResult, out) -> list[Path]:
    """One PNG per figure: nominal line, sample mean and the quantile band against the swept value."""
    from ..plots import _plt, _save

    plt = _plt()
    x = np.asarray(res.values, float)
    files = []
    labels = {"torque_Nm": "brake torque [N m]", "imep_net_bar": "net IMEP [bar]",
              "imep_closed_bar": "closed-cycle IMEP [bar]", "ca50_deg": "CA50 [deg]"}
    for f in ("torque_Nm", "imep_net_bar", "imep_closed_bar", "ca50_deg"):
        if f not in res.figures:
            continue
        d = res.figures[f]
        fig, ax = plt.subplots(figsize=(6.5, 4.0))
        ax.fill_between(x, d["lower"], d["upper"], color="tab:blue", alpha=0.25,
                        label=f"{100 * res.quantiles[0]:g}-{100 * res.quantiles[1]:g} % band")
        ax.plot(x, d["nominal"], color="tab:blue", lw=1.4, label="calibrated")
        ax.plot(x, d["mean"], color="k", lw=0.8, ls="--", label="sample mean")
        if f in ("torque_Nm", "imep_net_bar", "imep_closed_bar") and res.mbt.get("nominal_deg") is not None \
                and np.isfinite(res.mbt.get("nominal_deg", np.nan)):
            ax.axvspan(res.mbt["lower_deg"], res.mbt["upper_deg"], color="tab:orange", alpha=0.15, label="MBT band")
        ax.set_xlabel(res.key)
        ax.set_ylabel(labels[f])
        ax.set_title(f"{labels[f].split(' [')[0]} with parameter uncertainty ({len(res.samples)} samples)")
        ax.legend(fontsize=8)
        files.append(_save(fig, Path(out) / f"band_{f}.png"))
    return files
