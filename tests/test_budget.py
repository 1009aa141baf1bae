"""Bounded work: the documented ranges are the ones that run, and a run over the memory budget is
split (a batch) or refused in one line with its estimate and the option that reduces it, before
anything is allocated."""

from __future__ import annotations
from cli_helpers import error_lines

import subprocess
import sys

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import cyclesim
from cyclesim import api
from cyclesim.solve import budget
from cyclesim.solve.batch import build_batch
from cyclesim.solve.budget import BUDGET_ENV, WorkBudgetError, batch_bytes, cases_that_fit, steps_per_cycle
from cyclesim.config import case_with, load_config
from cyclesim.errors import ConfigError
from cyclesim.registry import get_registry

SPARK = "burn.spark_advance_deg"


def cli(*args, env=None):
    import os

    e = dict(os.environ, **(env or {}))
    return subprocess.run([sys.executable, "-m", "cyclesim", *args], capture_output=True, text=True,
                          timeout=600, env=e)


@pytest.mark.parametrize("speed", [10, 1, 0.001, 1e-300, 99.9])
def test_speeds_below_the_lowest_are_one_line(speed):
    # 10 rpm used to take 73 s and 6.2 GB, 0.001 rpm asked for 22 TiB, 1e-300 overflowed
    with pytest.raises(ConfigError, match=r"operating\.speed_rpm = .*: out of range, expected \[100, 30000\] rpm"):
        load_config("demo", [f"operating.speed_rpm={speed}"])


@pytest.mark.slow
def test_the_lowest_documented_speed_runs():
    res = cyclesim.run("demo", {"operating.speed_rpm": 100})
    assert res.ok and abs(res.summary["energy_balance"]["closure_fraction"]) < 1e-3


def _gib_for(case, n_cases: float) -> str:
    n = steps_per_cycle(case)
    return repr(batch_bytes(n, n_cases) / 2**30)


def test_a_batch_over_the_budget_is_split_and_gives_the_same_figures(monkeypatch):
    base = load_config("demo_closed", ["simulation.step_deg=1.0"])
    cases = [case_with(base, {SPARK: s}) for s in (10, 15, 20, 25, 30)]
    together = cyclesim.simulate(cases)
    sizes = []
    real = api._run_batch

    def recording(group, registry, progress=None):
        sizes.append(len(group))
        return real(group, registry, progress)

    monkeypatch.setattr(api, "_run_batch", recording)
    monkeypatch.setenv(BUDGET_ENV, _gib_for(base, 2.5))       # room for two cases at a time
    split = cyclesim.simulate(cases)
    assert sizes == [2, 2, 1]
    # a case's result does not depend on its batch-mates (architecture.md, batch first)
    for a, b in zip(together, split):
        assert b.ok and b.summary["imep_closed_bar"] == pytest.approx(a.summary["imep_closed_bar"], rel=1e-12)


def test_one_case_over_the_budget_is_refused_before_allocating(monkeypatch):
    base = load_config("demo_closed", ["simulation.step_deg=1.0"])
    monkeypatch.setenv(BUDGET_ENV, _gib_for(base, 0.5))       # not even one case fits
    res = cyclesim.simulate([base, case_with(base, {SPARK: 20})])
    for r in res:
        assert not r.ok and "more than the budget of" in r.error and BUDGET_ENV in r.error
        assert "raise simulation.step_deg" in r.error
    with pytest.raises(WorkBudgetError):
        cyclesim.run(base)
    with pytest.raises(WorkBudgetError, match="needs about .* of memory"):
        build_batch([base], get_registry(()))                 # every path through a batch (engine, traces)


def test_command_line_refusals_are_one_line(tmp_path, monkeypatch, capsys):
    # the command line's own entry (cyclesim.cli.main, what ``python -m cyclesim`` exits with), in
    # this process: one line on stderr, nothing on stdout, no warning, status 2
    import warnings

    from cyclesim.cli import main

    for args, env, words in [
        (("run", "demo", "--set", "simulation.step_deg=0.01", "--set", "operating.speed_rpm=100"), None,
         "one case at 100 rpm (18,432,000 crank steps per cycle) needs about"),
        (("traces", "demo", "--cycles", "100000000", "--out", str(tmp_path / "a")), None,
         "traces: 100,000,000 cycles"),
        (("traces", "demo", "--sample-rate", "1e12", "--out", str(tmp_path / "b")), None,
         "even one cycle is over it"),
        (("run", "demo"), {BUDGET_ENV: "lots"}, f"{BUDGET_ENV}='lots': expected a number of GiB > 0"),
    ]:
        with monkeypatch.context() as m:
            for k, v in (env or {}).items():
                m.setenv(k, v)
            with warnings.catch_warnings(record=True) as seen:
                warnings.simplefilter("always")
                rc = main(list(args))
        out, err = capsys.readouterr()
        lines = error_lines(err)
        assert rc == 2 and len(lines) == 1 and words in lines[0], (args, err)
        assert out == "" and not seen, (args, out, [str(w.message) for w in seen])
    assert not (tmp_path / "a").exists() and not (tmp_path / "b").exists()
    # and as a process of its own, for one of them: the same line, status 2
    r = cli("run", "demo", env={BUDGET_ENV: "lots"})
    assert r.returncode == 2 and r.stderr.strip().splitlines() == [lines[0]]


def test_traces_within_the_budget_pass_the_check():
    budget.check_traces(100, 14401, 1441)          # the default request: about 0.3 GB


@settings(max_examples=200, deadline=None)
@given(n=st.integers(8, 50_000_000), budget_gib=st.floats(0.01, 64.0))
def test_cases_that_fit_is_the_most_that_fit(n, budget_gib):
    # invariant: k cases are estimated within the budget and k + 1 are not
    b = budget_gib * 2**30
    k = cases_that_fit(n, b)
    assert k >= 0 and batch_bytes(n, k + 1) > b
    if k >= 1:
        assert batch_bytes(n, k) <= b


def test_trace_cycles_per_batch_follow_the_budget(monkeypatch):
    fast = load_config("demo")
    slow = load_config("demo", ["operating.speed_rpm=100"])
    assert budget.trace_chunk(fast, 100, 14401, 1441, 150) == 150
    k = budget.trace_chunk(slow, 100, 14401, 1441, 150)
    n = steps_per_cycle(slow)
    left = budget.budget_bytes() - budget.trace_bytes(100, 14401, 1441)
    assert 1 <= k < 150 and batch_bytes(n, k) <= left + budget.SIM_BASE_BYTES
    monkeypatch.setenv(BUDGET_ENV, "0.5")
    with pytest.raises(WorkBudgetError, match="traces: 100 cycles at 100 rpm"):
        budget.trace_chunk(slow, 100, 14401, 1441, 150)


def test_a_bad_budget_setting_is_raised_once_not_recorded_per_case(monkeypatch):
    monkeypatch.setenv(BUDGET_ENV, "-1")
    with pytest.raises(ConfigError, match=rf"{BUDGET_ENV}='-1': expected a number of GiB > 0"):
        cyclesim.simulate([load_config("demo_closed")], isolate=True)
