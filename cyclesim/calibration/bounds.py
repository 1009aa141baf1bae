"""Which dotted keys a fit may vary, in which mode, and their bounds from the declared parameter ranges."""

from __future__ import annotations

import numpy as np

from ..config import CORE_SCHEMA, Case
from ..errors import ConfigError


TRAPPED_STATE_KEYS = ("operating.ivc_pressure_bar", "operating.ivc_temperature_K",
                      "operating.residual_fraction")
"""Closed-mode parameters: the state at intake valve closing."""

# --------------------------------------------------------------------------
# Parameters and bounds
# --------------------------------------------------------------------------


def _declared_param(case: Case, key: str):
    parts = key.split(".")
    if len(parts) != 2:
        raise ConfigError(f"fit parameter {key!r}: expected section.key, e.g. burn.duration_deg")
    sec, name = parts
    if sec in CORE_SCHEMA:
        decl = {p.name: p for p in CORE_SCHEMA[sec]}
    elif sec in case.submodels:
        from ..api import _registry_for

        ch = case.submodels[sec]
        cls = _registry_for([case]).submodel_class(sec, ch.model)
        decl = {p.name: p for p in cls.params}
    else:
        raise ConfigError(f"fit parameter {key!r}: unknown section {sec!r}")
    if name not in decl:
        from ..params import suggestion

        raise ConfigError(
            f"fit parameter {key!r}: the {sec} section"
            + (f" (model {case.submodels[sec].model!r})" if sec in case.submodels else "")
            + " has no such key" + suggestion(name, list(decl))
        )
    p = decl[name]
    if p.kind not in ("float", "int") or not p.sweepable:
        raise ConfigError(f"fit parameter {key!r} cannot be fitted: only numbers that may differ within a batch"
                          f" can be fitted")
    return p


CALIBRATABLE_CORE = {
    "engine": ("compression_ratio", "head_area_factor", "piston_area_factor"),
    "walls": ("head_temperature_K", "piston_temperature_K", "liner_temperature_K"),
}
"""Core-section numbers a fit may estimate (besides the closed-mode IVC state)."""

NOT_CALIBRATABLE = {
    "burn.spark_advance_deg": "the spark timing is a setting of the test, known from the engine control",
    "blowby.crankcase_pressure_bar": "the crankcase pressure is an operating condition",
    "knock.octane_number": "the octane number is a property of the fuel",
    "valve_flow.area_grid_step_deg": "it is a numerical setting",
}
"""Submodel numbers that are not model parameters, with the reason."""

CALIBRATION_RULE = (
    "only model parameters can be fitted: numbers of the submodel sections (burn, heat_transfer, blowby,"
    " valve_flow, friction, knock) except burn.spark_advance_deg, blowby.crankcase_pressure_bar,"
    " knock.octane_number and valve_flow.area_grid_step_deg; engine.compression_ratio, the engine's"
    " head and piston area factors and the walls temperatures; in closed mode the IVC state"
    " (operating.ivc_pressure_bar, operating.ivc_temperature_K, operating.residual_fraction)."
    " Operating conditions (speed, intake and exhaust state, lambda, EGR, spark timing), measured"
    " geometry and valve data, fuel, gas and simulation settings, and whole numbers are refused")
"""The rule of :func:`check_calibratable`, as stated in the command-line help."""


def check_calibratable(case: Case, key: str, mode: str = "closed") -> None:
    """Raise ``ConfigError`` unless ``key`` is a model parameter a fit may estimate.

    See :data:`CALIBRATION_RULE`.  Operating conditions are set and measured by the
    test (the trace metadata supplies speed, intake state and lambda); fitting one
    would let the fit move the operating point to absorb a model error.
    """
    p = _declared_param(case, key)
    sec, name = key.split(".")
    why = None
    if p.kind != "float":
        why = "it is a whole number"
    elif key in NOT_CALIBRATABLE:
        why = NOT_CALIBRATABLE[key]
    elif sec == "operating":
        if key not in TRAPPED_STATE_KEYS:
            why = "it is an operating condition of the test (set and measured, not calibrated)"
        elif mode == "full":
            why = "the IVC state is a closed-mode parameter; in full mode the gas exchange sets it"
    elif sec in CORE_SCHEMA:
        if name not in CALIBRATABLE_CORE.get(sec, ()):
            why = {"engine": "it is measured geometry", "valves": "valve timing and geometry are measured data",
                   "fuel": "it is a property of the fuel", "gas": "it is a setting of the gas model",
                   "simulation": "it is a numerical setting"}.get(sec, "it is not a model parameter")
    elif sec == "boundary":
        why = "the plenum boundary describes operating conditions"
    if why:
        raise ConfigError(f"fit parameter {key!r} cannot be fitted: {why}")


def declared_fit_parameters(case: Case) -> list[str]:
    """Dotted keys of the constants the config's submodels declare fittable (``fit_parameters``).

    A model declares the few constants a pressure trace can identify (e.g. the entrainment
    burn's turbulence production coefficient and kernel radius); raises ``ConfigError`` when
    none of the chosen models declares any.
    """
    from ..api import _registry_for

    reg = _registry_for([case])
    keys = []
    for sec, ch in case.submodels.items():
        cls = reg.submodel_class(sec, ch.model)
        keys += [f"{sec}.{name}" for name in getattr(cls, "fit_parameters", ()) or ()]
    if not keys:
        raise ConfigError(f"fit: no parameter named and the config's models declare none to fit (burn.model"
                          f" {case.submodels['burn'].model!r}); name them with --param, e.g. burn.duration_deg")
    return keys


def _current_value(case: Case, key: str) -> float:
    sec, name = key.split(".")
    if sec in CORE_SCHEMA:
        v = getattr(case.section(sec), name)
    else:
        v = case.submodels[sec].params[name]
    if v is None:
        raise ConfigError(f"fit parameter {key!r} has no value in the config")
    return float(v)


def param_bounds(case: Case, key: str) -> tuple[float, float]:
    """Bounds [lo, hi] of a fitted parameter from its declared ``Param`` range.

    Open ends of the declaration become +-inf; an excluded bound is moved
    inwards by 1e-6 of the range (or of the value) so that every trial value
    validates.
    """
    p = _declared_param(case, key)
    lo = -np.inf if p.min is None else float(p.min)
    hi = np.inf if p.max is None else float(p.max)
    span = (hi - lo) if np.isfinite(hi - lo) else max(abs(_current_value(case, key)), 1.0)
    if p.min_exclusive and np.isfinite(lo):
        lo += 1e-6 * span
    if p.max_exclusive and np.isfinite(hi):
        hi -= 1e-6 * span
    return lo, hi
