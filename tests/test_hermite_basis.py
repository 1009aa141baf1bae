"""The solver's cubic Hermite interpolants share one basis (cyclesim.solve.hermite.basis)."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from cyclesim.solve import hermite as hm

coef = st.floats(-10.0, 10.0)


@settings(max_examples=60, deadline=None)
@given(c=st.tuples(coef, coef, coef, coef), seed=st.integers(0, 10_000))
def test_every_form_reproduces_a_cubic_and_they_agree_to_the_bit(c, seed):
    # the cubic Hermite interpolant through values and slopes is exact for a cubic (Press et al. 2007,
    # Numerical Recipes, 3rd ed., sec. 3.5): on a non-uniform grid, at points inside and between nodes,
    # the per-case form (hermite), the grid form (hermite_grid) and the basis held for many rows
    # (HermiteBasis) give the cubic within rounding (1e-9 of its scale) and the same numbers to the bit
    rng = np.random.default_rng(seed)
    theta = np.concatenate([[-1.0], np.sort(rng.uniform(-1.0, 1.0, 12)), [1.0]])
    theta = np.unique(theta)
    grid = np.sort(rng.uniform(-1.0, 1.0, 9))

    def f(x):
        return c[0] + x * (c[1] + x * (c[2] + x * c[3]))

    def df(x):
        return c[1] + x * (2.0 * c[2] + x * 3.0 * c[3])

    Y = np.stack([f(theta), 2.0 * f(theta)])
    F = np.stack([df(theta), 2.0 * df(theta)])
    scale = 1.0 + sum(abs(v) for v in c)
    on_grid = hm.hermite_grid(theta, Y, F, grid)
    np.testing.assert_allclose(on_grid, np.stack([f(grid), 2.0 * f(grid)]), rtol=0.0, atol=1e-9 * scale)
    assert np.array_equal(hm.HermiteBasis(theta, grid).rows(Y, F), on_grid)
    for k, x in enumerate(grid):
        assert np.array_equal(hm.hermite(theta, Y, F, x), on_grid[:, k])


def test_basis_weights_at_the_ends_and_their_sum():
    # at t = 0 the start value alone, at t = 1 the end value alone; h00 + h01 = 1 everywhere
    # (a constant is reproduced), and the slope weights carry the interval's width
    h = 0.7
    t = np.linspace(0.0, 1.0, 11)
    h00, h10h, h01, h11h = hm.basis(h, t)
    assert (h00[0], h10h[0], h01[0], h11h[0]) == (1.0, 0.0, 0.0, 0.0)
    assert (h00[-1], h10h[-1], h01[-1], h11h[-1]) == (0.0, 0.0, 1.0, 0.0)
    np.testing.assert_allclose(h00 + h01, 1.0, rtol=0.0, atol=1e-15)
    # a straight line of slope s through 0: s h t = h01 (s h) + (h10 + h11) h s
    np.testing.assert_allclose(h01 * h + h10h + h11h, h * t, rtol=0.0, atol=1e-15)
