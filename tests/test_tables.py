"""Every table the tool reads goes through one reader: non-finite values, order, repeats, size and
encoding are refused in one line naming the file and the line."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cyclesim import tables
from cyclesim.errors import InputFileError
from cyclesim.tables import read_table
from cyclesim.traces.export import read_trace
from cyclesim_plugins.burn_table import read_burn_table
from cyclesim_plugins.valve_flow import load_cd_table, load_lift_table


def _write(path, text):
    path.write_text(text)
    return path


def _one_line(exc) -> str:
    msg = str(exc.value)
    assert "\n" not in msg
    return msg


@pytest.mark.parametrize("cell", ["nan", "NaN", "inf", "-inf"])
def test_burn_table_with_a_non_finite_value_names_file_and_line(tmp_path, cell):
    # the example that used to run silently with nothing burning (IMEP -0.27 bar)
    p = _write(tmp_path / "bt.csv", f"# burn table\nspeed_rpm,intake_pressure_bar,duration_deg\n3000,1.0,{cell}\n")
    with pytest.raises(InputFileError) as e:
        read_burn_table(p)
    msg = _one_line(e)
    assert "bt.csv" in msg and "line 3" in msg and "duration_deg" in msg and "not finite" in msg


def test_burn_table_value_outside_the_parameter_range(tmp_path):
    # combustion efficiency is a share, at most 1 (the wiebe parameter's declared range)
    p = _write(tmp_path / "bt.csv", "speed_rpm,intake_pressure_bar,combustion_efficiency\n2000,1,0.9\n3000,1,1.4\n")
    with pytest.raises(InputFileError, match=r"bt\.csv: line 3, column 'combustion_efficiency' = 1\.4: out of range"):
        read_burn_table(p)


def test_burn_table_repeated_point(tmp_path):
    p = _write(tmp_path / "bt.csv", "speed_rpm,intake_pressure_bar,duration_deg\n2000,1,50\n3000,1,55\n2000,1.0,60\n")
    with pytest.raises(InputFileError, match=r"line 4: the point speed_rpm, intake_pressure_bar = 2000, 1 repeats line 2"):
        read_burn_table(p)


def test_burn_table_nan_from_the_command_line(tmp_path):
    (tmp_path / "bt.csv").write_text("speed_rpm,intake_pressure_bar,duration_deg\n3000,1.0,nan\n")
    cfg = _write(tmp_path / "bt.yaml", "extends: demo\nburn: {model: wiebe_table, table: bt.csv}\n")
    r = subprocess.run([sys.executable, "-m", "cyclesim", "run", str(cfg), "--no-plots"],
                       capture_output=True, text=True, timeout=300)
    assert r.returncode == 2, r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "bt.csv: line 2" in lines[0] and "not finite" in lines[0]


def test_lift_table_nan_and_cd_table_inf(tmp_path):
    p = _write(tmp_path / "lift.csv", "crank_deg,lift_mm\n-380,0\n-300,nan\n-200,0\n")
    with pytest.raises(InputFileError, match=r"lift\.csv: line 3, column 'lift_mm': 'nan' is not finite"):
        load_lift_table("lift.csv", tmp_path, "valve_flow.intake_lift_table")
    p = _write(tmp_path / "cd.csv", "l_over_d,cd\n0,0.7\ninf,0.6\n")
    with pytest.raises(InputFileError, match=r"cd\.csv: line 3, column 'l_over_d': 'inf' is not finite"):
        load_cd_table(str(p), tmp_path)


def test_trace_csv_with_a_nan_crank_angle(tmp_path):
    # a NaN angle used to pass the order check (NaN <= 0 is false)
    p = _write(tmp_path / "t.csv", "crank_deg,cycle_1_pressure_bar\n0,1.0\nnan,1.1\n2,1.2\n")
    with pytest.raises(InputFileError, match=r"t\.csv: line 3, column 'crank_deg': 'nan' is not finite"):
        read_trace(p)


def test_npz_trace_with_a_nan_crank_angle(tmp_path):
    p = tmp_path / "t.npz"
    np.savez(p, crank_deg=np.array([0.0, np.nan, 2.0]), pressure_pa=np.ones((1, 3)) * 1e5)
    with pytest.raises(InputFileError, match=r"t\.npz: crank_deg is not finite at sample 2"):
        read_trace(p)


def test_order_size_and_encoding(tmp_path, monkeypatch):
    p = _write(tmp_path / "a.csv", "x,y\n1,2\n1,3\n")
    with pytest.raises(InputFileError, match=r"a\.csv: line 3: x = 1 does not increase \(previous 1\)"):
        read_table(p, "test table", ("x", "y"), increasing=("x",))
    with pytest.raises(InputFileError, match=r"a\.csv: 2 data row\(s\); test table needs at least 3"):
        read_table(p, "test table", ("x", "y"), min_rows=3)
    monkeypatch.setattr(tables, "MAX_TABLE_BYTES", 8)
    with pytest.raises(InputFileError, match=r"a\.csv: .* MiB, more than the .* a table may have"):
        read_table(p, "test table", ("x", "y"))
    monkeypatch.undo()
    b = tmp_path / "b.csv"
    b.write_bytes("x,y\n1,2\n".encode("utf-16"))
    with pytest.raises(InputFileError, match=r"b\.csv: not a UTF-8 text file"):
        read_table(b, "test table", ("x", "y"))
    with pytest.raises(InputFileError, match=r"c\.csv: file not found"):
        read_table(tmp_path / "c.csv", "test table", ("x",))


def test_long_cells_are_not_echoed_whole(tmp_path):
    secret = "s" * 200
    p = _write(tmp_path / "a.csv", f"x,y\n1,{secret}\n")
    with pytest.raises(InputFileError) as e:
        read_table(p, "test table", ("x", "y"))
    assert secret not in str(e.value) and "not a number" in str(e.value)


@settings(max_examples=40, deadline=None)
@given(st.lists(st.tuples(st.floats(-1e6, 1e6, allow_nan=False), st.floats(-1e6, 1e6, allow_nan=False)),
                min_size=1, max_size=30))
def test_finite_tables_read_back_exactly(tmp_path_factory, rows):
    # invariant: any finite table written with repr() reads back bit for bit, lines counted from 1
    d = tmp_path_factory.mktemp("t")
    p = d / "t.csv"
    p.write_text("# c\nx,y\n" + "".join(f"{a!r},{b!r}\n" for a, b in rows))
    t = read_table(p, "test table", ("x", "y"))
    assert t.columns["x"].tolist() == [a for a, _ in rows] and t.columns["y"].tolist() == [b for _, b in rows]
    assert t.lines.tolist() == list(range(3, 3 + len(rows)))
