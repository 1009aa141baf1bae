"""Resampling of trace rows onto an output grid in one pass, compiled where numba runs.

:class:`cyclesim.solve.hermite.HermiteBasis` evaluates the cubic Hermite interpolant of a row
(B, N+1) on an output grid as whole-array numpy operations: four gathers, four products and three
sums, each a temporary of the output's size (B, n).  At fine output (0.1 deg over a closed cycle
of a 41-case batch, about 110,000 values a row) that traffic is most of the time the results take.
:func:`hermite_rows` and :func:`linear_rows` do the same arithmetic point by point, in the same
order of operations (``((h00 y0 + h10h f0) + h01 y1) + h11h f1``; ``slope dx + f0``), so the
values are the numpy form's to the bit; without numba (or with ``CYCLESIM_KERNEL=python``) the
numpy form runs.
"""

from __future__ import annotations

import numpy as np

from ..kernel_ops import compiled_wanted


def _hermite_loop(i, h00, h10h, h01, h11h, Y, F, out):
    """``out[b, j]`` = the Hermite interpolant of row ``b`` at output point ``j`` (interval ``i[j]``,
    basis weights ``h00 .. h11h`` [the slope weights times the interval's width])."""
    for b in range(Y.shape[0]):
        for j in range(i.shape[0]):
            k = i[j]
            out[b, j] = h00[j] * Y[b, k] + h10h[j] * F[b, k] + h01[j] * Y[b, k + 1] + h11h[j] * F[b, k + 1]


def _linear_loop(i, dth, dx, at_end, F, out):
    """``out[b, j]`` = the linear interpolant of row ``b`` of ``F`` at output point ``j``, as
    ``numpy.interp`` forms it (``dth[j]`` the interval's width, ``dx[j]`` the distance from its
    start); the row's last value at and beyond its last point."""
    last = F.shape[1] - 1
    for b in range(F.shape[0]):
        for j in range(i.shape[0]):
            k = i[j]
            if at_end[j]:
                out[b, j] = F[b, last]
            else:
                out[b, j] = (F[b, k + 1] - F[b, k]) / dth[j] * dx[j] + F[b, k]


_KERNELS: list = []


def _kernels():
    """The compiled loops ``(hermite, linear)``, or ``(None, None)`` where numba does not run here
    (numba is imported on the first resampling, not with the package)."""
    if not _KERNELS:
        if compiled_wanted():
            from numba import njit

            _KERNELS[:] = [njit(cache=True, nogil=True)(_hermite_loop), njit(cache=True, nogil=True)(_linear_loop)]
        else:
            _KERNELS[:] = [None, None]
    return _KERNELS


MIN_VALUES = 20_000
"""Fewest output values (rows times points) for which the compiled loop replaces the numpy form: a
batch's trace at fine output (the closed 41-case batch at 0.1 deg: about 110,000 a row; a
100-case full-cycle batch: about 144,000).  Loading the two compiled loops costs a process about
0.3 s of CPU once, more than the numpy form costs one operating point's whole output (1,441 values
a row), so a single run stays on the numpy form."""


def _c(a, dtype=float):
    return np.ascontiguousarray(a, dtype=dtype)


def weighted_rows(i: np.ndarray, w: tuple, Yr: np.ndarray, Fr: np.ndarray):
    """``w[0] Y[:, i] + w[1] F[:, i] + w[2] Y[:, i + 1] + w[3] F[:, i + 1]`` (B, n), summed in that
    order, for rows ``Yr`` with slopes ``Fr`` (B, N+1), output points in intervals ``i`` (n,) with
    weights ``w`` (four arrays (n,)); None where the compiled loop does not run."""
    if Yr.ndim != 2 or Yr.shape[0] * i.shape[0] < MIN_VALUES or _kernels()[0] is None:
        return None
    out = np.empty((Yr.shape[0], i.shape[0]))
    _kernels()[0](i, w[0], w[1], w[2], w[3], _c(Yr), _c(Fr), out)
    return out


def hermite_rows(basis, Yr: np.ndarray, Fr: np.ndarray):
    """The Hermite interpolant (B, n) of rows ``Yr`` with slopes ``Fr`` (B, N+1) on ``basis``'s grid
    (:class:`cyclesim.solve.hermite.HermiteBasis`), or None where the compiled loop does not run."""
    return weighted_rows(basis.i, (basis.h00, basis.h10h, basis.h01, basis.h11h), Yr, Fr)


def linear_rows(basis, Fr: np.ndarray):
    """:meth:`cyclesim.solve.hermite.HermiteBasis.linear` of ``Fr`` (B, N+1), or None where the
    compiled loop does not run."""
    if Fr.ndim != 2 or Fr.shape[0] * basis.n < MIN_VALUES or _kernels()[1] is None:
        return None
    out = np.empty((Fr.shape[0], basis.n))
    _kernels()[1](basis.i, basis.dth, basis.dx, basis.at_end, _c(Fr), out)
    return out
