"""Checks of command-line option values that argparse's types leave open (sign, finiteness).

Each raises :class:`cyclesim.errors.ConfigError` naming the option, so a bad value ends in one
line and exit status 2 before anything is simulated or written.
"""

from __future__ import annotations

import math

from ..errors import ConfigError


def whole(value, option: str, lo: int = 0) -> None:
    """``value`` must be None or a whole number >= ``lo``."""
    if value is not None and not (isinstance(value, int) and value >= lo):
        raise ConfigError(f"{option} {value!r}: expected a whole number >= {lo}")


def seed(value, option: str = "--seed") -> None:
    """A random seed: a whole number >= 0 (numpy's generators take no negative seed)."""
    whole(value, option, 0)


def finite(value, option: str, lo: float | None = None, hi: float | None = None,
           lo_open: bool = False, hi_open: bool = False) -> None:
    """``value`` must be None or a finite number within the (closed unless ``*_open``) bounds."""
    if value is None:
        return
    bad = not (isinstance(value, (int, float)) and math.isfinite(value))
    if not bad and lo is not None:
        bad = value < lo or (lo_open and value == lo)
    if not bad and hi is not None:
        bad = value > hi or (hi_open and value == hi)
    if bad:
        lb, rb = "(" if lo_open else "[", ")" if hi_open else "]"
        rng = f"in {lb}{'-inf' if lo is None else f'{lo:g}'}, {'inf' if hi is None else f'{hi:g}'}{rb}"
        raise ConfigError(f"{option} {value!r}: expected a finite number {rng}")


def exclusive(args, *options: str) -> None:
    """At most one of the named flags (attribute names of ``args``) may be given."""
    given = [o for o in options if getattr(args, o.lstrip("-").replace("-", "_"), False)]
    if len(given) > 1:
        raise ConfigError(f"{' and '.join(given)} exclude each other: give at most one"
                          " (without either, both are run)")
