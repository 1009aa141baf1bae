"""A resumed study keeps rows only from the same study (fingerprint of everything that sets its rows).

These check bookkeeping, not engine physics: the expected behaviour is the
contract written in cyclesim.fingerprint (what the record holds, that a
mismatch is refused naming what differs, that the same study resumes).  They
run the closed-cycle demo on a 1 deg step; the one command-line check repeats
the reproduction of the defect on the full-cycle demo and demo_turbo at a
reduced grid.
"""

from __future__ import annotations
from cli_helpers import error_lines

import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cyclesim.cli import main
from cyclesim.config import load_config
from cyclesim.errors import CyclesimError
from cyclesim.fingerprint import FINGERPRINT_NAME, differences, digest, study_record
from cyclesim.studies.spark import spark_study
from cyclesim.studies.sweep import read_sweep_csv, sweep

FAST = ["simulation.step_deg=1.0"]
SPARK = "burn.spark_advance_deg"


@pytest.fixture(scope="module")
def base():
    return load_config("demo_closed", FAST)


def interrupted(base_case, out, spec=f"{SPARK}=10:40:5", after=2, **kw):
    """Run a sweep into ``out`` and stop it (as Ctrl-C does) once ``after`` rows are written."""
    key, values = spec.split("=")

    def stop(done, total, elapsed):
        if done >= after:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        sweep(base_case, [(key, values)], out=out, chunk_size=2, progress=stop, **kw)
    assert len(read_sweep_csv(out / "sweep.csv")[1]) == after


def test_the_fingerprint_is_written_before_the_first_row_and_kept_in_the_json(base, tmp_path):
    out = tmp_path / "f"
    interrupted(base, out)
    stored = json.loads((out / FINGERPRINT_NAME).read_text())
    rec = stored["record"]
    assert stored["digest"] == digest(rec)
    assert rec["study"] == "sweep" and rec["vary"][0]["key"] == SPARK
    assert rec["tool"].startswith("cyclesim ")
    assert rec["base"]["simulation.step_deg"] == 1.0                    # the --set value, resolved
    assert rec["base"]["heat_transfer.model"] == base.submodels["heat_transfer"].model
    assert SPARK not in rec["base"]                                    # every case sets it
    res = sweep(base, [(SPARK, "10:40:5")], out=out, resume=True, chunk_size=2)
    assert res.metadata["fingerprint"] == stored["digest"]
    assert json.loads((out / "sweep.json").read_text())["metadata"]["fingerprint"] == stored["digest"]


def test_resume_of_a_different_base_case_is_refused_naming_the_key(base, tmp_path):
    out = tmp_path / "d"
    interrupted(base, out)
    before = (out / "sweep.csv").read_text()
    other = load_config("demo_closed", [*FAST, "operating.lambda=0.9"])
    with pytest.raises(CyclesimError) as exc:
        sweep(other, [(SPARK, "10:40:5")], out=out, resume=True, chunk_size=2)
    msg = str(exc.value)
    assert "\n" not in msg and "different study" in msg
    assert "base operating.lambda: 1.0 there, 0.9 here" in msg and "--force" in msg
    assert (out / "sweep.csv").read_text() == before                   # nothing written, nothing mixed
    # a default the base leaves out is part of the record too: here set to a value other than it
    other = load_config("demo_closed", [*FAST, "walls.piston_temperature_K=480"])
    with pytest.raises(CyclesimError, match="walls.piston_temperature_K"):
        sweep(other, [(SPARK, "10:40:5")], out=out, resume=True, chunk_size=2)


def test_resume_with_another_submodel_or_option_is_refused(base, tmp_path):
    out = tmp_path / "m"
    interrupted(base, out)
    other = load_config("demo_closed", [*FAST, "heat_transfer.model=hohenberg"])
    with pytest.raises(CyclesimError, match="base heat_transfer.model: 'woschni' there, 'hohenberg' here"):
        sweep(other, [(SPARK, "10:40:5")], out=out, resume=True)
    with pytest.raises(CyclesimError, match="paired"):
        sweep(base, [(SPARK, "10:40:5"), ("operating.ivc_pressure_bar", "1,1,1,1,1,1,1")], out=out,
              resume=True, paired=True)


def test_the_same_study_resumes_and_gives_the_uninterrupted_rows(base, tmp_path):
    out = tmp_path / "s"
    interrupted(base, out)
    again = load_config("demo_closed", FAST)                            # loaded afresh: the same study
    res = sweep(again, [(SPARK, "10:40:5")], out=out, resume=True, chunk_size=2)
    assert res.results[:2] == [None, None]                               # kept, not simulated again
    fresh = sweep(base, [(SPARK, "10:40:5")], chunk_size=2)
    assert res.rows == fresh.rows


def test_rows_without_a_fingerprint_are_not_kept(base, tmp_path):
    out = tmp_path / "n"
    interrupted(base, out)
    (out / FINGERPRINT_NAME).unlink()
    with pytest.raises(CyclesimError, match=f"no {FINGERPRINT_NAME}"):
        sweep(base, [(SPARK, "10:40:5")], out=out, resume=True)
    (out / FINGERPRINT_NAME).write_bytes(b"\x00\xff binary")
    with pytest.raises(CyclesimError, match="not a study fingerprint"):
        sweep(base, [(SPARK, "10:40:5")], out=out, resume=True)


def test_a_changed_table_file_is_a_different_study(tmp_path):
    table = tmp_path / "burn.csv"
    table.write_text("speed_rpm,intake_pressure_bar,duration_deg\n3000,1.0,45\n")
    cfg = tmp_path / "tab.yaml"
    cfg.write_text("extends: demo_closed\nsimulation: {step_deg: 1.0}\nburn: {model: wiebe_table, table: burn.csv}\n")
    out = tmp_path / "t"
    interrupted(load_config(cfg), out)
    table.write_text("speed_rpm,intake_pressure_bar,duration_deg\n3000,1.0,60\n")   # same name, new contents
    with pytest.raises(CyclesimError, match="file of burn.table: other contents there, these here"):
        sweep(load_config(cfg), [(SPARK, "10:40:5")], out=out, resume=True)


def test_spark_study_resume_refuses_another_engine_and_other_options(tmp_path):
    out = tmp_path / "k"
    spark_study("demo_closed", "10:30:5", overrides=FAST, out=out, plots=False)
    with pytest.raises(CyclesimError, match="base name"):
        spark_study("demo_closed", "10:30:5", overrides=[*FAST, "name=other"], out=out, resume=True, plots=False)
    with pytest.raises(CyclesimError, match="option knock_margin_deg: 2.0 there, 3.0 here"):
        spark_study("demo_closed", "10:30:5", overrides=FAST, out=out, resume=True, plots=False,
                    knock_margin_deg=3.0)
    with pytest.raises(CyclesimError, match="study: 'spark' there, 'sweep' here"):
        sweep(load_config("demo_closed", FAST), [(SPARK, "10:30:5")], out=out, resume=True)
    st = spark_study("demo_closed", "10:30:5", overrides=FAST, out=out, resume=True, plots=False)
    assert st.table.results == [None] * 5                                # every row kept


def test_trace_checkpoints_of_another_set_are_refused(tmp_path):
    from cyclesim.traces.synthesis import CycleVariation, _check_checkpoint

    case = load_config("demo", FAST)
    var = CycleVariation(seed=3)
    _check_checkpoint(tmp_path, case, 10, var, 0.25)
    _check_checkpoint(tmp_path, load_config("demo", FAST), 10, var, 0.25)          # same set: accepted
    with pytest.raises(CyclesimError, match="different trace set .*base operating.lambda"):
        _check_checkpoint(tmp_path, load_config("demo", [*FAST, "operating.lambda=0.9"]), 10, var, 0.25)
    with pytest.raises(CyclesimError, match="option n_cycles: 10.0 there, 12.0 here"):
        _check_checkpoint(tmp_path, case, 12, var, 0.25)


def test_issue_reproduction_on_the_command_line(tmp_path, capsys, monkeypatch):
    # the reported defect at a smaller grid: rows of demo, then demo_turbo resumed into the same folder
    monkeypatch.chdir(tmp_path)
    argv = ["sweep", "demo", "--vary", f"{SPARK}=0:40:20", "--vary", "operating.speed_rpm=700,900",
            "--chunk", "4", "--out", "rs", "--no-progress"]
    assert main(argv) == 0
    rows = (tmp_path / "rs" / "sweep.csv").read_text()
    capsys.readouterr()
    turbo = ["sweep", "demo_turbo", *argv[2:], "--resume"]
    assert main(turbo) == 2
    err = capsys.readouterr().err.strip()
    assert len(error_lines(err)) == 1 and "different study" in err and "base name" in err
    assert main([*argv, "--set", "operating.lambda=0.9", "--resume"]) == 2
    assert "base operating.lambda: 1.0 there, 0.9 here" in capsys.readouterr().err
    assert (tmp_path / "rs" / "sweep.csv").read_text() == rows
    assert json.loads((tmp_path / "rs" / "sweep.json").read_text())["metadata"]["base_name"] == load_config(
        "demo").name


# -- the record itself ----------------------------------------------------------------

_NUMERIC = [("operating", "lambda", 0.7, 1.4), ("operating", "ivc_pressure_bar", 0.5, 2.0),
            ("engine", "compression_ratio", 8.0, 13.0), ("walls", "head_temperature_K", 400.0, 520.0),
            ("burn", "duration_deg", 30.0, 80.0), ("heat_transfer", "multiplier", 0.5, 1.5)]


@settings(max_examples=25, deadline=None)
@given(st.sampled_from(_NUMERIC), st.floats(0.0, 1.0))
def test_any_changed_value_changes_the_digest_and_is_named(base, which, where):
    """Invariant: a record differs exactly when a resolved value differs, and the difference names the key."""
    sec, key, lo, hi = which
    value = round(lo + where * (hi - lo), 6)
    changed = load_config("demo_closed", [*FAST, f"{sec}.{key}={value}"])
    a = study_record("sweep", base, {SPARK: [10, 20]}, False)
    b = study_record("sweep", changed, {SPARK: [10.0, 20.0]}, False)          # ints and floats alike
    current = (base.submodels[sec].params if sec in base.submodels else vars(base.section(sec)))[key]
    if float(current) == value:
        assert digest(a) == digest(b) and differences(a, b) == []
    else:
        assert digest(a) != digest(b)
        assert [d.split(":")[0] for d in differences(a, b)] == [f"base {sec}.{key}"]
