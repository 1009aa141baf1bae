"""Compilation switch of the pipe kernels: numba where installed, plain numpy otherwise.

Every physics function of :mod:`cyclesim.pipes.kernels` is written once, in
elementwise arithmetic.  Imported as usual it is the numpy form, called on whole
(case, cell) arrays; :func:`compiled_kernels` executes the same file a second
time as a separate module whose functions numba compiles for scalars, called
cell by cell from the compiled driver.  Without numba, or with
``CYCLESIM_KERNEL=python`` or ``NUMBA_DISABLE_JIT=1`` set before the import,
there is no compiled form and the numpy driver runs.
"""

from __future__ import annotations

import importlib.util
import sys

from ..kernel_ops import compiled_wanted

FASTMATH = {"contract", "arcp", "nsz", "afn"}
"""LLVM's fast-math flags of the compiled kernels: fused multiply-adds, reciprocals, signless zeros and
approximate functions; no assumption that values are finite (the kernels test for zeros and NaN)."""

COMPILED = compiled_wanted()
"""True where the kernels are compiled by numba in this process."""

if COMPILED:
    from numba import njit as _njit

    from ..loops.jit_cache import install

    install()                   # disk caches stamped with the callees' files (cyclesim.loops.jit_cache)

    @_njit(cache=True, error_model="numpy", fastmath=FASTMATH)
    def _where(cond, a, b):
        """``a`` if ``cond`` else ``b`` for scalars (the compiled form of ``np.where``)."""
        return a if cond else b

_compiled = None


def compiled_kernels():
    """The kernels module compiled by numba (loaded once), or None without numba."""
    global _compiled
    if not COMPILED:
        return None
    if _compiled is None:
        from numba import njit
        from numba.extending import register_jitable

        import cyclesim.kernel_ops as kernel_ops
        from ..cylinder.flow import critical_ratio_of
        from .kernels import __file__ as kernels_file

        # flow.isentropic_flux, compiled here, reads these: kernel_ops' compiled forms and its helper
        kernel_ops.register_compiled()
        register_jitable(inline="always")(critical_ratio_of)

        spec = importlib.util.spec_from_file_location("cyclesim.pipes._kernels_compiled", kernels_file)
        mod = importlib.util.module_from_spec(spec)
        mod.jit = njit(cache=True, error_model="numpy", fastmath=FASTMATH)
        mod.where = _where
        mod.SCALAR = True
        sys.modules[spec.name] = mod            # importable by name: numba's disk cache reloads through it
        spec.loader.exec_module(mod)
        _compiled = mod
    return _compiled
