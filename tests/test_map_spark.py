"""Spark and mixture per point in full-load curves and part-load maps: the knock-limited rule, MBT,
enrichment to an exhaust-temperature limit, BSFC definitions, console and command line."""

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import cyclesim
from cyclesim.config import load_config
from cyclesim.errors import ConfigError
from cyclesim.studies.enrichment import LIMIT_EXHAUST
from cyclesim.studies.maps import full_load_curve, part_load_map
from cyclesim.studies.point_spark import _bracket, default_spark_mode

FIXED = ["simulation.step_deg=1.0", "simulation.step_reference_rpm=0"]  # one step at every speed: one batch
STEP = 0.25     # the knock-limit search step of choose_spark (its default)


def _run_at(config, row, **more):
    ov = FIXED + [f"operating.speed_rpm={row['speed_rpm']!r}",
                  f"operating.intake_pressure_bar={row['intake_pressure_bar']!r}",
                  f"operating.exhaust_pressure_bar={row['exhaust_pressure_bar']!r}",
                  f"operating.lambda={row['lambda']!r}"]
    ov += [f"{k}={v!r}" for k, v in more.items()]
    return cyclesim.run(config, ov)


@pytest.fixture(scope="module")
def turbo_full_load():
    return full_load_curve("demo_turbo", [1500, 4500, 6000], overrides=FIXED)


def test_knock_limited_is_the_default_with_a_knock_model(turbo_full_load):
    assert default_spark_mode(load_config("demo_turbo")) == "knock_limited"
    assert default_spark_mode(load_config("demo")) == "mbt"
    with pytest.raises(ConfigError, match="needs a knock model"):
        full_load_curve("demo", [3000], overrides=FIXED, spark="knock_limited")
    limits = {r["speed_rpm"]: r["spark_limit"] for r in turbo_full_load.rows}
    assert limits[1500.0] == "knock"       # the low-speed boosted point knocks well before MBT


def test_knock_limited_points_meet_the_criterion_one_step_past_the_margin(turbo_full_load):
    # knock criterion: onset predicted by the knock model (Livengood & Wu 1955 integral reaching 1,
    # counted only above the model's unburned-share cut-off); the rule is the spark study's
    # (recommended = knock-limited advance - margin); knock onset advances with spark (common practice)
    checked = 0
    for r in turbo_full_load.rows:
        if r["spark_limit"] != "knock":
            continue
        a = r["spark_advance_deg"]
        at = _run_at("demo_turbo", r, **{"burn.spark_advance_deg": a})
        past = _run_at("demo_turbo", r, **{"burn.spark_advance_deg": a + 2.0 + STEP})
        assert not math.isfinite(at.summary["knock_onset_deg"])
        assert math.isfinite(past.summary["knock_onset_deg"])
        assert at.summary["knock_integral_max"] < 1.0 <= past.summary["knock_integral_max"]
        assert r["knock_margin_deg"] == pytest.approx(r["knock_limit_deg"] - a, abs=1e-9)
        assert r["knock_margin_deg"] >= 2.0 - 1e-9
        # the row's figures are those of the point run alone at its advance
        assert r["torque_Nm"] == pytest.approx(at.summary["torque_Nm"], rel=1e-9)
        assert r["knock_integral_margin"] == pytest.approx(1.0 - at.summary["knock_integral_max"], abs=1e-12)
        checked += 1
    assert checked >= 1


def test_mbt_points_are_the_torque_maximum_within_a_tenth_of_a_percent():
    m = part_load_map("demo", [2000, 4000], [0.5, 0.95], spark="mbt", overrides=FIXED, plots=False)
    for r in m.rows:
        assert r["spark_limit"] == "MBT"
        t0 = r["torque_Nm"]
        for d in (-2.0, 2.0):
            t = _run_at("demo", r, **{"burn.spark_advance_deg": r["spark_advance_deg"] + d}).summary["torque_Nm"]
            # MBT: the advance of maximum brake torque (Heywood 1988 §9.2.2, from memory)
            assert t <= t0 * 1.001


def test_enrichment_holds_the_exhaust_temperature_limit():
    limit = 1250.0
    fl = full_load_curve("demo_turbo", [1500, 6000], overrides=FIXED, exhaust_limit_K=limit)
    base = full_load_curve("demo_turbo", [1500, 6000], overrides=FIXED)
    for r, b in zip(fl.rows, base.rows):
        assert b["exhaust_temperature_K"] > limit + 5      # enrichment is needed at both speeds
        assert r["enriched"] and r["lambda"] < 1.0 and r["exhaust_limit_held"]
        assert abs(r["exhaust_temperature_K"] - limit) <= 5.0
        # enrichment costs fuel: the BSFC cost is the difference to the unenriched point
        assert r["enrichment_bsfc_cost_g_per_kWh"] > 0
        # the row is the point run alone at its spark and lambda
        alone = _run_at("demo_turbo", r, **{"burn.spark_advance_deg": r["spark_advance_deg"]})
        assert alone.summary["exhaust_temperature_K"] == pytest.approx(r["exhaust_temperature_K"], abs=0.5)
    txt = fl.text()
    assert "lambda" in txt and "limited by" in txt


def test_enrichment_says_where_the_lambda_floor_binds():
    fl = full_load_curve("demo_turbo", [1500], overrides=FIXED, exhaust_limit_K=900.0, lambda_floor=0.85)
    (r,) = fl.rows
    assert r["lambda"] == pytest.approx(0.85) and r["spark_limit"] == LIMIT_EXHAUST
    assert r["exhaust_limit_held"] is False and r["exhaust_temperature_K"] > 905
    assert "exhaust-temperature limit not held" in fl.text()
    assert r["in_contours"] is True


def test_bsfc_follows_its_definitions(turbo_full_load):
    case = load_config("demo_turbo")
    from cyclesim.fuels import get_fuel

    lhv = get_fuel(case.fuel.name).lhv_J_per_kg
    ncyl = case.engine.cylinders
    for r in turbo_full_load.rows:
        # BSFC [g/kWh] = 3.6e9 / (eta_brake LHV [J/kg]) (Heywood 1988 eq. 2.22 and 2.23, definitions)
        assert r["bsfc_g_per_kWh"] == pytest.approx(3.6e9 / (r["eta_brake"] * lhv), rel=1e-3)
        # and = fuel mass flow [g/h] / brake power [kW], the flow from the point's own fuel mass per
        # cylinder and cycle and its speed (four-stroke: N/120 cycles per second)
        fuel_g_per_h = r["fuel_mass_mg"] * 1e-3 * ncyl * r["speed_rpm"] / 120.0 * 3600.0
        assert r["bsfc_g_per_kWh"] == pytest.approx(fuel_g_per_h / r["power_kW"], rel=1e-9)


def test_console_groups_warnings_by_kind_with_the_points():
    fl = full_load_curve("demo_turbo", [1500, 2250, 6000], overrides=FIXED, spark="fixed")
    txt = fl.text()
    knock = [ln for ln in txt.splitlines() if ln.startswith("warning") and "autoignition" in ln]
    assert len(knock) == 1                          # one line for the kind
    assert "of 3 points" in knock[0] and "1500 rpm" in knock[0]
    groups = fl.figures()["warnings_grouped"]
    assert all(g["count"] == len(g["points"]) for g in groups)


def test_map_command_line_spark_options(tmp_path, capsys):
    from cyclesim.cli import main

    args = ["map", "demo_turbo", "--full-load-only", "--speeds", "3000", "--no-plots", "--no-progress",
            *sum((["--set", s] for s in FIXED), [])]
    assert main(args + ["--out", str(tmp_path / "a")]) == 0
    out = capsys.readouterr().out
    assert "limited by" in out and "knock" in out and "CAUTION" in out
    row = json.loads((tmp_path / "a" / "full_load.json").read_text())["rows"][0]
    assert row["spark_limit"] == "knock" and row["knock_margin_deg"] >= 2.0
    with pytest.raises(SystemExit) as e:       # argparse refuses an unknown mode (usage, exit 2)
        main(args + ["--spark", "best", "--out", str(tmp_path / "b")])
    assert e.value.code == 2
    capsys.readouterr()
    assert main(["map", "demo", "--spark", "knock_limited", "--out", str(tmp_path / "c")]) == 2
    assert "needs a knock model" in capsys.readouterr().err
    assert not (tmp_path / "c").exists()
    assert main(args + ["--lambda-floor", "0.1", "--out", str(tmp_path / "d")]) == 2


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(-10, 80, allow_nan=False), min_size=1, max_size=12, unique=True),
       st.floats(-10, 80, allow_nan=False))
def test_bracket_of_a_monotone_knock_table(advances, onset_from):
    # knock at every advance from onset_from on: the bracket's low end never knocks, its high end
    # is the least knocking advance, and nothing between them was run
    t = {a: (1.0, 0.0, a >= onset_from, 50.0) for a in advances}
    lo, hi = _bracket(t)
    knocking = sorted(a for a in advances if a >= onset_from)
    clear = sorted(a for a in advances if a < onset_from)
    assert hi == (knocking[0] if knocking else None)
    assert lo == (clear[-1] if clear else None) if knocking else lo == max(advances)
    if lo is not None and hi is not None:
        assert lo < hi and not any(lo < a < hi for a in advances)
