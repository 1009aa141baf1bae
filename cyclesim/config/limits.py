"""Size limits of a config: YAML aliases, the expanded size of the data and the ``extends`` depth.

A few hundred bytes of YAML can stand for billions of values (each alias of an
alias doubles or multiplies what a reader sees), and a chain of ``extends`` can
be longer than Python's stack.  The reader counts aliases as it composes the
document and walks the result once, stopping at the first limit passed, so
such a file ends in one line naming the file and the limit instead of filling
memory or the terminal.
"""

from __future__ import annotations

from typing import Any

from ..errors import ConfigError

MAX_ALIASES = 1000
"""Most YAML aliases (``*name``) in one config file or ``--set`` value."""

MAX_EXPANDED_NODES = 100_000
"""Most values (mappings, lists and scalars, each alias counted as often as it is used) in one
config file or ``--set`` value once aliases are expanded.  The built-in configs hold a few hundred."""

MAX_EXPANDED_TEXT = 1_000_000
"""Most characters of text (keys and string values, aliases expanded) in one config file."""

MAX_EXTENDS_DEPTH = 64
"""Longest chain of ``extends`` (a config that extends one that extends another ...)."""


def count_alias(where: str, count: int) -> int:
    """The alias count after one more alias; raise ConfigError past :data:`MAX_ALIASES`."""
    count += 1
    if count > MAX_ALIASES:
        raise ConfigError(f"{where}: more than {MAX_ALIASES} YAML aliases (*name): refused as a possible"
                          f" alias bomb; write the values out")
    return count


def check_expanded_size(data: Any, where: str) -> None:
    """Raise ConfigError if ``data`` expands (aliases counted each time) beyond the limits.

    Walks at most :data:`MAX_EXPANDED_NODES` values, so the check itself is bounded."""
    nodes = 0
    chars = 0
    stack = [data]
    while stack:
        x = stack.pop()
        nodes += 1
        if nodes > MAX_EXPANDED_NODES:
            raise ConfigError(f"{where}: expands to more than {MAX_EXPANDED_NODES} values (aliases counted"
                              f" each time they are used): refused as too large for a config")
        if isinstance(x, dict):
            stack.extend(x.keys())
            stack.extend(x.values())
        elif isinstance(x, (list, tuple)):
            stack.extend(x)
        elif isinstance(x, str):
            chars += len(x)
            if chars > MAX_EXPANDED_TEXT:
                raise ConfigError(f"{where}: expands to more than {MAX_EXPANDED_TEXT} characters of text"
                                  f" (aliases counted each time they are used): refused as too large for a config")


def check_extends_depth(chain: tuple, where: str) -> None:
    """Raise ConfigError when the ``extends`` chain above ``where`` is deeper than the limit."""
    if len(chain) >= MAX_EXTENDS_DEPTH:
        raise ConfigError(f"{where}: 'extends' nests more than {MAX_EXTENDS_DEPTH} files deep (from"
                          f" {chain[0]}); merge some of the files")
