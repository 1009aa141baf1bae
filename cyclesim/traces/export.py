"""Files of a measured trace set: CSV (long and wide), NumPy .npz, ASAM MDF 4; ground truth.

Every file states its units and the crank-angle convention (0 = firing TDC,
negative before it, one cycle -360..360).  CSV files start with comment lines
``# key: value`` (the first one ``# units: ...; crank angle: ...``), which the
reader skips and keeps as metadata.  Pressures are written in bar, kept in Pa
in memory.  All writes are atomic.

ASAM MDF 4 needs the optional package ``asammdf`` (``pip install -e ".[mdf]" (from the project folder)``).
"""

from __future__ import annotations

import csv
import io
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np

from ..errors import CyclesimError, InputFileError
from ..textsafe import excerpt
from ..results.atomic_files import atomic_write_bytes, atomic_write_text
from ..output import plain as _plain

__all__ = [
    "TraceSet", "CRANK_CONVENTION", "write_csv_long", "write_csv_wide", "write_npz", "write_mdf",
    "write_trace_set", "write_truth", "read_trace",
]

BAR = 1e5
CRANK_CONVENTION = "degrees, 0 = firing TDC, negative before it, one cycle -360..360"
UNITS_LONG = "cycle -, crank_deg deg, pressure_bar bar, intake_pressure_bar bar"
UNITS_WIDE = "crank_deg deg, cycle_<k>_pressure_bar bar, cycle_<k>_intake_pressure_bar bar"


@dataclass
class TraceSet:
    """A measured set of cycles on one crank grid.

    Attributes
    ----------
    theta : ndarray (n,)
        Crank angle [deg] (0 = firing TDC).
    pressure_pa : ndarray (n_cycles, n)
        Measured cylinder pressure signal [Pa].
    intake_pa : ndarray (n_cycles, n) or None
        Measured intake-manifold pressure [Pa].
    speed_rpm : float
        Engine speed [rpm].
    meta : dict
        Free metadata (JSON-serialisable).
    """

    theta: np.ndarray
    pressure_pa: np.ndarray
    intake_pa: np.ndarray | None = None
    speed_rpm: float = float("nan")
    meta: dict = field(default_factory=dict)

    def __post_init__(self):
        self.theta = np.asarray(self.theta, float)
        self.pressure_pa = np.atleast_2d(np.asarray(self.pressure_pa, float))
        if self.intake_pa is not None:
            self.intake_pa = np.atleast_2d(np.asarray(self.intake_pa, float))
            if self.intake_pa.shape != self.pressure_pa.shape:
                raise CyclesimError(
                    f"intake pressure shape {self.intake_pa.shape} differs from cylinder pressure {self.pressure_pa.shape}"
                )
        if self.pressure_pa.shape[1] != self.theta.size:
            raise CyclesimError(
                f"pressure has {self.pressure_pa.shape[1]} samples per cycle, crank grid {self.theta.size}"
            )
        self.speed_rpm = float(self.speed_rpm)

    @property
    def n_cycles(self) -> int:
        return self.pressure_pa.shape[0]


def _header(units: str, ts: TraceSet) -> str:
    lines = [f"# units: {units}; crank angle: {CRANK_CONVENTION}", f"# speed_rpm: {ts.speed_rpm:.10g}"]
    if ts.meta:
        lines.append("# meta: " + json.dumps(_plain(ts.meta), separators=(",", ":")))
    return "\n".join(lines) + "\n"




def _g(v) -> str:
    return f"{float(v):.10g}"


def write_csv_long(path, ts: TraceSet) -> Path:
    """One row per sample: cycle, crank_deg, pressure_bar[, intake_pressure_bar]."""
    buf = io.StringIO()
    buf.write(_header(UNITS_LONG, ts))
    cols = ["cycle", "crank_deg", "pressure_bar"] + (["intake_pressure_bar"] if ts.intake_pa is not None else [])
    buf.write(",".join(cols) + "\n")
    # one %-format per cycle (the angles are the same in every cycle): the numbers as _g writes them
    per = ",%.10g" * (len(cols) - 2)
    cycle_fmt = "".join(f"%d,{_g(th)}{per}\n" for th in ts.theta)
    n = len(ts.theta)
    for k in range(ts.n_cycles):
        vals = [np.full(n, k + 1.0), ts.pressure_pa[k] / BAR]
        if ts.intake_pa is not None:
            vals.append(ts.intake_pa[k] / BAR)
        buf.write(cycle_fmt % tuple(np.column_stack(vals).ravel().tolist()))
    atomic_write_text(Path(path), buf.getvalue())
    return Path(path)


def write_csv_wide(path, ts: TraceSet) -> Path:
    """crank_deg, then one pressure column per cycle (and one intake column per cycle)."""
    buf = io.StringIO()
    buf.write(_header(UNITS_WIDE, ts))
    cols = ["crank_deg"] + [f"cycle_{k + 1}_pressure_bar" for k in range(ts.n_cycles)]
    data = [ts.theta] + [ts.pressure_pa[k] / BAR for k in range(ts.n_cycles)]
    if ts.intake_pa is not None:
        cols += [f"cycle_{k + 1}_intake_pressure_bar" for k in range(ts.n_cycles)]
        data += [ts.intake_pa[k] / BAR for k in range(ts.n_cycles)]
    buf.write(",".join(cols) + "\n")
    row_fmt = ",".join(["%.10g"] * len(cols)) + "\n"      # the numbers as _g writes them
    for row in np.column_stack([np.asarray(d, dtype=float) for d in data]).tolist():
        buf.write(row_fmt % tuple(row))
    atomic_write_text(Path(path), buf.getvalue())
    return Path(path)


def write_npz(path, ts: TraceSet) -> Path:
    """Arrays ``crank_deg`` [deg], ``pressure_pa`` [Pa], ``intake_pressure_pa`` [Pa],
    ``speed_rpm`` and a JSON string ``metadata`` (units, convention, meta).

    Stored without compression: noisy pressure samples compress by about a tenth only, for
    about 1.5 s per 300 cycles at 0.1 deg (measured)."""
    meta = {
        "units": {"crank_deg": "deg", "pressure_pa": "Pa", "intake_pressure_pa": "Pa", "speed_rpm": "rpm"},
        "crank_angle": CRANK_CONVENTION,
        "meta": _plain(ts.meta),
    }
    arrays = {
        "crank_deg": ts.theta,
        "pressure_pa": ts.pressure_pa,
        "speed_rpm": np.array(ts.speed_rpm),
        "metadata": np.array(json.dumps(meta)),
    }
    if ts.intake_pa is not None:
        arrays["intake_pressure_pa"] = ts.intake_pa
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    atomic_write_bytes(Path(path), buf.getvalue())
    return Path(path)


def _asammdf():
    try:
        import asammdf  # noqa: F401
    except ImportError:
        raise CyclesimError(
            'ASAM MDF 4 files need the optional package asammdf: pip install -e ".[mdf]" (from the project folder)'
        ) from None
    return asammdf


def write_mdf(path, ts: TraceSet) -> Path:
    """ASAM MDF 4 (.mf4): one channel group, time master [s] over the cycles joined end to end.

    Channels: ``crank_deg`` [deg], ``cycle`` [-], ``pressure_bar`` [bar],
    ``intake_pressure_bar`` [bar] and ``speed_rpm`` [rpm], each with a comment;
    the file comment holds units, the crank-angle convention and ``meta`` as JSON.
    Time is ``(720 (cycle - 1) + crank_deg - crank_deg[0]) / (6 N)``; with a grid
    that has both cycle ends, the last sample of a cycle and the first of the
    next share a time stamp.
    """
    _asammdf()
    from asammdf import MDF, Signal

    nc, n = ts.pressure_pa.shape
    N = ts.speed_rpm if np.isfinite(ts.speed_rpm) and ts.speed_rpm > 0 else 1.0 / 6.0
    cyc = np.repeat(np.arange(1, nc + 1), n)
    crank = np.tile(ts.theta, nc)
    t = (720.0 * (cyc - 1) + crank - ts.theta[0]) / (6.0 * N)
    conv = f"crank angle: {CRANK_CONVENTION}"
    sigs = [
        Signal(crank, t, name="crank_deg", unit="deg", comment=f"crank angle; {conv}"),
        Signal(cyc.astype(np.uint32), t, name="cycle", unit="-", comment="cycle number, from 1"),
        Signal(ts.pressure_pa.reshape(-1) / BAR, t, name="pressure_bar", unit="bar",
               comment="measured cylinder pressure signal (as measured: offset not removed)"),
        Signal(np.full(t.size, ts.speed_rpm), t, name="speed_rpm", unit="rpm", comment="engine speed"),
    ]
    if ts.intake_pa is not None:
        sigs.append(Signal(ts.intake_pa.reshape(-1) / BAR, t, name="intake_pressure_bar", unit="bar",
                           comment="measured intake-manifold pressure"))
    mdf = MDF(version="4.10")
    mdf.append(sigs, comment=f"cylinder pressure trace set; time master [s]; {conv}")
    mdf.header.comment = json.dumps({"units": UNITS_LONG + ", time s", "crank_angle": CRANK_CONVENTION,
                                     "meta": _plain(ts.meta)})
    tmp = io.BytesIO()
    try:
        mdf.save(tmp, overwrite=True)
        data = tmp.getvalue()
    except Exception:  # noqa: BLE001 -- older asammdf saves to paths only
        import tempfile

        with tempfile.TemporaryDirectory() as d:
            out = mdf.save(Path(d) / "x.mf4", overwrite=True)
            data = Path(out).read_bytes()
    finally:
        mdf.close()
    atomic_write_bytes(Path(path), data)
    return Path(path)


FORMATS = {"csv_long": (".long.csv", write_csv_long), "csv_wide": (".wide.csv", write_csv_wide),
           "npz": (".npz", write_npz), "mf4": (".mf4", write_mdf)}


def write_trace_set(ts: TraceSet, out_dir, stem: str = "trace",
                    formats: Sequence[str] = ("csv_long", "csv_wide", "npz", "mf4")) -> list[Path]:
    """Write ``ts`` in each of ``formats`` into ``out_dir`` as ``stem`` + suffix."""
    out = []
    for f in formats:
        if f not in FORMATS:
            raise CyclesimError(f"trace format {f!r}: unknown; choose from {', '.join(FORMATS)}")
        suffix, fn = FORMATS[f]
        out.append(fn(Path(out_dir) / f"{stem}{suffix}", ts))
    return out


def _truth_cell(v):
    """A truth CSV cell: empty for None, true/false as in the JSON file, else the value."""
    if v is None:
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    return v


def write_truth(out_dir, rows: Iterable[dict], stats: dict | None = None, stem: str = "truth",
                settings: dict | None = None) -> list[Path]:
    """Ground truth: one CSV row per cycle, plus a JSON file with the rows and set statistics.

    ``rows`` are dicts of scalars (keys carry their units); ``stats`` set-level figures;
    ``settings`` the generator's settings (variation, seed, artefact settings), written to the
    JSON file only: they belong to the truth, never to the measured files.
    """
    rows = [_plain(dict(r)) for r in rows]
    cols: list[str] = []
    for r in rows:
        for k in r:
            if k not in cols:
                cols.append(k)
    buf = io.StringIO()
    buf.write(f"# units: in each column name; crank angle: {CRANK_CONVENTION}\n")
    w = csv.DictWriter(buf, fieldnames=cols, lineterminator="\n", extrasaction="ignore")
    w.writeheader()
    for r in rows:
        w.writerow({k: _truth_cell(r.get(k)) for k in cols})
    p_csv = Path(out_dir) / f"{stem}.csv"
    p_json = Path(out_dir) / f"{stem}.json"
    atomic_write_text(p_csv, buf.getvalue())
    doc = {"crank_angle": CRANK_CONVENTION, "units": "in each key's name", "cycles": rows,
           "statistics": _plain(stats or {})}
    if settings:
        doc["settings"] = _plain(settings)
    atomic_write_text(p_json, json.dumps(doc, indent=2) + "\n")
    return [p_csv, p_json]


# --------------------------------------------------------------------------- readers
def read_trace(path) -> TraceSet:
    """Read a trace set from .csv (long or wide, detected from the columns), .npz or .mf4.

    Raises :class:`cyclesim.errors.InputFileError` naming the file and the
    column or row when the file is malformed.
    """
    path = Path(path)
    if not path.is_file():
        raise InputFileError(f"{path}: no such file")
    suf = path.suffix.lower()
    if suf == ".csv":
        return _read_csv(path)
    if suf == ".npz":
        return _read_npz(path)
    if suf in (".mf4", ".mdf"):
        return _read_mdf(path)
    raise InputFileError(f"{path}: unknown trace file type {suf!r} (expected .csv, .npz or .mf4)")


def _parse_comments(lines: list[str]) -> tuple[dict, float]:
    meta: dict = {}
    speed = float("nan")
    for ln in lines:
        body = ln[1:].strip()
        key, _, val = body.partition(":")
        key, val = key.strip(), val.strip()
        if key == "speed_rpm":
            try:
                speed = float(val)
            except ValueError:
                pass
        elif key == "meta":
            try:
                meta = json.loads(val)
            except ValueError:
                pass
    return meta, speed


def _read_csv(path: Path) -> TraceSet:
    from ..tables import read_table

    tab = read_table(path, "pressure traces", ("crank_deg",), all_columns=True)
    meta, speed = _parse_comments(tab.comments)
    header = list(tab.header)
    col = tab.columns
    if "cycle" in header:
        if "pressure_bar" not in header:
            raise InputFileError(f"{path}: missing column 'pressure_bar' (long format)")
        ids, groups = _cycle_groups(path, col["cycle"], contiguous=True)
        theta = col["crank_deg"][groups[0]]
        for c, g in zip(ids, groups):
            if not np.allclose(col["crank_deg"][g], theta, rtol=0, atol=1e-9):
                raise InputFileError(f"{path}: cycle {c:g} has a different crank grid from cycle {ids[0]:g}")
        P = np.stack([col["pressure_bar"][g] for g in groups]) * BAR
        Pi = np.stack([col["intake_pressure_bar"][g] for g in groups]) * BAR if "intake_pressure_bar" in header else None
        return _checked(path, theta, P, Pi, speed, meta)
    pcols = [h for h in header if h.endswith("_pressure_bar") and not h.endswith("_intake_pressure_bar")]
    icols = [h for h in header if h.endswith("_intake_pressure_bar")]
    if not pcols:
        raise InputFileError(
            f"{path}: no pressure column: expected 'cycle' + 'pressure_bar' (long) or 'cycle_<k>_pressure_bar' (wide)"
        )
    theta = col["crank_deg"]
    P = np.stack([col[h] for h in pcols]) * BAR
    Pi = None
    if icols:
        if len(icols) != len(pcols):
            raise InputFileError(f"{path}: {len(pcols)} pressure columns but {len(icols)} intake columns")
        Pi = np.stack([col[h] for h in icols]) * BAR
    return _checked(path, theta, P, Pi, speed, meta)


def _cycle_groups(path, cyc, contiguous: bool = False):
    """Cycle numbers in order of appearance and the sample indices of each; equal counts required."""
    ids = list(dict.fromkeys(cyc.tolist()))
    groups = [np.flatnonzero(cyc == c) for c in ids]
    n = groups[0].size
    for c, g in zip(ids, groups):
        if g.size != n:
            raise InputFileError(f"{path}: cycle {c:g} has {g.size} samples, cycle {ids[0]:g} has {n}")
        if contiguous and np.any(np.diff(g) != 1):
            raise InputFileError(f"{path}: rows of cycle {c:g} are not contiguous")
    return ids, groups


def _checked(path, theta, P, Pi, speed, meta) -> TraceSet:
    if theta.ndim != 1 or theta.size < 2:
        raise InputFileError(f"{path}: crank_deg must be a 1-D column of at least 2 angles")
    if not np.all(np.isfinite(theta)):
        raise InputFileError(f"{path}: crank_deg is not finite at sample {int(np.argmin(np.isfinite(theta))) + 1}")
    if np.any(np.diff(theta) <= 0):
        i = int(np.argmax(np.diff(theta) <= 0))
        raise InputFileError(f"{path}: crank_deg is not increasing at sample {i + 2} ({theta[i + 1]:g} deg)")
    for name, a in (("pressure", P), ("intake pressure", Pi)):
        if a is None:
            continue
        if a.ndim != 2 or a.shape[1] != theta.size:
            raise InputFileError(f"{path}: {name} has shape {a.shape}, crank_deg has {theta.size} samples")
        if not np.all(np.isfinite(a)):
            r, c = np.argwhere(~np.isfinite(a))[0]
            raise InputFileError(f"{path}: {name} of cycle {r + 1} is not finite at crank_deg {theta[c]:g}")
    return TraceSet(theta=theta, pressure_pa=P, intake_pa=Pi, speed_rpm=speed, meta=meta)


def _read_npz(path: Path) -> TraceSet:
    try:
        with np.load(path, allow_pickle=False) as z:
            d = {k: z[k] for k in z.files}
    except Exception as exc:  # noqa: BLE001
        raise InputFileError(f"{path}: not a readable .npz file ({exc})") from None
    for k in ("crank_deg", "pressure_pa"):
        if k not in d:
            raise InputFileError(f"{path}: missing array '{k}' (has: {', '.join(sorted(d))})")
    meta = {}
    if "metadata" in d:
        try:
            meta = json.loads(str(d["metadata"])).get("meta", {}) or {}
        except ValueError:
            raise InputFileError(f"{path}: array 'metadata' is not JSON") from None
    try:
        theta = np.asarray(d["crank_deg"], float)
        P = np.atleast_2d(np.asarray(d["pressure_pa"], float))
        Pi = np.atleast_2d(np.asarray(d["intake_pressure_pa"], float)) if "intake_pressure_pa" in d else None
        speed = float(d["speed_rpm"]) if "speed_rpm" in d else float("nan")
    except (TypeError, ValueError) as exc:
        raise InputFileError(f"{path}: non-numeric array ({exc})") from None
    if Pi is not None and Pi.shape != P.shape:
        raise InputFileError(f"{path}: intake_pressure_pa has shape {Pi.shape}, pressure_pa {P.shape}")
    return _checked(path, theta, P, Pi, speed, meta)


def _mdf_comment_meta(comment) -> dict:
    """``meta`` from the file comment: plain JSON or JSON inside an XML <TX> element."""
    import html
    import re

    text = str(comment or "")
    m = re.search(r"<TX>(.*?)</TX>", text, flags=re.S)
    if m:
        text = html.unescape(m.group(1))
    try:
        return json.loads(text).get("meta", {}) or {}
    except (ValueError, AttributeError):
        return {}


def _read_mdf(path: Path) -> TraceSet:
    _asammdf()
    from asammdf import MDF

    try:
        mdf = MDF(str(path))
    except Exception as exc:  # noqa: BLE001
        raise InputFileError(f"{path}: not a readable MDF file ({exc})") from None
    try:
        names = set(mdf.channels_db)
        for k in ("crank_deg", "cycle", "pressure_bar"):
            if k not in names:
                raise InputFileError(f"{path}: missing channel '{k}'")

        def get(name):
            return np.asarray(mdf.get(name).samples, float)

        crank, cyc, p = get("crank_deg"), get("cycle"), get("pressure_bar")
        pi = get("intake_pressure_bar") if "intake_pressure_bar" in names else None
        speed = float(get("speed_rpm")[0]) if "speed_rpm" in names else float("nan")
        meta = {}
        meta = _mdf_comment_meta(getattr(mdf.header, "comment", ""))
    finally:
        mdf.close()
    _, groups = _cycle_groups(path, cyc)
    theta = crank[groups[0]]
    P = np.stack([p[g] for g in groups]) * BAR
    Pi = None if pi is None else np.stack([pi[g] for g in groups]) * BAR
    return _checked(path, theta, P, Pi, speed, meta)
