"""Rows of the integrated state and of packed per-case constants, from named declarations.

The cylinder's own state components are declared once here (:data:`CORE`); a submodel's
components follow them in the order the submodels declare them (``Submodel.states()``).
Per-case constants of the compiled loop are declared as named blocks (:func:`block_rows`) and
each compiled form's parameters by name (:func:`param_rows`); the row numbers are computed from
those declarations, never written by hand, so adding a component or a parameter touches only
its declaration.
"""

from __future__ import annotations

from typing import Iterable, Mapping

import numpy as np

CORE = ("m", "T", "m_b", "x_b", "W", "Q_w", "m_bb", "H_bb", "mu_bb",
        "m_int", "H_int", "mu_int", "m_exh", "H_exh", "mu_exh", "Q_burn",
        "m_ibuf", "mb_ibuf", "H_ibuf")
"""The cylinder's state components (see :mod:`cyclesim.solve.solver` for their meaning and units)."""

CORE_ROWS = {n: i for i, n in enumerate(CORE)}
"""Core component name -> row."""

TOTALS = slice(CORE_ROWS["W"], CORE_ROWS["Q_burn"] + 1)
"""The running totals (work .. released heat), reset at the start of a cycle."""


def block_rows(blocks: Iterable[tuple[str, int]], start: int = 0) -> tuple[dict[str, int], int]:
    """First row of each named block of the given sizes, stacked in order, and the row count.

    >>> block_rows((("a", 1), ("b", 3), ("c", 1)))
    ({'a': 0, 'b': 1, 'c': 4}, 5)
    """
    rows: dict[str, int] = {}
    r = start
    for name, size in blocks:
        if name in rows:
            raise ValueError(f"block {name!r} declared twice")
        if size < 0:
            raise ValueError(f"block {name!r}: negative size {size}")
        rows[name] = r
        r += size
    return rows, r


def param_rows(forms: Mapping[str, Mapping[str, tuple[str, ...]]],
               roles: Iterable[str]) -> dict[tuple[str, str], dict[str, int]]:
    """Row offsets of every form's parameters: one block per role, as long as its longest form.

    A batch has one form per role, so the forms of a role share its block.
    """
    out: dict[tuple[str, str], dict[str, int]] = {}
    base = 0
    for role in roles:
        longest = 0
        for form, names in forms[role].items():
            if len(set(names)) != len(names):
                raise ValueError(f"{role} form {form!r}: a parameter name repeats in {names}")
            out[role, form] = {n: base + k for k, n in enumerate(names)}
            longest = max(longest, len(names))
        base += longest
    return out


class SharedArray(np.ndarray):
    """A packed parameter that is one 1-D float array shared by every case of a batch (a flame
    table, say), rather than one value per case.  ``pack()`` marks such a parameter with
    :func:`shared_array`; on the numpy loop it is the array itself, in the compiled loop a slice of
    the batch's concatenated tables (``cyclesim.solve.kernel.Compiled``).  A kernel reads it with
    ``np.interp`` or by index, and finds its own case's part by a per-case offset it packs too."""


def shared_array(values) -> SharedArray:
    """``values`` as a C-contiguous 1-D float :class:`SharedArray` (a copy)."""
    a = np.array(values, dtype=float).ravel()
    if a.size == 0:
        raise ValueError("a shared array needs at least one value")
    return a.view(SharedArray)


def is_shared_array(value) -> bool:
    """Whether a packed parameter is a batch-wide array (:func:`shared_array`)."""
    return isinstance(value, SharedArray)


def shared_blocks(arrays: Iterable) -> tuple[np.ndarray, np.ndarray]:
    """The arrays stacked end to end and the (start, end) index of each: ``(flat, bounds)`` with
    ``bounds`` of length ``n + 1`` (array k is ``flat[bounds[k]:bounds[k + 1]]``).

    >>> shared_blocks([np.array([1.0, 2.0]), np.array([3.0])])
    (array([1., 2., 3.]), array([0, 2, 3]))
    """
    arrays = [np.asarray(a, dtype=float).ravel() for a in arrays]
    rows, n = block_rows((str(k), a.size) for k, a in enumerate(arrays))
    bounds = np.array(list(rows.values()) + [n], dtype=np.int64)
    flat = np.concatenate(arrays) if arrays else np.zeros(1)
    return np.ascontiguousarray(flat), bounds
