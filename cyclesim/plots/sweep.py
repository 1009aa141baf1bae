"""Plots of a sweep (:mod:`cyclesim.studies.sweep`): volumetric efficiency and brake torque over
the varied keys.

* one numeric key: both against it, one panel each;
* two numeric keys on a full grid (e.g. engine speed and intake runner length): filled contours
  of each over the two keys (the runner-length study's volumetric-efficiency surface), with the
  sweep's points and, along the first key, the position of the largest value for each value of
  the second (the tuned speed of each runner length: the parabola vertex through the best point
  and its neighbours, :func:`cyclesim.pipes.tuning.peak_speed`).

Failed cases are left out; other sweeps (paired lists, more keys, text values) get no plot.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from . import _plt, _save

__all__ = ["plot_sweep", "FIGURES"]

FIGURES = (("volumetric_efficiency", 100.0, "volumetric efficiency [%]"),
           ("torque_Nm", 1.0, "brake torque [N m]"))
"""Figures drawn: summary key, scale, axis label."""


def _numeric(rows, key):
    try:
        return np.array([float(r[key]) for r in rows])
    except (TypeError, ValueError):
        return None


def plot_sweep(res, out: Path, paired: bool = False) -> list[Path]:
    """The sweep's plots in ``out``; returns the files written (none where the sweep's shape has no
    plot)."""
    keys = list(res.keys)
    rows = [r for r in res.rows if not r.get("error") and all(r.get(f) is not None for f, _, _ in FIGURES)]
    if paired or not rows or len(keys) not in (1, 2):
        return []
    cols = [_numeric(rows, k) for k in keys]
    if any(c is None for c in cols):
        return []
    base = res.metadata.get("base_config", "") if isinstance(res.metadata, dict) else ""
    plt = _plt()
    out = Path(out)
    if len(keys) == 1:
        x = cols[0]
        order = np.argsort(x)
        fig, axes = plt.subplots(1, len(FIGURES), figsize=(10, 4))
        for ax, (fig_key, scale, label) in zip(axes, FIGURES):
            ax.plot(x[order], scale * _numeric(rows, fig_key)[order], "o-", ms=3)
            ax.set_xlabel(keys[0])
            ax.set_ylabel(label)
        fig.suptitle(f"{base}: sweep of {keys[0]}")
        return [_save(fig, out / "sweep_figures.png")]
    xs, ys = (np.unique(c) for c in cols)
    if len(xs) < 3 or len(ys) < 2 or len(rows) != len(xs) * len(ys):
        return []                                  # not a full grid of at least 3 x 2 points
    from ..pipes.tuning import peak_speed

    ix, iy = np.searchsorted(xs, cols[0]), np.searchsorted(ys, cols[1])
    files = []
    for fig_key, scale, label in FIGURES:
        Z = np.full((len(ys), len(xs)), np.nan)
        Z[iy, ix] = scale * _numeric(rows, fig_key)
        fig, ax = plt.subplots(figsize=(8, 5.5))
        cs = ax.contourf(xs, ys, Z, levels=14, cmap="viridis")
        ax.contour(xs, ys, Z, levels=cs.levels, colors="k", linewidths=0.3, alpha=0.5)
        fig.colorbar(cs, ax=ax, label=label)
        ax.plot(cols[0], cols[1], ".", color="w", ms=2, alpha=0.6)
        best = [peak_speed(xs, Z[j])[0] for j in range(len(ys))]
        ax.plot(best, ys, "r^-", ms=5, lw=1.2, label=f"largest {label.split(' [')[0]} for each {keys[1]}")
        ax.set_xlabel(keys[0])
        ax.set_ylabel(keys[1])
        ax.legend(loc="best", fontsize=8)
        ax.grid(False)
        ax.set_title(f"{base}\n{label.split(' [')[0]} over {keys[0]} and {keys[1]}")
        files.append(_save(fig, out / f"sweep_{fig_key}_surface.png"))
    return files
