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

from ..cylinder.flow import isentropic_flux

if "jit" not in globals():          # the numpy form; the compiled loader sets all three first
    def jit(fn):
        return fn

    where = np.where
    SCALAR = False
    """True in the compiled form, whose functions see one cell at a time (branches may be skipped)."""

SUTHERLAND_MU0 = 1.716e-5
"""Sutherland's law for air, reference viscosity [Pa s] at 273.15 K (White 2006, table 1-2; from memory)."""
SUTHERLAND_T0 = 273.15
SUTHERLAND_S = 110.4
"""Sutherland's constant of air [K] (White 2006, table 1-2; from memory)."""

HAALAND_RE_FLOOR = 500.0
"""Lowest Reynolds number at which the turbulent friction factor is evaluated [-]: below it the
laminar 16/Re exceeds Haaland's value at this floor for any roughness up to eps/D 0.05 (so the
friction factor is 16/Re there, as for Re from 500 to about 1200 before)."""

T_MIN_K = 20.0
T_MAX_K = 2.0e4
"""Bounds of the temperature recovered from a cell's energy [K] (a cell at T_MIN_K has lost positivity)."""
NEWTON_TOL_K = 1e-6
"""Newton step [K] below which the compiled temperature recovery stops."""

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
def temperature_cv(e, Y, cf, cb, t_mid, n_newton, T_start):
    """Temperature [K] whose mixture internal energy is ``e`` [J/kg], and cv [J/(kg K)] at the
    start of the last Newton step (:func:`temperature`; compiled, within ``NEWTON_TOL_K`` of the
    temperature returned: cv changes by some 1e-10 of itself over that step)."""
    T = T_start + 0.0 * e
    cv = 0.0 * e
    for _ in range(n_newton):
        u, cv = energy(T, Y, cf, cb, t_mid)
        dT = (u - e) / cv
        T = np.minimum(np.maximum(T - dT, T_MIN_K), T_MAX_K)
        if SCALAR:
            if abs(dT) < NEWTON_TOL_K:
                break
    return T, cv


@jit
def temperature(e, Y, cf, cb, t_mid, n_newton, T_start):
    """Temperature [K] whose mixture internal energy is ``e`` [J/kg]: Newton steps from ``T_start`` [K].

    At most ``n_newton`` steps; compiled (scalars), the steps stop once a step
    is below ``NEWTON_TOL_K`` (quadratic convergence: the error left is then far
    below rounding of the state).  One step is exact for a constant-gamma gas
    (u linear in T).  The scheme starts each cell from its temperature of the
    sub-step before.
    """
    return temperature_cv(e, Y, cf, cb, t_mid, n_newton, T_start)[0]


@jit
def primitives(m, mom, E, mb, V, cf, cb, Rf, Rb, t_mid, n_newton, T_start):
    """Cell totals (mass [kg], momentum [kg m/s], energy [J], burned mass [kg]) in cell volume ``V`` [m^3].

    ``T_start`` [K] starts the temperature's Newton steps (:func:`temperature`).

    Returns density [kg/m^3], velocity [m/s], pressure [Pa], burned fraction [-],
    temperature [K], ratio of specific heats [-] and sound speed [m/s].
    """
    rho = m / V
    u = mom / m
    Y = np.minimum(np.maximum(mb / m, 0.0), 1.0)
    e = E / m - 0.5 * u * u
    T, cv = temperature_cv(e, Y, cf, cb, t_mid, n_newton, T_start)
    R = (1.0 - Y) * Rf + Y * Rb
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
    t = T / SUTHERLAND_T0
    return SUTHERLAND_MU0 * t * np.sqrt(t) * (SUTHERLAND_T0 + SUTHERLAND_S) / (T + SUTHERLAND_S)


@jit
def fanning_factor(reynolds, rel_roughness):
    """Fanning friction factor [-] of a round pipe.

    ``max(16/Re, f_Haaland)``: laminar Hagen-Poiseuille ``16/Re``; turbulent, Haaland
    (1983) ``1/sqrt(4 f) = -1.8 log10((eps/D / 3.7)^1.11 + 6.9/Re)``, an explicit
    form of Colebrook (1939).  The maximum is continuous; it switches near Re 1200
    for smooth pipes (no transition model: common practice for engine runners,
    whose flow is turbulent most of the cycle).  Haaland's formula is evaluated at
    ``Re >= HAALAND_RE_FLOOR`` only: below Re of about 7 its logarithm changes sign and
    the turbulent value grows without bound (it is stated for Re 4e3 to 1e8;
    Haaland 1983), where the laminar 16/Re holds and is larger anyway.
    """
    return fanning_from_roughness_term(reynolds, roughness_term(rel_roughness))


@jit
def roughness_term(rel_roughness):
    """The roughness part ``(eps/D / 3.7)^1.11`` of Haaland's formula [-] (constant per cell)."""
    return (rel_roughness / 3.7) ** 1.11


@jit
def fanning_from_roughness_term(reynolds, rough_term):
    """:func:`fanning_factor` given the :func:`roughness_term` of the wall."""
    re = np.maximum(reynolds, 1e-12)
    inv = -1.8 * np.log10(rough_term + 6.9 / np.maximum(re, HAALAND_RE_FLOOR))
    f_turb = 0.25 / (np.maximum(inv, 1e-3) * np.maximum(inv, 1e-3))
    return np.maximum(16.0 / re, f_turb)


@jit
def wall_sources(rho, u, T, cp, diameter, rough_term, friction_scale, fixed_fanning, loss_per_length,
                 wall_T, colburn, heat_scale):
    """Wall force and wall heat per unit volume: momentum [N/m^3] and energy [W/m^3] sources.

    Wall shear ``tau = f rho u |u| / 2`` on the perimeter ``pi D`` of the section
    ``pi D^2/4`` gives ``-2 f rho u |u| / D``; a distributed loss (bends) of
    ``loss_per_length`` = K / L [1/m] adds ``-K/(2L) rho u |u|``.  Heat by the
    Reynolds-Colburn analogy, ``St Pr^(2/3) = f/2`` (Colburn 1933; Incropera et al.
    2007, eq. 8.66), ``q = St rho |u| cp (4/D) (T_wall - T)``.  ``friction_scale``
    multiplies f (0: inviscid), ``heat_scale`` multiplies the heat (0: adiabatic);
    ``fixed_fanning`` > 0 replaces f(Re) by that constant (the Fanno reference case).
    ``rough_term`` is the wall's :func:`roughness_term`, ``colburn`` the factor ``Pr^(-2/3)``.
    """
    au = np.abs(u)
    mu = sutherland_viscosity(T)
    f_re = fanning_from_roughness_term(rho * au * diameter / mu, rough_term)
    f = friction_scale * where(fixed_fanning > 0.0, fixed_fanning + 0.0 * f_re, f_re)
    s_mom = -(2.0 * f / diameter + 0.5 * loss_per_length) * rho * u * au
    # f rho |u| stays finite as u -> 0 (laminar: 16 mu / D)
    st_flux = 0.5 * np.maximum(f * rho * au, friction_scale * 16.0 * mu / diameter) * colburn
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
def rusanov_flux(rl, ul, pl, El, Yl, cl, rr, ur, pr, Er, Yr, cr):
    """First-order local Lax-Friedrichs (Rusanov 1961) flux per unit area; arguments as :func:`hllc_flux`.

    ``F = (F_l + F_r)/2 - s/2 (U_r - U_l)`` with ``s = max(|u_l| + c_l, |u_r| + c_r)``.
    With cell averages as its states it keeps density, pressure and each
    species' partial density positive under a CFL condition (Perthame and
    Shu 1996, Numer. Math. 73, 119, sec. 2): the scheme's fallback where the
    second-order update would lose positivity.
    """
    sp = np.maximum(np.abs(ul) + cl, np.abs(ur) + cr)
    fl_m = rl * ul
    fr_m = rr * ur
    f_m = 0.5 * (fl_m + fr_m) - 0.5 * sp * (rr - rl)
    f_p = 0.5 * (fl_m * ul + pl + fr_m * ur + pr) - 0.5 * sp * (fr_m - fl_m)
    f_e = 0.5 * (ul * (El + pl) + ur * (Er + pr)) - 0.5 * sp * (Er - El)
    f_y = 0.5 * (fl_m * Yl + fr_m * Yr) - 0.5 * sp * (rr * Yr - rl * Yl)
    return f_m, f_p, f_e, f_y


@jit
def _outflow_residual(p, rho_i, p_i, c_i, lam, gm, R_i, cp_i, cda, area, p_r):
    """Mass balance of an end at boundary pressure ``p`` with gas leaving the pipe.

    The boundary gas has the pipe's entropy; the nozzle passes it from its
    stagnation state to the reservoir pressure ``p_r``.  Returns the residual
    ``m - g`` [kg/s] of the pipe's outflow ``m`` and the nozzle's ``g``, the
    boundary density and the outward velocity.
    """
    c_b = c_i * (p / p_i) ** (0.5 * (gm - 1.0) / gm)
    v = lam - 2.0 * c_b / (gm - 1.0)
    rho_b = rho_i * (p / p_i) ** (1.0 / gm)
    T_o = p / (rho_b * R_i)
    T0_o = T_o + 0.5 * v * v / cp_i
    p0_o = p * (T0_o / T_o) ** (gm / (gm - 1.0))
    g_out = cda * p0_o / np.sqrt(R_i * T0_o) * isentropic_flux_c(p_r / p0_o, gm)
    return rho_b * v * area - g_out, rho_b, v


@jit
def _inflow_residual(p, p_i, c_i, lam, gm, cda, area, p_r, T_r, R_r, g_r, cp_r, k_entry):
    """Mass balance of an end at boundary pressure ``p`` with gas entering the pipe.

    The boundary gas has the reservoir's stagnation temperature; the nozzle
    passes it from the reservoir's stagnation pressure, less ``k_entry`` dynamic
    heads, to ``p``.  Returns the residual ``m + g`` [kg/s] of the pipe's
    outflow ``m`` (negative here) and the nozzle's inflow ``g``, the boundary
    density and the outward velocity.
    """
    c_b = c_i * (p / p_i) ** (0.5 * (gm - 1.0) / gm)
    v = lam - 2.0 * c_b / (gm - 1.0)
    T_in = np.maximum(T_r - 0.5 * v * v / cp_r, 0.05 * T_r)
    rho_b = p / (R_r * T_in)
    p0_in = np.maximum(p_r - k_entry * 0.5 * rho_b * v * v, 1e-6 * p_r)
    g_in = cda * p0_in / np.sqrt(R_r * T_r) * isentropic_flux_c(p / p0_in, g_r)
    return rho_b * v * area + g_in, rho_b, v


@jit
def end_state(rho_i, v_i, p_i, g_i, R_i, cda, area, p_r, T_r, R_r, g_r, cp_r, k_entry, n_iter, p_guess):
    """State at a pipe end behind a nozzle to a reservoir: density, outward velocity, pressure.

    The pipe side follows the outgoing characteristic ``v + 2c/(gamma-1)`` of the
    interior state (``v`` the velocity out of the pipe) with the interior's entropy
    (homentropic, the usual method-of-characteristics boundary; Benson 1982,
    ch. 4; from memory); the nozzle side is the quasi-steady compressible nozzle
    equation (Heywood 1988, App. C) through the effective area ``cda`` [m^2]:
    outflow from the boundary's stagnation state to the reservoir pressure
    ``p_r``, inflow from the reservoir's stagnation state (``p_r`` less
    ``k_entry`` times the dynamic head, ``T_r``) to the boundary pressure, choked
    or not.  The direction is known before the solve: gas leaves the pipe when
    ``p_r`` is below ``p_v0``, the pressure at which the characteristic gives
    zero velocity.  The boundary pressure then solves that direction's mass
    balance in ln p by at most ``n_iter`` secant steps from ``p_guess`` [Pa]
    (the end's pressure of the sub-step before; <= 0: none), kept inside the
    bracket by a bisection wherever a step would leave it (a safeguarded
    secant, common practice; e.g. Press et al. 2007, Numerical Recipes, sec. 9.2-9.3);
    the bracket is the pipe end's sonic state
    to ``p_v0`` for outflow, ``p_v0`` to the smaller of ``p_r`` and the sonic
    inflow pressure for inflow (inflow is at most sonic at the pipe end,
    ``v >= -sqrt(2 g R T_r / (g + 1))``).  A pipe end that cannot pass what the
    nozzle takes stays at its sonic state.  ``cda = 0`` is a closed end (zero
    velocity exactly).  An open end is ``cda`` equal to the pipe's area.
    Compiled (scalars), only the direction taken is iterated and the steps stop
    once the residual is below 1e-10 of the pipe's sonic mass flow scale; the
    numpy form iterates both and picks one (a converged step stays put).
    """
    gm = g_i
    c_i = np.sqrt(gm * p_i / rho_i)
    lam = v_i + 2.0 * c_i / (gm - 1.0)
    inv_k = 2.0 * gm / (gm - 1.0)
    cp_i = gm * R_i / (gm - 1.0)
    c_star = np.maximum(lam * (gm - 1.0) / (gm + 1.0), 1e-3 * c_i)
    c_zero = np.maximum(0.5 * lam * (gm - 1.0), 1e-3 * c_i)
    p_lo = p_i * (c_star / c_i) ** inv_k
    p_v0 = np.maximum(p_i * (c_zero / c_i) ** inv_k, 1.000001 * p_lo)
    c_in = np.sqrt(2.0 * g_r * R_r * T_r / (g_r + 1.0))
    p_cap = p_i * (np.maximum(0.5 * (lam + c_in) * (gm - 1.0), 1e-3 * c_i) / c_i) ** inv_k
    out = p_r < p_v0
    n_out = n_iter
    n_in = n_iter
    if SCALAR:
        n_out = n_iter if out else 0
        n_in = 0 if out else n_iter
    x_guess = np.log(where(p_guess > 0.0, p_guess, 0.0 * p_guess + p_v0))
    # outflow on [ln p_lo, ln p_v0]: the residual falls with pressure and is <= 0 at p_v0 (v = 0);
    # through a nozzle no wider than the pipe the pipe end's pressure is at least the reservoir's
    p_a = where(cda <= area, np.maximum(p_lo, np.minimum(p_r, 0.999999 * p_v0)), p_lo)
    a = np.log(p_a)
    b = np.log(p_v0)
    fa, _, _ = _outflow_residual(p_a, rho_i, p_i, c_i, lam, gm, R_i, cp_i, cda, area, p_r)
    live = fa > 0.0                             # else the sonic end cannot pass what the nozzle takes
    if SCALAR:
        n_out = n_out if live else 0
    q = (rho_i, p_i, c_i, lam, gm, R_i, cp_i, cda, area, p_r, T_r, R_r, g_r, cp_r, k_entry)
    x_out = _secant(False, q, a, b, x_guess, n_out, 1e-10 * rho_i * c_i * area)
    x_out = where(live, x_out, a)
    # inflow on [ln p_v0, ln min(p_r, p_cap)]: the residual is >= 0 at p_v0 and falls with pressure
    hi = np.maximum(np.minimum(p_r, np.maximum(p_cap, p_v0)), 1.000001 * p_v0)
    a2 = np.log(p_v0)
    b2 = np.log(hi)
    fb2, _, _ = _inflow_residual(hi, p_i, c_i, lam, gm, cda, area, p_r, T_r, R_r, g_r, cp_r, k_entry)
    live2 = fb2 < 0.0                           # else capped at the sonic inflow
    if SCALAR:
        n_in = n_in if live2 else 0
    x_in = _secant(True, q, a2, b2, x_guess, n_in, 1e-10 * p_i / c_i * area)
    x_in = where(live2, x_in, b2)
    p_o = np.exp(x_out)
    p_n = np.exp(x_in)
    _, rho_o, v_o = _outflow_residual(p_o, rho_i, p_i, c_i, lam, gm, R_i, cp_i, cda, area, p_r)
    _, rho_n, v_n = _inflow_residual(p_n, p_i, c_i, lam, gm, cda, area, p_r, T_r, R_r, g_r, cp_r, k_entry)
    v_o = np.maximum(v_o, 0.0)
    v_n = np.minimum(v_n, 0.0)
    closed = cda <= 0.0
    p_b = where(closed, p_v0, where(out, p_o, p_n))
    rho_b = where(closed, rho_i * (p_v0 / p_i) ** (1.0 / gm), where(out, rho_o, rho_n))
    v_b = where(closed, 0.0 * v_o, where(out, v_o, v_n))
    return rho_b, v_b, p_b


@jit
def _secant_point(x0, f0, x1, f1, a, b, ftol):
    """Next point of the safeguarded secant in the bracket (a, b); stays at ``x1`` once converged."""
    den = f1 - f0
    ok = den != 0.0
    xn = x1 - f1 * (x1 - x0) / where(ok, den, 1.0 + 0.0 * den)
    inside = ok & (xn > a) & (xn < b)
    xn = where(inside, xn, 0.5 * (a + b))
    return where(np.abs(f1) <= ftol, x1, xn)


@jit
def _narrow(a, b, x, f):
    """The bracket (a, b) of a falling residual narrowed by the point ``x`` with residual ``f``."""
    return where(f > 0.0, np.maximum(a, x), a), where(f > 0.0, b, np.minimum(b, x))


@jit
def _start(a, b, x_guess):
    """Two start points of the secant: the guess put inside the bracket and a point 1e-6 from it."""
    x0 = np.minimum(np.maximum(x_guess, a), b)
    x1 = where(x0 + 1e-6 < b, x0 + 1e-6, x0 - 1e-6)
    return x0, np.minimum(np.maximum(x1, a), b)


@jit
def _end_residual(inflow, p, q):
    """The end's mass-balance residual [kg/s] at boundary pressure ``p`` [Pa]: of the inflow
    (:func:`_inflow_residual`) if ``inflow``, else of the outflow (:func:`_outflow_residual`);
    ``q`` = (rho_i, p_i, c_i, lam, gm, R_i, cp_i, cda, area, p_r, T_r, R_r, g_r, cp_r, k_entry)."""
    if inflow:
        return _inflow_residual(p, q[1], q[2], q[3], q[4], q[7], q[8], q[9], q[10], q[11], q[12], q[13], q[14])[0]
    return _outflow_residual(p, q[0], q[1], q[2], q[3], q[4], q[5], q[6], q[7], q[8], q[9])[0]


@jit
def _secant(inflow, q, a, b, x_guess, n, ftol):
    """Root in ln p of the end's residual (:func:`_end_residual`, falling with pressure) in the
    bracket (a, b): ``n`` safeguarded secant steps from ``x_guess``."""
    x0, x1 = _start(a, b, x_guess)
    f0 = _end_residual(inflow, np.exp(x0), q)
    a, b = _narrow(a, b, x0, f0)
    f1 = _end_residual(inflow, np.exp(x1), q)
    a, b = _narrow(a, b, x1, f1)
    for _ in range(n):
        if SCALAR:
            if abs(f1) <= ftol:
                break
        xn = _secant_point(x0, f0, x1, f1, a, b, ftol)
        fn = _end_residual(inflow, np.exp(xn), q)
        a, b = _narrow(a, b, xn, fn)
        x0, f0, x1, f1 = x1, f1, xn, fn
    return x1


@jit
def positive(m, mom, E, mb, T_floor, cf, cb, t_mid):
    """Whether cell totals have positive mass and an internal energy above that at ``T_floor`` [K].

    ``T_floor`` is raised to ``T_MIN_K`` at least.
    """
    ok_m = m > 0.0
    ms = where(ok_m, m, 1.0 + 0.0 * m)
    u = mom / ms
    Y = np.minimum(np.maximum(mb / ms, 0.0), 1.0)
    e_floor, _ = energy(np.maximum(T_floor, T_MIN_K), Y, cf, cb, t_mid)
    return ok_m & (E / ms - 0.5 * u * u > e_floor)


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
def cell_sources(rho, u, p, Y, cf, cb, Rf, Rb, t_mid, diameter, rough_term, friction_scale,
                 fixed_fanning, loss_per_length, wall_T, colburn, heat_scale):
    """Wall sources of a primitive state: momentum [N/m^3], energy [W/m^3], velocity [m/s^2], pressure [Pa/s]."""
    R = mixture_R(Y, Rf, Rb)
    T = p / (rho * R)
    _, cv = energy(T, Y, cf, cb, t_mid)
    return sources_at(rho, u, T, cv, R, diameter, rough_term, friction_scale, fixed_fanning, loss_per_length,
                      wall_T, colburn, heat_scale)


@jit
def sources_at(rho, u, T, cv, R, diameter, rough_term, friction_scale, fixed_fanning, loss_per_length, wall_T,
               colburn, heat_scale):
    """:func:`cell_sources` of a state whose temperature ``T`` [K], cv [J/(kg K)] and gas constant
    ``R`` [J/(kg K)] are known (a cell's own, from :func:`primitives`)."""
    s_mom, s_E = wall_sources(rho, u, T, cv + R, diameter, rough_term, friction_scale,
                             fixed_fanning, loss_per_length, wall_T, colburn, heat_scale)
    # friction turns kinetic into internal energy: dp/dt = (gamma-1) (q - u f)
    return s_mom, s_E, s_mom / rho, R / cv * (s_E - u * s_mom)


@jit
def end_flux(rho, u, p, Y, g, side, area, cda, p_r, T_r, Y_r, k_entry, cf, cb, Rf, Rb, t_mid, n_iter, p_guess):
    """Fluxes through a pipe end in +x times the end's area: mass [kg/s], momentum [N], energy [W], burned mass [kg/s];
    then the end's pressure [Pa] (the ``p_guess`` of the next call).

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
                                cp_r, k_entry, n_iter, p_guess)
    e_b, _ = energy(p_b / (rho_b * R_i), Y, cf, cb, t_mid)
    out = v_b >= 0.0
    h0 = where(out, e_b + p_b / rho_b + 0.5 * v_b * v_b, e_r + R_r * T_r)
    m_out = rho_b * v_b * area
    return (side * m_out, (rho_b * v_b * v_b + p_b) * area, side * m_out * h0, side * m_out * where(out, Y, Y_r),
            p_b)
