"""An engine as data: its cylinders (per-cylinder modes and spreads of the base case), firing offsets, exhaust branches, throttle, and the result of a run."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from ..config import Case, case_with
from ..errors import ConfigError


MODES = ("fire", "cut", "deactivated")


def firing_offsets(firing_order: Sequence[int] | None, n: int) -> np.ndarray:
    """Engine-frame crank offset [deg] of each cylinder (in number order).

    The first cylinder of the firing order has offset 0; the one in position
    ``i`` fires ``720 i / n`` deg later (even firing, four-stroke).
    """
    order = list(range(1, n + 1)) if not firing_order else [int(x) for x in firing_order]
    if sorted(order) != list(range(1, n + 1)):
        raise ConfigError(f"multi_cylinder.firing_order = {order}: expected each of 1..{n} exactly once")
    off = np.empty(n)
    for i, cyl in enumerate(order):
        off[cyl - 1] = 720.0 * i / n
    return off


def exhaust_branches(ms, n: int) -> np.ndarray:
    """Exhaust branch index (0-based) of each cylinder, in number order (all 0: one common manifold)."""
    vals = getattr(ms, "exhaust_branches", None)
    if not vals:
        return np.zeros(n, dtype=int)
    if len(vals) != n or any(float(v) != int(v) for v in vals):
        raise ConfigError(f"multi_cylinder.exhaust_branches = {list(vals)}: expected {n} whole branch numbers"
                          f" (one per cylinder)")
    labels = sorted({int(v) for v in vals})
    return np.array([labels.index(int(v)) for v in vals], dtype=int)


def throttle_area(diameter_m: float, angle_deg: float, closed_deg: float) -> float:
    """Open area of a throttle plate [m^2]: ``pi D^2/4 (1 - cos psi / cos psi_0)`` (Heywood 1988, eq. 7.7, from memory)."""
    psi = math.radians(angle_deg)
    psi0 = math.radians(closed_deg)
    if angle_deg <= closed_deg:
        return 0.0
    return 0.25 * math.pi * diameter_m ** 2 * (1.0 - math.cos(psi) / math.cos(psi0))


def _or_dash(v, width: int, spec: str) -> str:
    """A figure for a table column, or a dash where it has no value (a cut cylinder's CA50)."""
    return f"{v:{width}{spec}}" if v is not None and np.isfinite(v) else f"{'-':>{width}s}"


@dataclass
class EngineSetup:
    """One engine to simulate.

    Attributes
    ----------
    case : Case
        The base case (one cylinder's config plus its ``multi_cylinder`` section).
    modes : tuple of str
        Per cylinder (number order): ``fire``, ``cut`` or ``deactivated``.
    manifolds, walls : str
        Override ``multi_cylinder.manifolds`` / ``walls`` (None: as configured).
    wall_start_K : ndarray (N,), optional
        Lumped walls: mean wall temperature at the start (default: configured mean).
    wall_elapsed_s : float
        Lumped walls: time since the start state (inf: settled).
    fmep_bar : float, optional
        Engine FMEP to use instead of the friction model's (e.g. frozen at another state).
    zero_cut_work : bool
        Count no indicated work for cut and deactivated cylinders (an idealisation).
    frozen_traces : tuple, optional
        (p_int, p_exh) engine-frame manifold traces [Pa] on :data:`MANIFOLD_STEP_DEG`
        to hold fixed (manifolds seen as in another state, no interaction).
    label : str
    start : EngineResult, optional
        Start each cylinder (and coupled manifolds) from this engine's settled state instead of
        from the operating point (the readings of a test that follow one another).
    """

    case: Case
    modes: tuple = ()
    manifolds: str | None = None
    walls: str | None = None
    wall_start_K: np.ndarray | None = None
    wall_elapsed_s: float = math.inf
    fmep_bar: float | None = None
    zero_cut_work: bool = False
    frozen_traces: tuple | None = None
    label: str = ""
    start: "EngineResult | None" = None


@dataclass
class EngineResult:
    """Result of one engine: per-cylinder figures, engine figures, engine-frame traces."""

    label: str
    engine: dict
    cylinders: list
    traces: dict
    warnings: list = field(default_factory=list)
    cylinder_results: list = field(default_factory=list)
    manifold_traces: tuple | None = None
    wall_mean_K: np.ndarray | None = None
    end_states: list = field(default_factory=list)
    coupling_history: list = field(default_factory=list)
    """Per coupled cycle (:func:`cyclesim.engine.runner_links.coupling_history`)."""

    def summary_json(self) -> dict:
        from ..output import plain

        return {"label": self.label, "engine": plain(self.engine), "cylinders": plain(self.cylinders),
                "warnings": list(self.warnings)}

    def text(self) -> str:
        e = self.engine
        lines = [f"engine: {self.label}",
                 f"  {e['cylinders']} cylinders, firing order {'-'.join(str(c) for c in e['firing_order'])},"
                 f" {e['speed_rpm']:.0f} rpm, manifolds {e['manifolds']}, walls {e['walls']}",
                 f"  brake torque {e['brake_torque_Nm']:8.2f} N m   brake power {e['brake_power_kW']:7.2f} kW"
                 f"   BMEP {e['bmep_bar']:6.3f} bar",
                 f"  indicated power (net) {e['indicated_power_kW']:7.2f} kW   friction power"
                 f" {e['friction_power_kW']:6.2f} kW   FMEP {e['fmep_bar']:6.3f} bar",
                 f"  BSFC {e['bsfc_g_per_kWh']:6.1f} g/kWh   air flow {e['air_flow_g_per_s']:6.2f} g/s",
                 ]
        if e["manifolds"] == "coupled":
            lines.append(f"  intake manifold {e['intake_manifold_mean_bar']:.4f} bar mean"
                         f" ({e['intake_manifold_min_bar']:.3f}..{e['intake_manifold_max_bar']:.3f}),"
                         f" exhaust manifold {e['exhaust_manifold_mean_bar']:.4f} bar mean"
                         f" ({e['exhaust_manifold_min_bar']:.3f}..{e['exhaust_manifold_max_bar']:.3f});"
                         + (f" settled after {e['coupled_cycles']} coupled cycles" if e.get("settled", True)
                            else f" NOT settled after {e['coupled_cycles']} coupled cycles (see the warning)"))
        if e.get("runners"):
            start = (f", from the 0-D engine's state settled in {e['lumped_start_coupled_cycles']} coupled cycles"
                     if "lumped_start_coupled_cycles" in e else "")
            lines.append("  runners: each cylinder's intake runner from the plenum, exhaust runner into its"
                         f" branch's collector (1-D; relaxed with the volumes cycle by cycle{start})")
        if e["manifolds"] == "coupled" and len(set(e.get("exhaust_branches", [1]))) > 1:
            lines.append("  exhaust branches (cylinder: branch): "
                         + ", ".join(f"{k + 1}: {b}" for k, b in enumerate(e["exhaust_branches"])))
        lines.append("  cyl  mode          net IMEP   p_max  CA50   trapped  wall T")
        lines.append("                        bar     bar   deg       mg      K")
        for c in self.cylinders:
            lines.append(f"  {c['cylinder']:3d}  {c['mode']:<12s} {c['imep_net_bar']:8.3f} {c['p_max_bar']:7.2f}"
                         f" {_or_dash(c['ca50_deg'], 5, '.1f')} {c['trapped_mass_mg']:8.1f} {c['wall_mean_K']:7.1f}")
        lines.append(f"  spread (max-min) of net IMEP over firing cylinders: {e['imep_net_spread_bar']:.3f} bar,"
                     f" COV {100 * e['imep_net_cov_cylinders']:.2f} %")
        from ..results.warning_groups import cylinder_warning_lines

        lines.extend(cylinder_warning_lines(self.warnings, len(self.cylinders)))
        return "\n".join(lines)


def _spread(ms, key: str, n: int, default: float) -> list[float]:
    vals = getattr(ms, key)
    if vals is None:
        return [default] * n
    if len(vals) != n:
        raise ConfigError(f"multi_cylinder.{key}: expected {n} values (one per cylinder), got {len(vals)}")
    return [float(v) for v in vals]


def cylinder_modes(setup: EngineSetup) -> tuple:
    """Per-cylinder modes of an engine: the setup's, else the config's, else all firing."""
    ms = setup.case.multi_cylinder
    n = int(setup.case.engine.cylinders)
    modes = tuple(setup.modes) or (tuple(ms.cylinder_modes) if ms.cylinder_modes else ("fire",) * n)
    if len(modes) != n or any(m not in MODES for m in modes):
        raise ConfigError(f"cylinder modes {modes}: expected {n} of {', '.join(MODES)}")
    return modes


def cylinder_cases(setup: EngineSetup) -> list[Case]:
    """The per-cylinder cases of an engine (spread, modes and boundary model applied)."""
    case = setup.case
    ms = case.multi_cylinder
    n = int(case.engine.cylinders)
    modes = cylinder_modes(setup)
    manifolds = setup.manifolds or ms.manifolds
    coupled = manifolds == "coupled" or setup.frozen_traces is not None
    f_m = _spread(ms, "spread_trapped_mass", n, 1.0)
    d_sp = _spread(ms, "spread_spark_deg", n, 0.0)
    d_cr = _spread(ms, "spread_compression_ratio", n, 0.0)
    d_tw = _spread(ms, "spread_wall_temperature_K", n, 0.0)
    out = []
    for k in range(n):
        ch: dict = {}
        if coupled:
            ch["boundary.model"] = "manifold_trace"
        if f_m[k] != 1.0:
            if case.submodels["valve_flow"].model != "poppet":
                raise ConfigError("multi_cylinder.spread_trapped_mass needs valve_flow.model: poppet")
            ch["valve_flow.intake_area_factor"] = case.submodels["valve_flow"].params["intake_area_factor"] * f_m[k]
        if d_sp[k] != 0.0 and modes[k] == "fire":
            from ..registry import spark_param

            sp = spark_param(case, "multi_cylinder.spread_spark_deg")
            ch[f"burn.{sp}"] = case.submodels["burn"].params[sp] + d_sp[k]
        if d_cr[k] != 0.0:
            ch["engine.compression_ratio"] = case.engine.compression_ratio + d_cr[k]
        if d_tw[k] != 0.0:
            for w in ("head", "piston", "liner"):
                ch[f"walls.{w}_temperature_K"] = getattr(case.walls, f"{w}_temperature_K") + d_tw[k]
        if modes[k] in ("cut", "deactivated"):
            ch["operating.fuel_cut"] = True
            ch["burn.model"] = "none"
            ch["knock.model"] = "none"
        if modes[k] == "deactivated":
            ch["valve_flow.model"] = "none"
            ch.pop("valve_flow.intake_area_factor", None)
        c = case_with(case, ch) if ch else case
        c.name = f"{case.name} cyl {k + 1} ({modes[k]})"
        out.append(c)
    return out
