"""The studies' console tables and files carry the burn angles (0-10 %, 10-90 %) and NO with the
predictive burn (burn.model: entrainment), whose angles are outputs rather than inputs."""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest

from cyclesim.cli import main

SETS = ["--set=burn.model=entrainment", "--set=simulation.step_deg=1.0", "--set=emissions.model=zeldovich_no"]
BURN_NO = ("burn_0_10_deg", "burn_10_90_deg", "no_ppm_wet", "no_g_per_kWh")


def _columns(path, keys=BURN_NO + ("burn.spark_advance_deg",)):
    rows = list(csv.DictReader(ln for ln in path.read_text().splitlines() if not ln.startswith("#")))
    return {k: np.array([float(r[k]) if r[k] not in ("", None) else math.nan for r in rows])
            for k in keys if k in rows[0]}


def _console_has_burn_and_no(text):
    head = next(ln for ln in text.splitlines() if "0-10 deg" in ln)
    assert "10-90 deg" in head and "NO ppm" in head and "NO g/kWh" in head


def test_spark_study_shows_burn_angles_and_no(tmp_path, capsys):
    assert main(["spark", "demo", "--advance", "10:40:10", "--no-plots", "--out", str(tmp_path)] + SETS) == 0
    _console_has_burn_and_no(capsys.readouterr().out)
    col = _columns(tmp_path / "sweep.csv")
    for k in BURN_NO:
        assert np.all(np.isfinite(col[k])) and np.all(col[k] > 0), k
    # NO falls with spark retard (Heywood 1988, ch. 11, from memory)
    o = np.argsort(col["burn.spark_advance_deg"])
    assert np.all(np.diff(col["no_ppm_wet"][o]) > 0)


def test_sweep_shows_burn_angles_and_no(tmp_path, capsys):
    out = tmp_path / "sw"
    assert main(["sweep", "demo", "--vary", "operating.speed_rpm=2000,4000", "--no-progress", "--out", str(out)]
                + SETS) == 0
    _console_has_burn_and_no(capsys.readouterr().out)
    col = _columns(out / "sweep.csv")
    for k in BURN_NO:
        assert np.all(np.isfinite(col[k])), k


@pytest.mark.parametrize("which", ["--part-load-only", "--full-load-only"])
def test_maps_show_burn_angles_and_no(tmp_path, capsys, which):
    loads = ["--loads", "0.6,0.9"] if which == "--part-load-only" else []
    assert main(["map", "demo", "--speeds", "2000,4000", *loads, "--spark", "fixed", "--exhaust", "fixed", which,
                 "--no-progress", "--no-plots", "--out", str(tmp_path)] + SETS) == 0
    _console_has_burn_and_no(capsys.readouterr().out)
    name = "part_load_map.csv" if which == "--part-load-only" else "full_load.csv"
    col = _columns(tmp_path / name)
    for k in BURN_NO:
        assert np.all(np.isfinite(col[k])), k


def test_loss_breakdown_shows_the_full_cycles_burn_angles_and_no(tmp_path, capsys):
    assert main(["losses", "demo", "--no-plots", "--out", str(tmp_path)] + SETS) == 0
    text = capsys.readouterr().out
    assert "0-10 % burn" in text and "10-90 % burn" in text and "NO" in text
    fc = json.loads((tmp_path / "losses.json").read_text())["full_cycle"]
    for k in BURN_NO:
        assert math.isfinite(fc[k]) and fc[k] > 0, k
