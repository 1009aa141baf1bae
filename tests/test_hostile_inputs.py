"""Catalogue of hostile inputs: each kind ends in one line naming the problem and exit status 2.

Each entry is (kind, files to write, command line, text the one line must hold).  ``{d}`` in a
command line is the test's folder.  Nothing here simulates more than a validation, except the
plug-in entries, which fail at their first call.  The count of kinds is
``len(CATALOGUE)``; every kind is answered with one line when this module passes.
"""

from __future__ import annotations
from cli_helpers import error_lines

import pytest

from cyclesim.cli import main

PLUGIN = '''
from cyclesim import hookimpl
from cyclesim.roles import Friction

class Raises(Friction):
    name = "tests_raises_friction"
    summary = "raises from fmep"
    params = ()
    references = ("test plug-in",)
    def fmep(self, f):
        raise {exc}

@hookimpl
def cyclesim_register_submodels():
    return [Raises]
'''


def _plugin(exc):
    return {"p.py": PLUGIN.replace("{exc}", exc),
            "p.yaml": "extends: demo\nplugins: [p.py]\nfriction: {model: tests_raises_friction}\n"}


CALIBRATION_BAD = '{"parameters": ["burn.duration_deg"], "values": [48], "covariance": [[-4]]}'
CALIBRATION_OPERATING = '{"parameters": ["operating.speed_rpm"], "values": [3000], "covariance": [[4]]}'

CATALOGUE = [
    # item 9: tracebacks before
    ("NUL in a config", {"c.yaml": b"extends: demo\nname: a\x00b\n"}, ["run", "{d}/c.yaml"],
     "unacceptable character #x0000"),
    ("binary config", {"c.yaml": b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR\xff\xd8"}, ["run", "{d}/c.yaml"],
     "not a YAML config"),
    ("UTF-16 config without errors", None, None, None),        # placeholder replaced below
    ("YAML complex key", {"c.yaml": "{? [1,2] : 3}\n"}, ["run", "{d}/c.yaml"],
     "a key must be a plain word or number"),
    ("boost with no iteration", {}, ["boost", "demo_turbo", "--max-iterations", "0", "--out", "{d}/o"],
     "max_iterations 0: expected a whole number >= 1"),
    ("dyno negative noise", {}, ["dyno", "demo", "--noise", "-1", "-2", "-3", "--out", "{d}/o"],
     "force_sd_N = -1.0: expected a finite number >= 0"),
    ("dyno NaN readings", {}, ["dyno", "demo", "--noise", "1", "1", "nan", "--out", "{d}/o"],
     "readings = nan: expected a whole number >= 1"),
    ("dyno zero inertia", {}, ["dyno", "demo", "--mode", "torque", "--inertia", "0", "--out", "{d}/o"],
     "inertia_kg_m2 0.0: expected a finite positive number"),
    ("dyno negative seed", {}, ["dyno", "demo", "--seed", "-1", "--out", "{d}/o"], "--seed -1"),
    ("traces negative seed", {}, ["traces", "demo", "--seed", "-1", "--out", "{d}/o"], "--seed -1"),
    ("predict empty calibration", {"cal.json": "{}"},
     ["predict", "demo", "--calibration", "{d}/cal.json", "--vary", "operating.lambda=0.9,1", "--out", "{d}/o"],
     "lacks parameters, values, covariance"),
    ("resume on a binary sweep.csv", {"o/sweep.csv": b"\xa7\x00\xff\x10binary"},
     ["sweep", "demo", "--vary", "operating.speed_rpm=2000,3000", "--out", "{d}/o", "--resume"],
     "not a sweep table"),
    ("report into a folder", {"o/x.txt": "x"}, ["report", "demo", "--out", "{d}/o", "--force"], "is a folder"),
    # item 10: accepted or unclear before
    ("fit level 2", {}, ["fit", "demo", "{d}/t.csv", "--param", "burn.duration_deg", "--level", "2",
                         "--out", "{d}/o"], "--level 2.0: expected a finite number in (0, 1)"),
    ("fit level -1", {}, ["fit", "demo", "{d}/t.csv", "--param", "burn.duration_deg", "--level", "-1",
                          "--out", "{d}/o"], "--level -1.0"),
    ("fit level nan", {}, ["fit", "demo", "{d}/t.csv", "--param", "burn.duration_deg", "--level", "nan",
                           "--out", "{d}/o"], "--level nan"),
    ("fit TDC offset inf", {}, ["fit", "demo", "{d}/t.csv", "--param", "burn.duration_deg", "--tdc-offset", "inf",
                                "--out", "{d}/o"], "--tdc-offset inf"),
    ("predict negative covariance", {"cal.json": CALIBRATION_BAD},
     ["predict", "demo", "--calibration", "{d}/cal.json", "--vary", "operating.lambda=0.9,1", "--out", "{d}/o"],
     "not positive semi-definite"),
    ("predict an operating condition", {"cal.json": CALIBRATION_OPERATING},
     ["predict", "demo", "--calibration", "{d}/cal.json", "--vary", "operating.lambda=0.9,1", "--out", "{d}/o"],
     "operating condition"),
    ("map full and part load only", {}, ["map", "demo", "--full-load-only", "--part-load-only", "--out", "{d}/o"],
     "exclude each other"),
    ("--set extends", {}, ["run", "demo", "--set", "extends=nosuch"], "'extends' is resolved when a config"),
    ("spark knock cycles -3", {}, ["spark", "demo", "--knock-cycles", "-3", "--out", "{d}/o"],
     "--knock-cycles -3: expected a whole number >= 0"),
    ("spark advance x", {}, ["spark", "demo", "--advance", "x", "--out", "{d}/o"], "'x' is not a spark advance"),
    ("full cycle without valve flow", {}, ["run", "demo", "--set", "valve_flow.model=none"],
     "keeps the valves shut: a full cycle needs a valve-flow model"),
    ("show two-entry firing order", {}, ["show", "demo", "--set", "multi_cylinder.firing_order=[1,2]"],
     "expected each of 1..4 exactly once"),
    ("analyse a negated trace", {"n.csv": "NEGATED"}, ["analyse", "{d}/n.csv", "--engine", "demo", "--out", "{d}/o"],
     "peaks downward"),
    ("analyse at speed 0", {"z.csv": "ZERO"}, ["analyse", "{d}/z.csv", "--engine", "demo", "--out", "{d}/o"],
     "speed_rpm = 0: expected the engine speed, > 0 rpm"),
    ("fit a negated trace", {"n.csv": "NEGATED"}, ["fit", "demo_closed", "{d}/n.csv", "--param", "burn.duration_deg",
                                                    "--out", "{d}/o"], "peaks downward"),
    ("fit at speed 0", {"z.csv": "ZERO"}, ["fit", "demo_closed", "{d}/z.csv", "--param", "burn.duration_deg",
                                            "--out", "{d}/o"], "speed_rpm = 0"),
    # item 11: no echo of other files
    ("extends a system file", {"c.yaml": "extends: {d}/secret\n", "secret": "root:$6$saltsalt$hashhash:1:2:3:::\n"},
     ["run", "{d}/c.yaml"], "is this a cyclesim config?"),
    ("burn table is a system file", {"secret": "root:$6$saltsalt$hashhash:1:2:3\nx\n"},
     ["run", "demo", "--set", "burn.model=wiebe_table", "--set", "burn.table={d}/secret"], "missing column 'speed_rpm'"),
    ("trace with a foreign cell", {"s.csv": "cycle,crank_deg,pressure_bar\n1,-360,root:$6$saltsalt$hashhash\n"},
     ["analyse", "{d}/s.csv", "--engine", "demo", "--out", "{d}/o"], "is not a number"),
    ("lift table with a foreign cell", {"l.csv": "crank_deg,lift_mm\n-370,$6$saltsalt$hashhash\n"},
     ["run", "demo", "--set", "valve_flow.intake_lift_table={d}/l.csv"], "is not a number"),
    # item 12: control characters
    ("ANSI escapes in a key", {"c.yaml": 'extends: demo\nengine: {"bore\\e[31m_mm": 80}\n'}, ["run", "{d}/c.yaml"],
     "unknown key"),
    # item 13: plug-ins that end the process
    ("plug-in raises SystemExit(0)", _plugin("SystemExit(0)"), ["run", "{d}/p.yaml"],
     "raised SystemExit(0) in fmep (p.py:"),
    ("plug-in raises KeyboardInterrupt", _plugin("KeyboardInterrupt"), ["run", "{d}/p.yaml"],
     "raised KeyboardInterrupt in fmep (p.py:"),
    ("plug-in exits at import", {"p.py": "raise SystemExit(3)\n", "p.yaml": "extends: demo\nplugins: [p.py]\n"},
     ["run", "{d}/p.yaml"], "raised SystemExit(3) in <module> (p.py:1)"),
]
CATALOGUE[2] = ("UTF-16 config with a bad value", {"c.yaml": "extends: demo\nengine: {bore_mm: -1}\n".encode("utf-16")},
                ["run", "{d}/c.yaml"], "engine.bore_mm = -1: out of range")

TRACE = "cycle,crank_deg,pressure_bar\n" + "".join(f"1,{a},{1 + (a + 360) / 720}\n" for a in range(-360, 360, 2))


def _cycle(sign: float, speed: float) -> str:
    """One compression-like cycle: 1 bar plus a 40 bar peak at TDC (a Gaussian of 25 deg), times ``sign``."""
    import math

    rows = "".join(f"1,{a},{sign * (1.0 + 40.0 * math.exp(-(a / 25.0) ** 2)):.6f}\n" for a in range(-360, 360))
    return f"# speed_rpm: {speed:g}\ncycle,crank_deg,pressure_bar\n" + rows


GENERATED = {"NEGATED": _cycle(-1.0, 3000.0), "ZERO": _cycle(1.0, 0.0)}


def _write(d, files):
    for name, content in (files or {}).items():
        f = d / name
        f.parent.mkdir(parents=True, exist_ok=True)
        content = GENERATED.get(content, content) if isinstance(content, str) else content
        content = content.replace("{d}", str(d)) if isinstance(content, str) else content
        f.write_bytes(content if isinstance(content, bytes) else content.encode())
    (d / "t.csv").write_text(TRACE)


@pytest.mark.parametrize("kind, files, argv, expect", CATALOGUE, ids=[c[0] for c in CATALOGUE])
def test_hostile_input_gets_one_line_and_exit_2(tmp_path, capsys, kind, files, argv, expect):
    _write(tmp_path, files)
    rc = main([a.replace("{d}", str(tmp_path)) for a in argv])
    err = capsys.readouterr().err
    lines = error_lines(err)
    assert rc == 2, err
    assert len(lines) == 1 and lines[0].startswith("cyclesim: error: ") and expect in lines[0], err
    assert "\x1b" not in err and "hashhash" not in err and "saltsalt" not in err


def test_an_upright_cycle_passes_the_trace_checks(tmp_path):
    # the same cycle the right way up and at a stated speed is accepted (the check is no blanket refusal)
    from cyclesim.traces.export import read_trace
    from cyclesim.traces.trace_checks import check_measured

    f = tmp_path / "u.csv"
    f.write_text(_cycle(1.0, 3000.0))
    check_measured(read_trace(f), f)


def test_no_output_folder_is_left_by_a_refused_option(tmp_path, capsys):
    # checked before anything is written
    for argv in (["dyno", "demo", "--noise", "-1", "1", "3", "--out"], ["traces", "demo", "--seed", "-1", "--out"]):
        assert main(argv + [str(tmp_path / "o")]) == 2
        assert not (tmp_path / "o").exists()


def test_a_listed_module_name_loads(tmp_path, capsys):
    # `plugins: [json]`: a module found by its import name (a local import of importlib.util once
    # shadowed the module-level one); json implements no hook, which is said as a notice
    (tmp_path / "c.yaml").write_text("extends: demo\nplugins: [json]\n")
    assert main(["show", str(tmp_path / "c.yaml")]) == 0
    assert "implements no cyclesim hook" in capsys.readouterr().err


def test_control_characters_from_input_never_reach_the_terminal(tmp_path, capsys):
    # ECMA-48 escapes (colour, OSC window title) and a carriage return in the config's name
    (tmp_path / "c.yaml").write_text('extends: demo\nname: "A\\e[31mB\\e]0;title\\aC\\rD"\n')
    assert main(["show", str(tmp_path / "c.yaml")]) == 0
    main(["run", str(tmp_path / "c.yaml"), "--set", "simulation.max_cycles=1", "--set", "simulation.step_deg=2"])
    out = capsys.readouterr().out
    assert "\x1b" not in out and "\r" not in out and "\x07" not in out
    assert "ABC?D" in out


def test_printable_and_excerpt():
    from cyclesim.textsafe import excerpt, printable

    assert printable("a\x1b[1;31mb\x1b[0m\x9b2Jc\u202ed") == "abc?d"
    assert printable("x\ny\tz", one_line=True) == "x y z"
    assert printable("x\ny") == "x\ny"
    assert excerpt("root:x:0:0:root:/root:/bin/bash") == "'root:x:0'... (31 characters)"
    assert excerpt("short") == "'short'"


def test_run_force_clears_the_previous_runs_plots(tmp_path, capsys):
    out = tmp_path / "o"
    out.mkdir()
    (out / "pressure.png").write_bytes(b"old")
    (out / "notes.txt").write_text("mine")
    assert main(["run", "demo", "--out", str(out), "--force", "--no-plots", "--set", "simulation.max_cycles=1",
                 "--set", "simulation.step_deg=2"]) == 0
    assert not (out / "pressure.png").exists()            # the tool's own file from before: gone
    assert (out / "notes.txt").read_text() == "mine"       # the user's file: kept
    assert (out / "summary.json").exists()


def test_case_files_name_every_plot_a_run_writes(tmp_path):
    import cyclesim
    from cyclesim.output import CASE_FILES, write_case

    res = cyclesim.run("demo", ["simulation.max_cycles=1", "simulation.step_deg=2"])
    assert {p.name for p in write_case(res, tmp_path)} <= set(CASE_FILES)


def test_a_relative_table_path_in_set_is_read_from_the_working_directory(tmp_path, capsys, monkeypatch):
    # `--set valve_flow.intake_lift_table=lift.csv` with a built-in config: the file beside the user
    # (the working directory), not in the installed configs folder
    monkeypatch.chdir(tmp_path)
    (tmp_path / "lift.csv").write_text("crank_deg,lift_mm\n-370,0\n-380,1\n")     # refused: not increasing
    assert main(["run", "demo", "--set", "valve_flow.intake_lift_table=lift.csv"]) == 2
    err = capsys.readouterr().err
    assert str(tmp_path / "lift.csv") in err and "does not increase" in err


def test_an_interrupt_by_the_user_is_told_from_one_a_plug_in_raised():
    # Ctrl-C (SIGINT) marks the interrupt as the user's: it stays "interrupted" (exit 130) even when
    # it lands inside a plug-in's code; a KeyboardInterrupt raised by code leaves no such mark
    import signal

    from cyclesim.cli import _watch_sigint

    # a test runner started in the background of a shell without job control inherits SIGINT
    # ignored; the interactive default (Python's handler) is what the command line meets
    inherited = signal.signal(signal.SIGINT, signal.default_int_handler)
    try:
        w = _watch_sigint()
        try:
            with pytest.raises(KeyboardInterrupt):
                signal.raise_signal(signal.SIGINT)
            assert w.seen
        finally:
            w.restore()
        assert signal.getsignal(signal.SIGINT) is signal.default_int_handler
    finally:
        signal.signal(signal.SIGINT, inherited)
    w = _watch_sigint()
    try:
        with pytest.raises(KeyboardInterrupt):
            raise KeyboardInterrupt
        assert not w.seen
    finally:
        w.restore()
