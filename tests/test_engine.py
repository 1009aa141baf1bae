"""Multi-cylinder engine: firing phasing, throttle, manifolds, cut and deactivated cylinders, lumped walls."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq

import cyclesim
from cyclesim.engine import EngineSetup, firing_offsets, run_engine, simulate_engines, throttle_area
from cyclesim.engine.manifolds import _Manifolds
from cyclesim.errors import ConfigError

# a two-cylinder variant of the demo at a coarse step keeps these checks quick
TWO = ["engine.cylinders=2", "multi_cylinder.firing_order=[1, 2]", "multi_cylinder.exhaust_branches=null",
       "simulation.step_deg=1.0",
       "multi_cylinder.spread_trapped_mass=null", "multi_cylinder.spread_spark_deg=null",
       "multi_cylinder.spread_compression_ratio=null", "multi_cylinder.spread_wall_temperature_K=null"]


def _orifice_ref(cda, p0, T0, pT, R=287.0, g=1.4):
    """Isentropic restriction flow (Heywood 1988, App. C, eqs. for subsonic and choked flow; from memory)."""
    crit = (2.0 / (g + 1.0)) ** (g / (g - 1.0))
    pr = max(pT / p0, crit)
    return cda * p0 / math.sqrt(R * T0) * pr ** (1 / g) * math.sqrt(
        2 * g / (g - 1) * (1 - pr ** ((g - 1) / g)))


def test_firing_offsets_even_firing():
    # four-stroke even firing: one cylinder every 720/N deg in firing order (common practice)
    off = firing_offsets([1, 3, 4, 2], 4)
    assert list(off) == [0.0, 540.0, 180.0, 360.0]
    assert list(firing_offsets(None, 3)) == [0.0, 240.0, 480.0]
    with pytest.raises(ConfigError):
        firing_offsets([1, 2, 2, 4], 4)


def test_throttle_area_plate_law():
    # A = pi D^2/4 (1 - cos psi / cos psi0) (Heywood 1988, eq. 7.7 without the shaft term; from memory)
    D = 0.05
    assert throttle_area(D, 8.0, 8.0) == 0.0
    assert throttle_area(D, 90.0, 8.0) == pytest.approx(math.pi / 4 * D * D, rel=1e-12)
    a30 = throttle_area(D, 30.0, 8.0)
    assert a30 == pytest.approx(math.pi / 4 * D * D * (1 - math.cos(math.radians(30)) / math.cos(math.radians(8))))
    assert throttle_area(D, 20.0, 8.0) < a30 < throttle_area(D, 45.0, 8.0)


@pytest.mark.parametrize("angle", [90.0, 14.0])
def test_manifold_steady_draw_matches_orifice_equation(angle):
    """With a steady cylinder draw the intake manifold settles where the throttle passes it.

    Reference: the isentropic restriction equation (Heywood 1988, App. C), solved here independently by
    brentq; at 14 deg the throttle chokes and the manifold pressure follows the cylinders' response.
    """
    case = cyclesim.load_config("demo", [f"multi_cylinder.throttle_angle_deg={angle}"])
    ms = case.multi_cylinder
    info = {"ms": ms, "T_int": 305.0, "T_exh": 950.0, "R_int": 287.0, "R_exh": 287.0, "speed_rpm": 3000.0}
    man = _Manifolds([info], 1.0)
    mdot = 0.030                                   # kg/s drawn by the cylinders at p_ref
    Q = np.full((1, man.n), mdot / man.omega[0])
    p_ref = 0.9e5
    pref = np.full((1, man.n), p_ref)
    Qe = np.full((1, man.n), mdot / man.omega[0])
    pi, pe = man.solve(Q, pref, Qe, np.array([0.9e5]), np.array([1.05e5]))
    cda = ms.throttle_discharge_coefficient * throttle_area(ms.throttle_diameter_mm * 1e-3, angle,
                                                            ms.throttle_closed_angle_deg)
    p_amb = ms.ambient_pressure_bar * 1e5
    # cylinders draw mdot * p / p_ref (their response about the trace they saw)
    p_i = brentq(lambda p: _orifice_ref(cda, p_amb, 305.0, p) - mdot * p / p_ref, 1e3, p_amb - 1e-3)
    assert pi[0, -1] == pytest.approx(p_i, rel=2e-5)
    assert np.ptp(pi) < 1e-5 * p_i
    a_out = math.pi / 4 * (ms.exhaust_outlet_diameter_mm * 1e-3) ** 2
    p_e = brentq(lambda p: _orifice_ref(a_out, p, 950.0, p_amb, 287.0, 1.33) - mdot, p_amb + 1e-3, 5 * p_amb)
    assert pe[0, -1] == pytest.approx(p_e, rel=2e-5)


@pytest.fixture(scope="module")
def constant_two():
    return run_engine("demo", TWO + ["multi_cylinder.manifolds=constant"])


def test_constant_manifolds_equal_single_cylinder_runs(constant_two):
    # each cylinder with constant plenums is the single-cylinder case; engine figures sum them
    one = cyclesim.run("demo", TWO)
    for c in constant_two.cylinders:
        assert c["imep_net_bar"] == pytest.approx(one.summary["imep_net_bar"], rel=1e-9)
    e = constant_two.engine
    assert e["brake_torque_Nm"] == pytest.approx(one.summary["torque_Nm"], rel=1e-9)
    assert e["brake_power_kW"] == pytest.approx(one.summary["power_kW"], rel=1e-9)
    assert e["bsfc_g_per_kWh"] == pytest.approx(one.summary["bsfc_g_per_kWh"], rel=1e-9)
    # mean of the crank-resolved torque is the brake torque (integral of p dV over the cycle)
    t = constant_two.traces
    mean = np.trapezoid(t["engine_torque_Nm"], t["crank_deg"]) / 720.0
    assert mean == pytest.approx(e["brake_torque_Nm"], rel=3e-3)


def test_torque_trace_phasing(constant_two):
    # with two cylinders 360 deg apart the torque trace repeats every 360 deg
    t = constant_two.traces
    tq = t["engine_torque_Nm"]
    half = len(tq) // 2
    assert np.allclose(tq[:half], tq[half:2 * half], atol=1e-6 * np.abs(tq).max())


@pytest.fixture(scope="module")
def coupled_part_load():
    return run_engine("demo", TWO + ["multi_cylinder.throttle_angle_deg=20"])


def test_coupled_manifolds_conserve_mass(coupled_part_load):
    e = coupled_part_load.engine
    assert e["coupled_cycles"] >= 2
    assert not any("not settled" in w for w in coupled_part_load.warnings)
    # what the throttle passes, the cylinders draw; what they push out leaves through the exhaust system
    assert e["throttle_mass_mg_per_cycle"] == pytest.approx(e["cylinder_draw_mg_per_cycle"], rel=1e-3)
    assert e["exhaust_outlet_mass_mg_per_cycle"] == pytest.approx(e["cylinder_exhaust_mg_per_cycle"], rel=1e-3)
    assert e["intake_manifold_mean_bar"] < 0.9 * 1.0
    assert e["exhaust_manifold_mean_bar"] > 1.0
    for c in coupled_part_load.cylinders:
        assert all(np.isfinite(v) for v in c.values() if isinstance(v, float))


def test_throttling_lowers_load(coupled_part_load):
    wot = run_engine("demo", TWO)
    assert coupled_part_load.engine["intake_manifold_mean_bar"] < wot.engine["intake_manifold_mean_bar"]
    assert coupled_part_load.engine["bmep_bar"] < wot.engine["bmep_bar"]
    # a throttled engine pumps more (common practice)
    assert coupled_part_load.engine["pumping_power_kW"] / coupled_part_load.engine["indicated_power_gross_kW"] > \
        wot.engine["pumping_power_kW"] / wot.engine["indicated_power_gross_kW"]


def test_cut_and_deactivated_cylinders():
    base = cyclesim.load_config("demo", TWO + ["multi_cylinder.manifolds=constant"])
    fire, cut, deact = simulate_engines([
        EngineSetup(base, ("fire", "fire")), EngineSetup(base, ("fire", "cut")),
        EngineSetup(base, ("fire", "deactivated"))])
    c_cut = cut.cylinders[1]
    c_off = deact.cylinders[1]
    assert c_cut["fuel_mass_mg"] == 0.0 and c_off["fuel_mass_mg"] == 0.0
    # a motored cylinder with working valves pumps and loses heat: negative net work (common practice)
    assert c_cut["imep_net_bar"] < 0.0
    # valves held shut: no pumping loop, only the gas spring's heat and leakage loss (common practice:
    # deactivation saves most of the cut cylinder's pumping loss)
    assert c_cut["imep_net_bar"] < c_off["imep_net_bar"] <= 0.05
    assert fire.engine["brake_power_kW"] > deact.engine["brake_power_kW"] > cut.engine["brake_power_kW"]
    # the firing cylinder is unaffected with constant plenums
    assert cut.cylinders[0]["imep_net_bar"] == pytest.approx(fire.cylinders[0]["imep_net_bar"], rel=1e-9)


def test_lumped_walls_settle_and_relax():
    base = cyclesim.load_config("demo", TWO + ["multi_cylinder.manifolds=constant", "multi_cylinder.walls=lumped"])
    ms = base.multi_cylinder
    settled = run_engine(base)
    cps = 3000.0 / 120.0
    for c in settled.cylinders:
        # steady state of the lumped wall: T = T_coolant + R Qdot
        q_kW = c["wall_heat_J"] * cps / 1e3
        assert c["wall_mean_K"] == pytest.approx(ms.coolant_temperature_K + ms.wall_resistance_K_per_kW * q_kW,
                                                 rel=2e-3)
    # after a cut, the cut cylinder's walls relax from the fired state: T = T_ss + (T0 - T_ss) exp(-t/tau)
    start = settled.wall_mean_K
    t = 20.0
    later = run_engine(base, modes=("fire", "cut"), wall_start_K=start, wall_elapsed_s=t)
    cut = later.cylinders[1]
    T_ss = ms.coolant_temperature_K + ms.wall_resistance_K_per_kW * cut["wall_heat_J"] * cps / 1e3
    want = T_ss + (start[1] - T_ss) * math.exp(-t / ms.wall_time_constant_s)
    assert cut["wall_mean_K"] == pytest.approx(want, rel=2e-3)
    assert cut["wall_mean_K"] < start[1]


def test_bad_multi_cylinder_inputs():
    with pytest.raises(ConfigError, match="spread_spark_deg"):
        run_engine("demo", ["multi_cylinder.spread_spark_deg=[1, 2]"])
    with pytest.raises(ConfigError, match="modes"):
        run_engine("demo", modes=("fire", "fire"))
    with pytest.raises(ConfigError, match="unknown key"):
        cyclesim.load_config("demo", ["multi_cylinder.throttle_angel_deg=30"])


def test_blowdown_interference_and_divided_exhaust():
    # Exhaust blowdown interference (common practice; Heywood 1988, sec. 6.8 and 7.6, from memory): in a
    # four-cylinder 1-3-4-2 engine with one common exhaust volume, each cylinder's blowdown pulse arrives
    # while the cylinder that fires before it is at the end of its exhaust stroke (180 deg later in that
    # cylinder's cycle), raising its residual gas.  Cut cylinder 1 and that pulse is gone: cylinder 2's
    # residual falls and its charge rises.  A divided manifold that pairs cylinders 360 deg apart (1-4, 2-3)
    # keeps the pulses apart, so cutting one cylinder barely moves the others.
    four = ["simulation.step_deg=1.0", "multi_cylinder.spread_trapped_mass=null",
            "multi_cylinder.spread_spark_deg=null", "multi_cylinder.spread_compression_ratio=null",
            "multi_cylinder.spread_wall_temperature_K=null"]
    common = cyclesim.load_config("demo", four + ["multi_cylinder.exhaust_branches=null"])
    paired = cyclesim.load_config("demo", four + ["multi_cylinder.exhaust_branches=[1, 2, 2, 1]"])
    cut1 = ("cut", "fire", "fire", "fire")
    c_all, c_cut, p_all, p_cut = simulate_engines([EngineSetup(common), EngineSetup(common, cut1),
                                                   EngineSetup(paired), EngineSetup(paired, cut1)])
    r_all, r_cut = c_all.cylinders[1]["residual_fraction"], c_cut.cylinders[1]["residual_fraction"]
    assert r_cut < 0.8 * r_all
    assert c_cut.cylinders[1]["imep_net_bar"] > 1.02 * c_all.cylinders[1]["imep_net_bar"]
    # the cylinder that fires after the cut one (3) is not hit by the missing pulse
    assert c_cut.cylinders[2]["imep_net_bar"] == pytest.approx(c_all.cylinders[2]["imep_net_bar"], rel=5e-3)
    for k in (1, 2, 3):
        assert p_cut.cylinders[k]["imep_net_bar"] == pytest.approx(p_all.cylinders[k]["imep_net_bar"], rel=2e-3)
    # the pulses of a branch's own cylinders no longer reach the others: lower residual for all
    assert p_all.cylinders[1]["residual_fraction"] < r_all
    # two branches, each conserving mass: the outlets pass what the cylinders push out
    e = p_all.engine
    assert e["exhaust_branches"] == [1, 2, 2, 1]
    assert "exhaust_branch_2_bar" in p_all.traces
    assert e["exhaust_outlet_mass_mg_per_cycle"] == pytest.approx(e["cylinder_exhaust_mg_per_cycle"], rel=1e-3)
    assert e["throttle_mass_mg_per_cycle"] == pytest.approx(e["cylinder_draw_mg_per_cycle"], rel=1e-3)
    with pytest.raises(ConfigError, match="exhaust_branches"):
        run_engine("demo", four + ["multi_cylinder.exhaust_branches=[1, 2]"])


def test_progress_lines_replace_each_other_only_on_a_terminal():
    # on a terminal one live status line (tqdm), each message replacing the one before and cleared at
    # the end so the results start on a clean line; into a file or pipe every message is kept as a line
    import io

    from cyclesim.cli.engine import _Progress

    class Tty(io.StringIO):
        def isatty(self):
            return True

    for stream, live in ((Tty(), True), (io.StringIO(), False)):
        p = _Progress(stream)
        p("coupled cycle 1: change 1.0e+00")
        p("coupled cycle 2: change 5.7e-02")
        p.close()
        text = stream.getvalue()
        if live:
            assert "\n" not in text and "coupled cycle 2: change 5.7e-02" in text
            assert text.rstrip(" ").endswith("\r")      # the line is blanked and the cursor back at its start
        else:
            assert text == "  coupled cycle 1: change 1.0e+00\n  coupled cycle 2: change 5.7e-02\n"


def test_boosted_supply_feeds_the_throttle_and_the_exhaust_empties_to_ambient():
    """A boosted engine: the throttle draws from the charge air (intake_supply_pressure_bar) while the
    exhaust restriction still empties to ambient.  Reference as above: the isentropic restriction
    equation (Heywood 1988, App. C), solved independently for each side."""
    case = cyclesim.load_config("demo", ["multi_cylinder.intake_supply_pressure_bar=1.6",
                                         "multi_cylinder.throttle_angle_deg=30"])
    ms = case.multi_cylinder
    info = {"ms": ms, "T_int": 320.0, "T_exh": 950.0, "R_int": 287.0, "R_exh": 287.0, "speed_rpm": 3000.0}
    man = _Manifolds([info], 1.0)
    mdot = 0.050
    Q = np.full((1, man.n), mdot / man.omega[0])
    p_ref = 1.4e5
    pi, pe = man.solve(Q, np.full((1, man.n), p_ref), Q.copy(), np.array([1.4e5]), np.array([1.2e5]))
    cda = ms.throttle_discharge_coefficient * throttle_area(ms.throttle_diameter_mm * 1e-3, 30.0,
                                                            ms.throttle_closed_angle_deg)
    p_i = brentq(lambda p: _orifice_ref(cda, 1.6e5, 320.0, p) - mdot * p / p_ref, 1e3, 1.6e5 - 1e-3)
    assert pi[0, -1] == pytest.approx(p_i, rel=2e-5) and pi[0, -1] > 1.05e5     # above ambient: boosted
    a_out = math.pi / 4 * (ms.exhaust_outlet_diameter_mm * 1e-3) ** 2
    p_amb = ms.ambient_pressure_bar * 1e5
    p_e = brentq(lambda p: _orifice_ref(a_out, p, 950.0, p_amb, 287.0, 1.33) - mdot, p_amb + 1e-3, 5 * p_amb)
    assert pe[0, -1] == pytest.approx(p_e, rel=2e-5)


def test_a_boosted_config_without_its_supply_pressure_is_warned():
    eng = run_engine("demo_turbo", TWO + ["multi_cylinder.intake_supply_pressure_bar=1.0"])
    assert any("a boosted engine needs its charge-air pressure there" in w for w in eng.warnings)
    ok = run_engine("demo_turbo", TWO)
    assert not any("charge-air pressure" in w for w in ok.warnings)
    assert ok.engine["intake_manifold_mean_bar"] > 1.5


def test_engine_warnings_group_by_kind_with_the_cylinders():
    from cyclesim.results.warning_groups import cylinder_warning_lines

    lines = cylinder_warning_lines(["cylinder 1: exhaust choked for 12 deg", "cylinder 3: exhaust choked for 14.5 deg",
                                    "cylinder 3: trapped mass low", "manifolds not settled after 8 coupled cycles"], 4)
    assert lines == ["  warning (2 of 4 cylinders): exhaust choked for 12-14.5 deg  [cyl 1, cyl 3]",
                     "  warning (1 of 4 cylinders): trapped mass low  [cyl 3]",
                     "  warning: manifolds not settled after 8 coupled cycles"]


def test_grouped_warning_states_the_range_of_what_differs():
    """One line stands for a group: numbers shared by all its messages stay, those that differ are
    written as their range (a negative bound with "to"), so "only 98.7 %" does not stand for 52 %."""
    from cyclesim.results.warning_groups import group_labelled, warning_lines

    msgs = [("a", ["only 98.7 % burned at EVO (140 deg)"]), ("b", ["only 52.1 % burned at EVO (140 deg)"]),
            ("c", ["only 60.0 % burned at EVO (140 deg)", "knock margin -3 deg"]), ("d", ["knock margin 2 deg"])]
    assert warning_lines(group_labelled(msgs), 4) == [
        "warning (3 of 4 points): only 52.1-98.7 % burned at EVO (140 deg)  [a, b, c]",
        "warning (2 of 4 points): knock margin -3 to 2 deg  [c, d]"]
