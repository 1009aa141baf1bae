"""The Runge-Kutta scheme written out in a generated cycle loop, and the loop found once per process.

Checked against: the stages of the numpy loop (cyclesim.solve.stepper.combine) and the template's
generic combination (cyclesim.loops._compiled._weighted), which the written-out rows must match to
the digit; and, as an outside reference, the stability function of Kutta's third-order scheme on
y' = y, which for an explicit method of three stages and order three is the Taylor polynomial
1 + h + h^2/2 + h^3/6 (Hairer & Wanner 1996, Solving Ordinary Differential Equations II, 2nd ed.,
sec. IV.2, eq. 2.12; from memory).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cyclesim.loops import loopgen
from cyclesim.loops.loopgen import LoopGenError, Part, _tableau_blocks, _weighted_text, generate
from cyclesim.solve import kernel
from cyclesim.solve.stepper import KUTTA3, Tableau, combine

pytest.importorskip("numba")

from cyclesim.loops._compiled import _weighted  # noqa: E402 - needs numba

COEF = st.sampled_from([0.0, 1.0, -1.0, 2.0, 4.0, 0.5, -0.375, 1.0 / 3.0])


def _eval(expr: str, K: np.ndarray, k: int) -> float:
    return eval(expr, {}, {"K": K, "k": k})  # noqa: S307 - the loop's own generated text


@settings(max_examples=200, deadline=None)
@given(st.lists(COEF, min_size=1, max_size=5),
       st.lists(st.floats(-1e6, 1e6, allow_nan=False), min_size=5, max_size=5))
def test_a_written_out_row_sums_as_the_generic_loop_and_the_numpy_stages(coefs, ks):
    s = len(coefs)
    K = np.array(ks[:s], dtype=float).reshape(s, 1)
    got = _eval(_weighted_text(coefs, s), K, 0)
    assert got == _weighted.py_func(np.array(coefs), K, s, 0)       # to the digit
    y = np.array([0.25])
    ref = combine(y, 0.5, coefs, 1.0, [K[q] for q in range(s)])
    assert y[0] + 0.5 * got == ref[0]


def test_an_all_zero_row_adds_nothing():
    assert _weighted_text((0.0, 0.0), 2) == "0.0"
    with pytest.raises(LoopGenError, match="not finite"):
        _weighted_text((float("nan"),), 1)


def _one_step(tableau: Tableau, h: float, y0: float) -> float:
    """One step of y' = y through the generated lines (run as Python on one state row)."""
    stage, step = _tableau_blocks(tableau)
    S = len(tableau.a)
    K = np.zeros((S, 1))
    yv = np.array([y0])
    yt = np.empty(1)
    n, hs = 1, h
    lines = ["for st in range(S):", "    if st == 0:", "        yt[0] = yv[0]"]
    lines += [ln[12:] for ln in stage.splitlines()]
    lines += ["    K[st, 0] = yt[0]"]
    lines += [ln[12:] for ln in step.splitlines()]
    exec("\n".join(lines), {}, {"S": S, "K": K, "yv": yv, "yt": yt, "n": n, "hs": hs})  # noqa: S102
    return float(yv[0])


@pytest.mark.parametrize("h", [0.5, 0.1, 0.01])
def test_kutta3_written_out_gives_its_stability_function(h):
    # Hairer & Wanner 1996, sec. IV.2, eq. 2.12: R(z) = 1 + z + z^2/2 + z^3/6 for s = p = 3 (from memory)
    assert _one_step(KUTTA3, h, 1.0) == pytest.approx(1 + h + h * h / 2 + h ** 3 / 6, rel=1e-15)


def _scaled(theta, a):
    """A test kernel reading a module global (its value is part of the loop's fingerprint)."""
    return a * SCALE + 0.0 * theta


SCALE = 1.0


def test_the_scheme_is_part_of_the_loop_and_its_key():
    parts = (Part("burn", "kernel", _scaled, ("a",)),)
    _, generic = generate(parts)
    k3, text = generate(parts, tableau=KUTTA3)
    assert "_weighted(" in generic and "_weighted(" not in text.split("def run_cycle(", 1)[1]
    assert "yt[k] = yv[k] + f * ((-1.0) * K[0, k] + (2.0) * K[1, k])" in text
    assert "fb = hs / 6.0" in text
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
