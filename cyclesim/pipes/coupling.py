"""The cylinder's side of the pipes: a batch of pipe systems advanced over one crank step.

A :class:`PipeSystem` is B cases of the same layout: a list of runners, each a
:class:`cyclesim.pipes.Pipes` batch of B cases with one end at a valve of the
cylinder (``valve_end`` 0 or 1) and the other at a plenum, ambient, a throttle
or a turbine (set once with :func:`cyclesim.pipes.set_end`,
:func:`throttle_end` or :func:`turbine_end`, or changed between calls).
:func:`advance_crank_step` is the coupling surface: given each valve's effective
area and the cylinder's pressure, temperature and burned fraction, held over
the step, it advances every runner in its own CFL sub-steps and returns what
went through each valve into the cylinder over the step.

The valve is a boundary of the pipe solved along the outgoing characteristic
with the quasi-steady nozzle equation on stagnation conditions (the cylinder's
state is its stagnation state), in both directions, choked or not
(:func:`cyclesim.pipes.kernels.end_state`).  What the function returns is the
sum over the sub-steps of the fluxes the pipe books at that end, so the mass,
energy and burned mass that leave the pipe through the valve are exactly those
the cylinder receives.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import ConfigError, SolverError
from ..kernel_ops import where
from ..cylinder.flow import turbine_outlet_temperature
import cyclesim.pipes.kernels as k
import cyclesim.pipes.scheme as s
from .pipe import DEFAULT_END_ITERATIONS, Pipes, set_end


@dataclass
class PipeSystem:
    """B pipe systems of one layout: ``runners[j]`` meets valve j of the cylinder at its end ``valve_ends[j]``."""

    runners: list
    valve_ends: list

    def __post_init__(self):
        if len(self.runners) != len(self.valve_ends) or not self.runners:
            raise ConfigError("pipe system: give one valve end (0 or 1) for each runner, at least one runner")
        B = self.runners[0].B
        for pipe, end in zip(self.runners, self.valve_ends):
            if not isinstance(pipe, Pipes):
                raise ConfigError(f"pipe system: a runner must be a Pipes batch (got {type(pipe).__name__})")
            if pipe.B != B:
                raise ConfigError(f"pipe system: every runner needs the same cases ({pipe.B} != {B})")
            if end not in (0, 1):
                raise ConfigError(f"pipe system: valve end must be 0 or 1 (got {end!r})")

    @property
    def B(self) -> int:
        return self.runners[0].B

    @property
    def n_valves(self) -> int:
        return len(self.runners)

    def contents(self) -> dict:
        """Mass [kg], energy [J] and burned mass [kg] stored in all runners, per case (B,)."""
        tot = [p.totals() for p in self.runners]
        return {key: sum(t[key] for t in tot) for key in ("mass_kg", "energy_J", "burned_mass_kg")}


def _cases(value, B):
    if isinstance(value, (float, int)):
        return np.full(B, float(value))
    a = np.asarray(value, dtype=float)
    return a if a.shape == (B,) and a.flags.c_contiguous else np.ascontiguousarray(np.broadcast_to(a, (B,)))


_INPUT_ERRORS = ("", "duration_s must be finite and >= 0", "valve_cda_m2 must be finite and >= 0",
                 "cylinder pressure and temperature must be finite and > 0, burned fraction 0..1")


def _check(dur, cda, p, T, Y):
    """0 if the crank step's inputs are valid, else the index of the message in ``_INPUT_ERRORS``."""
    if not (np.all(np.isfinite(dur)) and np.all(dur >= 0)):
        return 1
    if not (np.all(np.isfinite(cda)) and np.all(cda >= 0)):
        return 2
    ok = np.isfinite(p) & np.isfinite(T) & np.isfinite(Y)
    if not (np.all(ok) and np.all(p > 0) and np.all(T > 0) and np.all(Y >= 0) and np.all(Y <= 1)):
        return 3
    return 0


def _valve_step(Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, dur, max_steps, end, cda, p, T, Y, lag,
                own_time):
    """Set the valve end ``end`` of one runner (B cases) and advance it; numpy form of
    :func:`runner_step_case` (the same sequence of sub-steps)."""
    shut = (cda == 0.0) & bool(own_time)
    acc = np.zeros((Q.shape[0], 2, s.NF))
    steps = np.zeros(Q.shape[0], dtype=np.int64)
    fallbacks = np.zeros(Q.shape[0], dtype=np.int64)
    catch = ~shut & (lag > 0.0)
    if catch.any():                                     # the time it lags, with the valve still shut
        E[:, end, s.E_CDA] = 0.0
        a, st, fb = s.advance_arrays(Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter,
                                     np.where(catch, lag, 0.0), max_steps)
        acc += a
        steps += st
        fallbacks += fb
        lag[catch] = 0.0
    E[:, end, s.E_CDA] = cda
    E[:, end, s.E_P] = p
    E[:, end, s.E_T] = T
    E[:, end, s.E_Y] = Y
    E[:, end, s.E_K] = 0.0                              # the valve's discharge coefficient is in its area
    a, st, fb = s.advance_arrays(Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, np.where(shut, lag + dur, dur),
                                 max_steps, whole=shut, left=lag)
    return acc + a, steps + st, fallbacks + fb


def step_rates(mass_kg, enthalpy_J, burned_kg, duration_s, y_cyl, h_cyl):
    """One valve's crank-step totals as the cylinder's constant rates over the step (kernel form:
    arrays on the numpy loop, floats in the compiled loop).

    ``mass_kg``, ``enthalpy_J``, ``burned_kg`` went into the cylinder over ``duration_s`` [s];
    returns the mass flow [kg/s], and the burned fraction [-] and enthalpy [J/kg] of what came in;
    where no gas moved, the cylinder's own ``y_cyl`` and ``h_cyl`` (times a zero flow)."""
    moved = mass_kg != 0.0
    ms = where(moved, mass_kg, 1.0)
    timed = duration_s > 0.0
    mdot = where(timed, mass_kg / where(timed, duration_s, 1.0), 0.0)
    return mdot, where(moved, burned_kg / ms, y_cyl), where(moved, enthalpy_J / ms, h_cyl)


if s.COMPILED:
    from numba import njit

    _check = njit(cache=True)(_check)

    @njit(cache=True)
    def valve_step_case(b, Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, dur, max_steps, end, cda, p, T, Y,
                        acc, steps, fallbacks, whole, left):
        """Case ``b`` of the valve step, compiled: set its valve end from the cylinder (``cda``
        [m^2], ``p`` [Pa], ``T`` [K], ``Y`` [-]) and advance it by ``dur`` [s]
        (:func:`cyclesim.pipes.scheme.advance_case`, with its ``whole`` and ``left``; its return code)."""
        E[b, end, s.E_CDA] = cda
        E[b, end, s.E_P] = p
        E[b, end, s.E_T] = T
        E[b, end, s.E_Y] = Y
        E[b, end, s.E_K] = 0.0                          # the valve's discharge coefficient is in its area
        return s.advance_case(b, Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, dur, max_steps, acc, steps,
                              fallbacks, whole, left)

    @njit(cache=True)
    def runner_step_case(b, Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, dur, max_steps, end, cda, p, T, Y,
                         acc, steps, fallbacks, lag, own_time):
        """One crank step of ``dur`` [s] of case ``b``'s runner at the cylinder's valve (its return code).

        With ``own_time`` and the valve shut (``cda`` 0) nothing passes the valve end, so the runner steps on its
        own time: whole CFL sub-steps over the time it lagged plus ``dur``, the time left over
        kept in ``lag[b]`` [s] (less than one sub-step).  At the first step with the valve open
        the runner first catches up over ``lag[b]`` with the valve still shut, then takes the
        step as before (sub-steps ending on the step's end), so what passes the valve each step
        is the cylinder's for that step.  Without ``own_time`` (a far end that follows a shared
        volume's pressure crank step by crank step: the multi-cylinder engine) every crank step
        ends on the step's end: the whole sub-steps' left-over time, which moves with the state
        from one coupled cycle to the next, kept the engine's relaxation from settling (a change
        of about 2e-3 after 40 coupled cycles on demo_engine_runners, against 18 cycles to 5e-4)."""
        if own_time and cda == 0.0:
            return valve_step_case(b, Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, lag[b] + dur, max_steps,
                                   end, 0.0, p, T, Y, acc, steps, fallbacks, True, lag)
        if lag[b] > 0.0:
            why = valve_step_case(b, Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, lag[b], max_steps, end, 0.0,
                                  p, T, Y, acc, steps, fallbacks, False, lag)
            lag[b] = 0.0
            if why >= 0:
                return why
        return valve_step_case(b, Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, dur, max_steps, end, cda, p, T,
                               Y, acc, steps, fallbacks, False, lag)

    @njit(cache=True)
    def _valve_step_compiled(Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, dur, max_steps, end, cda, p, T, Y,
                             lag, own_time):
        """:func:`_valve_step` in one compiled call (no Python between the valve and the sub-steps)."""
        B = Q.shape[0]
        acc = np.zeros((B, 2, s.NF))
        steps = np.zeros(B, dtype=np.int64)
        fallbacks = np.zeros(B, dtype=np.int64)
        for b in range(B):
            why = runner_step_case(b, Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, dur[b], max_steps, end,
                                   cda[b], p[b], T[b], Y[b], acc, steps, fallbacks, lag, own_time)
            if why >= 0:
                return acc, steps, fallbacks, b, why
        return acc, steps, fallbacks, -1, 0


def advance_crank_step(system: PipeSystem, duration_s, valve_cda_m2, cylinder_pressure_pa,
                       cylinder_temperature_K, cylinder_burned_fraction,
                       end_iterations: int = DEFAULT_END_ITERATIONS, own_time: bool = True) -> dict:
    """Advance every runner of ``system`` by one crank step with the cylinder held at its state.

    Parameters
    ----------
    system : PipeSystem
    duration_s : float or array_like (B,)
        Length of the crank step [s] (0 leaves a case unchanged).
    valve_cda_m2 : array_like (B, n_valves)
        Effective flow area of each valve over the step [m^2] (0: shut).
    cylinder_pressure_pa, cylinder_temperature_K, cylinder_burned_fraction : array_like (B,)
        The cylinder's state, its stagnation state at the valves, over the step.
    own_time : bool
        A runner behind a shut valve steps on its own time (:func:`runner_step_case`); off where
        the far ends follow a shared volume.

    Returns
    -------
    dict of ndarray (B, n_valves), into the cylinder over the step
        ``mass_kg``, ``enthalpy_J`` (stagnation enthalpy, absolute as the
        gas's energies), ``burned_mass_kg``; and, (B, n_valves), the same into
        each runner through its other end (``outer_mass_kg``,
        ``outer_energy_J``, ``outer_burned_mass_kg``) and ``steps``, the
        sub-steps each runner took.

    Raises
    ------
    SolverError
        On inputs that are not finite or out of range, and where a runner's
        sub-steps collapse (:mod:`cyclesim.pipes.scheme`).
    """
    B, V = system.B, system.n_valves
    dur = _cases(duration_s, B)
    cda = np.asarray(valve_cda_m2, dtype=float)
    if cda.shape != (B, V):
        cda = np.broadcast_to(cda, (B, V))
    p = _cases(cylinder_pressure_pa, B)
    T = _cases(cylinder_temperature_K, B)
    Y = _cases(cylinder_burned_fraction, B)
    bad = _check(dur, cda, p, T, Y)
    if bad:
        raise SolverError(f"pipe coupling: {_INPUT_ERRORS[int(bad)]}")
    keys = ("mass_kg", "enthalpy_J", "burned_mass_kg", "outer_mass_kg", "outer_energy_J", "outer_burned_mass_kg")
    res = np.empty((6, B, V))
    steps = np.empty((B, V), dtype=np.int64)
    for j, (pipe, end) in enumerate(zip(system.runners, system.valve_ends)):
        args = (pipe.Q, pipe.G, pipe.face_area, pipe.P, pipe.ends, pipe.C, pipe.T_cell, pipe.p_end,
                pipe.gas.t_mid_K, pipe.gas.newton_steps, end_iterations, dur, 1_000_000, end,
                np.ascontiguousarray(cda[:, j]), p, T, Y, pipe.lag, bool(own_time))
        if s.COMPILED:
            a, st, fallbacks, failed, why = _valve_step_compiled(*args)
            if failed >= 0:
                raise s._lost_positivity() if why else s._too_many_steps(1_000_000)
        else:
            a, st, fallbacks = _valve_step(*args)
        pipe.steps_taken += st
        pipe.fallback_steps += fallbacks
        res[:3, :, j] = -a[:, end, :].T                # out of the pipe through the valve: into the cylinder
        res[3:, :, j] = a[:, 1 - end, :].T
        steps[:, j] = st
    out = dict(zip(keys, res))
    out["steps"] = steps
    return out


def throttle_end(ends, end, throttle_cda_m2, upstream_pressure_pa, upstream_temperature_K):
    """A throttle at pipe end ``end``: a nozzle of effective area ``throttle_cda_m2`` [m^2] from the
    upstream air (ambient or an air box) at its stagnation pressure [Pa] and temperature [K].

    Flow in either direction by the quasi-steady nozzle equation (Heywood 1988, App. C), the
    same law as a valve; the throttle's discharge coefficient is in the area.  Returns ``ends``.
    """
    return set_end(ends, end, throttle_cda_m2, upstream_pressure_pa, upstream_temperature_K, 0.0, 0.0)


def turbine_end(ends, end, turbine_area_m2, outlet_pressure_pa, outlet_temperature_K, burned_fraction=1.0):
    """The turbine as the exhaust collector's outlet at end ``end``: the boost study's turbine flow relation.

    The boost study (:mod:`cyclesim.studies.boost`) passes the exhaust through the
    turbine as a nozzle of the turbine's effective area from the turbine inlet's
    stagnation state to the outlet pressure p4; here the collector's end is that
    nozzle, to a reservoir at ``outlet_pressure_pa`` (gas flowing back, as after a
    pulse, comes from ``outlet_temperature_K``).  Work: :func:`turbine_power_W`.
    """
    return set_end(ends, end, turbine_area_m2, outlet_pressure_pa, outlet_temperature_K, burned_fraction, 0.0)


def _stagnation_temperature(h0, Y, pipe: Pipes):
    """Temperature [K] whose enthalpy e + R T equals ``h0`` [J/kg] for burned fraction ``Y`` (B,)."""
    cf, cb = pipe._coef_np()
    cf, cb = cf[..., 0], cb[..., 0]
    R = k.mixture_R(Y, pipe.gas.R[:, 0], pipe.gas.R[:, 1])
    T = np.full_like(h0, 800.0)
    for _ in range(30):
        e, cv = k.energy(T, Y, cf, cb, pipe.gas.t_mid_K)
        T = np.clip(T - (e + R * T - h0) / (cv + R), k.T_MIN_K, k.T_MAX_K)
    _, cv = k.energy(T, Y, cf, cb, pipe.gas.t_mid_K)
    return T, cv + R, (cv + R) / cv


def turbine_power_W(pipe: Pipes, end, mass_out_kg, energy_out_J, burned_out_kg, duration_s, efficiency,
                    outlet_pressure_pa):
    """Mean power of the turbine at ``end`` of ``pipe`` over a step [W] (B,), from the gas that left through it.

    The gas's mean stagnation temperature T3 follows from its enthalpy per mass; the
    expansion ratio is the stagnation pressure of the pipe's end cell at the end of
    the step over ``outlet_pressure_pa``; the outlet temperature comes from the boost
    study's :func:`cyclesim.cylinder.flow.turbine_outlet_temperature` (fixed isentropic
    ``efficiency``).  Power ``m cp (T3 - T4) / duration``.  A quasi-steady turbine on
    the step's means (no turbine map, no pulse averaging within the step).
    """
    m = np.asarray(mass_out_kg, float)
    moving = m > 0
    ms = np.where(moving, m, 1.0)
    Y = np.clip(np.asarray(burned_out_kg, float) / ms, 0.0, 1.0)
    T3, cp, g = _stagnation_temperature(np.asarray(energy_out_J, float) / ms, Y, pipe)
    pr = pipe.primitives()
    j = 0 if end == 0 else -1
    u, c, p, gc = (pr[key][:, j] for key in ("velocity_m_s", "sound_speed_m_s", "pressure_pa", "gamma"))
    p03 = p * (1.0 + 0.5 * (gc - 1.0) * (u / c) ** 2) ** (gc / (gc - 1.0))
    ratio = np.maximum(p03 / np.asarray(outlet_pressure_pa, float), 1.0)
    T4, _ = turbine_outlet_temperature(T3, ratio, efficiency, g)
    return np.where(moving, m * cp * (T3 - T4) / np.asarray(duration_s, float), 0.0)
