"""Cases with distinct settings: compute once per distinct setting, index back to every case."""

from __future__ import annotations

from typing import Sequence

import numpy as np


def distinct_rows(columns: Sequence[np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    """The cases with distinct settings, from per-case setting arrays (B,) each.

    Returns ``(first, rows)``: the index of one case per distinct setting, and for every case the
    position of its setting among them, so that values computed for the cases ``first`` and
    indexed by ``rows`` are those of every case.
    """
    keys = np.stack([np.asarray(c, dtype=float) for c in columns], axis=1)
    if np.all(keys == keys[0]):
        return np.zeros(1, dtype=np.intp), np.zeros(keys.shape[0], dtype=np.intp)
    _, first, rows = np.unique(keys, axis=0, return_index=True, return_inverse=True)
    return first, rows.ravel()
