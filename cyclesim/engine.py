"""Multi-cylinder engine: N cylinders on one crankshaft, coupled through shared manifolds.

>>> from cyclesim.engine import run_engine
>>> eng = run_engine("demo")                         # four cylinders, firing order 1-3-4-2
>>> eng.engine["brake_torque_Nm"], eng.engine["imep_net_spread_bar"]
>>> cut = run_engine("demo", modes=("fire", "fire", "cut", "fire"))

Each cylinder is one column of a batch (a case of its own, with its own
spread of trapped mass, spark, compression ratio and wall temperature), so an
engine is a cylinder axis beside the case axis, and several engines (say the
steps of a cylinder-cut test) share batches.  Cylinder ``k`` runs in its own
crank frame ``theta``; the engine frame is that of the first cylinder in the
firing order, ``phi = theta + offset_k`` with ``offset_k = 720 i / N`` for the
cylinder in position ``i`` of the firing order.

Manifolds (``multi_cylinder.manifolds``):

* ``constant``: every cylinder sees the operating point's plenum pressures
  (no interaction between cylinders).
* ``coupled``: one intake manifold (volume ``V_i`` at the intake temperature,
  isothermal, fed through a throttle from ambient air) and one exhaust
  manifold (volume ``V_e`` at the operating exhaust temperature, isothermal,
  emptied through an effective restriction to ambient), filling and emptying
  [Heywood 1988, sec. 14.3, from memory].  ``multi_cylinder.exhaust_branches``
  divides the exhaust: each branch is a volume of its own, with its
  cylinders' share of the volume and of the restriction's area, joining the
  others only downstream of the restriction:

      dp_i/dt = R_i T_i / V_i (mdot_throttle(p_i) - sum_k mdot_k,in)
      dp_e/dt = R_e T_e / V_e (sum_k mdot_k,out - mdot_outlet(p_e))

  with the throttle's open area ``pi D^2/4 (1 - cos psi / cos psi_0)``
  (plate angle psi, closed angle psi_0; the plate-shaft blockage is left
  out) [Heywood 1988, eq. 7.7, from memory].  The cylinders and the manifolds
  are solved by waveform relaxation: one cycle of all cylinders with the
  manifold pressure traces of the previous iteration, then the periodic
  manifold traces for those cylinder flows, until both settle.  In the
  manifold step the cylinders' intake flow is taken proportional to the
  manifold pressure about the trace they saw (a Newton-like estimate of their
  response); at the settled state that factor is 1, so the fixed point is
  the coupled solution.

Walls (``multi_cylinder.walls``): ``fixed`` as configured, or ``lumped``: one
thermal mass per cylinder between gas and coolant; its mean temperature
relaxes with time constant ``tau`` towards ``T_coolant + R Qdot_wall``, and
each surface keeps its configured offset from the configured mean.  After a
change of operating state (a cylinder cut, say) the walls are read at
``elapsed_s`` seconds: ``T = T_ss + (T_start - T_ss) exp(-t/tau)``.

Engine figures: indicated power is the sum over cylinders of net work times
cycles per second; friction is the engine's FMEP (mean over the cylinders of
the friction model evaluated on each cylinder's own trace, or a fixed value
given by the caller) times the total displacement; brake = indicated -
friction.  The crank-angle resolved torque is the sum of each cylinder's
``(p - p_ambient) dV/dtheta`` shifted to the engine frame, minus the mean
friction torque.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from .config import Case, case_with, resolve_case
from .errors import ConfigError, SolverError

__all__ = ["EngineSetup", "EngineResult", "run_engine", "simulate_engines", "firing_offsets", "cylinder_modes",
           "throttle_area", "cylinder_cases"]

MODES = ("fire", "cut", "deactivated")
R_AIR = 287.0
"""Gas constant of the intake air used by the throttle flow [J/(kg K)] (common practice)."""
GAMMA_AIR = 1.4
GAMMA_EXHAUST = 1.33
"""Ratio of specific heats of exhaust gas at manifold temperatures (common practice)."""
MANIFOLD_STEP_DEG = 1.0
"""Crank step of the manifold filling-and-emptying integration [deg]."""


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

    def summary_json(self) -> dict:
        from .output import plain

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
                         f" settled after {e['coupled_cycles']} coupled cycles")
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
        from .studies.map_console import cylinder_warning_lines

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
            from .registry import spark_param

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


# -- manifolds ----------------------------------------------------------------------


def supply_pressure_bar(ms) -> float:
    """Air pressure ahead of the throttle [bar]: ``intake_supply_pressure_bar``, else ambient."""
    v = ms.intake_supply_pressure_bar
    return float(ms.ambient_pressure_bar if v is None else v)


class _Manifolds:
    """Periodic filling-and-emptying of the coupled engines' manifolds, vectorised over engines."""

    def __init__(self, engines: list, step: float):
        self.E = len(engines)
        self.h = step
        self.n = int(round(720.0 / step))
        self.phi = -360.0 + step * np.arange(self.n + 1)
        e0 = engines
        self.p_amb = np.array([e["ms"].ambient_pressure_bar * 1e5 for e in e0])
        # the air ahead of the throttle: ambient, or the charge air of a boosted engine
        self.p_sup = np.array([supply_pressure_bar(e["ms"]) * 1e5 for e in e0])
        self.T_amb = np.array([e["T_int"] for e in e0])
        self.T_int = self.T_amb.copy()
        self.T_exh = np.array([e["T_exh"] for e in e0])
        self.R_int = np.array([e["R_int"] for e in e0])
        self.R_exh = np.array([e["R_exh"] for e in e0])
        self.V_i = np.array([e["ms"].intake_manifold_volume_L * 1e-3 for e in e0])
        ms = [e["ms"] for e in e0]
        self.A_thr = np.array([m.throttle_discharge_coefficient * throttle_area(
            m.throttle_diameter_mm * 1e-3, m.throttle_angle_deg, m.throttle_closed_angle_deg) for m in ms])
        self.omega = np.array([6.0 * e["speed_rpm"] for e in e0])   # deg/s
        # exhaust: one row per branch of each engine; a branch has its cylinders' share of the
        # manifold volume and of the restriction's area
        rows, self.ex_rows = [], []
        for j, e in enumerate(e0):
            br = np.asarray(e.get("branches", (0,)), dtype=int)
            self.ex_rows.append([])
            for b in range(int(br.max()) + 1):
                share = float(np.sum(br == b)) / len(br)
                self.ex_rows[j].append(len(rows))
                rows.append((j, share))
        ej = np.array([r[0] for r in rows], dtype=int)
        share = np.array([r[1] for r in rows])
        self.V_e = np.array([e0[j]["ms"].exhaust_manifold_volume_L * 1e-3 for j in ej]) * share
        self.A_out = np.array([0.25 * math.pi * (e0[j]["ms"].exhaust_outlet_diameter_mm * 1e-3) ** 2
                               for j in ej]) * share
        self.X = len(rows)
        self.T_exh_x, self.R_exh_x = self.T_exh[ej], self.R_exh[ej]
        self.p_amb_x, self.T_amb_x, self.omega_x = self.p_amb[ej], self.T_amb[ej], self.omega[ej]

    def q_throttle(self, p):
        """Throttle flow into the intake manifold [kg/deg] (E,)."""
        return self.q_throttle_rows(p, slice(None))

    def q_outlet(self, p):
        """Flow out of each exhaust branch to ambient [kg/deg] (X,)."""
        return self.q_outlet_rows(p, slice(None))

    def q_throttle_rows(self, p, rows):
        """Throttle flow [kg/deg] of some engines (``rows`` a slice) at pressure p."""
        from .flow import orifice_mass_flow

        return orifice_mass_flow(self.A_thr[rows], self.p_sup[rows], self.T_amb[rows], R_AIR, GAMMA_AIR,
                                 p, self.T_int[rows], R_AIR, GAMMA_AIR) / self.omega[rows]

    def q_outlet_rows(self, p, rows):
        """Exhaust outlet flow [kg/deg] of some exhaust branches (``rows``) at pressure p."""
        from .flow import orifice_mass_flow

        return orifice_mass_flow(self.A_out[rows], p, self.T_exh_x[rows], self.R_exh_x[rows], GAMMA_EXHAUST,
                                 self.p_amb_x[rows], self.T_amb_x[rows], R_AIR, GAMMA_AIR) / self.omega_x[rows]

    def _lap(self, p0, f):
        """One implicit-Euler lap over 720 deg from p0; f(j, p) -> (rate, d rate/dp)."""
        p = p0.copy()
        out = np.empty((p.size, self.n + 1))
        out[:, 0] = p
        for j in range(self.n):
            x = p.copy()
            for _ in range(2):
                r, dr = f(j, x)
                g = x - p - self.h * r
                x = x - g / (1.0 - self.h * dr)
                x = np.maximum(x, 1e3)
            p = x
            out[:, j + 1] = p
        return out

    def _periodic(self, p0, lap, tol=1e-7, laps=4):
        """Periodic solution p(phi) by secant iteration on the start value; ``lap(p0)`` -> one lap."""
        a = p0.copy()
        ga = lap(a)
        b = ga[:, -1].copy()
        gb = lap(b)
        for _ in range(laps):
            ra = ga[:, -1] - a
            rb = gb[:, -1] - b
            if np.all(np.abs(rb) < tol * b):
                break
            den = rb - ra
            c = np.where(np.abs(den) > 1e-300, b - rb * (b - a) / np.where(den == 0, 1.0, den), gb[:, -1])
            c = np.clip(c, 0.5 * b, 2.0 * b)
            a, ga = b, gb
            b = c
            gb = lap(b)
        return gb

    def solve(self, Qi, pref_i, Qe, p0_i, p0_e):
        """Periodic manifold pressures [Pa]: intake (E, n+1) and exhaust branches (X, n+1), for the
        cylinder flows per interval [kg/deg]: ``Qi`` (E, n), ``Qe`` (X, n)."""
        ki = self.R_int * self.T_int / self.V_i
        ke = self.R_exh_x * self.T_exh_x / self.V_e
        dp = 1.0
        from . import kernel

        mod = kernel.compiled_module()
        if mod is not None:
            # the same laps in compiled form (cyclesim._compiled), one Python call per lap
            from .flow import DP_LIN_DEFAULT

            f64 = lambda a: np.ascontiguousarray(a, dtype=float)  # noqa: E731
            Qi_, pr_, Qe_ = f64(Qi), f64(pref_i), f64(Qe)
            R_int = np.full(self.E, R_AIR)

            def lap_i(p0):      # the throttle fills the manifold with air from ambient
                return mod.manifold_lap(f64(p0), self.h, f64(ki), f64(self.A_thr), f64(self.T_int), R_int,
                                        GAMMA_AIR, f64(self.p_sup), f64(self.T_amb), R_AIR, GAMMA_AIR,
                                        f64(self.omega), Qi_, pr_, True, dp, DP_LIN_DEFAULT)

            def lap_e(p0):      # the outlet empties the branch to ambient (no reference pressure)
                return mod.manifold_lap(f64(p0), self.h, f64(ke), f64(self.A_out), f64(self.T_exh_x),
                                        f64(self.R_exh_x), GAMMA_EXHAUST, f64(self.p_amb_x), f64(self.T_amb_x),
                                        R_AIR, GAMMA_AIR, f64(self.omega_x), Qe_, Qe_, False, dp, DP_LIN_DEFAULT)

            return self._periodic(p0_i, lap_i), self._periodic(p0_e, lap_e)

        def fi(j, p):
            q = self.q_throttle(p)
            dq = (self.q_throttle(p + dp) - q) / dp
            pr = pref_i[:, j]
            return ki * (q - Qi[:, j] * p / pr), ki * (dq - Qi[:, j] / pr)

        def fe(j, p):
            q = self.q_outlet(p)
            dq = (self.q_outlet(p + dp) - q) / dp
            return ke * (Qe[:, j] - q), -ke * dq

        return (self._periodic(p0_i, lambda p0: self._lap(p0, fi)),
                self._periodic(p0_e, lambda p0: self._lap(p0, fe)))


def _periodic_interp(x_new, x, y):
    """Linear interpolation of y(x) (periodic over 720 deg, x ascending over one period)."""
    return np.interp(((x_new - x[0]) % 720.0) + x[0], x, y, period=720.0)


# -- the driver ------------------------------------------------------------------------


def simulate_engines(setups: Sequence[EngineSetup], progress: Callable[[str], None] | None = None,
                     tol: float | None = None) -> list[EngineResult]:
    """Simulate several engines; their cylinders share batches where their settings allow."""
    from .api import _registry_for, results_from_trace
    from .batch import build_batch, group_cases
    from .solver import integrate

    setups = list(setups)
    cols = []       # (engine index, cylinder index, case)
    info = []
    for e, st in enumerate(setups):
        cases = cylinder_cases(st)
        ms = st.case.multi_cylinder
        n = len(cases)
        modes = list(cylinder_modes(st))
        manifolds = "coupled" if st.frozen_traces is None and (st.manifolds or ms.manifolds) == "coupled" else (
            "frozen" if st.frozen_traces is not None else "constant")
        walls = st.walls or ms.walls
        info.append({"setup": st, "ms": ms, "n": n, "modes": modes, "offsets": firing_offsets(ms.firing_order, n),
                     "manifolds": manifolds, "walls": walls, "speed_rpm": float(st.case.operating.speed_rpm),
                     "T_int": float(st.case.operating.intake_temperature_K),
                     "T_exh": float(st.case.operating.exhaust_temperature_K), "cols": [],
                     "branches": exhaust_branches(ms, n)})
        for k, c in enumerate(cases):
            info[e]["cols"].append(len(cols))
            cols.append((e, k, c))
    registry = _registry_for([c for _, _, c in cols])
    all_cases = [c for _, _, c in cols]
    groups = group_cases(all_cases, registry)
    batches = []
    where = {}      # column -> (batch index, position)
    for bi, idx in enumerate(groups):
        batches.append(build_batch([all_cases[i] for i in idx], registry))
        for pos, i in enumerate(idx):
            where[i] = (bi, pos)
    # configured wall temperatures (per column), for the lumped model's offsets
    cfg_walls = {}
    for i, (_, _, c) in enumerate(cols):
        w = c.walls
        cfg_walls[i] = np.array([w.head_temperature_K, w.piston_temperature_K, w.liner_temperature_K])
    lumped_T = {}
    for e, inf in enumerate(info):
        if inf["walls"] == "lumped":
            st = inf["setup"]
            for k, i in enumerate(inf["cols"]):
                start = (float(st.wall_start_K[k]) if st.wall_start_K is not None else float(cfg_walls[i].mean()))
                lumped_T[i] = start
    interacting = [e for e, inf in enumerate(info) if inf["manifolds"] in ("coupled", "frozen")
                   or inf["walls"] == "lumped"]

    # gas constants of the plenums, per engine (from the first cylinder's batch)
    for e, inf in enumerate(info):
        bi, pos = where[inf["cols"][0]]
        b = batches[bi]
        g = b.gas
        op = b.operating
        T_i = np.atleast_1d(op.intake_temperature_K * np.ones(b.B))[pos]
        y_i = np.atleast_1d(op.egr_fraction * np.ones(b.B))[pos]
        rho = op.intake_pressure_bar * 1e5 / (R_AIR * T_i)
        mp = g.mixture(np.full(b.B, T_i), np.full(b.B, rho), np.full(b.B, y_i))
        inf["R_int"] = float(np.atleast_1d(mp.R)[pos])
        T_e = float(np.atleast_1d(op.exhaust_temperature_K * np.ones(b.B))[pos])
        rho_e = op.exhaust_pressure_bar * 1e5 / (R_AIR * T_e)
        mp = g.mixture(np.full(b.B, T_e), np.full(b.B, rho_e), np.ones(b.B))
        inf["R_exh"] = float(np.atleast_1d(mp.R)[pos])

    def set_walls():
        for i, T in lumped_T.items():
            bi, pos = where[i]
            w = batches[bi].walls
            delta = T - cfg_walls[i].mean()
            for j, name in enumerate(("head", "piston", "liner")):
                key = f"{name}_temperature_K"
                arr = np.array(np.broadcast_to(getattr(w, key), (batches[bi].B,)), dtype=float)
                arr[pos] = cfg_walls[i][j] + delta
                setattr(w, key, arr)

    coupled_e = [e for e in interacting if info[e]["manifolds"] in ("coupled", "frozen")]
    man = _Manifolds([info[e] for e in coupled_e], MANIFOLD_STEP_DEG) if coupled_e else None
    traces_eng = {}   # engine -> (p_int (n+1,), p_exh (n+1,)) engine frame on man.phi
    if man is not None:
        for j, e in enumerate(coupled_e):
            st = info[e]["setup"]
            nb = len(man.ex_rows[j])
            if st.frozen_traces is not None:
                pe = np.atleast_2d(np.asarray(st.frozen_traces[1], float))
                traces_eng[e] = (np.asarray(st.frozen_traces[0], float), np.repeat(pe, nb, 0) if len(pe) == 1 else pe)
            elif st.start is not None and st.start.manifold_traces is not None \
                    and len(st.start.manifold_traces[0]) == man.n + 1 \
                    and np.atleast_2d(st.start.manifold_traces[1]).shape[0] == nb:
                traces_eng[e] = (np.array(st.start.manifold_traces[0], float),
                                 np.atleast_2d(np.array(st.start.manifold_traces[1], float)))
            else:
                op = st.case.operating
                traces_eng[e] = (np.full(man.n + 1, op.intake_pressure_bar * 1e5),
                                 np.full((nb, man.n + 1), op.exhaust_pressure_bar * 1e5))
            if traces_eng[e][1].shape != (nb, man.n + 1):
                raise ConfigError(f"frozen exhaust traces: shape {traces_eng[e][1].shape}, expected"
                                  f" ({nb}, {man.n + 1}) (branches, manifold grid)")

    def push_traces():
        """Give each coupled batch's boundary its columns' traces in their own frames."""
        for bi, b in enumerate(batches):
            bnd = b.models["boundary"]
            if not hasattr(bnd, "set_traces"):
                continue
            n = man.n
            th = man.phi[:-1]
            pi = np.empty((b.B, n))
            pe = np.empty((b.B, n))
            for pos, i in enumerate(groups[bi]):
                e, k, _ = cols[i]
                off = info[e]["offsets"][k]
                Pi, Pe = traces_eng[e]
                pi[pos] = _periodic_interp(th + off, man.phi, Pi)
                pe[pos] = _periodic_interp(th + off, man.phi, Pe[info[e]["branches"][k]])
            bnd.set_traces(float(th[0]), man.h, pi, pe)

    set_walls()
    if man is not None:
        push_traces()
    # warm start: each batch to its own periodic state with the starting boundaries
    trs = []
    for bi, b in enumerate(batches):
        if progress:
            progress(f"batch {bi + 1}/{len(batches)}: start-up cycles")
        y0 = _start_state(b, [cols[i] for i in groups[bi]], info)
        trs.append(integrate(b) if y0 is None else integrate(b, initial=y0))
    tol = float(tol if tol is not None else min(b.simulation.tolerance for b in batches))
    n_coupled = {e: 0 for e in interacting}
    if interacting:
        max_cyc = max(int(info[e]["ms"].max_coupled_cycles) for e in interacting)
        active = [bi for bi in range(len(batches))
                  if any(cols[i][0] in interacting for i in groups[bi])]
        prev_imep = {i: None for i in range(len(cols))}
        settled = {e: False for e in interacting}
        for cyc in range(1, max_cyc + 1):
            change = {e: 0.0 for e in interacting}
            # manifolds from the last cycle's flows
            if man is not None:
                E = len(coupled_e)
                Qi = np.zeros((E, man.n))
                Qe = np.zeros((man.X, man.n))
                pref = np.zeros((E, man.n))
                for j, e in enumerate(coupled_e):
                    Pi, _ = traces_eng[e]
                    pref[j] = 0.5 * (Pi[:-1] + Pi[1:])
                    for k, i in enumerate(info[e]["cols"]):
                        bi, pos = where[i]
                        tr = trs[bi]
                        I = {nm: r for r, nm in enumerate(tr.names)}
                        cum_i = tr.Y[I["m_int"], pos] + tr.Y[I["m_ibuf"], pos] - tr.Y[I["m_ibuf"], pos, 0]
                        cum_e = -tr.Y[I["m_exh"], pos]
                        off = info[e]["offsets"][k]
                        for cum, Q, row in ((cum_i, Qi, j), (cum_e, Qe, man.ex_rows[j][info[e]["branches"][k]])):
                            # cylinder mass per engine-frame interval, exactly conserved over the cycle
                            tot = cum[-1] - cum[0]
                            local = man.phi - off          # engine grid in the cylinder's frame
                            wrapped = ((local + 360.0) % 720.0) - 360.0
                            c = np.interp(wrapped, tr.theta, cum)
                            c = c + np.where(local - wrapped > 1.0, tot, 0.0) - np.where(wrapped - local > 1.0, tot, 0.0)
                            Q[row] += np.diff(c) / man.h
                # cylinders of a frozen engine keep their traces
                live = [j for j, e in enumerate(coupled_e) if info[e]["manifolds"] == "coupled"]
                if live:
                    p0i = np.array([traces_eng[e][0][0] for e in coupled_e])
                    p0e = np.concatenate([traces_eng[e][1][:, 0] for e in coupled_e])
                    new_i, new_e = man.solve(Qi, pref, Qe, p0i, p0e)
                    for j in live:
                        e = coupled_e[j]
                        Pi, Pe = traces_eng[e]
                        ne = new_e[man.ex_rows[j]]
                        d = max(np.max(np.abs(new_i[j] - Pi) / Pi), np.max(np.abs(ne - Pe) / Pe))
                        change[e] = max(change[e], d)
                        traces_eng[e] = (new_i[j].copy(), ne.copy())
                push_traces()
            # lumped walls from the last cycle's wall heat
            for i in lumped_T:
                e, k, _ = cols[i]
                bi, pos = where[i]
                tr = trs[bi]
                I = {nm: r for r, nm in enumerate(tr.names)}
                ms = info[e]["ms"]
                st = info[e]["setup"]
                qdot = tr.Y[I["Q_w"], pos, -1] * info[e]["speed_rpm"] / 120.0     # W
                T_ss = ms.coolant_temperature_K + ms.wall_resistance_K_per_kW * qdot / 1e3
                start = float(st.wall_start_K[k]) if st.wall_start_K is not None else float(cfg_walls[i].mean())
                t = st.wall_elapsed_s
                T_new = T_ss if not math.isfinite(t) else T_ss + (start - T_ss) * math.exp(-t / ms.wall_time_constant_s)
                change[e] = max(change[e], abs(T_new - lumped_T[i]) / T_new)
                lumped_T[i] = T_new
            set_walls()
            # one cycle of every interacting batch
            for bi in active:
                trs[bi] = integrate(batches[bi], initial=trs[bi].end_state, cycles=1)
            for i in range(len(cols)):
                e = cols[i][0]
                if e not in interacting:
                    continue
                bi, pos = where[i]
                imep = trs[bi].history[-1][0][pos]
                m_tr = trs[bi].history[-1][1][pos]
                if prev_imep[i] is not None:
                    d = max(abs(imep - prev_imep[i][0]) / max(abs(imep), 1e4),
                            abs(m_tr - prev_imep[i][1]) / abs(m_tr))
                    change[e] = max(change[e], d)
                else:
                    change[e] = max(change[e], 1.0)
                prev_imep[i] = (imep, m_tr)
            for e in interacting:
                if not settled[e]:
                    n_coupled[e] = cyc
                    settled[e] = change[e] < tol
            if progress:
                progress(f"coupled cycle {cyc}: change {max(change.values()):.1e} (largest relative change of"
                         f" manifold pressure, walls, IMEP, trapped mass; settled below {tol:.0e})")
            if all(settled.values()):
                break
    else:
        settled = {}
    if man is not None:
        for j, e in enumerate(coupled_e):
            Pi, Pe = traces_eng[e]
            sl = slice(j, j + 1)
            q_t = float(np.sum(man.q_throttle_rows(Pi[1:], sl))) * man.h
            q_o = sum(float(np.sum(man.q_outlet_rows(Pe[b, 1:], slice(x, x + 1)))) * man.h
                      for b, x in enumerate(man.ex_rows[j]))
            info[e]["throttle_mg"] = q_t * 1e6
            info[e]["outlet_mg"] = q_o * 1e6
    results_per_batch = [results_from_trace(b, trs[bi], registry) for bi, b in enumerate(batches)]
    out = []
    for e, inf in enumerate(info):
        res = [results_per_batch[where[i][0]][where[i][1]] for i in inf["cols"]]
        ends = []
        for i in inf["cols"]:
            bi, pos = where[i]
            ends.append(dict(zip(trs[bi].names, trs[bi].end_state[:, pos].copy())))
        walls_T = np.array([lumped_T.get(i, float(cfg_walls[i].mean())) for i in inf["cols"]])
        tr_e = traces_eng.get(e)
        out.append(_engine_result(inf, res, tr_e, man.phi if man is not None else None, walls_T,
                                  n_coupled.get(e, 0), settled.get(e, True)))
        out[-1].end_states = ends
    return out


def _start_state(batch, columns, info):
    """Initial state (n_state, B) from the ``start`` engines of all columns, or None if any has none.

    States are matched by name; one the start engine does not have keeps its usual initial value.
    """
    from .solver import _RHS, _initial_state

    starts = []
    for e, k, _ in columns:
        st = info[e]["setup"].start
        if st is None or len(st.end_states) <= k:
            return None
        starts.append(st.end_states[k])
    rhs = _RHS(batch, "full")
    y = _initial_state(batch, rhs, -360.0, "full")
    for pos, d in enumerate(starts):
        for r, name in enumerate(rhs.names):
            if name in d and np.isfinite(d[name]):
                y[r, pos] = d[name]
    return y


def _engine_result(inf, res, man_tr, phi, walls_T, n_coupled, settled) -> EngineResult:
    st = inf["setup"]
    case = st.case
    n = inf["n"]
    warnings: list[str] = []
    for k, r in enumerate(res):
        if not r.ok:
            raise SolverError(f"cylinder {k + 1} ({inf['modes'][k]}): {r.error}")
        for w in r.warnings:
            if w.startswith("not settled") and inf["manifolds"] == "coupled":
                continue
            warnings.append(f"cylinder {k + 1}: {w}")
    if not settled:
        warnings.append(f"manifolds or walls not settled after {n_coupled} coupled cycles"
                        f" (raise multi_cylinder.max_coupled_cycles)")
    if inf["manifolds"] == "coupled":
        sup = supply_pressure_bar(inf["ms"])
        p_in = float(case.operating.intake_pressure_bar)
        if p_in > 1.05 * sup:
            warnings.append(
                f"the coupled intake manifold fills from {sup:g} bar ahead of the throttle"
                f" (multi_cylinder.intake_supply_pressure_bar, else ambient_pressure_bar), below the config's"
                f" intake pressure {p_in:g} bar: a boosted engine needs its charge-air pressure there")
    speed = inf["speed_rpm"]
    cps = speed / 120.0                        # cycles per second per cylinder
    Vd = float(case.engine.bore_mm * 1e-3) ** 2 * math.pi / 4 * case.engine.stroke_mm * 1e-3
    cyl = []
    W_net = np.zeros(n)
    W_gross = np.zeros(n)
    fm = np.zeros(n)
    fuel = np.zeros(n)
    air = np.zeros(n)
    incl_pumping = False
    for k, r in enumerate(res):
        s = r.summary
        zero = st.zero_cut_work and inf["modes"][k] != "fire"
        W_net[k] = 0.0 if zero else s["imep_net_bar"] * 1e5 * Vd
        W_gross[k] = 0.0 if zero else s["imep_gross_bar"] * 1e5 * Vd
        fm[k] = s["fmep_bar"]
        fuel[k] = s["fuel_mass_mg"] if inf["modes"][k] == "fire" else 0.0
        air[k] = s.get("inducted_mass_mg", 0.0) - fuel[k]
        cyl.append({"cylinder": k + 1, "mode": inf["modes"][k], "offset_deg": float(inf["offsets"][k]),
                    "imep_net_bar": W_net[k] / Vd / 1e5, "imep_gross_bar": W_gross[k] / Vd / 1e5,
                    "pmep_bar": (W_gross[k] - W_net[k]) / Vd / 1e5,
                    "p_max_bar": s["p_max_bar"], "theta_pmax_deg": s["theta_pmax_deg"],
                    "ca50_deg": s.get("ca50_deg", float("nan")), "trapped_mass_mg": s["trapped_mass_mg"],
                    "fuel_mass_mg": fuel[k], "fmep_bar": s["fmep_bar"], "wall_mean_K": float(walls_T[k]),
                    "residual_fraction": s.get("residual_fraction", float("nan")),
                    "wall_heat_J": s["wall_heat_J"]})
    if res and res[0].models.get("friction"):
        from .registry import get_registry

        cls = get_registry(case.plugins).submodel_class("friction", res[0].models["friction"])
        incl_pumping = bool(getattr(cls, "includes_pumping", False))
    fmep = float(st.fmep_bar) if st.fmep_bar is not None else float(fm.mean())
    W_ind = W_gross if incl_pumping else W_net
    P_ind = W_net.sum() * cps
    P_fric = fmep * 1e5 * Vd * n * cps + (W_net - W_ind).sum() * cps
    P_brake = P_ind - P_fric
    omega = 2 * math.pi * speed / 60.0
    firing = [k for k in range(n) if inf["modes"][k] == "fire"]
    imf = np.array([cyl[k]["imep_net_bar"] for k in firing]) if firing else np.array([0.0])
    eng = {
        "cylinders": n, "firing_order": [int(x) for x in (inf["ms"].firing_order or range(1, n + 1))],
        "speed_rpm": speed, "manifolds": inf["manifolds"], "walls": inf["walls"],
        "exhaust_branches": [int(b) + 1 for b in inf["branches"]],
        "modes": list(inf["modes"]),
        "indicated_power_kW": P_ind / 1e3, "indicated_power_gross_kW": W_gross.sum() * cps / 1e3,
        "pumping_power_kW": (W_gross - W_net).sum() * cps / 1e3,
        "friction_power_kW": P_fric / 1e3, "brake_power_kW": P_brake / 1e3,
        "brake_torque_Nm": P_brake / omega, "indicated_torque_Nm": P_ind / omega,
        "imep_net_bar": W_net.sum() / (n * Vd) / 1e5, "fmep_bar": fmep,
        "bmep_bar": P_brake / (n * Vd * cps) / 1e5,
        "fuel_flow_g_per_s": fuel.sum() * 1e-3 * cps, "air_flow_g_per_s": air.sum() * 1e-3 * cps,
        "bsfc_g_per_kWh": (fuel.sum() * 1e-3 * cps * 3600.0 / (P_brake / 1e3)) if P_brake > 0 else float("inf"),
        "imep_net_spread_bar": float(imf.max() - imf.min()),
        "imep_net_cov_cylinders": float(imf.std(ddof=0) / imf.mean()) if imf.mean() != 0 else float("nan"),
        "coupled_cycles": n_coupled,
        "cylinder_draw_mg_per_cycle": float(sum(r.summary.get("inducted_mass_mg", 0.0) for r in res)),
        "cylinder_exhaust_mg_per_cycle": float(sum(r.summary.get("inducted_mass_mg", 0.0)
                                                   - r.summary.get("blowby_mass_mg", 0.0) for r in res)),
    }
    if "throttle_mg" in inf:
        eng["throttle_mass_mg_per_cycle"] = inf["throttle_mg"]
        eng["exhaust_outlet_mass_mg_per_cycle"] = inf["outlet_mg"]
    # crank-angle resolved engine torque on a 1-deg engine grid
    grid = -360.0 + np.arange(721) * 1.0
    torque = np.zeros(len(grid))
    p_amb = inf["ms"].ambient_pressure_bar * 1e5
    for k, r in enumerate(res):
        if st.zero_cut_work and inf["modes"][k] != "fire":
            continue
        th = r.trace["crank_deg"]
        V = r.trace["volume_m3"]
        p = r.trace["pressure_bar"] * 1e5
        tq = (p - p_amb) * np.gradient(V, th) * 180.0 / math.pi
        torque += _periodic_interp(grid - inf["offsets"][k], th, tq)
    torque -= P_fric / omega
    traces = {"crank_deg": grid, "engine_torque_Nm": torque}
    if man_tr is not None and phi is not None:
        traces["intake_manifold_bar"] = _periodic_interp(grid, phi, man_tr[0]) / 1e5
        pe = np.atleast_2d(man_tr[1])
        traces["exhaust_manifold_bar"] = _periodic_interp(grid, phi, pe[0]) / 1e5
        if len(pe) > 1:
            for b in range(len(pe)):
                traces[f"exhaust_branch_{b + 1}_bar"] = _periodic_interp(grid, phi, pe[b]) / 1e5
        for key, arr in (("intake", man_tr[0]), ("exhaust", pe)):
            eng[f"{key}_manifold_mean_bar"] = float(np.mean(arr[..., :-1])) / 1e5
            eng[f"{key}_manifold_min_bar"] = float(arr.min()) / 1e5
            eng[f"{key}_manifold_max_bar"] = float(arr.max()) / 1e5
    return EngineResult(st.label or case.name, eng, cyl, traces, warnings, res, man_tr, walls_T)


def run_engine(config: "Case | str | Path" = "demo", overrides: Sequence[str] = (), modes: Sequence[str] = (),
               progress=None, **kw) -> EngineResult:
    """Simulate one multi-cylinder engine from a config (its ``multi_cylinder`` section).

    ``modes``: per cylinder ``fire`` / ``cut`` / ``deactivated`` (default from the config);
    other keywords go to :class:`EngineSetup`.
    """
    case, label = resolve_case(config, overrides)
    if int(case.engine.cylinders) < 1:
        raise ConfigError("engine.cylinders must be >= 1")
    if case.simulation.mode != "full":
        raise ConfigError("the multi-cylinder engine needs simulation.mode: full")
    return simulate_engines([EngineSetup(case, tuple(modes), label=kw.pop("label", label), **kw)],
                            progress=progress)[0]
