"""Command line of the trace tools: ``cyclesim traces`` (synthesis) and ``cyclesim analyse``."""

from __future__ import annotations

from pathlib import Path

from ..errors import CyclesimError

__all__ = ["add_parsers", "cmd_analyse", "cmd_traces", "HANDLERS"]


def add_parsers(subparsers) -> None:
    """Add the ``traces`` and ``analyse`` sub-commands to an ``argparse`` sub-parser set."""
    t = subparsers.add_parser(
        "traces", help="synthetic cylinder-pressure cycles with variation, measurement flaws and ground truth")
    t.add_argument("config", nargs="?", default="demo", help="config file or built-in name (default: demo)")
    t.add_argument("--cycles", type=int, default=100, help="number of consecutive cycles (default 100)")
    t.add_argument("--out", type=Path, required=True, help="folder for the trace files and the truth (required)")
    g = t.add_mutually_exclusive_group()
    g.add_argument("--resolution", type=float, default=0.5, metavar="DEG",
                   help="crank-angle resolution of the output [deg], > 0 and at most 6, dividing 720 into"
                        " a whole number of steps of the synthesis grid (default 0.5)")
    g.add_argument("--sample-rate", type=float, metavar="HZ",
                   help="sample in time at this rate instead [Hz], > 0 (default: off, crank-angle samples)")
    t.add_argument("--start-sd", type=float, default=3.0, metavar="DEG",
                   help="spread (sd) of the burn start / ignition delay [deg] (default 3); prescribed burns (wiebe,"
                        " wiebe_ca50, wiebe_flame)")
    t.add_argument("--duration-cov", type=float, default=0.12, metavar="FRACTION",
                   help="spread of the burn duration, coefficient of variation [-] (default 0.12); prescribed burns")
    t.add_argument("--kernel-cov", type=float, default=0.3, metavar="FRACTION",
                   help="burn.model entrainment: spread of the flame kernel's radius at the spark, coefficient"
                        " of variation [-] (default 0.3)")
    t.add_argument("--turbulence-cov", type=float, default=0.05, metavar="FRACTION",
                   help="burn.model entrainment: spread of the cycle's charge motion at IVC (and so of the"
                        " turbulence intensity at the spark), coefficient of variation [-] (default 0.05)")
    t.add_argument("--efficiency-sd", type=float, default=0.004, metavar="FRACTION",
                   help="spread (sd) of the combustion efficiency [-] (default 0.004)")
    t.add_argument("--partial-rate", type=float, default=0.0, metavar="SHARE",
                   help="share of partial burns, 0..1 [-] (default 0)")
    t.add_argument("--misfire-rate", type=float, default=0.0, metavar="SHARE",
                   help="share of misfires, 0..1 [-] (default 0)")
    t.add_argument("--coupled", action="store_true",
                   help="couple consecutive cycles through their residual gas (default: independent cycles);"
                        " with a fixed-duration Wiebe burn (the demo's) the coupling moves the trapped mass"
                        " and residual fraction, not the burn phasing; with burn.model entrainment the residual's dilution"
                        " also changes the next cycle's burn")
    t.add_argument("--seed", type=int, default=1, help="random seed (default 1)")
    t.add_argument("--artefacts", choices=("default", "none"), default="default",
                   help="measurement flaws: a realistic default set, or none (true pressure) (default: default)")
    t.add_argument("--artefact", dest="artefact_changes", action="append", default=[], metavar="KEY=VALUE",
                   help="set one measurement flaw on top of --artefacts (repeatable; KEY a field of"
                        " cyclesim.traces.artefacts.ArtefactSettings, e.g. --artefact tdc_offset_deg=0.5"
                        " --artefact noise_bar=0.05 --artefact clip_max_bar=none"
                        " --artefact knock_mode_weights=1,0.5,0.35,0.25,0.15; default: none)")
    t.add_argument("--formats", default=None,
                   help="comma list of csv_long, csv_wide, npz, mf4 (default: all; mf4 when the optional"
                        " MDF extra is installed)")
    t.add_argument("--force", action="store_true",
                   help="write into a non-empty --out folder (default: refuse); trace files of an earlier run"
                        " that this run does not write are removed")
    t.add_argument("--no-plots", action="store_true", help="skip the plot traces.png (default: drawn)")
    t.add_argument("--resume", action="store_true",
                   help="continue an interrupted set in --out from its finished chunks (same draws, same result)"
                        " (default: start afresh)")
    t.add_argument("--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE",
                   help="override any config value (repeatable; default: none)")
    t.add_argument("--debug", action="store_true", help="show tracebacks (default: one-line errors)")

    a = subparsers.add_parser(
        "analyse", help="analyse a measured cylinder-pressure trace set (IMEP, pegging, heat release, burn points)"
    )
    a.add_argument("file", type=Path, help="trace file: .csv (long or wide), .npz or .mf4")
    a.add_argument("--engine", required=True,
                   help="config (path or built-in name) giving geometry, valve events, walls and speed (required)")
    a.add_argument("--out", type=Path, required=True, help="write the analysis files here (required)")
    a.add_argument("--peg", choices=("intake", "polytropic"), default="intake",
                   help="pegging: to intake-manifold pressure near intake BDC, or two-point polytropic"
                        " (default: intake)")
    a.add_argument("--tdc-correct", action="store_true",
                   help="estimate the TDC offset from motored cycles (in FILE or --motored) and correct it"
                        " (default: no correction)")
    a.add_argument("--tdc-from-fired", action="store_true",
                   help="for a set without motored cycles: fit the TDC offset with the pegging constant and the"
                        " wall heat to the first law of the fired cycles' compression before the spark, state its"
                        " 95 %% interval and correct it (refused, with the reason, where the interval is wider"
                        " than 0.3 deg) (default: off)")
    a.add_argument("--spark-advance", type=float, metavar="DEG",
                   help="spark advance of the recorded set [deg BTDC]: ends the --tdc-from-fired window 2 deg"
                        " before it (default: the engine config's burn.spark_advance_deg; none: window to -40 deg)")
    a.add_argument("--sensor-delay-us", type=float, metavar="MICROSECONDS",
                   help="known delay of the pressure signal behind the chamber (a recessed mount's passage:"
                        " 2 zeta / (2 pi f_n)) [us], taken off the phase --tdc-from-fired finds (default 0)")
    a.add_argument("--partial-burn-share", type=float, default=0.85, metavar="SHARE",
                   help="a cycle releasing less than this share of the fired cycles' median heat is a partial"
                        " burn (below 0.1, with no gross work or a flat pressure ratio, a misfire), 0.1..1 [-]"
                        " (default 0.85)")
    a.add_argument("--no-plots", action="store_true", help="skip the analysis plots (default: drawn)")
    a.add_argument("--motored", type=Path,
                   help="a motored trace set of the same recording, for --tdc-correct (default: none)")
    a.add_argument("--thermal-tau", type=float, metavar="SECONDS",
                   help="time constant of the sensor's thermal-drift lag [s], > 0 (default: estimated from the"
                        " set, 0.002 where the estimate is not well defined)")
    a.add_argument("--force", action="store_true", help="write into a non-empty --out folder (default: refuse)")
    a.add_argument("--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE",
                   help="override a value of the engine config (repeatable; default: none)")
    a.add_argument("--debug", action="store_true", help="show tracebacks (default: one-line errors)")


def _positive(name: str, value, unit: str) -> None:
    import math

    if value is None:
        return
    if not (math.isfinite(value) and value > 0):
        raise CyclesimError(f"{name} {value:g}: expected a number > 0 [{unit}]")


def cmd_analyse(args) -> int:
    """Handler of ``cyclesim analyse``: read, analyse, print the set figures, write files."""
    import math

    from ..config import get_dotted, load_config
    from ..output import prepare_out_dir
    from ..traces.analysis import analyse, with_measured_masses
    from ..traces.analysis_files import write_analysis
    from ..traces.analysis_settings import analysis_inputs
    from ..traces.export import read_trace

    tau = getattr(args, "thermal_tau", None)
    _positive("--thermal-tau", tau, "s")
    share = float(getattr(args, "partial_burn_share", 0.85))
    if not (math.isfinite(share) and 0.1 <= share <= 1.0):
        raise CyclesimError(f"--partial-burn-share {share:g}: expected a share from 0.1 to 1 [-]")
    from_fired = bool(getattr(args, "tdc_from_fired", False))
    if from_fired and args.tdc_correct:
        raise CyclesimError("--tdc-from-fired and --tdc-correct: choose one way of finding the TDC offset")
    case = load_config(args.engine, list(getattr(args, "overrides", []) or []))
    geom, settings, speed = analysis_inputs(case)
    prepare_out_dir(args.out, getattr(args, "force", False), create=False)     # checked now, made once it ran
    from ..traces.trace_checks import check_measured

    ts = read_trace(args.file)
    check_measured(ts, args.file)
    from ..traces.engine_check import engine_mismatches, mismatch_warning

    mismatch = mismatch_warning(engine_mismatches(dict(ts.meta or {}, speed_rpm=ts.speed_rpm), case),
                                Path(args.file).name, str(args.engine))
    if not math.isfinite(ts.speed_rpm):
        ts.speed_rpm = speed
    motored = None
    if getattr(args, "motored", None):
        motored = read_trace(args.motored)
        check_measured(motored, args.motored)
        if not math.isfinite(motored.speed_rpm):
            motored.speed_rpm = speed
    settings = with_measured_masses(settings, ts.meta)
    settings = settings.replace(peg=args.peg, tdc_correct=bool(args.tdc_correct), tdc_from_fired=from_fired,
                                partial_burn_share=share)
    spark = getattr(args, "spark_advance", None)
    if spark is not None:
        if not (math.isfinite(spark) and -20.0 <= spark <= 90.0):
            raise CyclesimError(f"--spark-advance {spark:g}: expected degrees before TDC, -20..90")
        settings = settings.replace(spark_advance_deg=float(spark))
    delay = getattr(args, "sensor_delay_us", None)
    if delay is not None:
        if not (math.isfinite(delay) and 0.0 <= delay <= 1000.0):
            raise CyclesimError(f"--sensor-delay-us {delay:g}: expected microseconds, 0..1000")
        settings = settings.replace(sensor_delay_s=float(delay) * 1e-6)
    if tau is not None:
        settings = settings.replace(thermal_time_constant_s=float(tau))
    res = analyse(ts, geom, settings, motored=motored)      # errors here leave no --out folder behind
    if mismatch:
        res.warnings.insert(0, mismatch)
    prepare_out_dir(args.out, getattr(args, "force", False))
    st = res.stats

    def f(key, spec=".2f"):
        v = st.get(key)
        return "-" if v is None or not math.isfinite(v) else format(v, spec)

    n_fired = st["n_fired"]
    over = f"{n_fired} fired cycles" if n_fired else f"all {st['n_cycles']} cycles, none fired"
    print(f"{args.file}: {st['n_cycles']} cycles ({n_fired} fired), {ts.speed_rpm:g} rpm, peg {args.peg}")
    print(f"  cycles fired / partial burn / misfire {n_fired} / {st['n_partial_burn']} / {st['n_misfire']}"
          f" (figures below over the fired cycles only; misfires and partial burns excluded)")
    if res.tdc["estimated"] and res.tdc.get("interval_deg"):
        lo, hi = res.tdc["interval_deg"]
        lo_w, hi_w = res.tdc["window_deg"]
        print(f"  TDC offset found and corrected     {res.tdc['offset_deg']:+.2f} deg (95 % {lo:+.2f}..{hi:+.2f};"
              f" fired-cycle compression {lo_w:g}..{hi_w:g} deg, {res.tdc['n_cycles_fit']} cycles)")
    elif res.tdc["estimated"]:
        print(f"  TDC offset found and corrected     {res.tdc['offset_deg']:+.2f} deg"
              f" (loss angle {res.tdc['loss_angle_deg']:.2f} deg before TDC, {res.tdc['n_motored']} motored cycles)")
    print(f"  net IMEP (mean, COV)               {f('imep_net_bar_mean')} bar, {100 * st['imep_net_cov']:.2f} % ({over})"
          if math.isfinite(st["imep_net_cov"])
          else f"  net IMEP (mean)                    {f('imep_net_bar_mean')} bar ({over})")
    print(f"  gross IMEP                         {f('imep_gross_bar_mean')} bar")
    print(f"  peg offset (mean)                  {f('peg_offset_bar_mean', '.3f')} bar")
    src = st["trapped_mass_source"]
    if src == "measured air and fuel":
        xr = settings.residual_fraction
        given = get_dotted(case.raw, "operating.residual_fraction") is not None
        src += (f", burned-gas (residual) fraction at IVC {xr:.3f} "
                f"{'from the engine config' if given else 'assumed (analyser default)'}")
    print(f"  trapped mass                       {f('trapped_mass_mg', '.1f')} mg ({src})")
    print(f"  CA10 / CA50 / CA90                 {f('ca10_deg_mean', '.1f')} / {f('ca50_deg_mean', '.1f')}"
          f" / {f('ca90_deg_mean', '.1f')} deg")
    print(f"  peak pressure at angle             {f('p_max_bar_mean', '.1f')} bar at {f('theta_pmax_deg_mean', '.1f')} deg")
    print(f"  polytropic n compression/expansion {f('n_compression_mean', '.3f')} / {f('n_expansion_mean', '.3f')}")
    if math.isfinite(st.get("thermal_drift_bar_per_K_mean", float("nan"))):
        print(f"  thermal drift, lag time constant   {1e5 * st['thermal_drift_bar_per_K_mean']:.2f}e-5 bar/K,"
              f" {1e3 * st['thermal_time_constant_s']:.2f} ms ({st['thermal_time_constant_source']})")
    for w in res.warnings:
        print(f"warning: {w}")
    files = write_analysis(res, args.out)
    if not getattr(args, "no_plots", False):
        from ..traces.analysis_plots import plot_analysis

        files += plot_analysis(res, args.out, title=f"{case.name}: {Path(args.file).name}")
    print(f"wrote {len(files)} files to {args.out}/: " + ", ".join(p.name for p in files))
    return 0


#: Files ``cyclesim traces`` may write into --out (the other formats of a run, the plot).
_TRACE_OUTPUTS = tuple(f"{stem}.{ext}" for stem in ("trace", "true_pressure")
                       for ext in ("long.csv", "wide.csv", "npz", "mf4")) + ("truth.csv", "truth.json", "traces.png")


def cmd_traces(args) -> int:
    """Handler of ``cyclesim traces``: synthesise, write traces in each format and the truth."""
    import shutil
    import time

    from .checks import seed

    seed(args.seed)

    from ..config import load_config
    from ..errors import ConfigError
    from ..output import CAUTION, prepare_out_dir
    from ..traces import artefacts as art
    from ..traces.export import FORMATS, TraceSet, write_trace_set, write_truth
    from ..traces.synthesis import CycleVariation, check_request, synthesize

    t0 = time.perf_counter()
    case = load_config(args.config, list(args.overrides))
    settings = art.ArtefactSettings.default() if args.artefacts == "default" else art.ArtefactSettings.none()
    for change in getattr(args, "artefact_changes", None) or []:
        settings = settings.with_text(change, "--artefact")     # checked before any folder is made

    mdf_hint = 'install the optional MDF extra from the project folder: pip install -e ".[mdf]"'
    skipped_mdf = False
    if args.formats is None:
        formats = list(FORMATS)
        import importlib.util

        if importlib.util.find_spec("asammdf") is None:
            formats.remove("mf4")
            skipped_mdf = True
    else:
        formats = [f.strip() for f in args.formats.split(",") if f.strip()]

    for f in formats:
        if f not in FORMATS:
            from ..params import suggestion

            raise CyclesimError(f"--formats {f!r}: unknown" + suggestion(f, FORMATS) + f"; choose from {', '.join(FORMATS)}")
    if "mf4" in formats:
        try:
            import asammdf  # noqa: F401
        except ImportError as exc:
            raise CyclesimError(f"--formats mf4 (ASAM MDF 4): {mdf_hint}") from exc
    var = CycleVariation(start_sd_deg=args.start_sd, duration_cov=args.duration_cov,
                         kernel_radius_cov=args.kernel_cov, turbulence_cov=args.turbulence_cov,
                         efficiency_sd=args.efficiency_sd, partial_burn_rate=args.partial_rate,
                         misfire_rate=args.misfire_rate, coupled=args.coupled, seed=args.seed)
    resolution = None if args.sample_rate is not None else args.resolution
    try:
        check_request(case, args.cycles, var, resolution, args.sample_rate,
                      names=("--resolution", "--sample-rate"))
    except ConfigError as exc:
        msg = str(exc)
        for lib, opt in (("cycles", "--cycles"), ("start_sd_deg", "--start-sd"),
                         ("duration_cov", "--duration-cov"), ("efficiency_sd", "--efficiency-sd"),
                         ("kernel_radius_cov", "--kernel-cov"), ("turbulence_cov", "--turbulence-cov"),
                         ("partial_burn_rate", "--partial-rate"), ("misfire_rate", "--misfire-rate")):
            msg = msg.replace(f"traces: {lib} =", f"{opt}")        # the option the user typed
        raise ConfigError(msg) from None
    from ..results.outdir import made_by_lock

    created = not args.out.exists() or made_by_lock(args.out)     # (the folder's lock makes it)
    try:
        if args.resume:
            args.out.mkdir(parents=True, exist_ok=True)
        else:
            prepare_out_dir(args.out, args.force)
            shutil.rmtree(args.out / ".chunks", ignore_errors=True)
        from .progress import count_bar

        bar = count_bar(args.cycles, "cycles", "cycle")
        try:
            ss = synthesize(case, args.cycles, var, resolution_deg=resolution, sample_rate_hz=args.sample_rate,
                            artefacts=settings, checkpoint_dir=args.out / ".chunks",
                            progress=None if bar is None else (lambda done, total: bar.update(done - bar.n)))
        finally:
            if bar is not None:
                bar.close()
    except CyclesimError:
        # a folder this run made that holds no finished chunk is not left behind
        chunks = args.out / ".chunks"
        if created and args.out.is_dir() and not any(chunks.glob("cycles_*.npz")):
            shutil.rmtree(chunks, ignore_errors=True)
            if not any(args.out.iterdir()):
                args.out.rmdir()
        raise
    meta = dict(ss.meta, caution=CAUTION)
    ts = TraceSet(ss.theta, ss.pressure_pa, ss.intake_pa, ss.meta["speed_rpm"], meta)
    files = write_trace_set(ts, args.out, "trace", formats)
    truth_ts = TraceSet(ss.theta, ss.pressure_true_pa, None, ss.meta["speed_rpm"], dict(meta, signal="true pressure"))
    files += write_trace_set(truth_ts, args.out, "true_pressure", [f for f in formats if f == "npz"] or ["npz"])
    files += write_truth(args.out, ss.truth, ss.stats, settings=ss.settings)
    if not args.no_plots:
        from ..plots import plot_trace_set

        files += plot_trace_set(ss, args.out)
    shutil.rmtree(args.out / ".chunks", ignore_errors=True)
    # files of an earlier run in the folder that this run did not write (other formats, the plot
    # under --no-plots) would pass for results of this set: removed
    written = {p.name for p in files}
    stale = [args.out / n for n in _TRACE_OUTPUTS if n not in written and (args.out / n).is_file()]
    for p in stale:
        p.unlink()
    st = ss.stats
    n = st["n_cycles"]
    print(f"{case.name}: {n} cycles ({'coupled' if args.coupled else 'independent'}),"
          f" {ss.meta['resolution_deg']:g} deg output, seed {args.seed}")
    print(f"  net IMEP mean {st['imep_net_mean_bar']:.3f} bar, COV {100 * st['cov_imep_net']:.2f} %"
          f" (all {n} cycles, misfires included)")
    print(f"  CA50 mean {st.get('ca50_mean_deg', float('nan')):.2f} deg; knocking share {100 * st['knocking_share']:.1f} %,"
          f" misfires {100 * st['misfire_share']:.1f} %, partial burns {100 * st['partial_burn_share']:.1f} %")
    nan = float("nan")
    print(f"  burn angles mean (sd): 0-10 % {st.get('burn_0_10_mean_deg', nan):.1f}"
          f" ({st.get('burn_0_10_sd_deg', nan):.2f}) deg, 10-90 % {st.get('burn_10_90_mean_deg', nan):.1f}"
          f" ({st.get('burn_10_90_sd_deg', nan):.2f}) deg, CA50 sd {st.get('ca50_sd_deg', nan):.2f} deg")
    if args.coupled:
        import numpy as np

        xr = np.array([r["residual_fraction"] for r in ss.truth], float)
        xr = xr[np.isfinite(xr)]
        sd = float(np.std(xr, ddof=1)) if xr.size > 1 else float("nan")
        why = ("the residual's dilution and heat change the next cycle's flame"
               if case.submodels["burn"].model == "entrainment"
               else "moves trapped mass and residual; a fixed-duration Wiebe burn keeps its phasing")
        print(f"  residual fraction per cycle        mean {100 * np.mean(xr):.2f} %, sd {100 * sd:.3f} %"
              f" (coupled: {why})")
    if skipped_mdf:
        print(f"  ASAM MDF 4 (.mf4) not written: {mdf_hint}")
    if stale:
        print(f"  removed from an earlier run (not written by this one): {', '.join(p.name for p in stale)}")
    print(f"wrote {len(files)} files to {args.out}/ in {time.perf_counter() - t0:.1f} s: "
          + ", ".join(p.name for p in files))
    return 0


HANDLERS = {"traces": cmd_traces, "analyse": cmd_analyse}

