"""Warnings of many points (or cylinders) grouped by kind, with their count and the points that gave
them, as console lines."""

from __future__ import annotations

import re


def group_labelled(items) -> list[dict]:
    """Messages grouped by kind (numbers replaced by '#'), each with its count and the labels of the
    points that gave it; ``items`` is an iterable of ``(label, messages)``.

    Returns a list of ``{"kind", "example", "count", "points"}``.
    """
    groups: dict[str, dict] = {}
    for label, msgs in items:
        for w in dict.fromkeys(msgs):
            kind = re.sub(r"[-+]?\d+(\.\d+)?(e[-+]?\d+)?", "#", w)
            g = groups.setdefault(kind, {"kind": kind, "example": w, "count": 0, "points": []})
            g["count"] += 1
            g["points"].append(label)
    return list(groups.values())


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
