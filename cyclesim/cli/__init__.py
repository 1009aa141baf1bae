"""Command line: a thin shell over the Python API.

Every error a user can cause prints one line and exits with status 2;
``--debug`` shows the traceback instead.
"""

from __future__ import annotations

import argparse
import signal
import sys
import time
from pathlib import Path

from ..errors import CyclesimError


def _common(p: argparse.ArgumentParser) -> None:
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE",
                   help="override any config value, e.g. --set operating.speed_rpm=2000 (repeatable)")
    p.add_argument("--debug", action="store_true", help="show tracebacks")


def build_parser() -> argparse.ArgumentParser:
    ap = argparse.ArgumentParser(
        prog="cyclesim",
        description="Crank-angle simulation of a real four-stroke spark-ignition engine cycle.",
    )
    ap.add_argument("--version", action="store_true", help="print the version")
    sub = ap.add_subparsers(dest="command")

    r = sub.add_parser("run", help="simulate one operating point and print its figures")
    r.add_argument("config", nargs="?", default="demo",
                   help="config file, or a built-in config name (default: demo)")
    r.add_argument("--out", type=Path, help="write summary.json, trace.csv and plots here")
    r.add_argument("--force", action="store_true", help="write into a non-empty --out folder")
    r.add_argument("--no-plots", action="store_true", help="with --out: skip the PNG plots")
    r.add_argument("--json", action="store_true", help="print the summary as JSON instead of the table")
    _common(r)

    pl = sub.add_parser("plugins", help="list the installed submodels and their parameters")
    pl.add_argument("role", nargs="?", help="only this role (burn, heat_transfer, ...)")
    pl.add_argument("--debug", action="store_true")

    k = sub.add_parser("keys", help="list the core config keys (engine, valves, operating, ...) with unit,"
                                    " default, allowed range and meaning")
    k.add_argument("section", nargs="?", help="only this section (engine, valves, operating, fuel, gas, walls,"
                                              " simulation, multi_cylinder)")
    k.add_argument("--debug", action="store_true")

    c = sub.add_parser("configs", help="list the built-in configs")
    c.add_argument("--debug", action="store_true")

    sh = sub.add_parser("show", help="print the merged, validated config with every default filled in")
    sh.add_argument("config", nargs="?", default="demo")
    _common(sh)
    from .studies import add_parsers
    from .traces import add_parsers as add_trace_parsers

    add_parsers(sub)
    add_trace_parsers(sub)
    from .fit import add_parsers as add_fit_parsers

    add_fit_parsers(sub)
    from .engine import add_parsers as add_engine_parsers

    add_engine_parsers(sub)
    return ap


def cmd_run(args) -> int:
    from .. import api
    from ..output import clear_case_files, prepare_out_dir, summary_table, write_case
    import json

    t0 = time.perf_counter()
    case = api.load_config(args.config, args.overrides)
    if args.out:
        prepare_out_dir(args.out, args.force)
    res = api.simulate([case], isolate=False)[0]
    if res.error:
        raise CyclesimError(res.error)
    elapsed = time.perf_counter() - t0
    if args.json:
        print(json.dumps(res.summary_json(), indent=2))
    else:
        print(summary_table(res))
        print(f"simulated in {elapsed:.2f} s")
    if args.out:
        if args.force:
            clear_case_files(args.out)
        files = write_case(res, args.out, plots=not args.no_plots)
        print(f"wrote {len(files)} files to {args.out}/: " + ", ".join(f.name for f in files))
    return 0


def cmd_plugins(args) -> int:
    from ..solve.kernel import loop_status
    from ..registry import get_registry
    from ..roles import ROLES

    reg = get_registry()
    roles = [args.role] if args.role else list(ROLES)
    for role in roles:
        if role not in reg.submodels:
            from ..params import suggestion

            raise CyclesimError(f"plugins {role!r}: unknown role" + suggestion(role, ROLES) + f"; roles: {', '.join(ROLES)}")
        print(f"[{role}]")
        for name, cls in sorted(reg.submodels[role].items()):
            print(f"  {name}: {cls.summary}  ({cls.__module__})")
            print(f"      runs: {loop_status(cls)}")
            _print_params(cls.params, "      ")
            for ref in cls.references:
                print(f"      ref: {ref}")
        print()
    return 0


def _print_params(params, indent: str) -> None:
    """One line per declared parameter: name, unit, default, allowed range, meaning."""
    for p in params:
        default = "required" if p.required else repr(p.default)
        print(f"{indent}{p.name:<28s} [{p.unit}] default {default}; {p.range_text()}. {p.doc}")


def cmd_keys(args) -> int:
    """``cyclesim keys [SECTION]``: the core config sections' keys with unit, default, range, meaning."""
    from ..config import CORE_SCHEMA, MULTI_SCHEMA
    from ..config.runners import RUNNER_SCHEMA
    from ..params import suggestion

    sections = {**CORE_SCHEMA, "multi_cylinder": MULTI_SCHEMA, "intake.runner": RUNNER_SCHEMA,
                "exhaust.runner": RUNNER_SCHEMA}
    if args.section and args.section not in sections:
        raise CyclesimError(f"keys {args.section!r}: unknown section" + suggestion(args.section, sections)
                            + f"; sections: {', '.join(sections)} (submodel sections: cyclesim plugins ROLE)")
    for sec in [args.section] if args.section else sections:
        print(f"[{sec}]")
        _print_params(sections[sec], "  ")
        print()
    print("submodel sections (burn, heat_transfer, ...): cyclesim plugins [ROLE]")
    return 0


def cmd_configs(args) -> int:
    from ..config import builtin_config_dir, read_yaml

    d = builtin_config_dir()
    for p in sorted(d.glob("*.yaml")):
        desc = read_yaml(p).get("description", "")
        print(f"  {p.stem:<24s} {desc}")
    print(f"(folder: {d})")
    return 0


def cmd_show(args) -> int:
    import yaml

    from ..config import CORE_SCHEMA, load_config

    case = load_config(args.config, args.overrides)
    if case.multi_cylinder is not None:
        _check_multi_cylinder(case)
    out = {"name": case.name}
    for sec in CORE_SCHEMA:
        out[sec] = dict(vars(case.section(sec)))
    for role, ch in case.submodels.items():
        out[role] = {"model": ch.model, **ch.params}
    if case.multi_cylinder is not None:
        out["multi_cylinder"] = dict(vars(case.multi_cylinder))
    print(yaml.safe_dump(out, sort_keys=False))
    return 0


_FILE_OUT = ("report",)
"""Commands whose ``--out`` is a file; every other command's ``--out`` folder is locked for its run."""


def _check_multi_cylinder(case) -> None:
    """The per-cylinder entries of ``multi_cylinder`` against ``engine.cylinders``, as the engine
    commands check them (a shown config is one they can run)."""
    from ..engine.setup import _spread, exhaust_branches, firing_offsets
    from ..errors import ConfigError

    ms, n = case.multi_cylinder, int(case.engine.cylinders)
    firing_offsets(ms.firing_order, n)
    exhaust_branches(ms, n)
    for key in ("cylinder_modes", "spread_trapped_mass", "spread_spark_deg", "spread_compression_ratio",
                "spread_wall_temperature_K"):
        if getattr(ms, key) is not None and len(getattr(ms, key)) != n:
            _spread(ms, key, n, 0.0)      # raises the engine's one-line message
    if ms.firing_order is not None and any(float(v) != int(v) for v in ms.firing_order):
        raise ConfigError(f"multi_cylinder.firing_order = {list(ms.firing_order)}: expected whole cylinder numbers")


def main(argv: list[str] | None = None) -> int:
    from ..config.shell_hints import shell_split_hint

    hint = shell_split_hint(sys.argv[1:] if argv is None else argv)
    if hint:
        print(f"cyclesim: error: {hint}", file=sys.stderr)
        return 2
    ap = build_parser()
    args = ap.parse_args(argv)
    if args.version:
        from .. import __version__

        print(f"cyclesim {__version__}")
        return 0
    if not args.command:
        ap.print_help()
        return 0
    handlers = {"run": cmd_run, "plugins": cmd_plugins, "configs": cmd_configs, "show": cmd_show, "keys": cmd_keys}
    from .studies import HANDLERS
    from .traces import HANDLERS as TRACE_HANDLERS

    handlers.update(HANDLERS)
    handlers.update(TRACE_HANDLERS)
    from .fit import HANDLERS as FIT_HANDLERS

    handlers.update(FIT_HANDLERS)
    from .engine import HANDLERS as ENGINE_HANDLERS

    handlers.update(ENGINE_HANDLERS)
    from ..results.outdir import optional_lock
    from ..stopping import terminate_as_interrupt

    out_folder = None if args.command in _FILE_OUT else getattr(args, "out", None)

    from ..textsafe import PrintableStream, printable

    streams = sys.stdout, sys.stderr
    sys.stdout, sys.stderr = PrintableStream(sys.stdout), PrintableStream(sys.stderr)
    sigint = _watch_sigint()
    try:
        from ..solve import kernel

        kernel.choice()        # the environment's loop settings, checked before anything is written
        kernel.threads()
        with terminate_as_interrupt(), optional_lock(out_folder):   # SIGTERM like Ctrl-C; one writer per --out
            return handlers[args.command](args)
    except CyclesimError as exc:
        if getattr(args, "debug", False):
            raise
        print(f"cyclesim: error: {printable(exc, one_line=True)}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt as exc:
        from ..registry import plugin_failure

        signum = getattr(exc, "signum", None)      # SIGTERM, raised by stopping.terminate_as_interrupt
        who = None if (signum is not None or sigint.seen) else plugin_failure(exc)
        if who is None:
            signum = signal.SIGINT if signum is None else signum
            print(f"cyclesim: {'terminated' if signum == signal.SIGTERM else 'interrupted'}", file=sys.stderr)
            return 128 + int(signum)
        if getattr(args, "debug", False):
            raise
        print(f"cyclesim: error: {printable(who, one_line=True)}", file=sys.stderr)
        return 2
    except BrokenPipeError:  # output piped into head & co.
        try:
            sys.stdout = None  # type: ignore[assignment]
        except Exception:  # noqa: BLE001
            pass
        return 0
    except OSError as exc:     # a file the command writes or reads failed outside the checks above
        from ..registry import plugin_failure

        who = plugin_failure(exc)
        if getattr(args, "debug", False):
            raise
        if who is not None:
            print(f"cyclesim: error: {printable(who, one_line=True)}", file=sys.stderr)
            return 2
        where = f": {exc.filename}" if getattr(exc, "filename", None) else ""
        print(f"cyclesim: error: {exc.strerror or type(exc).__name__}{where}", file=sys.stderr)
        return 2
    except BaseException as exc:  # noqa: BLE001 - a plug-in's failure of any kind; else as it was
        from ..registry import plugin_failure

        who = plugin_failure(exc)
        if who is None or getattr(args, "debug", False):
            raise
        print(f"cyclesim: error: {printable(who, one_line=True)}", file=sys.stderr)
        return 2
    finally:
        sigint.restore()
        broken = sys.stdout is None            # set so on a broken pipe, as before
        if not broken:
            try:
                sys.stdout.flush()
            except BrokenPipeError:
                broken = True
        sys.stdout, sys.stderr = (None if broken else streams[0]), streams[1]  # type: ignore[assignment]


class _watch_sigint:
    """Tell an interrupt the user made (SIGINT, Ctrl-C) from a ``KeyboardInterrupt`` that code raised."""

    def __init__(self):
        import signal

        self.seen = False
        self.previous = None
        try:
            if signal.getsignal(signal.SIGINT) is signal.default_int_handler:
                self.previous = signal.signal(signal.SIGINT, self._handler)
        except ValueError:  # not the main thread: leave the handler alone
            pass

    def _handler(self, signum, frame):
        self.seen = True
        raise KeyboardInterrupt

    def restore(self) -> None:
        import signal

        if self.previous is not None:
            signal.signal(signal.SIGINT, self.previous)
            self.previous = None


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
