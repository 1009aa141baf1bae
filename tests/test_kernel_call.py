"""The Python path's kernel call: arguments by source and precedence, the class attribute lookup
and the array select, against their plain definitions."""

from __future__ import annotations

import inspect
import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cyclesim import kernel_ops
from cyclesim.loops import loopgen

NAMES = ("a", "b", "T", "p", "gas", "z")


def _kernel_of(names):
    """A kernel of the given argument names that returns them as a tuple, in order."""
    src = f"def k({', '.join(names)}):\n    return ({''.join(n + ', ' for n in names)})\n"
    ns: dict = {}
    exec(src, ns)  # noqa: S102 - a test kernel of generated argument names
    return ns["k"]


class _State:
    """A stand-in cylinder state: attributes by name, ``sub`` the models' own states."""

    def __init__(self, fields, sub):
        for k, v in fields.items():
            setattr(self, k, v)
        self.sub = sub


def _resolved(names, state, packed, role, gas):
    """The precedence call_on documents: packed, then ``state.sub['role.name']``, then
    ``state.gas`` (else ``gas``) for ``gas``, then the state's field."""
    sub = getattr(state, "sub", None) or {}
    out = []
    for a in names:
        if a in packed:
            out.append(packed[a])
        elif f"{role}.{a}" in sub:
            out.append(sub[f"{role}.{a}"])
        elif a == "gas":
            out.append(getattr(state, "gas", gas))
        else:
            out.append(getattr(state, a))
    return tuple(out)


@settings(max_examples=150, deadline=None)
@given(names=st.lists(st.sampled_from(NAMES), min_size=0, max_size=6, unique=True),
       packed_names=st.sets(st.sampled_from(NAMES)), sub_names=st.sets(st.sampled_from(NAMES)),
       state_has_gas=st.booleans(), other_role_sub=st.booleans())
def test_call_on_takes_each_argument_from_its_source(names, packed_names, sub_names, state_has_gas,
                                                     other_role_sub):
    role = "heat_transfer"
    fn = _kernel_of(names)
    packed = {a: f"packed.{a}" for a in packed_names}
    sub = {f"{role}.{a}": f"sub.{a}" for a in sub_names}
    if other_role_sub:
        sub.update({f"burn.{a}": f"burn.{a}" for a in NAMES})   # another role's states: never read
    fields = {a: f"field.{a}" for a in NAMES if a != "gas" or state_has_gas}
    state = _State(fields, sub)
    # twice: the second call runs on the plan the first one made
    for _ in range(2):
        got = loopgen.call_on(fn, state, packed, role, "model.gas")
        assert got == _resolved(names, state, packed, role, "model.gas")


def test_call_on_follows_a_change_of_packed_names_and_of_state_sub():
    fn = _kernel_of(("a", "T"))
    s = _State({"a": 1.0, "T": 300.0}, {})
    assert loopgen.call_on(fn, s, {}, "burn") == (1.0, 300.0)
    assert loopgen.call_on(fn, s, {"a": 2.0}, "burn") == (2.0, 300.0)   # same kernel, other pack()
    s.sub = {"burn.T": 900.0}
    assert loopgen.call_on(fn, s, {"a": 2.0}, "burn") == (2.0, 900.0)
    s.sub = {"knock.T": 900.0}
    assert loopgen.call_on(fn, s, {}, "burn") == (1.0, 300.0)


def test_call_on_reads_packed_values_at_each_call():
    fn = _kernel_of(("a",))
    packed = {"a": 1.0}
    s = _State({}, None)
    assert loopgen.call_on(fn, s, packed) == (1.0,)
    packed["a"] = 3.0
    assert loopgen.call_on(fn, s, packed) == (3.0,)


def test_call_on_names_a_missing_state_field():
    fn = _kernel_of(("nowhere",))
    with pytest.raises(AttributeError, match="nowhere"):
        loopgen.call_on(fn, _State({}, {}), {})


def test_kernel_of_matches_the_static_class_attribute():
    """The MRO walk gives what inspect.getattr_static gives, for every registered submodel class
    and both kernel attributes."""
    from cyclesim.registry import get_registry

    classes = [cls for table in get_registry().submodels.values() for cls in table.values()]
    assert len(classes) > 10
    for cls, attr in itertools.product(classes, ("kernel", "state_kernel", "heat_flow_kernel")):
        k = inspect.getattr_static(cls, attr, None)
        if isinstance(k, staticmethod):
            k = k.__func__
        expect = k if inspect.isfunction(k) else None
        assert loopgen.kernel_of(cls, attr) is expect, (cls, attr)


@settings(max_examples=100, deadline=None)
@given(st.lists(st.tuples(st.booleans(), st.floats(allow_nan=True, allow_infinity=True),
                          st.floats(allow_nan=True, allow_infinity=True)), min_size=1, max_size=8))
def test_where_is_numpy_where(rows):
    c = np.array([r[0] for r in rows])
    x = np.array([r[1] for r in rows])
    y = np.array([r[2] for r in rows])
    for args in ((c, x, y), (c, x, 0.0), (c, 1.0, y), (c[0], x[0], y[0])):
        got, expect = kernel_ops.where(*args), np.where(*args)
        assert type(got) is type(expect) and got.dtype == expect.dtype
        np.testing.assert_array_equal(got, expect)     # NaN in the same places


def _sqrt_plus(a, b):
    """A term for where_lazy: NaN for a negative ``a`` (numpy's sqrt), as a masked term may be."""
    return np.sqrt(a) + b


def _lazy_kernel(c, a, b):
    return kernel_ops.where_lazy(c, _sqrt_plus, (a, b), 0.0)


@settings(max_examples=100, deadline=None)
@given(st.lists(st.tuples(st.booleans(), st.floats(-1e6, 1e6), st.floats(-1e6, 1e6)), min_size=1, max_size=8))
def test_where_lazy_is_the_select_of_the_computed_term(rows):
    # the plain definition: np.where(condition, f(*args), otherwise) on arrays and on floats
    c = np.array([r[0] for r in rows])
    a = np.array([r[1] for r in rows])
    b = np.array([r[2] for r in rows])
    with np.errstate(invalid="ignore"):
        expect = np.where(c, _sqrt_plus(a, b), 0.0)
        got = _lazy_kernel(c, a, b)
        np.testing.assert_array_equal(np.broadcast_to(got, expect.shape), expect)
        for k in range(len(rows)):
            assert _lazy_kernel(bool(c[k]), a[k], b[k]) == expect[k] or (
                np.isnan(expect[k]) and np.isnan(_lazy_kernel(bool(c[k]), a[k], b[k])))


def test_where_lazy_computes_nothing_where_no_case_needs_it():
    calls = []

    def term(x):
        calls.append(x)
        return 2.0 * x

    off = np.zeros(3, dtype=bool)
    assert kernel_ops.where_lazy(off, term, (np.ones(3),), 0.0) == 0.0 and not calls
    on = np.array([False, True, False])
    np.testing.assert_array_equal(kernel_ops.where_lazy(on, term, (np.ones(3),), -1.0), [-1.0, 2.0, -1.0])
    assert len(calls) == 1


def test_where_lazy_compiles_to_the_same_values():
    numba = pytest.importorskip("numba")
    kernel_ops.register_compiled()
    jf = numba.njit(error_model="numpy")(_sqrt_plus)
    g = {"kernel_ops": kernel_ops, "_sqrt_plus": jf}
    src = "def lazy(c, a, b):\n    return kernel_ops.where_lazy(c, _sqrt_plus, (a, b), 0.0)\n"
    exec(src, g)  # noqa: S102 - a test kernel bound to the compiled term
    jl = numba.njit(error_model="numpy")(g["lazy"])
    for c, a, b in ((True, 4.0, 1.0), (False, 4.0, 1.0), (True, 2.0, -0.5), (False, -1.0, 3.0)):
        assert jl(c, a, b) == _lazy_kernel(c, a, b)
