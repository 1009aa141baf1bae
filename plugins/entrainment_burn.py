"""A predictive burn: turbulent flame entrainment and burn-up of the entrained eddies.

The quasi-dimensional model of Blizard & Keck (1974), Tabaczynski, Ferguson & Radhakrishnan
(1977) and Keck (1982).  A spherical flame centred at the spark plug entrains unburned charge
at its front and the entrained eddies burn up behind it:

    dm_e/dt = rho_u A_f (u'_eff + I_0 S_L)
    dm_b/dt = rho_u A_f I_0 S_L + (m_e - m_b) / tau_b,      tau_b = lambda / S_L

(Keck 1982, from memory: the front burns the charge it reaches at the laminar speed, the eddies
entrained by the turbulence burn up behind it; with no turbulence a laminar flame burns exactly
what it entrains.)

- ``A_f`` the front area of a sphere in the chamber (the config's ``engine.chamber``), from
  :mod:`cyclesim.combustion.flame_geometry`, tabulated at set-up against the fraction of the
  chamber inside the front and the piston position;
- ``S_L`` the laminar burning velocity (:mod:`cyclesim.combustion.laminar_flame`) of the
  unburned charge, diluted by its burned gas (residual and EGR);
- ``u'`` the turbulence intensity of the K-k model, ``lambda`` the Taylor microscale
  (:mod:`cyclesim.combustion.turbulence`);
- ``u'_eff`` the Herweg & Maly (1992) intensity felt by a kernel smaller than the eddies,
  which grows to ``u'`` as the kernel outgrows the integral scale and the eddies have had
  time to act on it: the spark-to-developed-flame phase (see the turbulence module);
- ``I_0`` Herweg & Maly's stretch factor of the laminar speed (strain by the turbulence the
  kernel feels, ``u'_eff``, and the curvature of a kernel expanding at (rho_u / rho_b) S_L), which
  slows thick flames: low density,
  high dilution (:func:`cyclesim.combustion.turbulence.stretch_factor`).

The front is a brush: the eddies displace it from its mean position with the rms displacement
sigma of Taylor's (1921) dispersion (:func:`cyclesim.combustion.turbulence.brush_displacement`,
with ``u'_eff`` and the integral scale ``L_I``), so where it meets the walls its area is the
average over that displacement (:func:`brush_average`, tabulated at set-up against sigma as
well) and falls to zero over a part of the fill that grows with sigma, not at the last wall
contact of a thin sphere.  ``flame_brush`` says how long the displacement builds up:
``burn_up`` (default), over the burn-up time tau_b only, since a wrinkle of the front older than
that has burned out (a brush of about u' tau_b, 1.5-2 mm on the demo: the heat-release rate
still falls from its peak to half in about half the degrees it took to rise); ``spark``, since
the spark, the brush of a turbulent flame growing by turbulent diffusion (Lipatnikov & Chomiak
2002, Prog. Energy Combust. Sci. 28, 1-74, from memory), which gives a bell-shaped rate but
longer 10-90 % angles (benchmarks/entrainment_heat_release.py).

The front's position in the tables is its fill s^3 = V_f / (V_f + V_u), the volume of the
entrained charge over that of the entrained and the not yet entrained charge, both from their
masses at the cylinder pressure: the front reaches the last wall, where its area is zero, when
the whole charge is entrained (taking V_f / V instead let the front fill the chamber at 99.4 %
entrained on the demo, the burned gas's estimated temperature being a little high, and left the
rest unburned).

Burning, the entrainment and the burn-up all start at the spark; the kernel starts as a
sphere of ``kernel_radius_mm`` (the breakdown and arc phases before it are not modelled).

Unburned charge: fresh charge compressed isentropically from its IVC state (cp of the fresh
charge as a quadratic in T fitted at set-up; the same isentrope as the knock model's
:func:`cyclesim_plugins.knock.isentropic_temperature`), so wall heat loss from the end gas is
neglected; where the cylinder runs two zones (``simulation.zones: two``) the unburned zone's own
temperature (the state field ``T_u``) instead.  The burned gas behind the front is taken at the unburned temperature plus the
adiabatic temperature rise at constant pressure, ``T_b = T_u + (1 - f) dT_ad``, with ``dT_ad``
from the tool's equilibrium tables at 700 K and 20 bar at set-up (common practice for a
one-zone cylinder; a two-zone cylinder will supply its own burned-zone state).  The front
encloses ``V_f = m (x_b R_b T_b + (x_e - x_b) R_u T_u) / p``.

States (reset at each IVC): ``x_e`` the entrained mass fraction [-], ``K`` and ``k`` the mean
flow's and the turbulence's kinetic energy per kg [J/kg].  The core's ``x_b`` is the burned
fraction.  At IVC the mean flow holds the kinetic energy of the intake jet, ``K = v_i^2 / 2``,
``v_i = B^2 S_p / (4 n_v D_v L_v)`` the piston's displacement rate through the intake valves'
full-lift curtain (the mean inlet flow velocity, Tabaczynski et al. 1977 took the turbulence at
IVC proportional to it, from memory), and the turbulence ``k = ivc_turbulence_ratio x K``.
"""

from __future__ import annotations

import math
import weakref
from typing import Any, Mapping

import numpy as np

from cyclesim.combustion import flame_geometry as fg
from cyclesim.combustion import laminar_flame as lf
from cyclesim.combustion.laminar_flame import gulder, metghalchi_keck
from cyclesim.combustion.turbulence import (INTEGRAL_SCALE_RATIO, brush_displacement, integral_length,
                                            kernel_turbulence_factor, kk_rates, stretch_factor, taylor_microscale,
                                            turbulence_intensity, viscosity_air)
from cyclesim.kernel_ops import where, where_lazy
from cyclesim.loops.layout import shared_array
from cyclesim.loops.zone_solve import any_true, cell_index
from cyclesim.params import Param, StateVar
from cyclesim.roles import BurnRate, SetupContext

from .wiebe import CYCLE_END_DEG, P_EFF, P_SPARK

N_HEIGHT = 24
"""Piston positions of the flame tables (uniform in clearance height)."""
N_FILL = 65
"""Points of the flame tables in s = (V_f / V_chamber)^(1/3), uniform from 0 to 1."""
N_BRUSH = 21
"""Front displacements of the brush-averaged area table, uniform from 0 to :data:`BRUSH_MAX`."""
BRUSH_MAX = 0.5
"""Largest rms front displacement of the area table, over the bore radius [-]; a larger one reads
the table's last row (the table's range, not a model constant)."""
TABLE_LATEST_DEG = 100.0
"""The tables reach the piston position of this crank angle after TDC [deg]; later the flame
geometry of that position is used (the burn is then in its last few per cent)."""
CV_FIT_RANGE_K = (280.0, 1300.0)
"""Temperatures over which the fresh charge's cv is fitted by a quadratic [K]."""
AD_REF_T_K = 700.0
AD_REF_P_PA = 20e5
"""State of the set-up adiabatic flame temperature rise [K, Pa] (typical unburned state at TDC)."""

_TABLES: dict = {}


def _arr(value: Any, B: int) -> np.ndarray:
    return np.broadcast_to(np.asarray(value, dtype=float), (B,)).copy()


# ----------------------------------------------------------------------------
# kernels: plain, branch-free functions (arrays (B,) on the Python path, floats compiled)
# ----------------------------------------------------------------------------
def isentrope_temperature(T0, p_ratio, c0, c1, c2, R):
    """Temperature [K] after an isentropic change of pressure by ``p_ratio`` from ``T0`` [K], for an
    ideal gas with cv = c0 + c1 T + c2 T^2 [J/(kg K)] and gas constant R [J/(kg K)].

    Solves (c0 + R) ln(T/T0) + c1 (T - T0) + c2 (T^2 - T0^2)/2 = R ln(p_ratio) by four Newton steps
    from the constant-cp estimate (error below 1e-6 K for ratios up to 100)."""
    target = R * np.log(p_ratio)
    cp0 = c0 + R + c1 * T0 + c2 * T0 * T0
    T = T0 * np.exp(target / cp0)
    for _ in range(4):
        f = (c0 + R) * np.log(T / T0) + c1 * (T - T0) + 0.5 * c2 * (T * T - T0 * T0) - target
        T = T - f * T / (c0 + R + c1 * T + c2 * T * T)
    return T


def flat_interp(flat, q):
    """``np.interp(q, idx, flat)`` for the flat index ``idx`` = 0, 1, 2, ... (as floats), by direct
    indexing instead of a search: the same arithmetic, ``(flat[j+1] - flat[j]) (q - j) + flat[j]``
    with j the integer part of ``q`` (``flat[j]`` where q is a node, the last value at or beyond
    the end, the first below 0, NaN for NaN), for arrays and floats."""
    last = flat.shape[0] - 1
    qc = np.fmin(np.fmax(q, 0.0), last)             # NaN -> 0 (a valid index), restored below
    j = np.minimum(cell_index(qc), last - 1)
    t = qc - j
    a = flat[j]
    b = flat[j + 1]
    return where(q == q, where(t >= 1.0, b, (b - a) * t + a), q)


def table_lookup(flat, idx, off, h, s, h0, inv_dh, nh, ns):
    """Bilinear value of a flame table at clearance height ``h`` [m] and fill ``s`` [-].

    ``flat`` holds the tables of all cases row after row ((case, height) rows of ``ns`` values in
    s uniform on [0, 1]); ``off`` is the case's first index.  Interpolation along s on the flat
    index ``idx`` (0, 1, 2, ... as floats; :func:`flat_interp` indexes it directly), so the same
    code serves arrays and floats."""
    hp = np.minimum(np.maximum((h - h0) * inv_dh, 0.0), nh - 1.000001)
    i = np.floor(hp)
    w = hp - i
    sp = np.minimum(np.maximum(s, 0.0), 1.0) * (ns - 1.0)
    lo = flat_interp(flat, off + i * ns + sp)
    hi = flat_interp(flat, off + (i + 1.0) * ns + sp)
    return (1.0 - w) * lo + w * hi


def brush_table_lookup(flat, idx, off, h, sg, s, h0, inv_dh, nh, nb, ns):
    """Value of a brush-averaged table at clearance height ``h`` [m], front displacement position
    ``sg`` (0 to ``nb`` - 1, floats) and fill ``s`` [-]: rows (case, height, displacement) of ``ns``
    values, bilinear in height and displacement, linear in s (see :func:`table_lookup`; indexed
    directly, :func:`flat_interp`, not searched: a batch's tables take megabytes)."""
    hp = np.minimum(np.maximum((h - h0) * inv_dh, 0.0), nh - 1.000001)
    i = np.floor(hp)
    w = hp - i
    gp = np.minimum(np.maximum(sg, 0.0), nb - 1.000001)
    j = np.floor(gp)
    v = gp - j
    sp = np.minimum(np.maximum(s, 0.0), 1.0) * (ns - 1.0)
    r00 = off + (i * nb + j) * ns + sp
    a00 = flat_interp(flat, r00)
    a01 = flat_interp(flat, r00 + ns)
    a10 = flat_interp(flat, r00 + nb * ns)
    a11 = flat_interp(flat, r00 + (nb + 1.0) * ns)
    return (1.0 - w) * ((1.0 - v) * a00 + v * a01) + w * ((1.0 - v) * a10 + v * a11)


def flame_wall_share(V, V_b, v_rb, bore_area, tab_wet, tab_idx, off, h0, inv_dh, nh, ns):
    """Share [-] of the chamber's wall (head, piston, liner) wetted by the spherical flame that
    encloses ``V_b`` [m^3] in the volume ``V`` [m^3] (the ``wall_share_kernel``): the wetted-area
    table ``tab_wet`` (head, piston and liner summed, :func:`fill_tables`) at the piston's clearance
    height and the fill (V_b/V)^(1/3), over its value for a flame that fills the chamber."""
    h = (V - v_rb) / bore_area
    fill = np.minimum(np.maximum(V_b, 0.0) / V, 1.0) ** (1.0 / 3.0)
    wet = table_lookup(tab_wet, tab_idx, off, h, fill, h0, inv_dh, nh, ns)
    return wet / table_lookup(tab_wet, tab_idx, off, h, 1.0, h0, inv_dh, nh, ns)


def _flame_state(theta, p, V, m, y_b, x_b, omega_deg, x_e, k, spark, eff, phi, mk, c_mk0, c_mk1, c_mk2,
                 c_g0, c_g1, c_g2, c_g3, c_g4, cv0, cv1, cv2, R_u, R_b, dT_ad, T_ivc, p_ivc, T_u,
                 bore_area, half_bore, v_rb, r0, brush_spark, tab_r, tab_a, tab_idx, tab_ia, off, off_a, h0, inv_dh, nh,
                 nb, ns):
    """Shared quantities of the two kernels: (on, S_L, I_0 S_L, u'_eff, rho_u, A_f, lambda, T_u).

    The unburned gas is the unburned zone's own ``T_u`` where two zones run (``T_u > 0``), else
    the fresh charge on its isentrope from IVC.  The front's fill s^3 = V_f / (V_f + V_u): V_f the
    volume of the entrained charge (burned and not yet burned), V_u that of the charge not yet
    entrained, both from their masses at the pressure, so the front reaches the last wall (s = 1,
    no front left) exactly when the whole charge is entrained, whatever the error of the burned
    gas's estimated temperature."""
    # (where_lazy: the compiled loop computes the isentrope only without the zone's T_u, and only
    # the fuel's own laminar-speed correlation)
    T_u = where_lazy(np.logical_not(T_u > 0.0), isentrope_temperature, (T_ivc, p / p_ivc, cv0, cv1, cv2, R_u), T_u)
    rho_u = p / (R_u * T_u)
    f = np.minimum(np.maximum(1.0 - (1.0 - y_b) / np.maximum(1.0 - eff * x_b, 1e-9), 0.0), 0.6)
    use_mk = mk > 0.5
    s_g = where_lazy(np.logical_not(use_mk), gulder, (phi, T_u, p, f, c_g0, c_g1, c_g2, c_g3, c_g4), 0.0)
    s_l = np.maximum(where_lazy(use_mk, metghalchi_keck, (phi, T_u, p, f, c_mk0, c_mk1, c_mk2), s_g), 1e-3)
    T_b = T_u + (1.0 - f) * dT_ad
    v_f = m * (x_b * R_b * T_b + np.maximum(x_e - x_b, 0.0) * R_u * T_u) / p
    v_f = np.maximum(v_f, 4.18879 * r0 * r0 * r0)
    v_u = m * np.maximum(1.0 - x_e, 0.0) * R_u * T_u / p
    h = (V - v_rb) / bore_area
    s = (v_f / (v_f + v_u)) ** (1.0 / 3.0)
    r_f = table_lookup(tab_r, tab_idx, off, h, s, h0, inv_dh, nh, ns)
    L = integral_length(V, bore_area, half_bore)
    u = turbulence_intensity(k)
    t = (theta - spark) / omega_deg
    u_eff = u * kernel_turbulence_factor(r_f, t, INTEGRAL_SCALE_RATIO * L, u)
    nu = viscosity_air(T_u) / rho_u
    lam = taylor_microscale(u, L, nu)
    # the front's rms displacement by the eddies: over the burn-up time (the wrinkles older than an
    # eddy's burn-up have burned out), or since the spark (turbulent diffusion of the whole brush)
    t_brush = where(brush_spark > 0.5, t, np.minimum(t, lam / s_l))
    sigma = brush_displacement(u_eff, t_brush, INTEGRAL_SCALE_RATIO * L)
    a_f = brush_table_lookup(tab_a, tab_ia, off_a, h, sigma / (BRUSH_MAX * half_bore) * (nb - 1.0), s, h0, inv_dh,
                             nh, nb, ns)
    s_k = s_l * stretch_factor(s_l, u_eff, INTEGRAL_SCALE_RATIO * L, nu, r_f, (R_b * T_b) / (R_u * T_u))
    on = (theta >= spark) & (theta < CYCLE_END_DEG)
    return on, s_l, s_k, u_eff, rho_u, a_f, lam, T_u


def burnup_rate(on, x_e, x_b, s_l, s_k, lam, rho_u, a_f, m, omega_deg):
    """dx_b/dtheta [1/deg] = (rho_u A_f I_0 S_L / m + (x_e - x_b) S_L / lambda) / omega after the
    spark, else 0 (Keck 1982: the front burns as it advances, the eddies behind it burn up); the
    front's term while x_e < 1, x_e counted up to 1 in the burn-up, so x_b never exceeds 1."""
    front = where(x_e < 1.0, rho_u * a_f * s_k / m, 0.0)
    eddies = np.maximum(np.minimum(x_e, 1.0) - x_b, 0.0) * s_l / lam
    return where(on, (front + eddies) / omega_deg, 0.0)


def entrainment_speed(on, x_e, rho_u, a_f, u_eff, s_k, m):
    """dx_e/dt [1/s]: entrainment rho_u A_f (u'_eff + I_0 S_L) / m after the spark while x_e < 1."""
    return where(on & (x_e < 1.0), rho_u * a_f * (u_eff + s_k) / m, 0.0)


def turbulence_rates(K, k, V, dV, omega_deg, closed, bore_area, half_bore, c_beta):
    """(dK/dt, dk/dt [W/kg]): the K-k model while the valves are shut, with the closed cylinder's -dV/V."""
    L = integral_length(V, bore_area, half_bore)
    dK, dk = kk_rates(K, k, L, -dV * omega_deg / V, c_beta)
    return where(closed, dK, 0.0), where(closed, dk, 0.0)


def state_rates(on, x_e, K, k, rho_u, a_f, u_eff, s_k, m, V, dV, omega_deg, closed, bore_area, half_bore,
                c_beta):
    """(dx_e/dt [1/s], dK/dt, dk/dt [W/kg]): :func:`entrainment_speed` and :func:`turbulence_rates`."""
    dK, dk = turbulence_rates(K, k, V, dV, omega_deg, closed, bore_area, half_bore, c_beta)
    return entrainment_speed(on, x_e, rho_u, a_f, u_eff, s_k, m), dK, dk


def entrainment_rate(theta, p, V, m, y_b, x_b, omega_deg, x_e, k, spark, eff, phi, mk, c_mk0, c_mk1,
                     c_mk2, c_g0, c_g1, c_g2, c_g3, c_g4, cv0, cv1, cv2, R_u, R_b, dT_ad, T_ivc, p_ivc, T_u,
                     bore_area, half_bore, v_rb, r0, brush_spark, tab_r, tab_a, tab_idx, tab_ia, off, off_a, h0,
                     inv_dh, nh, nb, ns):
    """Burn rate dx_b/dtheta [1/deg]: burn-up of the entrained eddies, (x_e - x_b) / tau_b, zero
    before the spark and from 360 deg (the burn ``kernel``).  The flame state is computed only
    where some case burns (a point's own condition in the compiled loop, the batch's on arrays:
    :func:`cyclesim.loops.zone_solve.any_true`); the rate is zero elsewhere anyway."""
    if any_true((theta >= spark) & (theta < CYCLE_END_DEG)):
        on, s_l, s_k, u_eff, rho_u, a_f, lam, T_u = _flame_state(
            theta, p, V, m, y_b, x_b, omega_deg, x_e, k, spark, eff, phi, mk, c_mk0, c_mk1, c_mk2, c_g0, c_g1,
            c_g2, c_g3, c_g4, cv0, cv1, cv2, R_u, R_b, dT_ad, T_ivc, p_ivc, T_u, bore_area, half_bore, v_rb, r0,
            brush_spark, tab_r, tab_a, tab_idx, tab_ia, off, off_a, h0, inv_dh, nh, nb, ns)
        return burnup_rate(on, x_e, x_b, s_l, s_k, lam, rho_u, a_f, m, omega_deg)
    return 0.0 * m


def entrainment_states(theta, p, V, dV, m, y_b, x_b, omega_deg, closed, x_e, K, k, spark, eff, phi, mk,
                       c_mk0, c_mk1, c_mk2, c_g0, c_g1, c_g2, c_g3, c_g4, cv0, cv1, cv2, R_u, R_b, dT_ad,
                       T_ivc, p_ivc, T_u, bore_area, half_bore, v_rb, r0, brush_spark, tab_r, tab_a, tab_idx, tab_ia,
                       off, off_a, h0, inv_dh, nh, nb, ns, c_beta):
    """Time derivatives of (x_e [1/s], K [W/kg], k [W/kg]) (the ``state_kernel``), see
    :func:`state_rates`.  The flame state is computed only where some case entrains (after the
    spark, before 360 deg, x_e < 1; as in :func:`entrainment_rate`)."""
    dK, dk = turbulence_rates(K, k, V, dV, omega_deg, closed, bore_area, half_bore, c_beta)
    if any_true((theta >= spark) & (theta < CYCLE_END_DEG) & (x_e < 1.0)):
        on, s_l, s_k, u_eff, rho_u, a_f, lam, T_u = _flame_state(
            theta, p, V, m, y_b, x_b, omega_deg, x_e, k, spark, eff, phi, mk, c_mk0, c_mk1, c_mk2, c_g0, c_g1,
            c_g2, c_g3, c_g4, cv0, cv1, cv2, R_u, R_b, dT_ad, T_ivc, p_ivc, T_u, bore_area, half_bore, v_rb, r0,
            brush_spark, tab_r, tab_a, tab_idx, tab_ia, off, off_a, h0, inv_dh, nh, nb, ns)
        return entrainment_speed(on, x_e, rho_u, a_f, u_eff, s_k, m), dK, dk
    return 0.0 * m, dK, dk


# ----------------------------------------------------------------------------
# set-up helpers
# ----------------------------------------------------------------------------
def brush_average(r, v, a, v_chamber, sigma, s_grid, n_rbar: int = 600, n_nodes: int = 48):
    """Front area [m^2] of a flame brush meeting the chamber's walls, against its fill, on
    ``s_grid`` (n_fill,).

    The front of a thin-sphere flame at radius r has the area a(r) and encloses v(r) (arrays on the
    radii ``r``, 0 to the chamber's farthest point, where a = 0).  The brush's front lies at
    r_mean + xi, xi normal with rms ``sigma`` [m]
    (:func:`cyclesim.combustion.turbulence.brush_displacement`): its mean area and enclosed volume
    are the averages of a and v over xi (Gauss-Hermite; a = 0 beyond the chamber and v its volume,
    a = v = 0 below r = 0), the mean area taken against the mean fill (v_mean / v_chamber)^(1/3).
    It falls smoothly to zero as the fill goes to 1.  The walls are the brush's only effect here:
    in free space the average of a sphere's area at a given enclosed volume is less than the thin
    sphere's (by 4 pi sigma^2 at large radii), so the result is multiplied by the thin free
    sphere's area over the brush's free-space mean area at the same fill: a front the brush does
    not carry to a wall keeps the thin sphere's area 4 pi r^2."""
    x, w = np.polynomial.hermite_e.hermegauss(n_nodes)
    w = w / w.sum()
    rbar = np.linspace(0.0, r[-1] + 6.0 * sigma, n_rbar)
    rr = rbar[:, None] + sigma * x[None, :]
    pos = np.maximum(rr, 0.0)

    def against_fill(v_m, a_m):
        fill = np.maximum.accumulate(np.maximum(v_m / v_chamber, 0.0) ** (1.0 / 3.0))
        return np.interp(s_grid, fill + np.arange(fill.size) * 1e-12, a_m)

    walls = against_fill(np.interp(rr, r, v, left=0.0, right=v_chamber) @ w,
                         np.interp(rr, r, a, left=0.0, right=0.0) @ w)
    free = against_fill((4.0 / 3.0 * np.pi * pos ** 3) @ w, (4.0 * np.pi * pos ** 2) @ w)
    thin = 4.0 * np.pi * (0.75 / np.pi * v_chamber * s_grid ** 3) ** (2.0 / 3.0)
    out = walls * np.where(free > 0.0, thin / np.maximum(free, 1e-300), 1.0)
    out[-1] = 0.0
    return out


def fill_tables(q: np.ndarray, heights: np.ndarray, n_fill: int = N_FILL, n_radius: int = 160,
                n_brush: int = N_BRUSH):
    """Flame radius, front area and wetted areas on a grid of heights (H,) x fills s (n_fill,),
    and the brush-averaged front area on heights x front displacements (n_brush,) x fills.

    s = (V_b / V_chamber)^(1/3) from 0 to 1; returns dict of (H, n_fill) arrays [m, m^2] and
    ``a_brush`` (H, n_brush, n_fill) [m^2], its displacements sigma uniform from 0 to
    :data:`BRUSH_MAX` times the bore radius q[0] (at sigma = 0, ``a`` itself)."""
    key = (q.tobytes(), heights.tobytes(), n_fill, n_radius, n_brush)
    got = _TABLES.get(key)
    if got is not None:
        return got
    s_grid = np.linspace(0.0, 1.0, n_fill)
    out = {name: np.empty((heights.size, n_fill)) for name in ("r", "a", "head", "piston", "liner")}
    out["a_brush"] = np.empty((heights.size, n_brush, n_fill))
    sigmas = np.linspace(0.0, BRUSH_MAX * float(q[0]), n_brush)
    for i, h in enumerate(heights):
        r = np.linspace(0.0, fg.max_radius(q, float(h)), n_radius)
        v = fg.burned_volume(q, h, r, n_theta=720, n_sub=4)
        a = fg.front_area(q, h, r, n_theta=720)
        wet = fg.wetted_areas(q, h, r, n=400)
        s = np.maximum.accumulate(np.clip(v / fg.chamber_volume(q, h), 0.0, 1.0) ** (1.0 / 3.0))
        s = s + np.arange(s.size) * 1e-12          # strictly increasing for the inversion
        r_s = np.interp(s_grid, s, r)
        out["r"][i] = r_s
        # the front's share of a free sphere, ~1 while the flame is small: interpolates well at small r
        share = np.where(r > 0, a / np.maximum(4.0 * np.pi * r * r, 1e-300), 1.0)
        out["a"][i] = 4.0 * np.pi * r_s * r_s * np.interp(r_s, r, share)
        for name, val in zip(("head", "piston", "liner"), wet):
            out[name][i] = np.interp(r_s, r, val)
        out["a"][i, -1] = 0.0
        out["a_brush"][i, 0] = out["a"][i]
        for j in range(1, n_brush):
            out["a_brush"][i, j] = brush_average(r, v, a, fg.chamber_volume(q, h), sigmas[j], s_grid)
    _TABLES[key] = out
    return out


def fit_cv(gas: Any, B: int) -> np.ndarray:
    """Fresh-charge cv as c0 + c1 T + c2 T^2 [J/(kg K)] per case, least squares on
    :data:`CV_FIT_RANGE_K`: array (3, B)."""
    T = np.linspace(*CV_FIT_RANGE_K, 41)
    cv = np.stack([gas.unburned(np.full(B, t))[1] for t in T], axis=1)    # (B, 41)
    A = np.stack([np.ones_like(T), T, T * T], axis=1)
    coef, *_ = np.linalg.lstsq(A, cv.T, rcond=None)
    return coef


def adiabatic_rise(gas: Any, B: int) -> tuple[np.ndarray, np.ndarray]:
    """Constant-pressure adiabatic temperature rise [K] of the fresh charge from
    :data:`AD_REF_T_K` at :data:`AD_REF_P_PA` to equilibrium products, and their gas constant
    [J/(kg K)], per case (B,), by bisection on h_b(T_b) = h_u(T_u)."""
    h_u = gas.enthalpy_unburned(np.full(B, AD_REF_T_K))
    lo, hi = np.full(B, AD_REF_T_K), np.full(B, 3500.0)
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        _, _, _, R, _, _ = gas.burned(mid, AD_REF_P_PA / (287.0 * mid))
        rho = AD_REF_P_PA / (R * mid)
        above = gas.enthalpy_burned(mid, rho) > h_u
        hi = np.where(above, mid, hi)
        lo = np.where(above, lo, mid)
    T_b = 0.5 * (lo + hi)
    R_b = gas.burned(T_b, AD_REF_P_PA / (287.0 * T_b))[3]
    return T_b - AD_REF_T_K, np.asarray(R_b, float)


def heat_release_shape(theta, rate, dip: float = 0.02) -> dict:
    """Shape figures of a heat-release-rate trace ``rate`` [any unit] against ``theta`` [deg]:
    ``peak_deg``, ``rise_deg`` (from the last point below half the peak before it to the peak),
    ``fall_deg`` (from the peak to the first point below half the peak after it), their ratio
    ``fall_to_rise`` and ``maxima``, the number of humps above half the peak (a hump ends where the
    rate falls by more than ``dip`` of the peak below its own maximum before rising again)."""
    th, q = np.asarray(theta, float), np.asarray(rate, float)
    i = int(np.argmax(q))
    half = 0.5 * q[i]
    before = np.nonzero(q[:i] < half)[0]
    after = np.nonzero(q[i:] < half)[0]
    rise = th[i] - th[before[-1]] if before.size else np.nan
    fall = th[i + after[0]] - th[i] if after.size else np.nan
    d = dip * q[i]
    humps, up, top, low = 0, True, -np.inf, np.inf
    for v in q:
        if up:
            top = max(top, v)
            if v < top - d:
                humps, up, low = humps + (top >= half), False, v
        else:
            low = min(low, v)
            if v > low + d:
                up, top = True, v
    humps += up and top >= half
    return {"peak_deg": float(th[i]), "rise_deg": float(rise), "fall_deg": float(fall),
            "fall_to_rise": float(fall / rise), "maxima": int(humps)}


_CHARGE_MEMO: dict = {}
_CHARGE_MEMO_MAX = 32


def _charge_constants(gas: Any, B: int) -> tuple:
    """:func:`fit_cv` and :func:`adiabatic_rise` of a batch's charges, remembered for a batch of
    the same charges (the gas tables' per-charge tables, known by identity through weak references,
    so the memo keeps none of them alive: a spark or speed sweep run again does not refit them);
    computed as before otherwise."""
    cases = getattr(gas, "_cases", None)
    key = (tuple(id(c) for c in cases), B) if cases is not None and len(cases) == B else None
    hit = _CHARGE_MEMO.get(key) if key is not None else None
    got = hit[1] if hit is not None and all(r() is c for r, c in zip(hit[0], cases)) else None
    if got is None:
        got = (fit_cv(gas, B), adiabatic_rise(gas, B))
        if key is not None:
            try:
                refs = tuple(weakref.ref(c) for c in cases)
            except TypeError:                 # tables that take no weak reference: not remembered
                refs = None
            if refs is not None:
                if len(_CHARGE_MEMO) >= _CHARGE_MEMO_MAX and key not in _CHARGE_MEMO:
                    _CHARGE_MEMO.pop(next(iter(_CHARGE_MEMO)))
                _CHARGE_MEMO[key] = (refs, got)
    cv, (dT_ad, R_b) = got
    return cv.copy(), (dT_ad.copy(), R_b.copy())          # each model its own arrays


class EntrainmentBurn(BurnRate):
    """Predictive turbulent flame-entrainment burn (Blizard & Keck 1974, Tabaczynski et al. 1977,
    Keck 1982), with a Herweg & Maly (1992) early kernel and K-k turbulence (Poulos & Heywood 1983).

    Parameters
    ----------
    values : mapping
        See ``params``.
    ctx : SetupContext
        Uses ``gas``, ``geometry``, ``speed_rpm``, ``valves``, ``chamber``.

    Notes
    -----
    See the module notes for the equations.  The burn's duration is an output: the
    shortest feature is not known before the run (0).  Defaults and their sources:

    - ``production_coefficient`` c_beta = 0.5: the K-k production coefficient; Poulos & Heywood
      fitted values of order 0.5 (from memory).
    - ``ivc_turbulence_ratio`` = 0.1: k/K at IVC (a choice); the turbulence at TDC depends on it
      only weakly, since dissipation erases most of k's IVC value within the compression stroke
      (ten times more k at IVC gives about 20 % more u' at TDC on the demo, measured in the tests).
    - ``kernel_radius_mm`` = 1.0: the kernel at the end of the spark's breakdown and arc phases,
      about the electrode gap (Herweg & Maly 1992, from memory).
    - ``ivc_flow_factor`` = 1: the mean cycle's charge motion; the synthetic traces draw it per
      cycle (cycle-to-cycle variation of the intake flow).
    - ``flame_brush`` = ``burn_up``: the front's displacement by the eddies builds up over the
      burn-up time (see the module notes); ``spark`` gives the thicker brush of turbulent
      diffusion since the spark.
    - Taylor constant 15 (isotropic turbulence), Sutherland viscosity, laminar burning velocity
      with Rhodes & Keck dilution: see the combustion modules.

    ``fit_parameters``: the constants a fit to a measured pressure trace may estimate (without
    ``--param``, ``cyclesim fit`` fits these): ``production_coefficient`` sets the turbulence
    and so the rate of the developed flame (10-90 %), ``kernel_radius_mm`` the early flame
    development (0-10 %).  At one operating point the pressure trace sees mostly the burn's
    phasing, so the two correlate strongly there (|r| near 0.99 on the demo, measured); they
    differ in how they scale with speed and load, which points at other speeds and loads
    separate.  ``ivc_turbulence_ratio`` acts like ``production_coefficient`` (both set the
    turbulence level): fit one of the two.
    """

    name = "entrainment"
    summary = ("predictive turbulent flame-entrainment burn (Keck) with Herweg-Maly kernel, K-k"
               " turbulence and the chamber's flame geometry; duration is an output")
    spark_param = "spark_advance_deg"

    @classmethod
    def shortest_feature_deg_for(cls, params):
        """The predicted burn's angles are not known before the run; 16 deg, below the shortest
        10-90 % angle of a spark-ignition burn (about 20 deg at full load, Heywood 1988 ch. 9,
        from memory) and of every 0-10 % angle, lets the closed part take twice the step (16 steps
        across it, :data:`cyclesim.solve.cycle_grid.MIN_FEATURE_STEPS`)."""
        return 16.0
    fit_parameters = ("production_coefficient", "kernel_radius_mm")
    kernel = staticmethod(entrainment_rate)
    state_kernel = staticmethod(entrainment_states)
    wall_share_kernel = staticmethod(flame_wall_share)
    params = (
        P_SPARK,
        P_EFF,
        Param("production_coefficient", "-", 0.5,
              "K-k model: production coefficient c_beta of turbulence from the mean flow", min=0.0, max=5.0),
        Param("ivc_turbulence_ratio", "-", 0.1,
              "K-k model: turbulent / mean-flow kinetic energy at IVC", min=0.0, max=10.0,
              min_exclusive=True),
        Param("kernel_radius_mm", "mm", 1.0, "radius of the flame kernel at the spark", min=0.1, max=10.0),
        Param("ivc_flow_factor", "-", 1.0,
              "the cycle's charge motion at IVC against the mean inlet flow velocity: scales the mean-flow"
              " and turbulence velocities at IVC (their energies by its square); 1 for the mean cycle, drawn"
              " per cycle by the synthetic traces", min=0.1, max=10.0),
        Param("fuel_flame_data", "-", lf.AUTO,
              "laminar burning velocity correlation's fuel; 'auto': the config's fuel where a correlation"
              " covers it, else gasoline's with a warning",
              kind="choice", choices=(lf.AUTO,) + tuple(lf.FUEL_CODES), sweepable=False),
        Param("flame_brush", "-", "burn_up",
              "how long the front's displacement by the eddies accumulates: 'burn_up', over the eddies' burn-up"
              " time lambda / S_L (a brush about u' tau_b thick); 'spark', since the spark (turbulent diffusion"
              " of the whole brush, Taylor 1921)", kind="choice", choices=("burn_up", "spark"), sweepable=False),
    )
    references = (
        "Blizard, N. C., Keck, J. C. (1974). Experimental and theoretical investigation of turbulent "
        "burning model for internal combustion engines. SAE 740191.",
        "Tabaczynski, R. J., Ferguson, C. R., Radhakrishnan, K. (1977). A turbulent entrainment model "
        "for spark-ignition engine combustion. SAE 770647.",
        "Keck, J. C. (1982). Turbulent flame structure and speed in spark-ignition engines. Nineteenth "
        "Symposium (International) on Combustion, 1451-1466.",
        "Herweg, R., Maly, R. R. (1992). A fundamental model for flame kernel formation in S.I. "
        "engines. SAE 922243.",
        "Poulos, S. G., Heywood, J. B. (1983). The effect of chamber geometry on spark-ignition "
        "engine combustion. SAE 830334.",
        "Metghalchi, M., Keck, J. C. (1982). Combustion and Flame 48, 191-210; Gülder, O. L. (1984), "
        "SAE 841000; Rhodes, D. B., Keck, J. C. (1985), SAE 850047 (laminar burning velocity).",
    )

    def __init__(self, values: Mapping[str, Any], ctx: SetupContext) -> None:
        super().__init__(values, ctx)
        B = self.B
        p = self.p
        g = ctx.geometry
        self.spark = -_arr(p.spark_advance_deg, B)
        self.eff = _arr(p.combustion_efficiency, B)
        chamber = getattr(ctx, "chamber", None) or fg.ChamberShape()
        bore = _arr(g.bore_m, B)
        self.bore_area = math.pi * bore ** 2 / 4.0
        self.half_bore = 0.5 * bore
        # flame tables per distinct geometry
        V_tdc = _arr(g.volume_at(np.zeros(B)), B)
        V_late = _arr(g.volume_at(np.full(B, TABLE_LATEST_DEG)), B)
        keys: dict = {}
        self.off = np.zeros(B)
        self.off_a = np.zeros(B)
        self.v_rb = np.zeros(B)
        self.h0 = np.zeros(B)
        self.inv_dh = np.zeros(B)
        rows_r, rows_a, rows_w = [], [], []
        for b in range(B):
            key = (bore[b], V_tdc[b], V_late[b])
            if key not in keys:
                q = chamber.parameters(float(bore[b]))
                h_lo, h_hi = chamber.clearance_height_m(float(bore[b]), np.array([V_tdc[b], V_late[b]]))
                heights = np.linspace(float(h_lo), float(h_hi), N_HEIGHT)
                tab = fill_tables(q, heights)
                keys[key] = (len(rows_r) * N_HEIGHT * N_FILL, len(rows_r) * N_HEIGHT * N_BRUSH * N_FILL,
                             fg.roof_volume(q) + fg.bowl_volume(q), float(h_lo),
                             (N_HEIGHT - 1) / (float(h_hi) - float(h_lo)))
                rows_r.append(tab["r"])
                rows_a.append(tab["a_brush"])
                rows_w.append(np.stack([tab["head"], tab["piston"], tab["liner"]]))
            self.off[b], self.off_a[b], self.v_rb[b], self.h0[b], self.inv_dh[b] = keys[key]
        self.tab_r = np.concatenate([t.ravel() for t in rows_r])
        self.tab_a = np.concatenate([t.ravel() for t in rows_a])
        self.tab_wet = rows_w
        # charge
        gas = ctx.gas
        self.phi = _arr(gas.phi, B)
        fuel = getattr(gas, "fuel", None)
        self.flame_fuel, self.flame_fuel_note = lf.flame_fuel(str(p.fuel_flame_data), getattr(fuel, "name", None))
        code = lf.fuel_code(self.flame_fuel)
        self.flame_code = code
        self.mk = 1.0 if code < 4 else 0.0
        self.c_mk = lf.MK_CONSTANTS[min(code, 3)]
        self.c_g = lf.GULDER_CONSTANTS[max(code - 4, 0)]
        self.cv, (self.dT_ad, self.R_b) = _charge_constants(gas, B)
        self.R_u = _arr(gas.R_unburned, B)
        # turbulence at IVC from the mean inlet flow velocity
        val = ctx.valves
        Sp = _arr(g.mean_piston_speed(ctx.speed_rpm), B)
        self.v_inlet = bore ** 2 * Sp / (4.0 * _arr(val.intake_count, B) * _arr(val.intake_diameter_mm, B)
                                         * 1e-3 * _arr(val.intake_max_lift_mm, B) * 1e-3)
        self.K_ivc = 0.5 * (_arr(p.ivc_flow_factor, B) * self.v_inlet) ** 2
        self.k_ivc = _arr(p.ivc_turbulence_ratio, B) * self.K_ivc
        self.c_beta = _arr(p.production_coefficient, B)
        self.r0 = _arr(p.kernel_radius_mm, B) * 1e-3
        self.brush_spark = 1.0 if str(p.flame_brush) == "spark" else 0.0
        self._packed: dict | None = None
        self._last: tuple | None = None

    # -- contract -----------------------------------------------------------
    def states(self):
        return (StateVar("x_e", "-", initial=0.0, reset_at_ivc=True),
                StateVar("K", "J/kg", initial=self.K_ivc.copy(), reset_at_ivc=True),
                StateVar("k", "J/kg", initial=self.k_ivc.copy(), reset_at_ivc=True))

    def pack(self) -> dict:
        """Parameters of both kernels by name, arrays (B,) or flat tables shared by the batch
        (:func:`cyclesim.loops.layout.shared_array`: each case reads its own part from ``off``) [SI]."""
        if self._packed is None:
            c_mk, c_g = self.c_mk, self.c_g
            self._packed = {
                "spark": self.spark, "eff": self.eff, "phi": self.phi, "mk": self.mk,
                "c_mk0": c_mk[0], "c_mk1": c_mk[1], "c_mk2": c_mk[2],
                "c_g0": c_g[0], "c_g1": c_g[1], "c_g2": c_g[2], "c_g3": c_g[3], "c_g4": c_g[4],
                "cv0": self.cv[0], "cv1": self.cv[1], "cv2": self.cv[2], "R_u": self.R_u, "R_b": self.R_b,
                "dT_ad": self.dT_ad, "bore_area": self.bore_area, "half_bore": self.half_bore,
                "v_rb": self.v_rb, "r0": self.r0, "brush_spark": self.brush_spark, "tab_r": shared_array(self.tab_r),
                "tab_a": shared_array(self.tab_a), "tab_idx": shared_array(np.arange(self.tab_r.size)),
                "tab_ia": shared_array(np.arange(self.tab_a.size)),
                "tab_wet": shared_array(sum(np.concatenate([w[k].ravel() for w in self.tab_wet]) for k in range(3))),
                "off": self.off, "off_a": self.off_a,
                "h0": self.h0, "inv_dh": self.inv_dh, "nh": float(N_HEIGHT), "nb": float(N_BRUSH),
                "ns": float(N_FILL),
                "c_beta": self.c_beta,
            }
        return self._packed

    def start_deg(self) -> np.ndarray:
        """Start of combustion [deg] (B,): the spark."""
        return self.spark.copy()

    def spark_deg(self) -> np.ndarray:
        """Spark timing as a crank angle [deg] (negative = before TDC) (B,)."""
        return self.spark.copy()

    def combustion_efficiency(self) -> np.ndarray:
        return self.eff.copy()

    def burned_wall_share(self, s, V_b):
        """Share [-] (B,) of the chamber's wall (head, piston, liner) wetted by the spherical flame
        that encloses ``V_b`` [m^3] at the present piston position (:func:`flame_wall_share`, the
        kernel the compiled loop runs): the two-zone cylinder's split of the wall heat."""
        P = self.pack()
        return flame_wall_share(s.V, V_b, P["v_rb"], P["bore_area"], P["tab_wet"], P["tab_idx"], P["off"], P["h0"],
                                P["inv_dh"], P["nh"], P["ns"])

    def _flame(self, s):
        """The shared flame quantities of this right-hand-side evaluation (computed once per GasState)."""
        from cyclesim.loops.loopgen import call_on

        if self._last is not None and self._last[0] is s:
            return self._last[1]
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            got = call_on(_flame_state, s, self.pack(), self.role)
        self._last = (s, got)
        return got

    def derivatives(self, s):
        """Time derivatives of x_e, K, k (:func:`entrainment_states` on arrays (B,))."""
        sub = s.sub
        K, k = sub[f"{self.role}.K"], sub[f"{self.role}.k"]
        x_e = sub[f"{self.role}.x_e"]
        P = self.pack()
        if s.theta < float(np.min(self.spark)) or not np.any(s.closed):
            # no case burns yet (or all valves are open): the flame terms are zero
            on, rho_u, a_f, u_eff, s_k = False, 0.0, 0.0, 0.0, 0.0
        else:
            on, s_l, s_k, u_eff, rho_u, a_f, lam, T_u = self._flame(s)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            dxe, dK, dk = state_rates(on, x_e, K, k, rho_u, a_f, u_eff, s_k, s.m, s.V, s.dV, s.omega_deg,
                                      s.closed, P["bore_area"], P["half_bore"], P["c_beta"])
        return {"x_e": dxe, "K": dK, "k": dk}

    # -- figures -----------------------------------------------------------------
    def figures(self, trace: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
        """Turbulence intensity at the spark and at TDC and its ratio to the mean piston speed,
        the mean inlet flow velocity, flame-development (spark to 10 %) angle."""
        th = np.broadcast_to(np.asarray(trace["crank_deg"], float), np.shape(trace["burn.k"]))
        k = np.asarray(trace["burn.k"], float)
        at = lambda a, x: np.array([np.interp(x[b], th[b], a[b]) for b in range(self.B)])  # noqa: E731
        u_tdc = turbulence_intensity(at(k, np.zeros(self.B)))
        u_sp = turbulence_intensity(at(k, self.spark))
        Sp = _arr(self.ctx.geometry.mean_piston_speed(self.ctx.speed_rpm), self.B)
        xb = np.asarray(trace["mfb"], float)
        ca10 = np.array([np.interp(0.1, np.maximum.accumulate(xb[b]), th[b]) if xb[b].max() > 0.1 else np.nan
                         for b in range(self.B)])
        return {
            "turbulence_intensity_at_spark_m_per_s": u_sp,
            "turbulence_intensity_at_tdc_m_per_s": u_tdc,
            "turbulence_to_piston_speed_at_tdc": u_tdc / Sp,
            "inlet_flow_velocity_m_per_s": self.v_inlet.copy(),
            "flame_development_angle_deg": ca10 - self.spark,
        }

    def warnings(self, trace: Mapping[str, np.ndarray]) -> list[list[str]]:
        """The laminar flame data of another fuel than the charge's; the laminar correlation used
        beyond its measurements between the spark and 90 % burned (or EVO); incomplete burn
        at EVO."""
        out: list[list[str]] = [[] if self.flame_fuel_note is None else [self.flame_fuel_note]
                                for _ in range(self.B)]
        th = np.broadcast_to(np.asarray(trace["crank_deg"], float), np.shape(trace["mfb"]))
        xb = np.asarray(trace["mfb"], float)
        evo = _arr(self.ctx.events.evo, self.B)
        # the unburned zone's own temperature with two zones; with one, the charge's at the spark
        # (the unburned gas is compressed further: a lower bound)
        two = "unburned_temperature_K" in trace
        T_u = np.broadcast_to(np.asarray(trace["unburned_temperature_K" if two else "temperature_K"], float),
                              th.shape)
        p = np.broadcast_to(np.asarray(trace["pressure_bar"], float), th.shape) * 1e5
        for b in range(self.B):
            burning = (th[b] >= self.spark[b]) & (th[b] <= evo[b]) & (xb[b] < 0.9)
            if burning.any():
                T_max = float(np.nanmax(T_u[b][burning])) if two else float(np.interp(self.spark[b], th[b], T_u[b]))
                note = lf.extrapolation_note(float(self.phi[b]), T_max, float(np.nanmax(p[b][burning])),
                                             self.flame_code, at_spark=not two)
                if note is not None:
                    out[b].append(note)
            x = float(np.interp(evo[b], th[b], xb[b]))
            if x < 0.99:
                out[b].append(f"burn law: only {100 * x:.1f} % burned at exhaust valve opening ({evo[b]:g} deg);"
                              " the rest of the charge leaves unburned")
        return out


SUBMODELS = [EntrainmentBurn]
