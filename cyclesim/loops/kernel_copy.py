"""Compilation switch of the scalar-loop kernel modules: numba where it runs, plain Python otherwise.

The kernels of :mod:`cyclesim.combustion.zone_kernels`, :mod:`cyclesim.combustion.zeldovich` and
:mod:`cyclesim.loops.zone_points` are written once, in scalar loops over plain arrays.  Imported as usual they are plain Python
(``jit`` does nothing); :func:`kernels` loads the same files a second time as separate modules
whose ``jit`` is numba's ``njit`` and whose gas look-up is the compiled cycle loop's own
(:func:`cyclesim.loops._compiled._mix_at`, the tables of
:class:`cyclesim.solve.gas_tables.GasTables`).  With ``NUMBA_DISABLE_JIT=1`` or
``CYCLESIM_KERNEL=python`` set, the plain modules run (slowly: a debugging path).
"""

from __future__ import annotations

import importlib.util
import sys
import types

from ..kernel_ops import compiled_wanted  # noqa: F401 - re-exported

_loaded: dict[str, types.ModuleType] = {}


def _lookup():
    """The scalar burned/fresh gas look-up: compiled, or its plain Python source."""
    from ._compiled import _mix_at

    return _mix_at


def _beyond_the_walk() -> tuple[str, ...]:
    """The files a compiled kernel depends on that the call walk of its cache stamp
    (:func:`cyclesim.loops.jit_cache.dependency_digest`) cannot reach, so they are kept here by
    hand: this file (the ``njit`` options of :func:`kernels`, which numba's cache index does not
    record) and :mod:`cyclesim.loops._compiled`, whose ``overload`` registrations are the compiled
    forms of :mod:`cyclesim.loops.zone_solve`'s gas helpers (registered, never called by name, so no
    walk finds them).  What the kernels call (zone_solve, kernel_ops, the gas look-up's source) the
    walk finds, and numba's stamp of each compiled kernel holds it."""
    from . import _compiled

    return (__file__, _compiled.__file__)


def _source_copy(module: types.ModuleType) -> str:
    """The module's source as a file of the loop cache (:func:`cyclesim.loops.loopgen.cache_dir`)
    named by a hash of it and of the files of :func:`_beyond_the_walk`: numba's disk cache is keyed
    by the file (and, through :mod:`cyclesim.loops.jit_cache`, by every source the compiled kernels
    call into), so an edit of any of them gives a new file or a new stamp, never a stale compiled
    kernel."""
    import hashlib
    import os
    from pathlib import Path

    from . import loopgen

    text = Path(module.__file__).read_bytes()
    h = hashlib.sha256(text)
    for dep in _beyond_the_walk():
        h.update(Path(dep).read_bytes())
    path = loopgen.cache_dir() / f"{module.__name__.rpartition('.')[2]}_{h.hexdigest()[:20]}.py"
    if not path.is_file():
        tmp = path.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_bytes(text)
        os.replace(tmp, path)          # atomic: a sweep worker never reads half a file
    return str(path)


def kernels(module: types.ModuleType) -> types.ModuleType:
    """``module`` (a kernel module of this package) in the form this process runs.

    Compiled: the module's source executed again as ``<name>_compiled`` (from a copy in the loop
    cache, :func:`_source_copy`) with ``jit`` = numba's ``njit`` (disk-cached) and ``mix_at`` the
    compiled gas look-up; the plain module otherwise,
    its ``mix_at`` set to the look-up's Python source.
    """
    name = module.__name__
    got = _loaded.get(name)
    if got is not None:
        return got
    look = _lookup()
    if not compiled_wanted():
        module.mix_at = getattr(look, "py_func", look)
        _loaded[name] = module
        return module
    from numba import njit

    spec = importlib.util.spec_from_file_location(name + "_compiled", _source_copy(module))
    mod = importlib.util.module_from_spec(spec)
    mod.jit = njit(cache=True, error_model="numpy")
    mod.mix_at = look
    sys.modules[spec.name] = mod        # importable by name: numba's disk cache reloads through it
    spec.loader.exec_module(mod)
    _loaded[name] = mod
    return mod
