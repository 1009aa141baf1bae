"""Synthetic cycle sets: seeded variation, exact truth, statistics that mean what they say."""

from __future__ import annotations

import numpy as np
import pytest

from cyclesim.config import load_config
from cyclesim.traces import artefacts as art
from cyclesim.traces.synthesis import CycleVariation, set_statistics, synthesize

FAST = ["simulation.step_deg=1.0", "simulation.max_cycles=6"]


@pytest.fixture(scope="module")
def base():
    return load_config("demo", FAST)


@pytest.fixture(scope="module")
def spread(base):
    return synthesize(base, 16, CycleVariation(start_sd_deg=2.0, duration_cov=0.1, seed=4),
                      resolution_deg=1.0, artefacts=art.ArtefactSettings.none())


def test_cov_equals_an_independent_computation_from_the_truth(spread):
    imep = np.array([r["imep_net_bar"] for r in spread.truth])
    # COV = sample standard deviation / mean (common practice; Heywood 1988 sec. 9.4)
    assert spread.stats["cov_imep_net"] == pytest.approx(np.std(imep, ddof=1) / np.mean(imep), rel=1e-12)
    assert 0.002 < spread.stats["cov_imep_net"] < 0.1


def test_cov_rises_with_spread_and_vanishes_without_it(base, spread):
    wider = synthesize(base, 16, CycleVariation(start_sd_deg=4.0, duration_cov=0.2, seed=4),
                       resolution_deg=1.0, artefacts=art.ArtefactSettings.none())
    none = synthesize(base, 6, CycleVariation(start_sd_deg=0.0, duration_cov=0.0, efficiency_sd=0.0),
                      resolution_deg=1.0, artefacts=art.ArtefactSettings.none())
    assert wider.stats["cov_imep_net"] > spread.stats["cov_imep_net"]
    # zero spread: every cycle is the mean cycle, to solver accuracy
    assert none.stats["cov_imep_net"] < 1e-6


def test_truth_is_consistent_with_the_true_trace(spread):
    th = spread.theta
    P = spread.pressure_true_pa
    for i, row in enumerate(spread.truth[:4]):
        # peak pressure of the true trace on the output grid is at most the interpolated truth
        assert P[i].max() / 1e5 <= row["p_max_bar"] * (1 + 1e-6)
        assert P[i].max() / 1e5 == pytest.approx(row["p_max_bar"], rel=5e-3)
        assert abs(th[np.argmax(P[i])] - row["theta_pmax_deg"]) <= 1.0
    # without artefacts the measured signal is the true pressure
    assert np.allclose(spread.pressure_pa, spread.pressure_true_pa, rtol=1e-9, atol=1e-3)


def test_seeded_and_reproducible(base):
    v = CycleVariation(seed=11)
    a = synthesize(base, 3, v, resolution_deg=1.0, artefacts=art.ArtefactSettings.default())
    b = synthesize(base, 3, v, resolution_deg=1.0, artefacts=art.ArtefactSettings.default())
    assert np.array_equal(a.pressure_pa, b.pressure_pa)
    assert a.truth == b.truth or all(
        all((x == y) or (x != x and y != y) for x, y in zip(ra.values(), rb.values()))
        for ra, rb in zip(a.truth, b.truth))


def test_misfires_and_partial_burns_are_flagged(base):
    s = synthesize(base, 8, CycleVariation(misfire_rate=0.3, partial_burn_rate=0.4, seed=7),
                   resolution_deg=1.0, artefacts=art.ArtefactSettings.none())
    mis = [r for r in s.truth if r["misfire"]]
    par = [r for r in s.truth if r["partial_burn"]]
    full = [r for r in s.truth if not r["misfire"] and not r["partial_burn"]]
    assert mis and par and full
    for r in mis:
        assert np.isnan(r["ca50_deg"]) and r["heat_release_J"] == pytest.approx(0.0, abs=1e-9)
        assert r["imep_net_bar"] < 0.3 * np.mean([f["imep_net_bar"] for f in full])
    assert max(r["heat_release_J"] for r in par) < min(r["heat_release_J"] for r in full)
    assert s.stats["misfire_share"] == pytest.approx(len(mis) / 8)


def test_coupled_cycles_carry_the_residual(base):
    """After a misfire the next cycle starts with fresh charge left over (less residual, more fuel)."""
    s = synthesize(base, 4, CycleVariation(misfire_rate=0.5, seed=5, coupled=True),
                   resolution_deg=1.0, artefacts=art.ArtefactSettings.none())
    flags = [r["misfire"] for r in s.truth]
    assert any(flags) and not all(flags)
    for k in range(1, 4):
        if flags[k - 1] and not flags[k]:
            # the misfired cycle pushed out unburned mixture and kept some: the following cycle's
            # residual (burned gas at IVC) is lower than in the independent set (common practice)
            assert s.truth[k]["residual_fraction"] < 0.9 * s.truth[0]["residual_fraction"] or flags[0]


def test_coupling_moves_residual_and_trapped_mass_not_the_wiebe_burn_phasing(base):
    """What `--coupled` changes with the demo's fixed-duration Wiebe burn (its help says so).

    The Wiebe burned fraction is a function of crank angle alone (Wiebe 1970; Heywood 1988
    eq. 9.21, from memory): start and duration are drawn per cycle and do not depend on the
    residual, so the mass-burned CA50 of a coupled set equals the independent set's cycle by
    cycle, while the residual gas and trapped mass differ.
    """
    var = dict(start_sd_deg=3.0, duration_cov=0.15, misfire_rate=0.3, seed=7)
    a = synthesize(base, 5, CycleVariation(**var), resolution_deg=1.0, artefacts=art.ArtefactSettings.none())
    b = synthesize(base, 5, CycleVariation(coupled=True, **var), resolution_deg=1.0,
                   artefacts=art.ArtefactSettings.none())
    ca_a = np.array([r["ca50_deg"] for r in a.truth])
    ca_b = np.array([r["ca50_deg"] for r in b.truth])
    assert np.allclose(ca_a, ca_b, atol=1e-6, equal_nan=True)
    xr_a = np.array([r["residual_fraction"] for r in a.truth])
    xr_b = np.array([r["residual_fraction"] for r in b.truth])
    m_a = np.array([r["trapped_mass_mg"] for r in a.truth])
    m_b = np.array([r["trapped_mass_mg"] for r in b.truth])
    # measured: residual up to 1.5 % (relative) apart, trapped mass up to 0.08 %
    print(f"coupled - independent: residual {np.max(np.abs(xr_b / xr_a - 1)):.2e}, trapped mass"
          f" {np.max(np.abs(m_b / m_a - 1)):.2e} (largest relative)")
    assert np.max(np.abs(xr_b / xr_a - 1)) > 5e-3 and np.max(np.abs(m_b / m_a - 1)) > 2e-4


def test_set_statistics_from_rows():
    rows = [{"imep_net_bar": v, "imep_gross_bar": v, "p_max_bar": 50.0, "theta_pmax_deg": 15.0,
             "ca10_deg": 0.0, "ca50_deg": 9.0, "ca90_deg": 20.0, "misfire": False, "partial_burn": False,
             "knock_onset_deg": (5.0 if i == 0 else float("nan"))} for i, v in enumerate((9.0, 10.0, 11.0))]
    st = set_statistics(rows)
    assert st["cov_imep_net"] == pytest.approx(1.0 / 10.0)
    assert st["knocking_share"] == pytest.approx(1 / 3)


def interrupt_after(real, calls: int):
    """``real`` that raises KeyboardInterrupt on its call after ``calls`` calls (a user's Ctrl-C
    between two chunks of a set)."""
    done = {"n": 0}

    def wrapped(*a, **k):
        done["n"] += 1
        if done["n"] > calls:
            raise KeyboardInterrupt
        return real(*a, **k)

    return wrapped


def test_interrupted_set_resumes_to_the_same_result(base, tmp_path, monkeypatch):
    from cyclesim.traces import synthesis as syn

    var = CycleVariation(seed=9)
    whole = synthesize(base, 6, var, resolution_deg=1.0, artefacts=art.ArtefactSettings.default(), chunk=2)
    ck = tmp_path / "chunks"
    real = syn._run_cycles
    monkeypatch.setattr(syn, "_run_cycles", interrupt_after(real, 2))
    with pytest.raises(KeyboardInterrupt):
        synthesize(base, 6, var, resolution_deg=1.0, artefacts=art.ArtefactSettings.default(), chunk=2,
                   checkpoint_dir=ck)
    assert len(list(ck.glob("cycles_*.npz"))) == 2           # two whole chunks kept, nothing half-written
    monkeypatch.setattr(syn, "_run_cycles", real)
    again = synthesize(base, 6, var, resolution_deg=1.0, artefacts=art.ArtefactSettings.default(), chunk=2,
                       checkpoint_dir=ck)
    assert np.array_equal(again.pressure_pa, whole.pressure_pa)
    assert [r["cycle"] for r in again.truth] == [1, 2, 3, 4, 5, 6]
    assert [r["imep_net_bar"] for r in again.truth] == [r["imep_net_bar"] for r in whole.truth]


def test_fine_grid_interpolation_equals_the_solver_hermite_interpolant():
    # reference: cyclesim.solve.solver.hermite_grid (all rows at once) on a non-uniform solver grid with
    # a coarser closed-valve part; the row-by-row fine-grid path must give the same values
    from cyclesim.solve.solver import hermite_grid
    from cyclesim.solve.hermite import HermiteBasis

    rng = np.random.default_rng(8)
    th = np.concatenate([np.arange(-360.0, -120.0, 0.5), np.arange(-120.0, 120.0, 2.0), np.arange(120.0, 360.01, 0.5)])
    Y, F = rng.standard_normal((2, 5, th.size))
    grid = np.linspace(-360.0, 360.0, 7201)
    ref = hermite_grid(th, Y, F, grid)
    fg = HermiteBasis(th, grid)
    out = np.empty_like(ref)
    for b in range(5):
        fg.row(Y[b], F[b], out[b])
    assert np.array_equal(fg.rows(Y, F), ref)      # all rows at once: the same digits
    assert np.allclose(out, ref, rtol=0, atol=1e-13)
    at_node = np.isin(grid, th)
    assert at_node.sum() > 1000 and np.array_equal(out[:, at_node], Y[:, np.isin(th, grid)])   # the nodes' values


def test_coupled_chain_equals_cycle_by_cycle_run(base):
    """The batched chain iteration converges to the cycle-by-cycle chain (its fixed point)."""
    from cyclesim.api import _registry_for
    from cyclesim.config import case_with
    from cyclesim.traces import synthesis as syn

    var = CycleVariation(misfire_rate=0.3, partial_burn_rate=0.2, seed=11, coupled=True)
    n = 7
    s = synthesize(base, n, var, resolution_deg=1.0, artefacts=art.ArtefactSettings.none(), chunk=3)
    assert s.settings["coupled_chain"]["sweeps_per_chunk"] and len(s.settings["coupled_chain"]["sweeps_per_chunk"]) == 3
    # the definition: each cycle alone, from the end state of the one before
    reg = _registry_for([base])
    state = syn._steady_state(base, reg).end_state[:, 0]
    changes, _, _ = syn.draw_parameters(base, n, var)
    for i, ch in enumerate(changes):
        _, tr, _, figs = syn._run_cycles([case_with(base, ch)], reg, state)
        state = tr.end_state[:, 0]
        for key in ("imep_net_bar", "p_max_bar", "trapped_mass_mg", "residual_fraction"):
            assert s.truth[i][key] == pytest.approx(float(np.asarray(figs[key])[0]), rel=1e-9), (i, key)
