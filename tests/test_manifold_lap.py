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


def _vessel(E, n, *, cda, V, omega, p_out, g, intake, Q=None, pref=None, Z=None, shift=None):
    """Arguments of filling.lap for E identical isothermal vessels at T, n steps (no runners'
    admittance unless ``Z`` is given)."""
    Q = np.zeros((E, n)) if Q is None else Q
    pref = np.full((E, n), 1e5) if pref is None else pref
    Z = np.zeros(E) if Z is None else Z
    shift = np.zeros(E) if shift is None else shift
    return dict(k=np.full(E, R * T / V), A=np.full(E, cda), T_m=np.full(E, T), R_m=np.full(E, R), g_m=g,
                p_amb=np.full(E, p_out), T_amb=np.full(E, T), R_amb=R, g_amb=g, omega=np.full(E, omega),
                Q=Q, pref=pref, Z=Z, shift=shift, intake=intake, dp=1.0, dp_lin=DP_LIN_DEFAULT)


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


def _step_without_admittance(p, h, k, A, T_m, R_m, g_m, p_amb, T_amb, R_amb, g_amb, omega, Q, pref, intake, dp,
                             dp_lin):
    """One step of the lumped manifolds' lap as it stood before the runners' admittance joined it:
    implicit Euler of dp/dphi = k (q_in - q_out) by NEWTON_PASSES Newton passes held above P_FLOOR,
    the intake's draw in proportion to p / pref (a reference written out here, on floats or rows)."""
    x = p
    for _ in range(filling.NEWTON_PASSES):
        q = filling.boundary_flow(intake, A, x, T_m, R_m, g_m, p_amb, T_amb, R_amb, g_amb, omega, dp_lin)
        q2 = filling.boundary_flow(intake, A, x + dp, T_m, R_m, g_m, p_amb, T_amb, R_amb, g_amb, omega, dp_lin)
        dq = (q2 - q) / dp
        if intake:
            r, dr = k * (q - Q * x / pref), k * (dq - Q / pref)
        else:
            r, dr = k * (Q - q), -k * dq
        x = np.maximum(x - (x - p - h * r) / (1.0 - h * dr), filling.P_FLOOR)
    return x


def _lap_without_admittance(p0, h, k, A, T_m, R_m, g_m, p_amb, T_amb, R_amb, g_amb, omega, Q, pref, Z, shift,
                            intake, dp, dp_lin):
    """The reference lap on numpy rows (``Z`` and ``shift`` taken and ignored)."""
    out = np.empty((p0.shape[0], Q.shape[1] + 1))
    out[:, 0] = p0
    for j in range(Q.shape[1]):
        out[:, j + 1] = _step_without_admittance(out[:, j], h, k, A, T_m, R_m, g_m, p_amb, T_amb, R_amb, g_amb,
                                                 omega, Q[:, j], pref[:, j], intake, dp, dp_lin)
    return out


def _compiled_lap_without_admittance():
    """The reference lap compiled as the lap is (numba, numpy error model, a loop over rows on floats)."""
    import numba

    from cyclesim.loops import _compiled  # noqa: F401  (teaches numba the filling functions)

    step = numba.njit(error_model="numpy")(_step_without_admittance)

    @numba.njit(error_model="numpy")
    def lap(p0, h, k, A, T_m, R_m, g_m, p_amb, T_amb, R_amb, g_amb, omega, Q, pref, Z, shift, intake, dp, dp_lin):
        out = np.empty((p0.shape[0], Q.shape[1] + 1))
        out[:, 0] = p0
        for j in range(Q.shape[1]):
            for e in range(p0.shape[0]):
                out[e, j + 1] = step(out[e, j], h, k[e], A[e], T_m[e], R_m[e], g_m, p_amb[e], T_amb[e], R_amb,
                                     g_amb, omega[e], Q[e, j], pref[e, j], intake, dp, dp_lin)
        return out

    return lap


def _random_laps(seed, E=3, n=120):
    """Random but physical lap arguments: manifolds of 40 deg and more (see the compiled test)."""
    rng = np.random.default_rng(seed)
    for intake in (True, False):
        p_out = rng.uniform(0.5e5, 2.5e5)
        kw = _vessel(E, n, cda=rng.uniform(1e-4, 1e-3), V=rng.uniform(1e-3, 4e-3), omega=6.0 * rng.uniform(1e3, 6e3),
                     p_out=p_out, g=1.4 if intake else 1.33, intake=intake,
                     Q=rng.uniform(0.0, 3e-6, (E, n)), pref=rng.uniform(0.7, 1.3, (E, n)) * p_out,
                     shift=rng.uniform(-2e3, 2e3, E))
        yield rng.uniform(0.6, 1.4, E) * p_out, kw


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_zero_admittance_is_the_lumped_lap_bit_for_bit(seed):
    # with Z = 0 the one lap (runners' admittance term included) is the lumped manifolds' lap to the
    # bit on numpy arrays, whatever the shift and the exhaust's reference pressures
    for p0, kw in _random_laps(seed):
        got = filling.lap(p0, 1.0, **kw)
        ref = _lap_without_admittance(p0, 1.0, **kw)
        assert np.array_equal(got, ref)
        # and the term is live: an admittance changes the lap
        kw["Z"] = np.full(len(p0), 1e-9)
        assert not np.allclose(filling.lap(p0, 1.0, **kw), ref, rtol=1e-6, atol=0.0)


@needs_numba
def test_zero_admittance_compiled_is_the_lumped_lap_compiled_bit_for_bit():
    # the same reference compiled as the lap is compiled (numba, same error model): equal to the bit
    from cyclesim.loops import _compiled

    ref_c = _compiled_lap_without_admittance()
    for seed in (0, 1):
        for p0, kw in _random_laps(seed):
            args = (p0, 1.0, *kw.values())
            assert np.array_equal(_compiled.manifold_lap(*args), ref_c(*args))


def test_admittance_relaxes_a_shut_vessel_to_the_reference_pressure():
    # a shut vessel (CdA 0, no cylinder flow) whose runners answer its swing about pref by Z (p - pref):
    # dp/dphi = -k Z (p - pref), a linear relaxation.  Implicit Euler of it is exact in one Newton pass:
    # (p - pref) falls by 1 / (1 + h k Z) per step (first-order linear ODE; common practice), and the
    # continuous solution exp(-k Z phi) lies within its first-order step error
    n, h, V, Z, p_ref = 360, 0.5, 1e-3, 1e-9, 1.0e5
    kw = _vessel(1, n, cda=0.0, V=V, omega=18000.0, p_out=1e5, g=1.4, intake=False,
                 pref=np.full((1, n), p_ref), Z=np.array([Z]))
    out = filling.lap(np.array([1.3e5]), h, **kw)[0]
    kz = R * T / V * Z                                   # [1/deg]
    j = np.arange(n + 1)
    np.testing.assert_allclose(out - p_ref, 0.3e5 * (1.0 + h * kz) ** -j, rtol=1e-10, atol=1e-10 * p_ref)
    assert 5.0 < kz * h * n < 60.0                      # relaxed well within the lap, not to rounding
    exact = 0.3e5 * np.exp(-kz * h * j)
    assert np.max(np.abs(out - p_ref - exact)) < 0.3e5 * kz * h
