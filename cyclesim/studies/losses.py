"""Loss breakdown: from the air-standard Otto cycle to brake output, one real effect at a time.

>>> from cyclesim.studies.losses import loss_breakdown
>>> lb = loss_breakdown("demo", out="losses")
>>> print(lb.text())

Starting from the air-standard Otto cycle of the case's geometry (constant
gamma = 1.4, burn within 1 deg about TDC, closed from BDC to BDC, no losses;
its efficiency is 1 - r^(1-gamma), Heywood 1988 eq. 5.31), the study switches
the case's real effects on one after the other and records the efficiency
after each step.  Default order (the closed-cycle steps may be reordered):

====  =======================  ==============================================================
step  key                      what is switched on
====  =======================  ==============================================================
0     ``otto``                 air-standard Otto cycle (closed, BDC to BDC)
1     ``real_gas``             real gas properties, fuel-air mixture, complete-combustion products
2     ``dissociation``         burned gas in chemical equilibrium (needs ``real_gas`` before it)
3     ``burn``                 the case's finite burn and its timing
4     ``heat_transfer``        the case's wall heat transfer
5     ``blowby``               the case's ring leakage
6     ``combustion``           the case's combustion efficiency instead of 1
7     ``evo``                  the case's exhaust valve opening instead of BDC (closed cycle ends there)
8     ``gas_exchange``         full cycle, gross work (-180..180): real IVC, trapped charge,
                               residual gas, blowdown after EVO
9     ``pumping``              net instead of gross work (PMEP)
10    ``friction``             brake instead of net work (FMEP)
====  =======================  ==============================================================

The brief of the study lists pumping as one full-cycle step; it is split here
into ``gas_exchange`` (the difference between the closed-cycle model of step 7
and the full cycle's gross work, which may be a gain: blowdown still does work
after EVO, which step 7 counts as lost) and ``pumping`` (PMEP), so that the
pumping loss reads as its own row.

Efficiencies are work over fuel energy: closed steps over the trapped fuel's
energy (``eta_closed_cycle``), full-cycle steps over the inducted fuel's
(``eta_indicated_gross``, ``eta_indicated_net``, ``eta_brake``).  The loss of
a step is the efficiency before it minus the efficiency after it, in points of
fuel energy; the losses add up from the Otto efficiency to the brake
efficiency exactly (by construction).

How much a step takes depends on the order: heat transfer switched on before
the finite burn takes more than after it (the instant burn has the hottest
gas), for instance.  ``second_order`` runs a second order and reports both.

The closed-cycle steps start at BDC from the full cycle's state at its intake
valve closing (temperature and burned-gas fraction), with the pressure scaled
by V_ivc/V_bdc so that the trapped mass is the same.  They run at one fine
step (``closed_step_deg``, default 0.1 deg) so that the differences between
steps are the physics, not the numerics; cases that share submodels run in one
batch (a loss switched off by a zero multiplier or area where the model has
one, so that it shares the batch).
"""

from __future__ import annotations

import copy
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Sequence

import numpy as np

from ..config import Case, build_case, resolve_case, set_dotted
from ..errors import ConfigError, SolverError
from ..output import CAUTION, atomic_write_text, write_rows_csv

__all__ = ["loss_breakdown", "LossBreakdown", "CLOSED_STEPS", "DEFAULT_ORDER", "STEP_LABELS",
           "otto_efficiency"]

CLOSED_STEPS = ("real_gas", "dissociation", "burn", "heat_transfer", "blowby", "combustion", "evo")
FULL_STEPS = ("gas_exchange", "pumping", "friction")
DEFAULT_ORDER = CLOSED_STEPS
"""Default order of the closed-cycle steps; the full-cycle steps always follow."""

ALT_ORDER = ("real_gas", "dissociation", "heat_transfer", "burn", "blowby", "combustion", "evo")
"""A second order offered by the CLI: heat transfer before the finite burn."""

STEP_LABELS = {
    "otto": "air-standard Otto cycle",
    "real_gas": "real gas, fuel-air mixture (complete combustion)",
    "dissociation": "dissociation (equilibrium burned gas)",
    "burn": "finite burn and its timing",
    "heat_transfer": "wall heat transfer",
    "blowby": "ring leakage (blowby)",
    "combustion": "incomplete combustion",
    "evo": "early exhaust valve opening",
    "gas_exchange": "gas exchange (full cycle, gross work)",
    "pumping": "pumping (PMEP)",
    "friction": "friction (FMEP)",
}

GAMMA_AIR = 1.4
R_AIR = 287.0
CSV_NAME = "losses.csv"
JSON_NAME = "losses.json"
PNG_NAME = "losses_waterfall.png"


def otto_efficiency(compression_ratio, gamma=GAMMA_AIR):
    """Air-standard Otto-cycle efficiency 1 - r^(1-gamma) [-] (Heywood 1988, eq. 5.31).

    Parameters
    ----------
    compression_ratio : array_like
        Geometric compression ratio r [-].
    gamma : array_like
        Ratio of specific heats [-].
    """
    r = np.asarray(compression_ratio, float)
    return 1.0 - r ** (1.0 - np.asarray(gamma, float))


POINT_FIGURES = (("burn_0_10_deg", "0-10 % burn", ".1f", " deg"), ("burn_10_90_deg", "10-90 % burn", ".1f", " deg"),
                 ("ca50_deg", "CA50", ".1f", " deg ATDC"), ("no_ppm_wet", "NO", ".0f", " ppm wet"),
                 ("no_ppm_dry", "NO", ".0f", " ppm dry"), ("no_g_per_kWh", "NO", ".2f", " g/kWh"))
"""Figures of the full cycle the breakdown reports beside its steps (key, label, format, unit)."""


def _fmt_point(v, spec) -> str:
    return "-" if v is None or not np.isfinite(v) else format(v, spec)


@dataclass
class LossBreakdown:
    """Efficiency after each step and the points of fuel energy lost at each.

    Attributes
    ----------
    steps : list of dict
        Per step: ``step`` (index), ``key``, ``label``, ``efficiency`` [-],
        ``loss_points`` [% of fuel energy] (efficiency before minus after,
        times 100; 0 for the first step), ``basis`` (which work and fuel).
    order : tuple of str
        The closed-cycle order used.
    otto_formula : float
        1 - r^(1-gamma) at the case's compression ratio.
    second : LossBreakdown or None
        The breakdown in a second order, when asked for.
    notes : list of str
    files : list of Path
    """

    steps: list
    order: tuple
    otto_formula: float
    compression_ratio: float
    base_config: str = ""
    second: "LossBreakdown | None" = None
    unreleased: dict = field(default_factory=dict)
    point: dict = field(default_factory=dict)
    """Burn angles and NO of the full cycle (:data:`POINT_FIGURES`, those it has)."""
    notes: list = field(default_factory=list)
    files: list = field(default_factory=list)
    caution: str = CAUTION

    @property
    def efficiencies(self) -> np.ndarray:
        return np.array([s["efficiency"] for s in self.steps])

    @property
    def losses(self) -> np.ndarray:
        """Loss of each step after the first [points of fuel energy]."""
        return np.array([s["loss_points"] for s in self.steps[1:]])

    def step(self, key: str) -> dict:
        for s in self.steps:
            if s["key"] == key:
                return s
        raise KeyError(key)

    def rows(self) -> list[dict]:
        return [dict(s) for s in self.steps]

    def figures(self) -> dict:
        """JSON-ready data."""
        out = {
            "caution": self.caution,
            "base_config": self.base_config,
            "compression_ratio": self.compression_ratio,
            "otto_formula_efficiency": self.otto_formula,
            "order": list(self.order),
            "steps": self.rows(),
            "brake_efficiency": self.steps[-1]["efficiency"],
            "sum_of_losses_points": float(np.sum(self.losses)),
            "unreleased_chemical_energy_points": dict(self.unreleased),
            "full_cycle": dict(self.point),
            "notes": list(self.notes),
            "files": [Path(f).name for f in self.files],
        }
        if self.second is not None:
            out["second_order"] = {"order": list(self.second.order), "steps": self.second.rows()}
        return out

    def text(self) -> str:
        lines = [f"loss breakdown: {self.base_config} (compression ratio {self.compression_ratio:g})",
                 f"  {'step':<52s}{'efficiency':>11s}{'loss':>9s}"]
        lines.append(f"  {'':<52s}{'%':>11s}{'points':>9s}")
        for s in self.steps:
            loss = "" if s["step"] == 0 else f"{s['loss_points']:9.2f}"
            lines.append(f"  {s['step']:>2d} {s['label']:<49s}{100 * s['efficiency']:11.2f}{loss}")
        lines.append(f"  Otto formula 1 - r^(1-gamma) = {100 * self.otto_formula:.2f} % (step 0 simulates it: a"
                     f" 1-deg burn about TDC at the integration step, {100 * abs(self.steps[0]['efficiency'] - self.otto_formula):.2f}"
                     f" points off); losses add up to {float(np.sum(self.losses)):.2f} points")
        if self.unreleased:
            u = self.unreleased
            lines.append(f"  unreleased chemical energy of the full cycle (exhaust, blowby): {u['total']:.2f} % of the fuel"
                         f" energy = CO {u['CO']:.2f} + H2 {u['H2']:.2f} + unburned fuel {u['unburned_fuel']:.2f}"
                         f" (energy, not efficiency points: an unreleased joule costs only its share of work)")
        if self.point:
            lines.append("  full cycle: " + ", ".join(f"{label} {_fmt_point(self.point.get(k), spec)}{unit}"
                                                    for k, label, spec, unit in POINT_FIGURES if k in self.point))
        if self.second is not None:
            lines.append(f"second order: {' > '.join(self.second.order)}")
            for a in self.second.steps[1:]:
                lines.append(f"  {a['label']:<52s}{a['loss_points']:9.2f} points"
                             f"  (first order {self.step(a['key'])['loss_points']:.2f})")
        for n in self.notes:
            lines.append(f"note: {n}")
        lines.append(f"CAUTION: {self.caution}")
        return "\n".join(lines)


# --------------------------------------------------------------------------
# Case variants
# --------------------------------------------------------------------------


def _variant(case: Case, changes: dict, sections: dict | None = None) -> Case:
    """A validated copy of ``case`` with dotted keys changed and whole role sections replaced."""
    raw = copy.deepcopy(case.raw)
    for role, sec in (sections or {}).items():
        raw[role] = dict(sec)
    for k, v in changes.items():
        raw = set_dotted(raw, k, v)
    return build_case(raw, case.base_dir)


def _role_section(case: Case, role: str) -> dict:
    ch = case.submodels[role]
    return {"model": ch.model, **copy.deepcopy(ch.params)}


def _off_section(case: Case, role: str) -> dict:
    """The case's own model with its zero knob (same batch), else the ``none`` model."""
    sec = _role_section(case, role)
    knob = {"heat_transfer": "multiplier", "blowby": "effective_area_mm2"}.get(role)
    if knob and knob in sec:
        sec[knob] = 0.0
        return sec
    return {"model": "none"}


def _validate_order(order: Sequence[str]) -> tuple:
    order = tuple(order)
    if sorted(order) != sorted(CLOSED_STEPS):
        missing = [k for k in CLOSED_STEPS if k not in order]
        extra = [k for k in order if k not in CLOSED_STEPS]
        raise ConfigError(
            f"loss order {','.join(order)!r}: expected each of {', '.join(CLOSED_STEPS)} once"
            + (f"; missing {', '.join(missing)}" if missing else "")
            + (f"; unknown {', '.join(extra)}" if extra else "")
        )
    if order.index("dissociation") < order.index("real_gas"):
        raise ConfigError("loss order: 'dissociation' needs 'real_gas' before it (equilibrium is a real-gas model)")
    return order


def _closed_case(case: Case, on: set, ivc_state: dict, step_deg: float) -> Case:
    """The closed-cycle case with the effects in ``on`` switched on."""
    ch: dict = {
        "simulation.mode": "closed",
        "simulation.step_deg": step_deg,
        "valves.ivo_deg": -370.0,
        "valves.ivc_deg": -180.0,
        "valves.evo_deg": float(case.valves.evo_deg) if "evo" in on else 180.0,
        "valves.evc_deg": 370.0,
        "operating.ivc_pressure_bar": ivc_state["p_bar"],
        "operating.ivc_temperature_K": ivc_state["T_K"],
        "operating.residual_fraction": ivc_state["residual"],
    }
    if "real_gas" in on:
        ch["gas.properties"] = "real"
        ch["gas.burned_gas"] = "equilibrium" if "dissociation" in on else "complete"
    else:
        ch["gas.properties"] = "constant_gamma"
        ch["gas.gamma"] = GAMMA_AIR
        ch["gas.R_J_per_kgK"] = R_AIR
    eta_c = float(case.submodels["burn"].params.get("combustion_efficiency", 1.0))
    if "burn" in on:
        burn = _role_section(case, "burn")
        if "combustion_efficiency" in burn:
            burn["combustion_efficiency"] = eta_c if "combustion" in on else 1.0
    else:
        # burn within 1 deg centred on TDC (at least ten steps, so the integration resolves it):
        # the instant burn of the Otto cycle
        d = max(1.0, 10.0 * float(step_deg))
        burn = {"model": "wiebe", "spark_advance_deg": 0.5 * d, "ignition_delay_deg": 0.0, "duration_deg": d,
                "a": 5.0, "m": 2.0, "combustion_efficiency": eta_c if "combustion" in on else 1.0}
    sections = {
        "burn": burn,
        "heat_transfer": _role_section(case, "heat_transfer") if "heat_transfer" in on
        else _off_section(case, "heat_transfer"),
        "blowby": _role_section(case, "blowby") if "blowby" in on else _off_section(case, "blowby"),
        "knock": {"model": "none"},
        "emissions": {"model": "none"},       # NO belongs to the real full cycle, not to these steps
    }
    return _variant(case, ch, sections)


def _ivc_state(case: Case, full) -> dict:
    """Closed-cycle start at BDC from the full cycle's state at IVC (same trapped mass)."""
    tr = full.trace
    th, V = tr["crank_deg"], tr["volume_m3"]
    ivc = float(case.valves.ivc_deg)
    p = float(np.interp(ivc, th, tr["pressure_bar"]))
    T = float(np.interp(ivc, th, tr["temperature_K"]))
    v_ivc = float(np.interp(ivc, th, V))
    v_bdc = float(np.interp(-180.0, th, V))
    return {"p_bar": p * v_ivc / v_bdc, "T_K": T,
            "residual": float(full.summary.get("burned_fraction_ivc", full.summary.get("residual_fraction", 0.05)))}


def _steps_from(order, closed_eta, full, comp_eff_note=None) -> list[dict]:
    keys = ("otto",) + tuple(order)
    steps = []
    prev = None
    for i, (k, eta) in enumerate(zip(keys, closed_eta)):
        steps.append({"step": i, "key": k, "label": STEP_LABELS[k], "efficiency": float(eta),
                      "loss_points": 0.0 if prev is None else 100.0 * (prev - float(eta)),
                      "basis": "closed cycle, work BDC..EVO (BDC..BDC before the EVO step) / trapped fuel energy"})
        prev = float(eta)
    s = full.summary
    for k, eta, basis in (("gas_exchange", s["eta_indicated_gross"], "full cycle, gross work / inducted fuel energy"),
                          ("pumping", s["eta_indicated_net"], "full cycle, net work / inducted fuel energy"),
                          ("friction", s["eta_brake"], "full cycle, brake work / inducted fuel energy")):
        steps.append({"step": len(steps), "key": k, "label": STEP_LABELS[k], "efficiency": float(eta),
                      "loss_points": 100.0 * (prev - float(eta)), "basis": basis})
        prev = float(eta)
    return steps


def _unreleased_points(full) -> dict:
    """The full cycle's unreleased chemical energy (exhaust and blowby) by carrier, in points of the
    inducted fuel energy (the basis of the energy balance's split, see :mod:`cyclesim.results.figures`)."""
    s = full.summary
    un, eb = s.get("unreleased_energy"), s.get("energy_balance", {})
    fuel = eb.get("fuel_energy_J")
    if not un or not fuel:
        return {}
    out = {k: 100.0 * un[f"{k}_J"] / fuel for k in ("CO", "H2", "unburned_fuel")}
    out["total"] = 100.0 * eb["unreleased_chemical_energy_J"] / fuel
    return out


def _closed_etas(case: Case, order: tuple, ivc_state: dict, step_deg: float) -> list[float]:
    from ..api import simulate

    cases = []
    on: set = set()
    cases.append(_closed_case(case, on, ivc_state, step_deg))
    for k in order:
        on = on | {k}
        cases.append(_closed_case(case, on, ivc_state, step_deg))
    res = simulate(cases)
    etas = []
    for k, r in zip(("otto",) + order, res):
        if r.error:
            raise SolverError(f"loss breakdown, step {k!r}: {r.error}")
        etas.append(float(r.summary["eta_closed_cycle"]))
    return etas


def loss_breakdown(
    case: Case | str | Path = "demo",
    order: Sequence[str] | None = None,
    *,
    overrides: Sequence[str] = (),
    second_order: Sequence[str] | None = None,
    closed_step_deg: float = 0.1,
    out: str | Path | None = None,
    plots: bool = True,
    full_result=None,
) -> LossBreakdown:
    """Efficiency from the air-standard Otto cycle to brake output, one effect at a time.

    Parameters
    ----------
    case : Case, str or Path
        The engine and operating point (a full-cycle case), or a config path /
        built-in name (with ``overrides``).
    order : sequence of str, optional
        Order of the closed-cycle steps, a permutation of :data:`CLOSED_STEPS`
        with ``dissociation`` after ``real_gas`` (default :data:`DEFAULT_ORDER`).
    overrides : list of str
        ``key=value`` changes to the config.
    second_order : sequence of str, optional
        A second order to compute and report beside the first (e.g.
        :data:`ALT_ORDER`, heat transfer before the burn).
    closed_step_deg : float
        Integration step of every closed-cycle step [deg].
    out : str or Path, optional
        Folder for ``losses.csv``, ``losses.json`` and ``losses_waterfall.png``.
    plots : bool
        Write the waterfall chart (with ``out``).
    full_result : CaseResult, optional
        An already simulated full cycle of ``case`` (saves one run).

    Returns
    -------
    LossBreakdown
    """
    from ..api import simulate

    case, label = resolve_case(case, overrides)
    if case.simulation.mode != "full":
        case = _variant(case, {"simulation.mode": "full"})
    if not 0.01 <= closed_step_deg <= 1.0:
        raise ConfigError(f"closed_step_deg {closed_step_deg!r}: expected 0.01 to 1 deg")
    order = _validate_order(order if order is not None else DEFAULT_ORDER)
    notes = []
    from ..results.motoring import is_motored_config

    if is_motored_config(case):
        raise ConfigError("loss breakdown: the case is motored (burn.model 'none' or operating.fuel_cut): there is"
                          " no fuel energy to account for; `cyclesim run` gives a motored point's figures")
    if "combustion_efficiency" not in case.submodels["burn"].params:
        notes.append("the burn model has no combustion_efficiency: the incomplete-combustion step is zero")

    full = full_result
    if full is None:
        full = simulate([case])[0]
    if full.error:
        raise SolverError(f"loss breakdown, full cycle: {full.error}")
    ivc_state = _ivc_state(case, full)
    etas = _closed_etas(case, order, ivc_state, closed_step_deg)
    r = float(case.engine.compression_ratio)
    lb = LossBreakdown(steps=_steps_from(order, etas, full), order=order,
                       otto_formula=float(otto_efficiency(r)), compression_ratio=r, base_config=label,
                       notes=notes)
    lb.notes.append("the split of the losses depends on the order in which the effects are switched on;"
                    " the total from Otto to brake does not")
    lb.unreleased = _unreleased_points(full)
    lb.point = {k: float(full.summary[k]) for k, *_ in POINT_FIGURES if k in full.summary}
    if lb.unreleased.get("CO", 0.0) + lb.unreleased.get("H2", 0.0) > 0.05:
        lb.notes.append("the CO and H2 a rich mixture's products keep are lost within the real-gas step (its"
                        " complete-combustion products with the water-gas shift frozen at K = 3.5, Heywood 1988"
                        " sec. 4.9.1, from memory); the incomplete-combustion step is the burn model's unburned fuel")
    ge = next((x for x in lb.steps if x["key"] == "gas_exchange"), None)
    if ge is not None and ge["loss_points"] < 0:
        lb.notes.append("the gas-exchange step gains: the closed cycle ends at EVO, so it counts none of the work"
                        " the gas still does during blowdown (EVO to BDC), and it compresses the charge from BDC"
                        " where the real one is compressed from IVC; the full cycle's gross work has both; from"
                        " here the basis is the full cycle on the inducted fuel")
    lb.notes.append(f"closed-cycle steps start at BDC at {ivc_state['p_bar']:.3f} bar, {ivc_state['T_K']:.0f} K,"
                    f" burned-gas fraction {ivc_state['residual']:.3f} (the full cycle's trapped state)")
    if getattr(full, "warnings", None):
        lb.notes.extend(f"full cycle: {w}" for w in full.warnings)
    if second_order is not None:
        o2 = _validate_order(second_order)
        e2 = _closed_etas(case, o2, ivc_state, closed_step_deg)
        lb.second = LossBreakdown(steps=_steps_from(o2, e2, full), order=o2, otto_formula=lb.otto_formula,
                                  compression_ratio=r, base_config=label)
    if out is not None:
        out = Path(out)
        out.mkdir(parents=True, exist_ok=True)
        cols = ["step", "key", "label", "efficiency", "loss_points", "basis"]
        rows = lb.rows()
        if lb.second is not None:
            cols = cols + ["second_order_step", "second_order_efficiency", "second_order_loss_points"]
            by = {s["key"]: s for s in lb.second.steps}
            for row in rows:
                s2 = by[row["key"]]
                row.update(second_order_step=s2["step"], second_order_efficiency=s2["efficiency"],
                           second_order_loss_points=s2["loss_points"])
        write_rows_csv(out / CSV_NAME, rows, cols)
        files = [out / CSV_NAME]
        if plots:
            files.append(plot_waterfall(lb, out / PNG_NAME))
        files.append(out / JSON_NAME)
        lb.files = files
        atomic_write_text(out / JSON_NAME, json.dumps(lb.figures(), indent=2) + "\n")
    return lb


# --------------------------------------------------------------------------
# Plot
# --------------------------------------------------------------------------


def _waterfall(ax, lb: LossBreakdown, title: str) -> None:
    steps = lb.steps
    x = np.arange(len(steps) + 1)
    eta0 = 100 * steps[0]["efficiency"]
    ax.bar(0, eta0, color="tab:blue", width=0.7)
    ax.text(0, eta0 + 0.5, f"{eta0:.1f}", ha="center", fontsize=8)
    level = eta0
    for i, s in enumerate(steps[1:], start=1):
        d = s["loss_points"]
        color = "tab:red" if d >= 0 else "tab:green"
        ax.bar(i, -d, bottom=level, color=color, width=0.7)
        ax.text(i, max(level, level - d) + 0.5, f"{-d:+.1f}", ha="center", fontsize=8)
        level -= d
    ax.bar(len(steps), level, color="tab:blue", width=0.7)
    ax.text(len(steps), level + 0.5, f"{level:.1f}", ha="center", fontsize=8)
    labels = [steps[0]["label"]] + [s["label"] for s in steps[1:]] + ["brake efficiency"]
    ax.set_xticks(x)
    ax.set_xticklabels(labels, rotation=35, ha="right", fontsize=7.5)
    ax.set_ylabel("efficiency [% of fuel energy]")
    ax.set_title(title)
    ax.set_ylim(0, eta0 * 1.12)


_SHORT = {"real_gas": "real gas", "dissociation": "dissociation", "burn": "burn",
          "heat_transfer": "walls", "blowby": "blowby", "combustion": "incomplete comb.",
          "evo": "EVO", "gas_exchange": "gas exchange", "pumping": "pumping", "friction": "friction"}


def _order_text(order) -> str:
    return " > ".join(_SHORT.get(k, k) for k in order)


def plot_waterfall(lb: LossBreakdown, path: Path) -> Path:
    """Waterfall chart of the efficiency steps (and of the second order, if any)."""
    from ..plots import _plt, _save

    plt = _plt()
    n = 2 if lb.second is not None else 1
    fig, axes = plt.subplots(1, n, figsize=(8.5 * n, 5.2), squeeze=False)
    _waterfall(axes[0, 0], lb, f"{lb.base_config}: from the Otto cycle to brake output\n"
               f"order: {_order_text(lb.order)}")
    if lb.second is not None:
        _waterfall(axes[0, 1], lb.second, f"the same, second order\norder: {_order_text(lb.second.order)}")
    u = lb.unreleased
    if u:
        axes[0, 0].text(0.99, 0.97, f"unreleased chemical energy (full cycle):\n{u['total']:.1f} % of the fuel energy ="
                        f" CO {u['CO']:.1f} + H2 {u['H2']:.1f}\n+ unburned fuel {u['unburned_fuel']:.1f}",
                        transform=axes[0, 0].transAxes, ha="right", va="top", fontsize=7.5)
    fig.text(0.01, 0.005, "The split depends on the order in which the effects are switched on.", fontsize=7.5)
    return _save(fig, Path(path))
