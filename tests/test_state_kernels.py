"""Submodel states compiled from their declarations and state kernels (cyclesim.loops.loopgen).

Checked against: the time integral of the traced pressure by the trapezoidal rule
(scipy.integrate.trapezoid) and the closed part's duration from the crank speed, (EVO - IVC) /
(6 rpm) [s] (common practice: crank angle over crank speed); and the same model on the Python path.
"""

from __future__ import annotations

import sys

import numpy as np
import pytest

from cyclesim.solve import kernel
from cyclesim import simulate
from cyclesim.config import load_config
from cyclesim.registry import get_registry
from plugin_sources import STATE_KNOCK, fake_install

numba = pytest.importorskip("numba")


@pytest.fixture
def package(tmp_path, monkeypatch, tmp_path_factory):
    monkeypatch.setenv("CYCLESIM_CACHE_DIR", str(tmp_path_factory.getbasetemp() / "loops_states"))
    site = fake_install(tmp_path / "site", "kstate", {"kstate/__init__.py": STATE_KNOCK}, {"kstate": "kstate"})
    monkeypatch.syspath_prepend(str(site))
    get_registry.cache_clear()
    yield site
    get_registry.cache_clear()
    sys.modules.pop("kstate", None)


def test_a_plugin_with_two_states_of_its_own_runs_compiled(package, capsys):
    before = kernel._used["compiled"]
    cfg = load_config("demo_closed", ["knock.model=tests_pressure_time", "knock.p_ref_bar=2"])
    res = simulate([cfg])[0]
    assert res.error is None
    assert res.cycle_loop == "compiled"
    assert kernel._used["compiled"] > before          # the compiled-cycle counter rose
    assert "numpy loop" not in capsys.readouterr().err  # and no fall-back notice
    from scipy.integrate import trapezoid

    th = np.asarray(res.trace["crank_deg"], float)
    p = np.asarray(res.trace["pressure_bar"], float) * 1e5
    rpm = res.inputs["operating.speed_rpm"]
    t_closed = (th[-1] - th[0]) / (6.0 * rpm)
    assert res.trace["knock.t"][-1] == pytest.approx(t_closed, rel=1e-12)
    P_ref = trapezoid(p / 2e5, th) / (6.0 * rpm)
    assert res.trace["knock.P"][-1] == pytest.approx(P_ref, rel=1e-4)
    assert res.trace["knock.P"][-1] != pytest.approx(P_ref / 2.0, rel=1e-2)   # p_ref reached the kernel


def test_the_state_kernel_on_the_python_path_agrees(package, monkeypatch):
    cfg = load_config("demo", ["knock.model=tests_pressure_time"])
    comp = simulate([cfg])[0]
    monkeypatch.setenv(kernel.ENV, "python")
    py = simulate([cfg])[0]
    assert comp.cycle_loop == "compiled" and py.cycle_loop.startswith("numpy")
    for k in ("knock.P", "knock.t", "pressure_bar"):
        np.testing.assert_allclose(comp.trace[k], py.trace[k], rtol=1e-9, atol=1e-12)
    assert comp.summary["cycles_to_converge"] == py.summary["cycles_to_converge"]


def test_the_built_in_states_are_declared_by_their_models():
    from cyclesim.loops import _compiled
    from cyclesim.loops.loopgen import state_kernel_of

    reg = get_registry()
    for role, name, state in (("heat_transfer", "woschni", "T_mot"), ("knock", "livengood_wu", "I")):
        cls = reg.submodel_class(role, name)
        assert state_kernel_of(cls) is not None and kernel.states_compile(cls)
    assert not hasattr(_compiled, "STATES")
    assert not any("." in k for k in _compiled.IC_ROWS)      # no state row fixed in the loop


def test_a_subclass_that_overrides_derivatives_alone_runs_on_the_python_path():
    from cyclesim.roles import GasState

    lw = get_registry().submodel_class("knock", "livengood_wu")

    class Edited(lw):
        def derivatives(self, s: GasState):
            return {"I": 0.0 * s.p}

    assert not kernel.states_compile(Edited)
    assert kernel.form_of_class(Edited) is None
