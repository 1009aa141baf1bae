"""`cyclesim traces` / `cyclesim analyse`: bad inputs refused early, labels, warnings and help texts."""

from __future__ import annotations
from cli_helpers import error_lines

import argparse
import json

import numpy as np
import pytest

from cyclesim.cli import main
from cyclesim.cli.traces import add_parsers
from cyclesim.config import load_config
from cyclesim.errors import ConfigError
from cyclesim.traces.artefacts import ArtefactSettings
from cyclesim.traces.export import TraceSet, write_npz
from cyclesim.traces.synthesis import CycleVariation, output_grid, synthesize

FAST = ["--set", "simulation.step_deg=1.0"]


@pytest.mark.parametrize("bad, says", [
    (["--resolution", "0"], "--resolution 0"),
    (["--resolution", "-1"], "--resolution -1"),
    (["--resolution", "7"], "nearest that work: 5 deg or 6 deg"),
    (["--resolution", "0.24"], "0.2 deg or 0.25 deg"),
    (["--sample-rate", "0"], "--sample-rate 0"),
    (["--sample-rate", "50000"], "60000 Hz"),
    (["--misfire-rate", "2"], "--misfire-rate 2"),
    (["--cycles", "0"], "--cycles 0"),                  # the last --cycles given counts
    # --artefact KEY=VALUE
    (["--artefact", "tdc_ofset_deg=0.5"], "did you mean 'tdc_offset_deg'"),
    (["--artefact", "nonsense=1"], "known keys: offset_mean_bar"),
    (["--artefact", "noise_bar=loud"], "expected a number"),
    (["--artefact", "noise_bar=-0.1"], ">= 0"),
    (["--artefact", "adc_bits=12.5"], "whole number"),
    (["--artefact", "knock_mode_weights=1,2"], "5 numbers"),
    (["--artefact", "noise_bar"], "KEY=VALUE"),
])
def test_bad_traces_values_exit_2_in_one_line_and_make_no_folder(tmp_path, capsys, bad, says):
    out = tmp_path / "t"
    rc = main(["traces", "demo", "--cycles", "2", *bad, "--out", str(out)])
    err = capsys.readouterr().err
    assert rc == 2
    assert says in err and len(error_lines(err)) == 1 and "Traceback" not in err
    assert not out.exists()


def test_output_grid_refuses_what_it_used_to_replace():
    # resolution 0 used to give 0.5 deg silently; 7 deg an internal message about decimation factors
    with pytest.raises(ConfigError, match="> 0"):
        output_grid(0.0)
    with pytest.raises(ConfigError, match="divide the 720 deg cycle"):
        output_grid(7.0)
    with pytest.raises(ConfigError, match="> 0"):
        output_grid(None, 0.0, 3000.0)
    # steps that divide the cycle on the synthesis grid (a quarter of the step, at most 0.05 deg)
    assert output_grid(0.1) == (0.1, 0.025)
    assert output_grid(1.0) == (1.0, 0.05)
    assert output_grid(None, 72000.0, 3000.0) == pytest.approx((0.25, 0.05))   # 6 N / rate [deg]
    with pytest.raises(ConfigError, match="resolution"):
        synthesize(load_config("demo"), 2, CycleVariation(), resolution_deg=0.0)


def test_force_without_plots_removes_the_stale_plot_and_labels_the_cycles(tmp_path, capsys):
    out = tmp_path / "t"
    assert main(["traces", "demo", "--cycles", "2", "--resolution", "1", "--formats", "npz,csv_long",
                 "--out", str(out), *FAST]) == 0
    assert (out / "traces.png").is_file() and (out / "trace.long.csv").is_file()
    text = capsys.readouterr().out
    assert "(all 2 cycles" in text                     # the figure covers every cycle, misfires included
    assert main(["traces", "demo", "--cycles", "2", "--resolution", "1", "--formats", "npz", "--force",
                 "--no-plots", "--out", str(out), *FAST]) == 0
    text = capsys.readouterr().out
    assert not (out / "traces.png").exists() and not (out / "trace.long.csv").exists()
    assert "removed from an earlier run" in text and "traces.png" in text


def test_coupled_set_prints_the_residual_spread(tmp_path, capsys):
    assert main(["traces", "demo", "--cycles", "3", "--resolution", "1", "--formats", "npz", "--no-plots",
                 "--coupled", "--out", str(tmp_path / "c"), *FAST]) == 0
    text = capsys.readouterr().out
    line = next(ln for ln in text.splitlines() if "residual fraction per cycle" in ln)
    truth = json.loads((tmp_path / "c" / "truth.json").read_text())
    xr = np.array([r["residual_fraction"] for r in truth["cycles"]], float)
    assert f"mean {100 * xr.mean():.2f} %" in line and f"sd {100 * np.std(xr, ddof=1):.3f} %" in line


def _all_options():
    ap = argparse.ArgumentParser()
    add_parsers(ap.add_subparsers(dest="command"))
    sp = next(a for a in ap._actions if isinstance(a, argparse._SubParsersAction))
    return [(name, act) for name in ("traces", "analyse") for act in sp.choices[name]._actions
            if act.option_strings and act.dest != "help"]


def test_every_traces_and_analyse_option_states_its_default_and_unit():
    # each option's help says its default (or that it is required); numbers carry a unit in brackets
    for name, act in _all_options():
        h = act.help or ""
        assert "default" in h or "required" in h, (name, act.option_strings, h)
        if act.type is float:
            assert "[" in h and "]" in h, (name, act.option_strings, h)


@pytest.fixture(scope="module")
def small_set(tmp_path_factory):
    """3 fired cycles at 1 deg with the default artefacts (no motored cycle), written as .npz."""
    ss = synthesize(load_config("demo", ["simulation.step_deg=1.0"]), 3, CycleVariation(seed=2),
                    resolution_deg=1.0, artefacts=ArtefactSettings.default())
    f = tmp_path_factory.mktemp("set") / "set.npz"
    write_npz(f, TraceSet(ss.theta, ss.pressure_pa, ss.intake_pa, ss.meta["speed_rpm"], ss.meta))
    return f


def test_analyse_prints_its_warnings_labels_and_assumptions(small_set, tmp_path, capsys):
    out = tmp_path / "a"
    assert main(["analyse", str(small_set), "--engine", "demo", "--out", str(out), "--thermal-tau", "0.003"]) == 0
    text = capsys.readouterr().out
    doc = json.loads((out / "analysis_summary.json").read_text())
    # every warning of the summary is printed, and with no motored cycle the TDC phasing is unverified
    assert doc["warnings"] and all(f"warning: {w}" in text for w in doc["warnings"])
    assert any("TDC phasing unverified" in w for w in doc["warnings"])
    assert "(3 fired cycles)" in text
    # the trapped mass names its assumed burned-gas fraction (the analyser's default here)
    assert "fraction at IVC 0.070 assumed" in text
    # the given time constant is used, under the generator's key name
    assert doc["statistics"]["thermal_time_constant_s"] == 0.003
    assert doc["statistics"]["thermal_time_constant_source"] == "given"
    assert hasattr(ArtefactSettings(), "thermal_time_constant_s")


@pytest.mark.parametrize("extra, says", [
    (["--thermal-tau", "0"], "--thermal-tau 0"),
    (["--tdc-correct"], "motored cycles"),                 # found only while analysing
])
def test_analyse_errors_leave_no_folder(small_set, tmp_path, capsys, extra, says):
    out = tmp_path / "a"
    assert main(["analyse", str(small_set), "--engine", "demo", "--out", str(out), *extra]) == 2
    assert says in capsys.readouterr().err
    assert not out.exists()


def test_artefact_options_set_single_flaws_on_top_of_the_chosen_set(tmp_path, capsys):
    out = tmp_path / "t"
    assert main(["traces", "demo", "--cycles", "2", "--resolution", "1", "--formats", "npz", "--no-plots",
                 "--artefacts", "none", "--artefact", "tdc_offset_deg=0.5", "--artefact", "clip_max_bar=none",
                 "--artefact", "adc_bits=12", "--out", str(out), *FAST]) == 0
    doc = json.loads((out / "truth.json").read_text())
    a = doc["settings"]["artefacts"]
    assert a["tdc_offset_deg"] == 0.5 and a["adc_bits"] == 12 and a["clip_max_bar"] is None
    assert a["noise_bar"] == 0.0 and a["gain_error"] == 0.0              # the rest from --artefacts none
    assert doc["statistics"]["artefact.tdc_offset_deg"] == 0.5
    # the ADC grid of 12 bits over the default range is visible in the file (uniform quantiser)
    from cyclesim.traces.export import read_trace

    ts = read_trace(out / "trace.npz")
    lsb = (a["adc_max_bar"] - a["adc_min_bar"]) / (2**12 - 1)
    codes = (ts.pressure_pa / 1e5 - a["adc_min_bar"]) / lsb
    assert np.max(np.abs(codes - np.round(codes))) < 1e-6


def test_artefact_option_help_gives_an_example():
    h = next(act.help for name, act in _all_options() if "--artefact" in act.option_strings)
    assert "--artefact tdc_offset_deg=0.5" in h and "repeatable" in h
