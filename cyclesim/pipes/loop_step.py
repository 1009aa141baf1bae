"""The runners' crank step inside the compiled cycle loop (imported only where numba compiles).

A cycle loop generated with runners (:mod:`cyclesim.loops.loopgen`) calls :func:`crank_step` once
per case and crank step, before the step's stages, with the cylinder's state at the step's
start.  It does for that case what the numpy loop does between its steps
(:class:`cyclesim.solve.valve_source.RunnerCoupling` through :func:`cyclesim.pipes.advance_crank_step`):
the runners' pressures at the grid point are recorded, each runner's valve end is set from the
cylinder and the valves' effective area and the runner is advanced by the same compiled code
(:func:`cyclesim.pipes.coupling.runner_step_case`, :func:`cyclesim.pipes.scheme.advance_case`:
with its valve shut a runner steps on its own time, in whole sub-steps),
its valve totals are booked over the cycle and handed to the cylinder as constant rates over the
step (:func:`cyclesim.pipes.coupling.step_rates`, the function the numpy loop calls).

The runners' arrays come packed by :func:`pack` (one tuple per runner, the same types for
both; near its end the far end's reservoir pressure per crank step (B, N) [Pa] and a flag, set
it before the step where the far end follows a shared volume, the multi-cylinder engine's; last
the runner's lag behind the cylinder (B,) [s], :attr:`cyclesim.pipes.Pipes.lag`);
``src`` (8,) is the step's source the loop's right-hand side reads: per side
(intake at 0, exhaust at 4) a flag, the mass flow [kg/s], burned fraction [-] and enthalpy
[J/kg] of what comes in.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
from numba import njit

import cyclesim.kernel_ops as _kernel_ops
import cyclesim.pipes.scheme as s
from . import coupling as _coupling
from .coupling import runner_step_case
from .pipe import DEFAULT_END_ITERATIONS

_kernel_ops.register_compiled()
_step_rates = njit(inline="always", error_model="numpy")(_coupling.step_rates)

SIDE_SLOT = {"intake": 0, "exhaust": 1}
"""The side's slot in ``src`` (times 4) and in the valve areas."""
MAX_SUBSTEPS = 1_000_000
"""Sub-steps of one runner's advance before it gives up (as :func:`cyclesim.pipes.advance_crank_step`)."""


UNREACHED_SOURCES = ("_jit.py",)
"""Files of this folder the compiled crank step depends on that the walk of its calls
(:func:`cyclesim.loops.jit_cache.dependency_files`) cannot find: ``_jit.py`` holds the kernels'
decorator options (fast-math flags, the scalar ``where``), which are no function's code."""


def source_digest() -> str:
    """A hash of the sources the compiled crank step runs: every file of this package's functions
    that :func:`crank_step` reaches, transitively, and the values of the plain globals read on
    the way (:func:`cyclesim.loops.jit_cache.dependency_digest`), with the files of
    :data:`UNREACHED_SOURCES`.  Part of the generated loop's name, so an edited pipe kernel
    never runs on a stale compiled loop."""
    from ..loops import jit_cache

    h = hashlib.sha256(jit_cache.dependency_digest(crank_step).encode())
    for name in UNREACHED_SOURCES:
        path = str(Path(__file__).with_name(name))
        h.update(f"{name}:{jit_cache._file_hash(path)}\n".encode())
    return h.hexdigest()[:16]


def pack(runners, slots, cda, records, flows) -> tuple:
    """The runners' arrays for the compiled loop: ``(slots, cda, runners, records, flows)``.

    ``runners`` is a :class:`cyclesim.pipes.runners.RunnerSet`; ``slots`` (n_sides,) int64 the
    side slot of each (:data:`SIDE_SLOT`); ``cda`` (B, n_sides, N) the valves' effective areas per
    crank step [m^2]; ``records`` the arrays the pressures at the grid points go to
    (``p_valve`` (B, n_sides, N+1), the recorded cells' totals (n_sides, K, B, 4, N+1) and
    temperatures (n_sides, K, B, N+1) (:attr:`RunnerSet.record_cells`), the runners' mass and energy (B, n_sides, N+1) each);
    ``flows`` (B, n_sides, 5) the cycle's totals (into the cylinder: mass, enthalpy, burned mass;
    into the runner at its far end: mass, energy).  The runners' own arrays are passed, so the
    loop advances them in place."""
    B = runners.B
    rows = []
    for j, (pipe, end, rec) in enumerate(zip(runners.system.runners, runners.system.valve_ends,
                                             runners.record_cells)):
        far = runners.far_row(j)
        rows.append((pipe.Q, pipe.G, pipe.face_area, pipe.P, pipe.ends, pipe.C, pipe.T_cell, pipe.p_end,
                     pipe.steps_taken, pipe.fallback_steps, float(pipe.gas.t_mid_K), int(pipe.gas.newton_steps),
                     int(DEFAULT_END_ITERATIONS), int(end), rec, np.zeros((B, 2, s.NF)),
                     np.zeros(B, dtype=np.int64), np.zeros(B, dtype=np.int64), far, int(runners.far_pressure is not None),
                     pipe.lag))
    return (np.ascontiguousarray(slots, dtype=np.int64), np.ascontiguousarray(cda, dtype=float), tuple(rows),
            records, flows)


@njit(cache=True, error_model="numpy")
def crank_step(b, i, dur, p, T, Y, h_cyl, pipes, src):
    """Advance case ``b``'s runners over crank step ``i`` of ``dur`` [s] with the cylinder at ``p``
    [Pa], ``T`` [K], burned fraction ``Y`` [-] and enthalpy ``h_cyl`` [J/kg] (its state at the
    step's start); the step's source into ``src``.  False where a runner failed (the cycle then
    runs again on the numpy loop, which names the cause)."""
    slots, cda, runners, records, flows = pipes
    PV, QM, TM, MP, EP = records
    for j in range(slots.shape[0]):
        (Q, G, Af, P, E, C, Tc, Pe, taken, fell, t_mid, n_newton, n_iter, end, rec, acc, st, fb, far,
         far_on, lag) = runners[j]
        if far_on:                                 # the far end's reservoir follows a shared volume
            E[b, 1 - end, s.E_P] = far[b, i]
        # the runner at grid point i (RunnerCoupling.record): its recorded cells (middle, stations)
        for r in range(rec.shape[1]):
            c = rec[b, r]
            for q in range(s.NQ):
                QM[j, r, b, q, i] = Q[b, q, c]
            TM[j, r, b, i] = Tc[b, c]
        PV[b, j, i] = Pe[b, 0]
        m_sum = 0.0
        e_sum = 0.0
        for c in range(Q.shape[2]):
            m_sum += Q[b, s.MASS, c]
            e_sum += Q[b, s.ENERGY, c]
        MP[b, j, i] = m_sum
        EP[b, j, i] = e_sum
        for e in range(2):
            for f in range(s.NF):
                acc[b, e, f] = 0.0
        st[b] = 0
        fb[b] = 0
        why = runner_step_case(b, Q, G, Af, P, E, C, Tc, Pe, t_mid, n_newton, n_iter, dur, MAX_SUBSTEPS, end,
                               cda[b, j, i], p, T, Y, acc, st, fb, lag, far_on == 0)
        if why >= 0:
            return False
        taken[b] += st[b]
        fell[b] += fb[b]
        mass = -acc[b, end, s.F_MASS]              # out of the pipe through the valve: into the cylinder
        enth = -acc[b, end, s.F_ENERGY]
        burned = -acc[b, end, s.F_BURNED]
        flows[b, j, 0] += mass
        flows[b, j, 1] += enth
        flows[b, j, 2] += burned
        flows[b, j, 3] += acc[b, 1 - end, s.F_MASS]
        flows[b, j, 4] += acc[b, 1 - end, s.F_ENERGY]
        mdot, y_in, h_in = _step_rates(mass, enth, burned, dur, Y, h_cyl)
        o = 4 * slots[j]
        src[o] = 1.0
        src[o + 1] = mdot
        src[o + 2] = y_in
        src[o + 3] = h_in
    return True
