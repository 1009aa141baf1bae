"""A batch of pipes: geometry, state, end conditions and the sub-stepped advance.

All cases of a batch have the same cell count; every other quantity (length,
diameters, wall, gas, end conditions, time span) may differ per case.  SI inside.
"""

from __future__ import annotations

import numpy as np

from ..errors import ConfigError
import cyclesim.pipes.kernels as k
import cyclesim.pipes.scheme as s
from .gas import PipeGas, constant_gamma

DEFAULT_END_ITERATIONS = 30
"""Most steps of the end-pressure solve (safeguarded secant from the end's last pressure, see
:func:`cyclesim.pipes.kernels.end_state`); compiled, it stops at its tolerance, typically after
two or three; conservation does not depend on it."""


def _per_case(name, value, B, positive=True, allow_zero=False):
    a = np.broadcast_to(np.asarray(value, dtype=float), (B,)).copy()
    if not np.all(np.isfinite(a)):
        raise ConfigError(f"pipe: {name} must be finite")
    if positive and (np.any(a < 0) if allow_zero else np.any(a <= 0)):
        raise ConfigError(f"pipe: {name} must be {'>= 0' if allow_zero else '> 0'} (got {a.min():g})")
    return a


class Pipes:
    """A batch of B straight or tapered round pipes of ``n_cells`` equal cells.

    Parameters
    ----------
    length_m : array_like (B,) or scalar
        Pipe length [m].
    diameter_in_m, diameter_out_m : array_like
        Diameter at x = 0 and at x = L [m] (linear taper; ``diameter_out_m`` None: straight).
    n_cells : int
        Cells per pipe (at least 4).
    gas : PipeGas, optional
        Default: air as a constant-gamma gas, gamma 1.4, R 287.05 J/(kg K).
    roughness_m : array_like
        Wall roughness height [m] (0: smooth).
    wall_temperature_K : array_like
        Wall temperature for the heat transfer [K].
    friction_scale, heat_scale : array_like
        Multipliers of the Fanning factor and of the wall heat (0 turns either off).
    bend_loss : array_like
        Total loss coefficient K of bends along the pipe [-], spread over its length.
    prandtl : array_like
        Prandtl number of the gas for the Reynolds analogy [-] (0.7: common practice for air).
    cfl : array_like
        Courant number of the sub-steps on the cells' largest ``|u| + c`` (0 < cfl <= 0.9).
        Where a cell's second-order update would lose positivity the scheme falls
        back to first order there (:mod:`cyclesim.pipes.scheme`).
    fixed_fanning : array_like
        A constant Fanning factor instead of f(Re, roughness) where > 0 [-].
    """

    def __init__(self, length_m, diameter_in_m, n_cells, diameter_out_m=None, gas: PipeGas | None = None,
                 roughness_m=0.0, wall_temperature_K=300.0, friction_scale=1.0, heat_scale=1.0,
                 bend_loss=0.0, prandtl=0.7, cfl=0.8, fixed_fanning=0.0, n_cases: int | None = None):
        B = n_cases or max(np.size(length_m), np.size(diameter_in_m), 1 if gas is None else gas.B)
        if int(n_cells) != n_cells or n_cells < 4:
            raise ConfigError(f"pipe: n_cells must be a whole number >= 4 (got {n_cells})")
        N = int(n_cells)
        self.B, self.N = B, N
        L = _per_case("length_m", length_m, B)
        d0 = _per_case("diameter_in_m", diameter_in_m, B)
        d1 = d0 if diameter_out_m is None else _per_case("diameter_out_m", diameter_out_m, B)
        cfl = _per_case("cfl", cfl, B)
        if np.any(cfl > 0.9):
            raise ConfigError(f"pipe: cfl must be <= 0.9 (got {cfl.max():g})")
        self.gas = gas if gas is not None else constant_gamma(1.4, 287.05, B)
        if self.gas.B != B:
            raise ConfigError(f"pipe: the gas has {self.gas.B} cases, the pipes {B}")
        self.length_m = L
        self.dx = L / N
        xf = np.linspace(0.0, 1.0, N + 1)
        d_face = d0[:, None] + (d1 - d0)[:, None] * xf
        self.face_area = np.pi / 4.0 * d_face ** 2                     # (B, N+1)
        # frustum volume of each cell, its mean area and equivalent diameter
        da, db = d_face[:, :-1], d_face[:, 1:]
        self.volume = np.pi / 12.0 * (da * da + da * db + db * db) * self.dx[:, None]
        a_mean = self.volume / self.dx[:, None]
        G = np.empty((B, s.NG, N))
        G[:, s.G_VOLUME] = self.volume
        G[:, s.G_AREA_SLOPE] = (self.face_area[:, 1:] - self.face_area[:, :-1]) / (self.dx[:, None] * a_mean)
        G[:, s.G_DIAMETER] = np.sqrt(4.0 * a_mean / np.pi)
        G[:, s.G_ROUGH_TERM] = k.roughness_term(_per_case("roughness_m", roughness_m, B, allow_zero=True)[:, None]
                                                / G[:, s.G_DIAMETER])
        self.G = G
        P = np.empty((B, s.NP))
        P[:, s.P_DX] = self.dx
        P[:, s.P_FRICTION] = _per_case("friction_scale", friction_scale, B, allow_zero=True)
        P[:, s.P_FIXED_FANNING] = _per_case("fixed_fanning", fixed_fanning, B, allow_zero=True)
        P[:, s.P_LOSS_PER_LENGTH] = _per_case("bend_loss", bend_loss, B, allow_zero=True) / L
        P[:, s.P_WALL_T] = _per_case("wall_temperature_K", wall_temperature_K, B)
        P[:, s.P_COLBURN] = _per_case("prandtl", prandtl, B) ** (-2.0 / 3.0)
        P[:, s.P_HEAT] = _per_case("heat_scale", heat_scale, B, allow_zero=True)
        P[:, s.P_CFL] = cfl
        P[:, s.P_R_FRESH] = self.gas.R[:, 0]
        P[:, s.P_R_BURNED] = self.gas.R[:, 1]
        self.P = P
        self.C = np.ascontiguousarray(self.gas.coef)
        self.Q = np.zeros((B, s.NQ, N))
        self.T_cell = np.full((B, N), 300.0)          # each cell's last temperature [K]: its Newton start
        self.p_end = np.zeros((B, 2))                 # each end's last pressure [Pa]: its solve's start
        self.ends = closed_ends(B)
        self.lag = np.zeros(B)
        """Time [s] by which the state lags behind a coupled cylinder's: crank steps with the valve
        shut are taken in whole sub-steps (:func:`cyclesim.pipes.coupling.runner_step_case`)."""
        self.steps_taken = np.zeros(B, dtype=np.int64)
        self.fallback_steps = np.zeros(B, dtype=np.int64)

    # -- state ------------------------------------------------------------------------------
    def set_state(self, pressure_pa, temperature_K, velocity_m_per_s=0.0, burned_fraction=0.0):
        """Set every cell from primitive values, each broadcast to (B, N)."""
        shp = (self.B, self.N)
        p = np.broadcast_to(np.asarray(pressure_pa, float), shp)
        T = np.broadcast_to(np.asarray(temperature_K, float), shp)
        u = np.broadcast_to(np.asarray(velocity_m_per_s, float), shp)
        Y = np.broadcast_to(np.asarray(burned_fraction, float), shp)
        if np.any(~np.isfinite(p) | (p <= 0)) or np.any(~np.isfinite(T) | (T <= 0)):
            raise ConfigError("pipe: pressure and temperature must be finite and > 0")
        if np.any((Y < 0) | (Y > 1)):
            raise ConfigError("pipe: burned_fraction must be within 0..1")
        Rf, Rb = self.gas.R[:, :1], self.gas.R[:, 1:]
        R = k.mixture_R(Y, Rf, Rb)
        rho = p / (R * T)
        e, _ = k.energy(T, Y, *self._coef_np(), self.gas.t_mid_K)
        m = rho * self.volume
        self.Q[:, s.MASS] = m
        self.Q[:, s.MOMENTUM] = m * u
        self.Q[:, s.ENERGY] = m * (e + 0.5 * u * u)
        self.Q[:, s.BURNED] = m * Y
        self.T_cell = np.ascontiguousarray(T, dtype=float).copy()
        self.p_end = np.zeros((self.B, 2))

    def _coef_np(self):
        return (np.moveaxis(self.C[:, 0], 0, -1)[..., None], np.moveaxis(self.C[:, 1], 0, -1)[..., None])

    def primitives(self) -> dict:
        """Cell values (B, N): ``density_kg_m3``, ``velocity_m_s``, ``pressure_pa``, ``burned_fraction``,
        ``temperature_K``, ``gamma``, ``sound_speed_m_s``."""
        Q = self.Q
        cf, cb = self._coef_np()
        out = k.primitives(Q[:, s.MASS], Q[:, s.MOMENTUM], Q[:, s.ENERGY], Q[:, s.BURNED], self.volume,
                           cf, cb, self.gas.R[:, :1], self.gas.R[:, 1:], self.gas.t_mid_K,
                           self.gas.newton_steps, self.T_cell)
        names = ("density_kg_m3", "velocity_m_s", "pressure_pa", "burned_fraction", "temperature_K",
                 "gamma", "sound_speed_m_s")
        return dict(zip(names, out))

    def totals(self) -> dict:
        """Contents per case (B,): ``mass_kg``, ``energy_J``, ``burned_mass_kg``, ``momentum_kg_m_s``."""
        return {"mass_kg": self.Q[:, s.MASS].sum(1), "energy_J": self.Q[:, s.ENERGY].sum(1),
                "burned_mass_kg": self.Q[:, s.BURNED].sum(1), "momentum_kg_m_s": self.Q[:, s.MOMENTUM].sum(1)}

    # -- time -------------------------------------------------------------------------------
    def advance(self, duration_s, ends=None, end_iterations: int = DEFAULT_END_ITERATIONS,
                max_steps: int = 1_000_000) -> dict:
        """Advance every case by its ``duration_s`` in CFL sub-steps with fixed end conditions.

        Parameters
        ----------
        duration_s : array_like (B,) or scalar
            Time to advance [s] (0 leaves a case unchanged).
        ends : ndarray (B, 2, NE), optional
            End conditions (:func:`closed_ends`, :func:`set_end`); default those last set.

        Returns
        -------
        dict of ndarray
            Integrated over the interval, into the pipe through end 0 (x = 0) and
            end 1 (x = L), shape (B, 2): ``mass_kg``, ``energy_J``,
            ``burned_mass_kg``; and ``steps`` (B,), the sub-steps taken.  The
            pipe's contents change by exactly the sum of the two ends' entries (to
            rounding), so a coupled volume that books the opposite stays conservative;
            ``fallback_steps`` (B,), the sub-steps that took the first-order
            positivity fallback in some cells (:mod:`cyclesim.pipes.scheme`).
        """
        dur = _per_case("duration_s", duration_s, self.B, allow_zero=True)
        if ends is not None:
            self.ends = np.ascontiguousarray(ends, dtype=float)
        acc, steps, fallbacks = s.advance_arrays(self.Q, self.G, self.face_area, self.P, self.ends, self.C,
                                                 self.T_cell, self.p_end, self.gas.t_mid_K, self.gas.newton_steps,
                                                 end_iterations, dur, max_steps)
        self.steps_taken += steps
        self.fallback_steps += fallbacks
        return {"mass_kg": acc[:, :, s.F_MASS], "energy_J": acc[:, :, s.F_ENERGY],
                "burned_mass_kg": acc[:, :, s.F_BURNED], "steps": steps, "fallback_steps": fallbacks}


def closed_ends(n_cases: int) -> np.ndarray:
    """End conditions (B, 2, NE) with both ends closed (a nozzle of zero area)."""
    E = np.zeros((n_cases, 2, s.NE))
    E[:, :, s.E_P] = 1e5
    E[:, :, s.E_T] = 300.0
    return E


def set_end(ends, end, cda_m2, pressure_pa, temperature_K, burned_fraction=0.0, entry_loss=0.0):
    """Set end ``end`` (0 at x = 0, 1 at x = L) of ``ends`` (B, 2, NE) in place; returns ``ends``.

    A nozzle (valve, throttle) of effective area ``cda_m2`` [m^2] to a reservoir of
    stagnation pressure [Pa], temperature [K] and burned fraction; an open end to a
    plenum or ambient is ``cda_m2`` equal to the pipe end's area, with an optional
    ``entry_loss`` coefficient on inflow [-] (dynamic heads of stagnation
    pressure lost); ``cda_m2 = 0`` closes the end.
    """
    B = ends.shape[0]
    ends[:, end, s.E_CDA] = _per_case("cda_m2", cda_m2, B, allow_zero=True)
    ends[:, end, s.E_P] = _per_case("pressure_pa", pressure_pa, B)
    ends[:, end, s.E_T] = _per_case("temperature_K", temperature_K, B)
    y = _per_case("burned_fraction", burned_fraction, B, allow_zero=True)
    if np.any(y > 1):
        raise ConfigError("pipe: burned_fraction must be within 0..1")
    ends[:, end, s.E_Y] = y
    ends[:, end, s.E_K] = _per_case("entry_loss", entry_loss, B, allow_zero=True)
    return ends
