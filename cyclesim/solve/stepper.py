"""Explicit Runge-Kutta steppers whose Butcher tableau is data.

The cycle loops (the numpy loop in :mod:`cyclesim.solve.solver` and the compiled one in
:mod:`cyclesim.loops._compiled`) read the scheme from a :class:`Tableau`; neither writes a stage
combination of its own.  Coefficients are stored as numerators over a per-row denominator so
that a rational scheme is applied exactly as written by hand (``h/6 (k1 + 4 k2 + k3)``, not
``h (k1/6 + ...)``), which keeps results identical to the digit.

The cycle's grid precomputes geometry and masks at each step's start, middle and end, so the
stage nodes of a tableau used there must be among 0, 1/2 and 1.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Tableau:
    """An explicit Runge-Kutta scheme.

    Stage ``i`` is evaluated at ``theta + c[i] h`` on
    ``y + (h / a_den[i]) sum_j a[i][j] k_j`` (j < i), and the step is
    ``y + (h / b_den) sum_i b[i] k_i``.

    Attributes
    ----------
    name : str
    order : int
        Classical order of accuracy [-].
    c : tuple of float
        Stage nodes as fractions of the step [-].
    a : tuple of tuples
        Row i: the numerators a[i][0..i-1] [-].
    a_den, b_den : float
        Denominators of the rows of ``a`` and of the weights [-].
    b : tuple of float
        Weight numerators [-].
    """

    name: str
    order: int
    c: tuple
    a: tuple
    a_den: tuple
    b: tuple
    b_den: float

    def __post_init__(self):
        s = len(self.c)
        if len(self.a) != s or len(self.a_den) != s or len(self.b) != s:
            raise ValueError(f"tableau {self.name!r}: c, a, a_den and b need one entry per stage")
        for i, row in enumerate(self.a):
            if len(row) != i:
                raise ValueError(f"tableau {self.name!r}: row {i} of a needs {i} entries (explicit scheme)")
        if self.c[0] != 0.0:
            raise ValueError(f"tableau {self.name!r}: the first stage is the step's start (c[0] = 0)")

    @property
    def stages(self) -> int:
        return len(self.c)

    def arrays(self):
        """(A (S, S) numerators, a_den (S,), b (S,), b_den, node (S,) as half-step indices 0, 1, 2)
        for the compiled loop."""
        S = self.stages
        A = np.zeros((S, S))
        for i, row in enumerate(self.a):
            A[i, :i] = row
        node = np.array([int(round(2 * c)) for c in self.c], dtype=np.int64)
        if not np.allclose(node / 2.0, self.c):
            raise ValueError(f"tableau {self.name!r}: stage nodes {self.c} are not at 0, 1/2 or 1 of the step")
        return (A, np.asarray(self.a_den, float), np.asarray(self.b, float), float(self.b_den), node)


KUTTA3 = Tableau(
    name="Kutta's third-order method", order=3,
    c=(0.0, 0.5, 1.0),
    a=((), (1.0,), (-1.0, 2.0)), a_den=(1.0, 2.0, 1.0),
    b=(1.0, 4.0, 1.0), b_den=6.0,
)
"""Kutta (1901): the classical three-stage third-order scheme (Butcher 2008, Numerical Methods
for Ordinary Differential Equations, 2nd ed., sec. 23), stages at the step's start, middle and
end like the cycle grid's points."""

TABLEAU = KUTTA3
"""The cycle loops' Runge-Kutta scheme."""


def combine(y, h: float, coeffs, den: float, ks):
    """``y + (h / den) sum_j coeffs[j] ks[j]`` on arrays, the terms added in order (a
    coefficient 1 is not multiplied, 0 skipped)."""
    acc = None
    for c, k in zip(coeffs, ks):
        if c == 0.0:
            continue
        t = k if c == 1.0 else c * k
        acc = t if acc is None else acc + t
    if acc is None:
        return y
    return y + (h / den) * acc if den != 1.0 else y + h * acc


def stages(fun, y, h: float, tableau: Tableau, k0=None) -> list:
    """The stage derivatives of one step from ``y``: ``fun(i, y_i)`` is called for stage ``i``
    on its stage state (``k0``: stage 0's, where the caller has it already)."""
    ks = [fun(0, y) if k0 is None else k0]
    for i in range(1, tableau.stages):
        ks.append(fun(i, combine(y, h, tableau.a[i], tableau.a_den[i], ks)))
    return ks


def advance(y, h: float, tableau: Tableau, ks):
    """The step's end state from its stages."""
    return combine(y, h, tableau.b, tableau.b_den, ks)


def step(fun, t: float, y, h: float, tableau: Tableau = KUTTA3, k0=None):
    """One step of ``dy/dt = fun(t, y)`` from ``(t, y)``: returns ``(y_new, stages)``.

    ``k0`` is ``fun(t, y)`` where the caller has it already.
    """
    c = tableau.c
    ks = stages(lambda i, ys: fun(t + c[i] * h, ys), y, h, tableau, k0)
    return advance(y, h, tableau, ks), ks


CYCLE_TABLEAU = KUTTA3
"""The cycle loops' scheme (numpy and compiled alike)."""
