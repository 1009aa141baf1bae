"""Property tests over the space of valid configs (hypothesis).

For any valid engine and operating point the simulation either gives finite
figures that conserve energy and mass, or fails with a clear message that names
the crank angle (and the submodel or the solver).  Conservation is the first
law and mass conservation of the cylinder as an open system; the tolerances
are integration accuracy.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st

import cyclesim
from cyclesim.config import apply_override, build_case, load_raw, parse_override

HEAT_TRANSFER = ("none", "woschni", "hohenberg", "annand")
SETTINGS = dict(deadline=None, derandomize=True, database=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


def config(name, overrides, heat_transfer):
    raw, base = load_raw(name)
    raw["heat_transfer"] = {"model": heat_transfer}      # parameters of the chosen model default
    for text in overrides:
        parts, value = parse_override(text)
        raw = apply_override(raw, parts, value)
    return build_case(raw, base)


@st.composite
def engine_and_operating_point(draw):
    """Overrides of a random valid engine and operating point (shared by both modes)."""
    bore = draw(st.floats(60.0, 110.0))
    stroke = draw(st.floats(55.0, 110.0))
    rod_to_crank = draw(st.floats(2.6, 4.5))              # conrod / crank radius, > 1 + offset
    # valve sizes follow the bore (4 valves: intake about 0.37 B, exhaust 0.31 B,
    # maximum lift about 0.28 D; common practice)
    d_in, d_ex = 0.37 * bore, 0.31 * bore
    return [
        f"engine.bore_mm={bore}", f"engine.stroke_mm={stroke}",
        f"engine.conrod_mm={rod_to_crank * stroke / 2.0}",
        f"engine.compression_ratio={draw(st.floats(7.0, 14.0))}",
        f"valves.intake_diameter_mm={d_in}", f"valves.exhaust_diameter_mm={d_ex}",
        f"valves.intake_max_lift_mm={0.28 * d_in}", f"valves.exhaust_max_lift_mm={0.28 * d_ex}",
        f"operating.speed_rpm={draw(st.floats(800.0, 7000.0))}",
        f"operating.lambda={draw(st.floats(0.7, 1.5))}",
        f"burn.spark_advance_deg={draw(st.floats(0.0, 45.0))}",
        f"burn.duration_deg={draw(st.floats(20.0, 80.0))}",
        f"gas.burned_gas={draw(st.sampled_from(['equilibrium', 'complete']))}",
        f"walls.head_temperature_K={draw(st.floats(350.0, 650.0))}",
        f"walls.piston_temperature_K={draw(st.floats(350.0, 700.0))}",
        f"walls.liner_temperature_K={draw(st.floats(330.0, 500.0))}",
    ]


@st.composite
def closed_cases(draw):
    over = draw(engine_and_operating_point()) + [
        f"operating.ivc_pressure_bar={draw(st.floats(0.3, 2.5))}",
        f"operating.ivc_temperature_K={draw(st.floats(300.0, 420.0))}",
        f"operating.residual_fraction={draw(st.floats(0.0, 0.2))}",
        "simulation.step_deg=1.0",
    ]
    return over, draw(st.sampled_from(HEAT_TRANSFER))


@st.composite
def full_cases(draw):
    over = draw(engine_and_operating_point()) + [
        f"operating.intake_pressure_bar={draw(st.floats(0.3, 2.5))}",
        "simulation.step_deg=1.0", "simulation.max_cycles=4",
    ]
    return over, draw(st.sampled_from(HEAT_TRANSFER))


def _check_failure_message(res):
    # a failed case must say where (crank angle) and what (a submodel or the solver)
    assert "crank angle" in res.error, res.error
    assert any(w in res.error for w in ("model", "solver")), res.error
    # but a case whose energy balance does not close even at a quarter of its step is not a clear
    # failure of the input: it is the conservation this test is about (simulate() turns such a
    # miss into an error, which would otherwise pass here)
    assert not res.error.startswith("solver: the energy balance"), res.error


NO_COLUMNS = ("unburned_zone_temperature_K", "burned_zone_temperature_K", "burned_gas_no_ppm")


def _check_finite(res, motored_window=None, closed=False):
    from cyclesim.results.motoring import COMBUSTION_ONLY_KEYS, MOTORED_ONLY_KEYS

    # figures with no meaning in the case's mode (fired or motored) are NaN, every other one finite
    null = MOTORED_ONLY_KEYS if res.summary["mode"] == "fired" else COMBUSTION_ONLY_KEYS
    for key, v in res.summary.items():
        if key == "mode":
            assert v in ("fired", "motored")
        elif key in null:
            assert np.isnan(v), f"{key} = {v} (no meaning in a {res.summary['mode']} case)"
        elif isinstance(v, dict):
            for kk, vv in v.items():
                assert np.isfinite(vv), f"{key}.{kk} = {vv}"
        elif key == "no_g_per_kWh" and (closed or not res.summary.get("bmep_bar", 1.0) > 0.0):
            # NO per brake work: undefined (NaN) in closed-cycle mode and without brake output
            # (the emissions model's rule)
            assert np.isnan(v), f"{key} = {v}"
        elif key == "bsfc_g_per_kWh" and res.summary.get("bmep_bar", 1.0) <= 0.0:
            # no brake output: the specific consumption is unbounded by definition
            assert v == np.inf
        else:
            assert np.isfinite(v), f"{key} = {v}"
    for key, col in res.trace.items():
        if key in NO_COLUMNS or key.startswith("burned_element_"):
            # the NO model's zone columns are defined from IVC (zones) or the burn (elements) to
            # EVO, NaN elsewhere; never infinite
            assert not np.any(np.isinf(col)), key
            continue
        if key == "motored_pressure_bar" and motored_window is not None:
            col = col[motored_window(res.trace["crank_deg"])]   # defined from IVC to EVO only
        assert np.all(np.isfinite(col)), key


@settings(max_examples=20, **SETTINGS)
@given(closed_cases())
def test_closed_cycle_is_finite_and_conserves_energy_and_mass(drawn):
    over, ht = drawn
    res = cyclesim.simulate([config("demo_closed", over, ht)])[0]
    if res.error:
        _check_failure_message(res)
        return
    _check_finite(res, closed=True)
    s, tr = res.summary, res.trace
    assert abs(s["energy_balance"]["closure_fraction"]) < 1e-4
    # mass (bookkeeping of the reported figures against the trace): what is in the cylinder at EVO
    # plus what leaked past the rings = trapped mass
    m = tr["mass_mg"]
    assert m[-1] + s["blowby_mass_mg"] == pytest.approx(m[0], rel=1e-9)
    assert m[0] == pytest.approx(s["trapped_mass_mg"], rel=1e-12)
    assert np.all(np.diff(m) <= 1e-12 * m[0])              # leakage only flows out


def _check_full_cycle(case):
    res = cyclesim.simulate([case])[0]
    if res.error:
        _check_failure_message(res)
        return
    ivc, evo = case.valves.ivc_deg, case.valves.evo_deg
    _check_finite(res, motored_window=lambda th: (th >= ivc) & (th <= evo))
    s, tr = res.summary, res.trace
    # the whole cycle's energy balance closes within 0.1 % of the fuel energy
    assert abs(s["energy_balance"]["closure_fraction"]) < 1e-3
    # periodic steady state (or said otherwise): the cycle ends with the mass it began with
    if s["converged"]:
        assert abs(tr["mass_mg"][-1] - tr["mass_mg"][0]) < 2e-3 * s["trapped_mass_mg"]
    else:
        assert any("settle" in w for w in res.warnings)


@st.composite
def fast_full_cases(draw):
    """Full-cycle cases at 3000-7000 rpm: below ``simulation.step_reference_rpm`` (3000)
    the solver refines its step up to 16-fold, too costly for a random search here;
    low speed is covered by the explicit case below."""
    over, ht = draw(full_cases())
    over = [o for o in over if not o.startswith("operating.speed_rpm")]
    return over + [f"operating.speed_rpm={draw(st.floats(3000.0, 7000.0))}"], ht


@settings(max_examples=5, phases=[Phase.explicit, Phase.generate], **SETTINGS)
@given(fast_full_cases())
def test_full_cycle_is_finite_and_conserves_energy(drawn):
    over, ht = drawn
    _check_full_cycle(config("demo", over, ht))


@pytest.mark.slow
def test_demo_at_low_speed_conserves_energy_or_fails_clearly():
    # Found by the property test: at 800-1000 rpm with step 1.0 the gas exchange went
    # unstable (IndexError inside the gas tables), at 1200-2000 rpm the energy balance
    # missed by 0.3-8 % of the fuel energy.  Wide-open throttle, 1200 rpm, coarse step.
    case = config("demo", ["operating.speed_rpm=1200", "simulation.step_deg=1.0",
                           "simulation.max_cycles=6"], "woschni")
    _check_full_cycle(case)
