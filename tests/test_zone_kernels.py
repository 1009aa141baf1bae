"""The burned-zone, element and NO kernels: one source, compiled by numba or run as plain Python."""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np
import pytest

import cyclesim
from cyclesim.combustion import _jit
from cyclesim.combustion import burned_zones as bz
from cyclesim.combustion import zeldovich as z
from cyclesim.combustion import zone_kernels as zk


@pytest.fixture(scope="module")
def demo_zones():
    """The demo's zones and four elements from its emissions model, with the inputs they came from."""
    from cyclesim.api import results_from_trace
    from cyclesim.registry import get_registry
    from cyclesim.solve.batch import build_batch
    from cyclesim.solve.solver import integrate

    cases = [cyclesim.load_config("demo", ["emissions.count=4"]),
             cyclesim.load_config("demo", ["emissions.count=4", "operating.lambda=1.2"])]
    reg = get_registry(())
    batch = build_batch(cases, reg)
    res = results_from_trace(batch, integrate(batch), reg)
    return res, batch.models["emissions"]


def _plain_lookup(monkeypatch):
    from cyclesim.loops._compiled import _mix_at

    monkeypatch.setattr(zk, "mix_at", getattr(_mix_at, "py_func", _mix_at))


@pytest.mark.skipif(not _jit.compiled_wanted(), reason="numba not compiling in this process")
def test_plain_python_kernels_equal_the_compiled_ones(demo_zones, monkeypatch):
    # the same source run uncompiled (the NUMBA_DISABLE_JIT path) gives the compiled results to
    # rounding and the Newton tolerance (1e-11 of T)
    _plain_lookup(monkeypatch)
    _, model = demo_zones
    zn, el = model.last_zones, model.last_elements
    gas = model.ctx.gas
    B, n = zn.p.shape
    consts = gas._compiled_consts()
    T_out, x_out, Q = np.empty(el.T.shape), np.empty(el.T.shape), np.empty((B, n))
    zk.elements(*consts, zn.p, zn.m, zn.x, zn.h_u, zn.U_b, np.ascontiguousarray(model.T_wall), T_out, x_out, Q)
    ok = np.isfinite(el.T)
    assert np.array_equal(np.isfinite(T_out), ok)
    np.testing.assert_allclose(T_out[ok], el.T[ok], rtol=1e-10)
    np.testing.assert_allclose(x_out, el.x, rtol=0, atol=1e-15)
    np.testing.assert_allclose(Q, el.Q, rtol=1e-8, atol=1e-9)
    # the NO loop
    from cyclesim_plugins.emissions import tables_for

    tabs = tables_for(gas)
    no_c, fz_c = z.integrate_growing_elements(zn.t, zn.p, el.T, el.x, model.T_freeze, *tabs)
    no_p = np.empty_like(no_c)
    fz_p = np.empty_like(fz_c)
    z.grow_elements(zn.t, zn.p, el.T, el.x, model.T_freeze, *tabs, no_p, fz_p)
    np.testing.assert_allclose(no_p, no_c, rtol=1e-12, atol=0)
    assert np.array_equal(fz_p, fz_c)


@pytest.mark.skipif(not _jit.compiled_wanted(), reason="numba not compiling in this process")
def test_flame_temperature_points_equal_plain_python(demo_zones, monkeypatch):
    _, model = demo_zones
    gas = model.ctx.gas
    h = model.last_zones.h_u[:, 200:210]
    p = model.last_zones.p[:, 200:210]
    compiled = bz.flame_temperature(gas, h, p)
    _plain_lookup(monkeypatch)
    out = np.empty(h.size)
    zk.solve_tp_points(*gas._compiled_consts(), np.repeat(np.arange(2), h.shape[1]), h.ravel(), p.ravel(),
                       np.full(h.size, 2400.0), True, out)
    np.testing.assert_allclose(out.reshape(h.shape), compiled, rtol=1e-12)
    assert np.all((compiled > 2200.0) & (compiled < 3000.0))


def test_numba_disabled_process_runs_the_plain_kernels():
    # with NUMBA_DISABLE_JIT=1 the switch gives the plain modules, which run: the flame temperature of
    # stoichiometric gasoline-air from 750 K at 40 bar equals this process's (compiled) value to 1e-12
    code = ("import numpy as np; from cyclesim.fuels import BUILTIN_FUELS;"
            " from cyclesim.solve.gas_tables import build_gas_tables;"
            " from cyclesim.combustion import _jit, zone_kernels, burned_zones as bz;"
            " g = build_gas_tables(BUILTIN_FUELS['gasoline'], [1.0]);"
            " T = bz.flame_temperature(g, g.enthalpy_unburned(np.array([750.0])), np.array([40e5]))[0];"
            " print(repr(float(T)), _jit.compiled_wanted(), _jit.kernels(zone_kernels) is zone_kernels)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300,
                         env={**os.environ, "NUMBA_DISABLE_JIT": "1"})
    assert out.returncode == 0, out.stderr
    val, compiled, plain = out.stdout.split()
    assert compiled == "False" and plain == "True"
    from cyclesim.fuels import BUILTIN_FUELS
    from cyclesim.solve.gas_tables import build_gas_tables

    g = build_gas_tables(BUILTIN_FUELS["gasoline"], [1.0])
    here = bz.flame_temperature(g, g.enthalpy_unburned(np.array([750.0])), np.array([40e5]))[0]
    assert float(val) == pytest.approx(here, rel=1e-12)


@pytest.mark.skipif(not _jit.compiled_wanted(), reason="numba not compiling in this process")
def test_zone_columns_point_loop_equals_the_array_solve(monkeypatch):
    # a finished two-zone trace's pressure and zone temperatures: the compiled point loop
    # (cyclesim.loops.zone_points) against the same solve on whole arrays; each point stops at its
    # own tolerance there (ln p to 1e-13, T to 1e-11), hence rtol 1e-9; NaN (no burned zone) alike
    from cyclesim.loops import zones
    from cyclesim.registry import get_registry
    from cyclesim.results.figures import derived_trace
    from cyclesim.results.zone_trace import two_zone_columns
    from cyclesim.solve.batch import build_batch
    from cyclesim.solve.solver import integrate

    cases = [cyclesim.load_config("demo", ["simulation.zones=two", f"burn.spark_advance_deg={a}"]) for a in (10, 30)]
    batch = build_batch(cases, get_registry(()))
    tr = integrate(batch)
    d = derived_trace(batch, tr)
    calls = []
    inner = zones._zones_points
    monkeypatch.setattr(zones, "_zones_points", lambda *a: calls.append(1) or inner(*a))
    fast = two_zone_columns(batch, tr, d)
    monkeypatch.setattr(zones, "MIN_POINTS", 10 ** 12)      # the array solve
    ref = two_zone_columns(batch, tr, d)
    assert calls == [1]
    for k in ("p", "T_u", "T_b"):
        assert np.array_equal(np.isfinite(fast[k]), np.isfinite(ref[k])), k
        ok = np.isfinite(ref[k])
        np.testing.assert_allclose(fast[k][ok], ref[k][ok], rtol=1e-9, err_msg=k)
    burning = np.isfinite(ref["T_b"]).sum(axis=1)
    assert np.all(burning > 20)
