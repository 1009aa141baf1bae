"""Command line of calibration: ``cyclesim fit`` and ``cyclesim predict``."""

from __future__ import annotations

import sys
from pathlib import Path

from ..errors import ConfigError

__all__ = ["add_parsers", "cmd_fit", "cmd_predict", "HANDLERS"]


def add_parsers(subparsers) -> None:
    """Add the ``fit`` and ``predict`` sub-commands to an ``argparse`` sub-parser set."""
    from ..calibration.bounds import CALIBRATION_RULE

    f = subparsers.add_parser(
        "fit", help="fit submodel parameters to measured cylinder pressure; write a calibrated config",
        description="Fit model parameters to measured cylinder pressure by bounded least squares and write"
                    " a calibrated config. Parameters: " + CALIBRATION_RULE + ".")
    f.add_argument("config", help="config (path or built-in name) of the engine and operating point")
    f.add_argument("traces", nargs="+", type=Path, help="measured trace file(s): .csv, .npz or .mf4")
    f.add_argument("--param", dest="params", action="append", default=None, metavar="KEY",
                   help="dotted key of a model parameter to fit, e.g. burn.duration_deg (repeatable);"
                        " operating conditions such as operating.speed_rpm are refused (see above)."
                        " Default: the constants the config's models declare fittable (burn.model"
                        " entrainment: burn.production_coefficient and burn.kernel_radius_mm); a model"
                        " that declares none needs --param")
    f.add_argument("--out", type=Path, required=True, help="folder for calibrated.yaml, calibration.json, plots")
    f.add_argument("--mode", choices=("closed", "full"), default="closed",
                   help="simulate the closed cycle IVC..EVO (default, fast) or the full cycle")
    f.add_argument("--target", choices=("pressure", "heat_release", "both"), default="pressure",
                   help="residual to fit: cylinder pressure [bar] (default), apparent net heat release"
                        " (divided by displacement x 1 bar, so it reads in bar), or both")
    f.add_argument("--ensemble", choices=("mean", "each"), default="mean",
                   help="fit the mean of the fired cycles (default) or each cycle")
    f.add_argument("--peg", choices=("intake", "polytropic", "none"), default="intake",
                   help="pegging of the measured pressure: to the intake pressure near BDC (default), by a"
                        " polytropic compression, or none (the signal is already absolute)")
    f.add_argument("--tdc-correct", action="store_true", help="estimate the TDC offset from motored cycles")
    f.add_argument("--tdc-offset", type=float, metavar="DEG", help="a known TDC offset to correct [deg]")
    f.add_argument("--motored", type=Path, help="motored trace set of the same recording (for --tdc-correct)")
    f.add_argument("--weight", dest="weights", action="append", default=[], metavar="LO:HI=W",
                   help="weight of the squared residual between LO and HI deg, e.g. --weight=-20:40=4 (repeatable)")
    f.add_argument("--window", metavar="LO:HI", help="crank-angle window of the residuals [deg]")
    f.add_argument("--covariance", choices=("classical", "hac"), default="hac",
                   help="the autocorrelation-robust sandwich estimate (default) or s^2 (J^T J)^-1")
    f.add_argument("--nuisance", action="append", default=[], choices=("offset", "gain", "thermal"),
                   help="estimate a measurement flaw with the parameters: pressure offset, gain, sensor"
                        " thermal shock (repeatable; pressure target only). With offset or thermal the closed"
                        " cycle starts from the config's IVC pressure unless operating.ivc_pressure_bar is fitted")
    f.add_argument("--thermal-tau", type=float, default=None, metavar="S",
                   help="time constant of the thermal-shock term [s] (default 0.002)")
    f.add_argument("--tdc-sd", type=float, default=None, metavar="DEG",
                   help="standard uncertainty of the TDC phasing [deg], added to the intervals"
                        " (default: from the loss angle when --tdc-correct, else 0)")
    f.add_argument("--level", type=float, default=0.95, help="confidence level of the intervals (0.95)")
    f.add_argument("--step", type=float, metavar="DEG", help="integration step of the fit [deg]")
    f.add_argument("--no-plots", action="store_true",
                   help="skip the PNG plots (pressure, log p - log V, heat release, residuals); default: write them")
    f.add_argument("--force", action="store_true", help="write into a non-empty --out folder")
    f.add_argument("--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE",
                   help="override a value of the config (repeatable)")
    f.add_argument("--debug", action="store_true", help="show tracebacks")

    p = subparsers.add_parser(
        "predict", help="sweep a calibrated config with parameter samples from its covariance (bands)")
    p.add_argument("config", help="calibrated config (calibrated.yaml)")
    p.add_argument("--calibration", type=Path, required=True, help="calibration.json written by 'cyclesim fit'")
    p.add_argument("--vary", required=True, metavar="KEY=SPEC",
                   help="swept key and values, e.g. burn.spark_advance_deg=10:40:2")
    p.add_argument("--study", choices=("sweep", "spark"), default="sweep",
                   help="plain sweep, or spark sweep with the MBT distribution")
    p.add_argument("--samples", type=int, default=64, help="parameter samples (default 64)")
    p.add_argument("--seed", type=int, default=1,
                   help="seed of the parameter sampling (default 1; the same seed gives the same samples)")
    p.add_argument("--band", default="5:95", metavar="LO:HI", help="quantile band in percent (default 5:95)")
    p.add_argument("--out", type=Path, required=True,
                   help="folder for prediction.csv, prediction.json and the band plots")
    p.add_argument("--no-plots", action="store_true", help="skip the band plots (PNG); default: write them")
    p.add_argument("--force", action="store_true", help="write into a non-empty --out folder")
    p.add_argument("--debug", action="store_true", help="show tracebacks")


def _pair(text: str, what: str) -> tuple[float, float]:
    try:
        a, b = (float(x) for x in text.split(":"))
    except ValueError:
        raise ConfigError(f"{what} {text!r}: expected LO:HI, e.g. -30:60") from None
    if not a < b:
        raise ConfigError(f"{what} {text!r}: LO must be below HI")
    return a, b


def cmd_fit(args) -> int:
    """Handler of ``cyclesim fit``."""
    from ..config import load_config
    from ..calibration import check_calibratable
    from ..output import prepare_out_dir

    from .checks import finite

    finite(args.level, "--level", 0.0, 1.0, lo_open=True, hi_open=True)
    finite(args.tdc_offset, "--tdc-offset")
    finite(args.tdc_sd, "--tdc-sd", 0.0, None, lo_open=True)
    finite(args.thermal_tau, "--thermal-tau", 0.0, None, lo_open=True)
    finite(args.step, "--step", 0.0, None, lo_open=True)
    case = load_config(args.config, list(args.overrides))
    if not args.params:
        from ..calibration import declared_fit_parameters

        args.params = declared_fit_parameters(case)
        print(f"fitting the constants the models declare: {', '.join(args.params)}")
    for k in dict.fromkeys(args.params):       # refuse before anything is written
        check_calibratable(case, k, args.mode)
    weights = {}
    for w in args.weights:
        rng, _, val = w.partition("=")
        if not val:
            raise ConfigError(f"--weight {w!r}: expected LO:HI=W, e.g. -20:40=4")
        try:
            weights[_pair(rng, "--weight")] = float(val)
        except ValueError:
            raise ConfigError(f"--weight {w!r}: weight {val!r} is not a number") from None
    prepare_out_dir(args.out, args.force)
    from .progress import StatusLine

    status = StatusLine() if getattr(sys.stderr, "isatty", lambda: False)() else None
    try:
        res = _fit_with(args, case, weights, status)
    finally:
        if status is not None:
            status.close()
    if not args.overrides:
        res.source = args.config
    print(res.text())
    files = res.write(args.out, plots=not args.no_plots)
    print(f"wrote {len(files)} files to {args.out}/: " + ", ".join(p.name for p in files))
    return 0


def _fit_with(args, case, weights, status):
    """The fit of ``cyclesim fit``, with its iterations on a status line where one is given."""
    from ..calibration import fit

    def progress(it, done, total):
        status(f"fit iteration {it}: {done} of {total} problem(s) converged")

    return fit(case, [str(t) for t in args.traces], args.params, mode=args.mode, weights=weights or None,
              target=args.target, ensemble=args.ensemble, peg=None if args.peg == "none" else args.peg,
              tdc_correct=args.tdc_correct, tdc_offset_deg=args.tdc_offset, motored=args.motored,
              window=_pair(args.window, "--window") if args.window else None, level=args.level,
              covariance=args.covariance, step_deg=args.step, nuisance=tuple(args.nuisance),
              tdc_sd_deg=args.tdc_sd, progress=None if status is None else progress,
              **({} if args.thermal_tau is None else {"thermal_tau_s": args.thermal_tau}))


def cmd_predict(args) -> int:
    """Handler of ``cyclesim predict``."""
    import numpy as np

    from ..output import prepare_out_dir
    from ..studies.uncertainty import propagate

    from .checks import seed, whole

    seed(args.seed)
    whole(args.samples, "--samples", 2)
    lo, hi = _pair(args.band, "--band")
    if not (0 <= lo < hi <= 100):
        raise ConfigError(f"--band {args.band!r}: expected percentages 0 <= LO < HI <= 100")
    from ..config import load_config
    from ..studies.uncertainty import read_calibration

    read_calibration(args.calibration, load_config(args.config))   # refused before anything is written
    prepare_out_dir(args.out, args.force)
    res = propagate(args.config, args.calibration, study=args.study, vary=args.vary, n_samples=args.samples,
                    seed=args.seed, quantiles=(lo / 100, hi / 100))
    files = res.write(args.out, plots=not args.no_plots)
    main = next((f for f in ("torque_Nm", "imep_net_bar", "imep_closed_bar") if f in res.figures), None)
    print(f"{res.key}: {len(res.values)} points x {len(res.samples)} samples"
          f" ({res.n_failed} failed); {lo:g}-{hi:g} % bands")
    if main:
        d = res.figures[main]
        w = max(len(res.key), 10)
        print(f"  {res.key:>{w}s}  {main + ' nominal':>{max(len(main) + 8, 9)}s}"
              f"  {'p%g' % lo:>9s}  {'p%g' % hi:>9s}  {'mean':>9s}")
        for i, v in enumerate(res.values):
            print(f"  {v:>{w}g}  {d['nominal'][i]:>{max(len(main) + 8, 9)}.3f}  {d['lower'][i]:9.3f}"
                  f"  {d['upper'][i]:9.3f}  {d['mean'][i]:9.3f}")
    for n in res.notes:
        print(f"  note: {n}")
    if res.mbt:
        nom = res.mbt.get("nominal_deg")
        nom = "not bracketed" if nom is None or not np.isfinite(nom) else f"{nom:.2f} deg"
        print(f"  MBT {nom} (band {res.mbt['lower_deg']:.2f} .. {res.mbt['upper_deg']:.2f} deg,"
              f" {100 * res.mbt['bracketed_share']:.0f} % of samples bracketed)")
    print(f"wrote {len(files)} files to {args.out}/: " + ", ".join(p.name for p in files))
    return 0


HANDLERS = {"fit": cmd_fit, "predict": cmd_predict}
