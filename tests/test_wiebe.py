"""Burn-rate laws: Wiebe identities, phasing specification, rate vs fraction."""

from __future__ import annotations

import math
from types import SimpleNamespace as NS

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.optimize import brentq

from cyclesim.params import validate_section
from cyclesim.roles import BurnRate, GasState, SetupContext
from cyclesim_plugins import wiebe as W


def make_ctx(B: int, evo: float = 130.0) -> SetupContext:
    return SetupContext(B=B, geometry=None, speed_rpm=np.full(B, 2000.0),
                        events=NS(evo=np.full(B, evo)), valves=NS(), operating=NS(),
                        gas=None, base_dir=None)


def build(cls, B: int = 1, **values):
    """A law with its declared defaults, overridden by ``values`` (broadcast to (B,))."""
    vals = validate_section({}, cls.params, cls.name)
    vals.update(values)
    vals = {k: np.broadcast_to(np.asarray(v, dtype=float), (B,)).copy() for k, v in vals.items()}
    return cls(vals, make_ctx(B))


def rate_at(law, theta: float) -> np.ndarray:
    return law.rate(GasState(theta=theta))


def independent_wiebe(theta, theta0, dtheta, a, m):
    """x_b = 1 - exp(-a ((theta - theta0)/dtheta)^(m+1)) (Wiebe 1970; Heywood 1988, ch. 9)."""
    if theta <= theta0:
        return 0.0
    return 1.0 - math.exp(-a * ((theta - theta0) / dtheta) ** (m + 1))


def test_declared_defaults_validate():
    for cls in W.SUBMODELS:
        assert issubclass(cls, BurnRate) and cls.name
        validate_section({}, cls.params, cls.name)  # raises if a default is out of range


@pytest.mark.parametrize("x, u_ref", [(0.10, 0.2762), (0.50, 0.5175), (0.90, 0.7722)])
def test_fraction_points_a5_m2(x, u_ref):
    # Wiebe 1970 / Heywood 1988 ch. 9, a = 5, m = 2: x burned at u_ref of dtheta
    # (identities computed from the Wiebe function; 4-digit values).
    law = build(W.Wiebe, spark_advance_deg=20.0, ignition_delay_deg=5.0, duration_deg=60.0)
    assert W.fraction_point(x, 5.0, 2.0) == pytest.approx(u_ref, abs=5e-5)  # 4-digit rounding
    theta = -15.0 + u_ref * 60.0
    # slope dx/du <= 1.6 here, so 5e-5 in u is < 1e-4 in x
    assert law.fraction(np.array([theta]))[0, 0] == pytest.approx(x, abs=1e-4)


def test_fraction_at_duration_is_one_minus_exp_minus_a():
    # Wiebe 1970 / Heywood 1988 ch. 9: x_b(theta0 + dtheta) = 1 - e^-a = 0.99326 for a = 5.
    law = build(W.Wiebe, spark_advance_deg=30.0, ignition_delay_deg=10.0, duration_deg=55.0)
    assert law.start_deg()[0] == pytest.approx(-20.0)
    assert law.spark_deg()[0] == pytest.approx(-30.0)
    x = law.fraction(np.array([35.0]))[0, 0]
    assert x == pytest.approx(1.0 - math.exp(-5.0), rel=1e-12)
    assert x == pytest.approx(0.9933, abs=5e-5)  # 4-digit value of the identity


@pytest.mark.parametrize("a, m", [(5.0, 2.0), (6.9, 1.5), (3.0, 0.0)])
def test_fraction_matches_independent_formula(a, m):
    law = build(W.Wiebe, spark_advance_deg=15.0, ignition_delay_deg=3.0, duration_deg=45.0, a=a, m=m)
    thetas = np.array([-40.0, -12.0, -11.0, 0.0, 10.0, 30.0, 80.0])
    got = law.fraction(thetas)[0]
    want = [independent_wiebe(t, -12.0, 45.0, a, m) for t in thetas]
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("cls, extra", [
    (W.Wiebe, {"m": 2.0}),
    (W.Wiebe, {"m": 0.5, "a": 6.9}),
    (W.WiebeCA50, {}),
    (W.DoubleWiebe, {}),
])
def test_rate_integrates_to_fraction(cls, extra):
    # scipy.integrate.quad of the rate is the independent reference for the closed form.
    law = build(cls, **extra)
    t0 = float(law.start_deg()[0])
    for upper in (t0 + 5.0, t0 + 20.0, 40.0, 120.0):
        integral, _ = quad(lambda t: rate_at(law, t)[0], t0 - 10.0, upper,
                           points=[t0], limit=200, epsabs=1e-12)
        assert integral == pytest.approx(law.fraction(np.array([upper]))[0, 0], abs=1e-8)


def test_no_burning_before_start_or_after_cycle_end():
    law = build(W.Wiebe)
    t0 = float(law.start_deg()[0])
    assert rate_at(law, t0 - 1e-6)[0] == 0.0
    assert rate_at(law, t0 + 1.0)[0] > 0.0
    # 360 deg is the end of the exhaust stroke: the next charge, no burning
    assert rate_at(law, 360.0)[0] == 0.0
    assert rate_at(law, 500.0)[0] == 0.0
    x = law.fraction(np.array([359.999, 360.0, 400.0, 575.0]))[0]
    assert np.all(x == x[1])  # held after the cycle end
    assert x[0] == pytest.approx(x[1], abs=1e-12)


def test_ca50_specification_round_trips():
    law = build(W.WiebeCA50, B=3, ca50_deg=np.array([4.0, 8.0, 15.0]),
                burn_10_90_deg=np.array([18.0, 25.0, 40.0]), m=np.array([2.0, 1.5, 3.0]),
                ignition_delay_deg=np.array([6.0, 8.0, 12.0]))

    def angle_at(b, x):
        return brentq(lambda t: law.fraction(np.array([t]))[b, 0] - x, -150.0, 200.0, xtol=1e-10)

    for b, (ca50, d1090) in enumerate([(4.0, 18.0), (8.0, 25.0), (15.0, 40.0)]):
        assert angle_at(b, 0.5) == pytest.approx(ca50, abs=1e-7)
        assert angle_at(b, 0.9) - angle_at(b, 0.1) == pytest.approx(d1090, abs=1e-7)
    np.testing.assert_allclose(law.spark_deg(), law.start_deg() - [6.0, 8.0, 12.0])


def test_ca50_law_equals_spark_timed_law_with_reported_spark():
    ca = build(W.WiebeCA50, ca50_deg=9.0, burn_10_90_deg=22.0, ignition_delay_deg=7.0)
    sp = build(W.Wiebe, spark_advance_deg=-ca.spark_deg()[0], ignition_delay_deg=7.0,
               duration_deg=ca.duration[0])
    grid = np.linspace(-60.0, 120.0, 37)
    np.testing.assert_allclose(ca.fraction(grid), sp.fraction(grid), atol=1e-12)
    assert rate_at(ca, 3.0)[0] == pytest.approx(rate_at(sp, 3.0)[0], rel=1e-12)


def test_double_wiebe_is_weighted_sum():
    # Two-function form of Miyamoto et al. 1985 (SAE 850107), from memory.
    v = dict(spark_advance_deg=28.0, ignition_delay_deg=6.0, first_fraction=0.7,
             first_duration_deg=40.0, first_m=2.0, second_offset_deg=12.0,
             second_duration_deg=70.0, second_m=1.0, a=5.0)
    law = build(W.DoubleWiebe, **v)
    t0 = -22.0
    for t in (-30.0, -10.0, 0.0, 15.0, 60.0, 200.0):
        want = (0.7 * independent_wiebe(t, t0, 40.0, 5.0, 2.0)
                + 0.3 * independent_wiebe(t, t0 + 12.0, 70.0, 5.0, 1.0))
        assert law.fraction(np.array([t]))[0, 0] == pytest.approx(want, rel=1e-12, abs=1e-15)
    assert law.fraction(np.array([359.0]))[0, 0] == pytest.approx(1.0, abs=1e-9)
    assert rate_at(law, 365.0)[0] == 0.0


def test_batch_cases_are_independent():
    B = 4
    sa = np.array([10.0, 20.0, 30.0, 40.0])
    dur = np.array([40.0, 50.0, 60.0, 70.0])
    batch = build(W.Wiebe, B=B, spark_advance_deg=sa, duration_deg=dur)
    for b in range(B):
        one = build(W.Wiebe, spark_advance_deg=sa[b], duration_deg=dur[b])
        for t in (-25.0, 0.0, 20.0):
            assert rate_at(batch, t)[b] == rate_at(one, t)[0]


def test_efficiency_and_incomplete_burn_warning():
    law = build(W.Wiebe, B=2, combustion_efficiency=np.array([0.95, 0.97]),
                spark_advance_deg=np.array([25.0, -20.0]), duration_deg=np.array([50.0, 200.0]))
    np.testing.assert_allclose(law.combustion_efficiency(), [0.95, 0.97])
    w = law.warnings({})
    assert w[0] == [] and len(w[1]) == 1 and "exhaust valve opening" in w[1][0]


def test_motored_law_never_burns():
    law = W.NoBurn({}, make_ctx(3))
    assert np.all(law.start_deg() > 1e8)
    np.testing.assert_array_equal(law.combustion_efficiency(), 0.0)
    np.testing.assert_array_equal(rate_at(law, 10.0), 0.0)
    assert law.fraction(np.linspace(-100, 100, 5)).shape == (3, 5)
