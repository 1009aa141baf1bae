"""The Python API as a script or notebook uses it: inputs in the forms a user writes, plain and
independent results, and the files' round trips."""

from __future__ import annotations

import pytest

import cyclesim
from cyclesim.errors import CyclesimError


def test_api_names_are_reachable_and_listed():
    for name in ("simulate", "run", "load_config", "Case", "CaseResult", "case_with"):
        assert hasattr(cyclesim, name) and name in dir(cyclesim)
    assert "CaseResult" in cyclesim.__all__


def test_run_applies_overrides_in_every_form_and_to_a_case():
    case = cyclesim.load_config("demo_closed")
    for overrides in (["burn.spark_advance_deg=10"], "burn.spark_advance_deg=10",
                      {"burn.spark_advance_deg": 10}):
        assert cyclesim.run("demo_closed", overrides).inputs["burn.spark_advance_deg"] == 10.0
        assert cyclesim.run(case, overrides).inputs["burn.spark_advance_deg"] == 10.0
    # the case itself is not changed by a run with overrides
    assert case.submodels["burn"].params["spark_advance_deg"] == 24.0


def test_simulate_takes_names_cases_or_one_case_and_results_own_their_lists():
    one = cyclesim.simulate(cyclesim.load_config("demo_closed"))
    assert len(one) == 1 and one[0].ok
    res = cyclesim.simulate(["demo_closed", cyclesim.case_with(cyclesim.load_config("demo_closed"),
                                                               {"burn.spark_advance_deg": 30})])
    assert [r.inputs["burn.spark_advance_deg"] for r in res] == [24.0, 30.0]
    res[0].references.append("mine")
    res[0].warnings.append("mine")
    assert "mine" not in res[1].references and "mine" not in res[1].warnings


def test_case_with_validates_the_change():
    with pytest.raises(CyclesimError, match="speed_rpm"):
        cyclesim.case_with(cyclesim.load_config("demo_closed"), {"operating.speed_rpm": 99999})


def test_sweep_warnings_cell_splits_back_into_the_cases_messages():
    from cyclesim.studies.sweep import WARNING_SEPARATOR, sweep

    r = sweep("demo", {"operating.intake_pressure_bar": [0.05, 0.98]}, overrides=["simulation.step_deg=1.0"])
    many = r.results[0].warnings
    assert len(many) > 1 and any(";" in w for w in many)        # messages hold ';' themselves
    assert r.rows[0]["warnings"].split(WARNING_SEPARATOR) == many


def test_report_of_a_run_folder_has_the_table_inputs_and_references(tmp_path):
    from cyclesim.output import write_case
    from cyclesim.report import report_for_study

    res = cyclesim.run("demo_closed")
    write_case(res, tmp_path / "run1", plots=False)
    heads = [s["heading"] for s in report_for_study(tmp_path / "run1")]
    assert {"Summary", "Inputs", "References"} <= set(heads)
    (tmp_path / "empty").mkdir()
    with pytest.raises(CyclesimError, match="no results"):
        report_for_study(tmp_path / "empty")


def test_summary_json_in_memory_equals_the_file(tmp_path):
    import json

    from cyclesim.output import write_case

    res = cyclesim.run("demo_closed")
    write_case(res, tmp_path, plots=False)
    on_disk = json.loads((tmp_path / "summary.json").read_text())
    assert on_disk == json.loads(json.dumps(res.summary_json()))
    assert on_disk["caution"].startswith("Results are model estimates")
