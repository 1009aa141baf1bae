"""What a plug-in author sees when a plug-in is wrong: one line naming the model, the method and
the place, never a bare traceback; and which cycle loop a plug-in runs on."""

from __future__ import annotations

import subprocess
import sys

import pytest

import cyclesim
from cyclesim.solve import kernel
from cyclesim.config import load_config
from cyclesim.errors import PluginError
from cyclesim.registry import Registry, get_plugin_manager, get_registry
from plugin_sources import CONSTANT_H, fake_install

FRICTION = '''
import numpy as np
from cyclesim import hookimpl
from cyclesim.params import Param
from cyclesim.roles import Friction

class Linear(Friction):
    """FMEP = a + b * speed (a test plug-in)."""
    name = "tests_linear_friction"
    summary = "linear in speed"
    params = (Param("a_bar", "bar", 0.8, "constant term", -10, 10),)
    references = ("test plug-in",)
    def fmep(self, f):
        {body}

@hookimpl
def cyclesim_register_submodels():
    return [Linear]
'''


def _friction_case(tmp_path, body: str, name: str = "fr"):
    (tmp_path / f"{name}.py").write_text(FRICTION.replace("{body}", body))
    cfg = tmp_path / f"{name}.yaml"
    cfg.write_text(f"extends: demo\nplugins: [{name}.py]\nfriction: {{model: tests_linear_friction}}\n")
    return load_config(cfg)


def test_friction_plugin_runs_and_its_components_are_reported(tmp_path):
    case = _friction_case(tmp_path, 'return {"rubbing": 1e5 * self.p.a_bar + 1e-3 * f.speed_rpm * 0}')
    res = cyclesim.simulate([case])[0]
    assert res.ok, res.error
    # the component is the model's value [Pa] shown in bar; the total is their sum
    assert res.summary["fmep_rubbing_bar"] == pytest.approx(0.8)
    assert res.summary["fmep_bar"] == pytest.approx(0.8)
    # brake = net indicated - friction (the definition of FMEP, Heywood 1988, eq. 2.20)
    assert res.summary["bmep_bar"] == pytest.approx(res.summary["imep_net_bar"] - 0.8)


@pytest.mark.parametrize("body, expect", [
    ("return f.speed", r"friction model 'tests_linear_friction' raised AttributeError in fmep\(\) \(in fmep, fr\.py:\d+\)"),
    ("return 1e5 * np.ones(3)", r"fmep\(\) must return a dict of FMEP components \[Pa\], got ndarray"),
    ('return {"total": np.full(2, 1e5)}', r"component 'total' has shape \(2,\)"),
    ('return {"total": np.nan}', r"component 'total' is not finite"),
    ('return {"total": "a lot"}', r"component 'total' is not a number"),
])
def test_a_wrong_friction_plugin_fails_its_case_with_one_line(tmp_path, body, expect):
    case = _friction_case(tmp_path, body)
    res = cyclesim.simulate([case])[0]
    assert res.error is not None
    assert "\n" not in res.error
    assert pytest.importorskip("re").search(expect, res.error), res.error
    with pytest.raises(PluginError):
        cyclesim.run(case)


def test_negative_fmep_is_warned(tmp_path):
    case = _friction_case(tmp_path, 'return {"total": -1e5 * np.ones(f.speed_rpm.shape)}')
    res = cyclesim.simulate([case])[0]
    assert res.ok
    assert any("negative FMEP (-1.00 bar)" in w for w in res.warnings), res.warnings


def test_cli_reports_a_raising_friction_plugin_in_one_line_exit_2(tmp_path):
    _friction_case(tmp_path, "raise RuntimeError('no oil')")
    r = subprocess.run([sys.executable, "-m", "cyclesim", "run", str(tmp_path / "fr.yaml")],
                       capture_output=True, text=True)
    assert r.returncode == 2
    assert "Traceback" not in r.stderr
    assert "RuntimeError in fmep() (in fmep, fr.py:" in r.stderr and "no oil" in r.stderr


def test_a_submodel_without_its_method_is_refused_at_registration():
    from cyclesim import hookimpl
    from cyclesim.roles import WallHeatTransfer

    class NoCoefficient(WallHeatTransfer):
        name = "tests_no_coefficient"
        summary = "forgets coefficient()"

    class P:
        @hookimpl
        def cyclesim_register_submodels(self):
            return [NoCoefficient]

    pm = get_plugin_manager()
    pm.register(P())
    with pytest.raises(PluginError, match=r"defines no coefficient\(\) or heat_flow\(\)"):
        Registry(pm)


def test_an_undeclared_parameter_name_lists_the_declared_ones(tmp_path):
    (tmp_path / "typo.py").write_text(CONSTANT_H.replace("self.p.h_W_per_m2K", "self.p.h_W_per_m2k"))
    cfg = tmp_path / "typo.yaml"
    cfg.write_text("extends: demo_closed\nplugins: [typo.py]\nheat_transfer: {model: tests_constant_h}\n")
    res = cyclesim.simulate([load_config(cfg)])[0]
    assert "has no parameter 'h_W_per_m2k'; declared: h_W_per_m2K" in res.error
    # the place named is the plug-in's own line, not the lookup inside cyclesim
    assert "(in coefficient, typo.py:" in res.error


@pytest.fixture
def broken_entry_point(tmp_path, monkeypatch):
    site = fake_install(tmp_path / "site", "brokenheat",
                        {"brokenheat/__init__.py": "import not_a_module_anywhere\n"}, {"brokenheat": "brokenheat"})
    monkeypatch.syspath_prepend(str(site))
    get_registry.cache_clear()
    yield site
    get_registry.cache_clear()


def test_an_installed_plugin_that_fails_to_import_is_named(broken_entry_point):
    with pytest.raises(PluginError, match=r"installed plug-in 'brokenheat' \(brokenheat, from brokenheat\) failed"
                                          r" to import \(ModuleNotFoundError.*pip uninstall brokenheat"):
        get_registry()


def test_a_plugin_file_with_no_hook_is_said(tmp_path, capsys):
    (tmp_path / "nohook.py").write_text(CONSTANT_H.replace("@hookimpl\n", ""))
    get_plugin_manager((str(tmp_path / "nohook.py"),))
    assert "implements no cyclesim hook (is `@hookimpl` missing" in capsys.readouterr().err


def test_the_loop_that_ran_is_recorded(tmp_path, monkeypatch):
    (tmp_path / "myheat.py").write_text(CONSTANT_H)
    cfg = tmp_path / "c.yaml"
    cfg.write_text("extends: demo_closed\nplugins: [myheat.py]\nheat_transfer: {model: tests_constant_h}\n")
    monkeypatch.setenv(kernel.ENV, "python")
    res = cyclesim.simulate([load_config("demo_closed"), load_config(cfg)])
    assert [r.cycle_loop for r in res] == ["numpy (CYCLESIM_KERNEL=python)"] * 2
    assert res[0].summary_json()["cycle_loop"] == res[0].cycle_loop
    monkeypatch.setenv(kernel.ENV, "auto")
    if kernel.compiled_module() is None:
        pytest.skip("numba not installed: the compiled loop is not there to fall back from")
    kernel._told.discard("heat_transfer model 'tests_constant_h' has no compiled form")
    got = cyclesim.simulate([load_config("demo_closed"), load_config(cfg)])
    assert got[0].cycle_loop == "compiled"
    assert got[1].cycle_loop == "numpy (heat_transfer model 'tests_constant_h' has no compiled form)"
    from cyclesim.output import summary_table

    assert "cycle loop: numpy (heat_transfer model" in summary_table(got[1])
    assert "cycle loop" not in summary_table(got[0])
