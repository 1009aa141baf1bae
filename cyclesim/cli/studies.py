"""Command-line front ends of the studies: ``sweep``, ``spark``, ``losses``, ``boost``, ``dyno``, ``map``, ``report``.

:mod:`cyclesim.cli` adds them through ``add_parsers`` and ``HANDLERS``.

Examples::

    cyclesim sweep demo --vary burn.spark_advance_deg=10:40:2 --vary operating.speed_rpm=2000,3000 --out sw
    cyclesim sweep demo --vary burn.spark_advance_deg=10:40:2 --out sw --resume     # after an interruption
    cyclesim spark demo --advance 0:40:1 --out spark --pmax-limit 80
    cyclesim losses demo --out losses --second-order alt
    cyclesim boost demo_turbo --boost-bar 1.6 --out boost
    cyclesim dyno demo --out dyno --mode torque --noise 2 3 20
    cyclesim map demo --out map --speeds 2000:4500:500 --loads 0.4,0.6,0.8,0.98
    cyclesim report losses --out losses.html

Errors are :class:`cyclesim.errors.CyclesimError` subclasses (one line, exit 2).
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path


def _common(p: argparse.ArgumentParser) -> None:
    p.add_argument("config", nargs="?", default="demo",
                   help="config file, or a built-in config name (default: demo)")
    p.add_argument("--out", type=Path, required=True, help="folder for the results")
    p.add_argument("--resume", action="store_true",
                   help="keep the rows already in OUT/sweep.csv and run only the missing cases (refused,"
                        " naming what differs, unless OUT/study.fingerprint shows the same study)")
    p.add_argument("--force", action="store_true", help="start again in a non-empty --out folder")
    p.add_argument("--chunk", type=int, default=64, metavar="N",
                   help="cases simulated together before their rows are written (default 64)")
    p.add_argument("--no-progress", action="store_true", help="no progress bar on stderr")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE",
                   help="override any config value of the base case (repeatable)")
    p.add_argument("--debug", action="store_true", help="show tracebacks")


def _workers_arg(text: str):
    from ..errors import ConfigError
    from ..parallel import parse_workers

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
    """Add the study subcommands (sweep, spark, losses, boost, dyno, map, report) to argparse subparsers."""
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
    s.add_argument("--no-plots", action="store_true",
                   help="skip the PNG plots (one key: volumetric efficiency and torque against it; two keys"
                        " on a grid: their surfaces)")
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
    k.add_argument("--knock-cycles", type=int, default=0, metavar="N",
                   help="also simulate N cycles with cycle-to-cycle variation per advance: statistical knock limit")
    k.add_argument("--knock-cycle-share", type=float, default=0.05, metavar="F",
                   help="with --knock-cycles: the share of knocking cycles that sets the limit (default 0.05)")
    k.add_argument("--pmax-limit", type=float, default=None, metavar="BAR", help="peak-pressure limit [bar]")
    k.add_argument("--dp-limit", type=float, default=None, metavar="BAR_PER_DEG",
                   help="limit of the largest pressure-rise rate [bar/deg]")
    k.add_argument("--no-plots", action="store_true", help="skip the PNG plots")
    _common(k)
    _add_engineering_parsers(subparsers)
    _parallel_options(k)


def _progress(args):
    return False if args.no_progress else None


def cmd_sweep(args) -> int:
    """``cyclesim sweep``: run the sweep, print where the table went."""
    from ..studies.sweep import parse_vary_arg, sweep

    vary = [parse_vary_arg(v) for v in args.vary]
    t0 = time.perf_counter()
    res = sweep(args.config, vary, paired=args.paired, out=args.out, resume=args.resume,
                chunk_size=args.chunk, progress=_progress(args), force=args.force,
                overrides=args.overrides, **_where(args))
    n, nf = len(res.rows), len(res.failed)
    print(f"{n} cases, {n - nf} ok, {nf} failed, in {time.perf_counter() - t0:.1f} s")
    if n:
        print(res.text())
    from ..output import CAUTION
    from ..studies.map_console import warning_lines

    for line in warning_lines(res.warning_groups(), n, "cases"):
        print(line)

    print(f"note: {CAUTION}")
    files = []
    if not args.no_plots:
        from ..plots.sweep import plot_sweep

        files = [Path(f).name for f in plot_sweep(res, args.out, paired=args.paired)]
    print(f"wrote {args.out / 'sweep.csv'} and {args.out / 'sweep.json'}" + "".join(f", {f}" for f in files))
    return 0


def cmd_spark(args) -> int:
    """``cyclesim spark``: run the spark-advance study, print its report."""
    from ..studies.spark import spark_study

    t0 = time.perf_counter()
    st = spark_study(args.config, args.advance, overrides=args.overrides, out=args.out,
                     torque_fraction=args.torque_fraction, knock_margin_deg=args.knock_margin,
                     p_max_limit_bar=args.pmax_limit, dp_limit_bar_per_deg=args.dp_limit,
                     knock_min_unburned=args.knock_min_unburned, resume=args.resume, force=args.force,
                     knock_cycles=args.knock_cycles, knock_cycle_share=args.knock_cycle_share,
                     chunk_size=args.chunk, progress=_progress(args), plots=not args.no_plots, **_where(args))
    print(st.text())
    print(f"simulated in {time.perf_counter() - t0:.1f} s")
    print(f"wrote {len(st.files)} files to {args.out}/: " + ", ".join(Path(f).name for f in st.files))
    return 0


# --------------------------------------------------------------------------
# losses, boost, dyno, map, report
# --------------------------------------------------------------------------


def _simple(p: argparse.ArgumentParser, out_required: bool = True) -> None:
    p.add_argument("config", nargs="?", default="demo",
                   help="config file, or a built-in config name (default: demo)")
    p.add_argument("--out", type=Path, required=out_required, help="folder for the results")
    p.add_argument("--force", action="store_true", help="write into a non-empty --out folder")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE",
                   help="override any config value (repeatable)")
    p.add_argument("--no-plots", action="store_true", help="skip the PNG plots")
    p.add_argument("--debug", action="store_true", help="show tracebacks")


def _add_engineering_parsers(subparsers) -> None:
    lo = subparsers.add_parser(
        "losses", help="loss breakdown from the air-standard Otto cycle to brake efficiency",
        description="Switch the real effects on one at a time and report the efficiency after each step"
                    " and the points of fuel energy lost at each (CSV, JSON, waterfall PNG).")
    lo.add_argument("--order", default=None, metavar="K1,K2,...",
                    help="order of the closed-cycle steps (real_gas,dissociation,burn,heat_transfer,blowby,"
                         "combustion,evo)")
    lo.add_argument("--second-order", default=None, metavar="K1,K2,...|alt",
                    help="also compute a second order ('alt': heat transfer before the burn)")
    lo.add_argument("--closed-step", type=float, default=0.1, metavar="DEG",
                    help="integration step of the closed-cycle steps (default 0.1)")
    _simple(lo)

    b = subparsers.add_parser(
        "boost", help="match a turbocharger (compressor, intercooler, turbine, wastegate) at a boost pressure",
        description="Iterate cylinder and turbocharger to a consistent exhaust back pressure; report"
                    " pressures, temperatures, powers, wastegate share and the engine figures.")
    b.add_argument("--boost-bar", type=float, default=1.6, help="target intake pressure, absolute [bar]")
    b.add_argument("--eta-compressor", type=float, default=0.72)
    b.add_argument("--eta-turbine", type=float, default=0.70)
    b.add_argument("--eta-mechanical", type=float, default=0.95)
    b.add_argument("--intercooler", type=float, default=0.8, metavar="EFFECTIVENESS")
    b.add_argument("--turbine-area-cm2", type=float, default=3.0)
    b.add_argument("--no-wastegate", action="store_true")
    b.add_argument("--ambient-bar", type=float, default=1.0)
    b.add_argument("--ambient-K", type=float, default=298.0)
    b.add_argument("--tolerance-bar", type=float, default=0.002)
    b.add_argument("--max-iterations", type=int, default=8)
    b.add_argument("--compressor-map", default=None, metavar="CSV",
                   help="compressor map (CSV layout in the README; e.g. demo_compressor_map): efficiency from"
                        " it, surge and choke margins reported (default: the fixed --eta-compressor)")
    b.add_argument("--p-max-limit-bar", type=float, default=120.0,
                   help="peak cylinder pressure above which the match warns [bar] (default 120, an order of"
                        " magnitude: give the engine maker's limit)")
    b.add_argument("--t3-limit-K", type=float, default=1273.0,
                   help="turbine inlet temperature above which the match warns [K] (default 1273: give the"
                        " turbocharger maker's limit)")
    _simple(b)
    b.set_defaults(config="demo_turbo")
    b.description += " Default config: demo_turbo."

    d = subparsers.add_parser(
        "dyno", help="virtual dynamometer: load-cell force, torque, power, corrected power, settling",
        description="Read the engine as a test cell does (force x arm, 2 pi N T), with optional noise,"
                    " a speed- or torque-controlled dyno and power corrected per SAE J1349 or ISO 1585.")
    d.add_argument("--mode", choices=("speed", "torque"), default="speed")
    d.add_argument("--arm-m", type=float, default=0.5, help="load-cell arm length [m]")
    d.add_argument("--noise", nargs=3, type=float, default=None, metavar=("FORCE_SD_N", "SPEED_SD_RPM", "READINGS"),
                   help="measurement noise: load-cell sd [N], speed sd [rpm], readings averaged")
    d.add_argument("--seed", type=int, default=0)
    d.add_argument("--standard", choices=("SAE J1349", "ISO 1585", "sae", "iso"), default="SAE J1349")
    d.add_argument("--ambient-kPa", type=float, default=99.0)
    d.add_argument("--ambient-K", type=float, default=298.0)
    d.add_argument("--humidity", type=float, default=0.0, help="relative humidity 0..1")
    d.add_argument("--cell-air", choices=("intake", "none"), default="intake",
                   help="intake (default): the engine breathes the cell air (the config's intake is taken at"
                        " 99 kPa dry, 298 K and moves with the cell's); none: the engine's intake stays as"
                        " configured (a boost-controlled intake) and only the power correction uses the cell air")
    d.add_argument("--load", choices=("constant", "quadratic"), default="quadratic")
    d.add_argument("--load-torque", type=float, default=None, metavar="NM")
    d.add_argument("--start-rpm", type=float, default=None)
    d.add_argument("--inertia", type=float, default=0.3, metavar="KG_M2")
    d.add_argument("--speeds", default=None, metavar="SPEC", help="torque mode: speed grid [rpm]")
    d.add_argument("--duration", type=float, default=5.0, metavar="S")
    _simple(d)

    m = subparsers.add_parser(
        "map", help="full-load curve and part-load map (BSFC, efficiency, BMEP, spark)",
        description="Full-load torque and power against speed, and a speed x intake-pressure map, with the"
                    " spark per point (knock-limited where the config has a knock model, else MBT, or the"
                    " case's) and optional enrichment to an exhaust-temperature limit; tables and plots.")
    m.add_argument("--speeds", default=None, metavar="SPEC", help="speeds [rpm], a,b,c or start:stop:step")
    m.add_argument("--loads", default=None, metavar="SPEC", help="intake pressures [bar]")
    m.add_argument("--spark", choices=("mbt", "knock_limited", "fixed"), default=None,
                   help="spark per point: knock_limited (default with a knock model: the more retarded of MBT"
                        " and the knock limit less --knock-margin), mbt (default without one), or fixed")
    m.add_argument("--advances", default=None, metavar="SPEC", help="spark advances tried first per point")
    m.add_argument("--knock-margin", type=float, default=2.0, metavar="DEG",
                   help="retard kept from the knock-limited advance [deg] (default 2)")
    m.add_argument("--pmax-limit", type=float, default=None, metavar="BAR", help="peak-pressure limit of the spark [bar]")
    m.add_argument("--exhaust-limit-K", type=float, default=None, metavar="K",
                   help="enrich to hold this exhaust temperature (enthalpy average at the valve) [K]")
    m.add_argument("--lambda-floor", type=float, default=0.75, metavar="LAMBDA",
                   help="richest lambda of the enrichment (default 0.75)")
    m.add_argument("--boost-bar", type=float, default=None, metavar="BAR",
                   help="full load: match a turbocharger to this intake pressure at every speed, at the"
                        " point's spark and mixture (options as for 'cyclesim boost' at their defaults)")
    m.add_argument("--compressor-map", default=None, metavar="CSV",
                   help="with --boost-bar: compressor map for the efficiency, surge and choke margins")
    m.add_argument("--no-progress", action="store_true", help="no progress bar on stderr")
    m.add_argument("--exhaust", choices=("flow", "fixed"), default="flow",
                   help="exhaust back pressure: from each point's flow through a fixed restriction, the"
                        " config's value at the config's own flow (default), or the config's value everywhere")
    m.add_argument("--full-load-only", action="store_true")
    m.add_argument("--part-load-only", action="store_true")
    _simple(m)

    r = subparsers.add_parser(
        "report", help="one self-contained HTML page of a run or study folder (or of a config, run now)",
        description="Tables and plots of RUN_OR_STUDY_DIR (its JSON, CSV and PNG files), or of CONFIG"
                    " simulated now, in one HTML file with everything embedded.")
    r.add_argument("source", help="a run or study folder, or a config file / built-in name")
    r.add_argument("--out", type=Path, default=Path("report.html"), help="HTML file (default report.html)")
    r.add_argument("--title", default=None,
                   help="page title (default: 'cyclesim report: <folder name>', or the case name for a config)")
    r.add_argument("--force", action="store_true", help="replace an existing --out file")
    r.add_argument("--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE",
                   help="override a config value when the report runs a config (repeatable; default: none)")
    r.add_argument("--debug", action="store_true", help="show tracebacks")


def _out(args) -> Path:
    from ..output import prepare_out_dir

    return prepare_out_dir(args.out, args.force)


def _order(text):
    return None if text is None else tuple(x.strip() for x in text.split(",") if x.strip())


def _wrote(files) -> None:
    if files:
        print(f"wrote {len(files)} files to {Path(files[0]).parent}/: " + ", ".join(Path(f).name for f in files))


def cmd_losses(args) -> int:
    """``cyclesim losses``: loss breakdown table and waterfall."""
    from ..studies.losses import ALT_ORDER, loss_breakdown

    second = ALT_ORDER if args.second_order == "alt" else _order(args.second_order)
    t0 = time.perf_counter()
    lb = loss_breakdown(args.config, _order(args.order), overrides=args.overrides, second_order=second,
                        closed_step_deg=args.closed_step, out=_out(args), plots=not args.no_plots)
    print(lb.text())
    print(f"simulated in {time.perf_counter() - t0:.1f} s")
    _wrote(lb.files)
    return 0


def cmd_boost(args) -> int:
    """``cyclesim boost``: turbocharger match."""
    from ..studies.boost import boost_match
    from ..studies.compressor_map import load_compressor_map

    cmap = None if args.compressor_map is None else load_compressor_map(args.compressor_map)
    t0 = time.perf_counter()
    br = boost_match(args.config, args.boost_bar, args.eta_compressor, args.eta_turbine, args.eta_mechanical,
                     args.intercooler, args.turbine_area_cm2, not args.no_wastegate, args.ambient_bar,
                     args.ambient_K, overrides=args.overrides, tolerance_bar=args.tolerance_bar,
                     max_iterations=args.max_iterations, out=_out(args), plots=not args.no_plots,
                     p_max_limit_bar=args.p_max_limit_bar, t3_limit_K=args.t3_limit_K, compressor_map=cmap)
    print(br.text())
    print(f"simulated in {time.perf_counter() - t0:.1f} s")
    _wrote(br.files)
    return 0


def cmd_dyno(args) -> int:
    """``cyclesim dyno``: virtual dynamometer."""
    from ..studies.dyno import DynoNoise, dyno_test
    from ..studies.sweep import parse_values

    from .checks import seed

    seed(args.seed)
    noise = None
    if args.noise is not None:
        noise = DynoNoise(args.noise[0], args.noise[1], args.noise[2], args.seed)
    std = {"sae": "SAE J1349", "iso": "ISO 1585"}.get(args.standard, args.standard)
    speeds = None if args.speeds is None else [float(v) for v in parse_values("--speeds", args.speeds)]
    t0 = time.perf_counter()
    d = dyno_test(args.config, args.arm_m, args.mode, noise, overrides=args.overrides,
                  ambient_pressure_kPa=args.ambient_kPa, ambient_temperature_K=args.ambient_K,
                  relative_humidity=args.humidity, standard=std, load=args.load, load_torque_Nm=args.load_torque,
                  start_speed_rpm=args.start_rpm, inertia_kg_m2=args.inertia, speed_grid_rpm=speeds,
                  duration_s=args.duration, out=_out(args), plots=not args.no_plots, cell_air=args.cell_air)
    print(d.text())
    print(f"simulated in {time.perf_counter() - t0:.1f} s")
    _wrote(d.files)
    return 0


def cmd_map(args) -> int:
    """``cyclesim map``: full-load curve and part-load map."""
    from ..errors import ConfigError
    from ..studies.maps import check_map_inputs, full_load_curve, part_load_map

    from .checks import exclusive

    # refuse bad inputs before the output folder is made
    exclusive(args, "--full-load-only", "--part-load-only")
    check_map_inputs(args.config, args.speeds, args.loads, args.spark, args.advances,
                     overrides=args.overrides, exhaust=args.exhaust, exhaust_limit_K=args.exhaust_limit_K,
                     lambda_floor=args.lambda_floor)
    if args.knock_margin < 0 or (args.pmax_limit is not None and not args.pmax_limit > 0):
        raise ConfigError(f"--knock-margin {args.knock_margin:g} / --pmax-limit {args.pmax_limit}: expected a"
                          " margin >= 0 deg and a positive limit")
    if args.boost_bar is not None and not args.boost_bar > 0:
        raise ConfigError(f"--boost-bar {args.boost_bar!r}: expected a positive number")
    if args.compressor_map is not None and args.boost_bar is None:
        raise ConfigError("--compressor-map needs --boost-bar (the map is read at the matched compressor)")
    cmap = None
    if args.compressor_map is not None:
        from ..studies.compressor_map import load_compressor_map

        cmap = load_compressor_map(args.compressor_map)
    out = _out(args)
    t0 = time.perf_counter()
    files = []
    opts = dict(overrides=args.overrides, out=out, plots=not args.no_plots, exhaust=args.exhaust,
                knock_margin_deg=args.knock_margin, exhaust_limit_K=args.exhaust_limit_K,
                lambda_floor=args.lambda_floor, p_max_limit_bar=args.pmax_limit,
                progress=False if args.no_progress else None)
    fl = None
    if not args.part_load_only:
        fl = full_load_curve(args.config, args.speeds, spark=args.spark, advances=args.advances,
                             boost_bar=args.boost_bar, boost_options={"compressor_map": cmap}, **opts)
        print(fl.text())
        files += fl.files
    if not args.full_load_only:
        pm = part_load_map(args.config, args.speeds, args.loads, args.spark, args.advances, full_load=fl, **opts)
        print(pm.text())
        files += pm.files
    print(f"simulated in {time.perf_counter() - t0:.1f} s")
    _wrote(files)
    return 0


def cmd_report(args) -> int:
    """``cyclesim report``: one HTML page of a folder, or of a config run now."""
    from ..report import report_for_run, report_for_study, write_report

    from ..errors import CyclesimError

    if Path(args.out).is_dir():
        raise CyclesimError(f"--out {args.out}: is a folder; give the HTML file's name, e.g."
                            f" {Path(args.out) / 'report.html'}")
    if Path(args.out).exists() and not args.force:
        raise CyclesimError(f"--out {args.out}: file exists; use --force to replace it")
    src = Path(args.source)
    if src.is_dir():
        secs = report_for_study(src)
        title = args.title or f"cyclesim report: {src.resolve().name}"
    else:
        from ..api import run

        res = run(args.source, args.overrides)
        secs = report_for_run(res)
        title = args.title or f"cyclesim run: {res.name}"
    path = write_report(args.out, title, secs)
    print(f"wrote {path} ({path.stat().st_size / 1024:.0f} kB, self-contained)")
    return 0


HANDLERS = {"sweep": cmd_sweep, "spark": cmd_spark, "losses": cmd_losses, "boost": cmd_boost,
            "dyno": cmd_dyno, "map": cmd_map, "report": cmd_report}
"""Command name -> handler, for ``cyclesim.cli.main``."""

