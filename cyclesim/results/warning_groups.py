"""Warnings of many points (or cylinders) grouped by kind, with their count and the points that gave
them, as console lines."""

from __future__ import annotations

import re


def group_labelled(items) -> list[dict]:
    """Messages grouped by kind (numbers replaced by '#'), each with its count and the labels of the
    points that gave it; ``items`` is an iterable of ``(label, messages)``.

    Returns a list of ``{"kind", "example", "count", "points"}``; ``example`` is a message of the
    group with each number that differs among its messages written as their range.
    """
    groups: dict[str, dict] = {}
    values: dict[str, list[list[str]]] = {}
    for label, msgs in items:
        for w in dict.fromkeys(msgs):
            kind = _NUMBER.sub("#", w)
            g = groups.setdefault(kind, {"kind": kind, "example": w, "count": 0, "points": []})
            g["count"] += 1
            g["points"].append(label)
            values.setdefault(kind, []).append([m.group(0) for m in _NUMBER.finditer(w)])
    for kind, g in groups.items():
        g["example"] = _ranged(g["example"], values[kind])
    return list(groups.values())


_NUMBER = re.compile(r"[-+]?\d+(\.\d+)?(e[-+]?\d+)?")


def _ranged(example: str, numbers: list[list[str]]) -> str:
    """``example`` with each number that differs among the group's messages written as the range
    of its values (``52.1-98.7``; ``to`` where a bound is negative), so that one line stands for
    all of them."""
    cols = list(zip(*numbers))
    parts, end = [], 0
    for m, col in zip(_NUMBER.finditer(example), cols):
        parts.append(example[end:m.start()])
        vals = sorted(set(col), key=float)
        if len(vals) == 1:
            parts.append(m.group(0))
        else:
            lo, hi = vals[0], vals[-1]
            parts.append(f"{lo} to {hi}" if float(lo) < 0 or hi.startswith(("-", "+")) else f"{lo}-{hi}")
        end = m.end()
    return "".join(parts) + example[end:]


def warning_lines(groups, total: int, noun: str = "points") -> list[str]:
    """Console lines of grouped warnings (:func:`group_labelled`; ``noun``: what the labels count)."""
    lines = []
    for g in groups:
        pts = ", ".join(g["points"][:6]) + (f", ... ({len(g['points']) - 6} more)" if len(g["points"]) > 6 else "")
        lines.append(f"warning ({g['count']} of {total} {noun}): {g['example']}  [{pts}]")
    return lines


def cylinder_warning_lines(warnings, n_cylinders: int) -> list[str]:
    """An engine's warnings: the cylinders' own ("cylinder N: ...") grouped by kind with their count
    and the cylinders that gave them, then the engine's own, each indented."""
    per, rest = [], []
    for w in warnings:
        m = re.match(r"cylinder (\d+): (.*)", w, re.S)
        if m:
            per.append((f"cyl {m.group(1)}", [m.group(2)]))
        else:
            rest.append(w)
    out = ["  " + x for x in warning_lines(group_labelled(per), n_cylinders, "cylinders")]
    return out + [f"  warning: {w}" for w in rest]
