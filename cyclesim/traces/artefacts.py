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
3. short-term thermal drift of the sensor (first-order response to heat flux),
4. gain error of sensor and amplifier,
5. charge-amplifier time constant (first-order high-pass),
6. angle labelling: constant TDC phasing error and per-sample encoder jitter,
7. absolute offset per cycle plus slow drift (a charge-type sensor measures
   pressure changes only: the level is unknown until pegged),
8. white noise, clipping at the measuring range, ADC quantisation.

Every artefact is switched off by a zero (or ``None``) setting and records its
true value per cycle in the returned ``truth`` dict.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, fields, replace

import numpy as np

from ..errors import CyclesimError

__all__ = [
    "ArtefactSettings",
    "KNOCK_MODES",
    "bessel_derivative_root",
    "acoustic_mode_frequencies",
    "apply_artefacts",
    "decimate_to",
]

BAR = 1e5

#: Cylinder acoustic modes (m, n): m circumferential, n radial order.
KNOCK_MODES = ((1, 0), (2, 0), (0, 1), (3, 0), (1, 1))


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
        Thermal-drift sensitivity to the wall heat-flow proxy [bar/kW] (used
        when ``wall_heat_rate`` is given); the error is negative.
    thermal_drift_bar_per_K : float
        Thermal-drift sensitivity to ``T - thermal_wall_temperature_K`` [bar/K]
        (used when only ``T`` is given); the error is negative.
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
    knock_amplitude_bar_per_intensity : float
        Initial envelope amplitude of the first mode per unit knock intensity [bar].
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
    knock_amplitude_bar_per_intensity: float = 1.0
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
            clip_min_bar=None, clip_max_bar=None, adc_bits=0, knock_amplitude_bar_per_intensity=0.0,
            intake_noise_bar=0.0,
        )

    def replace(self, **changes) -> "ArtefactSettings":
        return replace(self, **changes)

    def as_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def field_names(cls) -> list[str]:
        return [f.name for f in fields(cls)]


# --------------------------------------------------------------------------- acoustics
def bessel_derivative_root(m: int, n: int) -> float:
    """rho_mn: the root of J'_m belonging to mode (m, n) [-].

    For m >= 1 the n-th radial order is the (n+1)-th positive root of J'_m;
    for m = 0 the trivial root at 0 (no oscillation) is excluded, so (0, 1) is
    the first positive root of J'_0 = -J_1.
    """
    from scipy.special import jnp_zeros

    if m == 0:
        if n < 1:
            raise ValueError("mode (0, 0) does not oscillate")
        return float(jnp_zeros(0, n)[n - 1])
    return float(jnp_zeros(m, n + 1)[n])


def acoustic_mode_frequencies(sound_speed_m_per_s, bore_m: float, modes=KNOCK_MODES) -> np.ndarray:
    """Acoustic mode frequencies of a cylindrical chamber f_mn = c rho_mn / (pi B) [Hz].

    Draper (1938), J. Aeronaut. Sci. 5.  ``sound_speed_m_per_s`` may be an
    array; the result has a trailing axis over ``modes``.
    """
    rho = np.array([bessel_derivative_root(m, n) for m, n in modes])
    c = np.asarray(sound_speed_m_per_s, dtype=float)[..., None]
    return c * rho / (np.pi * bore_m)


# --------------------------------------------------------------------------- grid helpers
def _grid(theta) -> tuple[float, bool]:
    """Step [deg] of a uniform one-cycle grid and whether it has both -360 and 360 ends."""
    th = np.asarray(theta, dtype=float)
    if th.ndim != 1 or th.size < 8:
        raise CyclesimError("crank grid: need a 1-D array of at least 8 angles [deg]")
    d = np.diff(th)
    step = float(np.mean(d))
    if step <= 0 or np.max(np.abs(d - step)) > 1e-6 * max(step, 1e-12) + 1e-9:
        raise CyclesimError("crank grid: angles must be uniformly spaced and increasing")
    span = th[-1] - th[0]
    if abs(span - 720.0) < 1e-6 * 720:
        return step, True
    if abs(span + step - 720.0) < 1e-6 * 720:
        return step, False
    raise CyclesimError(f"crank grid: must cover one 720 deg cycle (it covers {span:g} deg)")


def _to_stream(P: np.ndarray, closed: bool) -> np.ndarray:
    """Join cycles end to end; with both ends present a row's last sample is the next row's first."""
    if not closed:
        return P.reshape(-1).copy()
    return np.concatenate([P[:, :-1].reshape(-1), P[-1:, -1]])


def _from_stream(s: np.ndarray, shape: tuple, closed: bool) -> np.ndarray:
    n_cycles, n = shape
    if not closed:
        return s.reshape(n_cycles, n).copy()
    m = n - 1
    idx = np.arange(n_cycles)[:, None] * m + np.arange(n)[None, :]
    return s[idx]


def _stream_angle(theta, n_cycles, closed) -> np.ndarray:
    """Continuous crank angle of the joined stream [deg]."""
    th = np.asarray(theta, float)
    return _to_stream(th[None, :] + 720.0 * np.arange(n_cycles)[:, None], closed)


def _as_2d(x, shape, name) -> np.ndarray:
    a = np.asarray(x, dtype=float)
    if a.ndim == 1 and a.shape[0] == shape[0] and shape[0] != shape[1]:
        a = a[:, None]
    try:
        return np.broadcast_to(a, shape).astype(float)
    except ValueError:
        raise CyclesimError(f"{name}: shape {a.shape} does not fit the pressure array {shape}") from None


# --------------------------------------------------------------------------- filters
def _second_order_lowpass(x, fs, fn, zeta):
    """H(s) = wn^2 / (s^2 + 2 zeta wn s + wn^2), bilinear transform pre-warped at fn."""
    from scipy import signal

    if fn >= 0.5 * fs:
        raise CyclesimError(
            f"passage resonance {fn:g} Hz is above half the sample rate {fs:g} Hz: use a finer crank grid"
        )
    wn = 2 * np.pi * fn
    # pre-warp wn so that the digital filter's natural frequency is exactly fn
    wn_w = 2 * fs * np.tan(wn / (2 * fs))
    z, p, k = signal.bilinear_zpk([], np.roots([1, 2 * zeta * wn_w, wn_w * wn_w]), wn_w * wn_w, fs)
    sos = signal.zpk2sos(z, p, k)
    zi = signal.sosfilt_zi(sos) * x[0]
    y, _ = signal.sosfilt(sos, x, zi=zi)
    return y


def _first_order_lowpass(x, dt, tau):
    from scipy import signal

    a = np.exp(-dt / tau)
    b = [1 - a]
    den = [1, -a]
    zi = signal.lfilter_zi(b, den) * x[0]
    y, _ = signal.lfilter(b, den, x, zi=zi)
    return y


def _first_order_highpass(x, dt, tau):
    """y' = x' - y / tau, discretised y[k] = a (y[k-1] + x[k] - x[k-1]); y[0] = x[0].

    The amplifier is set to 'operate' at the first sample, so the output starts
    equal to the input and then loses its mean with time constant ``tau``.
    """
    from scipy import signal

    a = tau / (tau + dt)
    dx = np.diff(x, prepend=x[0])
    y, _ = signal.lfilter([a], [1, -a], dx, zi=np.array([a * x[0]]))
    return y


# --------------------------------------------------------------------------- the chain
def _time_and_angle_chain(sig, theta, closed, shape, dt, fs, s, rng, truth, T, wall_heat_rate):
    """Steps 2-6 on the cycles joined end to end; fills ``truth``; returns rows (n_cycles, n)."""
    nc = shape[0]
    stream = _to_stream(sig, closed)

    # 2. passage resonance -------------------------------------------------
    if s.passage_frequency_hz:
        stream = _second_order_lowpass(stream, fs, s.passage_frequency_hz, s.passage_damping)
    truth["passage_frequency_hz"] = float(s.passage_frequency_hz)
    truth["passage_damping"] = float(s.passage_damping) if s.passage_frequency_hz else 0.0

    # 3. thermal drift -----------------------------------------------------
    therm = np.zeros_like(stream)
    if wall_heat_rate is not None and s.thermal_drift_bar_per_kW:
        q = _to_stream(_as_2d(wall_heat_rate, shape, "wall_heat_rate"), closed)
        therm = -s.thermal_drift_bar_per_kW * BAR * q / 1000.0
    elif T is not None and s.thermal_drift_bar_per_K:
        Tq = _to_stream(_as_2d(T, shape, "T"), closed)
        therm = -s.thermal_drift_bar_per_K * BAR * (Tq - s.thermal_wall_temperature_K)
    if np.any(therm) and s.thermal_time_constant_s:
        therm = _first_order_lowpass(therm, dt, s.thermal_time_constant_s)
    stream = stream + therm
    th_rows = _from_stream(therm, shape, closed)
    truth["thermal_error_min_bar"] = th_rows.min(axis=1) / BAR
    truth["thermal_error_mean_bar"] = th_rows.mean(axis=1) / BAR

    # 4. gain ----------------------------------------------------------------
    stream = stream * (1.0 + s.gain_error)
    truth["gain_error"] = float(s.gain_error)

    # 5. charge-amplifier high-pass ---------------------------------------
    hp_err = np.zeros_like(stream)
    if s.highpass_tau_s:
        y = _first_order_highpass(stream, dt, s.highpass_tau_s)
        hp_err = y - stream
        stream = y
    hp_rows = _from_stream(hp_err, shape, closed)
    truth["highpass_tau_s"] = float(s.highpass_tau_s)
    truth["highpass_error_mean_bar"] = hp_rows.mean(axis=1) / BAR
    truth["highpass_error_start_bar"] = hp_rows[:, 0] / BAR

    # 6. angle labelling ---------------------------------------------------
    jit_rms = np.zeros(nc)
    if s.tdc_offset_deg or s.encoder_jitter_deg:
        from scipy.interpolate import CubicSpline

        alpha = _stream_angle(theta, nc, closed)
        err = np.full(alpha.shape, -float(s.tdc_offset_deg))
        if s.encoder_jitter_deg:
            jit = s.encoder_jitter_deg * rng.standard_normal(alpha.size)
            err = err + jit
            jit_rows = _from_stream(jit, shape, closed)
            jit_rms = np.sqrt(np.mean(jit_rows**2, axis=1))
        stream = CubicSpline(alpha, stream)(alpha + err)
    truth["tdc_offset_deg"] = float(s.tdc_offset_deg)
    truth["encoder_jitter_rms_deg"] = jit_rms

    meas = _from_stream(stream, shape, closed)
    return meas


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
    knock_intensity=None,
    intake_pressure_pa=None,
    wall_heat_rate=None,
):
    """Turn true cylinder pressure into a measured signal.

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
        proxy when ``wall_heat_rate`` is not given.
    gamma : float or array_like, optional
        Ratio of specific heats for the sound speed [-] (default 1.3).
    bore_m : float, optional
        Bore [m]; needed for knock ringing.
    knock_onset_deg, knock_intensity : array_like (n_cycles,), optional
        Knock onset angle [deg] (NaN = no knock) and intensity [-] per cycle.
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
    with A = ``knock_amplitude_bar_per_intensity * intensity`` times the mode's
    weight.
    """
    s = settings or ArtefactSettings.default()
    rng = rng or np.random.default_rng()
    P = np.asarray(P_true, dtype=float)
    single = P.ndim == 1
    if single:
        P = P[None, :]
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
    sig = P.copy()

    # 1. knock ringing ------------------------------------------------------
    onset = np.full(nc, np.nan) if knock_onset_deg is None else np.broadcast_to(
        np.asarray(knock_onset_deg, float), (nc,)).copy()
    inten = np.zeros(nc) if knock_intensity is None else np.broadcast_to(
        np.asarray(knock_intensity, float), (nc,)).copy()
    amp = s.knock_amplitude_bar_per_intensity * inten
    amp[~np.isfinite(onset)] = 0.0
    f_onset = np.full((nc, len(KNOCK_MODES)), np.nan)
    if s.knock_amplitude_bar_per_intensity and np.any(amp != 0):
        if T is None or bore_m is None:
            raise CyclesimError("knock ringing needs the gas temperature T and bore_m")
        T2 = _as_2d(T, shape, "T")
        g2 = _as_2d(1.3 if gamma is None else gamma, shape, "gamma")
        c = np.sqrt(g2 * s.knock_gas_constant_J_per_kgK * T2)
        f = acoustic_mode_frequencies(c, bore_m)  # (nc, n, modes)
        w = np.asarray(s.knock_mode_weights, float)
        if w.size != len(KNOCK_MODES):
            raise CyclesimError(f"knock_mode_weights: need {len(KNOCK_MODES)} values, got {w.size}")
        for k in np.flatnonzero(amp):
            on = theta >= onset[k]
            if not on.any():
                continue
            i0 = int(np.argmax(on))
            # phase: trapezoidal integral of f dt from the onset sample
            fk = f[k, i0:, :]
            ph = np.zeros_like(fk)
            ph[1:] = np.cumsum(0.5 * (fk[1:] + fk[:-1]) * dt, axis=0)
            tau = t_row[i0:] - t_row[i0]
            env = amp[k] * BAR * np.exp(-tau / s.knock_decay_s)
            sig[k, i0:] += env * (w[None, :] * np.sin(2 * np.pi * ph)).sum(axis=1)
            f_onset[k] = f[k, i0, :]
    truth["knock_onset_deg"] = onset
    truth["knock_amplitude_bar"] = amp
    truth["knock_mode_frequency_at_onset_hz"] = f_onset
    truth["knock_modes"] = [list(m) for m in KNOCK_MODES]

    thermal_on = bool((wall_heat_rate is not None and s.thermal_drift_bar_per_kW)
                      or (T is not None and s.thermal_drift_bar_per_K))
    timed = bool(s.passage_frequency_hz or thermal_on or s.highpass_tau_s
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
        meas = _time_and_angle_chain(sig, theta, closed, shape, dt, fs, s, rng, truth, T, wall_heat_rate)

    # 7. offset -----------------------------------------------------------
    off = s.offset_mean_bar + s.offset_sd_bar * rng.standard_normal(nc) if s.offset_sd_bar else \
        np.full(nc, float(s.offset_mean_bar))
    off = off + s.offset_drift_bar_per_cycle * np.arange(nc)
    meas = meas + off[:, None] * BAR
    truth["offset_bar"] = off

    # 8. noise, clipping, ADC ---------------------------------------------
    noise_rms = np.zeros(nc)
    if s.noise_bar:
        nz = s.noise_bar * BAR * rng.standard_normal(shape)
        meas = meas + nz
        noise_rms = np.sqrt(np.mean(nz**2, axis=1)) / BAR
    truth["noise_rms_bar"] = noise_rms
    lo = -np.inf if s.clip_min_bar is None else s.clip_min_bar * BAR
    hi = np.inf if s.clip_max_bar is None else s.clip_max_bar * BAR
    clipped = (meas < lo) | (meas > hi)
    meas = np.clip(meas, lo, hi)
    truth["clipped_samples"] = clipped.sum(axis=1)
    if s.adc_bits:
        a_lo, a_hi = s.adc_min_bar * BAR, s.adc_max_bar * BAR
        lsb = (a_hi - a_lo) / (2 ** int(s.adc_bits) - 1)
        code = np.clip(np.round((meas - a_lo) / lsb), 0, 2 ** int(s.adc_bits) - 1)
        meas = a_lo + code * lsb
        truth["adc_lsb_bar"] = lsb / BAR
    else:
        truth["adc_lsb_bar"] = 0.0

    # intake channel --------------------------------------------------------
    p_int = None
    if intake_pressure_pa is not None:
        p_int = _as_2d(intake_pressure_pa, shape, "intake_pressure_pa").copy()
        if s.intake_noise_bar:
            p_int = p_int + s.intake_noise_bar * BAR * rng.standard_normal(shape)
    truth["intake_noise_bar"] = float(s.intake_noise_bar)
    if single:
        meas = meas[0]
        p_int = None if p_int is None else p_int[0]
    return meas, p_int, truth


# --------------------------------------------------------------------------- decimation
def decimate_to(theta_fine, P, step_deg: float | None = None, sample_rate_hz: float | None = None,
                speed_rpm: float | None = None):
    """Low-pass and decimate traces from a fine crank grid to a coarser one.

    Parameters
    ----------
    theta_fine : array_like (n,)
        Uniform fine crank grid, one cycle [deg].
    P : array_like (n_cycles, n) or (n,)
        Signal on the fine grid (any unit); rows are consecutive cycles.
    step_deg : float, optional
        Output crank step [deg]; must be an integer multiple of the fine step.
    sample_rate_hz : float, optional
        Output sample rate [Hz] instead of ``step_deg`` (needs ``speed_rpm``):
        step = 6 N / sample_rate.
    speed_rpm : float, optional
        Engine speed [rpm].

    Returns
    -------
    theta_out : ndarray (n_out,)
    P_out : ndarray (n_cycles, n_out) or (n_out,)

    Notes
    -----
    Anti-alias filter: a linear-phase Kaiser-window FIR designed with
    ``scipy.signal.kaiserord`` for 80 dB attenuation, passband edge at 0.8 and
    stopband edge at 1.0 of the output Nyquist frequency (cut-off 0.9), run
    forwards and backwards (``filtfilt``: zero phase, attenuation squared) over
    the cycles joined end to end.  Content above the output Nyquist frequency is
    attenuated by at least 160 dB; content below 0.8 of it passes unchanged to
    within the design ripple.
    """
    from scipy import signal

    th = np.asarray(theta_fine, float)
    fine, closed = _grid(th)
    if (step_deg is None) == (sample_rate_hz is None):
        raise CyclesimError("decimate_to: give exactly one of step_deg and sample_rate_hz")
    if step_deg is None:
        if not speed_rpm:
            raise CyclesimError("decimate_to: sample_rate_hz needs speed_rpm")
        step_deg = 6.0 * float(speed_rpm) / float(sample_rate_hz)
    q = step_deg / fine
    qi = int(round(q))
    if qi < 1 or abs(q - qi) > 1e-6 * q:
        raise CyclesimError(
            f"decimate_to: output step {step_deg:g} deg is not an integer multiple of the fine step {fine:g} deg"
        )
    X = np.asarray(P, float)
    single = X.ndim == 1
    if single:
        X = X[None, :]
    m = th.size - 1 if closed else th.size
    if m % qi:
        raise CyclesimError(f"decimate_to: {m} samples per cycle are not divisible by the factor {qi}")
    if qi == 1:
        return th.copy(), (X[0].copy() if single else X.copy())
    numtaps, beta = signal.kaiserord(80.0, 0.2 / qi)
    numtaps |= 1
    h = signal.firwin(numtaps, 0.9 / qi, window=("kaiser", beta))
    s = _to_stream(X, closed)
    padlen = min(3 * numtaps, s.size - 1)
    y = signal.filtfilt(h, [1.0], s, padtype="odd", padlen=padlen)
    y = y[::qi]
    th_out = th[::qi]
    out = _from_stream(y, (X.shape[0], th_out.size), closed)
    return th_out, (out[0] if single else out)
