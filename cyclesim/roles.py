"""Submodel roles: the small interfaces the solver knows submodels by.

A *role* is one physical concern (burn rate, wall heat transfer, ring
leakage, valve flow, boundary plenums, friction, end-gas knock, emissions).  A plug-in
implements a role by subclassing its base class below, declaring ``name``,
``summary``, ``params`` and ``references``, and registering the class through
the ``cyclesim_register_submodels`` hook (see :mod:`cyclesim.hookspecs`).

Conventions for implementers
----------------------------
* Every array has a leading case axis of length ``B``.  Parameter values
  arrive as float arrays of shape ``(B,)`` (numbers) or plain Python values
  (choices, paths, tables; equal for all cases of a batch).
* SI units inside the code.  Physical rates are per **second** (kg/s, W);
  the solver converts to crank angle.  The one exception is the burn role,
  whose rate is per crank **degree** because burn laws are written that way.
* A submodel may add integrated state components (:meth:`Submodel.states`)
  and return their time derivatives from :meth:`Submodel.derivatives`.
* Never mutate the :class:`GasState` you are given; it is shared by all
  submodels within one right-hand-side evaluation.
* Methods are called in the hot loop: keep them to a few vectorised numpy
  operations, no Python loops over cases, no pluggy calls.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from types import SimpleNamespace
from typing import Any, ClassVar, Mapping

import numpy as np

from .kernel_ops import wall_heat_flow
from .params import Param, StateVar

ROLES = (
    "burn",
    "heat_transfer",
    "blowby",
    "valve_flow",
    "boundary",
    "friction",
    "knock",
    "emissions",
)
"""Role names in the order they appear in a config."""


@dataclass
class SetupContext:
    """What a submodel may use when it is built (once per batch).

    Attributes
    ----------
    B : int
        Number of cases in the batch.
    geometry : cyclesim.cylinder.geometry.Geometry
        Engine geometry, arrays of shape (B,).
    speed_rpm : ndarray (B,)
        Engine speed [rpm].
    events : SimpleNamespace
        Valve events as arrays (B,) [deg]: ``ivo``, ``ivc``, ``evo``, ``evc``
        (crank angle, 0 = firing TDC, negative before it), and
        ``threshold_lift_m``.
    valves : SimpleNamespace
        The ``valves`` config section as arrays (B,) (diameters, lifts, counts).
    operating : SimpleNamespace
        The ``operating`` config section as arrays (B,) (SI-suffixed keys as
        written, e.g. ``intake_pressure_bar``).
    gas : cyclesim.solve.gas_tables.GasTables
        Property tables of the batch's fresh charge and burned gas.
    base_dir : pathlib.Path
        Folder of the config file, for resolving relative paths.
    walls : SimpleNamespace
        The ``walls`` config section as arrays (B,).
    chamber : cyclesim.combustion.flame_geometry.ChamberShape or None
        Combustion-chamber shape and spark-plug position (config ``engine.chamber``), the
        same for every case of a batch.
    """

    B: int
    geometry: Any
    speed_rpm: np.ndarray
    events: SimpleNamespace
    valves: SimpleNamespace
    operating: SimpleNamespace
    gas: Any
    base_dir: Any
    walls: SimpleNamespace = field(default_factory=SimpleNamespace)
    chamber: Any = None


class GasState:
    """The cylinder state at one right-hand-side evaluation (read-only by convention).

    All arrays have shape (B,) unless noted.  Built once per evaluation by the
    solver and handed to every submodel.

    Attributes
    ----------
    theta : float
        Crank angle [deg], 0 = firing TDC; the full cycle runs on past 360.
    omega_deg : ndarray
        Crank speed [deg/s] (= 6 x rpm).
    V, dV : ndarray
        Volume [m^3] and its crank-angle derivative [m^3/deg].
    A_head, A_piston, A_liner : ndarray
        Exposed wall areas [m^2].
    Sp : ndarray
        Mean piston speed [m/s].
    m, T, p, rho : ndarray
        Cylinder mass [kg], temperature [K], pressure [Pa], density [kg/m^3].
    R, cv, cp, gamma : ndarray
        Mixture gas constant [J/(kg K)], frozen specific heats [J/(kg K)],
        and their ratio [-].
    y_b : ndarray
        Mass fraction of burned gas (residual, EGR, and products) [-].
    x_b : ndarray
        Burn progress of the current charge, 0..1 [-].
    burning : ndarray of bool
        True from the start of combustion to the end of the cycle's closed part.
    closed : ndarray of bool
        True between intake valve closing and exhaust valve opening.
    p_ivc, T_ivc, V_ivc : ndarray
        State at the last intake valve closing [Pa, K, m^3] (Woschni's reference).
    T_u : ndarray or float
        The unburned zone's own temperature [K] where the cylinder runs two zones
        (``simulation.zones: two``; the mixture temperature outside the closed part); 0 where it
        runs one zone, and a model then takes the end gas on its own isentrope from IVC, as
        ``livengood_wu`` and ``entrainment`` do (``where(T_u > 0, T_u, isentrope)``).
    T_wall_head, T_wall_piston, T_wall_liner : ndarray
        Wall temperatures [K].
    p_int, T_int, R_int, gamma_int, y_b_int : ndarray
        Intake plenum state (filled from the boundary role).
    p_exh, T_exh, R_exh, gamma_exh : ndarray
        Exhaust plenum state.
    sub : dict[str, ndarray]
        Submodel state components by ``"role.name"``.
    geometry : cyclesim.cylinder.geometry.Geometry
    gas : cyclesim.solve.gas_tables.GasTables
        The batch's gas properties; a kernel takes it as the argument ``gas`` and reads the
        fresh charge through ``cyclesim.kernel_ops.fresh_charge(gas, T)``.
    """

    __slots__ = (
        "theta", "omega_deg", "V", "dV", "A_head", "A_piston", "A_liner", "Sp",
        "m", "T", "p", "rho", "R", "cv", "cp", "gamma", "y_b", "x_b",
        "burning", "closed", "p_ivc", "T_ivc", "V_ivc", "T_u",
        "T_wall_head", "T_wall_piston", "T_wall_liner",
        "p_int", "T_int", "R_int", "gamma_int", "y_b_int",
        "p_exh", "T_exh", "R_exh", "gamma_exh",
        "mdot_int", "mdot_exh", "mdot_blowby", "Qdot_wall",
        "sub", "geometry", "gas",
    )

    def __init__(self, **kw: Any) -> None:
        self.T_u = 0.0                      # one zone unless given
        for k, v in kw.items():
            setattr(self, k, v)


class ParamValues(SimpleNamespace):
    """A submodel's parameter values by name (``self.p.h_W_per_m2K``); a name it does not
    declare is an AttributeError that lists the declared ones."""

    def __init__(self, owner: str = "submodel", values: Mapping[str, Any] | None = None) -> None:
        super().__init__(**(values or {}))
        object.__setattr__(self, "_owner", owner)

    def __getattr__(self, name: str):
        if name.startswith("__"):
            raise AttributeError(name)
        declared = ", ".join(k for k in vars(self) if k != "_owner") or "(none)"
        raise AttributeError(f"{self._owner} has no parameter {name!r}; declared: {declared}")


def _kernel_call(model, s: GasState, attr: str = "kernel"):
    """A model's kernel (the class attribute ``attr``) on the Python path (arrays (B,)), its
    parameters from ``pack()`` (once)."""
    bound = model.__dict__.get(_BOUND_KEYS.get(attr) or "_kernel_" + attr)
    if bound is None:
        bound = _bind(model, attr)
    plan, fn, packed, gas = bound
    seen = _seen_errstate         # the cycle loop's own setting (errors ignored): no second context
    if (seen[1] and _EXTOBJ is not None and seen[0] is _EXTOBJ.get()) or _errors_ignored():
        if not plan.sub_keys:     # no states of its own: the plan's one caller, directly
            return plan.no_sub(fn, s, packed, gas, None)
        return plan.call(fn, s, packed, gas)
    with np.errstate(invalid="ignore", divide="ignore"):   # a kernel is branch-free: masked values may be NaN
        return plan.call(fn, s, packed, gas)


_BOUND_KEYS = {a: "_kernel_" + a for a in ("kernel", "heat_flow_kernel", "state_kernel")}
"""The instance attribute that holds a model's bound kernel, by class attribute (made once)."""


def _bind(model, attr: str) -> tuple:
    """(argument plan, kernel, packed parameters, gas tables) of a model for :func:`_kernel_call`,
    found once per model (the kernel by the class attribute ``attr``, ``state_kernel`` for the
    states; a model without a state kernel gets (None, None, None, None))."""
    from .loops.loopgen import _plan_for, kernel_of

    fn = kernel_of(type(model), attr)
    if fn is None:
        if attr != "state_kernel":
            raise NotImplementedError(f"{model.role} model {model.name!r} defines neither the method nor a kernel")
        bound = (None, None, None, None)
    else:
        packed = _packed_once(model)
        bound = (_plan_for(fn, packed, model.role), fn, packed, getattr(model.ctx, "gas", None))
    model.__dict__["_kernel_" + attr] = bound
    return bound


def _packed_once(model) -> dict:
    """The model's ``pack()``, computed once per model."""
    packed = model.__dict__.get("_packed_kernel")
    if packed is None:
        packed = model.__dict__["_packed_kernel"] = dict(model.pack())
    return packed


try:        # numpy >= 2: the error state is a context variable, read without building a dict
    from numpy._core._multiarray_umath import _extobj_contextvar as _EXTOBJ
except ImportError:  # pragma: no cover - older numpy
    _EXTOBJ = None
_seen_errstate: tuple = (None, False)


def _errors_ignored() -> bool:
    """Whether numpy ignores invalid operations here (``np.geterr()["invalid"] == "ignore"``),
    computed once per error-state context (the cycle loop enters one per cycle)."""
    global _seen_errstate
    if _EXTOBJ is None:  # pragma: no cover
        return np.geterr()["invalid"] == "ignore"
    ext = _EXTOBJ.get()
    seen = _seen_errstate
    if seen[0] is ext:
        return seen[1]
    got = np.geterr()["invalid"] == "ignore"
    _seen_errstate = (ext, got)
    return got


class Submodel:
    """Base of every submodel.  Subclass one of the role classes below.

    Class attributes to declare
    ---------------------------
    name : str
        The name a config selects it by (``model: woschni``).
    summary : str
        One line for ``cyclesim plugins``.
    params : tuple of Param
        Declared parameters (name with unit, default, range, meaning).
    references : tuple of str
        Published sources of the method and its default coefficients.
    closed_step_limit : int or None
        The solver steps ``CLOSED_STEP_FACTOR`` times further while every valve is shut;
        a model whose derivatives jump there (an integral that stops at a threshold)
        caps that multiple, since the jump costs accuracy in proportion to the step.
    compiled_form : str or None
        The compiled loop's form of this model's physics (a name in
        ``cyclesim.loops._compiled.FORMS[role]``), with :meth:`pack` giving its parameters; None
        (the default) runs the batch on the Python path.  A subclass keeps its parent's form
        unless it overrides one of the role's physics methods (``cyclesim.solve.kernel.PHYSICS``).

    Step-control contract
    ---------------------
    :meth:`shortest_feature_deg_for` gives, per case and at set-up, the shortest crank-angle
    feature of the model's output [deg] (a burn's duration, say); the solver keeps at least
    ``cyclesim.solve.solver.MIN_FEATURE_STEPS`` steps across it.  It is read from the case's
    parameters, never from a parameter's name.
    """

    role: ClassVar[str] = ""
    name: ClassVar[str] = ""
    summary: ClassVar[str] = ""
    params: ClassVar[tuple[Param, ...]] = ()
    references: ClassVar[tuple[str, ...]] = ()
    closed_step_limit: ClassVar[int | None] = None
    """Largest multiple of the step this model tolerates while the valves are shut
    (None: no limit); e.g. 1 for a model whose derivatives switch off abruptly there."""

    @classmethod
    def closed_step_limit_for(cls, params: Mapping[str, Any], step_deg: float) -> int | None:
        """Cap of the closed-part step multiple for one case's parameters (default
        :attr:`closed_step_limit`); ``step_deg`` is the case's gas-exchange step [deg]."""
        return cls.closed_step_limit

    @classmethod
    def shortest_feature_deg_for(cls, params: Mapping[str, Any]) -> float | None:
        """Shortest crank-angle feature [deg] of this model's output for one case's parameters,
        which the step must resolve; None: nothing the step needs to resolve (the default for
        every role but the burn, see :meth:`BurnRate.shortest_feature_deg_for`)."""
        return None

    compiled_form: ClassVar[str | None] = None
    """Name of the compiled loop's form of this model (None: the Python path)."""

    def pack(self) -> Mapping[str, Any]:
        """Parameters of :attr:`compiled_form` by name, numbers or arrays (B,) [SI units]."""
        return {}

    required_methods: ClassVar[tuple[tuple[str, ...], ...]] = ()
    """Methods a subclass must define: in each tuple at least one (checked at registration)."""

    def __init__(self, values: Mapping[str, Any], ctx: SetupContext) -> None:
        self.p = ParamValues(f"{self.role} model {self.name!r}", values)
        self.ctx = ctx
        self.B = ctx.B

    # -- optional integrated state ------------------------------------
    def states(self) -> tuple[StateVar, ...]:
        """State components this submodel integrates (default: none)."""
        return ()

    state_kernel: ClassVar[Any] = None
    """The time derivatives [unit/s] of the components of :meth:`states` as a plain function of
    named arguments (as :attr:`BurnRate.kernel`: packed parameters from :meth:`pack` by name,
    cylinder-state fields by their GasState name, this model's own states by their declared
    names), returning one value for one state or a tuple in the order of :meth:`states`; None:
    the model gives :meth:`derivatives` only and runs on the Python path."""

    def derivatives(self, s: GasState) -> Mapping[str, np.ndarray]:
        """Time derivatives [unit/s] of the components named in :meth:`states` (default: the
        :attr:`state_kernel` on arrays, else none)."""
        bound = self.__dict__.get("_kernel_state_kernel")
        if bound is None:
            bound = _bind(self, "state_kernel")
        plan, fn, packed, gas = bound
        if fn is None:
            return {}
        names = self.__dict__.get("_state_names")
        if names is None:
            names = self.__dict__["_state_names"] = [sv.name for sv in self.states()]
        seen = _seen_errstate   # the cycle loop's own setting (errors ignored): no second context
        if (seen[1] and _EXTOBJ is not None and seen[0] is _EXTOBJ.get()) or _errors_ignored():
            got = plan.call(fn, s, packed, gas)
        else:
            with np.errstate(invalid="ignore", divide="ignore"):   # branch-free: masked values may be NaN
                got = plan.call(fn, s, packed, gas)
        if len(names) == 1:
            return {names[0]: got}
        if not isinstance(got, tuple) or len(got) != len(names):
            from .errors import PluginError

            raise PluginError(f"{self.role} model {self.name!r}: state_kernel {fn.__name__}() returned"
                              f" {type(got).__name__}, expected a tuple of {len(names)} values"
                              f" ({', '.join(names)})")
        return dict(zip(names, got))

    # -- optional end-of-run figures ----------------------------------
    def figures(self, trace: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
        """Extra summary figures (unit in the key) from the finished trace.

        ``trace`` holds the solver's output arrays of shape (B, n) keyed as in
        ``trace.csv`` plus this submodel's states as ``"role.name"``.
        """
        return {}

    def warnings(self, trace: Mapping[str, np.ndarray]) -> list[list[str]]:
        """Per-case warning texts (a list of B lists), e.g. validity-range exits."""
        return [[] for _ in range(self.B)]


class BurnRate(Submodel):
    """Rate of burning of the charge (mass fraction burned per crank degree).

    Spark contract: :meth:`spark_deg` gives the spark timing per case; :attr:`spark_param`
    names the parameter that sets it (crank degrees before firing TDC, positive = advance),
    which the spark study, the knock limit, the maps and the engine's spark spread vary.
    """

    role = "burn"
    required_methods = (("start_deg",), ("rate", "kernel"))
    spark_param: ClassVar[str | None] = None
    """The parameter that sets the spark timing [deg before firing TDC, positive = advance];
    None for a law not timed by a spark (the spark studies then refuse it with a clear error)."""

    @classmethod
    def shortest_feature_deg_for(cls, params: Mapping[str, Any]) -> float | None:
        """Shortest burn feature [deg] for one case's parameters (e.g. the burn duration).

        The default, 0, means "not known before the run": the closed part of the cycle keeps
        the fine step, so an undeclared short burn loses no accuracy (at some cost in time).
        """
        return 0.0

    def start_deg(self) -> np.ndarray:
        """Start of combustion [deg] per case (spark plus ignition delay)."""
        raise NotImplementedError

    def spark_deg(self) -> np.ndarray:
        """Spark timing as a crank angle [deg] (negative = before TDC)."""
        return self.start_deg()

    def combustion_efficiency(self) -> np.ndarray:
        """Fraction of the charge's fuel energy that is released (B,) [-]."""
        return np.ones(self.B)

    def burned_wall_share(self, s: "GasState", V_b: np.ndarray) -> np.ndarray | None:
        """Share [-] (B,) of the chamber's wall area the burned zone wets at burned volume ``V_b``
        [m^3], from the flame geometry of a burn that has one; None (the default): the two-zone
        cylinder then takes x^(1/2) of the burned zone's mass fraction x."""
        return None

    kernel: ClassVar[Any] = None
    """The burn rate as a plain function (one source for both loops), or None.

    Its arguments are named: a GasState field (``theta``, ``p``, ``T``, ``x_b``, ... see
    ``cyclesim.loops.loopgen.STATE_ARGS``) or a parameter that :meth:`pack` gives by that name.  It
    returns dx_b/dtheta [1/deg]; it is called with arrays (B,) on the Python path and with
    floats in the compiled loop, so per-case choices go through ``cyclesim.kernel_ops.where``.
    A model with a kernel need not define :meth:`rate`."""

    def rate(self, s: GasState) -> np.ndarray:
        """dx_b/dtheta [1/deg] of the burn progress, zero before the start (default: the kernel)."""
        return _kernel_call(self, s)

    def fraction(self, theta_deg: np.ndarray) -> np.ndarray | None:
        """Closed-form burn progress x_b on a crank grid (B, n), if the law has one."""
        return None


class WallHeatTransfer(Submodel):
    """Convective (and optionally radiative) heat transfer from gas to walls."""

    role = "heat_transfer"
    required_methods = (("coefficient", "heat_flow", "kernel", "heat_flow_kernel"),)

    kernel: ClassVar[Any] = None
    """The heat-transfer coefficient [W/(m^2 K)] as a plain function of named arguments (as
    :attr:`BurnRate.kernel`), or None; a model with a kernel need not define :meth:`coefficient`."""

    def coefficient(self, s: GasState) -> np.ndarray:
        """Heat-transfer coefficient [W/(m^2 K)] (B,) (default: the kernel)."""
        return _kernel_call(self, s)

    heat_flow_kernel: ClassVar[Any] = None
    """The heat flow from gas to walls [W] as a plain function of named arguments (as
    :attr:`kernel`), for a model whose flow is not one coefficient times the temperature
    differences (radiation per surface); :meth:`heat_flow` calls it where given."""

    def heat_flow(self, s: GasState) -> np.ndarray:
        """Heat flow from gas to walls [W] (B,), positive = gas loses heat (default: the
        :attr:`heat_flow_kernel` where given, else :func:`wall_heat_flow` of the coefficient)."""
        if type(self).heat_flow_kernel is not None:
            return _kernel_call(self, s, "heat_flow_kernel")
        return wall_heat_flow(self.coefficient(s), s.T, s.A_head, s.A_piston, s.A_liner,
                              s.T_wall_head, s.T_wall_piston, s.T_wall_liner)


class RingLeakage(Submodel):
    """Leakage (blowby) past the ring pack to the crankcase."""

    role = "blowby"
    required_methods = (("mass_flow", "kernel"),)

    kernel: ClassVar[Any] = None
    """The mass flow [kg/s] as a plain function of named arguments (as :attr:`BurnRate.kernel`),
    or None; a model with a kernel need not define :meth:`mass_flow`."""

    def mass_flow(self, s: GasState) -> np.ndarray:
        """Mass flow from cylinder to crankcase [kg/s] (B,), >= 0 (default: the kernel)."""
        return _kernel_call(self, s)


class ValveFlow(Submodel):
    """Gas exchange through the intake and exhaust valves."""

    role = "valve_flow"
    required_methods = (("mass_flows",), ("lift",), ("flow_area",))
    exchanges_gas: ClassVar[bool] = True
    """False for a model that keeps the valves shut: a full 720 deg cycle then cannot run."""

    def mass_flows(self, s: GasState) -> tuple[np.ndarray, np.ndarray]:
        """(intake, exhaust) mass flows [kg/s] (B,), positive **into** the cylinder.

        ``s`` carries the plenum states (``p_int``, ``T_int``, ... ``p_exh``).
        """
        raise NotImplementedError

    def lift(self, theta_deg: np.ndarray) -> dict[str, np.ndarray]:
        """Valve lift [m] on a crank grid: ``{"intake": (B,n), "exhaust": (B,n)}``."""
        raise NotImplementedError

    def flow_area(self, theta_deg: np.ndarray) -> dict[str, np.ndarray]:
        """Effective flow area C_D x A [m^2] on a crank grid, as :meth:`lift`."""
        raise NotImplementedError


class Boundary(Submodel):
    """Intake and exhaust plenum states seen by the valves."""

    role = "boundary"
    required_methods = (("intake",), ("exhaust",))
    constant: ClassVar[bool] = False
    """True if the plenum states never change: the solver then evaluates them once."""
    fixed_gas: ClassVar[bool] = False
    """True if only the plenum pressures change (temperatures and compositions fixed):
    the solver then evaluates the plenum gas properties once and re-reads the pressures."""

    def intake(self, theta: float, sub: Mapping[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Intake plenum (pressure [Pa], temperature [K], burned-gas (EGR) mass fraction [-])."""
        raise NotImplementedError

    def exhaust(self, theta: float, sub: Mapping[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
        """Exhaust plenum (pressure [Pa], temperature [K]); its gas is burned gas."""
        raise NotImplementedError


@dataclass
class FrictionInputs:
    """What a friction correlation may use, all arrays (B,) unless noted.

    Attributes
    ----------
    geometry : Geometry
    speed_rpm, Sp : ndarray
        Engine speed [rpm] and mean piston speed [m/s].
    p_max : ndarray
        Peak cylinder pressure [Pa].
    p_intake : ndarray
        Intake plenum pressure [Pa].
    imep_gross : ndarray
        Gross IMEP [Pa].
    theta_deg : ndarray (n,)
        Crank grid of the pressure trace [deg].
    p_trace : ndarray (B, n)
        Cylinder pressure on that grid [Pa].
    n_cylinders : ndarray
    """

    geometry: Any
    speed_rpm: np.ndarray
    Sp: np.ndarray
    p_max: np.ndarray
    p_intake: np.ndarray
    imep_gross: np.ndarray
    theta_deg: np.ndarray
    p_trace: np.ndarray
    n_cylinders: np.ndarray


class Friction(Submodel):
    """Mechanical friction (rubbing plus accessories), as mean effective pressure.

    Pumping is accounted separately by the cycle; a correlation fitted to
    motored data that includes pumping must say so in ``summary`` and set
    ``includes_pumping = True`` so it is not added to PMEP again.
    """

    role = "friction"
    required_methods = (("fmep",),)
    includes_pumping: ClassVar[bool] = False

    def fmep(self, f: FrictionInputs) -> dict[str, np.ndarray]:
        """FMEP components [Pa] by name (each (B,)); their sum is the total."""
        raise NotImplementedError


class Knock(Submodel):
    """End-gas autoignition indicator (integrates its own state)."""

    role = "knock"


class Emissions(Submodel):
    """Pollutant formation, computed once from the finished cycle (it does not feed back).

    Contract: :meth:`emissions` takes the trace columns (as :meth:`Submodel.figures`) and the
    batch's summary figures (arrays (B,), e.g. ``bmep_bar`` for brake-specific values) and
    returns an :class:`EmissionsResult`.  The solver calls it after the last cycle; the
    generic :meth:`Submodel.figures` and :meth:`Submodel.warnings` stay empty.
    """

    role = "emissions"
    required_methods = (("emissions",),)

    def emissions(self, trace: Mapping[str, np.ndarray], summary: Mapping[str, Any]) -> "EmissionsResult":
        """Summary figures (unit in the key), extra trace columns (B, n) and per-case warnings."""
        raise NotImplementedError


@dataclass
class EmissionsResult:
    """What an emissions model adds to a batch's results.

    figures : dict of ndarray (B,)
        Summary figures, units in the keys (NaN where a case has no meaning, e.g. motored).
    columns : dict of ndarray (B, n)
        Trace columns on the trace's crank grid, units in the keys.
    warnings : list of list of str
        Per-case warning texts.
    """

    figures: dict
    columns: dict
    warnings: list


ROLE_BASES: dict[str, type[Submodel]] = {
    "burn": BurnRate,
    "heat_transfer": WallHeatTransfer,
    "blowby": RingLeakage,
    "valve_flow": ValveFlow,
    "boundary": Boundary,
    "friction": Friction,
    "knock": Knock,
    "emissions": Emissions,
}
