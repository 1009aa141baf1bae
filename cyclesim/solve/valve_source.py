"""Valve flows handed to the cylinder from outside its right-hand side: the runners' crank step.

With a runner on a side (:mod:`cyclesim.pipes.runners`), that side's valve flow over a crank step
is what the runner gave through the valve over the step (the sum of its sub-step fluxes), taken
by the cylinder at constant rates over the step: mass ``M`` [kg], absolute enthalpy ``H`` [J] and
burned mass ``M_b`` [kg] over a step of ``h`` [deg] become ``M/h`` [kg/deg] with the enthalpy
``H/M`` [J/kg] and burned fraction ``M_b/M`` [-] of what comes in.  Every stage of the
Runge-Kutta step sees the same rates and the stage weights add up to 1, so the step books
exactly ``M``, ``H`` and ``M_b`` (to rounding).  The side's port buffer is off: the runner holds
the gas pushed back out of the cylinder and returns it itself.
"""

from __future__ import annotations

import numpy as np



class StepValveFlows:
    """One crank step's valve flows of the sides with a runner (arrays (B,)).

    Attributes
    ----------
    has_int, has_exh : bool
        Whether the intake (exhaust) side's flows come from here.
    mdot_int, mdot_exh : mass flow into the cylinder [kg/s]
    y_int, y_exh : burned fraction of what comes in [-]
    h_int, h_exh : absolute enthalpy per mass of what comes in [J/kg]
    """

    def __init__(self, B: int, has_int: bool, has_exh: bool):
        self.has_int = has_int
        self.has_exh = has_exh
        z = np.zeros(B)
        self.mdot_int, self.y_int, self.h_int = z.copy(), z.copy(), z.copy()
        self.mdot_exh, self.y_exh, self.h_exh = z.copy(), z.copy(), z.copy()

    def set_side(self, side: str, mass_kg, enthalpy_J, burned_kg, duration_s, y_cyl, h_cyl) -> None:
        """Take one side's crank-step totals (B,) over ``duration_s`` (B,) [s]; where no gas moved the
        inflow state is the cylinder's own (``y_cyl``, ``h_cyl``; times a zero flow)."""
        from ..pipes.coupling import step_rates   # (the pipe package loads only with runners)

        mdot, y, h = step_rates(mass_kg, enthalpy_J, burned_kg, duration_s, y_cyl, h_cyl)
        if side == "intake":
            self.mdot_int, self.y_int, self.h_int = mdot, y, h
        else:
            self.mdot_exh, self.y_exh, self.h_exh = mdot, y, h


class RunnerCoupling:
    """The runners of one integration advanced beside the cylinder, crank step by crank step.

    ``runners`` is a :class:`cyclesim.pipes.runners.RunnerSet` (sides, :meth:`step`,
    :meth:`start_cycle`, :meth:`valve_pressure`, :meth:`mid_pressure`); ``pts`` the cycle's grid.
    Each step's valve areas are the valve-flow model's effective areas (its ``flow_area``) at
    the step's middle.  Per cycle it records the pressure at each runner's valve end and middle
    at the grid points (``p_valve``, ``p_mid``, (B, n_sides, N+1) [Pa]).
    """

    def __init__(self, rhs, pts, runners):
        self.rhs = rhs
        self.runners = runners
        self.sides = runners.sides
        B, N = rhs.B, pts.N
        mid = 0.5 * (pts.theta[:-1] + pts.theta[1:])
        areas = rhs.vf.flow_area(mid)
        self.cda = np.ascontiguousarray(np.stack([np.asarray(areas[side], float) for side in self.sides], axis=1))
        self.source = StepValveFlows(B, "intake" in self.sides, "exhaust" in self.sides)
        self.p_valve = np.zeros((B, len(self.sides), N + 1))
        self.p_mid = np.zeros_like(self.p_valve)
        # the recorded cells' (middle, stations: RunnerSet.record_cells) totals and last temperatures
        # at the grid points: their pressures are found once per cycle (finish_cycle), in one call
        K = runners.record_cells[0].shape[1]
        self._q_mid = np.zeros((len(self.sides), K, B, 4, N + 1))
        self._t_mid = np.zeros((len(self.sides), K, B, N + 1))
        self.N = N
        self.theta = pts.theta
        self.prev_mean = None      # the cycle before's means (RunnerSet.settle_change)
        self._m_pts = np.zeros_like(self.p_valve)
        self._e_pts = np.zeros_like(self.p_valve)
        runners.bind_grid(pts.theta)

    def start_cycle(self) -> None:
        self.runners.start_cycle()
        self.rhs.valve_source = self.source

    # -- the compiled loop (cyclesim.pipes.loop_step): the same steps, advanced inside the loop ----
    def compiled_pipes(self) -> tuple:
        """The runners' arrays for the compiled loop (:func:`cyclesim.pipes.loop_step.pack`): it
        advances the runners in place and writes the pressures at the grid points into this
        object's records and the cycle's valve totals into :attr:`_flows`."""
        from ..pipes.loop_step import SIDE_SLOT, pack

        self._flows = np.zeros((self.rhs.B, len(self.sides), 5))
        slots = [SIDE_SLOT[side] for side in self.sides]
        return pack(self.runners, slots, self.cda, (self.p_valve, self._q_mid, self._t_mid, self._m_pts,
                                                    self._e_pts), self._flows)

    def save(self) -> list:
        """The runners' state (taken before a compiled cycle, for :meth:`restore`)."""
        return [(p.Q.copy(), p.T_cell.copy(), p.p_end.copy(), p.ends.copy(), p.steps_taken.copy(),
                 p.fallback_steps.copy(), p.lag.copy()) for p in self.runners.system.runners]

    def restore(self, saved: list) -> None:
        """Back to the state :meth:`save` took (in place: the compiled loop holds these arrays), where a
        compiled cycle handed the cycle to the numpy loop."""
        for p, (Q, Tc, Pe, E, st, fb, lag) in zip(self.runners.system.runners, saved):
            p.Q[...] = Q
            p.T_cell[...] = Tc
            p.p_end[...] = Pe
            p.ends[...] = E
            p.steps_taken[...] = st
            p.fallback_steps[...] = fb
            p.lag[...] = lag
        self._flows[...] = 0.0

    def finish_compiled(self) -> dict:
        """After a compiled cycle: its valve totals booked as the numpy loop books them per step
        (:meth:`cyclesim.pipes.runners.RunnerSet.step`), then :meth:`finish_cycle`."""
        cf = self.runners.cycle_flows
        for k, key in enumerate(("mass_kg", "enthalpy_J", "burned_mass_kg", "outer_mass_kg", "outer_energy_J")):
            cf[key] += self._flows[:, :, k]
        self._flows[...] = 0.0
        return self.finish_cycle()

    def record(self, i: int) -> None:
        """The runners' pressures at grid point ``i``."""
        r = self.runners
        cases = np.arange(r.B)
        for j, (pipe, cells) in enumerate(zip(r.system.runners, r.record_cells)):
            for k in range(cells.shape[1]):
                self._q_mid[j, k, :, :, i] = pipe.Q[cases, :, cells[:, k]]
                self._t_mid[j, k, :, i] = pipe.T_cell[cases, cells[:, k]]
            self.p_valve[:, j, i] = pipe.p_end[:, 0]
            self._m_pts[:, j, i] = pipe.Q[:, 0].sum(axis=1)
            self._e_pts[:, j, i] = pipe.Q[:, 2].sum(axis=1)

    def step(self, i: int, y: np.ndarray, V: np.ndarray, h_deg: float) -> None:
        """Advance the runners over step ``i`` (``h_deg`` [deg]) from the cylinder state ``y``
        (n_state, B) in the volume ``V`` [m^3] (B,) and set the step's valve flows."""
        rhs = self.rhs
        self.record(i)
        alive = rhs.alive
        m, T = y[0], y[1]
        ok = alive & np.isfinite(m) & np.isfinite(T) & (m > 0) & (T > 50.0)
        m = np.where(ok, m, 1e-4)
        T = np.where(ok, T, 300.0)
        yb = np.clip(np.where(ok, y[2], 0.0) / m, 0.0, 1.0)
        mp = rhs.gas.mixture(T, m / V, yb)
        p = m / V * mp.R * T
        h_cyl = mp.u + mp.R * T
        dur = np.where(ok, h_deg * rhs.dt_dth, 0.0)
        out = self.runners.step(dur, self.cda[:, :, i], p, T, yb, i)
        for j, side in enumerate(self.sides):
            self.source.set_side(side, out["mass_kg"][:, j], out["enthalpy_J"][:, j], out["burned_mass_kg"][:, j],
                                 dur, yb, h_cyl)

    def finish_cycle(self) -> dict:
        """The cycle's record: pressures at the grid points and the runners' flows and states."""
        self.record(self.N)
        r = self.runners
        u_mid = np.empty_like(self.p_mid)
        stations = {}
        for j, (side, pipe, cells) in enumerate(zip(self.sides, r.system.runners, r.record_cells)):
            p_k = [r.cell_pressure(pipe, cells[:, k], self._q_mid[j, k], self._t_mid[j, k])
                   for k in range(1 + len(r.stations[j]))]
            # velocity = momentum / mass of the cell, positive in the side's normal flow: towards
            # the valve on the intake (against x, which runs from the valve end), away on the exhaust
            sign = -1.0 if side == "intake" else 1.0
            u_k = [sign * self._q_mid[j, k, :, 1] / self._q_mid[j, k, :, 0] for k in range(len(p_k))]
            self.p_mid[:, j], u_mid[:, j] = p_k[0], u_k[0]
            stations[side] = {"x_mm": r.stations[j], "pressure_pa": np.stack(p_k[1:], axis=1) if p_k[1:] else None,
                              "velocity_m_per_s": np.stack(u_k[1:], axis=1) if u_k[1:] else None}
        end = r.contents()
        end_state = {"mass_kg": end["mass_kg"], "energy_J": end["energy_J"],
                     "valve_pressure_pa": r.valve_pressure()}
        span = self.theta[-1] - self.theta[0]
        mean = {key: np.trapezoid(a, x=self.theta, axis=2) / span for key, a in
                (("mass_kg", self._m_pts), ("energy_J", self._e_pts), ("valve_pressure_pa", self.p_valve))}
        change = r.settle_change(self.prev_mean, mean)
        prev = mean if self.prev_mean is None else self.prev_mean
        self.prev_mean = mean
        return {"sides": self.sides, "p_valve": self.p_valve.copy(), "p_mid": self.p_mid.copy(), "u_mid": u_mid,
                "stations": stations,
                "flows": {k: v.copy() for k, v in r.cycle_flows.items()},
                "start": r.cycle_start, "end": end_state, "mass_pts": self._m_pts.copy(), "cycle_mean": mean, "cycle_mean_before": prev,
                "change": change,
                "substeps_total": np.stack([p.steps_taken for p in r.system.runners], axis=1).astype(float),
                # per case like every other entry (the report keeps each case's record of its own cycle)
                "cells": np.tile(np.array([p.N for p in r.system.runners], dtype=float), (r.B, 1))}
