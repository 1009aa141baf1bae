"""Checks of the pipe solver (cyclesim.pipes) against outside references, each named beside it.

Reference gas: air as a constant-gamma ideal gas, gamma 1.4, R 287.05 J/(kg K).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq

from cyclesim import pipes
from cyclesim.pipes import exact_riemann, kernels

GAMMA, R_AIR = 1.4, 287.05
CP = GAMMA * R_AIR / (GAMMA - 1.0)


def _pipe(n, length=1.0, d_in=0.05, d_out=None, **kw):
    kw.setdefault("friction_scale", 0.0)
    kw.setdefault("heat_scale", 0.0)
    return pipes.Pipes(length, d_in, n, diameter_out_m=d_out, **kw)


def _orders(errors):
    e = np.asarray(errors)
    return np.log2(e[:-1] / e[1:])


# ----------------------------------------------------------------------------------------------
# exact Riemann solver
def test_exact_riemann_star_states_match_toro_and_scipy_root():
    # Toro (2009), table 4.3 (tests 1-3, star pressure and velocity; from memory) ...
    cases = [((1.0, 0.0, 1.0), (0.125, 0.0, 0.1), 0.30313, 0.92745),
             ((1.0, -2.0, 0.4), (1.0, 2.0, 0.4), 0.00189, 0.0),
             ((1.0, 0.0, 1000.0), (1.0, 0.0, 0.01), 460.894, 19.5975)]
    for left, right, p_ref, u_ref in cases:
        p, u = exact_riemann.star_state(left, right, GAMMA)
        assert p == pytest.approx(p_ref, rel=2e-4, abs=1e-5)
        assert u == pytest.approx(u_ref, abs=2e-4)
        # ... and the pressure function's root found independently by scipy's brentq (Brent 1973)
        f = lambda q: (exact_riemann._f(q, left[0], left[2], np.sqrt(GAMMA * left[2] / left[0]), GAMMA)[0]  # noqa: E731
                       + exact_riemann._f(q, right[0], right[2], np.sqrt(GAMMA * right[2] / right[0]), GAMMA)[0]
                       + right[1] - left[1])
        assert p == pytest.approx(brentq(f, 1e-10, 1e4, xtol=1e-14, rtol=1e-14), rel=1e-10)


# ----------------------------------------------------------------------------------------------
# Sod (1978) shock tube against the exact solution (Toro 2009, ch. 4)
def _sod_errors(n):
    p_scale, rho_l = 1e5, 1.0
    c_scale = np.sqrt(p_scale / rho_l)                  # velocity unit of the dimensionless problem
    t_end = 0.2 / c_scale                               # Toro's t = 0.2 on a unit tube
    pipe = _pipe(n)
    x = (np.arange(n) + 0.5) / n
    rho = np.where(x < 0.5, 1.0, 0.125)
    p = np.where(x < 0.5, 1.0, 0.1) * p_scale
    pipe.set_state(p, p / (rho * R_AIR))
    pipe.advance(t_end)
    pr = pipe.primitives()
    # exact cell averages from 16 samples per cell
    sub = (np.arange(n * 16) + 0.5) / (n * 16)
    ex = exact_riemann.sample((1.0, 0.0, 1.0), (0.125, 0.0, 0.1), (sub - 0.5) / 0.2, GAMMA)
    ex = ex.reshape(3, n, 16).mean(axis=2)
    num = (pr["density_kg_m3"][0], pr["velocity_m_s"][0] / c_scale, pr["pressure_pa"][0] / p_scale)
    return [np.mean(np.abs(a - b)) for a, b in zip(num, ex)]


def test_sod_shock_tube_l1_errors_and_orders():
    errs = np.array([_sod_errors(n) for n in (100, 200, 400)])      # rows: cells; cols: rho, u, p
    orders = np.array([_orders(errs[:, q]) for q in range(3)])
    # bounds: first-order convergence at the shock, below first order at the contact
    # (Toro 2009, sec. 14.6, on discontinuous data): density (contact) 0.5-1.0, u and p 0.7-1.2
    assert np.all(orders[0] >= 0.5) and np.all(orders[0] <= 1.0), orders
    assert np.all(orders[1:] >= 0.7) and np.all(orders[1:] <= 1.2), orders
    assert orders[0].mean() < min(orders[1].mean(), orders[2].mean())   # the contact is the lowest
    # magnitudes at 400 cells, normalised by the left state (rho, sqrt(p/rho), p)
    assert errs[2, 0] < 4e-3 and errs[2, 1] < 4e-3 and errs[2, 2] < 3e-3, errs[2]


# ----------------------------------------------------------------------------------------------
# smooth acoustic pulse against d'Alembert's solution of linear acoustics
def _pulse_error(n, amp=1e-5):
    p0, T0 = 1e5, 300.0
    rho0 = p0 / (R_AIR * T0)
    c0 = np.sqrt(GAMMA * p0 / rho0)
    sigma, t_end = 0.05, 0.2 / c0                       # both halves travel 0.2 m, far from the ends
    shape = lambda x: amp * np.exp(-((x - 0.5) / sigma) ** 2)   # noqa: E731
    pipe = _pipe(n)
    x = (np.arange(n) + 0.5) / n
    p = p0 * (1.0 + shape(x))
    rho = rho0 * (1.0 + shape(x) / GAMMA)               # isentropic: rho'/rho = p'/(gamma p)
    pipe.set_state(p, p / (rho * R_AIR))
    pipe.advance(t_end)
    pr = pipe.primitives()["pressure_pa"][0] / p0 - 1.0
    # d'Alembert: p' = (f(x - c t) + f(x + c t)) / 2, cell averages by 16 samples
    sub = (np.arange(n * 16) + 0.5) / (n * 16)
    ex = (0.5 * (shape(sub - c0 * t_end) + shape(sub + c0 * t_end))).reshape(n, 16).mean(1)
    return np.mean(np.abs(pr - ex)) / amp


def test_smooth_acoustic_pulse_second_order():
    errs = [_pulse_error(n) for n in (100, 200, 400)]
    orders = _orders(errs)
    assert np.all(orders >= 1.8), (errs, orders)
    assert errs[-1] < 5e-3


# ----------------------------------------------------------------------------------------------
# well balancing and steady nozzle flow
def test_tapered_closed_pipe_at_rest_stays_at_rest():
    pipe = _pipe(60, d_in=0.06, d_out=0.025, friction_scale=1.0, heat_scale=1.0, wall_temperature_K=320.0)
    pipe.set_state(1.2e5, 320.0)
    pipe.advance(0.05)                                  # about 17 transit times
    pr = pipe.primitives()
    assert np.abs(pr["velocity_m_s"]).max() < 1e-8
    assert np.ptp(pr["pressure_pa"]) < 1e-6


def _area_ratio(M, g=GAMMA):
    """A/A* of isentropic flow (Anderson 2003, Modern Compressible Flow, eq. 5.20)."""
    return np.sqrt((2.0 / (g + 1.0) * (1.0 + 0.5 * (g - 1.0) * M * M)) ** ((g + 1.0) / (g - 1.0))) / M


def _steady(pipe, ends, t_total, chunk=0.02):
    for _ in range(int(round(t_total / chunk))):
        pipe.advance(chunk, ends)
    m0 = pipe.totals()["mass_kg"].copy()
    r = pipe.advance(chunk, ends)
    return r, m0


def test_steady_subsonic_nozzle_matches_area_mach_relation():
    n, p0, T0, p_exit = 80, 1.08e5, 300.0, 1.0e5
    pipe = _pipe(n, d_in=0.05, d_out=0.032)
    pipe.set_state(p_exit, T0)
    ends = pipes.closed_ends(1)
    pipes.set_end(ends, 0, pipe.face_area[:, 0], p0, T0)
    pipes.set_end(ends, 1, pipe.face_area[:, -1], p_exit, T0)
    r, _ = _steady(pipe, ends, 0.3)
    mdot = r["mass_kg"][0, 0] / 0.02
    assert abs(r["mass_kg"][0, 0] + r["mass_kg"][0, 1]) < 1e-6 * r["mass_kg"][0, 0]   # steady
    # A* from the mass flow and the reservoir's stagnation state (choked flux, Anderson 2003, eq. 5.21)
    g = GAMMA
    a_star = mdot * np.sqrt(R_AIR * T0) / (p0 * np.sqrt(g) * (2.0 / (g + 1.0)) ** ((g + 1.0) / (2.0 * (g - 1.0))))
    pr = pipe.primitives()
    M_num = pr["velocity_m_s"][0] / pr["sound_speed_m_s"][0]
    area = pipe.volume[0] / pipe.dx[0]
    M_ref = np.array([brentq(lambda M: _area_ratio(M) - a / a_star, 1e-6, 1.0) for a in area])
    assert np.max(np.abs(M_num / M_ref - 1.0)) < 5e-3, np.max(np.abs(M_num / M_ref - 1.0))
    assert 0.15 < M_num.max() < 0.9                        # a real nozzle flow, subsonic


# ----------------------------------------------------------------------------------------------
# Fanno flow
def _fanno(M, g=GAMMA):
    """4 f L*/D of adiabatic flow with friction (Anderson 2003, Modern Compressible Flow, eq. 3.107)."""
    return (1.0 - M * M) / (g * M * M) + (g + 1.0) / (2.0 * g) * np.log((g + 1.0) * M * M / (2.0 + (g - 1.0) * M * M))


def test_fanno_flow_constant_friction_factor():
    n, D, L, f = 100, 0.025, 1.5, 0.005
    pipe = _pipe(n, length=L, d_in=D, friction_scale=1.0, fixed_fanning=f)
    pipe.set_state(1.0e5, 300.0)
    ends = pipes.closed_ends(1)
    pipes.set_end(ends, 0, pipe.face_area[:, 0], 1.5e5, 300.0)
    pipes.set_end(ends, 1, pipe.face_area[:, -1], 1.0e5, 300.0)
    r, _ = _steady(pipe, ends, 0.4)
    assert abs(r["mass_kg"][0, 0] + r["mass_kg"][0, 1]) < 1e-6 * r["mass_kg"][0, 0]
    pr = pipe.primitives()
    u, c, T = pr["velocity_m_s"][0], pr["sound_speed_m_s"][0], pr["temperature_K"][0]
    M = u / c
    x = (np.arange(n) + 0.5) * pipe.dx[0]
    got = _fanno(M[0]) - _fanno(M[-1])
    want = 4.0 * f * (x[-1] - x[0]) / D
    assert got == pytest.approx(want, rel=0.01)
    assert M[-1] > 1.2 * M[0]                                # friction accelerates the flow
    h0 = CP * T + 0.5 * u * u
    assert np.ptp(h0) / h0.mean() < 1e-4


# ----------------------------------------------------------------------------------------------
# ringing of a pipe with no mean flow
def _ring_frequency(ends_open, n=100, L=1.0, step=0.01, periods=12):
    p_amb, T0 = 1.0e5, 300.0
    c0 = np.sqrt(GAMMA * R_AIR * T0)
    f_ref = c0 / (4 * L) if ends_open == (False, True) else c0 / (2 * L)
    pipe = _pipe(n, length=L)
    pipe.set_state(p_amb * (1.0 + step), T0)
    ends = pipes.closed_ends(1)
    for end, is_open in enumerate(ends_open):
        if is_open:                                      # open to ambient, no entry loss
            pipes.set_end(ends, end, pipe.face_area[:, -end], p_amb, T0)
    probe = 0 if not ends_open[0] else n // 2            # closed end, or the middle of an open-open pipe
    dt = 1.0 / (f_ref * 200)
    t, sig = [], []
    for i in range(int(periods * 200)):
        pipe.advance(dt, ends)
        t.append((i + 1) * dt)
        sig.append(pipe.primitives()["pressure_pa"][0, probe] - p_amb)
    t, sig = np.array(t), np.array(sig)
    # upward zero crossings, linearly interpolated
    k = np.nonzero((sig[:-1] < 0) & (sig[1:] >= 0))[0]
    tc = t[k] - sig[k] * (t[k + 1] - t[k]) / (sig[k + 1] - sig[k])
    assert len(tc) >= 10
    return (len(tc) - 1) / (tc[-1] - tc[0]), f_ref


@pytest.mark.parametrize("ends_open", [(False, True), (True, True)], ids=["closed-open", "open-open"])
def test_pipe_rings_at_quarter_and_half_wave_frequency(ends_open):
    # Quarter-wave c/(4L) closed-open, half-wave c/(2L) open-open (Kinsler et al. 2000, Fundamentals
    # of Acoustics, sec. 10.2; from memory).  A one-dimensional open end is a pressure node exactly at
    # the pipe's end: no end correction (about 0.6 radii for a real unflanged pipe) applies here.
    f, f_ref = _ring_frequency(ends_open)
    assert f == pytest.approx(f_ref, rel=0.01)


# ----------------------------------------------------------------------------------------------
# conservation
def test_closed_pipe_conserves_mass_and_energy_to_rounding():
    n = 50
    pipe = _pipe(n, d_in=0.05, d_out=0.03, friction_scale=1.0)
    x = (np.arange(n) + 0.5) / n
    pipe.set_state(1e5 * (1 + 0.3 * np.sin(3 * x)), 300 + 200 * x, 40 * np.cos(5 * x), burned_fraction=x)
    before = pipe.totals()
    r = pipe.advance(0.02)
    after = pipe.totals()
    assert r["steps"][0] > 100
    for key in ("mass_kg", "energy_J", "burned_mass_kg"):
        assert abs(after[key][0] - before[key][0]) < 1e-13 * before[key][0], key
    assert np.all(r["mass_kg"] == 0.0) and np.all(r["energy_J"] == 0.0)


def test_haaland_fanning_factor_against_colebrook():
    # Colebrook (1939) solved by brentq; Haaland (1983) states agreement within about 1.5 % (from memory)
    for re in (4e3, 1e4, 1e5, 1e6, 1e8):
        for eps in (0.0, 1e-4, 1e-3, 1e-2):
            col = brentq(lambda s: s + 2.0 * np.log10(eps / 3.7 + 2.51 * s / re), 1e-3, 50.0)   # s = 1/sqrt(f_D)
            f_col = 0.25 / col ** 2
            assert kernels.fanning_factor(re, eps) == pytest.approx(f_col, rel=0.02), (re, eps)
    # laminar: Hagen-Poiseuille, f = 16/Re (White 2006, eq. 3.49; from memory for the number)
    assert kernels.fanning_factor(500.0, 0.0) == pytest.approx(16.0 / 500.0, rel=1e-12)


def test_friction_factor_is_laminar_at_low_reynolds_numbers():
    # Hagen-Poiseuille f = 16/Re (White 2006, eq. 3.49; from memory for the number) down to creeping
    # flow, for smooth and rough walls: Haaland's formula (stated for Re 4e3..1e8; Haaland 1983) is not
    # taken below its range, where its logarithm changes sign near Re 7 and its value grows without bound
    re = np.logspace(-6, 2.6, 60)
    for eps in (0.0, 1e-3, 0.05):
        np.testing.assert_allclose(kernels.fanning_factor(re, eps), 16.0 / re, rtol=1e-12)
    # at and above the floor the value is unchanged: the larger of 16/Re and Haaland's
    for r in (500.0, 1200.0, 3000.0, 1e5):
        inv = -1.8 * np.log10(6.9 / r)
        assert kernels.fanning_factor(r, 0.0) == pytest.approx(max(16.0 / r, 0.25 / inv ** 2), rel=1e-12)


def test_wall_heat_stays_at_the_laminar_value_as_the_flow_stops():
    # Reynolds-Colburn analogy St Pr^(2/3) = f/2 (Colburn 1933; Incropera et al. 2007, eq. 8.66): with
    # f = 16/Re the wall flux tends to its laminar value 8 mu/D cp Pr^(-2/3) (T_w - T) 4/D as u -> 0;
    # it must neither grow nor jump there (a cell at a velocity node of a standing wave)
    rho, T, D, cp, Tw, colburn = 0.35, 980.0, 0.034, 1150.0, 700.0, 0.7 ** (-2.0 / 3.0)
    mu = kernels.sutherland_viscosity(T)
    lam = 0.5 * 16.0 * mu / D * colburn * cp * (4.0 / D) * (Tw - T)
    for u in (0.0, 1e-9, 1e-3, 1e-2, 0.1):
        _, q = kernels.wall_sources(rho, u, T, cp, D, kernels.roughness_term(1e-4), 1.0, 0.0, 0.0, Tw, colburn, 1.0)
        assert float(q) == pytest.approx(lam, rel=1e-9), u
