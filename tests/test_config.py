"""Config loading, inheritance, overrides and one-line errors (exit code 2)."""

from __future__ import annotations
from cli_helpers import error_lines

import copy
import subprocess
import sys
import textwrap

import pytest

from cyclesim.config import load_config
from cyclesim.errors import ConfigError, PluginError


def write(tmp_path, text, name="c.yaml"):
    p = tmp_path / name
    p.write_text(textwrap.dedent(text))
    return p


def test_demo_loads_with_defaults_filled():
    c = load_config("demo")
    assert c.engine.bore_mm == 79.0
    assert c.submodels["burn"].model == "wiebe"
    assert c.submodels["burn"].params["a"] == 5.0
    assert c.simulation.mode == "full"


def test_extends_and_override(tmp_path):
    p = write(tmp_path, """
        extends: demo
        operating: {speed_rpm: 2000}
    """)
    c = load_config(p, ["burn.spark_advance_deg=30", "engine.compression_ratio=11"])
    assert c.operating.speed_rpm == 2000
    assert c.engine.bore_mm == 79.0           # inherited
    assert c.submodels["burn"].params["spark_advance_deg"] == 30
    assert c.engine.compression_ratio == 11


def test_changing_model_drops_old_params(tmp_path):
    p = write(tmp_path, """
        extends: demo
        heat_transfer: {model: hohenberg}
    """)
    c = load_config(p)
    assert c.submodels["heat_transfer"].model == "hohenberg"


@pytest.mark.parametrize(
    "text, expect",
    [
        ("engine: {bore_mm: -3}", "engine.bore_mm = -3: out of range"),
        ("engine: {bore_mm: 'wide'}", "engine.bore_mm: expected a number"),
        ("engine: {bore_m: 80}", "did you mean 'bore_mm'"),
        ("engnie: {bore_mm: 80}", "did you mean 'engine'"),
        ("operating: {speed_rpm: 0}", "operating.speed_rpm = 0: out of range"),
        ("engine: {compression_ratio: 1.0}", "engine.compression_ratio = 1.0: out of range"),
        ("engine: {conrod_mm: 30}", "engine.conrod_mm = 30: must be longer than the crank radius"),
        ("operating: {lambda: 0}", "operating.lambda = 0: out of range"),
        ("operating: {egr_fraction: 1.2}", "operating.egr_fraction = 1.2: out of range"),
        ("walls: {liner_temperature_K: -10}", "walls.liner_temperature_K = -10: out of range"),
        ("valves: {ivc_deg: -400}", "valves.ivc_deg = -400: out of range"),
        ("valves: {ivo_deg: -530, ivc_deg: -160}", "open for 370"),
        ("valves: {ivo_deg: -400, ivc_deg: -300, evc_deg: 430}", "events out of order"),
        ("burn: {duration_deg: 0}", "burn.duration_deg = 0: out of range"),
    ],
)
def test_bad_values_give_one_clear_line(tmp_path, text, expect):
    p = write(tmp_path, "extends: demo\n" + text + "\n")
    with pytest.raises(ConfigError) as e:
        load_config(p)
    msg = str(e.value)
    assert expect in msg
    assert "\n" not in msg


def test_unknown_plugin_suggests(tmp_path):
    p = write(tmp_path, "extends: demo\nheat_transfer: {model: woschnii}\n")
    with pytest.raises(PluginError, match="did you mean 'woschni'"):
        load_config(p)


def test_malformed_yaml_and_duplicate_key(tmp_path):
    p = write(tmp_path, "engine: {bore_mm: 80\n")
    with pytest.raises(ConfigError, match="malformed YAML"):
        load_config(p)
    p = write(tmp_path, "engine:\n  bore_mm: 80\n  bore_mm: 81\n", "d.yaml")
    with pytest.raises(ConfigError, match="duplicated key 'bore_mm'"):
        load_config(p)


def test_missing_required(tmp_path):
    p = write(tmp_path, "engine: {bore_mm: 80}\n")
    with pytest.raises(ConfigError, match="engine.stroke_mm: missing value"):
        load_config(p)


def test_yaml_never_constructs_objects(tmp_path):
    p = write(tmp_path, "extends: demo\nname: !!python/object/apply:os.system ['echo hi']\n")
    with pytest.raises(ConfigError):
        load_config(p)


def test_cli_error_is_one_line_exit_2(tmp_path):
    p = write(tmp_path, "extends: demo\nengine: {bore_mm: -1}\n")
    r = subprocess.run([sys.executable, "-m", "cyclesim", "run", str(p)], capture_output=True, text=True)
    assert r.returncode == 2
    assert "Traceback" not in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    assert "engine.bore_mm" in r.stderr
    r = subprocess.run([sys.executable, "-m", "cyclesim", "run", "demo", "--set", "operating.speed_rpm=fast"],
                       capture_output=True, text=True)
    assert r.returncode == 2 and "operating.speed_rpm" in r.stderr


def test_exponent_numbers_without_a_dot(tmp_path):
    # YAML 1.2 (yaml.org, 2009, sec. 10.2.1.4 core schema) reads 1e-7 as a float; PyYAML follows
    # YAML 1.1 and would give the text '1e-7', which an engineer would not expect
    p = write(tmp_path, """
        extends: demo
        simulation: {tolerance: 1e-6}
        operating: {speed_rpm: 2.5E3}
    """)
    c = load_config(p, ["simulation.step_deg=5e-1"])
    assert c.simulation.tolerance == 1e-6
    assert c.operating.speed_rpm == 2500.0
    assert c.simulation.step_deg == 0.5
    # words that merely start like numbers stay text
    assert load_config("demo", ["name=1e5x"]).name == "1e5x"


@pytest.mark.parametrize("changes", [
    {"burn.spark_advance_deg": 30.0},
    {"operating.speed_rpm": 2000, "burn.duration_deg": 40},
    {"heat_transfer.model": "hohenberg"},
    {"multi_cylinder.firing_order": [1, 2, 4, 3]},
])
def test_case_with_equals_a_full_rebuild(changes):
    # case_with copies the sections the changes leave alone; a full validation of the same
    # raw config must give the same case (the project's own full path is the reference)
    from cyclesim.config import build_case, case_with, flat_inputs

    base = load_config("demo")
    a = case_with(base, changes)
    b = build_case(copy.deepcopy(a.raw), base.base_dir)
    assert flat_inputs(a) == flat_inputs(b)
    assert vars(a.multi_cylinder) == vars(b.multi_cylinder)
    # the new case owns its raw config: changing it leaves the base case alone
    a.raw["operating"]["speed_rpm"] = 1234
    assert base.raw["operating"]["speed_rpm"] != 1234


def test_case_with_still_validates_the_changed_section():
    from cyclesim.config import case_with

    with pytest.raises(ConfigError, match="spark_advance_deg"):
        case_with(load_config("demo"), {"burn.spark_advance_deg": 300.0})
    with pytest.raises(ConfigError, match="conrod"):
        case_with(load_config("demo"), {"engine.conrod_mm": 30.0})


def test_keys_lists_every_core_key_with_unit_and_meaning(capsys):
    # the command line's entry in this process (the one-line error as a process of its own is
    # test_cli_error_is_one_line_exit_2)
    from cyclesim.cli import main
    from cyclesim.config import CORE_SCHEMA, MULTI_SCHEMA

    assert main(["keys"]) == 0
    out = capsys.readouterr().out
    for params in (*CORE_SCHEMA.values(), MULTI_SCHEMA):
        for p in params:
            line = next(ln for ln in out.splitlines() if ln.split() and ln.split()[0] == p.name)
            assert f"[{p.unit}]" in line and p.doc in line
    assert main(["keys", "operatin"]) == 2
    err = capsys.readouterr().err
    assert "did you mean 'operating'" in err and len(error_lines(err)) == 1
    assert main(["show", "demo"]) == 0
    shown = capsys.readouterr().out
    assert "multi_cylinder:" in shown and "firing_order" in shown
