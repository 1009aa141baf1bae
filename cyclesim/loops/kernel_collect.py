"""The source of a kernel and of everything it reads, for the generated cycle loop.

:func:`_collect` gathers a kernel's function, the functions it calls and the globals it reads,
recursively, into the three tables the generated module is written from (functions, constants,
imports), keeping apart same-named helpers and constants of different plug-ins.  Used by
:mod:`cyclesim.loops.loopgen`.
"""
from __future__ import annotations

import inspect
import textwrap
import types

from .kernel_key import _globals_read


class LoopGenError(Exception):
    """A kernel that cannot go into a generated loop (the batch then runs on the Python path)."""


def _source(fn) -> str:
    try:
        src = textwrap.dedent(inspect.getsource(fn))
    except (OSError, TypeError) as exc:
        raise LoopGenError(f"kernel {fn.__name__}: its source cannot be read ({exc})") from None
    lines = src.splitlines()
    while lines and lines[0].lstrip().startswith("@"):
        lines.pop(0)                # decorators: the generated file adds its own
    if not lines or not lines[0].startswith(f"def {fn.__name__}("):
        raise LoopGenError(f"kernel {fn.__name__}: must be a module-level function (def at column 0)")
    return "\n".join(lines) + "\n"


def _collect(fn, funcs: dict, consts: dict, imports: dict, taken=frozenset()) -> str:
    """The function's source, the functions it calls and the globals it reads, recursively; returns
    the function's name in the generated loop.

    All kernels and helpers share the generated loop's one namespace.  Two different functions of
    one name (two plug-ins' helpers called ``interp``), or two constants of one name and different
    values, would otherwise collide: the later one is written under a free name (``interp_2``) and
    the source of every function that reads it is rewritten to call it by that name.  Sources with
    no collision are written as they are.  ``taken``: names the loop itself defines."""
    import cyclesim.kernel_ops as kernel_ops
    import cyclesim.loops._compiled as base

    from . import zone_solve

    own = vars(base)
    for gen, (known, _) in funcs.items():
        if known is fn:
            return gen
    if fn.__code__.co_freevars:
        raise LoopGenError(f"kernel {fn.__name__}: reads variables of an enclosing function "
                           f"({', '.join(fn.__code__.co_freevars)}); use module-level names")

    def free(name):
        gen, k = name, 1
        while gen in funcs or gen in consts or gen in imports or gen in taken:
            k += 1
            gen = f"{name}_{k}"
        return gen

    def place(table, name, value):
        """The name under which ``table`` holds ``value`` for ``name``: its own, one given to an
        equal value before, or a free one."""
        gen = next((n for n, v in table.items() if v == value and (n == name or n.startswith(name + "_"))), None)
        if gen is None:
            gen = free(name)
            table[gen] = value
        return gen

    me = free(fn.__name__)
    funcs[me] = (fn, None)              # seen (a recursive call finds it); the source follows
    renames = {}
    for name, val in sorted(_globals_read(fn).items()):
        if isinstance(val, types.FunctionType) and not (
                val in (kernel_ops.where, kernel_ops.fresh_charge, kernel_ops.max_above, kernel_ops.where_lazy)
                or val in zone_solve.OVERLOADED):
            gen = _collect(val, funcs, consts, imports, taken)
        elif (isinstance(val, (bool, int, float)) and not isinstance(val, type)) or (
                isinstance(val, tuple) and all(isinstance(v, (int, float)) for v in val)):
            text = repr(val)
            if name in own and isinstance(own[name], (int, float, tuple)) and repr(own[name]) == text:
                continue                # the loop's module defines it alike (CYCLE_END_DEG)
            gen = place(consts, name, text)
        else:
            if isinstance(val, types.ModuleType):
                if val.__name__ not in ("numpy", "math"):
                    raise LoopGenError(f"kernel {fn.__name__}: reads module {val.__name__!r}; only numpy and math"
                                       " compile")
                target = val.__name__
            elif val in (kernel_ops.where, kernel_ops.fresh_charge, kernel_ops.max_above, kernel_ops.where_lazy):
                target = f"cyclesim.kernel_ops.{val.__name__}"
            elif val in zone_solve.OVERLOADED:
                target = f"cyclesim.loops.zone_solve.{val.__name__}"     # compiled by overload
            else:
                raise LoopGenError(f"kernel {fn.__name__}: reads global {name!r} of type {type(val).__name__}"
                                   " (only numbers, tuples of numbers, numpy, math and plain functions compile)")
            if name in own and getattr(own[name], "__name__", None) == target:
                imports[name] = target          # the loop's module imports it alike (np, math)
                continue
            gen = place(imports, name, target)
        if gen != name:
            renames[name] = gen
    src = _source(fn)
    if me != fn.__name__ or renames:
        src = _renamed(src, me, renames)
    funcs[me] = (fn, src)
    return me


def _renamed(src: str, new_name: str, renames: dict) -> str:
    """``src`` (one function) defined as ``new_name`` and reading the globals ``renames`` names
    under their new names (each is a global throughout the function: Python's scoping)."""
    import ast

    tree = ast.parse(src)
    tree.body[0].name = new_name
    for node in ast.walk(tree):
        if isinstance(node, ast.Name) and node.id in renames:
            node.id = renames[node.id]
    return ast.unparse(tree) + "\n"


