"""The compiled resampling of trace rows (cyclesim.solve.resample) against the numpy form."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cyclesim.solve import hermite as hm
from cyclesim.solve import resample

pytestmark = pytest.mark.skipif(resample._kernels()[0] is None, reason="numba does not run here")


def _numpy_rows(basis, Y, F):
    i, i1 = basis.i, basis.i1
    return basis.h00 * Y[:, i] + basis.h10h * F[:, i] + basis.h01 * Y[:, i1] + basis.h11h * F[:, i1]


def _numpy_linear(Fr, theta, grid):
    # numpy.interp's own linear interpolant, row by row (the form HermiteBasis.linear reproduces)
    return np.stack([np.interp(grid, theta, r) for r in Fr])


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10_000), rows=st.integers(5, 8), points=st.integers(4000, 6000),
       uniform=st.booleans())
def test_compiled_rows_equal_the_numpy_form_to_the_bit(seed, rows, points, uniform):
    # the same operations in the same order (no fused multiply-add), so the same numbers to the bit,
    # on uniform and non-uniform solver grids, an output grid reaching the last point, wide rows
    rng = np.random.default_rng(seed)
    n = 40
    theta = np.linspace(-100.0, 170.0, n) if uniform else np.unique(np.sort(rng.uniform(-100.0, 170.0, n)))
    grid = np.linspace(theta[0], theta[-1], points)
    Y = rng.normal(size=(rows, theta.size)) * 10.0 ** rng.integers(-6, 7, size=(rows, 1))
    F = rng.normal(size=(rows, theta.size))
    basis = hm.HermiteBasis(theta, grid)
    got = resample.hermite_rows(basis, Y, F)
    assert got is not None
    assert np.array_equal(got, _numpy_rows(basis, Y, F))
    assert np.array_equal(basis.rows(Y, F), got)
    lin = resample.linear_rows(basis, F)
    assert lin is not None
    np.testing.assert_allclose(lin, _numpy_linear(F, theta, grid), rtol=1e-12, atol=1e-12)


def test_linear_equals_the_numpy_form_to_the_bit():
    # HermiteBasis.linear's numpy lines, written out, against the compiled loop
    rng = np.random.default_rng(3)
    theta = np.unique(np.sort(rng.uniform(0.0, 50.0, 30)))
    grid = np.linspace(theta[0], theta[-1] + 1.0, 8000)        # past the end: the last value
    F = rng.normal(size=(3, theta.size))
    b = hm.HermiteBasis(theta, grid)
    slope = (F[:, b.i1] - F[:, b.i]) / (theta[b.i1] - theta[b.i])
    ref = slope * b.dx + F[:, b.i]
    ref[:, b.at_end] = F[:, -1:]
    assert np.array_equal(resample.linear_rows(b, F), ref)


def test_small_outputs_and_non_contiguous_rows():
    # below MIN_VALUES the numpy form runs (None from the compiled entry); a strided row (a view of
    # every other case) gives the same values as its contiguous copy
    theta = np.linspace(0.0, 10.0, 11)
    small = hm.HermiteBasis(theta, np.linspace(0.0, 10.0, 20))
    Y = np.arange(22.0).reshape(2, 11) ** 2
    assert resample.hermite_rows(small, Y, Y) is None
    big = hm.HermiteBasis(theta, np.linspace(0.0, 10.0, 15000))
    Y4 = np.random.default_rng(1).normal(size=(4, 11))
    assert resample.hermite_rows(big, Y4[::2], Y4[::2]) is not None
    assert np.array_equal(big.rows(Y4[::2], Y4[::2]), _numpy_rows(big, Y4[::2].copy(), Y4[::2].copy()))


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 10_000), rows=st.integers(1, 5), points=st.integers(10, 12000))
def test_basis_derivative_equals_hermite_grid_to_the_bit(seed, rows, points):
    # HermiteBasis.derivative (compiled above MIN_VALUES, numpy below) against hermite_grid's
    # derivative on a non-uniform grid; and the derivative of a cubic is exact (Press et al. 2007,
    # Numerical Recipes, 3rd ed., sec. 3.5: the cubic Hermite interpolant reproduces cubics)
    rng = np.random.default_rng(seed)
    theta = np.unique(np.concatenate([[-1.0, 1.0], rng.uniform(-1.0, 1.0, 25)]))
    grid = np.linspace(-1.0, 1.0, points)
    Y = rng.normal(size=(rows, theta.size))
    F = rng.normal(size=(rows, theta.size))
    b = hm.HermiteBasis(theta, grid)
    assert np.array_equal(b.derivative(Y, F), hm.hermite_grid(theta, Y, F, grid, derivative=True))
    c = rng.normal(size=4)
    f = c[0] + theta * (c[1] + theta * (c[2] + theta * c[3]))
    df = c[1] + theta * (2 * c[2] + theta * 3 * c[3])
    exact = c[1] + grid * (2 * c[2] + grid * 3 * c[3])
    np.testing.assert_allclose(b.derivative(f[None, :], df[None, :])[0], exact, rtol=0, atol=1e-8 * (1 + abs(c).sum()))
