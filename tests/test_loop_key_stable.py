"""The key under which a new process finds its generated cycle loop holds nothing process-specific.

loopgen._quick_key hashes the kernels' fingerprints (code objects and the values of the globals
they read) and names an index entry in the loop cache.  A value whose text holds a memory address
(the repr of a built-in method such as ``np.logical_or.reduce``) made the key differ in every
process, so the entry was never found and every run wrote the loop's text again.
"""

from __future__ import annotations

import math
import re
import types

import numpy as np
import pytest

ADDRESS = re.compile(r"0x[0-9a-fA-F]{4,}")


def _leaves(x):
    if isinstance(x, tuple):
        for v in x:
            yield from _leaves(v)
    elif not isinstance(x, types.CodeType):      # code objects are hashed by marshal, not repr
        yield x


def _kernel_functions():
    """Every function a built-in model gives the generated loop (its kernels of any form) and the
    loop template's own functions."""
    from cyclesim.loops import loopgen
    from cyclesim.registry import get_registry

    fns = list(loopgen.template_functions() + loopgen.zone_functions())
    for models in get_registry(()).submodels.values():
        for cls in models.values():
            for attr in ("kernel", "state_kernel", "heat_flow_kernel", "wall_share_kernel"):
                fn = loopgen.kernel_of(cls, attr)
                if fn is not None:
                    fns.append(fn)
    return fns


def test_no_fingerprint_of_a_built_in_kernel_holds_a_memory_address():
    from cyclesim.loops.kernel_key import _fingerprint

    fns = _kernel_functions()
    assert len(fns) > 12
    bad = [(fn.__qualname__, str(leaf)) for fn in fns for leaf in _leaves(_fingerprint(fn))
           if ADDRESS.search(str(leaf))]
    assert not bad, bad[:5]


@pytest.mark.parametrize("value, text", [
    (np.logical_or.reduce, "builtin:<ufunc 'logical_or'>.ufunc.reduce"),
    (math.exp, "builtin:math.exp"),
    (len, "builtin:builtins.len"),
])
def test_a_built_in_function_is_named_not_addressed(value, text):
    from cyclesim.loops.kernel_key import _value_text

    assert _value_text(value) == text
    assert _value_text(np.logical_and.reduce) != _value_text(np.logical_or.reduce)
    assert _value_text(2.5) == repr(2.5)



def _reference_global_names(code):
    import dis

    names, codes = set(), [code]
    while codes:
        c = codes.pop()
        names.update(ins.argval for ins in dis.get_instructions(c) if ins.opname == "LOAD_GLOBAL")
        codes += [k for k in c.co_consts if isinstance(k, types.CodeType)]
    return tuple(sorted(names))


def test_global_names_from_raw_bytecode_equal_those_dis_gives():
    """The key's fast scan of LOAD_GLOBAL against the standard library's disassembler, on every
    function of the package's kernel modules and of this test (an EXTENDED_ARG case included)."""
    import cyclesim.kernel_ops
    import cyclesim.loops._compiled
    import cyclesim.loops.zone_solve
    from cyclesim.loops.kernel_key import _global_names

    many = "\n".join(f"g{i} = {i}" for i in range(300))
    space: dict = {}
    exec(many + "\ndef wide():\n    return " + " + ".join(f"g{i}" for i in range(300)) + "\n", space)
    codes = [space["wide"].__code__]
    for mod in (cyclesim.kernel_ops, cyclesim.loops.zone_solve, cyclesim.loops._compiled):
        for v in vars(mod).values():
            fn = getattr(v, "py_func", v)
            if isinstance(fn, types.FunctionType):
                codes.append(fn.__code__)
    codes += [fn.__code__ for fn in _kernel_functions()]
    assert len(codes) > 60
    for code in codes:
        assert _global_names(code) == _reference_global_names(code), code.co_name
    assert len(_global_names(space["wide"].__code__)) == 300
