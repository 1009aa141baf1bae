"""Cycle loops generated for plug-in kernels, compiled by numba and cached on disk.

A submodel of the burn or heat-transfer role may give its physics as a *kernel*: a plain
function of named arguments (``kernel = my_rate``, see ``BurnRate.kernel``).  The Python path
calls it on arrays (B,); for the compiled loop this module writes a module file that holds the
kernel's source, the globals it reads (numbers as literals, ``numpy`` / ``math`` as imports,
helper functions as their own source) and the compiled loop's right-hand side and cycle from
:mod:`cyclesim.loops._compiled` with the kernel's call written in: every argument resolved to a
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

from .kernel_key import _FINGERPRINTS, _fingerprint, _fingerprint_of, _globals_read  # noqa: F401
from .kernel_collect import LoopGenError, _collect  # noqa: F401 - LoopGenError is public here
from .tableau import CYCLE_TABLEAU, STEP_NAME, stage_name, stage_source, tableau_key

VERSION = "1"
CACHE_ENV = "CYCLESIM_CACHE_DIR"

ROLES = ("burn", "heat_transfer")
"""Roles whose models may give a kernel: the burn rate [1/deg] and the wall heat-transfer
coefficient [W/(m^2 K)].  A model of any role with states of its own may give a
``state_kernel``: their time derivatives."""

STATE_ARGS = {
    # kernel argument (a GasState field) -> the loop's local expression (cyclesim.loops._compiled._rhs)
    "theta": "theta", "m": "m", "T": "T", "p": "p", "rho": "rho", "V": "V", "dV": "dV", "R": "R",
    "cv": "u_T", "cp": "cp", "gamma": "gamma", "y_b": "yb", "x_b": "xb", "Sp": "sp", "omega_deg": "om",
    "closed": "closed", "burning": "burning", "A_head": "Ah", "A_piston": "Ap", "A_liner": "Al",
    "T_wall_head": "CB[R_TW_HEAD, b]", "T_wall_piston": "CB[R_TW_PISTON, b]",
    "T_wall_liner": "CB[R_TW_LINER, b]",
    "p_ivc": "CB[R_IVC_P, b]", "T_ivc": "CB[R_IVC_T, b]", "V_ivc": "CB[R_IVC_V, b]",
    "T_u": "T_u",   # the unburned zone's temperature with two zones, 0 with one (cyclesim.loops.zone_solve)
    "gas": "(uc4, b, gc[7])",
}
"""What a kernel may take from the cylinder state, by the name of the GasState field [SI]; an
argument that the model's ``pack()`` gives is that parameter instead (pack() names come first,
so a Wiebe form factor may be called ``m``)."""


ZONE_KINDS = ("zones", "wall_share")
"""Parts of a two-zone loop (``simulation.zones: two``): ``zones``, the cylinder's zone solve
(:func:`cyclesim.loops.zone_solve.cylinder_zones`, its ``own`` the rows of the zone states m_bz and
s_u); ``wall_share``, a burn model's share of the wall area that the burned zone wets (its
``wall_share_kernel``, which may also read the burned zone's volume ``V_b`` [m^3])."""
WALL_SHARE_ARGS = {"V_b": "V_b"}
"""What a wall-share kernel may take besides the state fields (:data:`STATE_ARGS`)."""


def kernel_of(cls, attr: str = "kernel"):
    """The plain function a submodel class gives as its ``kernel`` (or as ``attr``), or None."""
    k = None
    for klass in cls.__mro__:            # the class attribute without running descriptors
        d = klass.__dict__
        if attr in d:
            k = d[attr]
            break
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


def state_kernel_of(cls):
    """The plain function a submodel class gives as its ``state_kernel``, or None."""
    return kernel_of(cls, "state_kernel")


def kernel_params(fn, packed, own=()) -> tuple[str, ...]:
    """The kernel's arguments that are packed parameters (named in ``packed``, the model's
    ``pack()``); every other argument must be a cylinder-state name (:data:`STATE_ARGS`) or
    one of the model's own integrated states (the names in ``own``)."""
    args = kernel_args(fn)
    own = () if isinstance(own, str) else own      # a role name (the earlier third argument): no states
    known = set(STATE_ARGS) | set(own)
    unknown = [a for a in args if a not in packed and a not in known]
    if unknown:
        own_text = f"; the model's states: {', '.join(own)}" if own else ""
        raise LoopGenError(f"kernel {fn.__name__}: argument(s) {', '.join(unknown)} are neither given by pack()"
                           f" nor a state field ({', '.join(STATE_ARGS)}){own_text}")
    return tuple(a for a in args if a in packed)


def call_on(fn, state, packed, role: str = "", gas=None):
    """The kernel on the Python path: parameters from ``packed`` (the model's ``pack()``),
    the model's own states from ``state.sub`` (by ``role.name``), the other arguments from
    ``state`` (a GasState; ``gas`` where the state carries no gas tables)."""
    return _plan_for(fn, packed, role).call(fn, state, packed, gas)


_PLANS: dict = {}


def _plan_for(fn, packed, role: str) -> "_ArgPlan":
    """The argument plan of ``fn`` for ``role`` and the names of ``packed``, made once per kernel
    and role (made again where a model of the same kernel packs other names)."""
    key = (fn.__code__, role)
    plan = _PLANS.get(key)
    if plan is None or not plan.fits(packed):
        plan = _PLANS[key] = _ArgPlan(kernel_args(fn), packed, role)
    return plan


class _ArgPlan:
    """Where each kernel argument comes from: ``packed`` (by name), else the model's own states in
    ``state.sub`` (``role.name``), else ``state.gas`` (or the model's gas) for ``gas``, else a
    ``state`` field.

    Which arguments ``state.sub`` gives is looked up per call (a set intersection); for each such
    set the plan writes, once, a caller that reads every argument straight from its source
    (``packed["a"]``, ``sub["role.a"]``, ``state.a``) in the kernel's order: one Python frame
    per kernel call, values read at each call."""

    __slots__ = ("names", "role", "in_packed", "not_packed", "sub_keys", "variants", "no_sub")

    def __init__(self, names: tuple, packed, role: str) -> None:
        self.names, self.role = names, role
        rest = tuple(a for a in names if a not in packed)
        self.in_packed = frozenset(a for a in names if a in packed)
        self.not_packed = frozenset(rest)
        self.sub_keys = frozenset(f"{role}.{a}" for a in rest)
        self.variants: dict = {}
        self.no_sub = self._variant(frozenset())

    def fits(self, packed) -> bool:
        """Whether ``packed`` gives exactly this plan's packed arguments among the kernel's."""
        keys = packed.keys()
        return self.in_packed <= keys and self.not_packed.isdisjoint(keys)

    def _variant(self, present: frozenset):
        """The caller where ``state.sub`` holds the keys ``present`` (of :attr:`sub_keys`)."""
        role = self.role
        exprs = []
        for a in self.names:
            if a in self.in_packed:
                exprs.append(f"packed[{a!r}]")
            elif f"{role}.{a}" in present:
                exprs.append(f"sub[{role + '.' + a!r}]")
            elif a == "gas":
                exprs.append("getattr(state, 'gas', gas)")
            else:
                exprs.append(f"state.{a}")
        src = (f"def call(fn, state, packed, gas, sub):\n"
               f"    return fn({', '.join(exprs)})\n")
        ns: dict = {}
        exec(compile(src, f"<kernel call of {', '.join(self.names) or 'no arguments'}>", "exec"), ns)  # noqa: S102
        self.variants[present] = ns["call"]
        return ns["call"]

    def call(self, fn, state, packed, gas):
        """``fn`` called on the arguments this plan reads from ``state``, ``packed`` and ``gas``."""
        sub = getattr(state, "sub", None)
        if not sub or not self.sub_keys:
            return self.no_sub(fn, state, packed, gas, sub)
        present = self.sub_keys.intersection(sub)
        v = self.variants.get(present) or self._variant(frozenset(present))
        return v(fn, state, packed, gas, sub)

    def args(self, state, packed, gas) -> tuple:
        """The kernel's arguments, in order (as :meth:`call` passes them)."""
        return self.call(lambda *a: a, state, packed, gas)


INLINE_MAX_ARGS = 28
"""Functions of more arguments are compiled as calls, not inlined by numba (its ``inline="always"``
fails for a function of 30 or more arguments: measured with numba 0.68)."""

KERNEL_SITES_FORMS = ("kernel", "heat_flow_kernel")
"""Compiled forms whose packed parameters fill the role's kernel slots in the order the
functions name them."""


class Part(tuple):
    """One function of a generated loop: ``(role, kind, fn, packed, own, out, arrays)``.

    ``kind`` is ``"kernel"`` (the role's kernel, called where the loop computes that role) or
    ``"state"`` (a state kernel: the time derivatives of the model's states); ``packed`` the
    names of the model's ``pack()``; ``own`` the model's states as ``((name, row), ...)``;
    ``out`` the rows a state kernel's results go to, in the order of ``states()``; ``arrays`` the
    names of ``packed`` that are batch-wide arrays (:func:`cyclesim.loops.layout.shared_array`), passed
    to the function as slices of the loop's shared-array block instead of per-case rows."""

    __slots__ = ()

    def __new__(cls, role, kind, fn, packed, own=(), out=(), arrays=()):
        return super().__new__(cls, (role, kind, fn, tuple(packed), tuple(own), tuple(out), tuple(arrays)))

    role = property(lambda self: self[0])
    kind = property(lambda self: self[1])
    fn = property(lambda self: self[2])
    packed = property(lambda self: self[3])
    own = property(lambda self: self[4])
    out = property(lambda self: self[5])
    arrays = property(lambda self: self[6])


def _part_params(part: "Part") -> tuple[str, ...]:
    """The packed parameters a part's function reads (none for the zone solve, which reads the
    loop's own zone rows)."""
    if part.kind == "zones":
        return ()
    extra = tuple(WALL_SHARE_ARGS) if part.kind == "wall_share" else ()
    return kernel_params(part.fn, part.packed, tuple(dict(part.own)) + extra)


def shared_slots(parts) -> dict[tuple[str, str], int]:
    """Index of each batch-wide array the functions in ``parts`` read, by ``(role, name)``, in the
    order they first name them: array k is ``TB[TO[k]:TO[k + 1]]`` in the loop
    (:func:`cyclesim.loops.layout.shared_blocks` stacks them in this order)."""
    out: dict[tuple[str, str], int] = {}
    for part in _as_parts(parts):
        for n in _part_params(part):
            if n in part.arrays and (part.role, n) not in out:
                out[part.role, n] = len(out)
    return out


def param_rows_for(role: str, parts, forms_rows: dict, form: str = "kernel") -> dict[str, int]:
    """Row offsets (from R_P) of the packed parameters the role's functions in ``parts`` read:
    for the form ``kernel`` the role's kernel slots in the order the functions name them; for a
    named form its declared rows, which must hold every name a state kernel reads."""
    names: list = []
    for part in parts:
        if part.role == role:
            for n in _part_params(part):
                if n not in names and n not in part.arrays:
                    names.append(n)
    if form not in KERNEL_SITES_FORMS:
        rows = forms_rows[role, form]
        missing = [n for n in names if n not in rows]
        if missing:
            raise LoopGenError(f"{role}: the state kernel reads {', '.join(missing)}, which the compiled form"
                               f" {form!r} does not pack")
        return dict(rows)
    slots = list(forms_rows[role, form].values())
    if len(names) > len(slots):
        fns = ", ".join(p.fn.__name__ for p in parts if p.role == role)
        raise LoopGenError(f"kernel {fns}: {len(names)} parameters, at most {len(slots)} compile")
    return {n: slots[k] for k, n in enumerate(names)}


def _call(part: Part, rows: dict[str, int], shared: dict | None = None, name: str | None = None) -> str:
    """The call of the part's function (by ``name`` in the generated loop, its own by default)."""
    own = dict(part.own)
    args = []
    for a in kernel_args(part.fn):
        if a in part.arrays and a in part.packed:
            j = (shared or {})[part.role, a]
            args.append(f"TB[TO[{j}]:TO[{j + 1}]]")     # a batch-wide array: its slice of the block
        elif a in rows and a in part.packed:
            args.append(f"CB[R_P + {rows[a]}, b]")
        elif a in own:
            args.append(f"yv[{own[a]}]")          # the state's row, a constant of this loop
        elif part.kind == "wall_share" and a in WALL_SHARE_ARGS:
            args.append(WALL_SHARE_ARGS[a])
        else:
            args.append(STATE_ARGS[a])
    return f"{name or part.fn.__name__}({', '.join(args)})"


ZONE_SOLVE_MARKER = "    T_u = 0.0  # ZONE SOLVE"
ZONE_RATES_MARKER = "    pass  # ZONE RATES"
"""Where the two-zone solve and the zone states' rates go in :func:`cyclesim.loops._compiled._rhs`."""


def zone_functions() -> tuple:
    """The functions a two-zone loop calls (:mod:`cyclesim.loops.zone_solve`), written into it from
    their one source."""
    from . import zone_solve as zs

    return (zs.cylinder_zones, zs.zone_rates, zs.burned_volume, zs.unburned_R)


def _zone_lines(part: Part, table: int, wall: str | None, name: str | None = None) -> tuple[str, str]:
    """The two-zone loop's lines: the solve (after the one-zone mixture; its pressure then is the
    zones') and the rates of the zone states (after the first law).  ``table``: the index of the
    zones' entropy tables among the loop's batch-wide arrays (phi_f, then phi_r); ``wall``: the
    call of the burn's wall-share kernel, None for the x^(1/2) split."""
    own = dict(part.own)
    r_m, r_s = own["m_bz"], own["s_u"]
    j = table
    gas = "(gas_tab, gas_off[b], gc, IC[IC_NRM1], uc4, b)"
    tabs = (f"TB[TO[{j}]:TO[{j + 1}]], TB[TO[{j + 1}]:TO[{j + 2}]], b * int(CB[R_ZONE_N, b]), CB[R_ZONE_T0, b],"
            " CB[R_ZONE_DT, b], CB[R_ZONE_N, b], CB[R_ZONE_RF, b], CB[R_ZONE_RR, b]")
    solve = [f"    m_bz = yv[{r_m}]",
             f"    s_u = yv[{r_s}]",
             f"    p, T_u, T_b, y_u, active, born = {name or part.fn.__name__}({gas}, {tabs}, m, V, m * u, mb, m_bz, s_u,"
             " p, T, CB[R_IVC_T, b], CB[R_IVC_P, b], closed)",
             "    h = where(active, u + p / rho, h)"]
    rates = []
    if wall is not None:
        rates += ["    V_b = burned_volume(V, m, m_bz, unburned_R(y_u, CB[R_ZONE_RF, b], CB[R_ZONE_RR, b]), T_u, p)",
                  f"    area_b = {wall}"]
    else:
        rates.append("    area_b = -1.0")
    rates.append(f"    out[{r_m}], out[{r_s}] = zone_rates(closed, m, m_bz, y_u, T_u, T_b, (CB[R_TW_HEAD, b]"
                 " + CB[R_TW_PISTON, b] + CB[R_TW_LINER, b]) / 3.0, dm_burn * CB[R_ZONE_FLAME, b], fbb, dQ, area_b)")
    return "\n".join(solve), "\n".join(rates)


def _state_lines(k: int, part: Part, rows: dict[str, int], shared: dict | None = None,
                 name: str | None = None) -> list[str]:
    """The loop's lines for a state kernel: its call, each result times dt into its row."""
    out = part.out
    names = [f"_sd{k}_{j}" for j in range(len(out))]
    lines = [f"    {', '.join(names)} = {_call(part, rows, shared, name)}"]
    lines += [f"    out[{r}] = {n} * dt" for n, r in zip(names, out)]
    return lines


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


_generated: dict = {}


def _as_parts(parts) -> tuple:
    """``parts`` as a tuple of :class:`Part`; a dict role -> (kernel, pack() names), the earlier
    form of the argument, gives those roles' kernels."""
    if isinstance(parts, dict):
        return tuple(Part(role, "kernel", fn, names) for role, (fn, names) in parts.items())
    return tuple(parts)


def _memo(parts) -> tuple:
    return tuple((p.role, p.kind, p.packed, p.own, p.out, p.arrays, _fingerprint_of(p.fn)) for p in parts)


def generate(parts, forms: dict | None = None, tableau=None, runner_step=None) -> tuple[str, str]:
    """(key, module source) of the loop for ``parts`` (:class:`Part`; ``forms``: role -> the
    compiled form of a role whose state kernel reads a named form's parameters, default
    ``kernel``; ``tableau``: the Runge-Kutta scheme whose stage functions the loop calls, see
    :func:`_tableau_blocks`; None: the cycle's scheme, :data:`cyclesim.loops.tableau.CYCLE_TABLEAU`;
    ``runner_step``: None, or ``(module, digest)`` of the runners' compiled crank step, whose
    ``crank_step`` the loop then calls each step (:data:`RUNNER_STEP`; ``digest`` a hash of the
    sources it runs, written into the loop so that it names the file)).

    Remembered in the process by a fingerprint of the functions (code objects and the values of
    the globals they read), so a repeated batch does not read sources again.
    """
    parts = _as_parts(parts)
    forms = dict(forms or {})
    memo = (_memo(parts), tuple(sorted(forms.items())), _tableau_key(tableau), runner_step)
    got = _generated.get(memo)
    if got is None:
        got = _generated[memo] = _generate(parts, forms, tableau, runner_step)
    return got


KERNEL_MARKERS = {"burn": "burn_kernel(theta)  # KERNEL CALL burn",
                  "heat_transfer": "heat_flow_kernel(T)  # KERNEL CALL heat_transfer",
                  "blowby": "blowby_kernel(p)  # KERNEL CALL blowby"}
"""The call site of each role's kernel in :func:`cyclesim.loops._compiled._rhs` (the value of that
role there: a burn rate [1/deg], a wall heat flow [W], a blowby mass flow [kg/s]); a role whose
model gives no kernel (form ``none``) gets 0 there."""
KERNEL_SITES = {("burn", "kernel"): "{call}",
                ("heat_transfer", "kernel"): "wall_heat_flow({call}, T, Ah, Ap, Al, CB[R_TW_HEAD, b],"
                                             " CB[R_TW_PISTON, b], CB[R_TW_LINER, b])",
                ("heat_transfer", "heat_flow_kernel"): "{call}",
                ("blowby", "kernel"): "{call}"}
"""What goes at a role's call site for each kind of kernel: a heat-transfer coefficient kernel's
value times the wall areas and temperature differences (:func:`cyclesim.kernel_ops.wall_heat_flow`)."""
STATE_MARKER = "    pass  # STATE KERNEL CALLS"
"""Where the state kernels' calls go in :func:`cyclesim.loops._compiled._rhs`."""


STAGE_BLOCK = ("                else:\n                    # STAGE COMBINATION", "                    # END STAGE COMBINATION\n")
STEP_BLOCK = ("            # STEP COMBINATION", "            # END STEP COMBINATION\n")
"""Where :func:`cyclesim.loops._compiled.run_cycle` combines the stages (a stand-in there): a
generated loop calls the stage functions of its tableau there (:func:`_tableau_blocks`)."""


RUNNER_BLOCK = ("            # RUNNER STEP", "            # END RUNNER STEP\n")
"""Where :func:`cyclesim.loops._compiled.run_cycle` advances the runners, in a loop generated with
them (:data:`RUNNER_STEP`); elsewhere the block is left as it is (comments only)."""
RUNNER_STEP = """\
            if i < N:
                # the runners over the crank step from the cylinder at the step's start, their valve
                # totals the step's source (cyclesim.pipes.loop_step.crank_step)
                m_r = yv[S_M]
                T_r = yv[S_T]
                rho_r = m_r / Vp[2 * i, g]
                yb_r = min(max(yv[S_MB] / m_r, 0.0), 1.0)
                _mixture(gas_tab, gas_off[b], gc, IC[IC_NRM1], uc4, b, T_r, rho_r, yb_r, mix)
                if not _runner_crank_step(b, i, hs * (1.0 / CB[R_OMEGA, b]), rho_r * mix[1] * T_r, T_r, yb_r,
                                          mix[0] + mix[1] * T_r, pipes, src):
                    status[b] = 1
                    break
"""
"""The runners' step in a generated loop: the cylinder's pressure, temperature, burned fraction and
enthalpy at the step's start from the loop's gas tables (as the numpy loop's
:meth:`cyclesim.solve.valve_source.RunnerCoupling.step`), then the compiled crank step of the
module named by ``runner_step`` (:func:`generate`)."""



def _tableau_blocks(tableau) -> tuple[str, str]:
    """The loop's lines that combine the stages of ``tableau`` (a
    :class:`cyclesim.loops.tableau.Tableau`): one branch per stage calling that stage's generated
    function (:func:`cyclesim.loops.tableau.stage_source`, written into the loop's module and
    inlined by numba) on each state row, and the step's function likewise."""
    S = tableau.stages
    stage = []
    for st in range(1, S):
        ks = "".join(f", K[{q}, k]" for q in range(st))
        stage += [f"                elif st == {st}:",
                  "                    for k in range(n):",
                  f"                        yt[k] = {stage_name(st)}(yv[k], hs{ks})"]
    ks = "".join(f", K[{q}, k]" for q in range(S))
    step = ["            for k in range(n):",
            f"                yv[k] = {STEP_NAME}(yv[k], hs{ks})"]
    return "\n".join(stage) + ("\n" if stage else ""), "\n".join(step) + "\n"


def _replace_block(text: str, block: tuple[str, str], new: str) -> str:
    start, end = block
    i = text.find(start)
    j = text.find(end, i + 1)
    if i < 0 or j < 0:
        raise LoopGenError(f"the compiled loop has no block {start.strip()!r}")
    return text[:i] + new + text[j + len(end):]


def _tableau_key(tableau) -> tuple:
    """The scheme's part of a loop's key: its coefficients and the text of its stage functions."""
    if tableau is None:
        tableau = CYCLE_TABLEAU
    return tableau_key(tableau) + (stage_source(tableau),)


def template_functions() -> tuple:
    """The functions the loop's template (:func:`cyclesim.loops._compiled._rhs`) calls besides the
    models' kernels, written into every generated loop from their one source: the orifice flow
    of the valves, the port buffer, the burned mass and the first law (:mod:`cyclesim.loops.balance`)."""
    from .balance import burned_mass_rate, exhaust_inflow, first_law, port_buffer
    from ..cylinder.flow import orifice_flow

    return (orifice_flow, port_buffer, exhaust_inflow, first_law, burned_mass_rate)


def _generate(parts: tuple, forms: dict, tableau=None, runner_step=None) -> tuple[str, str]:
    import cyclesim.loops._compiled as base

    funcs: dict = {}
    consts: dict = {}
    imports: dict = {}
    calls = {}
    states: list[str] = []
    rows = {role: param_rows_for(role, parts, base.PARAM_ROWS, forms.get(role, "kernel"))
            for role in dict.fromkeys(p.role for p in parts if p.kind != "zones")}
    shared = shared_slots(parts)
    tableau = CYCLE_TABLEAU if tableau is None else tableau
    rk_names = [stage_name(st) for st in range(1, tableau.stages)] + [STEP_NAME]
    own = vars(base)
    taken = {n for n, v in own.items() if not isinstance(v, types.ModuleType)} | set(rk_names)
    # the functions the loop calls by their own names come first, so that they keep them
    fixed = list(template_functions())
    if any(p.kind == "zones" for p in parts):
        fixed += zone_functions()
    if any("wall_heat_flow(" in KERNEL_SITES.get((p.role, p.kind), "") for p in parts):
        from ..kernel_ops import wall_heat_flow

        fixed.append(wall_heat_flow)
    for fn in fixed:
        if _collect(fn, funcs, consts, imports, taken) != fn.__name__:
            raise LoopGenError(f"the compiled loop's own function {fn.__name__!r} clashes with one of its names")
    zone_part = wall = None
    for k, part in enumerate(parts):
        name = _collect(part.fn, funcs, consts, imports, taken)
        if part.kind == "zones":
            zone_part, zone_name = part, name
        elif part.kind == "wall_share":
            wall = _call(part, rows[part.role], shared, name)
        elif part.kind != "state":
            site = KERNEL_SITES.get((part.role, part.kind))
            if site is None:
                raise LoopGenError(f"the compiled loop has no call site for a {part.role} {part.kind}")
            calls[part.role] = site.format(call=_call(part, rows[part.role], shared, name))
        else:
            states += _state_lines(k, part, rows[part.role], shared, name)
    # a constant the loop's module defines alike (CYCLE_END_DEG) is the loop's own: not written again
    consts = {n: v for n, v in consts.items()
              if not (n in own and isinstance(own[n], (int, float, tuple)) and repr(own[n]) == v)}
    clash = {n for n in set(funcs) | set(consts) if n in own}
    clash |= {n for n, target in imports.items() if n in own and getattr(own[n], "__name__", None) != target}
    if clash:
        raise LoopGenError(f"kernel names {sorted(clash)} clash with the compiled loop's own names; rename them")
    rhs = textwrap.dedent(inspect.getsource(base._rhs))
    for role, marker in KERNEL_MARKERS.items():
        if marker not in rhs:
            raise LoopGenError(f"the compiled loop has no call site for the {role} kernel")
        rhs = rhs.replace(marker, calls.get(role, "0.0"))
    if STATE_MARKER not in rhs:
        raise LoopGenError("the compiled loop has no call site for state kernels")
    rhs = rhs.replace(STATE_MARKER, "\n".join(states) or STATE_MARKER)
    if zone_part is not None:
        if ZONE_SOLVE_MARKER not in rhs or ZONE_RATES_MARKER not in rhs:
            raise LoopGenError("the compiled loop has no call site for the two-zone solve")
        solve, rates = _zone_lines(zone_part, len(shared), wall, zone_name)
        rhs = rhs.replace(ZONE_SOLVE_MARKER, solve).replace(ZONE_RATES_MARKER, rates)
    elif wall is not None:
        raise LoopGenError("a wall-share kernel needs the two-zone solve")
    cycle = textwrap.dedent(inspect.getsource(base.run_cycle))
    stage, step = _tableau_blocks(tableau)
    cycle = _replace_block(_replace_block(cycle, STAGE_BLOCK, stage), STEP_BLOCK, step)
    clash = {n for n in rk_names if n in funcs or n in consts or n in imports}
    if clash:
        raise LoopGenError(f"kernel names {sorted(clash)} clash with the loop's stage functions; rename them")
    if runner_step is not None:
        cycle = _replace_block(cycle, RUNNER_BLOCK, RUNNER_STEP)
    private = sorted(n for n, v in vars(base).items()
                     if n.startswith("_") and not n.startswith("__") and hasattr(v, "py_func"))
    names = ", ".join(dict.fromkeys(p.fn.__name__ for p in parts)) or "none"
    parts_text = [
        f'"""Cycle loop generated by cyclesim.loops.loopgen for the kernels {names}."""',
        "import math",
        "import numpy as np",
        "from numba import njit",
        "import cyclesim.kernel_ops",
        "cyclesim.kernel_ops.register_compiled()",
        "from cyclesim.loops._compiled import *  # noqa: F401,F403 - the layout constants and helpers",
        f"from cyclesim.loops._compiled import {', '.join(private)}  # noqa: F401",
    ]
    if runner_step is not None:
        parts_text.append(f"from {runner_step[0]} import crank_step as _runner_crank_step"
                          f"  # sources {runner_step[1]}")
    for name, target in sorted(imports.items()):
        mod, _, attr = target.rpartition(".") if target.startswith("cyclesim.") else (target, "", "")
        parts_text.append(f"from {mod} import {attr} as {name}" if attr else f"import {target} as {name}")
    parts_text += [f"{n} = {v}" for n, v in sorted(consts.items())]
    for name, (fn, src) in funcs.items():
        inline = ', inline="always"' if fn.__code__.co_argcount <= INLINE_MAX_ARGS else ""
        parts_text.append(f'\n@njit(cache=True{inline}, error_model="numpy")\n' + src)
    # the scheme's stage combination: the same text the numpy loop runs (cyclesim.loops.tableau)
    for src in stage_source(tableau).split("\n\n"):
        parts_text.append('\n@njit(cache=True, inline="always", error_model="numpy")\n' + src)
    # the right-hand side inlined into the cycle (measured: the closed cycle about 9 % faster, the
    # first compile about as long)
    rhs_inline = ', inline="always"' if base._rhs.__code__.co_argcount <= INLINE_MAX_ARGS else ""
    rhs_deco = f'\n@njit(cache=True{rhs_inline}, error_model="numpy")\n'
    parts_text.append(rhs_deco + (rhs.split("\n", 1)[1] if rhs.startswith("@") else rhs))
    parts_text.append('\n@njit(cache=True, nogil=True, error_model="numpy")\n'
                      + (cycle.split("\n", 1)[1] if cycle.startswith("@") else cycle))
    text = "\n".join(parts_text) + "\n"
    h = hashlib.sha256()
    h.update(VERSION.encode())
    h.update(Path(base.__file__).read_bytes())
    h.update(Path(__file__).read_bytes())
    h.update(text.encode())
    return h.hexdigest()[:24], text


_loaded: dict = {}


def _quick_key(parts: tuple, forms: dict, tableau=None, runner_step=None) -> str:
    """A cheap hash of what the loop depends on (the kernels' compiled code objects, the values of
    the globals they read, this module's and the compiled loop's files), naming an index entry
    that points at the loop's file: a new process finds its loop without reading any source."""
    import marshal

    import cyclesim.loops._compiled as base

    from . import kernel_collect

    h = hashlib.sha256(VERSION.encode())
    for path in (base.__file__, __file__, kernel_collect.__file__):      # the files that write the text
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

    from ..kernel_ops import wall_heat_flow

    feed(_memo(parts))
    feed(tuple(sorted(forms.items())))
    feed(_tableau_key(tableau))
    feed(runner_step)
    # written into the loop as well: the template's functions, a coefficient kernel's wall heat flow
    for fn in template_functions() + (wall_heat_flow,) + zone_functions():
        feed(_fingerprint(fn))
    return h.hexdigest()[:24]


_in_process: dict = {}
"""Loop modules already loaded in this process, by the fingerprint of what they depend on (as
:func:`generate` remembers its text) and the cache folder's setting: a repeated batch finds its
loop without hashing or reading any file."""


def module_for(parts, forms: dict | None = None, tableau=None, runner_step=None):
    """The generated loop module for ``parts`` (:func:`generate`): written on first use, then
    loaded from the cache folder; ``(module, freshly_written)``."""
    parts = _as_parts(parts)
    forms = dict(forms or {})
    memo = (_memo(parts), tuple(sorted(forms.items())), _tableau_key(tableau), runner_step,
            os.environ.get(CACHE_ENV, ""))
    got = _in_process.get(memo)
    if got is not None:
        return got, False
    mod, fresh = _module_for(parts, forms, tableau, runner_step)
    _in_process[memo] = mod
    return mod, fresh


def _module_for(parts: tuple, forms: dict, tableau, runner_step=None):
    d = cache_dir()
    index = d / "index" / _quick_key(parts, forms, tableau, runner_step)
    key = index.read_text().strip() if index.is_file() else ""
    if key and key in _loaded:
        return _loaded[key], False
    if not key or not (d / f"loop_{key}.py").is_file():
        key, text = generate(parts, forms, tableau, runner_step)
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
