"""The analyser's settings (pegging, TDC, windows, gas model, trapped mass) and the trapped mass from a trace's measured air and fuel per cycle."""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..errors import CyclesimError


BAR = 1e5


@dataclass(frozen=True)
class AnalysisSettings:
    """Analyser settings (angles [deg], 0 = firing TDC).

    Attributes
    ----------
    peg : str
        ``intake``, ``polytropic`` or ``none``.
    peg_window_deg : (float, float)
        Window of intake pegging [deg].
    poly_angles_deg : (float, float)
        The two compression angles of polytropic pegging [deg].
    poly_exponent : float
        Polytropic exponent of polytropic pegging [-].
    poly_average_deg : float
        Half-width of the pressure average at each pegging angle [deg].
    compression_window_deg, expansion_window_deg : (float, float)
        Windows of the polytropic-exponent fits [deg].
    gamma0, gamma1_per_K : float
        gamma(T) = gamma0 + gamma1_per_K T [-, 1/K]; clipped to 1.05..1.45.
    ivc_deg, evo_deg : float
        Intake valve closing and exhaust valve opening [deg]: heat-release window.
    T_ivc_K : float
        Assumed gas temperature at IVC [K] (for T and gamma(T)).
    trapped_mass_kg : float or None
        Trapped mass [kg]; if given, used with ``R_J_per_kgK`` instead of ``T_ivc_K``.
    air_mass_kg, fuel_mass_kg : float or None
        Mean fresh air and fuel inducted per cycle [kg], as from a test bed's
        air and fuel flow meters.  If both are given (and ``trapped_mass_kg``
        is not), the trapped mass is ``(air + fuel) / (1 - residual_fraction)``
        instead of the ``T_ivc_K`` assumption.  Fresh charge that passes
        straight to the exhaust in the valve overlap is counted as trapped.
    R_J_per_kgK : float
        Specific gas constant of the charge [J/(kg K)].
    tdc_correct : bool
        Estimate and correct the TDC offset (needs motored cycles).
    tdc_from_fired : bool
        Estimate the TDC offset from the fired cycles' compression instead and correct it
        where its 95 % interval is narrow enough (:mod:`cyclesim.traces.tdc_fired`).
    tdc_offset_deg : float or None
        A known TDC offset to correct [deg] (skips the estimate).
    spark_advance_deg : float or None
        Spark advance of the set [deg BTDC], if known: ends the window of ``tdc_from_fired``.
    sensor_delay_s : float
        Known delay of the pressure signal behind the chamber [s] (a recessed mount), taken off
        the phase ``tdc_from_fired`` finds.
    misfire_release_share, partial_burn_share : float
        Thresholds of the cycle classification (:mod:`cyclesim.traces.classify`): a cycle
        whose net released heat is below these shares of the fired cycles' median is a
        misfire (with no gross work or a flat pressure ratio) or a partial burn [-].
    bore_m : float or None
        Bore [m]; needed for the TDC estimate when the volume is an array.
    tdc_wall_temperature_K : float
        Mean wall temperature of head and piston for the loss angle [K].
    gas_model : str
        ``tables``: cylinder gas as a mixture of fresh charge and burned gas
        (``fuel`` at ``fuel_air_lambda``; burned gas ``burned_gas``:
        ``equilibrium`` or ``complete``), mixed by the burned mass fraction
        ``residual_fraction + (1 - residual_fraction) x_b`` (x_b from the heat
        release itself, ``burn_iterations`` passes).  ``linear``: one gas of
        constant m R with gamma(T) = gamma0 + gamma1_per_K T.
    fuel, fuel_air_lambda : str, float
        Fuel name and air-fuel equivalence ratio lambda [-] of the ``tables`` gas.
    residual_fraction : float
        Burned-gas mass fraction of the charge at IVC (residual plus EGR) [-].
    wall_heat : str
        ``woschni``: burn points from the gross heat release, apparent release
        plus wall heat of Woschni's correlation; ``none``: from the apparent release.
    wall_temperature_K : float or None
        Wall temperature of the wall-heat estimate [K]; default ``tdc_wall_temperature_K``.
    woschni_multiplier : float
        Scale of the Woschni coefficient [-].
    woschni_form : str
        ``original`` (Woschni 1967) or ``heywood`` (Heywood 1988 eq. 12.19), for
        the wall heat and the TDC loss angle.
    level_fit : bool
        Scale the wall heat so that the gross release is level after burning.
    thermal_drift : str
        ``fit``: estimate and remove the sensor's short-term thermal drift
        (``tables`` gas with Woschni wall heat and ``level_fit``, and a known
        trapped mass, only);
        ``none``: take the pressure as free of it.
    thermal_time_constant_s : float or None
        Time constant of the drift's first-order lag [s]; None: estimated from
        the set (:func:`_estimate_thermal_tau`), ``thermal_time_constant_default_s``
        where the estimate is not well defined or cannot be made.
    thermal_time_constant_default_s : float
        The fallback time constant [s].
    thermal_time_constant_grid_s : tuple
        (first, last, number) of the log-spaced grid of the estimate [s, s, -].
    thermal_time_constant_min_contrast : float
        The estimate counts as well defined when its minimum is inside the
        grid and the largest residual on the grid exceeds it by this share [-].
    thermal_time_constant_cycles : int
        Fired cycles (evenly spread over the set) whose level misfit is summed
        in the estimate; 0: every fired cycle [-].
    thermal_passes : int
        Linearised least-squares passes of the drift estimate [-].
    thermal_drift_bar_per_K : float or None
        A known drift sensitivity c [bar/K] (skips the estimate); positive:
        the sensor reads low when the gas is hot (the convention of
        :class:`cyclesim.traces.artefacts.ArtefactSettings`).
    thermal_per_cycle : bool
        Keep each cycle's own estimate instead of the set's median.
    level_start_deg, level_end_deg : float
        That window: from this many degrees after the maximum of the apparent
        release to this many before EVO [deg].
    """

    peg: str = "intake"
    peg_window_deg: tuple = (-190.0, -170.0)
    poly_angles_deg: tuple = (-100.0, -65.0)
    poly_exponent: float = 1.32
    poly_average_deg: float = 1.0
    compression_window_deg: tuple = (-90.0, -40.0)
    expansion_window_deg: tuple = (50.0, 110.0)
    gamma0: float = 1.392
    gamma1_per_K: float = -8.13e-5
    ivc_deg: float = -136.0
    evo_deg: float = 134.0
    T_ivc_K: float = 340.0
    trapped_mass_kg: float | None = None
    air_mass_kg: float | None = None
    fuel_mass_kg: float | None = None
    R_J_per_kgK: float = 287.0
    tdc_correct: bool = False
    tdc_from_fired: bool = False
    tdc_offset_deg: float | None = None
    spark_advance_deg: float | None = None
    sensor_delay_s: float = 0.0
    tdc_wall_temperature_K: float = 450.0
    misfire_release_share: float = 0.1
    partial_burn_share: float = 0.85
    bore_m: float | None = None
    gas_model: str = "tables"
    fuel: str = "gasoline"
    fuel_air_lambda: float = 1.0
    residual_fraction: float = 0.07
    burned_gas: str = "equilibrium"
    wall_heat: str = "woschni"
    wall_temperature_K: float | None = None
    woschni_multiplier: float = 1.0
    woschni_form: str = "original"
    level_fit: bool = True
    level_start_deg: float = 20.0
    level_end_deg: float = 5.0
    burn_iterations: int = 3
    thermal_drift: str = "fit"
    thermal_time_constant_s: float | None = None
    thermal_time_constant_default_s: float = 0.002
    thermal_time_constant_grid_s: tuple = (0.5e-3, 8e-3, 9)
    thermal_time_constant_min_contrast: float = 0.05
    thermal_time_constant_cycles: int = 8
    thermal_passes: int = 3
    thermal_drift_bar_per_K: float | None = None
    thermal_per_cycle: bool = False

    def replace(self, **changes) -> "AnalysisSettings":
        return replace(self, **changes)

    def trapped_mass(self) -> float | None:
        """Trapped mass at IVC [kg] from the settings, or None (then from ``T_ivc_K``).

        ``trapped_mass_kg`` if given; else the measured air and fuel per cycle
        with the burned-gas share: ``(air + fuel) / (1 - residual_fraction)``
        (a mass balance of the charge, common practice); else None.
        """
        if self.trapped_mass_kg:
            return float(self.trapped_mass_kg)
        if self.air_mass_kg is not None and self.fuel_mass_kg is not None:
            xr = float(self.residual_fraction)
            if not 0.0 <= xr < 1.0:
                raise CyclesimError(f"analyse: residual_fraction = {xr!r}: expected 0 <= x < 1")
            fresh = float(self.air_mass_kg) + float(self.fuel_mass_kg)
            if not fresh > 0.0:
                raise CyclesimError(f"analyse: air + fuel mass per cycle = {fresh!r} kg: expected > 0")
            return fresh / (1.0 - xr)
        return None


#: Metadata keys of a trace file with the mean air and fuel mass per cycle (test-bed flow meters).
AIR_MASS_KEY = "air_mass_per_cycle_mg"
FUEL_MASS_KEY = "fuel_mass_per_cycle_mg"


def with_measured_masses(s: AnalysisSettings, meta: dict | None) -> AnalysisSettings:
    """Settings with the air and fuel mass per cycle of a trace file's metadata, when it has both.

    Values already in the settings are kept.  ``meta`` keys: ``air_mass_per_cycle_mg``
    and ``fuel_mass_per_cycle_mg`` [mg].
    """
    meta = meta or {}
    if s.air_mass_kg is not None or s.fuel_mass_kg is not None:
        return s
    a, f = meta.get(AIR_MASS_KEY), meta.get(FUEL_MASS_KEY)
    try:
        a, f = float(a), float(f)
    except (TypeError, ValueError):
        return s
    if not (np.isfinite(a) and np.isfinite(f)):
        return s
    return s.replace(air_mass_kg=a * 1e-6, fuel_mass_kg=f * 1e-6)


def analysis_inputs(case):
    """Geometry and analyser settings from a config's engine, valves, walls and operating sections.

    Returns
    -------
    (cyclesim.cylinder.geometry.Geometry, cyclesim.traces.analysis.AnalysisSettings, speed_rpm [rpm])
    """
    from ..cylinder.geometry import Geometry

    e, v, w, op = (case.section(n) for n in ("engine", "valves", "walls", "operating"))
    g = Geometry(e.bore_mm / 1000.0, e.stroke_mm / 1000.0, e.conrod_mm / 1000.0, e.compression_ratio,
                 pin_offset_m=e.pin_offset_mm / 1000.0, head_area_factor=e.head_area_factor,
                 piston_area_factor=e.piston_area_factor)
    hf, pf = e.head_area_factor, e.piston_area_factor
    t_wall = (hf * w.head_temperature_K + pf * w.piston_temperature_K) / (hf + pf)
    from ..config import get_dotted

    extra = {}
    f = case.section("fuel")
    if getattr(f, "C", None) is None:          # a built-in fuel by name (a custom one keeps the default)
        extra["fuel"] = str(f.name)
    extra["fuel_air_lambda"] = float(getattr(op, "lambda"))
    # burned-gas share of the charge at IVC: the config's residual fraction when given (else the
    # analyser's estimate), with external EGR mixed into the fresh part
    xr = get_dotted(case.raw, "operating.residual_fraction")
    xr = float(xr) if xr is not None else AnalysisSettings.residual_fraction
    egr = float(op.egr_fraction)
    extra["residual_fraction"] = xr + (1.0 - xr) * egr
    gas = case.section("gas")
    if getattr(gas, "burned_gas", None):
        extra["burned_gas"] = str(gas.burned_gas)
    spark = get_dotted(case.raw, "burn.spark_advance_deg")
    if spark is not None and str(get_dotted(case.raw, "burn.model") or "") != "none":
        extra["spark_advance_deg"] = float(spark)
    s = AnalysisSettings(ivc_deg=float(v.ivc_deg), evo_deg=float(v.evo_deg),
                         T_ivc_K=float(op.ivc_temperature_K), tdc_wall_temperature_K=float(t_wall),
                         bore_m=e.bore_mm / 1000.0, **extra)
    return g, s, float(op.speed_rpm)
