"""The outcome of a fit (FitResult) and its files: calibrated config, calibration.json, residuals and plots."""

from __future__ import annotations

import copy
import datetime as _dt
import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from ..config import Case
from .bounds import TRAPPED_STATE_KEYS


# --------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------


@dataclass
class FitResult:
    """Outcome of a fit.

    Attributes
    ----------
    params : list of str
        Fitted dotted keys.
    values, initial, stderr, ci_low, ci_high : ndarray (p,)
        Fitted and start values, standard errors and the confidence interval
        at ``level`` [units of each key].
    lower, upper : ndarray (p,)
        Bounds used [units of each key].
    covariance, correlation : ndarray (p, p)
        The chosen covariance (``covariance_kind``) and its correlation matrix.
    covariance_classical, covariance_hac : ndarray (p, p)
        Both estimates (see the module notes).
    level : float
        Confidence level of the intervals [-].
    dof : float
        Degrees of freedom of the t quantile [-].
    rms : float
        RMS of the weighted residual [bar or bar-equivalent].
    theta : ndarray (n,)
        Crank angles of the residuals [deg].
    measured_pressure_bar, simulated_pressure_bar : ndarray (n,)
    measured_heat_release_J, simulated_heat_release_J : ndarray (n,)
    residual_bar : ndarray (n,)
        Simulated minus measured pressure, unweighted [bar].
    volume_m3 : ndarray (n,)
    case : Case
        The calibrated case (the fit's mode and grid, fitted values set).
    base_case : Case
        The case the fit started from (before mode and grid changes).
    source : str or None
        Config path or built-in name the base case came from.
    warnings, notes : list of str
    cycles : list of FitResult
        Per-cycle fits (``ensemble="each"``); then ``values`` are their mean and
        the covariance is the sample covariance of the per-cycle values over
        the number of cycles.
    """

    params: list
    values: np.ndarray
    initial: np.ndarray
    stderr: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    covariance: np.ndarray
    correlation: np.ndarray
    covariance_classical: np.ndarray
    covariance_hac: np.ndarray
    covariance_kind: str
    level: float
    dof: float
    rms: float
    n_residuals: int
    theta: np.ndarray
    measured_pressure_bar: np.ndarray
    simulated_pressure_bar: np.ndarray
    measured_heat_release_J: np.ndarray
    simulated_heat_release_J: np.ndarray
    residual_bar: np.ndarray
    volume_m3: np.ndarray
    case: Case
    base_case: Case
    mode: str
    target: str
    iterations: int
    simulations: int
    converged: bool
    message: str
    source: str | None = None
    warnings: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    cycles: list = field(default_factory=list)
    stats: dict = field(default_factory=dict)
    summary: dict = field(default_factory=dict)
    ci_clipped: np.ndarray = None

    def clipped(self) -> np.ndarray:
        """Which intervals were cut at a bound of their parameter (bool array (p,))."""
        if self.ci_clipped is None:
            return np.zeros(len(self.params), bool)
        return np.asarray(self.ci_clipped, bool)

    def value(self, key: str) -> float:
        return float(self.values[self.params.index(key)])

    def interval(self, key: str) -> tuple[float, float]:
        j = self.params.index(key)
        return float(self.ci_low[j]), float(self.ci_high[j])

    def text(self) -> str:
        """The fit report as text (values, intervals, correlations, warnings)."""
        lines = [f"fit ({self.mode} cycle, target {self.target}, {self.n_residuals} residuals,"
                 f" {self.iterations} iterations, {self.simulations} simulated cases): {self.message}",
                 f"  residual RMS {self.rms:.4g} bar; {100 * self.level:.0f} % intervals"
                 f" ({self.covariance_kind} covariance, t with {self.dof:.0f} dof)"]
        w = max(len(p) for p in self.params)
        lines.append(f"  {'parameter':<{w}s} {'start':>11s} {'fitted':>11s} {'std err':>10s}"
                     f" {'interval':>25s}")
        cl = self.clipped()
        for j, p in enumerate(self.params):
            lines.append(f"  {p:<{w}s} {self.initial[j]:11.5g} {self.values[j]:11.5g} {self.stderr[j]:10.3g}"
                         f"   [{self.ci_low[j]:10.5g}, {self.ci_high[j]:10.5g}]" + (" *" if cl[j] else ""))
        if cl.any():
            lines.append("  * interval clipped to the parameter's allowed range [lower, upper bound]")
        if len(self.params) > 1:
            lines.append("  correlation matrix:")
            for j, p in enumerate(self.params):
                lines.append(f"    {p:<{w}s} " + " ".join(f"{c:+6.3f}" for c in self.correlation[j]))
        sys_sd = self.stats.get("stderr_systematic")
        if sys_sd is not None and np.any(np.asarray(sys_sd) > 0):
            lines.append("  of which systematic (TDC phasing, IVC pressure estimate) std err: "
                         + ", ".join(f"{p} {v:.3g}" for p, v in zip(self.params, sys_sd)))
        if self.stats.get("nuisance"):
            lines.append("  measurement terms estimated: "
                         + ", ".join(f"{k} {v:+.4g}" for k, v in self.stats["nuisance"].items()))
        for n in self.notes:
            lines.append(f"  note: {n}")
        for m in self.warnings:
            lines.append(f"  WARNING: {m}")
        return "\n".join(lines)

    def calibration_dict(self) -> dict:
        """Plain data for ``calibration.json``."""
        def arr(a):
            return [[_num(v) for v in row] for row in np.asarray(a)] if np.ndim(a) == 2 else [_num(v) for v in a]

        return {
            "parameters": list(self.params),
            "values": arr(self.values),
            "initial": arr(self.initial),
            "stderr": arr(self.stderr),
            "interval_low": arr(self.ci_low),
            "interval_high": arr(self.ci_high),
            "interval_clipped": [bool(c) for c in self.clipped()],
            "interval_note": "intervals are cut at the parameters' bounds where they cross one"
                             " (interval_clipped true)",
            "level": self.level,
            "lower_bounds": arr(self.lower),
            "upper_bounds": arr(self.upper),
            "covariance": arr(self.covariance),
            "covariance_kind": self.covariance_kind,
            "covariance_classical": arr(self.covariance_classical),
            "covariance_hac": arr(self.covariance_hac),
            "stderr_systematic": arr(self.stats.get("stderr_systematic", np.zeros(len(self.params)))),
            "measurement_terms": dict(self.stats.get("nuisance", {})),
            "correlation": arr(self.correlation),
            "dof": self.dof,
            "residual_rms": self.rms,
            "n_residuals": self.n_residuals,
            "mode": self.mode,
            "target": self.target,
            "converged": self.converged,
            "message": self.message,
            "warnings": list(self.warnings),
            "notes": list(self.notes),
            "source_config": self.source,
            "units": "each value in the unit of its key's name; residuals in bar",
            "created": _dt.datetime.now().isoformat(timespec="seconds"),
        }

    def write(self, out, plots: bool = True) -> list[Path]:
        """Write ``calibrated.yaml``, ``calibration.json``, ``fit_residuals.csv`` and the plots."""
        out = Path(out)
        out.mkdir(parents=True, exist_ok=True)
        files = write_calibration(self, out)
        files.append(_write_residuals(self, out / "fit_residuals.csv"))
        if plots:
            files += plot_fit(self, out)
        return files


def _num(v):
    v = float(v)
    return v if math.isfinite(v) else None


def _write_residuals(res: FitResult, path: Path) -> Path:
    from ..output import write_rows_csv

    rows = []
    for k in range(res.theta.size):
        q_m, q_s = res.measured_heat_release_J[k], res.simulated_heat_release_J[k]
        rows.append({
            "crank_deg": f"{res.theta[k]:.6g}",
            "measured_pressure_bar": f"{res.measured_pressure_bar[k]:.8g}",
            "simulated_pressure_bar": f"{res.simulated_pressure_bar[k]:.8g}",
            "residual_bar": f"{res.residual_bar[k]:.6g}",
            "measured_heat_release_J": "" if not np.isfinite(q_m) else f"{q_m:.8g}",
            "simulated_heat_release_J": "" if not np.isfinite(q_s) else f"{q_s:.8g}",
        })
    write_rows_csv(path, rows, list(rows[0]))
    return path


# --------------------------------------------------------------------------
# Calibrated config
# --------------------------------------------------------------------------


def _flat(d: Mapping, prefix: str = "") -> dict:
    out = {}
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, Mapping):
            out.update(_flat(v, key + "."))
        else:
            out[key] = v
    return out


def _same_value(a, b) -> bool:
    if isinstance(a, (int, float)) and isinstance(b, (int, float)) and not isinstance(a, bool):
        return math.isclose(float(a), float(b), rel_tol=1e-12, abs_tol=0.0)
    return a == b


def write_calibration(res: FitResult, out, extends: str | None = None) -> list[Path]:
    """Write ``calibrated.yaml`` (extends the original config) and ``calibration.json``.

    The YAML overrides only what differs from the original: the fitted values,
    and what the fit had to change to reproduce the measurement (operating
    point from the trace metadata; for a fit of the trapped state, the closed
    mode and its IVC state).  Trapped-state values exist only in closed mode:
    when none was fitted, the calibrated config keeps the original's mode.
    The covariance goes to ``calibration.json`` (the config loader accepts no
    extra top-level keys); a comment in the YAML points to it.
    """
    import yaml

    from ..config import load_raw
    from ..output import atomic_write_text

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    files = []
    src = extends or res.source
    if src is not None:
        orig_raw, _ = load_raw(src)
        p = Path(src)
        if p.is_file():
            ext = str(p.resolve())
        else:
            ext = str(src)
    else:
        orig_raw = copy.deepcopy(res.base_case.raw)
        orig_raw.pop("extends", None)
        base = out / "base_config.yaml"
        atomic_write_text(base, "# the config the fit started from (merged)\n"
                          + yaml.safe_dump(orig_raw, sort_keys=False))
        files.append(base)
        ext = base.name
    new_raw = copy.deepcopy(res.case.raw)
    keep_closed = any(k in TRAPPED_STATE_KEYS for k in res.params) or res.base_case.simulation.mode == "closed"
    fo, fn = _flat(orig_raw), _flat(new_raw)
    over: dict[str, Any] = {}
    for k, v in fn.items():
        if k in ("name", "description", "extends"):
            continue
        if k == "simulation.output_step_deg" and k not in fo:
            continue
        if not keep_closed and (k == "simulation.mode" or k in TRAPPED_STATE_KEYS):
            continue
        if k not in fo or not _same_value(fo[k], v):
            over[k] = v
    for k in res.params:
        over[k] = float(res.values[res.params.index(k)])
    doc: dict[str, Any] = {"extends": ext, "name": f"{res.base_case.name}-calibrated"}
    for k, v in over.items():
        node = doc
        parts = k.split(".")
        for part in parts[:-1]:
            node = node.setdefault(part, {})
        node[parts[-1]] = v
    head = [
        f"# Calibrated config written by 'cyclesim fit' on {_dt.date.today().isoformat()}.",
        "# Overrides only the fitted values (and what the fit needed to reproduce the measurement).",
        "# Covariance, intervals and correlations of the fitted values: calibration.json (this folder).",
        f"# Fitted ({100 * res.level:.0f} % intervals): "
        + "; ".join(f"{p} = {res.values[j]:.6g} [{res.ci_low[j]:.6g}, {res.ci_high[j]:.6g}]"
                    + (" (clipped at a bound)" if res.clipped()[j] else "")
                    for j, p in enumerate(res.params)),
    ]
    yml = out / "calibrated.yaml"
    atomic_write_text(yml, "\n".join(head) + "\n" + yaml.safe_dump(doc, sort_keys=False))
    js = out / "calibration.json"
    cal = res.calibration_dict()
    cal["calibrated_config"] = yml.name
    atomic_write_text(js, json.dumps(cal, indent=2) + "\n")
    return files + [yml, js]


# --------------------------------------------------------------------------
# Plots
# --------------------------------------------------------------------------


def plot_fit(res: FitResult, out) -> list[Path]:
    """PNG plots: pressure, log p - log V, apparent heat release, residuals vs crank angle."""
    from ..plots import _plt, _save

    plt = _plt()
    out = Path(out)
    th = res.theta
    files = []
    fig, ax = plt.subplots(figsize=(7.5, 4.2))
    ax.plot(th, res.measured_pressure_bar, color="k", lw=1.2, label="measured (pegged, phased)")
    ax.plot(th, res.simulated_pressure_bar, color="tab:red", lw=1.0, ls="--", label="simulated (fitted)")
    ax.set_xlabel("crank angle [deg]  (0 = firing TDC)")
    ax.set_ylabel("cylinder pressure [bar]")
    ax.set_title("measured and simulated pressure")
    ax.legend()
    files.append(_save(fig, out / "fit_pressure.png"))

    fig, ax = plt.subplots(figsize=(6, 4.5))
    ok = (res.measured_pressure_bar > 0) & (res.simulated_pressure_bar > 0)
    ax.loglog(res.volume_m3[ok] * 1e6, res.measured_pressure_bar[ok], color="k", lw=1.2, label="measured")
    ax.loglog(res.volume_m3[ok] * 1e6, res.simulated_pressure_bar[ok], color="tab:red", lw=1.0, ls="--",
              label="simulated")
    ax.set_xlabel("volume [cm^3]")
    ax.set_ylabel("pressure [bar]")
    ax.set_title("log p - log V")
    ax.legend()
    files.append(_save(fig, out / "fit_logp_logv.png"))

    fig, ax = plt.subplots(figsize=(7.5, 4.2))
    ax.plot(th, res.measured_heat_release_J, color="k", lw=1.2, label="measured")
    ax.plot(th, res.simulated_heat_release_J, color="tab:red", lw=1.0, ls="--", label="simulated")
    ax.set_xlabel("crank angle [deg]")
    ax.set_ylabel("apparent net heat release [J]")
    ax.set_title("apparent heat release (same analyser for both)")
    ax.legend()
    files.append(_save(fig, out / "fit_heat_release.png"))

    fig, ax = plt.subplots(figsize=(7.5, 3.4))
    ax.plot(th, res.residual_bar, color="tab:blue", lw=0.8)
    ax.axhline(0.0, color="0.5", lw=0.6)
    ax.set_xlabel("crank angle [deg]")
    ax.set_ylabel("simulated - measured [bar]")
    ax.set_title(f"pressure residual (RMS {res.rms:.3g} bar weighted)")
    files.append(_save(fig, out / "fit_residuals.png"))
    return files
