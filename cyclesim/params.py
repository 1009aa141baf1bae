"""Declared parameters: one place for names, units, defaults, ranges and meaning.

Core config sections and every submodel declare their inputs as a tuple of
:class:`Param`.  Validation, the ``cyclesim plugins`` listing and the docs are
all generated from these declarations.

The unit is part of each key (``bore_mm``, ``speed_rpm``); ``unit`` repeats it
for listings.  Dimensionless parameters carry ``unit="-"``.
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass, field
from typing import Any, Iterable, Mapping, Sequence

from .errors import ConfigError

_REQUIRED = object()
REQUIRED: Any = _REQUIRED
"""Sentinel default: the value must be given in the config."""


@dataclass(frozen=True)
class Param:
    """One declared input.

    Parameters
    ----------
    name : str
        Key as written in the config, unit included (``wall_temperature_K``).
    unit : str
        Unit for listings (``"K"``, ``"-"``).
    default : Any
        Default value, or :data:`REQUIRED`.
    doc : str
        One-line meaning.
    min, max : float, optional
        Allowed closed range for numbers (``None`` = unbounded).
    min_exclusive, max_exclusive : bool
        Whether the bounds themselves are excluded.
    kind : str
        ``"float"``, ``"int"``, ``"bool"``, ``"str"``, ``"choice"``, ``"path"``
        ``"table"`` (a list of ``[x, y]`` rows, or a CSV path) or ``"list"``
        (a list of numbers, each checked against ``min``/``max``; with
        ``choices`` a list of those words).
    choices : tuple of str
        Allowed values for ``kind="choice"``.
    sweepable : bool
        Whether the value may differ between cases of one batch (numbers can;
        choices and paths select code and so must be equal within a batch).
    """

    name: str
    unit: str
    default: Any
    doc: str
    min: float | None = None
    max: float | None = None
    min_exclusive: bool = False
    max_exclusive: bool = False
    kind: str = "float"
    choices: tuple[str, ...] = ()
    sweepable: bool = True

    @property
    def required(self) -> bool:
        return self.default is _REQUIRED

    def range_text(self) -> str:
        """Human-readable allowed range, e.g. ``'> 0'`` or ``'0 .. 1'``."""
        if self.kind == "choice":
            return "one of " + ", ".join(self.choices)
        if self.kind == "bool":
            return "true or false"
        if self.kind in ("str", "path"):
            return "text" if self.kind == "str" else "a file path"
        if self.kind == "table":
            return "list of [x, y] rows or a CSV file"
        if self.kind == "list":
            if self.choices:
                return "a list of: " + ", ".join(self.choices)
            inner = Param(self.name, self.unit, None, self.doc, self.min, self.max,
                          self.min_exclusive, self.max_exclusive)
            return f"a list of numbers, each {inner.range_text()}"
        lo, hi = self.min, self.max
        if lo is None and hi is None:
            return "any number"
        if hi is None:
            return f"{'>' if self.min_exclusive else '>='} {lo:g}"
        if lo is None:
            return f"{'<' if self.max_exclusive else '<='} {hi:g}"
        lb = "(" if self.min_exclusive else "["
        rb = ")" if self.max_exclusive else "]"
        return f"{lb}{lo:g}, {hi:g}{rb}"

    def check(self, value: Any, where: str) -> Any:
        """Return ``value`` converted to the declared kind, or raise ConfigError.

        ``where`` is the dotted config key used in the message.
        """
        k = self.kind
        if k in ("float", "int"):
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise ConfigError(
                    f"{where}: expected a number ({self.unit}), got {value!r}"
                )
            v = float(value)
            if not math.isfinite(v):
                raise ConfigError(f"{where}: expected a finite number, got {value!r}")
            if k == "int":
                if v != int(v):
                    raise ConfigError(f"{where}: expected a whole number, got {value!r}")
                v = int(v)
            lo, hi = self.min, self.max
            bad = (
                (lo is not None and (v < lo or (self.min_exclusive and v == lo)))
                or (hi is not None and (v > hi or (self.max_exclusive and v == hi)))
            )
            if bad:
                unit = "" if self.unit == "-" else f" {self.unit}"
                raise ConfigError(
                    f"{where} = {value!r}: out of range, expected {self.range_text()}{unit}"
                    f" ({self.doc})"
                )
            return v
        if k == "bool":
            if not isinstance(value, bool):
                raise ConfigError(f"{where}: expected true or false, got {value!r}")
            return value
        if k == "choice":
            if not isinstance(value, str) or value not in self.choices:
                raise ConfigError(
                    f"{where} = {value!r}: expected one of {', '.join(self.choices)}"
                    + suggestion(str(value), self.choices)
                )
            return value
        if k in ("str", "path"):
            if value is None and not self.required:
                return None
            if not isinstance(value, str):
                raise ConfigError(f"{where}: expected text, got {value!r}")
            return value
        if k == "table":
            return value  # checked by the submodel that reads it (needs the file)
        if k == "list":
            if value is None and not self.required:
                return None
            if not isinstance(value, (list, tuple)):
                raise ConfigError(f"{where}: expected a list, got {value!r}")
            if self.choices:
                one = Param(self.name, self.unit, None, self.doc, kind="choice", choices=self.choices)
            else:
                one = Param(self.name, self.unit, None, self.doc, self.min, self.max,
                            self.min_exclusive, self.max_exclusive)
            return tuple(one.check(v, f"{where}[{i}]") for i, v in enumerate(value))
        raise AssertionError(f"unknown parameter kind {k!r}")


def suggestion(word: str, candidates: Iterable[str]) -> str:
    """Return ``" (did you mean 'x'?)"`` for a close spelling, else ``""``."""
    close = difflib.get_close_matches(word, list(candidates), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


def validate_section(
    values: Mapping[str, Any] | None,
    params: Sequence[Param],
    where: str,
    ignore: Sequence[str] = (),
) -> dict[str, Any]:
    """Check a mapping against declared parameters and fill in defaults.

    Unknown keys, missing required keys, wrong types and out-of-range values
    raise :class:`ConfigError` with the dotted key, the value and what was
    expected; unknown keys get a close-spelling suggestion.
    """
    values = {} if values is None else values
    if not isinstance(values, Mapping):
        raise ConfigError(f"{where}: expected a mapping of keys to values, got {values!r}")
    known = {p.name: p for p in params}
    out: dict[str, Any] = {}
    for key, value in values.items():
        if key in ignore:
            continue
        if key not in known:
            raise ConfigError(
                f"{where}.{key}: unknown key" + suggestion(str(key), known)
                + f"; allowed: {', '.join(known) or '(none)'}"
            )
        out[key] = known[key].check(value, f"{where}.{key}")
    for p in params:
        if p.name not in out:
            if p.required:
                raise ConfigError(
                    f"{where}.{p.name}: missing value, expected {p.range_text()}"
                    f" {'' if p.unit == '-' else p.unit} ({p.doc})".rstrip()
                )
            out[p.name] = p.default
    return out


@dataclass(frozen=True)
class StateVar:
    """A component of the integrated state declared by a submodel.

    Parameters
    ----------
    name : str
        Unique within the submodel; the solver prefixes it with the role.
    unit : str
        Unit of the state (SI).
    initial : Any
        Initial value: a float or an array of shape (B,).
    reset_at_ivc : bool
        Reset to ``initial`` at each intake valve closing (e.g. a knock
        integral or a motored-pressure reference); otherwise carried on.
    """

    name: str
    unit: str
    initial: Any = 0.0
    reset_at_ivc: bool = True
    meta: dict = field(default_factory=dict)
