"""Shared fixtures: cheap configs for fast tests."""

from __future__ import annotations

import pytest

import cyclesim
from cyclesim.config import load_config


@pytest.fixture(scope="session")
def demo_case():
    return load_config("demo")


def fast(overrides=()):
    """The demo with a coarser step and few cycles, for tests that check plumbing not accuracy."""
    return load_config("demo", ["simulation.step_deg=1.0", "simulation.max_cycles=8", *overrides])


@pytest.fixture(scope="session")
def demo_result():
    """The built-in demo at its default settings (computed once per session)."""
    return cyclesim.run("demo")


@pytest.fixture(scope="session")
def closed_result(shared_runs):
    """The built-in closed-cycle demo as shipped (one run per session, shared)."""
    return shared_runs.run("demo_closed")


class SharedRuns:
    """Simulations made once per session and read by several tests (the two-zone and the NO tests).

    ``run(config, overrides)`` is :func:`cyclesim.run`; ``batch(config, overrides_list)`` runs one
    case per overrides list as one batch (build_batch, integrate, results_from_trace) and returns
    ``(results, the batch's models)`` for tests that read a model's own record (the NO model's zones
    and burned-mass elements).  Tests only read what they get; one that must change a model
    restores it.
    """

    def __init__(self):
        self._memo = {}
        self.made = 0          # simulations actually run (a test checks the sharing)

    def run(self, config, overrides=()):
        key = ("run", str(config), tuple(overrides))
        if key not in self._memo:
            self._memo[key] = cyclesim.run(config, list(overrides))
            self.made += 1
        return self._memo[key]

    def batch(self, config, overrides_list):
        key = ("batch", str(config), tuple(tuple(o) for o in overrides_list))
        if key not in self._memo:
            from cyclesim.api import results_from_trace
            from cyclesim.registry import get_registry
            from cyclesim.solve.batch import build_batch
            from cyclesim.solve.solver import integrate

            cases = [load_config(config, list(o)) for o in overrides_list]
            reg = get_registry(())
            b = build_batch(cases, reg)
            self._memo[key] = (results_from_trace(b, integrate(b), reg), b.models)
            self.made += 1
        return self._memo[key]


@pytest.fixture(scope="session")
def shared_runs():
    """The session's :class:`SharedRuns`."""
    return SharedRuns()


# --- loop-combination counter (test-only; on with CYCLESIM_COUNT_LOOPS=1) --------------------
# Each distinct combination of model kernels is a generated cycle loop that numba compiles once
# (seconds) and then loads from its disk cache. With CYCLESIM_COUNT_LOOPS=1 the session ends with
# how many combinations this process loaded, how many were not yet compiled, and the test that
# first needed each one: tests that could share a combination show up here. Subprocesses (CLI,
# sweep workers) are not counted.
import os as _os

_loops_seen: dict = {}
_current_test = [""]


def pytest_configure(config):
    if _os.environ.get("CYCLESIM_COUNT_LOOPS") != "1":
        return
    from cyclesim.loops import loopgen
    from cyclesim.solve import kernel

    inner = loopgen.module_for

    def counted(parts, forms=None, tableau=None):
        mod, fresh = inner(parts, forms, tableau)
        if mod.__name__ not in _loops_seen:
            _loops_seen[mod.__name__] = (_current_test[0], fresh or not kernel._cached(mod))
        return mod, fresh

    loopgen.module_for = counted


@pytest.hookimpl(tryfirst=True)
def pytest_runtest_setup(item):
    _current_test[0] = item.nodeid


def pytest_terminal_summary(terminalreporter):
    if _os.environ.get("CYCLESIM_COUNT_LOOPS") != "1":
        return
    tr = terminalreporter
    new = sum(1 for _, compiled in _loops_seen.values() if compiled)
    tr.write_line(f"loop combinations loaded: {len(_loops_seen)} (not yet compiled: {new})")
    for name, (test, compiled) in _loops_seen.items():
        tr.write_line(f"  {name} {'COMPILE' if compiled else 'cached '} first in {test}")
