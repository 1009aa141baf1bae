"""The manifolds' filling-and-emptying lap (cyclesim.loops.filling): one source for the engine's
Python path and its compiled path, checked against the closed-form filling and discharge of a
vessel through an orifice."""

from __future__ import annotations

import importlib.util
import inspect
import math

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from cyclesim.cylinder.flow import DP_LIN_DEFAULT
from cyclesim.loops import filling

needs_numba = pytest.mark.skipif(importlib.util.find_spec("numba") is None,
                                 reason="the compiled lap needs numba (extra 'fast')")

R, T = 287.0, 300.0     # air at room temperature [J/(kg K), K]


def _choked_factor(g):
    """sqrt(g) (2/(g+1))^((g+1)/(2(g-1))): the choked orifice flow's factor (Heywood 1988, App. C,
    eq. C.9)."""
    return math.sqrt(g) * (2.0 / (g + 1.0)) ** ((g + 1.0) / (2.0 * (g - 1.0)))


def _subsonic_flow(cda, p0, T0, g, pt):
    """Subsonic orifice flow [kg/s] from stagnation p0, T0 to pt (Heywood 1988, App. C, eq. C.8),
    written here from the formula."""
    r = pt / p0
    return cda * p0 / math.sqrt(R * T0) * r ** (1.0 / g) * math.sqrt(2.0 * g / (g - 1.0) * (1.0 - r ** ((g - 1.0) / g)))


def _vessel(E, n, *, cda, V, omega, p_out, g, intake, Q=None, pref=None):
    """Arguments of filling.lap for E identical isothermal vessels at T, n steps."""
    Q = np.zeros((E, n)) if Q is None else Q
    pref = np.full((E, n), 1e5) if pref is None else pref
    return dict(k=np.full(E, R * T / V), A=np.full(E, cda), T_m=np.full(E, T), R_m=np.full(E, R), g_m=g,
                p_amb=np.full(E, p_out), T_amb=np.full(E, T), R_amb=R, g_amb=g, omega=np.full(E, omega),
                Q=Q, pref=pref, intake=intake, dp=1.0, dp_lin=DP_LIN_DEFAULT)


def _crossing(p, level, h):
    """Crank angle [deg] from the lap's start where p first reaches ``level`` (linear between steps)."""
    j = int(np.argmax(p >= level))
    assert j > 0 and p[j] >= level
    return h * (j - 1 + (level - p[j - 1]) / (p[j] - p[j - 1]))


def test_isothermal_filling_through_an_orifice_against_closed_form():
    # a 2 L vessel at 300 K filled with air from 1 bar through CdA = 1 cm^2 at 1000 rev/min: while
    # the orifice is choked (p below 0.528 bar, Heywood 1988, App. C) the mass flow is constant and
    # the isothermal vessel's pressure rises linearly, dp/dt = (R T / V) mdot*; the subsonic rest is
    # the quadrature t = int dp / ((R T / V) mdot(p)) (scipy.integrate.quad, on eq. C.8 written here)
    from scipy.integrate import quad

    cda, V, g, p0, omega = 1e-4, 2e-3, 1.4, 1e5, 6000.0
    p_crit = p0 * (2.0 / (g + 1.0)) ** (g / (g - 1.0))
    assert p_crit / p0 == pytest.approx(0.5283, abs=1e-4)      # Heywood 1988, App. C (0.528 at g = 1.4)
    k = R * T / V
    rate_choked = k * cda * p0 / math.sqrt(R * T) * _choked_factor(g)           # [Pa/s]
    p_start, p_end = 0.1e5, 0.95e5
    t_choked = (p_crit - p_start) / rate_choked
    t_sub, err = quad(lambda p: 1.0 / (k * _subsonic_flow(cda, p0, T, g, p)), p_crit, p_end)
    assert err < 1e-9 * t_sub
    deg_end = omega * (t_choked + t_sub)
    for h, tol_deg in ((1.0, 1.0), (0.25, 0.25)):
        n = int(720 / h)
        out = filling.lap(np.array([p_start]), h, **_vessel(1, n, cda=cda, V=V, omega=omega, p_out=p0, g=g,
                                                            intake=True))[0]
        # choked: a constant rate, which implicit Euler follows exactly (rounding only)
        j = np.arange(n + 1)
        ch = out < p_crit * 0.999
        np.testing.assert_allclose(out[ch], p_start + rate_choked / omega * h * j[ch], rtol=1e-12)
        # subsonic: the crossing of 0.95 bar within the first-order step error (of order one step)
        got = _crossing(out, p_end, h)
        assert got == pytest.approx(deg_end, abs=tol_deg), (h, got, deg_end)
        assert out[-1] < p0 * (1.0 + 1e-12)           # never above the supply
    assert 300.0 < deg_end < 600.0                    # the check covers both regimes within the lap


def test_isothermal_discharge_through_an_orifice_against_closed_form():
    # an 8 bar vessel (exhaust gas, g = 1.33) emptying to 1 bar through a choked orifice: the flow
    # is proportional to the pressure, so the isothermal discharge is exponential,
    # p = p_i exp(-t / tau), tau = V / (CdA sqrt(R T) Gamma) (Heywood 1988, App. C, eq. C.9 in the
    # vessel's mass balance; the closed form is the classic isothermal blow-down, from memory).
    # Implicit Euler of a linear decay gives (1 + h / tau)^-j exactly: its departure from the
    # exponential is j (h / tau)^2 / 2 to first order, which bounds the tolerance
    cda, V, g, omega = 2e-5, 1e-3, 1.33, 6000.0
    p_i, p_out = 8e5, 1e5
    tau_deg = omega * V / (cda * math.sqrt(R * T) * _choked_factor(g))
    p_crit = p_out / (2.0 / (g + 1.0)) ** (g / (g - 1.0))       # choked above this [Pa]
    for h in (1.0, 0.1):
        n = int(720 / h)
        out = filling.lap(np.array([p_i]), h, **_vessel(1, n, cda=cda, V=V, omega=omega, p_out=p_out, g=g,
                                                        intake=False))[0]
        j = np.arange(n + 1)
        ch = out > p_crit * 1.001
        assert ch.sum() > n // 2
        np.testing.assert_allclose(out[ch], p_i * (1.0 + h / tau_deg) ** -j[ch], rtol=1e-12)
        exact = p_i * np.exp(-h * j[ch] / tau_deg)
        bound = j[ch] * (h / tau_deg) ** 2 / 2.0
        assert np.all(np.abs(out[ch] / exact - 1.0) <= 1.05 * bound + 1e-14)
        assert out[-1] > p_out                               # it never falls below the outside


def test_cylinder_flows_move_the_pressure_by_the_mass_balance():
    # a shut orifice (CdA 0): each interval's cylinder flow Q [kg/deg] changes the isothermal vessel's
    # pressure by exactly k Q h (exhaust: filled) or, drawn in proportion to p / pref, by implicit
    # Euler's p / (1 + h k Q / pref) (intake)
    n, h, V = 8, 1.0, 1e-3
    rng = np.random.default_rng(3)
    Q = rng.uniform(0.0, 2e-6, (1, n))
    kw = _vessel(1, n, cda=0.0, V=V, omega=6000.0, p_out=1e5, g=1.4, intake=False, Q=Q)
    ex = filling.lap(np.array([1e5]), h, **kw)[0]
    np.testing.assert_allclose(np.diff(ex), R * T / V * Q[0] * h, rtol=1e-9)
    kw.update(intake=True, pref=np.full((1, n), 1e5))
    im = filling.lap(np.array([1e5]), h, **kw)[0]
    np.testing.assert_allclose(im[1:] / im[:-1], 1.0 / (1.0 + h * R * T / V * Q[0] / 1e5), rtol=1e-12)


side_p = st.floats(2e4, 4e5)


@needs_numba
@settings(max_examples=40, deadline=None)
@given(p0=st.lists(side_p, min_size=1, max_size=4), p_out=side_p, cda=st.floats(0.0, 3e-3),
       V=st.floats(2e-4, 1e-2), T_m=st.floats(280.0, 1100.0), g=st.floats(1.25, 1.4),
       speed=st.floats(600.0, 7000.0), q=st.floats(0.0, 5e-6), intake=st.booleans(), seed=st.integers(0, 99))
def test_compiled_lap_is_the_numpy_lap(p0, p_out, cda, V, T_m, g, speed, q, intake, seed):
    # the engine's compiled path is filling.lap compiled: within 1e-12 relative of the same source on
    # numpy arrays (libm's pow in the compiled orifice flow and numpy's vectorised pow differ in the
    # last bits).  Near equal pressures the cancellation in 1 - pr^((g-1)/g) and a stiff implicit step
    # raise those bits: a scan of 4000 random laps measured at most 3.4e-14 where the manifold's
    # filling time constant V omega / (CdA sqrt(R T) Gamma) is 40 deg or more (the demo engines':
    # intake 133-136 deg, exhaust branches 76-169 deg), but up to 4e-11 at 10-20 deg and 7e-10
    # below 2 deg, so the check is held to manifolds of 40 deg and more (and shut orifices)
    from cyclesim.loops import _compiled

    assume(cda == 0.0 or 6.0 * speed * V / (cda * math.sqrt(R * T_m) * _choked_factor(g)) >= 40.0)
    E, n = len(p0), 90
    rng = np.random.default_rng(seed)
    Q = q * rng.uniform(0.0, 1.0, (E, n))
    pref = rng.uniform(0.5, 1.5, (E, n)) * p_out
    kw = _vessel(E, n, cda=cda, V=V, omega=6.0 * speed, p_out=p_out, g=g, intake=intake, Q=Q, pref=pref)
    kw["T_m"] = np.full(E, T_m)
    kw["k"] = np.full(E, R * T_m / V)
    p = np.array(p0)
    ref = filling.lap(p, 1.0, **kw)
    got = _compiled.manifold_lap(p, 1.0, *kw.values())
    assert got.shape == ref.shape == (E, n + 1)
    np.testing.assert_allclose(got, ref, rtol=1e-12, atol=0.0)


def test_the_lap_arithmetic_is_written_once():
    # the compiled template and the engine's manifolds call filling.lap; neither writes a step of
    # its own (the Newton update of the implicit-Euler equation, the flow-proportional draw)
    import cyclesim.engine.manifolds as man

    srcs = [inspect.getsource(man)]
    if importlib.util.find_spec("numba") is not None:
        from cyclesim.loops import _compiled

        srcs.append(inspect.getsource(_compiled))
        assert _compiled.manifold_lap.py_func is filling.lap
    for src in srcs:
        for formula in ("1.0 - h * dr", "1.0 - self.h * dr", "x / pr", "x - p - "):
            assert formula not in src
