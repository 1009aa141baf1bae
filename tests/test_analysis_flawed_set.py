"""The analyser on flawed sets: cycle classes, TDC phasing, the wall-heat scale, plots, engine checks.

The synthetic generator (cyclesim.traces.synthesis) gives each set's exact truth: which cycles
misfired or burned partly, each cycle's net IMEP and mass-burned CA50, and the TDC offset.
"""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from cyclesim.cli.traces import add_parsers, cmd_analyse
from cyclesim.traces.analysis_settings import analysis_inputs
from cyclesim.config import load_config
from cyclesim.errors import CyclesimError
from cyclesim.traces.analysis import (AnalysisSettings, VolumeFunction, analyse, wall_heat_scale_flag,
                                      with_measured_masses)
from cyclesim.traces.artefacts import ArtefactSettings
from cyclesim.traces.classify import classify_cycles, cycle_evidence
from cyclesim.traces.engine_check import engine_mismatches
from cyclesim.traces.export import TraceSet, write_npz
from cyclesim.traces.synthesis import CycleVariation, synthesize


def _ts(ss):
    return TraceSet(ss.theta, ss.pressure_pa, ss.intake_pa, ss.meta["speed_rpm"], ss.meta)


def _analyse(ss, config, **changes):
    g, s, _ = analysis_inputs(load_config(config))
    ts = _ts(ss)
    return analyse(ts, g, with_measured_masses(s, ts.meta).replace(**changes))


def _truth(ss):
    mis = np.array([t["misfire"] for t in ss.truth])
    part = np.array([t["partial_burn"] for t in ss.truth])
    imep = np.array([t["imep_net_bar"] for t in ss.truth], float)
    ca50 = np.array([np.nan if t["ca50_deg"] is None else t["ca50_deg"] for t in ss.truth], float)
    return mis, part, imep, ca50


# ---------------------------------------------------------------------- classification
@pytest.fixture(scope="module")
def mixed_set():
    """16 part-load cycles at 0.5 deg with misfires and partial burns, default flaws, TDC -0.7 deg."""
    return synthesize(load_config("demo_part_load"), 16,
                      CycleVariation(misfire_rate=0.15, partial_burn_rate=0.25, seed=11), resolution_deg=0.5,
                      artefacts=ArtefactSettings.default().replace(tdc_offset_deg=-0.7))


def test_three_classes_match_the_truth(mixed_set):
    mis, part, _, _ = _truth(mixed_set)
    assert mis.any() and part.any()          # the seed gives both kinds
    r = _analyse(mixed_set, "demo_part_load", tdc_correct=True)
    cls = r.per_cycle["cycle_class"]
    assert (cls == "misfire").tolist() == mis.tolist()
    assert (cls == "partial burn").tolist() == part.tolist()
    assert r.stats["n_fired"] + r.stats["n_partial_burn"] + r.stats["n_misfire"] == 16
    # the TDC offset from the misfires found (loss-angle method): within 0.1 deg (the brief's limit)
    assert r.tdc["offset_deg"] == pytest.approx(-0.7, abs=0.1)
    # the fired statistics leave the partial burns out
    fired = cls == "fired"
    assert r.stats["imep_net_bar_mean"] == pytest.approx(np.mean(r.per_cycle["imep_net_bar"][fired]), rel=1e-12)


def test_partial_burn_share_is_an_option(mixed_set):
    # every partial burn of the generator releases 30-80 % of a full cycle's fuel energy
    # (CycleVariation.partial_burn_range): a threshold of 0.25 calls none of them partial
    mis, part, _, _ = _truth(mixed_set)
    r = _analyse(mixed_set, "demo_part_load", tdc_offset_deg=-0.7, partial_burn_share=0.25)
    assert not (r.per_cycle["cycle_class"] == "partial burn").any()
    assert (r.per_cycle["cycle_class"] == "misfire").tolist() == mis.tolist()


@settings(max_examples=15, deadline=None)
@given(gain=st.floats(0.9, 1.1), offset_deg=st.floats(-1.0, 1.0))
def test_classes_do_not_change_with_gain_or_phasing(mixed_set, gain, offset_deg):
    # the evidence is chosen so that a sensor gain and a TDC error of up to a degree leave the
    # classes as they are (the released heat and the gross work scale with the gain; the
    # pressure ratio does not depend on it)
    g, s, _ = analysis_inputs(load_config("demo_part_load"))
    th = mixed_set.theta
    P = mixed_set.pressure_true_pa
    V = g.volume(th)[0]
    base, _ = classify_cycles(cycle_evidence(th, P, V, s.ivc_deg, s.evo_deg, float(g.Vd[0])))
    V2 = g.volume(th - offset_deg)[0]
    codes, _ = classify_cycles(cycle_evidence(th, gain * P, V2, s.ivc_deg, s.evo_deg, float(g.Vd[0])))
    assert codes.tolist() == base.tolist()


def _flawed(extra: dict):
    a = ArtefactSettings.default().replace(tdc_offset_deg=-0.7, **extra)
    return synthesize(load_config("demo_part_load"), 60, CycleVariation(misfire_rate=0.05, seed=1),
                      resolution_deg=0.2, artefacts=a)


@pytest.mark.slow
@pytest.mark.parametrize("extra", [{}, {"passage_frequency_hz": 6000.0, "noise_bar": 0.04, "gain_error": -0.02}],
                         ids=["default flaws", "resonance, noise and gain"])
def test_misfires_found_and_fired_statistics_recovered(extra):
    # `cyclesim traces demo_part_load --cycles 60 --resolution 0.2 --misfire-rate 0.05
    #  --artefact tdc_offset_deg=-0.7 [...]` then `cyclesim analyse ... --tdc-correct`: every true
    # misfire found, no false positive, COV of net IMEP within 0.3 percentage points and mean CA50
    # within 0.3 deg of the truth (the brief's limits; truth over the fired cycles)
    ss = _flawed(extra)
    mis, part, imep, ca50 = _truth(ss)
    assert mis.sum() == 5 and not part.any()
    r = _analyse(ss, "demo_part_load", tdc_correct=True)
    cls = r.per_cycle["cycle_class"]
    assert (cls == "misfire").tolist() == mis.tolist()
    assert (cls == "fired").tolist() == (~mis).tolist()
    f = ~mis
    cov_true = 100 * np.std(imep[f], ddof=1) / np.mean(imep[f])
    cov = 100 * r.stats["imep_net_cov"]
    print(f"misfires {int(mis.sum())} true, {int((cls == 'misfire').sum())} found; COV {cov:.3f} % "
          f"(true {cov_true:.3f} %); CA50 {r.stats['ca50_deg_mean']:.3f} (true {np.mean(ca50[f]):.3f}) deg;"
          f" TDC {r.tdc['offset_deg']:+.3f} deg (true -0.7)")
    assert abs(cov - cov_true) < 0.3
    assert r.stats["ca50_deg_mean"] == pytest.approx(np.mean(ca50[f]), abs=0.3)


# ---------------------------------------------------------------------- loss-angle sign
def test_loss_angle_is_positive_before_tdc():
    # the convention: loss_angle_deg is how far the motored pressure peak lies BEFORE TDC (positive
    # when it precedes it; the heat loss makes it precede, Heywood 1988 sec. 12.6, from memory);
    # tdc_offset_deg is the labelled angle of true TDC, so the peak lies at offset - loss angle
    ss = synthesize(load_config("demo_part_load"), 4, CycleVariation(misfire_rate=1.0, seed=2),
                    resolution_deg=0.2, artefacts=ArtefactSettings.none().replace(tdc_offset_deg=0.4))
    r = _analyse(ss, "demo_part_load", tdc_correct=True, peg="none")
    t = r.tdc
    assert t["loss_angle_deg"] > 0.05
    assert t["offset_deg"] == pytest.approx(0.4, abs=0.05)
    assert t["theta_pmax_motored_deg"] == pytest.approx(t["offset_deg"] - t["loss_angle_deg"], abs=1e-9)


# ---------------------------------------------------------------------- wall-heat scale
def test_adiabatic_traces_level_with_a_zero_wall_heat_scale():
    # traces with no wall heat at all (heat_transfer.model: none): the gross release levels with no
    # wall heat added, so the fitted scale must be free to reach zero (a lower clip of 0.2 of
    # Woschni put CA50 about 2 deg late); the value near zero is flagged.  Limit: the brief's
    # 0.3 deg for the mean CA50 against the mass burned
    ss = synthesize(load_config("demo", ["heat_transfer.model=none"]), 4, CycleVariation(seed=5),
                    resolution_deg=0.2, artefacts=ArtefactSettings.none())
    _, _, _, ca50 = _truth(ss)
    r = _analyse(ss, "demo", peg="none")
    k = r.per_cycle["wall_heat_scale"]
    assert np.all(np.abs(k) < 0.2)
    assert all(wall_heat_scale_flag(v) == "near zero" for v in k)
    assert any("near zero" in w for w in r.warnings)
    err = r.per_cycle["ca50_deg"] - ca50
    print(f"adiabatic: wall-heat scale {np.round(k, 3).tolist()}, CA50 error {np.round(err, 3).tolist()} deg")
    assert np.max(np.abs(err)) < 0.3


def test_wall_heat_scale_flags():
    assert wall_heat_scale_flag(1.0) == ""
    assert wall_heat_scale_flag(0.15) == "near zero" and wall_heat_scale_flag(-0.15) == "near zero"
    assert wall_heat_scale_flag(0.25) == ""
    assert wall_heat_scale_flag(-0.3) == "at a bound" and wall_heat_scale_flag(5.0) == "at a bound"


# ---------------------------------------------------------------------- TDC from fired cycles
def test_compression_release_is_zero_along_a_cantera_isentrope():
    # the first law of the fired-cycle TDC fit: along an isentrope of a methane-air charge the release
    # m [u(T) - u(T0)] + integral p dV vanishes.  Reference: Cantera 3.x with GRI-Mech 3.0 (gri30.yaml),
    # the fresh charge compressed at constant entropy over the demo's -126..-26 deg.  Limit: 0.2 % of the
    # compression work (the tables' NASA-7 data are GRI-Mech 3.0's; the rest is the trapezoid rule)
    import cantera as ct

    from cyclesim.traces.heat_release import _gas_tables
    from cyclesim.traces.tdc_fired import _gas_lookup, compression_release

    g, _, _ = analysis_inputs(load_config("demo"))
    V = g.volume(np.arange(-126.0, -26.0, 0.2))[0]
    gas = ct.Solution("gri30.yaml")
    gas.set_equivalence_ratio(1.0, "CH4", "O2:0.2095, N2:0.7812, AR:0.0093")
    gas.TP = 350.0, 1.0e5
    mass = gas.density * V[0]
    s0 = gas.s
    p = np.empty(V.size)
    for k, v in enumerate(V):
        gas.SV = s0, v / mass
        p[k] = gas.P
    tab = _gas_tables(AnalysisSettings(fuel="methane", fuel_air_lambda=1.0))
    q, T = compression_release(p, V, mass, _gas_lookup(tab, mass / float(np.mean(V)), 0.0))
    work = -np.trapezoid(p, V)
    assert T[-1] == pytest.approx(gas.T, rel=1e-3)
    assert np.max(np.abs(q)) < 2e-3 * work


@pytest.fixture(scope="module")
def clean_full_load():
    """4 noise-free cycles of the demo at full load (spark 24 deg BTDC), TDC offset 0.5 deg, no other flaw."""
    return synthesize(load_config("demo"), 4, CycleVariation(seed=3), resolution_deg=0.2,
                      artefacts=ArtefactSettings.none().replace(tdc_offset_deg=0.5))


def _fired_fit(ss, theta=None, sensor_delay_s=0.0):
    from cyclesim.traces.analysis import _peg_offsets, tdc_from_fired

    g, s, _ = analysis_inputs(load_config("demo"))
    s = with_measured_masses(s, ss.meta).replace(sensor_delay_s=sensor_delay_s)
    th = ss.theta if theta is None else theta
    ts = TraceSet(th, ss.pressure_pa, ss.intake_pa, ss.meta["speed_rpm"], ss.meta)
    vol = VolumeFunction(g, th, s.bore_m)
    P = ss.pressure_pa - _peg_offsets(ts, th, vol, s)[:, None]
    return tdc_from_fired(th, P, vol, s, ss.meta["speed_rpm"])


def test_tdc_from_fired_on_the_simulated_compression(clean_full_load):
    # the simulator's compression (its own Woschni with three wall temperatures, blowby, a residual share
    # of about 0.05 where the analyser assumes 0.07) against the analyser's first law with the wall heat
    # fitted: the offset within 0.05 deg (measured +0.013 deg of model error); the fitted wall heat
    # plausible (multiplier near 1, wall temperature between the demo's liner 420 K and piston 540 K)
    r = _fired_fit(clean_full_load)
    assert r["offset_deg"] == pytest.approx(0.5, abs=0.05)
    assert 0.5 < r["woschni_multiplier_fit"] < 2.0
    assert 400.0 < r["wall_temperature_fit_K"] < 540.0
    assert r["window_deg"] == (-126.0, -26.0)


@settings(max_examples=4, deadline=None)
@given(shift=st.floats(-1.0, 1.0))
def test_tdc_from_fired_follows_a_relabelled_angle(clean_full_load, shift):
    # labelling every sample `shift` deg later moves the offset found by the same amount (the window is
    # in labelled angles, so a few samples change at its ends: 0.02 deg allowed)
    base = _fired_fit(clean_full_load)["offset_deg"]
    moved = _fired_fit(clean_full_load, clean_full_load.theta + shift)["offset_deg"]
    assert moved - base == pytest.approx(shift, abs=0.02)


def test_tdc_from_fired_cycles_refuses_a_wide_interval(mixed_set):
    # 16 part-load cycles at 0.5 deg, 5 of them fired: too few samples of too few cycles to fix the phase
    # within 0.3 deg: refused, with the reason
    with pytest.raises(CyclesimError, match=r"refused: the 95 % interval .* wide .* 5 cycles"):
        _analyse(mixed_set, "demo_part_load", tdc_from_fired=True)


#: The 12 kHz passage of the study, damping 0.1, and its signal delay 2 zeta / omega_n [s] (a
#: second-order low-pass lags by -2 zeta omega / omega_n in phase well below omega_n; common practice)
PASSAGE_HZ, PASSAGE_DAMPING = 12000.0, 0.1
PASSAGE_DELAY_S = 2.0 * PASSAGE_DAMPING / (2.0 * np.pi * PASSAGE_HZ)


@pytest.mark.slow
def test_tdc_from_fired_cycles_on_ten_seeded_sets(tmp_path, capsys):
    # the pass criterion: 10 seeded sets per offset (0.2, 0.5, 1.0 deg) of 300 fired cycles (the
    # demo at full load, spark 24 deg BTDC, 0.2 deg) with the default flaws plus 0.04 bar noise, -2 % gain
    # and a 12 kHz passage resonance whose delay (2.65 us) the engineer states: the 95 % interval holds the
    # truth in at least 9 of 10 sets and is under 0.3 deg wide (`python benchmarks/tdc_fired_coverage.py`
    # prints the figures).  The three offsets of one seed share its simulated cycles (checkpoint folder)
    case = load_config("demo")
    covered = {d: 0 for d in (0.2, 0.5, 1.0)}
    for seed in range(100, 110):
        for d in covered:
            a = ArtefactSettings.default().replace(tdc_offset_deg=d, noise_bar=0.04, gain_error=-0.02,
                                                   passage_frequency_hz=PASSAGE_HZ, passage_damping=PASSAGE_DAMPING)
            ss = synthesize(case, 300, CycleVariation(seed=seed), resolution_deg=0.2, artefacts=a,
                            checkpoint_dir=tmp_path / str(seed))
            r = _fired_fit(ss, sensor_delay_s=PASSAGE_DELAY_S)
            lo, hi = r["interval_deg"]
            assert r["width_deg"] < 0.3
            covered[d] += lo <= d <= hi
    print(f"intervals holding the truth per offset: {covered}")
    assert all(c >= 9 for c in covered.values())
    # the same through the command line on the last set: found, stated and corrected
    f = write_npz(tmp_path / "set.npz", _ts(ss))
    args = _parser().parse_args(["analyse", str(f), "--engine", "demo", "--out", str(tmp_path / "o"),
                                 "--tdc-from-fired", "--sensor-delay-us", f"{PASSAGE_DELAY_S * 1e6:.6f}",
                                 "--no-plots", "--thermal-tau", "0.002"])
    assert cmd_analyse(args) == 0
    line = next(ln for ln in capsys.readouterr().out.splitlines() if "TDC offset found" in ln)
    assert "fired-cycle compression -126..-26 deg, 300 cycles" in line
    doc = json.loads((tmp_path / "o" / "analysis_summary.json").read_text())
    assert doc["tdc"]["offset_deg"] == pytest.approx(r["offset_deg"], abs=1e-6)
    assert doc["tdc"]["sensor_delay_deg"] == pytest.approx(6.0 * 3000.0 * PASSAGE_DELAY_S, rel=1e-5)


def test_tdc_from_fired_takes_a_stated_sensor_delay_off_the_phase(clean_full_load):
    # the fitted phase is the offset plus the sensor's delay: a stated delay moves the offset, not the phase
    r0 = _fired_fit(clean_full_load)
    r1 = _fired_fit(clean_full_load, sensor_delay_s=5e-6)
    assert r1["phase_deg"] == pytest.approx(r0["phase_deg"], abs=1e-9)
    assert r0["offset_deg"] - r1["offset_deg"] == pytest.approx(6.0 * 3000.0 * 5e-6, rel=1e-9)


# ---------------------------------------------------------------------- command line
def _parser():
    import argparse

    ap = argparse.ArgumentParser()
    add_parsers(ap.add_subparsers(dest="command"))
    return ap


def test_analyse_writes_classes_and_plots(mixed_set, tmp_path, capsys):
    f = write_npz(tmp_path / "set.npz", _ts(mixed_set))
    out = tmp_path / "out"
    args = _parser().parse_args(["analyse", str(f), "--engine", "demo_part_load", "--out", str(out),
                                 "--tdc-correct"])
    assert cmd_analyse(args) == 0
    text = capsys.readouterr().out
    assert "fired / partial burn / misfire" in text and "fired cycles only" in text
    assert "engine mismatch" not in text
    lines = (out / "analysis_cycles.csv").read_text().splitlines()
    col = lines[0].split(",").index("cycle_class")
    mis, part, _, _ = _truth(mixed_set)
    got = [ln.split(",")[col] for ln in lines[1:]]
    assert got == ["misfire" if m else "partial burn" if p else "fired" for m, p in zip(mis, part)]
    doc = json.loads((out / "analysis_summary.json").read_text())
    assert doc["statistics"]["n_misfire"] == int(mis.sum())
    for name in ("analysis_cycles.png", "analysis_pressure.png", "analysis_heat_release.png", "analysis_tdc.png"):
        data = (out / name).read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000


def test_analysis_module_does_not_import_matplotlib():
    code = "import sys, cyclesim.traces.analysis, cyclesim.cli.traces; print('matplotlib' in sys.modules)"
    assert subprocess.run([sys.executable, "-c", code], capture_output=True, text=True).stdout.strip() == "False"


def test_a_mismatched_engine_is_named(mixed_set, tmp_path, capsys):
    # the file states the part-load demo's geometry and speed; a config with another bore and speed
    # is named value by value
    other = load_config("demo_part_load", ["engine.bore_mm=90", "operating.speed_rpm=2000"])
    labels = [m[0] for m in engine_mismatches(mixed_set.meta, other)]
    assert labels == ["bore", "speed"]
    assert engine_mismatches(mixed_set.meta, load_config("demo_part_load")) == []
    f = write_npz(tmp_path / "set.npz", _ts(mixed_set))
    args = _parser().parse_args(["analyse", str(f), "--engine", "demo_part_load", "--out", str(tmp_path / "o"),
                                 "--set", "engine.bore_mm=90", "--tdc-correct", "--no-plots"])
    assert cmd_analyse(args) == 0
    text = capsys.readouterr().out
    line = next(ln for ln in text.splitlines() if "engine mismatch" in ln)
    assert line.startswith("warning: ") and "bore" in line and "90 mm in the config" in line
    assert not list((tmp_path / "o").glob("*.png"))


@pytest.mark.parametrize("argv, match", [
    (["--partial-burn-share", "1.5"], "--partial-burn-share 1.5"),
    (["--tdc-from-fired", "--tdc-correct"], "choose one"),
    (["--tdc-from-fired", "--sensor-delay-us", "-3"], "--sensor-delay-us -3: expected microseconds"),
    (["--tdc-from-fired", "--spark-advance", "200"], "--spark-advance 200: expected degrees before TDC"),
])
def test_analyse_option_slips(mixed_set, tmp_path, argv, match):
    f = write_npz(tmp_path / "set.npz", _ts(mixed_set))
    args = _parser().parse_args(["analyse", str(f), "--engine", "demo_part_load", "--out", str(tmp_path / "o"),
                                 *argv])
    with pytest.raises(CyclesimError, match=match):
        cmd_analyse(args)
