"""Turbocharger match: compressor, intercooler and turbine around the simulated cycle.

>>> from cyclesim.studies.boost import boost_match
>>> b = boost_match("demo_turbo", boost_pressure_bar=1.6)
>>> print(b.text())

A steady-flow (constant-pressure) turbocharger model, matched to the cycle by
a fixed point on the exhaust back pressure:

1. **Compressor** from ambient (p1, T1) to the boost pressure plus the
   intercooler's pressure drop, isentropic efficiency eta_c:
   ``T2 = T1 (1 + (PR^((g-1)/g) - 1) / eta_c)`` (any thermodynamics text,
   e.g. Heywood 1988 §6.8; air g = 1.4, R = 287 J/(kg K)); power
   ``P_c = m_air cp (T2 - T1)``.
2. **Intercooler** of effectiveness eps: ``T_ic = T2 - eps (T2 - T_coolant)``;
   the intake plenum of the case gets (boost pressure, T_ic).
3. **Cylinder**: the case is simulated with that intake and the current
   exhaust back pressure p3 (and the exhaust plenum at T3 for backflow).
   Exhaust mass flow = (inducted - blowby) mass per cycle x cylinders x N/120;
   the compressor's air flow is the inducted mass less its fuel (port or
   manifold injection after the compressor).  The turbine inlet temperature
   T3 is the cycle's enthalpy-averaged exhaust temperature
   (``exhaust_temperature_K``).
4. **Turbine**, isentropic efficiency eta_t: ``T4s = T3 (p4/p3)^((g-1)/g)``,
   ``T4 = T3 - eta_t (T3 - T4s)``, power ``P_t = m_t cp_e (T3 - T4)`` with the
   exhaust gas's own g and cp from the complete-combustion products
   (:mod:`cyclesim.gas.thermo`) at the mean of T3 and T4.  The turbine passes
   ``m_t`` through one effective area as a compressible orifice
   (:func:`cyclesim.cylinder.flow.orifice_mass_flow`, Heywood 1988 App. C), which sets
   p3 for a given m_t.
5. **Power balance** ``eta_m P_t = P_c``: the wastegate passes the share of the
   exhaust flow that the turbine must not take; with the wastegate closed and
   still too little turbine power the target boost cannot be reached (the
   result says so, ``reached = False``).
6. p3 goes back to step 3 until it changes by less than ``tolerance_bar``
   between iterations (default 0.002 bar, at most ``max_iterations``).

Left out: pulse energy of the blowdown (a constant-pressure turbine inlet),
heat lost in the exhaust manifold before the turbine (T3 is the exhaust-valve
enthalpy average), a turbine map (fixed efficiency), the turbocharger's inertia,
and the air filter's pressure drop.  With a compressor map
(:mod:`cyclesim.studies.compressor_map`) the compressor efficiency is read at
each iteration's corrected flow and pressure ratio, and the surge and choke
margins and the turbocharger speed are reported; without one the efficiency is
fixed and those limits are not checked (the result says so).
"""

from __future__ import annotations

import math

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Sequence

import numpy as np

from ..cylinder.flow import turbine_outlet_temperature  # noqa: F401 - re-exported
from ..config import Case, case_with, resolve_case
from ..errors import ConfigError, SolverError
from ..output import CAUTION, atomic_write_text, write_rows_csv
from ..output import plain as _plain

__all__ = ["boost_match", "BoostResult", "compressor_outlet_temperature", "turbine_outlet_temperature",
           "intercooler_outlet_temperature", "exhaust_gas_properties"]

GAMMA_AIR = 1.4
R_AIR = 287.0
P_MAX_LIMIT_BAR = 120.0
"""Default peak cylinder pressure above which the match warns [bar]: the order of the design
limit of production spark-ignition engines (common practice); use the engine maker's figure."""
T3_LIMIT_K = 1273.0
"""Default turbine inlet temperature above which the match warns [K] (1000 C, the order of the
limit of production gasoline turbine housings and wheels; common practice); use the maker's figure."""
JSON_NAME = "boost.json"
CSV_NAME = "boost_iterations.csv"
PNG_NAME = "boost_match.png"


# --------------------------------------------------------------------------
# Component relations (pure functions)
# --------------------------------------------------------------------------


def compressor_outlet_temperature(T1, pressure_ratio, eta_c, gamma=GAMMA_AIR):
    """Compressor outlet temperature T2 [K] = T1 (1 + (PR^((g-1)/g) - 1) / eta_c).

    Parameters
    ----------
    T1 : array_like
        Inlet total temperature [K].
    pressure_ratio : array_like
        Outlet / inlet total pressure [-].
    eta_c : array_like
        Isentropic (total-to-total) efficiency [-].
    gamma : array_like
        Ratio of specific heats of air [-].
    """
    g = np.asarray(gamma, float)
    return np.asarray(T1, float) * (1.0 + (np.asarray(pressure_ratio, float) ** ((g - 1) / g) - 1.0) / eta_c)


def intercooler_outlet_temperature(T_in, T_coolant, effectiveness):
    """Charge-air cooler outlet temperature T_in - eps (T_in - T_coolant) [K]."""
    return np.asarray(T_in, float) - effectiveness * (np.asarray(T_in, float) - T_coolant)


def exhaust_gas_properties(case: Case, T):
    """Gas constant R [J/(kg K)], cp [J/(kg K)] and gamma [-] of the case's complete-combustion products at T [K]."""
    from ..fuels import get_fuel
    from ..registry import get_registry
    from ..solve.gas_tables import build_gas_tables

    f = case.fuel
    spec = f.name if f.C is None else {"name": f.name, "C": f.C, "H": f.H, "O": f.O or 0.0,
                                       "lhv_MJ_per_kg": f.lhv_MJ_per_kg}
    fuel = get_fuel(spec, get_registry(tuple(case.plugins)).fuels)
    gas = build_gas_tables(fuel, [1.0 / case.operating.__dict__["lambda"]], "complete")
    T = np.atleast_1d(np.asarray(T, float))
    _, cv, _, R, _, _ = gas.burned(T, np.ones_like(T))
    cp = cv + R
    return float(R[0]), float(cp[0]), float(cp[0] / cv[0]), gas


# --------------------------------------------------------------------------
# Result
# --------------------------------------------------------------------------


@dataclass
class BoostResult:
    """Matched turbocharger and engine state (SI inside, units in the names of ``figures()``)."""

    boost_pressure_bar: float
    reached: bool
    message: str
    converged: bool
    iterations: list
    tolerance_bar: float
    state: dict
    engine: dict
    result: object = None
    notes: list = field(default_factory=list)
    files: list = field(default_factory=list)
    base_config: str = ""
    caution: str = CAUTION
    warnings: list = field(default_factory=list)
    """Limits the matched point exceeds, knock, and the engine's own warnings."""
    limits: dict = field(default_factory=dict)

    def figures(self) -> dict:
        return {
            "caution": self.caution,
            "base_config": self.base_config,
            "boost_pressure_bar": self.boost_pressure_bar,
            "reached": self.reached,
            "message": self.message,
            "converged": self.converged,
            "tolerance_bar": self.tolerance_bar,
            "iterations": len(self.iterations),
            "turbocharger": dict(self.state),
            "engine": dict(self.engine),
            "iteration_history": [dict(r) for r in self.iterations],
            "warnings": list(self.warnings),
            "limits": dict(self.limits),
            "notes": list(self.notes),
            "files": [Path(f).name for f in self.files],
        }

    def text(self) -> str:
        s, e = self.state, self.engine
        reached = "reached" if self.reached else "NOT reached"
        if self.reached and self.warnings:
            reached += ", with the warnings below"
        lines = [f"boost match: {self.base_config}, target {self.boost_pressure_bar:g} bar intake"
                 f" ({reached};"
                 f" {'converged' if self.converged else 'NOT converged'} in {len(self.iterations)} iterations,"
                 f" tolerance {self.tolerance_bar:g} bar)"]

        def row(label, v, unit, spec=".3f"):
            lines.append(f"  {label:<44s}{'-' if v is None else format(v, spec):>10s}  {unit}")

        row("ambient pressure / temperature", s["p1_bar"], "bar")
        lines[-1] += f"  {s['T1_K']:.1f} K"
        row("compressor pressure ratio", s["compressor_pressure_ratio"], "-")
        row("compressor efficiency", s["eta_compressor"], "-")
        if "compressor_map" in s:
            lines[-1] += f"  (from the map {s['compressor_map']})"
            row("corrected flow on the map", s["map_corrected_flow_kg_per_s"], "kg/s", ".4f")
            for label, k in (("surge margin (flow above the surge line)", "map_surge_margin"),
                             ("choke margin (flow below the choke end)", "map_choke_margin")):
                row(label, None if s.get(k) is None else 100 * s[k], "%", ".1f")
            row("turbocharger speed", s.get("turbocharger_speed_rpm"), "rpm", ".0f")
        row("compressor outlet temperature T2", s["T2_K"], "K", ".1f")
        row("intake plenum (after intercooler)", s["p_intake_bar"], "bar")
        lines[-1] += f"  {s['T_intake_K']:.1f} K"
        row("exhaust back pressure p3", s["p3_bar"], "bar")
        row("turbine inlet temperature T3", s["T3_K"], "K", ".1f")
        row("turbine outlet p4 / T4", s["p4_bar"], "bar")
        lines[-1] += f"  {s['T4_K']:.1f} K"
        row("air / exhaust mass flow", s["air_flow_g_per_s"], "g/s", ".1f")
        lines[-1] += f"  {s['exhaust_flow_g_per_s']:.1f} g/s"
        row("compressor power", s["compressor_power_kW"], "kW", ".2f")
        row("turbine power / at the shaft (x eta_mech)", s["turbine_power_kW"], "kW", ".2f")
        lines[-1] += f"  {s['turbine_shaft_power_kW']:.2f} kW"
        row("wastegate share of exhaust flow", 100 * s["wastegate_share"], "%", ".1f")
        row("BMEP", e.get("bmep_bar"), "bar", ".2f")
        row("torque / power", e.get("torque_Nm"), "N m", ".1f")
        lines[-1] += f"  {e.get('power_kW', float('nan')):.1f} kW"
        row("BSFC", e.get("bsfc_g_per_kWh"), "g/kWh", ".0f")
        row("PMEP", e.get("pmep_bar"), "bar", ".2f")
        row("peak cylinder pressure", e.get("p_max_bar"), "bar", ".1f")
        lim = self.limits
        if lim:
            lines[-1] += f"  (limit {lim['p_max_limit_bar']:g})"
            row("turbine inlet temperature limit", lim["t3_limit_K"], "K", ".0f")
            lines.append(f"  {'knock (end gas)':<44s}{lim['knock']:>10s}")
        if not self.reached or not self.converged:
            lines.append(f"note: {self.message}")
        for w in self.warnings:
            lines.append(f"warning: {w}")
        for n in self.notes:
            lines.append(f"note: {n}")
        lines.append(f"CAUTION: {self.caution}")
        return "\n".join(lines)


# --------------------------------------------------------------------------
# Matching
# --------------------------------------------------------------------------



def _p3_for_flow(m_t, area, T3, R, g, p4):
    """Turbine inlet pressure [Pa] that passes ``m_t`` [kg/s] through ``area`` [m^2] to ``p4`` [Pa]."""
    from scipy.optimize import brentq

    from ..cylinder.flow import orifice_mass_flow

    if m_t <= 0:
        return p4
    f = lambda p3: float(orifice_mass_flow(area, p3, T3, R, g, p4, T3, R, g)) - m_t  # noqa: E731
    lo = p4 * (1 + 1e-9)
    if f(lo) >= 0:
        return lo
    hi = 2.0 * p4
    while f(hi) < 0:
        hi *= 2.0
        if hi > 1e9:
            raise SolverError(f"turbine: no inlet pressure passes {m_t * 1e3:.1f} g/s through {area * 1e4:.3g} cm^2")
    return brentq(f, lo, hi, xtol=1e-3, rtol=1e-12)


def _props(gas, T):
    _, cv, _, R, _, _ = gas.burned(np.atleast_1d(float(T)), np.ones(1))
    return float(R[0]), float(cv[0] + R[0]), float((cv[0] + R[0]) / cv[0])


def _turbine(gas, m_t, T3, p4, area, eta_t):
    """(p3 [Pa], T4, T4s [K], power [W], gamma, cp, R) of the turbine passing m_t."""
    R, cp, g = _props(gas, T3)
    T4 = T3
    for _ in range(3):  # properties at the mean temperature of the expansion
        p3 = _p3_for_flow(m_t, area, T3, R, g, p4)
        T4, T4s = turbine_outlet_temperature(T3, p3 / p4, eta_t, g)
        R, cp, g = _props(gas, 0.5 * (T3 + float(T4)))
    p3 = _p3_for_flow(m_t, area, T3, R, g, p4)
    T4, T4s = turbine_outlet_temperature(T3, p3 / p4, eta_t, g)
    return p3, float(T4), float(T4s), m_t * cp * (T3 - float(T4)), g, cp, R


def boost_match(
    case: Case | str | Path = "demo",
    boost_pressure_bar: float = 1.6,
    eta_compressor: float = 0.72,
    eta_turbine: float = 0.70,
    eta_mechanical: float = 0.95,
    intercooler_effectiveness: float = 0.8,
    turbine_area_cm2: float = 3.0,
    wastegate: bool = True,
    ambient_pressure_bar: float = 1.0,
    ambient_temperature_K: float = 298.0,
    coolant_temperature_K: float | None = None,
    intercooler_pressure_drop_bar: float = 0.0,
    turbine_outlet_pressure_bar: float | None = None,
    *,
    overrides: Sequence[str] = (),
    tolerance_bar: float = 0.002,
    max_iterations: int = 8,
    out: str | Path | None = None,
    plots: bool = True,
    p_max_limit_bar: float = P_MAX_LIMIT_BAR,
    t3_limit_K: float = T3_LIMIT_K,
    compressor_map=None,
) -> BoostResult:
    """Match a turbocharger to the case at a target intake (boost) pressure.

    Parameters
    ----------
    case : Case, str or Path
        Engine and operating point (a full-cycle case), or a config path / name.
    boost_pressure_bar : float
        Target intake plenum pressure, absolute [bar].
    eta_compressor, eta_turbine, eta_mechanical : float
        Compressor and turbine isentropic efficiencies, turbocharger mechanical efficiency [-].
    intercooler_effectiveness : float
        Charge-air cooler effectiveness, 0 = no cooler [-].
    turbine_area_cm2 : float
        Effective flow area of the turbine (discharge coefficient included) [cm^2].
    wastegate : bool
        Whether a wastegate can bypass exhaust round the turbine.
    ambient_pressure_bar, ambient_temperature_K : float
        Compressor inlet state [bar, K].
    coolant_temperature_K : float, optional
        Intercooler coolant temperature [K] (default: ambient, an air-to-air cooler).
    intercooler_pressure_drop_bar : float
        Pressure lost in the intercooler; the compressor delivers boost plus this [bar].
    turbine_outlet_pressure_bar : float, optional
        Pressure after the turbine [bar] (default ambient + 0.05 bar for the exhaust system).
    overrides : list of str
        ``key=value`` changes to the config.
    tolerance_bar : float
        Convergence tolerance on the exhaust back pressure between iterations [bar].
    max_iterations : int
        Most cylinder <-> turbocharger iterations.
    out : str or Path, optional
        Folder for ``boost.json``, ``boost_iterations.csv`` and ``boost_match.png``.
    p_max_limit_bar, t3_limit_K : float
        Peak cylinder pressure [bar] and turbine inlet temperature [K] above which the result
        warns (defaults :data:`P_MAX_LIMIT_BAR`, :data:`T3_LIMIT_K`: orders of magnitude, not
        any engine's rating; give the engine maker's limits).  The result also warns where the
        knock model predicts autoignition, or where no knock model is chosen.
    compressor_map : str, Path or CompressorMap, optional
        A compressor map (:mod:`cyclesim.studies.compressor_map`): the compressor efficiency is
        read from it at each iteration's operating point (``eta_compressor`` is only the first
        guess), and the surge and choke margins and the turbocharger speed are reported.

    Returns
    -------
    BoostResult
    """
    from ..api import simulate

    for name, v, lo, hi in (("eta_compressor", eta_compressor, 0, 1), ("eta_turbine", eta_turbine, 0, 1),
                            ("eta_mechanical", eta_mechanical, 0, 1)):
        if not lo < v <= hi:
            raise ConfigError(f"{name} {v!r}: expected a number in (0, 1]")
    if not 0 <= intercooler_effectiveness <= 1:
        raise ConfigError(f"intercooler_effectiveness {intercooler_effectiveness!r}: expected 0..1")
    if not turbine_area_cm2 > 0:
        raise ConfigError(f"turbine_area_cm2 {turbine_area_cm2!r}: expected a positive number")
    if not boost_pressure_bar > 0:
        raise ConfigError(f"boost pressure {boost_pressure_bar!r} bar: expected a positive number")
    if not (p_max_limit_bar > 0 and t3_limit_K > 0):
        raise ConfigError(f"limits {p_max_limit_bar!r} bar, {t3_limit_K!r} K: expected positive numbers")
    for name, v in (("boost pressure", boost_pressure_bar), ("tolerance_bar", tolerance_bar),
                    ("ambient_pressure_bar", ambient_pressure_bar), ("ambient_temperature_K", ambient_temperature_K),
                    ("turbine_area_cm2", turbine_area_cm2)):
        if not (isinstance(v, (int, float)) and math.isfinite(v) and v > 0):
            raise ConfigError(f"{name} {v!r}: expected a finite positive number")
    if isinstance(max_iterations, bool) or not isinstance(max_iterations, int) or max_iterations < 1:
        raise ConfigError(f"max_iterations {max_iterations!r}: expected a whole number >= 1"
                          " (each iteration simulates the engine once)")
    case, label = resolve_case(case, overrides)
    if case.simulation.mode != "full":
        raise ConfigError("boost match needs simulation.mode: full (the gas exchange sets the flows)")

    p1 = ambient_pressure_bar * 1e5
    T1 = float(ambient_temperature_K)
    T_cool = T1 if coolant_temperature_K is None else float(coolant_temperature_K)
    p4 = (ambient_pressure_bar + 0.05 if turbine_outlet_pressure_bar is None else turbine_outlet_pressure_bar) * 1e5
    p2 = (boost_pressure_bar + intercooler_pressure_drop_bar) * 1e5
    PR = p2 / p1
    notes = []
    if PR < 1:
        notes.append(f"target boost {boost_pressure_bar:g} bar is below ambient: the compressor does no work"
                     " (a throttled engine needs no turbocharger)")
    cmap = _compressor_map(compressor_map)
    eta_c = float(eta_compressor)
    T2 = float(compressor_outlet_temperature(T1, max(PR, 1.0), eta_c))
    T_ic = float(intercooler_outlet_temperature(T2, T_cool, intercooler_effectiveness))
    map_point = None
    cp_air = GAMMA_AIR * R_AIR / (GAMMA_AIR - 1)
    area = turbine_area_cm2 * 1e-4
    ncyl = case.engine.cylinders
    N = case.operating.speed_rpm
    lam = case.operating.__dict__["lambda"]
    _, _, _, gas = exhaust_gas_properties(case, 1000.0)
    afr = float(gas.afr_stoich[0]) * lam
    air_share = afr / (afr + 1.0)

    p3 = max(float(case.operating.exhaust_pressure_bar) * 1e5, p4 * 1.01, p2)
    T3_guess = float(case.operating.exhaust_temperature_K)
    history = []
    res = None
    converged = False
    state: dict = {}
    reached, message = True, ""
    for it in range(1, max_iterations + 1):
        c = case_with(case, {"operating.intake_pressure_bar": boost_pressure_bar,
                            "operating.intake_temperature_K": T_ic,
                            "operating.exhaust_pressure_bar": p3 / 1e5,
                            "operating.exhaust_temperature_K": min(max(T3_guess, 250.0), 2000.0)})
        res = simulate([c])[0]
        if res.error:
            raise SolverError(f"boost match, iteration {it}: {res.error}")
        s = res.summary
        m_exh = (s["inducted_mass_mg"] - s.get("blowby_mass_mg", 0.0)) * 1e-6 * ncyl * N / 120.0
        m_air = s["inducted_mass_mg"] * 1e-6 * air_share * ncyl * N / 120.0
        T3 = float(s["exhaust_temperature_K"])
        eta_used = eta_c
        if cmap is not None:
            map_point = cmap.at(cmap.corrected_flow(m_air, T1, p1 / 1e5), max(PR, 1.0))
            if map_point.efficiency is not None:
                eta_c = map_point.efficiency
        P_c = m_air * cp_air * (T2 - T1)
        # turbine with all the flow (wastegate closed)
        p3_full, T4, T4s, P_t, g_e, cp_e, R_e = _turbine(gas, m_exh, T3, p4, area, eta_turbine)
        m_t = m_exh
        if eta_mechanical * P_t < P_c:
            reached = False
            message = (f"target boost {boost_pressure_bar:g} bar not reached: with the wastegate closed the turbine"
                       f" gives {eta_mechanical * P_t / 1e3:.2f} kW at the shaft, the compressor needs"
                       f" {P_c / 1e3:.2f} kW (short by {(P_c - eta_mechanical * P_t) / 1e3:.2f} kW);"
                       f" a smaller turbine area, higher efficiencies or a lower target would close it")
            p3_new = p3_full
        elif not wastegate:
            reached = False
            message = (f"without a wastegate the turbine gives {eta_mechanical * P_t / 1e3:.2f} kW at the shaft,"
                       f" more than the {P_c / 1e3:.2f} kW the compressor needs at {boost_pressure_bar:g} bar:"
                       f" the turbocharger would speed up and raise the boost beyond the target")
            p3_new = p3_full
        else:
            reached, message = True, ""
            from scipy.optimize import brentq

            target = P_c / eta_mechanical
            f = lambda mt: _turbine(gas, mt, T3, p4, area, eta_turbine)[3] - target  # noqa: E731
            m_t = brentq(f, 1e-9 * m_exh, m_exh, xtol=1e-10 * m_exh, rtol=1e-12) if target > 0 else 0.0
            p3_new, T4, T4s, P_t, g_e, cp_e, R_e = _turbine(gas, m_t, T3, p4, area, eta_turbine)
        dp = p3_new - p3
        history.append({"iteration": it, "p3_used_bar": p3 / 1e5, "p3_new_bar": p3_new / 1e5,
                        "change_bar": dp / 1e5, "T3_K": T3, "exhaust_flow_g_per_s": m_exh * 1e3,
                        "turbine_flow_g_per_s": m_t * 1e3, "compressor_power_kW": P_c / 1e3,
                        "turbine_power_kW": P_t / 1e3, "bmep_bar": s.get("bmep_bar")})
        state = {
            "p1_bar": p1 / 1e5, "T1_K": T1, "compressor_pressure_ratio": PR, "p2_bar": p2 / 1e5, "T2_K": T2,
            "p_intake_bar": boost_pressure_bar, "T_intake_K": T_ic, "coolant_temperature_K": T_cool,
            "p3_bar": p3 / 1e5, "T3_K": T3, "p4_bar": p4 / 1e5, "T4_K": T4, "T4s_K": T4s,
            "turbine_expansion_ratio": p3_new / p4,
            "air_flow_g_per_s": m_air * 1e3, "exhaust_flow_g_per_s": m_exh * 1e3,
            "turbine_flow_g_per_s": m_t * 1e3, "wastegate_flow_g_per_s": (m_exh - m_t) * 1e3,
            "wastegate_share": (m_exh - m_t) / m_exh,
            "compressor_power_kW": P_c / 1e3, "turbine_power_kW": P_t / 1e3,
            "turbine_shaft_power_kW": eta_mechanical * P_t / 1e3,
            "power_balance_residual_kW": (eta_mechanical * P_t - P_c) / 1e3,
            "eta_compressor": eta_used, "eta_turbine": eta_turbine, "eta_mechanical": eta_mechanical,
            "intercooler_effectiveness": intercooler_effectiveness, "turbine_area_cm2": turbine_area_cm2,
            "exhaust_gamma": g_e, "exhaust_cp_J_per_kgK": cp_e, "exhaust_R_J_per_kgK": R_e,
            "air_cp_J_per_kgK": cp_air, "wastegate": bool(wastegate),
        }
        T3_guess = T3
        if abs(dp) < tolerance_bar * 1e5 and abs(eta_c - eta_used) < ETA_TOLERANCE:
            converged = True
            break
        p3 = p3_new
        if cmap is not None:        # the next iteration's compressor at the map's efficiency
            T2 = float(compressor_outlet_temperature(T1, max(PR, 1.0), eta_c))
            T_ic = float(intercooler_outlet_temperature(T2, T_cool, intercooler_effectiveness))
    # the engine figures belong to the last simulated state (p3 used); the turbine state to p3_new
    state["p3_bar"] = history[-1]["p3_new_bar"]
    engine = {k: res.summary.get(k) for k in (
        "imep_net_bar", "imep_gross_bar", "pmep_bar", "fmep_bar", "bmep_bar", "torque_Nm", "power_kW",
        "bsfc_g_per_kWh", "eta_brake", "volumetric_efficiency", "trapped_mass_mg", "inducted_mass_mg",
        "residual_fraction", "exhaust_temperature_K", "p_max_bar", "ca50_deg", "T_max_K")}
    engine["exhaust_pressure_used_bar"] = history[-1]["p3_used_bar"]
    if not converged:
        notes.append(f"exhaust back pressure not settled to {tolerance_bar:g} bar after {max_iterations}"
                     f" iterations (last change {history[-1]['change_bar']:+.4f} bar)")
        if not message:
            message = notes[-1]
    warnings, limits = _limit_warnings(res, state, p_max_limit_bar, t3_limit_K)
    warnings.extend(f"engine: {w}" for w in res.warnings)
    if cmap is None:
        notes.append(f"fixed compressor efficiency {eta_compressor:g} (no compressor map given): surge, choke"
                     " and turbocharger-speed limits are not checked")
    else:
        _map_state(state, warnings, cmap, map_point, T1)
        notes.append(f"compressor efficiency from the map {cmap.name} at the operating point")
    notes.append("steady-flow turbocharger: blowdown pulse energy, manifold heat loss and the turbine map are"
                 " not modelled (fixed turbine efficiency)")
    br = BoostResult(boost_pressure_bar=boost_pressure_bar, reached=reached, message=message,
                     converged=converged, iterations=history, tolerance_bar=tolerance_bar, state=state,
                     engine=engine, result=res, notes=notes, base_config=label, warnings=warnings,
                     limits=limits)
    if out is not None:
        out = Path(out)
        out.mkdir(parents=True, exist_ok=True)
        write_rows_csv(out / CSV_NAME, history, list(history[0]))
        files = [out / CSV_NAME]
        if plots:
            files.append(plot_boost(br, out / PNG_NAME))
            if cmap is not None:
                from .compressor_map import plot_compressor_map

                op = [{"corrected_flow_kg_per_s": state["map_corrected_flow_kg_per_s"],
                       "pressure_ratio": state["map_pressure_ratio"], "label": "matched point"}]
                files.append(plot_compressor_map(cmap, out / "compressor_map.png", op,
                                                 title=f"{label}: compressor map {cmap.name}, matched point"))
        files.append(out / JSON_NAME)
        br.files = files
        atomic_write_text(out / JSON_NAME, json.dumps(_plain(br.figures()), indent=2) + "\n")
    return br



ETA_TOLERANCE = 1e-3
"""With a compressor map: largest change of the efficiency between iterations that counts as settled."""


def _compressor_map(cmap):
    if cmap is None:
        return None
    from .compressor_map import CompressorMap, load_compressor_map

    return cmap if isinstance(cmap, CompressorMap) else load_compressor_map(cmap)


def _map_state(state: dict, warnings: list, cmap, mp, T1: float) -> None:
    """The map's reading at the matched point into the state, and its warnings."""
    state["compressor_map"] = cmap.name
    state.update({f"map_{k}": v for k, v in mp.as_dict().items()})
    state["turbocharger_speed_rpm"] = (None if mp.corrected_speed_rpm is None
                                       else mp.corrected_speed_rpm * (T1 / cmap.t_ref_K) ** 0.5)
    if not mp.on_map:
        warnings.append(f"the compressor operating point (corrected flow {mp.corrected_flow_kg_per_s:.3f} kg/s,"
                        f" pressure ratio {mp.pressure_ratio:.2f}) lies off the map {cmap.name}: the efficiency"
                        f" used is the last one read on it or the first guess")
    if mp.surge_margin is not None and mp.surge_margin < 0:
        warnings.append(f"the compressor is in surge (flow {-100 * mp.surge_margin:.0f} % below the surge line"
                        f" at pressure ratio {mp.pressure_ratio:.2f})")
    if mp.choke_margin is not None and mp.choke_margin < 0:
        warnings.append(f"the compressor is beyond its choke end (flow {-100 * mp.choke_margin:.0f} % above it)")


def _limit_warnings(res, state: dict, p_max_limit_bar: float, t3_limit_K: float) -> tuple[list, dict]:
    """Warnings where the matched point exceeds the pressure or temperature limit or knocks, and
    the limits with the knock verdict (for the table and the JSON)."""
    s = res.summary
    out = []
    p_max = s.get("p_max_bar")
    if p_max is not None and p_max > p_max_limit_bar:
        out.append(f"peak cylinder pressure {p_max:.0f} bar is above the limit of {p_max_limit_bar:g} bar"
                   f" (--p-max-limit-bar; use the engine maker's figure)")
    T3 = state.get("T3_K")
    if T3 is not None and T3 > t3_limit_K:
        out.append(f"turbine inlet temperature {T3:.0f} K ({T3 - 273.15:.0f} C) is above the limit of"
                   f" {t3_limit_K:g} K (--t3-limit-K); T3 here is the exhaust-valve enthalpy average, with"
                   f" no heat lost in the manifold, so the real T3 is somewhat lower")
    knock_model = res.models.get("knock", "none")
    if knock_model == "none":
        verdict = "not modelled"
        out.append("knock is not checked (knock.model: none): a boosted point can knock at this spark"
                   " advance; choose a knock model, e.g. --set knock.model=livengood_wu")
    else:
        onset = s.get("knock_onset_deg")
        if onset is not None and np.isfinite(onset):
            verdict = f"at {onset:.1f} deg"
            out.append(f"the knock model ({knock_model}) predicts end-gas autoignition at {onset:.1f} deg"
                       f" ATDC: retard the spark or lower the boost")
        else:
            verdict = "none predicted"
    return out, {"p_max_limit_bar": p_max_limit_bar, "t3_limit_K": t3_limit_K, "knock": verdict}


def plot_boost(br: BoostResult, path: Path) -> Path:
    """Exhaust back pressure per iteration, and the power bars of the match."""
    from ..plots import _plt, _save

    plt = _plt()
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(10, 4))
    h = br.iterations
    a1.plot([r["iteration"] for r in h], [r["p3_used_bar"] for r in h], "o-", label="p3 used")
    a1.plot([r["iteration"] for r in h], [r["p3_new_bar"] for r in h], "s--", label="p3 from the turbine")
    a1.axhline(br.boost_pressure_bar, color="0.5", ls=":", lw=1, label="boost pressure")
    a1.set_xlabel("iteration")
    a1.set_ylabel("exhaust back pressure [bar]")
    a1.set_title("cylinder <-> turbocharger iteration")
    a1.legend(fontsize=8)
    s = br.state
    vals = [s["compressor_power_kW"], s["turbine_shaft_power_kW"]]
    a2.bar(["compressor", "turbine x eta_mech"], vals, color=["tab:blue", "tab:red"])
    for i, v in enumerate(vals):
        a2.text(i, v, f"{v:.2f} kW", ha="center", va="bottom", fontsize=8)
    a2.set_ylabel("power [kW]")
    a2.set_title(f"power balance; wastegate {100 * s['wastegate_share']:.0f} % of exhaust flow")
    fig.suptitle(f"{br.base_config}: boost {br.boost_pressure_bar:g} bar"
                 f" ({'reached' if br.reached else 'not reached'}"
                 f"{'; see the warnings' if br.warnings else ''})", fontsize=10)
    a1.xaxis.get_major_locator().set_params(integer=True)
    return _save(fig, Path(path))
