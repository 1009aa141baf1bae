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
    # the same source and operation order: equal to the last bit but for numba's own pow/sqrt
    assert got == pytest.approx(ref, rel=1e-14, abs=1e-300)
    assert C._outflow(a, *s1, min(s1[0], s2[0]), flow.DP_LIN_DEFAULT) == pytest.approx(
        flow.orifice_outflow(a, *s1, s2[0]), rel=1e-14, abs=1e-300)


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
