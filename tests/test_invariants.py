"""Invariants of the submodels over random inputs (hypothesis): no NaN, physical signs, monotone laws.

Each property is a law of the physics, not a value: internal energy rises with temperature at
constant density and composition (cv > 0, second law), R > 0 and 1 < gamma < 5/3 for any gas of
these molecules (kinetic theory: a monatomic gas has the largest gamma, 5/3); a burn fraction
stays in [0, 1] and never decreases (the charge cannot unburn); the Livengood-Wu integral of
1/tau never decreases (tau > 0: Livengood & Wu 1955); orifice flow runs from the higher pressure
to the lower (second law; Heywood 1988 app. C).
"""

from __future__ import annotations

import functools
from types import SimpleNamespace as NS

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from cyclesim.fuels import get_fuel
from cyclesim.params import validate_section
from cyclesim.roles import GasState, SetupContext
from cyclesim.solve.gas_tables import build_gas_tables
from cyclesim_plugins import knock as K
from cyclesim_plugins import wiebe as W

SETTINGS = dict(deadline=None, derandomize=True, database=None, max_examples=60)


@functools.lru_cache(maxsize=None)
def tables(fuel: str, phi: float, burned: str):
    return build_gas_tables(get_fuel(fuel, {}), [phi], burned)


@settings(**SETTINGS)
@given(fuel=st.sampled_from(["gasoline", "methane"]), phi=st.sampled_from([0.7, 1.0, 1.3]),
       burned=st.sampled_from(["equilibrium", "complete"]),
       T=st.floats(250.0, 3900.0), rho=st.floats(0.01, 300.0), y=st.floats(0.0, 1.0))
def test_gas_properties_are_finite_and_physical(fuel, phi, burned, T, rho, y):
    g = tables(fuel, phi, burned)
    a = g.mixture(np.array([T]), np.array([rho]), np.array([y]))
    for name, v in a._asdict().items():
        assert np.all(np.isfinite(v)), name
    assert a.cv[0] > 0.0 and a.R[0] > 0.0
    assert 1.0 < a.gamma[0] < 5.0 / 3.0
    # u rises with T (finite step; cv > 0 holds between the table nodes too)
    b = g.mixture(np.array([T + 5.0]), np.array([rho]), np.array([y]))
    assert b.u[0] > a.u[0]


def _law(cls, **values):
    vals = validate_section({}, cls.params, cls.name)
    vals.update(values)
    vals = {k: np.array([float(v)]) if not isinstance(v, str) else v for k, v in vals.items()}
    ctx = SetupContext(B=1, geometry=None, speed_rpm=np.full(1, 2000.0), events=NS(evo=np.full(1, 130.0)),
                       valves=NS(), operating=NS(), gas=None, base_dir=None)
    return cls(vals, ctx)


THETA = np.linspace(-80.0, 200.0, 561)


def _check_burn(law):
    x = law.fraction(THETA)[0]
    assert np.all(np.isfinite(x))
    assert np.all((x >= 0.0) & (x <= 1.0))
    assert np.all(np.diff(x) >= -1e-12)
    r = np.array([law.rate(GasState(theta=float(t)))[0] for t in THETA[::8]])
    assert np.all(np.isfinite(r)) and np.all(r >= 0.0)


@settings(**SETTINGS)
@given(spark=st.floats(-20.0, 60.0), delay=st.floats(0.0, 30.0), duration=st.floats(5.0, 120.0),
       a=st.floats(0.5, 10.0), m=st.floats(0.0, 6.0))
def test_wiebe_burn_stays_in_0_1_and_never_decreases(spark, delay, duration, a, m):
    _check_burn(_law(W.Wiebe, spark_advance_deg=spark, ignition_delay_deg=delay, duration_deg=duration,
                     a=a, m=m))


@settings(**SETTINGS)
@given(f1=st.floats(0.0, 1.0), d1=st.floats(5.0, 80.0), m1=st.floats(0.0, 6.0), off=st.floats(-20.0, 40.0),
       d2=st.floats(5.0, 150.0), m2=st.floats(0.0, 6.0))
def test_double_wiebe_burn_stays_in_0_1_and_never_decreases(f1, d1, m1, off, d2, m2):
    _check_burn(_law(W.DoubleWiebe, first_fraction=f1, first_duration_deg=d1, first_m=m1,
                     second_offset_deg=off, second_duration_deg=d2, second_m=m2))


class _ConstantCpGas:
    def unburned(self, T):
        T = np.asarray(T, float)
        return 750.0 * T, np.full_like(T, 750.0), np.full_like(T, 287.0)


@settings(**SETTINGS)
@given(p=st.floats(1e4, 2e7), p_ivc=st.floats(2e4, 4e5), T_ivc=st.floats(280.0, 500.0),
       x_b=st.floats(0.0, 1.0), octane=st.floats(60.0, 110.0))
def test_livengood_wu_integral_never_decreases(p, p_ivc, T_ivc, x_b, octane):
    vals = validate_section({"octane_number": octane}, K.LivengoodWu.params, "knock")
    vals = {k: np.array([float(v)]) for k, v in vals.items()}
    ctx = SetupContext(B=1, geometry=None, speed_rpm=np.full(1, 3000.0),
                       events=NS(ivc=np.full(1, -136.0), evo=np.full(1, 134.0)), valves=NS(),
                       operating=NS(), gas=_ConstantCpGas(), base_dir=None)
    law = K.LivengoodWu(vals, ctx)
    s = GasState(theta=0.0, p=np.array([p]), p_ivc=np.array([p_ivc]), T_ivc=np.array([T_ivc]),
                 x_b=np.array([x_b]), closed=np.array([True]), sub={})
    rate = law.derivatives(s)[law.STATE]
    assert np.all(np.isfinite(rate)) and np.all(rate >= 0.0)
