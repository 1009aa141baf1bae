"""Figures of a motored cycle (no fuel burns), and the pieces fired and motored cycles share.

A case is *motored* when no fuel burns in it: the fuel is cut (``operating.fuel_cut``; the
charge is air with a trace of fuel that keeps the gas tables defined) or the burn model never
starts within the closed part of the cycle (``burn.model: none``).  Its figures are those a
test engineer reads off a motored engine (friction, TDC determination, heat-transfer checks):

* motoring MEP = -BMEP = FMEP + PMEP - gross IMEP (with a friction model that does not itself
  include pumping), the torque and power the dynamometer absorbs to turn the engine;
* the peak motored pressure, its angle and the loss angle (see :data:`LOSS_ANGLE_CONVENTION`);
* the polytropic exponents of compression and expansion (least-squares slope of ln p against
  ln V over :data:`POLYTROPIC_WINDOWS_DEG`, the analyser's default windows);
* the energy balance formed on the compression work (integral of p dV from IVC to TDC)
  instead of the fuel energy, with the same closure limit as a fired cycle.

Keys that have no meaning without combustion (:data:`COMBUSTION_ONLY_KEYS`) stay in the summary
as NaN (``null`` in ``summary.json``), so tables that mix fired and motored cases keep the same
columns; the motored keys are NaN in fired cases for the same reason.
"""

from __future__ import annotations

import numpy as np

from ..solve.hermite import hermite, hermite_grid

MODE_FIRED = "fired"
MODE_MOTORED = "motored"

LOSS_ANGLE_CONVENTION = ("loss_angle_deg: how far the motored pressure peak lies before TDC,"
                         " positive when it precedes TDC (0 - theta_pmax)")
"""The sign of the loss angle, as the README's conventions and every summary.json state it."""

POLYTROPIC_WINDOWS_DEG = {"compression": (-90.0, -40.0), "expansion": (50.0, 110.0)}
"""Crank-angle windows [deg] of the polytropic-exponent fits (the analyser's defaults; windows
clear of the valve events and of TDC, where wall heat and blowby bend log p - log V, are common
practice).  A window is clipped to IVC..EVO."""

POLYTROPIC_POINTS_PER_DEG = 4

POLYTROPIC_MIN_LN_V_SPAN = 1e-6
"""Smallest span of ln V over a window [-] that an exponent is fitted to; below it the
exponent is NaN with the warning :data:`POLYTROPIC_NULL_WARNING`."""

POLYTROPIC_NULL_WARNING = "polytropic exponent not defined"
"""Points per degree of the interpolated pressure the exponents are fitted to."""

COMBUSTION_ONLY_KEYS = (
    "spark_deg", "spark_advance_deg", "ca05_deg", "ca10_deg", "ca50_deg", "ca90_deg", "burn_10_90_deg",
    "burn_0_10_deg", "combustion_efficiency", "eta_indicated_net", "eta_indicated_gross", "eta_brake", "eta_closed_cycle",
    "mechanical_efficiency", "bsfc_g_per_kWh",
    # the NO model's figures: no burned gas, no NO
    "no_ppm_wet", "no_ppm_dry", "no_g_per_kWh", "no_mass_mg", "burned_element_temperature_max_K",
)
"""Summary keys with no meaning when no fuel burns: NaN (JSON null) in a motored case."""

MOTORED_ONLY_KEYS = ("loss_angle_deg", "motoring_mep_bar", "motoring_torque_Nm", "motoring_power_kW")
"""Summary keys with meaning only in a motored case: NaN (JSON null) in a fired one."""


def motored_cases(batch, start_deg) -> np.ndarray:
    """Which cases of a batch burn no fuel (B,) bool.

    ``start_deg`` is the burn model's start of burning per case [deg]: a burn that starts at or
    after the end of the closed part (EVO; the last angle in closed mode) burns nothing in the
    cylinder.
    """
    B = batch.B
    cut = np.asarray(getattr(batch.operating, "fuel_cut", False), dtype=bool) * np.ones(B, dtype=bool)
    end = batch.valves.evo_deg * np.ones(B)
    soc = np.asarray(start_deg, float) * np.ones(B)
    with np.errstate(invalid="ignore"):
        no_burn = ~(soc < end)
    return cut | no_burn


def is_motored_config(case) -> bool:
    """Whether a validated case burns no fuel, from its config alone: its fuel is cut or its burn
    model is the role's ``none`` (for the studies that refuse or redirect motored cases before
    simulating)."""
    return bool(case.operating.fuel_cut) or case.submodels["burn"].model == "none"


def compression_work(batch, th, Y, F, i_w: int) -> np.ndarray:
    """Work done on the gas from IVC to TDC, -integral of p dV [J] (B,), positive."""
    B = batch.B
    ivc = batch.valves.ivc_deg * np.ones(B)
    W, dW = Y[i_w], F[i_w]
    if batch.simulation.mode == "full":
        # IVC and TDC in one interpolation (rows stacked: the same arithmetic per row)
        w = hermite(th, np.concatenate([W, W]), np.concatenate([dW, dW]), np.concatenate([ivc, np.zeros(B)]))
        return w[:B] - w[B:]
    return W[:, 0] - hermite(th, W, dW, np.zeros(B))


def polytropic_exponents(batch, th, p, dp) -> dict[str, np.ndarray]:
    """Polytropic exponents of compression and expansion (B,) [-].

    The least-squares slope of ln p against ln V, -d ln p / d ln V, over the windows of
    :data:`POLYTROPIC_WINDOWS_DEG` (clipped to IVC..EVO), on the Hermite interpolant of the
    pressure at :data:`POLYTROPIC_POINTS_PER_DEG` points per degree.  NaN where a window
    holds less than 5 degrees of the closed part, or where ln V spans less than
    :data:`POLYTROPIC_MIN_LN_V_SPAN` over it (a compression ratio next to 1: no slope to fit).
    """
    B = batch.B
    # ln V per distinct engine of the batch (one row in a sweep of operating conditions), each
    # case reading its engine's row: the same numbers as evaluated per case, at a fraction of the cost
    geo_u, geo_rows = batch.geometry.distinct()
    ivc = float(np.min(batch.valves.ivc_deg))
    evo = float(np.max(batch.valves.evo_deg))
    out = {}
    for name, (a, b) in POLYTROPIC_WINDOWS_DEG.items():
        a, b = max(a, ivc, th[0]), min(b, evo, th[-1])
        if b - a < 5.0:
            out[name] = np.full(B, np.nan)
            continue
        g = np.linspace(a, b, int(round((b - a) * POLYTROPIC_POINTS_PER_DEG)) + 1)
        x = np.log(geo_u.volume(g))[geo_rows]
        y = np.log(np.maximum(hermite_grid(th, p, dp, g), 1e-300))
        xc = x - x.mean(axis=1, keepdims=True)
        yc = y - y.mean(axis=1, keepdims=True)
        span = x.max(axis=1) - x.min(axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            n = -(xc * yc).sum(axis=1) / (xc * xc).sum(axis=1)
        out[name] = np.where(span >= POLYTROPIC_MIN_LN_V_SPAN, n, np.nan)
    return out


def motored_energy_balance(eb: dict, basis_J: np.ndarray, chem_change_J: np.ndarray,
                           chem_blowby_J: np.ndarray | None = None) -> dict:
    """A fired-layout energy balance rewritten on the compression work ``basis_J`` (B,) [J].

    ``chem_change_J`` is the change of the chemical energy held in the cylinder over the
    cycle [J] (part of the fired layout's ``stored_energy_change_J``); ``chem_blowby_J`` the
    chemical energy that leaked past the rings [J], which the closed layout counts in its
    blowby enthalpy and in the chemical energy that left the charge (here taken out of both).

    The chemical terms (fuel energy in, unreleased chemical energy out, the change of the
    chemical energy held in the cylinder) are netted into ``chemical_energy_released_J``, which
    is zero to the trace of fuel a fuel cut keeps, or the part of the charge a burn model
    releases; the closure is the same number as in the fired layout.
    """
    out = {"compression_work_J": basis_J}
    if "fuel_energy_J" in eb:
        released = eb["fuel_energy_J"] - eb["unreleased_chemical_energy_J"] - chem_change_J
        out["chemical_energy_released_J"] = released
        for k, v in eb.items():
            if k in ("fuel_energy_J", "unreleased_chemical_energy_J", "stored_energy_change_J", "closure_J",
                     "closure_fraction"):
                continue
            out[k] = v
        out["internal_energy_change_J"] = eb["stored_energy_change_J"] - chem_change_J
    else:
        out.update({k: v for k, v in eb.items() if k not in ("closure_J", "closure_fraction")})
        if chem_blowby_J is not None:
            out["chemical_energy_released_J"] = eb["chemical_energy_released_J"] - chem_blowby_J
            out["blowby_enthalpy_J"] = eb["blowby_enthalpy_J"] - chem_blowby_J
    out["closure_J"] = eb["closure_J"]
    with np.errstate(divide="ignore", invalid="ignore"):
        out["closure_fraction"] = np.where(basis_J > 0, eb["closure_J"] / np.where(basis_J > 0, basis_J, 1.0),
                                           np.nan)
    return out


def energy_basis(eb: dict) -> tuple[str, str]:
    """The key an energy balance is formed on and its label: fuel energy (full fired cycle),
    chemical energy released (closed fired cycle) or compression work (motored)."""
    for key, label in (("compression_work_J", "compression work, IVC to TDC"), ("fuel_energy_J", "fuel energy"),
                       ("chemical_energy_released_J", "chemical energy released")):
        if key in eb:
            return key, label
    raise KeyError("energy balance without a basis")


def apply_motored(out: dict, motored: np.ndarray, basis_J: np.ndarray, chem_change_J: np.ndarray,
                  mode: str, chem_blowby_J: np.ndarray | None = None) -> None:
    """Set the motored figures and the null keys in a batch's figures ``out`` (in place)."""
    nan = np.nan
    out["mode"] = np.where(motored, MODE_MOTORED, MODE_FIRED)
    out["compression_work_J"] = basis_J
    for k in COMBUSTION_ONLY_KEYS:
        if k in out:
            out[k] = np.where(motored, nan, out[k])
    out["loss_angle_deg"] = np.where(motored, -out["theta_pmax_deg"], nan)
    if mode == "full":
        out["motoring_mep_bar"] = np.where(motored, -out["bmep_bar"], nan)
        out["motoring_torque_Nm"] = np.where(motored, -out["torque_Nm"], nan)
        out["motoring_power_kW"] = np.where(motored, -out["power_kW"], nan)
    eb = out["energy_balance"]
    if motored.all():
        out["energy_balance"] = motored_energy_balance(eb, basis_J, chem_change_J, chem_blowby_J)
    elif motored.any():
        with np.errstate(divide="ignore", invalid="ignore"):
            eb["closure_fraction"] = np.where(motored, eb["closure_J"] / basis_J, eb["closure_fraction"])


def motored_notes(summary: dict, inputs: dict, friction_model: str) -> list[str]:
    """What a motored case's figures rest on, as lines for the output."""
    notes = ["motored: no fuel burns (operating.fuel_cut or a burn that never starts); combustion figures are"
             " null"]
    if "fmep_bar" in summary:
        walls = "/".join(f"{float(inputs[f'walls.{w}_temperature_K']):g}" for w in ("head", "piston", "liner"))
        notes.append(f"friction from the {friction_model!r} friction model on the motored pressure trace, with the"
                     f" walls at the config's temperatures ({walls} K head/piston/liner): a hot engine, as just"
                     f" after firing; a cold engine's oil gives more friction")
    eb = summary.get("energy_balance") or {}
    if "compression_work_J" in eb:
        notes.append(f"energy balance formed on the compression work (integral of p dV from IVC to TDC,"
                     f" {eb['compression_work_J']:.1f} J) with the closure limit of a fired cycle")
    a, b = POLYTROPIC_WINDOWS_DEG["compression"]
    c, d = POLYTROPIC_WINDOWS_DEG["expansion"]
    notes.append(f"polytropic exponents fitted over {a:g}..{b:g} deg (compression) and {c:g}..{d:g} deg (expansion),"
                 f" within IVC..EVO")
    notes.append(LOSS_ANGLE_CONVENTION)
    return notes
