"""The package layout: every sub-package is installed, and imports among cyclesim's modules run
one way (no circle, imports inside functions counted).  Common practice for a layered package;
the check reads the sources with the standard library's ``ast``, nothing is imported."""

from __future__ import annotations

import ast
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PKG = ROOT / "cyclesim"


def _modules() -> dict[str, Path]:
    mods = {}
    for f in PKG.rglob("*.py"):
        rel = f.relative_to(ROOT).with_suffix("")
        parts = [p for p in rel.parts if p != "__init__"]
        mods[".".join(parts)] = f
    return mods


def _imports(name: str, f: Path, mods: dict) -> set[str]:
    """Modules of the package that ``name`` imports anywhere in its source.  ``from . import x``
    names the sub-module x (the package's own ``__init__`` runs first in any case, and is counted
    only where a name is taken from it)."""
    base = name.split(".") if f.name == "__init__.py" else name.split(".")[:-1]
    out = set()
    for node in ast.walk(ast.parse(f.read_text())):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                mod = ".".join(base[: len(base) - node.level + 1] + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            subs = [f"{mod}.{a.name}" for a in node.names]
            cands = [s for s in subs if s in mods]
            if len(cands) < len(subs):      # some names are attributes of ``mod`` itself
                cands.append(mod)
        elif isinstance(node, ast.Import):
            cands = [a.name for a in node.names]
        else:
            continue
        for c in cands:
            while c and c not in mods:
                c = c.rpartition(".")[0]
            if c and c != name:
                out.add(c)
    return out


def circles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan 1972, SIAM J. Comput. 1:146)."""
    index, low, stack, on, found = {}, {}, [], set(), []
    sys.setrecursionlimit(max(sys.getrecursionlimit(), 10000))

    def visit(v):
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in graph.get(v, ()):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                found.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return found


def test_circle_finder_sees_a_circle_through_a_function_level_import():
    graph = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}
    assert circles(graph) == [["a", "b", "c"]]
    assert circles({"a": {"b"}, "b": set()}) == []


def test_imports_run_one_way():
    mods = _modules()
    graph = {m: _imports(m, f, mods) for m, f in mods.items()}
    assert len(graph) > 50
    assert "cyclesim.config" in graph["cyclesim.api"]
    assert circles(graph) == []


def test_every_package_folder_is_installed():
    tomllib = pytest.importorskip("tomllib")
    listed = set(tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"])
    folders = {".".join(p.parent.relative_to(ROOT).parts) for p in PKG.rglob("__init__.py")}
    assert "cyclesim.traces" in folders
    assert folders - listed == set()
