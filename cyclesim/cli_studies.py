"""Command-line front ends of the studies: ``cyclesim sweep`` and ``cyclesim spark``.

To hook them into :mod:`cyclesim.cli`, add these two lines:

* in ``build_parser()``, just before ``return ap``::

      from .cli_studies import add_parsers; add_parsers(sub)

* in ``main()``, just after the ``handlers = {...}`` line::

      from .cli_studies import HANDLERS; handlers.update(HANDLERS)

Examples::

    cyclesim sweep demo --vary burn.spark_advance_deg=10:40:2 --vary operating.speed_rpm=2000,3000 --out sw
    cyclesim sweep demo --vary burn.spark_advance_deg=10:40:2 --out sw --resume     # after an interruption
    cyclesim spark demo --advance 0:40:1 --out spark --pmax-limit 80

Errors are :class:`cyclesim.errors.CyclesimError` subclasses (one line, exit 2).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path


def _common(p: argparse.ArgumentParser) -> None:
    p.add_argument("config", nargs="?", default="demo",
                   help="config file, or a built-in config name (default: demo)")
    p.add_argument("--out", type=Path, required=True, help="folder for the results")
    p.add_argument("--resume", action="store_true",
                   help="keep the rows already in OUT/sweep.csv and run only the missing cases")
    p.add_argument("--force", action="store_true", help="start again in a non-empty --out folder")
    p.add_argument("--chunk", type=int, default=64, metavar="N",
                   help="cases simulated together before their rows are written (default 64)")
    p.add_argument("--no-progress", action="store_true", help="no progress bar on stderr")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE",
                   help="override any config value of the base case (repeatable)")
    p.add_argument("--debug", action="store_true", help="show tracebacks")


def _workers_arg(text: str):
    from .errors import ConfigError
    from .parallel import parse_workers

    try:
        return parse_workers(text)
    except ConfigError:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 1 or 'auto', got {text!r}") from None


def _parallel_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--workers", type=_workers_arg, default=None, metavar="N|auto",
                   help="worker processes for the chunks; auto: one per CPU, at most one per chunk"
                        " (default: 1 up to 64 cases, auto above)")
    p.add_argument("--backend", choices=("process", "dask", "serial"), default=None,
                   help="run the chunks in processes on this machine (default when more than one"
                        " worker) or on a Dask cluster (needs the dask extra)")
    p.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="Dask scheduler address for --backend dask (default: a local cluster of"
                        " --workers processes)")


def _where(args) -> dict:
    return {"workers": args.workers, "backend": args.backend, "scheduler": args.scheduler}


def add_parsers(subparsers) -> None:
    """Add the ``sweep`` and ``spark`` subcommands to an argparse subparsers object."""
    s = subparsers.add_parser(
        "sweep", help="run a grid (or paired list) of cases and write one table of figures",
        description="Vary config keys over lists or ranges; rows go to OUT/sweep.csv as cases finish,"
                    " OUT/sweep.json at the end.",
    )
    s.add_argument("--vary", action="append", default=[], metavar="KEY=SPEC", required=True,
                   help="a config key and its values: a,b,c or start:stop:step (repeatable;"
                        " several keys give the full grid)")
    s.add_argument("--paired", action="store_true",
                   help="one case per position of the value lists (equal lengths) instead of the grid")
    _common(s)
    _parallel_options(s)

    k = subparsers.add_parser(
        "spark", help="spark-advance study: MBT, least advance within a torque fraction, limits",
        description="Sweep burn.spark_advance_deg and read MBT (from a fit), the flat top of the torque"
                    " curve, knock and pressure limits and a recommended advance.",
    )
    k.add_argument("--advance", default="0:40:1", metavar="SPEC",
                   help="spark advances [deg BTDC]: start:stop:step or a,b,c (default 0:40:1)")
    k.add_argument("--torque-fraction", type=float, default=0.01, metavar="F",
                   help="report the least advance within this fraction of best torque (default 0.01)")
    k.add_argument("--knock-margin", type=float, default=2.0, metavar="DEG",
                   help="retard kept from the knock-limited advance (default 2)")
    k.add_argument("--knock-min-unburned", type=float, default=None, metavar="F",
                   help="count knock only with at least this share of the charge unburned at onset")
    k.add_argument("--pmax-limit", type=float, default=None, metavar="BAR", help="peak-pressure limit [bar]")
    k.add_argument("--dp-limit", type=float, default=None, metavar="BAR_PER_DEG",
                   help="limit of the largest pressure-rise rate [bar/deg]")
    k.add_argument("--no-plots", action="store_true", help="skip the PNG plots")
    _common(k)
    _parallel_options(k)


def _progress(args):
    return False if args.no_progress else None


def cmd_sweep(args) -> int:
    """``cyclesim sweep``: run the sweep, print where the table went."""
    from .studies.sweep import parse_vary_arg, sweep

    vary = [parse_vary_arg(v) for v in args.vary]
    t0 = time.perf_counter()
    res = sweep(args.config, vary, paired=args.paired, out=args.out, resume=args.resume,
                chunk_size=args.chunk, progress=_progress(args), force=args.force,
                overrides=args.overrides, **_where(args))
    n, nf = len(res.rows), len(res.failed)
    print(f"{n} cases, {n - nf} ok, {nf} failed, in {time.perf_counter() - t0:.1f} s")
    for r in res.rows:
        if r.get("error"):
            print(f"  case {r['case']}: {r['error']}")
    print(f"wrote {args.out / 'sweep.csv'} and {args.out / 'sweep.json'}")
    return 0


def cmd_spark(args) -> int:
    """``cyclesim spark``: run the spark-advance study, print its report."""
    from .studies.spark import spark_study

    t0 = time.perf_counter()
    st = spark_study(args.config, args.advance, overrides=args.overrides, out=args.out,
                     torque_fraction=args.torque_fraction, knock_margin_deg=args.knock_margin,
                     p_max_limit_bar=args.pmax_limit, dp_limit_bar_per_deg=args.dp_limit,
                     knock_min_unburned=args.knock_min_unburned, resume=args.resume, force=args.force,
                     chunk_size=args.chunk, progress=_progress(args), plots=not args.no_plots, **_where(args))
    print(st.text())
    print(f"simulated in {time.perf_counter() - t0:.1f} s")
    print(f"wrote {len(st.files)} files to {args.out}/: " + ", ".join(Path(f).name for f in st.files))
    return 0


HANDLERS = {"sweep": cmd_sweep, "spark": cmd_spark}
"""Command name -> handler, for ``cyclesim.cli.main``."""


def main(argv=None) -> int:  # pragma: no cover - used only until the commands are hooked into cyclesim.cli
    """Stand-alone entry: ``python -m cyclesim.cli_studies sweep ...``."""
    from .errors import CyclesimError

    ap = argparse.ArgumentParser(prog="cyclesim")
    sub = ap.add_subparsers(dest="command", required=True)
    add_parsers(sub)
    args = ap.parse_args(argv)
    try:
        return HANDLERS[args.command](args)
    except CyclesimError as exc:
        if args.debug:
            raise
        print(f"cyclesim: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("cyclesim: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
