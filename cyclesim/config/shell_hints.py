"""Hints for command-line slips: a ``--set`` value that the shell split at a space.

``--set burn={model: wiebe_flame}`` unquoted reaches the program as two words, ``burn={model:``
and ``wiebe_flame}``; the first is not valid YAML and the second an unknown argument.  The
hint names the split and the quoted form.
"""

from __future__ import annotations

from typing import Sequence


def _unclosed(text: str) -> bool:
    return text.count("{") + text.count("[") > text.count("}") + text.count("]")


def split_hint(value: str) -> str:
    """What is wrong with a ``--set`` value that starts a YAML mapping or list but does not parse."""
    return ("its braces or brackets do not close; if the value holds a space, the shell split it there:"
            " quote the whole value, e.g. --set 'burn={model: wiebe_flame}'" if _unclosed(value)
            else "write a mapping as {key: value, ...} or a list as [a, b]")


def shell_split_hint(argv: Sequence[str]) -> str | None:
    """One line for a ``--set`` value that the shell split at a space (``--set burn={model: x}``
    unquoted arrives as ``burn={model:`` and ``x}``), or None."""
    for i, tok in enumerate(argv):
        if tok == "--set" and i + 1 < len(argv):
            value = argv[i + 1]
        elif tok.startswith("--set="):
            value = tok[len("--set="):]
        else:
            continue
        if not _unclosed(value):
            continue
        rest = [value]
        for nxt in argv[i + 2:]:
            if nxt.startswith("--"):
                break
            rest.append(nxt)
            if not _unclosed(" ".join(rest)):
                break
        whole = " ".join(rest)
        return (f"--set {value!r}: the shell split the value at a space (its braces or brackets do not"
                f" close): quote it whole, e.g. --set '{whole}'")
    return None
