"""The key of a generated cycle loop's kernels: what its text depends on, read cheaply.

:func:`_fingerprint` of a kernel is its code objects and the values of the globals it reads, with
those of the helpers it calls; :func:`_fingerprint_of` remembers it per function while everything
it was read from is unchanged (checked by identity), so a repeated batch does not read and
``repr`` every global again, and an edited function, a rebound global or a value changed in place
still makes it again.  Used by :mod:`cyclesim.loops.loopgen`.
"""

from __future__ import annotations

import dis
import sys
import types

_GLOBAL_NAMES: dict = {}
_LOAD_GLOBAL = dis.opmap["LOAD_GLOBAL"]
_EXTENDED_ARG = dis.EXTENDED_ARG
_NAME_SHIFT = 1 if sys.version_info >= (3, 11) else 0
"""From Python 3.11 on LOAD_GLOBAL's argument is the name's index times two (its low bit says
whether a NULL is pushed first); before, the index itself (the ``dis`` module's documentation)."""


def _globals_read(fn) -> dict:
    """The module globals the function's code loads (LOAD_GLOBAL, nested code included), by name;
    builtins (abs, min, ...) are left to numba.  The names are found once per code object, their
    values read at each call (a changed global is seen)."""
    names = _GLOBAL_NAMES.get(fn.__code__)
    if names is None:
        names = _GLOBAL_NAMES[fn.__code__] = _global_names(fn.__code__)
    return {n: fn.__globals__[n] for n in names if n in fn.__globals__}


def _global_names(code) -> tuple:
    """The names the code's LOAD_GLOBAL instructions load, nested code included, sorted: read from
    the raw bytecode (what ``dis.get_instructions`` gives as their ``argval``, at a small part of
    its cost: the loop's key reads every kernel and helper of a run)."""
    names: set = set()
    codes = [code]
    while codes:
        code = codes.pop()
        raw, co_names, ext = code.co_code, code.co_names, 0
        for i in range(0, len(raw), 2):
            op = raw[i]
            if op == _EXTENDED_ARG:
                ext = (ext | raw[i + 1]) << 8
                continue
            if op == _LOAD_GLOBAL:
                names.add(co_names[(ext | raw[i + 1]) >> _NAME_SHIFT])
            ext = 0
        codes += [c for c in code.co_consts if isinstance(c, types.CodeType)]
    return tuple(sorted(names))


def _fingerprint(fn, seen=None) -> tuple:
    """What the generated text depends on, cheaply: the code objects (equal for equal source)
    and the values of the globals read, of the kernel and of the helpers it calls."""
    seen = set() if seen is None else seen
    if fn in seen:
        return ()
    seen.add(fn)
    out: list = [fn.__code__]
    for name, val in sorted(_globals_read(fn).items()):
        if isinstance(val, types.FunctionType):
            out.append((name, _fingerprint(val, seen)))
        elif isinstance(val, types.ModuleType):
            out.append((name, val.__name__))
        else:
            out.append((name, type(val).__name__, _value_text(val)))
    return tuple(out)


def _value_text(val) -> str:
    """``repr`` of a global's value, except for a built-in function or method (``math.exp``,
    ``np.logical_or.reduce``), named by its owner and name instead: its ``repr`` holds the
    object's memory address, which differs in every process, so a key made from it would never
    be found again by a later process."""
    if isinstance(val, types.BuiltinFunctionType):      # built-in methods are of this type too
        owner = getattr(val, "__self__", None)
        if owner is None or isinstance(owner, types.ModuleType):
            where = getattr(val, "__module__", None) or ""
        else:
            where = repr(owner)                         # a ufunc's repr is its name
        return f"builtin:{where}.{val.__qualname__}"
    return repr(val)


_MISSING = object()
_IMMUTABLE = (bool, int, float, complex, str, bytes, type(None), types.FunctionType, types.ModuleType)
_FINGERPRINTS: dict = {}
""":func:`_fingerprint` by kernel function, with what it was read from (:func:`_reads`): checked
by identity at each use, so a repeated batch does not read and ``repr`` every global again."""


def _reads(fn, seen=None) -> tuple:
    """What :func:`_fingerprint` of ``fn`` reads: ``(function, code object)`` of the kernel and of
    every helper it calls, and ``(globals, name, value)`` of every global name their code loads
    (a name not defined there as ``_MISSING``, so defining it later is seen too)."""
    seen = set() if seen is None else seen
    if fn in seen:
        return ()
    seen.add(fn)
    names = _GLOBAL_NAMES.get(fn.__code__)
    if names is None:
        names = _GLOBAL_NAMES[fn.__code__] = _global_names(fn.__code__)
    out: list = [(fn, fn.__code__)]
    for n in names:
        val = fn.__globals__.get(n, _MISSING)
        out.append((fn.__globals__, n, val))
        if isinstance(val, types.FunctionType):
            out += _reads(val, seen)
    return tuple(out)


def _unchanged(reads: tuple, texts: tuple) -> bool:
    """Whether everything in ``reads`` is still what it was: the same code objects, the same
    objects under the same global names, and for a value that can change in place (anything but
    numbers, strings, functions, modules and tuples of numbers) the same ``repr`` (``texts``)."""
    for r, text in zip(reads, texts):
        if len(r) == 2:
            if r[0].__code__ is not r[1]:
                return False
        elif r[0].get(r[1], _MISSING) is not r[2] or (text is not None and repr(r[2]) != text):
            return False
    return True


def _mutable_text(r: tuple):
    if len(r) == 2:
        return None
    v = r[2]
    if v is _MISSING or isinstance(v, _IMMUTABLE):
        return None
    if isinstance(v, tuple) and all(isinstance(x, (bool, int, float)) for x in v):
        return None
    return repr(v)


def _fingerprint_of(fn) -> tuple:
    """:func:`_fingerprint` of a kernel, remembered while the functions and globals it was made
    from are unchanged (an edited function, a rebound global, a reloaded module: made again)."""
    got = _FINGERPRINTS.get(fn)
    if got is not None and _unchanged(got[0], got[1]):
        return got[2]
    reads = _reads(fn)
    fp = _fingerprint(fn)
    _FINGERPRINTS[fn] = (reads, tuple(_mutable_text(r) for r in reads), fp)
    return fp
