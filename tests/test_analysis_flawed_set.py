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

from cyclesim.cli_traces import add_parsers, analysis_inputs, cmd_analyse
from cyclesim.config import load_config
from cyclesim.errors import CyclesimError
from cyclesim.traces.analysis import AnalysisSettings, analyse, wall_heat_scale_flag, with_measured_masses
from cyclesim.traces.artefacts import ArtefactSettings
from cyclesim.traces.classify import classify_cycles, cycle_evidence
from cyclesim.traces.engine_check import engine_mismatches
from cyclesim.traces.export import TraceSet, write_npz
from cyclesim.traces.synthesis import CycleVariation, synthesize
from cyclesim.traces.tdc_fired import fit_tdc_fired


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
def test_tdc_from_fired_compression_recovers_an_exact_polytrope():
    # an exact polytrope p V(true)^1.32 = const with a pegging offset and 0.005 bar noise: the joint fit
    # returns the offset within its interval (exact model, so the interval is the statistical one)
    g, _, _ = analysis_inputs(load_config("demo"))
    th = np.arange(-360.0, 360.0, 0.2)
    d = 0.5
    rng = np.random.default_rng(4)
    p = 1.0e5 * (g.volume(np.array([-180.0]))[0][0] / g.volume(th - d)[0]) ** 1.32 - 0.3e5
    p = p + rng.normal(0.0, 500.0, th.size)
    r = fit_tdc_fired(th, p, lambda t: g.volume(t)[0], window_deg=(-120.0, -10.0), max_width_deg=1.0)
    lo, hi = r["interval_deg"]
    assert lo <= d <= hi and r["width_deg"] < 0.3
    assert r["n_compression"] == pytest.approx(1.32, abs=0.01)
    assert r["peg_constant_bar"] == pytest.approx(0.3, abs=0.02)


def test_tdc_from_fired_cycles_refuses_a_wide_interval(mixed_set):
    # on the compression before the spark (default window) the offset, the exponent and the pegging
    # constant are too alike to fix the phase within 0.3 deg: refused, with the reason
    with pytest.raises(CyclesimError, match=r"refused: the 95 % interval .* wide"):
        _analyse(mixed_set, "demo_part_load", tdc_from_fired=True)


@pytest.mark.parametrize("offset_deg", [0.2, 0.5, 1.0])
def test_tdc_from_fired_cycles_on_ten_seeded_sets(offset_deg):
    # 10 seeded sets of 10 fired cycles (the demo at full load, spark 24 deg BTDC) per offset, with the
    # default flaws plus 0.04 bar noise, -2 % gain and a 12 kHz passage resonance: the compression
    # before the spark does not fix the phase within 0.3 deg (measured widths 8-22 deg), so every set
    # is refused with the reason; the interval itself is honest: lifted, it holds the truth in at
    # least 9 of 10 sets (95 % intervals; measured 9/10 at each offset)
    case = load_config("demo")
    g, s, _ = analysis_inputs(case)
    a = ArtefactSettings.default().replace(tdc_offset_deg=offset_deg, noise_bar=0.04, gain_error=-0.02,
                                           passage_frequency_hz=12000.0)
    covered = 0
    for seed in range(10):
        ss = synthesize(case, 10, CycleVariation(seed=100 + seed), resolution_deg=0.2, artefacts=a)
        with pytest.raises(CyclesimError, match=r"refused: the 95 % interval of the offset is \d+\.\d+ deg wide"):
            analyse(_ts(ss), g, s.replace(tdc_from_fired=True))
        P = ss.pressure_pa - np.mean(ss.pressure_pa[:, (ss.theta >= -190) & (ss.theta <= -170)], axis=1)[:, None]
        r = fit_tdc_fired(ss.theta, P.mean(axis=0), lambda t: g.volume(t)[0], n_cycles=10, max_width_deg=1e3)
        lo, hi = r["interval_deg"]
        covered += lo <= offset_deg <= hi
    assert covered >= 9


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
    code = "import sys, cyclesim.traces.analysis, cyclesim.cli_traces; print('matplotlib' in sys.modules)"
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
])
def test_analyse_option_slips(mixed_set, tmp_path, argv, match):
    f = write_npz(tmp_path / "set.npz", _ts(mixed_set))
    args = _parser().parse_args(["analyse", str(f), "--engine", "demo_part_load", "--out", str(tmp_path / "o"),
                                 *argv])
    with pytest.raises(CyclesimError, match=match):
        cmd_analyse(args)
