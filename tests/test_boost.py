"""Turbocharger match: compressor, intercooler, turbine relations and the power balance."""

import json
import math

import pytest

from cyclesim.studies.boost import (
    boost_match,
    compressor_outlet_temperature,
    intercooler_outlet_temperature,
    turbine_outlet_temperature,
)

FAST = ["simulation.step_deg=1.0"]


@pytest.fixture(scope="module")
def matched(tmp_path_factory):
    out = tmp_path_factory.mktemp("boost")
    b = boost_match("demo_turbo", 1.6, overrides=FAST, tolerance_bar=0.005, max_iterations=6, out=out)
    return b, out


def test_compressor_relation_pure():
    # isentropic compression of air, T2s = T1 PR^((g-1)/g) (any thermodynamics text):
    # 298 K, PR 2, g 1.4 -> 363.27 K (computed by hand: 2^(0.4/1.4) = 1.21901)
    assert compressor_outlet_temperature(298.0, 2.0, 1.0) == pytest.approx(298.0 * 1.21901, rel=1e-5)
    # eta_c = (T2s - T1)/(T2 - T1) (isentropic efficiency, Heywood 1988 sec. 6.8, from memory; any thermodynamics text): with eta 0.5 the rise doubles
    assert compressor_outlet_temperature(298.0, 2.0, 0.5) - 298.0 == pytest.approx(2 * 298.0 * 0.21901, rel=1e-4)


def test_turbine_and_intercooler_relations_pure():
    # eta_t = (T3 - T4)/(T3 - T4s), T4s = T3 (p4/p3)^((g-1)/g) (isentropic efficiency, Heywood 1988 sec. 6.8, from memory; any thermodynamics text)
    T4, T4s = turbine_outlet_temperature(1200.0, 2.0, 0.7, 1.33)
    assert T4s == pytest.approx(1200.0 * 0.5 ** (0.33 / 1.33), rel=1e-12)
    assert (1200.0 - T4) / (1200.0 - T4s) == pytest.approx(0.7, rel=1e-12)
    # effectiveness definition of a heat exchanger (common practice): eps = (T_in - T_out)/(T_in - T_cool)
    assert intercooler_outlet_temperature(380.0, 300.0, 0.8) == pytest.approx(316.0, rel=1e-12)


def test_match_follows_the_compressor_formula(matched):
    b, _ = matched
    s = b.state
    # isentropic efficiency (Heywood 1988 sec. 6.8, from memory; any thermodynamics text): T2 = T1 (1 + (PR^((g-1)/g) - 1)/eta_c), air g = 1.4
    T2 = s["T1_K"] * (1 + (s["compressor_pressure_ratio"] ** (0.4 / 1.4) - 1) / s["eta_compressor"])
    assert s["T2_K"] == pytest.approx(T2, rel=1e-12)
    assert s["T_intake_K"] == pytest.approx(
        s["T2_K"] - s["intercooler_effectiveness"] * (s["T2_K"] - s["coolant_temperature_K"]), rel=1e-12)
    # the engine ran at the boost pressure and the cooled temperature
    assert b.result.inputs["operating.intake_pressure_bar"] == pytest.approx(1.6)
    assert b.result.inputs["operating.intake_temperature_K"] == pytest.approx(s["T_intake_K"], rel=1e-12)
    # compressor power m cp dT with cp = g R/(g-1) for air, R = 287 J/(kg K) (common practice)
    assert s["compressor_power_kW"] == pytest.approx(
        s["air_flow_g_per_s"] * 1e-3 * 1.4 * 287 / 0.4 * (s["T2_K"] - s["T1_K"]) / 1e3, rel=1e-9)


def test_match_follows_the_turbine_relation(matched):
    b, _ = matched
    s = b.state
    g = s["exhaust_gamma"]
    # isentropic efficiency (Heywood 1988 sec. 6.8, from memory; any thermodynamics text): eta_t = (T3 - T4)/(T3 - T4s), T4s = T3 (p4/p3)^((g-1)/g)
    T4s = s["T3_K"] * (s["p4_bar"] / s["p3_bar"]) ** ((g - 1) / g)
    assert s["T4s_K"] == pytest.approx(T4s, rel=1e-9)
    assert (s["T3_K"] - s["T4_K"]) / (s["T3_K"] - s["T4s_K"]) == pytest.approx(s["eta_turbine"], rel=1e-9)
    # burned-gas properties of a stoichiometric mixture near 1300 K: g about 1.27-1.33,
    # R about 285-295 J/(kg K) (Heywood 1988 fig. 4-10 and §4.7, from memory)
    assert 1.25 < g < 1.34 and 280 < s["exhaust_R_J_per_kgK"] < 300
    # the turbine passes its flow through the effective area as a compressible orifice
    # (Heywood 1988 App. C, subsonic equation, written out here independently)
    pr = s["p4_bar"] / s["p3_bar"]
    gt = g
    assert pr > (2 / (gt + 1)) ** (gt / (gt - 1))  # subsonic here
    R = s["exhaust_R_J_per_kgK"]
    mdot = (s["turbine_area_cm2"] * 1e-4 * s["p3_bar"] * 1e5 / math.sqrt(R * s["T3_K"]) * pr ** (1 / gt)
            * math.sqrt(2 * gt / (gt - 1) * (1 - pr ** ((gt - 1) / gt))))
    assert s["turbine_flow_g_per_s"] == pytest.approx(mdot * 1e3, rel=1e-4)


def test_power_and_mass_balances_close(matched):
    b, out = matched
    s = b.state
    assert b.reached and b.converged
    # steady turbocharger: eta_m P_turbine = P_compressor (definition of eta_m, common practice)
    assert s["turbine_shaft_power_kW"] == pytest.approx(s["compressor_power_kW"], rel=1e-6)
    assert s["turbine_shaft_power_kW"] == pytest.approx(s["eta_mechanical"] * s["turbine_power_kW"], rel=1e-12)
    assert s["turbine_flow_g_per_s"] + s["wastegate_flow_g_per_s"] == pytest.approx(s["exhaust_flow_g_per_s"])
    assert 0 < s["wastegate_share"] < 1
    # the fixed point settled within the stated tolerance
    assert abs(b.iterations[-1]["change_bar"]) < b.tolerance_bar
    data = json.loads((out / "boost.json").read_text())
    assert data["caution"] and data["reached"] is True
    assert (out / "boost_match.png").read_bytes()[:4] == b"\x89PNG"


def test_unreachable_target_is_reported():
    # a very large turbine area leaves almost no pressure drop for the turbine to work with
    b = boost_match("demo_turbo", 1.6, turbine_area_cm2=60.0, overrides=FAST, max_iterations=1)
    assert not b.reached
    assert "not reached" in b.message and "wastegate closed" in b.message
    assert b.state["wastegate_share"] == 0.0
    assert b.state["turbine_shaft_power_kW"] < b.state["compressor_power_kW"]


def test_limits_and_knock_are_warned(matched):
    b, out = matched
    e = b.engine
    # demo_turbo has a knock model: its verdict is in the table and the JSON, and nothing is
    # said about a missing one
    assert b.limits["knock"] in ("none predicted",) or b.limits["knock"].startswith("at ")
    assert not any("knock is not checked" in w for w in b.warnings)
    # a limit below the matched point's peak pressure and T3 is reported with both values
    low = boost_match("demo_turbo", 1.6, overrides=FAST, tolerance_bar=0.005, max_iterations=6,
                      p_max_limit_bar=0.9 * e["p_max_bar"], t3_limit_K=b.state["T3_K"] - 50.0)
    assert any(w.startswith(f"peak cylinder pressure {e['p_max_bar']:.0f} bar is above") for w in low.warnings)
    assert any(w.startswith("turbine inlet temperature") for w in low.warnings)
    assert "reached, with the warnings below" in low.text()
    assert json.loads((out / "boost.json").read_text())["limits"]["p_max_limit_bar"] == 120.0


def test_no_knock_model_is_warned():
    b = boost_match("demo", 1.4, overrides=FAST, tolerance_bar=0.01, max_iterations=4)
    assert b.limits["knock"] == "not modelled"
    assert any("knock is not checked (knock.model: none)" in w for w in b.warnings)
    assert "warning: knock is not checked" in b.text()
