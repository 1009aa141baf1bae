"""Measurement artefacts of an indicating chain applied to true cylinder pressure.

Input is a set of true cylinder-pressure cycles ``P_true`` (n_cycles, n) [Pa] on
one crank grid ``theta`` (n,) [deg] (0 = firing TDC, one cycle -360..360 per
row, uniform step) at engine speed ``speed_rpm``.  Consecutive rows are
consecutive cycles of one recording: the time-domain artefacts (passage
resonance, charge-amplifier high-pass, thermal drift) run over the cycles
joined end to end.  Time and angle are related by ``t = (theta - theta0) / (6 N)``
with N in rpm (6 N crank degrees per second).

The chain, in the order a real signal passes it:

1. knock ringing (real pressure oscillation of the charge, added to P_true),
2. passage (pipe) resonance of a recessed sensor (second-order low-pass),
3. short-term thermal drift of the sensor (first-order response to the wall
   heat flow, or to the gas temperature where no heat flow is given),
4. gain error of sensor and amplifier,
5. charge-amplifier time constant (first-order high-pass),
6. angle labelling: constant TDC phasing error and per-sample encoder jitter,

   -- the analogue signal (:func:`apply_signal_chain`); then, at the rate the
   ADC samples it (:func:`apply_sampling`) --

7. absolute offset per cycle plus slow drift (a charge-type sensor measures
   pressure changes only: the level is unknown until pegged),
8. white noise, clipping at the measuring range, ADC quantisation; the
   intake-manifold channel's own noise.

A real ADC samples after the amplifier's anti-alias filter at the output rate,
so a caller that synthesises on a fine grid and decimates (as
:func:`cyclesim.traces.synthesis.synthesize` does) runs steps 1-6 on the fine
grid, decimates, and runs 7-8 on the output grid: the delivered noise then has
the set RMS and the levels sit on the ADC grid.  :func:`apply_artefacts` runs
all of them on one grid.

Random draws, in this order from one generator: the per-cycle knock
amplitude factors (only when a cycle rings and ``knock_amplitude_log_sd`` > 0),
the encoder jitter, the offsets, the noise, the intake-channel noise.

Every artefact is switched off by a zero (or ``None``) setting and records its
true value per cycle in the returned ``truth`` dict.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, fields, replace

import numpy as np

from ..errors import CyclesimError
from . import signal_stream
from .acoustics import KNOCK_MODES, acoustic_mode_frequencies, bessel_derivative_root
from .decimation import decimate_to
from .signal_stream import (_SPLINE_REACH, _as_2d, _cycle_blocks, _from_stream, _grid, _passage_sos, _resample_stream,
                            _RowStats, _stream_angle, _stream_length, _stream_read, _stream_write)


__all__ = [
    "ArtefactSettings",
    "KNOCK_MODES",
    "bessel_derivative_root",
    "acoustic_mode_frequencies",
    "apply_artefacts",
    "apply_signal_chain",
    "apply_sampling",
    "decimate_to",
]

BAR = 1e5


@dataclass(frozen=True)
class ArtefactSettings:
    """Settings of the measurement chain; a zero (or ``None``) switches an artefact off.

    Attributes
    ----------
    offset_mean_bar, offset_sd_bar : float
        Normal distribution of the absolute offset drawn per cycle [bar]; the
        measured signal is the true pressure plus this offset (a charge-type
        sensor reads relative pressure).
    offset_drift_bar_per_cycle : float
        Slow offset drift added linearly across cycles [bar per cycle].
    gain_error : float
        Relative sensitivity error [-]; the signal is scaled by ``1 + gain_error``.
    highpass_tau_s : float
        Charge-amplifier time constant [s] (first-order high-pass); 0 = DC-coupled.
    thermal_drift_bar_per_kW : float
        Thermal-drift sensitivity to the heat flow from gas to walls [bar/kW]
        (used when ``wall_heat_rate`` is given, as the synthesis does): the
        diaphragm's thermal shock grows with the heat flux, so the error grows
        with load; it is negative.  0 selects the temperature form below.
    thermal_drift_bar_per_K : float
        Thermal-drift sensitivity to ``T - thermal_wall_temperature_K`` [bar/K]
        (used when ``thermal_drift_bar_per_kW`` is 0 or no heat flow is given);
        the error is negative.
    thermal_wall_temperature_K : float
        Wall temperature of the fallback proxy [K].
    thermal_time_constant_s : float
        First-order response time of the diaphragm's thermal error [s].
    passage_frequency_hz, passage_damping : float
        Natural frequency [Hz] and damping ratio [-] of the passage between
        chamber and a recessed diaphragm; 0 Hz = flush-mounted (no resonance).
    tdc_offset_deg : float
        TDC phasing error [deg]: the sample labelled ``theta`` was taken at
        true angle ``theta - tdc_offset_deg`` (everything appears that much late).
    encoder_jitter_deg : float
        Standard deviation of a random per-sample angle error [deg].
    noise_bar : float
        Standard deviation of white noise [bar].
    clip_min_bar, clip_max_bar : float or None
        Measuring range of the signal chain [bar] (of the offset signal).
    adc_bits : int
        ADC resolution [bits] over ``adc_min_bar..adc_max_bar``; 0 = none.
    adc_min_bar, adc_max_bar : float
        ADC input range [bar].
    knock_amplitude_bar_per_unburned : float
        Initial envelope amplitude of the first mode per unit unburned mass
        fraction at knock onset [bar] (10: 2.5-4 bar for 25-40 % unburned; about
        0.5-1 bar is a light-knock threshold for an ~80 mm bore and heavy knock
        rings at several to tens of bar, common practice).
    knock_amplitude_log_sd : float
        Standard deviation of ln of a per-cycle log-normal factor (median 1) on
        the amplitude [-]: knock intensity is heavy-tailed, near log-normal from
        cycle to cycle (common practice).  0 = no spread.
    knock_decay_s : float
        Exponential decay time constant of the ringing [s].
    knock_mode_weights : tuple of float
        Relative amplitude of each mode in :data:`KNOCK_MODES` [-].
    knock_gas_constant_J_per_kgK : float
        Specific gas constant for the sound speed sqrt(gamma R T) [J/(kg K)].
    intake_noise_bar : float
        Noise of the intake-manifold pressure channel [bar].
    """

    offset_mean_bar: float = -0.8
    offset_sd_bar: float = 0.1
    offset_drift_bar_per_cycle: float = 0.001
    gain_error: float = 0.005
    highpass_tau_s: float = 50.0
    thermal_drift_bar_per_kW: float = 0.004
    thermal_drift_bar_per_K: float = 5e-5
    thermal_wall_temperature_K: float = 450.0
    thermal_time_constant_s: float = 0.002
    passage_frequency_hz: float = 0.0
    passage_damping: float = 0.1
    tdc_offset_deg: float = 0.2
    encoder_jitter_deg: float = 0.01
    noise_bar: float = 0.02
    clip_min_bar: float | None = -5.0
    clip_max_bar: float | None = 250.0
    adc_bits: int = 16
    adc_min_bar: float = -10.0
    adc_max_bar: float = 250.0
    knock_amplitude_bar_per_unburned: float = 10.0
    knock_amplitude_log_sd: float = 0.5
    knock_decay_s: float = 0.8e-3
    knock_mode_weights: tuple = (1.0, 0.5, 0.35, 0.25, 0.15)
    knock_gas_constant_J_per_kgK: float = 290.0
    intake_noise_bar: float = 0.003

    @classmethod
    def default(cls) -> "ArtefactSettings":
        """A realistic indicating chain (flush-mounted sensor, long time constant)."""
        return cls()

    @classmethod
    def none(cls) -> "ArtefactSettings":
        """Every artefact off: the measured signal equals the true pressure."""
        return cls(
            offset_mean_bar=0.0, offset_sd_bar=0.0, offset_drift_bar_per_cycle=0.0, gain_error=0.0,
            highpass_tau_s=0.0, thermal_drift_bar_per_kW=0.0, thermal_drift_bar_per_K=0.0,
            passage_frequency_hz=0.0, tdc_offset_deg=0.0, encoder_jitter_deg=0.0, noise_bar=0.0,
            clip_min_bar=None, clip_max_bar=None, adc_bits=0, knock_amplitude_bar_per_unburned=0.0,
            intake_noise_bar=0.0,
        )

    def replace(self, **changes) -> "ArtefactSettings":
        return replace(self, **changes)

    def as_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def field_names(cls) -> list[str]:
        return [f.name for f in fields(cls)]

    def with_text(self, assignment: str, what: str = "--artefact") -> "ArtefactSettings":
        """A copy with one field set from ``KEY=VALUE`` text (the command line's ``--artefact``).

        Numbers as floats (``adc_bits`` an integer >= 0), ``none`` for an optional
        range limit, a comma list for ``knock_mode_weights``.  Raises CyclesimError
        (one line; an unknown key lists the known ones).
        """
        import math

        key, eq, text = str(assignment).partition("=")
        key, text = key.strip(), text.strip()
        names = self.field_names()
        if not eq or not key:
            raise CyclesimError(f"{what} {assignment!r}: expected KEY=VALUE, KEY one of {', '.join(names)}")
        if key not in names:
            from ..params import suggestion

            raise CyclesimError(f"{what} {key}: unknown" + suggestion(key, names)
                                + f"; known keys: {', '.join(names)}")
        bad = f"{what} {key}={text!r}:"
        if key == "knock_mode_weights":
            try:
                w = tuple(float(v) for v in text.split(","))
            except ValueError:
                raise CyclesimError(f"{bad} expected {len(KNOCK_MODES)} numbers separated by commas") from None
            if len(w) != len(KNOCK_MODES) or not all(math.isfinite(v) and v >= 0 for v in w):
                raise CyclesimError(f"{bad} expected {len(KNOCK_MODES)} numbers >= 0 separated by commas")
            return self.replace(knock_mode_weights=w)
        if key in ("clip_min_bar", "clip_max_bar") and text.lower() in ("none", "off", ""):
            return self.replace(**{key: None})
        try:
            v = float(text)
        except ValueError:
            raise CyclesimError(f"{bad} expected a number") from None
        if not math.isfinite(v):
            raise CyclesimError(f"{bad} expected a finite number")
        if key == "adc_bits":
            if v != int(v) or not 0 <= v <= 32:
                raise CyclesimError(f"{bad} expected a whole number of bits 0..32")
            return self.replace(adc_bits=int(v))
        nonneg = ("_sd_bar", "_s", "_hz", "damping", "jitter_deg", "noise_bar", "log_sd", "_J_per_kgK")
        if key.endswith(nonneg) and v < 0:
            raise CyclesimError(f"{bad} expected a number >= 0")
        if key in ("knock_decay_s", "knock_gas_constant_J_per_kgK") and not v > 0:
            raise CyclesimError(f"{bad} expected a number > 0")
        return self.replace(**{key: v})


# --------------------------------------------------------------------------- the chain
def _time_and_angle_chain(sig, theta, closed, shape, dt, fs, s, rng, truth, T, wall_heat_rate):
    """Steps 2-6 on the cycles joined end to end; fills ``truth``; returns rows (n_cycles, n).

    The steps, each over the whole stream:

    * passage resonance: second-order low-pass (``_passage_sos``), initial state the
      steady state of the first sample;
    * thermal drift: first-order low-pass y[k] = a y[k-1] + (1 - a) x[k], a = exp(-dt / tau),
      initial state the steady state of the first sample;
    * charge amplifier: first-order high-pass y' = x' - y / tau, discretised
      y[k] = a (y[k-1] + x[k] - x[k-1]), a = tau / (tau + dt), y[0] = x[0]: the amplifier is
      set to 'operate' at the first sample, so the output starts equal to the input and then
      loses its mean with time constant ``tau``;
    * angle labelling: the not-a-knot cubic spline through the stream, evaluated at the true
      angle of each labelled sample.
    """
    from scipy import signal

    nc, n = shape
    m = n - 1 if closed else n
    S = _stream_length(shape, m)
    per_block = signal_stream._BLOCK_SAMPLES // m

    sos = _passage_sos(fs, s.passage_frequency_hz, s.passage_damping) if s.passage_frequency_hz else None
    truth["passage_frequency_hz"] = float(s.passage_frequency_hz)
    truth["passage_damping"] = float(s.passage_damping) if s.passage_frequency_hz else 0.0

    therm_src, by_heat_rate = None, False
    if wall_heat_rate is not None and s.thermal_drift_bar_per_kW:
        therm_src, by_heat_rate = _as_2d(wall_heat_rate, shape, "wall_heat_rate"), True
    elif T is not None and s.thermal_drift_bar_per_K:
        therm_src = _as_2d(T, shape, "T")
    a_th = np.exp(-dt / s.thermal_time_constant_s) if s.thermal_time_constant_s else None
    gain = 1.0 + s.gain_error
    a_hp = s.highpass_tau_s / (s.highpass_tau_s + dt) if s.highpass_tau_s else None
    angle = bool(s.tdc_offset_deg or s.encoder_jitter_deg)

    meas = np.empty(shape)
    stream = np.empty(S) if angle else None
    th_stats = _RowStats(nc, m, n)
    hp_stats = _RowStats(nc, m, n)
    z_pass = z_th = z_hp = None
    x_prev = 0.0
    for k0, k1, a, b in _cycle_blocks(nc, m, closed, per_block):
        x = _stream_read(sig, m, a, b)
        # 2. passage resonance
        if sos is not None:
            if z_pass is None:
                z_pass = signal.sosfilt_zi(sos) * x[0]
            x, z_pass = signal.sosfilt(sos, x, zi=z_pass)
        # 3. thermal drift
        if therm_src is not None:
            q = _stream_read(therm_src, m, a, b)
            if by_heat_rate:
                th = -s.thermal_drift_bar_per_kW * BAR * q / 1000.0
            else:
                th = -s.thermal_drift_bar_per_K * BAR * (q - s.thermal_wall_temperature_K)
            if a_th is not None:
                if z_th is None:
                    z_th = signal.lfilter_zi([1 - a_th], [1, -a_th]) * th[0]
                th, z_th = signal.lfilter([1 - a_th], [1, -a_th], th, zi=z_th)
            x = x + th
            th_stats.add(k0, k1, th)
        # 4. gain
        x = x * gain
        # 5. charge-amplifier high-pass
        if a_hp is not None:
            dx = np.empty_like(x)
            np.subtract(x[1:], x[:-1], out=dx[1:])
            if z_hp is None:
                dx[0] = 0.0
                z_hp = np.array([a_hp * x[0]])
            else:
                dx[0] = x[0] - x_prev
            x_prev = x[-1]
            y, z_hp = signal.lfilter([a_hp], [1, -a_hp], dx, zi=z_hp)
            hp_stats.add(k0, k1, y - x)
            x = y
        if angle:
            stream[a:b] = x
        else:
            _stream_write(meas, m, a, x)
    truth["thermal_error_min_bar"] = th_stats.minimum() / BAR
    truth["thermal_error_mean_bar"] = th_stats.mean() / BAR
    truth["gain_error"] = float(s.gain_error)
    truth["highpass_tau_s"] = float(s.highpass_tau_s)
    truth["highpass_error_mean_bar"] = hp_stats.mean() / BAR
    truth["highpass_error_start_bar"] = hp_stats.first[:nc] / BAR

    # 6. angle labelling: the sample labelled alpha was taken at alpha + err
    jit_rms = np.zeros(nc)
    if angle:
        jit_stats = _RowStats(nc, m, n)
        h = 720.0 / m
        th = np.asarray(theta, float)
        uniform = np.max(np.abs(th - (th[0] + h * np.arange(n)))) <= 1e-8 * h
        if uniform and S >= 4 * _SPLINE_REACH:

            def shift_at(k0, k1, a, b):
                err = np.full(b - a, -float(s.tdc_offset_deg))
                if s.encoder_jitter_deg:
                    # drawn block by block: the same numbers as one draw over the stream
                    jit = s.encoder_jitter_deg * rng.standard_normal(b - a)
                    err = err + jit
                    jit_stats.add(k0, k1, jit, squares=True)
                return err / h

            _resample_stream(stream, shift_at, meas, m, closed)
        else:
            # irregular grid (within the tolerance of _grid) or a very short record
            from scipy.interpolate import CubicSpline

            alpha = _stream_angle(theta, nc, closed)
            err = np.full(alpha.shape, -float(s.tdc_offset_deg))
            if s.encoder_jitter_deg:
                jit = s.encoder_jitter_deg * rng.standard_normal(alpha.size)
                err = err + jit
                for k0, k1, a, b in _cycle_blocks(nc, m, closed, nc):
                    jit_stats.add(k0, k1, jit[a:b], squares=True)
            meas[...] = _from_stream(CubicSpline(alpha, stream)(alpha + err), shape, closed)
        if s.encoder_jitter_deg:
            jit_rms = np.sqrt(jit_stats.mean(squares=True))
    truth["tdc_offset_deg"] = float(s.tdc_offset_deg)
    truth["encoder_jitter_rms_deg"] = jit_rms
    return meas


def apply_signal_chain(
    P_true,
    theta,
    speed_rpm: float,
    settings: ArtefactSettings | None = None,
    rng: np.random.Generator | None = None,
    *,
    T=None,
    gamma=None,
    bore_m: float | None = None,
    knock_onset_deg=None,
    knock_unburned_fraction=None,
    wall_heat_rate=None,
):
    """Steps 1-6 of the chain (the analogue signal, before the ADC): returns (signal [Pa], truth).

    Parameters as :func:`apply_artefacts`; the signal has no offset, noise,
    clipping or quantisation yet (:func:`apply_sampling` adds them).
    """
    s = settings or ArtefactSettings.default()
    rng = rng or np.random.default_rng()
    P = np.atleast_2d(np.asarray(P_true, dtype=float))
    theta = np.asarray(theta, dtype=float)
    if P.shape[1] != theta.size:
        raise CyclesimError(f"pressure has {P.shape[1]} samples per cycle, crank grid {theta.size}")
    step, closed = _grid(theta)
    shape = P.shape
    nc = shape[0]
    N = float(speed_rpm)
    if not N > 0:
        raise CyclesimError(f"speed_rpm: must be > 0, got {speed_rpm!r}")
    dt = step / (6.0 * N)
    fs = 1.0 / dt
    truth: dict = {"sample_rate_hz": fs, "crank_step_deg": step, "speed_rpm": N}
    t_row = (theta - theta[0]) / (6.0 * N)
    sig = P

    # 1. knock ringing ------------------------------------------------------
    onset = np.full(nc, np.nan) if knock_onset_deg is None else np.broadcast_to(
        np.asarray(knock_onset_deg, float), (nc,)).copy()
    unb = np.zeros(nc) if knock_unburned_fraction is None else np.broadcast_to(
        np.asarray(knock_unburned_fraction, float), (nc,)).copy()
    unb = np.nan_to_num(unb)
    amp = s.knock_amplitude_bar_per_unburned * unb
    amp[~np.isfinite(onset)] = 0.0
    factor = np.ones(nc)
    if s.knock_amplitude_log_sd and np.any(amp != 0):
        # one draw per cycle (the same numbers whichever cycles knock)
        factor = np.exp(float(s.knock_amplitude_log_sd) * rng.standard_normal(nc))
        amp = amp * factor
    f_onset = np.full((nc, len(KNOCK_MODES)), np.nan)
    if s.knock_amplitude_bar_per_unburned and np.any(amp != 0):
        if T is None or bore_m is None:
            raise CyclesimError("knock ringing needs the gas temperature T and bore_m")
        T2 = _as_2d(T, shape, "T")
        g2 = _as_2d(1.3 if gamma is None else gamma, shape, "gamma")
        w = np.asarray(s.knock_mode_weights, float)
        if w.size != len(KNOCK_MODES):
            raise CyclesimError(f"knock_mode_weights: need {len(KNOCK_MODES)} values, got {w.size}")
        sig = P.copy()
        for k in np.flatnonzero(amp):
            on = theta >= onset[k]
            if not on.any():
                continue
            i0 = int(np.argmax(on))
            # mode frequencies from the onset on (n - i0, modes)
            c = np.sqrt(g2[k, i0:] * s.knock_gas_constant_J_per_kgK * T2[k, i0:])
            fk = acoustic_mode_frequencies(c, bore_m)
            # phase: trapezoidal integral of f dt from the onset sample
            ph = np.zeros_like(fk)
            ph[1:] = np.cumsum(0.5 * (fk[1:] + fk[:-1]) * dt, axis=0)
            tau = t_row[i0:] - t_row[i0]
            env = amp[k] * BAR * np.exp(-tau / s.knock_decay_s)
            sig[k, i0:] += env * (w[None, :] * np.sin(2 * np.pi * ph)).sum(axis=1)
            f_onset[k] = fk[0]
    truth["knock_onset_deg"] = onset
    truth["knock_unburned_fraction_at_onset"] = np.where(np.isfinite(onset), unb, np.nan)
    truth["knock_amplitude_factor"] = np.where(amp != 0, factor, np.nan)
    truth["knock_amplitude_bar"] = amp
    truth["knock_mode_frequency_at_onset_hz"] = f_onset
    truth["knock_modes"] = [list(m) for m in KNOCK_MODES]

    by_heat = wall_heat_rate is not None and bool(s.thermal_drift_bar_per_kW)
    by_T = not by_heat and T is not None and bool(s.thermal_drift_bar_per_K)
    truth["thermal_drift_proxy"] = "wall heat flow" if by_heat else ("gas temperature" if by_T else "none")
    timed = bool(s.passage_frequency_hz or by_heat or by_T or s.highpass_tau_s
                 or s.tdc_offset_deg or s.encoder_jitter_deg)
    truth["passage_frequency_hz"] = float(s.passage_frequency_hz)
    truth["passage_damping"] = float(s.passage_damping) if s.passage_frequency_hz else 0.0
    truth["gain_error"] = float(s.gain_error)
    truth["highpass_tau_s"] = float(s.highpass_tau_s)
    truth["tdc_offset_deg"] = float(s.tdc_offset_deg)
    zero = np.zeros(nc)
    truth.update(thermal_error_min_bar=zero.copy(), thermal_error_mean_bar=zero.copy(),
                 highpass_error_mean_bar=zero.copy(), highpass_error_start_bar=zero.copy(),
                 encoder_jitter_rms_deg=zero.copy())
    if not timed:
        # no time-domain or angle artefact: work row by row (no joining of cycles)
        meas = sig * (1.0 + s.gain_error)
    else:
        meas = _time_and_angle_chain(sig, theta, closed, shape, dt, fs, s, rng, truth,
                                     T if by_T else None, wall_heat_rate if by_heat else None)
    return meas, truth


def apply_sampling(meas, settings: ArtefactSettings | None = None, rng: np.random.Generator | None = None,
                   truth: dict | None = None, *, intake_pressure_pa=None):
    """Steps 7-8 at the ADC's sample rate: offset, noise, clipping, quantisation; the intake channel.

    Parameters
    ----------
    meas : ndarray (n_cycles, n)
        The analogue signal [Pa] on the output grid; changed in place (a float array).
    settings, rng :
        As :func:`apply_artefacts`.
    truth : dict, optional
        Filled with ``offset_bar``, ``noise_rms_bar``, ``clipped_samples``,
        ``adc_lsb_bar``, ``intake_noise_bar`` (a new dict if None).
    intake_pressure_pa : float or array_like (n_cycles,) or (n_cycles, n), optional
        True intake-plenum pressure [Pa] on the same grid; returned with its own noise.

    Returns
    -------
    (meas, P_intake_meas or None, truth)
    """
    s = settings or ArtefactSettings.default()
    rng = rng or np.random.default_rng()
    truth = {} if truth is None else truth
    shape = meas.shape
    nc = shape[0]
    # run over blocks of whole rows, in place; the noise is drawn block by block: the same
    # numbers as one draw over all rows
    rows = max(1, signal_stream._BLOCK_SAMPLES // shape[1])

    # 7. offset -----------------------------------------------------------
    off = s.offset_mean_bar + s.offset_sd_bar * rng.standard_normal(nc) if s.offset_sd_bar else \
        np.full(nc, float(s.offset_mean_bar))
    off = off + s.offset_drift_bar_per_cycle * np.arange(nc)
    truth["offset_bar"] = off
    off_pa = off[:, None] * BAR

    # 8. noise, clipping, ADC ---------------------------------------------
    noise_rms = np.zeros(nc)
    clipped = np.zeros(nc, dtype=int)
    lo = -np.inf if s.clip_min_bar is None else s.clip_min_bar * BAR
    hi = np.inf if s.clip_max_bar is None else s.clip_max_bar * BAR
    if s.adc_bits:
        a_lo, a_hi = s.adc_min_bar * BAR, s.adc_max_bar * BAR
        lsb = (a_hi - a_lo) / (2 ** int(s.adc_bits) - 1)
    for r0 in range(0, nc, rows):
        r1 = min(nc, r0 + rows)
        blk = meas[r0:r1]
        blk += off_pa[r0:r1]
        if s.noise_bar:
            nz = s.noise_bar * BAR * rng.standard_normal((r1 - r0, shape[1]))
            blk += nz
            noise_rms[r0:r1] = np.sqrt(np.mean(nz**2, axis=1)) / BAR
        clipped[r0:r1] = np.count_nonzero((blk < lo) | (blk > hi), axis=1)
        np.clip(blk, lo, hi, out=blk)
        if s.adc_bits:
            code = np.clip(np.round((blk - a_lo) / lsb), 0, 2 ** int(s.adc_bits) - 1)
            np.multiply(code, lsb, out=blk)
            blk += a_lo
    truth["noise_rms_bar"] = noise_rms
    truth["clipped_samples"] = clipped
    truth["adc_lsb_bar"] = lsb / BAR if s.adc_bits else 0.0

    # intake channel --------------------------------------------------------
    p_int = None
    if intake_pressure_pa is not None:
        p_int = _as_2d(intake_pressure_pa, shape, "intake_pressure_pa").copy()
        if s.intake_noise_bar:
            for r0 in range(0, nc, rows):
                r1 = min(nc, r0 + rows)
                p_int[r0:r1] += s.intake_noise_bar * BAR * rng.standard_normal((r1 - r0, shape[1]))
    truth["intake_noise_bar"] = float(s.intake_noise_bar)
    return meas, p_int, truth


def apply_artefacts(
    P_true,
    theta,
    speed_rpm: float,
    settings: ArtefactSettings | None = None,
    rng: np.random.Generator | None = None,
    *,
    T=None,
    gamma=None,
    bore_m: float | None = None,
    knock_onset_deg=None,
    knock_unburned_fraction=None,
    intake_pressure_pa=None,
    wall_heat_rate=None,
):
    """Turn true cylinder pressure into a measured signal, every step on the grid given.

    :func:`apply_signal_chain` then :func:`apply_sampling` on the same grid.  To
    synthesise on a fine grid, run the first, decimate (:func:`decimate_to`) and
    run the second on the output grid: the ADC samples at the output rate.

    Parameters
    ----------
    P_true : array_like (n_cycles, n) or (n,)
        True cylinder pressure [Pa].
    theta : array_like (n,)
        Crank angle [deg], uniform, one cycle (-360..360, with or without the last point).
    speed_rpm : float
        Engine speed [rpm].
    settings : ArtefactSettings
        Default: :meth:`ArtefactSettings.default`.
    rng : numpy.random.Generator
        Source of all random draws (default: ``np.random.default_rng()``).
    T : array_like (n_cycles, n), optional
        Mean gas temperature [K]: sound speed of knock ringing; thermal-drift
        proxy when ``wall_heat_rate`` is not given (or ``thermal_drift_bar_per_kW`` is 0).
    gamma : float or array_like, optional
        Ratio of specific heats for the sound speed [-] (default 1.3).
    bore_m : float, optional
        Bore [m]; needed for knock ringing.
    knock_onset_deg, knock_unburned_fraction : array_like (n_cycles,), optional
        Knock onset angle [deg] (NaN = no knock) and the unburned mass fraction at
        onset [-] per cycle.
    intake_pressure_pa : float or array_like (n_cycles,) or (n_cycles, n), optional
        True intake-plenum pressure [Pa]; returned with its own noise.
    wall_heat_rate : array_like (n_cycles, n), optional
        Heat flow from gas to walls [W]: the thermal-drift proxy.

    Returns
    -------
    P_meas : ndarray (n_cycles, n)
        Measured signal [Pa] (true pressure + offset + errors).
    P_intake_meas : ndarray (n_cycles, n) or None
        Measured intake pressure [Pa].
    truth : dict
        True value of every artefact: per-cycle arrays (n_cycles,) and scalars.

    Notes
    -----
    Knock ringing: each mode (m, n) rings at f_mn(t) = c(t) rho_mn / (pi B)
    (Draper 1938) with c = sqrt(gamma R T) following the gas temperature,
    phase = 2 pi * integral of f dt (it starts at zero phase at onset, so the
    signal is continuous), envelope ``A exp(-(t - t_onset) / knock_decay_s)``
    with A = ``knock_amplitude_bar_per_unburned`` x unburned fraction at onset x
    a per-cycle log-normal factor (``knock_amplitude_log_sd``, median 1), times
    the mode's weight.  ``truth["knock_amplitude_bar"]`` is A of each cycle.
    """
    single = np.ndim(P_true) == 1
    s = settings or ArtefactSettings.default()
    rng = rng or np.random.default_rng()
    meas, truth = apply_signal_chain(P_true, theta, speed_rpm, s, rng, T=T, gamma=gamma, bore_m=bore_m,
                                     knock_onset_deg=knock_onset_deg,
                                     knock_unburned_fraction=knock_unburned_fraction,
                                     wall_heat_rate=wall_heat_rate)
    meas, p_int, truth = apply_sampling(meas, s, rng, truth, intake_pressure_pa=intake_pressure_pa)
    if single:
        meas = meas[0]
        p_int = None if p_int is None else p_int[0]
    return meas, p_int, truth
