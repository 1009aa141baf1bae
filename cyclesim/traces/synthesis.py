"""Synthetic cylinder-pressure cycles with cycle-to-cycle variation and exact ground truth.

Each cycle's burn parameters are drawn from seeded distributions (normal
spread of the ignition delay, relative spread of the burn duration and of the
combustion efficiency), with occasional partial burns and misfires at given
rates.  Cycles are either *independent* (each starts from the mean cycle's
residual state at -360 deg and all run as one batch) or *coupled* (each starts
from the end state of the cycle before it, so a slow or partial burn leaves a
hotter, larger residual for the next one, as on a real engine).

Coupled cycles are solved as a chain in batches (:func:`_run_chain`): every
cycle of a chunk runs in one batch from a guessed start state, then each start
is replaced by the end state of the cycle before it, and so on until no start
moves by more than :data:`CHAIN_TOLERANCE` (relative).  This is a fixed-point
(Jacobi) iteration whose fixed point is the cycle-by-cycle chain itself; a
cycle's residual gas carries only a few percent of a disturbance into the
next, so each sweep shrinks the error about tenfold and the figures agree
with a cycle-by-cycle run to about 1e-12.  A case gives the same figures
alone and inside a batch, so nothing else differs.

The true pressure is interpolated from the solver's states onto a fine crank
grid; the analogue part of the measuring chain (:mod:`cyclesim.traces.artefacts`:
knock ringing, passage resonance, thermal drift driven by the wall heat flow,
gain, charge-amplifier high-pass, angle labelling) is applied there, and the
result is low-pass filtered and decimated to the user's resolution, so
high-frequency content (knock ringing, passage resonance) does not alias.  The
ADC's part (offset, noise, clipping, quantisation, the intake channel's noise)
is applied after decimation, at the output rate, as a real ADC samples after the
amplifier's anti-alias filter.

What a real recording carries (engine and operating-point identity, speed,
crank convention, units, sample grid, the intake channel, the test bed's air
and fuel per cycle) is in ``meta``; the generator's settings (variation, seed,
artefact settings, synthesis grid) are in ``settings`` and go to the truth files
only, so a measured file can be analysed blind.
"""

from __future__ import annotations

import json
import math
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from ..solve.batch import group_cases
from ..config import Case, case_with
from ..errors import ConfigError, CyclesimError
from ..solve.hermite import HermiteBasis

# burn parameters that carry the cycle-to-cycle variation, per burn model: (config key, the
# CycleVariation field that gives its spread, "normal" = absolute spread [the key's unit] or
# "lognormal" = relative spread, mean kept); the first draws z1, the second z2
VARIED = {
    "wiebe": (("ignition_delay_deg", "start_sd_deg", "normal"), ("duration_deg", "duration_cov", "lognormal")),
    "wiebe_ca50": (("ca50_deg", "start_sd_deg", "normal"), ("burn_10_90_deg", "duration_cov", "lognormal")),
    "wiebe_flame": (("ref_ignition_delay_deg", "start_sd_deg", "normal"),
                    ("ref_duration_deg", "duration_cov", "lognormal")),
    # the predictive burn's angles are outputs: what varies is what sets them, the early kernel
    # and the charge motion (see CycleVariation)
    "entrainment": (("kernel_radius_mm", "kernel_radius_cov", "lognormal"),
                    ("ivc_flow_factor", "turbulence_cov", "lognormal")),
}
BURN_KEYS = {model: (a[0], b[0]) for model, (a, b) in VARIED.items()}
"""(start-type key, duration-type key) per burn model that varies cycle to cycle."""


@dataclass
class CycleVariation:
    """Distributions of the per-cycle burn parameters (all seeded, reproducible).

    The prescribed burns (``wiebe``, ``wiebe_ca50``, ``wiebe_flame``) vary their start and
    duration.  The predictive burn (``entrainment``) gives its burn angles as outputs, so what
    varies is what sets them in an engine: the early flame kernel (its radius when the spark
    has done its work: spark energy and the flow at the plug differ from cycle to cycle, and
    the spark-to-10 % phase is where cycle-to-cycle variation starts, Herweg & Maly 1992) and
    the charge motion the intake leaves at IVC (``burn.ivc_flow_factor``, which scales the
    mean-flow and turbulence velocities at IVC and so, nearly in proportion, the turbulence
    intensity at the spark: u' at the spark changes by 0.80 and 1.19 times for factors 0.8
    and 1.2 on the demo, measured).  The default spreads (kernel radius 30 %, charge motion
    5 %) are a choice that gives a COV of net IMEP of about 1-1.5 % at the demo's full-load
    point (a few % is typical of a good operating point, common practice).  The two draws are
    independent.

    Attributes
    ----------
    start_sd_deg : float
        Standard deviation of the burn start (ignition delay, or CA50 for a
        phasing-specified burn) [deg]; normal.  Prescribed burns.
    duration_cov : float
        Coefficient of variation of the burn duration [-]; log-normal.  Prescribed burns.
    kernel_radius_cov : float
        Coefficient of variation of the flame kernel's radius at the spark
        (``burn.kernel_radius_mm``) [-]; log-normal.  Predictive burn.
    turbulence_cov : float
        Coefficient of variation of the cycle's charge motion at IVC
        (``burn.ivc_flow_factor``, mean 1 times the config's value) [-]; log-normal.  Predictive burn.
    efficiency_sd : float
        Standard deviation of the combustion efficiency [-]; normal, clipped.
    partial_burn_rate : float
        Probability that a cycle burns only partly [-].
    partial_burn_range : tuple of float
        Range of the combustion-efficiency multiplier of a partial burn [-].
    misfire_rate : float
        Probability that a cycle does not burn at all [-].
    coupled : bool
        Couple consecutive cycles through their residual gas.
    seed : int
        Seed of the random generator.
    """

    start_sd_deg: float = 3.0
    duration_cov: float = 0.12
    efficiency_sd: float = 0.004
    kernel_radius_cov: float = 0.3
    turbulence_cov: float = 0.05
    partial_burn_rate: float = 0.0
    partial_burn_range: tuple = (0.3, 0.8)
    misfire_rate: float = 0.0
    coupled: bool = False
    seed: int = 1

    def check(self) -> None:
        for name in ("start_sd_deg", "duration_cov", "efficiency_sd", "kernel_radius_cov", "turbulence_cov"):
            v = getattr(self, name)
            if not (v >= 0 and math.isfinite(v)):
                raise ConfigError(f"traces: {name} = {v!r}: expected a number >= 0")
        for name in ("partial_burn_rate", "misfire_rate"):
            v = getattr(self, name)
            if not 0 <= v <= 1:
                raise ConfigError(f"traces: {name} = {v!r}: expected a probability 0..1")
        lo, hi = self.partial_burn_range
        if not 0 <= lo <= hi <= 1:
            raise ConfigError(f"traces: partial_burn_range = {self.partial_burn_range!r}: expected 0 <= lo <= hi <= 1")


@dataclass
class SyntheticSet:
    """A set of synthetic cycles and the truth behind them.

    Attributes
    ----------
    theta : ndarray (n,)
        Output crank grid [deg] (or the crank angle of each time sample).
    time_s : ndarray (n,) or None
        Sample times [s] from the start of the cycle when sampled in time.
    pressure_true_pa, pressure_pa, intake_pa : ndarray (n_cycles, n)
        True and measured cylinder pressure, measured intake-manifold pressure [Pa].
    truth : list of dict
        Per-cycle ground truth (units in the keys).
    stats : dict
        Set-level figures (COV of net IMEP, means, knocking share).
    meta : dict
        What a real recording carries: engine and operating point, speed, units,
        crank convention, sample grid, the intake channel, and the measured
        channels of the test bed: ``air_mass_per_cycle_mg`` and
        ``fuel_mass_per_cycle_mg``, the mean fresh air and fuel inducted per cycle
        over the set [mg].  No artefact setting and no seed.
    settings : dict
        Ground truth of the generator (for the truth files only): variation and
        seed, artefact settings, synthesis step, the coupled chain's sweeps, the
        crank angles at which the signal offset is recorded.
    """

    theta: np.ndarray
    time_s: np.ndarray | None
    pressure_true_pa: np.ndarray
    pressure_pa: np.ndarray
    intake_pa: np.ndarray | None
    truth: list
    stats: dict
    meta: dict = field(default_factory=dict)
    settings: dict = field(default_factory=dict)


def draw_parameters(case: Case, n: int, var: CycleVariation) -> tuple[list[dict], np.ndarray, np.ndarray]:
    """Per-cycle parameter changes (dotted keys), misfire flags and partial-burn flags."""
    var.check()
    model = case.submodels["burn"].model
    if model not in BURN_KEYS:
        raise ConfigError(
            f"burn.model = {model!r}: cycle-to-cycle variation is defined for {', '.join(BURN_KEYS)}"
        )
    bp = case.submodels["burn"].params
    rng = np.random.default_rng(var.seed)
    z1 = rng.standard_normal(n)
    z2 = rng.standard_normal(n)
    z3 = rng.standard_normal(n)
    u_mis = rng.random(n)
    u_par = rng.random(n)
    u_frac = rng.random(n)
    drawn = {}
    for (key, spread, law), z in zip(VARIED[model], (z1, z2)):
        sd = float(getattr(var, spread))
        if law == "normal":
            v = bp[key] + sd * z
            if key.endswith("delay_deg"):
                v = np.maximum(v, 0.0)
        else:
            s = math.sqrt(math.log1p(sd**2))
            v = bp[key] * np.exp(s * z - 0.5 * s * s)
        drawn[key] = v
    eff0 = float(bp.get("combustion_efficiency", 1.0))
    eff = np.clip(eff0 + var.efficiency_sd * z3, 0.0, 1.0)
    misfire = u_mis < var.misfire_rate
    partial = (~misfire) & (u_par < var.partial_burn_rate)
    lo, hi = var.partial_burn_range
    eff = np.where(partial, eff * (lo + (hi - lo) * u_frac), eff)
    eff = np.where(misfire, 0.0, eff)
    changes = [{**{f"burn.{k}": float(v[i]) for k, v in drawn.items()},
                "burn.combustion_efficiency": float(eff[i])} for i in range(n)]
    return changes, misfire, partial


def _runner_set(batch):
    """The batch's runners, kept with it so that its integrations carry their state on
    (:func:`cyclesim.pipes.runners.carry_runners`), or None where its cases have none (the pipe
    package is loaded only then)."""
    from ..config.runners import has_runners

    if not has_runners(batch.cases[0]):
        return None
    from ..pipes.runners import carry_runners

    return carry_runners(batch)


def _with_runner_rows(tr, runners):
    """The trace with ``end_rows``: its end states, and with runners the runners' state rows below
    them (:meth:`cyclesim.pipes.runners.RunnerSet.state_rows`), the start of the next cycle."""
    tr.end_rows = tr.end_state if runners is None else np.concatenate([tr.end_state, runners.state_rows()])
    return tr


def settle(batch):
    """The batch's cases to periodic steady state; the trace's ``end_rows`` start the cycles after it."""
    from ..solve.solver import integrate

    runners = _runner_set(batch)
    return _with_runner_rows(integrate(batch), runners)


def one_cycle(batch, initial: np.ndarray):
    """One cycle of every case of ``batch`` from the start rows ``initial`` (n, B): the cylinder's state
    and, with runners, the runners' state rows below it (as ``end_rows`` of :func:`settle`); the
    trace's ``end_rows`` are the end states in the same rows."""
    from ..solve.solver import integrate

    runners = _runner_set(batch)
    if runners is not None:
        k = initial.shape[0] - runners.n_state_rows
        runners.set_state_rows(initial[k:])
        initial = initial[:k]
    return _with_runner_rows(integrate(batch, initial=np.ascontiguousarray(initial), cycles=1), runners)


def _steady_state(case: Case, registry):
    from ..solve.batch import build_batch

    tr = settle(build_batch([case], registry))
    if tr.failed[0]:
        raise CyclesimError(f"mean cycle failed: {tr.failed[0]}")
    return tr


TRUTH_MODEL_FIGURES = ("turbulence_intensity_at_spark_m_per_s",)
"""Burn-model figures copied into the per-cycle truth where the model gives them."""

CHAIN_TOLERANCE = 1e-10
"""Coupled cycles: largest relative change of a start state at which a chain counts as solved."""
CHAIN_MAX_SWEEPS = 60


def _figures_of(batch, tr):
    from ..results.figures import compute_figures, derived_trace, output_trace
    from ..roles import Submodel

    d = derived_trace(batch, tr)
    figs = compute_figures(batch, tr, d)
    if any(m.__class__.figures is not Submodel.figures for m in batch.models.values()):
        from ..api import model_figures

        figs.update(model_figures(batch, output_trace(batch, tr, d, None))[0])
    return d, figs


def _run_chain(cases: list[Case], registry, start: np.ndarray, tol: float = CHAIN_TOLERANCE,
               max_sweeps: int = CHAIN_MAX_SWEEPS):
    """Consecutive cycles, each from the end state of the one before, solved in batches.

    Sweep: all cycles from their current start states (one batch per group of cycles that
    can share one); then start_i = end_{i-1} (start_0 = ``start``).  Repeats until no start
    state changes by more than ``tol`` relative to its row's largest value.  Returns
    ([(indices, batch, trace, derived, figures) per group], end states (n_state, n), sweeps).

    With runners the cycles run one after the other instead (one sweep): the waves left in a
    runner carry a disturbance on for many cycles (on demo_runners a 20-cycle chain needed all 20
    sweeps to repeat within ``tol``, measured), and a runner's cost is per case, so a batch saves
    little while each sweep costs the whole chain again.
    """
    from ..solve.batch import build_batch
    from ..loops.layout import TOTALS as _TOTALS

    from ..config.runners import has_runners

    n = len(cases)
    if has_runners(cases[0]):
        out, ends, state = [], np.empty((start.shape[0], n)), start.reshape(-1, 1)
        for j, c in enumerate(cases):
            batch = build_batch([c], registry)
            tr = one_cycle(batch, state)
            state = ends[:, j:j + 1] = tr.end_rows
            out.append(([j], batch, tr, *_figures_of(batch, tr)))
        return out, ends, 1
    groups = [(g, build_batch([cases[j] for j in g], registry)) for g in group_cases(cases, registry)]
    inits = np.repeat(start.reshape(-1, 1), n, axis=1)
    ends = np.empty_like(inits)
    rows = np.ones(start.shape[0], dtype=bool)
    rows[_TOTALS] = False          # running totals and the burned fraction restart every cycle
    rows[3] = False                # (the runners' rows, below the cylinder's, all carry on)
    for sweep in range(1, max_sweeps + 1):
        trs = []
        for g, batch in groups:
            tr = one_cycle(batch, inits[:, g])
            ends[:, g] = tr.end_rows
            trs.append(tr)
        new = np.concatenate([start.reshape(-1, 1), ends[:, :-1]], axis=1)
        a, b = new[rows], inits[rows]
        scale = np.nanmax(np.abs(a), axis=1, keepdims=True)
        diff = np.where(np.isnan(a) & np.isnan(b), 0.0, np.abs(a - b))
        change = float(np.nanmax(np.where(np.isfinite(diff), diff, np.inf) / np.maximum(scale, 1e-300)))
        if change <= tol:
            break
        inits = new
    else:
        raise CyclesimError(f"coupled cycles: the chain did not settle in {max_sweeps} sweeps"
                            f" (last change {change:.2e}); a failing cycle? try independent cycles")
    out = []
    for (g, batch), tr in zip(groups, trs):
        d, figs = _figures_of(batch, tr)
        out.append((g, batch, tr, d, figs))
    return out, ends.copy(), sweep


def _run_cycles(cases: list[Case], registry, initial: np.ndarray):
    """One full cycle for each case from the given start rows (cylinder state, then the runners'
    where there are runners: :func:`one_cycle`); returns per-case pieces."""
    from ..solve.batch import build_batch

    batch = build_batch(cases, registry)
    init = np.repeat(initial.reshape(initial.shape[0], 1), len(cases), axis=1) if initial.ndim == 1 else initial
    tr = one_cycle(batch, init)
    d, figs = _figures_of(batch, tr)
    return batch, tr, d, figs


MAX_RESOLUTION_DEG = 6.0
"""Coarsest output step [deg]: 120 samples per cycle; coarser cannot place the pressure peak or the burn."""


def _valid_steps_near(step: float) -> list[float]:
    """The two output steps [deg] nearest ``step`` that :func:`output_grid` accepts (for the error message)."""
    fine = [k / 1000.0 for k in range(5, 200) if 720000 % k == 0]           # below 0.2 deg: divide 720
    coarse = [0.05 * k for k in range(4, int(round(MAX_RESOLUTION_DEG / 0.05)) + 1) if 14400 % k == 0]
    steps = sorted(fine + coarse, key=lambda s: abs(s - step))
    return sorted(round(s, 10) for s in steps[:2])


def output_grid(resolution_deg: float | None = 0.5, sample_rate_hz: float | None = None,
                speed_rpm: float = 3000.0, fine_step_deg: float | None = None,
                names: tuple = ("traces: resolution", "traces: sample rate")) -> tuple[float, float]:
    """Output step and synthesis step [deg] of a trace set; one clear error for a step that cannot be made.

    The output is decimated from a fine synthesis grid of ``min(step / 4, 0.05)`` deg, so the
    output step must be a whole multiple of it and divide the 720 deg cycle: steps below
    0.2 deg must divide 720 deg, steps from 0.2 deg be a multiple of 0.05 deg that divides
    720 deg, at most :data:`MAX_RESOLUTION_DEG`.  With ``sample_rate_hz`` the step is
    ``6 N / rate`` [deg] at ``speed_rpm`` N and the same rules apply.

    Parameters
    ----------
    resolution_deg : float or None
        Output crank-angle step [deg] (used when ``sample_rate_hz`` is None).
    sample_rate_hz : float or None
        Output sample rate [Hz].
    speed_rpm : float
        Engine speed [rpm].
    fine_step_deg : float or None
        A given synthesis step [deg] (not checked against the output step here).
    names : (str, str)
        How the error message names the resolution and the sample rate (the command line
        gives its option names).

    Returns
    -------
    (output step [deg], synthesis step [deg])
    """
    if sample_rate_hz is not None:
        r = float(sample_rate_hz)
        if not (math.isfinite(r) and r > 0):
            raise ConfigError(f"{names[1]} {sample_rate_hz!r} Hz: expected a number > 0")
        step = 6.0 * float(speed_rpm) / r
        what = f"{names[1]} {r:g} Hz ({step:.6g} deg per sample at {float(speed_rpm):g} rpm)"
    else:
        if resolution_deg is None:
            resolution_deg = 0.5
        step = float(resolution_deg)
        if not (math.isfinite(step) and step > 0):
            raise ConfigError(f"{names[0]} {resolution_deg!r} deg: expected a number > 0")
        what = f"{names[0]} {step:g} deg"
    if fine_step_deg:
        return step, float(fine_step_deg)
    fine = min(step / 4.0, 0.05)
    ok = step <= MAX_RESOLUTION_DEG + 1e-12
    if ok:
        n_out = 720.0 / step
        ok = abs(n_out - round(n_out)) < 1e-6 * n_out
        if ok and step >= 0.2:
            q = step / 0.05
            ok = abs(q - round(q)) < 1e-6 * q
    if not ok:
        near = _valid_steps_near(min(step, MAX_RESOLUTION_DEG))
        hint = " or ".join(f"{s:g} deg" for s in near)
        if sample_rate_hz is not None:
            hint = " or ".join(f"{6.0 * float(speed_rpm) / s:.6g} Hz" for s in near) + f" ({hint})"
        raise ConfigError(
            f"{what}: the output step must divide the 720 deg cycle (a multiple of 0.05 deg from"
            f" 0.2 deg on, at most {MAX_RESOLUTION_DEG:g} deg); nearest that work: {hint}")
    return step, fine


def check_request(case: Case, n_cycles: int, variation: CycleVariation, resolution_deg: float | None = 0.5,
                  sample_rate_hz: float | None = None, fine_step_deg: float | None = None,
                  names: tuple = ("traces: resolution", "traces: sample rate")) -> tuple[float, float]:
    """Check a synthesis request before anything runs or is written; returns (output, synthesis) step [deg].

    Raises ConfigError (one line) for a config that is not a full cycle, fewer than one cycle,
    a burn model without cycle-to-cycle variation, bad spreads or rates, or an output step
    that cannot be made (:func:`output_grid`).
    """
    if case.simulation.mode != "full":
        raise ConfigError("traces: simulation.mode must be 'full' (cycles are simulated over 720 deg)")
    if n_cycles < 1:
        raise ConfigError(f"traces: cycles = {n_cycles}: expected at least 1")
    variation.check()
    model = case.submodels["burn"].model
    if model not in BURN_KEYS:
        raise ConfigError(
            f"burn.model = {model!r}: cycle-to-cycle variation is defined for {', '.join(BURN_KEYS)}"
        )
    out_step, fine = output_grid(resolution_deg, sample_rate_hz, float(case.operating.speed_rpm), fine_step_deg,
                                 names)
    from ..solve.budget import check_traces

    check_traces(int(n_cycles), 720.0 / fine + 1, 720.0 / out_step + 1)       # before any array exists
    return out_step, fine


def synthesize(
    case: Case,
    n_cycles: int = 100,
    variation: CycleVariation | None = None,
    resolution_deg: float | None = 0.5,
    sample_rate_hz: float | None = None,
    artefacts: Any = None,
    fine_step_deg: float | None = None,
    chunk: int = 150,
    checkpoint_dir=None,
    progress=None,
) -> SyntheticSet:
    """Simulate ``n_cycles`` consecutive cycles of one operating point with variation and artefacts.

    Parameters
    ----------
    case : Case, str or Path
        The operating point (full-cycle mode): a case, or a config name or path.
    n_cycles : int
        Number of cycles.
    variation : CycleVariation
        Burn-parameter distributions, misfire/partial-burn rates, coupling, seed.
    resolution_deg : float, optional
        Output crank-angle resolution [deg] (e.g. 0.1, 0.5, 1).
    sample_rate_hz : float, optional
        Sample in time at this rate [Hz] instead of a crank grid.
    artefacts : cyclesim.traces.artefacts.ArtefactSettings, optional
        Measurement flaws to apply (default: the realistic default set).
    fine_step_deg : float, optional
        Synthesis grid [deg]; default a quarter of the output step, at most 0.05 deg.
    chunk : int
        Independent cycles simulated per batch.
    checkpoint_dir : path, optional
        Keep each finished chunk here, so an interrupted set
        resumes where it stopped with the same draws and the same result.
    progress : callable, optional
        Called as ``progress(cycles_done, n_cycles)`` after each chunk.
    """
    from ..api import _registry_for
    from . import artefacts as art

    if not isinstance(case, Case):
        from ..config import load_config

        case = load_config(case)
    var = variation or CycleVariation()
    out_step, fine = check_request(case, n_cycles, var, resolution_deg, sample_rate_hz, fine_step_deg)
    settings = artefacts if artefacts is not None else art.ArtefactSettings.default()
    registry = _registry_for([case])
    speed = float(case.operating.speed_rpm)
    n_fine = int(round(720.0 / fine))
    from ..solve.budget import trace_chunk

    chunk = trace_chunk(case, n_cycles, n_fine + 1, 720.0 / out_step + 1, chunk)   # cycles per batch
    theta_f = np.linspace(-360.0, 360.0, n_fine + 1)

    mean = _steady_state(case, registry)
    start_state = mean.end_rows[:, 0]     # with runners their state rows too: every cycle carries them
    changes, misfire, partial = draw_parameters(case, n_cycles, var)
    try:
        cases = [case_with(case, ch, registry) for ch in changes]
    except ConfigError as exc:
        spreads = ", ".join(f"{sp} = {getattr(var, sp):g}" for _, sp, _ in VARIED[case.submodels["burn"].model])
        raise ConfigError(f"traces: a drawn cycle is outside the burn's ranges ({exc}); the spreads"
                          f" ({spreads}) are too wide for this point") from None
    for c, i in zip(cases, range(n_cycles)):
        c.name = f"{case.name}#{i + 1}"

    P = np.empty((n_cycles, n_fine + 1))
    Tg = np.empty_like(P)
    G = np.empty_like(P)
    W = np.empty_like(P)          # heat flow from gas to walls [W]
    knock_unb = np.full(n_cycles, np.nan)
    truth: list = [None] * n_cycles
    knock_on = np.full(n_cycles, np.nan)
    knock_int = np.zeros(n_cycles)

    def collect(idx, batch, tr, d, figs):
        """Fill the rows of cycles ``idx`` (global indices, in the batch's column order)."""
        # pressure and temperature: cubic Hermite from the solver's values and slopes; gamma: linear
        fine_grid = HermiteBasis(tr.theta, theta_f)
        p_sol, dp_sol, g_sol = d["p"], d["dp"], d["gamma"]
        I = {nm: k for k, nm in enumerate(tr.names)}
        w_per_deg = 6.0 * speed          # crank degrees per second
        for b, i in enumerate(idx):
            fine_grid.row(p_sol[b], dp_sol[b], P[i])
            fine_grid.row(tr.Y[1, b], tr.F[1, b], Tg[i])
            G[i] = np.interp(theta_f, tr.theta, g_sol[b])
            # wall heat rate: the solver's dQ_w/dtheta [J/deg] (linear between its nodes), in W
            W[i] = np.interp(theta_f, tr.theta, tr.F[I["Q_w"], b])
            W[i] *= w_per_deg
        Qc = tr.Y[I["Q_burn"], :, -1]
        Qw = tr.Y[I["Q_w"], :, -1]
        Mu = tr.Y[I["mu_int"], :, -1]
        for b, i in enumerate(idx):
            row = {"cycle": i + 1}
            mis = bool(misfire[i])
            for key in ("imep_net_bar", "imep_gross_bar", "pmep_bar", "p_max_bar", "theta_pmax_deg",
                        "ca10_deg", "ca50_deg", "ca90_deg", "burn_0_10_deg", "burn_10_90_deg",
                        "trapped_mass_mg", "residual_fraction", "fuel_energy_J"):
                v = float(np.asarray(figs[key])[b])
                if mis and (key.startswith("ca") or key.startswith("burn_")):
                    v = float("nan")
                row[key] = v
            for key in TRUTH_MODEL_FIGURES:        # what a predictive burn drew: its turbulence
                if key in figs:
                    row[key] = float("nan") if mis else float(np.asarray(figs[key])[b])
            # fresh charge inducted over the cycle: fuel and air (the rest of the inducted mass is EGR)
            row["fuel_mass_mg"] = float(np.asarray(figs["fuel_mass_mg"])[b])
            row["air_mass_mg"] = float(Mu[b]) * 1e6 - row["fuel_mass_mg"]
            row["heat_release_J"] = float(Qc[b])
            row["wall_heat_J"] = float(Qw[b])
            row["combustion_efficiency"] = float(changes[i]["burn.combustion_efficiency"])
            for k, v in changes[i].items():
                if k != "burn.combustion_efficiency":
                    row[k] = v
            row["misfire"] = mis
            row["partial_burn"] = bool(partial[i])
            if "knock_onset_deg" in figs:
                knock_on[i] = float(np.asarray(figs["knock_onset_deg"])[b])
                knock_int[i] = float(np.nan_to_num(np.asarray(figs.get("knock_intensity", np.zeros(batch.B)))[b]))
                unb = figs.get("knock_unburned_fraction_at_onset")
                knock_unb[i] = float(np.asarray(unb)[b]) if unb is not None else knock_int[i]
            row["knock_onset_deg"] = knock_on[i]
            row["knock_intensity"] = knock_int[i]
            row["error"] = tr.failed[b] or ""
            truth[i] = row

    ckpt = Path(checkpoint_dir) if checkpoint_dir is not None else None
    if ckpt is not None:
        ckpt.mkdir(parents=True, exist_ok=True)
        _check_checkpoint(ckpt, case, n_cycles, var, fine)

    def load_part(i0, n):
        f = ckpt / f"cycles_{i0:06d}_{n:06d}.npz" if ckpt is not None else None
        if f is None or not f.exists():
            return None, f
        z = np.load(f, allow_pickle=False)
        if "W" not in z.files or "knock_unb" not in z.files:
            return None, f                 # a chunk of an older version: simulated again
        P[i0:i0 + n], Tg[i0:i0 + n], G[i0:i0 + n], W[i0:i0 + n] = z["P"], z["T"], z["G"], z["W"]
        knock_on[i0:i0 + n], knock_int[i0:i0 + n] = z["knock_on"], z["knock_int"]
        knock_unb[i0:i0 + n] = z["knock_unb"]
        truth[i0:i0 + n] = json.loads(str(z["truth"]))
        return z["end_state"], f

    def save_part(f, i0, n, end_state):
        if f is None:
            return
        import io

        from ..results.atomic_files import atomic_write_bytes

        buf = io.BytesIO()
        np.savez(buf, P=P[i0:i0 + n], T=Tg[i0:i0 + n], G=G[i0:i0 + n], W=W[i0:i0 + n],
                 knock_on=knock_on[i0:i0 + n], knock_int=knock_int[i0:i0 + n], knock_unb=knock_unb[i0:i0 + n], truth=json.dumps(truth[i0:i0 + n], default=float),
                 end_state=end_state)
        atomic_write_bytes(f, buf.getvalue())

    sweeps: list[int] = []
    state = start_state
    for i0 in range(0, n_cycles, chunk):
        part = cases[i0:i0 + chunk]
        end, f = load_part(i0, len(part))
        if end is None:
            # cycles share a batch only where their settings allow (the crank grid depends on
            # the burn duration), so every cycle gives the figures it gives alone
            if var.coupled:
                groups, end, k = _run_chain(part, registry, state)
                sweeps.append(k)
            else:
                groups = []
                end = np.empty((start_state.shape[0], len(part)))
                for g in group_cases(part, registry):
                    batch, tr, d, figs = _run_cycles([part[j] for j in g], registry, start_state)
                    groups.append((g, batch, tr, d, figs))
                    end[:, g] = tr.end_rows
            for g, batch, tr, d, figs in groups:
                collect([i0 + j for j in g], batch, tr, d, figs)
            save_part(f, i0, len(part), end)
        state = np.asarray(end)[:, -1]
        if progress is not None:
            progress(i0 + len(part), n_cycles)

    # measurement: the analogue chain on the fine grid (thermal drift driven by the wall heat flow)
    rng = np.random.default_rng(var.seed + 7919)
    bore = float(case.engine.bore_mm) * 1e-3
    Pm, art_truth = art.apply_signal_chain(
        P, theta_f, speed, settings, rng, T=Tg, gamma=G, bore_m=bore,
        knock_onset_deg=knock_on, knock_unburned_fraction=knock_unb, wall_heat_rate=W,
    )
    W = Tg = G = None             # freed before decimation
    # the two decimations are independent and numpy's correlation releases the GIL: on two
    # threads where the machine has two cores (the same values, computed side by side)
    with ThreadPoolExecutor(max_workers=max(1, min(2, os.cpu_count() or 1))) as pool:
        dec = list(pool.map(lambda X: art.decimate_to(theta_f, X, out_step), [P, Pm]))
    del Pm
    theta_o, P_true_o = dec[0]
    Pm_o = dec[1][1]
    # total deterministic error of the signal (before noise and quantisation) at the pegging
    # angles: the analogue chain's error here, the offset added below
    ivc = float(case.valves.ivc_deg)
    at = {"bdc": -180.0, "ivc": ivc}
    err_at = {k: _row_values_at(theta_o, Pm_o, a) - _row_values_at(theta_o, P_true_o, a)
              for k, a in at.items()}
    # the ADC's part at the output rate: offset, noise, clipping, quantisation; the intake channel
    intake_pa = float(case.operating.intake_pressure_bar) * 1e5
    Pm_o, Pint_o, art_truth = art.apply_sampling(Pm_o, settings, rng, art_truth, intake_pressure_pa=intake_pa)
    for k in at:
        art_truth[f"true_signal_offset_at_{k}_bar"] = (err_at[k] / 1e5 + art_truth["offset_bar"])
    time_s = (theta_o - theta_o[0]) / (6.0 * speed) if sample_rate_hz else None
    for i, row in enumerate(truth):
        for k, v in art_truth.items():
            arr = np.asarray(v)
            if arr.ndim == 1 and arr.shape[0] == n_cycles:
                row[f"artefact.{k}"] = float(arr[i])
    stats = set_statistics(truth)
    stats.update({f"artefact.{k}": (v if isinstance(v, str) else float(v) if np.ndim(v) == 0 else None)
                  for k, v in art_truth.items() if np.ndim(v) == 0})
    geometry = {
        "bore_m": bore,
        "stroke_m": float(case.engine.stroke_mm) * 1e-3,
        "conrod_m": float(case.engine.conrod_mm) * 1e-3,
        "compression_ratio": float(case.engine.compression_ratio),
        "pin_offset_m": float(case.engine.pin_offset_mm) * 1e-3,
    }
    # what a real recording carries: no artefact setting, no seed
    meta = {
        "operating_point": case.name,
        "speed_rpm": speed,
        "n_cycles": n_cycles,
        "resolution_deg": out_step,
        "sample_rate_hz": sample_rate_hz,
        "crank_angle_convention": "degrees, 0 = firing TDC, negative before; one cycle -360..360",
        "units": {"pressure": "Pa in arrays, bar in CSV columns", "crank_angle": "deg", "time": "s"},
        **geometry,
        "intake_channel": "intake-manifold absolute pressure, sampled with the cylinder pressure"
                          " (Pa in arrays, bar in CSV columns)",
        # the test bed's operating-point log: intake-manifold pressure set point
        "intake_pressure_pa": intake_pa,
        # measured channels of the test bed: mean over the set's cycles, as from the air and fuel flow meters
        "air_mass_per_cycle_mg": float(np.mean([r.get("air_mass_mg", np.nan) for r in truth])),
        "fuel_mass_per_cycle_mg": float(np.mean([r.get("fuel_mass_mg", np.nan) for r in truth])),
        "air_fuel_mass_source": "mean over the set's cycles of the fresh air and fuel inducted, as from the test"
                                " bed's air and fuel flow meters",
    }
    gen = {
        "variation": asdict(var),
        "seed": var.seed,
        "artefacts": asdict(settings) if hasattr(settings, "__dataclass_fields__") else str(settings),
        "synthesis_step_deg": fine,
        "coupled_chain": ({"tolerance": CHAIN_TOLERANCE, "sweeps_per_chunk": sweeps, "chunk": chunk}
                          if var.coupled else None),
        "signal_offset_angles_deg": at,
        "signal_offset_definition": "artefact.true_signal_offset_at_<bdc|ivc>_bar: measured signal before"
                                    " noise and quantisation minus true pressure at that crank angle"
                                    " (linear between output samples), per cycle [bar]",
    }
    return SyntheticSet(theta_o, time_s, P_true_o, Pm_o, Pint_o, truth, stats, meta, gen)


def _row_values_at(theta: np.ndarray, X: np.ndarray, angle: float) -> np.ndarray:
    """Each row of ``X`` (n_cycles, n) at crank angle ``angle`` [deg], linear between samples."""
    j = int(np.clip(np.searchsorted(theta, angle) - 1, 0, theta.size - 2))
    w = (angle - theta[j]) / (theta[j + 1] - theta[j])
    return (1.0 - w) * X[:, j] + w * X[:, j + 1]


def _check_checkpoint(ckpt: Path, case: Case, n: int, var: CycleVariation, fine: float) -> None:
    """Refuse to resume from checkpoints of a different set (see :mod:`cyclesim.fingerprint`)."""
    from ..fingerprint import digest, refuse_if_different, study_record
    from ..output import atomic_write_text

    record = study_record("traces", case, {}, False,
                          {"n_cycles": n, "variation": asdict(var), "fine_step_deg": fine})
    f = ckpt / "set.json"
    if f.exists():
        try:
            old = json.loads(f.read_text(encoding="utf-8"))["record"]
            if not isinstance(old, dict):
                raise TypeError(type(old).__name__)
        except (OSError, UnicodeDecodeError, ValueError, KeyError, TypeError):
            raise CyclesimError(f"--resume: {ckpt} holds chunks of a trace set without a readable record"
                                " (written by an older cyclesim?); use another --out or --force") from None
        refuse_if_different(str(ckpt), old, record, what="trace set")
    else:
        atomic_write_text(f, json.dumps({"digest": digest(record), "record": record}, sort_keys=True))


def set_statistics(truth: Sequence[dict]) -> dict:
    """COV of net IMEP, means and the share of knocking cycles from per-cycle truth rows."""
    imep = np.array([r["imep_net_bar"] for r in truth], dtype=float)
    ok = np.isfinite(imep)
    mean = float(np.mean(imep[ok])) if ok.any() else float("nan")
    sd = float(np.std(imep[ok], ddof=1)) if ok.sum() > 1 else 0.0
    out = {
        "n_cycles": len(truth),
        "imep_net_mean_bar": mean,
        "imep_net_sd_bar": sd,
        "cov_imep_net": sd / mean if mean else float("nan"),
    }
    for key in ("imep_gross_bar", "p_max_bar", "theta_pmax_deg", "ca10_deg", "ca50_deg", "ca90_deg",
                "burn_0_10_deg", "burn_10_90_deg"):
        v = np.array([r.get(key, np.nan) for r in truth], dtype=float)
        out[f"{key.replace('_bar', '').replace('_deg', '')}_mean{key[key.rfind('_'):]}"] = (
            float(np.nanmean(v)) if np.isfinite(v).any() else float("nan"))
        if key.startswith(("ca50", "burn_")):
            out[f"{key[:key.rfind('_')]}_sd{key[key.rfind('_'):]}"] = (
                float(np.nanstd(v, ddof=1)) if np.isfinite(v).sum() > 1 else float("nan"))
    kn = np.array([np.isfinite(r.get("knock_onset_deg", np.nan)) for r in truth])
    out["knocking_share"] = float(kn.mean()) if len(kn) else 0.0
    out["misfire_share"] = float(np.mean([r["misfire"] for r in truth]))
    out["partial_burn_share"] = float(np.mean([r["partial_burn"] for r in truth]))
    return out
