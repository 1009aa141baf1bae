"""The two-zone cylinder's solve and the burned gas at a pressure, written once in kernel form.

Every function here is plain elementwise arithmetic (the pattern of :mod:`cyclesim.kernel_ops`):
the numpy loop (:class:`cyclesim.solve.solver._RHS`, through :mod:`cyclesim.loops.zones`) and the
post-processing run it on arrays of any shape, the compiled cycle loop (a module written by
:mod:`cyclesim.loops.loopgen`) and the burned-zone kernels (:mod:`cyclesim.combustion.zone_kernels`)
on floats.  The few operations that differ between the two are the helpers below, whose compiled
forms :mod:`cyclesim.loops._compiled` registers with numba (as :func:`cyclesim.kernel_ops.where`):

* :func:`burned_gas`, :func:`mixture_gas`: the gas tables.  ``gas`` is a
  :class:`cyclesim.solve.gas_tables.GasTables` on arrays, or the tuple ``(gas_tab, offset, gc,
  nRm1, uc4, b)`` of one case's tables (:meth:`GasTables._compiled_consts` with the case's offset
  and index) on floats, compiled or not;
* :func:`cell_index` (a table cell's index), :func:`any_true` / :func:`all_true` (whether any / all
  points need a step: on arrays the batch's, on floats the point's own; a skipped step is one
  whose result is masked, so it changes no value).

The physics and its notes are in :mod:`cyclesim.loops.zones`.  SI units.
"""

from __future__ import annotations

import numpy as np

from ..kernel_ops import along_lnrho, blend, fresh_charge_poly, frozen_cp_gamma, hermite_cubic, table_coords, where

X_BIRTH = 1e-3
"""Burned-zone mass fraction [-] below which the zone is born at the flame temperature."""

X_MERGE = 0.999
"""Burned-zone mass fraction [-] above which the two zones merge into one."""

X_BORN = 1e-12
"""Burned-zone mass fraction [-] from which the zone exists."""

OPEN_FADE_DEG = 5.0
"""Crank angle [deg] over which the burned-zone mass fades while the valves are open."""

NEWTON_P = 8
"""Most Newton passes on ln p of the two-zone solve."""

TOL_LNP = 1e-13
"""Step in ln p [-] below which the two-zone solve has converged (the pressure to 1e-13)."""

NEWTON_T = 4
"""Most Newton passes on the unburned-zone temperature per pressure pass."""

TOL_T = 1e-11
"""Relative tolerance of the burned-gas temperature solves [-]."""

# -- the gas tables at one point (scalars) and on arrays ------------------------------------
def mix_at(gas_tab, off, gc, nRm1, uc4, b, T, rho, y):
    """GasTables.mixture at one point of case b (floats): (u, u_T, u_lnrho, u_y, R, R_T, R_lnrho,
    R_y, cp, gamma) [SI], by the tables' arithmetic in :mod:`cyclesim.kernel_ops` (as the numpy
    lookup): the burned gas's cubic Hermite cells in T, linear in ln(rho), and the fresh charge's
    NASA-7 polynomial, blended by the burned fraction ``y`` [-]."""
    T0, inv_dT, lr0, inv_dlr, dlr, x_hi, z_hi, T_mid = gc[0], gc[1], gc[2], gc[3], gc[4], gc[5], gc[6], gc[7]
    x, z = table_coords(T, rho, T0, inv_dT, lr0, x_hi, z_hi)
    i = int(x)
    j = int(z * inv_dlr)
    g = gas_tab[off + i * nRm1 + j]
    t = x - i
    dz = z - j * dlr
    # rows of g: [u, R, u_T, R_T] of the burned gas, then their ln(rho) slopes: cubics in t
    su = hermite_cubic(g[16], g[17], g[18], g[19], t)
    sR = hermite_cubic(g[20], g[21], g[22], g[23], t)
    fu = along_lnrho(hermite_cubic(g[0], g[1], g[2], g[3], t), su, dz)
    fR = along_lnrho(hermite_cubic(g[4], g[5], g[6], g[7], t), sR, dz)
    fuT = along_lnrho(hermite_cubic(g[8], g[9], g[10], g[11], t), hermite_cubic(g[24], g[25], g[26], g[27], t), dz)
    fRT = along_lnrho(hermite_cubic(g[12], g[13], g[14], g[15], t), hermite_cubic(g[28], g[29], g[30], g[31], t), dz)
    uu, Ru, cvu = fresh_charge_poly(uc4[2 * b + (1 if T > T_mid else 0)], T)     # the fresh charge
    u_T = blend(cvu, fuT, y)
    R = blend(Ru, fR, y)
    cp, gamma = frozen_cp_gamma(u_T, R)
    return blend(uu, fu, y), u_T, y * su, fu - uu, R, y * fRT, y * sR, fR - Ru, cp, gamma


def burned_gas(gas, T, rho):
    """The burned gas at ``T`` [K], ``rho`` [kg/m^3]: (u, u_T, u_lnrho, R, R_T, R_lnrho) [SI]."""
    if isinstance(gas, tuple):                 # one case's tables, floats
        r = mix_at(gas[0], gas[1], gas[2], gas[3], gas[4], gas[5], T, rho, 1.0)
        return r[0], r[1], r[2], r[4], r[5], r[6]
    T = np.asarray(T, dtype=float)
    if T.ndim == 1:
        return gas.burned(T, rho)
    return gas.burned(T, np.broadcast_to(rho, T.shape))


def mixture_gas(gas, T, rho, y):
    """The mixture of burned fraction ``y`` [-] at ``T`` [K], ``rho`` [kg/m^3]: (u [J/kg], u_T
    [J/(kg K)])."""
    if isinstance(gas, tuple):
        r = mix_at(gas[0], gas[1], gas[2], gas[3], gas[4], gas[5], T, rho, y)
        return r[0], r[1]
    T = np.asarray(T, dtype=float)
    mp = gas.mixture(T, rho, y) if T.ndim == 1 else gas.mixture_grid(T, rho, y)
    return mp.u, mp.u_T


def cell_index(x):
    """The table cell of a position ``x`` >= 0 [-] (its integer part, as an index)."""
    return np.asarray(x).astype(np.intp)


def any_true(c) -> bool:
    """Whether any point holds ``c`` (arrays) / whether the point does (a float's own)."""
    return bool(np.any(c))


def all_true(c) -> bool:
    """Whether every point holds ``c`` (arrays) / whether the point does."""
    return bool(np.all(c))


OVERLOADED = (burned_gas, mixture_gas, cell_index, any_true, all_true)
"""The helpers whose compiled forms :mod:`cyclesim.loops._compiled` registers (a generated loop
imports them rather than copying their array source)."""


# -- the burned gas at a pressure -----------------------------------------------------------
def solve_T_p(gas, target, p, T0, lr0, enthalpy):
    """Burned gas of enthalpy (``enthalpy`` True) or internal energy ``target`` [J/kg] at ``p`` [Pa].

    Newton on (T, ln rho) together, with the equation of state p = rho R(T, rho) T as the second
    equation (one table look-up per iteration), from ``T0`` [K] and ``lr0`` [ln(kg/m^3)], to the
    relative tolerance :data:`TOL_T` (all points of an array).  Returns ``(T, ln rho, u, h,
    dlnv_dlnp_s, dT_dlnp_s)``: the state [K, -, J/kg, J/kg] and the isentropic d ln v / d ln p [-]
    and dT / d ln p [K] there.
    """
    T = T0 + 0.0
    lr = lr0 + 0.0
    T, lr, u, h, dlnv, dT_s, _, _ = solve_T_p_from(gas, target, p, T, lr, enthalpy, burned_gas(gas, T, np.exp(lr)))
    return T, lr, u, h, dlnv, dT_s


def solve_T_p_from(gas, target, p, T0, lr0, enthalpy, first):
    """:func:`solve_T_p` given the burned gas at its start, ``first`` = :func:`burned_gas` at
    (``T0``, exp(``lr0``)): a solve that starts where an earlier one ended needs no look-up there.
    Returns the six values of :func:`solve_T_p`, then whether it converged and the burned gas at
    the returned state (valid where it converged: the state of its last look-up)."""
    T = T0 + 0.0
    lr = lr0 + 0.0
    lnp = np.log(p)
    ev = first
    done = False
    u = h = R = h_T = h_L = a21 = a22 = 0.0 * T
    for it in range(40):
        if it > 0:
            ev = burned_gas(gas, T, np.exp(lr))
        u, u_T, u_lr, R, R_T, R_lr = ev
        h = u + R * T
        h_T = u_T + R + T * R_T
        h_L = u_lr + T * R_lr
        if enthalpy:
            f1, a11, a12 = h - target, h_T, h_L
        else:
            f1, a11, a12 = u - target, u_T, u_lr
        f2 = lr + np.log(R * T) - lnp
        a21 = R_T / R + 1.0 / T
        a22 = 1.0 + R_lr / R
        det = a11 * a22 - a12 * a21
        dT = -(f1 * a22 - a12 * f2) / det
        dL = -(a11 * f2 - a21 * f1) / det
        if all_true(np.logical_and(np.abs(dT) <= TOL_T * T, np.abs(dL) <= 1e-12)):
            done = True
            break
        T = np.minimum(np.maximum(T + dT, 200.0), 6000.0)
        lr = lr + dL
    # isentrope (dh = v dp = R T d ln p, with the equation of state): c1 dT + c2 dL = 0 and
    # a21 dT + a22 dL = d ln p give dT, dL per unit d ln p
    RT = R * T
    c1 = h_T - RT * a21
    c2 = h_L - RT * a22
    dL_s = 1.0 / (a22 - a21 * c2 / c1)
    return T, lr, u, h, -dL_s, -c2 / c1 * dL_s, done, ev


# -- the unburned zone's entropy tables (cyclesim.loops.zones.ZoneTables) -------------------
def zone_phi(phi_f, phi_r, k0, T0, dT, n, T, y_u):
    """(phi [J/(kg K)], d phi/dT = cp/T [J/(kg K^2)]) of the unburned zone at ``T`` [K]: linear in
    the flat tables ``phi_f``, ``phi_r`` (fresh charge, burned gas; a case's ``n`` values from
    index ``k0``, uniform from ``T0`` in steps ``dT`` [K]), blended by ``y_u`` [-]."""
    # fmax/fmin take NaN (no IVC state yet) into the table; the caller masks those points
    x = np.fmin(np.fmax((T - T0) / dT, 0.0), n - 1 - 1e-9)
    i = cell_index(x)
    t = x - i
    k = k0 + i
    f0 = phi_f[k]
    f1 = phi_f[k + 1]
    r0 = phi_r[k]
    r1 = phi_r[k + 1]
    v0 = f0 + y_u * (r0 - f0)
    v1 = f1 + y_u * (r1 - f1)
    return v0 + t * (v1 - v0), (v1 - v0) / dT


def unburned_T(phi_f, phi_r, k0, T0, dT, n, target, y_u, T_start):
    """Temperature [K] where the unburned zone's phi equals ``target`` [J/(kg K)] (:data:`NEWTON_T`
    Newton passes from ``T_start``)."""
    T = T_start
    for _ in range(NEWTON_T):
        f, fT = zone_phi(phi_f, phi_r, k0, T0, dT, n, T, y_u)
        step = (f - target) / fT
        T = np.minimum(np.maximum(T - step, 200.0), 3500.0)
        if all_true(np.logical_not(np.abs(step) > TOL_T * T)):     # converged (or NaN: masked)
            break
    return T


def unburned_R(y_u, R_f, R_r):
    """Gas constant [J/(kg K)] of the unburned zone of burned-gas fraction ``y_u`` [-] from those of
    its fresh charge ``R_f`` and of the burned gas it holds ``R_r`` (frozen)."""
    return (1.0 - y_u) * R_f + y_u * R_r


# -- the two-zone solve ---------------------------------------------------------------------
def solve(gas, phi_f, phi_r, k0, T0, dT, n, R_f, R_r, m, V, U, m_bz, y_u, s_u, p1, T_ivc, p_ivc, active, born):
    """Pressure and zone temperatures of a two-zone cylinder: (p [Pa], T_u [K], T_b [K]).

    ``phi_f, phi_r, k0, T0, dT, n`` the unburned zone's entropy tables (:func:`zone_phi`), ``R_f,
    R_r`` [J/(kg K)] the gas constants of its fresh charge and of the burned gas it holds; ``m, V,
    U`` the cylinder's mass [kg], volume [m^3] and absolute internal energy [J]; ``m_bz`` [kg] the
    burned zone's mass, ``y_u`` [-] the unburned zone's burned-gas fraction, ``s_u`` [J/(kg K)] its
    entropy above its IVC state ``T_ivc, p_ivc`` [K, Pa]; ``p1`` [Pa] the one-zone pressure (the
    first estimate); ``active``: where two zones are resolved, ``born``: where the burned zone
    exists.  p is ``p1`` where not active; T_u on the zone's entropy at p; T_b NaN where not born
    (the flame temperature of the unburned gas where born but not active).
    """
    lnp = np.log(p1)
    m_u = np.maximum(m - m_bz, 1e-300)
    m_b = where(active, np.maximum(m_bz, 1e-300), 1.0)
    R_u = unburned_R(y_u, R_f, R_r)
    base, dphi = zone_phi(phi_f, phi_r, k0, T0, dT, n, T_ivc, y_u)
    cp_ivc = dphi * T_ivc
    lnp_ivc = np.log(p_ivc)
    T_u = T_ivc * np.exp(R_u / cp_ivc * (lnp - lnp_ivc))
    T_b = lnp * 0.0 + 2400.0
    if any_true(active):
        for _ in range(NEWTON_P):
            p = np.exp(lnp)
            T_u = unburned_T(phi_f, phi_r, k0, T0, dT, n, base + R_u * (lnp - lnp_ivc) + s_u, y_u, T_u)
            u_u, u_Tu = mixture_gas(gas, T_u, p / (R_u * T_u), y_u)
            cp_u = u_Tu + R_u
            V_u = m_u * R_u * T_u / p
            V_b = where(active, np.maximum(V - V_u, 1e-6 * V), V)
            rho_b = m_b / V_b
            T_b = p * V_b / (m_b * burned_gas(gas, T_b, rho_b)[3])
            for _ in range(2):
                _, _, _, R_b, R_T, _ = burned_gas(gas, T_b, rho_b)
                g = np.log(rho_b * R_b * T_b) - lnp
                T_b = np.minimum(np.maximum(T_b * np.exp(-g / (1.0 + T_b * R_T / R_b)), 250.0), 5500.0)
            u_b, u_Tb, u_lr, R_b, R_T, R_lr = burned_gas(gas, T_b, rho_b)
            F = m_u * u_u + m_b * u_b - U
            # dF/d ln p: the unburned zone on its isentrope (d ln T_u = R_u/cp_u d ln p), the burned
            # zone on its equation of state, ln p = ln rho_b + ln R_b(T_b, rho_b) + ln T_b
            dlnT_u = R_u / cp_u
            dV_u = V_u * (dlnT_u - 1.0)
            dlnrho_b = dV_u / V_b
            dlnT_b = (1.0 - dlnrho_b * (1.0 + R_lr / R_b)) / (1.0 + T_b * R_T / R_b)
            dF = m_u * u_Tu * T_u * dlnT_u + m_b * (u_Tb * T_b * dlnT_b + u_lr * dlnrho_b)
            step = F / dF
            lnp = where(active, lnp - step, lnp)
            if all_true(np.logical_or(np.abs(step) <= TOL_LNP, np.logical_not(active))):
                break
    p = where(active, np.exp(lnp), p1)
    T_u = unburned_T(phi_f, phi_r, k0, T0, dT, n, base + R_u * np.log(p / p_ivc) + s_u, y_u, T_u)
    seed = np.logical_and(born, np.logical_not(active))
    if any_true(seed):
        # being born: the constant-pressure adiabatic flame temperature of the unburned gas
        u_u, _ = mixture_gas(gas, T_u, p / (R_u * T_u), y_u)
        T_start = T_b * 0.0 + 2400.0
        T_ad = solve_T_p(gas, u_u + R_u * T_u, p, T_start, np.log(p) - np.log(290.0 * T_start), True)[0]
        T_b = where(seed, T_ad, T_b)
    return p, T_u, where(born, T_b, np.nan)


def unburned_fraction_burned(m, m_b, m_bz):
    """Burned-gas (residual, EGR) fraction [-] of the unburned zone: ``(m_b - m_bz)/(m - m_bz)``."""
    return np.minimum(np.maximum((m_b - m_bz) / np.maximum(m - m_bz, 1e-300), 0.0), 0.999)


def cylinder_zones(gas, phi_f, phi_r, k0, T0, dT, n, R_f, R_r, m, V, U, m_b, m_bz, s_u, p1, T, T_ivc, p_ivc,
                   closed):
    """The two-zone cylinder at a state: (p [Pa], T_u [K], T_b [K], y_u [-], active, born).

    The tables as for :func:`solve`; ``m, V, U, m_b`` the cylinder's mass [kg], volume [m^3],
    absolute internal energy [J] and burned-gas mass [kg]; ``m_bz, s_u`` the zone states; ``p1, T``
    the one-zone pressure [Pa] and mixture temperature [K]; ``closed`` where the valves are shut.
    Outside the closed part both zone temperatures are the mixture's; once merged both are the
    mixture's; before the burn the unburned zone is the whole charge on its entropy.
    """
    y_u = unburned_fraction_burned(m, m_b, m_bz)
    x = m_bz / m
    born = np.logical_and(np.logical_and(closed, x > X_BORN), x < X_MERGE)
    active = np.logical_and(born, x >= X_BIRTH)
    # no IVC state yet: the present one
    ref = np.logical_and(np.logical_and(closed, np.isfinite(T_ivc)), np.isfinite(p_ivc))
    p, T_u, T_b = solve(gas, phi_f, phi_r, k0, T0, dT, n, R_f, R_r, m, V, U, m_bz, y_u, s_u, p1,
                        where(ref, T_ivc, T), where(ref, p_ivc, p1), active, born)
    merged = np.logical_and(closed, m_bz >= X_MERGE * m)
    T_u = where(np.logical_and(closed, np.logical_not(merged)), T_u, T)
    T_b = where(born, T_b, where(np.logical_or(merged, np.logical_not(closed)), T, np.nan))
    return p, T_u, T_b, y_u, active, born


def burned_volume(V, m, m_bz, R_u, T_u, p):
    """The burned zone's volume [m^3]: the cylinder's less the unburned zone's ``(m - m_bz) R_u T_u / p``."""
    return V - (m - m_bz) * R_u * T_u / p


def unburned_heat_share(x, T_u, T_b, T_wall, area_b):
    """The unburned zone's share [-] of the wall heat: A_u (T_u - T_w) over the sum of both zones',
    with A_b/A = ``area_b`` where it is >= 0 (the flame geometry's wetted share), else x^(1/2)
    (``area_b`` < 0: no flame geometry), and A_u/A = 1 - A_b/A (x the burned-zone mass fraction
    [-]); temperatures [K].  1 where neither zone is hotter than the wall."""
    a_b = where(area_b >= 0.0, np.minimum(np.maximum(area_b, 0.0), 1.0),
                np.sqrt(np.minimum(np.maximum(x, 0.0), 1.0)))
    wu = (1.0 - a_b) * np.maximum(T_u - T_wall, 0.0)
    wb = a_b * np.maximum(T_b - T_wall, 0.0)
    tot = wu + wb
    return where(tot > 0, wu / where(tot > 0, tot, 1.0), 1.0)


def zone_rates(closed, m, m_bz, y_u, T_u, T_b, T_wall, dm_burn, fbb, dQ, area_b):
    """Rates of the zone states (d m_bz [kg/deg], d s_u [J/(kg K deg)]) from the charge burned
    ``dm_burn`` [kg/deg], the blowby ``fbb`` [kg/deg] and the wall heat ``dQ`` [J/deg] (split by
    :func:`unburned_heat_share` at the mean wall temperature ``T_wall`` [K], with the burned zone's
    share of the wall area ``area_b`` [-], < 0 where the burn gives none)."""
    x = m_bz / m
    share = unburned_heat_share(x, T_u, where(np.isfinite(T_b), T_b, T_u), T_wall, area_b)
    m_u = np.maximum(m - m_bz, 1e-300)
    # valves open: one zone; the zone states fade out (over OPEN_FADE_DEG) so that the step that
    # crosses the next IVC, before they are reset there, sees no burned zone left
    d_mbz = where(closed, dm_burn / (1.0 - y_u) - fbb * x, -m_bz / OPEN_FADE_DEG)
    d_su = where(closed, where(x < X_MERGE, -dQ * share / (m_u * T_u), 0.0), 0.0)
    return d_mbz, d_su
