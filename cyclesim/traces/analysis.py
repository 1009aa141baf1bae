"""Reference combustion analyser for a measured set of cylinder-pressure cycles.

Steps, per cycle unless said otherwise:

1. **Pegging** (the signal of a charge-type sensor has an unknown level):
   ``intake``: the offset is the mean of cylinder minus intake-manifold pressure
   over a window around bottom dead centre of the intake stroke (default
   -190..-170 deg), where the cylinder is open to the manifold and the flow
   loss is small.  ``polytropic``: two compression angles theta1, theta2 (default
   -100 and -65 deg) and an exponent n (default 1.32) with
   ``(p2 + c) / (p1 + c) = (V1 / V2)^n`` give the correction c (p averaged over
   +-``poly_average_deg``).  ``none``: the signal is taken as absolute.
2. **Classes and TDC offset**: each cycle is classed misfire, partial burn or
   fired (:mod:`cyclesim.traces.classify`) on the labelled angle; optionally
   the thermodynamic loss-angle method on the misfires (or a motored set), see
   :func:`estimate_tdc_offset`, or the compression fit of the fired cycles
   (:mod:`cyclesim.traces.tdc_fired`); then classed again on the corrected angle.
   Set statistics are over the fired cycles only.  The offset found, d, means the
   sample labelled theta was taken at true angle ``theta - d``; all figures
   are then given on the corrected angle.
3. **IMEP**: net over the whole cycle (-360..360), gross over -180..180, from
   the trapezoidal integral of p dV divided by the displacement.
4. **Polytropic exponents** of compression and expansion: least-squares slope
   of log p against log V in a window (defaults -90..-40 and 50..110 deg).
5. **Apparent net heat release** from IVC to EVO by the single-zone first law,
   ``dQ = gamma/(gamma-1) p dV + 1/(gamma-1) V dp``, with
   ``gamma(T) = gamma0 + gamma1 T`` (default 1.392 - 8.13e-5 T/K, a linear fit
   common in heat-release analysis, from memory).  T = p V / (m R) with
   ``m R = p_ivc V_ivc / T_ivc`` (the trapped charge taken as an ideal gas of
   constant m R, from the pegged pressure at IVC and an assumed temperature
   ``T_ivc_K``, or from a given trapped mass, or from the measured air and
   fuel mass per cycle as ``(air + fuel) / (1 - residual_fraction)``, see
   :func:`with_measured_masses`).  Discretised per step with
   midpoint values, so that for constant gamma the sum telescopes to the exact
   ``Delta(pV)/(gamma-1) + integral p dV``.
6. **Burn points** CA10/50/90 from the gross heat release (``gas_model``
   ``tables``, the default): the apparent release recomputed with fresh-charge
   and burned-gas properties of the fuel mixed by the burned fraction (taken
   from the release itself, a few passes), plus Woschni's wall heat scaled so
   that the gross release is level after burning; normalised between its
   minimum before its maximum and its maximum (see :func:`heat_release`).
   **Thermal drift** (``thermal_drift`` ``fit``, the default): the sensor's
   short-term thermal error is taken of the assumed form
   ``p_meas - p = -c [L(T) - T_ivc]``, L the analyser's gas temperature through a
   first-order lag of time constant ``thermal_time_constant_s`` (estimated from the set
   unless given, see below; fallback 2 ms: a few milliseconds is common
   practice for a diaphragm's thermal-shock response), zero at IVC (the pegging window lies just
   before IVC, where the gas temperature hardly changes).  After burning the
   gross release must be level; the wall-heat scale, the level and c are
   found together by linear least squares over the level window
   (:func:`_thermal_drift_step`, the release linearised in c, a few passes).
   The two shapes differ: the wall heat follows h A (T - T_w), the drift the
   lagged temperature and its rate.  The drift regressor is formed from a
   smoothed pressure (Savitzky-Golay, 5 deg at 0.1 deg): from the noisy
   pressure its noise correlates with the noise of the release and biases c
   (measured: 2e-5 bar/K from 0.02 bar white noise alone).  c is given in the
   synthetic generator's convention and name (``thermal_drift_bar_per_K``,
   positive: the sensor reads low when the gas is hot), so the two compare
   directly.  One cycle's
   estimate scatters by about +-3e-5 bar/K on the default artefacts, so c is
   taken as a property of the sensor: the median over the set's fired cycles,
   and every cycle is analysed again with it (``thermal_per_cycle`` keeps the
   per-cycle estimates; ``thermal_drift_bar_per_K`` gives a known c).  The
   drift-corrected pressure is used for the heat release and burn points
   only; IMEP, peak pressure and the exponents are from the pegged signal.
   The fit needs the trapped mass (given, or from the measured air and fuel):
   with the ``T_ivc_K`` assumption the error of the temperature scale leaks
   into c (measured on the noise-free demo cycle: c = -1.1e-4 bar/K, CA90 1 deg
   late), so the drift is then not fitted.
   **Lag time constant** (``thermal_time_constant_s`` None, the default): on a grid of
   9 values log-spaced over 0.5-8 ms the c, wall-heat scale and level of
   each cycle of a fixed subsample of the fired cycles (at most
   ``thermal_time_constant_cycles`` = 8, evenly spread over the set) are
   fitted as above, and the residuals of the level fits (on the
   release of the smoothed pressure: the white noise of the release would
   otherwise make the curve flat to 1-3 %) are summed over the cycles; the
   minimum is refined by a parabola in log tau
   (:func:`_estimate_thermal_tau`).  Not well defined (minimum at the grid's
   end, or the curve's largest value less than ``thermal_time_constant_min_contrast``
   = 5 % above it): ``thermal_time_constant_default_s`` is used and a warning given.
   Results: ``stats`` ``thermal_time_constant_s``, ``thermal_time_constant_source``, the grid and
   the relative curve.  Measured on 12-cycle default-artefact sets with the
   generator's time constant changed, true -> found: 0.5 -> 2.03 (not
   resolved: curve within 1.04 over 0.7-2.8 ms), 1 -> 1.25, 2 -> 1.40,
   4 -> 3.79, 5 -> 4.41, 8 -> 6.16 ms (biased short by up to 30 %; the curve
   rises 7-75 % over the grid); CA50 worst / mean 0.128 / +0.088, 0.120 /
   +0.093, 0.145 / +0.121, 0.118 / +0.096, 0.109 / +0.091, 0.107 / +0.091 deg.
   (Those figures were measured with every fired cycle in the sum; with the
   8-cycle subsample the 4 ms set gives 4.35 ms, CA50 worst 0.083 deg, and the
   default 2 ms set CA50 worst 0.080 deg.)  On a 50-cycle default set analysed
   as ``cyclesim analyse`` does (residual fraction 0.07 assumed, no TDC
   correction) 2 ms true gives 3.33 ms (4.08 ms with all 50 cycles): the
   estimate leans long and rests on the trapped-mass assumption.  The
   estimate costs 9 x 8 cycle analyses (about 2.4 s at 0.1 deg) whatever the
   size of the set; ``thermal_time_constant_s`` (``--thermal-tau``) skips it.
7. Peak pressure and its angle (parabola through the highest sample and its
   neighbours).

Apparent heat release is not mass burned: it is the chemical release *minus*
the wall heat loss and the enthalpy leaving with blowby.  Measured on the demo
engine: with a one-gas gamma(T) the composition error puts CA50 about 0.7 deg
late and the missing wall heat about 0.6 deg early, so the two nearly cancel by
chance; the gross release with proper gas properties removes both.  The
remaining error rests mostly on the assumed IVC temperature (or trapped mass):
a trace file that carries the test bed's mean air and fuel mass per cycle
(metadata ``air_mass_per_cycle_mg``, ``fuel_mass_per_cycle_mg``) gives the
trapped mass from a mass balance instead.

Measured on 12 synthetic demo cycles at 0.1 deg (10 fired; trapped mass from
air and fuel; TDC corrected), CA50 error against the mass burned, worst / mean
over fired cycles, without -> with the thermal-drift fit (lag 2 ms assumed;
with it estimated, 1.4 ms found: 0.145 / +0.121 deg): default artefacts
0.28 / +0.215 -> 0.117 / +0.094 deg (c found 5.1e-5 bar/K); default artefacts
without the thermal drift 0.118 / +0.093 -> 0.115 / +0.090 deg (c found
1e-6 bar/K); no artefacts, no TDC correction 0.035 / -0.016 -> 0.016 / -0.003
deg.  The mean +0.06 deg that remains comes with the residual TDC estimate
error (-0.045 deg; no artefacts but the TDC correction: +0.059 deg mean).

The figures above were measured with an earlier generator (thermal drift
following the gas temperature; noise added before decimation, so 0.010 bar
delivered at 0.1 deg).  The generator's default drift now follows the wall heat
flow, which is not this analyser's temperature-lag form, and its noise reaches
the output at the full 0.02 bar.  Measured on the same 12-cycle set (seed 3, TDC
corrected): default artefacts: c found 1.4e-5 bar/K (no true value: the drift is
not of the assumed form), the lag not well defined (2 ms used, with a warning),
CA50 worst / mean 0.027 / +0.007 deg with the fit, 0.061 / +0.040 without;
temperature-form drift (``thermal_drift_bar_per_kW`` 0): lag estimated 3.9 ms
(2 ms true), c = 3.2e-5 bar/K (5e-5 true), CA50 0.121 / +0.104 deg; with the
lag given as 2 ms c = 6.2e-5 bar/K, CA50 0.087 / +0.053 deg.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import CyclesimError
from .cycle_math import VolumeFunction, _pdv, _peak, _slope_loglog, _window_mean
from .classify import CLASSES, ClassifySettings, classify_cycles, cycle_evidence
from .export import TraceSet
from .tdc_fired import fired_window, fit_tdc_fired
from .analysis_settings import AIR_MASS_KEY, BAR, FUEL_MASS_KEY, AnalysisSettings, with_measured_masses
from .heat_release import (WALL_HEAT_SCALE_BOUNDS, _burn_points, _estimate_thermal_tau, _gamma, _gas_tables,
                           _set_thermal_drift, _tau, _woschni_h, _woschni_model, _woschni_wall_heat,
                           apparent_heat_release, heat_release, wall_heat_scale_flag)


__all__ = ["AnalysisSettings", "AnalysisResult", "VolumeFunction", "analyse", "estimate_tdc_offset",
           "apparent_heat_release", "with_measured_masses", "AIR_MASS_KEY", "FUEL_MASS_KEY"]


@dataclass
class AnalysisResult:
    """Per-cycle figures, set statistics and the TDC estimate.

    Attributes
    ----------
    per_cycle : dict of ndarray (n_cycles,)
        ``imep_net_bar``, ``imep_gross_bar``, ``peg_offset_bar`` (offset found:
        measured minus absolute), ``n_compression``, ``n_expansion``,
        ``ca10_deg``, ``ca50_deg``, ``ca90_deg``, ``p_max_bar``,
        ``theta_pmax_deg``, ``q_apparent_J`` (max minus min),
        ``thermal_drift_bar_per_K`` (drift sensitivity used, NaN for motored
        cycles or without the fit), ``wall_heat_scale`` (level-after-burn scale of
        Woschni's coefficient, see :func:`wall_heat_scale_flag`), ``release_share``
        (net released heat over the fired median), ``cycle_class`` (``fired``,
        ``partial burn`` or ``misfire``), ``motored`` (misfire: no combustion).
    stats : dict
        ``<name>_mean``, ``<name>_sd`` and ``imep_net_cov`` (sd / mean) over the fired
        cycles only (misfires and partial burns excluded); ``n_fired``,
        ``n_partial_burn``, ``n_misfire``.
    tdc : dict
        ``offset_deg`` (applied correction), ``estimated`` (bool), ``method``,
        ``loss_angle_deg``, ``theta_pmax_motored_deg``, ``n_motored``.
    theta_deg : ndarray (n,)
        Corrected crank angle of the samples [deg].
    pressure_pa : ndarray (n_cycles, n)
        Pegged (absolute) pressure [Pa].
    heat_release_J : ndarray (n_cycles, n)
        Cumulative apparent net heat release from IVC [J] (NaN outside IVC..EVO).
    temperature_K : ndarray (n_cycles, n)
        Mean gas temperature from the ideal-gas law [K] (NaN outside IVC..EVO).
    settings : AnalysisSettings
    warnings : list of str
    volume_m3 : ndarray (n,)
        Cylinder volume at ``theta_deg`` [m^3].
    """

    per_cycle: dict
    stats: dict
    tdc: dict
    theta_deg: np.ndarray
    pressure_pa: np.ndarray
    heat_release_J: np.ndarray
    temperature_K: np.ndarray
    settings: AnalysisSettings
    warnings: list = field(default_factory=list)
    volume_m3: np.ndarray | None = None


def _peg_offsets(ts: TraceSet, th_true, vol, s: AnalysisSettings) -> np.ndarray:
    nc = ts.n_cycles
    th = ts.theta
    if s.peg == "none":
        return np.zeros(nc)
    if s.peg == "intake":
        if ts.intake_pa is None:
            raise CyclesimError("intake pegging needs an intake-pressure channel (use --peg polytropic)")
        a, b = s.peg_window_deg
        return np.array([
            _window_mean(th, ts.pressure_pa[k] - ts.intake_pa[k], a, b) for k in range(nc)
        ])
    if s.peg == "polytropic":
        a1, a2 = s.poly_angles_deg
        h = s.poly_average_deg
        V1 = float(np.mean(vol(np.linspace(a1 - h, a1 + h, 21))))
        V2 = float(np.mean(vol(np.linspace(a2 - h, a2 + h, 21))))
        r = (V1 / V2) ** s.poly_exponent
        out = np.empty(nc)
        for k in range(nc):
            p1 = _window_mean(th_true, ts.pressure_pa[k], a1 - h, a1 + h)
            p2 = _window_mean(th_true, ts.pressure_pa[k], a2 - h, a2 + h)
            c = (p2 - r * p1) / (r - 1.0)     # absolute = measured + c
            out[k] = -c
        return out
    raise CyclesimError(f"peg {s.peg!r}: unknown; choose intake, polytropic or none")


def estimate_tdc_offset(theta, p_abs, vol: VolumeFunction, s: AnalysisSettings, speed_rpm: float) -> dict:
    """TDC offset of a motored cycle by the thermodynamic loss angle [deg].

    Parameters
    ----------
    theta : ndarray (n,)
        Crank angle as labelled [deg].
    p_abs : ndarray (n,)
        Absolute pressure of a motored cycle (or the mean of several) [Pa].
    vol : VolumeFunction
    s : AnalysisSettings
    speed_rpm : float
        Engine speed [rpm].

    Returns
    -------
    dict
        ``offset_deg`` (true TDC lies at this labelled angle; true = labelled - offset),
        ``loss_angle_deg`` (how far the motored pressure peak lies before TDC, positive
        when it precedes TDC), ``theta_pmax_deg``
        (labelled angle of the motored pressure peak), ``heat_loss_rate_J_per_deg``.

    Notes
    -----
    In a motored cycle the heat loss makes the pressure peak before TDC by
    the thermodynamic loss angle.  At the peak dp = 0, so the first law gives
    ``dQ/dtheta = gamma/(gamma-1) p dV/dtheta``; near TDC ``dV/dtheta = V''(0) x``
    at the peak's true angle x, so the loss angle is
    ``-x = -(gamma-1)/gamma (dQ/dtheta) / (p V''(0))`` (dQ < 0: a loss).
    The heat-loss rate at the peak, ``-h A (T - T_w) / (6 N)``, comes from
    Woschni's correlation for the compression phase (Woschni 1967, SAE 670931;
    Heywood 1988 eq. 12.19; the ``woschni`` heat-transfer model's form and constants,
    w = C1 x mean piston speed, C1 of the closed cycle without swirl), the area of head and piston plus the liner
    (2.1 bore areas + 4 V / B by default, the Geometry's area factors if given)
    and the gas temperature of the ideal-gas law (see ``T_ivc_K``).  A
    fitted heat-loss scale is not used: on a motored cycle a phasing error and
    the heat loss change the apparent heat release near TDC in nearly the same
    way, so the magnitude of the loss has to come from outside.  Blowby, a
    smaller loss, is neglected.  The peak is located by a quartic fit over
    +-8 deg of the highest sample.

    Accuracy: on the built-in demo engine motored at 3000 rpm (0.1 deg grid) the
    error is a few hundredths of a degree; an error of 30 K in the wall
    temperature moves the result by about 0.02 deg, an error of 30 % in the heat
    transfer coefficient by about 30 % of the loss angle (0.2 deg there).  For
    motored cycles only: combustion near TDC hides the loss angle.
    """
    th = np.asarray(theta, float)
    p = np.asarray(p_abs, float)
    near = np.abs(th) < 60.0
    if not near.any():
        raise CyclesimError("TDC estimate: the trace has no sample within 60 deg of TDC")
    if not (np.isfinite(speed_rpm) and speed_rpm > 0):
        raise CyclesimError("TDC estimate: needs the engine speed (speed_rpm) of the trace set")
    i = int(np.argmax(np.where(near, p, -np.inf)))
    k = np.abs(th - th[i]) <= 8.0
    c = np.polyfit(th[k] - th[i], p[k] / BAR, 4)
    roots = np.roots(np.polyder(c))
    roots = roots[np.abs(roots.imag) < 1e-9].real
    r0 = float(roots[np.argmin(np.abs(roots))]) if roots.size else 0.0
    if abs(r0) > 8.0:
        r0 = 0.0
    th_pk = float(th[i] + r0)
    p_pk = float(np.polyval(c, r0)) * BAR
    bore = vol.bore_m or s.bore_m
    if not bore:
        raise CyclesimError("TDC estimate: needs the bore (settings.bore_m) when the volume is an array")
    a_bore = np.pi * bore**2 / 4.0
    stroke = vol.Vd / a_bore
    sp = 2.0 * stroke * speed_rpm / 60.0
    if vol.geometry is not None:
        end_area = float(vol.geometry.head_area_factor[0] + vol.geometry.piston_area_factor[0]) * a_bore
    else:
        end_area = 2.1 * a_bore
    V2 = vol.second_derivative_at_tdc()
    c1 = _woschni_model().C1["closed"][0]
    m_tr = s.trapped_mass()
    if m_tr:
        mR = m_tr * s.R_J_per_kgK
    else:
        p_ivc = float(np.interp(s.ivc_deg + th_pk, th, p))   # labelled angle of IVC ~ ivc + offset
        mR = p_ivc * float(vol(np.array([s.ivc_deg]))[0]) / s.T_ivc_K
    d = th_pk
    x = 0.0
    q = 0.0
    for _ in range(20):
        V_pk = float(vol(np.array([th_pk - d]))[0])
        T_pk = p_pk * V_pk / mR
        h = _woschni_h(bore, p_pk, T_pk, c1 * sp, s)
        A = end_area + 4.0 * V_pk / bore
        q = -h * A * (T_pk - s.tdc_wall_temperature_K) / (6.0 * speed_rpm)   # [J/deg]
        g_pk = float(_gamma(T_pk, s))
        x = -(g_pk - 1.0) / g_pk * q / (p_pk * V2)          # loss angle, > 0: peak before TDC
        d_new = th_pk + x
        if abs(d_new - d) < 1e-7:
            d = d_new
            break
        d = d_new
    return {"offset_deg": float(d), "loss_angle_deg": float(x), "theta_pmax_deg": th_pk,
            "heat_loss_rate_J_per_deg": float(q)}


def _cycle_figures(th, p, vol, s, Vd, speed_rpm):
    V = vol(th)
    W = _pdv(th, p, V)
    tg, pg = _pdv(th, p, V, -180.0, 180.0)
    Vg = vol(tg)
    Wg = float(np.sum(0.5 * (pg[1:] + pg[:-1]) * np.diff(Vg)))
    n_c = _slope_loglog(th, p, V, *s.compression_window_deg)
    info = {"thermal_drift_bar_per_K": np.nan, "wall_heat_scale": np.nan}
    Q, G, T = heat_release(th, p, vol, s, speed_rpm, n_c, info)
    (c10, c50, c90), _ = _burn_points(th, G)
    qrange = float(np.nanmax(Q) - np.nanmin(Q)) if np.isfinite(Q).any() else 0.0
    tpk, ppk = _peak(th, p)
    return {
        "imep_net_bar": W / Vd / BAR,
        "imep_gross_bar": Wg / Vd / BAR,
        "n_compression": n_c,
        "n_expansion": _slope_loglog(th, p, V, *s.expansion_window_deg),
        "ca10_deg": c10, "ca50_deg": c50, "ca90_deg": c90,
        "p_max_bar": ppk / BAR, "theta_pmax_deg": tpk,
        "q_apparent_J": qrange,
        "thermal_drift_bar_per_K": info["thermal_drift_bar_per_K"],
        "wall_heat_scale": info["wall_heat_scale"],
    }, Q, T


def _classify(th, P, vol, s: AnalysisSettings):
    """Class codes of the cycles (0 fired, 1 partial burn, 2 misfire) on the angle ``th``, and the info."""
    cs = ClassifySettings(misfire_release_share=s.misfire_release_share, partial_burn_share=s.partial_burn_share)
    return classify_cycles(cycle_evidence(th, P, vol(th), s.ivc_deg, s.evo_deg, vol.Vd, cs), cs)


def _tdc_from_motored(traceset, motored, P, mask, vol, s: AnalysisSettings, tdc: dict) -> float:
    """TDC offset [deg] by the loss angle of the motored set given or of the set's cycles in ``mask``;
    ``tdc`` is updated with the estimate."""
    if motored is None and not mask.any():
        raise CyclesimError("TDC correction needs motored cycles: none in the trace set (give a motored trace set)")
    ts = motored if motored is not None else traceset

    def mean_motored(d):
        if motored is None and not d:
            return np.mean(P[mask], axis=0)
        pm = ts.pressure_pa - _peg_offsets(ts, ts.theta - d, vol, s)[:, None]
        return np.mean(pm if motored is not None else pm[mask], axis=0)

    est = estimate_tdc_offset(ts.theta, mean_motored(0.0), vol, s, ts.speed_rpm)
    if s.peg == "polytropic":
        # the polytropic peg depends on the angle: re-peg on the corrected angle and estimate again
        est = estimate_tdc_offset(ts.theta, mean_motored(est["offset_deg"]), vol, s, ts.speed_rpm)
    tdc.update(offset_deg=est["offset_deg"], estimated=True,
               method="thermodynamic loss angle, Woschni heat loss (motored cycles)",
               loss_angle_deg=est["loss_angle_deg"], theta_pmax_motored_deg=est["theta_pmax_deg"],
               heat_loss_rate_J_per_deg=est["heat_loss_rate_J_per_deg"],
               n_motored=int(motored.n_cycles if motored is not None else mask.sum()))
    return float(est["offset_deg"])


def tdc_from_fired(th, P_fired, vol: VolumeFunction, s: AnalysisSettings, speed_rpm: float) -> dict:
    """The TDC offset from the fired cycles' compression (:func:`cyclesim.traces.tdc_fired.fit_tdc_fired`)
    with the analyser's gas tables, trapped mass and Woschni correlation (compression form)."""
    def wall_heat(t, p, V, T, T_wall):
        sw = s.replace(wall_temperature_K=T_wall, woschni_multiplier=1.0)
        return _woschni_wall_heat(t, p, V, T, vol, sw, speed_rpm, np.nan, np.inf)

    return fit_tdc_fired(th, P_fired, vol, _gas_tables(s), s.trapped_mass(), s.residual_fraction, wall_heat,
                         fired_window(s.ivc_deg, s.spark_advance_deg), T_start_K=s.T_ivc_K,
                         sensor_delay_deg=6.0 * speed_rpm * s.sensor_delay_s)


def analyse(traceset: TraceSet, geometry_or_volume, settings: AnalysisSettings | None = None,
            motored: TraceSet | None = None) -> AnalysisResult:
    """Analyse a measured trace set.

    Parameters
    ----------
    traceset : TraceSet
    geometry_or_volume : cyclesim.cylinder.geometry.Geometry or array_like (n,)
        Geometry of one case, or V(theta) [m^3] on ``traceset.theta``.
    settings : AnalysisSettings
    motored : TraceSet, optional
        Motored cycles of the same recording for the TDC estimate; by default
        the motored cycles of ``traceset`` itself are used.

    Returns
    -------
    AnalysisResult
    """
    s = settings or AnalysisSettings()
    th = traceset.theta
    vol = VolumeFunction(geometry_or_volume, th, s.bore_m)
    Vd = vol.Vd
    warnings: list[str] = []

    # pass 1: peg on the labelled angle, classify on evidence a phasing error barely changes
    offs = _peg_offsets(traceset, th, vol, s)
    P = traceset.pressure_pa - offs[:, None]
    codes, _ = _classify(th, P, vol, s)
    motored_mask = codes == 2
    tdc = {"offset_deg": 0.0, "estimated": False, "method": "none", "loss_angle_deg": None,
           "theta_pmax_motored_deg": None, "n_motored": int(motored_mask.sum())}
    d = 0.0
    if s.tdc_offset_deg is not None:
        d = float(s.tdc_offset_deg)
        tdc.update(offset_deg=d, method="given")
    elif s.tdc_correct:
        d = _tdc_from_motored(traceset, motored, P, motored_mask, vol, s, tdc)
    elif s.tdc_from_fired:
        if not (codes == 0).any():
            raise CyclesimError("TDC from fired cycles: the set has no fired cycle")
        est = tdc_from_fired(th, P[codes == 0], vol, s, traceset.speed_rpm)
        d = est["offset_deg"]
        tdc.update(est, estimated=True, method="first law of the fired cycles' compression before the spark"
                   " (offset, pegging constant and Woschni wall heat fitted together)")
    th_true = th - d
    if s.peg == "polytropic" and d:
        offs = _peg_offsets(traceset, th_true, vol, s)
        P = traceset.pressure_pa - offs[:, None]
    # pass 2: classify again on the corrected angle (and phase again if the misfires changed)
    codes, cls_info = _classify(th_true, P, vol, s)
    if tdc["estimated"] and motored is None and (codes == 2).any() and not np.array_equal(codes == 2, motored_mask):
        d = _tdc_from_motored(traceset, motored, P, codes == 2, vol, s, tdc)
        th_true = th - d
        codes, cls_info = _classify(th_true, P, vol, s)
    motored_mask = codes == 2
    fired = codes == 0
    if tdc["method"] == "none":
        if motored is None and not motored_mask.any():
            warnings.append("TDC phasing unverified: the set has no motored cycles (and no motored set was"
                            " given), so the TDC offset can be neither estimated nor corrected; IMEP, the burn"
                            " angles and the angle of peak pressure carry the recording's TDC error"
                            " (net IMEP about 3.6 % per degree on the demo at full load)")
        else:
            n_m = motored.n_cycles if motored is not None else int(motored_mask.sum())
            warnings.append(f"TDC phasing not corrected: {n_m} motored cycles would give the offset"
                            f" (tdc_correct, --tdc-correct)")

    thermal_tau = {"tau_s": _tau(s), "source": "given" if s.thermal_time_constant_s is not None else "default"}
    if (s.thermal_drift == "fit" and s.thermal_drift_bar_per_K is None and not s.thermal_per_cycle
            and s.gas_model == "tables" and s.wall_heat == "woschni" and s.level_fit
            and s.trapped_mass() is not None):
        cycles = np.flatnonzero(fired)
        if s.thermal_time_constant_s is None:
            tau_est = _estimate_thermal_tau(th_true, P, cycles, vol, s, traceset.speed_rpm)
            thermal_tau.update(tau_est)
            thermal_tau["source"] = "estimated" if tau_est["well_defined"] else "default (estimate not well defined)"
            if not tau_est["well_defined"]:
                warnings.append(f"thermal drift: the lag time constant is not well defined by the traces "
                                f"(level-misfit curve flat or its minimum at the grid's end); "
                                f"the default {1e3 * s.thermal_time_constant_default_s:g} ms is used")
            s = s.replace(thermal_time_constant_s=float(tau_est["tau_s"]))
        else:
            thermal_tau.update(tau_s=float(s.thermal_time_constant_s), source="given")
        # one drift sensitivity for the set (a property of the sensor): the median of the per-cycle
        # estimates of the fired cycles, then every cycle analysed again with it
        c_set, _ = _set_thermal_drift(th_true, P, cycles, vol, s, traceset.speed_rpm)
        if np.isfinite(c_set) and c_set < 0.0:
            # thermal shock makes a sensor read low when the gas is hot (common practice): a negative
            # sensitivity is the fit absorbing something else (noise, gain, a drift of another form);
            # said where it exceeds a third of one cycle's scatter (about 3e-5 bar/K, measured)
            if c_set < -1e-5:
                warnings.append(f"thermal drift: the fit gives {c_set:.2e} bar/K (a sensor reading high when the"
                                " gas is hot, not a thermal shock); no drift correction is applied")
            c_set = 0.0
        if np.isfinite(c_set):
            s = s.replace(thermal_drift_bar_per_K=c_set)
    names = ["imep_net_bar", "imep_gross_bar", "n_compression", "n_expansion", "ca10_deg", "ca50_deg",
             "ca90_deg", "p_max_bar", "theta_pmax_deg", "q_apparent_J", "thermal_drift_bar_per_K",
             "wall_heat_scale"]
    per = {n: np.empty(traceset.n_cycles) for n in names}
    HR = np.full(P.shape, np.nan)
    TT = np.full(P.shape, np.nan)
    for k in range(traceset.n_cycles):
        fig, Q, T = _cycle_figures(th_true, P[k], vol, s, Vd, traceset.speed_rpm)
        for n in names:
            per[n][k] = fig[n]
        HR[k], TT[k] = Q, T
    for n in ("ca10_deg", "ca50_deg", "ca90_deg", "thermal_drift_bar_per_K", "wall_heat_scale"):
        per[n][motored_mask] = np.nan
    flags = [wall_heat_scale_flag(k) for k in per["wall_heat_scale"][fired]]
    for f in ("near zero", "at a bound"):
        if f in flags:
            warnings.append(f"wall heat: the level-after-burn scale of Woschni's coefficient is {f} in"
                            f" {flags.count(f)} of {fired.sum()} fired cycles (per cycle: wall_heat_scale;"
                            + (" little or no wall heat seen after burning: an adiabatic trace, a"
                               " well-insulated engine or a sensor drift)" if f == "near zero" else
                               f" bounds {WALL_HEAT_SCALE_BOUNDS[0]:g}..{WALL_HEAT_SCALE_BOUNDS[1]:g}: the"
                               " release does not level, late burn points doubtful)"))
    per["peg_offset_bar"] = offs / BAR
    per["release_share"] = cls_info["release_share"]
    per["motored"] = motored_mask
    per["cycle_class"] = np.array([CLASSES[c] for c in codes], dtype=object)
    stats: dict = {"n_cycles": int(traceset.n_cycles), "n_fired": int(fired.sum()),
                   "n_partial_burn": int(np.sum(codes == 1)), "n_misfire": int(motored_mask.sum()),
                   "statistics_over": "fired cycles only (misfires and partial burns excluded)",
                   "reference_release_J": cls_info["reference_release_J"]}
    m_tr = s.trapped_mass()
    stats["trapped_mass_source"] = ("given" if s.trapped_mass_kg else "measured air and fuel" if m_tr
                                    else "assumed IVC temperature")
    stats["trapped_mass_mg"] = float(m_tr * 1e6) if m_tr else float("nan")
    stats["thermal_time_constant_s"] = float(thermal_tau["tau_s"])
    stats["thermal_time_constant_source"] = thermal_tau["source"]
    if "grid_s" in thermal_tau:
        stats["thermal_time_constant_grid_s"] = thermal_tau["grid_s"]
        stats["thermal_time_constant_rss_rel"] = thermal_tau["rss_rel"]
        stats["thermal_time_constant_cycles"] = thermal_tau["cycles"]
    for n in names + ["peg_offset_bar"]:
        v = per[n][fired] if fired.any() else per[n]
        v = v[np.isfinite(v)]
        stats[f"{n}_mean"] = float(np.mean(v)) if v.size else float("nan")
        stats[f"{n}_sd"] = float(np.std(v, ddof=1)) if v.size > 1 else float("nan")
    m = stats["imep_net_bar_mean"]
    stats["imep_net_cov"] = stats["imep_net_bar_sd"] / m if m and np.isfinite(stats["imep_net_bar_sd"]) else float("nan")
    return AnalysisResult(per_cycle=per, stats=stats, tdc=tdc, theta_deg=th_true, pressure_pa=P,
                          heat_release_J=HR, temperature_K=TT, settings=s, warnings=warnings,
                          volume_m3=vol(th_true))
