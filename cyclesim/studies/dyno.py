"""Virtual dynamometer: load-cell force on an arm, speed, corrected power, settling under a load.

>>> from cyclesim.studies.dyno import dyno_test
>>> d = dyno_test("demo", arm_length_m=0.5, noise=DynoNoise(force_sd_N=2.0, seed=1))
>>> print(d.text())

A dynamometer reads the reaction force ``F`` of its casing on a load cell at
the end of an arm of length ``L``: brake torque ``T = F L``, brake power
``P = 2 pi N T`` (N in rev/s).  Two ways to run it:

* ``mode="speed"``: the dyno holds the engine speed; the case runs at its
  speed and the cell reads force and speed (optionally with measurement noise:
  seeded normal noise on each load-cell and speed reading, averaged over
  ``readings`` samples).
* ``mode="torque"``: the dyno applies a load torque characteristic
  ``T_load(N)`` (``constant`` or ``quadratic`` in N, like a water brake or a
  propeller) and the speed settles from ``J dw/dt = T_engine(N) - T_load(N)``
  (J: engine plus dyno inertia).  T_engine(N) comes from simulated points on a
  small speed grid (one batch where the step allows), interpolated by a
  monotone cubic; the ODE is integrated cycle by cycle (one step per engine
  cycle, 2 revolutions, the torque being a cycle mean).

A motored engine (no fuel burns: ``operating.fuel_cut`` or ``burn.model: none``) runs only
speed-controlled: the dyno drives it at the set speed, the load cell reads the torque it applies
(negative force on the arm), reported as the motoring torque and power absorbed, friction plus
pumping minus the gross indicated work (Heywood 1988, sec. 2.7); no correction to reference
conditions is applied (the standards rate power produced).  Torque-controlled operation is
refused: a motored engine has no torque to settle against a load.

Power correction to standard reference conditions (99 kPa dry-air pressure,
298 K), factors from memory (consult the standards for the exact texts):

* SAE J1349 (2004): ``CF = 1.18 (99/p_d) (T/298)^0.5 - 0.18`` [from memory];
  taken valid for about 0.90 <= CF <= 1.10 here [from memory].
* ISO 1585: ``alpha = (99/p_d)^1.2 (T/298)^0.6`` [from memory]; valid for
  0.93 <= alpha <= 1.07 [from memory].

p_d is the dry-air partial pressure: total pressure minus the vapour pressure
``RH * e_s(T)``, with the saturation pressure from the Magnus formula in the
coefficients of Alduchov & Eskridge (1996, J. Appl. Meteor. 35, 601-609):
``e_s = 6.1094 exp(17.625 t / (t + 243.04))`` hPa, t in deg C [from memory].

The simulation treats the intake as dry air: humidity enters only through the
dry-air pressure of the correction.  Left out: water vapour's dilution of the
charge and its slowing of the burn (and its effect on knock), the changes of
friction with oil and coolant temperature, the fuel's temperature and the
standards' own restrictions (fuel specification, test procedure).
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Sequence

import numpy as np

from ..config import Case, case_with, load_config, resolve_case
from ..errors import ConfigError, SolverError
from ..output import CAUTION, atomic_write_text, write_rows_csv
from ..output import plain as _plain

__all__ = ["dyno_test", "DynoResult", "DynoNoise", "saturation_pressure_kPa", "dry_air_pressure_kPa",
           "correction_factor", "STANDARDS"]

P_REF_DRY_KPA = 99.0
T_REF_K = 298.0
STANDARDS = {
    # name: (validity low, validity high, description)
    "SAE J1349": (0.90, 1.10, "SAE J1349 (2004): CF = 1.18 (99/p_d)(T/298)^0.5 - 0.18 [from memory]"),
    "ISO 1585": (0.93, 1.07, "ISO 1585: alpha = (99/p_d)^1.2 (T/298)^0.6 [from memory]"),
}


def saturation_pressure_kPa(T_K):
    """Saturation vapour pressure of water over liquid [kPa] (Magnus form, Alduchov & Eskridge 1996).

    ``e_s = 0.61094 exp(17.625 t / (t + 243.04))`` kPa, t = T - 273.15 in deg C;
    the coefficients are quoted from memory; about -40..50 deg C.
    """
    t = np.asarray(T_K, float) - 273.15
    return 0.61094 * np.exp(17.625 * t / (t + 243.04))


def dry_air_pressure_kPa(p_total_kPa, T_K, relative_humidity):
    """Dry-air partial pressure [kPa]: total pressure minus RH x saturation vapour pressure."""
    return np.asarray(p_total_kPa, float) - np.asarray(relative_humidity, float) * saturation_pressure_kPa(T_K)


def correction_factor(p_dry_kPa, T_K, standard: str = "SAE J1349"):
    """Power correction factor to 99 kPa dry air and 298 K [-] (corrected = factor x observed).

    Parameters
    ----------
    p_dry_kPa : array_like
        Dry-air pressure of the inlet air [kPa].
    T_K : array_like
        Inlet air temperature [K].
    standard : {"SAE J1349", "ISO 1585"}
        Which standard's factor (both from memory; see the module notes).
    """
    x = P_REF_DRY_KPA / np.asarray(p_dry_kPa, float)
    tr = np.asarray(T_K, float) / T_REF_K
    if standard == "SAE J1349":
        return 1.18 * x * tr ** 0.5 - 0.18
    if standard == "ISO 1585":
        return x ** 1.2 * tr ** 0.6
    raise ConfigError(f"standard {standard!r}: expected one of {', '.join(STANDARDS)}")


@dataclass
class DynoNoise:
    """Measurement noise of the test cell (normal, seeded).

    Attributes
    ----------
    force_sd_N : float
        Standard deviation of one load-cell reading [N].
    speed_sd_rpm : float
        Standard deviation of one speed reading [rpm].
    readings : int
        Readings averaged into the reported value.
    seed : int
        Seed of the random generator (same seed, same readings).
    """

    force_sd_N: float = 1.0
    speed_sd_rpm: float = 2.0
    readings: int = 20
    seed: int = 0

    def __post_init__(self):
        for name in ("force_sd_N", "speed_sd_rpm"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not (math.isfinite(v) and v >= 0):
                raise ConfigError(f"dyno noise {name} = {v!r}: expected a finite number >= 0 (a standard deviation)")
        for name, lo in (("readings", 1), ("seed", 0)):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not (math.isfinite(v) and v == int(v)
                                                                                and v >= lo):
                raise ConfigError(f"dyno noise {name} = {v!r}: expected a whole number >= {lo}")
            setattr(self, name, int(v))


@dataclass
class DynoResult:
    """What the test cell reads, the correction and (torque mode) the settling trace."""

    mode: str
    reading: dict
    readings: list
    correction: dict
    settling: list = field(default_factory=list)
    engine_curve: list = field(default_factory=list)
    settled: dict = field(default_factory=dict)
    warnings: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    files: list = field(default_factory=list)
    base_config: str = ""
    caution: str = CAUTION
    motored: bool = False

    def figures(self) -> dict:
        return _plain({
            "caution": self.caution, "base_config": self.base_config, "mode": self.mode,
            "operation": "motored" if self.motored else "fired",
            "reading": self.reading, "correction": self.correction, "settled": self.settled,
            "engine_torque_curve": self.engine_curve, "warnings": self.warnings, "notes": self.notes,
            "readings": self.readings, "files": [Path(f).name for f in self.files],
        })

    def text(self) -> str:
        r, c = self.reading, self.correction
        lines = [f"virtual dyno: {self.base_config}, {self.mode}-controlled"
                 + (", MOTORED (the dyno drives the engine)" if self.motored else "")]

        def row(label, v, unit, spec=".2f"):
            lines.append(f"  {label:<40s}{'-' if v is None else format(v, spec):>10s}  {unit}")

        row("speed", r["speed_rpm"], "rpm", ".1f")
        row("load-cell force", r["force_N"], "N", ".2f")
        row("arm length", r["arm_m"], "m", ".3f")
        if self.motored:
            row("motoring torque absorbed (-force x arm)", r["motoring_torque_Nm"], "N m", ".2f")
            row("motoring power absorbed (2 pi N T)", r["motoring_power_kW"], "kW", ".2f")
        else:
            row("brake torque (force x arm)", r["torque_Nm"], "N m", ".2f")
            row("brake power (2 pi N T)", r["power_kW"], "kW", ".2f")
        if r.get("readings", 1) > 1:
            row("readings averaged", r["readings"], "", "d")
            row("standard error of torque", r.get("torque_se_Nm"), "N m", ".2f")
        if self.motored:
            row("motoring MEP of the model (= -BMEP)", r.get("motoring_mep_bar"), "bar", ".3f")
        else:
            row("fuel flow", r.get("fuel_flow_kg_per_h"), "kg/h", ".2f")
            row("BSFC (observed)", r.get("bsfc_g_per_kWh"), "g/kWh", ".0f")
            row("ambient pressure / dry-air pressure", c["ambient_pressure_kPa"], "kPa", ".2f")
            lines[-1] += f"  {c['dry_air_pressure_kPa']:.2f} kPa"
            row("ambient temperature / humidity", c["ambient_temperature_K"], "K", ".1f")
            lines[-1] += f"  {100 * c['relative_humidity']:.0f} %"
            row(f"correction factor ({c['standard']})", c["factor"], "-", ".4f")
            row("corrected power", c["corrected_power_kW"], "kW", ".2f")
            row("corrected torque", c["corrected_torque_Nm"], "N m", ".2f")
            if self.settled:
                row("settled speed (T_engine = T_load)", self.settled.get("speed_rpm"), "rpm", ".1f")
                row("time to settle within 1 %", self.settled.get("settling_time_s"), "s", ".2f")
        for w in self.warnings:
            lines.append(f"warning: {w}")
        for n in self.notes:
            lines.append(f"note: {n}")
        lines.append(f"CAUTION: {self.caution}")
        return "\n".join(lines)




def _correction(power_kW, torque_Nm, ambient_pressure_kPa, ambient_temperature_K, relative_humidity, standard):
    p_d = float(dry_air_pressure_kPa(ambient_pressure_kPa, ambient_temperature_K, relative_humidity))
    f = float(correction_factor(p_d, ambient_temperature_K, standard))
    lo, hi, desc = STANDARDS[standard]
    out = {"standard": standard, "formula": desc, "ambient_pressure_kPa": ambient_pressure_kPa,
           "ambient_temperature_K": ambient_temperature_K, "relative_humidity": relative_humidity,
           "vapour_pressure_kPa": ambient_pressure_kPa - p_d, "dry_air_pressure_kPa": p_d,
           "reference_dry_air_pressure_kPa": P_REF_DRY_KPA, "reference_temperature_K": T_REF_K,
           "factor": f, "validity": [lo, hi], "within_validity": bool(lo <= f <= hi),
           "corrected_power_kW": f * power_kW, "corrected_torque_Nm": f * torque_Nm}
    return out


def dyno_test(
    case: Case | str | Path = "demo",
    arm_length_m: float = 0.5,
    mode: str = "speed",
    noise: DynoNoise | None = None,
    *,
    overrides: Sequence[str] = (),
    ambient_pressure_kPa: float = 99.0,
    ambient_temperature_K: float = 298.0,
    relative_humidity: float = 0.0,
    standard: str = "SAE J1349",
    load: str = "quadratic",
    load_torque_Nm: float | None = None,
    load_reference_rpm: float | None = None,
    start_speed_rpm: float | None = None,
    inertia_kg_m2: float = 0.3,
    speed_grid_rpm: Sequence[float] | None = None,
    duration_s: float = 5.0,
    out: str | Path | None = None,
    plots: bool = True,
    cell_air: str = "intake",
) -> DynoResult:
    """Run the case on a virtual dynamometer.

    Parameters
    ----------
    case : Case, str or Path
        Engine and operating point, or a config path / name (with ``overrides``).
    arm_length_m : float
        Load-cell arm length [m].
    mode : {"speed", "torque"}
        Dyno holds the speed, or applies a load torque characteristic.
    noise : DynoNoise, optional
        Measurement noise (none: exact readings).
    ambient_pressure_kPa, ambient_temperature_K, relative_humidity : float
        Test-cell air [kPa, K, 0..1]: the power correction's conditions and, with
        ``cell_air="intake"``, the air the engine breathes.
    cell_air : {"intake", "none"}
        ``"intake"`` (default): the config describes the engine at the reference air
        (99 kPa dry, 298 K) and breathes the cell's: the intake pressure scales with the
        dry-air pressure (intake depression in proportion), the intake temperature moves with
        the ambient temperature, the exhaust back pressure keeps its offset from the intake;
        at the reference air nothing changes.  ``"none"``: the engine's intake stays as
        configured (e.g. a boost-controlled intake); only the correction sees the cell air.
    standard : {"SAE J1349", "ISO 1585"}
        Correction standard (factors from memory).
    load : {"constant", "quadratic"}
        Torque mode: load torque constant, or proportional to N^2.
    load_torque_Nm : float, optional
        Torque mode: load torque at ``load_reference_rpm`` [N m] (default: the
        engine's torque at the case's speed, so the speed settles there).
    load_reference_rpm : float, optional
        Torque mode: speed at which the load is ``load_torque_Nm`` [rpm] (default: the case's speed).
    start_speed_rpm : float, optional
        Torque mode: speed at the start [rpm] (default 0.8 x the case's speed).
    inertia_kg_m2 : float
        Torque mode: engine plus dyno rotating inertia [kg m^2].
    speed_grid_rpm : sequence of float, optional
        Torque mode: speeds simulated for T_engine(N) (default 5 points from 0.7 to 1.2 x the case's speed).
    duration_s : float
        Torque mode: time integrated [s].
    out : str or Path, optional
        Folder for ``dyno.json``, ``dyno_readings.csv`` and (torque mode)
        ``dyno_settling.csv`` and ``dyno_settling.png``.
    """
    from ..api import simulate

    if mode not in ("speed", "torque"):
        raise ConfigError(f"dyno mode {mode!r}: expected 'speed' or 'torque'")
    if not arm_length_m > 0:
        raise ConfigError(f"arm length {arm_length_m!r} m: expected a positive number")
    if standard not in STANDARDS:
        raise ConfigError(f"standard {standard!r}: expected one of {', '.join(STANDARDS)}")
    if not 0 <= relative_humidity <= 1:
        raise ConfigError(f"relative humidity {relative_humidity!r}: expected 0..1")
    if cell_air not in ("intake", "none"):
        raise ConfigError(f"cell air {cell_air!r}: expected 'intake' or 'none'")
    for name, v, positive in (("inertia_kg_m2", inertia_kg_m2, True), ("duration_s", duration_s, True),
                              ("ambient_pressure_kPa", ambient_pressure_kPa, True),
                              ("ambient_temperature_K", ambient_temperature_K, True),
                              ("start_speed_rpm", start_speed_rpm, True), ("load_torque_Nm", load_torque_Nm, False)):
        if v is None:
            continue
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or (positive and v <= 0):
            raise ConfigError(f"dyno {name} {v!r}: expected a finite {'positive ' if positive else ''}number")
    case, label = resolve_case(case, overrides)
    if case.simulation.mode != "full":
        raise ConfigError("the dyno needs simulation.mode: full (brake torque needs the whole cycle)")
    res_notes: list = []
    op = case.operating
    p_d = float(dry_air_pressure_kPa(ambient_pressure_kPa, ambient_temperature_K, relative_humidity))
    if cell_air == "intake":
        p_in = op.intake_pressure_bar * p_d / P_REF_DRY_KPA
        T_in = op.intake_temperature_K + (ambient_temperature_K - T_REF_K)
        changes = {"operating.intake_pressure_bar": p_in, "operating.intake_temperature_K": T_in,
                   "operating.exhaust_pressure_bar": op.exhaust_pressure_bar + (p_in - op.intake_pressure_bar)}
        if abs(p_d / P_REF_DRY_KPA - 1.0) > 1e-12 or abs(ambient_temperature_K - T_REF_K) > 1e-9:
            case = case_with(case, changes)
            res_notes.append(f"the engine breathes the cell air: intake {p_in:.4f} bar, {T_in:.1f} K (the config's"
                             f" {op.intake_pressure_bar:g} bar, {op.intake_temperature_K:g} K at 99 kPa dry, 298 K);"
                             f" --cell-air none keeps the config's intake")
        if op.intake_pressure_bar > 1.2:
            res_notes.append("the config's intake is boosted: a boost controller would hold it whatever the cell"
                             " air; --cell-air none keeps it as configured")
    else:
        res_notes.append("the engine's intake is as configured (--cell-air none): only the correction uses the"
                         " cell air")
    N0 = float(case.operating.speed_rpm)
    settling: list = []
    curve: list = []
    settled: dict = {}

    motored = False
    if mode == "speed":
        res = simulate([case])[0]
        if res.error:
            raise SolverError(f"dyno: {res.error}")
        N_true, T_true = N0, float(res.summary["torque_Nm"])
        fuel_mg = float(res.summary["fuel_mass_mg"])
        warn = list(res.warnings)
        motored = res.summary.get("mode") == "motored"
    else:
        grid = np.array(sorted(speed_grid_rpm) if speed_grid_rpm is not None
                        else np.linspace(0.7, 1.2, 5) * N0, float)
        if len(grid) < 2:
            raise ConfigError("dyno torque mode: the speed grid needs at least 2 speeds")
        results = simulate([case_with(case, {"operating.speed_rpm": float(n)}) for n in grid])
        bad = [f"{n:g} rpm: {r.error}" for n, r in zip(grid, results) if r.error]
        if bad:
            raise SolverError("dyno: " + "; ".join(bad))
        if any(r.summary.get("mode") == "motored" for r in results):
            raise ConfigError("dyno: a motored engine (no fuel burns) makes no torque to settle against a load;"
                              " run it speed-controlled (--mode speed): the dyno then drives it and reads the"
                              " power it absorbs")
        Te = np.array([r.summary["torque_Nm"] for r in results])
        fuel = np.array([r.summary["fuel_mass_mg"] for r in results])
        curve = [{"speed_rpm": float(n), "torque_Nm": float(t)} for n, t in zip(grid, Te)]
        from scipy.interpolate import PchipInterpolator

        T_eng = PchipInterpolator(grid, Te, extrapolate=True)
        N_ref = N0 if load_reference_rpm is None else float(load_reference_rpm)
        T_ref = float(T_eng(N_ref)) if load_torque_Nm is None else float(load_torque_Nm)
        if load == "constant":
            T_load = lambda n: T_ref + 0.0 * n  # noqa: E731
        elif load == "quadratic":
            T_load = lambda n: T_ref * (n / N_ref) ** 2  # noqa: E731
        else:
            raise ConfigError(f"dyno load {load!r}: expected 'constant' or 'quadratic'")
        N = float(0.8 * N0 if start_speed_rpm is None else start_speed_rpm)
        t = 0.0
        settling.append({"time_s": 0.0, "speed_rpm": N, "engine_torque_Nm": float(T_eng(N)),
                         "load_torque_Nm": float(T_load(N))})
        while t < duration_s:
            dt = 120.0 / max(N, 1.0)  # one engine cycle
            # cycle-mean torques, explicit midpoint over one cycle
            dN = (float(T_eng(N)) - float(T_load(N))) / inertia_kg_m2 * dt * 60.0 / (2 * math.pi)
            Nm = N + 0.5 * dN
            dN = (float(T_eng(Nm)) - float(T_load(Nm))) / inertia_kg_m2 * dt * 60.0 / (2 * math.pi)
            N, t = N + dN, t + dt
            settling.append({"time_s": t, "speed_rpm": N, "engine_torque_Nm": float(T_eng(N)),
                             "load_torque_Nm": float(T_load(N))})
        from scipy.optimize import brentq

        diff = lambda n: float(T_eng(n)) - float(T_load(n))  # noqa: E731
        eq = None
        for a, b in zip(grid[:-1], grid[1:]):
            if diff(a) == 0:
                eq = float(a)
            elif diff(a) * diff(b) < 0:
                eq = brentq(diff, a, b, xtol=1e-6)
            if eq is not None:
                break
        if eq is None and diff(grid[-1]) == 0:
            eq = float(grid[-1])
        if eq is None:
            res_notes.append("engine and load torque do not cross on the speed grid: no settled speed on it")
        else:
            settled["speed_rpm"] = eq
            settled["torque_Nm"] = float(T_eng(eq))
            ts = None
            for row in reversed(settling):
                if abs(row["speed_rpm"] - eq) > 0.01 * eq:
                    break
                ts = row["time_s"]
            settled["settling_time_s"] = ts
            if ts is None:
                res_notes.append(f"not within 1 % of the settled speed after {duration_s:g} s")
        last = settling[-1]
        if not grid[0] <= last["speed_rpm"] <= grid[-1]:
            res_notes.append("the speed left the simulated grid: the engine torque there is extrapolated")
        N_true, T_true = last["speed_rpm"], last["engine_torque_Nm"]
        fuel_mg = float(np.interp(N_true, grid, fuel))
        warn = [w for r in results for w in r.warnings]

    # test-cell readings
    F_true = T_true / arm_length_m
    n_read = 1 if noise is None else max(int(noise.readings), 1)
    if noise is None:
        Fs, Ns = np.array([F_true]), np.array([N_true])
    else:
        rng = np.random.default_rng(noise.seed)
        Fs = F_true + rng.normal(0.0, noise.force_sd_N, n_read)
        Ns = N_true + rng.normal(0.0, noise.speed_sd_rpm, n_read)
    readings = [{"reading": i + 1, "force_N": float(f), "speed_rpm": float(n),
                 "torque_Nm": float(f * arm_length_m),
                 "power_kW": float(2 * math.pi * n / 60.0 * f * arm_length_m / 1e3)} for i, (f, n) in enumerate(zip(Fs, Ns))]
    F, Nr = float(np.mean(Fs)), float(np.mean(Ns))
    T = F * arm_length_m
    P = 2 * math.pi * Nr / 60.0 * T / 1e3
    ncyl = case.engine.cylinders
    fuel_kg_h = fuel_mg * 1e-6 * ncyl * Nr / 120.0 * 3600.0
    reading = {"speed_rpm": Nr, "force_N": F, "arm_m": arm_length_m, "torque_Nm": T, "power_kW": P,
               "readings": n_read, "fuel_flow_kg_per_h": fuel_kg_h,
               "bsfc_g_per_kWh": fuel_kg_h * 1e3 / P if P > 0 else None,
               "true_torque_Nm": T_true, "true_speed_rpm": N_true}
    if n_read > 1:
        reading["torque_se_Nm"] = float(np.std(Fs, ddof=1) / math.sqrt(n_read) * arm_length_m)
        reading["speed_se_rpm"] = float(np.std(Ns, ddof=1) / math.sqrt(n_read))
    corr = _correction(P, T, ambient_pressure_kPa, ambient_temperature_K, relative_humidity, standard)
    warnings = list(dict.fromkeys(warn))
    if motored:
        reading.update(motoring_torque_Nm=-T, motoring_power_kW=-P, true_motoring_torque_Nm=-T_true,
                       motoring_mep_bar=float(res.summary["motoring_mep_bar"]), fuel_flow_kg_per_h=None,
                       bsfc_g_per_kWh=None)
        corr = {"standard": None, "applied": False,
                "reason": "the reference-condition corrections rate power produced, not power absorbed"}
        res_notes.append("motored: no fuel burns; the dyno drives the engine at the set speed and its load cell"
                         " reads the torque it applies, the motoring torque = friction + pumping - gross"
                         " indicated work (Heywood 1988, sec. 2.7)")
        res_notes.extend(n for n in res.notes if n.startswith("friction from"))
        res_notes.append("no correction to reference conditions: SAE J1349 and ISO 1585 correct the power an"
                         " engine produces, not the power it absorbs")
    elif not corr["within_validity"]:
        lo, hi = corr["validity"]
        warnings.append(f"{standard} correction factor {corr['factor']:.3f} is outside its validity range"
                        f" {lo:g}..{hi:g}: the corrected power is not a valid rating")
    if not motored:
        res_notes.append("correction factors are quoted from memory; consult the standard before rating an engine")
        res_notes.append("humidity enters only through the dry-air pressure: its effect on the burn is not modelled")
    d = DynoResult(mode=mode, reading=reading, readings=readings, correction=corr, settling=settling,
                   engine_curve=curve, settled=settled, warnings=warnings, notes=res_notes, base_config=label,
                   motored=motored)
    if out is not None:
        out = Path(out)
        out.mkdir(parents=True, exist_ok=True)
        write_rows_csv(out / "dyno_readings.csv", readings, list(readings[0]))
        files = [out / "dyno_readings.csv"]
        if settling:
            write_rows_csv(out / "dyno_settling.csv", settling, list(settling[0]))
            files.append(out / "dyno_settling.csv")
            if plots:
                files.append(plot_settling(d, out / "dyno_settling.png"))
        files.append(out / "dyno.json")
        d.files = files
        atomic_write_text(out / "dyno.json", json.dumps(d.figures(), indent=2) + "\n")
    return d


def model_correction_check(case: Case | str = "demo", pressures_kPa=(93.0, 99.0, 105.0),
                           temperatures_K=(283.0, 298.0, 313.0), exhaust_offset_bar: float | None = None,
                           overrides: Sequence[str] = ()) -> list[dict]:
    """The model's own response of brake power to ambient pressure and temperature.

    Runs the case with the intake plenum at each (dry) ambient pressure at the
    reference temperature, and at each temperature at the reference pressure
    (the exhaust back pressure keeps its offset from the intake), in one batch,
    and returns per point the model's factor P(99 kPa, 298 K) / P(p, T) beside
    both standards' factors.
    """
    from ..api import simulate

    base = case if isinstance(case, Case) else load_config(case, list(overrides))
    off = (base.operating.exhaust_pressure_bar - base.operating.intake_pressure_bar
           if exhaust_offset_bar is None else exhaust_offset_bar)
    pts = [(P_REF_DRY_KPA, T_REF_K)] + [(p, T_REF_K) for p in pressures_kPa if p != P_REF_DRY_KPA] + \
          [(P_REF_DRY_KPA, T) for T in temperatures_K if T != T_REF_K]
    cases = [case_with(base, {"operating.intake_pressure_bar": p / 100.0, "operating.intake_temperature_K": T,
                             "operating.exhaust_pressure_bar": p / 100.0 + off}) for p, T in pts]
    res = simulate(cases)
    for r in res:
        if r.error:
            raise SolverError(f"correction check: {r.error}")
    P0 = res[0].summary["power_kW"]
    return [{"dry_air_pressure_kPa": p, "temperature_K": T, "power_kW": r.summary["power_kW"],
             "model_factor": P0 / r.summary["power_kW"],
             "sae_j1349_factor": float(correction_factor(p, T, "SAE J1349")),
             "iso_1585_factor": float(correction_factor(p, T, "ISO 1585"))} for (p, T), r in zip(pts, res)]


def plot_settling(d: DynoResult, path: Path) -> Path:
    """Speed against time, and engine and load torque against speed."""
    from ..plots import _plt, _save

    plt = _plt()
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(10, 4))
    t = [r["time_s"] for r in d.settling]
    a1.plot(t, [r["speed_rpm"] for r in d.settling], "-", color="tab:blue")
    if d.settled.get("speed_rpm"):
        a1.axhline(d.settled["speed_rpm"], color="tab:green", ls="--", lw=1,
                   label=f"settled {d.settled['speed_rpm']:.0f} rpm")
        a1.legend(fontsize=8)
    a1.set_xlabel("time [s]")
    a1.set_ylabel("speed [rpm]")
    a1.set_title("speed settling (one step per engine cycle)")
    ns = np.array([c["speed_rpm"] for c in d.engine_curve])
    a2.plot(ns, [c["torque_Nm"] for c in d.engine_curve], "o-", label="engine (simulated points)")
    a2.plot([r["speed_rpm"] for r in d.settling], [r["load_torque_Nm"] for r in d.settling], ".", ms=2,
            color="tab:red", label="dyno load on the trajectory")
    a2.set_xlabel("speed [rpm]")
    a2.set_ylabel("torque [N m]")
    a2.set_title("engine and load torque")
    a2.legend(fontsize=8)
    return _save(fig, Path(path))
