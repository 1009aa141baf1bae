"""Cycle-by-cycle traces of an engine with runners: every cycle carries the runners' state.

A trace cycle starts from the settled (mean) cycle's end state, cylinder and runners alike
(independent cycles), or from the end of the cycle before it (coupled cycles).  Checks:
- with no variation, a trace cycle is the settled cycle (the definition of the periodic steady
  state; common practice), within the settling tolerance, while the same cylinder state with
  the runners started at their plenum's state gives a visibly different cycle (so the check
  can fail);
- a drawn cycle gives the same figures alone and in the set's batch (each case's pipes on their
  own CFL steps, issue 22's rule);
- an interrupted coupled set resumes to the same result (the runners' rows are in the kept chunks).
"""

from __future__ import annotations

import numpy as np
import pytest

from cyclesim.api import _registry_for
from cyclesim.config import case_with, load_config
from cyclesim.traces import artefacts as art
from cyclesim.traces import synthesis as syn
from cyclesim.traces.synthesis import CycleVariation, synthesize

NO_SPREAD = dict(start_sd_deg=0.0, duration_cov=0.0, efficiency_sd=0.0, kernel_radius_cov=0.0, turbulence_cov=0.0,
                 partial_burn_rate=0.0, misfire_rate=0.0)


@pytest.fixture(scope="module")
def base():
    return load_config("demo_runners", ["simulation.step_deg=1.0"])


@pytest.fixture(scope="module")
def settled(base):
    from cyclesim.solve.batch import build_batch

    reg = _registry_for([base])
    batch = build_batch([base], reg)
    tr = syn.settle(batch)
    assert tr.converged[0]
    return reg, tr, syn._figures_of(batch, tr)[1]


def test_runner_state_rows_round_trip(base, settled):
    from cyclesim.pipes.runners import carry_runners
    from cyclesim.solve.batch import build_batch

    reg, tr, _ = settled
    rs = carry_runners(build_batch([base, base], reg))
    rows = np.repeat(tr.end_rows[tr.end_state.shape[0]:], 2, axis=1)
    assert rows.shape == (rs.n_state_rows, 2)
    rs.set_state_rows(rows)
    assert np.array_equal(rs.state_rows(), rows)
    with pytest.raises(ValueError):
        rs.set_state_rows(rows[:-1])


@pytest.mark.parametrize("coupled", [False, True])
def test_cycles_without_spread_repeat_the_settled_cycle(base, settled, coupled):
    reg, tr, mean = settled
    s = synthesize(base, 3, CycleVariation(coupled=coupled, **NO_SPREAD), resolution_deg=1.0,
                   artefacts=art.ArtefactSettings.none())
    for r in s.truth:
        # settled within the demo's tolerance; measured 2e-5 (the trace's finer synthesis grid)
        assert r["imep_net_bar"] == pytest.approx(float(mean["imep_net_bar"][0]), rel=2e-4)
        assert r["trapped_mass_mg"] == pytest.approx(float(mean["trapped_mass_mg"][0]), rel=2e-4)


def test_runners_started_at_their_plenum_give_another_cycle(base, settled):
    # what the carried rows prevent: the settled cylinder with fresh runners (measured -0.55 % in
    # net IMEP, -0.25 % in trapped mass)
    from cyclesim.pipes.runners import carry_runners
    from cyclesim.solve.batch import build_batch
    from cyclesim.solve.solver import integrate

    reg, tr, mean = settled
    batch = build_batch([base], reg)
    carry_runners(batch)
    fresh = integrate(batch, initial=tr.end_state.copy(), cycles=1)
    figs = syn._figures_of(batch, fresh)[1]
    assert abs(float(figs["imep_net_bar"][0]) / float(mean["imep_net_bar"][0]) - 1.0) > 2e-3


def test_a_drawn_cycle_gives_its_figures_alone_and_in_the_batch(base, settled):
    reg, tr, _ = settled
    var = CycleVariation(seed=5)
    s = synthesize(base, 3, var, resolution_deg=1.0, artefacts=art.ArtefactSettings.none())
    changes, _, _ = syn.draw_parameters(base, 3, var)
    for i, ch in enumerate(changes):
        _, _, _, figs = syn._run_cycles([case_with(base, ch)], reg, tr.end_rows[:, 0])
        for key in ("imep_net_bar", "p_max_bar", "trapped_mass_mg", "ca50_deg"):
            assert s.truth[i][key] == pytest.approx(float(np.asarray(figs[key])[0]), rel=1e-9), (i, key)


def test_interrupted_coupled_set_with_runners_resumes_to_the_same_result(base, tmp_path, monkeypatch):
    var = CycleVariation(seed=3, coupled=True)
    kw = dict(resolution_deg=1.0, artefacts=art.ArtefactSettings.none(), chunk=2)
    whole = synthesize(base, 4, var, **kw)
    from test_synthesis import interrupt_after

    real = syn._run_chain
    ck = tmp_path / "chunks"
    monkeypatch.setattr(syn, "_run_chain", interrupt_after(real, 1))
    with pytest.raises(KeyboardInterrupt):
        synthesize(base, 4, var, checkpoint_dir=ck, **kw)
    assert len(list(ck.glob("cycles_*.npz"))) == 1
    monkeypatch.setattr(syn, "_run_chain", real)
    again = synthesize(base, 4, var, checkpoint_dir=ck, **kw)
    assert [r["imep_net_bar"] for r in again.truth] == [r["imep_net_bar"] for r in whole.truth]
    assert np.array_equal(again.pressure_pa, whole.pressure_pa)
