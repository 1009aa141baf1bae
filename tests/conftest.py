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
