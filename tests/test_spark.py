"""Spark-advance study: MBT from a fit, flat top of the torque curve, knock and pressure limits.

Engine-level checks use textbook rules of thumb for spark-ignition engines at
MBT timing (Heywood 1988, ch. 9, from memory): about half the charge burned
6-12 deg after TDC, peak pressure 12-18 deg after TDC, and a flat torque
maximum (a few degrees of retard cost about 1 %, common practice).  They need
the default 0.5 deg step, so they run one coarse 2 deg advance grid per engine.
"""

from __future__ import annotations

import argparse
import json
import textwrap

import numpy as np
import pytest

from cyclesim.errors import ConfigError
from cyclesim.studies.spark import SPARK_CAUTION, crossing_up, fit_torque_peak, spark_study

KEY = "burn.spark_advance_deg"
FAST_CLOSED = ["simulation.step_deg=1.0"]


# -- curve reading on exact curves -------------------------------------------


def test_fit_finds_a_maximum_between_grid_points():
    # an exact, skewed cubic with its maximum at 23.3 deg, sampled every 4 deg
    a = np.arange(0.0, 44.0, 4.0)
    t = 100.0 - 0.02 * (a - 23.3) ** 2 - 4e-4 * (a - 23.3) ** 3
    f = fit_torque_peak(a, t, window_fraction=0.05)
    assert f["bracketed"] and f["degree"] >= 3
    assert f["mbt_deg"] == pytest.approx(23.3, abs=1e-6)             # a cubic or quartic fit of a cubic is exact
    assert f["best"] == pytest.approx(100.0, abs=1e-9)
    assert np.min(np.abs(a - f["mbt_deg"])) > 0.5                     # not a grid point


def test_fit_reports_a_maximum_outside_the_sweep():
    a = np.arange(0.0, 20.0, 2.0)
    f = fit_torque_peak(a, 100 - (a - 30.0) ** 2)
    assert not f["bracketed"] and f["edge"] == "high" and f["mbt_deg"] is None


def test_crossing_is_interpolated_between_points():
    x = np.array([10.0, 12.0, 14.0, 16.0])
    assert crossing_up(x, [0.5, 0.8, 1.2, 1.5], 1.0) == (pytest.approx(13.0), "crossed")
    assert crossing_up(x, [1.1, 1.2, 1.3, 1.4], 1.0) == (None, "always")
    assert crossing_up(x, [0.1, np.nan, 0.3, 0.4], 1.0) == (None, "never")


# -- plumbing on the cheap closed cycle -----------------------------------------


def test_closed_cycle_study_files_and_table(tmp_path):
    out = tmp_path / "s"
    st = spark_study("demo_closed", "10:40:5", overrides=FAST_CLOSED, out=out, traces=4)
    assert st.torque_key == "imep_closed_bar"                         # closed mode has no brake torque
    assert 10 < st.mbt_deg < 40 and st.retard_limit_deg < st.mbt_deg
    assert st.recommended_deg == st.mbt_deg
    assert st.recommended_by == "MBT; NOT checked against knock (no knock model)"    # demo: knock.model none
    loss = st.table.column("torque_loss_pct")
    assert loss.min() >= -1e-6                                        # the fitted best is the top of the curve
    names = {p.name for p in out.iterdir()}
    assert {"sweep.csv", "sweep.json", "spark_study.json", "spark_torque.png", "spark_peak_pressure.png",
            "spark_ca50.png", "spark_pressure_traces.png"} <= names
    data = json.loads((out / "spark_study.json").read_text())
    assert data["caution"] == SPARK_CAUTION and data["mbt_deg"] == pytest.approx(st.mbt_deg)
    assert data["torque_loss_pct"] == pytest.approx(list(loss))
    assert "torque_loss_pct" in (out / "sweep.csv").read_text().splitlines()[0]
    text = st.text()
    assert "MBT" in text and "CAUTION: MBT and knock-limited timings are model estimates" in text
    assert "no knock model" in text


def test_pressure_limit_sets_the_recommendation():
    st = spark_study("demo_closed", "10:40:5", overrides=FAST_CLOSED, p_max_limit_bar=1e9)
    assert st.pmax_limited_deg is None and st.recommended_deg == st.mbt_deg   # never reached
    p = st.table.column("p_max_bar")
    lim = float(np.interp(st.mbt_deg - 6.0, st.table.column(KEY), p))        # reached 6 deg before MBT
    st = spark_study("demo_closed", "10:40:5", overrides=FAST_CLOSED, p_max_limit_bar=lim,
                     dp_limit_bar_per_deg=1e-3)
    assert st.dp_limited_deg is None and st.recommended_deg is None           # dp limit exceeded everywhere
    assert any("every advance" in n for n in st.notes)
    st = spark_study("demo_closed", "10:40:5", overrides=FAST_CLOSED, p_max_limit_bar=lim)
    assert st.pmax_limited_deg == pytest.approx(st.mbt_deg - 6.0, abs=1e-9)
    assert st.recommended_deg == st.pmax_limited_deg
    assert st.recommended_by.startswith("peak-pressure limit; NOT checked against knock")


KNOCK_PLUGIN = '''
import numpy as np
from cyclesim import hookimpl

@hookimpl
def cyclesim_extra_figures(summary, trace, cases):
    """Stand-in knock figures: the knock integral grows with peak pressure (reaches 1 at 40 bar)."""
    ki = np.asarray(summary["p_max_bar"]) / 40.0
    return {"knock_integral_max": ki, "knock_onset_deg": np.where(ki >= 1.0, 5.0, np.nan)}
'''


def test_knock_limit_from_the_knock_integral_crossing(tmp_path):
    (tmp_path / "standin_knock.py").write_text(KNOCK_PLUGIN)
    cfg = tmp_path / "k.yaml"
    cfg.write_text(textwrap.dedent("""
        extends: demo_closed
        plugins: [standin_knock.py]
        simulation: {step_deg: 1.0}
    """))
    st = spark_study(cfg, "10:40:5", knock_margin_deg=2.0, p_max_limit_bar=40.0)
    # the knock integral is p_max / 40, so knock and the 40 bar limit are met at the same advance
    assert st.knock_status == "crossed"
    assert st.knock_limited_deg == pytest.approx(st.pmax_limited_deg, abs=1e-9)
    a, ki = st.table.column(KEY), st.table.column("knock_integral_max")
    assert ki[a < st.knock_limited_deg].max() < 1.0 <= ki[a > st.knock_limited_deg].min()
    expect = min(st.mbt_deg, st.knock_limited_deg - 2.0)
    assert st.recommended_deg == pytest.approx(expect)


def test_ca50_burn_model_cannot_be_spark_swept(tmp_path):
    cfg = tmp_path / "c.yaml"
    cfg.write_text("extends: demo_closed\nburn: {model: wiebe_ca50, ca50_deg: 8}\n")
    with pytest.raises(ConfigError, match="burn.ca50_deg"):
        spark_study(cfg, "10:30:5")


def test_cli_spark_handler(tmp_path, capsys):
    from cyclesim.cli.studies import HANDLERS, add_parsers

    ap = argparse.ArgumentParser()
    add_parsers(ap.add_subparsers(dest="command"))
    args = ap.parse_args(["spark", "demo_closed", "--advance", "10:40:5", "--out", str(tmp_path / "c"),
                          "--set", "simulation.step_deg=1.0", "--no-plots", "--torque-fraction", "0.02"])
    assert HANDLERS["spark"](args) == 0
    text = capsys.readouterr().out
    assert "least advance within 2 % of best" in text and "CAUTION" in text
    assert json.loads((tmp_path / "c" / "spark_study.json").read_text())["torque_fraction"] == 0.02


# -- accuracy on two engines at the default step -----------------------------------

ENGINES = {
    "demo": [],
    "square-86mm-2000rpm": ["engine.bore_mm=86", "engine.stroke_mm=86", "operating.speed_rpm=2000"],
}


@pytest.fixture(scope="module", params=list(ENGINES))
def study(request):
    return spark_study("demo", "4:40:2", overrides=ENGINES[request.param])


def test_mbt_phasing_rule_of_thumb(study):
    # Heywood 1988, ch. 9 (from memory): at MBT, CA50 about 6-12 and peak pressure about 12-18 deg ATDC
    assert 6.0 <= study.ca50_at_mbt_deg <= 12.0
    assert 12.0 <= study.theta_pmax_at_mbt_deg <= 18.0


def test_torque_is_flat_near_mbt_and_falls_with_far_retard(study):
    m, best = study.mbt_deg, study.best_torque
    loss = lambda d: 100.0 * (1.0 - float(study.torque_at(m - d)[0]) / best)  # noqa: E731
    # common practice: 4-5 deg of retard from MBT costs about 1 % of torque; 20 deg much more
    assert 0.2 <= loss(4.5) <= 3.0
    assert loss(20.0) > 5.0
    assert m - 7.0 <= study.retard_limit_deg <= m - 3.0                        # the 1 % point: a few deg of retard
    tl = study.table.column("torque_loss_pct")
    a = study.table.column(KEY)
    assert tl.min() >= -0.01                                          # fit reaches the top of the points
    assert tl[np.argmin(np.abs(a - m))] < 0.1                         # ~0 next to MBT


def test_mbt_from_a_coarser_grid_falls_between_its_points(study):
    # refit on every second point (a 4 deg grid): MBT stays within 0.5 deg of the 2 deg result
    a, t = study.table.column(KEY), study.table.column("torque_Nm")
    gap = {}
    for sel in (slice(0, None, 2), slice(1, None, 2)):
        f = fit_torque_peak(a[sel], t[sel])
        assert f["mbt_deg"] == pytest.approx(study.mbt_deg, abs=0.5)
        gap[np.min(np.abs(a[sel] - study.mbt_deg))] = (a[sel], f["mbt_deg"])
    # on the coarse grid that straddles MBT the fitted MBT is not a grid point
    grid, mbt = gap[max(gap)]
    assert np.min(np.abs(grid - mbt)) > 0.5


def test_knock_criterion_messages_say_what_was_counted():
    # the knock model stops its integral below knock.min_unburned_fraction (0.1 by default), so a
    # criterion at or below it changes nothing and is said; a high one names itself in the note
    over = ["simulation.step_deg=1.0"]
    st = spark_study("demo_turbo", "5:40:5", overrides=over, knock_min_unburned=0.05)
    assert any("at or below the knock model's own cut-off" in n for n in st.notes)
    hi = spark_study("demo_turbo", "5:40:5", overrides=over, knock_min_unburned=0.6)
    # onset comes with at most about a third of the charge unburned on demo_turbo: never 60 %
    assert hi.knock_status == "never"
    assert any(n.startswith("no knock onset with at least 60 % of the charge unburned") for n in hi.notes)


def test_the_cases_own_warnings_reach_the_study_once_each():
    st = spark_study("demo_turbo", "5:40:5", overrides=["simulation.step_deg=1.0", "knock.octane_number=102"])
    # grouped by kind with the advances that gave it, in the JSON and on the console
    octane = [g for g in st.warning_groups if "octane number 102" in g["example"]]
    assert len(octane) == 1 and octane[0]["count"] == 8
    assert octane[0]["points"] == [f"{a:g} deg" for a in range(5, 41, 5)]
    assert not any(g["kind"].startswith("knock model: end-gas autoignition predicted") for g in st.warning_groups)
    line = next(x for x in st.text().splitlines() if "octane number 102" in x)
    assert line.startswith("warning (8 of 8 advances)") and "[5 deg, 10 deg," in line


def test_the_table_gives_onset_margin_and_torque_cost_at_the_limit():
    st = spark_study("demo_turbo", "0:40:2", overrides=["simulation.step_deg=1.0"])
    at = st.knock_at_limit()
    # the first knocking advance lies at or just above the interpolated limit, with onset after TDC
    assert st.knock_limited_deg <= at["advance_deg"] < st.knock_limited_deg + 2.0 + 1e-9
    assert at["onset_deg"] > 0.0 and 0.0 < at["unburned"] < 0.5
    text = st.text()
    margin = st.knock_limited_deg - 12.0                   # demo_turbo's own spark: 12 deg BTDC
    assert f"{margin:+.1f}" in text and "margin of the config's spark" in text
    # the torque lost at the recommended advance: the study's own torque model there
    loss = 100 * (1 - st.torque_at(st.recommended_deg)[0] / st.best_torque)
    assert loss > 0 and f"{loss:.1f}" in text
    assert st.figures()["config_advance_deg"] == 12.0
