"""numba's disk cache of the package's compiled functions follows the sources they call.

A compiled function's machine code holds the code of the functions it calls in other files; its
disk cache must not load after such a callee is edited (cyclesim.loops.jit_cache).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

import cyclesim

pytest.importorskip("numba")

PACKAGE = Path(cyclesim.__file__).parent

# One orifice outflow through the loop's compiled wrapper (_compiled.py), whose body is the kernel
# in kernel_ops.py; the numbers are arbitrary, of an intake valve's order.
PROBE = """
import json, sys
import cyclesim.loops._compiled as c
value = c._outflow(1.0e-4, 2.0e5, 300.0, 287.0, 1.4, 1.0e5, 1.0e-3)
print(json.dumps({"value": value, "cache_hits": sum(c._outflow.stats.cache_hits.values()),
                  "file": c.__file__}))
"""

RETURN = "return cd_area * p0 / np.sqrt(R0 * T0) * psi"


def _probe(root: Path, cache: Path) -> dict:
    env = {k: v for k, v in os.environ.items() if not k.startswith(("NUMBA_", "CYCLESIM_KERNEL"))}
    env.update(PYTHONPATH=str(root), NUMBA_CACHE_DIR=str(cache), CYCLESIM_THREADS="1")
    out = subprocess.run([sys.executable, "-c", PROBE], env=env, cwd=root, capture_output=True, text=True,
                         timeout=300)
    assert out.returncode == 0, out.stderr[-2000:]
    return json.loads(out.stdout.strip().splitlines()[-1])


def test_edited_callee_in_another_file_is_compiled_again(tmp_path):
    """Warm cache, then an edit of kernel_ops.outflow alone (the caller's file untouched): the next
    process runs the edited callee; an unedited source loads from the cache."""
    root = tmp_path / "src"
    shutil.copytree(PACKAGE, root / "cyclesim", ignore=shutil.ignore_patterns("__pycache__"))
    cache = tmp_path / "numba_cache"
    first = _probe(root, cache)
    assert Path(first["file"]).is_relative_to(root)          # the copy runs, not the installed package
    again = _probe(root, cache)
    assert again["cache_hits"] == 1 and again["value"] == first["value"]   # warm: loaded, not compiled

    ops = root / "cyclesim" / "kernel_ops.py"
    text = ops.read_text()
    assert text.count(RETURN) == 1
    ops.write_text(text.replace(RETURN, RETURN.replace("return ", "return 2.0 * ")))
    edited = _probe(root, cache)
    assert edited["cache_hits"] == 0
    assert edited["value"] == pytest.approx(2.0 * first["value"], rel=1e-12)


def test_stamp_reaches_the_callee_files_of_the_pipe_drivers():
    """The pipe drivers' stamps hold the kernels' file and the valve-flow file they call into."""
    from cyclesim.loops import jit_cache
    from cyclesim.pipes import coupling, scheme

    pipes = PACKAGE / "pipes"
    files = {Path(f) for f in jit_cache.dependency_files(scheme.advance_case)}
    assert {pipes / "scheme.py", pipes / "kernels.py", PACKAGE / "kernel_ops.py"} <= files
    files = {Path(f) for f in jit_cache.dependency_files(coupling._valve_step_compiled)}
    assert {pipes / "coupling.py", pipes / "scheme.py", pipes / "kernels.py"} <= files


def test_every_cached_function_of_the_package_is_stamped_with_its_callees():
    """Each disk-cached dispatcher of the package's compiled modules uses the dependency locator."""
    import importlib

    from cyclesim.loops import jit_cache

    names = ("cyclesim.loops._compiled", "cyclesim.pipes._jit", "cyclesim.pipes.scheme",
             "cyclesim.pipes.coupling", "cyclesim.pipes.loop_step")
    mods = [importlib.import_module(n) for n in names]
    from cyclesim.combustion import _jit, zeldovich, zone_kernels
    from cyclesim.pipes._jit import compiled_kernels

    mods += [compiled_kernels(), _jit.kernels(zone_kernels), _jit.kernels(zeldovich)]
    found = 0
    for mod in mods:
        for val in vars(mod).values():
            cache = getattr(val, "_cache", None)
            if getattr(val, "py_func", None) is None or cache is None or not hasattr(cache, "_impl"):
                continue
            found += 1
            assert isinstance(cache._impl.locator, jit_cache.DependencyLocator), (mod.__name__, val)
    assert found >= 20


def test_stamp_follows_a_global_value_and_a_helper_in_another_module(tmp_path, monkeypatch):
    """The digest changes with a plain global a callee reads and with a callee file's content,
    and is the same when nothing changed."""
    from cyclesim.loops import jit_cache

    pkg = tmp_path / "cyclesim_stamp_probe"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "helper.py").write_text("SCALE = 2.0\n\ndef scaled(x):\n    return SCALE * x\n")
    (pkg / "caller.py").write_text("from . import helper\n\ndef f(x):\n    return helper.scaled(x) + 1.0\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    import cyclesim_stamp_probe.caller as caller
    import cyclesim_stamp_probe.helper as helper

    d0 = jit_cache.dependency_digest(caller.f)
    assert jit_cache.dependency_digest(caller.f) == d0
    assert Path(helper.__file__) in {Path(p) for p in jit_cache.dependency_files(caller.f)}
    monkeypatch.setattr(helper, "SCALE", 3.0)
    d1 = jit_cache.dependency_digest(caller.f)
    assert d1 != d0
    (pkg / "helper.py").write_text("SCALE = 2.0\n\ndef scaled(x):\n    return SCALE * x * 1.0\n")
    os.utime(pkg / "helper.py", ns=(1, 1))        # a new stat key even within the clock's resolution
    assert jit_cache.dependency_digest(caller.f) not in (d0, d1)


def _copy_dispatchers(module):
    """The disk-cached compiled functions of the compiled copy of a kernel module."""
    from cyclesim.loops.kernel_copy import kernels

    mod = kernels(module)
    return [v for v in vars(mod).values()
            if getattr(v, "py_func", None) is not None and getattr(v, "__module__", "") == mod.__name__]


def test_kernel_copies_are_stamped_with_the_sources_they_call():
    """The compiled copies of the zone kernels reach the zone solve and the kernel helpers through
    the call walk, so those files need no place in the copy's file name; the files the walk cannot
    reach (the copy's njit options, the registered compiled forms of the gas helpers) are kept by hand."""
    from cyclesim.combustion import zone_kernels
    from cyclesim.loops import jit_cache, kernel_copy, zone_points

    for module in (zone_kernels, zone_points):
        fns = _copy_dispatchers(module)
        assert fns, module.__name__
        files = set().union(*(jit_cache.dependency_files(f) for f in fns))
        assert {PACKAGE / "loops" / "zone_solve.py", PACKAGE / "kernel_ops.py"} <= {Path(f) for f in files}
    assert {Path(f) for f in kernel_copy._beyond_the_walk()} == {PACKAGE / "loops" / "kernel_copy.py",
                                                                 PACKAGE / "loops" / "_compiled.py"}


def test_an_edit_of_a_called_source_changes_the_kernel_copy_stamp(monkeypatch):
    """An edit of zone_solve.py (seen as its content hash) changes the stamp of the compiled zone
    kernels that call into it; an unedited tree gives the same stamp again."""
    from cyclesim.combustion import zone_kernels
    from cyclesim.loops import jit_cache

    fn = next(f for f in _copy_dispatchers(zone_kernels)
              if str(PACKAGE / "loops" / "zone_solve.py") in jit_cache.dependency_files(f))
    before = jit_cache.dependency_digest(fn)
    assert jit_cache.dependency_digest(fn) == before
    real = jit_cache._file_hash
    edited = str(PACKAGE / "loops" / "zone_solve.py")
    monkeypatch.setattr(jit_cache, "_file_hash", lambda p: real(p) + ("-edited" if p == edited else ""))
    assert jit_cache.dependency_digest(fn) != before


def test_an_edit_of_a_hand_kept_file_names_a_new_kernel_copy(tmp_path, monkeypatch):
    from cyclesim.combustion import zeldovich
    from cyclesim.loops import kernel_copy

    monkeypatch.setenv("CYCLESIM_CACHE_DIR", str(tmp_path / "cache"))
    kept = tmp_path / "kept.py"
    monkeypatch.setattr(kernel_copy, "_beyond_the_walk", lambda: (str(kept),))
    kept.write_text("OPTIONS = 1\n")
    first = kernel_copy._source_copy(zeldovich)
    assert kernel_copy._source_copy(zeldovich) == first
    kept.write_text("OPTIONS = 2\n")
    second = kernel_copy._source_copy(zeldovich)
    assert second != first
    assert Path(first).read_bytes() == Path(second).read_bytes() == Path(zeldovich.__file__).read_bytes()
