"""A batch's intake and exhaust runners, coupled to the cylinder crank step by crank step.

:func:`build_runners` makes a :class:`RunnerSet` from a batch whose cases have ``intake.runner``
or ``exhaust.runner`` (:mod:`cyclesim.config.runners`), else None.  Each runner is a
:class:`cyclesim.pipes.Pipes` batch with its valve end at x = 0 and its far end at x = L open to
the operating point's plenum (intake: intake pressure, temperature and EGR fraction; exhaust:
exhaust pressure and temperature, burned gas) through the runner's full area with its entry loss
on inflow.  The runner stands for all the valves of its side (their effective areas added).

The cycle loop (:class:`cyclesim.solve.cycle_run.CycleRunner`) calls :meth:`RunnerSet.step` once
per crank step with the cylinder's state at the step's start and the valves' effective areas at
the step's middle; :func:`cyclesim.pipes.advance_crank_step` sub-steps each case by its own CFL
condition, and what went through each valve over the step becomes the cylinder's valve flow for
the step at constant rates, so the cylinder receives exactly what the pipe gave.  The runners'
state is carried from one cycle to the next (it is never reset between cycles).
"""

from __future__ import annotations

import numpy as np

from ..config.runners import station_cell
from ..errors import ConfigError
import cyclesim.pipes.scheme as s
from .coupling import PipeSystem, advance_crank_step
from .gas import constant_gamma, fuel_mixture
from .pipe import Pipes, closed_ends, set_end

SIDES = ("intake", "exhaust")
_VALVE_END, _FAR_END = 0, 1


class RunnerSet:
    """The runners of one batch (B cases) and their bookkeeping over the cycle.

    Attributes
    ----------
    sides : tuple of str
        The sides that have a runner (``"intake"``, ``"exhaust"``), in valve order.
    system : PipeSystem
    cycle_flows : dict of ndarray (B, n_sides)
        Over the current cycle, into the cylinder through each valve: ``mass_kg``,
        ``enthalpy_J``, ``burned_mass_kg``; and into each runner through its far end:
        ``outer_mass_kg``, ``outer_energy_J``.
    cycle_start : dict of ndarray (B, n_sides)
        The runners' ``mass_kg``, ``energy_J`` and valve-end pressure ``valve_pressure_pa``
        at the current cycle's start.
    """

    def __init__(self, batch, sides, specs):
        self.sides = tuple(sides)
        B = batch.B
        self.B = B
        op = batch.operating
        ones = np.ones(B)
        far = {"intake": (op.intake_pressure_bar * 1e5 * ones, op.intake_temperature_K * ones,
                          op.egr_fraction * ones),
               "exhaust": (op.exhaust_pressure_bar * 1e5 * ones, op.exhaust_temperature_K * ones, ones)}
        gas = _pipe_gas(batch)
        runners = []
        for side in self.sides:
            rows = [c.runners[side] for c in batch.cases]
            n = rows[0].n_cells
            d0 = np.array([_diameters(r)[0] for r in rows])
            d1 = np.array([_diameters(r)[1] for r in rows])
            p_far, T_far, y_far = far[side]
            Tw = np.array([r.wall_temperature_K if r.wall_temperature_K is not None else np.nan for r in rows])
            Tw = np.where(np.isfinite(Tw), Tw, T_far)
            pipe = Pipes(np.array([r.length_mm for r in rows]) * 1e-3, d0, n, diameter_out_m=d1, gas=gas,
                         roughness_m=np.array([r.roughness_mm for r in rows]) * 1e-3, wall_temperature_K=Tw,
                         bend_loss=np.array([r.bend_loss for r in rows]), n_cases=B)
            ends = closed_ends(B)
            set_end(ends, _FAR_END, pipe.face_area[:, -1], p_far, T_far, y_far,
                    np.array([r.entry_loss for r in rows]))
            pipe.ends = ends
            pipe.set_state(p_far[:, None], T_far[:, None], 0.0, y_far[:, None])
            runners.append(pipe)
        self.system = PipeSystem(runners, [_VALVE_END] * len(runners))
        self.mid = [p.N // 2 for p in runners]
        self.stations: list[tuple] = []
        """Per runner, the positions [mm] of its stations (``stations_mm``; the same in every case)."""
        cells = []
        for side, pipe, mid in zip(self.sides, runners, self.mid):
            rows = [c.runners[side] for c in batch.cases]
            st = rows[0].stations_mm
            if any(r.stations_mm != st for r in rows):
                raise ConfigError(f"{side}.runner.stations_mm: the cases of one batch must have the same stations")
            self.stations.append(st)
            cells.append([[mid] + [station_cell(r, x) for x in st] for r in rows])
        k = max(len(c[0]) for c in cells)
        self.record_cells = [np.ascontiguousarray([row + [row[0]] * (k - len(row)) for row in c], dtype=np.int64)
                             for c in cells]
        """Per runner (B, K) the cells recorded at every grid point: its middle cell, then its stations
        (padded with the middle cell to the longest list of the runners)."""
        self.far_pressure: np.ndarray | None = None
        """Far-end reservoir pressure per crank step [Pa] (n_sides, B, N), or None (constant, as set)."""
        self.far_trace: tuple | None = None
        self.theta: np.ndarray | None = None
        self.carried = False
        """True where the runners' state is carried from one integration to the next (the engine)."""
        self.cycle_flows: dict = {}
        self.cycle_start: dict = {}
        self.start_cycle()

    # -- the cycle ----------------------------------------------------------------------------
    def contents(self) -> dict:
        """Per runner (B, n_sides): ``mass_kg``, ``energy_J``, ``burned_mass_kg`` stored."""
        tot = [p.totals() for p in self.system.runners]
        return {key: np.stack([t[key] for t in tot], axis=1) for key in ("mass_kg", "energy_J", "burned_mass_kg")}

    def valve_pressure(self) -> np.ndarray:
        """Pressure [Pa] (B, n_sides) at each runner's valve end (the end's last boundary pressure,
        the first cell's where the end has not been solved yet)."""
        out = np.empty((self.B, len(self.sides)))
        for j, p in enumerate(self.system.runners):
            pe = p.p_end[:, _VALVE_END]
            out[:, j] = np.where(pe > 0, pe, self.cell_pressure(p, 0, p.Q[:, :, :1], p.T_cell[:, :1])[:, 0])
        return out

    def mid_pressure(self) -> np.ndarray:
        """Pressure [Pa] (B, n_sides) in each runner's middle cell."""
        return np.stack([self.cell_pressure(p, i, p.Q[:, :, i:i + 1], p.T_cell[:, i:i + 1])[:, 0]
                         for p, i in zip(self.system.runners, self.mid)], axis=1)

    @staticmethod
    def cell_pressure(pipe: Pipes, i, Q, T_start) -> np.ndarray:
        """Pressure [Pa] (B, n) of cell ``i`` (an index, or one per case (B,)) of ``pipe`` at ``n``
        saved states: its totals ``Q`` (B, NQ, n) and last temperatures ``T_start`` (B, n) [K]."""
        import cyclesim.pipes.kernels as k

        cf, cb = pipe._coef_np()
        vol = pipe.volume[np.arange(pipe.B), np.broadcast_to(np.asarray(i), (pipe.B,))][:, None]
        out = k.primitives(Q[:, s.MASS], Q[:, s.MOMENTUM], Q[:, s.ENERGY], Q[:, s.BURNED], vol,
                           cf, cb, pipe.gas.R[:, :1], pipe.gas.R[:, 1:], pipe.gas.t_mid_K, pipe.gas.newton_steps,
                           T_start)
        return out[2]

    def start_cycle(self) -> None:
        """Zero the cycle's flow totals and note the runners' state at the cycle's start."""
        V = len(self.sides)
        self.cycle_flows = {key: np.zeros((self.B, V)) for key in
                            ("mass_kg", "enthalpy_J", "burned_mass_kg", "outer_mass_kg", "outer_energy_J")}
        c = self.contents()
        self.cycle_start = {"mass_kg": c["mass_kg"], "energy_J": c["energy_J"],
                            "valve_pressure_pa": self.valve_pressure()}

    # -- far ends that follow a shared volume (the multi-cylinder engine) -----------------------
    def bind_grid(self, theta) -> None:
        """The crank grid [deg] (N+1,) the cycle steps on (the far-end pressures are per step)."""
        self.theta = np.asarray(theta, dtype=float)
        self._resample()

    def set_far_traces(self, phi0_deg: float, step_deg: float, pressure_pa) -> None:
        """Far-end reservoir pressures that vary over the cycle: ``pressure_pa`` (B, n_sides, M) [Pa]
        on the periodic grid ``phi0_deg + step_deg * m`` of each case's own crank frame (720 deg
        long); each crank step takes the value at its middle (linear interpolation)."""
        p = np.asarray(pressure_pa, dtype=float)
        if p.shape[:2] != (self.B, len(self.sides)) or not np.all(np.isfinite(p)) or np.any(p <= 0):
            raise ConfigError("runners: far-end pressures must be finite, > 0 and (cases, sides, points)")
        self.far_trace = (float(phi0_deg), float(step_deg), p)
        self._resample()

    def _resample(self) -> None:
        if self.far_trace is None or self.theta is None:
            return
        phi0, h, p = self.far_trace
        M = p.shape[2]
        x = phi0 + h * np.arange(M + 1)
        mid = 0.5 * (self.theta[:-1] + self.theta[1:])
        at = ((mid - phi0) % (h * M)) + phi0
        far = np.empty((len(self.sides), self.B, len(mid)))
        for b in range(self.B):
            for j in range(len(self.sides)):
                far[j, b] = np.interp(at, x, np.append(p[b, j], p[b, j, 0]))
        if self.far_pressure is not None and self.far_pressure.shape == far.shape:
            self.far_pressure[...] = far            # in place: a compiled loop may hold this array
        else:
            self.far_pressure = np.ascontiguousarray(far)

    def far_row(self, j: int) -> np.ndarray:
        """Runner ``j``'s far-end pressures per crank step (B, N) [Pa] for the compiled loop; (1, 1)
        zeros where its far end keeps the pressure it was set to."""
        if self.far_pressure is None:
            return np.zeros((1, 1))
        return self.far_pressure[j]

    def step(self, duration_s, valve_cda_m2, p, T, y_b, i: int | None = None) -> dict:
        """Advance every runner over one crank step of ``duration_s`` (B,) [s] with the valves'
        effective areas ``valve_cda_m2`` (B, n_sides) [m^2] and the cylinder at ``p`` [Pa], ``T``
        [K], ``y_b`` [-] (B,); returns what went into the cylinder (B, n_sides): ``mass_kg``,
        ``enthalpy_J``, ``burned_mass_kg``, and books it in :attr:`cycle_flows`."""
        if self.far_pressure is not None and i is not None:
            for j, pipe in enumerate(self.system.runners):
                pipe.ends[:, _FAR_END, s.E_P] = self.far_pressure[j, :, i]
        out = advance_crank_step(self.system, duration_s, valve_cda_m2, p, T, np.clip(y_b, 0.0, 1.0),
                                 own_time=self.far_pressure is None)
        cf = self.cycle_flows
        for key in ("mass_kg", "enthalpy_J", "burned_mass_kg"):
            cf[key] += out[key]
        cf["outer_mass_kg"] += out["outer_mass_kg"]
        cf["outer_energy_J"] += out["outer_energy_J"]
        return out

    # -- the state as rows under the cylinder's (runs that start from a given state) ------------
    def _state_arrays(self):
        for p in self.system.runners:
            yield from (p.Q, p.T_cell, p.p_end, p.lag)

    @property
    def n_state_rows(self) -> int:
        """Rows of :meth:`state_rows`."""
        return sum(a[0].size if a.ndim > 1 else 1 for a in self._state_arrays())

    def state_rows(self) -> np.ndarray:
        """The runners' state as rows (n_state_rows, B), to stack under the cylinder's state: per
        runner its cells' totals (mass, momentum, energy, burned mass), its cells' last temperatures
        and its ends' last pressures (the Newton starts, so a run from these rows repeats the run
        that left them to the bit) and its lag behind the cylinder [s] (:attr:`Pipes.lag`)."""
        return np.concatenate([a.reshape(self.B, -1) for a in self._state_arrays()], axis=1).T.copy()

    def set_state_rows(self, rows) -> None:
        """Put the runners in the state ``rows`` (n_state_rows, B) of :meth:`state_rows`, in place
        (the compiled loop holds these arrays), and start the cycle's bookkeeping from there."""
        rows = np.asarray(rows, dtype=float)
        if rows.shape != (self.n_state_rows, self.B):
            raise ValueError(f"runner state rows of shape {rows.shape}, expected {(self.n_state_rows, self.B)}")
        k = 0
        for a in self._state_arrays():
            n = a[0].size if a.ndim > 1 else 1
            a[...] = rows[k:k + n].T.reshape(a.shape)
            k += n
        self.start_cycle()

    @staticmethod
    def settle_change(before, after) -> np.ndarray:
        """The settling test's change per case (B,) between the cycle means of two cycles (dicts of
        (B, n_sides): ``mass_kg``, ``energy_J``, ``valve_pressure_pa``): the largest relative
        change of a runner's cycle-mean mass or valve-end pressure (:func:`mean_changes`); inf
        without a cycle before.

        Cycle means, not the state at the cycle's start: the waves of the cycles before still run
        in the runners then (a one-dimensional open end reflects them without loss).  On
        demo_runners both settle below 5e-4 in 5 cycles (2 start-up and 3 fine) from 1500 to 6000
        rpm; the exhaust runner's mass is the slower of the two (its gas temperature)."""
        if before is None:
            return np.full(after["mass_kg"].shape[0], np.inf)
        c = mean_changes(before, after)
        return np.maximum(c["valve_pressure"], c["mass"]).max(axis=1)


def mean_changes(before, after) -> dict:
    """Relative changes (B, n_sides) of the runners' cycle means between two cycles: ``mass``
    (per mass), ``energy`` (per mass times 1 MJ/kg), ``valve_pressure`` (per itself)."""
    m = np.abs(after["mass_kg"])
    return {"mass": np.abs(after["mass_kg"] - before["mass_kg"]) / m,
            "energy": np.abs(after["energy_J"] - before["energy_J"]) / (m * 1e6),
            "valve_pressure": np.abs(after["valve_pressure_pa"] - before["valve_pressure_pa"])
            / np.abs(after["valve_pressure_pa"])}


def _diameters(ns):
    from ..config.runners import runner_diameters_m

    return runner_diameters_m(ns)


def _pipe_gas(batch):
    """The runners' gas: the batch's fuel at its equivalence ratio and its complete-combustion
    products (frozen), or the constant-gamma gas of ``gas.properties: constant_gamma``."""
    B = batch.B
    g = batch.cases[0].gas
    if getattr(g, "properties", None) == "constant_gamma":
        return constant_gamma(np.array([c.gas.gamma for c in batch.cases]),
                              np.array([c.gas.R_J_per_kgK for c in batch.cases]), B)
    phi = 1.0 / np.asarray(batch.operating.__dict__["lambda"], float) * np.ones(B)
    if getattr(batch.operating, "fuel_cut", False):
        phi = np.full(B, 1e-6)
    return fuel_mixture(batch.fuel, phi)


def carry_runners(batch) -> RunnerSet | None:
    """The batch's runners, built once and kept with the batch, so that the integrations that follow
    one another (the multi-cylinder engine's coupled cycles) carry the runners' state on; None
    where its cases have none."""
    rs = getattr(batch, "carried_runners", None)
    if rs is None:
        rs = build_runners(batch)
        if rs is not None:
            rs.carried = True
            batch.carried_runners = rs
    return rs


def build_runners(batch) -> RunnerSet | None:
    """The batch's runners, or None where its cases have none (a full-cycle batch only); those kept
    with the batch by :func:`carry_runners` where there are such."""
    kept = getattr(batch, "carried_runners", None)
    if kept is not None:
        return kept
    if batch.simulation.mode != "full":
        return None
    cases = batch.cases
    sides = [side for side in SIDES if getattr(cases[0], "runners", {}).get(side) is not None]
    if not sides:
        return None
    for c in cases:
        if [side for side in SIDES if c.runners.get(side) is not None] != sides:
            raise ConfigError("runners: the cases of one batch must have runners on the same sides")
    return RunnerSet(batch, sides, None)
