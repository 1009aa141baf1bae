"""Role contracts the solver and the studies rely on: step control and spark timing.

A plug-in's burn is step-limited by what it declares (``shortest_feature_deg_for``), never by
the name of a parameter, and an undeclared one keeps the fine step; the spark studies find the
spark parameter through ``BurnRate.spark_param``.
"""

from __future__ import annotations

import pytest

from cyclesim import simulate
from cyclesim.config import load_config
from cyclesim.errors import ConfigError
from cyclesim.registry import get_registry, spark_param
from cyclesim.roles import ROLES
from cyclesim.solve.solver import CLOSED_STEP_FACTOR, MIN_FEATURE_STEPS, closed_step_factor

SHORT_BURN = '''
import numpy as np
from cyclesim import hookimpl
from cyclesim.params import Param
from cyclesim.roles import BurnRate


def _rate(theta, start, length):
    """A half-sine burn rate [1/deg] over ``length`` deg from ``start``: x_b goes 0 -> 1."""
    u = (theta - start) / length
    on = (u > 0.0) & (u < 1.0) & (theta < 360.0)
    return np.where(on, 0.5 * np.pi / length * np.sin(np.pi * np.where(on, u, 0.0)), 0.0)


class _Sine(BurnRate):
    params = (Param("ignition_btdc_deg", "deg", 10.0, "spark timing before TDC", -30, 80),
              Param("burn_length_deg", "deg", 10.0, "length of the burn", 1, 180, min_exclusive=True))
    references = ("test plug-in",)

    def __init__(self, values, ctx):
        super().__init__(values, ctx)
        self.start = -np.broadcast_to(np.asarray(self.p.ignition_btdc_deg, float), (self.B,)).copy()
        self.length = np.broadcast_to(np.asarray(self.p.burn_length_deg, float), (self.B,)).copy()

    def start_deg(self):
        return self.start.copy()

    def rate(self, s):
        return _rate(s.theta, self.start, self.length)


class DeclaredSine(_Sine):
    """Declares its shortest feature and its spark parameter."""
    name = "tests_declared_sine"
    summary = "half-sine burn that declares its contract"
    spark_param = "ignition_btdc_deg"

    @classmethod
    def shortest_feature_deg_for(cls, params):
        return float(params["burn_length_deg"])


class SilentSine(_Sine):
    """Declares nothing: the solver cannot know its burn length."""
    name = "tests_silent_sine"
    summary = "half-sine burn without a declared contract"


@hookimpl
def cyclesim_register_submodels():
    return [DeclaredSine, SilentSine]
'''


@pytest.fixture
def sine(tmp_path):
    (tmp_path / "sineburn.py").write_text(SHORT_BURN)
    cfg = tmp_path / "sine.yaml"
    cfg.write_text("extends: demo_closed\nplugins: [sineburn.py]\n"
                   "burn: {model: tests_declared_sine, ignition_btdc_deg: 10, burn_length_deg: 10}\n")
    return cfg


def _k(case) -> int:
    reg = get_registry(tuple(case.plugins))
    classes = {role: reg.submodel_class(role, case.submodels[role].model) for role in ROLES}
    return closed_step_factor(case, classes)


def test_a_declared_short_burn_keeps_the_fine_step_and_a_long_one_does_not(sine):
    # 16 steps across the feature (MIN_FEATURE_STEPS) at 0.5 deg need a step multiple of 1 for a
    # 10 deg burn (10 / 8 = 1.25) and allow the full factor for an 80 deg one (80 / 8 = 10)
    assert MIN_FEATURE_STEPS == 16 and CLOSED_STEP_FACTOR == 4
    assert _k(load_config(str(sine))) == 1
    assert _k(load_config(str(sine), ["burn.burn_length_deg=80"])) == CLOSED_STEP_FACTOR
    assert _k(load_config(str(sine), ["burn.burn_length_deg=20"])) == 2


def test_an_undeclared_burn_keeps_the_fine_step(sine):
    # the default contract (BurnRate.shortest_feature_deg_for = 0: not known at set-up)
    assert _k(load_config(str(sine), ["burn.model=tests_silent_sine", "burn.burn_length_deg=80"])) == 1


def test_the_built_in_burns_declare_their_durations():
    # Wiebe: its duration; CA50 form: its 10-90 % angle; double: the shorter; motored: none
    assert _k(load_config("demo", ["burn.duration_deg=20"])) == 2
    assert _k(load_config("demo", ["burn.model=wiebe_ca50", "burn.burn_10_90_deg=12"])) == 1
    assert _k(load_config("demo", ["burn.model=double_wiebe", "burn.first_duration_deg=90",
                                   "burn.second_duration_deg=40"])) == 4
    assert _k(load_config("demo", ["burn.model=none"])) == CLOSED_STEP_FACTOR


def test_a_short_plugin_burn_moves_imep_by_less_than_the_self_check_bound(sine):
    # the loss the step limit prevents: a 10 deg burn at 0.5 deg against a fourfold finer step
    # (without the limit the closed part would step 2 deg, five steps across the burn).  Bound:
    # the step self-check's 0.2 % (cyclesim.solve.stepcheck.IMEP_BOUND)
    from cyclesim.solve.stepcheck import IMEP_BOUND

    coarse, fine = simulate([load_config(str(sine)), load_config(str(sine), ["simulation.step_deg=0.125"])])
    assert coarse.error is None and fine.error is None
    k = "imep_closed_bar"
    assert abs(coarse.summary[k] / fine.summary[k] - 1.0) < IMEP_BOUND


def test_spark_parameter_comes_from_the_contract(sine):
    from cyclesim.studies.spark import _check_burn_model

    case = load_config(str(sine))
    assert spark_param(case, "x") == "ignition_btdc_deg"
    assert _check_burn_model(case) == "burn.ignition_btdc_deg"
    assert _check_burn_model(load_config("demo")) == "burn.spark_advance_deg"
    with pytest.raises(ConfigError, match="spark"):
        _check_burn_model(load_config(str(sine), ["burn.model=tests_silent_sine"]))
    with pytest.raises(ConfigError, match="not timed by a spark"):
        spark_param(load_config("demo", ["burn.model=wiebe_ca50"]), "knock limit")


def test_engine_spark_spread_varies_the_declared_parameter(sine, tmp_path):
    from cyclesim.engine import EngineSetup, cylinder_cases

    cfg = tmp_path / "sine_engine.yaml"
    cfg.write_text(f"extends: {sine}\nsimulation: {{mode: full}}\n"
                   "multi_cylinder: {spread_spark_deg: [0.0, 1.5, -0.5, 0.0]}\n")
    case = load_config(str(cfg))
    cyl = cylinder_cases(EngineSetup(case=case))
    got = [c.submodels["burn"].params["ignition_btdc_deg"] for c in cyl]
    assert got == pytest.approx([10.0, 11.5, 9.5, 10.0])


def test_step_self_check_warns_only_where_the_step_does_not_resolve_the_burn(sine, monkeypatch):
    from cyclesim.solve.stepcheck import ENV, IMEP_BOUND, step_check

    good = load_config("demo_closed")
    # a 2 deg burn at a 1 deg step: two steps across it cannot resolve it
    bad = load_config(str(sine), ["burn.burn_length_deg=2", "simulation.step_deg=1.0"])
    res = simulate([good, bad])
    d = step_check([good, bad], res, simulate=simulate)
    assert d[0] is not None and d[0] < IMEP_BOUND
    assert not any("step self-check" in w for w in res[0].warnings)
    assert d[1] is not None and d[1] > IMEP_BOUND
    assert any("step self-check" in w for w in res[1].warnings)
    # on request through the environment, simulate() runs it itself
    monkeypatch.setenv(ENV, "1")
    again = simulate([bad])
    assert any("step self-check" in w for w in again[0].warnings)
