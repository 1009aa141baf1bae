"""Plug-in kernels in a generated compiled loop (cyclesim.loops.loopgen).

Checked against: the built-in ``wiebe`` law on the built-in compiled loop (the kernel is the
same arithmetic, so the figures agree to rounding) and the kernel itself on the Python path.
"""

from __future__ import annotations

import math
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from cyclesim.solve import kernel
from cyclesim import simulate
from cyclesim.config import load_config
from cyclesim.loops.loopgen import LoopGenError, generate, kernel_args, kernel_params
from cyclesim.registry import get_registry
from plugin_sources import KERNEL_WIEBE, fake_install

numba = pytest.importorskip("numba")

PHYSICS_KEYS = ("imep_net_bar", "pmep_bar", "p_max_bar", "theta_pmax_deg", "ca50_deg", "wall_heat_J",
                "trapped_mass_mg", "residual_fraction", "exhaust_temperature_K", "spark_advance_deg")


@pytest.fixture(scope="module")
def cache(tmp_path_factory):
    """One loop cache for the module (each new kernel compiles once, some 10-20 s)."""
    return tmp_path_factory.mktemp("loops")


@pytest.fixture
def package(tmp_path, monkeypatch, cache):
    """A third-party package with a kernel burn, installed (a dist-info with the entry point)."""
    monkeypatch.setenv("CYCLESIM_CACHE_DIR", str(cache))
    site = fake_install(tmp_path / "site", "kwiebe", {"kwiebe/__init__.py": KERNEL_WIEBE}, {"kwiebe": "kwiebe"})
    monkeypatch.syspath_prepend(str(site))
    get_registry.cache_clear()
    yield site
    get_registry.cache_clear()
    sys.modules.pop("kwiebe", None)


def _rel(a, b):
    return abs(a / b - 1.0) if b else abs(a)


def test_a_third_party_kernel_runs_compiled_with_the_built_in_figures(package, capsys):
    before = kernel._used["compiled"]
    plug = load_config("demo", ["burn.model=tests_kernel_wiebe"])
    res = simulate([plug])[0]
    assert res.error is None
    assert res.cycle_loop == "compiled"
    assert kernel._used["compiled"] > before          # the compiled-cycle counter rose
    assert "numpy loop" not in capsys.readouterr().err  # and no fall-back notice
    ref = simulate([load_config("demo")])[0]
    for k in PHYSICS_KEYS:
        assert _rel(res.summary[k], ref.summary[k]) < 1e-12, k
    assert res.summary["cycles_to_converge"] == ref.summary["cycles_to_converge"]


def test_the_same_kernel_on_the_python_path_agrees(package, monkeypatch):
    plug = load_config("demo_closed", ["burn.model=tests_kernel_wiebe"])
    comp = simulate([plug])[0]
    monkeypatch.setenv(kernel.ENV, "python")
    py = simulate([plug])[0]
    assert py.cycle_loop.startswith("numpy") and comp.cycle_loop == "compiled"
    for k in ("imep_closed_bar", "p_max_bar", "wall_heat_J", "ca50_deg"):
        assert _rel(comp.summary[k], py.summary[k]) < 1e-9, k


def test_plugins_listing_says_the_kernel_runs_compiled(package, capsys):
    from cyclesim.cli import main

    assert main(["plugins", "burn"]) == 0
    out = capsys.readouterr().out
    line = out[out.index("tests_kernel_wiebe"):].splitlines()[1]
    assert "compiled" in line and "kwiebe_rate" in line


def test_the_key_follows_the_kernel_source_and_the_globals_it_reads(package):
    import kwiebe

    fn, names = kwiebe.kwiebe_rate, ("theta0", "inv_dur", "c", "a", "m")
    key, text = generate({"burn": (fn, names)})
    assert "def kwiebe_rate(" in text and "END_DEG = 360.0" in text
    assert generate({"burn": (fn, names)})[0] == key        # deterministic
    kwiebe.END_DEG = 300.0                                  # a global it reads changes: a new loop
    try:
        assert generate({"burn": (fn, names)})[0] != key
    finally:
        kwiebe.END_DEG = 360.0
    assert kernel_args(fn) == ("theta", "theta0", "inv_dur", "c", "a", "m")
    assert kernel_params(fn, names) == names[:2] + ("c", "a", "m")
    with pytest.raises(LoopGenError, match="neither given by pack"):
        kernel_params(fn, ("theta0", "c", "a", "m"))


EDITED = """
import sys, json
sys.path.insert(0, {site!r})
import cyclesim
from cyclesim.solve import kernel
from cyclesim.config import load_config
r = cyclesim.simulate([load_config("demo_closed", ["burn.model=tests_kernel_wiebe"])])[0]
print(json.dumps([r.cycle_loop, r.summary["imep_closed_bar"], kernel._used["compiled"]]))
"""


@pytest.mark.slow
def test_an_edited_kernel_changes_the_result_and_an_unedited_one_reuses_the_cache(tmp_path, cache):
    # each run is a fresh process, as a user's edit-and-rerun or a sweep worker is
    import json
    import os

    def run(source, site):
        fake = fake_install(site, "kwiebe", {"kwiebe/__init__.py": source}, {"kwiebe": "kwiebe"})
        env = dict(os.environ, CYCLESIM_CACHE_DIR=str(cache), CYCLESIM_THREADS="1")
        out = subprocess.run([sys.executable, "-c", EDITED.format(site=str(fake))], capture_output=True,
                             text=True, env=env, check=True)
        return json.loads(out.stdout.strip().splitlines()[-1]), out.stderr

    (loop0, imep0, n0), _ = run(KERNEL_WIEBE, tmp_path / "a")
    # the edit: a burn 10 % slower in the kernel's own arithmetic
    edited = KERNEL_WIEBE.replace("return where(on, c * um", "return where(on, 0.9 * c * um")
    assert edited != KERNEL_WIEBE
    (loop1, imep1, n1), err1 = run(edited, tmp_path / "b")
    assert loop0 == loop1 == "compiled" and n0 >= 1 and n1 >= 1
    assert abs(imep1 / imep0 - 1.0) > 1e-4          # the edited kernel ran, not the cached first one
    files = sorted(p.name for p in cache.glob("loop_*.py"))
    assert len(files) >= 2
    # the first kernel again: same figures, no new loop file, no compile notice
    (loop2, imep2, _), err2 = run(KERNEL_WIEBE, tmp_path / "c")
    assert imep2 == imep0 and sorted(p.name for p in cache.glob("loop_*.py")) == files
    assert "compiling" not in err2


BAD_KERNEL = KERNEL_WIEBE.replace(
    '    return where(on, c * um * np.exp(-a * um * up), 0.0)',
    '    with np.errstate(invalid="ignore"):      # numpy has it, numba does not compile it\n'
    '        return where(on, c * um * np.exp(-a * um * up), 0.0)')
OUTSIDE_KERNEL = KERNEL_WIEBE.replace("import numpy as np", "import numpy as np\nimport json").replace(
    '    u = (theta - theta0) * inv_dur', '    u = (theta - theta0) * inv_dur + 0.0 * len(json.__name__)')


@pytest.mark.parametrize("source, notice", [(BAD_KERNEL, "does not compile"),
                                              (OUTSIDE_KERNEL, "only numpy and math compile")])
def test_a_kernel_that_does_not_compile_runs_on_the_python_path_with_a_notice(
        tmp_path, monkeypatch, cache, capsys, source, notice):
    monkeypatch.setenv("CYCLESIM_CACHE_DIR", str(cache))
    assert source != KERNEL_WIEBE
    bad = source.replace("tests_kernel_wiebe", "tests_bad_kernel_wiebe")
    site = fake_install(tmp_path / "site", "kbad", {"kbad/__init__.py": bad}, {"kbad": "kbad"})
    monkeypatch.syspath_prepend(str(site))
    get_registry.cache_clear()
    try:
        res = simulate([load_config("demo_closed", ["burn.model=tests_bad_kernel_wiebe"])])[0]
    finally:
        get_registry.cache_clear()
        sys.modules.pop("kbad", None)
    assert res.error is None and math.isfinite(res.summary["imep_closed_bar"])
    assert res.cycle_loop != "compiled"
    assert notice in capsys.readouterr().err


def test_an_unwritable_cache_folder_falls_back_to_the_temporary_directory(tmp_path, monkeypatch):
    import os
    import tempfile

    from cyclesim.loops.loopgen import cache_dir

    blocked = tmp_path / "file"
    blocked.write_text("not a folder")
    monkeypatch.setenv("CYCLESIM_CACHE_DIR", str(blocked / "loops"))    # cannot be made
    got = cache_dir()
    assert got.parent == __import__("pathlib").Path(tempfile.gettempdir()) and os.access(got, os.W_OK)
    monkeypatch.setenv("CYCLESIM_CACHE_DIR", str(tmp_path / "mine"))
    assert cache_dir() == tmp_path / "mine"


# ----------------------------------------------------------------------------
# batch-wide arrays of pack() (cyclesim.loops.layout.shared_array)
# ----------------------------------------------------------------------------
def _table_burn(theta, tab, idx, off, scale):
    """A test kernel: a rate read from a batch-wide table at the case's offset."""
    return scale * np.interp(off + 0.0 * theta, idx, tab)


def _table_state(theta, tab, idx, off):
    return np.interp(off + 1.0 + 0.0 * theta, idx, tab)


def test_a_batch_wide_array_is_passed_as_a_slice_of_the_shared_block():
    from cyclesim.loops.loopgen import Part, shared_slots

    packed = ("tab", "idx", "off", "scale")
    arrays = ("tab", "idx")
    parts = (Part("burn", "kernel", _table_burn, packed, (), (), arrays),
             Part("burn", "state", _table_state, packed, (("z", 30),), (30,), arrays))
    assert shared_slots(parts) == {("burn", "tab"): 0, ("burn", "idx"): 1}
    _, text = generate(parts)
    assert "_table_burn(theta, TB[TO[0]:TO[1]], TB[TO[1]:TO[2]], CB[R_P + 0, b], CB[R_P + 1, b])" in text
    assert "_table_state(theta, TB[TO[0]:TO[1]], TB[TO[1]:TO[2]], CB[R_P + 0, b])" in text
    # the arrays take no per-case rows: off and scale only
    from cyclesim.loops import _compiled
    from cyclesim.loops.loopgen import param_rows_for

    assert param_rows_for("burn", parts, _compiled.PARAM_ROWS) == {"off": 0, "scale": 1}


def test_the_shared_block_slices_give_back_each_array():
    from hypothesis import HealthCheck, given, settings
    from hypothesis import strategies as st

    from cyclesim.loops.layout import is_shared_array, shared_array, shared_blocks

    # a shared, loaded machine can make one draw slow: that is no failure of the blocks
    @settings(deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
    @given(st.lists(st.lists(st.floats(-1e6, 1e6), min_size=1, max_size=9), min_size=1, max_size=5))
    def check(arrays):
        flat, bounds = shared_blocks(shared_array(a) for a in arrays)
        assert bounds.dtype == np.int64 and bounds.size == len(arrays) + 1
        for k, a in enumerate(arrays):
            assert flat[bounds[k]:bounds[k + 1]].tolist() == a

    check()
    assert is_shared_array(shared_array([1.0, 2.0])) and not is_shared_array(np.ones(2))
    with pytest.raises(ValueError):
        shared_array([])
