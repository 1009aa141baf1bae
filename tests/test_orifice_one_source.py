"""The orifice flow has one source (cyclesim.cylinder.flow): the compiled manifold laps call it
compiled, the numpy paths on arrays; both give the same numbers."""

from __future__ import annotations

import inspect
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cyclesim.cylinder import flow

numba = pytest.importorskip("numba")


def _compiled():
    from cyclesim.loops import _compiled

    return _compiled


side = st.tuples(st.floats(2e4, 4e5), st.floats(250.0, 2500.0), st.floats(250.0, 320.0), st.floats(1.2, 1.4))


@settings(max_examples=200, deadline=None)
@given(a=st.floats(1e-7, 1e-3), s1=side, s2=side)
def test_compiled_orifice_is_the_numpy_orifice(a, s1, s2):
    C = _compiled()
    got = C._orifice(a, *s1, *s2, flow.DP_LIN_DEFAULT)
    ref = flow.orifice_mass_flow(np.array([a]), *[np.array([v]) for v in s1 + s2])[0]
    # the same source and operation order; libm's pow (compiled) and numpy's vectorised pow differ
    # in the last bits, which the cancellation in 1 - pr^((g-1)/g) near equal pressures raises to
    # about 1e-14: rtol 1e-12
    assert got == pytest.approx(ref, rel=1e-12, abs=1e-300)
    assert C._outflow(a, *s1, min(s1[0], s2[0]), flow.DP_LIN_DEFAULT) == pytest.approx(
        flow.orifice_outflow(a, *s1, s2[0]), rel=1e-12, abs=1e-300)


def test_compiled_orifice_choked_value():
    """Choked flow into a near vacuum: CdA p0 / sqrt(R T0) sqrt(g) (2/(g+1))^((g+1)/(2(g-1)))
    (Heywood 1988, App. C, eq. C.9)."""
    C = _compiled()
    a, p0, T0, R, g = 1e-4, 2e5, 300.0, 287.0, 1.4
    expect = a * p0 / math.sqrt(R * T0) * math.sqrt(g) * (2.0 / (g + 1.0)) ** ((g + 1.0) / (2.0 * (g - 1.0)))
    assert C._orifice(a, p0, T0, R, g, 1e3, T0, R, g, flow.DP_LIN_DEFAULT) == pytest.approx(expect, rel=1e-12)
    assert C._orifice(a, 1e3, T0, R, g, p0, T0, R, g, flow.DP_LIN_DEFAULT) == pytest.approx(-expect, rel=1e-12)


def test_the_compiled_module_writes_no_orifice_formula_of_its_own():
    src = inspect.getsource(_compiled())
    for formula in ("math.sqrt(R0 * T0)", "(2.0 / (g0 + 1.0))", "1.0 - pr / pg"):
        assert formula not in src


def test_the_compiled_gas_lookup_writes_no_table_arithmetic_of_its_own():
    """The fresh-charge polynomial, the table cell's cubic and the mixing rule live in
    cyclesim.kernel_ops; the compiled lookup calls them (tests/test_kernel.py checks the values)."""
    C = _compiled()
    src = inspect.getsource(C._mix_at)          # its one source: cyclesim.loops.zone_solve.mix_at
    for formula in ("pw *= T", "t * (g[1] + t *", "y * u_y", "cp / u_T"):
        assert formula not in src
    import cyclesim.solve.gas_tables as gt

    src = inspect.getsource(gt.GasTables)
    for formula in ("u * T + cu", "t * (g[:, :, 1]", "cp / u_T"):
        assert formula not in src


def test_fresh_charge_poly_is_the_nasa_polynomial():
    """u = R T (a1 - 1 + a2 T/2 + a3 T^2/3 + a4 T^3/4 + a5 T^4/5) + R a6 of a NASA-7 record
    (McBride, Gordon and Reno 1993, NASA TM-4513, eqs. 2-4), on floats and on arrays alike."""
    from cyclesim import kernel_ops

    a = (3.5, 1e-4, -2e-7, 3e-11, -1e-15, -1000.0)   # an invented record [-]
    R = 287.0
    c = np.zeros((6, 4))
    c[:, 0] = R * np.array([a[5], a[0] - 1.0, a[1] / 2, a[2] / 3, a[3] / 4, a[4] / 5])
    c[:5, 2] = c[1:, 0] * np.arange(1, 6)
    c[0, 1] = R
    T = np.array([300.0, 900.0, 2500.0])
    u_ref = R * T * (a[0] - 1.0 + a[1] * T / 2 + a[2] * T ** 2 / 3 + a[3] * T ** 3 / 4 + a[4] * T ** 4 / 5) + R * a[5]
    cv_ref = R * (a[0] - 1.0 + a[1] * T + a[2] * T ** 2 + a[3] * T ** 3 + a[4] * T ** 4)
    u, Rg, cv = kernel_ops.fresh_charge_poly(np.broadcast_to(c[:, :, None], (6, 4, 3)), T)
    np.testing.assert_allclose(u, u_ref, rtol=1e-13)
    np.testing.assert_allclose(cv, cv_ref, rtol=1e-13)
    assert np.all(Rg == R)
    for k in range(3):
        uk, _, cvk = kernel_ops.fresh_charge_poly(c, float(T[k]))
        assert uk == u[k] and cvk == cv[k]
    C = _compiled()
    uc4 = np.ascontiguousarray(np.stack([c, c]))
    from numba import njit

    assert C is not None      # the polynomial registered as jitable by the compiled loop's import
    fresh = njit(lambda c4, b, T_: kernel_ops.fresh_charge_poly(c4[2 * b], T_))
    assert fresh(uc4, 0, float(T[1])) == (u[1], R, cv[1])
