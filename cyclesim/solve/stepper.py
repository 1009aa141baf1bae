"""Explicit Runge-Kutta steppers whose Butcher tableau is data.

The scheme's data and the text of its stage combination live in :mod:`cyclesim.loops.tableau`
(below the solver, so that the generated compiled loops write the same text in); this module
gives the stepper in the shape of ``scipy.integrate``'s: :func:`step` of ``dy/dt = fun(t, y)``,
and :func:`stages` / :func:`advance` for a caller that evaluates the stages itself.  Every
combination of stages runs the generated functions (:func:`cyclesim.loops.tableau.stage_functions`),
the same arithmetic as the numpy loop (:mod:`cyclesim.solve.cycle_run`) and the compiled one.
"""

from __future__ import annotations

from ..loops.tableau import CYCLE_TABLEAU, KUTTA3, Tableau, row_function, stage_functions

__all__ = ["CYCLE_TABLEAU", "KUTTA3", "TABLEAU", "Tableau", "advance", "combine", "stages", "step"]

TABLEAU = CYCLE_TABLEAU
"""The cycle loops' Runge-Kutta scheme."""


def combine(y, h: float, coeffs, den: float, ks):
    """``y + (h / den) sum_j coeffs[j] ks[j]`` on arrays or floats, the terms added in order (a
    coefficient 1 not multiplied, 0 skipped): one generated row
    (:func:`cyclesim.loops.tableau.row_function`)."""
    return row_function(coeffs, den)(y, h, *ks[:len(coeffs)])


def stages(fun, y, h: float, tableau: Tableau, k0=None) -> list:
    """The stage derivatives of one step from ``y``: ``fun(i, y_i)`` is called for stage ``i``
    on its stage state (``k0``: stage 0's, where the caller has it already)."""
    rows = stage_functions(tableau).stage
    ks = [fun(0, y) if k0 is None else k0]
    for i in range(1, tableau.stages):
        ks.append(fun(i, rows[i](y, h, *ks)))
    return ks


def advance(y, h: float, tableau: Tableau, ks):
    """The step's end state from its stages."""
    return stage_functions(tableau).step(y, h, *ks)


def step(fun, t: float, y, h: float, tableau: Tableau = KUTTA3, k0=None):
    """One step of ``dy/dt = fun(t, y)`` from ``(t, y)``: returns ``(y_new, stages)``.

    ``k0`` is ``fun(t, y)`` where the caller has it already.
    """
    c = tableau.c
    ks = stages(lambda i, ys: fun(t + c[i] * h, ys), y, h, tableau, k0)
    return advance(y, h, tableau, ks), ks
