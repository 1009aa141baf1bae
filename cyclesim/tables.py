"""The one reader of the numeric CSV tables the tool takes as input.

Burn tables, valve-lift tables, discharge-coefficient tables and pressure-trace
CSV files are all read here, so every one of them gets the same checks, each
ending in one line that names the file and the line: the file exists, is UTF-8
text and is not larger than :data:`MAX_TABLE_BYTES`; there is a header (or, where
allowed, none and the columns are taken by position); every row has as many
cells as the header; every cell read is a finite number (``nan`` and ``inf``
refused), optionally within a declared :class:`cyclesim.params.Param` range;
chosen columns strictly increase; chosen column tuples do not repeat; and there
are at least ``min_rows`` data rows.

Blank lines and lines whose first character is ``#`` are skipped (the comment
lines are returned for readers that keep metadata in them).
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping, Sequence

import numpy as np

from .errors import ConfigError, InputFileError

MAX_TABLE_BYTES = 512 * 2**20
"""Largest table file read [bytes] (512 MiB: a pressure-trace set of a few thousand cycles at
0.1 deg is about 100 MiB as CSV)."""

_SHOWN = 8
"""Most characters of a cell echoed in a message (the file's contents are not repeated)."""


@dataclass
class Table:
    """Columns of a checked table.

    Attributes
    ----------
    path : Path
    header : tuple of str
        Column names as written (or ``columns`` given by position).
    columns : dict of str -> ndarray (n,)
        The columns read, as floats.
    lines : ndarray of int (n,)
        File line number of each data row (for messages).
    comments : list of str
        The ``#`` lines, in order.
    """

    path: Path
    header: tuple[str, ...]
    columns: dict[str, np.ndarray]
    lines: np.ndarray
    comments: list[str]

    @property
    def rows(self) -> int:
        return int(self.lines.size)


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _shown(text: str) -> str:
    from .textsafe import excerpt

    return excerpt(text, _SHOWN)


def read_table(
    path: str | Path,
    what: str,
    required: Sequence[str] = (),
    optional: Sequence[str] = (),
    *,
    all_columns: bool = False,
    header_optional: bool = False,
    lowercase: bool = False,
    increasing: Sequence[str] = (),
    unique: Sequence[str] = (),
    ranges: Mapping[str, object] | None = None,
    min_rows: int = 1,
) -> Table:
    """Read and check a numeric CSV table.

    Parameters
    ----------
    path : str or Path
    what : str
        What the table is (``"burn.table"``), for messages.
    required, optional : sequence of str
        Columns that must be present / are read when present.
    all_columns : bool
        Read every column of the header (all must be numeric).
    header_optional : bool
        A first row that is all numbers is data; the columns are then ``required``
        by position.
    lowercase : bool
        Compare header names in lower case.
    increasing : sequence of str
        Columns that must strictly increase down the file.
    unique : sequence of str
        Columns whose combined values must not repeat (the points of a scattered table).
    ranges : mapping of column -> Param, optional
        Declared ranges each value of a column must lie in.
    min_rows : int
        Fewest data rows.

    Raises
    ------
    InputFileError
        One line naming the file, the line and the column of the first problem.
    """
    path = Path(path)
    if not path.is_file():
        raise InputFileError(f"{path}: file not found ({what})")
    size = path.stat().st_size
    if size > MAX_TABLE_BYTES:
        raise InputFileError(f"{path}: {size / 2**20:.0f} MiB, more than the {MAX_TABLE_BYTES // 2**20} MiB"
                             f" a table may have ({what})")
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except OSError as exc:
        raise InputFileError(f"{path}: cannot read ({exc.strerror or exc}) ({what})") from None
    except UnicodeDecodeError as exc:
        raise InputFileError(f"{path}: not a UTF-8 text file ({exc.reason}) ({what})") from None
    if "\x00" in text:
        raise InputFileError(f"{path}: not a text file (NUL bytes) ({what})")
    comments: list[str] = []
    body: list[tuple[int, str]] = []
    for n, ln in enumerate(text.splitlines(), start=1):
        if ln.startswith("#"):
            comments.append(ln)
        elif ln.strip():
            body.append((n, ln))
    if not body:
        raise InputFileError(f"{path}: no header row ({what})")
    rows = [[c.strip() for c in r] for r in csv.reader([b for _, b in body])]
    linenos = [n for n, _ in body]
    first = rows[0]
    if header_optional and first and all(_is_number(c) for c in first):
        header = tuple(list(required) + [f"column {k + 1}" for k in range(len(required), len(first))])
        data, data_lines = rows, linenos
    else:
        header = tuple(c.lower() if lowercase else c for c in first)
        data, data_lines = rows[1:], linenos[1:]
    missing = [c for c in required if c not in header]
    if missing:
        raise InputFileError(
            f"{path}: missing column {', '.join(repr(c) for c in missing)} (header on line {linenos[0]}:"
            f" {', '.join(_shown(h)[1:-1] for h in header[:12])})")
    wanted = list(header) if all_columns else [c for c in list(required) + list(optional) if c in header]
    if not data:
        raise InputFileError(f"{path}: header but no data rows ({what})")
    if len(data) < min_rows:
        raise InputFileError(f"{path}: {len(data)} data row(s); {what} needs at least {min_rows}")
    index = {c: header.index(c) for c in wanted}
    arr = np.empty((len(data), len(wanted)))
    for r, (row, n) in enumerate(zip(data, data_lines)):
        if len(row) != len(header):
            raise InputFileError(f"{path}: line {n} has {len(row)} fields, the header has {len(header)}")
        for j, c in enumerate(wanted):
            cell = row[index[c]]
            try:
                v = float(cell)
            except ValueError:
                raise InputFileError(f"{path}: line {n}, column '{c}': {_shown(cell)} is not a number") from None
            if not math.isfinite(v):
                raise InputFileError(f"{path}: line {n}, column '{c}': {_shown(cell)} is not finite")
            arr[r, j] = v
    cols = {c: arr[:, j].copy() for j, c in enumerate(wanted)}
    lines = np.asarray(data_lines, dtype=int)
    for c, p in (ranges or {}).items():
        if c in cols:
            for v, n in zip(cols[c], lines):
                try:
                    p.check(float(v), f"{path}: line {n}, column '{c}'")
                except ConfigError as exc:
                    raise InputFileError(str(exc)) from None
    for c in increasing:
        if c in cols:
            bad = np.flatnonzero(np.diff(cols[c]) <= 0.0)
            if bad.size:
                k = int(bad[0]) + 1
                raise InputFileError(f"{path}: line {lines[k]}: {c} = {cols[c][k]:g} does not increase"
                                     f" (previous {cols[c][k - 1]:g})")
    keys = [c for c in unique if c in cols]
    if keys:
        seen: dict[tuple, int] = {}
        for r in range(lines.size):
            point = tuple(float(cols[c][r]) for c in keys)
            if point in seen:
                raise InputFileError(f"{path}: line {lines[r]}: the point {', '.join(keys)} ="
                                     f" {', '.join(f'{v:g}' for v in point)} repeats line {seen[point]}")
            seen[point] = int(lines[r])
    return Table(path=path, header=header, columns=cols, lines=lines, comments=comments)
