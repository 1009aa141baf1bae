"""Self-contained HTML reports of a run or of any study folder.

>>> from cyclesim.report import write_report, report_for_run, report_for_study
>>> write_report("run.html", "demo", report_for_run(cyclesim.run("demo")))
>>> write_report("losses.html", "loss breakdown", report_for_study("losses/"))

One HTML page: inline CSS, tables as HTML, PNG plots embedded as base64
data URIs, no scripts and no external resources, so the file can be mailed,
archived or opened offline.  Every report ends with the caution text.

A section is a dict with any of ``heading`` (str), ``text`` (str or list of
str paragraphs), ``pre`` (preformatted text), ``table`` (``{"columns": [...],
"rows": [[...], ...]}`` or a list of dict rows) and ``images`` (list of PNG
paths or ``(caption, path)`` pairs, or ``(caption, png_bytes)``).
"""

from __future__ import annotations

import base64
import csv
import html
import json
import math
import re
import tempfile
from pathlib import Path
from typing import Any, Iterable, Sequence

from .output import CAUTION, atomic_write_text

__all__ = ["write_report", "report_for_run", "report_for_study", "render_report", "MAX_TABLE_ROWS"]

MAX_TABLE_ROWS = 400
"""Rows shown of a long table (the rest are counted, not shown)."""

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,sans-serif;margin:2em auto;max-width:1100px;
color:#222;line-height:1.4;padding:0 1em}
h1{font-size:1.5em;border-bottom:2px solid #444;padding-bottom:.2em}
h2{font-size:1.2em;margin-top:1.6em;border-bottom:1px solid #bbb}
table{border-collapse:collapse;margin:.6em 0;font-size:.85em}
th,td{border:1px solid #ccc;padding:.25em .5em;text-align:right}
th{background:#eee;text-align:center}
td.t{text-align:left}
figure{margin:1em 0}
figure img{max-width:100%;height:auto;border:1px solid #ddd}
figcaption{font-size:.85em;color:#555}
pre{background:#f6f6f6;padding:.6em;overflow-x:auto;font-size:.85em}
.caution{border:2px solid #b00;background:#fff4f4;padding:.6em 1em;margin:1.5em 0}
.note{color:#555;font-size:.9em}
.wrap{overflow-x:auto}
"""


def _fmt(v: Any) -> str:
    if v is None:
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        if not math.isfinite(v):
            return ""
        a = abs(v)
        if a != 0 and (a >= 1e6 or a < 1e-3):
            return f"{v:.4g}"
        return f"{v:.4f}".rstrip("0").rstrip(".") if a < 10 else f"{v:.2f}"
    return str(v)


def _table_html(table) -> str:
    if isinstance(table, dict):
        cols, rows = list(table["columns"]), [list(r) for r in table["rows"]]
    else:
        rows_d = list(table)
        cols = []
        for r in rows_d:
            for k in r:
                if k not in cols:
                    cols.append(k)
        rows = [[r.get(c) for c in cols] for r in rows_d]
    out = ['<div class="wrap"><table>', "<thead><tr>" + "".join(f"<th>{html.escape(str(c))}</th>" for c in cols)
           + "</tr></thead><tbody>"]
    for r in rows[:MAX_TABLE_ROWS]:
        cells = []
        for v in r:
            cls = "" if isinstance(v, (int, float)) and not isinstance(v, bool) else ' class="t"'
            cells.append(f"<td{cls}>{html.escape(_fmt(v))}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</tbody></table></div>")
    if len(rows) > MAX_TABLE_ROWS:
        out.append(f'<p class="note">{len(rows) - MAX_TABLE_ROWS} more rows in the data file.</p>')
    return "\n".join(out)


def _image_html(item) -> str:
    if isinstance(item, (tuple, list)):
        caption, src = item
    else:
        caption, src = Path(item).name, item
    data = src if isinstance(src, (bytes, bytearray)) else Path(src).read_bytes()
    b64 = base64.b64encode(data).decode("ascii")
    return (f'<figure><img alt="{html.escape(str(caption))}" src="data:image/png;base64,{b64}">'
            f"<figcaption>{html.escape(str(caption))}</figcaption></figure>")


def render_report(title: str, sections: Sequence[dict], caution: str = CAUTION) -> str:
    """The HTML text of a report (see the module notes for the sections)."""
    parts = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
             f"<title>{html.escape(title)}</title>", f"<style>{_CSS}</style></head><body>",
             f"<h1>{html.escape(title)}</h1>",
             f'<div class="caution"><strong>Caution.</strong> {html.escape(caution)}</div>']
    for sec in sections:
        if sec.get("heading"):
            parts.append(f"<h2>{html.escape(sec['heading'])}</h2>")
        text = sec.get("text")
        if text:
            for para in [text] if isinstance(text, str) else text:
                parts.append(f"<p>{html.escape(str(para))}</p>")
        if sec.get("pre"):
            parts.append(f"<pre>{html.escape(sec['pre'])}</pre>")
        if sec.get("table") is not None:
            parts.append(_table_html(sec["table"]))
        for img in sec.get("images", ()):
            parts.append(_image_html(img))
    parts.append(f'<div class="caution"><strong>Caution.</strong> {html.escape(caution)}</div>')
    parts.append('<p class="note">Generated by cyclesim. Figures are model estimates.</p>')
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"


def write_report(path, title: str, sections: Sequence[dict], caution: str = CAUTION) -> Path:
    """Write one self-contained HTML page (atomically) and return its path."""
    path = Path(path)
    atomic_write_text(path, render_report(title, sections, caution))
    return path


# --------------------------------------------------------------------------
# A run
# --------------------------------------------------------------------------


def _scalar_rows(d: dict, skip: Iterable[str] = ()) -> list[list]:
    rows = []
    for k, v in d.items():
        if k in skip or isinstance(v, (dict, list)):
            continue
        rows.append([k, v])
    return rows


def report_for_run(result, plots: bool = True) -> list[dict]:
    """Sections for one simulated case (a :class:`cyclesim.api.CaseResult`)."""
    from .output import summary_table

    secs: list[dict] = [{"heading": "Summary", "pre": summary_table(result)}]
    s = result.summary
    secs.append({"heading": "All figures", "table": {"columns": ["figure", "value"],
                                                     "rows": _scalar_rows(s, ("energy_balance",))}})
    eb = s.get("energy_balance")
    if isinstance(eb, dict):
        base = eb.get("fuel_energy_J") or eb.get("chemical_energy_released_J") or 1.0
        secs.append({"heading": "Energy balance", "table": {
            "columns": ["term", "J", "% of fuel energy"],
            "rows": [[k, v, 100 * v / base] for k, v in eb.items() if k != "closure_fraction"]}})
    if result.warnings:
        secs.append({"heading": "Warnings", "text": list(result.warnings)})
    if plots and result.trace:
        from .plots import plot_case

        with tempfile.TemporaryDirectory() as tmp:
            files = plot_case(result, Path(tmp))
            secs.append({"heading": "Plots", "images": [(Path(f).stem.replace("_", " "), Path(f).read_bytes())
                                                        for f in files if str(f).endswith(".png")]})
    secs.append({"heading": "Inputs", "table": {"columns": ["key", "value"],
                                                "rows": [[k, v] for k, v in result.inputs.items()]}})
    if result.references:
        secs.append({"heading": "References of the submodels", "text": list(result.references)})
    return secs


# --------------------------------------------------------------------------
# A folder
# --------------------------------------------------------------------------


def _csv_table(path: Path) -> dict:
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    if not rows:
        return {"columns": [], "rows": []}

    def num(x):
        if re.fullmatch(r"[+-]?\d+", x.strip()):
            return int(x)
        try:
            return float(x) if x.strip() else None
        except ValueError:
            return x

    return {"columns": rows[0], "rows": [[num(c) for c in r] for r in rows[1:]]}


def _json_sections(path: Path) -> list[dict]:
    data = json.loads(path.read_text(encoding="utf-8"))
    secs = []
    if not isinstance(data, dict):
        return secs
    if "summary" in data and isinstance(data["summary"], dict):  # a run's summary.json
        s = data["summary"]
        secs.append({"heading": f"{path.name}: figures",
                     "table": {"columns": ["figure", "value"], "rows": _scalar_rows(s, ("energy_balance",))}})
        if isinstance(s.get("energy_balance"), dict):
            secs.append({"heading": "Energy balance",
                         "table": {"columns": ["term", "J"], "rows": _scalar_rows(s["energy_balance"])}})
        if data.get("warnings"):
            secs.append({"heading": "Warnings", "text": data["warnings"]})
        return secs
    scal = _scalar_rows(data, ("caution", "general_caution"))
    if scal:
        secs.append({"heading": f"{path.name}", "table": {"columns": ["item", "value"], "rows": scal}})
    for k, v in data.items():
        if isinstance(v, dict) and v and all(not isinstance(x, (dict, list)) for x in v.values()):
            secs.append({"heading": f"{path.name}: {k}", "table": {"columns": ["item", "value"],
                                                                  "rows": [[kk, vv] for kk, vv in v.items()]}})
    for key in ("notes", "warnings"):
        if isinstance(data.get(key), list) and data[key]:
            secs.append({"heading": f"{path.name}: {key}", "text": [str(x) for x in data[key]]})
    return secs


def report_for_study(folder) -> list[dict]:
    """Sections for a run or study folder: its JSON figures, CSV tables and PNG plots."""
    folder = Path(folder)
    if not folder.is_dir():
        from .errors import CyclesimError

        raise CyclesimError(f"report: {folder} is not a folder")
    secs: list[dict] = []
    for f in sorted(folder.glob("*.json")):
        try:
            secs.extend(_json_sections(f))
        except (ValueError, OSError) as exc:
            secs.append({"heading": f.name, "text": f"could not read: {exc}"})
    for f in sorted(folder.glob("*.csv")):
        if f.name == "trace.csv":
            secs.append({"heading": f.name, "text": "crank-angle trace: see the file (plotted below)"})
            continue
        secs.append({"heading": f.name, "table": _csv_table(f)})
    pngs = sorted(folder.glob("*.png"))
    if pngs:
        secs.append({"heading": "Plots", "images": [(p.stem.replace("_", " "), p) for p in pngs]})
    if not secs:
        secs.append({"heading": "Empty", "text": f"no JSON, CSV or PNG files in {folder}"})
    return secs
