"""Constant-state intake and exhaust plenums."""

from __future__ import annotations

from types import SimpleNamespace as NS

import numpy as np
import pytest

from cyclesim.errors import ConfigError
from cyclesim.roles import Boundary, SetupContext
from cyclesim_plugins import boundaries as BD


def make_ctx(B=2, **operating):
    op = dict(intake_pressure_bar=np.array([0.5, 1.8])[:B], intake_temperature_K=np.full(B, 310.0),
              egr_fraction=np.array([0.0, 0.15])[:B], exhaust_pressure_bar=np.full(B, 1.05),
              exhaust_temperature_K=np.full(B, 950.0))
    op.update(operating)
    op = {k: v for k, v in op.items() if v is not None}
    return SetupContext(B=B, geometry=None, speed_rpm=np.full(B, 2000.0), events=NS(),
                        valves=NS(), operating=NS(**op), gas=None, base_dir=None)


def test_registered_class():
    assert all(issubclass(c, Boundary) and c.name for c in BD.SUBMODELS)


def test_constant_plenums_in_si_units():
    b = BD.ConstantPlenums({}, make_ctx())
    p, T, y = b.intake(-300.0, {})
    # 1 bar = 100 kPa by definition (BIPM SI Brochure, 8th ed. 2006, from memory)
    np.testing.assert_array_equal(p, [0.5e5, 1.8e5])
    np.testing.assert_array_equal(T, [310.0, 310.0])
    np.testing.assert_array_equal(y, [0.0, 0.15])
    pe, Te = b.exhaust(200.0, {})
    np.testing.assert_allclose(pe, [1.05e5, 1.05e5], rtol=1e-15)
    np.testing.assert_array_equal(Te, [950.0, 950.0])
    assert p.shape == (2,) and pe.shape == (2,)
    # the same state at every crank angle
    np.testing.assert_array_equal(b.intake(400.0, {})[0], p)


def test_returned_arrays_are_read_only():
    b = BD.ConstantPlenums({}, make_ctx())
    p, _, _ = b.intake(0.0, {})
    with pytest.raises(ValueError):
        p[0] = 0.0


def test_egr_defaults_to_zero():
    b = BD.ConstantPlenums({}, make_ctx(egr_fraction=None))
    np.testing.assert_array_equal(b.intake(0.0, {})[2], [0.0, 0.0])


@pytest.mark.parametrize("key, value, msg", [
    ("exhaust_pressure_bar", None, "missing"),
    ("intake_temperature_K", np.array([300.0, -1.0]), "> 0"),
    ("egr_fraction", np.array([0.0, 1.0]), "egr_fraction"),
])
def test_bad_operating_values(key, value, msg):
    with pytest.raises(ConfigError, match=msg):
        BD.ConstantPlenums({}, make_ctx(**{key: value}))
