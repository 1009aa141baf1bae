"""Compressible orifice flow: textbook relations, continuity, antisymmetry."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cyclesim.cylinder.flow import critical_pressure_ratio, flow_function, orifice_mass_flow

R_AIR = 287.0
CDA = 1e-4  # m^2


def textbook_subsonic(cda, p0, T0, pT, R, g):
    # Heywood 1988, App. C: mdot = CdA p0 (R T0)^-1/2 (pT/p0)^(1/g) {2g/(g-1) [1 - (pT/p0)^((g-1)/g)]}^1/2
    r = pT / p0
    return cda * p0 / np.sqrt(R * T0) * r ** (1 / g) * np.sqrt(2 * g / (g - 1) * (1 - r ** ((g - 1) / g)))


def textbook_choked(cda, p0, T0, R, g):
    # Heywood 1988, App. C: mdot = CdA p0 (R T0)^-1/2 g^1/2 (2/(g+1))^((g+1)/(2(g-1)))
    return cda * p0 / np.sqrt(R * T0) * np.sqrt(g) * (2 / (g + 1)) ** ((g + 1) / (2 * (g - 1)))


def flow(p1, p2, T1=300.0, T2=300.0, g1=1.4, g2=1.4, R1=R_AIR, R2=R_AIR, **kw):
    return orifice_mass_flow(CDA, p1, T1, R1, g1, p2, T2, R2, g2, **kw)


def test_critical_pressure_ratio():
    # Heywood 1988, App. C: (2/(g+1))^(g/(g-1)) = 0.5283 at g = 1.4 (4 digits given).
    assert critical_pressure_ratio(1.4) == pytest.approx(0.5283, abs=5e-5)
    # g = 1.3: the same relation evaluated by hand, (2/2.3)^(1.3/0.3) = 0.5457
    assert critical_pressure_ratio(1.3) == pytest.approx(0.5457, abs=5e-5)


def test_choked_air_flux_constant():
    # Air, g = 1.4, R = 287: choked mdot = 0.0404 A p0 / sqrt(T0) [SI] (Anderson, Modern
    # Compressible Flow, 3rd ed. 2003, ch. 5, from memory); 3 digits given -> rtol 2e-3.
    m = flow(10e5, 1e5, T1=500.0)
    assert m == pytest.approx(0.0404 * CDA * 10e5 / np.sqrt(500.0), rel=2e-3)


@pytest.mark.parametrize("g", [1.3, 1.35, 1.4])
@pytest.mark.parametrize("ratio", [0.1, 0.3, 0.5])
def test_choked_matches_textbook(g, ratio):
    if ratio > critical_pressure_ratio(g):
        pytest.skip("not choked")
    p0, T0 = 20e5, 900.0
    m = flow(p0, ratio * p0, T1=T0, g1=g, g2=g)
    assert m == pytest.approx(textbook_choked(CDA, p0, T0, R_AIR, g), rel=1e-12)


@pytest.mark.parametrize("g", [1.3, 1.4])
@pytest.mark.parametrize("ratio", [0.6, 0.8, 0.95, 0.99])
def test_subsonic_matches_textbook(g, ratio):
    p0, T0 = 3e5, 700.0
    m = flow(p0, ratio * p0, T1=T0, g1=g, g2=g)
    assert m == pytest.approx(textbook_subsonic(CDA, p0, T0, ratio * p0, R_AIR, g), rel=1e-12)


@pytest.mark.parametrize("g", [1.3, 1.4])
def test_continuous_at_critical_ratio(g):
    # Subsonic and choked relations meet at the critical ratio (Heywood 1988, App. C).
    p0 = 5e5
    rc = critical_pressure_ratio(g)
    lo = flow(p0, rc * (1 - 1e-9) * p0, g1=g, g2=g)
    hi = flow(p0, rc * (1 + 1e-9) * p0, g1=g, g2=g)
    assert hi == pytest.approx(lo, rel=1e-8)
    assert textbook_subsonic(CDA, p0, 300.0, rc * p0, R_AIR, g) == pytest.approx(
        textbook_choked(CDA, p0, 300.0, R_AIR, g), rel=1e-12
    )


@pytest.mark.parametrize("dp_lin", [1e-3, 1e-2])
def test_continuous_at_linearisation_threshold_and_linear_below(dp_lin):
    p0 = 1e5
    below = flow(p0, p0 * (1 - dp_lin * (1 - 1e-9)), dp_lin=dp_lin)
    above = flow(p0, p0 * (1 - dp_lin * (1 + 1e-9)), dp_lin=dp_lin)
    assert below == pytest.approx(above, rel=1e-7)
    # at the threshold the value is the subsonic law's (Heywood 1988, App. C)
    assert above == pytest.approx(textbook_subsonic(CDA, p0, 300.0, p0 * (1 - dp_lin), R_AIR, 1.4), rel=1e-7)
    # linear in dp below the threshold
    m1 = flow(p0, p0 * (1 - 0.25 * dp_lin), dp_lin=dp_lin)
    m2 = flow(p0, p0 * (1 - 0.5 * dp_lin), dp_lin=dp_lin)
    assert m2 == pytest.approx(2 * m1, rel=1e-9)


def test_zero_at_equal_pressure_and_bounded_slope():
    assert flow(2e5, 2e5) == 0.0
    # slope d(mdot)/d(dp) near zero is finite (the square-root law's would diverge)
    p0 = 1e5
    s1 = flow(p0 + 1e-3, p0) / 1e-3
    s2 = flow(p0 + 1e-1, p0) / 1e-1
    assert s1 == pytest.approx(s2, rel=1e-5)


def test_antisymmetric_and_upstream_state_by_sign():
    a = flow(3e5, 2e5, T1=800.0, T2=300.0, g1=1.3, g2=1.4)
    b = flow(2e5, 3e5, T1=300.0, T2=800.0, g1=1.4, g2=1.3)
    assert b == pytest.approx(-a, rel=1e-15)
    # reverse flow uses side 2 as upstream
    m = flow(2e5, 3e5, T1=300.0, T2=800.0, g1=1.4, g2=1.3)
    assert m == pytest.approx(-textbook_subsonic(CDA, 3e5, 800.0, 2e5, R_AIR, 1.3), rel=1e-12)


def test_vectorised_broadcast():
    p1 = np.array([[1e5], [5e5]])  # (2, 1)
    p2 = np.array([0.9e5, 1e5, 3e5])  # (3,)
    m = orifice_mass_flow(np.array([1e-4, 2e-4, 3e-4]), p1, 400.0, R_AIR, 1.35, p2, 300.0, R_AIR, 1.4)
    assert m.shape == (2, 3)
    assert m[0, 1] == 0.0 and m[0, 2] < 0 < m[0, 0] and np.all(m[1] > 0)


def test_flow_function_limits():
    # psi = 0 at pr = 1; the choked value below the critical ratio (Heywood 1988, App. C).
    assert flow_function(1.0, 1.4) == 0.0
    choked = np.sqrt(1.4) * (2 / 2.4) ** (2.4 / 0.8)
    np.testing.assert_allclose(flow_function(np.array([0.0, 0.2, 0.5]), 1.4), choked, rtol=1e-12)


@settings(max_examples=60, deadline=None)
@given(
    p_up=st.floats(1e4, 1e7),
    r1=st.floats(0.0, 1.0),
    r2=st.floats(0.0, 1.0),
    g=st.floats(1.2, 1.67),
)
def test_non_increasing_in_downstream_pressure(p_up, r1, r2, g):
    # Physical monotonicity: raising the back pressure never raises the flow (common practice).
    lo, hi = sorted((r1, r2))
    m_lo = flow(p_up, lo * p_up, g1=g, g2=g)
    m_hi = flow(p_up, hi * p_up, g1=g, g2=g)
    assert m_hi <= m_lo * (1 + 1e-12) + 1e-300
