"""Kernels of different plug-ins share the generated loop's one namespace: helpers and constants
of one name are kept apart (cyclesim.loops.loopgen._collect).

Found by a user: the entrainment burn and the Livengood-Wu knock model each have a helper called
``isentrope_temperature``; together they sent the whole batch to the numpy loop (98 s a point
instead of about 1 s).  Two constants of one name and different values would have been worse: the
later value silently replaced the earlier one.
"""
from __future__ import annotations

import importlib
import sys
import textwrap

import numpy as np
import pytest

import cyclesim
from cyclesim.loops.kernel_collect import _collect
from cyclesim.solve import kernel


def _module(tmp_path, name, body):
    (tmp_path / f"{name}.py").write_text(textwrap.dedent(body))
    sys.path.insert(0, str(tmp_path))
    try:
        return importlib.import_module(name)
    finally:
        sys.path.remove(str(tmp_path))
        sys.modules.pop(name, None)


def test_helpers_and_constants_of_one_name_stay_apart(tmp_path):
    a = _module(tmp_path, "names_a", """
        import math
        K = 2.0
        def helper(x):
            return x + K
        def kernel_a(x):
            return helper(x) * K + math.sqrt(4.0)
    """)
    b = _module(tmp_path, "names_b", """
        import numpy as np
        K = 3.0
        def helper(x):
            return x * K
        def kernel_b(x):
            return helper(x) - K + np.sqrt(9.0)
    """)
    funcs, consts, imports = {}, {}, {}
    na = _collect(a.kernel_a, funcs, consts, imports)
    nb = _collect(b.kernel_b, funcs, consts, imports)
    assert (na, nb) == ("kernel_a", "kernel_b")
    assert len(funcs) == 4 and len(consts) == 2          # both helpers and both K, under distinct names
    # the collected sources, run together in one namespace as the generated loop runs them
    ns = {n: eval(v) for n, v in consts.items()}
    for n, t in imports.items():
        ns[n] = importlib.import_module(t)
    for _, src in funcs.values():
        exec(src, ns)
    for x in (0.5, 1.0, 7.0):
        assert ns[na](x) == a.kernel_a(x)
        assert ns[nb](x) == b.kernel_b(x)


def test_one_function_reached_twice_is_written_once(tmp_path):
    m = _module(tmp_path, "names_c", """
        def shared(x):
            return 2.0 * x
        def k1(x):
            return shared(x)
        def k2(x):
            return shared(x) + 1.0
    """)
    funcs, consts, imports = {}, {}, {}
    _collect(m.k1, funcs, consts, imports)
    _collect(m.k2, funcs, consts, imports)
    assert sorted(funcs) == ["k1", "k2", "shared"]
    assert all("_2" not in src for _, src in funcs.values())   # no collision: sources as written


def test_entrainment_burn_with_livengood_wu_knock_runs_compiled():
    # the user's combination: two zones, the entrainment burn and the Livengood-Wu knock model,
    # whose helpers share a name; it runs on the compiled loop and agrees with the numpy loop
    if kernel.compiled_module() is None:
        pytest.skip("numba is not installed")
    over = ["simulation.zones=two", "burn.model=entrainment", "knock.model=livengood_wu",
            "simulation.step_deg=1.0"]
    r = cyclesim.run("demo_closed", over)
    assert r.cycle_loop == "compiled"
    import os
    old = os.environ.get(kernel.ENV)
    os.environ[kernel.ENV] = "python"
    try:
        ref = cyclesim.run("demo_closed", over)
    finally:
        if old is None:
            del os.environ[kernel.ENV]
        else:
            os.environ[kernel.ENV] = old
    assert ref.cycle_loop.startswith("numpy")
    checked = 0
    for key, v in r.summary.items():
        if isinstance(v, float) and np.isfinite(v):
            assert np.isclose(v, ref.summary[key], rtol=1e-9, atol=1e-9), key
            checked += 1
    assert checked > 10 and "imep_closed_bar" in r.summary
