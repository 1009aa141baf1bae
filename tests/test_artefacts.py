"""Measurement artefacts of the indicating chain, acoustic modes and decimation."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import jnp_zeros

from cyclesim.errors import CyclesimError
from cyclesim.traces.artefacts import (
    KNOCK_MODES,
    ArtefactSettings,
    acoustic_mode_frequencies,
    apply_artefacts,
    bessel_derivative_root,
    decimate_to,
)

N = 3000.0
TH = np.arange(-360.0, 360.0 + 1e-9, 0.1)          # 0.1 deg: 180 kHz at 3000 rpm
FS = 6 * N / 0.1
NONE = ArtefactSettings.none()


def smooth_cycles(n_cycles=3):
    """A smooth, periodic stand-in for cylinder pressure [Pa] (exact values known at any angle)."""
    th = np.deg2rad(TH)
    one = 1e5 * (20 + 15 * np.cos(th / 2) + 4 * np.sin(th) + 2 * np.cos(3 * th / 2))
    return np.tile(one, (n_cycles, 1)), one


def exact(theta_deg):
    th = np.deg2rad(theta_deg)
    return 1e5 * (20 + 15 * np.cos(th / 2) + 4 * np.sin(th) + 2 * np.cos(3 * th / 2))


# ---------------------------------------------------------------------- acoustic modes
def test_bessel_derivative_roots_match_published_values():
    # Draper 1938, J. Aeronaut. Sci. 5; values 1.8412, 3.0542, 3.8317, 4.2012, 5.3314 are the
    # zeros of J'_m (Abramowitz & Stegun 1964, table 9.5, from memory); 4-digit table precision.
    published = {(1, 0): 1.8412, (2, 0): 3.0542, (0, 1): 3.8317, (3, 0): 4.2012, (1, 1): 5.3314}
    for mode, rho in published.items():
        assert bessel_derivative_root(*mode) == pytest.approx(rho, abs=1e-4)


def test_mode_frequencies_follow_draper_relation():
    # f_mn = c rho_mn / (pi B) (Draper 1938); rho from scipy.special.jnp_zeros; c = sqrt(gamma R T)
    bore, gamma, R, T = 0.086, 1.28, 290.0, 2400.0
    c = np.sqrt(gamma * R * T)
    rho = {(1, 0): jnp_zeros(1, 1)[0], (2, 0): jnp_zeros(2, 1)[0], (0, 1): jnp_zeros(0, 1)[0],
           (3, 0): jnp_zeros(3, 1)[0], (1, 1): jnp_zeros(1, 2)[1]}
    f = acoustic_mode_frequencies(c, bore, KNOCK_MODES)
    for i, mode in enumerate(KNOCK_MODES):
        assert f[i] == pytest.approx(c * rho[mode] / (np.pi * bore), rel=1e-12)
    # order of magnitude of the first mode for an 86 mm bore at burned-gas temperature:
    # about 6-7 kHz (common practice)
    assert 5000 < f[0] < 8000


def test_knock_ringing_rings_at_the_first_mode_with_the_given_amplitude():
    P, _ = smooth_cycles(1)
    T = np.full(P.shape, 2500.0)
    gamma, R, bore = 1.25, 290.0, 0.079
    s = NONE.replace(knock_amplitude_bar_per_unburned=2.0, knock_amplitude_log_sd=0.0, knock_decay_s=1.0e-3,
                     knock_mode_weights=(1.0, 0.0, 0.0, 0.0, 0.0), knock_gas_constant_J_per_kgK=R)
    meas, _, truth = apply_artefacts(P, TH, N, s, np.random.default_rng(0), T=T, gamma=gamma, bore_m=bore,
                                     knock_onset_deg=[10.0], knock_unburned_fraction=[1.5])
    ring = (meas - P)[0] / 1e5
    f10 = np.sqrt(gamma * R * T[0, 0]) * jnp_zeros(1, 1)[0] / (np.pi * bore)   # Draper 1938
    assert truth["knock_mode_frequency_at_onset_hz"][0, 0] == pytest.approx(f10, rel=1e-9)
    assert truth["knock_amplitude_bar"][0] == pytest.approx(3.0)
    assert np.all(ring[TH < 10.0] == 0.0)
    # frequency from the zero crossings of the first 2 ms (sampling at 180 kHz: about 0.3 % per period)
    t = (TH - TH[0]) / (6 * N)
    w = (TH >= 10.0) & (t <= t[TH >= 10.0][0] + 2e-3)
    zc = np.flatnonzero(np.diff(np.signbit(ring[w])))
    f_meas = (zc.size - 1) / 2 / (t[w][zc[-1]] - t[w][zc[0]])
    assert f_meas == pytest.approx(f10, rel=0.01)
    # envelope: first peak within the first quarter period, A exp(-t/tau) (decay over 1/4 period ~ 4 %)
    assert np.max(np.abs(ring[w][:40])) == pytest.approx(3.0, rel=0.05)


def test_knock_ringing_frequency_follows_gas_temperature():
    P, _ = smooth_cycles(1)
    T = np.where(TH < 0, 2600.0, 2600.0 - 6.0 * TH)[None, :]     # cooling through the expansion
    s = NONE.replace(knock_amplitude_bar_per_unburned=1.0, knock_decay_s=1.0,
                     knock_mode_weights=(1.0, 0.0, 0.0, 0.0, 0.0))
    meas, _, _ = apply_artefacts(P, TH, N, s, np.random.default_rng(0), T=T, gamma=1.3, bore_m=0.08,
                                 knock_onset_deg=[5.0], knock_unburned_fraction=[1.0])
    ring = (meas - P)[0]
    t = (TH - TH[0]) / (6 * N)

    def freq(a, b):
        w = (TH >= a) & (TH <= b)
        zc = np.flatnonzero(np.diff(np.signbit(ring[w])))
        return (zc.size - 1) / 2 / (t[w][zc[-1]] - t[w][zc[0]])

    # c ~ sqrt(T) (ideal gas): the frequency ratio of two windows equals sqrt of the mean-T ratio
    f1, f2 = freq(10, 30), freq(100, 120)
    ratio = np.sqrt(np.mean(T[0, (TH >= 100) & (TH <= 120)]) / np.mean(T[0, (TH >= 10) & (TH <= 30)]))
    assert f2 / f1 == pytest.approx(ratio, rel=0.01)


# ---------------------------------------------------------------------- decimation
def test_decimation_suppresses_a_tone_above_the_output_nyquist_frequency():
    # Shannon/Nyquist: on a 1 deg grid a tone at 0.7 cycles/deg would alias to 0.3 cycles/deg
    # (common practice); the anti-alias filter must remove it, and keep a tone at 0.2 cycles/deg.
    nc = 4
    alpha = TH[None, :] + 720.0 * np.arange(nc)[:, None]
    high = np.sin(2 * np.pi * 0.7 * alpha)
    low = np.sin(2 * np.pi * 0.2 * alpha + 0.3)
    th_out, y = decimate_to(TH, high + low, step_deg=1.0)
    assert th_out.size == 721 and y.shape == (nc, 721)
    a_out = th_out[None, :] + 720.0 * np.arange(nc)[:, None]
    want = np.sin(2 * np.pi * 0.2 * a_out + 0.3)
    inner = (a_out > -300) & (a_out < 720 * (nc - 1) + 300)     # 60 deg away from the record's ends
    assert np.max(np.abs(y - want)[inner]) < 1e-3


def test_decimation_by_sample_rate_and_bad_factor():
    P, _ = smooth_cycles(2)
    th_out, y = decimate_to(TH, P, sample_rate_hz=36000.0, speed_rpm=N)     # 6 N / fs = 0.5 deg
    assert np.allclose(np.diff(th_out), 0.5)
    assert np.allclose(y, exact(th_out)[None, :], rtol=1e-5)     # passband ripple of an 80 dB Kaiser design
    with pytest.raises(CyclesimError):
        decimate_to(TH, P, step_deg=0.25)


# ---------------------------------------------------------------------- one artefact at a time
def test_no_artefacts_is_identity():
    P, _ = smooth_cycles()
    meas, pint, truth = apply_artefacts(P, TH, N, NONE, np.random.default_rng(1), intake_pressure_pa=0.98e5)
    assert np.array_equal(meas, P)
    assert np.all(pint == 0.98e5)
    assert np.all(truth["offset_bar"] == 0)


def test_offset_and_drift_equal_recorded_truth():
    P, _ = smooth_cycles(5)
    s = NONE.replace(offset_mean_bar=-0.8, offset_sd_bar=0.1, offset_drift_bar_per_cycle=0.01)
    meas, _, truth = apply_artefacts(P, TH, N, s, np.random.default_rng(2))
    d = (meas - P) / 1e5
    assert np.allclose(d, truth["offset_bar"][:, None], rtol=0, atol=1e-12)     # float precision
    assert np.ptp(truth["offset_bar"]) > 0


def test_gain_equals_recorded_truth():
    P, _ = smooth_cycles()
    meas, _, truth = apply_artefacts(P, TH, N, NONE.replace(gain_error=0.01), np.random.default_rng(3))
    assert truth["gain_error"] == 0.01
    assert np.allclose(meas / P, 1.01, rtol=1e-14)


def test_tdc_offset_shifts_the_angle_axis():
    # the sample labelled theta was taken at true theta - delta
    P, _ = smooth_cycles()
    meas, _, truth = apply_artefacts(P, TH, N, NONE.replace(tdc_offset_deg=0.3), np.random.default_rng(4))
    assert truth["tdc_offset_deg"] == 0.3
    assert np.allclose(meas, exact(TH - 0.3)[None, :], rtol=1e-9, atol=0)


def test_encoder_jitter_recorded_rms():
    P, _ = smooth_cycles()
    meas, _, truth = apply_artefacts(P, TH, N, NONE.replace(encoder_jitter_deg=0.05), np.random.default_rng(5))
    # sample standard deviation of 7201 normal draws: relative error ~ 1/sqrt(2n) = 0.8 %
    assert np.allclose(truth["encoder_jitter_rms_deg"], 0.05, rtol=0.05)
    assert not np.allclose(meas, P)


def test_noise_clipping_and_adc():
    P, _ = smooth_cycles()
    meas, _, truth = apply_artefacts(P, TH, N, NONE.replace(noise_bar=0.02), np.random.default_rng(6))
    assert np.allclose(truth["noise_rms_bar"], np.sqrt(np.mean(((meas - P) / 1e5) ** 2, axis=1)))
    assert np.allclose(truth["noise_rms_bar"], 0.02, rtol=0.05)
    meas, _, truth = apply_artefacts(P, TH, N, NONE.replace(clip_max_bar=30.0), np.random.default_rng(6))
    assert meas.max() == 30e5 and np.all(truth["clipped_samples"] == np.sum(P > 30e5, axis=1))
    s = NONE.replace(adc_bits=12, adc_min_bar=-10.0, adc_max_bar=100.0)
    meas, _, truth = apply_artefacts(P, TH, N, s, np.random.default_rng(6))
    lsb = 110.0 / (2**12 - 1)                    # uniform quantiser over the range (common practice)
    assert truth["adc_lsb_bar"] == pytest.approx(lsb)
    codes = (meas / 1e5 + 10.0) / lsb
    assert np.allclose(codes, np.round(codes), atol=1e-6)
    assert np.max(np.abs(meas - P)) <= 0.5 * lsb * 1e5 * (1 + 1e-9)


def test_highpass_decays_a_constant_with_the_time_constant():
    # first-order high-pass of a step: y = x0 exp(-t / tau) (any control-systems text, e.g. Ogata)
    P = np.full((3, TH.size), 10e5)
    tau = 0.05
    meas, _, truth = apply_artefacts(P, TH, N, NONE.replace(highpass_tau_s=tau), np.random.default_rng(7))
    t = (TH[None, :] - TH[0] + 720.0 * np.arange(3)[:, None]) / (6 * N)
    # discretisation error of the exponential for dt / tau = 1.1e-4: ~ dt/(2 tau) t/tau relative
    assert np.allclose(meas, 10e5 * np.exp(-t / tau), rtol=2e-4)
    assert np.allclose(truth["highpass_error_mean_bar"], np.mean(meas - P, axis=1) / 1e5)


def test_passage_resonance_peak_gain():
    # second-order system driven at its natural frequency: |H| = 1 / (2 zeta) (Ogata, Modern
    # Control Engineering, ch. 8; from memory); bilinear transform pre-warped at fn keeps it exact
    fn, zeta = 8000.0, 0.1
    t = (TH - TH[0]) / (6 * N)
    nc = 6
    tt = t[None, :] + 720.0 / (6 * N) * np.arange(nc)[:, None]
    P = 1e5 * (10 + 0.1 * np.sin(2 * np.pi * fn * tt))
    meas, _, truth = apply_artefacts(P, TH, N, NONE.replace(passage_frequency_hz=fn, passage_damping=zeta),
                                     np.random.default_rng(8))
    assert truth["passage_frequency_hz"] == fn
    last = meas[-1] / 1e5 - 10.0                   # settled after 5 cycles (decay time 1/(zeta wn) = 0.2 ms)
    assert 0.5 * np.ptp(last) / 0.1 == pytest.approx(1 / (2 * zeta), rel=0.01)
    with pytest.raises(CyclesimError):
        apply_artefacts(P, TH, N, NONE.replace(passage_frequency_hz=95000.0), np.random.default_rng(8))


def test_thermal_drift_settles_to_the_heat_flux_times_sensitivity():
    # first-order response to a step in heat flow: error -> -k q after a few time constants
    P, _ = smooth_cycles(2)
    q = np.where(TH >= 0, 50e3, 0.0)[None, :].repeat(2, 0)          # 50 kW from TDC on
    s = NONE.replace(thermal_drift_bar_per_kW=0.004, thermal_time_constant_s=0.5e-3)
    meas, _, truth = apply_artefacts(P, TH, N, s, np.random.default_rng(9), wall_heat_rate=q)
    err = (meas - P) / 1e5
    late = (TH > 200) & (TH < 300)                 # > 20 time constants after the step
    assert np.allclose(err[0, late], -0.2, rtol=1e-6)
    assert truth["thermal_error_min_bar"][0] == pytest.approx(-0.2, rel=1e-6)
    assert np.all(err[0, TH < 0] == 0.0)
    # with only the gas temperature: proportional to T - T_wall
    s = NONE.replace(thermal_drift_bar_per_K=1e-4, thermal_wall_temperature_K=450.0, thermal_time_constant_s=0.0)
    meas, _, _ = apply_artefacts(P, TH, N, s, np.random.default_rng(9), T=np.full(P.shape, 1450.0))
    assert np.allclose((meas - P) / 1e5, -0.1, rtol=1e-9)


def test_intake_channel_noise_and_default_set_runs():
    P, _ = smooth_cycles(4)
    T = np.full(P.shape, 1500.0)
    meas, pint, truth = apply_artefacts(P, TH, N, ArtefactSettings.default(), np.random.default_rng(10),
                                        T=T, bore_m=0.08, knock_onset_deg=[np.nan, 12, np.nan, 15],
                                        knock_unburned_fraction=[0, 0.3, 0, 0.4], intake_pressure_pa=[0.98e5] * 4)
    assert meas.shape == P.shape and pint.shape == P.shape
    assert np.std(pint - 0.98e5) / 1e5 == pytest.approx(0.003, rel=0.05)
    assert np.isnan(truth["knock_mode_frequency_at_onset_hz"][0]).all()
    assert np.isfinite(truth["knock_mode_frequency_at_onset_hz"][1]).all()


def test_bad_grid_and_shapes_raise():
    P, _ = smooth_cycles()
    with pytest.raises(CyclesimError):
        apply_artefacts(P[:, :-10], TH[:-10], N, NONE)
    with pytest.raises(CyclesimError):
        apply_artefacts(P, TH, N, NONE.replace(knock_amplitude_bar_per_unburned=1.0),
                        knock_onset_deg=[1, 2, 3], knock_unburned_fraction=[1, 1, 1])      # no T, no bore


# ---------------------------------------------------------------------- fast paths against the direct computation
@pytest.fixture
def small_blocks(monkeypatch):
    """One cycle per block, so every block boundary of the stream is exercised."""
    from cyclesim.traces import signal_stream

    monkeypatch.setattr(signal_stream, "_BLOCK_SAMPLES", 1)


def joined(P):
    """Cycles end to end; a row's last sample (360 deg) is the next row's first."""
    return np.concatenate([P[:, :-1].ravel(), P[-1, -1:]])


def rows_of(stream, n):
    m = n - 1
    return stream[np.arange((stream.size - 1) // m)[:, None] * m + np.arange(n)[None, :]]


@pytest.mark.parametrize("step_deg, closed", [(0.2, True), (0.5, True), (1.0, False), (0.4, True)])
def test_decimation_equals_filtfilt(step_deg, closed, small_blocks):
    # reference: scipy.signal.filtfilt of the Kaiser FIR over the joined cycles, odd padding of
    # 3 filter lengths, then every q-th sample (the filter design stated in decimate_to)
    from scipy import signal

    rng = np.random.default_rng(21)
    th = TH if closed else TH[:-1]
    X = 1e5 * (30 + np.cumsum(rng.standard_normal((5, th.size)), axis=1) / 50)
    th_out, y = decimate_to(th, X, step_deg=step_deg)
    q = int(round(step_deg / 0.1))
    numtaps, beta = signal.kaiserord(80.0, 0.2 / q)
    h = signal.firwin(numtaps | 1, 0.9 / q, window=("kaiser", beta))
    s = joined(X) if closed else X.ravel()
    ref = signal.filtfilt(h, [1.0], s, padtype="odd", padlen=3 * h.size)[::q]
    ref = rows_of(ref, th_out.size) if closed else ref.reshape(5, -1)
    assert np.array_equal(th_out, th[::q])
    assert np.max(np.abs(y - ref)) <= 1e-9 * np.max(np.abs(ref))     # rounding only


def test_decimation_of_a_record_shorter_than_the_filter():
    # 10 deg grid, factor 2: 73 samples against a 103-tap filter; reference scipy.signal.filtfilt
    # with the padding cut to the record length
    from scipy import signal

    th = np.linspace(-360.0, 360.0, 73)
    x = np.sin(np.deg2rad(th)) + 0.1 * np.random.default_rng(2).standard_normal(th.size)
    _, y = decimate_to(th, x, step_deg=20.0)
    numtaps, beta = signal.kaiserord(80.0, 0.1)
    h = signal.firwin(numtaps | 1, 0.45, window=("kaiser", beta))
    assert h.size > th.size
    ref = signal.filtfilt(h, [1.0], x, padtype="odd", padlen=th.size - 1)[::2]
    assert np.max(np.abs(y - ref)) <= 1e-9 * np.max(np.abs(ref))


def test_stream_resampling_equals_the_not_a_knot_cubic_spline(small_blocks):
    # reference: scipy.interpolate.CubicSpline (not-a-knot ends, extrapolating the end pieces)
    # through the whole joined record, evaluated at the shifted positions.  The fast path uses
    # two first-order recursions and local end splines: equal to rounding, on rough data too.
    from scipy.interpolate import CubicSpline

    from cyclesim.traces.signal_stream import _resample_stream

    rng = np.random.default_rng(5)
    nc, m = 4, 300
    for src in (np.cumsum(rng.standard_normal(nc * m + 1)), exact(np.linspace(-360, 360 * 7, nc * m + 1))):
        shift = -6.3 + 0.7 * rng.standard_normal(src.size)
        shift[-3:] = 4.2                                            # beyond the last sample
        out = np.empty((nc, m + 1))
        _resample_stream(src, lambda k0, k1, a, b: shift[a:b], out, m, True)
        j = np.arange(src.size, dtype=float)
        ref = CubicSpline(j, src)(j + shift)
        assert np.max(np.abs(joined(out) - ref)) <= 1e-11 * np.max(np.abs(src))


def test_chain_equals_a_direct_computation_over_the_joined_cycles(small_blocks):
    """Steps 2-8 written straight from their definitions over the whole joined record.

    The reference runs each filter once over the joined stream (scipy.signal sosfilt and
    lfilter, bilinear transform pre-warped at fn), scipy.interpolate.CubicSpline through the
    whole record for the angle labelling, and draws the random numbers in the documented
    order (jitter, offsets, noise).  The block-wise chain must give the same signal and truth.
    """
    from scipy import signal
    from scipy.interpolate import CubicSpline

    nc = 4
    P, _ = smooth_cycles(nc)
    P = P * (1 + 0.02 * np.random.default_rng(3).standard_normal((nc, 1)))
    q = np.where((TH > -20) & (TH < 90), 40e3, 2e3)[None, :] * np.linspace(1, 1.3, nc)[:, None]
    s = ArtefactSettings.default().replace(passage_frequency_hz=25e3, adc_bits=0, clip_min_bar=None,
                                           clip_max_bar=None, highpass_tau_s=0.02, encoder_jitter_deg=0.03)
    meas, _, truth = apply_artefacts(P, TH, N, s, np.random.default_rng(17), wall_heat_rate=q)

    rng = np.random.default_rng(17)
    dt = 1 / FS
    x = joined(P)
    wn_w = 2 * FS * np.tan(np.pi * s.passage_frequency_hz / FS)
    zeta = s.passage_damping
    sos = signal.zpk2sos(*signal.bilinear_zpk([], np.roots([1, 2 * zeta * wn_w, wn_w**2]), wn_w**2, FS))
    x = signal.sosfilt(sos, x, zi=signal.sosfilt_zi(sos) * x[0])[0]
    therm = -s.thermal_drift_bar_per_kW * 1e5 * joined(q) / 1000.0
    a = np.exp(-dt / s.thermal_time_constant_s)
    therm = signal.lfilter([1 - a], [1, -a], therm, zi=[a * therm[0]])[0]
    x = (x + therm) * (1 + s.gain_error)
    a = s.highpass_tau_s / (s.highpass_tau_s + dt)
    y = signal.lfilter([a], [1, -a], np.diff(x, prepend=x[0]), zi=[a * x[0]])[0]
    hp_err, x = y - x, y
    alpha = joined(TH[None, :] + 720.0 * np.arange(nc)[:, None])
    jit = s.encoder_jitter_deg * rng.standard_normal(alpha.size)
    x = CubicSpline(alpha, x)(alpha - s.tdc_offset_deg + jit)
    off = s.offset_mean_bar + s.offset_sd_bar * rng.standard_normal(nc) + s.offset_drift_bar_per_cycle * np.arange(nc)
    nz = s.noise_bar * 1e5 * rng.standard_normal((nc, TH.size))
    ref = rows_of(x, TH.size) + off[:, None] * 1e5 + nz

    assert np.max(np.abs(meas - ref)) <= 1e-9 * np.max(np.abs(ref))
    th_rows, hp_rows, jit_rows = rows_of(therm, TH.size), rows_of(hp_err, TH.size), rows_of(jit, TH.size)
    assert np.allclose(truth["thermal_error_min_bar"], th_rows.min(axis=1) / 1e5, rtol=1e-12, atol=0)
    assert np.allclose(truth["thermal_error_mean_bar"], th_rows.mean(axis=1) / 1e5, rtol=1e-12, atol=0)
    assert np.allclose(truth["highpass_error_mean_bar"], hp_rows.mean(axis=1) / 1e5, rtol=1e-12, atol=0)
    assert np.allclose(truth["highpass_error_start_bar"], hp_rows[:, 0] / 1e5, rtol=1e-12, atol=0)
    assert np.allclose(truth["encoder_jitter_rms_deg"], np.sqrt(np.mean(jit_rows**2, axis=1)), rtol=1e-12, atol=0)
    assert np.allclose(truth["offset_bar"], off, rtol=1e-15, atol=0)
    assert np.allclose(truth["noise_rms_bar"], np.sqrt(np.mean(nz**2, axis=1)) / 1e5, rtol=1e-12, atol=0)
