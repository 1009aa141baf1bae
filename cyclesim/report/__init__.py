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

from ..output import CAUTION, atomic_write_text

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
table.main{font-size:.82em;max-width:100%}
table.main th{font-weight:600;vertical-align:bottom}
table.main td{white-space:nowrap}
table.main td.t{white-space:normal}
table.main tbody tr:nth-child(even){background:#f7f7f7}
figure{margin:1em 0}
figure img{max-width:100%;height:auto;border:1px solid #ddd}
figcaption{font-size:.85em;color:#555}
pre{background:#f6f6f6;padding:.6em;overflow-x:auto;font-size:.85em;white-space:pre-wrap;overflow-wrap:anywhere}
.caution{border:2px solid #b00;background:#fff4f4;padding:.6em 1em;margin:1.5em 0;overflow-wrap:anywhere;
height:auto}
.note{color:#555;font-size:.9em}
.notes{color:#444;font-size:.85em;margin:.2em 0 1em 1.2em;padding:0}
.wrap{overflow-x:auto}
.summary{display:grid;grid-template-columns:minmax(12em,max-content) 1fr;gap:.2em 1.2em;background:#f3f6fa;
border:1px solid #c9d6e3;padding:.7em 1em;margin:.6em 0}
.summary dt{font-weight:600;color:#234}
.summary dd{margin:0;overflow-wrap:anywhere}
.warnings{padding-left:1.2em}
.warnings li{margin:.3em 0}
.warnings .pts{color:#555;font-size:.85em}
details.appendix{margin-top:2em;border-top:2px solid #888;padding-top:.5em}
details.appendix>summary{font-size:1.2em;font-weight:600;cursor:pointer}
@media print{
body{max-width:none;margin:0;padding:0 .5em}
.wrap,pre{overflow:visible}
pre{white-space:pre-wrap;overflow-wrap:anywhere}
table,table.main{font-size:.7em}
details.appendix table{table-layout:fixed;width:100%}
th,td{overflow-wrap:anywhere;word-break:break-word}
table.main td{white-space:normal}
figure{break-inside:avoid}
figure img{max-width:100%}
details.appendix::details-content{content-visibility:visible;display:block}
details.appendix>*{display:block}
.caution{break-inside:avoid}
}
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
    if isinstance(table, dict) and table.get("main"):
        return _main_table_html(table)
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


_TEXT_CELL = ' class="t"'


def _main_table_html(table: dict) -> str:
    """A formatted table (cells already formatted text): no scroll box, notes below it."""
    align = table.get("align") or ["n"] * len(table["columns"])
    out = ['<table class="main">', "<thead><tr>" + "".join(f"<th>{html.escape(str(c))}</th>"
                                                            for c in table["columns"]) + "</tr></thead><tbody>"]
    for r in table["rows"][:MAX_TABLE_ROWS]:
        out.append("<tr>" + "".join(f"<td{_TEXT_CELL if a == 't' else ''}>{html.escape(str(v))}</td>"
                                    for v, a in zip(r, align)) + "</tr>")
    out.append("</tbody></table>")
    if table.get("notes"):
        out.append('<ul class="notes">' + "".join(f"<li>{html.escape(str(n))}</li>" for n in table["notes"]) + "</ul>")
    return "\n".join(out)


def _summary_html(items) -> str:
    return ('<dl class="summary">' + "".join(f"<dt>{html.escape(str(k))}</dt><dd>{html.escape(str(v))}</dd>"
                                             for k, v in items) + "</dl>")


def _warnings_html(groups) -> str:
    out = ['<ul class="warnings">']
    for g in groups:
        pts = g.get("points") or []
        shown = ", ".join(pts[:12]) + (f", ... ({len(pts) - 12} more)" if len(pts) > 12 else "")
        out.append(f"<li><strong>{g['count']} of {g['total']} points:</strong> {html.escape(g['text'])}"
                   + (f'<br><span class="pts">{html.escape(shown)}</span>' if shown else "") + "</li>")
    out.append("</ul>")
    return "".join(out)


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
    main = [s_ for s_ in sections if not s_.get("appendix")]
    appendix = [s_ for s_ in sections if s_.get("appendix")]
    for sec in main:
        parts.extend(_section_html(sec))
    if appendix:
        parts.append('<details class="appendix"><summary>Appendix: inputs and all data</summary>')
        for sec in appendix:
            parts.extend(_section_html(sec))
        parts.append("</details>")
    parts.append(f'<div class="caution"><strong>Caution.</strong> {html.escape(caution)}</div>')
    parts.append('<p class="note">Generated by cyclesim. Figures are model estimates.</p>')
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"


def _section_html(sec: dict) -> list[str]:
    parts = []
    if sec.get("heading"):
        parts.append(f"<h2>{html.escape(sec['heading'])}</h2>")
    if sec.get("summary"):
        parts.append(_summary_html(sec["summary"]))
    text = sec.get("text")
    if text:
        for para in [text] if isinstance(text, str) else text:
            parts.append(f"<p>{html.escape(str(para))}</p>")
    if sec.get("pre"):
        parts.append(f"<pre>{html.escape(sec['pre'])}</pre>")
    if sec.get("table") is not None:
        parts.append(_table_html(sec["table"]))
    if sec.get("warnings"):
        parts.append(_warnings_html(sec["warnings"]))
    for img in sec.get("images", ()):
        parts.append(_image_html(img))
    return parts


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
    from ..output import summary_table
    from .views import run_view

    secs: list[dict] = [{"heading": f"Summary: {result.name}", "summary": run_view(result)}]
    s = result.summary
    plot_sec = None
    if plots and result.trace:
        from ..plots import plot_case

        with tempfile.TemporaryDirectory() as tmp:
            files = plot_case(result, Path(tmp))
            plot_sec = {"heading": "Plots", "images": [(Path(f).stem.replace("_", " "), Path(f).read_bytes())
                                                       for f in files if str(f).endswith(".png")]}
    if plot_sec:
        secs.append(plot_sec)
    secs.append({"heading": "Figures by group", "pre": summary_table(result)})
    from .views import energy_balance_section

    eb = energy_balance_section(s.get("energy_balance"))
    if eb:
        secs.append(eb)
    if result.warnings:
        secs.append({"heading": "Warnings", "text": list(result.warnings)})
    if getattr(result, "notes", None):
        secs.append({"heading": "Notes", "text": list(result.notes)})
    secs.append({"heading": "All figures", "appendix": True,
                 "table": {"columns": ["figure", "value"], "rows": _scalar_rows(s, ("energy_balance",))}})
    secs.append({"heading": "Inputs", "appendix": True, "table": {"columns": ["key", "value"],
                                                                  "rows": [[k, v] for k, v in result.inputs.items()]}})
    if result.references:
        secs.append({"heading": "References of the submodels", "appendix": True, "text": list(result.references)})
    return secs


# --------------------------------------------------------------------------
# A folder
# --------------------------------------------------------------------------


def _csv_comments_and_rows(path: Path) -> tuple[list[str], list[list[str]]]:
    """Comment lines (``#`` at the start, text after it) and the CSV rows of the rest."""
    comments, body = [], []
    with open(path, newline="", encoding="utf-8") as fh:
        for line in fh:
            if line.lstrip().startswith("#"):
                c = line.strip().lstrip("#").strip()
                comments.append(c if len(c) <= 400 else c[:400] + " ...")
            else:
                body.append(line)
    return comments, [r for r in csv.reader(body) if r]


def _num(x: str):
    if re.fullmatch(r"[+-]?\d+", x.strip()):
        return int(x)
    try:
        return float(x) if x.strip() else None
    except ValueError:
        return x


def _csv_section(path: Path) -> dict:
    """A CSV file as a section: its comment lines as text, and the table.

    A crank-angle resolved file (``crank_deg`` among its first two columns) longer
    than :data:`MAX_TABLE_ROWS` is only described: its plots show it.
    """
    comments, rows = _csv_comments_and_rows(path)
    sec: dict = {"heading": path.name}
    if comments:
        sec["text"] = comments
    if not rows:
        sec.setdefault("text", []).append("empty file")
        return sec
    head = rows[0]
    if "crank_deg" in head[:2] and len(rows) - 1 > MAX_TABLE_ROWS:
        sec["text"] = list(comments) + [
            f"crank-angle resolved data, {len(rows) - 1} rows x {len(head)} columns ({', '.join(head[:6])}"
            + (", ..." if len(head) > 6 else "") + "): see the file (and the plots below)"]
        return sec
    sec["table"] = {"columns": head, "rows": [[_num(c) for c in r] for r in rows[1:]]}
    return sec


_SKIP_KEYS = ("caution", "general_caution", "files")
_TEXT_KEYS = ("notes", "warnings", "messages")
_INLINE_HINTS = ("window", "quantile", "validity", "range", "band", "angles", "order", "coef")
"""Lists whose name holds one of these are shown in one cell (a range or a sequence, not columns)."""
_INLINE_MAX = 12


def _scalar(v) -> bool:
    return v is None or isinstance(v, (str, int, float, bool))


def _cell(v):
    if _scalar(v):
        return v
    return json.dumps(v, separators=(", ", ": "))[:200]


def _inline(v: list) -> str:
    shown = ", ".join(_fmt(x) for x in v[:_INLINE_MAX])
    return f"[{shown}" + (f", ... ({len(v)} values)]" if len(v) > _INLINE_MAX else "]")


def _dict_sections(d: dict, title: str, depth: int = 0) -> list[dict]:
    """Sections of one JSON object: scalars, parallel lists and matrices, list of rows, nested objects.

    * scalars (and short or range-like lists) form an item/value table;
    * lists of numbers or strings of equal length (two or more) form one table, one row
      per element, a list of strings (e.g. ``parameters``) as the first column;
    * a list of equal-length lists is a matrix, labelled by a list of strings of its size;
    * a list of objects is a table of rows;
    * nested objects follow under their own heading; ``notes``/``warnings`` as text.
    """
    items = {k: v for k, v in d.items() if k not in _SKIP_KEYS}
    scal, text, groups, mats, row_lists, nested = [], [], {}, [], [], []
    for k, v in items.items():
        if _scalar(v):
            scal.append([k, v])
        elif isinstance(v, dict):
            if v:
                nested.append((k, v))
        elif isinstance(v, list):
            if not v:
                continue
            if k in _TEXT_KEYS and all(_scalar(x) for x in v):
                text.append((k, v))
            elif all(_scalar(x) for x in v):
                if any(h in k for h in _INLINE_HINTS):
                    scal.append([k, _inline(v)])
                else:
                    groups.setdefault(len(v), []).append(k)
            elif all(isinstance(x, dict) for x in v):
                row_lists.append((k, v))
            elif all(isinstance(x, list) and all(_scalar(y) for y in x) for x in v):
                mats.append(k)
            else:
                scal.append([k, _cell(v)])
    labels = {}          # length -> key of a list of strings of that length
    for n, keys in groups.items():
        strs = [k for k in keys if all(isinstance(x, str) for x in items[k])]
        if strs:
            labels[n] = "parameters" if "parameters" in strs else strs[0]
    tables = []
    for n, keys in groups.items():
        if len(keys) < 2:
            k = keys[0]
            if n in labels and labels[n] == k and any(len(items[m]) == n for m in mats):
                continue          # the labels of a matrix
            scal.append([k, _inline(items[k])])
            continue
        lab = labels.get(n)
        cols = ([lab] if lab else []) + [k for k in keys if k != lab]
        tables.append({"heading": f"{title}: " + ", ".join(cols[:4]) + (", ..." if len(cols) > 4 else ""),
                       "table": {"columns": cols, "rows": [[items[c][i] for c in cols] for i in range(n)]}})
    for k, v in row_lists:
        cols: list = []
        for r in v:
            for c in r:
                if c not in cols:
                    cols.append(c)
        tables.append({"heading": f"{title}: {k}",
                       "table": {"columns": cols, "rows": [[_cell(r.get(c)) for c in cols] for r in v]}})
    for k in mats:
        m = items[k]
        widths = {len(r) for r in m}
        lab = labels.get(len(m))
        w = widths.pop() if len(widths) == 1 else None
        if lab and w == len(m):            # a labelled square matrix (correlation, covariance)
            cols = [""] + list(items[lab])
            rows = [[items[lab][i]] + list(r) for i, r in enumerate(m)]
        elif w is not None and labels.get(w):     # rows of values of the labelled items (samples)
            cols, rows = list(items[labels[w]]), [list(r) for r in m]
        else:
            cols = [str(j + 1) for j in range(max(len(r) for r in m))]
            rows = [list(r) for r in m]
        tables.append({"heading": f"{title}: {k}", "table": {"columns": cols, "rows": rows}})
    secs = []
    if scal:
        secs.append({"heading": title, "table": {"columns": ["item", "value"], "rows": scal}})
    secs += tables
    for k, v in nested:
        secs += _dict_sections(v, f"{title}: {k}", depth + 1)
    for k, v in text:
        secs.append({"heading": f"{title}: {k}", "text": [str(x) for x in v]})
    return secs


def _json_sections(path: Path) -> list[dict]:
    data = json.loads(path.read_text(encoding="utf-8"))
    secs = []
    if not isinstance(data, dict):
        if isinstance(data, list) and data and all(isinstance(x, dict) for x in data):
            return _dict_sections({"rows": data}, path.name)
        return secs
    if "summary" in data and isinstance(data["summary"], dict):  # a run's summary.json
        s = data["summary"]
        secs.extend(_run_table_sections(data))
        secs.append({"heading": f"{path.name}: figures",
                     "table": {"columns": ["figure", "value"], "rows": _scalar_rows(s, ("energy_balance",))}})
        if isinstance(s.get("energy_balance"), dict):
            secs.append({"heading": "Energy balance",
                         "table": {"columns": ["term", "J"], "rows": _scalar_rows(s["energy_balance"])}})
        if data.get("warnings"):
            secs.append({"heading": "Warnings", "text": data["warnings"]})
        if isinstance(data.get("inputs"), dict):
            secs.append({"heading": "Inputs", "table": {"columns": ["key", "value"],
                                                        "rows": [[k, v] for k, v in data["inputs"].items()]}})
        if data.get("references"):
            secs.append({"heading": "References", "text": list(data["references"])})
        return secs
    return _dict_sections(data, path.name)


def _run_table_sections(data: dict) -> list[dict]:
    """The printed summary table of a run, rebuilt from its summary.json (none if it cannot be)."""
    from ..api import CaseResult
    from ..output import summary_table

    try:
        res = CaseResult(name=str(data.get("name", "")), inputs=dict(data["inputs"]), summary=dict(data["summary"]),
                         warnings=list(data.get("warnings", [])), models=dict(data.get("models", {})),
                         references=list(data.get("references", [])), cycle_loop=str(data.get("cycle_loop", "")))
        return [{"heading": "Summary", "pre": summary_table(res)}]
    except (KeyError, TypeError, ValueError):
        return []


def report_for_study(folder) -> list[dict]:
    """Sections for a run or study folder: its JSON figures, CSV tables and PNG plots."""
    folder = Path(folder)
    if not folder.is_dir():
        from ..errors import CyclesimError

        raise CyclesimError(f"report: {folder} is not a folder")
    from .views import view_for_folder

    view = view_for_folder(folder)
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
        try:
            secs.append(_csv_section(f))
        except (ValueError, OSError, csv.Error) as exc:
            secs.append({"heading": f.name, "text": f"could not read: {exc}"})
    pngs = sorted(folder.glob("*.png"))
    if view is not None:
        shown = {Path(p).name for s_ in view for _, p in s_.get("images", ())}
        rest = [p for p in pngs if p.name not in shown]
        if rest:
            view.append({"heading": "Other plots", "images": [(p.stem.replace("_", " "), p) for p in rest]})
        return view + [dict(s_, appendix=True) for s_ in secs]
    if pngs:
        secs.append({"heading": "Plots", "images": [(p.stem.replace("_", " "), p) for p in pngs]})
    if not secs:
        from ..errors import CyclesimError

        raise CyclesimError(f"report: no results in {folder} (no JSON, CSV or PNG files)")
    return secs
