"""Writing results: atomic files, summary JSON, trace CSV, the printed table."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path
from typing import Iterable

import numpy as np

from .results.atomic_files import atomic_write_text
from .results.energy_labels import UNRELEASED_LABELS, energy_label
from .errors import CyclesimError
from .results.outdir import folder_entries

CAUTION = (
    "Results are model estimates. On a real engine approach spark advance, boost and knock"
    " limits gradually, with knock detection, within the manufacturer's limits and the test"
    " cell's procedures, local codes and licensed practice."
)


CONVENTIONS = {
    "crank_angle": "degrees, 0 = firing TDC, negative before it; -360/360 = gas-exchange TDC",
    "units": "in every key's name",
    "loss_angle_deg": "how far the motored pressure peak lies before TDC: positive when it precedes TDC"
                      " (0 - theta_pmax)",
    "tdc_offset_deg": "the labelled crank angle at which true TDC lies in a recorded trace (positive: the"
                      " record's angles are late; true angle = labelled - offset)",
    "mode": "fired, or motored (no fuel burns: figures with no meaning without combustion are null)",
}
"""How a result's numbers are to be read (in every summary.json)."""


def plain(x):
    """Numbers, arrays and containers as JSON-ready Python values (non-finite floats -> None)."""
    if isinstance(x, dict):
        return {str(k): plain(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [plain(v) for v in x]
    if isinstance(x, np.ndarray):
        return plain(x.tolist())
    if isinstance(x, (np.bool_, bool)):
        return bool(x)
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, (float, np.floating)):
        v = float(x)
        return v if np.isfinite(v) else None
    return x


def prepare_out_dir(out: Path, force: bool, create: bool = True) -> Path:
    """Create the output folder; refuse to write into a non-empty one without ``force``.

    With ``create`` false only the checks run (nothing is made), for a command that creates the
    folder once its work has succeeded.  The lock file of a run holding the folder
    (:func:`cyclesim.results.outdir.folder_lock`) does not count as content.
    """
    out = Path(out)
    if out.exists():
        if not out.is_dir():
            raise CyclesimError(f"--out {out}: exists and is not a folder")
        if folder_entries(out) and not force:
            raise CyclesimError(f"--out {out}: folder exists and is not empty; use --force to overwrite")
    if create:
        out.mkdir(parents=True, exist_ok=True)
    return out


def trace_csv(trace: dict) -> str:
    keys = list(trace)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(keys)
    cols = [np.asarray(trace[k]) for k in keys]
    for row in zip(*cols):
        w.writerow([f"{float(v):.10g}" for v in row])
    return buf.getvalue()


CASE_FILES = ("summary.json", "trace.csv", "pressure.png", "pv.png", "logp_logv.png", "heat_release.png",
              "valves.png", "energy_balance.png", "temperature.png")
"""Every file :func:`write_case` may write (the plots of :func:`cyclesim.plots.plot_case` included)."""


def clear_case_files(out: Path) -> list[Path]:
    """Remove the files a previous :func:`write_case` left in ``out`` (``run --force``), so none of
    them (a plot the new run does not make, say) is taken for the new run's; other files stay."""
    gone = []
    for name in CASE_FILES:
        f = Path(out) / name
        if f.is_file() or f.is_symlink():
            f.unlink()
            gone.append(f)
    return gone


def write_case(res, out: Path, plots: bool = True) -> list[Path]:
    """Write ``summary.json``, ``trace.csv`` and the plots of one case into ``out``."""
    out = Path(out)
    written = []
    data = res.summary_json()
    atomic_write_text(out / "summary.json", json.dumps(data, indent=2) + "\n")
    written.append(out / "summary.json")
    if res.trace:
        atomic_write_text(out / "trace.csv", trace_csv(res.trace))
        written.append(out / "trace.csv")
    if plots and res.trace:
        from .plots import plot_case

        written.extend(plot_case(res, out))
    return written


def _fmt(v, spec=".2f"):
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return "-"
    text = format(v, spec)
    if text.startswith("-") and not text.strip("-0.") and "e" not in text:
        return text[1:]                       # no "-0.000"
    return text


def summary_table(res) -> str:
    """The short printed table, grouped the way a test engineer reads it."""
    s = res.summary
    lines: list[str] = []
    mode = res.inputs.get("simulation.mode", "full")

    def row(label, key, unit="", spec=".2f", scale=1.0):
        v = s.get(key)
        if v is None:
            return
        lines.append(f"  {label:<34s}{_fmt(v * scale if isinstance(v, float) else v, spec):>10s}  {unit}")

    def head(t):
        lines.append(t)

    def loop_line():
        if getattr(res, "cycle_loop", "compiled") not in ("compiled", ""):
            lines.append(f"cycle loop: {res.cycle_loop}")

    eng = f"{res.inputs.get('engine.cylinders', 1)} cyl"
    lines.append(f"{res.name}  ({eng}, {res.inputs['operating.speed_rpm']:g} rpm, lambda {res.inputs['operating.lambda']:g})")
    if s.get("mode") == "motored":
        _motored_rows(s, mode, lines, row, head, loop_line)
    else:
        _fired_rows(s, mode, lines, row, head, loop_line)
    if "knock_integral_max" in s:
        head("Knock (end gas)")
        row("knock integral max (1 = onset)", "knock_integral_max", "", ".3f")
        onset = s.get("knock_onset_deg")
        if onset is None or not np.isfinite(onset):
            lines.append(f"  {'autoignition onset':<34s}{'none':>10s}")
        else:
            row("autoignition onset", "knock_onset_deg", "deg ATDC", ".1f")
            row("unburned charge at onset", "knock_unburned_fraction_at_onset", "%", ".0f", 100)
        row("end-gas peak temperature", "end_gas_temperature_max_K", "K", ".0f")
    if "no_ppm_wet" in s and s.get("mode") != "motored":
        head("Emissions (NO, extended Zeldovich, burned-mass elements)")
        row("NO wet", "no_ppm_wet", "ppm", ".0f")
        row("NO dry", "no_ppm_dry", "ppm", ".0f")
        row("brake-specific NO", "no_g_per_kWh", "g/kWh", ".2f")
        row("hottest burned-mass element", "burned_element_temperature_max_K", "K", ".0f")
    eb = s.get("energy_balance")
    if isinstance(eb, dict):
        lines.extend(energy_balance_lines(eb, s.get("unreleased_energy")))
    for n in getattr(res, "notes", ()):
        lines.append(f"note: {n}")
    for w in res.warnings:
        lines.append(f"warning: {w}")
    lines.append(f"note: {CAUTION}")
    return "\n".join(lines)


def _fired_rows(s, mode, lines, row, head, loop_line) -> None:
    if mode == "full":
        conv = "settled" if s.get("converged") else "NOT settled"
        lines.append(f"full 720 deg cycle, {conv} after {int(s.get('cycles_to_converge', 0))} cycles")
        loop_line()
        head("Indicated")
        row("net IMEP", "imep_net_bar", "bar")
        row("gross IMEP", "imep_gross_bar", "bar")
        row("PMEP (pumping loss)", "pmep_bar", "bar")
        row("net indicated efficiency", "eta_indicated_net", "%", ".1f", 100)
        head("Losses")
        row("FMEP (friction + accessories)", "fmep_bar", "bar")
        row("mechanical efficiency (BMEP/gross)", "mechanical_efficiency", "%", ".1f", 100)
        head("Brake")
        row("BMEP", "bmep_bar", "bar")
        row("torque (engine)", "torque_Nm", "N m", ".1f")
        row("power (engine)", "power_kW", "kW", ".1f")
        row("BSFC", "bsfc_g_per_kWh", "g/kWh", ".0f")
        row("brake efficiency", "eta_brake", "%", ".1f", 100)
        _gas_exchange_rows(row, head)
    else:
        lines.append("closed cycle, IVC to EVO")
        loop_line()
        row("closed-cycle IMEP", "imep_closed_bar", "bar")
        row("closed-cycle efficiency", "eta_closed_cycle", "%", ".1f", 100)
        row("trapped mass", "trapped_mass_mg", "mg", ".1f")
        row("blowby (of trapped mass)", "blowby_fraction", "%", ".2f", 100)
    head("Combustion")
    row("spark advance", "spark_advance_deg", "deg BTDC", ".1f")
    if "ca10_deg" in s:
        lines.append(
            f"  {'CA10 / CA50 / CA90':<34s}{_fmt(s['ca10_deg'], '.1f'):>6s} /{_fmt(s['ca50_deg'], '.1f'):>6s}"
            f" /{_fmt(s['ca90_deg'], '.1f'):>6s}  deg"
        )
    row("0-10 % burn (spark to CA10)", "burn_0_10_deg", "deg", ".1f")
    row("10-90 % burn duration", "burn_10_90_deg", "deg", ".1f")
    row("peak pressure", "p_max_bar", "bar", ".1f")
    row("angle of peak pressure", "theta_pmax_deg", "deg ATDC", ".1f")
    row("max pressure rise rate", "dp_dtheta_max_bar_per_deg", "bar/deg", ".2f")
    row("peak mean gas temperature", "T_max_K", "K", ".0f")
    row("combustion efficiency", "combustion_efficiency", "%", ".1f", 100)


def _gas_exchange_rows(row, head) -> None:
    head("Gas exchange")
    row("volumetric efficiency", "volumetric_efficiency", "%", ".1f", 100)
    row("trapped mass", "trapped_mass_mg", "mg", ".1f")
    row("residual gas fraction", "residual_fraction", "%", ".1f", 100)
    row("blowby (of trapped mass)", "blowby_fraction", "%", ".2f", 100)
    row("exhaust at valve, enthalpy avg", "exhaust_temperature_K", "K", ".0f")


def _motored_rows(s, mode, lines, row, head, loop_line) -> None:
    """A motored case: what the dynamometer absorbs and what the motored trace shows."""
    if mode == "full":
        conv = "settled" if s.get("converged") else "NOT settled"
        lines.append(f"full 720 deg cycle, MOTORED (no fuel burns), {conv} after"
                     f" {int(s.get('cycles_to_converge', 0))} cycles")
        loop_line()
        head("Motoring (absorbed by the dynamometer)")
        row("motoring MEP (= -BMEP)", "motoring_mep_bar", "bar", ".3f")
        row("  FMEP (friction model)", "fmep_bar", "bar", ".3f")
        row("  PMEP (pumping loss)", "pmep_bar", "bar", ".3f")
        row("  gross IMEP", "imep_gross_bar", "bar", ".3f")
        row("net IMEP", "imep_net_bar", "bar", ".3f")
        row("motoring torque (engine)", "motoring_torque_Nm", "N m", ".2f")
        row("motoring power (engine)", "motoring_power_kW", "kW", ".2f")
    else:
        lines.append("closed cycle, IVC to EVO, MOTORED (no fuel burns)")
        loop_line()
        row("closed-cycle IMEP", "imep_closed_bar", "bar", ".3f")
    head("Motored pressure")
    row("peak motored pressure", "p_max_bar", "bar", ".2f")
    row("angle of peak pressure", "theta_pmax_deg", "deg ATDC", ".3f")
    row("loss angle (peak before TDC)", "loss_angle_deg", "deg", ".3f")
    row("polytropic exponent, compression", "polytropic_exponent_compression", "", ".4f")
    row("polytropic exponent, expansion", "polytropic_exponent_expansion", "", ".4f")
    row("peak mean gas temperature", "T_max_K", "K", ".0f")
    row("compression work (IVC to TDC)", "compression_work_J", "J", ".1f")
    row("wall heat (gas to walls)", "wall_heat_J", "J", ".2f")
    if mode == "full":
        _gas_exchange_rows(row, head)
    else:
        row("trapped mass", "trapped_mass_mg", "mg", ".1f")
        row("blowby (of trapped mass)", "blowby_fraction", "%", ".2f", 100)


def energy_balance_lines(eb: dict, unreleased: dict | None = None) -> list[str]:
    """The energy balance as table lines, each term in % of the balance's basis."""
    from .results.motoring import energy_basis

    base_key, base_label = energy_basis(eb)
    base = eb[base_key]
    lines = [f"Energy balance (% of {base_label}, {base:.1f} J)"]

    def pct(v):
        share = 100 * v / base if base else float("nan")
        return 0.0 if abs(share) < 0.005 else share      # no "-0.00"

    for k, v in eb.items():
        if k in (base_key, "closure_fraction"):
            continue
        lines.append(f"  {energy_label(k):<34s}{pct(v):>10.2f}  %")
        if k == "unreleased_chemical_energy_J" and unreleased:
            for kk, lab in UNRELEASED_LABELS:
                lines.append(f"    {'of which ' + lab:<32s}{pct(unreleased[kk]):>10.2f}  %")
    return lines


def write_rows_csv(path: Path, rows: Iterable[dict], columns: list[str]) -> None:
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=columns, extrasaction="ignore", lineterminator="\n")
    w.writeheader()
    for r in rows:
        w.writerow(r)
    atomic_write_text(path, buf.getvalue())
