"""Knock onset read off a spark sweep: the knock model's unburned-share cut-off and the unburned
mass fraction at onset, shared by the spark study and its knock plot."""

from __future__ import annotations

import numpy as np

__all__ = ["model_cutoff", "unburned_at_onset"]


def model_cutoff(table) -> float | None:
    """The knock model's unburned-fraction cut-off of the sweep's cases (None if it has none)."""
    vals = {r.inputs.get("knock.min_unburned_fraction") for r in table.results if r is not None}
    vals.discard(None)
    return float(min(vals)) if vals else None


def unburned_at_onset(table, ok: np.ndarray, onset: np.ndarray):
    """Unburned mass fraction at knock onset [-] of the cases ``ok`` of a sweep (0 where no onset;
    None where a case has no burn trace to read it from)."""
    if "knock_unburned_fraction_at_onset" in table.columns:
        return np.nan_to_num(table.column("knock_unburned_fraction_at_onset")[ok], nan=0.0)
    out = []
    results = [r for r, good in zip(table.results, ok) if good]
    for res, th in zip(results, onset):
        if not np.isfinite(th):
            out.append(0.0)
            continue
        if res is None or "mfb" not in res.trace:
            return None
        out.append(1.0 - float(np.interp(th, res.trace["crank_deg"], res.trace["mfb"])))
    return np.array(out)
