"""Catalogue of bad inputs through the command line: one clear line, exit status 2, no traceback."""

from __future__ import annotations

import subprocess
import sys
import textwrap

import pytest


def cli(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "cyclesim", *args], capture_output=True, text=True, cwd=cwd)


CASES = [
    ("engine: {stroke_mm: 0}", "engine.stroke_mm = 0: out of range"),
    ("engine: {bore_mm: 0}", "engine.bore_mm = 0: out of range"),
    ("engine: {conrod_mm: 35}", "must be longer than the crank radius"),
    ("engine: {compression_ratio: 0.9}", "engine.compression_ratio = 0.9: out of range"),
    ("operating: {speed_rpm: -100}", "operating.speed_rpm = -100: out of range"),
    ("operating: {lambda: -1}", "operating.lambda = -1: out of range"),
    ("operating: {egr_fraction: -0.1}", "operating.egr_fraction = -0.1: out of range"),
    ("walls: {head_temperature_K: -5}", "walls.head_temperature_K = -5: out of range"),
    ("burn: {duration_deg: -10}", "burn.duration_deg = -10: out of range"),
    ("valves: {ivo_deg: -400, ivc_deg: -300, evc_deg: 430}", "events out of order"),
    ("engine: {bore_mmm: 80}", "did you mean 'bore_mm'"),
    ("engine: {bore_mm: eighty}", "engine.bore_mm: expected a number"),
    ("heat_transfer: {model: woshni}", "did you mean 'woschni'"),
    ("engine:\n  bore_mm: 80\n  bore_mm: 81", "duplicated key 'bore_mm'"),
    ("engine: [1, 2", "malformed YAML"),
    ("valve_flow: {model: poppet, intake_lift_table: lift.csv}", "lift.csv"),
    ("engine: {chamber: {head: dome}}", "engine.chamber.head: expected flat or pent_roof"),
    ("engine: {chamber: {piston: bowl}}", "a bowl piston needs bowl_diameter_mm"),
    ("engine: {chamber: {plug_depth_mm: 20}}\nburn: {model: entrainment}", "plug gap would be below"),
]


@pytest.mark.parametrize("text, expect", CASES)
def test_bad_config_gives_one_line_and_exit_2(tmp_path, text, expect):
    (tmp_path / "lift.csv").write_text("crank_deg,lift_mm\n-370,0\n-380,1\n-300,5\n")  # not increasing
    cfg = tmp_path / "c.yaml"
    cfg.write_text("extends: demo\n" + text + "\n")
    r = cli("run", str(cfg), "--no-plots")
    assert r.returncode == 2, r.stdout + r.stderr
    assert "Traceback" not in r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and expect in lines[0], r.stderr


def test_bad_trace_file_for_the_analyser(tmp_path):
    f = tmp_path / "t.csv"
    f.write_text(textwrap.dedent("""\
        cycle,crank_deg,pressure_bar
        1,-360,1.0
        1,-359,abc
    """))
    r = cli("analyse", str(f), "--engine", "demo", "--out", str(tmp_path / "o"))
    assert r.returncode == 2 and "Traceback" not in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1 and "not a number" in r.stderr


def test_unknown_set_key_and_unknown_config():
    r = cli("run", "demo", "--set", "engnie.bore_mm=80")
    assert r.returncode == 2 and "did you mean 'engine'" in r.stderr
    r = cli("run", "demoo")
    assert r.returncode == 2 and "did you mean 'demo'" in r.stderr and "Traceback" not in r.stderr


@pytest.mark.parametrize("var, value", [("CYCLESIM_KERNEL", "bogus"), ("CYCLESIM_THREADS", "0")])
def test_bad_loop_settings_in_the_environment(tmp_path, var, value):
    # checked before the command makes its output folder
    import os

    env = {**os.environ, var: value}
    out = tmp_path / "o"
    r = subprocess.run([sys.executable, "-m", "cyclesim", "run", "demo", "--out", str(out)],
                       capture_output=True, text=True, env=env)
    assert r.returncode == 2
    assert var in r.stderr and "Traceback" not in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    assert not out.exists()
