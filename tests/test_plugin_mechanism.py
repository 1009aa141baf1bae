"""The plug-in mechanism: a third-party package registers a submodel through the entry point."""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap

import pytest

from cyclesim import registry as reg_mod
from cyclesim.config import load_config
from cyclesim.roles import ROLE_BASES, ROLES
from cyclesim.registry import get_registry
from plugin_sources import CONSTANT_H, fake_install


@pytest.fixture
def third_party(tmp_path, monkeypatch):
    site = fake_install(tmp_path / "site", "tinyheat", {"tinyheat/__init__.py": CONSTANT_H},
                        {"tinyheat": "tinyheat"})
    monkeypatch.syspath_prepend(str(site))
    get_registry.cache_clear()
    yield site
    get_registry.cache_clear()
    sys.modules.pop("tinyheat", None)


def test_third_party_plugin_is_discovered_and_selected(third_party, tmp_path):
    reg = get_registry()
    assert "tests_constant_h" in reg.submodels["heat_transfer"]
    cfg = tmp_path / "c.yaml"
    cfg.write_text(textwrap.dedent("""
        extends: demo_closed
        heat_transfer: {model: tests_constant_h, h_W_per_m2K: 800}
    """))
    import cyclesim

    case = load_config(cfg)
    assert case.submodels["heat_transfer"].params["h_W_per_m2K"] == 800
    res = cyclesim.run(case)
    hot = cyclesim.run(load_config(cfg, ["heat_transfer.h_W_per_m2K=1600"]))
    # doubling the coefficient must roughly double the wall heat (the plug-in really runs)
    ratio = hot.summary["wall_heat_J"] / res.summary["wall_heat_J"]
    assert 1.6 < ratio < 2.1
    # and the CLI sees it through the same entry point
    env = dict(os.environ, PYTHONPATH=str(third_party) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    r = subprocess.run([sys.executable, "-m", "cyclesim", "plugins", "heat_transfer"],
                       capture_output=True, text=True, env=env)
    assert r.returncode == 0 and "tests_constant_h" in r.stdout


def test_builtins_register_through_entry_point():
    from importlib.metadata import entry_points

    eps = [e for e in entry_points(group="cyclesim") if e.name == "builtin"]
    assert eps and eps[0].value == "cyclesim_plugins"
    reg = get_registry()
    for role in ROLES:
        assert "none" in reg.submodels[role] or role in ("boundary",), f"role {role} lacks a 'none' model"


def test_every_model_declares_name_params_references():
    reg = get_registry()
    for role, table in reg.submodels.items():
        for name, cls in table.items():
            assert issubclass(cls, ROLE_BASES[role])
            assert cls.name == name and cls.summary
            for p in cls.params:
                assert p.doc and p.unit, f"{role}.{name}.{p.name} lacks doc or unit"
            if name != "none":
                assert cls.references, f"{role}.{name} names no reference"


def test_duplicate_registration_is_an_error():
    import pluggy

    from cyclesim import hookimpl
    from cyclesim import hookspecs
    from cyclesim.errors import PluginError

    class Dup(ROLE_BASES["friction"]):
        name = "none"
        summary = "dup"

        def fmep(self, f):
            return {}

    class P:
        @hookimpl
        def cyclesim_register_submodels(self):
            return [Dup]

    pm = reg_mod.get_plugin_manager()
    pm.register(P())
    with pytest.raises(PluginError, match="registered twice"):
        reg_mod.Registry(pm)


def test_explicit_plugin_path_from_config(tmp_path):
    f = tmp_path / "myheat.py"
    f.write_text(CONSTANT_H.replace("tests_constant_h", "tests_constant_h2"))
    cfg = tmp_path / "c.yaml"
    cfg.write_text("extends: demo_closed\nplugins: [myheat.py]\nheat_transfer: {model: tests_constant_h2}\n")
    case = load_config(cfg)
    assert case.submodels["heat_transfer"].model == "tests_constant_h2"


def _guide_blocks(lang: str) -> list[str]:
    """The ``lang`` code blocks of DEVELOPERS.md, in order."""
    import pathlib
    import re

    text = (pathlib.Path(__file__).resolve().parents[1] / "DEVELOPERS.md").read_text()
    return re.findall(rf"```{lang}\n(.*?)```", text, flags=re.S)


def test_the_guides_example_package_works_as_written(tmp_path, monkeypatch):
    """The plug-in package of DEVELOPERS.md, installed as its pyproject says (an entry point to
    the module), chosen by its YAML example and run: the guide cannot drift from the code."""
    import tomllib

    py = next(b for b in _guide_blocks("python") if "# mypkg/models.py" in b)
    toml = tomllib.loads(next(b for b in _guide_blocks("toml") if "[project.entry-points.cyclesim]" in b))
    yml = next(b for b in _guide_blocks("yaml") if "# my.yaml" in b)
    (ep_name, target), = toml["project"]["entry-points"]["cyclesim"].items()
    pkg, mod = target.split(".")
    site = fake_install(tmp_path / "site", toml["project"]["name"],
                        {f"{pkg}/__init__.py": "", f"{pkg}/{mod}.py": py}, {ep_name: target},
                        toml["project"]["version"])
    monkeypatch.syspath_prepend(str(site))
    get_registry.cache_clear()
    try:
        cfg = tmp_path / "my.yaml"
        cfg.write_text(yml)
        import cyclesim

        from cyclesim.solve import kernel

        before = kernel._used["compiled"]
        res = cyclesim.run(load_config(cfg))
        assert res.models["heat_transfer"] == "mypkg_constant_h" and res.models["friction"] == "mypkg_quadratic"
        if kernel.compiled_module() is not None:
            # the guide's heat transfer is a kernel: the batch ran compiled
            assert res.cycle_loop == "compiled" and kernel._used["compiled"] > before
        # FMEP = a + b N + c N^2 at 3 krpm with the YAML's a = 0.9 and the defaults b 0.1, c 0.05
        assert res.summary["fmep_bar"] == pytest.approx(0.9 + 0.1 * 3 + 0.05 * 9, rel=1e-12)
        assert res.inputs["heat_transfer.h_W_per_m2K"] == 500
    finally:
        get_registry.cache_clear()
        sys.modules.pop(target.split(".")[0], None)
        sys.modules.pop(target, None)
