"""Command line of the multi-cylinder engine: ``cyclesim engine`` and ``cyclesim cut-test``.

Examples::

    cyclesim engine demo --out engine                       # four cylinders, shared manifolds
    cyclesim engine demo --out engine --modes fire,fire,cut,fire --walls lumped
    cyclesim cut-test demo --out cut                        # cylinder-cut friction test and its biases
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

__all__ = ["add_parsers", "cmd_engine", "cmd_cut_test", "HANDLERS"]


def _simple(p: argparse.ArgumentParser) -> None:
    from .studies import _simple as study_options

    study_options(p)
    p.add_argument("--no-progress", action="store_true", help="no progress lines on stderr")


def add_parsers(subparsers) -> None:
    """Add ``engine`` and ``cut-test`` to argparse subparsers."""
    e = subparsers.add_parser(
        "engine", help="multi-cylinder engine: cylinders coupled through shared manifolds, engine torque",
        description="Simulate all cylinders of the engine (firing order, per-cylinder spread, shared intake"
                    " manifold with throttle and exhaust manifold, optional lumped walls, cut or deactivated"
                    " cylinders); write engine and per-cylinder tables, the crank-angle resolved torque and"
                    " the manifold pressures.")
    e.add_argument("--modes", default=None, metavar="M1,M2,...",
                   help="per cylinder: fire, cut (fuel and spark off) or deactivated (valves shut)")
    e.add_argument("--manifolds", choices=("coupled", "constant"), default=None)
    e.add_argument("--walls", choices=("fixed", "lumped"), default=None)
    _simple(e)
    c = subparsers.add_parser(
        "cut-test", help="simulated cylinder-cut (Morse) friction test: estimates against the model's truth",
        description="Read brake power with all cylinders firing and with each one cut in turn; estimate"
                    " indicated and friction power from the drops and compare with the model's truth, first"
                    " under idealised conditions, then with each real effect switched on in turn.")
    c.add_argument("--effects", default=None, metavar="E1,E2,...",
                   help="effects switched on in turn (default all): pumping, pressure_friction, manifolds,"
                        " walls, speed")
    c.add_argument("--reading-time", type=float, default=30.0, metavar="S",
                   help="seconds between a cut and its reading (the cut cylinder's walls cool; default 30)")
    c.add_argument("--speed-error", type=float, default=-10.0, metavar="RPM",
                   help="speed error left after re-setting the speed following a cut (default -10 rpm)")
    c.add_argument("--pressure-friction-model", default="chen_flynn",
                   help="friction model with a cylinder-pressure term for that step (default chen_flynn)")
    _simple(c)


def _Progress(stream=None):
    """Phase messages of the engine and the cut test (a tqdm status line on a terminal)."""
    from .progress import StatusLine

    return StatusLine(stream)


def _progress(args):
    return None if args.no_progress else _Progress()


def cmd_engine(args) -> int:
    """``cyclesim engine``: one multi-cylinder engine."""
    from ..engine import run_engine
    from ..output import CAUTION, atomic_write_text, plain, prepare_out_dir, write_rows_csv

    out = prepare_out_dir(args.out, args.force)
    modes = tuple(x.strip() for x in args.modes.split(",")) if args.modes else ()
    t0 = time.perf_counter()
    prog = _progress(args)
    try:
        eng = run_engine(args.config, args.overrides, modes=modes, manifolds=args.manifolds, walls=args.walls,
                         progress=prog)
    finally:
        if prog is not None:
            prog.close()
    print(eng.text())
    print(f"note: {CAUTION}")
    print(f"simulated in {time.perf_counter() - t0:.1f} s")
    files = []
    rows = [{"quantity": k, "value": v} for k, v in eng.engine.items() if isinstance(v, (int, float))]
    write_rows_csv(out / "engine.csv", rows, ["quantity", "value"])
    files.append(out / "engine.csv")
    cols = list(eng.cylinders[0].keys())
    write_rows_csv(out / "cylinders.csv", eng.cylinders, cols)
    files.append(out / "cylinders.csv")
    tr = eng.traces
    write_rows_csv(out / "engine_trace.csv", [dict(zip(tr, vals)) for vals in zip(*tr.values())], list(tr))
    files.append(out / "engine_trace.csv")
    if not args.no_plots:
        from ..plots import plot_engine

        files += plot_engine(eng, out)
    atomic_write_text(out / "engine.json", json.dumps(plain({**eng.summary_json(), "caution": CAUTION}), indent=2))
    files.append(out / "engine.json")
    print(f"wrote {len(files)} files to {out}/: " + ", ".join(Path(f).name for f in files))
    return 0


def cmd_cut_test(args) -> int:
    """``cyclesim cut-test``: the cylinder-cut friction test."""
    from ..output import prepare_out_dir
    from ..studies.cylinder_cut import EFFECTS, cylinder_cut_test

    out = prepare_out_dir(args.out, args.force)
    effects = tuple(x.strip() for x in args.effects.split(",")) if args.effects else EFFECTS
    t0 = time.perf_counter()
    prog = _progress(args)
    try:
        ct = cylinder_cut_test(args.config, args.overrides, effects=effects,
                               pressure_friction_model=args.pressure_friction_model,
                               reading_time_s=args.reading_time, speed_error_rpm=args.speed_error, out=out,
                               plots=not args.no_plots, progress=prog)
    finally:
        if prog is not None:
            prog.close()
    print(ct.text())
    print(f"simulated in {time.perf_counter() - t0:.1f} s")
    print(f"wrote {len(ct.files)} files to {out}/: " + ", ".join(Path(f).name for f in ct.files))
    return 0


HANDLERS = {"engine": cmd_engine, "cut-test": cmd_cut_test}
