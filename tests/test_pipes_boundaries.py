"""Pipe ends (nozzle, open, closed), conservation of the integrated end fluxes, batches, gas mixture, paths."""

from __future__ import annotations

import json
import os
import subprocess
import sys

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cyclesim.cylinder import flow
from cyclesim.errors import SolverError
from cyclesim import pipes
from cyclesim.errors import ConfigError
from cyclesim.pipes import scheme

GAMMA, R_AIR = 1.4, 287.05


def _steady_pipe(ends_fn, n=40, L=0.5, D=0.04, t=0.15, chunk=0.01):
    pipe = pipes.Pipes(L, D, n, friction_scale=0.0, heat_scale=0.0)
    pipe.set_state(1e5, 300.0)
    ends = ends_fn(pipe, pipes.closed_ends(1))
    for _ in range(int(round(t / chunk))):
        r = pipe.advance(chunk, ends)
    return pipe, r, chunk


@pytest.mark.parametrize("p_res", [1.3e5, 3.0e5], ids=["subsonic", "choked"])
def test_valve_inflow_matches_nozzle_equation(p_res):
    # quasi-steady isentropic nozzle flow (Heywood 1988, App. C) from the reservoir's stagnation state
    # to the pipe's static pressure, through flow.orifice_mass_flow (itself checked in test_flow.py)
    cda, T_res = 2.0e-4, 350.0

    def ends_fn(pipe, e):
        pipes.set_end(e, 0, cda, p_res, T_res)
        return pipes.set_end(e, 1, pipe.face_area[:, -1], 1.0e5, 300.0)

    pipe, r, dt = _steady_pipe(ends_fn)
    mdot = r["mass_kg"][0, 0] / dt
    p_pipe = pipe.primitives()["pressure_pa"][0, 0]
    ref = flow.orifice_mass_flow(cda, p_res, T_res, R_AIR, GAMMA, p_pipe, 300.0, R_AIR, GAMMA)
    assert mdot == pytest.approx(float(ref), rel=5e-3)
    if p_res > 2e5:
        assert p_pipe / p_res < flow.critical_pressure_ratio(GAMMA)          # really choked


def test_valve_outflow_matches_nozzle_equation():
    cda, p_feed = 3.0e-4, 1.4e5

    def ends_fn(pipe, e):
        pipes.set_end(e, 0, pipe.face_area[:, 0], p_feed, 300.0)
        return pipes.set_end(e, 1, cda, 1.0e5, 300.0)

    pipe, r, dt = _steady_pipe(ends_fn)
    mdot = -r["mass_kg"][0, 1] / dt
    pr = pipe.primitives()
    u, T, p = pr["velocity_m_s"][0, -1], pr["temperature_K"][0, -1], pr["pressure_pa"][0, -1]
    cp = GAMMA * R_AIR / (GAMMA - 1)
    T0 = T + 0.5 * u * u / cp
    p0 = p * (T0 / T) ** (GAMMA / (GAMMA - 1))
    ref = flow.orifice_mass_flow(cda, p0, T0, R_AIR, GAMMA, 1.0e5, 300.0, R_AIR, GAMMA)
    assert mdot > 0
    assert mdot == pytest.approx(float(ref), rel=5e-3)


def _random_batch(seed, B=3, n=12, harsh=False):
    """Random pipes and end conditions; moderate by default (reservoirs within -30..+50 % of the
    pipe's pressure, nozzles up to the end's area); ``harsh``: reservoirs at 0.5-3 bar and up to 1100 K,
    nozzles up to 1.2 times the end's area, on both ends of a short tapered pipe."""
    rng = np.random.default_rng(seed)
    pipe = pipes.Pipes(rng.uniform(0.1, 0.6, B), rng.uniform(0.02, 0.05, B), n,
                       diameter_out_m=rng.uniform(0.02, 0.05, B), roughness_m=rng.uniform(0, 1e-4, B),
                       wall_temperature_K=rng.uniform(300, 600, B), bend_loss=rng.uniform(0, 1, B))
    x = np.linspace(0, 1, n)
    p0 = rng.uniform(0.8e5, 2e5, (B, 1))
    T0 = rng.uniform(280, 900, (B, 1))
    pipe.set_state(p0 * (1 + 0.2 * np.sin(7 * x)), T0, rng.uniform(-80, 80, (B, 1)) * np.cos(3 * x),
                   rng.uniform(0, 1, (B, 1)) * x)
    ends = pipes.closed_ends(B)
    for end in (0, 1):
        area = pipe.face_area[:, -end]
        if harsh:
            pipes.set_end(ends, end, rng.uniform(0, 1.2, B) * area, rng.uniform(0.5e5, 3e5, B),
                          rng.uniform(280, 1100, B), rng.uniform(0, 1, B), rng.uniform(0, 0.5, B))
        else:
            pipes.set_end(ends, end, rng.uniform(0, 1.0, B) * area, p0[:, 0] * rng.uniform(0.7, 1.5, B),
                          T0[:, 0] * rng.uniform(0.8, 1.5, B), rng.uniform(0, 1, B), rng.uniform(0, 0.5, B))
    return pipe, ends, rng.uniform(1e-4, 3e-3, B)


def _assert_positive(pipe):
    """Every cell with positive mass and a temperature recovered inside its bounds (not clamped)."""
    from cyclesim.pipes import kernels

    pr = pipe.primitives()
    assert np.all(pipe.Q[:, scheme.MASS] > 0)
    assert np.all(np.isfinite(pr["pressure_pa"])) and np.all(pr["pressure_pa"] > 0)
    assert np.all(pr["temperature_K"] > kernels.T_MIN_K * 1.0001)
    assert np.all((pr["burned_fraction"] >= 0) & (pr["burned_fraction"] <= 1))


@settings(max_examples=25, deadline=None, derandomize=True)
@given(st.integers(0, 10_000), st.booleans())
def test_end_fluxes_account_for_every_change_of_contents(seed, harsh):
    # invariant of a finite-volume scheme: contents change only through the ends (mass, energy without
    # wall heat, burned mass), to rounding, over any number of sub-steps, the first-order fallback included;
    # positivity on moderate and on harsh end conditions
    pipe, ends, dur = _random_batch(seed, harsh=harsh)
    pipe.P[:, scheme.P_HEAT] = 0.0                                 # no wall heat: energy closes too
    before = pipe.totals()
    r = pipe.advance(dur, ends)
    after = pipe.totals()
    for key in ("mass_kg", "energy_J", "burned_mass_kg"):
        change = after[key] - before[key]
        scale = np.abs(before[key]) + np.abs(r[key]).sum(1)
        assert np.all(np.abs(change - r[key].sum(1)) <= 1e-10 * scale), key
    _assert_positive(pipe)


@pytest.mark.parametrize("seed", [145, 162, 180, 246, 285])
def test_harsh_batches_that_lost_positivity_keep_it_with_the_fallback(seed):
    # harsh batches with a wall heat sink 1000 times the Reynolds-analogy value (heat_scale), stiff enough
    # to drive cells below the temperature floor within a sub-step; the first-order fallback and the halved
    # sub-steps keep them positive and conservative
    pipe, ends, dur = _random_batch(seed, harsh=True)
    pipe.P[:, scheme.P_HEAT] = 1e3
    before = pipe.totals()
    r = pipe.advance(dur, ends)
    assert r["fallback_steps"].sum() > 0                         # the fallback really acted
    _assert_positive(pipe)
    after = pipe.totals()
    change = after["mass_kg"] - before["mass_kg"]
    assert np.all(np.abs(change - r["mass_kg"].sum(1)) <= 1e-10 * (before["mass_kg"] + np.abs(r["mass_kg"]).sum(1)))


def _advance_on_numpy(pipe, ends, dur):
    return scheme._advance_numpy(pipe.Q, pipe.G, pipe.face_area, pipe.P, np.ascontiguousarray(ends), pipe.C,
                                 pipe.T_cell, pipe.p_end, pipe.gas.t_mid_K, pipe.gas.newton_steps, 30, dur,
                                 1_000_000)


def test_supersonic_outflow_end_keeps_positivity(monkeypatch):
    # harsh batch 320: a nozzle 1.09 times the pipe's end to 0.55 bar drives the end cell of its third
    # pipe supersonic outwards; the characteristic end solve (which assumes a subsonic interior) then
    # took out more than the cell held and drained it to the temperature floor.  With every
    # characteristic leaving, the face is the interior state (transmissive boundary; Toro 2009,
    # sec. 6.3.3, from memory): positive and conservative on the compiled and on the numpy driver.
    for run in (lambda p, e, d: p.advance(d, e), _advance_on_numpy):
        pipe, ends, dur = _random_batch(320, harsh=True)
        pipe.P[:, scheme.P_HEAT] = 0.0
        before = pipe.totals()
        out = run(pipe, ends, dur)
        _assert_positive(pipe)
        m_in = out["mass_kg"] if isinstance(out, dict) else out[0][:, :, scheme.F_MASS]
        change = pipe.totals()["mass_kg"] - before["mass_kg"]
        assert np.all(np.abs(change - m_in.sum(1)) <= 1e-10 * (before["mass_kg"] + np.abs(m_in).sum(1)))
    # the same batch with the end solve at a supersonic end (numpy driver) loses positivity
    from cyclesim.pipes import kernels

    def plain(rj, uj, pj, yj, cj, side, area, Ej, cf, cb, Rf, Rb, t_mid, n_iter, p_guess):
        return kernels.end_flux(rj, uj, pj, yj, cj * cj * rj / pj, side, area, Ej[:, scheme.E_CDA],
                                Ej[:, scheme.E_P], Ej[:, scheme.E_T], Ej[:, scheme.E_Y], Ej[:, scheme.E_K],
                                cf, cb, Rf, Rb, t_mid, n_iter, p_guess)

    monkeypatch.setattr(scheme, "_end_or_outflow", plain)
    pipe, ends, dur = _random_batch(320, harsh=True)
    pipe.P[:, scheme.P_HEAT] = 0.0
    with pytest.raises(SolverError):
        _advance_on_numpy(pipe, ends, dur)


def test_a_case_gives_the_same_result_alone_and_in_a_batch():
    pipe, ends, dur = _random_batch(7, B=4)
    r = pipe.advance(dur, ends)
    for b in (0, 2):
        alone, e1, d1 = _random_batch(7, B=4)
        sub = pipes.Pipes(alone.length_m[b], 0.03, alone.N)   # rebuilt with the single case's arrays
        for name in ("G", "P", "C", "Q", "face_area", "volume", "T_cell", "p_end"):
            setattr(sub, name, np.ascontiguousarray(getattr(alone, name)[b:b + 1]))
        rb = sub.advance(d1[b:b + 1], e1[b:b + 1])
        assert np.array_equal(sub.Q[0], pipe.Q[b])
        assert np.array_equal(rb["mass_kg"][0], r["mass_kg"][b]) and rb["steps"][0] == r["steps"][b]
    assert len(set(r["steps"])) > 1                            # each case took its own sub-steps


_SCRIPT = """
import json, sys
import numpy as np
sys.path.insert(0, {tests!r})
from test_pipes_boundaries import _random_batch
from cyclesim.pipes import _jit
pipe, ends, dur = _random_batch(11)
r = pipe.advance(dur, ends)
print(json.dumps({{"compiled": _jit.COMPILED, "Q": pipe.Q.tolist(), "m": r["mass_kg"].tolist()}}))
"""


def test_numpy_path_agrees_with_compiled_path():
    pytest.importorskip("numba")
    out = {}
    for mode in ("auto", "python"):
        env = dict(os.environ, CYCLESIM_KERNEL=mode)
        res = subprocess.run([sys.executable, "-c", _SCRIPT.format(tests=os.path.dirname(__file__))],
                             env=env, capture_output=True, text=True, check=True)
        out[mode] = json.loads(res.stdout.strip().splitlines()[-1])
    assert out["auto"]["compiled"] and not out["python"]["compiled"]
    qp, qa = np.array(out["python"]["Q"]), np.array(out["auto"]["Q"])
    # each conserved quantity to 1e-9 of its largest magnitude (the compiled end solve and Newton steps
    # stop early at their tolerances; the numpy form takes every step)
    scale = np.abs(qa).max(axis=2, keepdims=True)
    assert np.all(np.abs(qp - qa) <= 1e-9 * scale)
    np.testing.assert_allclose(out["python"]["m"], out["auto"]["m"], rtol=1e-9, atol=1e-18)


def test_burned_gas_properties_match_cantera():
    # frozen complete-combustion products of iso-octane at phi = 1 against GRI-Mech 3.0 in Cantera
    ct = pytest.importorskip("cantera")
    from cyclesim import fuels
    from cyclesim.gas import thermo
    from cyclesim.pipes import kernels

    fuel = fuels.get_fuel("isooctane")
    gas = pipes.fuel_mixture(fuel, 1.0)
    b, _ = thermo.fresh_charge_elements(fuel, 1.0)
    prod = {k: float(v) for k, v in thermo.complete_products(b).items() if float(v) > 0}
    sol = ct.Solution("gri30.yaml")
    cb = np.moveaxis(gas.coef[:, 1], 0, -1)
    for T in (400.0, 900.0, 1500.0):
        sol.TPX = T, 1e5, {k.replace("AR", "Ar"): v for k, v in prod.items()}
        _, cv = kernels.energy(np.array([T]), 1.0, cb, cb, gas.t_mid_K)
        assert cv[0] == pytest.approx(sol.cv_mass, rel=5e-3), T
        assert gas.R[0, 1] == pytest.approx(ct.gas_constant / sol.mean_molecular_weight, rel=1e-4)


def test_burned_fraction_is_carried_and_bounded():
    n = 60
    pipe = pipes.Pipes(1.0, 0.04, n, friction_scale=0.0, heat_scale=0.0, gas=pipes.fuel_mixture(
        __import__("cyclesim.fuels", fromlist=["x"]).get_fuel("isooctane"), 1.0))
    x = (np.arange(n) + 0.5) / n
    pipe.set_state(1e5, 500.0, 50.0, burned_fraction=(x < 0.3).astype(float))
    ends = pipes.closed_ends(1)
    pipes.set_end(ends, 0, pipe.face_area[:, 0], 1.05e5, 500.0, burned_fraction=1.0)
    pipes.set_end(ends, 1, pipe.face_area[:, -1], 1.0e5, 500.0)
    before = pipe.totals()["burned_mass_kg"]
    r = pipe.advance(2e-3, ends)
    Y = pipe.primitives()["burned_fraction"][0]
    assert Y.min() >= 0.0 and Y.max() <= 1.0
    assert Y[:10].min() > 0.999 and Y[-10:].max() < 1e-6
    front = np.argmax(Y < 0.5) / n
    assert 0.3 < front < 0.6                                   # the front moved downstream with the gas
    assert pipe.totals()["burned_mass_kg"] - before == pytest.approx(r["burned_mass_kg"].sum(), rel=1e-9)


def test_bad_inputs_raise_one_line_errors():
    with pytest.raises(ConfigError, match="n_cells"):
        pipes.Pipes(1.0, 0.04, 2)
    with pytest.raises(ConfigError, match="diameter_in_m"):
        pipes.Pipes(1.0, -0.04, 10)
    with pytest.raises(ConfigError, match="cfl"):
        pipes.Pipes(1.0, 0.04, 10, cfl=1.5)
    p = pipes.Pipes(1.0, 0.04, 10)
    with pytest.raises(ConfigError, match="pressure"):
        p.set_state(-1.0, 300.0)
    with pytest.raises(ConfigError, match="burned_fraction"):
        pipes.set_end(pipes.closed_ends(1), 0, 1e-4, 1e5, 300.0, burned_fraction=2.0)


def test_junction_transmits_a_linear_wave_with_the_acoustic_coefficient():
    # a constant-pressure junction in the acoustic limit: pressure transmission 2 A1 / (A1 + A2 + A3)
    # (Kinsler et al. 2000, Fundamentals of Acoustics, sec. 10.x on branched pipes; from memory)
    from cyclesim.pipes.junction import junction_fluxes

    gas = pipes.constant_gamma(GAMMA, R_AIR)
    p0, T0, d = 1e5, 300.0, 1e-5
    rho0 = p0 / (R_AIR * T0)
    c0 = np.sqrt(GAMMA * p0 / rho0)
    area = np.array([[1.0e-3, 0.5e-3, 2.0e-3]])
    p = np.array([[p0 * (1 + d), p0, p0]])
    rho = rho0 * (p / p0) ** (1 / GAMMA)
    v = np.array([[d * p0 / (rho0 * c0), 0.0, 0.0]])            # a simple wave running into the junction
    # the incident wave alone would meet a closed end at p0 (1 + 2d); the junction passes a share
    out = junction_fluxes(rho, v, p, np.zeros((1, 3)), area, gas.coef, gas.R, gas.t_mid_K)
    rise = (out["pressure_pa"][0] - p0) / (p0 * d)
    assert rise == pytest.approx(2 * area[0, 0] / area.sum(), rel=1e-3)
    for key in ("mass_kg_s", "energy_W", "burned_kg_s"):
        tot = out[key].sum()
        assert abs(tot) <= 1e-12 * np.abs(out[key]).sum()


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 10_000))
def test_junction_balances_mass_energy_and_burned_gas(seed):
    from cyclesim.pipes.junction import junction_fluxes

    rng = np.random.default_rng(seed)
    B, K = 4, int(rng.integers(2, 5))
    gas = pipes.fuel_mixture(__import__("cyclesim.fuels", fromlist=["x"]).get_fuel("isooctane"),
                             rng.uniform(0.8, 1.2, B))
    p = rng.uniform(0.8e5, 2.5e5, (B, K))
    T = rng.uniform(300, 1100, (B, K))
    Y = rng.uniform(0, 1, (B, K))
    R = (1 - Y) * gas.R[:, :1] + Y * gas.R[:, 1:]
    out = junction_fluxes(p / (R * T), rng.uniform(-150, 150, (B, K)), p, Y, rng.uniform(2e-4, 2e-3, (B, K)),
                          gas.coef, gas.R, gas.t_mid_K)
    assert np.all(np.isfinite(out["pressure_pa"])) and np.all(out["pressure_pa"] > 0)
    for key in ("mass_kg_s", "energy_W", "burned_kg_s"):
        assert np.all(np.abs(out[key].sum(1)) <= 1e-12 * np.abs(out[key]).sum(1) + 1e-300), key
    assert np.all(np.abs(out["velocity_m_s"]) < 1500)
