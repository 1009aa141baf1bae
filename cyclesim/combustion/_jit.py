"""Compilation switch of the burned-zone and NO kernels: numba where it runs, plain Python otherwise.

The kernels of :mod:`cyclesim.combustion.zone_kernels` and :mod:`cyclesim.combustion.zeldovich`
are written once, in scalar loops over plain arrays.  Imported as usual they are plain Python
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
    from ..loops._compiled import _mix_at

    return _mix_at


def kernels(module: types.ModuleType) -> types.ModuleType:
    """``module`` (a kernel module of this package) in the form this process runs.

    Compiled: the module's file executed again as ``<name>_compiled`` with ``jit`` = numba's
    ``njit`` (disk-cached) and ``mix_at`` the compiled gas look-up; the plain module otherwise,
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

    spec = importlib.util.spec_from_file_location(name + "_compiled", module.__file__)
    mod = importlib.util.module_from_spec(spec)
    mod.jit = njit(cache=True, error_model="numpy")
    mod.mix_at = look
    sys.modules[spec.name] = mod        # importable by name: numba's disk cache reloads through it
    spec.loader.exec_module(mod)
    _loaded[name] = mod
    return mod
