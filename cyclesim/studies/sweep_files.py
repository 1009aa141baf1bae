"""The files of a sweep: CSV cells, reading ``sweep.csv``, appending rows, the output folder.

Used by :mod:`cyclesim.studies.sweep`; what makes a resumed study the same
study is in :mod:`cyclesim.fingerprint`.
"""

from __future__ import annotations

import csv
import io
import math
import os
import re
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

from ..errors import CyclesimError, InputFileError
from ..output import atomic_write_text
from ..results.outdir import folder_entries

WARNING_SEPARATOR = " | "
"""Between a case's warnings in the one ``warnings`` cell (messages use ';' themselves):
``row["warnings"].split(WARNING_SEPARATOR)`` gives them back."""

CSV_NAME = "sweep.csv"
JSON_NAME = "sweep.json"
_INT_RE = re.compile(r"^[+-]?\d+$")

__all__ = ["CSV_NAME", "JSON_NAME", "cell", "rows_text", "read_sweep_csv", "same_value", "CsvSink",
           "check_out", "resumed_rows", "rows_on_disk", "write_failed"]


def cell(v: Any) -> str:
    """Text of one CSV cell; floats in shortest round-trip form, so CSV and JSON agree."""
    if v is None:
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return repr(v) if math.isfinite(v) else ""
    return str(v)


def _uncell(text: str, column: str) -> Any:
    """Value of one CSV cell (inverse of :func:`cell`)."""
    if column in ("error", "warnings"):
        return text
    if text == "":
        return None
    if text == "true":
        return True
    if text == "false":
        return False
    if _INT_RE.match(text):
        return int(text)
    try:
        return float(text)
    except ValueError:
        return text


def same_value(a: Any, b: Any) -> bool:
    if isinstance(a, bool) or isinstance(b, bool):
        return a == b
    if isinstance(a, (int, float)) and isinstance(b, (int, float)):
        return math.isclose(a, b, rel_tol=1e-12, abs_tol=1e-12)
    return a == b or cell(a) == cell(b)


def rows_text(rows: Iterable[Mapping], columns: Sequence[str], header: bool) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    if header:
        w.writerow(columns)
    for r in rows:
        w.writerow([cell(r.get(c)) for c in columns])
    return buf.getvalue()


def read_sweep_csv(path: str | Path) -> tuple[list[str], list[dict]]:
    """Read a ``sweep.csv``: (columns, rows) with numbers parsed.

    A last line cut short (no newline, wrong number of cells) is ignored, so a
    file left by an interrupted run reads as its complete rows.
    """
    try:
        text = Path(path).read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise InputFileError(f"{path}: not a sweep table (not UTF-8 text); use --force to start again") from None
    if "\x00" in text:
        raise InputFileError(f"{path}: not a sweep table (binary); use --force to start again")
    if not text.strip():
        return [], []
    if not text.endswith("\n"):
        text = text[: text.rfind("\n") + 1]
    reader = csv.reader(io.StringIO(text))
    try:
        columns = next(reader)
        rows = []
        for cells in reader:
            if len(cells) != len(columns):
                continue
            rows.append({c: _uncell(t, c) for c, t in zip(columns, cells)})
    except StopIteration:
        return [], []
    except csv.Error as exc:
        raise InputFileError(f"{path}: not a sweep table ({exc}); use --force to start again") from None
    return columns, rows


class CsvSink:
    """Append whole rows to ``sweep.csv``; rewrite it atomically when columns grow."""

    def __init__(self, path: Path):
        self.path = path
        self.columns: list[str] | None = None

    def start(self, columns: list[str], rows: list[dict]) -> None:
        self.columns = list(columns)
        atomic_write_text(self.path, rows_text(rows, self.columns, header=True))

    def add(self, new_rows: list[dict], all_rows: list[dict], columns: list[str]) -> None:
        if self.columns is None or columns != self.columns:
            self.start(columns, all_rows)   # all_rows already holds new_rows
            return
        text = rows_text(new_rows, self.columns, header=False)
        with open(self.path, "a", encoding="utf-8", newline="") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())


def check_out(out: Path, resume: bool, force: bool) -> None:
    if out.exists():
        if not out.is_dir():
            raise CyclesimError(f"--out {out}: exists and is not a folder")
        if folder_entries(out) and not (resume or force):
            raise CyclesimError(
                f"--out {out}: folder exists and is not empty; use --resume to continue a sweep"
                " there or --force to start it again"
            )
    out.mkdir(parents=True, exist_ok=True)


def resumed_rows(out: Path, plan: list[dict], keys: list[str]) -> tuple[list[str], dict[int, dict]]:
    path = out / CSV_NAME
    if not path.exists():
        return [], {}
    columns, rows = read_sweep_csv(path)
    if not rows:
        return columns, {}
    missing = [k for k in ("case", *keys) if k not in columns]
    if missing:
        raise CyclesimError(
            f"--resume: {path} has no column {missing[0]!r}: it was written by a different sweep;"
            " use --force to start again"
        )
    kept: dict[int, dict] = {}
    for r in rows:
        i = r.get("case")
        if not isinstance(i, int) or not 0 <= i < len(plan):
            raise CyclesimError(
                f"--resume: {path} has case {r.get('case')!r}, outside this sweep's {len(plan)} cases;"
                " use --force to start again"
            )
        for k in keys:
            if not same_value(r.get(k), plan[i][k]):
                raise CyclesimError(
                    f"--resume: {path} case {i} has {k} = {r.get(k)!r}, this sweep has {plan[i][k]!r}:"
                    " it was written by a different sweep; use --force to start again"
                )
        kept[i] = r   # a repeated case keeps its last complete row
    return columns, kept


def rows_on_disk(path: Path) -> int:
    """Whole rows in a ``sweep.csv`` (0 if it is missing or cannot be read)."""
    try:
        return len(read_sweep_csv(path)[1]) if Path(path).exists() else 0
    except (OSError, CyclesimError):
        return 0


def write_failed(out: Path, exc: OSError, done: int, total: int) -> CyclesimError:
    """One line for a write into ``out`` that failed mid-run: what is kept, how to go on."""
    name = Path(exc.filename).name if getattr(exc, "filename", None) else "a result file"
    kept = rows_on_disk(out / CSV_NAME)
    return CyclesimError(
        f"--out {out}: writing {name} failed ({exc.strerror or type(exc).__name__}) after {done} of {total}"
        f" cases; {kept} finished rows are kept in {out / CSV_NAME}: make the folder writable (or free"
        " space) and run the same command with --resume to continue"
    )
