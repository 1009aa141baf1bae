"""Shortcuts in the work around the compiled cycle give the numbers of the long way, bit for bit.

Each shortcut here skips work whose result is already known (a fixed-point iteration that has
started to repeat, set-up that one integration or one process already did); the checks compare
the shortcut with the long way on the same inputs, so the reference is the project's own
unshortened code (common practice for a pure optimisation: the result may not move at all).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from cyclesim.api import _registry_for
from cyclesim.config import load_config
from cyclesim.results import figures
from cyclesim.solve.batch import build_batch

B = 6


def _batch():
    cases = [load_config("demo", ["simulation.step_deg=1.0", f"burn.spark_advance_deg={10 + 4 * i}"])
             for i in range(B)]
    return build_batch(cases, _registry_for(cases))


_BATCH = []


def batch():
    if not _BATCH:
        _BATCH.append(_batch())
    return _BATCH[0]


def _outflow(b, T_K, y):
    """Net outflow (mass, enthalpy, fresh-charge mass) of gas at ``T_K`` and burned fraction ``y``
    at the exhaust pressure, as the exhaust-temperature inversion receives it."""
    g = b.gas
    p = b.operating.exhaust_pressure_bar * 1e5 * np.ones(b.B)
    rho = p / (287.0 * T_K)
    for _ in range(4):
        rho = p / (g.mixture(T_K, rho, y).R * T_K)
    mp = g.mixture(T_K, rho, y)
    m = 1e-4 * np.ones(b.B)
    return m, m * (mp.u + mp.R * T_K), m * (1.0 - y)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.floats(300.0, 2500.0), min_size=B, max_size=B),
       st.lists(st.floats(0.0, 1.0), min_size=B, max_size=B))
def test_exhaust_temperature_shortcut_is_bit_for_bit(T_list, y_list):
    b = batch()
    m, H, mu = _outflow(b, np.array(T_list), np.array(y_list))
    fast = figures._exhaust_temperature(b, m, H, mu)
    full = figures._exhaust_temperature(b, m, H, mu, shortcut=False)
    np.testing.assert_array_equal(fast, full)


def test_exhaust_temperature_shortcut_skips_passes_and_finds_the_gas_temperature():
    b = batch()
    T_true = np.linspace(500.0, 1500.0, B)
    m, H, mu = _outflow(b, T_true, np.linspace(0.2, 1.0, B))
    calls = {"n": 0}
    mixture = b.gas.mixture

    def counted(*a):
        calls["n"] += 1
        return mixture(*a)

    b.gas.mixture = counted
    try:
        got = figures._exhaust_temperature(b, m, H, mu)
    finally:
        del b.gas.mixture
    # the inversion recovers the temperature the enthalpy was made at; rtol: the enthalpy here
    # takes the density from four fixed-point passes, the inversion from two (about 1e-11 apart)
    np.testing.assert_allclose(got, T_true, rtol=1e-9)
    # two property calls per pass: fewer passes than the most allowed
    assert calls["n"] < 2 * figures.EXHAUST_T_PASSES


def test_exhaust_temperature_period_two_rounding_cycle():
    """A case left alternating between two neighbouring values by rounding ends on the value the
    full count of passes ends on (the parity of the passes left decides)."""
    b = batch()
    rng = np.random.default_rng(7)
    seen_cycle = False
    for _ in range(30):
        T_true = rng.uniform(400.0, 2000.0, B)
        m, H, mu = _outflow(b, T_true, rng.uniform(0.0, 1.0, B))
        full = figures._exhaust_temperature(b, m, H, mu, shortcut=False)
        np.testing.assert_array_equal(figures._exhaust_temperature(b, m, H, mu), full)
        # a rounding cycle shows as an answer that one more pass would change
        seen_cycle |= _changes_on_one_more_pass(b, m, H, mu, full)
    assert seen_cycle, "no two-value rounding cycle among the samples: the parity branch is untested"


def _changes_on_one_more_pass(b, m, H, mu, T30):
    saved = figures.EXHAUST_T_PASSES
    try:
        figures.EXHAUST_T_PASSES = saved + 1
        T31 = figures._exhaust_temperature(b, m, H, mu, shortcut=False)
    finally:
        figures.EXHAUST_T_PASSES = saved
    return not np.array_equal(T31, T30)


KERNEL_MODULE = '''
import math

SCALE = 2.0
TABLE = [1.0, 2.0]


def helper(x):
    return SCALE * x


def rate(theta, a):
    return helper(a) * math.sin(theta) + TABLE[0]
'''


@pytest.fixture
def kernel_module(tmp_path):
    import importlib.util

    path = tmp_path / "kmod_shortcut.py"
    path.write_text(KERNEL_MODULE)
    spec = importlib.util.spec_from_file_location("kmod_shortcut", path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_the_remembered_kernel_key_follows_every_edit(kernel_module):
    """The loop's in-process key (loopgen._memo) is remembered per kernel function, and is made
    again whenever what it was made from changes: a global rebound, a helper's code replaced, a
    mutable global changed in place, a name defined that was missing."""
    from cyclesim.loops import loopgen

    mod = kernel_module
    parts = (loopgen.Part("burn", "kernel", mod.rate, ("a",)),)

    def key():
        got = loopgen._memo(parts)
        # the remembered key is always the one made from scratch
        assert got[0][-1] == loopgen._fingerprint(mod.rate)
        return got

    k0 = key()
    assert key() == k0                                    # unchanged: the same key
    mod.SCALE = 3.0                                       # a global of a helper rebound
    k1 = key()
    assert k1 != k0
    mod.SCALE = 2.0
    assert key() == k0
    mod.helper.__code__ = (lambda x: 2.0 * x + 0.0).__code__   # a helper's code edited in place
    k2 = key()
    assert k2 != k0
    mod.TABLE[0] = 5.0                                    # a mutable global changed in place
    assert key() != k2
    mod.math = None                                       # a module global rebound
    assert key()[0][-1] != k2[0][-1]


def test_the_plenum_gas_is_worked_out_once_per_batch_and_follows_its_inputs():
    """The constant plenums' gas, reused by a batch's later grids, is the one the cylinder
    system works out afresh, and is worked out again when the boundary gives other values."""
    from cyclesim.solve import kernel
    from cyclesim.solve.solver import _RHS

    b = _batch()
    first = kernel._first_plenums(b, _RHS(b, "full"), -360.0)
    rhs = _RHS(b, "full")
    again = kernel._first_plenums(b, rhs, -360.0)
    assert again is first                                   # reused, not worked out again
    fresh = _RHS(b, "full").plenums(-360.0, {})
    for side in ("int", "exh"):
        for x, y in zip(again[side], fresh[side]):
            np.testing.assert_array_equal(x, y)
    bnd = rhs.bnd
    saved = bnd.p_int
    try:
        bnd.p_int = saved * 1.5                              # the boundary gives another pressure
        other = kernel._first_plenums(b, _RHS(b, "full"), -360.0)
        assert other is not first
        np.testing.assert_array_equal(other["int"][0], saved * 1.5)
        ref = _RHS(b, "full").plenums(-360.0, {})
        for x, y in zip(other["int"], ref["int"]):
            np.testing.assert_array_equal(x, y)
    finally:
        bnd.p_int = saved
