"""Group validated cases into batches and build each batch's arrays and submodels.

Cases in one batch share submodel choices, non-numeric parameters, the fuel
and the crank grid; they may differ in every number.  Each number becomes an
array of shape (B,).
"""

from __future__ import annotations

from dataclasses import dataclass
from types import SimpleNamespace
from typing import Any, Sequence

import numpy as np

from ..config import CORE_SCHEMA, Case
from ..errors import ConfigError, PluginError
from ..roles import ROLES, SetupContext, Submodel

_NUMERIC = ("float", "int")
_AREA_SIZE = frozenset({"intake_diameter_mm", "exhaust_diameter_mm", "intake_count", "exhaust_count", "intake_area_factor",
                        "port_area_ratio"})
"""Valve numbers that scale the flow areas without changing where they are zero."""


def _is_numeric_param(p) -> bool:
    return p.kind in _NUMERIC and p.sweepable


def _freeze(v: Any) -> Any:
    if isinstance(v, dict):
        return tuple(sorted((k, _freeze(x)) for k, x in v.items()))
    if isinstance(v, (list, tuple)):
        return tuple(_freeze(x) for x in v)
    return v


_KEY_NAMES: dict = {}


def _key_names(sec: str) -> tuple:
    """Names of the settings of a core section that must be equal within a batch (cached)."""
    got = _KEY_NAMES.get(sec)
    if got is None:
        if sec == "valves:timing":
            got = tuple(p.name for p in CORE_SCHEMA["valves"]
                        if _is_numeric_param(p) and p.name not in _AREA_SIZE)
        else:
            got = tuple(p.name for p in CORE_SCHEMA[sec] if not _is_numeric_param(p) or sec == "fuel")
        _KEY_NAMES[sec] = got
    return got


_CLASS_NAMES: dict = {}


def _class_names(cls, numeric: bool) -> tuple:
    """A submodel class's non-numeric (or, with ``numeric``, its numeric non-size) parameter names."""
    key = (cls, numeric)
    got = _CLASS_NAMES.get(key)
    if got is None:
        if numeric:
            got = tuple(p.name for p in cls.params if _is_numeric_param(p) and p.name not in _AREA_SIZE)
        else:
            got = tuple(p.name for p in cls.params if not _is_numeric_param(p))
        _CLASS_NAMES[key] = got
    return got


def batch_key(case: Case, registry) -> tuple:
    """Cases with equal keys can share one batch."""
    parts: list[Any] = [case.plugins, str(case.base_dir)]
    for sec in CORE_SCHEMA:
        ns = case.section(sec)
        for name in _key_names(sec):
            parts.append((sec, name, _freeze(getattr(ns, name))))
    if case.simulation.mode == "closed":
        parts.append(("closed", case.valves.ivc_deg, case.valves.evo_deg))
    else:
        # the crank grid steps further where every valve is shut, so cases share a batch only
        # where their valves are shut alike (the sizes of the openings do not matter)
        parts.append(("valve_timing",) + tuple(
            (name, _freeze(getattr(case.valves, name))) for name in _key_names("valves:timing")))
        vf = case.submodels["valve_flow"]
        vcls = registry.submodel_class("valve_flow", vf.model)
        parts.append(("valve_flow_numbers",) + tuple(
            (name, _freeze(vf.params[name])) for name in _class_names(vcls, True)))
    # runners: cases of one batch share which sides have one, its cell count and its stations
    parts.append(("runners",) + tuple((side, None if ns is None else (ns.n_cells, tuple(ns.stations_mm)))
                                      for side, ns in sorted(getattr(case, "runners", {}).items())))
    from ..config import effective_step_deg

    parts.append(("step", effective_step_deg(case.simulation, case.operating.speed_rpm)))
    from .cycle_grid import closed_step_factor

    classes = {role: registry.submodel_class(role, case.submodels[role].model) for role in ROLES}
    parts.append(("closed_step_factor", closed_step_factor(case, classes)))
    for role in ROLES:
        ch = case.submodels[role]
        parts.append((role, ch.model))
        for name in _class_names(classes[role], False):
            parts.append((role, name, _freeze(ch.params[name])))
    return tuple(parts)


def group_cases(cases: Sequence[Case], registry) -> list[list[int]]:
    """Indices of cases grouped into batches, in first-seen order."""
    groups: dict[tuple, list[int]] = {}
    for i, c in enumerate(cases):
        groups.setdefault(batch_key(c, registry), []).append(i)
    return list(groups.values())


def _section_arrays(cases: Sequence[Case], sec: str) -> SimpleNamespace:
    out = {}
    for p in CORE_SCHEMA[sec]:
        vals = [getattr(c.section(sec), p.name) for c in cases]
        if p.kind in _NUMERIC and all(v is not None for v in vals):
            out[p.name] = np.array(vals, dtype=float)
        else:
            out[p.name] = vals[0]
    return SimpleNamespace(**out)


@dataclass
class Batch:
    """Everything the solver needs for one batch of B cases."""

    cases: list[Case]
    B: int
    engine: SimpleNamespace
    valves: SimpleNamespace
    operating: SimpleNamespace
    walls: SimpleNamespace
    simulation: SimpleNamespace
    geometry: Any
    gas: Any
    fuel: Any
    ctx: SetupContext
    models: dict[str, Submodel]


def build_batch(cases: Sequence[Case], registry) -> Batch:
    """Arrays, geometry, gas tables and submodel objects for cases of one batch."""
    from .budget import check_batch
    from ..fuels import get_fuel
    from ..cylinder.geometry import Geometry
    from .gas_tables import build_gas_tables

    cases = list(cases)
    check_batch(cases)                      # refused before anything is allocated
    B = len(cases)
    eng = _section_arrays(cases, "engine")
    val = _section_arrays(cases, "valves")
    op = _section_arrays(cases, "operating")
    walls = _section_arrays(cases, "walls")
    sim = cases[0].simulation
    try:
        geometry = Geometry(
            bore_m=eng.bore_mm * 1e-3,
            stroke_m=eng.stroke_mm * 1e-3,
            conrod_m=eng.conrod_mm * 1e-3,
            compression_ratio=eng.compression_ratio,
            pin_offset_m=eng.pin_offset_mm * 1e-3,
            head_area_factor=eng.head_area_factor,
            piston_area_factor=eng.piston_area_factor,
        )
    except ValueError as exc:
        raise ConfigError(f"engine: {exc}") from exc
    f = cases[0].fuel
    spec: Any = f.name
    if f.C is not None:
        spec = {"name": f.name, "C": f.C, "H": f.H, "O": f.O or 0.0, "lhv_MJ_per_kg": f.lhv_MJ_per_kg}
    fuel = get_fuel(spec, registry.fuels)
    phi = 1.0 / op.__dict__["lambda"]
    if getattr(op, "fuel_cut", False):
        # fuel shut off: the charge is air; a trace of fuel (phi 1e-6) keeps the tables defined
        phi = np.full(B, 1e-6)
    if cases[0].gas.properties == "constant_gamma":
        from ..gas.ideal_gas import ConstantGammaGas

        gas_sec = _section_arrays(cases, "gas")
        gas = ConstantGammaGas(fuel, phi, gas_sec.gamma, gas_sec.R_J_per_kgK)
    else:
        gas = build_gas_tables(fuel, phi, cases[0].gas.burned_gas)
    events = SimpleNamespace(
        ivo=val.ivo_deg, ivc=val.ivc_deg, evo=val.evo_deg, evc=val.evc_deg,
        threshold_lift_m=val.threshold_lift_mm * 1e-3,
    )
    ctx = SetupContext(
        B=B, geometry=geometry, speed_rpm=op.speed_rpm, events=events, valves=val,
        operating=op, gas=gas, base_dir=cases[0].base_dir, walls=walls,
        chamber=cases[0].chamber,
    )
    models: dict[str, Submodel] = {}
    for role in ROLES:
        name = cases[0].submodels[role].model
        cls = registry.submodel_class(role, name)
        values = {}
        for p in cls.params:
            vals = [c.submodels[role].params[p.name] for c in cases]
            if _is_numeric_param(p) and all(v is not None for v in vals):
                values[p.name] = np.array(vals, dtype=float)
            else:
                values[p.name] = vals[0]
        try:
            models[role] = cls(values, ctx)
        except (ConfigError, PluginError):
            raise
        except Exception as exc:  # noqa: BLE001
            from ..errors import CyclesimError

            if isinstance(exc, CyclesimError):
                raise
            raise PluginError(
                f"{role} model {name!r} failed while setting up: {type(exc).__name__}: {exc}"
            ) from exc
    return Batch(cases, B, eng, val, op, walls, sim, geometry, gas, fuel, ctx, models)
