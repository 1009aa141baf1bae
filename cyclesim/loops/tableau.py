"""Explicit Runge-Kutta schemes as data, and their stage combination written once, as generated text.

A :class:`Tableau` holds a scheme's coefficients as numerators over a per-row denominator, so
that a rational scheme is applied exactly as written by hand (``h/6 (k1 + 4 k2 + k3)``, not
``h (k1/6 + ...)``), which keeps results identical to the digit.

:func:`stage_source` writes the scheme's stage and step combinations as the text of plain
functions, one per row, with the coefficients as constants::

    def _rk_stage_1(y, h, k0):
        return y + (h / 2.0) * (k0)
    ...
    def _rk_step(y, h, k0, k1, k2):
        return y + (h / 6.0) * (k0 + (4.0) * k1 + k2)

That text is the one source of the stage arithmetic of both cycle loops: the numpy loop
(:mod:`cyclesim.solve.cycle_run`, through :func:`stage_functions`) runs the functions on
arrays (n_state, B); :mod:`cyclesim.loops.loopgen` writes the same text into every generated
compiled loop, where numba compiles the functions and inlines them on one state row's floats.
Why text and not one function that loops over the tableau's arrays: numba then needs no loop
over stages per state row nor reads of the coefficients, and numpy no Python loop over the
terms (the three rows of Kutta's scheme on arrays (20, 1): about 5-25 % less time than such a
loop, timed with timeit on a busy 2-core machine).

The cycle's grid precomputes geometry and masks at each step's start, middle and end, so the
stage nodes of a tableau used there must be among 0, 1/2 and 1 (:meth:`Tableau.arrays`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from types import SimpleNamespace

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

CYCLE_TABLEAU = KUTTA3
"""The cycle loops' scheme (numpy and compiled alike)."""

STEP_NAME = "_rk_step"
"""The generated step function's name; stage ``i`` (i >= 1) is ``_rk_stage_<i>``."""


def stage_name(i: int) -> str:
    """The name of the generated function of stage ``i`` (i >= 1)."""
    return f"_rk_stage_{i}"


def weighted_text(coefs, s: int) -> str:
    """``sum_j coefs[j] k_j`` over the first ``s`` stages as the text of one expression, the terms
    added in order, a coefficient 1 not multiplied and 0 skipped; "" where every coefficient is 0."""
    terms = []
    for q in range(s):
        c = float(coefs[q])
        if not math.isfinite(c):
            raise ValueError(f"tableau coefficient {c!r} is not finite")
        if c == 0.0:
            continue
        terms.append(f"k{q}" if c == 1.0 else f"({c!r}) * k{q}")
    return " + ".join(terms)


def row_source(name: str, coefs, den: float, s: int) -> str:
    """The text of ``def name(y, h, k0, .., k<s-1>)``: ``y + (h / den) (sum_j coefs[j] k_j)``
    (``h`` not divided where ``den`` is 1; ``y`` itself where every coefficient is 0)."""
    den = float(den)
    if not (math.isfinite(den) and den != 0.0):
        raise ValueError(f"tableau denominator {den!r} is not a finite non-zero number")
    args = ", ".join(["y", "h"] + [f"k{q}" for q in range(s)])
    acc = weighted_text(coefs, s)
    if not acc:
        body = "y"
    else:
        f = "h" if den == 1.0 else f"(h / {den!r})"
        body = f"y + {f} * ({acc})"
    return f"def {name}({args}):\n    return {body}\n"


def stage_source(tableau: Tableau) -> str:
    """The stage combinations (stages 1..S-1) and the step of ``tableau`` as the text of plain
    functions (:func:`stage_name`, :data:`STEP_NAME`), for numpy arrays and numba floats alike."""
    S = tableau.stages
    rows = [row_source(stage_name(i), tableau.a[i], tableau.a_den[i], i) for i in range(1, S)]
    rows.append(row_source(STEP_NAME, tableau.b, tableau.b_den, S))
    return "\n\n".join(rows)


def tableau_key(tableau: Tableau) -> tuple:
    """What a scheme's generated text depends on (its coefficients and nodes)."""
    return (tuple(tuple(map(float, r)) for r in tableau.a), tuple(map(float, tableau.a_den)),
            tuple(map(float, tableau.b)), float(tableau.b_den), tuple(map(float, tableau.c)))


_FUNCTIONS: dict = {}


def stage_functions(tableau: Tableau) -> SimpleNamespace:
    """The functions of :func:`stage_source` as Python functions (made once per scheme):
    ``stage[i](y, h, k0, .., k<i-1>)`` the state of stage i (``stage[0]`` None: the step's start),
    ``step(y, h, k0, .., k<S-1>)`` the step's end state."""
    key = tableau_key(tableau)
    got = _FUNCTIONS.get(key)
    if got is None:
        src = stage_source(tableau)
        ns: dict = {}
        exec(compile(src, f"<stage combination of {tableau.name}>", "exec"), ns)  # noqa: S102 - our own text
        got = _FUNCTIONS[key] = SimpleNamespace(
            stage=(None,) + tuple(ns[stage_name(i)] for i in range(1, tableau.stages)),
            step=ns[STEP_NAME], source=src)
    return got


def row_function(coefs, den: float):
    """One generated row ``f(y, h, k0, ..)`` (:func:`row_source`) for ``len(coefs)`` stages, made
    once per row."""
    key = ("row", tuple(map(float, coefs)), float(den))
    fn = _FUNCTIONS.get(key)
    if fn is None:
        ns: dict = {}
        exec(compile(row_source("row", coefs, den, len(coefs)), "<stage combination row>", "exec"), ns)  # noqa: S102
        fn = _FUNCTIONS[key] = ns["row"]
    return fn
