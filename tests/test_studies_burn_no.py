"""The studies show the burn angles (0-10 %, 10-90 %) and, with an emissions model, NO."""

from __future__ import annotations

import numpy as np
import pytest

from cyclesim.studies.losses import loss_breakdown
from cyclesim.studies.maps import part_load_map
from cyclesim.studies.spark import spark_study
from cyclesim.studies.spark_console import spark_table_lines
from cyclesim.studies.sweep import sweep
from cyclesim.studies.map_console import map_text

ON = ["emissions.model=zeldovich_no"]
OFF = ["emissions.model=none"]


def test_spark_study_table_and_plot_show_burn_angles_and_no(tmp_path):
    # NO is on in the demo config itself: no override needed
    st = spark_study("demo", "8:32:8", out=tmp_path, traces=2)
    head = spark_table_lines(st)[0]
    assert "0-10 deg" in head and "10-90 deg" in head and "NO ppm" in head and "NO g/kWh" in head
    assert (tmp_path / "spark_burn_no.png").is_file()
    adv, no = st.table.column("burn.spark_advance_deg"), st.table.column("no_ppm_wet")
    o = np.argsort(adv)
    assert np.all(np.diff(no[o]) > 0)            # NO falls with spark retard


def test_spark_study_without_emissions_shows_burn_angles_only(tmp_path):
    st = spark_study("demo", "16:32:8", overrides=OFF, out=tmp_path, plots=True, traces=1)
    head = spark_table_lines(st)[0]
    assert "0-10 deg" in head and "NO ppm" not in head
    assert (tmp_path / "spark_burn_no.png").is_file()


def test_sweep_table_shows_no_and_motored_points_leave_it_out():
    res = sweep("demo", {"operating.fuel_cut": [False, True]})
    text = res.text()
    assert "NO ppm" in text and "0-10 deg" in text
    no = res.column("no_ppm_wet")
    assert np.isfinite(no[0]) and np.isnan(no[1])
    assert np.isnan(res.column("burn_0_10_deg")[1])


def test_loss_breakdown_reports_the_full_cycle_burn_angles_and_no():
    lb = loss_breakdown("demo")
    assert lb.point["no_ppm_wet"] > 500 and lb.point["burn_0_10_deg"] > 10
    assert "NO" in lb.text() and "0-10 % burn" in lb.text()
    assert lb.figures()["full_cycle"]["no_g_per_kWh"] == pytest.approx(lb.point["no_g_per_kWh"])


@pytest.mark.slow
def test_part_load_map_has_an_no_map_and_no_against_torque(tmp_path):
    m = part_load_map("demo", speeds=[2000, 3000], loads=[0.5, 0.7, 0.9], overrides=ON, out=tmp_path,
                      exhaust="fixed")
    for name in ("map_no.png", "map_no_g_per_kWh.png", "map_no_torque.png"):
        assert (tmp_path / name).is_file()
    assert "NO ppm" in map_text(m) and "0-10 deg" in map_text(m)
    no = m.column("no_ppm_wet")
    assert np.isfinite(no).all() and (no > 0).all()
    # NO rises with load at each speed (hotter burned gas, less residual; Heywood 1988 ch. 11, from memory)
    for v in (2000, 3000):
        sel = m.column("speed_rpm") == v
        p = m.column("intake_pressure_bar")[sel]
        assert np.all(np.diff(no[sel][np.argsort(p)]) > 0)
