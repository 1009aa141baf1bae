"""Engineering views of a run, a spark study and a map for the HTML report (:mod:`cyclesim.report`).

Each view gives, in this order: a summary block (the few figures that answer the study's question,
in words and numbers with units), the plots, formatted tables (human headers with units, one
number format per column, long text as notes below the table), the warnings grouped by kind, and
appendix sections (inputs and raw data) that the page folds away.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

__all__ = ["view_for_folder", "run_view", "table_spec", "FULL_LOAD_TABLE", "PART_LOAD_TABLE", "SPARK_TABLE"]


def _num(v, spec, scale=1.0):
    if v is None or isinstance(v, bool):
        return "" if v is None else ("yes" if v else "no")
    if isinstance(v, str):
        return v
    v = float(v)
    if not math.isfinite(v):
        return ""
    return format(v * scale, spec)


def table_spec(rows, spec, notes=()) -> dict:
    """A formatted main table: ``spec`` is a list of (key, header with unit, format, scale)."""
    from ..studies.map_console import knock_margin_text

    def cell(r, k, f, sc):
        return (knock_margin_text(r) or "") if k == "knock_margin_deg" else _num(r.get(k), f, sc)

    return {"columns": [h for _, h, _, _ in spec],
            "rows": [[cell(r, k, f, sc) for k, _, f, sc in spec] for r in rows],
            "align": ["t" if f == "s" else "n" for _, _, f, _ in spec],
            "notes": list(notes), "main": True}


FULL_LOAD_TABLE = [("speed_rpm", "speed [rpm]", ".0f", 1), ("spark_advance_deg", "spark [deg BTDC]", ".1f", 1),
                   ("spark_limit", "spark set by", "s", 1), ("knock_margin_deg", "knock margin [deg]", ".1f", 1),
                   ("lambda", "lambda [-]", ".3f", 1), ("intake_pressure_bar", "intake [bar]", ".2f", 1),
                   ("exhaust_temperature_K", "exhaust T [K]", ".0f", 1), ("bmep_bar", "BMEP [bar]", ".2f", 1),
                   ("torque_Nm", "torque [N m]", ".1f", 1), ("power_kW", "power [kW]", ".1f", 1),
                   ("bsfc_g_per_kWh", "BSFC [g/kWh]", ".0f", 1), ("volumetric_efficiency", "vol. eff. [%]", ".1f", 100)]
PART_LOAD_TABLE = [("speed_rpm", "speed [rpm]", ".0f", 1), ("intake_pressure_bar", "intake [bar]", ".2f", 1),
                   ("spark_advance_deg", "spark [deg BTDC]", ".1f", 1), ("spark_limit", "spark set by", "s", 1),
                   ("knock_margin_deg", "knock margin [deg]", ".1f", 1), ("lambda", "lambda [-]", ".3f", 1),
                   ("bmep_bar", "BMEP [bar]", ".2f", 1), ("bsfc_g_per_kWh", "BSFC [g/kWh]", ".0f", 1),
                   ("eta_brake", "brake eff. [%]", ".1f", 100), ("exhaust_temperature_K", "exhaust T [K]", ".0f", 1),
                   ("residual_fraction", "residual [%]", ".1f", 100)]
BOOST_TABLE = [("speed_rpm", "speed [rpm]", ".0f", 1), ("intake_pressure_bar", "boost [bar]", ".3f", 1),
               ("boost_limit", "what binds", "s", 1), ("intake_temperature_K", "intake T [K]", ".0f", 1),
               ("wastegate_share", "wastegate [%]", ".0f", 100), ("eta_compressor", "compressor eff. [-]", ".3f", 1),
               ("surge_margin", "surge margin [%]", ".0f", 100), ("choke_margin", "choke margin [%]", ".0f", 100),
               ("turbocharger_speed_rpm", "turbo speed [rpm]", ".0f", 1)]
SPARK_TABLE = [("burn.spark_advance_deg", "spark [deg BTDC]", ".1f", 1), ("torque_Nm", "torque [N m]", ".2f", 1),
               ("torque_loss_pct", "torque loss [%]", ".2f", 1), ("ca50_deg", "CA50 [deg ATDC]", ".1f", 1),
               ("p_max_bar", "peak pressure [bar]", ".1f", 1), ("theta_pmax_deg", "at [deg ATDC]", ".1f", 1),
               ("knock_onset_deg", "knock onset [deg ATDC]", ".1f", 1),
               ("knock_unburned_fraction_at_onset", "unburned at onset [%]", ".0f", 100),
               ("exhaust_temperature_K", "exhaust T [K]", ".0f", 1),
               ("burn_0_10_deg", "0-10 % burn [deg]", ".1f", 1), ("burn_10_90_deg", "10-90 % burn [deg]", ".1f", 1),
               ("no_ppm_wet", "NO [ppm wet]", ".0f", 1), ("no_g_per_kWh", "NO [g/kWh]", ".2f", 1)]
BURN_NO_TABLE = [("burn_0_10_deg", "0-10 % burn [deg]", ".1f", 1), ("burn_10_90_deg", "10-90 % burn [deg]", ".1f", 1),
                 ("no_ppm_wet", "NO [ppm wet]", ".0f", 1), ("no_g_per_kWh", "NO [g/kWh]", ".2f", 1)]
"""Columns a map's table adds where some point has them (NO with an emissions model)."""


def _with_burn_no(rows, spec):
    def has(k):
        return any(isinstance(r.get(k), (int, float)) and math.isfinite(r[k]) for r in rows)
    return list(spec) + [s for s in BURN_NO_TABLE if has(s[0])]


def _images(folder: Path, names):
    out = []
    for name, caption in names:
        p = folder / name
        if p.is_file():
            out.append((caption, p))
    return out


def _warning_groups(groups, total):
    return [{"count": g["count"], "total": total, "text": g["example"], "points": list(g["points"])} for g in groups]


def _map_summary(fl, pm) -> list:
    items = []
    if fl:
        rows = [r for r in fl["rows"] if r.get("torque_Nm") is not None]
        if rows:
            t = max(rows, key=lambda r: r["torque_Nm"])
            p = max(rows, key=lambda r: r["power_kW"])
            items.append(("peak torque", f"{t['torque_Nm']:.1f} N m at {t['speed_rpm']:.0f} rpm"
                          f" (BMEP {t['bmep_bar']:.2f} bar)"))
            items.append(("peak power", f"{p['power_kW']:.1f} kW at {p['speed_rpm']:.0f} rpm"))
            by = {}
            for r in rows:
                by.setdefault(r.get("spark_limit") or "-", []).append(f"{r['speed_rpm']:.0f}")
            items.append(("full-load spark set by", "; ".join(f"{k} at {', '.join(v)} rpm" for k, v in by.items())))
            rich = [r for r in rows if r.get("enriched")]
            if rich:
                lo = min(rich, key=lambda r: r["lambda"])
                items.append(("enrichment", f"at {len(rich)} of {len(rows)} speeds, richest lambda {lo['lambda']:.3f}"
                              f" at {lo['speed_rpm']:.0f} rpm (exhaust limit {fl.get('exhaust_limit_K'):g} K)"))
            if any("boost_limit" in r for r in rows):
                short = [r for r in rows if r.get("boost_limit") != "target reached"]
                items.append(("boost", "target reached at every speed" if not short else
                              "; ".join(f"{r['speed_rpm']:.0f} rpm: {r['boost_limit']}" for r in short)))
    if pm:
        rows = [r for r in pm["rows"] if r.get("bsfc_g_per_kWh") is not None and r.get("in_contours", True)
                and math.isfinite(r["bsfc_g_per_kWh"])]
        if rows:
            b = min(rows, key=lambda r: r["bsfc_g_per_kWh"])
            items.append(("best BSFC on the map", f"{b['bsfc_g_per_kWh']:.0f} g/kWh at {b['speed_rpm']:.0f} rpm,"
                          f" BMEP {b['bmep_bar']:.1f} bar"))
            kl = sum(1 for r in pm["rows"] if r.get("spark_limit") == "knock")
            items.append(("part-load spark", f"{kl} of {len(pm['rows'])} points knock-limited, the rest"
                          " MBT or as noted"))
    return items


def _map_view(folder: Path) -> list[dict]:
    fl = json.loads((folder / "full_load.json").read_text()) if (folder / "full_load.json").is_file() else None
    pm = (json.loads((folder / "part_load_map.json").read_text())
          if (folder / "part_load_map.json").is_file() else None)
    base = (fl or pm).get("base_config", "")
    secs = [{"heading": f"Summary: {base} maps", "summary": _map_summary(fl, pm)}]
    secs.append({"heading": "Plots", "images": _images(folder, [
        ("full_load.png", "full-load torque and power"),
        ("full_load_spark_mixture.png", "full-load spark, lambda and exhaust temperature"),
        ("full_load_volumetric_efficiency.png", "full-load volumetric efficiency"),
        ("compressor_map.png", "compressor map with the full-load operating line"),
        ("map_bsfc.png", "BSFC islands"), ("map_spark.png", "spark advance and what set it"),
        ("map_knock_margin.png", "knock margin"), ("map_exhaust_temperature.png", "exhaust temperature"),
        ("map_eta_brake.png", "brake efficiency"), ("map_bmep.png", "BMEP against intake pressure"),
        ("map_no.png", "NO [ppm]"), ("map_no_g_per_kWh.png", "brake-specific NO"),
        ("map_no_torque.png", "NO against torque")])})
    for data, title, spec in ((fl, "Full-load curve", FULL_LOAD_TABLE), (pm, "Part-load map", PART_LOAD_TABLE)):
        if not data:
            continue
        secs.append({"heading": title, "table": table_spec(data["rows"], _with_burn_no(data["rows"], spec),
                                                           data.get("notes", ()))})
        if data is fl and any("boost_limit" in r for r in data["rows"]):
            secs.append({"heading": "Turbocharger at each speed", "table": table_spec(data["rows"], BOOST_TABLE)})
        if data.get("warnings_grouped"):
            secs.append({"heading": f"{title}: warnings",
                         "warnings": _warning_groups(data["warnings_grouped"], len(data["rows"]))})
    return secs


def _spark_view(folder: Path) -> list[dict]:
    st = json.loads((folder / "spark_study.json").read_text())

    def deg(v, unit="deg BTDC"):
        return "not found" if v is None else f"{v:.1f} {unit}"

    items = [("MBT", deg(st.get("mbt_deg"))),
             ("knock-limited advance", deg(st.get("knock_limited_deg")) if st.get("knock_status") != "no model"
              else "not estimated (no knock model)"),
             ("recommended advance", f"{deg(st.get('recommended_deg'))}, set by {st.get('recommended_by') or '-'}"),
             ("CA50 at MBT", deg(st.get("ca50_at_mbt_deg"), "deg ATDC")),
             ("peak pressure at MBT", "-" if st.get("p_max_at_mbt_bar") is None else f"{st['p_max_at_mbt_bar']:.1f} bar")]
    secs = [{"heading": f"Summary: spark study of {st.get('base_config', '')}", "summary": items}]
    secs.append({"heading": "Plots", "images": _images(folder, [
        ("spark_torque.png", "torque against spark advance"), ("spark_peak_pressure.png", "peak pressure and its angle"),
        ("spark_ca50.png", "CA50 against spark advance"), ("spark_pressure_traces.png", "pressure traces"),
        ("spark_knock_onset.png", "knock onset and unburned charge at onset"),
        ("spark_burn_no.png", "burn angles and NO against spark advance")])})
    sweep_json = folder / "sweep.json"
    if sweep_json.is_file():
        rows = json.loads(sweep_json.read_text()).get("rows", [])
        spec = [s for s in SPARK_TABLE if any(s[0] in r for r in rows)]
        loss = dict(zip(st.get("advances_deg", []), st.get("torque_loss_pct", [])))
        for r in rows:
            r.setdefault("torque_loss_pct", loss.get(r.get("burn.spark_advance_deg")))
        secs.append({"heading": "Spark sweep", "table": table_spec(rows, spec, st.get("notes", ()))})
    if st.get("warnings_grouped"):
        secs.append({"heading": "Spark sweep: warnings",
                     "warnings": _warning_groups(st["warnings_grouped"], len(st.get("advances_deg", [])))})
    return secs


def view_for_folder(folder: Path):
    """The engineering view of a map or spark-study folder (None for other folders)."""
    folder = Path(folder)
    if (folder / "full_load.json").is_file() or (folder / "part_load_map.json").is_file():
        return _map_view(folder)
    if (folder / "spark_study.json").is_file():
        return _spark_view(folder)
    if (folder / "summary.json").is_file():
        return _run_folder_view(folder)
    return None


def _run_folder_view(folder: Path):
    """A run folder (``cyclesim run --out``): the run's summary block and its plots (None where
    summary.json is not a run's)."""
    from types import SimpleNamespace

    try:
        data = json.loads((folder / "summary.json").read_text())
        run = SimpleNamespace(summary=dict(data["summary"]), inputs=dict(data["inputs"]))
    except (ValueError, OSError, KeyError, TypeError):
        return None
    secs = [{"heading": f"Summary: {data.get('name', folder.name)}", "summary": run_view(run)}]
    imgs = _images(folder, [("pressure.png", "cylinder pressure"), ("temperature.png", "gas temperature"),
                            ("pv.png", "p-V diagram"), ("logp_logv.png", "log p - log V"),
                            ("heat_release.png", "heat release"), ("energy_balance.png", "energy balance"),
                            ("valves.png", "valve lifts")])
    if imgs:
        secs.append({"heading": "Plots", "images": imgs})
    eb = energy_balance_section(run.summary.get("energy_balance"))
    if eb:
        secs.append(eb)
    notes = [n for n in data.get("notes", []) if n]
    if data.get("warnings"):
        secs.append({"heading": "Warnings", "text": list(data["warnings"])})
    if notes:
        secs.append({"heading": "Notes", "text": notes})
    return secs


RUN_SUMMARY = [("imep_net_bar", "net IMEP", "bar", ".2f", 1), ("bmep_bar", "BMEP", "bar", ".2f", 1),
               ("torque_Nm", "brake torque", "N m", ".1f", 1), ("power_kW", "brake power", "kW", ".1f", 1),
               ("bsfc_g_per_kWh", "BSFC", "g/kWh", ".0f", 1), ("eta_brake", "brake efficiency", "%", ".1f", 100),
               ("eta_indicated_gross", "gross indicated efficiency", "%", ".1f", 100),
               ("imep_closed_bar", "closed-cycle IMEP", "bar", ".2f", 1),
               ("p_max_bar", "peak pressure", "bar", ".1f", 1), ("ca50_deg", "CA50", "deg ATDC", ".1f", 1),
               ("burn_0_10_deg", "0-10 % burn (spark to CA10)", "deg", ".1f", 1),
               ("burn_10_90_deg", "10-90 % burn", "deg", ".1f", 1),
               ("no_ppm_wet", "NO (wet)", "ppm", ".0f", 1), ("no_g_per_kWh", "brake-specific NO", "g/kWh", ".2f", 1),
               ("exhaust_temperature_K", "exhaust temperature", "K", ".0f", 1),
               ("volumetric_efficiency", "volumetric efficiency", "%", ".1f", 100)]


MOTORED_SUMMARY = [("motoring_mep_bar", "motoring MEP (absorbed)", "bar", ".2f", 1),
                   ("fmep_bar", "FMEP (friction model)", "bar", ".2f", 1), ("pmep_bar", "PMEP (pumping loss)", "bar", ".2f", 1),
                   ("motoring_torque_Nm", "motoring torque", "N m", ".1f", 1),
                   ("motoring_power_kW", "motoring power", "kW", ".1f", 1),
                   ("p_max_bar", "peak motored pressure", "bar", ".1f", 1),
                   ("loss_angle_deg", "loss angle (peak before TDC)", "deg", ".2f", 1),
                   ("volumetric_efficiency", "volumetric efficiency", "%", ".1f", 100)]


def run_view(result) -> list:
    """Summary items of one run: (label, value with unit); a motored run (no fuel burns) gives what
    the dynamometer absorbs instead of brake figures."""
    s = result.summary
    motored = s.get("mode") == "motored"
    items = [("operating point", f"{result.inputs.get('operating.speed_rpm', 0):g} rpm, intake"
              f" {result.inputs.get('operating.intake_pressure_bar', 0):g} bar, lambda"
              f" {result.inputs.get('operating.lambda', 1):g}, {result.inputs.get('simulation.mode', 'full')} cycle")]
    if motored:
        items.append(("motored", "no fuel burns (fuel cut or a burn that never starts); the dynamometer"
                                 " drives the engine, combustion figures are null"))
    for k, label, unit, spec, sc in (MOTORED_SUMMARY if motored else RUN_SUMMARY):
        v = s.get(k)
        if isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v):
            items.append((label, f"{format(v * sc, spec)} {unit}"))
    if "knock_onset_deg" in s and not motored:
        on = s["knock_onset_deg"]
        items.append(("knock (end gas)", "none predicted" if on is None or not math.isfinite(on)
                      else f"onset at {on:.1f} deg ATDC"))
    return items


def energy_balance_section(eb) -> dict | None:
    """The formatted energy-balance table of a run's summary (None where it has none)."""
    if not isinstance(eb, dict):
        return None
    from ..results.motoring import energy_basis

    base_key, base_label = energy_basis(eb)
    base = eb[base_key] or 1.0
    terms = [(k, v) for k, v in eb.items() if k != "closure_fraction" and isinstance(v, (int, float))]
    return {"heading": "Energy balance", "table": {
        "main": True, "align": ["t", "n", "n"],
        "columns": ["term", "energy [J]", f"share of the {base_label} [%]"],
        "rows": [[k.replace("_J", "").replace("_", " "), f"{v:.2f}", f"{100 * v / base:.1f}"] for k, v in terms],
        "notes": ([f"closure: {100 * eb['closure_fraction']:.3f} % of the {base_label} unaccounted for"]
                  if isinstance(eb.get("closure_fraction"), (int, float)) else [])}}
