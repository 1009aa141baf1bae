"""The shared-work forms of figure and grid code give what the one-at-a-time forms give."""

from __future__ import annotations


import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from cyclesim.results.figures import hermite_crossing, hermite_crossings


def _burn_rows(seed: int, B: int, n: int):
    """Non-decreasing rows 0..1 (B, n) on a non-uniform grid, with their slopes."""
    rng = np.random.default_rng(seed)
    theta = np.cumsum(rng.uniform(0.2, 2.0, n)) - 30.0
    inc = rng.uniform(0.0, 1.0, (B, n))
    inc[:, 0] = 0.0
    Y = np.cumsum(inc, axis=1)
    Y /= Y[:, -1:] * rng.uniform(0.8, 1.2, (B, 1))      # some rows end below 1: no 90 % crossing
    F = np.gradient(Y, theta, axis=1)
    return theta, Y, F


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 2**31 - 1), B=st.integers(1, 7), n=st.integers(3, 60),
       levels=st.lists(st.floats(0.0, 1.3), min_size=1, max_size=5))
def test_crossings_at_several_levels_equal_one_level_at_a_time(seed, B, n, levels):
    theta, Y, F = _burn_rows(seed, B, n)
    got = hermite_crossings(theta, Y, F, levels)
    assert got.shape == (len(levels), B)
    for k, lvl in enumerate(levels):
        one = hermite_crossing(theta, Y, F, lvl)
        # the same element-wise arithmetic: identical to the bit, NaN where never reached
        np.testing.assert_array_equal(got[k], one)


def test_crossing_of_a_linear_ramp_is_exact():
    # x = (theta - 10) / 40 on 10..50 deg: 10/50/90 % at 14, 30, 46 deg (linear: the cubic is exact)
    theta = np.linspace(0.0, 60.0, 25)
    x = np.clip((theta - 10.0) / 40.0, 0.0, 1.0)
    f = np.where((theta > 10.0) & (theta < 50.0), 1.0 / 40.0, 0.0)
    got = hermite_crossings(theta, x[None, :], f[None, :], (0.1, 0.5, 0.9, 1.5))[:, 0]
    np.testing.assert_allclose(got[:3], [14.0, 30.0, 46.0], rtol=0, atol=1e-9)
    assert np.isnan(got[3])


def test_grid_valve_areas_read_from_the_lattice_equal_the_valve_models():
    from cyclesim.api import _registry_for
    from cyclesim.config import load_config
    from cyclesim.solve.batch import build_batch
    from cyclesim.solve.cycle_grid import _areas_on, _grid_and_lattice, _points

    cases = [load_config("demo", ["emissions.model=none"])]
    b = build_batch(cases, _registry_for(cases))
    for scale in (1.0, 2.0, 4.0, 1.37):
        theta, lattice = _grid_and_lattice(b, "full", scale)
        half = _points(theta)
        got = _areas_on(b, half, lattice)
        want = b.models["valve_flow"].flow_area(half)
        for side in ("intake", "exhaust"):
            np.testing.assert_array_equal(got[side], want[side])

