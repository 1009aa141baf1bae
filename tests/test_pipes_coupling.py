"""Pipes at the cylinder's valves: crank-step coupling, conservation, nozzle law both ways, throttle, turbine."""

from __future__ import annotations

import numpy as np
import pytest

from cyclesim.cylinder import flow
from cyclesim import pipes
from cyclesim.errors import SolverError
from cyclesim.studies import boost

GAMMA, R_AIR = 1.4, 287.05
CP_AIR = GAMMA * R_AIR / (GAMMA - 1.0)


def _runner(B=1, n=30, L=0.4, D=0.035, **kw):
    kw.setdefault("friction_scale", 0.0)
    kw.setdefault("heat_scale", 0.0)
    pipe = pipes.Pipes(np.full(B, L), D, n, n_cases=B, **kw)
    pipe.set_state(1e5, 300.0)
    return pipe


def _valve_profile(i, n):
    """A valve that opens and shuts over ``n`` crank steps, effective area fraction 0..1."""
    return max(np.sin(np.pi * (i + 0.5) / n), 0.0)


def test_valve_mass_per_crank_step_equals_the_pipe_boundary_fluxes():
    # a prescribed reservoir stands in for the cylinder: blowdown from 5 bar, then the cylinder falls below
    # the pipe and the flow turns; per crank step the pipe's change of contents is what the valve and the
    # open end passed, to 1e-10 of the step's throughput
    pipe = _runner()
    system = pipes.PipeSystem([pipe], [0])
    pipes.set_end(pipe.ends, 1, pipe.face_area[:, -1], 1e5, 300.0)
    n, step = 240, 0.5 / (6.0 * 3000.0)                       # 0.5 crank degree at 3000 rpm
    area = pipe.face_area[0, 0]
    total_valve, signs = 0.0, set()
    before_all = system.contents()["mass_kg"].copy()
    total_outer = 0.0
    for i in range(n):
        p_cyl = 1e5 * (5.0 - 4.3 * i / n)                    # 5 bar down to 0.7 bar
        before = system.contents()
        r = pipes.advance_crank_step(system, step, [[0.4 * area * _valve_profile(i, n)]], p_cyl, 1100.0, 1.0)
        after = system.contents()
        for key, vk, ok in (("mass_kg", "mass_kg", "outer_mass_kg"), ("energy_J", "enthalpy_J", "outer_energy_J"),
                            ("burned_mass_kg", "burned_mass_kg", "outer_burned_mass_kg")):
            change = after[key] - before[key]
            through = -r[vk][:, 0] + r[ok][:, 0]                # out of the cylinder into the pipe, plus the end
            scale = abs(r[vk][0, 0]) + abs(r[ok][0, 0]) + 1e-30
            assert abs(change[0] - through[0]) <= 1e-10 * max(scale, 1e-12 * abs(before[key][0])), (i, key)
        total_valve += r["mass_kg"][0, 0]
        total_outer += r["outer_mass_kg"][0, 0]
        signs.add(np.sign(r["mass_kg"][0, 0]))
    assert {-1.0, 1.0} <= signs                                  # both directions through the valve
    change_all = system.contents()["mass_kg"] - before_all
    assert change_all[0] == pytest.approx(-total_valve + total_outer, rel=1e-10, abs=1e-16)


def test_a_closed_volume_coupled_through_the_valve_conserves_mass_and_energy():
    # a fixed volume of air (constant gamma) on the valve, the pipe's far end closed, no wall friction or heat:
    # volume plus pipe keep their mass and energy to rounding over a whole valve event
    pipe = _runner(n=20, L=0.3)
    pipe.set_state(1.0e5, 300.0)
    system = pipes.PipeSystem([pipe], [1])
    V = 4e-4
    m_cyl = 2.5e5 * V / (R_AIR * 600.0)
    U_cyl = m_cyl * R_AIR / (GAMMA - 1.0) * 600.0                 # u = cv T: the constant-gamma gas's energy
    start = system.contents()
    total0 = (m_cyl + start["mass_kg"][0], U_cyl + start["energy_J"][0])
    area = pipe.face_area[0, -1]
    for i in range(200):
        T_cyl = U_cyl / (m_cyl * R_AIR / (GAMMA - 1.0))
        p_cyl = m_cyl * R_AIR * T_cyl / V
        r = pipes.advance_crank_step(system, 2e-5, [[0.5 * area * _valve_profile(i, 200)]], p_cyl, T_cyl, 0.0)
        m_cyl += r["mass_kg"][0, 0]
        U_cyl += r["enthalpy_J"][0, 0]                         # the cylinder receives stagnation enthalpy
    end = system.contents()
    assert m_cyl + end["mass_kg"][0] == pytest.approx(total0[0], rel=1e-12)
    assert U_cyl + end["energy_J"][0] == pytest.approx(total0[1], rel=1e-12)
    assert m_cyl < 2.5e5 * V / (R_AIR * 600.0) * 0.9               # gas really went into the pipe


def _steady(system, cda, p_cyl, T_cyl, t=0.12, step=2e-3):
    for _ in range(int(round(t / step))):
        r = pipes.advance_crank_step(system, step, [[cda]], p_cyl, T_cyl, 0.0)
    return r, step


@pytest.mark.parametrize("p_cyl", [0.85e5, 0.3e5], ids=["subsonic", "choked"])
def test_flow_into_the_cylinder_follows_the_nozzle_equation(p_cyl):
    # intake valve at the pipe's end x = L, fed from an open end at 1 bar: quasi-steady isentropic nozzle
    # flow (Heywood 1988, App. C) from the pipe end's stagnation state to the cylinder pressure
    pipe = _runner(n=40, L=0.5, D=0.04)
    pipes.set_end(pipe.ends, 0, pipe.face_area[:, 0], 1.0e5, 300.0)
    system = pipes.PipeSystem([pipe], [1])
    cda = 3e-4
    r, dt = _steady(system, cda, p_cyl, 320.0)
    mdot = r["mass_kg"][0, 0] / dt
    pr = pipe.primitives()
    u, T, p = pr["velocity_m_s"][0, -1], pr["temperature_K"][0, -1], pr["pressure_pa"][0, -1]
    T0 = T + 0.5 * u * u / CP_AIR
    p0 = p * (T0 / T) ** (GAMMA / (GAMMA - 1))
    ref = flow.orifice_mass_flow(cda, p0, T0, R_AIR, GAMMA, p_cyl, 320.0, R_AIR, GAMMA)
    assert mdot > 0
    assert mdot == pytest.approx(float(ref), rel=5e-3)
    choked = p_cyl / p0 < flow.critical_pressure_ratio(GAMMA)
    assert choked == (p_cyl < 0.5e5)
    # the enthalpy the cylinder receives is the pipe gas's stagnation enthalpy (cp T0 here)
    assert r["enthalpy_J"][0, 0] / r["mass_kg"][0, 0] == pytest.approx(CP_AIR * T0, rel=2e-3)


@pytest.mark.parametrize("p_cyl", [1.3e5, 4.0e5], ids=["subsonic", "choked"])
def test_flow_out_of_the_cylinder_follows_the_nozzle_equation(p_cyl):
    # exhaust valve at x = 0, the pipe open to 1 bar: nozzle flow from the cylinder's state to the pipe end
    pipe = _runner(n=40, L=0.5, D=0.04)
    pipes.set_end(pipe.ends, 1, pipe.face_area[:, -1], 1.0e5, 300.0)
    system = pipes.PipeSystem([pipe], [0])
    cda, T_cyl = 2e-4, 900.0
    r, dt = _steady(system, cda, p_cyl, T_cyl)
    mdot = -r["mass_kg"][0, 0] / dt
    p_pipe = pipe.primitives()["pressure_pa"][0, 0]
    ref = flow.orifice_mass_flow(cda, p_cyl, T_cyl, R_AIR, GAMMA, p_pipe, 300.0, R_AIR, GAMMA)
    assert mdot == pytest.approx(float(ref), rel=5e-3)
    assert (p_pipe / p_cyl < flow.critical_pressure_ratio(GAMMA)) == (p_cyl > 2e5)
    assert -r["enthalpy_J"][0, 0] / dt == pytest.approx(mdot * CP_AIR * T_cyl, rel=1e-6)


@pytest.mark.parametrize("p_pipe_target", ["part", "choked"])
def test_throttle_passes_the_nozzle_flow_from_ambient(p_pipe_target):
    # a throttle at x = 0 from ambient air, the runner drawn down by a low-pressure reservoir at x = L
    pipe = _runner(n=30, L=0.3, D=0.04)
    cda = 1.5e-4
    pipes.throttle_end(pipe.ends, 0, cda, 1.0e5, 300.0)
    pipes.set_end(pipe.ends, 1, pipe.face_area[:, -1], 0.7e5 if p_pipe_target == "part" else 0.3e5, 300.0)
    for _ in range(60):
        r = pipe.advance(2e-3)
    mdot = r["mass_kg"][0, 0] / 2e-3
    p_pipe = pipe.primitives()["pressure_pa"][0, 0]
    ref = flow.orifice_mass_flow(cda, 1.0e5, 300.0, R_AIR, GAMMA, p_pipe, 300.0, R_AIR, GAMMA)
    assert mdot == pytest.approx(float(ref), rel=5e-3)
    assert (p_pipe / 1e5 < flow.critical_pressure_ratio(GAMMA)) == (p_pipe_target == "choked")


def test_turbine_outlet_uses_the_boost_study_flow_relation_and_work():
    # steady flow from a collector plenum at 1.8 bar, 950 K through a short pipe into the turbine outlet:
    # the boost study's own relation gives the inlet pressure that passes the measured flow; the work is
    # the isentropic turbine work eta m cp T3 (1 - (p4/p3)^((g-1)/g)) (Watson and Janota 1982, ch. 4;
    # from memory)
    pipe = _runner(n=30, L=0.3, D=0.045)
    area_t, p4, eta = 4e-4, 1.05e5, 0.7
    pipes.set_end(pipe.ends, 0, pipe.face_area[:, 0], 1.8e5, 950.0)
    pipes.turbine_end(pipe.ends, 1, area_t, p4, 800.0)
    pipe.set_state(1.5e5, 950.0)
    for _ in range(60):
        r = pipe.advance(2e-3)
    m_out = -r["mass_kg"][0, 1]
    mdot = m_out / 2e-3
    pr = pipe.primitives()
    u, T = pr["velocity_m_s"][0, -1], pr["temperature_K"][0, -1]
    T3 = T + 0.5 * u * u / CP_AIR
    p3_boost = boost._p3_for_flow(mdot, area_t, T3, R_AIR, GAMMA, p4)
    P = pipes.turbine_power_W(pipe, 1, m_out, -r["energy_J"][0, 1], -r["burned_mass_kg"][0, 1], 2e-3, eta, p4)
    p = pr["pressure_pa"][0, -1]
    p03 = p * (T3 / T) ** (GAMMA / (GAMMA - 1))
    assert p03 == pytest.approx(p3_boost, rel=5e-3)
    ref = eta * mdot * CP_AIR * T3 * (1 - (p4 / p03) ** ((GAMMA - 1) / GAMMA))
    assert P[0] == pytest.approx(ref, rel=2e-3)
    assert P[0] > 0


def test_a_system_case_is_the_same_alone_and_in_a_batch():
    def build(B, cases):
        pipe = _runner(B=B, n=16, L=0.25)
        pipe.set_state(1e5, 300.0)
        pipes.set_end(pipe.ends, 0, pipe.face_area[:, 0], 1e5, 300.0)
        return pipes.PipeSystem([pipe], [1]), np.asarray(cases, float)

    cyl_p = np.array([0.6e5, 1.5e5, 0.9e5])
    sys3, _ = build(3, cyl_p)
    sys1, _ = build(1, cyl_p[1:2])
    area = sys3.runners[0].face_area[0, -1]
    for i in range(40):
        cda = 0.6 * area * _valve_profile(i, 40)
        r3 = pipes.advance_crank_step(sys3, 5e-5, np.full((3, 1), cda), cyl_p, 350.0, 0.0)
        r1 = pipes.advance_crank_step(sys1, 5e-5, [[cda]], cyl_p[1], 350.0, 0.0)
        assert r3["mass_kg"][1, 0] == r1["mass_kg"][0, 0]
    assert np.array_equal(sys3.runners[0].Q[1], sys1.runners[0].Q[0])


def test_coupling_inputs_raise_one_line_errors():
    pipe = _runner()
    system = pipes.PipeSystem([pipe], [1])
    with pytest.raises(SolverError, match="valve_cda_m2"):
        pipes.advance_crank_step(system, 1e-4, [[-1.0]], 1e5, 300.0, 0.0)
    with pytest.raises(SolverError, match="cylinder pressure"):
        pipes.advance_crank_step(system, 1e-4, [[1e-4]], -1e5, 300.0, 0.0)
    with pytest.raises(SolverError, match="finite"):
        pipes.advance_crank_step(system, 1e-4, [[1e-4]], np.nan, 300.0, 0.0)
    from cyclesim.errors import ConfigError

    with pytest.raises(ConfigError, match="valve end"):
        pipes.PipeSystem([pipe], [2])
