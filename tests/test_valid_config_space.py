"""Hypothesis over the whole documented space of valid configs.

Every key that ``cyclesim keys`` lists and every parameter of every built-in submodel is drawn
from its own documented range (``Param.min``/``max``, choices, kinds), on any built-in config,
with any built-in model per role.  Whatever is drawn, the tool either runs the case or ends in
its own error class with one line; a case that ran has no NaN among its figures and closes its
energy balance within 1e-3 of the fuel energy (the first law over the cycle; the tolerance is
the one ``cyclesim.simulate`` refines its step to reach, ``api.REFINE_CLOSURE``).

CI draws a bounded number of examples (``CYCLESIM_HYPOTHESIS_EXAMPLES``, default 24, about
30-60 s on one core).  A long run, e.g.::

    CYCLESIM_HYPOTHESIS_EXAMPLES=2000 CYCLESIM_HYPOTHESIS_ALL=1 python -m pytest -q -s \
        tests/test_valid_config_space.py

draws 2,000 examples; ``CYCLESIM_HYPOTHESIS_ALL=1`` also runs the corners listed in
:data:`OPEN_ELSEWHERE` (known and tracked separately) but the step budget's, and ``-s`` prints the count of
outcomes and every distinct failure at the end.
"""

from __future__ import annotations

import math
import os
import re
import sys
from collections import Counter

from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st

import cyclesim
from cyclesim.config import CORE_SCHEMA, MULTI_SCHEMA, builtin_configs, effective_step_deg, load_config
from cyclesim.errors import CyclesimError
from cyclesim.results.motoring import (COMBUSTION_ONLY_KEYS,
    MODE_MOTORED,
    MOTORED_ONLY_KEYS,
    POLYTROPIC_NULL_WARNING)
from cyclesim.params import Param
from cyclesim.registry import get_registry

EXAMPLES = int(os.environ.get("CYCLESIM_HYPOTHESIS_EXAMPLES", "24"))
ALL_CORNERS = os.environ.get("CYCLESIM_HYPOTHESIS_ALL", "") not in ("", "0")

STEP_BUDGET = 40_000
"""Most integration steps per cycle a drawn case may need to be run here (720 deg over the
effective step); beyond it a case needs minutes and gigabytes (the bound on such runs is
tracked with the memory estimate of the run itself)."""

OPEN_ELSEWHERE = {
    "budget": f"more than {STEP_BUDGET} steps or output points per cycle (very low speed, very small step):"
              " tracked with the run's memory and step estimate",
}
"""Corners of the documented ranges that are known to fail and are fixed elsewhere; drawn only
with CYCLESIM_HYPOTHESIS_ALL=1 (the long run reports them)."""

EXHAUST_T_NULL = "exhaust temperature not defined"
"""The warning that declares exhaust_temperature_K null: the net outflow's mean enthalpy is no gas
state within 250-4000 K (heavy exhaust backflow; cyclesim.results.figures).  Without it, a NaN there fails."""

DECLARED_NULL = {"exhaust_temperature_K": EXHAUST_T_NULL,
                 "polytropic_exponent_compression": POLYTROPIC_NULL_WARNING,
                 "polytropic_exponent_expansion": POLYTROPIC_NULL_WARNING}
"""Figures that may be NaN in a case that ran, each only beside the warning that says so."""

OUTCOMES: Counter = Counter()
FAILURES: dict[str, str] = {}


def _number(p: Param):
    """A value inside the declared range of a float/int Param (bounds included unless exclusive)."""
    if p.min is not None:
        lo = p.min
        hi = p.max if p.max is not None else lo + 1e3
    else:
        hi = p.max if p.max is not None else 1e3
        lo = hi - 2e3 if p.max is None else hi - 1e3
    if p.kind == "int":
        a = int(math.ceil(lo)) + (1 if p.min_exclusive and float(lo).is_integer() else 0)
        b = int(math.floor(hi)) - (1 if p.max_exclusive and float(hi).is_integer() else 0)
        return st.integers(a, b)
    edges = [v for v, excl in ((lo, p.min_exclusive), (hi, p.max_exclusive)) if not excl]
    inner = st.floats(lo, hi, exclude_min=p.min_exclusive, exclude_max=p.max_exclusive,
                      allow_nan=False, allow_infinity=False)
    if lo > 0 and hi / lo > 100:        # wide positive ranges (speed, areas): every decade
        inner = st.one_of(inner, st.floats(math.log10(lo), math.log10(hi)).map(lambda e: 10.0 ** e)
                          .filter(lambda v: (v > lo or not p.min_exclusive) and (v < hi or not p.max_exclusive)
                                  and lo <= v <= hi))
    return st.one_of(inner, st.sampled_from(edges)) if edges else inner


FUELS = sorted(get_registry().fuels)
"""The fuels installed when this module is collected (before any test installs one of its own)."""


def value_of(p: Param, cylinders: int):
    """A strategy for one documented value of ``p`` (None when the kind has no drawable range)."""
    if p.kind in ("float", "int"):
        return _number(p)
    if p.kind == "bool":
        return st.booleans()
    if p.kind == "choice":
        return st.sampled_from(p.choices)
    if p.kind == "list":
        if p.name == "firing_order":
            return st.permutations(list(range(1, cylinders + 1)))
        if p.name == "exhaust_branches":
            return st.lists(st.integers(1, cylinders), min_size=cylinders, max_size=cylinders)
        one = st.sampled_from(p.choices) if p.choices else _number(Param(p.name, p.unit, 0.0, p.doc, p.min, p.max,
                                                                          p.min_exclusive, p.max_exclusive))
        return st.lists(one, min_size=cylinders, max_size=cylinders)
    if p.kind == "str" and p.name == "name":          # fuel.name: a built-in fuel
        return st.sampled_from(FUELS)
    return None                                        # paths and tables need files of their own


def _keys():
    out = [(f"{sec}.{p.name}", p) for sec, ps in CORE_SCHEMA.items() for p in ps]
    out += [(f"multi_cylinder.{p.name}", p) for p in MULTI_SCHEMA]
    return [(k, p) for k, p in out if k not in ("fuel.C", "fuel.H", "fuel.O", "fuel.lhv_MJ_per_kg")]


CORE_KEYS = _keys()


@st.composite
def custom_fuel(draw):
    """A custom CxHyOz fuel (all three keys that it needs, from their ranges)."""
    return {"fuel.name": "drawn_fuel", "fuel.C": draw(st.floats(1, 50)), "fuel.H": draw(st.floats(0, 100)),
            "fuel.O": draw(st.floats(0, 20)), "fuel.lhv_MJ_per_kg": draw(st.floats(1, 150))}


@st.composite
def drawn_config(draw):
    """A built-in config, models per role and a few keys from their documented ranges."""
    base = draw(st.sampled_from(builtin_configs()))
    changes: dict = {}
    reg = get_registry()
    cylinders = load_config(base).engine.cylinders
    for key, p in draw(st.lists(st.sampled_from(CORE_KEYS), max_size=4, unique_by=lambda kp: kp[0])):
        if key == "engine.cylinders":
            continue                      # the per-cylinder lists of the base follow its count
        s = value_of(p, cylinders)
        if s is not None:
            changes[key] = draw(s)
    if draw(st.integers(0, 9)) == 0:
        changes.update(draw(custom_fuel()))
    for role, every in reg.submodels.items():
        # the built-in models only: other tests install plug-ins of their own, and the draws of a
        # derandomised search must not depend on which ran before
        table = {n: c for n, c in every.items() if c.__module__.startswith("cyclesim_plugins")}
        if draw(st.integers(0, 3)) == 0:
            model = draw(st.sampled_from(sorted(table)))
            changes[f"{role}.model"] = model
        else:
            model = load_config(base).submodels[role].model
        params = [p for p in table[model].params if value_of(p, cylinders) is not None]
        for p in draw(st.lists(st.sampled_from(params), max_size=2, unique_by=lambda q: q.name)) if params else ():
            changes[f"{role}.{p.name}"] = draw(value_of(p, cylinders))
    return base, changes


def _corner(case) -> str | None:
    """Which of :data:`OPEN_ELSEWHERE` the case falls in, if any."""
    sim, op = case.simulation, case.operating
    try:
        if sim.mode == "full" and 720.0 / effective_step_deg(sim, op.speed_rpm) > STEP_BUDGET:
            return "budget"
    except OverflowError:                 # a speed so small the step refinement overflows
        return "budget"
    if sim.mode == "closed" and 720.0 / sim.step_deg > STEP_BUDGET:
        return "budget"
    if sim.output_step_deg > 0 and 720.0 / sim.output_step_deg > STEP_BUDGET:
        return "budget"                   # the output grid alone
    return None


def _exists(key: str, summary: dict, burn_share: float = 1.0) -> bool:
    """Whether a figure describes something that happened in this case.

    A motored case (``mode`` "motored": no fuel burns) declares the combustion figures null
    (:data:`cyclesim.results.motoring.COMBUSTION_ONLY_KEYS`), a fired one the motored figures
    (:data:`cyclesim.results.motoring.MOTORED_ONLY_KEYS`); exactly those keys may be NaN.

    The figures at knock onset (``*onset*``) are NaN by definition when the knock integral stayed
    below 1 (no onset: Livengood & Wu 1955, onset where the integral reaches 1).  A burn angle
    CAxx (and the 10-90 % duration) exists only where that share of the charge (and at least
    half of it) burned before the exhaust valve opened; ``burn_share`` is the share that burned (the summary's combustion
    efficiency over the burn model's, an upper bound of it: a rich charge releases less still).
    The 0-10 % angle exists where CA10 does; brake-specific NO where brake-specific fuel
    consumption is finite (NaN in closed-cycle mode and where the brake work is not positive).
    """
    motored = summary.get("mode") == MODE_MOTORED
    if key in (COMBUSTION_ONLY_KEYS if motored else MOTORED_ONLY_KEYS):
        return False
    if "onset" in key:
        return summary.get("knock_integral_max", 0.0) >= 1.0
    m = re.fullmatch(r"ca(\d\d)_deg", key)
    # cyclesim.results.figures counts a cycle with less than half of its charge burned as not fired and
    # gives it no burn angles at all
    if m:
        return burn_share >= max(int(m.group(1)) / 100.0, 0.5)
    if key == "burn_10_90_deg":
        return burn_share >= 0.9
    if key == "burn_0_10_deg":          # spark to CA10: exists where CA10 does
        return burn_share >= 0.5
    if key == "no_g_per_kWh":           # brake-specific NO exists where brake-specific fuel does
        bsfc = summary.get("bsfc_g_per_kWh", float("nan"))
        return isinstance(bsfc, float) and math.isfinite(bsfc)
    return True


def _figures_finite(summary: dict, burn_share: float = 1.0) -> list[str]:
    bad = []
    for k, v in summary.items():
        if not _exists(k, summary, burn_share):
            continue
        if isinstance(v, dict):
            bad += [f"{k}.{kk}" for kk, vv in v.items() if isinstance(vv, float) and math.isnan(vv)]
        elif isinstance(v, float) and math.isnan(v):
            bad.append(k)
    return bad


LOG = os.environ.get("CYCLESIM_HYPOTHESIS_LOG")
"""A file that receives one line per example (outcome and, for a failure, what was drawn)."""


def _record(kind: str, detail: str = "", note: str = "") -> None:
    """Count an outcome; ``detail`` makes it a failure, ``note`` only goes to the log."""
    OUTCOMES[kind] += 1
    if detail:
        FAILURES.setdefault(f"{kind}: {detail}"[:400], "")
    if LOG:
        with open(LOG, "a", encoding="utf-8") as fh:
            fh.write(f"{kind}\t{detail or note}\n")


def check_one(base: str, changes: dict) -> str | None:
    """Run one drawn config; return what was wrong with it (None when nothing was)."""
    overrides = [f"{k}={list(v) if isinstance(v, tuple) else v}" for k, v in changes.items()]
    what = f"{base} {overrides}"
    try:
        case = load_config(base, overrides)
    except CyclesimError as exc:
        if "\n" in str(exc) or not str(exc).strip():
            _record("error of more than one line", f"{str(exc)!r} {what}")
            return f"error of more than one line: {str(exc)!r}"
        _record("refused at validation")
        return None
    corner = _corner(case)
    if corner == "budget" or (corner is not None and not ALL_CORNERS):
        # a run beyond the step budget is never started here: it takes minutes and gigabytes of a
        # shared machine (its refusal before allocating is tracked with the run's own estimate)
        _record(f"not drawn here: {corner}")
        return None
    try:
        res = cyclesim.simulate([case])[0]
    except CyclesimError as exc:
        if "\n" in str(exc):
            _record("error of more than one line", f"{str(exc)!r} {what}")
            return f"error of more than one line: {str(exc)!r}"
        _record("tool error (one line)")
        return None
    except Exception as exc:  # noqa: BLE001 - the finding itself
        _record("exception", f"{type(exc).__name__}: {exc} [{corner or ''}] {what}")
        return f"{type(exc).__name__}: {exc}"
    if res.error:
        if "\n" in res.error:
            _record("error of more than one line", f"{res.error!r} {what}")
            return f"case error of more than one line: {res.error!r}"
        _record("case failed with one line", note=res.error[:160])
        return None
    eb = res.summary.get("energy_balance", {})
    if res.summary.get("mode") == MODE_MOTORED:
        corner = "motored"                # judged on the motored figures and energy balance
    share = res.summary.get("combustion_efficiency", 1.0) / (case.submodels["burn"].params.get(
        "combustion_efficiency") or 1.0)
    bad = _figures_finite(res.summary, share)
    closure = abs(eb.get("closure_fraction", 0.0))
    # a documented null, with the warning that declares it (README, cyclesim.results.figures / motoring)
    bad = [k for k in bad if not (k in DECLARED_NULL and any(w.startswith(DECLARED_NULL[k]) for w in res.warnings))]
    if bad:
        _record("NaN", f"{bad} [{corner or ''}] {what}")
        return f"NaN in {bad}"
    eta_c = res.summary.get("combustion_efficiency", float("nan"))
    if not (eta_c != eta_c or -1e-9 <= eta_c <= 1.0 + 1e-9):
        # the share of the fuel energy released: within [0, 1] by definition (common practice)
        _record("combustion efficiency", f"{eta_c:.4g} [{corner or ''}] {what}")
        return f"combustion efficiency {eta_c:.4g} outside [0, 1]"
    if not closure <= 1e-3:
        _record("energy", f"closure {closure:.2e} [{corner or ''}] {what}")
        return f"energy balance misses by {closure:.3g} of the fuel energy"
    _record("ran")
    return None


KEEP_GOING = ALL_CORNERS or EXAMPLES > 100
"""The long run draws on after a failure (no shrinking) and reports every distinct one at the end."""


@settings(max_examples=EXAMPLES, deadline=None, database=None, derandomize=not KEEP_GOING,
          phases=[Phase.explicit, Phase.generate],  # no shrinking: an example takes seconds
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.filter_too_much])
@given(drawn_config())
def test_any_documented_config_runs_or_fails_with_one_line(drawn):
    base, changes = drawn
    problem = check_one(base, changes)
    if not KEEP_GOING:
        assert problem is None, problem


def test_drawn_values_lie_in_their_documented_ranges():
    # the strategies themselves: a value that validation refuses would make the search above test
    # the error path only.  Every core key's draw is accepted by its own Param.check.
    @settings(max_examples=200, deadline=None, database=None, derandomize=True)
    @given(st.sampled_from(CORE_KEYS).flatmap(lambda kp: st.tuples(st.just(kp), value_of(kp[1], 4)
                                                                    if value_of(kp[1], 4) is not None
                                                                    else st.none())))
    def one(drawn):
        (key, p), v = drawn
        if v is not None:
            p.check(list(v) if isinstance(v, tuple) else v, key)

    one()


def teardown_module(module):
    if OUTCOMES:
        print("\nvalid-config search:", dict(OUTCOMES))
        for f in FAILURES:
            print("  ", f)


def test_search_reports_a_nan_it_is_given(monkeypatch):
    # the check itself fails on a NaN figure and on an open energy balance (a check that cannot
    # fail would pass any search)
    class R:
        error = None
        warnings: list = []
        summary = {"imep_net_bar": float("nan"), "energy_balance": {"closure_fraction": 0.0,
                                                                     "fuel_energy_J": 1000.0}}
    monkeypatch.setattr(cyclesim, "simulate", lambda cases: [R()])
    monkeypatch.setattr(sys.modules[__name__], "LOG", None)
    saved = (OUTCOMES.copy(), dict(FAILURES))
    assert check_one("demo", {}) == "NaN in ['imep_net_bar']"
    R.summary = {"imep_net_bar": 1.0, "energy_balance": {"closure_fraction": 2e-3, "fuel_energy_J": 1000.0}}
    assert "energy balance misses" in check_one("demo", {})
    # a motored case may leave null exactly the keys it declares null, a fired one the motored keys
    nan = float("nan")
    ok = {"energy_balance": {"closure_fraction": 0.0}, "imep_net_bar": -1.0}
    R.summary = {**ok, "mode": "motored", **dict.fromkeys(COMBUSTION_ONLY_KEYS, nan)}
    assert check_one("demo", {}) is None
    R.summary = {**ok, "mode": "motored", "loss_angle_deg": nan}
    assert check_one("demo", {}) == "NaN in ['loss_angle_deg']"
    R.summary = {**ok, "mode": "fired", **dict.fromkeys(MOTORED_ONLY_KEYS, nan)}
    assert check_one("demo", {}) is None
    R.summary = {**ok, "mode": "fired", "eta_brake": nan}
    assert check_one("demo", {}) == "NaN in ['eta_brake']"
    R.summary = {**ok, "mode": "fired", "combustion_efficiency": 1.14}
    assert check_one("demo", {}) == "combustion efficiency 1.14 outside [0, 1]"
    # the exhaust temperature may be null only with the warning that declares it so
    R.summary = {**ok, "mode": "fired", "exhaust_temperature_K": nan}
    assert check_one("demo", {}) == "NaN in ['exhaust_temperature_K']"
    R.warnings = [EXHAUST_T_NULL + ": the net flow out through the exhaust valves is too small"]
    assert check_one("demo", {}) is None
    R.summary = {**ok, "mode": "fired", "polytropic_exponent_compression": nan}
    assert check_one("demo", {}) == "NaN in ['polytropic_exponent_compression']"
    OUTCOMES.clear(), FAILURES.clear()
    OUTCOMES.update(saved[0]), FAILURES.update(saved[1])


def test_long_run_found_nothing():
    # the long run draws on after failures; here it ends red if it found any
    if KEEP_GOING:
        assert not FAILURES, f"{len(FAILURES)} distinct failures (printed above with -s)"


def test_polytropic_exponent_is_null_with_its_warning_at_compression_ratio_one():
    # ln p against ln V has no slope when V does not change: a compression ratio next to 1 (the
    # exponent's definition, p V^n = const; Heywood 1988, section 9.2, from memory) gives null
    # exponents, each named by a warning; an ordinary ratio gives finite ones and no such warning
    from cyclesim.config import load_config as lc
    flat, usual = cyclesim.simulate([lc("demo_closed", ["engine.compression_ratio=1.0000000000000002"]),
                                     lc("demo_closed")])
    assert math.isnan(flat.summary["polytropic_exponent_compression"])
    assert sum(w.startswith(POLYTROPIC_NULL_WARNING) for w in flat.warnings) == 2
    assert 1.1 < usual.summary["polytropic_exponent_compression"] < 1.45
    assert not any(w.startswith(POLYTROPIC_NULL_WARNING) for w in usual.warnings)
