"""The fit drivers: one case against its traces (fit) and several points with shared parameters (fit_points)."""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np

from ..config import Case, case_with, load_config
from ..errors import ConfigError
from .bounds import _current_value, check_calibratable, param_bounds
from .levenberg import _solve
from .measured import BAR, MeasuredData, measured_data
from .problem import THERMAL_TAU_S, _Point, _Problem, _fit_case, _ivc_state, _keeps_config_pressure, _make_point
from .result import FitResult
from .statistics import _clip_interval, _statistics


TDC_LOSS_ANGLE_REL_SD = 0.25
"""Relative standard uncertainty of the thermodynamic loss angle behind a TDC
estimate [-]: the loss angle scales with the heat-transfer coefficient of
Woschni's correlation (see :func:`cyclesim.traces.analysis.estimate_tdc_offset`),
whose coefficient is uncertain by some 20-30 % for a particular engine (from
memory)."""


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
    from ..traces.analysis import apparent_heat_release

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
    from ..api import simulate

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
