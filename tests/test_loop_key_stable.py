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

