"""Python API: load configs, simulate batches of cases, get plain-data results.

>>> import cyclesim
>>> res = cyclesim.run("demo")                       # the built-in demo engine
>>> res.summary["imep_net_bar"], res.summary["ca50_deg"]
>>> cases = [cyclesim.load_config("demo", [f"burn.spark_advance_deg={a}"]) for a in (10, 20, 30)]
>>> results = cyclesim.simulate(cases)               # one batch, three cases
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable, Mapping, Sequence

import numpy as np

from .config import Case, case_with, flat_inputs, load_config, resolve_case
from .errors import ConfigError, CyclesimError, PluginError, SolverError
from .output import CAUTION, CONVENTIONS
from .output import plain as _plain

__all__ = ["CaseResult", "simulate", "run", "load_config", "load_cases", "Case", "case_with"]


@dataclass
class CaseResult:
    """Result of one case: inputs, summary figures, trace and messages.

    Attributes
    ----------
    name : str
    inputs : dict
        Flat ``section.key`` -> value of every validated input.
    summary : dict
        Figures with units in the keys (floats), plus ``energy_balance`` (a dict).
    trace : dict of ndarray
        Crank-angle resolved columns (1-D, equal length), units in the keys.
    warnings : list of str
        Things the user needs to know (not converged, validity ranges, ...).
    error : str or None
        Why the case failed; then ``summary`` and ``trace`` are empty.
    models : dict
        Submodel chosen per role.
    references : list of str
        Published sources of the submodels used.
    cycle_loop : str
        The loop that integrated the cycles: ``"compiled"``, or ``"numpy"`` (with the reason
        where numba is installed but a submodel has no compiled form).
    notes : list of str
        What the figures rest on where it is not the usual (a motored case: the friction's
        conditions, the energy balance's basis, the fitting windows).

    ``summary["mode"]`` is ``"fired"`` or ``"motored"`` (no fuel burns, see
    :mod:`cyclesim.results.motoring`); figures with no meaning in that mode are NaN (``null`` in JSON).
    """

    name: str
    inputs: dict
    summary: dict = field(default_factory=dict)
    trace: dict = field(default_factory=dict)
    warnings: list = field(default_factory=list)
    error: str | None = None
    models: dict = field(default_factory=dict)
    references: list = field(default_factory=list)
    cycle_loop: str = ""
    notes: list = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return self.error is None

    def summary_json(self) -> dict:
        """Summary, inputs and messages as JSON-ready plain data."""
        return {
            "name": self.name,
            "error": self.error,
            "warnings": list(self.warnings),
            "models": dict(self.models),
            "summary": _plain(self.summary),
            "inputs": _plain(self.inputs),
            "references": list(self.references),
            "cycle_loop": self.cycle_loop,
            "notes": list(self.notes),
            "caution": CAUTION,
            "conventions": dict(CONVENTIONS),
        }




def load_cases(path, overrides: Sequence[str] = ()) -> list[Case]:
    """The cases of a config file or built-in name as a list (one case per config), for
    :func:`simulate`; ``overrides`` are ``key=value`` texts as for :func:`load_config`."""
    return [load_config(path, _override_list(overrides))]


def _override_list(overrides) -> list[str]:
    """``key=value`` texts from one text, a sequence of texts, or a mapping of dotted keys to values."""
    if overrides is None:
        return []
    if isinstance(overrides, str):
        return [overrides]
    if isinstance(overrides, Mapping):
        return [f"{k}={v}" for k, v in overrides.items()]
    return list(overrides)


def _registry_for(cases: Sequence[Case]):
    from .registry import get_registry

    plugins: tuple[str, ...] = ()
    for c in cases:
        for p in c.plugins:
            if p not in plugins:
                plugins += (p,)
    return get_registry(plugins)


def model_figures(batch, cols: dict, summary: Mapping | None = None) -> tuple[dict, list[list[str]]]:
    """The submodels' own figures and per-case warnings from a finished batch's trace columns.

    The emissions model runs last, with the batch's ``summary`` figures (arrays (B,), ``mode``
    ``"fired"`` or ``"motored"`` among them); the trace columns it returns are added to ``cols``.
    """
    figs: dict = {}
    warn: list[list[str]] = [[] for _ in range(batch.B)]
    if "burned_temperature_K" in cols:   # the two-zone cylinder's own figures
        from .results.zone_trace import two_zone_figures

        figs.update(two_zone_figures(cols))
    # a motored case burns no fuel: a burn law's own warnings (e.g. unburned at EVO) do not apply
    cut = np.asarray(getattr(batch.operating, "fuel_cut", False), dtype=bool) * np.ones(batch.B, dtype=bool)
    for role, model in batch.models.items():
        try:
            figs.update(model.figures(cols))
            for i, w in enumerate(model.warnings(cols)):
                if not (role == "burn" and cut[i]):
                    warn[i].extend(w)
        except CyclesimError:
            raise
        except Exception as exc:  # noqa: BLE001
            raise PluginError(f"{role} model {model.name!r} raised {type(exc).__name__} in figures(): {exc}") from exc
    em = batch.models.get("emissions")
    if em is not None:
        try:
            got = em.emissions(cols, {**(summary or {}), **figs})
        except CyclesimError:
            raise
        except Exception as exc:  # noqa: BLE001
            raise PluginError(f"emissions model {em.name!r} raised {type(exc).__name__} in emissions():"
                              f" {exc}") from exc
        figs.update(got.figures)
        cols.update(got.columns)
        for i, w in enumerate(got.warnings):
            warn[i].extend(w)
    return figs, warn


def _run_batch(cases: list[Case], registry, progress=None) -> list[CaseResult]:
    from .solve.batch import build_batch
    from .solve.solver import integrate

    batch = build_batch(cases, registry)
    tr = integrate(batch, progress=progress)
    return results_from_trace(batch, tr, registry)


def results_from_trace(batch, tr, registry) -> list[CaseResult]:
    """Per-case results (figures, trace columns, warnings) of an integrated batch."""
    from .results.figures import compute_figures, derived_trace, output_trace
    from .results.motoring import MODE_MOTORED, motored_notes
    from .config.plausibility import input_warnings

    cases = batch.cases
    d = derived_trace(batch, tr)
    figs = compute_figures(batch, tr, d)
    modes = [str(m) for m in figs.pop("mode")]
    step = float(batch.simulation.output_step_deg) or None
    cols = output_trace(batch, tr, d, step)
    made = {k: id(v) for k, v in cols.items()}     # the columns this output made (the models' may be kept by them)
    extra = {}
    for got in registry.pm.hook.cyclesim_extra_figures(summary=figs, trace=cols, cases=cases):
        if got:
            extra.update(got)
    model_figs, model_warn = model_figures(batch, cols, {**figs, "mode": np.asarray(modes)})
    refs: list[str] = []
    for model in batch.models.values():
        for r in getattr(model, "references", ()):
            if r not in refs:
                refs.append(r)
    # every figure as a Python list once, so each case's summary is a row of plain lookups
    per_key = {}
    for k, v in {**figs, **model_figs, **extra}.items():
        if isinstance(v, dict):
            per_key[k] = (True, {kk: np.asarray(vv, dtype=float).tolist() for kk, vv in v.items()})
        else:
            a = np.asarray(v)
            per_key[k] = (False, a.tolist() if a.dtype == bool else a.astype(float).tolist())
    # each trace column as one block of rows of its own (a column made here for this output is used as
    # it is, any other copied once): every case's trace is its rows, not a copy per case and column
    ids = [id(v) for v in cols.values()]
    blocks = {k: _own_rows(v, made.get(k) == id(v) and ids.count(id(v)) == 1) for k, v in cols.items()}
    results = []
    for i, case in enumerate(cases):
        res = CaseResult(
            name=case.name,
            inputs=flat_inputs(case),
            models={r: ch.model for r, ch in case.submodels.items()},
            cycle_loop=tr.loop,
        )
        res.references = list(refs)           # each result owns its lists
        res.warnings.extend(input_warnings(case))
        if tr.failed[i]:
            res.error = tr.failed[i]
            results.append(res)
            continue
        summ = {k: ({kk: vv[i] for kk, vv in col.items()} if nested else col[i])
                for k, (nested, col) in per_key.items()}
        summ["mode"] = modes[i]
        res.summary = summ
        if modes[i] == MODE_MOTORED:
            res.notes = motored_notes(summ, res.inputs, case.submodels["friction"].model)
        res.trace = {k: v[i] for k, v in blocks.items()}
        if batch.simulation.mode == "full" and not tr.converged[i]:
            res.warnings.append(
                f"not settled: net IMEP or trapped mass still changed by more than"
                f" {batch.simulation.tolerance:g} after {int(tr.cycles[i])} cycles"
                f" (raise simulation.max_cycles)"
            )
        res.warnings.extend(model_warn[i])
        res.warnings.extend(_gas_exchange_warnings(summ))
        if summ.get("fmep_bar", 0.0) < 0.0:
            res.warnings.append(f"friction model {case.submodels['friction'].model!r} gives a negative FMEP"
                                f" ({summ['fmep_bar']:.2f} bar): brake output above indicated (components are"
                                f" in Pa, positive for a loss)")
        if batch.simulation.mode == "full" and summ.get("inducted_mass_mg", 1.0) <= 0:
            res.warnings.append("no net fresh charge enters through the intake valves at this point")
        results.append(res)
    return results


def _own_rows(a, ours: bool) -> np.ndarray:
    """``a`` (B, n) as a writable C-contiguous block that no other array shares: ``a`` itself where
    it is ``ours`` (made for this output and held nowhere else) and owns its data so, else a copy
    (a view of the solver's trace, a broadcast grid, a model's column)."""
    if ours and isinstance(a, np.ndarray) and a.base is None and a.flags.c_contiguous and a.flags.writeable:
        return a
    return np.array(a)


def _gas_exchange_warnings(s: dict) -> list[str]:
    out = []
    from .results.motoring import POLYTROPIC_NULL_WARNING, POLYTROPIC_WINDOWS_DEG

    for w, (a, b) in POLYTROPIC_WINDOWS_DEG.items():
        if not np.isfinite(s.get(f"polytropic_exponent_{w}", 0.0)):
            out.append(f"{POLYTROPIC_NULL_WARNING} for {w}: the volume hardly changes over its window"
                       f" ({a:g}..{b:g} deg, clipped to IVC..EVO), or the window holds less than 5 deg")
    m = s.get("trapped_mass_mg")
    # a side with a runner (cyclesim.pipes.runners) carries its backflow itself
    run_i, run_e = "intake_runner_mass_change_mg" in s, "exhaust_runner_mass_change_mg" in s
    if m and not run_i and s.get("intake_backflow_mass_mg", 0.0) > 0.25 * m:
        out.append(
            f"intake backflow {s['intake_backflow_mass_mg']:.1f} mg ({100 * s['intake_backflow_mass_mg'] / m:.0f} % of"
            f" trapped mass): it is held unmixed in the port and returns first; mixing with the port"
            f" and runner is not modelled (approximate)"
        )
    if m and not run_e and s.get("exhaust_backflow_mass_mg", 0.0) > 0.05 * m:
        out.append(
            f"exhaust backflow {s['exhaust_backflow_mass_mg']:.1f} mg into the cylinder: it enters at the exhaust"
            f" plenum's temperature as burned gas (approximate)"
        )
    if not run_e and s.get("exhaust_choked_deg", 0.0) > 90.0:
        out.append(
            f"exhaust flow choked for {s['exhaust_choked_deg']:.0f} deg: quasi-steady orifice flow is approximate"
            f" in a strong unsteady blowdown"
        )
    if s.get("burned_fraction_ivc", 0.0) > BURNED_FRACTION_LIMIT:
        out.append(f"burned-gas fraction at IVC {100 * s['burned_fraction_ivc']:.0f} %: beyond about"
                   f" {100 * BURNED_FRACTION_LIMIT:.0f} % a spark-ignited charge no longer burns steadily (misfires"
                   f" and partial burns; common practice), but the burn model burns it as given")
    if not np.isfinite(s.get("exhaust_temperature_K", 0.0)):
        out.append("exhaust temperature not defined: the net flow out through the exhaust valves is too small"
                   " against its backflow")
    return out


def _closure_basis(res: CaseResult) -> str:
    from .results.motoring import energy_basis

    eb = res.summary.get("energy_balance") if res.ok else None
    return energy_basis(eb)[1] if eb else "fuel energy"


def _closure(res: CaseResult) -> float:
    eb = res.summary.get("energy_balance") if res.ok else None
    if not eb:
        return 0.0
    cf = eb.get("closure_fraction", 0.0)
    return float(cf) if np.isfinite(cf) else float("inf")


BURNED_FRACTION_LIMIT = 0.3
"""Burned-gas (residual plus EGR) mass fraction at IVC above which a case is warned as beyond
stable spark ignition (common practice: about 25-30 % for a homogeneous charge)."""

REFINE_CLOSURE = 1e-3
"""Energy-balance miss above which a case is re-run at half the step: a fraction of the fuel energy
(fired) or of the compression work (motored, see :mod:`cyclesim.results.motoring`)."""
REFINE_STEPS = 2
"""How many times a case's step is halved before it is reported as failed."""


def failed_result(case: Case, exc: BaseException) -> CaseResult:
    """A case's result recording that it raised: the tool's own message, or for any other
    exception its kind and message on one line."""
    if isinstance(exc, CyclesimError):
        msg = str(exc)
    else:
        text = " ".join(str(exc).split()) or "(no message)"
        msg = f"{type(exc).__name__} while simulating this case: {text}"
    return CaseResult(name=case.name, inputs=flat_inputs(case), error=msg)


def _check_environment() -> None:
    """The environment's settings (loop, threads, memory budget), wrong for every case alike: raised
    here once rather than recorded as each case's failure."""
    import cyclesim.solve.kernel as kernel
    from .solve.budget import budget_bytes

    kernel.choice()
    kernel.threads()
    kernel.compiled_module()
    budget_bytes()


def _within_budget(cases, groups, isolate):
    """Each batch as (indices, cases, None), split where the whole would be over the memory budget;
    a case that alone is over it is (indices, cases, [its failed result]) with ``isolate``."""
    from .solve.budget import WorkBudgetError, cases_per_batch

    for idx in groups:
        group = [cases[i] for i in idx]
        try:
            k = cases_per_batch(group)
        except WorkBudgetError as exc:
            if not isolate:
                raise
            for i in idx:
                yield [i], [cases[i]], [failed_result(cases[i], exc)]
            continue
        for j in range(0, len(idx), k):
            yield idx[j:j + k], group[j:j + k], None


def _simulate_once(cases, registry, progress, isolate):
    from .solve.batch import group_cases

    out: list[CaseResult | None] = [None] * len(cases)
    try:
        groups = group_cases(cases, registry)
    except Exception:  # noqa: BLE001  (a plug-in's step hint raised: each case on its own)
        if not isolate:
            raise
        groups = [[i] for i in range(len(cases))]
    for idx, group, res in _within_budget(cases, groups, isolate):
        try:
            res = res or _run_batch(group, registry, progress)
        except Exception as exc:  # noqa: BLE001  (isolate: whatever a case raises fails that case only)
            if not isolate:
                raise
            if len(group) == 1:
                res = [failed_result(group[0], exc)]
            else:
                res = []
                for c in group:
                    try:
                        res.extend(_run_batch([c], registry, progress))
                    except Exception as e1:  # noqa: BLE001
                        res.append(failed_result(c, e1))
        for i, r in zip(idx, res):
            out[i] = r
    return out


def _refuse_shut_valves(cases, registry) -> None:
    """A full cycle with a valve-flow model that keeps the valves shut cannot run (its energy balance
    cannot close): said before any compiling or simulating."""
    for c in cases:
        vf = c.submodels["valve_flow"].model
        if c.simulation.mode == "full" and not getattr(registry.submodel_class("valve_flow", vf), "exchanges_gas", True):
            raise ConfigError(f"valve_flow.model = {vf!r} keeps the valves shut: a full cycle needs a valve-flow"
                              " model (e.g. poppet), or simulation.mode=closed for IVC to EVO alone")


def simulate(cases, progress: Callable[[int], None] | None = None,
             isolate: bool = True, refine: bool = True) -> list[CaseResult]:
    """Simulate cases, batched where they share submodels and grid; results in input order.

    Parameters
    ----------
    cases : sequence of Case (or config names / paths), or one of them
        Build variants with :func:`load_config` overrides or :func:`case_with`; a Case is
        validated when it is made, so change one only through these.
    progress : callable, optional
        Called with the number of each cycle as a batch finishes it.
    isolate, refine : bool
        See below.

    Returns
    -------
    list of CaseResult
        One per case, in order; a failed case has ``error`` set and empty figures.

    A batch that fails as a whole (a plug-in raising, say) is re-run case by
    case when ``isolate`` is true, so one bad case does not spoil the others.

    A case whose energy balance misses by more than :data:`REFINE_CLOSURE` of
    its fuel energy is numerically unreliable at its step: with ``refine`` it is
    re-run at half the step, up to :data:`REFINE_STEPS` times (the decision
    depends only on the case itself, so batch-mates are unaffected), and the
    result says so; if it still misses, the case fails with that message
    rather than returning a wrong number.
    """
    from pathlib import Path

    if isinstance(cases, (Case, str, Path)):
        cases = [cases]
    cases = [c if isinstance(c, Case) else load_config(c) for c in cases]
    registry = _registry_for(cases)
    _refuse_shut_valves(cases, registry)
    _check_environment()
    out = _simulate_once(cases, registry, progress, isolate)
    if not refine:
        return out  # type: ignore[return-value]
    for _ in range(REFINE_STEPS):
        bad = [i for i, r in enumerate(out) if abs(_closure(r)) > REFINE_CLOSURE]
        if not bad:
            break
        finer = []
        redo_idx = []
        for i in bad:
            c = cases[i]
            h = float(c.simulation.step_deg) / 2.0
            try:
                c2 = case_with(c, {"simulation.step_deg": h})
            except CyclesimError:
                continue        # at the finest step allowed: reported as failed below
            c2.name = c.name
            cases[i] = c2
            finer.append(c2)
            redo_idx.append(i)
        redo = _simulate_once(finer, registry, progress, isolate)
        for i, r in zip(redo_idx, redo):
            miss = 100 * _closure(out[i])
            r.warnings.insert(0, f"re-run at simulation.step_deg = {cases[i].simulation.step_deg:g}: the energy"
                                 f" balance at twice that step missed by {miss:.2g} % of the"
                                 f" {_closure_basis(out[i])}")
            out[i] = r
    for i, r in enumerate(out):
        miss = _closure(r)
        if abs(miss) > REFINE_CLOSURE and not math.isfinite(miss):
            s = r.summary
            r.error = ("solver: the energy balance cannot be formed (a non-finite term"
                       + (f"; burned-gas fraction at IVC {100 * s['burned_fraction_ivc']:.0f} %, net fresh charge"
                          f" {s.get('inducted_mass_mg', float('nan')):.3g} mg"
                          if "burned_fraction_ivc" in s else "")
                       + "): the gas exchange hardly renews the charge at these plenum pressures and valve"
                         " events; check operating.exhaust_pressure_bar against intake_pressure_bar and the overlap")
            r.summary, r.trace = {}, {}
        elif abs(miss) > REFINE_CLOSURE:
            r.error = (f"solver: the energy balance misses by {100 * miss:.2g} % of the {_closure_basis(r)} even at"
                       f" simulation.step_deg = {cases[i].simulation.step_deg:g}: numerically unreliable at this"
                       f" crank angle resolution; reduce simulation.step_deg")
            r.summary, r.trace = {}, {}
    from .solve.stepcheck import requested, step_check

    if requested():           # CYCLESIM_STEP_CHECK=1: every case again at half its step
        step_check(cases, out, simulate=simulate)
    return out  # type: ignore[return-value]


def run(config="demo", overrides: Sequence[str] | Mapping | str = ()) -> CaseResult:
    """Simulate one case: a config (path or built-in name) or a :class:`Case`, with ``overrides``.

    Parameters
    ----------
    config : str, Path or Case
    overrides : str, sequence of str, or mapping
        ``"section.key=value"`` texts (one, or several), or ``{"section.key": value}``.

    Returns
    -------
    CaseResult

    Raises :class:`cyclesim.errors.CyclesimError` if an input is invalid or the case fails.
    """
    case, _ = resolve_case(config, _override_list(overrides))
    res = simulate([case], isolate=False)[0]
    if res.error:
        raise SolverError(res.error)
    return res
