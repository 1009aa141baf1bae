"""The periodic-steady-state driver (cyclesim.solve.periodic) and Anderson acceleration (cyclesim.solve.anderson)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import cyclesim
from cyclesim.solve.anderson import Anderson
from cyclesim.api import _registry_for
from cyclesim.solve.batch import build_batch
from cyclesim.config import load_config
from cyclesim.solve.solver import integrate


def _linear_problem(rng, n, radius):
    """x = A x + c with A of spectral radius ``radius`` (symmetric, eigenvalues chosen)."""
    Q, _ = np.linalg.qr(rng.standard_normal((n, n)))
    lam = np.linspace(-radius, radius, n)
    A = Q @ np.diag(lam) @ Q.T
    c = rng.standard_normal(n)
    return A, c, np.linalg.solve(np.eye(n) - A, c)


def test_anderson_solves_a_linear_map_in_about_n_steps_where_plain_iteration_crawls():
    # Walker & Ni (2011), SIAM J. Numer. Anal. 49(4), Theorem 2.2: without truncation Anderson
    # acceleration of a linear fixed-point map is equivalent to GMRES, which on an n x n system
    # is exact after at most n steps (to rounding)
    rng = np.random.default_rng(3)
    n = 3
    A, c, x_star = _linear_problem(rng, n, 0.95)
    aa = Anderson(memory=n)
    x = np.zeros((n, 1))
    for _ in range(n + 2):
        x = aa.step(x, A @ x + c[:, None])
    assert np.abs(x[:, 0] - x_star).max() < 1e-10 * np.abs(x_star).max()
    y = np.zeros(n)
    for _ in range(n + 2):
        y = A @ y + c
    assert np.abs(y - x_star).max() > 0.1 * np.abs(x_star).max()     # 0.95^5 of the start's error


@settings(max_examples=20, deadline=None)
@given(st.integers(min_value=1, max_value=4), st.integers(min_value=2, max_value=6), st.integers(0, 10_000))
def test_anderson_iterates_of_a_case_do_not_depend_on_its_batch_mates(memory, batch, seed):
    # each case's least-squares problem is its own: the stacked iteration equals the iteration
    # of each case alone, bit for bit
    rng = np.random.default_rng(seed)
    n = 4
    probs = [_linear_problem(rng, n, 0.9) for _ in range(batch)]
    together = Anderson(memory)
    alone = [Anderson(memory) for _ in range(batch)]
    X = np.zeros((n, batch))
    xs = [np.zeros((n, 1)) for _ in range(batch)]
    for _ in range(6):
        # the same map arithmetic for both (a column at a time)
        FX = np.concatenate([A @ X[:, b:b + 1] + c[:, None] for b, (A, c, _) in enumerate(probs)], axis=1)
        X = together.step(X, FX)
        xs = [alone[b].step(xs[b], A @ xs[b] + c[:, None]) for b, (A, c, _) in enumerate(probs)]
    assert np.array_equal(X, np.concatenate(xs, axis=1))


def test_anderson_reset_forgets_a_case_history_only():
    rng = np.random.default_rng(5)
    A, c, _ = _linear_problem(rng, 3, 0.9)
    aa = Anderson(2)
    X = np.zeros((3, 2))
    for _ in range(3):
        X = aa.step(X, A @ X + c[:, None])
    aa.reset(np.array([True, False]))
    FX = A @ X + c[:, None]
    nxt = aa.step(X, FX)
    assert np.array_equal(nxt[:, 0], FX[:, 0])        # no history: a plain step
    assert not np.allclose(nxt[:, 1], FX[:, 1])


SPEEDS = (800, 3000, 6000)
CONFIGS = ("demo", "demo_turbo", "demo_part_load")


def _run(cfg, n, method, tol=None, spark=None):
    over = [f"operating.speed_rpm={n}", f"simulation.periodic={method}"]
    if tol is not None:
        over.append(f"simulation.tolerance={tol}")
    if spark is not None:
        over.append(f"burn.spark_advance_deg={spark}")
    return load_config(cfg, over)


def _trace(cases):
    return integrate(build_batch(cases, _registry_for(cases)))


@pytest.mark.parametrize("tol", [None, 1e-7])
def test_figures_agree_with_plain_repetition_within_the_settling_tolerance(tol):
    # the two methods reach the same periodic state: net IMEP and trapped mass (the settled
    # figures) within the tolerance, on the three full-cycle demo configs at three speeds; at the
    # tighter tolerance the acceleration acts on some of them (else the test would compare
    # plain with plain)
    accelerated = 0
    for cfg in CONFIGS:
        for n in SPEEDS:
            p, a = cyclesim.simulate([_run(cfg, n, "plain", tol), _run(cfg, n, "anderson", tol)])
            assert p.error is None and a.error is None
            t = 5e-4 if tol is None else tol
            for key in ("imep_net_bar", "trapped_mass_mg"):
                assert abs(a.summary[key] / p.summary[key] - 1) < t, (cfg, n, key)
            assert not [w for w in a.warnings if "not settled" in w]
            accelerated += int(_trace([_run(cfg, n, "anderson", tol)]).accelerated[0])
    if tol is not None:
        assert accelerated > 0


def test_acceleration_takes_fewer_cycles_where_plain_repetition_settles_slowly():
    # part load at 800 rpm and a tight tolerance: plain repetition shrinks the change about
    # tenfold per cycle or less
    plain = _trace([_run("demo_part_load", 800, "plain", 1e-9)])
    fast = _trace([_run("demo_part_load", 800, "anderson", 1e-9)])
    assert plain.accelerated[0] == 0 and fast.accelerated[0] > 0
    assert fast.converged[0] and plain.converged[0]
    assert fast.cycles[0] < plain.cycles[0]
    # the reported cycle began from the end state of the cycle before it (a plain cycle)
    assert not fast.reported_from_accelerated[0]


def test_an_accelerated_case_gives_the_same_result_alone_and_in_a_batch():
    solo = _trace([_run("demo_part_load", 800, "anderson", 1e-9, spark=25)])
    mates = _trace([_run("demo_part_load", 800, "anderson", 1e-9, spark=a) for a in (10, 25, 40)])
    assert solo.accelerated[0] > 0
    assert solo.cycles[0] == mates.cycles[1]
    assert np.array_equal(solo.Y[:, 0], mates.Y[:, 1])


def test_a_fixed_cycle_count_is_never_accelerated():
    c = [_run("demo", 800, "anderson", 1e-9)]
    tr = integrate(build_batch(c, _registry_for(c)), cycles=6)
    assert tr.accelerated[0] == 0 and tr.cycles[0] == 6
