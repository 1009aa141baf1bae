"""Slider-crank geometry: volume, its derivative, wall areas, piston speed."""

import numpy as np
import pytest

from cyclesim.cylinder.geometry import Geometry

BORE, STROKE, ROD, RC = 0.086, 0.086, 0.145, 10.0


def make(offset=0.0, B=2, **kw):
    return Geometry(
        np.full(B, BORE), np.full(B, STROKE), np.full(B, ROD), np.full(B, RC),
        pin_offset_m=np.full(B, offset), **kw,
    )


def test_volume_matches_closed_form_slider_crank():
    # Heywood 1988, eq. 2.6: V/Vc = 1 + (rc - 1)/2 [R + 1 - cos(th) - sqrt(R^2 - sin^2(th))],
    # R = l/a (same relation in Ferguson & Kirkpatrick 2015, ch. 1).
    g = make()
    th = np.linspace(-360.0, 360.0, 721)
    R = ROD / (STROKE / 2)
    t = np.radians(th)
    Vd = np.pi / 4 * BORE**2 * STROKE
    Vc = Vd / (RC - 1)
    expected = Vc * (1 + (RC - 1) / 2 * (R + 1 - np.cos(t) - np.sqrt(R**2 - np.sin(t) ** 2)))
    np.testing.assert_allclose(g.volume(th), np.broadcast_to(expected, (2, th.size)), rtol=1e-12)
    np.testing.assert_allclose(g.Vd, Vd, rtol=1e-14)
    np.testing.assert_allclose(g.Vc, Vc, rtol=1e-14)
    np.testing.assert_allclose(g.crank_radius_m, STROKE / 2, rtol=1e-15)


def test_piston_position_closed_form():
    # Heywood 1988, eq. 2.5: s = a cos(th) + sqrt(l^2 - a^2 sin^2(th)); distance from TDC = l + a - s.
    g = make()
    a = STROKE / 2
    th = np.array([0.0, 37.0, 90.0, 180.0, 271.0])
    t = np.radians(th)
    s = a * np.cos(t) + np.sqrt(ROD**2 - a**2 * np.sin(t) ** 2)
    np.testing.assert_allclose(g.piston_position(th)[0], ROD + a - s, atol=1e-15)
    assert g.piston_position(180.0)[0] == pytest.approx(STROKE, rel=1e-14)


@pytest.mark.parametrize("offset", [0.0015, -0.0015, 0.004])
def test_offset_volume_minimum_at_zero_and_travel_equals_stroke(offset):
    # Convention: 0 deg is the piston's actual TDC, where V = Vc (geometric definition of clearance volume).
    g = make(offset)
    assert g.volume(0.0)[0] == pytest.approx(g.Vc[0], rel=1e-13)
    th = np.linspace(-30.0, 30.0, 60001)  # 0.001 deg
    V = g.volume(th)[0]
    assert V.min() >= g.Vc[0] * (1 - 1e-13)
    assert abs(th[np.argmin(V)]) < 2e-3
    # Offset slider-crank dead centres lie where crank and rod are collinear:
    # y_tdc = sqrt((l + a)^2 - e^2), y_bdc = sqrt((l - a)^2 - e^2) (kinematic identity);
    # the stroke is their difference and the swept volume is bore area x stroke.
    a = g.crank_radius_m[0]
    travel = np.sqrt((ROD + a) ** 2 - offset**2) - np.sqrt((ROD - a) ** 2 - offset**2)
    assert travel == pytest.approx(STROKE, rel=1e-12)
    thb = np.linspace(170.0, 190.0, 20001)
    Vb = g.volume(thb)[0]
    assert Vb.max() == pytest.approx(g.Vc[0] + g.Vd[0], rel=1e-10)
    # BDC crank angle after TDC, from the same collinearity: 180 + asin(e/(l+a)) - asin(e/(l-a))
    bdc = 180.0 + np.degrees(np.arcsin(offset / (ROD + a)) - np.arcsin(offset / (ROD - a)))
    assert thb[np.argmax(Vb)] == pytest.approx(bdc, abs=2e-3)
    assert g.bdc_deg[0] == pytest.approx(bdc, abs=1e-10)


def test_offset_changes_volume_trace_only_slightly():
    # A 1.5 mm offset on a 145 mm rod shifts the dead centres by well under 1 deg
    # (asin(e/(l+a)) = 0.46 deg, kinematic identity); volumes differ by < 1 % of Vd.
    g0, g1 = make(0.0), make(0.0015)
    th = np.linspace(-360, 360, 361)
    assert np.max(np.abs(g1.volume(th) - g0.volume(th))) < 0.01 * g0.Vd[0]
    assert np.degrees(np.arcsin(0.0015 / (ROD + STROKE / 2))) < 1.0


@pytest.mark.parametrize("offset", [0.0, 0.002])
def test_dV_dtheta_against_numerical_derivative(offset):
    # Central difference, step 1e-4 deg: truncation error ~ h^2 V''' well below rtol 1e-7.
    g = make(offset)
    th = np.linspace(-355.0, 355.0, 143)
    h = 1e-4
    num = (g.volume(th + h) - g.volume(th - h)) / (2 * h)
    np.testing.assert_allclose(g.dV_dtheta(th), num, rtol=1e-6, atol=1e-9 * g.Vd[0])


def test_dV_dtheta_sign_and_zero_at_dead_centres():
    g = make()
    assert g.dV_dtheta(0.0)[0] == pytest.approx(0.0, abs=1e-20)
    assert g.dV_dtheta(90.0)[0] > 0  # expansion stroke: volume grows
    assert g.dV_dtheta(-90.0)[0] < 0  # compression stroke


def test_areas():
    # Head and piston: factor x bore area; liner: pi B (x + Vc / A_bore) (geometry of a cylinder).
    g = make(head_area_factor=np.array([1.1, 1.3]), piston_area_factor=np.array([1.0, 1.2]))
    A = np.pi / 4 * BORE**2
    hc = g.Vc[0] / A
    head, piston, liner = g.areas(np.array([0.0, 180.0]))
    np.testing.assert_allclose(head[:, 0], [1.1 * A, 1.3 * A], rtol=1e-14)
    np.testing.assert_allclose(piston[:, 1], [1.0 * A, 1.2 * A], rtol=1e-14)
    np.testing.assert_allclose(liner[0], [np.pi * BORE * hc, np.pi * BORE * (STROKE + hc)], rtol=1e-13)


def test_default_area_factors():
    g = Geometry([BORE], [STROKE], [ROD], [RC])
    assert g.head_area_factor[0] == 1.1 and g.piston_area_factor[0] == 1.0
    assert g.pin_offset_m[0] == 0.0


def test_mean_piston_speed():
    # Sp = 2 S N / 60 (Heywood 1988, eq. 2.3): 86 mm at 3000 rpm -> 8.6 m/s.
    g = make()
    np.testing.assert_allclose(g.mean_piston_speed(np.array([3000.0, 6000.0])), [8.6, 17.2], rtol=1e-14)


def test_shapes():
    g = make(B=3)
    assert g.volume(10.0).shape == (3,)
    assert g.volume(np.zeros(5)).shape == (3, 5)
    assert g.dV_dtheta(np.zeros(4)).shape == (3, 4)
    assert all(a.shape == (3, 4) for a in g.areas(np.zeros(4)))
    assert all(a.shape == (3,) for a in g.areas(5.0))


def test_cases_are_independent():
    # Batch convention: each case's geometry depends only on its own inputs.
    g = Geometry([0.08, 0.09], [0.09, 0.08], [0.14, 0.15], [9.5, 11.0], [0.0, 0.001])
    g1 = Geometry([0.09], [0.08], [0.15], [11.0], [0.001])
    th = np.linspace(-360, 360, 73)
    np.testing.assert_array_equal(g.volume(th)[1], g1.volume(th)[0])


def test_rod_too_short_raises():
    with pytest.raises(ValueError):
        Geometry([0.086], [0.086], [0.043], [10.0])
    with pytest.raises(ValueError):
        Geometry([0.086], [0.086], [0.046], [10.0], pin_offset_m=[0.004])


def test_distinct_geometry_reproduces_every_case():
    # distinct() keeps one row per different engine; indexing it back must give each case's
    # own volume and areas (reference: the per-case evaluation)
    th = np.linspace(-360.0, 360.0, 721)
    g = Geometry(0.08, 0.085, 0.14, np.array([10.0, 11.0, 10.0, 10.0]))
    gu, rows = g.distinct()
    assert gu.B == 2 and rows.tolist() == [0, 1, 0, 0]
    np.testing.assert_array_equal(gu.volume(th)[rows], g.volume(th))
    np.testing.assert_array_equal(gu.dV_dtheta(th)[rows], g.dV_dtheta(th))
    for a, b in zip(gu.areas(th), g.areas(th)):
        np.testing.assert_array_equal(a[rows], b)
    same = Geometry(0.08, 0.085, 0.14, np.full(3, 10.0))
    assert same.distinct()[0].B == 1
