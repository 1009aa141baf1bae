"""Elementwise physics of quasi-one-dimensional pipe flow (scalars under numba, arrays under numpy).

Every function here takes plain numbers or broadcastable arrays and uses only
arithmetic, ``np.maximum``/``np.minimum``/``np.sqrt``/... and ``where``, so the
same source is compiled by numba for one cell and evaluated by numpy on a whole
(case, cell) array.  Imported normally, this module is the numpy form
(``where`` is ``np.where``, ``jit`` does nothing); :func:`cyclesim.pipes._jit.compiled_kernels`
loads the same file a second time with numba's ``njit`` and a scalar ``where``.
SI units throughout.

Gas: a frozen mixture of fresh charge (index 0) and burned gas (index 1), mixed by
mass fraction ``Y`` of burned gas.  Each gas has a constant gas constant and an
internal energy polynomial in two temperature ranges, ``u(T) = sum_k c[r, k] T^k``
(k = 0..5, r = 0 below ``t_mid``, 1 above); the mixture's u and R are the
mass-weighted sums.  A constant-gamma gas has ``c = [0, R/(gamma-1), 0, 0, 0, 0]``.
"""

from __future__ import annotations

import numpy as np

from ..flow import isentropic_flux

if "jit" not in globals():          # the numpy form; the compiled loader sets both first
    def jit(fn):
        return fn

    where = np.where

SUTHERLAND_MU0 = 1.716e-5
"""Sutherland's law for air, reference viscosity [Pa s] at 273.15 K (White 2006, table 1-2; from memory)."""
SUTHERLAND_T0 = 273.15
SUTHERLAND_S = 110.4
"""Sutherland's constant of air [K] (White 2006, table 1-2; from memory)."""

isentropic_flux_c = jit(isentropic_flux)


@jit
def _coef(k, hi, Y, cf, cb):
    return (1.0 - Y) * where(hi, cf[1, k], cf[0, k]) + Y * where(hi, cb[1, k], cb[0, k])


@jit
def energy(T, Y, cf, cb, t_mid):
    """Internal energy [J/kg] and cv [J/(kg K)] of the mixture at ``T`` [K], burned fraction ``Y``."""
    hi = T > t_mid
    c = _coef(5, hi, Y, cf, cb)
    u = c
    cv = 5.0 * c
    for k in range(4, 0, -1):
        c = _coef(k, hi, Y, cf, cb)
        u = u * T + c
        cv = cv * T + k * c
    u = u * T + _coef(0, hi, Y, cf, cb)
    return u, cv


@jit
def temperature(e, Y, cf, cb, t_mid, n_newton):
    """Temperature [K] whose mixture internal energy is ``e`` [J/kg]: ``n_newton`` Newton steps from 700 K.

    One step is exact for a constant-gamma gas (u linear in T).
    """
    T = 700.0 + 0.0 * e
    for _ in range(n_newton):
        u, cv = energy(T, Y, cf, cb, t_mid)
        T = np.minimum(np.maximum(T - (u - e) / cv, 20.0), 2.0e4)
    return T


@jit
def primitives(m, mom, E, mb, V, cf, cb, Rf, Rb, t_mid, n_newton):
    """Cell totals (mass [kg], momentum [kg m/s], energy [J], burned mass [kg]) in cell volume ``V`` [m^3].

    Returns density [kg/m^3], velocity [m/s], pressure [Pa], burned fraction [-],
    temperature [K], ratio of specific heats [-] and sound speed [m/s].
    """
    rho = m / V
    u = mom / m
    Y = np.minimum(np.maximum(mb / m, 0.0), 1.0)
    e = E / m - 0.5 * u * u
    T = temperature(e, Y, cf, cb, t_mid, n_newton)
    R = (1.0 - Y) * Rf + Y * Rb
    _, cv = energy(T, Y, cf, cb, t_mid)
    g = (cv + R) / cv
    p = rho * R * T
    return rho, u, p, Y, T, g, np.sqrt(g * p / rho)


@jit
def limited_slope(d_left, d_right):
    """Monotonised-central slope limiter (van Leer 1977): minmod(2 dl, 2 dr, (dl + dr)/2)."""
    s = np.abs(0.5 * (d_left + d_right))
    s = np.minimum(s, 2.0 * np.abs(d_left))
    s = np.minimum(s, 2.0 * np.abs(d_right))
    return where(d_left * d_right > 0.0, where(d_left > 0.0, s, -s), 0.0 * s)


@jit
def sutherland_viscosity(T):
    """Dynamic viscosity of air [Pa s] at ``T`` [K] (Sutherland's law; constants from White 2006)."""
    return SUTHERLAND_MU0 * (T / SUTHERLAND_T0) ** 1.5 * (SUTHERLAND_T0 + SUTHERLAND_S) / (T + SUTHERLAND_S)


@jit
def fanning_factor(reynolds, rel_roughness):
    """Fanning friction factor [-] of a round pipe.

    ``max(16/Re, f_Haaland)``: laminar Hagen-Poiseuille ``16/Re``; turbulent, Haaland
    (1983) ``1/sqrt(4 f) = -1.8 log10((eps/D / 3.7)^1.11 + 6.9/Re)``, an explicit
    form of Colebrook (1939).  The maximum is continuous; it switches near Re 1200
    for smooth pipes (no transition model: common practice for engine runners,
    whose flow is turbulent most of the cycle).
    """
    re = np.maximum(reynolds, 1e-12)
    x = (rel_roughness / 3.7) ** 1.11 + 6.9 / re
    inv = -1.8 * np.log10(x)
    f_turb = 0.25 / np.maximum(inv, 1e-3) ** 2
    return np.maximum(16.0 / re, f_turb)


@jit
def wall_sources(rho, u, T, cp, diameter, rel_roughness, friction_scale, fixed_fanning, loss_per_length,
                 wall_T, prandtl, heat_scale):
    """Wall force and wall heat per unit volume: momentum [N/m^3] and energy [W/m^3] sources.

    Wall shear ``tau = f rho u |u| / 2`` on the perimeter ``pi D`` of the section
    ``pi D^2/4`` gives ``-2 f rho u |u| / D``; a distributed loss (bends) of
    ``loss_per_length`` = K / L [1/m] adds ``-K/(2L) rho u |u|``.  Heat by the
    Reynolds-Colburn analogy, ``St Pr^(2/3) = f/2`` (Colburn 1933; Incropera et al.
    2007, eq. 8.66), ``q = St rho |u| cp (4/D) (T_wall - T)``.  ``friction_scale``
    multiplies f (0: inviscid), ``heat_scale`` multiplies the heat (0: adiabatic);
    ``fixed_fanning`` > 0 replaces f(Re) by that constant (the Fanno reference case).
    """
    au = np.abs(u)
    mu = sutherland_viscosity(T)
    f_re = fanning_factor(rho * au * diameter / mu, rel_roughness)
    f = friction_scale * where(fixed_fanning > 0.0, fixed_fanning + 0.0 * f_re, f_re)
    s_mom = -(2.0 * f / diameter + 0.5 * loss_per_length) * rho * u * au
    # f rho |u| stays finite as u -> 0 (laminar: 16 mu / D)
    st_flux = 0.5 * np.maximum(f * rho * au, friction_scale * 16.0 * mu / diameter) * prandtl ** (-2.0 / 3.0)
    s_E = heat_scale * st_flux * cp * (4.0 / diameter) * (wall_T - T)
    return s_mom, s_E


@jit
def hllc_flux(rl, ul, pl, El, Yl, cl, rr, ur, pr, Er, Yr, cr):
    """HLLC flux per unit area (Toro 2009, sec. 10.4) with Davis (1988) wave speeds.

    States: density [kg/m^3], velocity [m/s], pressure [Pa], total energy per
    volume [J/m^3], burned fraction [-], sound speed [m/s] on each side.  Returns
    fluxes of mass [kg/(m^2 s)], momentum [Pa], energy [W/m^2], burned mass.
    """
    sl = np.minimum(ul - cl, ur - cr)
    sr = np.maximum(ul + cl, ur + cr)
    ml = rl * (sl - ul)
    mr = rr * (sr - ur)
    ss = (pr - pl + ul * ml - ur * mr) / (ml - mr)
    # star states (mass, momentum, energy) and the physical fluxes
    fl_m = rl * ul
    fr_m = rr * ur
    fl_p = fl_m * ul + pl
    fr_p = fr_m * ur + pr
    fl_e = ul * (El + pl)
    fr_e = ur * (Er + pr)
    dl = ml / (sl - ss)
    dr = mr / (sr - ss)
    el_star = dl * (El / rl + (ss - ul) * (ss + pl / ml))
    er_star = dr * (Er / rr + (ss - ur) * (ss + pr / mr))
    fsl_m = fl_m + sl * (dl - rl)
    fsl_p = fl_p + sl * (dl * ss - rl * ul)
    fsl_e = fl_e + sl * (el_star - El)
    fsr_m = fr_m + sr * (dr - rr)
    fsr_p = fr_p + sr * (dr * ss - rr * ur)
    fsr_e = fr_e + sr * (er_star - Er)
    left = ss >= 0.0
    f_m = where(sl >= 0.0, fl_m, where(left, fsl_m, where(sr > 0.0, fsr_m, fr_m)))
    f_p = where(sl >= 0.0, fl_p, where(left, fsl_p, where(sr > 0.0, fsr_p, fr_p)))
    f_e = where(sl >= 0.0, fl_e, where(left, fsl_e, where(sr > 0.0, fsr_e, fr_e)))
    f_y = f_m * where(left, Yl, Yr)
    return f_m, f_p, f_e, f_y


@jit
def _end_branch(p, rho_i, p_i, c_i, lam, gm, R_i, cp_i, cda, area, p_r, T_r, R_r, g_r, cp_r, k_entry):
    """Pipe-end state at boundary pressure ``p`` and the residual of its mass balance."""
    k = 0.5 * (gm - 1.0) / gm
    c_b = c_i * (p / p_i) ** k
    v = lam - 2.0 * c_b / (gm - 1.0)
    out = v >= 0.0
    # outflow: the pipe's own entropy; stagnation state of the boundary gas
    rho_o = rho_i * (p / p_i) ** (1.0 / gm)
    T_o = p / (rho_o * R_i)
    T0_o = T_o + 0.5 * v * v / cp_i
    p0_o = p * (T0_o / T_o) ** (gm / (gm - 1.0))
    g_out = cda * p0_o / np.sqrt(R_i * T0_o) * isentropic_flux_c(p_r / p0_o, gm)
    # inflow: the reservoir's stagnation temperature, stagnation pressure less the entry loss
    T_in = np.maximum(T_r - 0.5 * v * v / cp_r, 0.05 * T_r)
    rho_in = p / (R_r * T_in)
    p0_in = np.maximum(p_r - k_entry * 0.5 * rho_in * v * v, 1e-6 * p_r)
    g_in = -cda * p0_in / np.sqrt(R_r * T_r) * isentropic_flux_c(p / p0_in, g_r)
    rho_b = where(out, rho_o, rho_in)
    resid = rho_b * v * area - where(out, g_out, g_in)
    return resid, rho_b, v


@jit
def end_state(rho_i, v_i, p_i, g_i, R_i, cda, area, p_r, T_r, R_r, g_r, cp_r, k_entry, n_iter):
    """State at a pipe end behind a nozzle to a reservoir: density, outward velocity, pressure.

    The pipe side follows the outgoing characteristic ``v + 2c/(gamma-1)`` of the
    interior state (``v`` the velocity out of the pipe) with the interior's entropy
    (homentropic, the usual method-of-characteristics boundary; Benson 1982,
    ch. 4; from memory); the nozzle side is the quasi-steady compressible nozzle
    equation (Heywood 1988, App. C) through the effective area ``cda`` [m^2]:
    outflow from the boundary's stagnation state to the reservoir pressure
    ``p_r``, inflow from the reservoir's stagnation state (``p_r`` less
    ``k_entry`` times the dynamic head, ``T_r``) to the boundary pressure, choked
    or not.  The boundary pressure solves the mass balance by ``n_iter``
    bisections in ln p between the pipe end's sonic state and the larger of the
    reservoir and the stagnation pressures; a pipe end that cannot pass what the
    nozzle takes stays at its sonic state, and inflow is at most sonic at the
    pipe end (``v >= -sqrt(2 g R T_r / (g + 1))``).  ``cda = 0`` is a closed end (zero
    velocity exactly).  An open end is ``cda`` equal to the pipe's area.
    """
    gm = g_i
    c_i = np.sqrt(gm * p_i / rho_i)
    lam = v_i + 2.0 * c_i / (gm - 1.0)
    inv_k = 2.0 * gm / (gm - 1.0)
    cp_i = gm * R_i / (gm - 1.0)
    c_star = np.maximum(lam * (gm - 1.0) / (gm + 1.0), 1e-3 * c_i)
    c_zero = np.maximum(0.5 * lam * (gm - 1.0), 1e-3 * c_i)
    p_lo = p_i * (c_star / c_i) ** inv_k
    p_v0 = p_i * (c_zero / c_i) ** inv_k
    # inflow is at most sonic at the pipe end: v >= -c*, c* = sqrt(2 g R T_r / (g + 1))
    c_in = np.sqrt(2.0 * g_r * R_r * T_r / (g_r + 1.0))
    p_cap = p_i * (np.maximum(0.5 * (lam + c_in) * (gm - 1.0), 1e-3 * c_i) / c_i) ** inv_k
    lo = np.log(p_lo)
    hi = np.log(np.maximum(np.minimum(np.maximum(p_v0, p_r), np.maximum(p_cap, p_v0)), 1.000001 * p_lo))
    args = (rho_i, p_i, c_i, lam, gm, R_i, cp_i, cda, area, p_r, T_r, R_r, g_r, cp_r, k_entry)
    for _ in range(n_iter):
        mid = 0.5 * (lo + hi)
        resid, _, _ = _end_branch(np.exp(mid), *args)
        pos = resid > 0.0                          # residual falls with pressure
        lo = where(pos, mid, lo)
        hi = where(pos, hi, mid)
    p_b = np.exp(0.5 * (lo + hi))
    closed = cda <= 0.0
    p_b = where(closed, p_v0, p_b)
    _, rho_b, v_b = _end_branch(p_b, *args)
    rho_b = where(closed, rho_i * (p_b / p_i) ** (1.0 / gm), rho_b)
    v_b = where(closed, 0.0 * v_b, v_b)
    return rho_b, v_b, p_b


@jit
def mixture_R(Y, Rf, Rb):
    """Gas constant of the mixture [J/(kg K)] (mass-weighted)."""
    return (1.0 - Y) * Rf + Y * Rb


@jit
def total_energy(rho, u, p, Y, cf, cb, Rf, Rb, t_mid):
    """Total energy per volume [J/m^3] and sound speed [m/s] of a primitive state."""
    R = mixture_R(Y, Rf, Rb)
    T = p / (rho * R)
    e, cv = energy(T, Y, cf, cb, t_mid)
    g = (cv + R) / cv
    return rho * (e + 0.5 * u * u), np.sqrt(g * p / rho)


@jit
def predict(rho, u, p, Y, g, dr, du, dp, dY, ax, s_u, s_p, half_dt, dx):
    """Hancock half step of the two face states of a cell (Toro 2009, sec. 14.4).

    Primitive quasi-linear form with area change ``ax = (dA/dx)/A`` [1/m] and the
    wall sources of velocity ``s_u`` [m/s^2] and pressure ``s_p`` [Pa/s].  Where a
    face state would lose positive density or pressure, both faces take the cell's
    value (first order there).  Returns (rho, u, p, Y) at the left then the right face.
    """
    k = half_dt / dx
    rc2 = g * p
    tr = -k * (u * dr + rho * du) - half_dt * rho * u * ax
    tu = -k * (u * du + dp / rho) + half_dt * s_u
    tp = -k * (rc2 * du + u * dp) - half_dt * rc2 * u * ax + half_dt * s_p
    ty = -k * u * dY
    rl = rho - 0.5 * dr + tr
    rr = rho + 0.5 * dr + tr
    pl = p - 0.5 * dp + tp
    pr = p + 0.5 * dp + tp
    bad = (rl <= 0.0) | (rr <= 0.0) | (pl <= 0.0) | (pr <= 0.0)
    ul = where(bad, u, u - 0.5 * du + tu)
    ur = where(bad, u, u + 0.5 * du + tu)
    yl = where(bad, Y, Y - 0.5 * dY + ty)
    yr = where(bad, Y, Y + 0.5 * dY + ty)
    return (where(bad, rho, rl), ul, where(bad, p, pl), yl,
            where(bad, rho, rr), ur, where(bad, p, pr), yr)


@jit
def cell_sources(rho, u, p, Y, cf, cb, Rf, Rb, t_mid, diameter, rel_roughness, friction_scale,
                 fixed_fanning, loss_per_length, wall_T, prandtl, heat_scale):
    """Wall sources of a primitive state: momentum [N/m^3], energy [W/m^3], velocity [m/s^2], pressure [Pa/s]."""
    R = mixture_R(Y, Rf, Rb)
    T = p / (rho * R)
    _, cv = energy(T, Y, cf, cb, t_mid)
    s_mom, s_E = wall_sources(rho, u, T, cv + R, diameter, rel_roughness, friction_scale,
                             fixed_fanning, loss_per_length, wall_T, prandtl, heat_scale)
    # friction turns kinetic into internal energy: dp/dt = (gamma-1) (q - u f)
    return s_mom, s_E, s_mom / rho, R / cv * (s_E - u * s_mom)


@jit
def end_flux(rho, u, p, Y, g, side, area, cda, p_r, T_r, Y_r, k_entry, cf, cb, Rf, Rb, t_mid, n_iter):
    """Fluxes through a pipe end in +x times the end's area: mass [kg/s], momentum [N], energy [W], burned mass [kg/s].

    ``side`` is -1 at the left end (x = 0), +1 at the right; (rho, u, p, Y, g) the
    interior face state; the reservoir behind the nozzle ``cda`` [m^2] has
    stagnation pressure ``p_r`` [Pa], temperature ``T_r`` [K] and burned
    fraction ``Y_r`` (see :func:`end_state`).  Gas entering the pipe carries the
    reservoir's stagnation enthalpy and composition, gas leaving it the pipe's.
    """
    R_i = mixture_R(Y, Rf, Rb)
    R_r = mixture_R(Y_r, Rf, Rb)
    e_r, cv_r = energy(T_r, Y_r, cf, cb, t_mid)
    cp_r = cv_r + R_r
    rho_b, v_b, p_b = end_state(rho, side * u, p, g, R_i, cda, area, p_r, T_r, R_r, cp_r / cv_r,
                                cp_r, k_entry, n_iter)
    e_b, _ = energy(p_b / (rho_b * R_i), Y, cf, cb, t_mid)
    out = v_b >= 0.0
    h0 = where(out, e_b + p_b / rho_b + 0.5 * v_b * v_b, e_r + R_r * T_r)
    m_out = rho_b * v_b * area
    return side * m_out, (rho_b * v_b * v_b + p_b) * area, side * m_out * h0, side * m_out * where(out, Y, Y_r)
