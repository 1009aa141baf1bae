"""Parameter sweeps: many operating points from one base config, one table of figures.

>>> from cyclesim.studies.sweep import sweep
>>> res = sweep("demo", [("burn.spark_advance_deg", "10:40:5")], out="spark_sweep")
>>> res.column("torque_Nm")

Each varied key takes a list of values or a text spec: a comma list
``"10,15,20"`` or a range ``"start:stop:step"`` (stop included when it lands
on the grid, within rounding).  Several keys give the full grid (the last key
varies fastest), or one case per position with ``paired=True``.

With ``out``, rows go to ``out/sweep.csv`` as each chunk of cases finishes
(whole rows only, flushed), and ``out/sweep.json`` (rows plus metadata and the
caution) is written at the end.  ``resume=True`` keeps the rows already in
``sweep.csv`` and runs only the missing cases, so an interrupted sweep
continues where it stopped, provided the folder's ``study.fingerprint`` shows
the same study (base case fully resolved, varied values, submodels, options,
tool version; :mod:`cyclesim.fingerprint`): otherwise the resume is
refused, naming what differs.  The folder is locked for the whole run
(:func:`cyclesim.results.outdir.folder_lock`): a second sweep into it is refused.  A case that fails (invalid value, solver
failure) is recorded with its error message; the others go on.

Chunks run on several cores (``workers=2``, ``workers="auto"``) or on a Dask
cluster (``backend="dask"``, ``scheduler=ADDRESS``), see
:mod:`cyclesim.parallel`.  By default a sweep of more than 64 cases to run
uses one process per CPU (at most one per chunk), a smaller one runs in this
process.  Rows are written as chunks finish, in whatever order they finish;
the final ``sweep.csv`` and ``sweep.json`` are in case order and the same,
bit for bit, as those of a serial run.
"""

from __future__ import annotations

import itertools
import json
import math
import sys
import time
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Callable, Iterable, Mapping, Sequence

import numpy as np
import yaml

from ..config import CORE_SCHEMA, Case, case_with, resolve_case, yaml_value
from ..errors import ConfigError, CyclesimError, InputFileError
from ..output import CAUTION, atomic_write_text
from ..params import suggestion
from ..roles import ROLES
from ..results.outdir import folder_lock
from ..fingerprint import check_fingerprint, digest, study_record, write_fingerprint
from .sweep_files import (CSV_NAME, JSON_NAME, WARNING_SEPARATOR, CsvSink, check_out, read_sweep_csv, resumed_rows,
                          rows_text, write_failed)

__all__ = ["sweep", "SweepResult", "parse_values", "parse_vary_arg", "read_sweep_csv"]

FIXED_COLUMNS = ("case", "error", "warnings")
_MAX_CASES = 1_000_000


# --------------------------------------------------------------------------
# Value specs
# --------------------------------------------------------------------------


def _number(text: str, key: str, spec: str) -> int | float:
    try:
        v = yaml_value(text)
    except yaml.YAMLError:
        v = None
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(float(v)):
        raise ConfigError(f"{key}: range {spec!r}: {text.strip()!r} is not a number (expected start:stop:step)")
    return v


def _range_values(key: str, spec: str) -> list:
    parts = spec.split(":")
    if len(parts) != 3:
        raise ConfigError(f"{key}: range {spec!r}: expected start:stop:step")
    start, stop, step = (_number(p, key, spec) for p in parts)
    if step == 0:
        raise ConfigError(f"{key}: range {spec!r}: step must not be zero")
    span = (stop - start) / step
    if span < -1e-9:
        raise ConfigError(f"{key}: range {spec!r}: the step goes away from stop (empty range)")
    n = int(math.floor(span + 1e-9)) + 1
    if n > _MAX_CASES:
        raise ConfigError(f"{key}: range {spec!r} gives {n} values; at most {_MAX_CASES} are allowed")
    all_int = all(isinstance(v, int) for v in (start, stop, step))
    out: list = []
    for i in range(n):
        v = start + i * step
        out.append(int(v) if all_int else _tidy(float(v)))
    return out


def _tidy(v: float) -> float:
    """Remove the rounding noise of ``start + i*step`` (0.30000000000000004 -> 0.3)."""
    if v == 0.0:
        return 0.0
    digits = 12 - int(math.floor(math.log10(abs(v))))
    return float(round(v, max(digits, 0)))


def parse_values(key: str, spec: Any) -> list:
    """Values of one varied key from a list or a text spec.

    Parameters
    ----------
    key : str
        Dotted config key (for messages).
    spec : list, tuple, ndarray, number or str
        A sequence of values; or text: ``"10,15,20"`` (each item read as YAML,
        so numbers become numbers and words stay words), ``"start:stop:step"``
        (stop included when it lands on the grid, within rounding), ``"[1, 2]"``
        (a YAML list) or a single value.

    Returns
    -------
    list
        Plain Python values (numpy scalars converted).
    """
    if isinstance(spec, np.ndarray):
        spec = spec.tolist()
    if isinstance(spec, (list, tuple)):
        vals = [_py(v) for v in spec]
    elif isinstance(spec, str):
        text = spec.strip()
        if not text:
            raise ConfigError(f"{key}: empty list of values")
        if text.startswith("["):
            try:
                vals = yaml_value(text)
            except yaml.YAMLError as exc:
                raise ConfigError(f"{key}: cannot read {spec!r} as a list: {exc.problem}") from None
            if not isinstance(vals, list):
                raise ConfigError(f"{key}: cannot read {spec!r} as a list")
        elif "," in text:
            vals = []
            for item in text.split(","):
                if not item.strip():
                    raise ConfigError(f"{key}: empty item in the list {spec!r}")
                vals.append(_yaml_item(item))
        elif ":" in text:
            vals = _range_values(key, text)
        else:
            vals = [_yaml_item(text)]
    else:
        vals = [_py(spec)]
    if not vals:
        raise ConfigError(f"{key}: empty list of values")
    return vals


def _yaml_item(text: str) -> Any:
    try:
        return yaml_value(text.strip())
    except yaml.YAMLError:
        return text.strip()


def _py(v: Any) -> Any:
    if isinstance(v, np.generic):
        return v.item()
    return v


def parse_vary_arg(text: str) -> tuple[str, str]:
    """Split a command-line ``KEY=SPEC`` into ``(key, spec)``."""
    key, sep, spec = text.partition("=")
    if not sep or not key.strip():
        raise ConfigError(f"--vary {text!r}: expected KEY=VALUES, e.g. burn.spark_advance_deg=10:40:2")
    if not spec.strip():
        raise ConfigError(f"--vary {text!r}: no values after '='")
    return key.strip(), spec.strip()


# --------------------------------------------------------------------------
# Keys
# --------------------------------------------------------------------------


def _check_key(base: Case, key: str, vary: Mapping[str, list]) -> None:
    """Fail fast (one ConfigError line) for a key, or a value of it, that no case could accept.

    A value of the wrong kind for its key (a word where a number belongs, a
    fraction for a whole number, an unknown choice or model name) is refused
    before anything runs.  A value of the right kind outside the key's range
    fails as its own case, recorded with its message (it may depend on the
    other values of the case).
    """
    parts = key.split(".")
    if len(parts) == 3 and parts[0] in ("intake", "exhaust") and parts[1] == "runner":
        from ..config.runners import RUNNER_SCHEMA

        sec, name, declared = f"{parts[0]}.runner", parts[2], list(RUNNER_SCHEMA)
        parts = [sec, name]
    if len(parts) != 2 or not all(parts):
        raise ConfigError(f"--vary {key!r}: expected section.key (or intake.runner.key), e.g."
                          " operating.speed_rpm")
    sec, name = parts
    if sec in ("intake.runner", "exhaust.runner"):
        pass
    elif sec in CORE_SCHEMA:
        declared = list(CORE_SCHEMA[sec])
    elif sec in ROLES:
        from ..registry import get_registry

        reg = get_registry(tuple(base.plugins))
        if name == "model":
            for m in vary[key]:
                if not isinstance(m, str):
                    raise ConfigError(f"--vary {key}: {m!r} is not a model name; nothing was run")
                reg.submodel_class(sec, m, where=f"--vary {key}")
            return
        models = [base.submodels[sec].model]
        for m in vary.get(f"{sec}.model", ()):
            if isinstance(m, str) and m not in models:
                models.append(m)
        declared = []
        for m in models:
            try:
                cls = reg.submodel_class(sec, m)
            except CyclesimError:
                continue
            declared.extend(cls.params)
    else:
        sections = tuple(CORE_SCHEMA) + ROLES
        raise ConfigError(
            f"--vary {key!r}: unknown section {sec!r}" + suggestion(sec, sections)
            + f"; sections: {', '.join(sections)}"
        )
    known = list(dict.fromkeys(p.name for p in declared))
    if name not in known:
        raise ConfigError(
            f"--vary {key!r}: unknown key" + suggestion(name, known) + f"; allowed in {sec}: {', '.join(known)}"
        )
    kinds = [replace(p, min=None, max=None) for p in declared if p.name == name]   # kind, not range
    for v in vary[key]:
        problems = []
        for p in kinds:
            try:
                p.check(v, key)
                break
            except ConfigError as exc:
                problems.append(str(exc).removeprefix(f"{key}: "))
        else:
            raise ConfigError(f"--vary {key}: {_py(v)!r} is not a value of this key ({problems[0]});"
                              " nothing was run")


def _plan(vary: Mapping[str, list], paired: bool) -> list[dict]:
    keys = list(vary)
    if paired and len(keys) > 1:
        lens = {k: len(v) for k, v in vary.items()}
        if len(set(lens.values())) > 1:
            detail = ", ".join(f"{k} has {n}" for k, n in lens.items())
            raise ConfigError(f"paired sweep: every key needs the same number of values ({detail})")
        combos: Iterable = zip(*vary.values())
    else:
        total = math.prod(len(v) for v in vary.values())
        if total > _MAX_CASES:
            raise ConfigError(f"sweep: the grid has {total} cases; at most {_MAX_CASES} are allowed")
        combos = itertools.product(*vary.values())
    return [dict(zip(keys, c)) for c in combos]


# --------------------------------------------------------------------------
# Rows, cells and the CSV file
# --------------------------------------------------------------------------


def _flatten(summary: Mapping[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for k, v in summary.items():
        if isinstance(v, Mapping):
            for kk, vv in v.items():
                if _is_scalar(vv):
                    out[f"{k}.{kk}"] = _scalar(vv)
        elif _is_scalar(v):
            out[k] = _scalar(v)
    return out


def _is_scalar(v: Any) -> bool:
    return isinstance(v, (int, float, bool, str, np.generic)) or v is None


def _scalar(v: Any) -> Any:
    v = _py(v)
    if isinstance(v, float) and not math.isfinite(v):
        return None
    return v



# --------------------------------------------------------------------------
# Result
# --------------------------------------------------------------------------


SWEEP_TABLE = (("imep_net_bar", "net IMEP bar", ".2f", 1.0), ("bmep_bar", "BMEP bar", ".2f", 1.0),
               ("torque_Nm", "torque N m", ".1f", 1.0), ("bsfc_g_per_kWh", "BSFC g/kWh", ".0f", 1.0),
               ("ca50_deg", "CA50 deg", ".1f", 1.0), ("p_max_bar", "p_max bar", ".1f", 1.0),
               ("residual_fraction", "residual %", ".1f", 100.0), ("burn_0_10_deg", "0-10 deg", ".1f", 1.0),
               ("burn_10_90_deg", "10-90 deg", ".1f", 1.0), ("no_ppm_wet", "NO ppm", ".0f", 1.0),
               ("no_g_per_kWh", "NO g/kWh", ".2f", 1.0))
"""Figures in the printed sweep table: (summary key, heading, format, scale)."""


@dataclass
class SweepResult:
    """The table of a sweep.

    Attributes
    ----------
    rows : list of dict
        One per case, in case order: ``case``, the varied keys, ``error``
        (empty if the case ran), ``warnings`` (the case's messages joined by
        :data:`WARNING_SEPARATOR`) and every scalar summary figure
        (``energy_balance.*`` flattened).  Missing figures are None.
    columns : list of str
    results : list of CaseResult or None
        Per case; None for rows taken over from an earlier run (resume).
    keys : list of str
        The varied keys.
    metadata : dict
        Base config, vary spec, caution text.
    """

    rows: list[dict]
    columns: list[str]
    results: list
    keys: list[str]
    metadata: dict = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.rows)

    def text(self, max_rows: int = 40) -> str:
        """A short printed table: the varied keys and the main figures per case (all of them in
        ``sweep.csv``); longer sweeps show their first and last rows."""
        cols = [(k, k.rsplit(".", 1)[-1], None, 1.0) for k in self.keys]
        cols += [(k, h, f, sc) for k, h, f, sc in SWEEP_TABLE if k in self.columns]
        width = [max(len(h), 8) + 2 for _, h, _, _ in cols]
        lines = ["  " + "".join(f"{h:>{w}s}" for (_, h, _, _), w in zip(cols, width))]

        def cell(v, f, sc, w):
            if v is None or (isinstance(v, float) and not math.isfinite(v)):
                return f"{'-':>{w}s}"
            if f is None:
                return f"{v:>{w}g}" if isinstance(v, (int, float)) and not isinstance(v, bool) else f"{str(v):>{w}s}"
            return f"{format(v * sc, f):>{w}s}"

        rows = self.rows
        show = rows if len(rows) <= max_rows else rows[: max_rows - 5] + [None] + rows[-5:]
        for r in show:
            if r is None:
                lines.append(f"  ... {len(rows) - max_rows} more rows in sweep.csv ...")
                continue
            if r.get("error"):
                lines.append("  " + "".join(cell(r.get(k), f, sc, w) for (k, _, f, sc), w in
                                            zip(cols[: len(self.keys)], width)) + "  failed")
                continue
            lines.append("  " + "".join(cell(r.get(k), f, sc, w) for (k, _, f, sc), w in zip(cols, width)))
        return "\n".join(lines)

    def warning_groups(self) -> list[dict]:
        """The cases' warnings and errors grouped by kind, each with its count and the cases that gave
        it, labelled by their varied values (:func:`cyclesim.studies.map_console.group_labelled`)."""
        from .map_console import group_labelled

        def items():
            for r in self.rows:
                label = " / ".join(f"{k.rsplit('.', 1)[-1]}={r.get(k)}" for k in self.keys) or f"case {r['case']}"
                msgs = [w for w in (r.get("warnings") or "").split(WARNING_SEPARATOR) if w]
                if r.get("error"):
                    msgs.append(f"failed: {r['error']}")
                yield label, msgs

        return group_labelled(items())

    @property
    def failed(self) -> list[int]:
        """Case indices that have an error."""
        return [r["case"] for r in self.rows if r.get("error")]

    def column(self, name: str) -> np.ndarray:
        """One column as an array: float (None -> NaN) if every value is a number, else object."""
        if name not in self.columns:
            raise KeyError(f"no column {name!r}" + suggestion(name, self.columns))
        vals = [r.get(name) for r in self.rows]
        if all(v is None or (isinstance(v, (int, float)) and not isinstance(v, bool)) for v in vals):
            return np.array([np.nan if v is None else float(v) for v in vals], dtype=float)
        return np.array(vals, dtype=object)

    def add_column(self, name: str, values: Sequence[Any]) -> None:
        """Add (or replace) a column, one value per row."""
        if len(values) != len(self.rows):
            raise ValueError(f"column {name!r}: {len(values)} values for {len(self.rows)} rows")
        for r, v in zip(self.rows, values):
            r[name] = _scalar(v)
        if name not in self.columns:
            self.columns.append(name)

    def to_csv(self, path: str | Path | None = None) -> str:
        """The table as CSV text (header first); written atomically to ``path`` if given."""
        text = rows_text(self.rows, self.columns, header=True)
        if path is not None:
            atomic_write_text(Path(path), text)
        return text

    def to_json_data(self) -> dict:
        return {
            "metadata": {**self.metadata, "columns": list(self.columns)},
            "rows": [{c: _scalar(r.get(c)) for c in self.columns} for r in self.rows],
        }

    def to_json(self, path: str | Path | None = None) -> str:
        """Rows plus metadata as JSON text; written atomically to ``path`` if given."""
        text = json.dumps(self.to_json_data(), indent=1) + "\n"
        if path is not None:
            atomic_write_text(Path(path), text)
        return text


# --------------------------------------------------------------------------
# Progress
# --------------------------------------------------------------------------


class _Bar:
    """A tqdm bar of cases on stderr, driven by the sweep's ``(done, total, elapsed)`` callback."""

    def __init__(self, total: int, stream=None):
        from tqdm import tqdm

        from ..textsafe import terminal

        self.bar = tqdm(total=max(total, 1), unit="case", file=stream or terminal(sys.stderr), dynamic_ncols=True)

    def __call__(self, done: int, total: int, elapsed: float) -> None:
        self.bar.total = max(total, 1)
        self.bar.update(done - self.bar.n)

    def close(self) -> None:
        self.bar.close()


def _progress_fn(progress, total):
    if callable(progress):
        return progress, None
    if progress is None:
        progress = bool(getattr(sys.stderr, "isatty", lambda: False)())
    if progress:
        bar = _Bar(total)
        return bar, bar
    return None, None



# --------------------------------------------------------------------------
# The sweep
# --------------------------------------------------------------------------


def _columns(keys: list[str], rows: Iterable[Mapping], start: Sequence[str] = ()) -> list[str]:
    cols = list(start) if start else ["case", *keys, "error", "warnings"]
    for c in ("case", *keys, "error", "warnings"):
        if c not in cols:
            cols.append(c)
    for r in rows:
        for c in r:
            if c not in cols:
                cols.append(c)
    return cols


def _simulate_chunk(cases: list[Case]) -> list:
    """One chunk in this process (kept for callers of the former helper)."""
    from ..parallel import run_chunk

    return run_chunk(cases)


class _Run:
    """The run of one sweep's plan: rows kept from an earlier run, chunks, files."""

    def __init__(self, base_case: Case, plan: list[dict], keys: list[str], metadata: dict,
                 out_path: Path | None, chunk_size: int, progress, where: tuple):
        self.base_case, self.plan, self.keys, self.metadata = base_case, plan, keys, metadata
        self.out_path, self.chunk_size, self.progress, self.where = out_path, chunk_size, progress, where

    def _prepare(self, resume: bool, force: bool, record: dict) -> tuple[dict[int, dict], list[str], Any]:
        """Check the folder, keep the rows of the same study on resume, store the fingerprint."""
        out_path, plan, keys = self.out_path, self.plan, self.keys
        rows: dict[int, dict] = {}
        columns: list[str] = []
        if out_path is None:
            return rows, columns, None
        check_out(out_path, resume, force)
        sink = CsvSink(out_path / CSV_NAME)
        try:
            if resume:
                csv_path = out_path / CSV_NAME
                check_fingerprint(out_path, record, csv_path.exists() and bool(read_sweep_csv(csv_path)[1]))
                old_cols, rows = resumed_rows(out_path, plan, keys)
                columns = _columns(keys, rows.values(), old_cols) if rows else []
            else:
                for name in (CSV_NAME, JSON_NAME):
                    if (out_path / name).exists():
                        (out_path / name).unlink()
            write_fingerprint(out_path, record)               # before the first row
            if rows:
                sink.start(columns, [rows[i] for i in sorted(rows)])   # clean copy, whole rows only
        except OSError as exc:
            raise write_failed(out_path, exc, len(rows), len(plan)) from None
        return rows, columns, sink

    def execute(self, resume: bool, force: bool, record: dict) -> SweepResult:
        from ..parallel import plan_execution, run_chunks

        base_case, plan, keys, metadata, out_path = self.base_case, self.plan, self.keys, self.metadata, self.out_path
        chunk_size = self.chunk_size
        workers, backend, scheduler = self.where
        rows, columns, sink = self._prepare(resume, force, record)
        results: list = [None] * len(plan)
        start_columns = list(columns)
        todo = [i for i in range(len(plan)) if i not in rows]
        n_chunks = -(-len(todo) // chunk_size)
        how, n_workers = plan_execution(len(todo), n_chunks, workers, backend, scheduler)
        report, bar = _progress_fn(self.progress, len(plan))
        t0 = time.perf_counter()
        done = len(plan) - len(todo)
        # chunk k -> (case indices, indices of the cases built, their rows); filled as chunks are drawn
        pending: dict[int, tuple[list[int], list[int], dict[int, dict]]] = {}

        def chunks():
            """Cases of each chunk, built (and checked) only when a worker is ready for them."""
            for k, c0 in enumerate(range(0, len(todo), chunk_size)):
                idx = todo[c0: c0 + chunk_size]
                new: dict[int, dict] = {}
                cases: list[Case] = []
                run_idx: list[int] = []
                for i in idx:
                    row = {"case": i, **plan[i], "error": "", "warnings": ""}
                    try:
                        cases.append(case_with(base_case, plan[i]))
                        run_idx.append(i)
                    except CyclesimError as exc:
                        row["error"] = str(exc)
                    new[i] = row
                pending[k] = (idx, run_idx, new)
                yield cases

        def finished(k: int, chunk_results: list) -> None:
            """Rows of one finished chunk: into the table, appended to sweep.csv, progress."""
            nonlocal columns, done
            idx, run_idx, new = pending.pop(k)
            for i, res in zip(run_idx, chunk_results):
                results[i] = res
                row = new[i]
                if res.error:
                    row["error"] = str(res.error)
                else:
                    row.update(_flatten(res.summary))
                row["warnings"] = WARNING_SEPARATOR.join(res.warnings)
            rows.update(new)
            columns = _columns(keys, new.values(), columns)
            if sink is not None:
                ordered = [rows[i] for i in sorted(rows)]
                try:
                    sink.add([new[i] for i in idx], ordered, columns)
                except OSError as exc:
                    raise write_failed(out_path, exc, len(rows), len(plan)) from None
            done += len(idx)
            if report is not None:
                report(done, len(plan), time.perf_counter() - t0)

        try:
            if report is not None:
                report(done, len(plan), 0.0)
            if todo:
                run_chunks(chunks(), workers=n_workers, backend=how, on_result=finished, scheduler=scheduler)
        except KeyboardInterrupt:       # Ctrl-C, or SIGTERM on the command line
            if bar is not None:
                bar.close()
                bar = None
            if out_path is not None:
                held = (f"{out_path / CSV_NAME} holds the finished rows" if rows
                        else "no case had finished, so nothing was written yet")
                print(
                    f"sweep interrupted after {len(rows)} of {len(plan)} cases; {held};"
                    " run again with --resume to continue",
                    file=sys.stderr,
                )
            raise
        finally:
            if bar is not None:
                bar.close()
        ordered = [rows[i] for i in range(len(plan))]
        # columns in case order (chunks may finish in any order when they run in parallel)
        columns = _columns(keys, ordered, start_columns)
        for r in ordered:
            for c in columns:
                r.setdefault(c, None)
        metadata["failed"] = sum(1 for r in ordered if r.get("error"))
        result = SweepResult(rows=ordered, columns=columns, results=results, keys=keys, metadata=metadata)
        if out_path is not None:
            try:
                result.to_csv(out_path / CSV_NAME)      # final copy in case order, same columns as the JSON
                result.to_json(out_path / JSON_NAME)
            except OSError as exc:
                raise write_failed(out_path, exc, len(plan), len(plan)) from None
        return result


def sweep(
    base: Case | str | Path,
    vary: Sequence[tuple[str, Any]] | Mapping[str, Any],
    paired: bool = False,
    out: str | Path | None = None,
    resume: bool = False,
    chunk_size: int = 64,
    progress: bool | None | Callable[[int, int, float], None] = None,
    force: bool = False,
    overrides: Sequence[str] = (),
    label: str | None = None,
    workers: int | str | None = None,
    backend: str | None = None,
    scheduler: str | None = None,
    study: str = "sweep",
    study_options: Mapping[str, Any] | None = None,
) -> SweepResult:
    """Run a grid (or paired list) of cases built from one base config.

    Parameters
    ----------
    base : Case, str or Path
        A validated case, or a config path / built-in name (with ``overrides``).
    vary : list of (key, values) or mapping
        Dotted config keys and their values (a list, or a text spec, see
        :func:`parse_values`).
    paired : bool
        One case per position (all value lists equally long) instead of the
        full grid.
    out : str or Path, optional
        Folder for ``sweep.csv`` (rows appended as chunks finish) and
        ``sweep.json`` (at the end).  Must be empty or absent unless
        ``resume`` or ``force``.
    resume : bool
        Keep the rows already in ``out/sweep.csv`` (matched by case index and
        varied values) and run only the missing cases.
    chunk_size : int
        Cases simulated (and batched) together before their rows are written.
    progress : bool, None or callable
        True: a progress bar on stderr; None: only when stderr is a terminal;
        False: none; a callable gets ``(cases_done, cases_total, elapsed_s)``
        after each chunk.
    force : bool
        Write into a non-empty ``out`` (starting the sweep again).
    overrides : list of str
        ``key=value`` changes applied to a base given by path or name.
    label : str, optional
        Name of the base config for the metadata (default: the path or name).
    workers : int, "auto" or None
        Worker processes for the chunks (``"auto"``: one per CPU available,
        at most one per chunk).  None: serial up to
        :data:`cyclesim.parallel.AUTO_MIN_CASES` (64) cases to run, ``"auto"``
        above.  ``1`` runs everything in this process.
    backend : {"process", "dask", "serial"}, optional
        Where the chunks run (see :mod:`cyclesim.parallel`); None: processes
        on this machine when more than one worker results, Dask when a
        ``scheduler`` is given.  The table is the same whichever runs it, bit
        for bit: the chunks, hence the batches, do not change.
    scheduler : str, optional
        Address of a Dask scheduler (backend ``"dask"``); without it the dask
        backend starts a local cluster of ``workers`` processes.
    study, study_options : str, mapping
        Name and figure-changing options of the study this sweep serves (the
        spark study passes its own), recorded in the fingerprint: a resume
        with other options is refused.

    Returns
    -------
    SweepResult

    Raises
    ------
    ConfigError
        A key no case could accept (unknown section or key), bad value specs,
        unequal lengths in a paired sweep.
    CyclesimError
        ``out`` not empty without ``resume``/``force``; a resume folder
        written by a different study (see :mod:`cyclesim.fingerprint`);
        ``out`` in use by another run, or not writable (before anything runs);
        a write that fails mid-run (the rows on disk stay; the message says how
        to resume).
    """
    base_case, base_label = resolve_case(base, overrides)
    base_label = label or base_label
    items = list(vary.items()) if isinstance(vary, Mapping) else list(vary)
    if not items:
        raise ConfigError("sweep: nothing to vary (give at least one KEY=VALUES)")
    values: dict[str, list] = {}
    specs: dict[str, Any] = {}
    for item in items:
        try:
            key, spec = item
        except (TypeError, ValueError):
            raise ConfigError(f"sweep: expected (key, values) pairs, got {item!r}") from None
        key = str(key).strip()
        if key in values:
            raise ConfigError(f"--vary {key!r}: given twice")
        values[key] = parse_values(key, spec)
        specs[key] = spec if isinstance(spec, str) else [_py(v) for v in spec] if isinstance(spec, (list, tuple, np.ndarray)) else _py(spec)
    for key in values:
        _check_key(base_case, key, values)
    keys = list(values)
    plan = _plan(values, paired)
    if chunk_size < 1:
        raise ConfigError(f"--chunk {chunk_size}: expected a whole number >= 1")
    from ..parallel import plan_execution

    plan_execution(len(plan), -(-len(plan) // chunk_size), workers, backend, scheduler)  # bad options fail here

    metadata = {
        "base_config": base_label,
        "base_name": base_case.name,
        "overrides": list(overrides),
        "vary": [{"key": k, "spec": specs[k], "values": values[k]} for k in keys],
        "paired": bool(paired and len(keys) > 1),
        "cases": len(plan),
        "caution": CAUTION,
    }
    out_path = Path(out) if out is not None else None
    record = study_record(study, base_case, values, metadata["paired"], study_options)
    metadata["fingerprint"] = digest(record)
    if study_options:
        metadata["study_options"] = dict(study_options)
    run = _Run(base_case, plan, keys, metadata, out_path, chunk_size, progress, (workers, backend, scheduler))
    if out_path is None:
        return run.execute(resume, force, record)
    with folder_lock(out_path):          # one writer per folder for the whole sweep
        return run.execute(resume, force, record)
