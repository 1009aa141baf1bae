"""The compiled cycle loop (cyclesim/loops/_compiled.py, chosen in cyclesim/solve/kernel.py) against the Python loop.

The reference for every figure here is the project's own Python/numpy loop
(:func:`cyclesim.solve.solver.integrate` with :class:`cyclesim.solve.solver._RHS`), the
reference implementation, which the compiled loop mirrors case by case in
scalars.  The two do the same arithmetic in a different order, so they agree to
rounding (measured about 1e-14 relative on the demo and on every variant below);
the bound used is 1e-9.

Besides agreement: the choice of path by ``CYCLESIM_KERNEL``, the fall-back to
Python where a submodel has no compiled form, the re-run on the Python path of a
case that goes non-physical, and batch-independence of the compiled results.
"""

from __future__ import annotations

import importlib.util
import math

import numpy as np
import pytest

import cyclesim
from cyclesim.solve import kernel
from cyclesim.solve.batch import build_batch, group_cases
from cyclesim.config import load_config
from cyclesim.errors import ConfigError
from cyclesim.registry import get_registry
from cyclesim.solve.solver import _RHS
from plugin_sources import CONSTANT_H

RTOL = 1e-9
"""Bound on the relative difference compiled vs Python (they differ only by rounding, ~1e-14)."""

needs_numba = pytest.mark.skipif(importlib.util.find_spec("numba") is None,
                                 reason="the compiled loop needs numba (extra 'fast')")


# -- helpers -----------------------------------------------------------------


def _registry(cases):
    plugins: tuple[str, ...] = ()
    for c in cases:
        plugins += tuple(p for p in c.plugins if p not in plugins)
    return get_registry(plugins)


def n_batches(cases) -> int:
    return len(group_cases(list(cases), _registry(cases)))


class PathSpy:
    """Records what the kernel decides while cases run: per integration whether the compiled
    loop was prepared, and per compiled cycle whether it finished (True) or handed over to
    the Python path (False)."""

    def __init__(self, monkeypatch):
        self.prepared: list[bool] = []
        self.cycles: list[bool] = []
        self.python = 0                  # Python cycles counted by the kernel (set by run_path)
        prepare, cycle = kernel.prepare, kernel.Compiled.cycle

        def spy_prepare(*args, **kw):
            got = prepare(*args, **kw)
            self.prepared.append(got[0] is not None)
            return got

        def spy_cycle(obj, *args, **kw):
            ok = cycle(obj, *args, **kw)
            self.cycles.append(bool(ok))
            return ok

        monkeypatch.setattr(kernel, "prepare", spy_prepare)
        monkeypatch.setattr(kernel.Compiled, "cycle", spy_cycle)


def run_path(monkeypatch, path: str, cases):
    """Results of ``cases`` on one path ('auto' = compiled where possible, or 'python'), the number of
    compiled cycles counted by the kernel meanwhile, and the spy's record (``spy.python``: the
    Python cycles counted by the kernel)."""
    monkeypatch.setenv(kernel.ENV, path)
    with monkeypatch.context() as mp:
        spy = PathSpy(mp)
        before = dict(kernel._used)
        res = cyclesim.simulate(list(cases))
        used = kernel._used["compiled"] - before["compiled"]
        spy.python = kernel._used["python"] - before["python"]
    return res, used, spy


def assert_same_results(got, ref, rtol=RTOL, what=""):
    """Every finite float summary figure (nested dicts skipped) and every trace column of ``got``
    within ``rtol`` of ``ref``; non-finite figures alike."""
    assert got.error is None and ref.error is None, (what, got.error, ref.error)
    assert set(got.summary) == set(ref.summary), what
    worst = (0.0, None)
    for key, a in ref.summary.items():
        b = got.summary[key]
        if isinstance(a, dict):
            continue
        if isinstance(a, (bool, str)):
            assert a == b, (what, key, a, b)
            continue
        if not (math.isfinite(a) and math.isfinite(b)):
            assert (math.isnan(a) and math.isnan(b)) or a == b, (what, key, a, b)
            continue
        d = abs(a - b) / max(abs(a), abs(b)) if a != b else 0.0
        if d > worst[0]:
            worst = (d, key)
    assert worst[0] <= rtol, (what, worst, got.summary[worst[1]], ref.summary[worst[1]])
    assert set(got.trace) == set(ref.trace), what
    for key, a in ref.trace.items():
        b = got.trace[key]
        assert b.shape == a.shape, (what, key)
        fin = np.isfinite(a)
        assert np.array_equal(fin, np.isfinite(b)), (what, key)
        scale = max(float(np.max(np.abs(a[fin]), initial=0.0)), 1e-300)
        dev = float(np.max(np.abs(a[fin] - b[fin]), initial=0.0))
        assert dev <= rtol * scale, (what, key, dev, scale)


def check_agreement(monkeypatch, cases):
    """Run ``cases`` on the compiled and on the Python path and compare case by case."""
    fast, used, spy = run_path(monkeypatch, "auto", cases)
    # the compiled loop really ran: every batch prepared it, no cycle went back to Python,
    # and the kernel counted at least one compiled cycle per batch
    assert spy.prepared and all(spy.prepared), spy.prepared
    assert spy.cycles and all(spy.cycles)
    assert used >= n_batches(cases) and used == len(spy.cycles) and spy.python == 0
    ref, used_py, spy_py = run_path(monkeypatch, "python", cases)
    assert used_py == 0 and not spy_py.cycles and spy_py.python >= n_batches(cases)
    for c, a, b in zip(cases, fast, ref):
        # checked against: the project's own Python path, the reference implementation
        assert_same_results(a, b, what=c.name)
    return fast, ref


def cfg(name, *overrides):
    case = load_config(name, list(overrides))
    case.name = f"{name} {' '.join(overrides)}".strip()      # names the variant in failure messages
    return case


# -- 1. agreement of the compiled and the Python path --------------------------

CLOSED_VARIANTS = (
    (),
    ("heat_transfer.model=hohenberg",),
    ("heat_transfer.model=annand",),
    ("heat_transfer.model=annand", "heat_transfer.radiation_factor=0.5"),
    ("heat_transfer.model=none",),
    ("burn.model=double_wiebe",),
    ("burn.model=wiebe_ca50",),
    ("burn.model=none",),
    ("burn.model=wiebe_flame",),
    ("burn.model=wiebe_flame", "burn.viscosity_scaling=false", "operating.residual_fraction=0.15"),
    ("blowby.model=none",),
    ("knock.model=livengood_wu",),
    ("operating.lambda=0.9",),
    ("operating.residual_fraction=0.15",),
    ("operating.speed_rpm=1500",),
    ("operating.ivc_pressure_bar=0.5", "burn.spark_advance_deg=32"),
    ("heat_transfer.swirl_ratio=2.0",),
)


@needs_numba
def test_closed_cycle_submodels_agree_with_python_path(monkeypatch):
    # each built-in submodel with a compiled form, and operating variants, closed cycle IVC..EVO
    cases = [cfg("demo_closed", *ov) for ov in CLOSED_VARIANTS]
    fast, _ = check_agreement(monkeypatch, cases)
    # the variants are different cycles (a copy of one case would agree trivially)
    imeps = [r.summary["imep_closed_bar"] for r in fast]
    assert len(set(np.round(imeps, 6))) == len(cases)


@needs_numba
def test_full_cycle_operating_points_agree_with_python_path(monkeypatch):
    # full 720 deg cycles to the settled state (the coarse start-up cycles included): WOT, rich,
    # external EGR, high speed and part load in one batch; a low-speed point (finer step, own
    # batch, two cycles); the boosted engine with the knock integral (two cycles)
    cases = [cfg("demo"), cfg("demo", "operating.lambda=0.9"), cfg("demo", "operating.egr_fraction=0.1"),
             cfg("demo", "operating.speed_rpm=4500"), cfg("demo_part_load"),
             cfg("demo", "operating.speed_rpm=1500", "simulation.step_deg=1.0", "simulation.max_cycles=2"),
             cfg("demo_turbo", "simulation.step_deg=1.0", "simulation.max_cycles=2")]
    assert n_batches(cases) == 3
    fast, _ = check_agreement(monkeypatch, cases)
    # the settled points ran the start-up schedule and at least two fine cycles
    assert all(r.summary["cycles_to_converge"] >= 4 for r in fast[:5])
    assert fast[6].summary["knock_integral_max"] > 0.0


@needs_numba
def test_full_cycle_submodels_agree_with_python_path(monkeypatch):
    # every other submodel with a compiled form through the gas exchange (two cycles, 1 deg step;
    # each submodel choice is a batch of its own)
    common = ("simulation.step_deg=1.0", "simulation.max_cycles=2")
    variants = (("heat_transfer.model=hohenberg",), ("heat_transfer.model=annand",),
                ("heat_transfer.model=none",), ("burn.model=double_wiebe",), ("burn.model=wiebe_ca50",),
                ("burn.model=none",), ("blowby.model=none",), ("burn.model=wiebe_flame",))
    cases = [cfg("demo", *ov, *common) for ov in variants]
    assert n_batches(cases) == len(cases)
    check_agreement(monkeypatch, cases)


# -- 2. a submodel with no compiled form runs on the Python path ----------------


def _why_not(case):
    batch = build_batch([case], _registry([case]))
    return kernel.why_not(batch, _RHS(batch, case.simulation.mode))




def _plugin_config(tmp_path, module: str, source: str, text: str):
    """A config file beside a plug-in file ``module``.py holding ``source``."""
    (tmp_path / f"{module}.py").write_text(source)
    cfg_file = tmp_path / f"{module}.yaml"
    cfg_file.write_text(text)
    return cfg_file


@pytest.fixture
def heat_plugin(tmp_path):
    """A closed-cycle config of the demo with a third-party heat-transfer plug-in."""
    return _plugin_config(tmp_path, "myheat", CONSTANT_H,
                          "extends: demo_closed\nplugins: [myheat.py]\nheat_transfer: {model: tests_constant_h}\n")


PLENUM_PLUGIN = """
from cyclesim import hookimpl
from cyclesim_plugins.boundaries import ConstantPlenums


class CopiedPlenums(ConstantPlenums):
    name = "copied_plenums"
    summary = "the constant plenums, as a third-party plug-in"

    def intake(self, theta, sub):          # the same physics, but a method of its own
        return super().intake(theta, sub)


class RenamedPlenums(ConstantPlenums):
    name = "renamed_plenums"
    summary = "the constant plenums under another name (no physics method of its own)"


@hookimpl
def cyclesim_register_submodels():
    return [CopiedPlenums, RenamedPlenums]
"""


@pytest.fixture
def plenum_plugin(tmp_path):
    """A config of the demo whose boundary is a third-party plug-in (the constant plenums' physics)."""
    return _plugin_config(tmp_path, "myplenums", PLENUM_PLUGIN,
                          "extends: demo\nplugins: [myplenums.py]\nboundary: {model: copied_plenums}\n")


def test_why_not_names_the_submodel_without_compiled_form(plenum_plugin, heat_plugin, monkeypatch):
    # as in a fresh process, where no batch has loaded the compiled template yet: why_not loads it
    monkeypatch.setattr(kernel, "_mod", None)
    # the built-in demo is fully covered, in both modes (so the reasons below are not a default)
    assert _why_not(load_config("demo")) is None
    assert _why_not(load_config("demo_closed")) is None
    assert _why_not(load_config("demo", ["boundary.model=manifold_trace"])) is None
    assert _why_not(load_config("demo", ["burn.model=wiebe_flame"])) is None
    reason = _why_not(load_config(str(heat_plugin)))
    assert reason and "heat_transfer" in reason and "tests_constant_h" in reason
    # a subclass of a built-in that overrides a physics method is not the built-in's compiled form
    reason = _why_not(load_config(str(plenum_plugin)))
    assert reason and "boundary" in reason and "copied_plenums" in reason
    # one that only renames it keeps the compiled form (a capability, not a type check)
    assert _why_not(load_config(str(plenum_plugin), ["boundary.model=renamed_plenums"])) is None
    # a closed cycle never sees the plenums: any boundary has a compiled form there
    assert _why_not(load_config(str(plenum_plugin), ["simulation.mode=closed"])) is None


@needs_numba
def test_submodel_without_compiled_form_falls_back_and_gives_results(monkeypatch, heat_plugin):
    plain = cfg("demo_closed")
    plug = load_config(str(heat_plugin))
    res, used, spy = run_path(monkeypatch, "auto", [plain, plug])
    # two batches: the plain one compiled (one closed cycle), the plug-in's on Python
    assert spy.prepared.count(True) == 1 and spy.prepared.count(False) == 1
    assert used == 1 and spy.python == 1
    r = res[1]
    assert r.error is None
    assert math.isfinite(r.summary["imep_closed_bar"]) and r.summary["imep_closed_bar"] > 0
    p = r.trace["pressure_bar"]
    assert p.size > 100 and np.isfinite(p).all()
    assert r.trace["crank_deg"][0] == pytest.approx(res[0].trace["crank_deg"][0])      # IVC .. EVO
    assert r.trace["crank_deg"][-1] == pytest.approx(res[0].trace["crank_deg"][-1])
    # it is the plug-in's heat transfer that ran (a different wall heat from Woschni's)
    assert r.summary["wall_heat_J"] != pytest.approx(res[0].summary["wall_heat_J"], rel=1e-6)


@needs_numba
def test_plugin_boundary_falls_back_with_the_same_physics(monkeypatch, plenum_plugin):
    # the plug-in boundary is the constant boundary's physics on the Python path
    common = ("simulation.step_deg=1.0", "simulation.max_cycles=2")
    plug = load_config(str(plenum_plugin), list(common))
    res, used, spy = run_path(monkeypatch, "auto", [plug])
    assert spy.prepared == [False] and used == 0 and not spy.cycles and spy.python == 2
    const, used_c, _ = run_path(monkeypatch, "auto", [cfg("demo", *common)])
    assert used_c == 2
    # checked against: the constant boundary on the compiled path (itself checked against the
    # Python reference above)
    assert_same_results(res[0], const[0], what="plug-in boundary vs constant")
    # the subclass without physics of its own runs compiled, with the same figures
    ren, used_r, spy_r = run_path(monkeypatch, "auto", [load_config(str(plenum_plugin),
                                                                     list(common) + ["boundary.model=renamed_plenums"])])
    assert spy_r.prepared == [True] and used_r == 2
    assert_same_results(ren[0], const[0], what="renamed plug-in boundary vs constant")


@needs_numba
def test_multi_cylinder_engine_agrees_with_python_path(monkeypatch):
    # the engine drives each cylinder through the manifold_trace boundary with pressure traces
    # set between cycles; checked against the same engine on the Python path (the reference)
    from cyclesim.engine import run_engine

    out = {}
    for path in ("python", "auto"):
        monkeypatch.setenv(kernel.ENV, path)
        before = dict(kernel._used)
        out[path] = run_engine("demo", ["multi_cylinder.max_coupled_cycles=4"])
        used = kernel._used["compiled"] - before["compiled"]
        assert (used > 0) == (path == "auto")
    ref, got = out["python"], out["auto"]
    assert len(ref.cylinder_results) == 4
    for a, b in zip(ref.cylinder_results, got.cylinder_results):
        assert_same_results(b, a, what="engine cylinder")
    for k, v in ref.engine.items():
        if isinstance(v, float) and math.isfinite(v) and v != 0:
            assert got.engine[k] == pytest.approx(v, rel=RTOL), k


# -- 3. the choice of path ------------------------------------------------------


def test_python_choice_runs_no_compiled_cycle(monkeypatch):
    cases = [cfg("demo_closed"), cfg("demo", "simulation.step_deg=1.0", "simulation.max_cycles=2")]
    res, used, spy = run_path(monkeypatch, "python", cases)
    assert kernel.compiled_module() is None
    assert used == 0 and not spy.cycles and spy.prepared == [False, False]
    assert spy.python == 1 + 2                   # the closed cycle and the two full cycles, on Python
    assert all(r.error is None and math.isfinite(r.summary["p_max_bar"]) for r in res)


@needs_numba
def test_auto_choice_prepares_the_compiled_loop(monkeypatch):
    # the counterpart of the test above, so that one cannot pass by the compiled loop never running
    res, used, spy = run_path(monkeypatch, "auto", [cfg("demo_closed")])
    assert kernel.compiled_module() is not None
    assert spy.prepared == [True] and spy.cycles == [True] and used == 1
    assert res[0].error is None


@pytest.mark.parametrize("value", ["fast", "numba", "on", "1"])
def test_invalid_choice_is_a_config_error_naming_the_variable(monkeypatch, value):
    monkeypatch.setenv(kernel.ENV, value)
    with pytest.raises(ConfigError) as exc:
        kernel.choice()
    assert "CYCLESIM_KERNEL" in str(exc.value) and value in str(exc.value)
    with pytest.raises(ConfigError, match="CYCLESIM_KERNEL"):
        cyclesim.simulate([load_config("demo_closed")])


def test_valid_choices_are_accepted_in_any_case(monkeypatch):
    for value, expect in (("Python", "python"), (" AUTO ", "auto"), ("", "auto"), ("compiled", "compiled")):
        monkeypatch.setenv(kernel.ENV, value)
        assert kernel.choice() == expect
    monkeypatch.delenv(kernel.ENV)
    assert kernel.choice() == "auto"


# -- 4. a case that goes non-physical in the compiled loop ----------------------

# A 5 deg step with the step's speed scaling off: at 500 rpm the gas exchange overshoots to a
# negative mass at the end of the first step; at 100 rpm a Runge-Kutta stage state is already
# unphysical and the wall heat flow is not finite.  The same step is fine at 3000 rpm.  (The
# default max_cycles: the healthy case settles well before it.)
COARSE = ("simulation.step_deg=5", "simulation.step_reference_rpm=0")


@needs_numba
def test_unphysical_case_is_rerun_on_python_with_the_same_error(monkeypatch):
    healthy = cfg("demo", *COARSE)
    overshoot = cfg("demo", "operating.speed_rpm=500", *COARSE)
    nonfinite = cfg("demo", "operating.speed_rpm=100", *COARSE)
    cases = [healthy, overshoot, nonfinite]
    assert n_batches(cases) == 1                         # the failing cases share the healthy one's batch
    fast, used, spy = run_path(monkeypatch, "auto", cases)
    # the compiled loop ran and handed the cycle back to the Python path
    assert spy.prepared and all(spy.prepared) and False in spy.cycles
    ref, _, _ = run_path(monkeypatch, "python", cases)
    for a, b in zip(fast[1:], ref[1:]):
        # checked against: the message of a pure Python run (the reference names the cause)
        assert a.error is not None and a.error == b.error
    assert "left the physical range" in fast[1].error and "crank angle" in fast[1].error
    # at 100 rpm with a 5 deg step the valve flow empties the cylinder within a step's stages: the
    # message names that cause (it used to surface as Woschni's non-finite heat flow)
    assert "the cylinder emptied within a step" in fast[2].error and "crank angle" in fast[2].error
    # the healthy batch-mate is not spoiled by the hand-over
    assert_same_results(fast[0], ref[0], what="healthy batch-mate")


# -- 5. a mixed batch gives each case its figures alone ---------------------------


@needs_numba
def test_mixed_batch_gives_each_case_its_own_figures(monkeypatch):
    # different spark advances, throttling and back pressure in one batch, with a tight
    # tolerance so that the cases settle after different numbers of cycles
    tight = "simulation.tolerance=5e-5"
    cases = [cfg("demo", f"burn.spark_advance_deg={a}", tight) for a in (5, 15, 24, 35, 45)]
    cases += [cfg("demo", "operating.intake_pressure_bar=0.35", tight),
              cfg("demo", "operating.exhaust_pressure_bar=1.6", "burn.spark_advance_deg=30", tight)]
    assert n_batches(cases) == 1
    together, used, spy = run_path(monkeypatch, "auto", cases)
    assert all(spy.prepared) and all(spy.cycles) and used > 0
    cyc = {r.summary["cycles_to_converge"] for r in together}
    assert len(cyc) >= 2, cyc                            # some cases finish while others still run
    imeps = [r.summary["imep_net_bar"] for r in together]
    assert len(set(np.round(imeps, 4))) == len(cases)
    for c, r in zip(cases, together):
        alone, used1, spy1 = run_path(monkeypatch, "auto", [c])
        assert all(spy1.prepared) and all(spy1.cycles) and used1 > 0
        # checked against: the same case run alone (the solver's rule that a case's result does not
        # depend on its batch-mates); the compiled loop handles each case on its own, so the
        # figures are equal to rounding of the post-processing (measured: identical)
        assert_same_results(r, alone[0], rtol=1e-12, what=c.name)


@needs_numba
def test_compiled_gas_lookup_matches_the_tables_in_and_out_of_range():
    # the compiled lookup against GasTables.mixture (the reference), including states outside
    # the tables (clamped to the edge nodes) and a negative density at a Runge-Kutta stage
    from cyclesim.loops import _compiled
    from cyclesim.gas.thermo import T_MID

    case = load_config("demo_closed")
    g = build_batch([case], _registry([case])).gas
    gc = np.array([g._T0, g._inv_dT, g._lr0, g._inv_dlr, g._dlr, g._x_hi, g._z_hi, T_MID, 0.0])
    out = np.empty(7)
    for T in (150.0, 300.0, 999.0, 1001.0, 2500.0, 3999.0, 5000.0):
        for rho in (-1.0, 1e-30, 0.004, 1.0, 50.0, 399.0, 1e4):
            for y in (0.0, 0.4, 1.0):
                _compiled._mixture(g._table, int(g._offset[0]), gc, int(g._nR - 1), g._uc4, 0, T, rho, y, out)
                with np.errstate(invalid="ignore"):      # log of the negative density
                    ref = g.mixture(np.array([T]), np.array([rho]), np.array([y]))
                want = (ref.u[0], ref.R[0], ref.u_T[0], ref.u_lnrho[0], ref.u_y[0], ref.cp[0], ref.gamma[0])
                np.testing.assert_allclose(out, want, rtol=1e-12, atol=1e-9, err_msg=f"T={T} rho={rho} y={y}")


@needs_numba
def test_burn_table_law_agrees_with_python_path(monkeypatch, tmp_path):
    # wiebe_table is the Wiebe rate with parameters read from a table at each case's speed and
    # load; checked against the Python path (the reference)
    (tmp_path / "burn_table.csv").write_text(
        "speed_rpm,intake_pressure_bar,ignition_delay_deg,duration_deg,m\n"
        "2000,0.5,8,44,1.8\n2000,1.0,9,48,2.0\n5000,0.5,10,52,2.2\n5000,1.0,11,56,2.4\n")
    (tmp_path / "tab.yaml").write_text("extends: demo_closed\nburn: {model: wiebe_table}\n")
    cases = [load_config(str(tmp_path / "tab.yaml"), [f"operating.speed_rpm={n}"]) for n in (2500, 4000)]
    check_agreement(monkeypatch, cases)


@needs_numba
def test_threads_share_a_batch_without_changing_a_digit(monkeypatch):
    # the compiled cycle may split a batch's cases over two threads; each case only touches its
    # own columns, so the results must be bit for bit those of one thread (reference: one thread)
    monkeypatch.setenv(kernel.ENV, "auto")
    cases = [cfg("demo", "simulation.step_deg=1.0", "simulation.max_cycles=3",
                 f"burn.spark_advance_deg={a}") for a in range(10, 30)]
    out = {}
    try:
        for n in (1, 2):
            kernel.set_threads(n)
            out[n] = cyclesim.simulate(cases)
    finally:
        kernel.set_threads(None)
    for a, b in zip(out[1], out[2]):
        for k, v in a.summary.items():
            if isinstance(v, float) and not math.isnan(v):
                assert b.summary[k] == v, k
        np.testing.assert_array_equal(a.trace["pressure_bar"], b.trace["pressure_bar"])


def test_thread_count_setting(monkeypatch):
    monkeypatch.setenv(kernel.THREADS_ENV, "3")
    assert kernel.threads() == 3
    for bad in ("0", "two"):
        monkeypatch.setenv(kernel.THREADS_ENV, bad)
        with pytest.raises(ConfigError, match=kernel.THREADS_ENV):
            kernel.threads()
    monkeypatch.delenv(kernel.THREADS_ENV)
    assert 1 <= kernel.threads() <= 2
    kernel.set_threads(1)
    try:
        assert kernel.threads() == 1
    finally:
        kernel.set_threads(None)


@needs_numba
def test_zero_mass_column_stops_that_case_alone_on_both_paths(monkeypatch):
    # a degenerate start state (one case with no mass): the compiled loop must not raise but hand
    # the cycle to the Python path, which stops that case with its message (reference: Python path)
    from cyclesim.solve.solver import integrate

    cases = [cfg("demo", "simulation.step_deg=1.0"), cfg("demo", "simulation.step_deg=1.0",
                                                          "burn.spark_advance_deg=20")]
    out = {}
    for path in ("python", "auto"):
        monkeypatch.setenv(kernel.ENV, path)
        batch = build_batch(cases, _registry(cases))
        y0 = integrate(batch, cycles=1).end_state.copy()
        y0[0, 1] = 0.0
        out[path] = integrate(batch, initial=y0, cycles=1)
    ref, got = out["python"], out["auto"]
    assert ref.failed[0] is None and ref.failed[1] and "the cylinder emptied" in ref.failed[1]
    assert got.failed == ref.failed
    np.testing.assert_allclose(got.Y[:, 0], ref.Y[:, 0], rtol=1e-9, atol=0)


@needs_numba
def test_burn_starting_in_the_step_that_crosses_intake_closing(monkeypatch):
    # late intake closing with a very early spark: burning begins before the cycle's IVC state is
    # known; both paths leave Woschni's combustion term out there and agree (reference: Python path)
    cases = [cfg("demo", "valves.ivc_deg=-70", "burn.model=wiebe_flame", "burn.spark_advance_deg=75",
                 "simulation.step_deg=1.0", "simulation.max_cycles=3")]
    check_agreement(monkeypatch, cases)


def test_compiled_choice_without_numba_is_an_error(monkeypatch):
    monkeypatch.setattr(kernel, "_mod", False)          # as after a failed import of numba
    monkeypatch.setenv(kernel.ENV, "compiled")
    with pytest.raises(ConfigError, match="needs numba"):
        kernel.compiled_module()
    monkeypatch.setenv(kernel.ENV, "auto")
    assert kernel.compiled_module() is None


@needs_numba
def test_gas_properties_at_many_points_agree_with_numpy(monkeypatch):
    # GasTables.mixture_points (compiled with numba) against its numpy evaluation and against the
    # solver's mixture() column by column (the reference), over two cases' tables and states in and
    # out of the table range
    from cyclesim.fuels import BUILTIN_FUELS
    from cyclesim.solve.gas_tables import build_gas_tables

    g = build_gas_tables(BUILTIN_FUELS["gasoline"], [1.0, 0.85])
    rng = np.random.default_rng(3)
    N = 500
    T = rng.uniform(150.0, 5000.0, N)
    rho = rng.uniform(-1.0, 600.0, N)
    y = rng.uniform(0.0, 1.0, N)
    case = rng.integers(0, 2, N)
    monkeypatch.setenv(kernel.ENV, "auto")
    got = g.mixture_points(T, rho, y, case)
    monkeypatch.setenv(kernel.ENV, "python")
    with np.errstate(invalid="ignore"):
        ref = g.mixture_points(T, rho, y, case)
        for k in range(0, N, 50):       # and the solver's evaluation, one point at a time
            one = g.mixture(np.array([T[k], T[k]]), np.array([rho[k], rho[k]]), np.array([y[k], y[k]]))
            for a, b in zip(got, one):
                assert a[k] == pytest.approx(b[case[k]], rel=1e-12, abs=1e-9)
    for a, b in zip(got, ref):
        np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-9)


def test_woschni_is_a_kernel_reading_its_own_motored_temperature_state():
    # one source: the Woschni model gives its kernel, the built-in loop has no Woschni branch, and the
    # generated loop passes the kernel the model's integrated T_mot from that state's row
    from cyclesim.loops import _compiled, loopgen

    wo = get_registry().submodel_class("heat_transfer", "woschni")
    assert kernel.form_of_class(wo) == "kernel"
    assert "woschni" not in _compiled.FORMS["heat_transfer"]
    fn = loopgen.kernel_of(wo)
    packed = ("k", "c1_closed", "c1_open", "c2", "Vd", "t_exp")
    from cyclesim.loops.layout import CORE

    row = len(CORE)                                # the first row after the cylinder's own state
    parts = (loopgen.Part("heat_transfer", "kernel", fn, packed, (("T_mot", row),)),
             loopgen.Part("heat_transfer", "state", loopgen.state_kernel_of(wo), packed, (("T_mot", row),), (row,)))
    _, text = loopgen.generate(parts)
    assert f"woschni_kernel(p, T, V, sp, closed, burning, CB[R_IVC_P, b], CB[R_IVC_T, b], CB[R_IVC_V, b], yv[{row}]" in text
    assert f"_sd1_0 = woschni_motored_rate(yv[{row}], (uc4, b, gc[7]), dV, om, V, closed)" in text
    assert f"out[{row}] = _sd1_0 * dt" in text
    with pytest.raises(loopgen.LoopGenError, match="T_mot"):
        loopgen.kernel_params(fn, packed)          # not a state of the model given: refused
