"""Sweep plots (cyclesim.plots.sweep): which sweeps get which plot, on synthetic tables.

The surface's tuned-speed line uses cyclesim.pipes.tuning.peak_speed (tested in test_runner_tuning);
here: a full 2-key grid gives both surfaces, one key both curves, and a paired list, a grid with a
hole or text values none (common practice: a contour needs a full grid).
"""

from __future__ import annotations

import numpy as np
import pytest

from cyclesim.plots.sweep import plot_sweep
from cyclesim.studies.sweep import SweepResult

KEYS = ["operating.speed_rpm", "intake.runner.length_mm"]


def _result(rows, keys):
    return SweepResult(rows=rows, columns=list(rows[0]), results=[None] * len(rows), keys=keys,
                       metadata={"base_config": "synthetic"})


def _grid():
    rows = []
    for L in (300.0, 500.0, 700.0):
        peak = 6000.0 * (300.0 / L) ** 0.5
        for n in np.arange(2000.0, 7001.0, 500.0):
            rows.append({KEYS[0]: n, KEYS[1]: L, "error": "", "volumetric_efficiency": 1.0 - ((n - peak) / 4e3) ** 2,
                         "torque_Nm": 100.0 + n / 100.0})
    return rows


def _is_png(path):
    return path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_two_keys_on_a_grid_give_both_surfaces(tmp_path):
    files = plot_sweep(_result(_grid(), KEYS), tmp_path)
    assert sorted(f.name for f in files) == ["sweep_torque_Nm_surface.png", "sweep_volumetric_efficiency_surface.png"]
    assert all(_is_png(f) for f in files)


def test_one_key_gives_the_curves(tmp_path):
    rows = [r for r in _grid() if r[KEYS[1]] == 500.0]
    files = plot_sweep(_result(rows, KEYS[:1]), tmp_path)
    assert [f.name for f in files] == ["sweep_figures.png"] and _is_png(files[0])


@pytest.mark.parametrize("change", ["paired", "hole", "text", "failed_all"])
def test_other_shapes_get_no_plot(tmp_path, change):
    rows = _grid()
    if change == "hole":
        rows = rows[1:]
    elif change == "text":
        rows = [dict(r, **{KEYS[1]: "long"}) for r in rows]
    elif change == "failed_all":
        rows = [dict(r, error="solver: failed") for r in rows]
    assert plot_sweep(_result(rows, KEYS), tmp_path, paired=change == "paired") == []
    assert not list(tmp_path.glob("*.png"))
