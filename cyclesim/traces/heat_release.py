"""Heat release of a measured cycle: the apparent single-zone release, the gross release with the fuel's gas tables and Woschni's wall heat, the sensor's thermal drift, and the burn points."""

from __future__ import annotations

import numpy as np

from ..errors import CyclesimError
from .cycle_math import _interp, _slope_loglog
from .analysis_settings import AnalysisSettings, BAR


def _gamma(T, s: AnalysisSettings):
    return np.clip(s.gamma0 + s.gamma1_per_K * T, 1.05, 1.45)


def apparent_heat_release(th, p, V, s: AnalysisSettings, mR=None):
    """Cumulative apparent net heat release [J] and temperature [K] from IVC to EVO.

    Parameters
    ----------
    th : ndarray (n,)
        Corrected crank angle [deg].
    p : ndarray (n,)
        Absolute pressure [Pa].
    V : ndarray (n,)
        Volume at ``th`` [m^3].
    s : AnalysisSettings
    mR : float, optional
        Trapped mass times gas constant [J/K]; default from IVC state or settings.

    Returns
    -------
    Q : ndarray (n,)
        Zero at IVC, NaN outside IVC..EVO [J].
    T : ndarray (n,)
        Gas temperature [K], NaN outside IVC..EVO.
    """
    if mR is None:
        m_tr = s.trapped_mass()
        if m_tr:
            mR = m_tr * s.R_J_per_kgK
        else:
            mR = _interp(th, p * V, s.ivc_deg) / s.T_ivc_K
    w = (th >= s.ivc_deg) & (th <= s.evo_deg)
    idx = np.flatnonzero(w)
    Q = np.full(th.shape, np.nan)
    T = np.full(th.shape, np.nan)
    if idx.size < 3:
        return Q, T
    pw, Vw = p[idx], V[idx]
    Tw = pw * Vw / mR
    pm = 0.5 * (pw[1:] + pw[:-1])
    Vm = 0.5 * (Vw[1:] + Vw[:-1])
    gm = _gamma(pm * Vm / mR, s)
    dq = gm / (gm - 1) * pm * np.diff(Vw) + Vm * np.diff(pw) / (gm - 1)
    q = np.concatenate([[0.0], np.cumsum(dq)])
    q -= np.interp(s.ivc_deg, th[idx], q)
    Q[idx] = q
    T[idx] = Tw
    return Q, T


_TABLES: dict = {}


def _gas_tables(s: AnalysisSettings):
    """Fresh-charge and burned-gas property tables of the settings' fuel and lambda (cached)."""
    key = (s.fuel, float(s.fuel_air_lambda), s.burned_gas)
    if key not in _TABLES:
        from ..fuels import get_fuel
        from ..solve.gas_tables import build_gas_tables

        if not s.fuel_air_lambda > 0:
            raise CyclesimError(f"analyse: fuel_air_lambda = {s.fuel_air_lambda!r}: expected > 0")
        _TABLES[key] = build_gas_tables(get_fuel(s.fuel), [1.0 / float(s.fuel_air_lambda)], s.burned_gas)
    return _TABLES[key]


def _mixture_temperature(tab, p, V, m, y):
    """Temperature [K] of the mixture from p V = m R(T, rho, y) T (fixed point)."""
    rho = m / V
    T = p * V / (m * float(tab.R_unburned[0]))
    for _ in range(6):
        R = tab.mixture_points(T, rho, y).R
        T = p * V / (m * R)
    return T


def _tables_heat_release(th, p, V, s: AnalysisSettings, y, mass=None):
    """Apparent net heat release [J] over the IVC..EVO samples ``th`` with the ``tables`` gas.

    The sensible-energy first law of a closed single zone: per step,
    ``dQ = m [u(T2, rho2, y_m) - u(T1, rho1, y_m)] + p_m dV`` with the mixture
    internal energy u at the step's mean burned fraction y_m (the composition
    change itself is the chemical release and is not counted), T from
    ``p V = m R(T, rho, y) T``.  Returns (Q, T, m).
    """
    tab = _gas_tables(s)
    if mass is None:
        m_tr = s.trapped_mass()
        if m_tr:
            mass = m_tr
        else:
            p0, V0, y0 = _interp(th, p, s.ivc_deg), _interp(th, V, s.ivc_deg), float(y[0])
            mass = p0 * V0 / (float(tab.R_unburned[0]) * s.T_ivc_K)
            for _ in range(4):
                R0 = float(tab.mixture(np.array([s.T_ivc_K]), np.array([mass / V0]), np.array([y0])).R[0])
                mass = p0 * V0 / (R0 * s.T_ivc_K)
    T = _mixture_temperature(tab, p, V, mass, y)
    rho = mass / V
    ym = 0.5 * (y[1:] + y[:-1])
    u2 = tab.mixture_points(T[1:], rho[1:], ym).u
    u1 = tab.mixture_points(T[:-1], rho[:-1], ym).u
    dq = mass * (u2 - u1) + 0.5 * (p[1:] + p[:-1]) * np.diff(V)
    q = np.concatenate([[0.0], np.cumsum(dq)])
    return q, T, mass


def _woschni_h(bore, p, T, w, s: AnalysisSettings):
    """Woschni's coefficient [W/(m^2 K)] (bore [m], p [Pa], T [K], w [m/s]).

    ``original``: Woschni 1967 (SAE 670931), p in bar, T^-0.53; ``heywood``: the
    restatement of Heywood 1988 eq. 12.19, p in kPa, T^-0.55 (the constants are the
    ``woschni`` heat-transfer model's WOSCHNI_FORMS).  The two differ by T^-0.02 with
    the constants' ratio (0.87 at 800 K, 0.86 at 2000 K).
    """
    if s.woschni_form not in ("original", "heywood"):
        raise CyclesimError(f"woschni_form {s.woschni_form!r}: unknown; choose original or heywood")
    return _woschni_model().correlation(bore, p, T, w, form=s.woschni_form)


def _woschni_model():
    """The simulator's own Woschni model class (one implementation of its correlation and constants),
    found through the registry."""
    from ..registry import get_registry

    return get_registry().submodel_class("heat_transfer", "woschni")


def _woschni_wall_heat(th, p, V, T, vol, s: AnalysisSettings, speed_rpm, n_comp, theta_soc):
    """Cumulative wall heat [J] over the samples ``th`` by Woschni's correlation.

    Woschni 1967 (SAE 670931) as restated by Heywood 1988 eq. 12.19:
    ``h = C B^-0.2 p^0.8 T^e w^0.8`` (the form of ``settings.woschni_form``) with
    ``w = C1 Sp + C2 Vd T_r / (p_r V_r) (p - p_mot)``, C1 of the closed cycle without
    swirl, C2 = 0 before the start of combustion ``theta_soc`` and Woschni's constant
    after it (the constants of the ``woschni`` heat-transfer model); the
    reference state is IVC and the motored pressure ``p_mot = p_r (V_r / V)^n``
    with the measured compression exponent n.  Areas: head and piston from the
    Geometry (2.1 bore areas for a sampled volume) plus the liner 4 V / B.
    """
    bore = vol.bore_m or s.bore_m
    if not bore:
        raise CyclesimError("wall heat: needs the bore (settings.bore_m) when the volume is an array")
    a_bore = np.pi * bore**2 / 4.0
    sp = 2.0 * (vol.Vd / a_bore) * speed_rpm / 60.0
    if vol.geometry is not None:
        end_area = float(vol.geometry.head_area_factor[0] + vol.geometry.piston_area_factor[0]) * a_bore
    else:
        end_area = 2.1 * a_bore
    A = end_area + 4.0 * V / bore
    p_r, V_r, T_r = p[0], V[0], T[0]
    n = n_comp if np.isfinite(n_comp) and 1.0 < n_comp < 1.6 else 1.32
    p_mot = p_r * (V_r / V) ** n
    wo = _woschni_model()
    c2 = np.where(th >= theta_soc, wo.C2, 0.0)
    w = wo.C1["closed"][0] * sp + wo.combustion_velocity(c2, vol.Vd, T_r, p_r, V_r, np.maximum(p - p_mot, 0.0))
    h = s.woschni_multiplier * _woschni_h(bore, p, T, w, s)
    Tw = s.wall_temperature_K if s.wall_temperature_K is not None else s.tdc_wall_temperature_K
    rate = h * A * (T - Tw) / (6.0 * speed_rpm)          # [J/deg]
    return np.concatenate([[0.0], np.cumsum(0.5 * (rate[1:] + rate[:-1]) * np.diff(th))])


def _level_after_burn(th, q_net, q_wall, s: AnalysisSettings) -> float:
    """Scale of the wall heat that makes the gross release level once burning has stopped.

    Once burning has stopped the apparent release falls only by the wall heat,
    so ``q_net + c q_wall`` must be level there (common practice: the heat
    transfer of a heat-release analysis is tuned until the cumulative gross
    release is flat after the end of combustion).  The window runs from
    ``level_start_deg`` after the maximum of the apparent release (the
    burning rate has fallen below the wall loss there) to ``level_end_deg``
    before EVO; c is the least-squares ratio of the two slopes, bounded to
    ``WALL_HEAT_SCALE_BOUNDS``: zero and slightly negative values are allowed (a trace with no
    wall heat, an adiabatic model or a well-insulated engine, levels itself; noise and the drift
    scatter the fit about zero), see :func:`wall_heat_scale_flag`.  Without ``level_fit`` (or
    with too short a window) the scale is ``woschni_multiplier`` as given.
    """
    if not s.level_fit:
        return 1.0
    imax = int(np.argmax(q_net))
    m = (th >= th[imax] + s.level_start_deg) & (th <= s.evo_deg - s.level_end_deg)
    if m.sum() < 10:
        # the release still rises at EVO (no wall heat to bring it down): the window from where the
        # release first reaches 98 % of its rise instead
        lo = float(np.min(q_net[: imax + 1]))
        j = int(np.argmax(q_net >= lo + 0.98 * (q_net[imax] - lo)))
        m = (th >= th[j] + s.level_start_deg) & (th <= s.evo_deg - s.level_end_deg)
    if m.sum() < 10:
        return 1.0
    t = th[m]
    a = np.polyfit(t, q_net[m], 1)[0]
    b = np.polyfit(t, q_wall[m], 1)[0]
    if not b > 0:
        return 1.0
    return float(np.clip(-a / b, *WALL_HEAT_SCALE_BOUNDS))


#: Bounds of the level-after-burn wall-heat scale [-] (of Woschni's coefficient x woschni_multiplier).
WALL_HEAT_SCALE_BOUNDS = (-0.3, 5.0)
#: A scale below this in magnitude is flagged as near zero [-].
WALL_HEAT_SCALE_NEAR_ZERO = 0.2


def wall_heat_scale_flag(scale: float) -> str:
    """``near zero``, ``at a bound`` or ``""`` for a level-after-burn wall-heat scale [-].

    Near zero: the traces show (almost) no wall heat after burning, as from an adiabatic
    model, a well-insulated engine, or a sensor drift that mimics heat gain; at a bound: the
    level condition was not met within the range, so the late burn points are doubtful.
    """
    lo, hi = WALL_HEAT_SCALE_BOUNDS
    if not np.isfinite(scale):
        return ""
    if scale <= lo + 1e-9 or scale >= hi - 1e-9:
        return "at a bound"
    if abs(scale) < WALL_HEAT_SCALE_NEAR_ZERO:
        return "near zero"
    return ""


def _thermal_lag(th, T, speed_rpm, tau_s):
    """T [K] through a first-order lag of time constant ``tau_s`` [s], started at rest at T[0].

    Zero-order hold per step: y_k = y_{k-1} + (1 - exp(-dt/tau)) (T_k - y_{k-1}),
    dt = dtheta / (6 N).
    """
    if not tau_s > 0:
        return np.asarray(T, float).copy()
    a = 1.0 - np.exp(-np.diff(th) / (6.0 * float(speed_rpm)) / float(tau_s))
    y = np.empty_like(T)
    y[0] = T[0]
    for k in range(1, T.size):
        y[k] = y[k - 1] + a[k - 1] * (T[k] - y[k - 1])
    return y


def _thermal_drift_step(th, p, V, s: AnalysisSettings, y, mass, lag, q, qw) -> tuple[float, float]:
    """Increment of the thermal-drift sensitivity [Pa/K] from the level condition after burning.

    Model of the measured pressure: ``p_meas = p + c L`` (this c is the negative of the reported
    ``thermal_drift_bar_per_K``), ``L`` the gas
    temperature through the sensor's first-order lag, less its value at IVC
    (``lag``) [K].  Once burning has stopped the gross release
    ``q_net(p_meas - c L) + k q_wall`` must be constant.  ``q_net`` is
    linearised in c by a finite difference (``D = dq_net/dc``), and the
    constant, the wall-heat scale k and the increment dc are found together by
    linear least squares over the level window (see :func:`_level_after_burn`).
    The two shapes differ: the wall heat rises with h A (T - T_w) and the
    drift term with the lagged T and its rate of change.  Returns 0 if the
    window is too short or the system is singular.  Also returns the residual
    sum of squares of that fit [J^2] (NaN if none): the level condition's
    misfit with c, k and the level fitted, used to estimate the lag's time
    constant (:func:`_estimate_thermal_tau`).
    """
    imax = int(np.argmax(q))
    m = (th >= th[imax] + s.level_start_deg) & (th <= s.evo_deg - s.level_end_deg)
    if m.sum() < 10:
        return 0.0, float("nan")
    dc = 1.0                                             # [Pa/K]: 1e-5 bar/K, small against p
    from scipy.signal import savgol_filter

    # regressor from a smoothed pressure (5 deg window at 0.1 deg): its noise would otherwise
    # correlate with the noise of q and bias c
    n_w = int(round(5.0 / float(np.median(np.diff(th))))) | 1
    ps = savgol_filter(p, n_w, 3) if p.size > 2 * n_w and n_w >= 5 else p
    q0s, _, _ = _tables_heat_release(th, ps, V, s, y, mass)
    q1, _, _ = _tables_heat_release(th, ps - dc * lag, V, s, y, mass)
    D = (q1 - q0s) / dc
    A = np.column_stack([np.ones(m.sum()), qw[m], D[m]])
    sc = np.max(np.abs(A), axis=0)
    if not np.all(sc > 0):
        return 0.0, float("nan")
    sol, *_ = np.linalg.lstsq(A / sc, -q[m], rcond=None)
    step = float(sol[2] / sc[2])
    # misfit of the same model on the release of the smoothed pressure: the white noise of the
    # release would otherwise set a floor that hides the systematic misfit
    sol_s, *_ = np.linalg.lstsq(A / sc, -q0s[m], rcond=None)
    rss = float(np.sum(((A / sc) @ sol_s + q0s[m]) ** 2))
    return (step, rss) if np.isfinite(step) else (0.0, float("nan"))


def _tau(s: AnalysisSettings) -> float:
    return float(s.thermal_time_constant_default_s if s.thermal_time_constant_s is None else s.thermal_time_constant_s)


def _tau_subsample(cycles, n: int) -> np.ndarray:
    """At most ``n`` of the fired ``cycles``, evenly spread over the set (all of them when fewer)."""
    cycles = np.asarray(cycles, int)
    if n <= 0 or cycles.size <= n:
        return cycles
    return cycles[np.unique(np.round(np.linspace(0, cycles.size - 1, int(n))).astype(int))]


def _estimate_thermal_tau(th, P, cycles, vol, s: AnalysisSettings, speed_rpm) -> dict:
    """Time constant of the thermal drift's lag from the set: the minimum of the summed level misfit.

    For each time constant of a log-spaced grid, the drift sensitivity,
    wall-heat scale and level of each cycle of a fixed subsample of the fired
    cycles (``thermal_time_constant_cycles``, evenly spread over the set; all
    of them when fewer) are fitted (:func:`_thermal_drift_step`) and the
    residuals of the level fits after burning are summed over those cycles;
    the minimum is refined by a parabola in log tau through it and its
    neighbours.  The subsample keeps the cost fixed (grid points x
    subsample cycles analyses) whatever the size of the set.  Well defined:
    the minimum lies inside the grid and the curve's largest value exceeds it
    by ``thermal_time_constant_min_contrast``; else
    ``thermal_time_constant_default_s`` is returned with ``well_defined`` False.
    """
    a, b, n = s.thermal_time_constant_grid_s
    grid = np.geomspace(float(a), float(b), int(n))
    sub = _tau_subsample(cycles, int(s.thermal_time_constant_cycles))
    rss = np.array([_set_thermal_drift(th, P, sub, vol, s.replace(thermal_time_constant_s=float(g)), speed_rpm)[1]
                    for g in grid])
    out = {"grid_s": grid.tolist(), "rss_rel": [], "tau_s": _tau(s), "well_defined": False,
           "cycles": [int(k) + 1 for k in sub]}
    if not np.all(np.isfinite(rss)) or not rss.min() > 0:
        return out
    rel = rss / rss.min()
    out["rss_rel"] = rel.tolist()
    i = int(np.argmin(rss))
    if not (0 < i < grid.size - 1 and rel.max() - 1.0 >= s.thermal_time_constant_min_contrast):
        return out
    r0, r1, r2 = rel[i - 1], rel[i], rel[i + 1]
    den = r0 - 2.0 * r1 + r2
    u = float(np.clip(0.5 * (r0 - r2) / den, -0.5, 0.5)) if den > 0 else 0.0
    h = float(np.log(grid[1] / grid[0]))
    out.update(tau_s=float(grid[i] * np.exp(u * h)), well_defined=True)
    return out


def _set_thermal_drift(th, P, cycles, vol, s: AnalysisSettings, speed_rpm) -> tuple[float, float]:
    """Set-wide drift sensitivity [bar/K] (median of the cycles' own estimates) and the summed
    residual of their level fits [J^2], at the time constant ``s.thermal_time_constant_s``; NaN if none."""
    est, rss = [], []
    for k in cycles:
        info = {}
        p_k = P[k]
        n_c = _slope_loglog(th, p_k, vol(th), *s.compression_window_deg)
        heat_release(th, p_k, vol, s, speed_rpm, n_c, info)
        est.append(info.get("thermal_drift_bar_per_K", np.nan))
        rss.append(info.get("thermal_level_rss_J2", np.nan))
    est, rss = np.asarray(est, float), np.asarray(rss, float)
    ok = np.isfinite(est) & np.isfinite(rss)
    if not ok.any():
        return float("nan"), float("nan")
    return float(np.median(est[ok])), float(np.sum(rss[ok]))


def _normalised(th, q):
    """Burned fraction from a cumulative release: 0 at its minimum before its maximum, 1 at the maximum."""
    imax = int(np.argmax(q))
    imin = int(np.argmin(q[: imax + 1]))
    x = np.zeros_like(q)
    if q[imax] - q[imin] > 0:
        x = np.clip((q - q[imin]) / (q[imax] - q[imin]), 0.0, 1.0)
        x[:imin] = 0.0
        x[imax:] = 1.0
    return x, th[imin]


def heat_release(th, p, vol, s: AnalysisSettings, speed_rpm: float, n_comp: float = np.nan,
                 info: dict | None = None):
    """Apparent net and gross heat release [J] and temperature [K] from IVC to EVO.

    Parameters
    ----------
    th : ndarray (n,)
        Corrected crank angle [deg].
    p : ndarray (n,)
        Absolute pressure [Pa].
    vol : VolumeFunction
    s : AnalysisSettings
    speed_rpm : float
        Engine speed [rpm] (for the wall heat).
    n_comp : float
        Polytropic exponent of compression (Woschni's motored pressure) [-].

    Returns
    -------
    Q_net, Q_gross, T : ndarray (n,)
        NaN outside IVC..EVO; the releases are zero at IVC.  Q_gross equals
        Q_net when ``wall_heat`` is ``none``.
    """
    V = vol(th)
    if s.gas_model == "linear":
        Q, T = apparent_heat_release(th, p, V, s)
        w = np.isfinite(Q)
        idx = np.flatnonzero(w)
    elif s.gas_model == "tables":
        w = (th >= s.ivc_deg) & (th <= s.evo_deg)
        idx = np.flatnonzero(w)
        Q = np.full(th.shape, np.nan)
        T = np.full(th.shape, np.nan)
        if idx.size < 3:
            return Q, Q.copy(), T
        tw, pm_w, Vw = th[idx], p[idx], V[idx]
        r = float(s.residual_fraction)
        x = np.zeros(idx.size)
        k_wall = float("nan")
        mass = None
        if s.thermal_drift not in ("fit", "none"):
            raise CyclesimError(f"thermal_drift {s.thermal_drift!r}: unknown; choose fit or none")
        # the fit rests on the first law with absolute temperatures: only with a known trapped mass
        fit_drift = (s.thermal_drift == "fit" and s.wall_heat == "woschni" and s.level_fit
                     and s.trapped_mass() is not None)
        given = s.thermal_drift_bar_per_K is not None and s.thermal_drift != "none"
        # model coefficient [Pa/K] of p_meas - p = c_th L; the settings and results give the sensitivity
        # in the generator's convention (positive: the sensor reads low when the gas is hot), -c_th
        c_th = -float(s.thermal_drift_bar_per_K) * BAR if given else 0.0
        fit_drift = fit_drift and not given
        lag = np.zeros(idx.size)
        rss = float("nan")
        if given:
            q, Tw, mass = _tables_heat_release(tw, pm_w, Vw, s, r + (1.0 - r) * x, mass)
            lag = _thermal_lag(tw, Tw, speed_rpm, _tau(s)) - Tw[0]
        for outer in range(int(s.thermal_passes) + 1 if fit_drift else 1):
            pw = pm_w - c_th * lag
            for it in range(max(1, int(s.burn_iterations)) + 1):
                y = r + (1.0 - r) * x
                q, Tw, mass = _tables_heat_release(tw, pw, Vw, s, y, mass)
                qg = q
                if s.wall_heat == "woschni":
                    soc = _normalised(tw, q)[1]
                    qw = _woschni_wall_heat(tw, pw, Vw, Tw, vol, s, speed_rpm, n_comp, soc)
                    k_wall = _level_after_burn(tw, q, qw, s)
                    qg = q + k_wall * qw
                x, _ = _normalised(tw, qg)
            if not fit_drift or outer == int(s.thermal_passes):
                break
            lag = _thermal_lag(tw, Tw, speed_rpm, _tau(s)) - Tw[0]
            dc_th, rss = _thermal_drift_step(tw, pw, Vw, s, y, mass, lag, q, qw)
            c_th += dc_th
        if info is not None:
            info["wall_heat_scale"] = k_wall if s.wall_heat == "woschni" and s.level_fit else float("nan")
            info["thermal_drift_bar_per_K"] = -c_th / BAR
            info["thermal_level_rss_J2"] = rss if fit_drift else float("nan")
        Q[idx] = q - np.interp(s.ivc_deg, tw, q)
        T[idx] = Tw
        G = np.full(th.shape, np.nan)
        G[idx] = qg - np.interp(s.ivc_deg, tw, qg)
        return Q, G, T
    else:
        raise CyclesimError(f"gas_model {s.gas_model!r}: unknown; choose tables or linear")
    if s.wall_heat == "none" or idx.size < 3:
        return Q, Q.copy(), T
    if s.wall_heat != "woschni":
        raise CyclesimError(f"wall_heat {s.wall_heat!r}: unknown; choose woschni or none")
    tw = th[idx]
    soc = _normalised(tw, Q[idx])[1]
    G = np.full(th.shape, np.nan)
    qw = _woschni_wall_heat(tw, p[idx], V[idx], T[idx], vol, s, speed_rpm, n_comp, soc)
    k_wall = _level_after_burn(tw, Q[idx], qw, s)
    if info is not None:
        info["wall_heat_scale"] = k_wall if s.level_fit else float("nan")
    G[idx] = Q[idx] + k_wall * qw
    return Q, G, T


def _burn_points(th, Q, fractions=(0.1, 0.5, 0.9)):
    ok = np.isfinite(Q)
    if ok.sum() < 3:
        return [np.nan] * len(fractions), np.nan
    t, q = th[ok], Q[ok]
    imax = int(np.argmax(q))
    imin = int(np.argmin(q[: imax + 1]))
    qmin, qmax = q[imin], q[imax]
    if qmax - qmin <= 0:
        return [np.nan] * len(fractions), 0.0
    x = (q[imin: imax + 1] - qmin) / (qmax - qmin)
    tt = t[imin: imax + 1]
    out = []
    for f in fractions:
        j = int(np.argmax(x >= f))
        if j == 0:
            out.append(float(tt[0]))
            continue
        out.append(float(tt[j - 1] + (f - x[j - 1]) / (x[j] - x[j - 1]) * (tt[j] - tt[j - 1])))
    return out, float(qmax - qmin)
