"""Cylinder-cut friction test (the Morse test) simulated on the multi-cylinder engine.

>>> from cyclesim.studies.cylinder_cut import cylinder_cut_test
>>> ct = cylinder_cut_test("demo", out="cut")
>>> print(ct.text())

The procedure as on a test bed: at fixed speed and throttle read the brake
power with all cylinders firing (``B``), then with each cylinder ``k`` cut in
turn (fuel and spark off, valves working; ``B_k``).  Each cylinder's indicated
power is estimated as the drop ``IP_k = B - B_k``; the engine's indicated
power as their sum and friction power as ``sum_k IP_k - B`` [Heywood 1988,
sec. 13.3, from memory].

The model knows the truth: the net indicated power of each cylinder of the
all-firing engine and the friction power of its friction model.  The study
first runs the test under idealised conditions, in which the estimate equals
the truth to solver accuracy:

* the cut cylinder does no work (no pumping loop, no heat loss);
* friction does not depend on cylinder pressure (held at the all-firing FMEP);
* the manifolds do not couple the cylinders (each sees the operating point's
  plenum pressures);
* the walls stay at their configured temperatures;
* the speed is held exactly.

Then it switches the real effects on in turn, in this order (each step keeps
the ones before it), and reports the bias of the estimates after each step and
the change each step makes:

1. ``pumping``: the cut cylinder is simulated, motored with valves working:
   its pumping loop and the heat lost in its compression and expansion count
   against the brake power, so the estimate reads high;
2. ``pressure_friction``: friction from a correlation with a cylinder-pressure
   term (Chen & Flynn 1965, ``p_max`` term), evaluated on each cylinder's own
   trace in each reading and scaled to the engine's own FMEP with all cylinders
   firing (so the friction being measured stays that of the step before; only its
   response to a cut changes); the cut cylinder's lower peak pressure lowers
   friction, so the estimate reads low by that share;
3. ``manifolds``: shared intake and exhaust manifolds (throttle, exhaust
   restriction): cutting one cylinder changes the pressures the firing ones
   see.  On one common exhaust volume a four-cylinder engine's blowdown
   pulses reach the cylinder that fires before the pulsing one at the end of
   its exhaust stroke; a cut cylinder sends none, that neighbour keeps less
   residual gas and makes more power, and the test reads friction low.  A
   divided exhaust (``multi_cylinder.exhaust_branches``, pairing cylinders
   360 deg apart, as the demo does) keeps the pulses apart and this step
   small;
4. ``walls``: lumped wall temperatures: the cut cylinder's walls cool towards
   the motored state over the ``reading_time_s`` before the reading (wall
   time constant ``multi_cylinder.wall_time_constant_s``);
5. ``speed``: after each cut the operator re-sets the speed, to within
   ``speed_error_rpm``: the cut readings are taken that far off speed.

A motored base (no fuel burns: ``operating.fuel_cut`` or ``burn.model: none``) has nothing to cut:
the study then runs the motoring test instead (:func:`motoring_test`): the dynamometer drives the
whole engine, the power it absorbs is read as friction, against the friction model's truth; the
bias is the engine's pumping work less its gross indicated work (the compression and expansion
losses), with the manifold coupling and the walls' motored temperatures switched on in turn when
``manifolds`` and ``walls`` are among the effects.

The split of the total bias among the effects depends on that order (the
effects interact: wall cooling matters only once the cut cylinder's work is
counted, say).  Left out: friction's dependence on oil and coolant
temperature, the engine-management's reaction to a cut (a closed-loop lambda
or idle controller), exhaust after-treatment and manifold wave action.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Sequence

import numpy as np

from ..config import Case, case_with, resolve_case
from ..engine import EngineResult, EngineSetup, simulate_engines
from ..errors import ConfigError
from ..results.figures import friction_components
from ..results.motoring import is_motored_config
from ..output import CAUTION, atomic_write_text, write_rows_csv
from ..output import plain as _plain

__all__ = ["cylinder_cut_test", "CylinderCutResult", "EFFECTS", "cut_estimate", "motoring_test"]

EFFECTS = ("pumping", "pressure_friction", "manifolds", "walls", "speed")
EFFECT_TEXT = {
    "ideal": "idealised: cut cylinder does no work, friction fixed, no manifold coupling, fixed walls, speed held",
    "pumping": "+ cut cylinder's pumping loop and heat loss (motored, valves working)",
    "pressure_friction": "+ friction with a cylinder-pressure term, per reading",
    "manifolds": "+ shared intake and exhaust manifolds",
    "walls": "+ cut cylinder's walls cooling before the reading",
    "speed": "+ speed re-set after each cut only to within --speed-error (cut readings that far off speed)",
}
CSV_NAME = "cylinder_cut.csv"
CYL_CSV_NAME = "cylinder_cut_cylinders.csv"
JSON_NAME = "cylinder_cut.json"
PNG_NAME = "cylinder_cut_bias.png"


def cut_estimate(brake_all_kW: float, brake_cut_kW: Sequence[float]) -> dict:
    """Cylinder-cut estimates from brake power readings [kW].

    ``IP_k = B - B_k``; ``IP = sum_k IP_k``; ``FP = IP - B``.
    """
    ip = np.array([brake_all_kW - b for b in brake_cut_kW], float)
    return {"indicated_kW": ip, "indicated_total_kW": float(ip.sum()),
            "friction_kW": float(ip.sum() - brake_all_kW)}


@dataclass
class CylinderCutResult:
    """Steps of the cylinder-cut test: estimates, truth and bias after each."""

    label: str
    speed_rpm: float
    steps: list
    cylinders: list
    settings: dict
    files: list = field(default_factory=list)
    warning_groups: list = field(default_factory=list)
    """The engine runs' warnings by kind with the readings that gave them (map_console.group_labelled)."""
    readings: int = 0

    def step(self, key: str) -> dict:
        for s in self.steps:
            if s["step"] == key:
                return s
        raise KeyError(key)

    def figures(self) -> dict:
        return {"label": self.label, "speed_rpm": self.speed_rpm, "settings": self.settings,
                "steps": self.steps, "cylinders": self.cylinders, "caution": CAUTION,
                "files": [Path(f).name for f in self.files], "warnings_grouped": list(self.warning_groups),
                "notes": ["The split of the bias among the effects depends on the order they are switched on in.",
                          "Estimates: IP_k = B_all - B_cut_k; IP = sum IP_k; FP = IP - B_all."]}

    def text(self) -> str:
        if self.settings.get("operation") == "motored":
            return self._motoring_text()
        lines = [f"cylinder-cut friction test: {self.label}, {self.speed_rpm:.0f} rpm",
                 "  step               brake all  est. IP  true IP  IP bias   est. FP  true FP  FP bias"
                 "   step's FP bias",
                 "                           kW       kW       kW        %        kW       kW       %"
                 "       kW"]
        for s in self.steps:
            lines.append(f"  {s['step']:<18s} {s['brake_all_kW']:9.3f} {s['indicated_est_kW']:8.3f}"
                         f" {s['indicated_true_kW']:8.3f} {s['indicated_bias_pct']:+8.3f}"
                         f"  {s['friction_est_kW']:8.3f} {s['friction_true_kW']:8.3f} {s['friction_bias_pct']:+7.2f}"
                         f"  {s['friction_bias_step_kW']:+8.3f}")
        lines.append("  steps in order (each keeps the ones before):")
        for s in self.steps:
            txt = EFFECT_TEXT[s["step"]]
            if s["step"] == "speed" and "speed_error_rpm" in self.settings:
                txt = (f"+ speed re-set after each cut only to within {self.settings['speed_error_rpm']:+g} rpm"
                       f" (the cut readings are taken that far off speed)")
            elif s["step"] == "walls" and "reading_time_s" in self.settings:
                txt = f"+ cut cylinder's walls cooling for {self.settings['reading_time_s']:g} s before the reading"
            lines.append(f"    {s['step']}: {txt}")
        last = self.steps[-1]
        lines.append(f"  with every effect on, the test reads friction {last['friction_bias_kW']:+.3f} kW"
                     f" ({last['friction_bias_pct']:+.1f} %) off the model's mechanical friction; the split"
                     f" among the effects depends on their order.")
        man = next((s for s in self.steps if s["step"] == "manifolds"), None)
        if last["friction_bias_kW"] > 0:
            lines.append("  it reads high, as the trade expects of the test: the cut cylinders' pumping and heat"
                         " losses count as friction.")
        elif man is not None and man["friction_bias_step_kW"] < -abs(self.steps[1]["friction_bias_step_kW"]):
            lines.append("  it reads low: the cylinders' interaction through the manifolds outweighs the cut"
                         " cylinders' pumping loss (on a common exhaust volume, say, a cut cylinder's missing"
                         " blowdown pulse lowers the residual gas of the cylinder firing before it;"
                         " multi_cylinder.exhaust_branches divides the exhaust).")
        lines.append("  indicated power per cylinder, estimate/truth (last step): " + ", ".join(
            f"{c['cylinder']}: {c['estimate_kW']:.2f}/{c['truth_kW']:.2f} kW" for c in self.cylinders))
        lines.append("  IP: indicated power, FP: friction power, B: brake power; est. from the cut readings,"
                     " true from the model")
        from .map_console import warning_lines

        lines.extend(warning_lines(self.warning_groups, self.readings, "readings"))
        lines.append("CAUTION: " + CAUTION)
        return "\n".join(lines)


    def _motoring_text(self) -> str:
        lines = [f"motoring friction test: {self.label}, {self.speed_rpm:.0f} rpm (the base burns no fuel: nothing"
                 f" to cut; the dyno drives the whole engine)",
                 "  step               absorbed  true FP  FP bias  FP bias  pumping  gross IP   step's FP bias",
                 "                           kW       kW       kW        %       kW        kW       kW"]
        for s in self.steps:
            lines.append(f"  {s['step']:<18s} {s['friction_est_kW']:9.3f} {s['friction_true_kW']:8.3f}"
                         f" {s['friction_bias_kW']:+8.3f} {s['friction_bias_pct']:+8.2f} {s['pumping_kW']:8.3f}"
                         f" {s['indicated_gross_kW']:+9.3f}  {s['friction_bias_step_kW']:+8.3f}")
        for s in self.steps:
            lines.append(f"    {s['step']}: {MOTORING_TEXT[s['step']]}")
        last = self.steps[-1]
        lines.append(f"  the absorbed power reads friction {last['friction_bias_kW']:+.3f} kW"
                     f" ({last['friction_bias_pct']:+.1f} %) off the model's mechanical friction: the pumping"
                     f" loop and the heat lost in compression and expansion are read as friction.")
        lines.append("  FP: friction power (estimate: the power the dyno absorbs), IP: indicated power; friction"
                     " from the friction model on the motored traces")
        from .map_console import warning_lines

        lines.extend(warning_lines(self.warning_groups, self.readings, "readings"))
        lines.append("CAUTION: " + CAUTION)
        return "\n".join(lines)


MOTORING_TEXT = {
    "motoring": "every cylinder motored, manifolds at the operating point's plenum pressures, walls as configured",
    "manifolds": "+ shared intake and exhaust manifolds",
    "walls": "+ lumped walls settled at their motored temperatures",
}


def motoring_test(case: Case, label: str, effects: Sequence[str] = EFFECTS, progress=None) -> CylinderCutResult:
    """The motoring friction test of a motored engine: absorbed power against the model's friction.

    Steps: ``motoring`` (manifolds constant, walls as configured), then ``manifolds`` (coupled)
    and ``walls`` (lumped, settled at the motored state) where they are among ``effects``, each
    keeping the ones before.
    """
    keys = ["motoring"] + [e for e in ("manifolds", "walls") if e in effects]
    n = int(case.engine.cylinders)
    setups = []
    for i in range(len(keys)):
        on = set(keys[: i + 1])
        # every cylinder "cut" (fuel and spark off, valves working): motored, whatever the burn model
        setups.append(EngineSetup(case, ("cut",) * n, manifolds="coupled" if "manifolds" in on else "constant",
                                  walls="lumped" if "walls" in on else "fixed", label=f"motored ({keys[i]})"))
    res = simulate_engines(setups, progress=None if progress is None else (lambda m: progress(f"motoring: {m}")))
    steps = []
    prev = 0.0
    for key, r in zip(keys, res):
        e = r.engine
        est = -float(e["brake_power_kW"])
        true = float(e["friction_power_kW"])
        fb = est - true
        steps.append({"step": key, "brake_all_kW": float(e["brake_power_kW"]), "friction_est_kW": est,
                      "friction_true_kW": true, "friction_bias_kW": fb, "friction_bias_pct": 100 * fb / true,
                      "friction_bias_step_kW": fb - prev, "pumping_kW": float(e["pumping_power_kW"]),
                      "indicated_gross_kW": float(e["indicated_power_gross_kW"]),
                      "indicated_est_kW": 0.0, "indicated_true_kW": float(e["indicated_power_kW"]),
                      "fmep_true_bar": float(e["fmep_bar"])})
        prev = fb
    cyl = [{"cylinder": c["cylinder"], "estimate_kW": 0.0,
            "truth_kW": c["imep_net_bar"] * 1e5 * math.pi / 4 * (case.engine.bore_mm * 1e-3) ** 2
            * case.engine.stroke_mm * 1e-3 * float(case.operating.speed_rpm) / 120.0 / 1e3, "bias_pct": float("nan")}
           for c in res[-1].cylinders]
    settings = {"operation": "motored", "effects": keys[1:], "friction_model": case.submodels["friction"].model}
    return CylinderCutResult(label, float(case.operating.speed_rpm), steps, cyl, settings)


def _friction_fmep_bar(res: EngineResult, model: str, case: Case) -> float:
    """Engine FMEP [bar] from a friction model evaluated on each cylinder's own trace (mean over cylinders)."""
    from types import SimpleNamespace

    from ..solve.batch import build_batch
    from ..registry import get_registry
    from ..roles import FrictionInputs

    reg = get_registry(case.plugins)
    cls = reg.submodel_class("friction", model)
    ref = case_with(case, {"friction.model": model})
    vals = ref.submodels["friction"].params
    n = len(res.cylinder_results)
    b = build_batch([ref], reg)  # geometry of the engine (one column)
    geo = b.geometry
    fr = cls(dict(vals), SimpleNamespace(B=1))
    out = []
    for r in res.cylinder_results:
        s = r.summary
        speed = float(r.inputs["operating.speed_rpm"])
        f = FrictionInputs(
            geometry=geo, speed_rpm=np.array([speed]), Sp=np.atleast_1d(geo.mean_piston_speed(speed)),
            p_max=np.array([s["p_max_bar"] * 1e5]),
            p_intake=np.array([float(r.inputs["operating.intake_pressure_bar"]) * 1e5]),
            imep_gross=np.array([s["imep_gross_bar"] * 1e5]),
            theta_deg=r.trace["crank_deg"], p_trace=r.trace["pressure_bar"][None, :] * 1e5,
            n_cylinders=np.array([float(n)]))
        out.append(sum(float(v[0]) for v in friction_components(fr, f, 1).values()) / 1e5)
    return float(np.mean(out))


def _powers(res: EngineResult, zero_cut: bool, fmep_bar: float, vd: float) -> tuple[float, float, np.ndarray]:
    """(brake kW, friction kW, per-cylinder net indicated kW) of an engine reading."""
    e = res.engine
    cps = e["speed_rpm"] / 120.0
    ip = np.array([0.0 if (zero_cut and c["mode"] != "fire") else c["imep_net_bar"] * 1e5 * vd * cps / 1e3
                   for c in res.cylinders])
    fp = fmep_bar * 1e5 * vd * len(res.cylinders) * cps / 1e3
    return float(ip.sum() - fp), fp, ip


def cylinder_cut_test(config="demo", overrides: Sequence[str] = (), effects: Sequence[str] = EFFECTS,
                      pressure_friction_model: str = "chen_flynn", reading_time_s: float = 30.0,
                      speed_error_rpm: float = -10.0, out=None, plots: bool = True,
                      progress=None) -> CylinderCutResult:
    """Simulate the cylinder-cut test with the real effects switched on in turn (see the module notes)."""
    case, label = resolve_case(config, overrides)
    effects = tuple(effects)
    bad = [x for x in effects if x not in EFFECTS]
    if bad:
        raise ConfigError(f"cylinder-cut effects {bad}: expected some of {', '.join(EFFECTS)} (in that order)")
    effects = tuple(x for x in EFFECTS if x in effects)
    n = int(case.engine.cylinders)
    if n < 2:
        raise ConfigError("the cylinder-cut test needs engine.cylinders >= 2")
    if case.simulation.mode != "full":
        raise ConfigError("the cylinder-cut test needs simulation.mode: full")
    if is_motored_config(case):
        res = motoring_test(case, label, effects, progress)
        if out is not None:
            _write(res, Path(out), plots)
        return res
    speed = float(case.operating.speed_rpm)
    vd = math.pi / 4 * (case.engine.bore_mm * 1e-3) ** 2 * case.engine.stroke_mm * 1e-3
    fire = ("fire",) * n

    def cut(k):
        return tuple("cut" if j == k else "fire" for j in range(n))

    # the simulations each step needs: (manifolds, walls, cut-reading speed)
    def sim_key(i):
        on = set(effects[:i])
        return ("coupled" if "manifolds" in on else "constant", "lumped" if "walls" in on else "fixed",
                speed + (speed_error_rpm if "speed" in on else 0.0))

    keys = []
    for i in range(len(effects) + 1):
        k = sim_key(i)
        if k not in keys:
            keys.append(k)
    # first pass: the all-firing engines (their wall temperatures start the cut readings)
    all_setups = {}
    for man, walls, _ in keys:
        if (man, walls) not in all_setups:
            all_setups[(man, walls)] = EngineSetup(case, fire, manifolds=man, walls=walls, label=f"all firing ({man}, {walls})")
    def phase(name):
        return None if progress is None else (lambda msg: progress(f"{name}: {msg}"))

    firing = dict(zip(all_setups, simulate_engines(list(all_setups.values()),
                                                   progress=phase("readings with all cylinders firing"))))
    cut_setups = {}
    for man, walls, sp in keys:
        base = case if sp == speed else case_with(case, {"operating.speed_rpm": sp})
        a = firing[(man, walls)]
        for k in range(n):
            cut_setups[(man, walls, sp, k)] = EngineSetup(
                base, cut(k), manifolds=man, walls=walls,
                wall_start_K=a.wall_mean_K if walls == "lumped" else None,
                wall_elapsed_s=reading_time_s if walls == "lumped" else math.inf,
                # coupled readings follow from the all-firing state; uncoupled ones start as it did,
                # so that their firing cylinders repeat it exactly
                start=a if (man == "coupled" or walls == "lumped") else None,
                label=f"cylinder {k + 1} cut ({man}, {walls}, {sp:.0f} rpm)")
    cuts = dict(zip(cut_setups, simulate_engines(list(cut_setups.values()),
                                                 progress=phase("readings with one cylinder cut"))))

    steps = []
    cyl_rows = []
    prev_bias = None
    fm_cache: dict = {}

    def fmep_of(res, model):
        key = (id(res), model)
        if key not in fm_cache:
            fm_cache[key] = _friction_fmep_bar(res, model, case)
        return fm_cache[key]

    for i, name in enumerate(("ideal",) + effects):
        on = set(effects[:i])
        man, walls, sp = sim_key(i)
        a = firing[(man, walls)]
        zero = "pumping" not in on
        f_all = float(a.engine["fmep_bar"])
        # the pressure-dependent correlation, scaled to the engine's own FMEP with all cylinders
        # firing: the step changes how friction responds to a cut, not the friction being measured
        scale = f_all / fmep_of(a, pressure_friction_model) if "pressure_friction" in on else 1.0
        b_all, fp_true, ip_true = _powers(a, False, f_all, vd)
        b_cut = []
        for k in range(n):
            c = cuts[(man, walls, sp, k)]
            f_cut = scale * fmep_of(c, pressure_friction_model) if "pressure_friction" in on else f_all
            b_cut.append(_powers(c, zero, f_cut, vd)[0])
        est = cut_estimate(b_all, b_cut)
        ip_t = float(ip_true.sum())
        fb = est["friction_kW"] - fp_true
        row = {
            "step": name, "brake_all_kW": b_all, "brake_cut_kW": b_cut,
            "indicated_est_kW": est["indicated_total_kW"], "indicated_true_kW": ip_t,
            "indicated_bias_kW": est["indicated_total_kW"] - ip_t,
            "indicated_bias_pct": 100 * (est["indicated_total_kW"] - ip_t) / ip_t,
            "friction_est_kW": est["friction_kW"], "friction_true_kW": fp_true, "friction_bias_kW": fb,
            "friction_bias_pct": 100 * fb / fp_true,
            "friction_bias_step_kW": fb - (prev_bias if prev_bias is not None else 0.0),
            "pressure_friction_scale": scale, "fmep_true_bar": f_all, "fmep_est_bar": est["friction_kW"] * 1e3 / (vd * n * speed / 120.0) / 1e5,
            "cylinder_estimates_kW": list(est["indicated_kW"]), "cylinder_truth_kW": list(ip_true),
        }
        prev_bias = fb
        steps.append(row)
        cyl_rows = [{"cylinder": k + 1, "estimate_kW": float(est["indicated_kW"][k]), "truth_kW": float(ip_true[k]),
                     "bias_pct": 100 * float((est["indicated_kW"][k] - ip_true[k]) / ip_true[k])}
                    for k in range(n)]
    settings = {"effects": list(effects), "pressure_friction_model": pressure_friction_model,
                "reading_time_s": reading_time_s, "speed_error_rpm": speed_error_rpm,
                "friction_model": case.submodels["friction"].model}
    res = CylinderCutResult(label, speed, steps, cyl_rows, settings)
    from .map_console import group_labelled

    runs = [(all_setups[k].label, firing[k]) for k in all_setups] + [(cut_setups[k].label, cuts[k]) for k in cut_setups]
    import re

    # each reading's warnings once, whichever of its cylinders gave them
    res.warning_groups = group_labelled((lb, [re.sub(r"^cylinder \d+: ", "", w) for w in r.warnings]) for lb, r in runs)
    res.readings = len(runs)
    if out is not None:
        _write(res, Path(out), plots)
    return res


def _write(res: CylinderCutResult, out: Path, plots: bool) -> None:
    out.mkdir(parents=True, exist_ok=True)
    cols = ["step", "brake_all_kW", "indicated_est_kW", "indicated_true_kW", "indicated_bias_pct",
            "friction_est_kW", "friction_true_kW", "friction_bias_kW", "friction_bias_pct", "friction_bias_step_kW",
            "fmep_est_bar", "fmep_true_bar"]
    if res.settings.get("operation") == "motored":
        cols = ["step", "brake_all_kW", "friction_est_kW", "friction_true_kW", "friction_bias_kW", "friction_bias_pct",
                "friction_bias_step_kW", "pumping_kW", "indicated_gross_kW", "fmep_true_bar"]
    write_rows_csv(out / CSV_NAME, res.steps, cols)
    write_rows_csv(out / CYL_CSV_NAME, res.cylinders, ["cylinder", "estimate_kW", "truth_kW", "bias_pct"])
    files = [out / CSV_NAME, out / CYL_CSV_NAME]
    if plots:
        from ..plots import plot_cut_bias

        files.append(plot_cut_bias(res, out / PNG_NAME))
    atomic_write_text(out / JSON_NAME, json.dumps(_plain(res.figures()), indent=2))
    files.append(out / JSON_NAME)
    res.files = files
