"""`cyclesim run` loads only what one run needs.

Every module a command imports is read (and without a bytecode cache, compiled) in every process;
the parser of the whole command line must not pull in the fitting, the trace analysis, the
studies, the reports or the plots, and a run without runners not the pipe package.
"""

from __future__ import annotations

import json
import subprocess
import sys

NOT_FOR_A_RUN = ("cyclesim.calibration.fitting", "cyclesim.calibration.levenberg", "cyclesim.calibration.result",
                 "cyclesim.traces.analysis_settings", "cyclesim.traces.analysis", "cyclesim.studies",
                 "cyclesim.report", "cyclesim.plots", "cyclesim.pipes", "matplotlib")

PROBE = """
import contextlib, io, json, sys
from cyclesim.cli import main
with contextlib.redirect_stdout(io.StringIO()):
    rc = main(["run", "demo"])
print(json.dumps({"rc": rc, "loaded": sorted(m for m in sys.modules if m.startswith(tuple(sys.argv[1:])))}))
"""


def test_run_demo_loads_no_fitting_analysis_studies_plots_or_pipes():
    out = subprocess.run([sys.executable, "-c", PROBE, *NOT_FOR_A_RUN], capture_output=True, text=True,
                         timeout=600)
    assert out.returncode == 0, out.stderr[-2000:]
    got = json.loads(out.stdout.strip().splitlines()[-1])
    assert got["rc"] == 0
    assert got["loaded"] == []


def test_the_calibration_package_gives_every_public_name_on_first_use():
    """The package imports its submodules at a name's first use; each public name resolves to the
    object of the submodule that defines it."""
    import importlib

    import cyclesim.calibration as cal

    for name in cal.__all__:
        sub = importlib.import_module(f"cyclesim.calibration.{cal._EXPORTS[name]}")
        assert getattr(cal, name) is getattr(sub, name)
    assert set(cal.__all__) <= set(dir(cal))
    try:
        cal.no_such_name
    except AttributeError as exc:
        assert "no_such_name" in str(exc)
    else:
        raise AssertionError("an unknown name must raise AttributeError")
