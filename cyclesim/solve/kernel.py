"""Choice of the cycle loop: compiled (numba, optional) or Python.

The compiled loop integrates one cycle of every case of a batch in machine code: a module
that :mod:`cyclesim.loops.loopgen` writes from the template in :mod:`cyclesim.loops._compiled`, the
balance of :mod:`cyclesim.loops.balance` and the chosen models' kernels.  A model runs compiled where
it gives its physics as kernels (any plug-in may); any other runs on the Python path, which is
always there and is the reference.  Results agree to rounding (``tests/test_kernel.py``).

================  ==========================================================
role              built-ins, all compiled
================  ==========================================================
burn              ``wiebe``, ``wiebe_ca50``, ``wiebe_table``, ``double_wiebe``, ``wiebe_flame``,
                  ``entrainment`` (kernels; entrainment's x_e, K, k a state kernel), ``none``
heat_transfer     ``woschni``, ``hohenberg`` (kernels; Woschni's T_mot a state kernel),
                  ``annand`` (a heat-flow kernel), ``none``
blowby            ``orifice`` (a kernel), ``none``
valve_flow        ``poppet``, ``none`` (areas read per point)
boundary          ``constant``, ``manifold_trace`` (closed cycles: any)
knock             ``livengood_wu`` (a state kernel), ``none``
================  ==========================================================

Choice: the environment variable ``CYCLESIM_KERNEL`` = ``auto`` (default: compiled
where numba is installed and the batch's submodels allow), ``python`` (always the
Python path) or ``compiled`` (as auto, but a missing numba, or a batch with a submodel that
has no compiled form, is an error).  Install numba with the ``fast`` extra:
``pip install -e ".[fast]"``.  The first use compiles the loop (some seconds) and caches it
on disk; later processes load it.

A case whose state or derivatives stop being finite or physical in the compiled
loop is re-run on the Python path for that cycle, which stops it with the message
naming the cause.
"""

from __future__ import annotations

import os
import threading

import numpy as np

from ..errors import ConfigError

ENV = "CYCLESIM_KERNEL"
CHOICES = ("auto", "python", "compiled")

THREADS_ENV = "CYCLESIM_THREADS"
MIN_CASES_PER_THREAD = 8
"""A batch is split over threads only where each gets at least this many cases."""
_threads: int | None = None   # threads per compiled cycle; None: CYCLESIM_THREADS or the CPUs (at most 2)

_mod = None          # the compiled module, False where numba is missing
_used = {"compiled": 0, "python": 0}
"""Cycles run by each path in this process (for tests and the benchmark)."""
_told: set = set()   # notices already printed in this process (compiling, each fall-back reason)
FALLBACK_SLOWDOWN = "15-60 times slower"
"""How much slower the numpy loop is than the compiled one (benchmarks/run.py, numpy_loop)."""


def threads() -> int:
    """Threads that share the cases of one compiled cycle.

    ``CYCLESIM_THREADS`` if set, else the CPUs this process may use, at most 2; worker
    processes of a parallel sweep use 1 (:func:`set_threads`), as they already fill the CPUs.
    """
    if _threads is not None:
        return _threads
    v = os.environ.get(THREADS_ENV, "").strip()
    if v:
        try:
            n = int(v)
        except ValueError:
            raise ConfigError(f"{THREADS_ENV}={v!r}: expected a whole number >= 1") from None
        if n < 1:
            raise ConfigError(f"{THREADS_ENV}={v!r}: expected a whole number >= 1")
        return n
    from .cpus import available_cpus

    return min(2, available_cpus())


def set_threads(n: int | None) -> None:
    """Threads per compiled cycle in this process (None: back to the default of :func:`threads`)."""
    global _threads
    _threads = None if n is None else max(1, int(n))


def choice() -> str:
    v = os.environ.get(ENV, "auto").strip().lower() or "auto"
    if v not in CHOICES:
        raise ConfigError(f"{ENV}={v!r}: expected one of {', '.join(CHOICES)}")
    return v


def compiled_module():
    """The compiled module, or None where numba is not installed (or the Python path is chosen)."""
    global _mod
    c = choice()
    if c == "python":
        return None
    if _mod is None:
        try:
            import cyclesim.loops._compiled as _compiled
            _mod = _compiled
        except ImportError as exc:
            if c == "compiled":
                raise ConfigError(f"{ENV}=compiled needs numba: pip install -e \".[fast]\" ({exc})") from exc
            _mod = False
        except Exception as exc:  # noqa: BLE001 - a broken numba install: say so, use the numpy loop
            if c == "compiled":
                raise ConfigError(f"{ENV}=compiled: numba failed to load ({type(exc).__name__}: {exc})") from exc
            _notice("numba", f"numba failed to load ({type(exc).__name__}: {exc}); using the numpy loop")
            _mod = False
    if _mod is False and c == "compiled":
        raise ConfigError(f"{ENV}=compiled needs numba: pip install -e \".[fast]\"")
    return _mod or None


def _no_module_reason() -> str:
    """Why no batch runs compiled in this process (:func:`compiled_module` gave None)."""
    return f"{ENV}=python" if choice() == "python" else "numba not installed: pip install -e \".[fast]\""


def _notice(key: str, text: str) -> None:
    """One line on stderr, once per process and ``key``."""
    if key not in _told:
        _told.add(key)
        import sys

        print(f"cyclesim: {text}", file=sys.stderr, flush=True)


def _b(x, B) -> np.ndarray:
    """``x`` as a writable float array (B,) of its own (a copy; a scalar repeated)."""
    a = np.asarray(x, dtype=float)
    if a.shape == (B,):
        return a.copy()
    if a.ndim == 0:
        return np.full(B, a)
    return np.array(np.broadcast_to(a, (B,)), dtype=float)


def _cw(a, dtype=float) -> np.ndarray:
    return np.require(a, dtype=dtype, requirements=["C", "W"])


PHYSICS = {
    "burn": ("rate", "start_deg", "combustion_efficiency"),
    "heat_transfer": ("coefficient", "heat_flow"),
    "blowby": ("mass_flow",),
    "valve_flow": ("mass_flows", "flow_area"),
    "boundary": ("intake", "exhaust"),
    "knock": (),
}
"""The methods whose arithmetic a compiled form stands for, per role (a model's own states are
compiled from its ``state_kernel``, :func:`states_compile`)."""


KERNEL_METHODS = {"burn": ("rate",), "heat_transfer": ("coefficient", "heat_flow"), "blowby": ("mass_flow",)}
"""The role methods a kernel stands for (a model that overrides them is not its kernel)."""
KERNEL_FORMS = {("heat_transfer", "heat_flow_kernel"): ("heat_flow",)}
"""Other kernels a role may give, by (role, class attribute), and the methods each stands for
(checked before the role's ``kernel``)."""


def compiled_form(model) -> str | None:
    """The compiled form a submodel declares (``compiled_form``), or None.

    A capability, not a type: a subclass keeps its parent's compiled form unless it overrides one
    of the role's physics methods (:data:`PHYSICS`), since the form then no longer computes what
    the class does.  Its parameters reach the loop through its ``pack()``.  A model that gives a
    ``kernel`` (and leaves the role's methods to it) has the form ``kernel``: a loop generated
    for it (:mod:`cyclesim.loops.loopgen`).
    """
    cls = type(model)
    memo = getattr(_setup, "forms", None)
    if memo is None:
        return form_of_class(cls)
    got = memo.get(cls)
    if got is None and cls not in memo:
        got = memo[cls] = form_of_class(cls)
    return got


_setup = threading.local()
"""``forms``: compiled_form by class while this thread sets up one batch's compiled cycle
(:func:`prepare`), else None: a class changed between two runs is looked at again."""


def form_of_class(cls) -> str | None:
    """:func:`compiled_form` of a submodel class."""
    from ..loops.loopgen import kernel_of, state_kernel_of
    from ..roles import ROLE_BASES

    role = cls.role
    if role in PHYSICS and not PHYSICS[role] and state_kernel_of(cls) is not None:
        return "kernel" if states_compile(cls) else None      # a role of states only (knock)
    for (r, attr), methods in KERNEL_FORMS.items():
        if r == role and kernel_of(cls, attr) is not None:
            base = ROLE_BASES[role]
            return attr if all(getattr(cls, n) is getattr(base, n) for n in methods) else None
    if role in KERNEL_METHODS and kernel_of(cls) is not None:
        base = ROLE_BASES[role]
        if all(getattr(cls, n) is getattr(base, n) for n in KERNEL_METHODS[role]):
            return "kernel"
        return None
    form = getattr(cls, "compiled_form", None)
    if form is None or role not in PHYSICS:
        return None
    owner = next(c for c in cls.__mro__ if "compiled_form" in vars(c))
    for name in PHYSICS[role]:
        if getattr(cls, name, None) is not getattr(owner, name, None):
            return None
    return form


def states_compile(cls) -> bool:
    """Whether a class's own states run compiled: it gives a ``state_kernel`` and its
    ``derivatives()`` is that kernel's (defined in the class that gives the kernel or above it,
    so a subclass that overrides ``derivatives()`` alone runs on the Python path)."""
    from ..loops.loopgen import state_kernel_of

    if state_kernel_of(cls) is None:
        return False
    owner_k = next(c for c in cls.__mro__ if "state_kernel" in vars(c))
    owner_d = next(c for c in cls.__mro__ if "derivatives" in vars(c))
    return owner_d in owner_k.__mro__


def loop_status(cls) -> str:
    """How a submodel class runs, for ``cyclesim plugins``: compiled (and by which form), or on
    the numpy loop, or outside the cycle loop."""
    if cls.role not in PHYSICS:
        return "outside the cycle loop (evaluated once per case after it)"
    form = form_of_class(cls)
    if form in ("kernel", "heat_flow_kernel"):
        from ..loops.loopgen import kernel_of, state_kernel_of

        fns = [f for f in (kernel_of(cls, form), state_kernel_of(cls)) if f is not None]
        return f"compiled: a loop generated from its kernel {', '.join(f.__name__ + '()' for f in fns)}"
    if form is not None:
        return f"compiled (form {form!r})"
    return "numpy loop (no compiled form: give a kernel, see DEVELOPERS.md)"


def why_not(batch, rhs) -> str | None:
    """None if the batch's submodels all have a compiled form, else every reason they do not."""
    mod = compiled_module()           # the template's forms (loaded here if no batch has loaded it yet)
    if mod is None:
        return _no_module_reason()
    forms = mod.FORMS
    m = batch.models
    reasons = []
    roles = ["burn", "heat_transfer", "blowby", "knock"] + (["valve_flow", "boundary"] if rhs.mode == "full" else [])
    for role in roles:
        form = compiled_form(m[role])
        if form is None or form not in forms.get(role, {}):
            reasons.append(f"{role} model {m[role].name!r} has no compiled form")
    if getattr(rhs, "zones", False) and wall_share_form(m["burn"]) is False:
        reasons.append(f"burn model {m['burn'].name!r} gives the two zones' wall split (burned_wall_share)"
                       " without a wall_share_kernel")
    if getattr(batch.gas, "_compiled_consts", None) is None:
        reasons.append("gas properties are not the built-in tables")
    for role, model, sv in rhs.sub_specs:
        if not states_compile(type(model)) and not any(r.startswith(f"{role} ") for r in reasons):
            reasons.append(f"state {role}.{sv.name} has no compiled form (give a state_kernel)")
    return "; ".join(reasons) or None


def wall_share_form(burn):
    """The burn model's wall-share kernel for two zones (its ``wall_share_kernel``: the burned zone's
    share of the wall area, :meth:`cyclesim.roles.BurnRate.burned_wall_share` in kernel form), None
    where it gives no wall share (the zones then split by x^(1/2)), False where it gives one only
    as a method (no compiled form)."""
    from ..loops.loopgen import kernel_of
    from ..roles import ROLE_BASES

    cls = type(burn)
    fn = kernel_of(cls, "wall_share_kernel")
    own = cls.burned_wall_share is not ROLE_BASES["burn"].burned_wall_share
    if fn is None:
        return False if own else None
    owner_k = next(c for c in cls.__mro__ if "wall_share_kernel" in vars(c))
    owner_m = next(c for c in cls.__mro__ if "burned_wall_share" in vars(c))
    return fn if owner_m in owner_k.__mro__ else False     # a subclass that overrides the method only


def _packed(model, names: tuple[str, ...], B: int, form: str) -> dict[str, np.ndarray]:
    """A model's ``pack()``, checked against the parameter names its compiled form declares (a
    kernel's: those of the model's ``pack()`` its kernels read)."""
    got = dict(model.pack()) if names else {}
    if form in ("kernel", "heat_flow_kernel"):
        got = {k: v for k, v in got.items() if k in names}
    if set(got) != set(names):
        from ..errors import PluginError

        raise PluginError(f"{model.role} model {model.name!r}: pack() gave {sorted(got)}, its compiled form"
                          f" {compiled_form(model)!r} needs {sorted(names)}")
    return {k: _b(v, B) for k, v in got.items()}


def _first_plenums(batch, rhs, theta: float) -> dict:
    """The plenum gas at the cycle's first point (``rhs.plenums``).  A constant boundary's gas
    depends only on the pressures, temperatures and burned fraction it gives and on the gas
    tables, so it is worked out once per batch for those values and reused by the batch's later
    grids (the coarse start-up cycles and the fine ones); any other boundary is asked each time."""
    if not getattr(rhs.bnd, "constant", False):
        return rhs.plenums(theta, {})
    values = tuple(rhs.bnd.intake(theta, {})) + tuple(rhs.bnd.exhaust(theta, {}))
    key = (theta, tuple(np.asarray(v, float).tobytes() for v in values))
    memo = batch.__dict__.setdefault("_first_plenums", {})
    got = memo.get(key)
    if got is None or got[0] is not rhs.gas:
        got = memo[key] = (rhs.gas, rhs.plenums(theta, {}))
    return got[1]


class _BatchConsts:
    """The parts of a compiled cycle's inputs that depend on the batch alone, not on the grid: the
    case block (:data:`cyclesim.loops._compiled` rows) without the plenum gas, the integer
    constants, the IVC resets, the shared arrays of the models' ``pack()`` and the gas tables."""

    def __init__(self, mod, batch, rhs, parts):
        from ..loops.layout import shared_blocks
        from ..loops.loopgen import param_rows_for, shared_slots

        B = batch.B
        m = batch.models
        full = rhs.mode == "full"
        P = np.zeros((mod.N_P, B))
        IC = np.zeros(mod.N_IC, dtype=np.int64)
        parts = loop_parts(batch, rhs) if parts is None else parts
        for role in ("burn", "heat_transfer", "blowby", "knock"):
            form = compiled_form(m[role])
            rows = param_rows_for(role, parts, mod.PARAM_ROWS, form)
            for name, v in _packed(m[role], tuple(rows), B, form).items():
                P[rows[name]] = v
        # the batch-wide arrays of pack(), end to end in the order the generated loop reads them
        slots = shared_slots(parts)
        packs = {role: dict(m[role].pack()) for role in dict.fromkeys(r for r, _ in slots)}
        arrays = [packs[role][name] for role, name in slots]
        zt = getattr(rhs, "zone_tab", None) if getattr(rhs, "zones", False) else None
        if zt is not None:
            arrays += [zt._flat_f, zt._flat_r]      # after the models' arrays (loopgen._zone_lines)
        self.TB, self.TO = shared_blocks(arrays)
        # IVC resets: row 0 the kind per state row, row 1 + b case b's value (an initial may be per case)
        self.reset = np.zeros((1 + B, rhs.n))
        for k, (role, model, sv) in enumerate(rhs.sub_specs + getattr(rhs, "zone_specs", [])):
            row = rhs.names.index(f"{role}.{sv.name}")
            if sv.reset_at_ivc:
                if isinstance(sv.initial, str):
                    self.reset[0, row] = 1.0          # the cylinder temperature ("T_ivc")
                else:
                    self.reset[0, row] = 2.0
                    self.reset[1:, row] = _b(sv.initial, B)
        gas_tab, gas_off, gc, nRm1, uc4 = batch.gas._compiled_consts()
        self.gas = (gas_tab, gas_off, gc, uc4)
        IC[mod.IC_NRM1] = nRm1
        ivc = _b(batch.valves.ivc_deg, B)
        CB = np.zeros((mod.N_ROWS, B))
        CB[mod.R_OMEGA] = _b(rhs.omega, B)
        CB[mod.R_SP] = _b(rhs.Sp, B)
        CB[mod.R_TW:mod.R_TW + 3] = np.stack([_b(t, B) for t in rhs.Tw])
        CB[mod.R_ETA] = _b(rhs.eta_c, B)
        CB[mod.R_DH] = _b(rhs._dh298, B)
        CB[mod.R_BUF] = _b(rhs._buf_scale, B)
        CB[mod.R_P:mod.R_P + P.shape[0]] = P
        CB[mod.R_IVC_DEG] = ivc
        CB[mod.R_V_AT_IVC] = _b(batch.geometry.volume_at(ivc), B) if full else 0.0
        if zt is not None:
            # the two-zone block (cyclesim.loops._compiled.R_ZONE_*)
            CB[mod.R_ZONE_RF], CB[mod.R_ZONE_RR] = zt.R_f, zt.R_r
            CB[mod.R_ZONE_T0], CB[mod.R_ZONE_DT], CB[mod.R_ZONE_N] = zt.T0, zt.dT, zt.n
            CB[mod.R_ZONE_FLAME] = _b(rhs._flame, B)
        self.CB = CB
        self.IC = IC


class Compiled:
    """The packed inputs of one batch's compiled cycle (built once per integration)."""

    def __init__(self, mod, batch, rhs, pts, parts=None, pipes=None):
        half, Gu, geo_rows = pts.half, pts.Gu, pts.geo_rows
        self.pipes = () if pipes is None else (pipes,)   # the runners (cyclesim.pipes.loop_step.pack)
        closed_pts, burning_pts, open_at = pts.closed, pts.burning, pts.open_at
        self.mod = mod
        self.rhs = rhs
        B = batch.B
        self.full = rhs.mode == "full"
        m = batch.models
        self.th = _cw(half)
        # one compiled signature for all: C-contiguous, writable arrays
        self.Gc = [_cw(a) for a in Gu]          # (points, distinct geometries)
        self.geo_rows = _cw(geo_rows, np.int64)
        self.closed = _cw(closed_pts, np.bool_)
        self.burning = _cw(burning_pts, np.bool_)
        self.open_at = _cw(open_at, np.bool_)
        # effective valve areas at every point (zero where the valves are shut)
        vf = m["valve_flow"]
        if self.full and compiled_form(vf) == "poppet" and self.open_at.any():
            self.Ai, self.Ae = (_cw(a) for a in vf.areas_at(half))
        else:
            self.Ai = self.Ae = np.zeros((half.size, B))
        plen = np.zeros((11, B))
        self.PI = self.PE = np.zeros((1, B))
        if self.full:
            # the plenum gas as the numpy loop sees it: properties fixed at its first call, at the
            # cycle's first point; a pressure trace (manifold_trace) read at every point
            pl = _first_plenums(batch, rhs, float(half[0]))
            plen[:] = np.stack([_b(a, B) for a in pl["int"] + pl["exh"][:2] + pl["exh"][3:]])
            self.PI = _cw(plen[0:1])
            self.PE = _cw(plen[6:7])
            if compiled_form(m["boundary"]) == "pressure_trace":
                self.PI, self.PE = (_cw(a) for a in m["boundary"].pressures_at(half))
        # what depends on the batch alone (the models' packed parameters, the state layout, the gas
        # tables, the walls) is packed once per integration and shared by its grids (start-up and
        # fine; periodic.solve empties the memo); each grid has its own copy of the case block,
        # whose IVC rows a cycle writes
        key = (mod.__name__, self.full, tuple(rhs.names))
        memo = batch.__dict__.setdefault("_compiled_consts", {})
        got = memo.get(key)
        if got is None:
            got = memo[key] = _BatchConsts(mod, batch, rhs, parts)
        CB = got.CB.copy()
        CB[mod.R_PLEN:mod.R_PLEN + 11] = plen
        self.CB = CB
        self.IC, self.reset, self.TB, self.TO = got.IC, got.reset, got.TB, got.TO
        self.gas_tab, self.gas_off, self.gc, self.uc4 = got.gas
        self.steps = _cw(np.diff(half[::2]))
        self.status = np.zeros(B, dtype=np.int64)
        self.broken = False
        self.ready = mod.__name__ in _ready
        self.tableau = _tableau_arrays()

    def cycle(self, y: np.ndarray, Y: np.ndarray, F: np.ndarray) -> bool:
        """One cycle from ``y`` into ``Y``, ``F``; False (nothing kept) if any case needs the Python path."""
        rhs = self.rhs
        mod = self.mod
        CB = self.CB
        CB[mod.R_IVC_P], CB[mod.R_IVC_T], CB[mod.R_IVC_V] = rhs.p_ivc, rhs.T_ivc, rhs.V_ivc
        G = self.Gc
        args = (self.full, (self.th, self.steps, G[0], G[1], G[2], G[3], G[4], self.geo_rows),
                (self.closed, self.burning, self.open_at), (self.Ai, self.Ae, self.PI, self.PE),
                (_cw(y), Y, F, self.status), (CB, self.IC, self.reset, self.TB, self.TO),
                (self.gas_tab, self.gas_off, self.gc, self.uc4), self.tableau)
        B = self.status.size
        n_thr = min(threads(), B // MIN_CASES_PER_THREAD)
        if self.broken:
            return False
        if not self.ready:
            # a generated loop compiles on its first call: on one range, so that a kernel numba
            # cannot compile sends the batch to the Python path instead of failing it
            try:
                mod.run_cycle(*args, 0, 0, *self.pipes)
            except Exception as exc:  # noqa: BLE001 - numba's typing and lowering errors
                if type(exc).__module__.split(".")[0] != "numba":
                    raise
                self.broken = True
                first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
                _notice(f"kernel:{mod.__name__}", f"a model's kernel does not compile ({first}); this batch"
                                                 f" runs on the numpy loop ({FALLBACK_SLOWDOWN})")
                return False
            self.ready = True
            _ready.add(mod.__name__)
        if n_thr <= 1:
            mod.run_cycle(*args, 0, B, *self.pipes)
        else:
            # disjoint case ranges on threads of their own (started and joined here, so no thread
            # outlives the call: worker processes may still be forked from this one)
            cuts = [B * k // n_thr for k in range(n_thr + 1)]
            errors: list = []

            def part(k):
                try:
                    mod.run_cycle(*args, cuts[k], cuts[k + 1], *self.pipes)
                except BaseException as exc:  # noqa: BLE001 - re-raised in the caller
                    errors.append(exc)

            helpers = [threading.Thread(target=part, args=(k,), daemon=True) for k in range(1, n_thr)]
            for t in helpers:
                t.start()
            part(0)
            for t in helpers:
                t.join()
            if errors:
                raise errors[0]
        if self.status.any():
            return False
        rhs.p_ivc, rhs.T_ivc, rhs.V_ivc = CB[mod.R_IVC_P].copy(), CB[mod.R_IVC_T].copy(), CB[mod.R_IVC_V].copy()
        _used["compiled"] += 1
        return True


_TABLEAU: list = []


def _tableau_arrays() -> tuple:
    """The cycle scheme's arrays as the compiled loop takes them (made once; the loop only reads them)."""
    from .stepper import CYCLE_TABLEAU

    if not _TABLEAU or _TABLEAU[0] is not CYCLE_TABLEAU:
        A, a_den, b, b_den, node = CYCLE_TABLEAU.arrays()
        _TABLEAU[:] = [CYCLE_TABLEAU, (_cw(A), _cw(a_den), _cw(b), b_den, _cw(node, np.int64))]
    return _TABLEAU[1]


def loop_for(batch, rhs) -> tuple[object, str]:
    """The compiled module for this batch (or None) and the name of the loop it runs on.

    The name is ``"compiled"``, or ``"numpy"`` with the reason in parentheses where numba is
    installed but a submodel has no compiled form; that fall-back is also said once per
    process and reason on stderr, since it costs time.
    """
    return _loop_for(batch, rhs)[:2]


def _loop_for(batch, rhs, runner_step=None) -> tuple[object, str, tuple | None]:
    """:func:`loop_for` and the functions of the generated loop (:func:`loop_parts`; None where
    there is none)."""
    mod = compiled_module()
    if mod is None:
        return None, f"numpy ({_no_module_reason()})", None
    reason = why_not(batch, rhs)
    generated = False
    parts = None
    if reason is None:
        mod, reason, parts = _generated(batch, rhs, mod, runner_step)
        generated = reason is not None
    if reason is not None:
        if choice() == "compiled":
            raise ConfigError(f"{ENV}=compiled: {reason}")
        if generated or getattr(rhs, "zones", False) or any(type(m).__module__.split(".")[0] != "cyclesim_plugins"
                                                            for m in batch.models.values()):
            # a plug-in of the user's: worth a word (a study's own built-in variants are not)
            _notice(reason, f"{reason}: this batch runs on the numpy loop ({FALLBACK_SLOWDOWN} than the"
                            " compiled loop of the built-in submodels)")
        return None, f"numpy ({reason})", None
    return mod, "compiled", parts


def loop_parts(batch, rhs) -> tuple:
    """The functions of the batch's generated loop (:class:`cyclesim.loops.loopgen.Part`): each role's
    kernel and each model's state kernel, with the rows of that model's states (from the state
    layout, ``rhs.names``)."""
    from ..loops.layout import is_shared_array
    from ..loops.loopgen import Part, kernel_of, state_kernel_of

    parts = []
    own: dict = {}
    for role, model, sv in rhs.sub_specs:
        own.setdefault(role, []).append((sv.name, rhs.names.index(f"{role}.{sv.name}")))
    for role, model in batch.models.items():
        if role not in PHYSICS:
            continue
        form = compiled_form(model)
        kernel_form = form in ("kernel", "heat_flow_kernel") and role in KERNEL_METHODS
        got = dict(model.pack()) if (kernel_form or own.get(role)) else {}
        packed = tuple(got)
        arrays = tuple(n for n, v in got.items() if is_shared_array(v))
        if kernel_form:
            parts.append(Part(role, form, kernel_of(type(model), form), packed, own.get(role, ()), (), arrays))
        if own.get(role):
            rows = own[role]
            parts.append(Part(role, "state", state_kernel_of(type(model)), packed, rows, [r for _, r in rows],
                              arrays))
    if getattr(rhs, "zones", False):
        from ..loops import zone_solve
        from ..loops.zones import ZONE_ROLE, ZONE_STATES

        rows = tuple((sv.name, rhs.names.index(f"{ZONE_ROLE}.{sv.name}")) for sv in ZONE_STATES)
        parts.append(Part(ZONE_ROLE, "zones", zone_solve.cylinder_zones, (), rows, [r for _, r in rows]))
        fn = wall_share_form(batch.models["burn"])
        if fn:
            burn = batch.models["burn"]
            got = dict(burn.pack())
            parts.append(Part("burn", "wall_share", fn, tuple(got), own.get("burn", ()), (),
                              tuple(n for n, v in got.items() if is_shared_array(v))))
    return tuple(parts)


def _generated(batch, rhs, mod, runner_step=None):
    """The loop module for the batch: the built-in one, or one generated for its kernels and state
    kernels (:mod:`cyclesim.loops.loopgen`); and the reason where they cannot go into one."""
    from ..loops.loopgen import LoopGenError, module_for

    try:
        parts = loop_parts(batch, rhs)
        forms = {p.role: compiled_form(batch.models[p.role]) for p in parts if p.role in batch.models}
        from .stepper import CYCLE_TABLEAU

        gen, fresh = module_for(parts, {r: f for r, f in forms.items() if f not in ("kernel", "heat_flow_kernel")},
                                CYCLE_TABLEAU, runner_step)
    except LoopGenError as exc:
        return None, f"{exc}", None
    import numba

    if (fresh or not _cached(gen)) and not numba.config.DISABLE_JIT:
        names = ", ".join(f"{r} model {batch.models[r].name!r}" if r in batch.models else "two zones"
                          for r in dict.fromkeys(p.role for p in parts)) \
            or "the chosen models"
        _notice(f"compiling:{gen.__name__}", f"compiling the cycle loop for {names} (once per combination of"
                                            " models and kernel source; about 10-30 s)")
    return gen, None, parts


_ready: set = set()
"""Loop modules whose run_cycle compiled (or loaded) in this process: a later batch's cycle
needs no trial call first."""
_known_cached: set = set()   # names of loop modules found compiled in numba's cache (or compiled here)


def _cached(mod) -> bool:
    if mod.__name__ in _known_cached or mod.__name__ in _ready:
        return True
    try:
        got = bool(mod.run_cycle._cache._cache_file._load_index())
    except Exception:  # noqa: BLE001 - numba internals: treat as not cached
        return False
    if got:
        _known_cached.add(mod.__name__)
    return got


def prepare(batch, rhs, pts, runners=None) -> tuple[Compiled | None, str]:
    """The compiled cycle of this batch (None for the Python path) and the loop's name (:func:`loop_for`);
    ``pts``: the grid's per-point data (:class:`cyclesim.solve.cycle_grid.CyclePoints`); ``runners``:
    the batch's :class:`cyclesim.solve.valve_source.RunnerCoupling` (a loop generated with the
    runners' crank step, :mod:`cyclesim.pipes.loop_step`), or None."""
    _setup.forms = {}
    try:
        step = None
        if runners is not None and compiled_module() is not None:
            import cyclesim.pipes.scheme as scheme

            if not scheme.COMPILED:
                return None, "numpy (the runners' pipe kernels are not compiled in this process)"
            import cyclesim.pipes.loop_step as loop_step

            step = (loop_step.__name__, loop_step.source_digest())
        # the loop depends on the batch's models and the state layout only: the start-up grids and
        # the fine grid of one integration share it (looked up, and its kernels' key checked, once)
        key = (rhs.mode, tuple(rhs.names), bool(getattr(rhs, "zones", False)), step, choice())
        memo = batch.__dict__.setdefault("_loop_for", {})
        got = memo.get(key)
        if got is None:
            got = memo[key] = _loop_for(batch, rhs, step)
        mod, loop, parts = got
        if mod is None:
            return None, loop
        pipes = runners.compiled_pipes() if runners is not None else None
        return Compiled(mod, batch, rhs, pts, parts, pipes), loop
    finally:
        _setup.forms = None
