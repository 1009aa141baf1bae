"""One fit problem: the measured points, their weights and nuisance terms, and the case each parameter vector stands for."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np

from ..config import Case, case_with
from ..errors import ConfigError, CyclesimError
from .bounds import _current_value
from .measured import BAR, MeasuredData, measured_ivc_pressure


NUISANCE_TERMS = ("offset", "gain", "thermal")
"""Measurement-model terms the fit can estimate alongside the model parameters:
``offset`` a constant pressure error [bar] (pegging error), ``gain`` a relative
sensitivity error [-], ``thermal`` a thermal-shock error of the sensor proportional
to the gas temperature seen through a first-order lag (``thermal_tau_s``)
[bar per 1000 K]."""

THERMAL_TAU_S = 0.002
"""Default time constant of the sensor's thermal-shock response [s] (a few
milliseconds is common practice for the short-term drift of a diaphragm sensor)."""

IVC_PRESSURE_NOTE_REL = 0.03
"""A configured IVC pressure that differs from the measured one by more than this share is
named in the fit's notes (the closed-cycle fit always starts from the measured one)."""


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
        from ..traces.analysis import apparent_heat_release

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
    from ..traces.analysis_settings import with_measured_masses
    from ..traces.heat_release import _gas_tables, _mixture_temperature

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
