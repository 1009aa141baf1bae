"""Intake and exhaust runners solved in one dimension inside the cycle (cyclesim.pipes.runners).

Checks:
- config: intake.runner / exhaust.runner validated (none by default), one-line errors;
- conservation: the mass, enthalpy and burned mass the cylinder books through each valve over a
  cycle equal the sums of the pipe's boundary fluxes at the valve to 1e-10 (the coupling's
  contract, cyclesim.solve.coupling; a first-law identity, Heywood 1988 sec. 14.4, eq. 14.32);
- a case gives the same result alone and in a batch (each case's CFL sub-steps are its own;
  architecture: batch first);
- very short runners (1 mm, 4 cells, no entry loss, port buffer off on both sides) give the plenum
  result within 0.5 % in volumetric efficiency: a pipe much shorter than the wavelength
  (f L / c << 1) is a lumped connection at the plenum's state (Heywood 1988 sec. 7.6: the
  intake's wave action scales with L / c; from memory);
- with runners the settled state is periodic: the cycle means of the runners' valve-end
  pressures and mass repeat within the tolerance (their state at the cycle's start less closely:
  the waves of the cycles before still run, a 1-D open end reflects them without loss), in at most
  6 cycles by plain repetition (issue 23's bound with runners);
- the compiled cycle loop with runners (cyclesim.pipes.loop_step) gives the numpy loop's results
  within 1e-9 in every summary figure and trace column (the numpy loop is the reference: the same
  pipe kernels, the cylinder on numpy arrays); conservation and "alone = in a batch" hold on both;
- tuning: tests/test_runner_tuning.py (the Helmholtz estimate, exponent -1/2, stated before the
  full-resolution study; the organ-pipe estimate -1 stated before the quick run was refuted by
  it: -0.48 from speeds 1000 rpm apart, outside +-0.2 of -1).
"""

from __future__ import annotations

import copy
import importlib.util
import subprocess
import sys

import numpy as np
import pytest

import cyclesim
from cyclesim.errors import ConfigError
from cyclesim.registry import get_registry
from cyclesim.solve.batch import build_batch
from cyclesim.solve.solver import integrate

RUN = ["intake.runner.length_mm=300", "intake.runner.diameter_mm=38", "exhaust.runner.length_mm=400",
       "exhaust.runner.diameter_mm=34"]


def _case(over=(), speed=None):
    ov = list(RUN) + list(over)
    if speed is not None:
        ov.append(f"operating.speed_rpm={speed}")
    return cyclesim.load_config("demo", ov)


def _integrate(cases, **kw):
    batch = build_batch(cases, get_registry(()))
    return batch, integrate(batch, **kw)


HAS_NUMBA = importlib.util.find_spec("numba") is not None
PATHS = [pytest.param("auto", marks=pytest.mark.skipif(not HAS_NUMBA, reason="numba not installed")), "python"]
"""The compiled loop (auto, with numba) and the numpy loop (CYCLESIM_KERNEL=python)."""


def _on_path(monkeypatch, path):
    import cyclesim.solve.kernel as kernel

    monkeypatch.setenv(kernel.ENV, path)
    return "compiled" if path == "auto" else "numpy (CYCLESIM_KERNEL=python)"


# -- config ---------------------------------------------------------------------------------------
def test_runner_keys_default_none_and_validated():
    c = cyclesim.load_config("demo")
    assert c.runners == {"intake": None, "exhaust": None}
    c = cyclesim.load_config("demo", ["intake.runner.length_mm=250", "intake.runner.cell_mm=10"])
    assert c.runners["intake"].n_cells == 25 and c.runners["exhaust"] is None
    assert cyclesim.load_config("demo", ["intake.runner=none"]).runners["intake"] is None
    with pytest.raises(ConfigError, match="intake.runner.length_mm"):
        cyclesim.load_config("demo", ["intake.runner.diameter_mm=30"])
    with pytest.raises(ConfigError, match="intake.runner.lenght_mm: unknown key"):
        cyclesim.load_config("demo", ["intake.runner.lenght_mm=30"])
    with pytest.raises(ConfigError, match="exhaust.runner.cells"):
        cyclesim.load_config("demo", ["exhaust.runner.length_mm=300", "exhaust.runner.cells=2"])


def test_cli_error_is_one_line():
    r = subprocess.run([sys.executable, "-m", "cyclesim", "run", "demo", "--set", "intake.runner.length_mm=-5"],
                       capture_output=True, text=True)
    assert r.returncode == 2
    assert "Traceback" not in r.stderr and len(r.stderr.strip().splitlines()) == 1


# -- conservation, batch independence ---------------------------------------------------------------
@pytest.mark.parametrize("path", PATHS)
def test_valve_flows_equal_the_pipe_fluxes_per_cycle(monkeypatch, path):
    loop = _on_path(monkeypatch, path)
    batch, tr = _integrate([_case()], cycles=2)
    assert tr.loop == loop
    rec = tr.runners
    I = {n: i for i, n in enumerate(tr.names)}
    f = rec["flows"]
    for j, side in enumerate(rec["sides"]):
        key = "int" if side == "intake" else "exh"
        m_cyl = tr.Y[I[f"m_{key}"], 0, -1]
        H_cyl = tr.Y[I[f"H_{key}"], 0, -1]
        mu_cyl = tr.Y[I[f"mu_{key}"], 0, -1]
        m_pipe, H_pipe, mb_pipe = f["mass_kg"][0, j], f["enthalpy_J"][0, j], f["burned_mass_kg"][0, j]
        scale = abs(tr.Y[0, 0, 0])              # the cylinder's mass at the cycle's start
        assert abs(m_cyl - m_pipe) < 1e-10 * scale
        assert abs(mu_cyl - (m_pipe - mb_pipe)) < 1e-10 * scale
        assert abs(H_cyl - H_pipe) < 1e-10 * scale * 3e6      # J: mass scale times ~3 MJ/kg
    assert abs(f["mass_kg"][0, 0]) > 1e-4                    # the intake did carry the charge


@pytest.mark.parametrize("path", PATHS)
def test_case_alone_equals_case_in_batch(monkeypatch, path):
    loop = _on_path(monkeypatch, path)
    a, b = _case(speed=3000), _case(["intake.runner.length_mm=450"], speed=4500)
    _, alone = _integrate([b], cycles=2)
    _, both = _integrate([a, b], cycles=2)
    assert alone.loop == both.loop == loop
    np.testing.assert_array_equal(alone.Y[:, 0], both.Y[:, 1])
    np.testing.assert_array_equal(alone.runners["p_valve"][0], both.runners["p_valve"][1])


@pytest.mark.skipif(not HAS_NUMBA, reason="numba not installed")
def test_compiled_loop_with_runners_gives_the_numpy_loops_results(monkeypatch):
    from test_kernel import assert_same_results

    import cyclesim.solve.kernel as kernel

    # demo_runners at two speeds and one with the exhaust runner only (the intake on its plenum and
    # port buffer), three fine cycles each
    cases = [cyclesim.load_config("demo_runners", ["simulation.max_cycles=3", f"operating.speed_rpm={n}",
                                                   "intake.runner.stations_mm=[0, 100, 299]",
                                                   "exhaust.runner.stations_mm=[350]"])
             for n in (2000, 5500)]
    cases.append(cyclesim.load_config("demo_runners", ["simulation.max_cycles=3", "intake.runner=none"]))
    got = {}
    for path in ("auto", "python"):
        _on_path(monkeypatch, path)
        before = dict(kernel._used)
        got[path] = cyclesim.simulate(cases)
        used = {k: kernel._used[k] - before[k] for k in before}
        # every cycle on the chosen loop: none handed back to the numpy loop on the compiled path
        assert used == ({"compiled": 9, "python": 0} if path == "auto" else {"compiled": 0, "python": 9}), used
    # figures that are differences of the runners' contents over a cycle (a few 1e-4 of them) are
    # held to 1e-9 of the contents: a runner holds about 0.1-0.4 g and (absolute energies) some
    # hundred J; the settling figure and the cycle-mean mass change are already relative changes
    change_scale = {"mass_change_mg": 100.0, "energy_change_J": 100.0, "runner_settle_change": 1.0,
                    "runner_mean_mass_change": 1.0}
    for c, a, b in zip(cases, got["auto"], got["python"]):
        assert a.summary["cycles_to_converge"] == 3
        changes = [k for k in a.summary if any(k.endswith(t) for t in change_scale)]
        assert changes
        for k in changes:
            scale = next(v for t, v in change_scale.items() if k.endswith(t))
            assert abs(a.summary[k] - b.summary[k]) <= 1e-9 * scale, (c.name, k, a.summary[k], b.summary[k])
        a2, b2 = copy.copy(a), copy.copy(b)
        a2.summary, b2.summary = ({k: v for k, v in r.summary.items() if k not in changes} for r in (a, b))
        assert_same_results(a2, b2, rtol=1e-9, what=c.name)
    # the runners' figures are among those compared, and differ between the cases
    assert len({round(r.summary["volumetric_efficiency"], 6) for r in got["auto"]}) == 3
    assert "exhaust_runner_mass_change_mg" in got["auto"][2].summary
    assert "intake_runner_mass_change_mg" not in got["auto"][2].summary
    # the stations' columns are among the trace columns compared (a station in the far end's own cell
    # agrees to about 1e-8, the end solve's tolerance: measured 8e-9 at 400 mm, so 350 mm here)
    assert "intake_runner_at_100mm_velocity_m_per_s" in got["python"][0].trace
    assert "exhaust_runner_at_350mm_pressure_bar" in got["auto"][1].trace


def test_trace_columns_and_summary():
    c = _case(["simulation.max_cycles=3"])
    res = cyclesim.simulate([c])[0]
    assert res.error is None
    t, s = res.trace, res.summary
    for side in ("intake", "exhaust"):
        for what in ("valve", "mid"):
            col = np.asarray(t[f"{side}_runner_{what}_pressure_bar"])
            assert col.shape == np.asarray(t["crank_deg"]).shape and np.all(col > 0.3) and np.all(col < 5)
        assert f"{side}_runner_mass_change_mg" in s
    # the intake runner's pressure swings about its plenum's (a wave), the exhaust's exceeds it at EVO
    p_int = np.asarray(t["intake_runner_valve_pressure_bar"])
    assert p_int.max() - p_int.min() > 0.05
    eb = s["runner_energy_balance"]
    assert set(eb) == {"far_end_energy_in_J", "energy_to_cylinder_J", "stored_energy_change_J", "wall_heat_J"}


# -- against the plenum -----------------------------------------------------------------------------
@pytest.mark.slow
def test_very_short_runners_match_the_plenum(monkeypatch):
    import cyclesim.solve.solver as solver

    monkeypatch.setattr(solver._RHS, "port_buffer", False)
    # 1 mm long, 45 mm bore, 4 cells (the fewest): 1.6 cm^3 per runner, about 2.4 times the intake
    # valves' largest effective area.  The volume matters: gas pushed back into a runner returns
    # before fresh charge, where the plenum without a port buffer returns fresh charge; measured on
    # the demo, 8 mm x 70 mm (31 cm^3) gives 2.1 % less, 2 mm x 50 mm 0.7 %, this one 0.23 %.
    short = ["intake.runner.length_mm=1", "intake.runner.diameter_mm=45", "intake.runner.cells=4",
             "exhaust.runner.length_mm=1", "exhaust.runner.diameter_mm=45", "exhaust.runner.cells=4",
             "simulation.max_cycles=10"]
    plenum = cyclesim.simulate([cyclesim.load_config("demo", ["simulation.max_cycles=10"])])[0].summary
    pipe = cyclesim.simulate([cyclesim.load_config("demo", short)])[0].summary
    ve0, ve1 = plenum["volumetric_efficiency"], pipe["volumetric_efficiency"]
    assert abs(ve1 - ve0) / ve0 < 5e-3, (ve0, ve1)


def test_settled_state_is_periodic_with_runners():
    c = cyclesim.load_config("demo_runners")
    batch, tr = _integrate([c])
    assert tr.converged[0] and tr.cycles[0] <= 6
    rec = tr.runners
    # the cycle means of each runner's valve-end pressure and mass repeat within the tolerance
    # (cyclesim.pipes.runners.RunnerSet.settle_change), and the reported cycle's net IMEP did
    assert np.all(rec["change"] < c.simulation.tolerance)
    from cyclesim.pipes.runners import mean_changes

    ch = mean_changes(rec["cycle_mean_before"], rec["cycle_mean"])
    assert np.all(ch["mass"] < c.simulation.tolerance) and np.all(ch["valve_pressure"] < c.simulation.tolerance)
    imep = [h[0][0] for h in tr.history[-2:]]
    assert abs(imep[1] - imep[0]) / abs(imep[1]) < c.simulation.tolerance


def test_cases_settling_at_different_cycles_keep_their_own_runner_record():
    # a batch whose cases settle after different numbers of cycles: each case's record is of its own
    # reported cycle (a per-batch entry of the record once failed to index by case, and ended a
    # cylinder-cut test with runners in a traceback)
    cases = [cyclesim.load_config("demo_runners", ["simulation.step_deg=1.0", f"operating.intake_pressure_bar={p}"])
             for p in (0.4, 0.7, 1.0, 1.5)]
    batch, tr = _integrate(cases)
    assert len(set(tr.cycles.tolist())) > 1, tr.cycles          # the premise: not all settle together
    rec = tr.runners
    assert rec["cells"].shape == (4, 2) and np.all(rec["cells"] == 30)
    assert np.all(tr.converged) and np.all(rec["change"] < cases[0].simulation.tolerance)


def test_sweep_accepts_runner_keys_and_refuses_unknown_ones(tmp_path):
    from cyclesim.studies.sweep import _check_key

    base = cyclesim.load_config("demo_runners")
    _check_key(base, "intake.runner.length_mm", {"intake.runner.length_mm": [250.0, 400.0]})
    with pytest.raises(ConfigError, match="unknown key"):
        _check_key(base, "intake.runner.lenght_mm", {"intake.runner.lenght_mm": [250.0]})
    with pytest.raises(ConfigError):
        _check_key(base, "intake.runner.cells", {"intake.runner.cells": [10.5]})



# -- the compiled loop's key --------------------------------------------------------------------------
@pytest.mark.skipif(not HAS_NUMBA, reason="numba not installed")
@pytest.mark.parametrize("name", ["pipes/loop_step.py", "pipes/scheme.py", "pipes/kernels.py", "pipes/coupling.py",
                                  "pipes/_jit.py", "kernel_ops.py"])
def test_editing_a_source_of_the_runner_step_changes_the_loops_key(monkeypatch, name):
    """The generated loop with runners is named by loop_step.source_digest: the files the walk of
    crank_step's calls reaches and the decorator options' file.  An edit is stood in for by a
    changed content hash of that one file (the digest reads files only through that hash)."""
    from pathlib import Path

    import cyclesim.pipes.loop_step as loop_step
    from cyclesim.loops import jit_cache

    target = str(Path(cyclesim.__file__).parent / name)
    assert Path(target).is_file()
    before = loop_step.source_digest()
    assert loop_step.source_digest() == before
    real = jit_cache._file_hash
    monkeypatch.setattr(jit_cache, "_file_hash", lambda p: "edited" if str(p) == target else real(p))
    assert loop_step.source_digest() != before
    # a file the step does not run leaves the key as it is
    monkeypatch.setattr(jit_cache, "_file_hash",
                        lambda p: "edited" if str(p).endswith("studies/sweep.py") else real(p))
    assert loop_step.source_digest() == before


# -- a shut valve: the runner on its own time -------------------------------------------------------
def test_runner_behind_a_shut_valve_steps_on_its_own_time():
    """Crank steps with the valve shut are taken in whole CFL sub-steps (the time left over, less
    than one sub-step, carried as the runner's lag); at the valve's opening the runner catches up
    with the valve still shut, then takes the step.  Against the same runner advanced step by step
    (sub-steps ending on each step's end): fewer sub-steps, the same contents to the truncation
    error, nothing through the shut valve, and the runner's mass changed by exactly what its far
    end passed (to rounding)."""
    from cyclesim import pipes

    def runner():
        p = pipes.Pipes(np.full(2, 0.4), 0.035, 30, roughness_m=2e-5, wall_temperature_K=320.0, n_cases=2)
        p.set_state(1.2e5, 300.0)                          # above the far end's 1 bar: a wave runs
        pipes.set_end(p.ends, 1, p.face_area[:, -1], 1e5, 300.0)
        return p

    lagged, plain = runner(), runner()
    system = pipes.PipeSystem([lagged], [0])
    dur = np.array([40e-6, 70e-6])                     # two crank-step lengths, one per case
    m0 = lagged.totals()["mass_kg"].copy()
    outer = np.zeros(2)
    plain_steps = np.zeros(2)
    lags = []
    for _ in range(40):
        got = pipes.advance_crank_step(system, dur, np.zeros((2, 1)), np.full(2, 1e5), np.full(2, 300.0), np.zeros(2))
        assert np.all(got["mass_kg"] == 0.0)
        outer += got["outer_mass_kg"][:, 0]
        lags.append(lagged.lag.copy())
        plain_steps += plain.advance(dur)["steps"]
    lags = np.array(lags)
    assert np.all(lags >= 0.0) and np.any(lags > 0.0)
    assert np.all(lagged.steps_taken < plain_steps)
    m1 = lagged.totals()["mass_kg"]
    np.testing.assert_allclose(m1 - m0, outer, rtol=0, atol=1e-12 * m0.max())
    # the same contents as the runner stepped to each step's end, to the truncation error and the
    # lag (under one sub-step of the far end's outflow)
    np.testing.assert_allclose(m1, plain.totals()["mass_kg"], rtol=2e-3)
    assert np.all(np.abs(m1 / m0 - 1.0) > 1e-2)             # while the contents changed by more
    # the valve opens: the lag is caught up first, then gas passes
    got = pipes.advance_crank_step(system, dur, np.full((2, 1), 2e-4), np.full(2, 0.9e5), np.full(2, 300.0),
                                   np.zeros(2))
    assert np.all(lagged.lag == 0.0) and np.all(got["mass_kg"] != 0.0)


def test_station_columns_pressure_and_velocity():
    # stations along the intake runner (300 mm, 30 cells; cyclesim.config.runners.station_cell) and
    # one on the exhaust runner: pressure and gas velocity on the output grid
    c = _case(["intake.runner.stations_mm=[0, 150, 300]", "exhaust.runner.stations_mm=[200]"])
    res = cyclesim.simulate([c])[0]
    assert res.error is None
    t, s = res.trace, res.summary
    col = lambda k: np.asarray(t[k], float)  # noqa: E731
    # 150 mm is the middle cell: the station's columns are the mid-length ones
    assert np.array_equal(col("intake_runner_at_150mm_pressure_bar"), col("intake_runner_mid_pressure_bar"))
    assert np.array_equal(col("intake_runner_at_150mm_velocity_m_per_s"), col("intake_runner_mid_velocity_m_per_s"))
    # continuity at a periodic state (common practice): the mass through a station over the cycle is
    # what the cylinder inducted; here from rho u A with the gas at the plenum's temperature (the
    # runner's wall is at it) and the runner's fresh-charge gas constant, so within a few percent
    from cyclesim.pipes.runners import build_runners

    R = float(build_runners(build_batch([c], get_registry(()))).system.runners[0].gas.R[0, 0])
    theta = col("crank_deg")
    dt = np.gradient(theta) / (6.0 * c.operating.speed_rpm)
    area = np.pi / 4.0 * (c.runners["intake"].diameter_mm * 1e-3) ** 2
    for x in (0, 150, 300):
        p = col(f"intake_runner_at_{x}mm_pressure_bar") * 1e5
        u = col(f"intake_runner_at_{x}mm_velocity_m_per_s")
        m = float(np.sum(p / (R * c.operating.intake_temperature_K) * u * area * dt))
        assert m * 1e6 == pytest.approx(s["inducted_mass_mg"], rel=0.02), x     # measured 0.3-0.6 %
    # the exhaust station sees the blowdown leave the cylinder (positive: away from the valve)
    u_e = col("exhaust_runner_at_200mm_velocity_m_per_s")
    blow = (theta > c.valves.evo_deg + 10.0) & (theta < 180.0)
    assert u_e[blow].mean() > 50.0 and u_e.max() > 100.0
    with pytest.raises(ConfigError, match="beyond"):
        _case(["intake.runner.stations_mm=[400]"])
