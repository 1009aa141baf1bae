"""The Runge-Kutta stepper whose tableau is data (cyclesim.solve.stepper)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from cyclesim.solve.stepper import KUTTA3, Tableau, combine, step


def _coeffs(t: Tableau):
    A, a_den, b, b_den, _ = t.arrays()
    return A / a_den[:, None], b / b_den, np.asarray(t.c)


def test_kutta3_satisfies_the_order_conditions_up_to_three():
    # Butcher (2008), Numerical Methods for ODEs, 2nd ed., sec. 31 (order conditions):
    # sum b = 1, sum b c = 1/2, sum b c^2 = 1/3, b A c = 1/6, and c = row sums of A
    A, b, c = _coeffs(KUTTA3)
    assert b.sum() == pytest.approx(1.0, abs=1e-15)
    assert b @ c == pytest.approx(0.5, abs=1e-15)
    assert b @ c**2 == pytest.approx(1.0 / 3.0, abs=1e-15)
    assert b @ A @ c == pytest.approx(1.0 / 6.0, abs=1e-15)
    assert A.sum(axis=1) == pytest.approx(c, abs=1e-15)


def _solve(fun, y0, t1, n, tab=KUTTA3):
    y, t, h = np.asarray(y0, float), 0.0, t1 / n
    for _ in range(n):
        y, _ = step(fun, t, y, h, tab)
        t += h
    return y


@pytest.mark.parametrize("fun, exact", [
    (lambda t, y: y, lambda t: math.exp(t)),                      # growth, y(0) = 1
    (lambda t, y: -2.0 * t * y, lambda t: math.exp(-t * t)),     # time-dependent, y(0) = 1
])
def test_third_order_convergence_against_exact_solutions(fun, exact):
    # the error shrinks by 2^3 per halving of the step (order 3); exact solutions by hand
    errs = [abs(float(_solve(fun, [1.0], 1.0, n)[0]) - exact(1.0)) for n in (20, 40, 80)]
    orders = [math.log2(errs[k] / errs[k + 1]) for k in range(2)]
    assert all(2.8 < o < 3.2 for o in orders), orders


def test_combine_applies_the_rows_as_written():
    y = np.array([1.0, 2.0])
    k1, k2, k3 = np.array([0.3, -0.7]), np.array([1.1, 0.2]), np.array([-0.4, 0.9])
    h = 0.37
    # bit for bit the hand-written stage and step formulas of Kutta's scheme
    assert np.array_equal(combine(y, h, (1.0,), 2.0, [k1]), y + (0.5 * h) * k1)
    assert np.array_equal(combine(y, h, (-1.0, 2.0), 1.0, [k1, k2]), y + h * (2.0 * k2 - k1))
    assert np.array_equal(combine(y, h, (1.0, 4.0, 1.0), 6.0, [k1, k2, k3]), y + (h / 6.0) * (k1 + 4.0 * k2 + k3))


def test_a_malformed_tableau_is_refused():
    with pytest.raises(ValueError, match="explicit"):
        Tableau("bad", 2, c=(0.0, 1.0), a=((), (0.5, 0.5)), a_den=(1.0, 1.0), b=(1.0, 1.0), b_den=2.0)
    heun_third = Tableau("nodes at 1/3", 3, c=(0.0, 1 / 3, 2 / 3), a=((), (1.0,), (0.0, 2.0)),
                         a_den=(1.0, 3.0, 3.0), b=(1.0, 0.0, 3.0), b_den=4.0)
    # a valid scheme for step() (Heun's third-order method, Butcher 2008 sec. 23) ...
    err = abs(float(_solve(lambda t, y: y, [1.0], 1.0, 40, heun_third)[0]) - math.e)
    assert err < 1e-5     # third order: about 0.04 h^3 e here
    # ... but its nodes are not on the cycle grid's points
    with pytest.raises(ValueError, match="not at 0, 1/2 or 1"):
        heun_third.arrays()


def test_the_cylinder_system_with_the_stepper_reproduces_the_closed_cycle(monkeypatch):
    # the solver's closed cycle (numpy loop) against the cylinder system's fun(theta, y) stepped
    # by cyclesim.solve.stepper.step on the same grid from the same start: the same equations and
    # scheme, so the end state agrees to rounding
    from cyclesim.solve import kernel
    from cyclesim.api import _registry_for
    from cyclesim.solve.batch import build_batch
    from cyclesim.config import load_config
    from cyclesim.solve.solver import TABLEAU, _initial_state, _RHS, integrate

    monkeypatch.setenv(kernel.ENV, "python")
    cases = [load_config("demo_closed", [f"burn.spark_advance_deg={a}"]) for a in (15, 30)]
    batch = build_batch(cases, _registry_for(cases))
    tr = integrate(batch)
    rhs = _RHS(batch, "closed")
    y = _initial_state(batch, rhs, float(tr.theta[0]), "closed")
    for t0, t1 in zip(tr.theta[:-1], tr.theta[1:]):
        y, _ = step(rhs.fun, float(t0), y, float(t1 - t0), TABLEAU)
    end = tr.Y[:, :, -1]
    assert np.allclose(y, end, rtol=1e-11, atol=1e-14 * np.abs(end).max(axis=1, keepdims=True))
    assert not np.allclose(end[rhs.names.index("T")], tr.Y[rhs.names.index("T"), :, 0])  # it did burn
