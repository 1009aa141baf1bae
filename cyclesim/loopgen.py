"""Cycle loops generated for plug-in kernels, compiled by numba and cached on disk.

A submodel of the burn or heat-transfer role may give its physics as a *kernel*: a plain
function of named arguments (``kernel = my_rate``, see ``BurnRate.kernel``).  The Python path
calls it on arrays (B,); for the compiled loop this module writes a module file that holds the
kernel's source, the globals it reads (numbers as literals, ``numpy`` / ``math`` as imports,
helper functions as their own source) and the compiled loop's right-hand side and cycle from
:mod:`cyclesim._compiled` with the kernel's call written in: every argument resolved to a
local variable of the loop or a packed-parameter row, as a constant.

The file's name is a hash of everything it contains (the loop's own source, each kernel's and
helper's source and the values of the globals they read), so an edited kernel gives a new file
and can never run on a stale compiled loop; numba caches the compiled code beside the file, so
later processes (sweep workers among them) load it instead of compiling.  The folder is
``CYCLESIM_CACHE_DIR`` if set, else ``~/.cache/cyclesim/loops``.
"""

from __future__ import annotations

import hashlib
import importlib.util
import inspect
import os
import sys
import textwrap
import types
from pathlib import Path

VERSION = "1"
CACHE_ENV = "CYCLESIM_CACHE_DIR"

ROLES = ("burn", "heat_transfer")
"""Roles whose models may give a kernel: the burn rate [1/deg] and the wall heat-transfer
coefficient [W/(m^2 K)]."""

STATE_ARGS = {
    # kernel argument (a GasState field) -> the loop's local expression (cyclesim._compiled._rhs)
    "theta": "theta", "m": "m", "T": "T", "p": "p", "rho": "rho", "V": "V", "dV": "dV", "R": "R",
    "cv": "u_T", "cp": "cp", "gamma": "gamma", "y_b": "yb", "x_b": "xb", "Sp": "sp", "omega_deg": "om",
    "closed": "closed", "burning": "burning", "A_head": "Ah", "A_piston": "Ap", "A_liner": "Al",
    "T_wall_head": "CB[R_TW_HEAD, b]", "T_wall_piston": "CB[R_TW_PISTON, b]",
    "T_wall_liner": "CB[R_TW_LINER, b]",
    "p_ivc": "CB[R_IVC_P, b]", "T_ivc": "CB[R_IVC_T, b]", "V_ivc": "CB[R_IVC_V, b]",
}
"""What a kernel may take from the cylinder state, by the name of the GasState field [SI]; an
argument that the model's ``pack()`` gives is that parameter instead (pack() names come first,
so a Wiebe form factor may be called ``m``)."""


class LoopGenError(Exception):
    """A kernel that cannot go into a generated loop (the batch then runs on the Python path)."""


def kernel_of(cls):
    """The plain function a submodel class gives as its ``kernel``, or None."""
    k = inspect.getattr_static(cls, "kernel", None)
    if isinstance(k, staticmethod):
        k = k.__func__
    return k if isinstance(k, types.FunctionType) else None


_ARGS: dict = {}


def kernel_args(fn) -> tuple[str, ...]:
    """The kernel's argument names, in order (positional arguments without defaults only)."""
    got = _ARGS.get(fn.__code__)
    if got is None:
        got = _ARGS[fn.__code__] = _kernel_args(fn)
    return got


def _kernel_args(fn) -> tuple[str, ...]:
    sig = inspect.signature(fn)
    out = []
    for p in sig.parameters.values():
        if p.kind not in (p.POSITIONAL_ONLY, p.POSITIONAL_OR_KEYWORD) or p.default is not p.empty:
            raise LoopGenError(f"kernel {fn.__name__}: argument {p.name!r} must be a plain positional argument")
        out.append(p.name)
    return tuple(out)


def own_states(role: str) -> tuple[str, ...]:
    """Submodel state components of ``role`` that the compiled loop integrates
    (:data:`cyclesim._compiled.STATES`): a kernel of that role may take them by name."""
    from ._compiled import STATES

    return tuple(name for r, name in STATES if r == role)


def kernel_params(fn, packed, role: str = "") -> tuple[str, ...]:
    """The kernel's arguments that are packed parameters (named in ``packed``, the model's
    ``pack()``); every other argument must be a cylinder-state name (:data:`STATE_ARGS`) or
    one of its role's integrated states (:func:`own_states`)."""
    args = kernel_args(fn)
    known = set(STATE_ARGS) | set(own_states(role) if role else ())
    unknown = [a for a in args if a not in packed and a not in known]
    if unknown:
        raise LoopGenError(f"kernel {fn.__name__}: argument(s) {', '.join(unknown)} are neither given by pack()"
                           f" nor a state field ({', '.join(STATE_ARGS)})")
    return tuple(a for a in args if a in packed)


def call_on(fn, state, packed, role: str = ""):
    """The kernel on the Python path: parameters from ``packed`` (the model's ``pack()``),
    the role's own states from ``state.sub``, the other arguments from ``state`` (a GasState)."""
    sub = getattr(state, "sub", None) or {}
    return fn(*[packed[a] if a in packed else sub[f"{role}.{a}"] if f"{role}.{a}" in sub
                else getattr(state, a) for a in kernel_args(fn)])


def _source(fn) -> str:
    try:
        src = textwrap.dedent(inspect.getsource(fn))
    except (OSError, TypeError) as exc:
        raise LoopGenError(f"kernel {fn.__name__}: its source cannot be read ({exc})") from None
    lines = src.splitlines()
    while lines and lines[0].lstrip().startswith("@"):
        lines.pop(0)                # decorators: the generated file adds its own
    if not lines or not lines[0].startswith(f"def {fn.__name__}("):
        raise LoopGenError(f"kernel {fn.__name__}: must be a module-level function (def at column 0)")
    return "\n".join(lines) + "\n"


def _globals_read(fn) -> dict:
    """The module globals the function's code loads (LOAD_GLOBAL, nested code included), by name;
    builtins (abs, min, ...) are left to numba."""
    import dis

    names: set = set()
    codes = [fn.__code__]
    while codes:
        code = codes.pop()
        for ins in dis.get_instructions(code):
            if ins.opname == "LOAD_GLOBAL":
                names.add(ins.argval)
        codes += [c for c in code.co_consts if isinstance(c, types.CodeType)]
    return {n: fn.__globals__[n] for n in names if n in fn.__globals__}


def _collect(fn, funcs: dict, consts: dict, imports: dict) -> None:
    """The function's source, the functions it calls and the globals it reads, recursively."""
    import cyclesim.kernel_ops as kernel_ops

    if fn.__name__ in funcs:
        if funcs[fn.__name__][0] is not fn:
            raise LoopGenError(f"two kernel helpers are named {fn.__name__!r}")
        return
    if fn.__code__.co_freevars:
        raise LoopGenError(f"kernel {fn.__name__}: reads variables of an enclosing function "
                           f"({', '.join(fn.__code__.co_freevars)}); use module-level names")
    funcs[fn.__name__] = (fn, _source(fn))
    for name, val in sorted(_globals_read(fn).items()):
        if isinstance(val, types.ModuleType):
            if val.__name__ not in ("numpy", "math"):
                raise LoopGenError(f"kernel {fn.__name__}: reads module {val.__name__!r}; only numpy and math compile")
            imports[name] = val.__name__
        elif val is kernel_ops.where:
            imports[name] = "cyclesim.kernel_ops.where"
        elif isinstance(val, types.FunctionType):
            _collect(val, funcs, consts, imports)
        elif isinstance(val, (bool, int, float)) and not isinstance(val, type):
            consts[name] = repr(val)
        elif isinstance(val, tuple) and all(isinstance(v, (int, float)) for v in val):
            consts[name] = repr(val)
        else:
            raise LoopGenError(f"kernel {fn.__name__}: reads global {name!r} of type {type(val).__name__}"
                               " (only numbers, tuples of numbers, numpy, math and plain functions compile)")


def _call(role: str, fn, rows: dict[str, int], target: str) -> str:
    from ._compiled import IC_ROWS

    args = []
    for a in kernel_args(fn):
        if a in rows:
            args.append(f"CB[R_P + {rows[a]}, b]")
        elif a in own_states(role):
            args.append(f"yv[IC[{IC_ROWS[f'{role}.{a}']}]]")     # the state's row, set per batch
        else:
            args.append(STATE_ARGS[a])
    return f"{target}({', '.join(args)})"


def param_rows_for(role: str, fn, packed, forms_rows: dict) -> dict[str, int]:
    """Row offsets (from R_P) of the kernel's packed parameters: the role's kernel slots in order."""
    slots = list(forms_rows[role, "kernel"].values())
    names = kernel_params(fn, packed, role)
    if len(names) > len(slots):
        raise LoopGenError(f"kernel {fn.__name__}: {len(names)} parameters, at most {len(slots)} compile")
    return {n: slots[k] for k, n in enumerate(names)}


def cache_dir() -> Path:
    """The loop cache: ``CYCLESIM_CACHE_DIR``, else ``~/.cache/cyclesim/loops``; where that cannot
    be written, a folder in the system's temporary directory."""
    d = os.environ.get(CACHE_ENV, "").strip()
    try:
        path = Path(d) if d else Path.home() / ".cache" / "cyclesim" / "loops"
        path.mkdir(parents=True, exist_ok=True)
        if os.access(path, os.W_OK):
            return path
    except (OSError, RuntimeError):
        pass
    import tempfile

    path = Path(tempfile.gettempdir()) / f"cyclesim-loops-{os.getuid() if hasattr(os, 'getuid') else 0}"
    path.mkdir(parents=True, exist_ok=True)
    return path


def _fingerprint(fn, seen=None) -> tuple:
    """What the generated text depends on, cheaply: the code objects (equal for equal source)
    and the values of the globals read, of the kernel and of the helpers it calls."""
    seen = set() if seen is None else seen
    if fn in seen:
        return ()
    seen.add(fn)
    out: list = [fn.__code__]
    for name, val in sorted(_globals_read(fn).items()):
        if isinstance(val, types.FunctionType):
            out.append((name, _fingerprint(val, seen)))
        elif isinstance(val, types.ModuleType):
            out.append((name, val.__name__))
        else:
            out.append((name, type(val).__name__, repr(val)))
    return tuple(out)


_generated: dict = {}


def generate(kernels: dict) -> tuple[str, str]:
    """(key, module source) of the loop for ``kernels`` (role -> (function, pack() names)).

    Remembered in the process by a fingerprint of the kernels (code objects and the values of
    the globals they read), so a repeated batch does not read sources again.
    """
    memo = tuple((role, kernels[role][1], _fingerprint(kernels[role][0])) for role in ROLES if role in kernels)
    got = _generated.get(memo)
    if got is None:
        got = _generated[memo] = _generate(kernels)
    return got


def _generate(kernels: dict) -> tuple[str, str]:
    import cyclesim._compiled as base

    funcs: dict = {}
    consts: dict = {}
    imports: dict = {}
    calls = {}
    for role in ROLES:
        if role not in kernels:
            continue
        fn, packed = kernels[role]
        _collect(fn, funcs, consts, imports)
        rows = param_rows_for(role, fn, packed, base.PARAM_ROWS)
        calls[role] = _call(role, fn, rows, fn.__name__)
    own = vars(base)
    # a constant the loop's module defines alike (CYCLE_END_DEG) is the loop's own: not written again
    consts = {n: v for n, v in consts.items()
              if not (n in own and isinstance(own[n], (int, float, tuple)) and repr(own[n]) == v)}
    clash = {n for n in set(funcs) | set(consts) if n in own}
    clash |= {n for n, target in imports.items() if n in own and getattr(own[n], "__name__", None) != target}
    if clash:
        raise LoopGenError(f"kernel names {sorted(clash)} clash with the compiled loop's own names; rename them")
    rhs = textwrap.dedent(inspect.getsource(base._rhs.py_func))
    for role, marker in (("burn", "burn_kernel(theta)  # KERNEL CALL burn"),
                         ("heat_transfer", "heat_transfer_kernel(T)  # KERNEL CALL heat_transfer")):
        if marker not in rhs:
            raise LoopGenError(f"the compiled loop has no call site for the {role} kernel")
        if role in calls:
            rhs = rhs.replace(marker, calls[role])
    cycle = textwrap.dedent(inspect.getsource(base.run_cycle.py_func))
    private = sorted(n for n, v in vars(base).items()
                     if n.startswith("_") and not n.startswith("__") and hasattr(v, "py_func"))
    parts = [
        f'"""Cycle loop generated by cyclesim.loopgen for the kernels {", ".join(f.__name__ for f, _ in kernels.values())}."""',
        "import math",
        "import numpy as np",
        "from numba import njit",
        "import cyclesim.kernel_ops",
        "cyclesim.kernel_ops.register_compiled()",
        "from cyclesim._compiled import *  # noqa: F401,F403 - the layout constants and helpers",
        f"from cyclesim._compiled import {', '.join(private)}  # noqa: F401",
    ]
    for name, target in sorted(imports.items()):
        mod, _, attr = target.rpartition(".") if target.endswith(".where") else (target, "", "")
        parts.append(f"from {mod} import {attr} as {name}" if attr else f"import {target} as {name}")
    parts += [f"{n} = {v}" for n, v in sorted(consts.items())]
    for name, (fn, src) in funcs.items():
        parts.append('\n@njit(cache=True, inline="always", error_model="numpy")\n' + src)
    parts.append('\n@njit(cache=True, error_model="numpy")\n' + rhs.split("\n", 1)[1] if rhs.startswith("@")
                 else '\n@njit(cache=True, error_model="numpy")\n' + rhs)
    parts.append('\n@njit(cache=True, nogil=True, error_model="numpy")\n'
                 + (cycle.split("\n", 1)[1] if cycle.startswith("@") else cycle))
    text = "\n".join(parts) + "\n"
    h = hashlib.sha256()
    h.update(VERSION.encode())
    h.update(Path(base.__file__).read_bytes())
    h.update(Path(__file__).read_bytes())
    h.update(text.encode())
    return h.hexdigest()[:24], text


_loaded: dict = {}


def _quick_key(kernels: dict) -> str:
    """A cheap hash of what the loop depends on (the kernels' compiled code objects, the values of
    the globals they read, this module's and the compiled loop's files), naming an index entry
    that points at the loop's file: a new process finds its loop without reading any source."""
    import marshal

    import cyclesim._compiled as base

    h = hashlib.sha256(VERSION.encode())
    for path in (base.__file__, __file__):
        h.update(Path(path).read_bytes())

    def feed(x):
        if isinstance(x, types.CodeType):
            h.update(marshal.dumps(x))
        elif isinstance(x, tuple):
            h.update(b"(")
            for v in x:
                feed(v)
            h.update(b")")
        else:
            h.update(repr(x).encode())

    for role in ROLES:
        if role in kernels:
            fn, names = kernels[role]
            feed((role, names, _fingerprint(fn)))
    return h.hexdigest()[:24]


def module_for(kernels: dict):
    """The generated loop module for ``kernels`` (role -> (function, pack() names)): written on first use, then
    loaded from the cache folder; ``(module, freshly_written)``."""
    d = cache_dir()
    index = d / "index" / _quick_key(kernels)
    key = index.read_text().strip() if index.is_file() else ""
    if key and key in _loaded:
        return _loaded[key], False
    if not key or not (d / f"loop_{key}.py").is_file():
        key, text = generate(kernels)
        if key in _loaded:
            return _loaded[key], False
    d.mkdir(parents=True, exist_ok=True)
    path = d / f"loop_{key}.py"
    fresh = not path.exists()
    if fresh:
        tmp = path.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_text(text)
        os.replace(tmp, path)          # atomic: a sweep worker never reads half a file
    if not index.is_file():
        index.parent.mkdir(parents=True, exist_ok=True)
        tmp = index.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_text(key)
        os.replace(tmp, index)
    name = f"cyclesim_loop_{key}"
    spec = importlib.util.spec_from_file_location(name, path)
    mod = importlib.util.module_from_spec(spec)
    sys.modules[name] = mod
    try:
        spec.loader.exec_module(mod)
    except Exception as exc:  # noqa: BLE001 - a kernel that is not valid Python here
        sys.modules.pop(name, None)
        raise LoopGenError(f"the generated loop does not load ({type(exc).__name__}: {exc})") from exc
    _loaded[key] = mod
    return mod, fresh
