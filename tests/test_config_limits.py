"""Configs that are small but would explode, and the slips a first-day user makes with them.

Each ends in one line (ConfigError, exit 2 on the command line) or, for a plausible slip of unit, a
warning; none fills memory, the terminal or the stack."""

from __future__ import annotations

import subprocess
import sys

import pytest

import cyclesim
from cyclesim import config as config_mod
from cyclesim.config import load_config, parse_override, resolve_case
from cyclesim.config.shell_hints import shell_split_hint
from cyclesim.config.limits import MAX_ALIASES, MAX_EXPANDED_NODES, MAX_EXTENDS_DEPTH
from cyclesim.errors import ConfigError


def cli(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "cyclesim", *args], capture_output=True, text=True,
                          timeout=600, cwd=cwd)


def _one_line(exc) -> str:
    msg = str(exc.value)
    assert "\n" not in msg
    return msg


def test_diamond_extends_reads_each_file_once(tmp_path, monkeypatch):
    # each level extends the next one twice: without sharing, 2**20 reads of the bottom file
    levels = 20
    (tmp_path / "c0.yaml").write_text("extends: demo\nname: bottom\n")
    for k in range(1, levels + 1):
        (tmp_path / f"c{k}.yaml").write_text(f"extends: [c{k - 1}.yaml, c{k - 1}.yaml]\n"
                                             f"operating: {{speed_rpm: {2000 + k}}}\n")
    reads = []
    real = config_mod.read_yaml

    def counting(path):
        reads.append(path)
        if len(reads) > 10 * levels:
            raise AssertionError("a file of the diamond is read again")
        return real(path)

    monkeypatch.setattr(config_mod, "read_yaml", counting)
    case = load_config(tmp_path / f"c{levels}.yaml")
    assert case.operating.speed_rpm == 2000 + levels and case.name == "bottom"
    assert len(reads) == len(set(reads)) == levels + 2          # c0..c20 and demo, once each


def test_shared_base_in_a_diamond_keeps_each_branch_override(tmp_path):
    (tmp_path / "base.yaml").write_text("extends: demo\noperating: {speed_rpm: 2000}\n")
    (tmp_path / "a.yaml").write_text("extends: base.yaml\noperating: {lambda: 0.9}\n")
    (tmp_path / "b.yaml").write_text("extends: base.yaml\noperating: {speed_rpm: 2500}\n")
    (tmp_path / "top.yaml").write_text("extends: [a.yaml, b.yaml]\n")
    (tmp_path / "top2.yaml").write_text("extends: [b.yaml, a.yaml]\n")
    # each base is resolved in full first, so the later one wins every key it holds (its own and
    # those it inherits); reading base.yaml once must not let one branch's merge leak into the other
    top = load_config(tmp_path / "top.yaml").operating
    assert (top.speed_rpm, vars(top)["lambda"]) == (2500, 1.0)
    top2 = load_config(tmp_path / "top2.yaml").operating
    assert (top2.speed_rpm, vars(top2)["lambda"]) == (2000, 0.9)


def _bomb(levels: int = 9, width: int = 9) -> str:
    lines = ["extends: demo", "x0: &x0 [" + ", ".join(["lol"] * width) + "]"]
    for k in range(1, levels):
        lines.append(f"x{k}: &x{k} [" + ", ".join([f"*x{k - 1}"] * width) + "]")
    lines.append(f"name: *x{levels - 1}")
    return "\n".join(lines) + "\n"


def test_alias_bomb_in_name_is_refused_quickly(tmp_path):
    # 9 levels of 9 aliases: about 500 bytes, 9**9 (387 million) strings once expanded
    text = _bomb()
    assert len(text.encode()) < 600
    p = tmp_path / "bomb.yaml"
    p.write_text(text)
    with pytest.raises(ConfigError) as e:
        load_config(p)
    msg = _one_line(e)
    assert "bomb.yaml" in msg and f"more than {MAX_EXPANDED_NODES} values" in msg
    r = cli("show", str(p))
    assert r.returncode == 2 and len(r.stdout) == 0
    assert len(r.stderr.strip().splitlines()) == 1 and "expands to more than" in r.stderr


def test_too_many_aliases_and_bomb_in_a_set_value(tmp_path):
    p = tmp_path / "many.yaml"
    p.write_text("extends: demo\nv: &v 1\nname: [" + ", ".join(["*v"] * (MAX_ALIASES + 1)) + "]\n")
    with pytest.raises(ConfigError, match=rf"many\.yaml: more than {MAX_ALIASES} YAML aliases"):
        load_config(p)
    value = "[&a [x, x, x, x, x, x, x, x, x, x], " + ", ".join(
        "&b%d [%s]" % (k, ", ".join([f"*{'a' if k == 0 else f'b{k - 1}'}"] * 10)) for k in range(6)) + "]"
    with pytest.raises(ConfigError, match="expands to more than"):
        parse_override("name=" + value)


def test_long_extends_chain_has_a_stated_depth_limit(tmp_path):
    n = 1200
    (tmp_path / "f0.yaml").write_text("extends: demo\n")
    for k in range(1, n):
        (tmp_path / f"f{k}.yaml").write_text(f"extends: f{k - 1}.yaml\n")
    with pytest.raises(ConfigError) as e:
        load_config(tmp_path / f"f{n - 1}.yaml")
    assert f"nests more than {MAX_EXTENDS_DEPTH} files deep" in _one_line(e)
    # a chain just inside the limit loads (demo is the last of MAX_EXTENDS_DEPTH files)
    load_config(tmp_path / f"f{MAX_EXTENDS_DEPTH - 2}.yaml")
    with pytest.raises(ConfigError, match="nests more than"):
        load_config(tmp_path / f"f{MAX_EXTENDS_DEPTH - 1}.yaml")


def test_missing_extends_names_the_referencing_file(tmp_path):
    (tmp_path / "mid.yaml").write_text("extends: nosuch.yaml\n")
    (tmp_path / "top.yaml").write_text("extends: mid.yaml\n")
    with pytest.raises(ConfigError) as e:
        load_config(tmp_path / "top.yaml")
    msg = _one_line(e)
    assert msg.startswith(f"{tmp_path / 'mid.yaml'}: extends: config 'nosuch.yaml': no such file")


def test_unquoted_mapping_in_set_says_the_shell_split_it():
    argv = ["run", "demo", "--set", "burn={model:", "wiebe_flame}", "--no-plots"]
    hint = shell_split_hint(argv)
    assert "shell split the value" in hint and "--set 'burn={model: wiebe_flame}'" in hint
    assert shell_split_hint(["run", "demo", "--set", "burn={model: wiebe_flame}"]) is None
    assert shell_split_hint(["run", "--set=burn=[1,", "2]"]) is not None
    r = cli(*argv)
    assert r.returncode == 2 and "Traceback" not in r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "shell split the value" in lines[0], r.stderr
    with pytest.raises(ConfigError, match="do not close; if the value holds a space, the shell split it"):
        parse_override("burn={model:")


def test_celsius_in_a_kelvin_key_is_warned():
    cold = cyclesim.run("demo_closed", {"walls.head_temperature_K": 90.0})
    assert any("walls.head_temperature_K = 90 K is below 250 K" in w and "Celsius" in w for w in cold.warnings)
    warm = cyclesim.run("demo_closed", {"walls.head_temperature_K": 300.0})
    assert not any("Celsius" in w for w in warm.warnings)


def test_study_label_and_plot_title_use_the_config_name(tmp_path):
    p = tmp_path / "na20.yaml"
    p.write_text("extends: demo\nname: NA 2.0 four\n")
    assert resolve_case(str(p))[1] == "NA 2.0 four"
    q = tmp_path / "plain.yaml"
    q.write_text("extends: demo_closed\nname: ''\n")
    assert resolve_case(str(q))[1] == str(q)
