"""The Runge-Kutta stage combination, generated once from the tableau, in both cycle loops; the loop
found once per process.

Checked against: a plain statement of the combination written here (``y + (h / den) sum_j c_j k_j``,
the terms in order, a coefficient 1 not multiplied and 0 skipped, as the scheme is written by hand),
which the generated rows must match to the digit on arrays, on floats and compiled by numba; and, as
an outside reference, the stability function of Kutta's third-order scheme on y' = y, which for an
explicit method of three stages and order three is the Taylor polynomial 1 + h + h^2/2 + h^3/6
(Hairer & Wanner 1996, Solving Ordinary Differential Equations II, 2nd ed., sec. IV.2, eq. 2.12;
from memory).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cyclesim.loops import loopgen, tableau as rk
from cyclesim.loops.loopgen import Part, _tableau_blocks, generate
from cyclesim.solve import kernel
from cyclesim.solve.stepper import CYCLE_TABLEAU, KUTTA3, Tableau, combine

COEF = st.sampled_from([0.0, 1.0, -1.0, 2.0, 4.0, 0.5, -0.375, 1.0 / 3.0])
DEN = st.sampled_from([1.0, 2.0, 6.0, 3.0])
FINITE = st.floats(-1e6, 1e6, allow_nan=False)


def _by_hand(y, h, coefs, den, ks):
    """The combination as a scheme is written by hand (the statement the rows are held to)."""
    acc = None
    for c, k in zip(coefs, ks):
        if c == 0.0:
            continue
        t = k if c == 1.0 else c * k
        acc = t if acc is None else acc + t
    if acc is None:
        return y
    return y + (h if den == 1.0 else h / den) * acc


@settings(max_examples=200, deadline=None)
@given(st.lists(COEF, min_size=1, max_size=5), DEN, st.floats(1e-3, 2.0), FINITE,
       st.lists(FINITE, min_size=5, max_size=5))
def test_a_generated_row_is_the_hand_written_combination_to_the_digit(coefs, den, h, y0, ks):
    s = len(coefs)
    row = rk.row_function(coefs, den)
    # on floats (the compiled loop's rows) and on arrays (the numpy loop's), through stepper.combine
    assert row(y0, h, *ks[:s]) == _by_hand(y0, h, coefs, den, ks[:s])
    ya = np.array([y0, -y0, 0.5 * y0])
    ka = [np.array([k, 2.0 * k, -k]) for k in ks[:s]]
    np.testing.assert_array_equal(combine(ya, h, coefs, den, ka), _by_hand(ya, h, coefs, den, ka))


@settings(max_examples=60, deadline=None)
@given(st.floats(1e-3, 2.0), FINITE, st.lists(FINITE, min_size=3, max_size=3))
def test_numba_compiles_the_generated_rows_to_the_same_digits(h, y0, ks):
    numba = pytest.importorskip("numba")
    fns = rk.stage_functions(KUTTA3)
    for i in (1, 2):
        jit = numba.njit(error_model="numpy")(fns.stage[i])
        assert jit(y0, h, *ks[:i]) == fns.stage[i](y0, h, *ks[:i]) == _by_hand(y0, h, KUTTA3.a[i], KUTTA3.a_den[i],
                                                                             ks[:i])
    jit = numba.njit(error_model="numpy")(fns.step)
    assert jit(y0, h, *ks) == fns.step(y0, h, *ks) == _by_hand(y0, h, KUTTA3.b, KUTTA3.b_den, ks)


def test_an_all_zero_row_is_the_start_state_and_bad_coefficients_are_refused():
    assert rk.row_function((0.0, 0.0), 2.0)(1.5, 0.1, 3.0, 4.0) == 1.5
    with pytest.raises(ValueError, match="not finite"):
        rk.row_source("r", (float("nan"),), 1.0, 1)
    with pytest.raises(ValueError, match="denominator"):
        rk.row_source("r", (1.0,), 0.0, 1)


def _loop_step(tableau: Tableau, h: float, y0: float) -> float:
    """One step of y' = y through the compiled loop's generated lines and stage functions (run as
    Python on one state row)."""
    stage, step = _tableau_blocks(tableau)
    S = tableau.stages
    K = np.zeros((S, 1))
    yv = np.array([y0])
    yt = np.empty(1)
    ns: dict = {}
    exec(rk.stage_source(tableau), ns)  # noqa: S102 - the loop's own generated text
    lines = ["for st in range(S):", "    if st == 0:", "        yt[0] = yv[0]"]
    lines += [ln[12:] for ln in stage.splitlines()]
    lines += ["    K[st, 0] = yt[0]"]
    lines += [ln[12:] for ln in step.splitlines()]
    exec("\n".join(lines), ns, {"S": S, "K": K, "yv": yv, "yt": yt, "n": 1, "hs": h})  # noqa: S102
    return float(yv[0])


def _numpy_step(tableau: Tableau, h: float, y0: float) -> float:
    """One step of y' = y as the numpy loop combines the stages."""
    fns = rk.stage_functions(tableau)
    y = np.array([y0])
    ks = [y.copy()]
    for i in range(1, tableau.stages):
        ks.append(fns.stage[i](y, h, *ks))
    return float(fns.step(y, h, *ks)[0])


@pytest.mark.parametrize("h", [0.5, 0.1, 0.01])
def test_kutta3_in_both_loops_gives_its_stability_function(h):
    # Hairer & Wanner 1996, sec. IV.2, eq. 2.12: R(z) = 1 + z + z^2/2 + z^3/6 for s = p = 3 (from memory)
    ref = 1 + h + h * h / 2 + h ** 3 / 6
    assert _loop_step(KUTTA3, h, 1.0) == pytest.approx(ref, rel=1e-15)
    assert _numpy_step(KUTTA3, h, 1.0) == _loop_step(KUTTA3, h, 1.0)       # to the digit


def _scaled(theta, a):
    """A test kernel reading a module global (its value is part of the loop's fingerprint)."""
    return a * SCALE + 0.0 * theta


SCALE = 1.0


def test_the_scheme_is_part_of_the_loop_and_its_key():
    parts = (Part("burn", "kernel", _scaled, ("a",)),)
    k_default, default = generate(parts)
    k3, text = generate(parts, tableau=KUTTA3)
    assert CYCLE_TABLEAU is KUTTA3 and (k_default, default) == (k3, text)
    cycle = text.split("def run_cycle(", 1)[1]
    # the loop calls the stage functions; their text is the numpy loop's, written in once
    assert "yt[k] = _rk_stage_2(yv[k], hs, K[0, k], K[1, k])" in cycle
    assert "yv[k] = _rk_step(yv[k], hs, K[0, k], K[1, k], K[2, k])" in cycle
    for src in rk.stage_source(KUTTA3).split("\n\n"):
        assert text.count(src) == 1
    assert " / 6.0" not in cycle and "ta_den[" not in cycle      # no stage arithmetic of the loop's own
    heun = Tableau(name="Heun", order=2, c=(0.0, 1.0), a=((), (1.0,)), a_den=(1.0, 1.0), b=(1.0, 1.0), b_den=2.0)
    assert generate(parts, tableau=heun)[0] != k3


def test_a_loop_module_is_found_once_per_process(tmp_path, monkeypatch):
    global SCALE
    monkeypatch.setenv(loopgen.CACHE_ENV, str(tmp_path))
    parts = (Part("burn", "kernel", _scaled, ("a",)),)
    first, fresh = loopgen.module_for(parts, tableau=KUTTA3)
    assert fresh
    for f in tmp_path.glob("index/*"):
        f.unlink()                                   # not read again: remembered in the process
    again, fresh2 = loopgen.module_for(parts, tableau=KUTTA3)
    assert again is first and not fresh2
    SCALE = 2.0                                      # a global the kernel reads changes: another loop
    try:
        other, _ = loopgen.module_for(parts, tableau=KUTTA3)
    finally:
        SCALE = 1.0
    assert other is not first


@settings(max_examples=100, deadline=None)
@given(st.integers(1, 6), st.one_of(st.floats(-1e9, 1e9), st.integers(-5, 5), st.booleans()),
       st.sampled_from(["scalar", "row", "one"]))
def test_per_case_copies_are_those_of_broadcast_to(B, x, shape):
    v = {"scalar": x, "row": np.full(B, x, dtype=float) * np.arange(1, B + 1), "one": np.array([x], float)}[shape]
    got = kernel._b(v, B)
    ref = np.array(np.broadcast_to(np.asarray(v, dtype=float), (B,)), dtype=float)
    assert got.dtype == np.float64 and got.shape == (B,) and got.flags.writeable and got.flags.owndata
    np.testing.assert_array_equal(got, ref)
    if isinstance(v, np.ndarray):
        assert not np.shares_memory(got, v)
