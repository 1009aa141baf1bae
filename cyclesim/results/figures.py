"""Figures of merit from a finished batch trace.

Definitions follow the trade (Heywood 1988, ch. 2):
imep_net = imep_gross - pmep, bmep = imep_net - fmep, power = 2 pi N T,
mechanical efficiency = bmep / imep_gross (pumping counted as a loss).
Burn angles and the angle of peak pressure are found on the cubic Hermite
interpolant of the solver's states and derivatives, not read off the grid.
"""

from __future__ import annotations

import math
import numpy as np

from .runner_figures import runner_columns, runner_figures
from ..errors import CyclesimError, PluginError
from .motoring import apply_motored, compression_work, motored_cases, polytropic_exponents
from ..roles import FrictionInputs
from ..solve.cycle_trace import CycleTrace
from ..loops.layout import CORE
from ..solve.hermite import HermiteBasis, hermite, is_uniform
from ..solve.solver import raised_at


def _columns(gas, T, rho, y):
    """Mixture properties for (B, n) arrays (tables are per case), as a dict of (B, n) arrays."""
    return gas.mixture_grid(T, rho, y)._asdict()


def derived_trace(batch, tr: CycleTrace) -> dict[str, np.ndarray]:
    """Pressure and its crank-angle derivative, volume and properties on the grid."""
    th = tr.theta
    Y, F = tr.Y, tr.F
    geo = batch.geometry
    B = batch.B
    V = np.broadcast_to(geo.volume(th), (B, len(th)))
    dV = np.broadcast_to(geo.dV_dtheta(th), (B, len(th)))
    m, T, mb = Y[0], Y[1], Y[2]
    dm, dT, dmb = F[0], F[1], F[2]
    rho = m / V
    y = np.clip(mb / m, 0.0, 1.0)
    pr = _columns(batch.gas, T, rho, y)
    p = rho * pr["R"] * T
    dlnrho = dm / m - dV / V
    dy = (dmb - y * dm) / m
    dR = pr["R_T"] * dT + pr["R_lnrho"] * dlnrho + pr["R_y"] * dy
    dp = p * (dlnrho + dR / pr["R"] + dT / T)
    out = {"V": np.asarray(V), "dV": np.asarray(dV), "p": p, "dp": dp, "rho": rho, "y_b": y, **pr}
    if getattr(batch.simulation, "zones", "one") == "two":
        from .zone_trace import two_zone_columns

        out.update(two_zone_columns(batch, tr, out))
    return out


def _grid_max(theta, Yr, lo, hi):
    """The window mask (N+1,) of ``lo <= theta <= hi`` and each row's largest point in it (B,)."""
    mask = np.ones(theta.size, dtype=bool)
    if lo is not None:
        mask &= theta >= lo
    if hi is not None:
        mask &= theta <= hi
    return mask, np.argmax(np.where(mask[None, :], Yr, -np.inf), axis=1)


def parabola_peak(theta, Yr, lo=None, hi=None):
    """Maximum of a row (B, N+1) known only at the grid points: (angle (B,), value (B,)).

    The vertex of the parabola through the largest point and its two neighbours (the grid may
    be non-uniform); at the window's edge, or where the three points do not bend down, the
    largest point itself.  ``lo``/``hi`` restrict the search window [deg].
    """
    B, n1 = Yr.shape
    mask, i = _grid_max(theta, Yr, lo, hi)
    r = np.arange(B)
    t_best, y_best = theta[i].astype(float), Yr[r, i].astype(float)
    inner = (i > 0) & (i < n1 - 1)
    im, ip = np.clip(i - 1, 0, n1 - 1), np.clip(i + 1, 0, n1 - 1)
    inner &= mask[im] & mask[ip]
    x0, x1, x2 = theta[im], theta[i], theta[ip]
    y0, y1, y2 = Yr[r, im], Yr[r, i], Yr[r, ip]
    with np.errstate(divide="ignore", invalid="ignore"):
        # Newton form: y = y1 + s1 (x - x1) + c (x - x1)(x - x0); c < 0 bends down
        s1 = (y1 - y0) / (x1 - x0)
        c = ((y2 - y1) / (x2 - x1) - s1) / (x2 - x0)
        xv = 0.5 * (x0 + x1) - s1 / (2.0 * c)
        yv = y1 + s1 * (xv - x1) + c * (xv - x1) * (xv - x0)
    ok = inner & (c < 0) & np.isfinite(xv) & (xv >= x0) & (xv <= x2)
    return np.where(ok, xv, t_best), np.where(ok, yv, y_best)


def hermite_peak(theta, Yr, Fr, lo=None, hi=None):
    """Maximum of the Hermite interpolant of a row (B, N+1): (angle (B,), value (B,)).

    ``lo``/``hi`` restrict the search window [deg].
    """
    B, n1 = Yr.shape
    _, i = _grid_max(theta, Yr, lo, hi)
    best_t = theta[i].astype(float)
    best_v = Yr[np.arange(B), i].astype(float)
    r = np.arange(B)
    for j in (i - 1, i):
        jj = np.clip(j, 0, n1 - 2)
        h = theta[jj + 1] - theta[jj]
        y0, y1 = Yr[r, jj], Yr[r, jj + 1]
        d0, d1 = Fr[r, jj] * h, Fr[r, jj + 1] * h
        # derivative of the cubic in t: a t^2 + b t + c
        a = 6 * y0 + 3 * d0 - 6 * y1 + 3 * d1
        b = -6 * y0 - 4 * d0 + 6 * y1 - 2 * d1
        c = d0
        disc = b * b - 4 * a * c
        sq = np.sqrt(np.maximum(disc, 0.0))
        with np.errstate(divide="ignore", invalid="ignore"):
            cands = [np.where(np.abs(a) > 1e-300, (-b + sq) / (2 * a), -c / np.where(b == 0, np.inf, b)),
                     np.where(np.abs(a) > 1e-300, (-b - sq) / (2 * a), np.nan)]
        for t in cands:
            ok = (disc >= 0) & np.isfinite(t) & (t >= 0) & (t <= 1)
            t = np.where(ok, t, 0.0)
            v = ((2 * t**3 - 3 * t**2 + 1) * y0 + (t**3 - 2 * t**2 + t) * d0
                 + (-2 * t**3 + 3 * t**2) * y1 + (t**3 - t**2) * d1)
            ang = theta[jj] + t * h
            inwin = np.ones(B, dtype=bool)
            if lo is not None:
                inwin &= ang >= lo
            if hi is not None:
                inwin &= ang <= hi
            better = ok & inwin & (v > best_v)
            best_v = np.where(better, v, best_v)
            best_t = np.where(better, ang, best_t)
    return best_t, best_v


def hermite_crossing(theta, Yr, Fr, level, start=None):
    """First angle where a non-decreasing row (B, N+1) reaches ``level`` (NaN if never)."""
    return hermite_crossings(theta, Yr, Fr, (level,), start)[0]


def hermite_crossings(theta, Yr, Fr, levels, start=None):
    """:func:`hermite_crossing` at several levels at once: (len(levels), B) angles.

    All levels go through one bracketing and Newton pass (the same element-wise arithmetic as one
    level at a time, so the same angles to the digit, for one set of array operations)."""
    B, n1 = Yr.shape
    lev = np.asarray(levels, float).reshape(-1, 1)          # (L, 1)
    ok = Yr[None, :, :] >= lev[:, :, None]                   # (L, B, N+1)
    if start is not None:
        ok &= (theta[None, :] >= np.asarray(start).reshape(-1, 1))[None]
    has = ok.any(axis=2)
    k = np.argmax(ok, axis=2)
    j = np.clip(k - 1, 0, n1 - 2)
    r = np.arange(B)[None, :]
    h = theta[j + 1] - theta[j]
    y0, y1 = Yr[r, j], Yr[r, j + 1]
    d0, d1 = Fr[r, j] * h, Fr[r, j + 1] * h
    # the cubic v(t) = y0 + c1 t + c2 t^2 + c3 t^3 on the interval (t in 0..1)
    c1 = d0
    c2 = 3 * (y1 - y0) - 2 * d0 - d1
    c3 = 2 * (y0 - y1) + d0 + d1
    r0 = y0 - lev
    lo = np.zeros(r0.shape)
    hi = np.ones(r0.shape)
    # bisection brackets the first crossing to 2^-12, then Newton steps kept inside the
    # bracket converge quadratically (to rounding after two)
    for _ in range(12):
        t = 0.5 * (lo + hi)
        below = r0 + t * (c1 + t * (c2 + t * c3)) < 0.0
        lo = np.where(below, t, lo)
        hi = np.where(below, hi, t)
    t = 0.5 * (lo + hi)
    with np.errstate(divide="ignore", invalid="ignore"):
        for _ in range(3):
            f = r0 + t * (c1 + t * (c2 + t * c3))
            df = c1 + t * (2 * c2 + 3 * t * c3)
            tn = t - f / df
            t = np.where(np.isfinite(tn) & (tn >= lo) & (tn <= hi), tn, t)
    ang = theta[j] + t * h
    ang = np.where(k == 0, theta[0], ang)
    return np.where(has, ang, np.nan)


def _sens_u(gas, T, rho, m, mb):
    """Sensible internal energy [J] of the cylinder contents (relative to each group's datum)."""
    uu, _, _ = gas.unburned(T)
    ub = gas.burned(T, rho)[0]
    return (m - mb) * (uu - gas.h298_u) + mb * (ub - gas.h298_b)


def _chem(gas, mu, mb):
    """Chemical energy [J] held by fresh charge ``mu`` and burned gas ``mb`` [kg]."""
    return mu * gas.lhv_mix + mb * gas.chem_b


def friction_components(fr, finp: FrictionInputs, B: int) -> dict[str, np.ndarray]:
    """The friction model's FMEP components [Pa] as finite arrays (B,), checked.

    A plug-in that raises, returns something other than a dict of numbers, or a non-finite
    value is named in a :class:`~cyclesim.errors.PluginError` (one line), as the in-cycle
    submodels are.
    """
    where = f"friction model {getattr(fr, 'name', type(fr).__name__)!r}"
    try:
        comps = fr.fmep(finp)
    except CyclesimError:
        raise
    except Exception as exc:  # noqa: BLE001 - a plug-in's error, reported in one line
        raise PluginError(f"{where} raised {type(exc).__name__} in fmep(){raised_at(exc, fr)}:"
                          f" {exc or '(no message)'}") from exc
    if not hasattr(comps, "items") or not comps:
        raise PluginError(f"{where}: fmep() must return a dict of FMEP components [Pa], got"
                          f" {type(comps).__name__}")
    out = {}
    for k, v in comps.items():
        try:
            a = np.asarray(v, dtype=float) * np.ones(B)
        except (TypeError, ValueError) as exc:
            raise PluginError(f"{where}: component {k!r} is not a number or an array of {B}: {exc}") from exc
        if a.shape != (B,):
            raise PluginError(f"{where}: component {k!r} has shape {a.shape}, expected ({B},)")
        if not np.isfinite(a).all():
            raise PluginError(f"{where}: component {k!r} is not finite ({a[~np.isfinite(a)][0]})")
        out[str(k)] = a
    return out


def compute_figures(batch, tr: CycleTrace, d: dict) -> dict[str, np.ndarray]:
    """All summary figures of a batch as arrays (B,), units in the keys."""
    g = batch.gas
    geo = batch.geometry
    th = tr.theta
    Y, F = tr.Y, tr.F
    I = {n: i for i, n in enumerate(tr.names)}
    B = batch.B
    mode = batch.simulation.mode
    Vd = geo.Vd * np.ones(B)
    p, dp = d["p"], d["dp"]
    ncyl = batch.engine.cylinders * np.ones(B)
    N_rps = batch.operating.speed_rpm / 60.0
    out: dict[str, np.ndarray] = {}

    # -- combustion ------------------------------------------------------
    burn = batch.models["burn"]
    soc = np.asarray(burn.start_deg(), float) * np.ones(B)
    xb, dxb = Y[I["x_b"]], F[I["x_b"]]
    motored = motored_cases(batch, soc)
    levels = (0.05, 0.10, 0.50, 0.90)
    # a level is an angle where the charge reaches it: a partial burn (26 % at EVO) keeps its CA05 and CA10
    reached = ~motored[None, :] & (xb[:, -1][None, :] > np.array(levels)[:, None])
    ca = dict(zip(levels, np.where(reached, hermite_crossings(th, xb, dxb, levels), np.nan)))
    out["spark_deg"] = np.asarray(burn.spark_deg(), float) * np.ones(B)
    out["spark_advance_deg"] = -out["spark_deg"]
    out["ca05_deg"] = ca[0.05]
    out["ca10_deg"] = ca[0.10]
    out["ca50_deg"] = ca[0.50]
    out["ca90_deg"] = ca[0.90]
    out["burn_10_90_deg"] = ca[0.90] - ca[0.10]
    out["burn_0_10_deg"] = ca[0.10] - out["spark_deg"]     # spark to 10 % burned (flame development)
    lo_win = -180.0 if mode == "full" else th[0]
    hi_win = 180.0 if mode == "full" else th[-1]
    # peak pressure and peak temperature in one search (rows stacked: the same arithmetic per row)
    t_peaks, v_peaks = hermite_peak(th, np.concatenate([p, Y[1]]), np.concatenate([dp, F[1]]), lo_win, hi_win)
    t_pmax, p_max = t_peaks[:B], v_peaks[:B]
    out["p_max_bar"] = p_max / 1e5
    out["theta_pmax_deg"] = t_pmax
    t_dp, dp_max = parabola_peak(th, dp, lo_win, hi_win)
    out["dp_dtheta_max_bar_per_deg"] = dp_max / 1e5
    out["theta_dp_max_deg"] = t_dp
    out["T_max_K"] = v_peaks[B:]
    for k, v in polytropic_exponents(batch, th, p, dp).items():
        out[f"polytropic_exponent_{k}"] = v
    W_comp = compression_work(batch, th, Y, F, I["W"])

    # -- work ----------------------------------------------------------------
    W = Y[I["W"]]
    dW = F[I["W"]]
    if mode == "full":
        W_net = W[:, -1] - W[:, 0]
        w_bdc = hermite(th, np.concatenate([W, W]), np.concatenate([dW, dW]),
                        np.repeat([180.0, -180.0], B))        # both BDCs in one interpolation
        W_gross = w_bdc[:B] - w_bdc[B:]
        out["imep_net_bar"] = W_net / Vd / 1e5
        out["imep_gross_bar"] = W_gross / Vd / 1e5
        out["pmep_bar"] = (W_gross - W_net) / Vd / 1e5
    else:
        W_net = W_gross = W[:, -1] - W[:, 0]
        out["imep_closed_bar"] = W_net / Vd / 1e5
    ivc = batch.valves.ivc_deg * np.ones(B)
    if mode == "full":
        # the three masses at IVC in one interpolation (rows stacked: the same arithmetic per row)
        rows = [0, 2, I["m_int"]]
        m_tr, mb_tr, mint_tr = hermite(th, Y[rows].reshape(3 * B, -1), F[rows].reshape(3 * B, -1),
                                       np.tile(ivc, 3)).reshape(3, B)
    else:
        m_tr, mb_tr, mint_tr = Y[0, :, 0], Y[2, :, 0], np.zeros(B)
    out["trapped_mass_mg"] = m_tr * 1e6

    # -- fuel and energy -------------------------------------------------------
    if mode == "full":
        m_fuel = Y[I["mu_int"], :, -1] * g.y_fuel
    else:
        m_fuel = (Y[0, :, 0] - Y[2, :, 0]) * g.y_fuel
    fuel_energy = m_fuel * g.lhv
    out["fuel_mass_mg"] = m_fuel * 1e6
    out["fuel_energy_J"] = fuel_energy
    Q_burn = Y[I["Q_burn"], :, -1]
    out["heat_release_J"] = Q_burn
    out["wall_heat_J"] = Y[I["Q_w"], :, -1]
    # the trade's combustion efficiency: the share of the fuel's energy released (Heywood 1988 sec. 4.9.4):
    # the burn model's own share of the charge that burns, less the chemical energy the products keep
    # as CO and H2 where there is too little oxygen (rich) or they dissociate
    with np.errstate(divide="ignore", invalid="ignore"):
        out["combustion_efficiency"] = np.where(fuel_energy > 0, Q_burn / np.where(fuel_energy > 0, fuel_energy, 1.0),
                                                np.nan)
    m_bb = Y[I["m_bb"], :, -1]
    out["blowby_mass_mg"] = m_bb * 1e6
    out["blowby_fraction"] = m_bb / m_tr

    # energy balance, every term from the integrated totals and the property functions
    V0, V1 = d["V"][:, 0], d["V"][:, -1]
    m0, m1 = Y[0, :, 0], Y[0, :, -1]
    mb0, mb1 = Y[2, :, 0], Y[2, :, -1]
    Us0 = _sens_u(g, Y[1, :, 0], m0 / V0, m0, mb0)
    Us1 = _sens_u(g, Y[1, :, -1], m1 / V1, m1, mb1)
    E0 = _chem(g, m0 - mb0, mb0)
    E1 = _chem(g, m1 - mb1, mb1)
    H_bb = Y[I["H_bb"], :, -1]
    mu_bb = Y[I["mu_bb"], :, -1]
    Hs_bb = H_bb - mu_bb * g.h298_u - (m_bb - mu_bb) * g.h298_b
    Ech_bb = _chem(g, mu_bb, m_bb - mu_bb)
    Qw = out["wall_heat_J"]
    if mode == "closed":
        released = E0 - E1  # chemical energy that left the fresh charge held in the cylinder
        terms = {
            "piston_work_J": W_net,
            "wall_heat_J": Qw,
            "internal_energy_change_J": Us1 - Us0,
            "blowby_enthalpy_J": Hs_bb + Ech_bb,
        }
        closure = released - sum(terms.values())
        out["chemical_energy_released_J"] = released
        out["energy_balance"] = {"chemical_energy_released_J": released, **terms,
                                 "closure_J": closure,
                                 "closure_fraction": np.where(fuel_energy > 0, closure / np.where(fuel_energy > 0, fuel_energy, 1.0), np.nan)}
        out["eta_closed_cycle"] = W_net / np.maximum(fuel_energy, 1e-300)
        out["unreleased_energy"] = _unreleased_split(g, m1 - mb1 + mu_bb, mb1 + m_bb - mu_bb)
        apply_motored(out, motored, W_comp, E1 - E0, mode, chem_blowby_J=Ech_bb)
        return out

    # full cycle: flows through the valves
    def flows(prefix):
        mm = Y[I[f"m_{prefix}"], :, -1]
        HH = Y[I[f"H_{prefix}"], :, -1]
        mu = Y[I[f"mu_{prefix}"], :, -1]
        Hs = HH - mu * g.h298_u - (mm - mu) * g.h298_b
        return mm, HH, mu, Hs, _chem(g, mu, mm - mu)

    m_i, H_i, mu_i, Hs_i, Ech_i = flows("int")
    m_e, H_e, mu_e, Hs_e, Ech_e = flows("exh")
    # intake plenum density, for volumetric efficiency
    op = batch.operating
    rhs_pl = _plenum_density(batch)
    out["volumetric_efficiency"] = m_i / (rhs_pl * Vd)
    out["inducted_mass_mg"] = m_i * 1e6
    egr = op.egr_fraction * np.ones(B)
    out["residual_fraction"] = (mb_tr - egr * mint_tr) / m_tr
    out["burned_fraction_ivc"] = mb_tr / m_tr

    # friction
    fr = batch.models["friction"]
    Sp = geo.mean_piston_speed(op.speed_rpm)
    finp = FrictionInputs(
        geometry=geo, speed_rpm=op.speed_rpm * np.ones(B), Sp=Sp * np.ones(B), p_max=p_max,
        p_intake=op.intake_pressure_bar * 1e5 * np.ones(B), imep_gross=W_gross / Vd,
        theta_deg=th, p_trace=p, n_cylinders=ncyl,
    )
    fmep = np.zeros(B)
    for k, v in friction_components(fr, finp, B).items():
        out[f"fmep_{k}_bar"] = v / 1e5
        fmep = fmep + v
    out["fmep_bar"] = fmep / 1e5
    if getattr(fr, "includes_pumping", False):
        bmep = W_gross / Vd - fmep
    else:
        bmep = W_net / Vd - fmep
    out["bmep_bar"] = bmep / 1e5
    W_brake = bmep * Vd
    W_fric = W_net - W_brake
    out["torque_Nm"] = bmep * Vd * ncyl / (4 * math.pi)
    out["power_kW"] = 2 * math.pi * N_rps * out["torque_Nm"] / 1e3
    with np.errstate(divide="ignore", invalid="ignore"):     # a failed case has no work
        out["mechanical_efficiency"] = bmep / (W_gross / Vd)
    with np.errstate(divide="ignore", invalid="ignore"):   # a cut cylinder has no fuel
        out["eta_indicated_net"] = W_net / fuel_energy
        out["eta_indicated_gross"] = W_gross / fuel_energy
        out["eta_brake"] = W_brake / fuel_energy
    with np.errstate(divide="ignore", invalid="ignore"):
        out["bsfc_g_per_kWh"] = np.where(W_brake > 0, m_fuel * 1e3 / (W_brake / 3.6e6), np.inf)
    out["exhaust_temperature_K"] = _exhaust_temperature(batch, -m_e, -H_e, -mu_e)
    # gas-exchange conditions the quasi-steady valve model handles approximately
    dth = np.diff(th)
    h_deg = np.append(dth, dth[-1])           # crank span of each grid point [deg]
    fi = F[I["m_int"]]
    fe = F[I["m_exh"]]
    out["intake_backflow_mass_mg"] = np.trapezoid(np.minimum(fi, 0.0), x=th, axis=1) * -1e6
    out["exhaust_backflow_mass_mg"] = np.trapezoid(np.maximum(fe, 0.0), x=th, axis=1) * 1e6
    p_e = op.exhaust_pressure_bar * 1e5 * np.ones(B)
    gam = d["gamma"]
    crit = (2.0 / (gam + 1.0)) ** (gam / (gam - 1.0))
    choked = (fe < 0) & (p_e[:, None] / p > 0) & (p_e[:, None] / p < crit)
    out["exhaust_choked_deg"] = (choked * h_deg).sum(axis=1)
    out["cycles_to_converge"] = tr.cycles.astype(float)
    out["converged"] = tr.converged.copy()

    chem_in = Ech_i
    terms = {
        "brake_work_J": W_brake,
        "friction_work_J": W_fric,
        "wall_heat_J": Qw,
        "exhaust_minus_intake_enthalpy_J": (-Hs_e) - Hs_i,
        "blowby_enthalpy_J": Hs_bb,
        "unreleased_chemical_energy_J": (-Ech_e) + Ech_bb,
        "stored_energy_change_J": (Us1 - Us0) + (E1 - E0),
    }
    closure = chem_in - sum(terms.values())
    out["energy_balance"] = {"fuel_energy_J": chem_in, **terms, "closure_J": closure,
                             "closure_fraction": np.where(chem_in > 0, closure / np.where(chem_in > 0, chem_in, 1.0), np.nan)}
    # unreleased chemical energy leaving through the exhaust valves and past the rings, by carrier
    out["unreleased_energy"] = _unreleased_split(g, -mu_e + mu_bb, -(m_e - mu_e) + (m_bb - mu_bb))
    apply_motored(out, motored, W_comp, E1 - E0, mode)
    out.update(runner_figures(tr))
    return out


def _unreleased_split(g, m_fresh, m_burned) -> dict[str, np.ndarray]:
    """Chemical energy [J] held by fresh charge ``m_fresh`` and burned gas ``m_burned`` [kg], by carrier.

    The basis is the one of the energy balance and the combustion efficiency: the burned gas
    holds the CO and H2 of its complete-combustion products with the water-gas shift frozen at
    :data:`cyclesim.gas.thermo.K_WGS_COMPLETE` (none at or lean of stoichiometric), the fresh charge
    its fuel's lower heating value; dissociation at the gas's own temperature is counted as
    sensible (absolute) energy of the gas, not here.
    """
    return {"CO_J": m_burned * g.chem_b_co, "H2_J": m_burned * g.chem_b_h2,
            "unburned_fuel_J": m_fresh * g.lhv_mix}


def _plenum_density(batch) -> np.ndarray:
    g = batch.gas
    op = batch.operating
    B = batch.B
    p = op.intake_pressure_bar * 1e5 * np.ones(B)
    T = op.intake_temperature_K * np.ones(B)
    y = op.egr_fraction * np.ones(B)
    rho = p / (287.0 * T)
    for _ in range(4):
        rho = p / (g.mixture(T, rho, y).R * T)
    return rho


EXHAUST_T_PASSES = 30
"""Most Newton passes of :func:`_exhaust_temperature` (from 900 K)."""


def _exhaust_temperature(batch, m_out, H_out, mu_out, shortcut: bool = True) -> np.ndarray:
    """Enthalpy-averaged temperature of the net exhaust outflow [K].

    :data:`EXHAUST_T_PASSES` Newton passes on h(T) = H/m at the exhaust pressure, from 900 K.  A
    pass maps each case's temperature by a fixed function of that case alone (element by element),
    so once a case's temperature repeats bit for bit (a fixed point, or the short cycle of
    neighbouring values rounding can leave it in) the value its last pass gives is known; with
    ``shortcut`` the passes stop once every case has repeated, and the result is that of all the
    passes, bit for bit.
    """
    g = batch.gas
    op = batch.operating
    B = batch.B
    flowing = np.abs(m_out) > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        h_mean = np.where(flowing, H_out / np.where(flowing, m_out, 1.0), np.nan)
        y = np.where(flowing, np.clip((m_out - mu_out) / np.where(flowing, m_out, 1.0), 0.0, 1.0), 1.0)
    ok = np.isfinite(h_mean)
    p = op.exhaust_pressure_bar * 1e5 * np.ones(B)
    T = np.full(B, 900.0)
    n = EXHAUST_T_PASSES
    seen = [T]                          # the temperatures after each pass so far (pass 0: the start)
    known = np.zeros(B, dtype=bool)     # cases whose value after pass n is known
    last = np.empty(B)
    for k in range(1, n + 1):
        rho = p / (287.0 * T)
        mp = g.mixture(T, rho, y)
        rho = p / (mp.R * T)
        mp = g.mixture(T, rho, y)
        hT = mp.u + mp.R * T
        cp = mp.u_T + mp.R + T * mp.R_T
        T = np.where(ok, np.clip(T - (hT - np.where(ok, h_mean, hT)) / cp, 250.0, 4000.0), 900.0)
        if not shortcut:
            continue
        before = np.asarray(seen)                    # (k, B)
        again = (before == T) & ~known               # case b after pass k equals its value after pass j
        rep = again.any(axis=0)
        if rep.any():
            j = np.argmax(again, axis=0)[rep]        # its values repeat with period k - j from pass j on
            last[rep] = before[j + (n - j) % (k - j), rep]
            known |= rep
            if known.all():
                T = last
                break
        seen.append(T)
    # a temperature pinned at a bound is no solution: the net outflow's enthalpy is not that of a gas
    # (most of the flow went out and came back)
    return np.where(ok & (T > 250.0) & (T < 4000.0), T, np.nan)


def output_trace(batch, tr: CycleTrace, d: dict, step: float | None) -> dict[str, np.ndarray]:
    """Trace columns for output, on the integration grid or a Hermite-interpolated one.

    A full-cycle grid with longer steps where the valves are shut is put out at its finest
    step (the gas-exchange step) unless ``step`` [deg] says otherwise; rates between the
    solver's points are then the derivatives of the Hermite interpolant of the integrated
    quantity.
    """
    th = tr.theta
    I = {n: i for i, n in enumerate(tr.names)}
    Y, F = tr.Y, tr.F
    B = batch.B
    omega = 6.0 * batch.operating.speed_rpm * np.ones(B)
    uniform = is_uniform(th)
    h = (th[-1] - th[0]) / (len(th) - 1)
    if not uniform and not (step and step > 0):
        step = float(np.min(np.diff(th)))
    if step and step > 0 and (not uniform or abs(step - h) > 1e-12):
        n = int(round((th[-1] - th[0]) / step))
        grid = np.linspace(th[0], th[-1], n + 1)
        basis = HermiteBasis(th, grid)        # one basis for every column
        at = basis.rows
    else:
        grid = th

        def at(row_y, row_f):
            return row_y

    # the volume of each distinct engine of the batch, once
    geo_u, geo_rows = batch.geometry.distinct()
    V = geo_u.volume(grid)[geo_rows]
    m = at(Y[0], F[0])
    T = at(Y[1], F[1])
    mb = at(Y[2], F[2])
    p = at(d["p"], d["dp"])
    cols = {
        "crank_deg": np.broadcast_to(grid, (B, len(grid))),
        "volume_m3": V,
        "pressure_bar": p / 1e5,
        "temperature_K": T,
        "mass_mg": m * 1e6,
        "mfb": at(Y[I["x_b"]], F[I["x_b"]]),
        "burned_gas_fraction": np.clip(mb / m, 0, 1),
    }
    if "T_u" in d:   # two zones: their temperatures, linear between the solver's points
        for key, col in (("T_u", "unburned_temperature_K"), ("T_b", "burned_temperature_K")):
            cols[col] = d[key] if grid is th else np.stack([np.interp(grid, th, r) for r in d[key]])
    # rates: derivatives are per degree; interpolate linearly when resampling
    def rate(row):
        if grid is th:
            return F[row]
        if not uniform:
            return basis.derivative(Y[row], F[row])      # hermite_grid's derivative, one basis for all
        return basis.linear(F[row])

    cols["heat_release_rate_J_per_deg"] = rate(I["Q_burn"])
    cols["wall_heat_rate_J_per_deg"] = rate(I["Q_w"])
    cols["cumulative_heat_release_J"] = at(Y[I["Q_burn"]], F[I["Q_burn"]])
    cols["cumulative_wall_heat_J"] = at(Y[I["Q_w"]], F[I["Q_w"]])
    cols["blowby_rate_g_per_s"] = rate(I["m_bb"]) * omega[:, None] * 1e3
    if batch.simulation.mode == "full":
        cols["intake_flow_g_per_s"] = rate(I["m_int"]) * omega[:, None] * 1e3
        cols["exhaust_flow_g_per_s"] = rate(I["m_exh"]) * omega[:, None] * 1e3
        vf = batch.models["valve_flow"]
        lifts = vf.lift(grid)
        cols["intake_lift_mm"] = np.broadcast_to(lifts["intake"], (B, len(grid))) * 1e3
        cols["exhaust_lift_mm"] = np.broadcast_to(lifts["exhaust"], (B, len(grid))) * 1e3
    for k, name in enumerate(tr.names[len(CORE):], start=len(CORE)):
        cols[name] = at(Y[k], F[k])
    # Woschni-style motored pressure, when the heat-transfer model integrates it
    if "heat_transfer.T_mot" in I:
        k = I["heat_transfer.T_mot"]
        pivc = tr.ivc_state["p"] if batch.simulation.mode == "full" else Y[0, :, 0] * 0 + d["p"][:, 0]
        Tivc = tr.ivc_state["T"] if batch.simulation.mode == "full" else Y[1, :, 0]
        Vivc = tr.ivc_state["V"] if batch.simulation.mode == "full" else d["V"][:, 0]
        pm = pivc[:, None] * (Vivc[:, None] / V) * (cols["heat_transfer.T_mot"] / Tivc[:, None])
        if batch.simulation.mode == "full":
            gth = cols["crank_deg"]
            ivc = batch.valves.ivc_deg * np.ones(B)
            evo = batch.valves.evo_deg * np.ones(B)
            pm = np.where((gth >= ivc[:, None]) & (gth <= evo[:, None]), pm, np.nan)
        cols["motored_pressure_bar"] = pm / 1e5
    cols.update(runner_columns(tr, grid))
    return cols
