"""`cyclesim traces` from the command line: the files a user gets by default."""

from __future__ import annotations

import importlib.util
import os
import stat

import numpy as np
import pytest

from cyclesim.cli import main
from cyclesim.traces.export import read_trace

HAS_MDF = importlib.util.find_spec("asammdf") is not None


def test_traces_default_formats_plot_and_file_modes(tmp_path, capsys):
    out = tmp_path / "t"
    old = os.umask(0o022)
    try:
        rc = main(["traces", "demo", "--cycles", "3", "--resolution", "1", "--out", str(out),
                   "--set", "simulation.step_deg=1.0"])
    finally:
        os.umask(old)
    assert rc == 0
    text = capsys.readouterr().out
    names = {p.name for p in out.iterdir()}
    assert {"trace.npz", "truth.csv", "traces.png"} <= names
    assert ("trace.mf4" in names) == HAS_MDF
    if not HAS_MDF:
        assert 'pip install -e ".[mdf]"' in text
    ts = read_trace(out / "trace.npz")
    assert ts.pressure_pa.shape[0] == 3 and np.isfinite(ts.pressure_pa).all()
    # results are readable by colleagues: the mode a plain open() gives under the umask (0644)
    for p in out.iterdir():
        if p.is_file():
            assert stat.S_IMODE(p.stat().st_mode) == 0o644, p.name


@pytest.mark.skipif(HAS_MDF, reason="the MDF extra is installed")
def test_explicit_mdf_without_the_extra_says_how_to_install(tmp_path, capsys):
    rc = main(["traces", "demo", "--cycles", "2", "--formats", "mf4", "--out", str(tmp_path / "m")])
    assert rc == 2
    assert 'pip install -e ".[mdf]"' in capsys.readouterr().err
