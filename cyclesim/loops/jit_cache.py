"""numba's disk cache of this package's functions, stamped with every source they compile in.

numba stamps the index of a function cached on disk (``cache=True``) with a hash of the one file
that defines it.  A call into a function of another file is compiled into the caller's machine
code, and so is a module-level number the caller reads (numba takes globals as constants): edit
the callee's file alone and the caller's cache would still load, running the old code.

:func:`install` puts :class:`DependencyLocator` in front of numba's own cache locators for the
functions of this package (module names starting with ``cyclesim``: the package, the built-in
plug-ins, the generated cycle loops and the kernel modules loaded a second time for numba).  It
keeps the cache folder and file names numba's own locator would choose, and adds to numba's
stamp of the defining file the stamp of what the function reaches (:func:`dependency_digest`):
the content hashes of the files of every function of this package it calls, transitively (through
module globals, closure cells and attributes of this package's modules), and the values of the
plain globals read on the way.  numba discards an index whose stamp differs and compiles again.

The stamp is worked out when numba first reads or writes the index (the function's first call in
the process), not when the function is decorated: by then every module is fully imported, so a
helper defined further down a file, or in a module imported later, is seen; importing the package
costs nothing more.
"""

from __future__ import annotations

import hashlib
import os
import types
import warnings

PREFIX = "cyclesim"
"""Module-name prefix of the functions whose cache is stamped with their callees."""

_MISSING = object()
_NAMES: dict = {}
_FILE_HASHES: dict = {}
_installed = False


def ours(obj) -> bool:
    """Whether ``obj`` (a function or module) belongs to this package (its module name starts with
    :data:`PREFIX`)."""
    name = getattr(obj, "__module__", None) if not isinstance(obj, types.ModuleType) else obj.__name__
    return isinstance(name, str) and name.startswith(PREFIX)


def _python_function(obj):
    """The Python function behind ``obj``: itself, or a numba dispatcher's ``py_func``; else None."""
    if isinstance(obj, types.FunctionType):
        return obj
    fn = getattr(obj, "py_func", None)
    return fn if isinstance(fn, types.FunctionType) else None


def _code_names(code) -> tuple:
    """Every name the code (nested code included) looks up: globals and attributes alike."""
    got = _NAMES.get(code)
    if got is None:
        names: set = set()
        stack = [code]
        while stack:
            c = stack.pop()
            names.update(c.co_names)
            stack += [k for k in c.co_consts if isinstance(k, types.CodeType)]
        got = _NAMES[code] = tuple(sorted(names))
    return got


def _value_text(v):
    """A stable text of a plain value numba would take as a constant, or None for anything else
    (objects whose text could hold a memory address, sets and dicts, whose order can vary)."""
    if v is None or isinstance(v, (bool, int, float, complex, str, bytes)):
        return f"{type(v).__name__}:{v!r}"
    if isinstance(v, tuple):
        parts = [_value_text(x) for x in v]
        return None if None in parts else "(" + ",".join(parts) + ")"
    mod = type(v).__module__
    if mod == "numpy" and hasattr(v, "tobytes") and hasattr(v, "dtype"):
        return f"ndarray:{v.dtype.str}:{getattr(v, 'shape', ())}:{hashlib.sha256(v.tobytes()).hexdigest()}"
    return None


def _file_hash(path: str) -> str:
    """sha256 of the file's bytes, remembered while its modification time and size are unchanged."""
    try:
        st = os.stat(path)
    except OSError:
        return "missing"
    key = (path, st.st_mtime_ns, st.st_size)
    got = _FILE_HASHES.get(key)
    if got is None:
        with open(path, "rb") as f:
            got = _FILE_HASHES[key] = hashlib.sha256(f.read()).hexdigest()
    return got


def _reached(fn) -> tuple[set, list]:
    """The files of this package's functions that ``fn`` reaches (``fn``'s own file included) and
    ``(where, name, text)`` of the plain values read on the way."""
    files: set = set()
    values: list = []
    seen: set = set()
    stack = [fn]

    def visit(where: str, name: str, val) -> None:
        callee = _python_function(val)
        if callee is not None:
            if ours(callee) and callee not in seen:
                stack.append(callee)
            return
        text = _value_text(val)
        if text is not None:
            values.append((where, name, text))

    while stack:
        f = stack.pop()
        if f in seen:
            continue
        seen.add(f)
        files.add(f.__code__.co_filename)
        where = f"{f.__module__}.{f.__qualname__}"
        g = f.__globals__
        for name in _code_names(f.__code__):
            val = g.get(name, _MISSING)
            if val is _MISSING:
                continue
            if isinstance(val, types.ModuleType):
                if ours(val):
                    # attributes of this package's module the code may read (``kc.end_flux``)
                    for attr in _code_names(f.__code__):
                        sub = getattr(val, attr, _MISSING)
                        if sub is not _MISSING and not isinstance(sub, types.ModuleType):
                            visit(f"{where}:{name}", attr, sub)
                continue
            visit(where, name, val)
        for name, cell in zip(f.__code__.co_freevars, f.__closure__ or ()):
            try:
                visit(where, name, cell.cell_contents)
            except ValueError:          # a cell not yet filled
                pass
    return files, values


def dependency_files(fn) -> set:
    """The source files whose content is part of ``fn``'s cache stamp (``fn``'s own included)."""
    return _reached(_python_function(fn) or fn)[0]


def dependency_digest(fn) -> str:
    """A hash of what ``fn``'s compiled code depends on beyond its own file: the content of every
    file of this package's functions it reaches and the values of the plain globals they read."""
    fn = _python_function(fn) or fn
    files, values = _reached(fn)
    h = hashlib.sha256()
    for path in sorted(files):
        h.update(f"{os.path.basename(path)}:{_file_hash(path)}\n".encode())
    for item in sorted(set(values)):
        h.update(("\0".join(item) + "\n").encode())
    return h.hexdigest()


class _Stamp:
    """numba's stamp of the defining file and :func:`dependency_digest`, worked out at first use
    (numba compares the stamp of an index it reads with ``!=`` and pickles it into one it writes:
    both are first done at the function's first call, when every module is imported)."""

    def __init__(self, base, fn):
        self._base = base
        self._fn = fn
        self._value = None

    def value(self) -> tuple:
        if self._value is None:
            self._value = ("cyclesim-deps-1", self._base, dependency_digest(self._fn))
        return self._value

    def __eq__(self, other):
        return self.value() == (other.value() if isinstance(other, _Stamp) else other)

    def __ne__(self, other):
        return not self.__eq__(other)

    def __hash__(self):
        return hash(self.value())

    def __reduce__(self):
        return tuple, (self.value(),)   # written into the index as a plain tuple


class DependencyLocator:
    """A numba cache locator for this package's functions: numba's own choice of folder and file
    names (the first of its locators that accepts the function), with the source stamp of
    :class:`_Stamp`."""

    _numba_locators: tuple = ()

    def __init__(self, base, py_func):
        self._base = base
        self._py_func = py_func

    @classmethod
    def from_function(cls, py_func, py_file):
        if not ours(py_func):
            return None
        for other in cls._numba_locators:
            base = other.from_function(py_func, py_file)
            if base is not None:
                return cls(base, py_func)
        return None

    def get_source_stamp(self):
        return _Stamp(self._base.get_source_stamp(), self._py_func)

    def __getattr__(self, name):
        # the rest is the base locator's: get_cache_path, ensure_cache_path, get_disambiguator, and
        # what numba reads besides (``_py_file`` in its warning on an uncachable function)
        if name == "_base":
            raise AttributeError(name)
        return getattr(self._base, name)


def install() -> bool:
    """Put :class:`DependencyLocator` first among numba's cache locators (once per process);
    called by every module of this package that decorates with ``cache=True`` before it does.
    False, with a warning, where numba lacks the locator list (another numba than the 0.59-0.68
    this was written for): its caches are then keyed on the defining file alone."""
    global _installed
    if _installed:
        return True
    try:
        from numba.core.caching import CacheImpl

        classes = CacheImpl._locator_classes
    except (ImportError, AttributeError):
        warnings.warn("this numba has no cache-locator list: compiled code cached on disk is keyed on its "
                      "own file only; after editing a kernel delete the __pycache__/*.nbi files",
                      RuntimeWarning, stacklevel=2)
        return False
    DependencyLocator._numba_locators = tuple(c for c in classes if c is not DependencyLocator)
    classes.insert(0, DependencyLocator)
    _installed = True
    return True
