"""Trace-set files: CSV (long, wide), .npz, ASAM MDF 4, ground truth; readers and their errors."""

from __future__ import annotations

import builtins
import json

import numpy as np
import pytest

from cyclesim.errors import CyclesimError, InputFileError
from cyclesim.traces.export import (
    TraceSet,
    read_trace,
    write_csv_long,
    write_csv_wide,
    write_mdf,
    write_npz,
    write_trace_set,
    write_truth,
)


@pytest.fixture
def ts():
    rng = np.random.default_rng(0)
    th = np.arange(-360.0, 360.0 + 1e-9, 2.0)
    P = 1e5 * (1 + 40 * rng.random((3, th.size)))
    Pi = 1e5 * (0.98 + 0.01 * rng.standard_normal((3, th.size)))
    return TraceSet(theta=th, pressure_pa=P, intake_pa=Pi, speed_rpm=2500.0, meta={"engine": "demo", "k": [1, 2]})


def _same(a: TraceSet, b: TraceSet, rtol):
    assert np.array_equal(a.theta, b.theta)
    assert np.allclose(a.pressure_pa, b.pressure_pa, rtol=rtol, atol=0)
    assert np.allclose(a.intake_pa, b.intake_pa, rtol=rtol, atol=0)
    assert a.speed_rpm == b.speed_rpm
    assert a.meta == b.meta


@pytest.mark.parametrize("writer", [write_csv_long, write_csv_wide])
def test_csv_round_trip_and_header(tmp_path, ts, writer):
    p = writer(tmp_path / "t.csv", ts)
    first = p.read_text().splitlines()[0]
    # the commented header names units and the crank-angle convention
    assert first.startswith("# units:") and "bar" in first and "crank angle:" in first and "firing TDC" in first
    back = read_trace(p)
    _same(ts, back, rtol=1e-9)             # values written with 10 significant digits


def test_npz_round_trip_is_exact(tmp_path, ts):
    p = write_npz(tmp_path / "t.npz", ts)
    _same(ts, read_trace(p), rtol=0)
    with np.load(p, allow_pickle=False) as z:
        meta = json.loads(str(z["metadata"]))
    assert meta["units"]["pressure_pa"] == "Pa" and "firing TDC" in meta["crank_angle"]


def test_mdf4_samples_and_units_read_back_with_asammdf(tmp_path, ts):
    asammdf = pytest.importorskip("asammdf")
    p = write_mdf(tmp_path / "t.mf4", ts)
    with asammdf.MDF(str(p)) as mdf:
        assert mdf.version.startswith("4")
        pr = mdf.get("pressure_bar")
        cr = mdf.get("crank_deg")
        assert pr.unit == "bar" and cr.unit == "deg"
        assert "firing TDC" in cr.comment
        assert np.array_equal(pr.samples, ts.pressure_pa.reshape(-1) / 1e5)
        assert np.array_equal(cr.samples, np.tile(ts.theta, 3))
        # time master: 6 N crank degrees per second (common practice)
        t = pr.timestamps
        assert t[1] - t[0] == pytest.approx(2.0 / (6 * 2500.0), rel=1e-12)
    _same(ts, read_trace(p), rtol=0)


def test_mdf_without_asammdf_names_the_extra(tmp_path, ts, monkeypatch):
    real = builtins.__import__

    def fake(name, *a, **k):
        if name == "asammdf" or name.startswith("asammdf."):
            raise ImportError("no asammdf")
        return real(name, *a, **k)

    monkeypatch.setattr(builtins, "__import__", fake)
    with pytest.raises(CyclesimError, match=r'pip install -e "\.\[mdf\]"'):
        write_mdf(tmp_path / "t.mf4", ts)


def test_write_trace_set_all_formats(tmp_path, ts):
    pytest.importorskip("asammdf")
    files = write_trace_set(ts, tmp_path, stem="set")
    assert sorted(f.name for f in files) == ["set.long.csv", "set.mf4", "set.npz", "set.wide.csv"]
    for f in files:
        _same(ts, read_trace(f), rtol=1e-9)


def test_without_intake_channel(tmp_path, ts):
    ts2 = TraceSet(ts.theta, ts.pressure_pa, None, ts.speed_rpm)
    for w in (write_csv_long, write_csv_wide, write_npz):
        back = read_trace(w(tmp_path / f"x{w.__name__}{'.npz' if w is write_npz else '.csv'}", ts2))
        assert back.intake_pa is None


def test_truth_csv_and_json(tmp_path):
    rows = [{"cycle": 1, "offset_bar": -0.81, "knock_onset_deg": None},
            {"cycle": 2, "offset_bar": -0.79, "knock_onset_deg": 12.5}]
    pc, pj = write_truth(tmp_path, rows, {"imep_net_cov": 0.021})
    lines = pc.read_text().splitlines()
    assert lines[0].startswith("# units:") and lines[1] == "cycle,offset_bar,knock_onset_deg"
    assert lines[2] == "1,-0.81," and lines[3] == "2,-0.79,12.5"
    doc = json.loads(pj.read_text())
    assert doc["cycles"][1]["knock_onset_deg"] == 12.5 and doc["statistics"]["imep_net_cov"] == 0.021


# ---------------------------------------------------------------------- malformed files
def _write(tmp_path, text, name="bad.csv"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_missing_column(tmp_path):
    p = _write(tmp_path, "# units: x\ncycle,angle,pressure_bar\n1,0,1\n")
    with pytest.raises(InputFileError, match=r"bad\.csv: missing column 'crank_deg'"):
        read_trace(p)
    p = _write(tmp_path, "cycle,crank_deg,p\n1,0,1\n1,1,2\n")
    with pytest.raises(InputFileError, match="missing column 'pressure_bar'"):
        read_trace(p)


def test_non_numeric_value_names_line_and_column(tmp_path):
    p = _write(tmp_path, "# units: x\ncycle,crank_deg,pressure_bar\n1,0,1.0\n1,1,abc\n")
    with pytest.raises(InputFileError, match=r"line 4, column 'pressure_bar': 'abc' is not a number") as e:
        read_trace(p)
    assert "\n" not in str(e.value)


def test_unequal_cycle_lengths_and_ragged_rows(tmp_path):
    p = _write(tmp_path, "cycle,crank_deg,pressure_bar\n1,0,1\n1,1,2\n2,0,1\n")
    with pytest.raises(InputFileError, match="cycle 2 has 1 samples, cycle 1 has 2"):
        read_trace(p)
    p = _write(tmp_path, "crank_deg,cycle_1_pressure_bar\n0,1\n1\n")
    with pytest.raises(InputFileError, match="line 3 has 1 fields"):
        read_trace(p)


def test_bad_npz_and_unknown_suffix(tmp_path):
    p = tmp_path / "x.npz"
    np.savez(p, crank_deg=np.arange(3.0))
    with pytest.raises(InputFileError, match="missing array 'pressure_pa'"):
        read_trace(p)
    with pytest.raises(InputFileError, match="unknown trace file type"):
        read_trace(_write(tmp_path, "x", "t.txt"))
    with pytest.raises(InputFileError, match="no such file"):
        read_trace(tmp_path / "none.csv")
