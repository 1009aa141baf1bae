"""YAML configs: safe loading, inheritance, overrides and validation into typed cases.

A config file has core sections (``engine``, ``valves``, ``operating``,
``fuel``, ``gas``, ``walls``, ``simulation``) and one section per submodel
role (``burn``, ``heat_transfer``, ``blowby``, ``valve_flow``, ``boundary``,
``friction``, ``knock``) naming the plug-in (``model:``) and its parameters.
Every key carries its unit in its name.  ``extends: base.yaml`` (a path
relative to the file, or the name of a built-in config) inherits everything
and overrides section by section, key by key.

Errors are :class:`cyclesim.errors.ConfigError` with one line naming the key,
the value and what was expected.
"""

from __future__ import annotations

import copy
import importlib.resources
import math
from dataclasses import dataclass, field
from pathlib import Path
from types import SimpleNamespace
from typing import Any, Mapping, Sequence

import yaml

from ..combustion.flame_geometry import ChamberShape
from .limits import check_expanded_size, check_extends_depth, count_alias
from ..errors import ConfigError, CyclesimError
from ..params import REQUIRED, Param, suggestion, validate_section
from ..roles import ROLES

P = Param

MIN_SPEED_RPM = 100.0
"""Lowest engine speed [rpm].  Engines crank at about 150-300 rpm (common practice), so 100 rpm
covers cranking; the integration step shrinks as speed^1.5 below simulation.step_reference_rpm,
so one cycle at 100 rpm already takes 368,640 steps (about 0.4 GB and 10 s on the demo) and at
10 rpm 11.8 million (6.2 GB, 73 s)."""

CORE_SCHEMA: dict[str, tuple[Param, ...]] = {
    "engine": (
        P("bore_mm", "mm", REQUIRED, "cylinder bore", 0, 500, min_exclusive=True),
        P("stroke_mm", "mm", REQUIRED, "piston stroke", 0, 1000, min_exclusive=True),
        P("conrod_mm", "mm", REQUIRED, "connecting-rod length, centre to centre", 0, 3000, min_exclusive=True),
        P("compression_ratio", "-", REQUIRED, "geometric compression ratio", 1, 40, min_exclusive=True),
        P("pin_offset_mm", "mm", 0.0, "piston-pin offset from the cylinder axis (thrust side positive)", -20, 20),
        P("cylinders", "-", 1, "number of cylinders (torque and power are for the whole engine)", 1, 24, kind="int"),
        P("head_area_factor", "-", 1.1, "cylinder-head surface area / bore area", 0.5, 3),
        P("piston_area_factor", "-", 1.0, "piston-crown surface area / bore area", 0.5, 3),
    ),
    "valves": (
        P("ivo_deg", "deg", REQUIRED, "intake valve opening (0 = firing TDC; about -360 is gas-exchange TDC)", -540, -180),
        P("ivc_deg", "deg", REQUIRED, "intake valve closing", -360, 0),
        P("evo_deg", "deg", REQUIRED, "exhaust valve opening", 0, 360),
        P("evc_deg", "deg", REQUIRED, "exhaust valve closing", 180, 540),
        P("threshold_lift_mm", "mm", 0.1, "lift at which the event angles are defined", 0, 5, min_exclusive=True),
        P("intake_diameter_mm", "mm", 30.0, "intake valve head (seat) diameter", 0, 300, min_exclusive=True),
        P("exhaust_diameter_mm", "mm", 26.0, "exhaust valve head (seat) diameter", 0, 300, min_exclusive=True),
        P("intake_max_lift_mm", "mm", 8.5, "maximum intake valve lift", 0, 100, min_exclusive=True),
        P("exhaust_max_lift_mm", "mm", 8.0, "maximum exhaust valve lift", 0, 100, min_exclusive=True),
        P("intake_count", "-", 2, "intake valves per cylinder", 1, 6, kind="int"),
        P("exhaust_count", "-", 2, "exhaust valves per cylinder", 1, 6, kind="int"),
    ),
    "operating": (
        P("speed_rpm", "rpm", REQUIRED, "engine speed (from 100 rpm, below cranking speed: slower cycles need"
          " ever finer steps)", MIN_SPEED_RPM, 30000),
        P("lambda", "-", 1.0, "air-fuel equivalence ratio lambda (1 = stoichiometric); with real gas properties"
          " also at least the fuel's gaseous-products limit (gasoline 0.335, isooctane 0.32)", 0.3, 3.0),
        P("intake_pressure_bar", "bar", 1.0, "intake plenum pressure (absolute)", 0, 10, min_exclusive=True),
        P("intake_temperature_K", "K", 300.0, "intake plenum temperature", 150, 600),
        P("exhaust_pressure_bar", "bar", 1.05, "exhaust plenum pressure (absolute)", 0, 10, min_exclusive=True),
        P("exhaust_temperature_K", "K", 900.0, "exhaust plenum temperature (for backflow)", 250, 2000),
        P("egr_fraction", "-", 0.0, "external EGR mass fraction of the intake charge", 0, 1, max_exclusive=True),
        P("fuel_cut", "-", False, "fuel shut off (a cut cylinder): the fresh charge is air only", kind="bool",
          sweepable=False),
        P("ivc_pressure_bar", "bar", 1.0, "closed-cycle mode: cylinder pressure at IVC", 0, 20, min_exclusive=True),
        P("ivc_temperature_K", "K", 340.0, "closed-cycle mode: cylinder temperature at IVC", 150, 1000),
        P("residual_fraction", "-", 0.05, "closed-cycle mode: burned-gas mass fraction at IVC", 0, 1, max_exclusive=True),
    ),
    "fuel": (
        P("name", "-", "gasoline", "built-in fuel, or a name for a custom CxHyOz fuel", kind="str", sweepable=False),
        P("C", "-", None, "custom fuel: carbon atoms per molecule", 0, 50, kind="float"),
        P("H", "-", None, "custom fuel: hydrogen atoms per molecule", 0, 100, kind="float"),
        P("O", "-", 0.0, "custom fuel: oxygen atoms per molecule", 0, 20, kind="float"),
        P("lhv_MJ_per_kg", "MJ/kg", None, "custom fuel: lower heating value", 1, 150, kind="float"),
    ),
    "gas": (
        P("properties", "-", "real", "real: NASA-polynomial mixtures; constant_gamma: air-standard ideal gas",
          kind="choice", choices=("real", "constant_gamma"), sweepable=False),
        P("burned_gas", "-", "equilibrium", "real properties: burned-gas composition model", kind="choice",
          choices=("equilibrium", "complete"), sweepable=False),
        P("gamma", "-", 1.4, "constant_gamma: ratio of specific heats", 1.0, 2.0, min_exclusive=True),
        P("R_J_per_kgK", "J/(kg K)", 287.0, "constant_gamma: gas constant", 100, 1000),
    ),
    "walls": (
        P("head_temperature_K", "K", 480.0, "cylinder-head wall temperature", 0, 1500, min_exclusive=True),
        P("piston_temperature_K", "K", 520.0, "piston-crown wall temperature", 0, 1500, min_exclusive=True),
        P("liner_temperature_K", "K", 420.0, "liner wall temperature", 0, 1500, min_exclusive=True),
    ),
    "simulation": (
        P("mode", "-", "full", "full 720 deg cycle to periodic steady state, or closed cycle IVC..EVO",
          kind="choice", choices=("full", "closed"), sweepable=False),
        P("step_deg", "deg", 0.5, "integration step (fixed-step 3rd-order Runge-Kutta, Kutta's scheme)", 0.01, 5, sweepable=False),
        P("step_reference_rpm", "rpm", 3000.0,
          "full mode: below this speed the step shrinks as speed^1.5 (in powers of 2),"
          " because valve flow near equal pressures is stiffer at low speed; 0 = fixed step",
          0, 30000, sweepable=False),
        P("output_step_deg", "deg", 0.0, "trace output spacing (0 = step_deg in full mode, the solver's points in closed mode; other spacings interpolated)",
          0, 5, sweepable=False),
        P("max_cycles", "-", 30, "full mode: most cycles to reach periodic steady state", 1, 500, kind="int",
          sweepable=False),
        P("tolerance", "-", 5e-4, "full mode: relative change of net IMEP and trapped mass that counts as settled",
          0, 0.1, min_exclusive=True, sweepable=False),
        P("start", "-", "plain", "full mode: first cylinder state: plain (residual at the exhaust plenum's"
          " pressure and temperature) or estimate (the ideal cycle's residual, cyclesim.solve.residual_start)",
          kind="choice", choices=("plain", "estimate"), sweepable=False),
        P("periodic", "-", "anderson", "full mode: how the periodic state is reached: anderson (the next cycle's"
          " start accelerated from the cycles before where plain repetition settles slowly) or plain"
          " (each cycle from the end of the one before)", kind="choice", choices=("anderson", "plain"),
          sweepable=False),
        P("zones", "-", "one", "cylinder gas while the valves are shut: one zone (a mixture), or two (unburned"
          " and burned zones at one pressure, each with its own temperature)",
          kind="choice", choices=("one", "two"), sweepable=False),
    ),
}
"""Core sections and their declared keys (the single source for validation and docs)."""

MULTI_SCHEMA: tuple[Param, ...] = (
    P("firing_order", "-", None, "cylinder numbers (1..N) in firing order; default 1, 2, ..., N", 1, 24,
      kind="list", sweepable=False),
    P("manifolds", "-", "coupled", "coupled: shared intake and exhaust manifolds (volumes, throttle, exhaust"
      " restriction); constant: every cylinder sees the operating point's plenum pressures",
      kind="choice", choices=("coupled", "constant"), sweepable=False),
    P("ambient_pressure_bar", "bar", 1.0, "ambient air pressure: after the exhaust system's restriction, and"
      " ahead of the throttle unless intake_supply_pressure_bar is given", 0, 10, min_exclusive=True),
    P("intake_supply_pressure_bar", "bar", None, "air pressure ahead of the throttle, for a boosted engine the"
      " charge-air pressure (default: ambient_pressure_bar)", 0, 10, min_exclusive=True),
    P("intake_manifold_volume_L", "L", 2.0, "intake manifold (plenum and runners) volume", 0, 100,
      min_exclusive=True),
    P("throttle_diameter_mm", "mm", 48.0, "throttle bore", 0, 500, min_exclusive=True),
    P("throttle_angle_deg", "deg", 90.0, "throttle plate angle from the bore axis normal (90 = wide open)",
      0, 90),
    P("throttle_closed_angle_deg", "deg", 8.0, "plate angle at which the plate seals the bore", 0, 30),
    P("throttle_discharge_coefficient", "-", 0.8, "discharge coefficient of the throttle", 0, 1,
      min_exclusive=True),
    P("exhaust_manifold_volume_L", "L", 1.5, "exhaust manifold volume", 0, 100, min_exclusive=True),
    P("plenum_volume_L", "L", None, "with intake runners: the shared plenum they draw from (a junction"
      " volume at one pressure; default intake_manifold_volume_L)", 0, 100, min_exclusive=True),
    P("collector_volume_L", "L", None, "with exhaust runners: the collector they discharge into, shared"
      " by each exhaust branch's runners (default exhaust_manifold_volume_L)", 0, 100, min_exclusive=True),
    P("exhaust_outlet_diameter_mm", "mm", 30.0, "effective diameter of the exhaust system's restriction",
      0, 500, min_exclusive=True),
    P("exhaust_branches", "-", None, "per cylinder (in number order): the exhaust branch it discharges into;"
      " each branch is a volume of its own (its share of exhaust_manifold_volume_L by cylinder count) with"
      " its share of the restriction, e.g. [1, 2, 2, 1] pairs cylinders 360 deg apart in a 1-3-4-2 engine;"
      " default one common manifold", 1, 24, kind="list", sweepable=False),
    P("cylinder_modes", "-", None, "per cylinder (in number order): fire, cut (fuel and spark off, valves"
      " working) or deactivated (valves held shut); default all fire", kind="list",
      choices=("fire", "cut", "deactivated"), sweepable=False),
    P("spread_trapped_mass", "-", None, "per cylinder: factor on the intake valve flow area (trapped-mass"
      " spread), default 1", 0.5, 1.5, kind="list", sweepable=False),
    P("spread_spark_deg", "deg", None, "per cylinder: added spark advance (burn spread), default 0", -20, 20,
      kind="list", sweepable=False),
    P("spread_compression_ratio", "-", None, "per cylinder: added compression ratio, default 0", -3, 3,
      kind="list", sweepable=False),
    P("spread_wall_temperature_K", "K", None, "per cylinder: added wall temperature, default 0", -200, 200,
      kind="list", sweepable=False),
    P("walls", "-", "fixed", "fixed: wall temperatures as configured; lumped: one thermal mass per cylinder"
      " between gas and coolant", kind="choice", choices=("fixed", "lumped"), sweepable=False),
    P("coolant_temperature_K", "K", 365.0, "lumped walls: coolant temperature", 250, 500),
    P("wall_resistance_K_per_kW", "K/kW", 15.0, "lumped walls: mean wall temperature rise above coolant per"
      " kW of wall heat", 0, 1000, min_exclusive=True),
    P("wall_time_constant_s", "s", 40.0, "lumped walls: thermal time constant", 0, 10000, min_exclusive=True),
    P("max_coupled_cycles", "-", 16, "coupled manifolds: most cycles to settle the manifolds", 1, 200,
      kind="int", sweepable=False),
)
"""Keys of the optional ``multi_cylinder`` section (the engine as N coupled cylinders)."""

# Keys of the fuel section that only a custom fuel uses (None = not given).
_FUEL_CUSTOM = ("C", "H", "O", "lhv_MJ_per_kg")

DEFAULT_MODELS = {
    "burn": "wiebe",
    "heat_transfer": "woschni",
    "blowby": "orifice",
    "valve_flow": "poppet",
    "boundary": "constant",
    "friction": "components",
    "knock": "none",
    "emissions": "none",
}
META_KEYS = ("name", "description", "extends", "plugins")
OPTIONAL_SECTIONS = ("multi_cylinder", "intake", "exhaust")
TOP_KEYS = tuple(CORE_SCHEMA) + OPTIONAL_SECTIONS + ROLES + META_KEYS


@dataclass
class SubmodelChoice:
    """The plug-in chosen for one role and its validated parameters."""

    role: str
    model: str
    params: dict[str, Any]


@dataclass
class Case:
    """One validated operating point: core sections as namespaces plus submodel choices.

    Attributes
    ----------
    name : str
    engine, valves, operating, fuel, gas, walls, simulation : SimpleNamespace
        Core sections with every key filled in (units in the names).
    submodels : dict[str, SubmodelChoice]
        One per role.
    chamber : ChamberShape
        Combustion-chamber shape and spark-plug position (``engine.chamber``; defaults:
        flat head and piston, central plug 3 mm below the head).
    plugins : tuple of str
        Extra plug-in modules listed explicitly in the config.
    raw : dict
        The merged config (after inheritance and overrides), for records.
    base_dir : Path
        Folder of the config file (relative paths resolve here).

    A case is validated when it is built: treat it as read-only and make variants with
    :func:`case_with` (``cyclesim.case_with(case, {"operating.speed_rpm": 4000})``) or overrides
    to :func:`load_config`, which validate the changed values; a value set on the namespaces
    directly is not checked.
    """

    name: str
    engine: SimpleNamespace
    valves: SimpleNamespace
    operating: SimpleNamespace
    fuel: SimpleNamespace
    gas: SimpleNamespace
    walls: SimpleNamespace
    simulation: SimpleNamespace
    submodels: dict[str, SubmodelChoice]
    plugins: tuple[str, ...] = ()
    raw: dict = field(default_factory=dict)
    base_dir: Path = field(default_factory=Path.cwd)
    multi_cylinder: SimpleNamespace | None = None
    chamber: ChamberShape = field(default_factory=ChamberShape)
    runners: dict = field(default_factory=lambda: {"intake": None, "exhaust": None})
    """``intake.runner`` and ``exhaust.runner`` (:mod:`cyclesim.config.runners`): None for the plenum."""

    def section(self, name: str) -> SimpleNamespace:
        return getattr(self, name)


# --------------------------------------------------------------------------
# YAML reading
# --------------------------------------------------------------------------


class _StrictLoader(yaml.SafeLoader):
    """Safe loader that rejects duplicated keys (no object construction) and counts aliases."""

    _aliases = 0

    def compose_node(self, parent, index):
        if self.check_event(yaml.AliasEvent):
            self._aliases = count_alias(getattr(self, "name", "<config>"), self._aliases)
        return super().compose_node(parent, index)


def _construct_mapping(loader, node, deep=False):
    seen: dict[Any, Any] = {}
    for key_node, _ in node.value:
        key = loader.construct_object(key_node, deep=deep)
        if not isinstance(key, (str, int, float, bool)) and key is not None:
            raise ConfigError(
                f"{getattr(loader, 'name', '<config>')} line {key_node.start_mark.line + 1}:"
                f" a key must be a plain word or number, got a {type(key).__name__}"
            )
        if key in seen:
            raise ConfigError(
                f"{getattr(loader, 'name', '<config>')} line {key_node.start_mark.line + 1}:"
                f" duplicated key {key!r}"
            )
        seen[key] = True
    return yaml.SafeLoader.construct_mapping(loader, node, deep=deep)


_StrictLoader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _construct_mapping)

# YAML 1.1 reads 1e-7 (no dot) as text; YAML 1.2 and every engineer read it as a number
import re as _re  # noqa: E402

_StrictLoader.add_implicit_resolver(
    "tag:yaml.org,2002:float",
    _re.compile(r"^[-+]?(?:[0-9][0-9_]*)(?:\.[0-9_]*)?[eE][-+]?[0-9]+$"),
    list("-+0123456789"))


def yaml_value(text: str) -> Any:
    """One YAML value (as in a config file: numbers such as 1e-7 included) from text."""
    loader = _StrictLoader(text)
    loader.name = f"value {text[:20]!r}"
    try:
        data = loader.get_single_data()
    finally:
        loader.dispose()
    check_expanded_size(data, loader.name)
    return data


def read_yaml(path: Path) -> dict:
    """Read one YAML file safely into a dict; malformed input raises ConfigError."""
    from .text import decode_config

    try:
        text = decode_config(Path(path).read_bytes(), path)
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read config ({exc.strerror or exc})") from exc
    loader = None
    try:
        loader = _StrictLoader(text)
        loader.name = str(path)
        data = loader.get_single_data()
    except ConfigError:
        raise
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise ConfigError(f"{path}{where}: malformed YAML ({problem})") from exc
    finally:
        if loader is not None:
            loader.dispose()
    if data is None:
        data = {}
    check_expanded_size(data, str(path))
    if not isinstance(data, dict):
        raise ConfigError(f"{path}: expected a mapping of sections at the top level, got {type(data).__name__}")
    return data


def builtin_config_dir() -> Path:
    """Folder of the configs shipped with the package (``configs/`` in the repository)."""
    return Path(str(importlib.resources.files("cyclesim.configs")))


def builtin_configs() -> list[str]:
    return sorted(p.stem for p in builtin_config_dir().glob("*.yaml"))


def resolve_config_path(spec: str | Path, relative_to: Path | None = None) -> Path:
    """A config path, or the name of a built-in config (``demo``)."""
    p = Path(spec)
    candidates = []
    if relative_to is not None and not p.is_absolute():
        candidates.append(relative_to / p)
    candidates.append(p)
    for c in candidates:
        if c.is_file():
            return c.resolve()
    name = p.stem if p.suffix in (".yaml", ".yml") else p.name
    builtin = builtin_config_dir() / f"{name}.yaml"
    if builtin.is_file() and (p.parent == Path(".") or relative_to is not None):
        return builtin
    raise ConfigError(
        f"config {str(spec)!r}: no such file or built-in config"
        + suggestion(name, builtin_configs())
        + f"; built-in: {', '.join(builtin_configs())}"
    )


def deep_merge(base: dict, over: Mapping) -> dict:
    """Merge ``over`` into a copy of ``base``, section by section, key by key."""
    out = copy.deepcopy(base)
    for k, v in over.items():
        if isinstance(v, Mapping) and isinstance(out.get(k), Mapping):
            # a change of model replaces the submodel's parameters entirely
            if k in ROLES and "model" in v and v.get("model") != out[k].get("model"):
                out[k] = copy.deepcopy(dict(v))
            else:
                out[k] = deep_merge(out[k], v)
        else:
            out[k] = copy.deepcopy(v)
    return out


def load_raw(path: str | Path, _seen: tuple = (), _done: dict | None = None) -> tuple[dict, Path]:
    """Read a config and everything it extends; return the merged dict and its folder.

    Each file is read and resolved once per call, however often the inheritance reaches it
    (a diamond of bases costs one read per file); chains deeper than
    :data:`cyclesim.config.limits.MAX_EXTENDS_DEPTH` are refused."""
    path = resolve_config_path(path)
    if path in _seen:
        raise ConfigError(f"{path}: 'extends' forms a loop ({' -> '.join(str(s) for s in _seen + (path,))})")
    done = {} if _done is None else _done
    if path in done:
        return copy.deepcopy(done[path]), path.parent
    check_extends_depth(_seen, str(path))
    data = read_yaml(path)
    ext = data.pop("extends", None)
    if ext is None:
        done[path] = data
        return copy.deepcopy(data), path.parent
    bases = [ext] if isinstance(ext, str) else ext
    if not isinstance(bases, list) or not all(isinstance(b, str) for b in bases):
        raise ConfigError(f"{path}: extends: expected a file name or a list of them, got {ext!r}")
    merged: dict = {}
    for b in bases:
        try:
            bpath = resolve_config_path(b, relative_to=path.parent)
        except ConfigError as exc:
            raise ConfigError(f"{path}: extends: {exc}") from None
        base, _ = load_raw(bpath, _seen + (path,), done)
        merged = deep_merge(merged, base)
    merged = deep_merge(merged, data)
    done[path] = merged
    return copy.deepcopy(merged), path.parent


def parse_override(text: str) -> tuple[list[str], Any]:
    """Parse ``dotted.key=value`` (value read as YAML: numbers, true/false, text)."""
    if "=" not in text:
        raise ConfigError(f"--set {text!r}: expected dotted.key=value, e.g. operating.speed_rpm=2000")
    key, _, value = text.partition("=")
    parts = [k for k in key.strip().split(".") if k]
    if not parts:
        raise ConfigError(f"--set {text!r}: empty key")
    if parts[0] == "extends":
        raise ConfigError(f"--set {text!r}: 'extends' is resolved when a config file is read; write a file"
                          " with 'extends: BASE' and the changes instead")
    try:
        val = yaml_value(value) if value.strip() else None
    except yaml.YAMLError:
        if value.lstrip()[:1] in ("{", "["):
            from .shell_hints import split_hint

            raise ConfigError(f"--set {text!r}: the value is not valid YAML: {split_hint(value)}") from None
        val = value
    return parts, val


def apply_override(raw: dict, parts: list[str], value: Any, in_place: bool = False) -> dict:
    """Set one dotted key in a raw config dict (returns a new dict, or ``raw`` itself changed
    with ``in_place``).

    Choosing another model for a role (``heat_transfer.model=hohenberg``)
    drops the old model's parameters, as a change of model in a derived
    config does.
    """
    out = raw if in_place else copy.deepcopy(raw)
    if len(parts) == 2 and parts[0] in ROLES and parts[1] == "model":
        sec = out.get(parts[0])
        if isinstance(sec, dict) and sec.get("model") != value:
            out[parts[0]] = {"model": value}
            return out
    node = out
    for i, k in enumerate(parts[:-1]):
        if k not in node or not isinstance(node[k], dict):
            if i == 0 and k not in TOP_KEYS:
                raise ConfigError(
                    f"{'.'.join(parts)}: unknown section {k!r}" + suggestion(k, TOP_KEYS)
                )
            node[k] = {}
        node = node[k]
    node[parts[-1]] = value
    return out


def set_dotted(raw: dict, dotted: str, value: Any) -> dict:
    return apply_override(raw, [k for k in dotted.split(".") if k], value)


def get_dotted(raw: Mapping, dotted: str, default: Any = None) -> Any:
    node: Any = raw
    for k in dotted.split("."):
        if not isinstance(node, Mapping) or k not in node:
            return default
        node = node[k]
    return node


# --------------------------------------------------------------------------
# Validation
# --------------------------------------------------------------------------


def effective_step_deg(sim, speed_rpm: float) -> float:
    """Integration step [deg] of a full-cycle case.

    Below ``step_reference_rpm`` the step is ``step_deg / 2**k`` with the least
    ``k`` such that ``2**k >= (ref / speed)**1.5``.  The fastest mode of the gas
    exchange (cylinder and port pressures equalising across an open valve while
    the piston moves slowly) has a rate per crank degree that grows faster than
    1/speed, so a fixed explicit step that is accurate at mid speed is not at
    idle (measured on the demo: 0.5 deg gives 18 % error in net IMEP at 800 rpm;
    this rule keeps it below 0.05 % at 800, 1200 and 3000 rpm).  Powers of 2
    keep the cases of a speed sweep in few batches.
    """
    h = float(sim.step_deg)
    ref = float(getattr(sim, "step_reference_rpm", 0.0) or 0.0)
    if sim.mode != "full" or ref <= 0 or speed_rpm >= ref:
        return h
    k = math.ceil(1.5 * math.log2(ref / float(speed_rpm)) - 1e-12)
    return h / 2.0**k


def _check_cross(case: Case) -> None:
    e, v = case.engine, case.valves
    crank_r = e.stroke_mm / 2
    if e.conrod_mm <= crank_r + abs(e.pin_offset_mm):
        raise ConfigError(
            f"engine.conrod_mm = {e.conrod_mm:g}: must be longer than the crank radius"
            f" ({crank_r:g} mm) plus the pin offset ({abs(e.pin_offset_mm):g} mm)"
        )
    if not (v.ivo_deg < v.ivc_deg < v.evo_deg < v.evc_deg < v.ivc_deg + 720):
        raise ConfigError(
            f"valves: events out of order (ivo {v.ivo_deg:g}, ivc {v.ivc_deg:g}, evo {v.evo_deg:g},"
            f" evc {v.evc_deg:g} deg): expected ivo < ivc < evo < evc < ivc + 720"
        )
    for port, (o, c) in {"intake": (v.ivo_deg, v.ivc_deg), "exhaust": (v.evo_deg, v.evc_deg)}.items():
        if c - o > 360:
            raise ConfigError(
                f"valves: {port} open for {c - o:g} deg (from {o:g} to {c:g}): at most 360 deg is possible"
            )
    for port in ("intake", "exhaust"):
        if getattr(v, f"{port}_max_lift_mm") <= v.threshold_lift_mm:
            raise ConfigError(
                f"valves.{port}_max_lift_mm = {getattr(v, f'{port}_max_lift_mm'):g}: must exceed"
                f" threshold_lift_mm ({v.threshold_lift_mm:g})"
            )
    for port in ("intake", "exhaust"):
        dv = getattr(v, f"{port}_diameter_mm")
        if dv > 0.6 * e.bore_mm:
            raise ConfigError(
                f"valves.{port}_diameter_mm = {dv:g}: does not fit a {e.bore_mm:g} mm bore"
                f" (expected at most 0.6 x bore = {0.6 * e.bore_mm:.1f} mm)"
            )
    f = case.fuel
    custom = [k for k in _FUEL_CUSTOM if getattr(f, k) not in (None,) and k != "O"]
    if custom and len(custom) < 3:
        missing = [k for k in ("C", "H", "lhv_MJ_per_kg") if getattr(f, k) is None]
        raise ConfigError(f"fuel: a custom fuel needs C, H and lhv_MJ_per_kg; missing {', '.join(missing)}")


def _copy_value(v: Any) -> Any:
    return copy.deepcopy(v) if isinstance(v, (list, dict)) else v


def _copy_ns(ns: SimpleNamespace) -> SimpleNamespace:
    return SimpleNamespace(**{k: _copy_value(v) for k, v in vars(ns).items()})


def build_case(raw: Mapping, base_dir: Path | None = None, registry=None, _owned: bool = False,
               _reuse: tuple | None = None) -> Case:
    """Validate a merged raw config into a :class:`Case` (raises ConfigError/PluginError).

    ``_owned``: ``raw`` is a private copy the case may keep (no copy is made).  ``_reuse``:
    ``(case, touched)``, a case validated from the same raw config except in the top-level
    sections named in ``touched``; its other sections are copied instead of validated."""
    if not isinstance(raw, Mapping):
        raise ConfigError(f"config: expected a mapping of sections, got {raw!r}")
    prev, touched = _reuse if _reuse is not None else (None, None)
    if prev is not None and (raw.get("plugins") != prev.raw.get("plugins") or "plugins" in touched):
        prev = None

    def kept(sec: str) -> bool:
        return prev is not None and sec not in touched

    for key in raw:
        if key not in TOP_KEYS:
            from ..textsafe import excerpt

            word = isinstance(key, str) and key.isidentifier() and len(key) <= 40
            raise ConfigError(
                (f"{key}: unknown section" if word else f"{excerpt(key)}: unknown section (not a section name:"
                 " is this a cyclesim config?)") + suggestion(str(key), TOP_KEYS)
                + f"; sections: {', '.join(TOP_KEYS[:-2])}"
            )
    sections = {}
    for sec, params in CORE_SCHEMA.items():
        if kept(sec):
            sections[sec] = _copy_ns(prev.section(sec))
        else:
            ignore = ("chamber",) if sec == "engine" else ()
            sections[sec] = SimpleNamespace(**validate_section(raw.get(sec), params, sec, ignore=ignore))
    chamber = prev.chamber if kept("engine") else _chamber(raw.get("engine"))
    plugins = raw.get("plugins") or ()
    if isinstance(plugins, str):
        plugins = (plugins,)
    if not isinstance(plugins, (list, tuple)) or not all(isinstance(x, str) for x in plugins):
        raise ConfigError(f"plugins: expected a list of module names or .py paths, got {plugins!r}")
    bdir = Path(base_dir) if base_dir is not None else Path.cwd()
    plugins = tuple(
        str((bdir / p).resolve()) if p.endswith(".py") and not Path(p).is_absolute() else p for p in plugins
    )
    if registry is None:
        from ..registry import get_registry

        registry = get_registry(plugins)
    subs = {}
    for role in ROLES:
        if kept(role):
            ch = prev.submodels[role]
            subs[role] = SubmodelChoice(role, ch.model, {k: _copy_value(v) for k, v in ch.params.items()})
            continue
        sec = raw.get(role) or {}
        if isinstance(sec, str):
            sec = {"model": sec}
        if not isinstance(sec, Mapping):
            raise ConfigError(f"{role}: expected a mapping with 'model' and its parameters, got {sec!r}")
        model = sec.get("model", DEFAULT_MODELS[role])
        if not isinstance(model, str):
            raise ConfigError(f"{role}.model: expected a model name, got {model!r}")
        cls = registry.submodel_class(role, model, where=f"{role}.model")
        params = validate_section(sec, cls.params, f"{role}", ignore=("model",))
        subs[role] = SubmodelChoice(role, model, params)
    if kept("multi_cylinder") and prev.multi_cylinder is not None:
        multi = _copy_ns(prev.multi_cylinder)
    else:
        multi = SimpleNamespace(**validate_section(raw.get("multi_cylinder"), MULTI_SCHEMA, "multi_cylinder"))
    from .runners import validate_runners

    runners = validate_runners(raw)
    case = Case(
        name=str(raw.get("name") or "case"),
        submodels=subs,
        plugins=plugins,
        raw=dict(raw) if _owned else copy.deepcopy(dict(raw)),
        base_dir=bdir,
        multi_cylinder=multi,
        chamber=chamber,
        runners=runners,
        **sections,
    )
    _check_cross(case)
    from ..fuels import check_rich_limit

    check_rich_limit(case, getattr(registry, "fuels", None))
    return case


def _chamber(engine: Any) -> ChamberShape:
    """The ``engine.chamber`` mapping as a ChamberShape (defaults where absent)."""
    sec = engine.get("chamber") if isinstance(engine, Mapping) else None
    if sec is not None and not isinstance(sec, Mapping):
        raise ConfigError(f"engine.chamber: expected a mapping (head, piston, plug_x_mm, ...), got {sec!r}")
    return ChamberShape.from_mapping(sec)


def load_config(path: str | Path = "demo", overrides: list[str] | tuple = (), registry=None) -> Case:
    """Load, merge, override and validate one config (a path or a built-in name).

    Parameters
    ----------
    path : str or Path
        A YAML file, or the name of a built-in config such as ``"demo"``.
    overrides : list of str
        ``dotted.key=value`` strings applied after inheritance.
    """
    raw, base_dir = load_raw(path)
    given = []
    for text in overrides:
        parts, value = parse_override(text)
        raw = apply_override(raw, parts, value)
        given.append((parts, value))
    case = build_case(raw, base_dir, registry)
    # a file named on the command line is where the user is, not beside the config
    moved = [(parts, str(Path(v).resolve())) for parts, v in given
             if isinstance(v, str) and not Path(v).is_absolute() and _declared_kind(case, parts, registry) in ("path", "table")]
    for parts, v in moved:
        raw = apply_override(raw, parts, v)
    return build_case(raw, base_dir, registry) if moved else case


def _declared_kind(case: Case, parts: list[str], registry=None) -> str | None:
    """The declared kind (``path``, ``table``, ...) of the dotted key ``parts`` in ``case``, if any."""
    if len(parts) != 2:
        return None
    sec, name = parts
    if sec in CORE_SCHEMA:
        params = CORE_SCHEMA[sec]
    elif sec in case.submodels:
        if registry is None:
            from ..registry import get_registry

            registry = get_registry(case.plugins)
        params = registry.submodel_class(sec, case.submodels[sec].model).params
    else:
        return None
    return next((p.kind for p in params if p.name == name), None)


def case_with(case: Case, changes: Mapping[str, Any], registry=None) -> Case:
    """A new validated case with dotted keys changed (used by sweeps).

    Sections the changes do not touch keep the validated values of ``case`` (they were
    validated from the same raw entries); the changed sections and the cross-checks are
    validated afresh.
    """
    raw = copy.deepcopy(case.raw)           # one copy, changed in place, owned by the new case
    touched = set()
    for k, v in changes.items():
        parts = [p for p in k.split(".") if p]
        raw = apply_override(raw, parts, v, in_place=True)
        touched.add(parts[0] if parts else "")
    return build_case(raw, case.base_dir, registry, _owned=True, _reuse=(case, touched))


def resolve_case(base: "Case | str | Path", overrides: Sequence[str] = ()) -> tuple[Case, str]:
    """A study's base case and its label: a Case (with ``overrides`` applied) or a config path/name.

    The label (in study titles, tables and plot titles) is the config's ``name`` where it has one,
    else the path or built-in name given."""
    if isinstance(base, Case):
        if overrides:
            changes = {}
            for text in overrides:
                parts, value = parse_override(text)
                changes[".".join(parts)] = value
            return case_with(base, changes), base.name
        return base, base.name
    case = load_config(base, list(overrides))
    return case, (case.name if case.raw.get("name") else str(base))


def flat_inputs(case: Case) -> dict[str, Any]:
    """All validated inputs as ``section.key`` -> value (for tables and records)."""
    out: dict[str, Any] = {}
    for sec in CORE_SCHEMA:
        for k, v in vars(case.section(sec)).items():
            out[f"{sec}.{k}"] = v
    for k, v in vars(case.chamber).items():
        out[f"engine.chamber.{k}"] = v
    for side, ns in case.runners.items():
        if ns is None:
            out[f"{side}.runner"] = "none"
        else:
            out.update({f"{side}.runner.{k}": v for k, v in vars(ns).items()})
    for role, ch in case.submodels.items():
        out[f"{role}.model"] = ch.model
        for k, v in ch.params.items():
            out[f"{role}.{k}"] = v
    return out


def is_number(x: Any) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(float(x))


__all__ = [
    "CORE_SCHEMA", "Case", "SubmodelChoice", "load_config", "build_case", "case_with",
    "flat_inputs", "parse_override", "apply_override", "CyclesimError",
]
