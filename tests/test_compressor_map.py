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
