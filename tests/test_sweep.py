"""Parameter sweeps: value specs, grid and paired modes, rows written as cases finish, resume.

These check the bookkeeping of a sweep, not engine physics, so they run the
closed-cycle demo (one IVC-to-EVO pass) on a 1 deg step.  The expected values
are the sweep's own contract (the spec strings and case order documented in
cyclesim.studies.sweep); the engine figures are only compared with the same
case simulated alone.
"""

from __future__ import annotations
from cli_helpers import error_lines

import argparse
import json
import re

import numpy as np
import pytest

import cyclesim
from cyclesim.config import case_with, load_config
from cyclesim.errors import ConfigError, CyclesimError
from cyclesim.studies.sweep import parse_values, parse_vary_arg, read_sweep_csv, sweep

FAST = ["simulation.step_deg=1.0"]
SPARK = "burn.spark_advance_deg"


@pytest.fixture(scope="module")
def base():
    return load_config("demo_closed", FAST)


def csv_rows(folder):
    return read_sweep_csv(folder / "sweep.csv")


# -- value specs ---------------------------------------------------------


def test_range_includes_stop_on_the_grid():
    assert parse_values("k", "0:40:10") == [0, 10, 20, 30, 40]
    assert parse_values("k", "0:35:10") == [0, 10, 20, 30]          # 35 is off the grid
    assert parse_values("k", "-10:10:5") == [-10, -5, 0, 5, 10]
    assert parse_values("k", "40:30:-5") == [40, 35, 30]


def test_range_of_decimals_is_free_of_rounding_noise():
    vals = parse_values("k", "0:1:0.1")
    assert len(vals) == 11 and vals[-1] == 1.0                       # 10 * 0.1 lands on 1 within rounding
    assert vals[3] == 0.3                                             # not 0.30000000000000004
    assert parse_values("k", "0.8:1.2:0.05") == [0.8, 0.85, 0.9, 0.95, 1.0, 1.05, 1.1, 1.15, 1.2]


def test_comma_lists_lists_and_single_values():
    assert parse_values("k", "10,15,20") == [10, 15, 20]
    assert parse_values("k", "woschni, hohenberg") == ["woschni", "hohenberg"]
    assert parse_values("k", "[1.5, 2]") == [1.5, 2]
    assert parse_values("k", "22") == [22]
    assert parse_values("k", np.array([1.0, 2.0])) == [1.0, 2.0]
    assert parse_vary_arg("operating.speed_rpm=1000:3000:1000") == ("operating.speed_rpm", "1000:3000:1000")


@pytest.mark.parametrize("spec, words", [
    ("0:10:0", "step must not be zero"),
    ("10:0:1", "empty range"),
    ("1:5", "start:stop:step"),
    ("1:x:1", "not a number"),
    ("1,,2", "empty item"),
])
def test_bad_specs_are_one_line_config_errors(spec, words):
    with pytest.raises(ConfigError, match=words) as exc:
        parse_values("burn.spark_advance_deg", spec)
    assert "\n" not in str(exc.value)


# -- grid, paired, failures ------------------------------------------------


def test_grid_order_columns_and_figures(base, tmp_path):
    res = sweep(base, [(SPARK, "10,20"), ("operating.ivc_pressure_bar", [0.9, 1.1])], out=tmp_path / "g")
    assert [(r[SPARK], r["operating.ivc_pressure_bar"]) for r in res.rows] == [
        (10, 0.9), (10, 1.1), (20, 0.9), (20, 1.1)]                  # last key varies fastest
    assert [r["case"] for r in res.rows] == [0, 1, 2, 3]
    assert res.columns[:5] == ["case", SPARK, "operating.ivc_pressure_bar", "error", "warnings"]
    assert "energy_balance.closure_J" in res.columns and "p_max_bar" in res.columns
    assert all(r["error"] == "" for r in res.rows)
    # a sweep row equals the same case simulated alone
    alone = cyclesim.simulate([case_with(base, {SPARK: 20, "operating.ivc_pressure_bar": 1.1})])[0]
    assert res.rows[3]["p_max_bar"] == pytest.approx(alone.summary["p_max_bar"], rel=1e-12)
    assert res.column("p_max_bar").shape == (4,)
    assert res.results[3].trace["pressure_bar"].max() == pytest.approx(alone.summary["p_max_bar"], rel=1e-3)


def test_paired_mode_and_unequal_lengths(base):
    res = sweep(base, [(SPARK, "10,20,30"), ("operating.ivc_pressure_bar", "0.9,1.0,1.1")], paired=True)
    assert [(r[SPARK], r["operating.ivc_pressure_bar"]) for r in res.rows] == [(10, 0.9), (20, 1.0), (30, 1.1)]
    with pytest.raises(ConfigError, match="same number of values"):
        sweep(base, [(SPARK, "10,20,30"), ("operating.ivc_pressure_bar", "0.9,1.0")], paired=True)


def test_failing_case_is_recorded_and_the_rest_run(base, tmp_path):
    res = sweep(base, [("burn.duration_deg", "40,-5,60")], out=tmp_path / "f")
    err = [r["error"] for r in res.rows]
    assert err[0] == "" and err[2] == ""
    assert "burn.duration_deg" in err[1] and "out of range" in err[1]
    assert res.results[1] is None and res.rows[1]["p_max_bar"] is None
    p = res.column("p_max_bar")
    assert np.isfinite(p[[0, 2]]).all() and np.isnan(p[1])
    assert res.failed == [1] and res.metadata["failed"] == 1
    cols, rows = csv_rows(tmp_path / "f")
    assert rows[1]["error"] == err[1]


def test_unknown_key_fails_fast_with_one_line(base, tmp_path):
    for key, words in (("burn.spark_advanse_deg", "did you mean 'spark_advance_deg'"),
                       ("engine.bore", "did you mean 'bore_mm'"),
                       ("enigne.bore_mm", "unknown section")):
        with pytest.raises(ConfigError, match=words) as exc:
            sweep(base, [(key, "1,2")], out=tmp_path / "u")
        assert "\n" not in str(exc.value)
    assert not (tmp_path / "u").exists()          # nothing simulated, nothing written


def test_non_empty_out_needs_resume_or_force(base, tmp_path):
    out = tmp_path / "o"
    out.mkdir()
    (out / "notes.txt").write_text("x")
    with pytest.raises(CyclesimError, match="--resume.*--force"):
        sweep(base, [(SPARK, "10,20")], out=out)
    res = sweep(base, [(SPARK, "10,20")], out=out, force=True)
    assert len(read_sweep_csv(out / "sweep.csv")[1]) == len(res.rows) == 2


# -- files, resume, interruption -------------------------------------------


def test_json_and_csv_hold_the_same_table(base, tmp_path):
    out = tmp_path / "j"
    res = sweep(base, [(SPARK, "10:30:10")], out=out)
    data = json.loads((out / "sweep.json").read_text())
    cols, rows = csv_rows(out)
    assert data["metadata"]["columns"] == cols == res.columns
    assert data["rows"] == rows                                       # floats round-trip exactly
    assert data["metadata"]["caution"] == cyclesim.output.CAUTION
    assert data["metadata"]["vary"][0] == {"key": SPARK, "spec": "10:30:10", "values": [10, 20, 30]}
    assert res.to_csv() == (out / "sweep.csv").read_text()


def test_rows_are_written_as_chunks_finish(base, tmp_path):
    out = tmp_path / "w"
    seen = []

    def look(done, total, elapsed):
        seen.append((done, len(csv_rows(out)[1]) if (out / "sweep.csv").exists() else 0))

    sweep(base, [(SPARK, "10:30:5")], out=out, chunk_size=2, progress=look)
    assert seen == [(0, 0), (2, 2), (4, 4), (5, 5)]


def test_resume_after_running_the_first_cases(base, tmp_path):
    out = tmp_path / "r"
    first = sweep(base, [(SPARK, "10:14:2")], out=out)               # cases 0..2 of the full sweep
    full = sweep(base, [(SPARK, "10:20:2")], out=out, resume=True, chunk_size=2)
    assert [r["case"] for r in full.rows] == list(range(6))
    assert [r[SPARK] for r in full.rows] == [10, 12, 14, 16, 18, 20]
    assert full.results[:3] == [None] * 3 and all(r is not None for r in full.results[3:])
    assert full.rows[1]["p_max_bar"] == first.rows[1]["p_max_bar"]
    cols, rows = csv_rows(out)
    assert [r["case"] for r in rows] == list(range(6))               # no duplicates, none missing
    fresh = sweep(base, [(SPARK, "10:20:2")])
    assert np.allclose(full.column("p_max_bar"), fresh.column("p_max_bar"), rtol=1e-12)


def test_keyboard_interrupt_leaves_whole_rows_and_resume_completes(base, tmp_path):
    out = tmp_path / "k"

    def stop(done, total, elapsed):
        if done >= 2:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        sweep(base, [(SPARK, "10:40:10")], out=out, chunk_size=2, progress=stop)
    cols, rows = csv_rows(out)
    assert [r["case"] for r in rows] == [0, 1]
    assert (out / "sweep.csv").read_text().endswith("\n")
    assert not (out / "sweep.json").exists()                          # written only when complete
    ran = []
    res = sweep(base, [(SPARK, "10:40:10")], out=out, resume=True, chunk_size=2,
                progress=lambda d, t, e: ran.append(d))
    assert ran == [2, 4]                                              # only the two missing cases ran
    assert [r["case"] for r in csv_rows(out)[1]] == [0, 1, 2, 3]
    assert all(r["error"] == "" for r in res.rows)


def test_resume_drops_a_cut_last_line(base, tmp_path):
    out = tmp_path / "c"
    sweep(base, [(SPARK, "10,20")], out=out)
    text = (out / "sweep.csv").read_text()
    lines = text.splitlines(keepends=True)
    (out / "sweep.csv").write_text(lines[0] + lines[1] + lines[2][: len(lines[2]) // 2])   # row 1 cut short
    assert [r["case"] for r in read_sweep_csv(out / "sweep.csv")[1]] == [0]
    res = sweep(base, [(SPARK, "10,20")], out=out, resume=True)
    assert res.results[0] is None and res.results[1] is not None
    assert (out / "sweep.csv").read_text() == text


def test_resume_refuses_a_different_sweep(base, tmp_path):
    out = tmp_path / "d"
    sweep(base, [(SPARK, "10,20")], out=out)
    with pytest.raises(CyclesimError, match="different sweep"):
        sweep(base, [(SPARK, "10,30")], out=out, resume=True)
    with pytest.raises(CyclesimError, match="different study.*varied keys"):
        sweep(base, [("operating.ivc_pressure_bar", "1,2")], out=out, resume=True)


# -- command line handler ----------------------------------------------------


def _cli(argv):
    from cyclesim.cli.studies import HANDLERS, add_parsers

    ap = argparse.ArgumentParser()
    add_parsers(ap.add_subparsers(dest="command"))
    args = ap.parse_args(argv)
    return HANDLERS[args.command](args)


def test_cli_sweep_handler(tmp_path, capsys):
    out = tmp_path / "cli"
    argv = ["sweep", "demo_closed", "--vary", f"{SPARK}=10,20", "--vary", "burn.duration_deg=40,-1",
            "--out", str(out), "--set", "simulation.step_deg=1.0", "--chunk", "3"]
    assert _cli(argv) == 0
    printed = capsys.readouterr().out
    assert "4 cases, 2 ok, 2 failed" in printed and "burn.duration_deg" in printed
    assert len(read_sweep_csv(out / "sweep.csv")[1]) == 4
    with pytest.raises(CyclesimError, match="not empty"):
        _cli(argv)
    assert _cli(argv + ["--resume"]) == 0
    with pytest.raises(ConfigError, match="KEY=VALUES"):
        _cli(["sweep", "--vary", "burn.spark_advance_deg", "--out", str(tmp_path / "x")])


def test_printed_table_shows_the_varied_keys_and_figures(base):
    # the closed-cycle demo has no brake figures: the table shows what the rows hold
    res = sweep(base, [(SPARK, "10:40:1")])
    text = res.text(max_rows=12)
    lines = text.splitlines()
    assert lines[0].split()[:3] == ["spark_advance_deg", "CA50", "deg"]
    assert len(lines) == 1 + 12 + 1 and "... 19 more rows in sweep.csv ..." in text
    first = lines[1].split()
    assert float(first[0]) == 10 and float(first[1]) == pytest.approx(res.rows[0]["ca50_deg"], abs=0.05)
    assert float(first[2]) == pytest.approx(res.rows[0]["p_max_bar"], abs=0.05)
    assert float(lines[-1].split()[0]) == 40
    bad = sweep(base, [("burn.duration_deg", "40,-5")])
    assert bad.text().splitlines()[2].split() == ["-5", "failed"]


def test_a_value_of_the_wrong_kind_is_refused_before_anything_runs(base, tmp_path, capsys):
    out = tmp_path / "w"
    for key, spec, words in (("operating.speed_rpm", "1000,abc", "'abc' is not a value of this key (expected a number"),
                             ("simulation.max_cycles", "3,4.5", "4.5 is not a value of this key (expected a whole"),
                             ("burn.model", "wiebe,nosuch", "unknown burn model")):
        with pytest.raises(CyclesimError, match=re.escape(words)) as exc:
            sweep(base, [(key, spec)], out=out)
        assert "\n" not in str(exc.value)
        assert not out.exists()                                        # nothing simulated, nothing written
    from cyclesim.cli import main

    assert main(["sweep", "demo", "--vary", "operating.speed_rpm=1000,abc", "--out", str(out)]) == 2
    err = error_lines(capsys.readouterr().err)
    assert len(err) == 1 and "'abc'" in err[0] and "nothing was run" in err[0]
    # a value of the right kind outside the range stays a failed case of its own (the contract above)
    res = sweep(base, [("burn.duration_deg", "40,-5")])
    assert res.failed == [1]


def test_the_sweep_console_groups_the_cases_warnings_with_the_cases_that_gave_them(tmp_path, capsys):
    # an octane number outside the reference fuels' range warns in every case that has it; the
    # console says so once, with the count and the cases' varied values (not only in the CSV column)
    from cyclesim.cli import main

    argv = ["sweep", "demo_turbo", "--vary", "burn.spark_advance_deg=10,20", "--vary", "knock.octane_number=95,102",
            "--set", "simulation.step_deg=1.0", "--set", "simulation.step_reference_rpm=0",
            "--out", str(tmp_path / "w"), "--no-progress"]
    assert main(argv) in (0, None)
    out = capsys.readouterr().out.splitlines()
    octane = [line for line in out if "octane number 102" in line]
    assert len(octane) == 1 and octane[0].startswith("warning (2 of 4 cases)")
    assert "[spark_advance_deg=10 / octane_number=102, spark_advance_deg=20 / octane_number=102]" in octane[0]


def test_an_interruption_before_any_row_says_nothing_was_written(base, tmp_path, capsys):
    out = tmp_path / "z"

    def stop(done, total, elapsed):
        raise KeyboardInterrupt          # at the first report, before a case has finished

    with pytest.raises(KeyboardInterrupt):
        sweep(base, [(SPARK, "10:40:10")], out=out, chunk_size=2, progress=stop)
    err = capsys.readouterr().err
    assert "after 0 of 4 cases" in err and "nothing was written yet" in err
    assert not (out / "sweep.csv").exists()
