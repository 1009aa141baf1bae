"""The multi-cylinder engine with runners in every mode the engine offers: constant or coupled
manifolds, lumped walls, cut cylinders, the `cyclesim engine` command and the cylinder-cut test.
Small cases (two cylinders, 8-cell runners) so that each runs in seconds.

Checks:
- with constant manifolds each cylinder with its runners is the single-cylinder run of the same
  case (a case's result does not depend on its batch-mates; common practice of this code's batches);
- started from the 0-D engine's settled state, the coupled iteration reaches the point it reaches
  from constant traces, within the settling tolerance (a fixed point does not depend on the start);
- with lumped walls and a cut cylinder the engine's mass balance still closes per cycle to 1e-10,
  and the cut cylinder's walls settle cooler than the firing one's (it releases no heat; common
  practice);
- the cylinder-cut test's idealised step is exact with runners as without (IP_k = B - B_k, Heywood
  1988, sec. 13.3; from memory), and the cut cylinder's pumping loop makes it read friction high.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

import cyclesim
from cyclesim.cli import main
from cyclesim.engine import run_engine, runner_links
from cyclesim.studies.cylinder_cut import cylinder_cut_test

CONFIG = "configs/demo_engine_runners.yaml"
SMALL = ["engine.cylinders=2", "multi_cylinder.firing_order=[1,2]", "multi_cylinder.exhaust_branches=null",
         "multi_cylinder.spread_trapped_mass=null", "multi_cylinder.spread_spark_deg=null",
         "multi_cylinder.spread_compression_ratio=null", "multi_cylinder.spread_wall_temperature_K=null",
         "intake.runner.cells=8", "exhaust.runner.cells=8"]


def test_constant_manifolds_give_each_cylinder_its_single_cylinder_run():
    eng = run_engine(CONFIG, SMALL, manifolds="constant")
    assert eng.engine["runners"] and eng.engine["manifolds"] == "constant"
    single = cyclesim.run(CONFIG, SMALL)
    assert single.trace["intake_runner_valve_pressure_bar"].max() > 0.0      # the runners are there
    for r in eng.cylinder_results:
        for key in ("volumetric_efficiency", "imep_net_bar", "p_max_bar"):
            assert r.summary[key] == pytest.approx(single.summary[key], rel=1e-9), key


def test_lumped_start_reaches_the_point_reached_from_constant_traces(monkeypatch):
    # a short runner pair to keep it cheap; both runs settle (no warning) at tolerance 5e-4
    two = SMALL + ["multi_cylinder.max_coupled_cycles=40"]
    warm = run_engine(CONFIG, two)
    monkeypatch.setattr(runner_links, "LUMPED_START", False)
    cold = run_engine(CONFIG, two)
    assert not warm.warnings and not cold.warnings
    assert warm.engine["lumped_start_coupled_cycles"] >= 2 and "lumped_start_coupled_cycles" not in cold.engine
    assert warm.engine["coupled_cycles"] < cold.engine["coupled_cycles"]
    # the first coupled cycle starts nearer the fixed point (measured 0.054 against 0.085)
    assert warm.coupling_history[0]["manifold_change"] < 0.8 * cold.coupling_history[0]["manifold_change"]
    tol = 2e-3           # a few settling tolerances: each run stops within it of the fixed point
    for a, b in zip(warm.cylinder_results, cold.cylinder_results):
        assert a.summary["volumetric_efficiency"] == pytest.approx(b.summary["volumetric_efficiency"], rel=tol)
        assert a.summary["imep_net_bar"] == pytest.approx(b.summary["imep_net_bar"], rel=tol)
    assert warm.engine["brake_torque_Nm"] == pytest.approx(cold.engine["brake_torque_Nm"], rel=tol)


def test_engine_command_with_runners_lumped_walls_and_a_cut_cylinder(tmp_path):
    out = tmp_path / "eng"
    args = ["engine", CONFIG, "--out", str(out), "--no-progress", "--no-plots", "--walls", "lumped",
            "--modes", "fire,cut"]
    for s in SMALL + ["multi_cylinder.max_coupled_cycles=30"]:
        args += ["--set", s]
    assert main(args) == 0
    d = json.loads((out / "engine.json").read_text())
    e = d["engine"]
    assert e["runners"] and e["walls"] == "lumped" and e["modes"] == ["fire", "cut"]
    assert e["lumped_start_coupled_cycles"] >= 1
    walls = [c["wall_mean_K"] for c in d["cylinders"]]
    assert walls[1] < walls[0] - 20.0                # the cut cylinder's walls settle cooler
    for row in e["runner_mass_balance"]:
        scale = row["throughput_kg"]
        assert scale > 1e-4
        for side in ("intake", "exhaust"):
            closing = row[f"far_end_in_{side}_kg"] - row[f"runner_to_cylinder_{side}_kg"] \
                - row[f"stored_change_{side}_kg"]
            assert abs(closing) < 1e-10 * scale
        assert abs(row["volume_draw_kg"] - row["far_end_in_intake_kg"]) < 1e-10 * scale
    assert np.isfinite(e["brake_torque_Nm"])


def test_cut_test_with_runners():
    two = SMALL[:3] + ["multi_cylinder.spread_trapped_mass=[1.0, 0.98]"] + SMALL[4:]
    ct = cylinder_cut_test(CONFIG, two, effects=("pumping",), plots=False)
    ideal = ct.step("ideal")
    assert abs(ideal["indicated_bias_pct"]) < 1e-6
    assert np.allclose(ideal["cylinder_estimates_kW"], ideal["cylinder_truth_kW"], rtol=1e-8)
    assert abs(ideal["cylinder_truth_kW"][0] - ideal["cylinder_truth_kW"][1]) > 1e-3    # the spread is seen
    assert ct.step("pumping")["friction_bias_step_kW"] > 0


def test_convergence_history_of_a_cylinder_that_draws_nothing():
    # a deactivated cylinder (valves shut) draws no mass: its change is 0, not a division by zero
    fired = [(12.0, 4.5e-4, 0.1), (12.1, 4.6e-4, 0.05)]
    shut = [(-0.03, 0.0, 0.1), (-0.03, 0.0, 0.05)]
    rows = runner_links.coupling_history([fired, shut])
    assert rows[1]["ve_change"][1] == 0.0
    assert rows[1]["ve_change"][0] == pytest.approx(0.1e-4 / 4.6e-4)
    assert rows[1]["imep_change"][1] == 0.0 and rows[1]["manifold_change"] == 0.05
