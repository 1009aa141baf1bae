"""Compressor map input and the boost match on it."""

import json
import math

import numpy as np
import pytest

from cyclesim.errors import ConfigError
from cyclesim.studies.boost import boost_match
from cyclesim.studies.compressor_map import load_compressor_map

FIXED = ["simulation.step_deg=1.0", "simulation.step_reference_rpm=0"]


def test_demo_map_reads_and_interpolates():
    m = load_compressor_map("demo_compressor_map")
    assert m.t_ref_K == 298.15 and m.p_ref_bar == 1.0 and len(m.lines) == 5
    # at a map point the linear interpolation returns the point's own values
    i = 8
    pt = m.at(m.flow[i], m.pr[i])
    assert pt.on_map and pt.efficiency == pytest.approx(m.eta[i], abs=1e-9)
    assert pt.corrected_speed_rpm == pytest.approx(m.speed_rpm[i], rel=1e-9)
    # on the surge line the surge margin is zero; flow past the choke end is off the map
    f0, p0, _ = m.lines[120000.0]
    assert m.at(f0[0], p0[0]).surge_margin == pytest.approx(0.0, abs=1e-9)
    far = m.at(0.5, 1.5)
    assert not far.on_map and far.efficiency is None and far.choke_margin < 0
    # corrected flow: m sqrt(T1/T_ref) / (p1/p_ref) (turbomachinery similarity, from memory)
    assert m.corrected_flow(0.1, 4 * 298.15, 2.0) == pytest.approx(0.1 * 2 / 2, rel=1e-12)


def test_malformed_maps_are_refused(tmp_path):
    bad = tmp_path / "m.csv"
    bad.write_text("# reference_temperature_K: 298\n# reference_pressure_bar: 1\na,b,c,d\n1,2,3,4\n")
    with pytest.raises(ConfigError, match="columns"):
        load_compressor_map(bad)
    bad.write_text("corrected_speed_rpm,corrected_flow_kg_per_s,pressure_ratio,efficiency\n1,0.1,1.2,0.7\n")
    with pytest.raises(ConfigError, match="reference"):
        load_compressor_map(bad)
    with pytest.raises(ConfigError, match="no such file"):
        load_compressor_map(tmp_path / "none.csv")


def test_boost_match_takes_the_compressor_efficiency_from_the_map(tmp_path):
    m = load_compressor_map("demo_compressor_map")
    b = boost_match("demo_turbo", 1.6, overrides=FIXED, compressor_map=m, out=tmp_path)
    s = b.state
    assert b.converged and s["map_on_map"]
    mp = m.at(s["map_corrected_flow_kg_per_s"], s["map_pressure_ratio"])
    assert s["eta_compressor"] == pytest.approx(mp.efficiency, abs=1e-3)
    # T2 = T1 (1 + (PR^((g-1)/g) - 1) / eta_c) with the map's efficiency at the operating point
    # (isentropic efficiency definition, any thermodynamics text, e.g. Cengel & Boles, Thermodynamics)
    g = 1.4
    T2 = s["T1_K"] * (1 + (s["compressor_pressure_ratio"] ** ((g - 1) / g) - 1) / mp.efficiency)
    assert s["T2_K"] == pytest.approx(T2, abs=0.5)
    assert 0 < s["map_surge_margin"] and 0 < s["map_choke_margin"]
    assert s["turbocharger_speed_rpm"] == pytest.approx(mp.corrected_speed_rpm * math.sqrt(298.0 / 298.15), rel=1e-3)
    assert (tmp_path / "compressor_map.png").read_bytes()[:4] == b"\x89PNG"
    assert "from the map" in b.text() and "surge margin" in b.text()
    # without a map the fixed efficiency is used, and said so
    b0 = boost_match("demo_turbo", 1.6, overrides=FIXED)
    assert b0.state["eta_compressor"] == 0.72
    assert any("no compressor map given" in n for n in b0.notes)


def test_boost_command_line_refuses_a_missing_map(tmp_path, capsys):
    from cyclesim.cli import main

    assert main(["boost", "demo_turbo", "--compressor-map", str(tmp_path / "x.csv"), "--out", str(tmp_path / "o")]) == 2
    assert "no such file" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()


def test_full_load_curve_with_boost_matched_at_the_chosen_spark(tmp_path):
    from cyclesim.studies.maps import full_load_curve

    fl = full_load_curve("demo_turbo", [1500, 4500], overrides=FIXED, boost_bar=1.6,
                         boost_options={"compressor_map": "demo_compressor_map"}, out=tmp_path)
    rows = {r["speed_rpm"]: r for r in fl.rows}
    lo, hi = rows[1500.0], rows[4500.0]
    # at low speed the little air flow at the target pressure ratio lies left of the demo map's
    # surge line (off the map): what binds is said; at 4500 rpm the target holds on the map
    assert lo["boost_limit"] != "target reached"
    assert "off the compressor map" in lo["boost_limit"] or "surge" in lo["boost_limit"]
    assert lo["surge_margin"] is None or lo["surge_margin"] < 0
    assert hi["boost_limit"] == "target reached" and hi["intake_pressure_bar"] == 1.6
    assert hi["spark_limit"] == "knock"
    # the matched point is the turbocharger at that spark: a boost match at the row's spark and
    # lambda gives the row's intake temperature and back pressure (within the alternation's settling)
    b = boost_match("demo_turbo", 1.6, overrides=FIXED + ["operating.speed_rpm=4500",
                                                         f"burn.spark_advance_deg={hi['spark_advance_deg']!r}",
                                                         f"operating.lambda={hi['lambda']!r}"],
                    compressor_map="demo_compressor_map")
    assert b.state["T_intake_K"] == pytest.approx(hi["intake_temperature_K"], abs=1.0)
    assert b.state["p3_bar"] == pytest.approx(hi["exhaust_pressure_bar"], abs=0.02)
    assert "turbocharger at each speed" in fl.text() and "boost: what binds" in fl.text()
    assert (tmp_path / "compressor_map.png").stat().st_size > 0
