"""The spark study's console: a short table of the advances and the cases' warnings grouped by kind
with their counts and the advances that gave them."""

from types import SimpleNamespace

import numpy as np

from cyclesim.studies.spark import spark_study
from cyclesim.studies.spark_console import MAX_ROWS, case_warning_groups

FAST = ["simulation.step_deg=1.0", "simulation.step_reference_rpm=0"]


def _res(*warnings, error=None):
    return SimpleNamespace(warnings=list(warnings), error=error)


def test_warnings_group_by_kind_with_the_advances_that_gave_them():
    results = [_res("exhaust valve choked for 12 deg"), _res("exhaust valve choked for 15.5 deg", "trapped mass low"),
               _res("knock model: end-gas autoignition predicted at 3.0 deg ATDC"), None, _res(error="did not settle")]
    g = case_warning_groups(results, [10.0, 12.0, 14.0, 16.0, 18.0])
    by = {x["kind"]: x for x in g}
    assert by["exhaust valve choked for # deg"]["count"] == 2
    assert by["exhaust valve choked for # deg"]["points"] == ["10 deg", "12 deg"]
    assert by["trapped mass low"]["points"] == ["12 deg"]
    assert by["failed: did not settle"]["points"] == ["18 deg"]
    assert not any(k.startswith("knock model") for k in by)    # knock is reported by the study itself
    assert sum(x["count"] for x in g) == 4


def test_the_study_text_has_a_short_table_with_knock_columns(tmp_path):
    st = spark_study("demo_turbo", "0:40:2", overrides=FAST + ["knock.model=livengood_wu"], traces=0)
    text = st.text()
    head = next(line for line in text.splitlines() if "spark BTDC" in line)
    assert "onset ATDC" in head and "unburned %" in head and "loss %" in head
    rows = [line for line in text.splitlines() if line.strip() and line.split()[0].replace(".", "").isdigit()
            and len(line.split()) >= 7]
    assert len(rows) <= MAX_ROWS and "(" + f"{len(rows)} of 21 advances shown" in text
    assert sum("nearest the recommended advance" in line for line in rows) == (st.recommended_deg is not None)
    # the table's torque at each shown advance is the sweep's own figure
    adv, tq = st.table.column(st.spark_key), st.table.column(st.torque_key)
    for line in rows:
        a, t = float(line.split()[0]), float(line.split()[1])
        assert abs(t - tq[int(np.flatnonzero(adv == a)[0])]) < 0.006
    assert st.figures()["warnings_grouped"] == st.warning_groups


def test_no_knock_columns_without_a_knock_model():
    st = spark_study("demo_closed", "10:40:10", overrides=FAST, traces=0)
    head = next(line for line in st.text().splitlines() if "spark BTDC" in line)
    assert "onset" not in head and "IMEP bar" in head
