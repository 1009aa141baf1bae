"""Calibration: fit submodel parameters to measured cylinder-pressure traces.

>>> from cyclesim.fit import fit
>>> res = fit("demo", "trace.npz", ["burn.ignition_delay_deg", "burn.duration_deg",
...                                 "operating.ivc_pressure_bar"])
>>> print(res.text())
>>> res.write("calibration")            # calibrated.yaml, calibration.json, plots

The measured cycles are pegged and phased by the reference analyser
(:mod:`cyclesim.traces.analysis`), averaged over the fired cycles
(``ensemble="mean"``) or taken one by one (``ensemble="each"``), and the chosen
parameters are fitted by bounded least squares to the residual

    r_i = sqrt(w(theta_i)) (p_sim(theta_i) - p_meas(theta_i))       [bar]

on the measurement's own crank grid (the simulated trace is written on a grid
finer than the measurement's by Hermite interpolation and read at the
measured angles by linear interpolation), and/or to the same difference of
the *apparent* heat release, which the analyser computes from the simulated
pressure exactly as from the measured one (same volume, same gamma(T), same
IVC state), so that the analyser's simplifications cancel.  Heat-release
residuals are divided by ``V_d x 1 bar`` so that they read in bar like the
pressure residuals (J / (m^3 Pa) = bar-equivalent).

Solver
------
A Levenberg-Marquardt iteration with Marquardt's diagonal scaling
(Marquardt 1963, J. SIAM 11:431) and simple bounds, run in lockstep over
independent problems (the cycles of ``ensemble="each"``, or one problem):

* the Jacobian is a one-sided finite difference, and every case an iteration
  needs (the trial point of each problem and its perturbed neighbours, one
  per parameter) is simulated in **one** :func:`cyclesim.simulate` batch.
  The trial point's Jacobian is thus ready when the step is accepted; a
  rejected step only raises the damping.
* bounds come from the submodels' (and core sections') declared ``Param``
  ranges; a step is projected onto them, and a parameter at a bound whose
  gradient points outward is held there for that step (active set).

This was chosen over ``scipy.optimize.least_squares`` because the cycles of
``ensemble="each"`` and the points of :func:`fit_points` then share one batch
per iteration (a closed-cycle batch of a hundred cases costs about as much as
one case), which scipy's one-problem-at-a-time interface cannot do.

Confidence intervals
--------------------
At the solution, ``C = s^2 (J^T J)^-1`` with ``s^2 = SSR / (n - p)`` and
t-distribution intervals with ``n - p`` degrees of freedom (e.g. Bates & Watts
1988, *Nonlinear Regression Analysis and its Applications*, Wiley, sec. 2.3).
This assumes independent residuals.  Residuals on a fine crank grid are
rarely independent: a smooth misfit (sensor thermal drift, a model error)
spans many samples.  ``covariance="hac"`` gives the heteroskedasticity and
autocorrelation consistent (sandwich) estimate with Bartlett weights (Newey &
West 1987, Econometrica 55:703), ``C = (J^T J)^-1 S (J^T J)^-1``, with the lag
window L the first lag at which the residual autocorrelation falls to zero
(common practice), and ``n_eff = n (1 + 2 sum rho_l)^-1`` degrees of freedom
for the t quantile.  Both are always computed; ``covariance`` chooses which one
the intervals and ``calibration.json`` carry (default ``hac``: on white residuals
it agrees with the classical estimate, on smooth ones it is the honest one).

Neither sees a *systematic* error that the model lacks: it biases the values
the same way in every cycle.  Two remedies:

* measurement terms (``nuisance``) estimated with the parameters, linear in
  the pressure and profiled out by variable projection (Golub & Pereyra 1973):
  a constant offset (pegging error), a gain, and the sensor's thermal shock as
  a coefficient times the simulated gas temperature through a first-order lag.
  Their estimation costs degrees of freedom and widens the intervals by the
  correlation with the model parameters, which is the honest price.
* a type-B term (JCGM 100:2008, GUM, sec. 4.3 and 5.1) for the TDC phasing,
  which a fit of a fired cycle cannot separate from the burn start: a
  labelling error of standard uncertainty u moves the parameters by ``g u``,
  ``g`` from the residual's change under a shift of the measured record,
  and ``u^2 g g^T`` joins the covariance; the t quantile takes the
  Welch-Satterthwaite degrees of freedom (GUM sec. G.4).  The default u when
  the analyser estimated the offset is a quarter of the loss angle
  (:data:`TDC_LOSS_ANGLE_REL_SD`).
"""

from __future__ import annotations

import copy
import datetime as _dt
import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from .config import CORE_SCHEMA, Case, case_with, load_config
from .errors import ConfigError, CyclesimError

__all__ = ["FitResult", "PointsFit", "fit", "fit_points", "param_bounds", "burn_table",
           "write_burn_table", "measured_data", "MeasuredData", "write_calibration"]

BAR = 1e5
CORRELATION_LIMIT = 0.95
"""|correlation| above which two fitted parameters count as not separable by the data."""

TRAPPED_STATE_KEYS = ("operating.ivc_pressure_bar", "operating.ivc_temperature_K",
                      "operating.residual_fraction")
"""Closed-mode parameters: the state at intake valve closing."""

NUISANCE_TERMS = ("offset", "gain", "thermal")
"""Measurement-model terms the fit can estimate alongside the model parameters:
``offset`` a constant pressure error [bar] (pegging error), ``gain`` a relative
sensitivity error [-], ``thermal`` a thermal-shock error of the sensor proportional
to the gas temperature seen through a first-order lag (``thermal_tau_s``)
[bar per 1000 K]."""

THERMAL_TAU_S = 0.002
"""Default time constant of the sensor's thermal-shock response [s] (a few
milliseconds is common practice for the short-term drift of a diaphragm sensor)."""

TDC_LOSS_ANGLE_REL_SD = 0.25
"""Relative standard uncertainty of the thermodynamic loss angle behind a TDC
estimate [-]: the loss angle scales with the heat-transfer coefficient of
Woschni's correlation (see :func:`cyclesim.traces.analysis.estimate_tdc_offset`),
whose coefficient is uncertain by some 20-30 % for a particular engine (from
memory)."""

IVC_PRESSURE_NOTE_REL = 0.03
"""A configured IVC pressure that differs from the measured one by more than this share is
named in the fit's notes (the closed-cycle fit always starts from the measured one)."""

RESIDUAL_CORRELATION_LIMIT = 0.1
"""An effective sample size below this share of the residual count raises a warning."""

SENSITIVITY_LIMIT = 1e-3
"""A parameter whose 1 % change moves the weighted residual RMS by less than this
share of the residual RMS itself counts as flat (the data do not see it)."""

# --------------------------------------------------------------------------
# Parameters and bounds
# --------------------------------------------------------------------------


def _declared_param(case: Case, key: str):
    parts = key.split(".")
    if len(parts) != 2:
        raise ConfigError(f"fit parameter {key!r}: expected section.key, e.g. burn.duration_deg")
    sec, name = parts
    if sec in CORE_SCHEMA:
        decl = {p.name: p for p in CORE_SCHEMA[sec]}
    elif sec in case.submodels:
        from .api import _registry_for

        ch = case.submodels[sec]
        cls = _registry_for([case]).submodel_class(sec, ch.model)
        decl = {p.name: p for p in cls.params}
    else:
        raise ConfigError(f"fit parameter {key!r}: unknown section {sec!r}")
    if name not in decl:
        from .params import suggestion

        raise ConfigError(
            f"fit parameter {key!r}: the {sec} section"
            + (f" (model {case.submodels[sec].model!r})" if sec in case.submodels else "")
            + " has no such key" + suggestion(name, list(decl))
        )
    p = decl[name]
    if p.kind not in ("float", "int") or not p.sweepable:
        raise ConfigError(f"fit parameter {key!r} cannot be fitted: only numbers that may differ within a batch"
                          f" can be fitted")
    return p


CALIBRATABLE_CORE = {
    "engine": ("compression_ratio", "head_area_factor", "piston_area_factor"),
    "walls": ("head_temperature_K", "piston_temperature_K", "liner_temperature_K"),
}
"""Core-section numbers a fit may estimate (besides the closed-mode IVC state)."""

NOT_CALIBRATABLE = {
    "burn.spark_advance_deg": "the spark timing is a setting of the test, known from the engine control",
    "blowby.crankcase_pressure_bar": "the crankcase pressure is an operating condition",
    "knock.octane_number": "the octane number is a property of the fuel",
    "valve_flow.area_grid_step_deg": "it is a numerical setting",
}
"""Submodel numbers that are not model parameters, with the reason."""

CALIBRATION_RULE = (
    "only model parameters can be fitted: numbers of the submodel sections (burn, heat_transfer, blowby,"
    " valve_flow, friction, knock) except burn.spark_advance_deg, blowby.crankcase_pressure_bar,"
    " knock.octane_number and valve_flow.area_grid_step_deg; engine.compression_ratio, the engine's"
    " head and piston area factors and the walls temperatures; in closed mode the IVC state"
    " (operating.ivc_pressure_bar, operating.ivc_temperature_K, operating.residual_fraction)."
    " Operating conditions (speed, intake and exhaust state, lambda, EGR, spark timing), measured"
    " geometry and valve data, fuel, gas and simulation settings, and whole numbers are refused")
"""The rule of :func:`check_calibratable`, as stated in the command-line help."""


def check_calibratable(case: Case, key: str, mode: str = "closed") -> None:
    """Raise ``ConfigError`` unless ``key`` is a model parameter a fit may estimate.

    See :data:`CALIBRATION_RULE`.  Operating conditions are set and measured by the
    test (the trace metadata supplies speed, intake state and lambda); fitting one
    would let the fit move the operating point to absorb a model error.
    """
    p = _declared_param(case, key)
    sec, name = key.split(".")
    why = None
    if p.kind != "float":
        why = "it is a whole number"
    elif key in NOT_CALIBRATABLE:
        why = NOT_CALIBRATABLE[key]
    elif sec == "operating":
        if key not in TRAPPED_STATE_KEYS:
            why = "it is an operating condition of the test (set and measured, not calibrated)"
        elif mode == "full":
            why = "the IVC state is a closed-mode parameter; in full mode the gas exchange sets it"
    elif sec in CORE_SCHEMA:
        if name not in CALIBRATABLE_CORE.get(sec, ()):
            why = {"engine": "it is measured geometry", "valves": "valve timing and geometry are measured data",
                   "fuel": "it is a property of the fuel", "gas": "it is a setting of the gas model",
                   "simulation": "it is a numerical setting"}.get(sec, "it is not a model parameter")
    elif sec == "boundary":
        why = "the plenum boundary describes operating conditions"
    if why:
        raise ConfigError(f"fit parameter {key!r} cannot be fitted: {why}")


def _current_value(case: Case, key: str) -> float:
    sec, name = key.split(".")
    if sec in CORE_SCHEMA:
        v = getattr(case.section(sec), name)
    else:
        v = case.submodels[sec].params[name]
    if v is None:
        raise ConfigError(f"fit parameter {key!r} has no value in the config")
    return float(v)


def param_bounds(case: Case, key: str) -> tuple[float, float]:
    """Bounds [lo, hi] of a fitted parameter from its declared ``Param`` range.

    Open ends of the declaration become +-inf; an excluded bound is moved
    inwards by 1e-6 of the range (or of the value) so that every trial value
    validates.
    """
    p = _declared_param(case, key)
    lo = -np.inf if p.min is None else float(p.min)
    hi = np.inf if p.max is None else float(p.max)
    span = (hi - lo) if np.isfinite(hi - lo) else max(abs(_current_value(case, key)), 1.0)
    if p.min_exclusive and np.isfinite(lo):
        lo += 1e-6 * span
    if p.max_exclusive and np.isfinite(hi):
        hi -= 1e-6 * span
    return lo, hi


# --------------------------------------------------------------------------
# Measured data
# --------------------------------------------------------------------------


@dataclass
class MeasuredData:
    """Pegged, phased measured pressure (ensemble mean or cycles) on its crank grid.

    Attributes
    ----------
    theta : ndarray (n,)
        Crank angle after TDC correction [deg].
    pressure_bar : ndarray (k, n)
        Absolute pressure [bar], one row per fitted record (1 for the mean).
    heat_release_J : ndarray (k, n)
        Apparent net heat release of each row [J] (NaN outside IVC..EVO).
    volume_m3 : ndarray (n,)
        Volume the analyser used at ``theta`` [m^3].
    settings : AnalysisSettings
    analysis : AnalysisResult
    cycles : ndarray of int
        Indices of the measured cycles behind each row.
    changes : dict
        Operating-point values taken from the trace metadata (dotted keys).
    Vd : float
        Displacement [m^3].
    meta : dict
        The trace file's metadata (e.g. air and fuel mass per cycle).
    """

    theta: np.ndarray
    pressure_bar: np.ndarray
    heat_release_J: np.ndarray
    volume_m3: np.ndarray
    settings: Any
    analysis: Any
    cycles: list
    changes: dict = field(default_factory=dict)
    Vd: float = 0.0
    meta: dict = field(default_factory=dict)


_META_OPERATING = {
    "intake_pressure_pa": ("operating.intake_pressure_bar", 1.0 / BAR),
    "intake_pressure_bar": ("operating.intake_pressure_bar", 1.0),
    "intake_temperature_K": ("operating.intake_temperature_K", 1.0),
    "lambda": ("operating.lambda", 1.0),
    "exhaust_pressure_bar": ("operating.exhaust_pressure_bar", 1.0),
}


def _load_traces(traces):
    from .traces.export import TraceSet, read_trace

    if isinstance(traces, TraceSet):
        return traces
    if isinstance(traces, (str, Path)):
        from .traces.trace_checks import check_measured

        ts = read_trace(traces)
        check_measured(ts, traces)
        return ts
    sets = [_load_traces(t) for t in traces]
    if not sets:
        raise CyclesimError("fit: no trace given")
    th = sets[0].theta
    for s in sets[1:]:
        if s.theta.shape != th.shape or not np.allclose(s.theta, th):
            raise CyclesimError("fit: trace files on different crank grids cannot be joined")
    P = np.concatenate([s.pressure_pa for s in sets])
    Pi = None if any(s.intake_pa is None for s in sets) else np.concatenate([s.intake_pa for s in sets])
    return TraceSet(th, P, Pi, sets[0].speed_rpm, dict(sets[0].meta))


def operating_from_trace(ts, case: Case) -> dict:
    """Operating-point values (dotted keys) that the trace's metadata states."""
    out = {}
    if math.isfinite(ts.speed_rpm) and ts.speed_rpm > 0:
        out["operating.speed_rpm"] = float(ts.speed_rpm)
    for mk, (key, f) in _META_OPERATING.items():
        v = ts.meta.get(mk) if isinstance(ts.meta, dict) else None
        if isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v):
            out[key] = float(v) * f
    cur = {k: _current_value(case, k) for k in out}
    return {k: v for k, v in out.items() if abs(v - cur[k]) > 1e-9 * max(1.0, abs(cur[k]))}


def measured_data(case: Case, traces, *, ensemble: str = "mean", peg: str | None = "intake",
                  tdc_correct: bool = False, tdc_offset_deg: float | None = None, motored=None,
                  use_trace_operating: bool = True) -> tuple[MeasuredData, Case]:
    """Read, peg, phase and average the measured cycles; returns the data and the case.

    The returned case carries the operating point stated by the trace metadata
    (speed, intake pressure and temperature, lambda) when ``use_trace_operating``.
    """
    from .cli_traces import analysis_inputs
    from .traces.analysis import analyse, apparent_heat_release

    ts = _load_traces(traces)
    changes = operating_from_trace(ts, case) if use_trace_operating else {}
    if changes:
        case = case_with(case, changes)
    geom, s, speed = analysis_inputs(case)
    if not math.isfinite(ts.speed_rpm):
        ts.speed_rpm = speed
    s = s.replace(peg=peg or "none", tdc_correct=bool(tdc_correct), tdc_offset_deg=tdc_offset_deg)
    mot = _load_traces(motored) if motored is not None else None
    if mot is not None and not math.isfinite(mot.speed_rpm):
        mot.speed_rpm = speed
    res = analyse(ts, geom, s, motored=mot)
    fired = np.flatnonzero(~np.asarray(res.per_cycle["motored"], bool))
    if fired.size == 0:
        raise CyclesimError("fit: every measured cycle is motored (no combustion to fit)")
    th = res.theta_deg
    V = geom.volume(th)[0]
    if ensemble == "mean":
        P = np.mean(res.pressure_pa[fired], axis=0)[None, :]
        rows = [list(map(int, fired))]
    elif ensemble == "each":
        P = res.pressure_pa[fired]
        rows = [[int(k)] for k in fired]
    else:
        raise ConfigError(f"fit: ensemble = {ensemble!r}: choose mean or each")
    HR = np.stack([apparent_heat_release(th, p, V, s)[0] for p in P])
    meta = dict(ts.meta) if isinstance(ts.meta, dict) else {}
    return MeasuredData(th, P / BAR, HR, V, s, res, rows, changes, float(geom.Vd[0]), meta), case


# --------------------------------------------------------------------------
# Problems: points, residuals
# --------------------------------------------------------------------------


def _weights(theta: np.ndarray, weights) -> np.ndarray:
    w = np.ones_like(theta)
    if not weights:
        return w
    items = weights.items() if isinstance(weights, Mapping) else weights
    for (lo, hi), val in items:
        if not (float(val) >= 0):
            raise ConfigError(f"fit weights: weight {val!r} for {lo}..{hi} deg must be >= 0")
        w = np.where((theta >= float(lo)) & (theta <= float(hi)), float(val), w)
    return w


@dataclass
class _Point:
    """One measured record and its simulated counterpart."""

    case: Case                 # template case (mode, grid, fixed values)
    keys: list                 # dotted keys of this point's parameters
    idx: np.ndarray            # their positions in the problem's parameter vector
    theta: np.ndarray          # measured crank grid inside the fit window (n,)
    p_meas: np.ndarray         # [bar] (n,)
    hr_meas: np.ndarray        # [J] (n,) (NaN outside IVC..EVO)
    sw: np.ndarray             # sqrt of the weights (n,)
    target: str
    data: MeasuredData
    row: int
    hr_mask: np.ndarray = None
    nuisance: tuple = ()       # measurement-model terms profiled out (see NUISANCE_TERMS)
    thermal_tau_s: float = THERMAL_TAU_S
    speed_rpm: float = 3000.0

    def nuisance_basis(self, res) -> np.ndarray:
        """Columns (n, q) of the linear measurement-model terms for one simulated case [bar per unit]."""
        cols = []
        for term in self.nuisance:
            if term == "offset":
                cols.append(np.ones_like(self.theta))
            elif term == "gain":
                cols.append(np.interp(self.theta, res.trace["crank_deg"], res.trace["pressure_bar"]))
            elif term == "thermal":
                th_s = res.trace["crank_deg"]
                T = thermal_lag(th_s, res.trace["temperature_K"], self.speed_rpm, self.thermal_tau_s)
                # per 1000 K of lagged gas temperature: a coefficient of order 0.1 bar
                cols.append(np.interp(self.theta, th_s, T) / 1000.0)
        return np.stack(cols, axis=1) if cols else np.zeros((self.theta.size, 0))

    def pressure_misfit(self, res, p) -> tuple[np.ndarray, np.ndarray]:
        """Weighted pressure residual with the nuisance terms profiled out, and their values.

        Variable projection (Golub & Pereyra 1973, SIAM J. Numer. Anal. 10:413): for
        given model parameters the linear measurement terms c minimise
        |sw (p_sim + B c - p_meas)|, so the residual is the part of
        ``sw (p_sim - p_meas)`` orthogonal to the weighted columns of B.
        """
        r = self.sw * (p - self.p_meas)
        if not self.nuisance:
            return r, np.zeros(0)
        Bw = self.sw[:, None] * self.nuisance_basis(res)
        c = np.linalg.lstsq(Bw, -r, rcond=None)[0]
        return r + Bw @ c, c

    def residual(self, res) -> np.ndarray | None:
        """Weighted residual vector of one simulated case (None if it failed)."""
        if res is None or res.error:
            return None
        th_s = res.trace["crank_deg"]
        p = np.interp(self.theta, th_s, res.trace["pressure_bar"])
        parts = []
        if self.target in ("pressure", "both"):
            parts.append(self.pressure_misfit(res, p)[0])
        if self.target in ("heat_release", "both"):
            q = self._hr(p)
            parts.append(self.sw[self.hr_mask] * (q - self.hr_meas[self.hr_mask]) / (self.data.Vd * BAR))
        r = np.concatenate(parts)
        return r if np.all(np.isfinite(r)) else None

    def _hr(self, p_bar):
        return self._hr_full(p_bar)[self.hr_mask]

    def simulated(self, res) -> dict:
        th_s = res.trace["crank_deg"]
        p = np.interp(self.theta, th_s, res.trace["pressure_bar"])
        return {"pressure_bar": p, "heat_release_J": self._hr_full(p)}

    def _hr_full(self, p_bar):
        """The analyser on the full measured grid, the simulated pressure filled in the window."""
        from .traces.analysis import apparent_heat_release

        d = self.data
        pf = d.pressure_bar[self.row].copy()
        inside = np.isin(d.theta, self.theta)
        pf[inside] = p_bar
        Q, _ = apparent_heat_release(d.theta, pf * BAR, d.volume_m3, d.settings)
        return Q[inside]


def thermal_lag(theta_deg, T, speed_rpm: float, tau_s: float) -> np.ndarray:
    """Gas temperature through a first-order lag of time constant ``tau_s`` [K].

    Exact discretisation of dy/dt = (T - y) / tau for T linear between samples
    is not needed at the output step; a zero-order hold is used,
    y_k = y_{k-1} + (1 - exp(-dt/tau)) (T_k - y_{k-1}), started at y_0 = T_0.
    """
    T = np.asarray(T, float)
    if not tau_s or tau_s <= 0:
        return T.copy()
    dt = np.diff(np.asarray(theta_deg, float)) / (6.0 * float(speed_rpm))
    a = 1.0 - np.exp(-dt / float(tau_s))
    if dt.size and np.ptp(dt) <= 1e-9 * dt[0]:
        from scipy.signal import lfilter

        a0 = float(a[0])
        y, _ = lfilter([a0], [1.0, a0 - 1.0], T[1:], zi=[(1.0 - a0) * T[0]])
        return np.concatenate([T[:1], y])
    y = np.empty_like(T)
    y[0] = T[0]
    for k in range(1, T.size):
        y[k] = y[k - 1] + a[k - 1] * (T[k] - y[k - 1])
    return y


def _make_point(case: Case, data: MeasuredData, row: int, keys, idx, *, mode, target, weights,
                window, nuisance=(), thermal_tau_s=THERMAL_TAU_S) -> _Point:
    th = data.theta
    if mode == "closed":
        lo, hi = float(case.valves.ivc_deg), float(case.valves.evo_deg)
        # a sample must lie inside the simulated record (closed: IVC..EVO)
        lo, hi = lo + 1e-9, hi - 1e-9
    else:
        lo, hi = -360.0, 360.0
    if window is not None:
        lo, hi = max(lo, float(window[0])), min(hi, float(window[1]))
    m = (th >= lo) & (th <= hi)
    if m.sum() < len(keys) + 3:
        raise CyclesimError(f"fit: only {int(m.sum())} measured samples inside the fit window {lo:g}..{hi:g} deg")
    w = _weights(th[m], weights)
    hr = data.heat_release_J[row][m]
    pt = _Point(case, list(keys), np.asarray(idx, int), th[m], data.pressure_bar[row][m], hr,
                np.sqrt(w), target, data, row)
    pt.hr_mask = np.isfinite(hr)
    nuisance = tuple(dict.fromkeys(nuisance or ()))
    bad = [t for t in nuisance if t not in NUISANCE_TERMS]
    if bad:
        raise ConfigError(f"fit: nuisance term(s) {bad}: choose from {', '.join(NUISANCE_TERMS)}")
    if nuisance and target != "pressure":
        raise ConfigError("fit: nuisance terms are estimated on the pressure residual (target = pressure)")
    pt.nuisance, pt.thermal_tau_s = nuisance, float(thermal_tau_s)
    pt.speed_rpm = float(case.operating.speed_rpm)
    if target in ("heat_release", "both") and pt.hr_mask.sum() < len(keys) + 3:
        raise CyclesimError("fit: too few samples with an apparent heat release (IVC..EVO) in the fit window")
    return pt


LEVEL_TERMS = ("offset", "thermal")
"""Measurement terms that declare the measured pressure level uncertain: with one of them
the closed cycle does not start from the measured IVC pressure (see :func:`_ivc_state`)."""


IVC_WINDOW_DEG = 30.0
"""Crank-angle window after IVC over which the measured IVC pressure is estimated [deg]."""


def measured_ivc_pressure(data: MeasuredData, row: int, ivc_deg: float) -> tuple[float, float]:
    """Measured pressure at IVC and its standard uncertainty [bar], from the early compression.

    ``ln p`` as a quadratic in ``ln V`` by least squares over IVC..IVC +
    :data:`IVC_WINDOW_DEG` (valves shut, no combustion yet: nearly a polytrope,
    ``ln p = a - n ln V``, e.g. Heywood 1988 sec. 9.2.1; the quadratic term takes
    the drift of the exponent with wall heat and gamma(T)), evaluated at IVC.  One
    sample carries the full measurement noise; the fit over some tens of samples
    averages it out (on the demo closed cycle at 0.5 deg: bias 6e-5 bar, noise
    0.02 bar -> 0.006 bar; measured).  Falls back to the sample value when the
    window holds fewer than 6 positive samples (then the uncertainty is 0: unknown).
    The uncertainty is the regression's standard error of the intercept, widened by
    ``sqrt(n / n_eff)`` for serially correlated residuals (``n_eff`` as in the fit's
    own statistics).
    """
    th, p, V = data.theta, data.pressure_bar[row], data.volume_m3
    m = (th >= ivc_deg) & (th <= ivc_deg + IVC_WINDOW_DEG) & (p > 0)
    p_ivc = float(np.interp(ivc_deg, th, p))
    n = int(m.sum())
    if n < 6:
        return p_ivc, 0.0
    x = np.log(V[m]) - math.log(float(np.interp(ivc_deg, th, V)))
    A = np.stack([np.ones_like(x), x, x * x], axis=1)
    y = np.log(p[m])
    coef = np.linalg.lstsq(A, y, rcond=None)[0]
    est = float(np.exp(coef[0]))
    if not (math.isfinite(est) and est > 0):
        return p_ivc, 0.0
    r = y - A @ coef
    s2 = float(r @ r) / (n - 3)
    c0 = float(r @ r) / n
    tau = 1.0
    if c0 > 0:
        for lag in range(1, n // 4 + 1):
            rho = float(r[lag:] @ r[:-lag]) / n / c0
            if rho <= 0:
                break
            tau += 2.0 * (1.0 - lag / (n // 4 + 1.0)) * rho
    try:
        v0 = float(np.linalg.inv(A.T @ A)[0, 0])
    except np.linalg.LinAlgError:
        return est, 0.0
    return est, est * math.sqrt(max(s2 * v0 * tau, 0.0))


def _keeps_config_pressure(keys: Sequence[str], nuisance: Sequence[str], config_closed: bool) -> bool:
    """Whether the closed cycle starts from the config's IVC pressure instead of the measured one."""
    return (config_closed and "operating.ivc_pressure_bar" not in keys
            and any(t in LEVEL_TERMS for t in nuisance or ()))


def _ivc_state(case: Case, data: MeasuredData, row: int, keys: Sequence[str],
               keep_config_pressure: bool = False) -> tuple[dict, dict]:
    """The closed cycle's state at IVC for one measured record.

    Pressure: the measured (pegged) pressure at IVC (:func:`measured_ivc_pressure`); but when a measurement term
    of :data:`LEVEL_TERMS` is estimated (the measured level is declared uncertain
    by an unknown offset; ``keep_config_pressure``), the config's IVC pressure.
    Temperature: when the trace's metadata holds the mean air and fuel mass per cycle (test-bed flow meters), the
    trapped mass is ``(air + fuel) / (1 - x_r)`` with the config's residual fraction
    x_r (the analyser's mass balance, :meth:`AnalysisSettings.trapped_mass`) and the
    temperature follows from ``p V = m R(T) T`` of the charge; else the config's IVC
    temperature is kept (the analyser's assumption), and the trapped mass follows the
    pressure.  Returns the changes (dotted keys) and facts for the notes.
    """
    from .traces.analysis import _gas_tables, _mixture_temperature, with_measured_masses

    p_meas, p_sd = measured_ivc_pressure(data, row, float(case.valves.ivc_deg))
    changes: dict = {}
    if keep_config_pressure:
        p_ivc, p_source = _current_value(case, "operating.ivc_pressure_bar"), "config"
    else:
        p_ivc, p_source = p_meas, "measured"
        changes["operating.ivc_pressure_bar"] = round(p_ivc, 6)
    info = {"p_ivc": p_ivc, "p_meas": p_meas, "p_source": p_source, "T_source": "config",
            "p_sd": p_sd if p_source == "measured" and "operating.ivc_pressure_bar" not in keys else 0.0}
    s = with_measured_masses(data.settings, data.meta)
    m_tr = s.trapped_mass() if s.air_mass_kg is not None else None
    if m_tr and "operating.ivc_temperature_K" not in keys:
        V0 = float(np.interp(float(case.valves.ivc_deg), data.theta, data.volume_m3))
        T = float(_mixture_temperature(_gas_tables(s), np.array([p_ivc * BAR]), np.array([V0]), m_tr,
                                       np.array([float(s.residual_fraction)]))[0])
        if math.isfinite(T) and T > 0:
            changes["operating.ivc_temperature_K"] = round(T, 3)
            info.update(T_source="masses", T=T, m_mg=m_tr * 1e6, xr=float(s.residual_fraction))
    return changes, info


def _fit_case(case: Case, data: MeasuredData, keys: Sequence[str], mode: str,
              step_deg=None, nuisance: Sequence[str] = ()) -> tuple[Case, list, list]:
    """The template case of a fit: mode, output grid, IVC state from the measurement.

    Returns the case, notes and warnings.
    """
    notes: list[str] = []
    warns: list[str] = []
    changes: dict[str, Any] = {}
    if mode not in ("closed", "full"):
        raise ConfigError(f"fit: mode = {mode!r}: choose closed or full")
    was_full = case.simulation.mode == "full"
    if mode != case.simulation.mode:
        changes["simulation.mode"] = mode
    dth = np.diff(data.theta)
    meas_step = float(np.median(dth)) if dth.size else 0.5
    out_step = max(min(meas_step / 2.0, float(case.simulation.step_deg)), 0.05)
    changes["simulation.output_step_deg"] = round(out_step, 6)
    if step_deg is not None:
        changes["simulation.step_deg"] = float(step_deg)
    if mode == "closed":
        # The closed cycle starts from the measured (pegged) pressure at IVC, whatever the config
        # states: a configured IVC pressure that differs from the measured one offsets the whole
        # compression and combustion pressure, and the fit would bend the model parameters to
        # absorb it (see _ivc_state for the temperature).
        ch, info = _ivc_state(case, data, 0, keys, _keeps_config_pressure(keys, nuisance, not was_full))
        changes.update(ch)
        p_ivc = info["p_ivc"]
        p_cfg = None if was_full else _current_value(case, "operating.ivc_pressure_bar")
        T_cfg = _current_value(case, "operating.ivc_temperature_K")
        xr = _current_value(case, "operating.residual_fraction")
        rows = " (row 0; each record starts from its own)" if data.pressure_bar.shape[0] > 1 else ""
        if "operating.ivc_pressure_bar" not in keys and info["p_source"] == "config":
            p_m = info["p_meas"]
            notes.append(f"closed-cycle start: IVC pressure {p_ivc:.4g} bar from the config, not the measured"
                         f" {p_m:.4f} bar: the measurement terms"
                         f" {', '.join(t for t in nuisance if t in LEVEL_TERMS)} declare the measured"
                         f" pressure level uncertain")
            if abs(p_m - p_ivc) > IVC_PRESSURE_NOTE_REL * p_ivc:
                warns.append(
                    f"the config's IVC pressure {p_ivc:.4g} bar differs from the measured {p_m:.4g} bar by"
                    f" {100 * (p_m / p_ivc - 1):+.1f} %, more than a pressure offset explains: fit"
                    f" operating.ivc_pressure_bar with the measurement terms")
        elif "operating.ivc_pressure_bar" not in keys:
            msg = f"closed-cycle start: IVC pressure {p_ivc:.4f} bar from the pegged measurement{rows}"
            if p_cfg is not None and abs(p_ivc - p_cfg) > IVC_PRESSURE_NOTE_REL * p_cfg:
                msg += f" (the config states {p_cfg:.4g} bar, {100 * (p_ivc / p_cfg - 1):+.1f} %)"
            notes.append(msg)
        if info["T_source"] == "masses":
            notes.append(f"closed-cycle start: IVC temperature {info['T']:.1f} K from the IVC pressure and"
                         f" the trapped mass {info['m_mg']:.1f} mg (air + fuel per cycle from the trace"
                         f" metadata, residual fraction {info['xr']:g} from the config; config's"
                         f" temperature {T_cfg:g} K not used)")
        elif "operating.ivc_temperature_K" not in keys:
            notes.append(f"closed-cycle start: IVC temperature {T_cfg:g} K and residual fraction {xr:g} from"
                         f" the config (assumed; no air and fuel mass in the trace metadata), the trapped"
                         f" mass follows the measured pressure")
            if info["p_source"] == "measured" and p_cfg is not None \
                    and abs(p_ivc - p_cfg) > IVC_PRESSURE_NOTE_REL * p_cfg:
                warns.append(
                    f"the config's IVC pressure {p_cfg:.4g} bar differs from the measured {p_ivc:.4g} bar by"
                    f" {100 * (p_ivc / p_cfg - 1):+.1f} %: its IVC temperature {T_cfg:g} K may be off as"
                    f" well, and an IVC temperature error biases the heat-transfer and burn values; give"
                    f" the air and fuel mass per cycle in the trace metadata, or fit"
                    f" operating.ivc_temperature_K")
        if was_full and "operating.residual_fraction" not in keys:
            notes.append(f"closed-cycle start: operating.residual_fraction = {xr:g} from the config"
                         f" (not fitted)")
    return case_with(case, changes), notes, warns


# --------------------------------------------------------------------------
# Lockstep Levenberg-Marquardt
# --------------------------------------------------------------------------


@dataclass
class _Problem:
    points: list
    names: list
    x: np.ndarray
    lo: np.ndarray
    hi: np.ndarray
    typ: np.ndarray
    r: np.ndarray = None
    J: np.ndarray = None
    cost: float = np.inf
    lam: float = 1e-3
    done: bool = False
    iterations: int = 0
    message: str = ""
    converged: bool = False
    history: list = field(default_factory=list)


def _fd_steps(pb: _Problem, x: np.ndarray, rel: float) -> np.ndarray:
    h = rel * np.maximum(np.abs(x), pb.typ)
    # backward where a forward step would leave the bounds
    return np.where(x + h > pb.hi, -h, h)


def _cases_for(pb: _Problem, x: np.ndarray, h: np.ndarray):
    """Cases for the point x and its finite-difference neighbours: list of (point, column, case)."""
    out = []
    for ip, pt in enumerate(pb.points):
        base = {k: float(x[j]) for k, j in zip(pt.keys, pt.idx)}
        out.append((ip, -1, base))
        for k, j in zip(pt.keys, pt.idx):
            ch = dict(base)
            ch[k] = float(x[j] + h[j])
            out.append((ip, int(j), ch))
    return out


def _evaluate(problems: Sequence[_Problem], xs: Sequence[np.ndarray], rel: float, counter: list):
    """Residuals and Jacobians of every problem at its x, from one simulate batch."""
    from .api import simulate

    plans, cases = [], []
    for pb, x in zip(problems, xs):
        h = _fd_steps(pb, x, rel)
        plan = _cases_for(pb, x, h)
        plans.append((h, plan))
        for ip, _, ch in plan:
            try:
                cases.append(case_with(pb.points[ip].case, ch))
            except ConfigError:
                cases.append(None)
    run = [c for c in cases if c is not None]
    counter[0] += len(run)
    results = iter(simulate(run)) if run else iter(())
    res_all = [next(results) if c is not None else None for c in cases]
    out = []
    pos = 0
    for pb, (h, plan) in zip(problems, plans):
        base_r: dict[int, np.ndarray] = {}
        cols: dict[tuple, np.ndarray] = {}
        ok = True
        bases = {}
        for ip, j, _ in plan:
            res = res_all[pos]
            pos += 1
            r = pb.points[ip].residual(res)
            if r is None:
                ok = False
            if j < 0:
                base_r[ip] = r
                bases[ip] = res
            else:
                cols[(ip, j)] = r
        if not ok:
            out.append(None)
            continue
        r_full = np.concatenate([base_r[ip] for ip in range(len(pb.points))])
        J = np.zeros((r_full.size, len(pb.x)))
        o = 0
        for ip, pt in enumerate(pb.points):
            n = base_r[ip].size
            for j in pt.idx:
                J[o:o + n, j] = (cols[(ip, int(j))] - base_r[ip]) / h[j]
            o += n
        out.append((r_full, J, bases))
    return out


def _lm_step(pb: _Problem) -> np.ndarray:
    g = pb.J.T @ pb.r
    A = pb.J.T @ pb.J
    d = np.diag(A).copy()
    d = np.where(d > 0, d, 1e-12 * max(d.max(), 1e-300))
    p = len(pb.x)
    free = np.ones(p, bool)
    eps = 1e-12 * np.maximum(pb.hi - pb.lo, 1.0)
    free &= ~((pb.x <= pb.lo + eps) & (g > 0))     # at lower bound and pushed down
    free &= ~((pb.x >= pb.hi - eps) & (g < 0))     # at upper bound and pushed up
    step = np.zeros(p)
    if free.any():
        Af = A[np.ix_(free, free)] + pb.lam * np.diag(d[free])
        try:
            step[free] = np.linalg.solve(Af, -g[free])
        except np.linalg.LinAlgError:
            step[free] = -np.linalg.lstsq(Af, g[free], rcond=None)[0]
    return np.clip(pb.x + step, pb.lo, pb.hi)


def _solve(problems: list[_Problem], *, max_iter: int = 40, ftol: float = 1e-9, xtol: float = 1e-7,
           fd_rel: float = 1e-4, progress=None) -> int:
    """Run the lockstep LM; returns the number of simulated cases."""
    counter = [0]
    first = _evaluate(problems, [pb.x for pb in problems], fd_rel, counter)
    for pb, got in zip(problems, first):
        if got is None:
            raise CyclesimError(
                "fit: the simulation at the start values failed or gave no finite pressure on the"
                " measured grid; check the start values and the fit window")
        pb.r, pb.J, pb.bases = got
        pb.cost = 0.5 * float(pb.r @ pb.r)
        pb.history.append(pb.cost)
    for it in range(max_iter):
        act = [pb for pb in problems if not pb.done]
        if not act:
            break
        trials = [_lm_step(pb) for pb in act]
        got = _evaluate(act, trials, fd_rel, counter)
        for pb, xt, g in zip(act, trials, got):
            pb.iterations += 1
            cost_t = np.inf if g is None else 0.5 * float(g[0] @ g[0])
            if cost_t < pb.cost:
                dx = np.abs(xt - pb.x)
                dcost = (pb.cost - cost_t) / max(pb.cost, 1e-300)
                pb.x, (pb.r, pb.J, pb.bases), pb.cost = xt, g, cost_t
                pb.lam = max(pb.lam / 3.0, 1e-9)
                pb.history.append(cost_t)
                if dcost < ftol or np.all(dx <= xtol * (np.abs(pb.x) + pb.typ)):
                    pb.done, pb.converged = True, True
                    pb.message = "converged (relative change of cost or step below tolerance)"
            else:
                pb.lam *= 4.0
                if pb.lam > 1e8:
                    pb.done, pb.converged = True, True
                    pb.message = "converged (no step lowers the cost further)"
        if progress:
            progress(it + 1, sum(pb.done for pb in problems), len(problems))
    for pb in problems:
        if not pb.done:
            pb.message = f"stopped after {max_iter} iterations without meeting the tolerance"
    return counter[0]


# --------------------------------------------------------------------------
# Statistics
# --------------------------------------------------------------------------


def _hac(J: np.ndarray, r: np.ndarray, segments: Sequence[int]):
    """Newey-West sandwich 'meat' and the effective sample size.

    Lags are taken within each residual segment (one per record and target),
    in crank-angle order.
    """
    p = J.shape[1]
    S = np.zeros((p, p))
    n_eff = 0.0
    L_used = 0
    o = 0
    for n in segments:
        rs, Js = r[o:o + n], J[o:o + n]
        o += n
        c0 = float(rs @ rs) / n
        if c0 <= 0 or n < 4:
            continue
        L = n // 4
        acf = np.array([float(rs[l:] @ rs[:-l]) / n / c0 for l in range(1, L + 1)])
        neg = np.flatnonzero(acf <= 0)
        L = int(neg[0]) + 1 if neg.size else L
        L_used = max(L_used, L)
        G = Js * rs[:, None]
        Sseg = G.T @ G
        for l in range(1, L + 1):
            w = 1.0 - l / (L + 1.0)
            Gl = G[l:].T @ G[:-l]
            Sseg += w * (Gl + Gl.T)
        S += Sseg
        tau = 1.0 + 2.0 * float(np.sum((1.0 - np.arange(1, L + 1) / (L + 1.0)) * acf[:L]))
        n_eff += n / max(tau, 1.0)
    return S, n_eff, L_used


def _clip_interval(low, high, lo, hi):
    """Confidence limits clipped to the allowed range [lo, hi]; and which were clipped.

    A symmetric interval that crosses a bound (a multiplier below 0) states values the
    parameter cannot take; it is cut at the bound (the interval then no longer has its
    nominal coverage, which the bound warning says).
    """
    low, high = np.asarray(low, float), np.asarray(high, float)
    lo, hi = np.asarray(lo, float), np.asarray(hi, float)
    clipped = (low < lo) | (high > hi)
    return np.maximum(low, lo), np.minimum(high, hi), clipped


def _statistics(J: np.ndarray, r: np.ndarray, x: np.ndarray, lo, hi, names, segments, level: float,
                covariance: str, n_nuisance: int = 0, systematic=()) -> dict:
    """Covariance, intervals and identifiability of a solution.

    ``n_nuisance`` profiled-out measurement terms use up degrees of freedom.
    ``systematic`` is a sequence of ``(sd, v)``: a systematic error of standard
    uncertainty ``sd`` that moves the residual vector by ``v`` per unit; its
    first-order effect on the parameters, ``g = -(J^T J)^-1 J^T v``, adds
    ``sd^2 g g^T`` to the covariance (a type-B component combined with the
    statistical one in quadrature, JCGM 100:2008 (GUM) sec. 5.1).
    """
    from scipy import stats

    n, p = J.shape
    warnings: list[str] = []
    ssr = float(r @ r)
    dof = max(n - p - int(n_nuisance), 1)
    s2 = ssr / dof
    # column scaling for a meaningful condition number
    cn = np.linalg.norm(J, axis=0)
    scale = np.where(cn > 0, cn, 1.0)
    Js = J / scale
    sv = np.linalg.svd(Js, compute_uv=False)
    cond = float(sv[0] / sv[-1]) if sv[-1] > 0 else np.inf
    singular = not np.isfinite(cond) or cond > 1e8
    A = Js.T @ Js
    Ainv_s = np.linalg.pinv(A, rcond=1e-14) if singular else np.linalg.inv(A)
    Ainv = Ainv_s / np.outer(scale, scale)
    C_classic = s2 * Ainv
    S, n_eff, L = _hac(J, r, segments)
    C_hac = Ainv @ S @ Ainv * n / dof
    if covariance == "classical":
        C, dof_t = C_classic, dof
    elif covariance == "hac":
        C, dof_t = C_hac, max(n_eff - p, 1.0)
    else:
        raise ConfigError(f"fit: covariance = {covariance!r}: choose classical or hac")
    C_sys = np.zeros((p, p))
    for sd_k, v in systematic:
        g = -Ainv @ (J.T @ v)
        C_sys += float(sd_k) ** 2 * np.outer(g, g)
    C_stat = C
    C = C_stat + C_sys
    if np.any(np.diag(C_sys) > 0):
        # Welch-Satterthwaite effective dof of the combined variance (GUM sec. G.4), the
        # type-B part taken as exactly known (infinite dof)
        v_stat, v_all = np.diag(C_stat), np.diag(C)
        with np.errstate(invalid="ignore", divide="ignore"):
            dof_j = np.where(v_stat > 0, dof_t * (v_all / v_stat) ** 2, np.inf)
        dof_t = float(min(np.min(dof_j), 1e6))
    sd = np.sqrt(np.maximum(np.diag(C), 0.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = C / np.outer(sd, sd)
    corr = np.where(np.isfinite(corr), corr, 0.0)
    np.fill_diagonal(corr, 1.0)
    tq = float(stats.t.ppf(0.5 + level / 2.0, dof_t))
    # flat parameters: effect of a 1 % change on the weighted residual RMS
    rms = math.sqrt(ssr / n) if n else 0.0
    delta = 0.01 * np.maximum(np.abs(x), 0.01 * np.where(np.isfinite(hi - lo), hi - lo, 1.0))
    sens = cn * delta / math.sqrt(max(n, 1))
    ref = max(rms, 1e-12)
    for j, nm in enumerate(names):
        if sens[j] < SENSITIVITY_LIMIT * ref or cn[j] == 0:
            warnings.append(
                f"{nm}: flat: a 1 % change moves the fit by {sens[j]:.2e} (residual RMS {rms:.2e});"
                f" the data cannot determine it")
    if singular:
        warnings.append(
            f"J^T J is singular or nearly so (condition number of the scaled Jacobian {cond:.3g}):"
            f" some combination of {', '.join(names)} is not determined by the data")
    # identifiability is a property of the data (the statistical part): a systematic term common to
    # all parameters (TDC phasing, IVC pressure) correlates their errors without making them inseparable
    sd_st = np.sqrt(np.maximum(np.diag(C_stat), 0.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr_st = C_stat / np.outer(sd_st, sd_st)
    corr_st = np.where(np.isfinite(corr_st), corr_st, 0.0)
    for i in range(p):
        for j in range(i + 1, p):
            if abs(corr_st[i, j]) > CORRELATION_LIMIT:
                warnings.append(
                    f"{names[i]} and {names[j]}: correlation {corr_st[i, j]:+.3f} (|r| > {CORRELATION_LIMIT}):"
                    f" the data cannot tell them apart; fix one of them or add data that separates them")
    if n_eff and n_eff < RESIDUAL_CORRELATION_LIMIT * n:
        warnings.append(
            f"the residuals are strongly serially correlated (effective sample size {n_eff:.0f} of {n}):"
            f" a smooth misfit (model error or a measurement flaw) dominates the noise; the intervals"
            f" then rest on few effective samples, and a flaw the model lacks biases the values"
            f" (consider the nuisance terms {', '.join(NUISANCE_TERMS)})")
    eps = 1e-9 * np.maximum(np.where(np.isfinite(hi - lo), hi - lo, 1.0), 1.0)
    for j, nm in enumerate(names):
        if x[j] <= lo[j] + eps[j] or x[j] >= hi[j] - eps[j]:
            warnings.append(f"{nm} = {x[j]:g} lies at its bound [{lo[j]:g}, {hi[j]:g}]: its interval is not reliable")
    ci_low, ci_high, clipped = _clip_interval(x - tq * sd, x + tq * sd, lo, hi)
    return {
        "covariance": C, "covariance_classical": C_classic, "covariance_hac": C_hac,
        "covariance_systematic": C_sys,
        "stderr": sd, "correlation": corr, "ci_low": ci_low, "ci_high": ci_high, "ci_clipped": clipped,
        "t_quantile": tq, "dof": float(dof_t), "s2": s2, "rms": rms, "n": n, "n_eff": n_eff,
        "hac_lag": L, "condition_number": cond, "sensitivity": sens, "warnings": warnings,
        "stderr_systematic": np.sqrt(np.maximum(np.diag(C_sys), 0.0)),
    }


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
    from .output import write_rows_csv

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

    from .config import load_raw
    from .output import atomic_write_text

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
    from .plots import _plt, _save

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


# --------------------------------------------------------------------------
# fit()
# --------------------------------------------------------------------------


def _resolve_case(case) -> tuple[Case, str | None]:
    if isinstance(case, Case):
        return case, None
    return load_config(case), str(case)


def _problem_result(pb: _Problem, stt: dict, base_case: Case, source, mode, target, level, covariance,
                    simulations, notes, initial) -> FitResult:
    pt = pb.points[0]
    res = pb.bases[0]
    sim = pt.simulated(res)
    resid = sim["pressure_bar"] - pt.p_meas
    nuis = {}
    if pt.nuisance:
        c = pt.pressure_misfit(res, sim["pressure_bar"])[1]
        resid = resid + pt.nuisance_basis(res) @ c
        units = {"offset": "bar", "gain": "-", "thermal": "bar per 1000 K"}
        nuis = {f"{t} [{units[t]}]": float(v) for t, v in zip(pt.nuisance, c)}
    cal = case_with(pt.case, {k: float(pb.x[j]) for k, j in zip(pt.keys, pt.idx)})
    return FitResult(
        params=list(pb.names), values=pb.x.copy(), initial=initial.copy(), stderr=stt["stderr"],
        ci_low=stt["ci_low"], ci_high=stt["ci_high"], lower=pb.lo.copy(), upper=pb.hi.copy(),
        covariance=stt["covariance"], correlation=stt["correlation"],
        covariance_classical=stt["covariance_classical"], covariance_hac=stt["covariance_hac"],
        covariance_kind=covariance, level=level, dof=stt["dof"], rms=stt["rms"], n_residuals=stt["n"],
        theta=pt.theta, measured_pressure_bar=pt.p_meas, simulated_pressure_bar=sim["pressure_bar"],
        measured_heat_release_J=pt.hr_meas, simulated_heat_release_J=sim["heat_release_J"],
        residual_bar=resid, volume_m3=np.interp(pt.theta, pt.data.theta, pt.data.volume_m3),
        case=cal, base_case=base_case, mode=mode, target=target, iterations=pb.iterations,
        simulations=simulations, converged=pb.converged, message=pb.message, source=source,
        warnings=list(stt["warnings"]), notes=list(notes),
        stats={**{k: stt[k] for k in ("s2", "n_eff", "hac_lag", "condition_number", "t_quantile",
                                      "stderr_systematic")}, "nuisance": nuis},
        summary=dict(res.summary), ci_clipped=np.asarray(stt["ci_clipped"], bool),
    )


def _tdc_direction(pb: _Problem, delta: float) -> np.ndarray:
    """Change of the residual vector per degree of crank-angle labelling error.

    The measured record shifted by +-``delta`` [deg] along the crank angle (the
    smooth simulated increment p_sim(theta + delta) - p_sim(theta) added to the
    measured pressure, so that measurement noise is not differentiated), its
    residual evaluated at the solution; central difference [residual unit / deg].
    """
    from .traces.analysis import apparent_heat_release

    parts = []
    for ip, pt in enumerate(pb.points):
        res = pb.bases[ip]
        d = pt.data
        th_s, p_s = res.trace["crank_deg"], res.trace["pressure_bar"]
        rs = []
        for sgn in (1.0, -1.0):
            inc = np.interp(d.theta + sgn * delta, th_s, p_s) - np.interp(d.theta, th_s, p_s)
            row = d.pressure_bar[pt.row] + inc
            sh = copy.copy(pt)
            inside = np.isin(d.theta, pt.theta)
            sh.p_meas = row[inside]
            if pt.target in ("heat_release", "both"):
                sh.hr_meas = apparent_heat_release(d.theta, row * BAR, d.volume_m3, d.settings)[0][inside]
            rs.append(sh.residual(res))
        parts.append((rs[0] - rs[1]) / (2.0 * delta))
    return np.concatenate(parts)


def _systematic_terms(pb: _Problem, tdc_sd_deg: float) -> list:
    if not tdc_sd_deg or tdc_sd_deg <= 0:
        return []
    return [(float(tdc_sd_deg), _tdc_direction(pb, max(float(tdc_sd_deg), 0.05)))]


def _ivc_directions(problems: Sequence[_Problem], sds: Sequence) -> list:
    """Change of each point's residual per bar of IVC pressure at the solution.

    One case per point with a nonzero ``sd`` (its IVC pressure raised by
    ``max(sd, 1e-3)`` bar), all in one batch; returns, per problem, a list of
    vectors (None where no sd was given or the case failed).  The IVC pressure
    estimated from the measurement is uncertain by ``sd`` [bar]; its effect on the
    parameters joins the covariance as a type-B term (see :func:`_statistics`).
    """
    from .api import simulate

    out = [[None] * len(pb.points) for pb in problems]
    plan, cases = [], []
    for i, (pb, sd) in enumerate(zip(problems, sds)):
        sd_list = sd if isinstance(sd, (list, tuple)) else [sd] * len(pb.points)
        for ip, (pt, s_i) in enumerate(zip(pb.points, sd_list)):
            if not s_i or s_i <= 0:
                continue
            h = max(float(s_i), 1e-3)
            ch = {k: float(pb.x[j]) for k, j in zip(pt.keys, pt.idx)}
            ch["operating.ivc_pressure_bar"] = float(pt.case.operating.ivc_pressure_bar) + h
            plan.append((i, ip, h))
            cases.append(case_with(pt.case, ch))
    if not cases:
        return out
    for (i, ip, h), res in zip(plan, simulate(cases)):
        pt = problems[i].points[ip]
        r1, r0 = pt.residual(res), pt.residual(problems[i].bases[ip])
        if r1 is not None and r0 is not None:
            out[i][ip] = (r1 - r0) / h
    return out


def _tdc_sd(data: MeasuredData, tdc_sd_deg, notes: list) -> float:
    """Standard uncertainty of the TDC phasing the analyser used [deg]."""
    tdc = data.analysis.tdc
    if tdc_sd_deg is not None:
        sd = float(tdc_sd_deg)
        if sd < 0 or not math.isfinite(sd):
            raise ConfigError(f"fit: tdc_sd_deg = {tdc_sd_deg!r}: expected a number >= 0")
    elif tdc.get("estimated") and tdc.get("loss_angle_deg") is not None:
        sd = TDC_LOSS_ANGLE_REL_SD * abs(float(tdc["loss_angle_deg"]))
    else:
        sd = 0.0
    if sd > 0:
        notes.append(f"TDC phasing uncertainty {sd:.3f} deg (1 sd) included in the intervals")
    return sd


def _segments(pb: _Problem) -> list[int]:
    seg = []
    for pt in pb.points:
        if pt.target in ("pressure", "both"):
            seg.append(pt.theta.size)
        if pt.target in ("heat_release", "both"):
            seg.append(int(pt.hr_mask.sum()))
    return seg


def fit(case, traces, params: Sequence[str], *, mode: str = "closed", weights=None, target: str = "pressure",
        ensemble: str = "mean", peg: str | None = "intake", tdc_correct: bool = False,
        tdc_offset_deg: float | None = None, motored=None, window=None, bounds: Mapping | None = None,
        start: Mapping | None = None, level: float = 0.95, covariance: str = "hac",
        use_trace_operating: bool = True, step_deg: float | None = None, max_iter: int = 40,
        fd_rel: float = 1e-4, progress=None, nuisance: Sequence[str] = (),
        thermal_tau_s: float = THERMAL_TAU_S, tdc_sd_deg: float | None = None) -> FitResult:
    """Fit chosen parameters of a config to measured cylinder pressure.

    Parameters
    ----------
    case : Case, str or Path
        The engine and operating point (config path or built-in name, or a Case).
    traces : TraceSet, path, or a list of them
        Measured cycles (csv, npz or mf4 through :func:`read_trace`); several
        files of one operating point are joined.
    params : sequence of str
        Dotted keys of model parameters (:data:`CALIBRATION_RULE`; operating
        conditions are refused), e.g. ``burn.ignition_delay_deg``, ``burn.duration_deg``,
        ``burn.m``, ``burn.ca50_deg``, ``heat_transfer.multiplier``,
        ``engine.compression_ratio``, ``blowby.effective_area_mm2`` and in
        closed mode ``operating.ivc_pressure_bar``, ``operating.ivc_temperature_K``,
        ``operating.residual_fraction``.
    mode : {"closed", "full"}
        Simulate IVC..EVO from a given IVC state (fast), or the full cycle.
        The closed cycle starts from the measured IVC pressure (a fit of the
        early compression; its uncertainty joins the intervals) and, when the
        trace metadata holds the air and fuel mass per cycle, the IVC
        temperature of that trapped mass; else the config's IVC temperature
        (said in the notes; a warning when the config's IVC pressure is more
        than 3 % off the measured one).  With the ``offset`` or ``thermal``
        measurement term the measured level is uncertain: then the config's
        IVC pressure is kept unless ``operating.ivc_pressure_bar`` is fitted.
    weights : mapping of (lo, hi) -> weight, optional
        Weights of the squared residual per crank-angle region [deg -> -]
        (later entries win where regions overlap; default 1).
    target : {"pressure", "heat_release", "both"}
    ensemble : {"mean", "each"}
        Fit the mean of the fired cycles, or every fired cycle on its own.
    peg : {"intake", "polytropic", None}
        Pegging of the analyser (None: the signal is absolute).
    tdc_correct : bool
        Estimate the TDC offset from motored cycles (in ``traces`` or ``motored``).
    tdc_offset_deg : float, optional
        A known TDC offset [deg] (instead of the estimate).
    motored : TraceSet or path, optional
        Motored cycles of the same recording for ``tdc_correct``.
    window : (float, float), optional
        Crank-angle window of the residuals [deg] (inside IVC..EVO in closed mode).
    bounds : mapping of key -> (lo, hi), optional
        Narrower bounds than the declared ranges.
    start : mapping of key -> value, optional
        Start values (default: the config's).
    level : float
        Confidence level of the intervals [-].
    covariance : {"classical", "hac"}
        Which covariance the intervals use (see the module notes).
    use_trace_operating : bool
        Take speed, intake pressure/temperature and lambda from the trace's metadata.
    step_deg : float, optional
        Integration step for the fit [deg] (default: the config's).
    nuisance : sequence of {"offset", "gain", "thermal"}
        Measurement-model terms estimated with the parameters (see
        :data:`NUISANCE_TERMS`; pressure target only).  ``gain`` is nearly
        collinear with ``operating.ivc_pressure_bar``: fit one of the two.
    thermal_tau_s : float
        Time constant of the ``thermal`` term's first-order lag [s].
    tdc_sd_deg : float, optional
        Standard uncertainty of the TDC phasing [deg], added to the intervals as a
        systematic term.  Default: when the TDC offset is estimated
        (``tdc_correct``), ``TDC_LOSS_ANGLE_REL_SD`` times the loss angle; else 0.

    Returns
    -------
    FitResult
    """
    base_case, source = _resolve_case(case)
    params = list(dict.fromkeys(params))
    if not params:
        raise ConfigError("fit: give at least one parameter to fit")
    if target not in ("pressure", "heat_release", "both"):
        raise ConfigError(f"fit: target = {target!r}: choose pressure, heat_release or both")
    for k in params:
        check_calibratable(base_case, k, mode)
    data, case0 = measured_data(base_case, traces, ensemble=ensemble, peg=peg, tdc_correct=tdc_correct,
                                tdc_offset_deg=tdc_offset_deg, motored=motored,
                                use_trace_operating=use_trace_operating)
    notes = [f"operating point from the trace metadata: {k} = {v:g}" for k, v in data.changes.items()]
    if data.analysis.tdc.get("offset_deg"):
        notes.append(f"TDC offset {data.analysis.tdc['offset_deg']:+.3f} deg corrected ({data.analysis.tdc['method']})")
    notes.append(f"{len(data.cycles[0]) if ensemble == 'mean' else len(data.cycles)} fired cycles"
                 f" ({'mean' if ensemble == 'mean' else 'each fitted'})")
    tmpl, n2, case_warnings = _fit_case(case0, data, params, mode, step_deg, nuisance)
    notes += n2
    sd_tdc = _tdc_sd(data, tdc_sd_deg, notes)
    lo = np.empty(len(params))
    hi = np.empty(len(params))
    for j, k in enumerate(params):
        lo[j], hi[j] = param_bounds(tmpl, k)
        if bounds and k in bounds:
            lo[j], hi[j] = max(lo[j], float(bounds[k][0])), min(hi[j], float(bounds[k][1]))
    x0 = np.array([float(start[k]) if start and k in start else _current_value(tmpl, k) for k in params])
    x0 = np.clip(x0, lo, hi)
    typ = np.maximum(np.abs(x0), 1e-2 * np.where(np.isfinite(hi - lo), hi - lo, 1.0))
    typ = np.where(typ > 0, typ, 1.0)
    problems, ivc_sds = [], []
    for row in range(data.pressure_bar.shape[0]):
        rc, xr0 = tmpl, x0.copy()
        if mode == "closed":
            # each record starts from its own measured IVC state
            ch, info = _ivc_state(tmpl, data, row, params,
                                  _keeps_config_pressure(params, nuisance, case0.simulation.mode == "closed"))
            ivc_sds.append(info["p_sd"])
            if row > 0:
                rc = case_with(tmpl, ch)
        else:
            ivc_sds.append(0.0)
        if row > 0 and mode == "closed":
            for j, k in enumerate(params):
                if k in ch and not (start and k in start):
                    xr0[j] = float(np.clip(ch[k], lo[j], hi[j]))
        pt = _make_point(rc, data, row, params, np.arange(len(params)), mode=mode, target=target,
                         weights=weights, window=window, nuisance=nuisance, thermal_tau_s=thermal_tau_s)
        problems.append(_Problem([pt], list(params), xr0, lo, hi, typ))
    nsim = _solve(problems, max_iter=max_iter, fd_rel=fd_rel, progress=progress)
    if any(ivc_sds):
        row0 = ", row 0" if len(ivc_sds) > 1 else ""
        notes.append(f"IVC pressure estimate's uncertainty {ivc_sds[0]:.2g} bar (1 sd{row0})"
                     f" included in the intervals")
    v_ivc = _ivc_directions(problems, ivc_sds)
    results = []
    for pb, sd_p, v_p in zip(problems, ivc_sds, v_ivc):
        sys_terms = _systematic_terms(pb, sd_tdc) + ([(sd_p, v_p[0])] if sd_p > 0 and v_p[0] is not None else [])
        stt = _statistics(pb.J, pb.r, pb.x, lo, hi, params, _segments(pb), level, covariance,
                          n_nuisance=len(pb.points[0].nuisance), systematic=sys_terms)
        results.append(_problem_result(pb, stt, base_case, source, mode, target, level, covariance, nsim,
                                       notes, x0))
    if ensemble == "mean":
        out = results[0]
    else:
        out = _combine_cycles(results, level)
    # the warnings are in out.warnings and out.text(); they are not printed here (the command line
    # prints the text once)
    out.warnings = list(case_warnings) + [w for w in out.warnings if w not in case_warnings]
    return out


def _combine_cycles(results: list[FitResult], level: float) -> FitResult:
    """Per-cycle fits -> their mean, with the sample covariance of the mean."""
    from scipy import stats

    X = np.stack([r.values for r in results])
    k = X.shape[0]
    first = results[0]
    mean = X.mean(axis=0)
    if k > 1:
        C = np.cov(X, rowvar=False, ddof=1).reshape(len(mean), len(mean)) / k
        # a systematic error (TDC phasing) is common to the cycles of one recording: averaging
        # does not reduce it, and their spread does not show it
        sd_sys = np.mean([np.asarray(r.stats.get("stderr_systematic", np.zeros(len(mean)))) for r in results],
                         axis=0)
        v_spread = np.diag(C).copy()
        C = C + np.outer(sd_sys, sd_sys)
        # Welch-Satterthwaite dof (GUM sec. G.4): the spread has k - 1, the systematic part infinitely many
        with np.errstate(invalid="ignore", divide="ignore"):
            dof_j = np.where(v_spread > 0, (k - 1) * (np.diag(C) / v_spread) ** 2, np.inf)
        dof_c = float(min(np.min(dof_j), 1e6))
        tq = float(stats.t.ppf(0.5 + level / 2.0, dof_c))
    else:
        C, tq = first.covariance, first.stats["t_quantile"]
    sd = np.sqrt(np.maximum(np.diag(C), 0.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = np.where(np.outer(sd, sd) > 0, C / np.outer(sd, sd), 0.0)
    np.fill_diagonal(corr, 1.0)
    warns = []
    for r_i, r in enumerate(results):
        for w in r.warnings:
            tag = f"cycle fit: {w}"
            if tag not in warns:
                warns.append(tag)
    cal = case_with(first.case, {p: float(mean[j]) for j, p in enumerate(first.params)})
    out = copy.copy(first)
    c_lo, c_hi, c_cl = _clip_interval(mean - tq * sd, mean + tq * sd, first.lower, first.upper)
    out.values, out.stderr, out.ci_low, out.ci_high, out.ci_clipped = mean, sd, c_lo, c_hi, c_cl
    out.covariance, out.correlation, out.dof = C, corr, (dof_c if k > 1 else first.dof)
    out.covariance_kind = ("spread of the per-cycle fits / number of cycles"
                           + (" + systematic (TDC phasing)" if k > 1 and np.any(sd_sys > 0) else ""))
    out.case, out.cycles, out.warnings = cal, results, warns
    out.converged = all(r.converged for r in results)
    out.message = f"{sum(r.converged for r in results)} of {k} cycle fits converged"
    out.iterations = max(r.iterations for r in results)
    return out


# --------------------------------------------------------------------------
# Several operating points
# --------------------------------------------------------------------------


@dataclass
class PointsFit:
    """A joint fit of several operating points.

    Attributes
    ----------
    names : list of str
        Parameter labels: shared keys as they are, per-point keys as ``key@i``.
    values, stderr, ci_low, ci_high : ndarray
        Over ``names``.
    covariance, correlation : ndarray
        Joint (block-structured problem) estimates.
    points : list of FitResult
        One per operating point (its own values: shared plus its per-point ones,
        with the joint covariance's block).
    shared, per_point : list of str
    warnings : list of str
    """

    names: list
    values: np.ndarray
    stderr: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    covariance: np.ndarray
    correlation: np.ndarray
    points: list
    shared: list
    per_point: list
    warnings: list = field(default_factory=list)
    level: float = 0.95
    ci_clipped: np.ndarray = None

    def text(self) -> str:
        lines = [f"joint fit of {len(self.points)} operating points: shared {', '.join(self.shared) or '-'};"
                 f" per point {', '.join(self.per_point) or '-'}"]
        w = max(len(n) for n in self.names)
        cl = np.zeros(len(self.names), bool) if self.ci_clipped is None else np.asarray(self.ci_clipped, bool)
        for j, n in enumerate(self.names):
            lines.append(f"  {n:<{w}s} {self.values[j]:11.5g} +- {self.stderr[j]:.3g}"
                         f"  [{self.ci_low[j]:.5g}, {self.ci_high[j]:.5g}]" + (" *" if cl[j] else ""))
        if cl.any():
            lines.append("  * interval clipped to the parameter's allowed range")
        for m in self.warnings:
            lines.append(f"  WARNING: {m}")
        return "\n".join(lines)


def fit_points(cases: Sequence, traces_list: Sequence, shared: Sequence[str] = (),
               per_point: Sequence[str] = (), *, mode: str = "closed", target: str = "pressure",
               weights=None, peg: str | None = "intake", tdc_correct: bool = False,
               tdc_offset_deg: float | None = None, level: float = 0.95, covariance: str = "hac",
               use_trace_operating: bool = True, step_deg: float | None = None, window=None,
               max_iter: int = 40, fd_rel: float = 1e-4, nuisance: Sequence[str] = (),
               thermal_tau_s: float = THERMAL_TAU_S, tdc_sd_deg: float | None = None) -> PointsFit:
    """Fit shared and per-point parameters of several operating points jointly.

    The parameter vector is ``[shared..., per_point of point 0..., per_point of
    point 1..., ...]``; the Jacobian is block-structured (a per-point parameter
    moves only its own point's residuals), so an iteration simulates each
    point at its trial values, once per shared parameter and once per own
    parameter: ``P (1 + n_shared + n_per_point)`` cases, all in one batch.

    Parameters
    ----------
    cases : sequence of Case or config paths
        One per operating point.
    traces_list : sequence
        Measured traces of each point (as for :func:`fit`; each point's fired
        cycles are averaged).
    shared, per_point : sequence of str
        Dotted keys common to all points, and fitted separately per point.
    Other parameters as in :func:`fit`.

    Returns
    -------
    PointsFit
    """
    shared, per_point = list(shared), list(per_point)
    if set(shared) & set(per_point):
        raise ConfigError(f"fit_points: {sorted(set(shared) & set(per_point))} both shared and per point")
    if not shared and not per_point:
        raise ConfigError("fit_points: give shared and/or per-point parameters")
    if len(cases) != len(traces_list):
        raise ConfigError(f"fit_points: {len(cases)} cases but {len(traces_list)} trace sets")
    keys = shared + per_point
    ns, nq, P = len(shared), len(per_point), len(cases)
    names = list(shared) + [f"{k}@{i}" for i in range(P) for k in per_point]
    for c in cases:
        bc0 = _resolve_case(c)[0]
        for k in keys:
            check_calibratable(bc0, k, mode)
    pts, bases, srcs, notes_all, sds_tdc, case_warnings, ivc_sds_pts = [], [], [], [], [], [], []
    xs = np.zeros(ns + P * nq)
    lo = np.zeros_like(xs)
    hi = np.zeros_like(xs)
    for i, (c, t) in enumerate(zip(cases, traces_list)):
        bc, src = _resolve_case(c)
        data, c0 = measured_data(bc, t, ensemble="mean", peg=peg, tdc_correct=tdc_correct,
                                 tdc_offset_deg=tdc_offset_deg, use_trace_operating=use_trace_operating)
        tmpl, notes, w_case = _fit_case(c0, data, keys, mode, step_deg, nuisance)
        ivc_sds_pts.append(_ivc_state(tmpl, data, 0, keys, _keeps_config_pressure(
            keys, nuisance, c0.simulation.mode == "closed"))[1]["p_sd"] if mode == "closed" else 0.0)
        case_warnings += [f"point {i}: {w}" for w in w_case]
        idx = list(range(ns)) + [ns + i * nq + q for q in range(nq)]
        for k, j in zip(keys, idx):
            l, h = param_bounds(tmpl, k)
            v = _current_value(tmpl, k)
            if j < ns and i > 0:
                lo[j], hi[j] = max(lo[j], l), min(hi[j], h)
                continue
            lo[j], hi[j], xs[j] = l, h, v
        sd_tdc = _tdc_sd(data, tdc_sd_deg, notes)
        pts.append(_make_point(tmpl, data, 0, keys, idx, mode=mode, target=target, weights=weights,
                               window=window, nuisance=nuisance, thermal_tau_s=thermal_tau_s))
        sds_tdc.append(sd_tdc)
        bases.append(bc)
        srcs.append(src)
        notes_all.append(notes)
    xs = np.clip(xs, lo, hi)
    typ = np.maximum(np.abs(xs), 1e-2 * np.where(np.isfinite(hi - lo), hi - lo, 1.0))
    typ = np.where(typ > 0, typ, 1.0)
    pb = _Problem(pts, names, xs.copy(), lo, hi, typ)
    nsim = _solve([pb], max_iter=max_iter, fd_rel=fd_rel)
    # each point's TDC phasing error is its own (independent recordings)
    systematic = []
    if any(sds_tdc):
        v_all = _tdc_direction(pb, max(max(sds_tdc), 0.05))
        o = 0
        for pt, sd_i in zip(pts, sds_tdc):
            m = pt.theta.size if pt.target == "pressure" else (
                int(pt.hr_mask.sum()) if pt.target == "heat_release" else pt.theta.size + int(pt.hr_mask.sum()))
            if sd_i > 0:
                v = np.zeros_like(v_all)
                v[o:o + m] = v_all[o:o + m]
                systematic.append((sd_i, v))
            o += m
    if any(ivc_sds_pts):
        segs, o = [], 0
        for pt in pts:
            m = pt.theta.size if pt.target == "pressure" else (
                int(pt.hr_mask.sum()) if pt.target == "heat_release" else pt.theta.size + int(pt.hr_mask.sum()))
            segs.append((o, m))
            o += m
        for (o, m), sd_i, v_i in zip(segs, ivc_sds_pts, _ivc_directions([pb], [list(ivc_sds_pts)])[0]):
            if sd_i > 0 and v_i is not None:
                v = np.zeros(sum(mm for _, mm in segs))
                v[o:o + m] = v_i
                systematic.append((sd_i, v))
    stt = _statistics(pb.J, pb.r, pb.x, lo, hi, names, _segments(pb), level, covariance,
                      n_nuisance=sum(len(pt.nuisance) for pt in pts), systematic=systematic)
    point_results = []
    for i, pt in enumerate(pts):
        idx = pt.idx
        sub = {k: stt[k][idx] for k in ("stderr", "ci_low", "ci_high", "ci_clipped")}
        C = stt["covariance"][np.ix_(idx, idx)]
        sd = np.sqrt(np.maximum(np.diag(C), 0))
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = np.where(np.outer(sd, sd) > 0, C / np.outer(sd, sd), 0.0)
        np.fill_diagonal(corr, 1.0)
        one = _Problem([pt], keys, pb.x[idx], lo[idx], hi[idx], typ[idx])
        one.bases = {0: pb.bases[i]}
        one.iterations, one.converged, one.message = pb.iterations, pb.converged, pb.message
        one.points = [_Point(**{**pt.__dict__, "idx": np.arange(len(keys))})]
        st1 = dict(stt)
        st1.update(sub)
        st1.update(covariance=C, correlation=corr,
                   covariance_classical=stt["covariance_classical"][np.ix_(idx, idx)],
                   covariance_hac=stt["covariance_hac"][np.ix_(idx, idx)],
                   warnings=[w for w in stt["warnings"]])
        point_results.append(_problem_result(one, st1, bases[i], srcs[i], mode, target, level, covariance,
                                             nsim, notes_all[i], np.asarray(xs)[idx]))
    return PointsFit(names, pb.x.copy(), stt["stderr"], stt["ci_low"], stt["ci_high"], stt["covariance"],
                     stt["correlation"], point_results, shared, per_point,
                     case_warnings + list(stt["warnings"]), level, stt["ci_clipped"])


# --------------------------------------------------------------------------
# Burn table
# --------------------------------------------------------------------------

_BURN_COLUMNS = ("spark_advance_deg", "ignition_delay_deg", "duration_deg", "m", "a", "ca50_deg",
                 "burn_10_90_deg", "combustion_efficiency")


def burn_table(fits: Sequence) -> list[dict]:
    """Burn parameters of calibrated operating points against speed and load.

    Parameters
    ----------
    fits : sequence of FitResult, or a PointsFit
        One per operating point.

    Returns
    -------
    list of dict
        One row per point: ``speed_rpm``, ``intake_pressure_bar`` (the load
        coordinate), ``imep_bar`` (simulated, from the fitted case; closed-cycle
        IMEP in closed mode), the burn model, every burn parameter of that
        model, and for fitted ones ``<name>_stderr``.
    """
    if isinstance(fits, PointsFit):
        fits = fits.points
    rows = []
    for f in fits:
        c = f.case
        ch = c.submodels["burn"]
        row = {"speed_rpm": float(c.operating.speed_rpm),
               "intake_pressure_bar": float(c.operating.intake_pressure_bar),
               "lambda": float(getattr(c.operating, "lambda")),
               "imep_bar": f.summary.get("imep_net_bar", f.summary.get("imep_closed_bar", float("nan"))),
               "burn_model": ch.model}
        for k in _BURN_COLUMNS:
            if k in ch.params and ch.params[k] is not None:
                row[k] = float(ch.params[k])
                key = f"burn.{k}"
                if key in f.params:
                    row[f"{k}_stderr"] = float(f.stderr[f.params.index(key)])
        rows.append(row)
    return rows


def write_burn_table(rows: Sequence[dict], path) -> Path:
    """Write a burn table (see :func:`burn_table`) as CSV with a units comment line."""
    from .output import atomic_write_text

    cols: list[str] = []
    for r in rows:
        for k in r:
            if k not in cols:
                cols.append(k)
    lines = ["# burn parameters per operating point; units in the column names (deg, bar, rpm; m, a,"
             " lambda, combustion_efficiency dimensionless); crank angle 0 = firing TDC",
             ",".join(cols)]
    for r in rows:
        vals = []
        for k in cols:
            v = r.get(k, "")
            vals.append(f"{v:.8g}" if isinstance(v, float) else str(v))
        lines.append(",".join(vals))
    atomic_write_text(Path(path), "\n".join(lines) + "\n")
    return Path(path)
