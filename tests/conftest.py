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
def closed_result():
    return cyclesim.run("demo_closed")
