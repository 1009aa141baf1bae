"""Synthetic trace sets: what the measured files carry, and that the truth states the signal's real errors.

A measured file carries what a real recording would (engine, speed, grid, units, channels); the
generator's settings and seed go to the truth only.  The ADC's part of the chain (offset, noise,
clipping, quantisation) acts at the output rate; the truth records the signal's total
deterministic error at the pegging angles, the thermal drift follows the wall heat flow, and knock
ringing has a per-cycle log-normal amplitude.
"""

from __future__ import annotations

import importlib.util
import json

import numpy as np
import pytest

from cyclesim.cli import main
from cyclesim.config import load_config
from cyclesim.traces import artefacts as art
from cyclesim.traces.export import read_trace
from cyclesim.traces.synthesis import CycleVariation, synthesize

FAST = ["simulation.step_deg=1.0", "simulation.max_cycles=6"]
D = art.ArtefactSettings.default()
HAS_MDF = importlib.util.find_spec("asammdf") is not None


@pytest.fixture(scope="module")
def base():
    return load_config("demo", FAST)


# ---------------------------------------------------------------------- 1. no truth in the measured files
def _keys(x):
    """Every key of a nested JSON document."""
    if isinstance(x, dict):
        for k, v in x.items():
            yield k
            yield from _keys(v)
    elif isinstance(x, list):
        for v in x:
            yield from _keys(v)


def test_measured_files_carry_no_artefact_setting_and_no_seed(tmp_path, capsys):
    out = tmp_path / "t"
    formats = "csv_long,csv_wide,npz" + (",mf4" if HAS_MDF else "")
    assert main(["traces", "demo", "--cycles", "2", "--resolution", "1", "--seed", "17", "--formats", formats,
                 "--no-plots", "--out", str(out), "--set", "simulation.step_deg=1.0"]) == 0
    secret = set(art.ArtefactSettings.field_names()) | {"seed", "variation", "artefacts", "synthesis_step_deg",
                                                        "coupled_chain"}
    measured = [p for p in out.iterdir() if p.name.startswith("trace.")]
    assert len(measured) == len(formats.split(","))
    for p in measured:
        meta = read_trace(p).meta
        leaked = secret & set(_keys(meta))
        assert not leaked, (p.name, leaked)
        # what a recording does carry: identity, speed, grid, the intake channel, the test bed's air and fuel
        for k in ("operating_point", "speed_rpm", "resolution_deg", "bore_m", "intake_channel",
                  "air_mass_per_cycle_mg", "fuel_mass_per_cycle_mg"):
            assert k in meta, (p.name, k)
    for p in out.glob("trace.*.csv"):
        head = "".join(ln for ln in p.read_text().splitlines(True) if ln.startswith("#"))
        assert not any(f'"{k}"' in head for k in secret), p.name
    # the truth has them all
    doc = json.loads((out / "truth.json").read_text())
    assert doc["settings"]["seed"] == 17 and doc["settings"]["variation"]["seed"] == 17
    assert doc["settings"]["artefacts"]["tdc_offset_deg"] == D.tdc_offset_deg
    assert doc["settings"]["artefacts"]["noise_bar"] == D.noise_bar
    # the analyser needs none of it: it runs on the stripped file with the test bed's air and fuel
    capsys.readouterr()
    assert main(["analyse", str(out / "trace.npz"), "--engine", "demo", "--out", str(tmp_path / "a"),
                 "--thermal-tau", "0.002"]) == 0
    assert "measured air and fuel" in capsys.readouterr().out


# ---------------------------------------------------------------------- 2. noise and ADC at the output rate
@pytest.fixture(scope="module")
def noisy_and_clean(base):
    """The same set (same seed: same draws up to the noise) with and without noise and quantisation."""
    v = CycleVariation(seed=3)
    a = synthesize(base, 6, v, resolution_deg=0.5, artefacts=D)
    b = synthesize(base, 6, v, resolution_deg=0.5, artefacts=D.replace(noise_bar=0.0, adc_bits=0))
    return a, b


def test_delivered_noise_has_the_set_rms(noisy_and_clean):
    a, b = noisy_and_clean
    d = (a.pressure_pa - b.pressure_pa) / 1e5
    rms = float(np.sqrt(np.mean(d**2)))
    # white noise of sd 0.02 bar plus the quantisation error (LSB / sqrt(12) = 0.0011 bar, uniform
    # quantiser, common practice): 0.02003 bar; 8646 samples give the RMS to about 0.8 % (1 / sqrt(2 n))
    print(f"delivered noise RMS {rms:.5f} bar at 0.5 deg (set {D.noise_bar} bar)")
    assert rms == pytest.approx(D.noise_bar, rel=0.03)
    rec = np.array([r["artefact.noise_rms_bar"] for r in a.truth])
    assert np.sqrt(np.mean(rec**2)) == pytest.approx(rms, rel=0.01)
    # the intake channel's noise too (its set point is constant)
    pi = (a.intake_pa - a.meta["intake_pressure_pa"]) / 1e5
    assert np.std(pi) == pytest.approx(D.intake_noise_bar, rel=0.03)


def test_delivered_levels_sit_on_the_adc_grid(noisy_and_clean):
    a, _ = noisy_and_clean
    lsb = a.stats["artefact.adc_lsb_bar"]
    # uniform quantiser over adc_min..adc_max with 2^bits - 1 steps (common practice)
    assert lsb == pytest.approx((D.adc_max_bar - D.adc_min_bar) / (2**D.adc_bits - 1), rel=1e-12)
    codes = (a.pressure_pa / 1e5 - D.adc_min_bar) / lsb
    assert np.max(np.abs(codes - np.round(codes))) < 1e-6
    assert np.unique(np.round(codes)).size > 1000


# ---------------------------------------------------------------------- 3. the signal's total offset at the pegging angles
def test_recorded_signal_offset_is_measured_minus_true(base):
    # noise-free (no noise, no quantisation): measured - true at -180 deg (intake BDC, the usual
    # pegging point) and at IVC equals the recorded total; a short high-pass time constant makes the
    # charge amplifier's share visible within 6 cycles, so the total is not the offset alone
    s = D.replace(noise_bar=0.0, adc_bits=0, highpass_tau_s=0.2)
    ss = synthesize(base, 6, CycleVariation(seed=5), resolution_deg=0.5, artefacts=s)
    th = ss.theta
    diff = (ss.pressure_pa - ss.pressure_true_pa) / 1e5
    bdc = np.array([r["artefact.true_signal_offset_at_bdc_bar"] for r in ss.truth])
    ivc = np.array([r["artefact.true_signal_offset_at_ivc_bar"] for r in ss.truth])
    i = int(np.flatnonzero(np.isclose(th, -180.0))[0])
    assert np.allclose(bdc, diff[:, i], rtol=0, atol=1e-9)
    ivc_deg = base.valves.ivc_deg
    assert ss.settings["signal_offset_angles_deg"] == {"bdc": -180.0, "ivc": ivc_deg}
    assert np.allclose(ivc, [np.interp(ivc_deg, th, d) for d in diff], rtol=0, atol=1e-9)
    off = np.array([r["artefact.offset_bar"] for r in ss.truth])
    print(f"last cycle: offset {off[-1]:+.3f} bar, total at BDC {bdc[-1]:+.3f} bar")
    assert abs(bdc[-1] - off[-1]) > 0.1


# ---------------------------------------------------------------------- 4. thermal drift follows the wall heat flow
def test_thermal_drift_uses_the_wall_heat_flow_of_each_cycle(base):
    # only the drift, with no lag: error = -k Qdot; its cycle mean times the cycle time is -k times
    # the cycle's wall heat (energy balance, definition), which the truth states from the solver
    k = 0.004
    s = art.ArtefactSettings.none().replace(thermal_drift_bar_per_kW=k, thermal_time_constant_s=0.0)
    ss = synthesize(base, 2, CycleVariation(seed=2), resolution_deg=1.0, artefacts=s)
    assert ss.stats["artefact.thermal_drift_proxy"] == "wall heat flow"
    t_cycle = 720.0 / (6.0 * ss.meta["speed_rpm"])
    for r in ss.truth:
        q = -r["artefact.thermal_error_mean_bar"] / k * 1000.0 * t_cycle        # [J]
        # the mean over the fine grid (both ends) against the solver's integral: 1 %
        assert q == pytest.approx(r["wall_heat_J"], rel=0.01)


def test_thermal_error_grows_with_load():
    # the diaphragm's thermal shock grows with the heat flux (common practice): with the default
    # (heat-flow) form the error at full load (1.0 bar intake) is well above half load (0.5 bar);
    # the temperature form, still available, barely changes (peak gas temperature nearly the same)
    def peak(intake, settings):
        c = load_config("demo", FAST + [f"operating.intake_pressure_bar={intake}"])
        ss = synthesize(c, 2, CycleVariation(seed=3), resolution_deg=1.0, artefacts=settings)
        return float(np.mean([r["artefact.thermal_error_min_bar"] for r in ss.truth]))

    lo, hi = peak(0.5, D), peak(1.0, D)
    T_form = D.replace(thermal_drift_bar_per_kW=0.0)
    lo_T, hi_T = peak(0.5, T_form), peak(1.0, T_form)
    print(f"thermal error (most negative): heat flow {lo:.3f} / {hi:.3f} bar, temperature {lo_T:.3f} / {hi_T:.3f}"
          " bar at 0.5 / 1.0 bar intake")
    assert hi < 0 and lo < 0
    assert hi / lo > 1.5
    assert hi_T / lo_T < 1.2


# ---------------------------------------------------------------------- 6. knock ringing amplitude
def test_knock_amplitude_is_per_unburned_fraction_times_a_lognormal_factor():
    th = np.arange(-360.0, 360.0 + 1e-9, 1.0)
    n = 400
    P = np.full((n, th.size), 20e5)
    unb = np.linspace(0.25, 0.40, n)
    kw = dict(T=np.full(P.shape, 2500.0), bore_m=0.08, knock_onset_deg=np.full(n, 10.0),
              knock_unburned_fraction=unb)
    s = art.ArtefactSettings.none().replace(knock_amplitude_bar_per_unburned=D.knock_amplitude_bar_per_unburned,
                                            knock_amplitude_log_sd=D.knock_amplitude_log_sd)
    _, _, t1 = art.apply_artefacts(P, th, 3000.0, s, np.random.default_rng(4), **kw)
    _, _, t2 = art.apply_artefacts(P, th, 3000.0, s, np.random.default_rng(4), **kw)
    amp = t1["knock_amplitude_bar"]
    assert np.array_equal(amp, t2["knock_amplitude_bar"])                     # seeded
    f = t1["knock_amplitude_factor"]
    assert np.allclose(amp, D.knock_amplitude_bar_per_unburned * unb * f, rtol=1e-12)
    # log-normal factor of median 1 and the set sd of ln: sample sd of 400 draws within about 3.5 %
    assert np.median(np.log(f)) == pytest.approx(0.0, abs=0.1)
    assert np.std(np.log(f), ddof=1) == pytest.approx(D.knock_amplitude_log_sd, rel=0.12)
    # a few bar for 25-40 % unburned, above the light-knock threshold of about 0.5-1 bar for an
    # ~80 mm bore, heavy-tailed from cycle to cycle (common practice)
    med = np.median(amp)
    print(f"knock amplitude: median {med:.2f} bar, 5-95 % {np.percentile(amp, 5):.2f}-{np.percentile(amp, 95):.2f},"
          f" max/median {amp.max() / med:.2f}")
    assert 2.0 < med < 6.0 and np.percentile(amp, 10) > 1.0
    assert amp.max() / med > 2.5


def test_knock_ring_in_the_signal_has_the_recorded_amplitude():
    th = np.arange(-360.0, 360.0 + 1e-9, 0.1)
    P = np.full((3, th.size), 20e5)
    s = art.ArtefactSettings.none().replace(knock_amplitude_bar_per_unburned=10.0, knock_amplitude_log_sd=0.5,
                                            knock_decay_s=1e-3, knock_mode_weights=(1.0, 0.0, 0.0, 0.0, 0.0))
    meas, _, t = art.apply_artefacts(P, th, 3000.0, s, np.random.default_rng(1), T=np.full(P.shape, 2500.0),
                                     bore_m=0.08, knock_onset_deg=[10.0, np.nan, 12.0],
                                     knock_unburned_fraction=[0.3, 0.3, 0.35])
    ring = (meas - P) / 1e5
    assert t["knock_amplitude_bar"][1] == 0.0 and np.all(ring[1] == 0.0)
    for k in (0, 2):
        # the first peak within a quarter period of the onset: A exp(-t / tau), 4 % decay at most
        w = th >= (10.0 if k == 0 else 12.0)
        assert np.max(np.abs(ring[k, w][:40])) == pytest.approx(t["knock_amplitude_bar"][k], rel=0.05)
    assert t["knock_amplitude_bar"][0] != pytest.approx(3.0, rel=1e-3)       # a drawn factor, not 1


def test_synthetic_knocking_set_records_the_amplitude():
    # the turbo demo with spark advanced well past its knock limit: every cycle knocks
    c = load_config("demo_turbo", ["simulation.step_deg=1.0", "burn.spark_advance_deg=22"])
    ss = synthesize(c, 8, CycleVariation(seed=2), resolution_deg=1.0, artefacts=D)
    rows = [r for r in ss.truth if np.isfinite(r["knock_onset_deg"])]
    assert rows
    for r in rows:
        want = D.knock_amplitude_bar_per_unburned * r["artefact.knock_unburned_fraction_at_onset"] \
            * r["artefact.knock_amplitude_factor"]
        assert r["artefact.knock_amplitude_bar"] == pytest.approx(want, rel=1e-12)
        assert r["artefact.knock_amplitude_bar"] > 0.5
