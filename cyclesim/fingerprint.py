"""What makes a resumed study the same study: a fingerprint kept beside its rows.

A study that resumes (``sweep``, ``spark``; the checkpoints of ``traces``)
keeps rows from an earlier run only if that run was the same study.  The
record compared is:

- the fully resolved base case: every validated value after ``extends``,
  ``--set`` and defaults (core sections, ``multi_cylinder``, the name), the
  submodel chosen for each role with all its parameters, the plug-in modules,
  and the contents (SHA-256) of every file the case reads (tables given by
  path, plug-ins given as ``.py`` files);
- the varied keys and their values, and whether the grid is paired;
- the study's own options (those that change its figures: e.g. the spark
  study's torque fraction, margins and limits; not the chunk size, workers,
  plots or progress, which leave every figure as it is);
- the tool's name and version.

The record is written to :data:`FINGERPRINT_NAME` in the output folder before
the first row, with its digest; a resume compares the record it would write
with the stored one and, where they differ, is refused with one line naming
the differences.  A sweep's varied values may change on resume (to extend
it): each kept row must then hold, at its case index, the values of the new
plan, or the resume is refused (:func:`cyclesim.studies.sweep_files.resumed_rows`).
The keys varied by the study are left out of the base case (every case sets
them).  The tool's version is the package's version string.
"""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path
from typing import Any, Mapping, Sequence

from .config import CORE_SCHEMA, MULTI_SCHEMA, Case, flat_inputs
from .errors import CyclesimError
from .output import atomic_write_text

__all__ = ["FINGERPRINT_NAME", "study_record", "digest", "differences", "write_fingerprint",
           "check_fingerprint", "refuse_if_different"]

FINGERPRINT_NAME = "study.fingerprint"
"""File in a study's output folder holding its record and digest (JSON text)."""

FORMAT = 1
_FILE_KINDS = ("path", "table")
_SHOWN = 3          # differences named in the refusal; the rest are counted


def _canon(v: Any) -> Any:
    """A JSON value that compares equal for equal inputs (numbers as floats, tuples as lists)."""
    if hasattr(v, "item") and callable(v.item) and not isinstance(v, (list, tuple, dict, str)):
        try:
            v = v.item()
        except (TypeError, ValueError):
            pass
    if isinstance(v, bool) or v is None or isinstance(v, str):
        return v
    if isinstance(v, (int, float)):
        f = float(v)
        return f if math.isfinite(f) else repr(f)
    if isinstance(v, Mapping):
        return {str(k): _canon(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_canon(x) for x in v]
    if hasattr(v, "tolist"):
        return _canon(v.tolist())
    return str(v)


def _file_digest(path: Path) -> str:
    try:
        return "sha256:" + hashlib.sha256(path.read_bytes()).hexdigest()
    except OSError as exc:
        return f"unreadable ({exc.strerror or type(exc).__name__})"


def _find(spec: str, base_dir: Path) -> Path | None:
    p = Path(spec).expanduser()
    for cand in ((p,) if p.is_absolute() else (Path(base_dir) / p, Path.cwd() / p)):
        if cand.is_file():
            return cand
    return None


def _files(case: Case, skip: set[str]) -> dict[str, str]:
    """Digest of each file the case reads: tables and paths of its parameters, plug-in files."""
    from .registry import get_registry

    out: dict[str, str] = {}
    declared: list[tuple[str, Any]] = []
    for sec, params in CORE_SCHEMA.items():
        declared += [(f"{sec}.{p.name}", p) for p in params]
    reg = get_registry(tuple(case.plugins))
    for role, ch in case.submodels.items():
        try:
            cls = reg.submodel_class(role, ch.model)
        except CyclesimError:
            continue
        declared += [(f"{role}.{p.name}", p) for p in cls.params]
    values = flat_inputs(case)
    for key, p in declared:
        if key in skip or p.kind not in _FILE_KINDS:
            continue
        v = values.get(key)
        if isinstance(v, str) and v.strip():
            found = _find(v, case.base_dir)
            out[key] = _file_digest(found) if found is not None else "no such file"
    for plug in case.plugins:
        if plug.endswith(".py"):
            out[f"plugin {plug}"] = _file_digest(Path(plug))
    return out


def study_record(study: str, base: Case, values: Mapping[str, Sequence], paired: bool,
                 options: Mapping[str, Any] | None = None) -> dict:
    """The record of a study that decides whether rows of an earlier run may be kept.

    Parameters
    ----------
    study : str
        Name of the study (``"sweep"``, ``"spark"``, ...).
    base : Case
        The validated base case.
    values : mapping
        Varied key -> list of its values (the plan's order).
    paired : bool
        Whether the values go in pairs instead of a grid.
    options : mapping, optional
        The study's own options that change its figures.
    """
    from . import __version__

    skip = set(values)
    inputs = {k: v for k, v in flat_inputs(base).items() if k not in skip}
    if base.multi_cylinder is not None:
        for p in MULTI_SCHEMA:
            k = f"multi_cylinder.{p.name}"
            if k not in skip:
                inputs[k] = getattr(base.multi_cylinder, p.name, None)
    inputs["name"] = base.name
    inputs["plugins"] = list(base.plugins)
    return _canon({
        "format": FORMAT,
        "tool": f"cyclesim {__version__}",
        "study": study,
        "options": dict(options or {}),
        "vary": [{"key": k, "values": list(v)} for k, v in values.items()],
        "paired": bool(paired),
        "base": inputs,
        "files": _files(base, skip),
    })


def digest(record: Mapping) -> str:
    """SHA-256 of the record's canonical JSON text."""
    text = json.dumps(_canon(record), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _short(v: Any) -> str:
    text = json.dumps(v) if not isinstance(v, str) else repr(v)
    return text if len(text) <= 40 else text[:37] + "..."


def _leaves(record: Mapping) -> dict[str, Any]:
    """Record flattened to labelled leaves for naming differences."""
    out: dict[str, Any] = {}
    out["tool version"] = record.get("tool")
    out["study"] = record.get("study")
    out["base name"] = (record.get("base") or {}).get("name")
    for k, v in (record.get("options") or {}).items():
        out[f"option {k}"] = v
    vary = record.get("vary") or []
    out["varied keys"] = [item.get("key") for item in vary]
    for item in vary:
        if "values" in item:
            out[f"values of {item.get('key')}"] = item.get("values")
    out["paired"] = record.get("paired")
    for k, v in (record.get("base") or {}).items():
        if k != "name":
            out[f"base {k}"] = v
    for k, v in (record.get("files") or {}).items():
        out[f"file of {k}"] = v
    return out


def differences(old: Mapping, new: Mapping) -> list[str]:
    """What differs between a stored record and a new one, one phrase each (stored value first)."""
    a, b = _leaves(old), _leaves(new)
    out = []
    for k in list(a) + [k for k in b if k not in a]:
        if a.get(k, "(absent)") == b.get(k, "(absent)"):
            continue
        va = _short(a[k]) if k in a else "absent"
        vb = _short(b[k]) if k in b else "absent"
        if k.startswith("file of "):
            va, vb = ("other contents", "these") if k in a and k in b else (va, vb)
        out.append(f"{k}: {va} there, {vb} here")
    if not out and old.get("format") != new.get("format"):
        out.append(f"record format {old.get('format')!r} there, {new.get('format')!r} here")
    return out


def write_fingerprint(out: Path, record: Mapping) -> Path:
    """Store ``record`` and its digest in ``out``/:data:`FINGERPRINT_NAME` (atomically)."""
    path = Path(out) / FINGERPRINT_NAME
    data = {"digest": digest(record), "record": record}
    atomic_write_text(path, json.dumps(data, indent=1, sort_keys=True) + "\n")
    return path


def read_fingerprint(out: Path) -> dict | None:
    """The stored record, or None if there is none; one-line error if it is unreadable."""
    path = Path(out) / FINGERPRINT_NAME
    if not path.exists():
        return None
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        record = data["record"]
        if not isinstance(record, dict):
            raise TypeError
    except (OSError, UnicodeDecodeError, ValueError, KeyError, TypeError):
        raise CyclesimError(f"--resume: {path} is not a study fingerprint (damaged or written by hand);"
                            " use --force to start again") from None
    return record


def _without_values(record: Mapping) -> dict:
    out = dict(record)
    out["vary"] = [{"key": item.get("key")} for item in record.get("vary") or []]
    return out


def refuse_if_different(where: str, old: Mapping, new: Mapping, what: str = "study",
                        values_may_grow: bool = False) -> None:
    """Raise a one-line CyclesimError naming the differences if the two records differ.

    ``values_may_grow``: the varied values are left out of the comparison (a sweep
    whose rows are matched to the new plan case by case, so it may be extended).
    """
    if values_may_grow:
        old, new = _without_values(old), _without_values(new)
    if digest(old) == digest(new):
        return
    diffs = differences(old, new) or ["the records differ"]
    more = f"; and {len(diffs) - _SHOWN} more" if len(diffs) > _SHOWN else ""
    raise CyclesimError(
        f"--resume: {where} holds a different {what} ({'; '.join(diffs[:_SHOWN])}{more}): its rows"
        " cannot be mixed with this one's; use another --out, or --force to start again"
    )


def check_fingerprint(out: Path, record: Mapping, has_rows: bool) -> None:
    """Before a resume keeps rows: refuse unless ``out`` holds the same study's fingerprint.

    ``has_rows``: the folder holds rows of an earlier run.  Without rows there is
    nothing to mix and nothing is checked.  The varied keys must be the same; their
    values may differ (a sweep extended on resume): the caller keeps only rows whose
    case index holds the same values in the new plan, and refuses any other.
    """
    if not has_rows:
        return
    old = read_fingerprint(out)
    if old is None:
        raise CyclesimError(
            f"--resume: {Path(out)} has rows but no {FINGERPRINT_NAME} to show which study wrote them"
            " (written by an older cyclesim, or copied by hand); use another --out, or --force to start again"
        )
    refuse_if_different(str(out), old, record, values_may_grow=True)
