"""The compiled cycle loop's template (imported only when numba is installed).

The Runge-Kutta loop of :func:`cyclesim.solve.solver.integrate` and the right-hand side
:func:`_rhs`, written case by case in scalars for numba.  The submodels' physics is not here:
each role's call site (``# KERNEL CALL``, ``# STATE KERNEL CALLS``) holds a stand-in, and
:mod:`cyclesim.loops.loopgen` writes a module per combination of models with their own kernels called
there (the functions the Python path runs on arrays).  The Python path stays the reference:
``tests/test_kernel.py`` checks the two agree.

Status per case on return: 0 finished; 1 the state or a derivative stopped being
finite or physical (the caller then re-runs the cycle on the Python path, which
names the cause).  Arithmetic follows numpy's rules (``error_model="numpy"``): a division
by zero gives inf or NaN, as on the Python path, instead of raising.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

import cyclesim.kernel_ops as _kernel_ops
import cyclesim.loops.filling as _filling
from .layout import CORE_ROWS as _S
from . import zone_solve as _zone_solve
from .jit_cache import install as _install_jit_cache
from .layout import block_rows, param_rows

_install_jit_cache()              # disk caches stamped with the callees' files (cyclesim.loops.jit_cache)
_kernel_ops.register_compiled()   # the kernels of kernel_ops (orifice flow, gas tables) on floats

# -- what the loop covers: the compiled forms, by role, and the packed-parameter rows of each --
# A model gives kernels (or declares ``compiled_form`` "none" / a valve or plenum form below) and
# ``pack()``, which returns its parameter arrays by name; cyclesim.solve.kernel fills the rows from
# those names.  The row numbers are resolved here once, at import (numba reads them as constants).
KERNEL_PARAMS = 32
"""Most packed parameters of a model given as kernels (form ``kernel``: its kernel and its state
kernel together, see cyclesim.loops.loopgen)."""
KSLOTS = tuple(f"k{i}" for i in range(KERNEL_PARAMS))
FORMS = {
    "burn": {"kernel": KSLOTS, "none": ()},
    "heat_transfer": {"kernel": KSLOTS, "heat_flow_kernel": KSLOTS, "none": ()},
    "blowby": {"kernel": KSLOTS, "none": ()},
    "knock": {"none": (), "kernel": KSLOTS},
    "valve_flow": {"none": (), "poppet": ()},
    "boundary": {"constant": (), "pressure_trace": ()},
}
"""The compiled forms by role and their packed-parameter rows: a model's kernels fill the role's
slots in the order they name their parameters (cyclesim.loops.loopgen.param_rows_for)."""

# rows of the per-case constant array CB (see cyclesim.solve.kernel.Compiled): named blocks, in order
N_P = sum(max(len(v) for v in FORMS[r].values()) for r in ("burn", "heat_transfer", "blowby", "knock"))
"""Submodel parameter rows: each role's block as long as its longest form (one form per role)."""
ROWS, N_ROWS = block_rows((
    ("omega", 1), ("Sp", 1), ("T_wall", 3), ("eta", 1), ("dh298", 1), ("buf_scale", 1), ("plenum", 11),
    ("params", N_P), ("ivc", 3), ("ivc_deg", 1), ("V_at_ivc", 1), ("zones", 6),
))
R_OMEGA, R_SP, R_TW, R_ETA, R_DH, R_BUF, R_PLEN, R_P, R_IVC, R_IVC_DEG, R_V_AT_IVC, R_ZONE = ROWS.values()
# the two-zone block (simulation.zones: two, cyclesim.loops.zones.ZoneTables): the unburned zone's gas
# constants (fresh charge, burned gas) [J/(kg K)], its entropy tables' first temperature [K], step [K]
# and length, and 1 where the charge burns (0 for a fuel cut)
R_ZONE_RF, R_ZONE_RR, R_ZONE_T0, R_ZONE_DT, R_ZONE_N, R_ZONE_FLAME = range(R_ZONE, R_ZONE + 6)
PARAM_ROWS = param_rows(FORMS, ("burn", "heat_transfer", "blowby", "knock"))
"""(role, form) -> {parameter name: row offset from R_P}."""
# the plenum block: intake (p, T, y_b, R, gamma, h), exhaust (p, T, R, gamma, h)
PL_PI, PL_TI, PL_YI, PL_RI, PL_GI, PL_HI, PL_PE, PL_TE, PL_RE, PL_GE, PL_HE = range(R_PLEN, R_PLEN + 11)
R_IVC_P, R_IVC_T, R_IVC_V = R_IVC, R_IVC + 1, R_IVC + 2          # the IVC state: p [Pa], T [K], V [m^3]
R_TW_HEAD, R_TW_PISTON, R_TW_LINER = R_TW, R_TW + 1, R_TW + 2     # wall temperatures [K]
# the integer array IC: the gas table width (a submodel's states have rows of their own, constants
# of the loop generated for them)
IC_ROWS, N_IC = block_rows((("gas_nRm1", 1),))
IC_NRM1 = IC_ROWS["gas_nRm1"]
# core state rows by name (cyclesim.loops.layout.CORE)
(S_M, S_T, S_MB, S_XB, S_W, S_QW, S_MBB, S_HBB, S_MUBB, S_MINT, S_HINT, S_MUINT, S_MEXH, S_HEXH, S_MUEXH,
 S_QBURN, S_MQ, S_MBQ, S_HQ) = _S.values()
CYCLE_END_DEG = 360.0


_mix_at = njit(cache=True, inline="always", error_model="numpy")(_zone_solve.mix_at)
"""GasTables.mixture at one point of case b: (u, u_T, u_lnrho, u_y, R, R_T, R_lnrho, R_y, cp, gamma),
by the tables' arithmetic (:func:`cyclesim.loops.zone_solve.mix_at`, its one source)."""


def _register_zone_helpers() -> None:
    """The compiled forms of the helpers of :mod:`cyclesim.loops.zone_solve` (the gas tables of one
    case, a cell index, a point's own any/all) and its functions as jitable, so that the generated
    loops and the burned-zone kernels call the same source on floats."""
    from numba.core import types
    from numba.extending import overload, register_jitable

    zs = _zone_solve
    if getattr(zs, "_compiled_registered", False):
        return

    @overload(zs.burned_gas)
    def _burned_gas(gas, T, rho):
        if isinstance(gas, types.BaseTuple):
            def impl(gas, T, rho):
                r = _mix_at(gas[0], gas[1], gas[2], gas[3], gas[4], gas[5], T, rho, 1.0)
                return r[0], r[1], r[2], r[4], r[5], r[6]
            return impl
        return None

    @overload(zs.mixture_gas)
    def _mixture_gas(gas, T, rho, y):
        if isinstance(gas, types.BaseTuple):
            def impl(gas, T, rho, y):
                r = _mix_at(gas[0], gas[1], gas[2], gas[3], gas[4], gas[5], T, rho, y)
                return r[0], r[1]
            return impl
        return None

    @overload(zs.cell_index)
    def _cell_index(x):
        if isinstance(x, types.Number):
            return lambda x: int(x)
        return None

    for helper in (zs.any_true, zs.all_true):
        @overload(helper)
        def _own(c):
            if isinstance(c, types.Boolean):
                return lambda c: c
            return None

    for fn in (zs.solve_T_p_from, zs.solve_T_p, zs.zone_phi, zs.unburned_T, zs.solve, zs.unburned_fraction_burned,
               zs.cylinder_zones, zs.burned_volume, zs.unburned_R, zs.unburned_heat_share, zs.zone_rates):
        register_jitable(fn)
    zs._compiled_registered = True


_register_zone_helpers()


@njit(cache=True, error_model="numpy")
def _mixture(gas_tab, off, gc, nRm1, uc4, b, T, rho, y, out):
    """Mixture properties into out: [u, R, u_T, u_lnrho, u_y, cp, gamma]."""
    u, u_T, u_lnrho, u_y, R, _, _, _, cp, gamma = _mix_at(gas_tab, off, gc, nRm1, uc4, b, T, rho, y)
    out[0] = u
    out[1] = R
    out[2] = u_T
    out[3] = u_lnrho
    out[4] = u_y
    out[5] = cp
    out[6] = gamma


@njit(cache=True, inline="always", error_model="numpy")
def _outflow(cda, p0, T0, R0, g0, pd, dp_lin):
    """Isentropic orifice flow from stagnation p0, T0 to pd <= p0: :func:`cyclesim.kernel_ops.outflow`
    (its one source, compiled)."""
    return _kernel_ops.outflow(cda, p0, T0, R0, g0, pd, dp_lin)


@njit(cache=True, inline="always", error_model="numpy")
def _orifice(cda, p1, T1, R1, g1, p2, T2, R2, g2, dp_lin):
    """Signed flow from side 1 to side 2: :func:`cyclesim.kernel_ops.orifice_flow` (its one
    source, compiled)."""
    if cda == 0.0:
        return 0.0   # a shut valve (the Python path skips it too)
    return _kernel_ops.orifice_flow(cda, p1, T1, R1, g1, p2, T2, R2, g2, dp_lin)


def _rhs(b, theta, yv, out, flows, V, dV, Ah, Ap, Al, closed, burning, Ai, Ae, p_i, p_e, CB, IC, TB, TO,
         gas_tab, gas_off, gc, uc4, mix, src):
    """Derivatives of case b into out; False where they are not finite.

    CB (rows x B) holds the per-case constants (row numbers R_*), IC the model codes and
    state rows; TB the batch-wide arrays of the models' ``pack()`` end to end, array k being
    ``TB[TO[k]:TO[k + 1]]`` (cyclesim.loops.layout.shared_blocks); src (8,) the crank step's valve
    flows of the sides with a runner (cyclesim.pipes.loop_step; a zero flag: the valve model's)."""
    n = yv.shape[0]
    m = yv[S_M]
    T = yv[S_T]
    mb = yv[S_MB]
    xb = yv[S_XB]
    if not (math.isfinite(m) and math.isfinite(T)):
        return False
    rho = m / V
    yb = min(max(mb / m, 0.0), 1.0)
    _mixture(gas_tab, gas_off[b], gc, IC[IC_NRM1], uc4, b, T, rho, yb, mix)
    u = mix[0]
    R = mix[1]
    u_T = mix[2]
    u_lnrho = mix[3]
    u_y = mix[4]
    cp = mix[5]
    gamma = mix[6]
    RT = R * T
    p = rho * RT
    h = u + RT
    # two zones (simulation.zones: two): their pressure and temperatures, the enthalpy of the gas
    # that leaves (cyclesim.loops.loopgen writes the solve of cyclesim.loops.zone_solve here)
    T_u = 0.0  # ZONE SOLVE
    om = CB[R_OMEGA, b]
    sp = CB[R_SP, b]
    dt = 1.0 / om
    for k in range(n):
        out[k] = 0.0
    # burn: the model's kernel, dx_b/dtheta [1/deg] (cyclesim.loops.loopgen writes its call in)
    dm_burn = 0.0
    if burning:
        dxb = burn_kernel(theta)  # KERNEL CALL burn
        dm_burn = burned_mass_rate(CB[R_ETA, b], dxb, xb, m, mb)
        out[S_XB] = dxb
        out[S_QBURN] = dm_burn * CB[R_DH, b]
    # wall heat [W] and blowby [kg/s, outflow only]: the models' kernels
    Qw = heat_flow_kernel(T)  # KERNEL CALL heat_transfer
    mbb = blowby_kernel(p)  # KERNEL CALL blowby
    fbb = max(mbb, 0.0) * dt
    out[S_MBB] = fbb
    # the valves (a shut one moves nothing) and the intake-port buffer
    fi = 0.0
    fe = 0.0
    yin_i = yb
    hin_i = h
    yin_e = yb
    hin_e = h
    if flows:
        if src[0] != 0.0:
            # an intake runner's crank step at constant rates, no port buffer (cyclesim.solve.valve_source)
            fi = src[1] * dt
            yin_i = src[2]
            hin_i = src[3]
        else:
            if Ai != 0.0:
                fi = orifice_flow(Ai, p_i, CB[PL_TI, b], CB[PL_RI, b], CB[PL_GI, b], p, T, R, gamma, gc[8]) * dt
            yin_i, hin_i, out[S_MQ], out[S_MBQ], out[S_HQ] = port_buffer(
                fi, yv[S_MQ], yv[S_MBQ], yv[S_HQ], CB[R_BUF, b], CB[PL_YI, b], CB[PL_HI, b], yb, h)
        if src[4] != 0.0:
            fe = src[5] * dt
            yin_e = src[6]
            hin_e = src[7]
        else:
            if Ae != 0.0:
                fe = orifice_flow(Ae, p_e, CB[PL_TE, b], CB[PL_RE, b], CB[PL_GE, b], p, T, R, gamma, gc[8]) * dt
            yin_e, hin_e = exhaust_inflow(fe, CB[PL_HE, b], yb, h)
        out[S_MINT] = fi
        out[S_MEXH] = fe
        out[S_MUINT] = fi * (1.0 - yin_i)
        out[S_MUEXH] = fe * (1.0 - yin_e)
    dQ = Qw * dt
    out[S_QW] = dQ
    out[S_M], out[S_T], out[S_MB], out[S_W], out[S_HBB], out[S_HINT], out[S_HEXH] = first_law(
        m, V, dV, p, u, u_T, u_lnrho, u_y, yb, h, dm_burn, fi, yin_i, hin_i, fe, yin_e, hin_e, fbb, dQ)
    out[S_MUBB] = fbb * (1.0 - yb)
    pass  # ZONE RATES
    # submodel states: each model's state kernel (cyclesim.loops.loopgen writes their calls here)
    pass  # STATE KERNEL CALLS
    for k in range(n):
        if not math.isfinite(out[k]):
            return False
    return True


def run_cycle(full, grid, masks, valves, state, consts, gas, tableau, b0, b1, pipes=None):
    """One cycle of cases b0..b1-1 by the Runge-Kutta tableau on the grid, as the Python loop.

    The inputs come in groups (tuples, see ``cyclesim.solve.kernel.Compiled``):

    - grid: (th, steps, Vp, dVp, Ahp, App, Alp, geo_rows): the points, the steps, the geometry
      per point and distinct engine, and each case's engine;
    - masks: (closed_pts, burning_pts, open_at) per point (and case);
    - valves: (Ai_pts, Ae_pts, PI, PE): effective valve areas and plenum pressures [Pa] per point
      and case (PI, PE one row (1 x B) where they are constant);
    - state: (y, Y, F, status): the start state, the trace arrays written, the per-case status;
    - consts: (CB, IC, reset, TB, TO): per-case constants, integer codes and rows, the IVC resets
      (row 0 the kind per state row, row 1 + b case b's value),
      the batch-wide arrays end to end and their bounds;
    - gas: (gas_tab, gas_off, gc, uc4): the property tables;
    - tableau: (tA, ta_den, tb, tb_den, tnode): cyclesim.loops.tableau.Tableau.arrays (the loop
      reads the stage count and the nodes; the coefficients are constants of its stage functions).
    - pipes: the runners (cyclesim.pipes.loop_step.pack), read only by a loop generated with them.

    Cases touch only their own columns, so two threads may run disjoint ranges of one batch
    (the GIL is released)."""
    th, steps, Vp, dVp, Ahp, App, Alp, geo_rows = grid
    closed_pts, burning_pts, open_at = masks
    Ai_pts, Ae_pts, PI, PE = valves
    y, Y, F, status = state
    CB, IC, reset, TB, TO = consts
    gas_tab, gas_off, gc, uc4 = gas
    tA, ta_den, tb, tb_den, tnode = tableau
    n, B = y.shape
    vary = PI.shape[0] > 1
    N = steps.shape[0]
    yv = np.empty(n)
    yt = np.empty(n)
    S = tA.shape[0]
    K = np.empty((S, n))
    mix = np.empty(7)
    src = np.zeros(8)           # the step's valve flows from the runners (none: all zero)
    for b in range(b0, b1):
        status[b] = 0
        g = geo_rows[b]          # the case's column of the geometry arrays
        for k in range(n):
            yv[k] = y[k, b]
        for i in range(N + 1):
            hs = steps[i] if i < N else 0.0
            # RUNNER STEP (a loop generated with runners advances them here: cyclesim.loops.loopgen)
            # END RUNNER STEP
            # the stages at the grid's points (only the start at the last point)
            for st in range(S if i < N else 1):
                j = 2 * i + tnode[st]
                if st == 0:
                    for k in range(n):
                        yt[k] = yv[k]
                else:
                    # STAGE COMBINATION (cyclesim.loops.loopgen writes the tableau's rows in here: a
                    # call per stage of the functions cyclesim.loops.tableau.stage_source generates)
                    pass
                    # END STAGE COMBINATION
                jp = j if vary else 0
                ok = _rhs(b, th[j], yt, K[st], full and (open_at[j] or src[0] != 0.0 or src[4] != 0.0), Vp[j, g],
                          dVp[j, g], Ahp[j, g], App[j, g], Alp[j, g], closed_pts[j, b], burning_pts[j, b],
                          Ai_pts[j, b], Ae_pts[j, b], PI[jp, b], PE[jp, b], CB, IC, TB, TO, gas_tab, gas_off, gc,
                          uc4, mix, src)
                if not ok:
                    status[b] = 1
                    break
                if st == 0:
                    for k in range(n):
                        Y[k, b, i] = yv[k]
                        F[k, b, i] = K[0, k]
            if status[b] != 0 or i == N:
                break
            # STEP COMBINATION (cyclesim.loops.loopgen writes the step's function call in here)
            pass
            # END STEP COMBINATION
            m_ = yv[S_M]
            T_ = yv[S_T]
            if not (m_ > 0.0 and m_ < math.inf and T_ > 50.0 and T_ < 8000.0):
                status[b] = 1
                break
            if full:
                t0 = th[2 * i]
                iv = CB[R_IVC_DEG, b]
                if iv > t0 and iv <= th[2 * i + 2]:
                    w = (iv - t0) / hs
                    Vi = CB[R_V_AT_IVC, b]
                    Ti = (1 - w) * Y[S_T, b, i] + w * yv[S_T]
                    mi_ = (1 - w) * Y[S_M, b, i] + w * yv[S_M]
                    ybi = min(max(((1 - w) * Y[S_MB, b, i] + w * yv[S_MB]) / mi_, 0.0), 1.0)
                    rhoi = mi_ / Vi
                    _mixture(gas_tab, gas_off[b], gc, IC[IC_NRM1], uc4, b, Ti, rhoi, ybi, mix)
                    CB[R_IVC_P, b] = rhoi * mix[1] * Ti
                    CB[R_IVC_T, b] = Ti
                    CB[R_IVC_V, b] = Vi
                    for k in range(n):
                        if reset[0, k] == 1.0:
                            yv[k] = yv[S_T]
                        elif reset[0, k] == 2.0:
                            yv[k] = reset[1 + b, k]


# -- the multi-cylinder engine's manifolds (cyclesim.engine.manifolds) ---------------

_filling.register_compiled()
manifold_lap = njit(cache=True, error_model="numpy")(_filling.lap)
"""One implicit-Euler lap of manifold pressures (rows): :func:`cyclesim.loops.filling.lap`, its one
source, compiled (its disk cache stamped with filling.py and the files it calls into)."""


# -- gas properties at many points (post-processing and the trace analyser) ------------


@njit(cache=True, error_model="numpy")
def mixture_points(gas_tab, gas_off, gc, nRm1, uc4, case, T, rho, y, out):
    """cyclesim.solve.gas_tables.GasTables.mixture at N points, case ``case[k]``'s tables for point k.

    out (11, N): the MixProps fields u, u_T, u_lnrho, u_y, R, R_T, R_lnrho, R_y, cv, cp, gamma.
    """
    for k in range(T.shape[0]):
        b = case[k]
        u, u_T, u_lnrho, u_y, R, R_T, R_lnrho, R_y, cp, gamma = _mix_at(
            gas_tab, gas_off[b], gc, nRm1, uc4, b, T[k], rho[k], y[k])
        out[0, k] = u
        out[1, k] = u_T
        out[2, k] = u_lnrho
        out[3, k] = u_y
        out[4, k] = R
        out[5, k] = R_T
        out[6, k] = R_lnrho
        out[7, k] = R_y
        out[8, k] = u_T          # cv
        out[9, k] = cp
        out[10, k] = gamma
