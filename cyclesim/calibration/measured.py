"""Measured traces as fit data: pegged, phased and averaged cycles, the operating point they record, and the pressure at intake valve closing."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..config import Case, case_with
from ..errors import ConfigError, CyclesimError
from .bounds import _current_value


BAR = 1e5


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
    from ..traces.export import TraceSet, read_trace

    if isinstance(traces, TraceSet):
        return traces
    if isinstance(traces, (str, Path)):
        from ..traces.trace_checks import check_measured

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
    from ..traces.analysis import analyse, apparent_heat_release
    from ..traces.analysis_settings import analysis_inputs

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
