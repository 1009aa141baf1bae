"""The multi-cylinder run: cylinders as batch columns, coupled to the manifolds by waveform relaxation until cylinders and manifolds repeat."""

from __future__ import annotations

import math
from typing import Callable, Sequence

import numpy as np

from ..config import resolve_case
from ..errors import ConfigError, SolverError
from .runner_links import (coupling_history, far_end_admittance, far_end_draws, has_runners, lumped_starts,
                           push_far_traces, mass_balance, relaxed_traces, runner_cycle_means, solve_volumes)
from .manifolds import MANIFOLD_STEP_DEG, R_AIR, _Manifolds, _periodic_interp, supply_pressure_bar
from .setup import EngineResult, EngineSetup, cylinder_cases, cylinder_modes, exhaust_branches, firing_offsets


RUNNER_RELAXATION = 0.5
"""With runners, the volumes' traces move half way to each coupled cycle's solution, and that step is
accelerated by Anderson's method (:func:`cyclesim.engine.runner_links.relaxed_traces`): the
runners' reflected waves answer a change of the traces only a cycle later.  Measured on
demo_engine_runners at 3000 rpm: a full plain step oscillates at 20-40 % of the exhaust collector's
trace, a half step without acceleration settles into a limit cycle of about 5e-3 in VE."""

# -- the driver ------------------------------------------------------------------------


def simulate_engines(setups: Sequence[EngineSetup], progress: Callable[[str], None] | None = None,
                     tol: float | None = None) -> list[EngineResult]:
    """Simulate several engines; their cylinders share batches where their settings allow."""
    from ..api import _registry_for, results_from_trace
    from ..solve.batch import build_batch, group_cases
    from ..solve.solver import integrate

    start_progress = None if progress is None else (lambda msg: progress(f"start without runners: {msg}"))
    setups = lumped_starts(list(setups), lambda sts: simulate_engines(sts, start_progress, tol))
    cols = []       # (engine index, cylinder index, case)
    info = []
    for e, st in enumerate(setups):
        cases = cylinder_cases(st)
        ms = st.case.multi_cylinder
        n = len(cases)
        modes = list(cylinder_modes(st))
        manifolds = "coupled" if st.frozen_traces is None and (st.manifolds or ms.manifolds) == "coupled" else (
            "frozen" if st.frozen_traces is not None else "constant")
        walls = st.walls or ms.walls
        info.append({"setup": st, "ms": ms, "n": n, "modes": modes, "offsets": firing_offsets(ms.firing_order, n),
                     "manifolds": manifolds, "walls": walls, "speed_rpm": float(st.case.operating.speed_rpm),
                     "T_int": float(st.case.operating.intake_temperature_K),
                     "T_exh": float(st.case.operating.exhaust_temperature_K), "cols": [],
                     "branches": exhaust_branches(ms, n), "runners": has_runners(st.case)})
        if info[e]["runners"]:
            info[e]["V_int_L"] = float(ms.plenum_volume_L or ms.intake_manifold_volume_L)
            info[e]["V_exh_L"] = float(ms.collector_volume_L or ms.exhaust_manifold_volume_L)
        for k, c in enumerate(cases):
            info[e]["cols"].append(len(cols))
            cols.append((e, k, c))
    registry = _registry_for([c for _, _, c in cols])
    all_cases = [c for _, _, c in cols]
    groups = group_cases(all_cases, registry)
    batches = []
    where = {}      # column -> (batch index, position)
    for bi, idx in enumerate(groups):
        batches.append(build_batch([all_cases[i] for i in idx], registry))
        if any(info[cols[i][0]]["manifolds"] in ("coupled", "frozen") or info[cols[i][0]]["walls"] == "lumped"
               for i in idx):
            from ..pipes.runners import carry_runners

            carry_runners(batches[-1])          # the runners' state runs on over the coupled cycles
        for pos, i in enumerate(idx):
            where[i] = (bi, pos)
    # configured wall temperatures (per column), for the lumped model's offsets
    cfg_walls = {}
    for i, (_, _, c) in enumerate(cols):
        w = c.walls
        cfg_walls[i] = np.array([w.head_temperature_K, w.piston_temperature_K, w.liner_temperature_K])
    lumped_T = {}
    for e, inf in enumerate(info):
        if inf["walls"] == "lumped":
            st = inf["setup"]
            for k, i in enumerate(inf["cols"]):
                start = (float(st.wall_start_K[k]) if st.wall_start_K is not None else float(cfg_walls[i].mean()))
                lumped_T[i] = start
    interacting = [e for e, inf in enumerate(info) if inf["manifolds"] in ("coupled", "frozen")
                   or inf["walls"] == "lumped"]

    # gas constants of the plenums, per engine (from the first cylinder's batch)
    for e, inf in enumerate(info):
        bi, pos = where[inf["cols"][0]]
        b = batches[bi]
        g = b.gas
        op = b.operating
        T_i = np.atleast_1d(op.intake_temperature_K * np.ones(b.B))[pos]
        y_i = np.atleast_1d(op.egr_fraction * np.ones(b.B))[pos]
        rho = op.intake_pressure_bar * 1e5 / (R_AIR * T_i)
        mp = g.mixture(np.full(b.B, T_i), np.full(b.B, rho), np.full(b.B, y_i))
        inf["R_int"] = float(np.atleast_1d(mp.R)[pos])
        T_e = float(np.atleast_1d(op.exhaust_temperature_K * np.ones(b.B))[pos])
        rho_e = op.exhaust_pressure_bar * 1e5 / (R_AIR * T_e)
        mp = g.mixture(np.full(b.B, T_e), np.full(b.B, rho_e), np.ones(b.B))
        inf["R_exh"] = float(np.atleast_1d(mp.R)[pos])

    def set_walls():
        for i, T in lumped_T.items():
            bi, pos = where[i]
            w = batches[bi].walls
            delta = T - cfg_walls[i].mean()
            for j, name in enumerate(("head", "piston", "liner")):
                key = f"{name}_temperature_K"
                arr = np.array(np.broadcast_to(getattr(w, key), (batches[bi].B,)), dtype=float)
                arr[pos] = cfg_walls[i][j] + delta
                setattr(w, key, arr)

    coupled_e = [e for e in interacting if info[e]["manifolds"] in ("coupled", "frozen")]
    man = _Manifolds([info[e] for e in coupled_e], MANIFOLD_STEP_DEG) if coupled_e else None
    traces_eng = {}   # engine -> (p_int (n+1,), p_exh (n+1,)) engine frame on man.phi
    Z_run = None      # with runners: their far ends' answer to the volumes' pressure (runner_links)
    accel = {}        # with runners: per engine, the traces' fixed-point acceleration
    if man is not None and any(info[e]["runners"] for e in coupled_e):
        Z_run = far_end_admittance(man, [info[e] for e in coupled_e],
                                   lambda j: [cols[i][2] for i in info[coupled_e[j]]["cols"]])
    if man is not None:
        for j, e in enumerate(coupled_e):
            st = info[e]["setup"]
            nb = len(man.ex_rows[j])
            if st.frozen_traces is not None:
                pe = np.atleast_2d(np.asarray(st.frozen_traces[1], float))
                traces_eng[e] = (np.asarray(st.frozen_traces[0], float), np.repeat(pe, nb, 0) if len(pe) == 1 else pe)
            elif st.start is not None and st.start.manifold_traces is not None \
                    and len(st.start.manifold_traces[0]) == man.n + 1 \
                    and np.atleast_2d(st.start.manifold_traces[1]).shape[0] == nb:
                traces_eng[e] = (np.array(st.start.manifold_traces[0], float),
                                 np.atleast_2d(np.array(st.start.manifold_traces[1], float)))
            else:
                op = st.case.operating
                traces_eng[e] = (np.full(man.n + 1, op.intake_pressure_bar * 1e5),
                                 np.full((nb, man.n + 1), op.exhaust_pressure_bar * 1e5))
            if traces_eng[e][1].shape != (nb, man.n + 1):
                raise ConfigError(f"frozen exhaust traces: shape {traces_eng[e][1].shape}, expected"
                                  f" ({nb}, {man.n + 1}) (branches, manifold grid)")

    def push_traces():
        """Give each coupled batch's boundary its columns' traces in their own frames."""
        for bi, b in enumerate(batches):
            bnd = b.models["boundary"]
            if not hasattr(bnd, "set_traces"):
                continue
            n = man.n
            th = man.phi[:-1]
            pi = np.empty((b.B, n))
            pe = np.empty((b.B, n))
            for pos, i in enumerate(groups[bi]):
                e, k, _ = cols[i]
                off = info[e]["offsets"][k]
                Pi, Pe = traces_eng[e]
                pi[pos] = _periodic_interp(th + off, man.phi, Pi)
                pe[pos] = _periodic_interp(th + off, man.phi, Pe[info[e]["branches"][k]])
            bnd.set_traces(float(th[0]), man.h, pi, pe)
            push_far_traces(b, float(th[0]), man.h, pi, pe)

    set_walls()
    if man is not None:
        push_traces()
    # warm start: each batch to its own periodic state with the starting boundaries
    trs = []
    for bi, b in enumerate(batches):
        if progress:
            progress(f"batch {bi + 1}/{len(batches)}: start-up cycles")
        y0 = _start_state(b, [cols[i] for i in groups[bi]], info)
        trs.append(integrate(b) if y0 is None else integrate(b, initial=y0))
    rows = [_row_names(tr) for tr in trs]      # per batch: its trace's row of each state name

    def draws_of(i):
        """Column ``i``'s cumulative far-end masses of the last cycle (far_end_draws)."""
        bi, pos = where[i]
        return far_end_draws(trs[bi], pos, rows[bi])

    draws = {i: draws_of(i) for i in range(len(cols)) if man is not None and cols[i][0] in coupled_e}
    tol = float(tol if tol is not None else min(b.simulation.tolerance for b in batches))
    n_coupled = {e: 0 for e in interacting}
    if interacting:
        max_cyc = max(int(info[e]["ms"].max_coupled_cycles) for e in interacting)
        active = [bi for bi in range(len(batches))
                  if any(cols[i][0] in interacting for i in groups[bi])]
        prev_imep = {i: None for i in range(len(cols))}
        prev_runner = {i: None for i in range(len(cols))}
        hist = {i: [] for i in range(len(cols))}     # per coupled cycle: IMEP [bar], draw [kg], manifold change
        settled = {e: False for e in interacting}
        for cyc in range(1, max_cyc + 1):
            change = {e: 0.0 for e in interacting}
            change_man = {}
            # manifolds from the last cycle's flows
            if man is not None:
                E = len(coupled_e)
                Qi = np.zeros((E, man.n))
                Qe = np.zeros((man.X, man.n))
                pref = np.zeros((E, man.n))
                for j, e in enumerate(coupled_e):
                    Pi, _ = traces_eng[e]
                    pref[j] = 0.5 * (Pi[:-1] + Pi[1:])
                    for k, i in enumerate(info[e]["cols"]):
                        tr = trs[where[i][0]]
                        cum_i, cum_e = draws[i]
                        off = info[e]["offsets"][k]
                        for cum, Q, row in ((cum_i, Qi, j), (cum_e, Qe, man.ex_rows[j][info[e]["branches"][k]])):
                            # cylinder mass per engine-frame interval, exactly conserved over the cycle
                            tot = cum[-1] - cum[0]
                            local = man.phi - off          # engine grid in the cylinder's frame
                            wrapped = ((local + 360.0) % 720.0) - 360.0
                            c = np.interp(wrapped, tr.theta, cum)
                            c = c + np.where(local - wrapped > 1.0, tot, 0.0) - np.where(wrapped - local > 1.0, tot, 0.0)
                            Q[row] += np.diff(c) / man.h
                # cylinders of a frozen engine keep their traces
                live = [j for j, e in enumerate(coupled_e) if info[e]["manifolds"] == "coupled"]
                if live:
                    p0i = np.array([traces_eng[e][0][0] for e in coupled_e])
                    p0e = np.concatenate([traces_eng[e][1][:, 0] for e in coupled_e])
                    if Z_run is None:
                        new_i, new_e = man.solve(Qi, pref, Qe, p0i, p0e)
                    else:
                        pe_ref = np.concatenate([0.5 * (traces_eng[e][1][:, :-1] + traces_eng[e][1][:, 1:])
                                                 for e in coupled_e])
                        new_i, new_e = solve_volumes(man, Qi, pref, Qe, pe_ref, *Z_run, p0i, p0e)
                    for j in live:
                        e = coupled_e[j]
                        Pi, Pe = traces_eng[e]
                        ne = new_e[man.ex_rows[j]]
                        d = max(np.max(np.abs(new_i[j] - Pi) / Pi), np.max(np.abs(ne - Pe) / Pe))
                        change[e] = max(change[e], d)
                        change_man[e] = d
                        if info[e]["runners"]:
                            traces_eng[e] = relaxed_traces(accel, e, Pi, Pe, new_i[j], ne, RUNNER_RELAXATION)
                        else:
                            traces_eng[e] = (new_i[j].copy(), ne.copy())
                push_traces()
            # lumped walls from the last cycle's wall heat
            for i in lumped_T:
                e, k, _ = cols[i]
                bi, pos = where[i]
                tr = trs[bi]
                I = rows[bi]
                ms = info[e]["ms"]
                st = info[e]["setup"]
                qdot = tr.Y[I["Q_w"], pos, -1] * info[e]["speed_rpm"] / 120.0     # W
                T_ss = ms.coolant_temperature_K + ms.wall_resistance_K_per_kW * qdot / 1e3
                start = float(st.wall_start_K[k]) if st.wall_start_K is not None else float(cfg_walls[i].mean())
                t = st.wall_elapsed_s
                T_new = T_ss if not math.isfinite(t) else T_ss + (start - T_ss) * math.exp(-t / ms.wall_time_constant_s)
                change[e] = max(change[e], abs(T_new - lumped_T[i]) / T_new)
                lumped_T[i] = T_new
            set_walls()
            # one cycle of every interacting batch
            for bi in active:
                trs[bi] = integrate(batches[bi], initial=trs[bi].end_state, cycles=1)
                rows[bi] = _row_names(trs[bi])
            for i in range(len(cols)):
                e = cols[i][0]
                if e not in interacting:
                    continue
                bi, pos = where[i]
                imep = trs[bi].history[-1][0][pos]
                m_tr = trs[bi].history[-1][1][pos]
                if prev_imep[i] is not None:
                    d = max(abs(imep - prev_imep[i][0]) / max(abs(imep), 1e4),
                            abs(m_tr - prev_imep[i][1]) / abs(m_tr))
                    change[e] = max(change[e], d)
                else:
                    change[e] = max(change[e], 1.0)
                prev_imep[i] = (imep, m_tr)
                tr = trs[bi]
                d_i = draws_of(i)                  # once per column and cycle: history and next flows
                if i in draws:
                    draws[i] = d_i
                draw = d_i[0]
                hist[i].append((float(imep) / 1e5, float(draw[-1] - draw[0]), change_man.get(e, 0.0)))
                rm = runner_cycle_means(tr, pos)
                if rm is not None:
                    if prev_runner[i] is not None:
                        d = max(float(np.max(np.abs(rm[0] - prev_runner[i][0]) / np.abs(rm[0]))),
                                float(np.max(np.abs(rm[1] - prev_runner[i][1]) / rm[1])))
                        change[e] = max(change[e], d)
                    else:
                        change[e] = max(change[e], 1.0)
                    prev_runner[i] = rm
            for e in interacting:
                if not settled[e]:
                    n_coupled[e] = cyc
                    settled[e] = change[e] < tol
            if progress:
                progress(f"coupled cycle {cyc}: change {max(change.values()):.1e} (largest relative change of"
                         f" manifold pressure, walls, IMEP, trapped mass; settled below {tol:.0e})")
            if all(settled.values()):
                break
    else:
        settled = {}
        hist = {}
    if man is not None:
        for j, e in enumerate(coupled_e):
            Pi, Pe = traces_eng[e]
            sl = slice(j, j + 1)
            q_t = float(np.sum(man.q_throttle_rows(Pi[1:], sl))) * man.h
            q_o = sum(float(np.sum(man.q_outlet_rows(Pe[b, 1:], slice(x, x + 1)))) * man.h
                      for b, x in enumerate(man.ex_rows[j]))
            info[e]["throttle_mg"] = q_t * 1e6
            info[e]["outlet_mg"] = q_o * 1e6
    results_per_batch = [results_from_trace(b, trs[bi], registry) for bi, b in enumerate(batches)]
    out = []
    for e, inf in enumerate(info):
        res = [results_per_batch[where[i][0]][where[i][1]] for i in inf["cols"]]
        ends = []
        for i in inf["cols"]:
            bi, pos = where[i]
            ends.append(dict(zip(trs[bi].names, trs[bi].end_state[:, pos].copy())))
        walls_T = np.array([lumped_T.get(i, float(cfg_walls[i].mean())) for i in inf["cols"]])
        tr_e = traces_eng.get(e)
        out.append(_engine_result(inf, res, tr_e, man.phi if man is not None else None, walls_T,
                                  n_coupled.get(e, 0), settled.get(e, True)))
        out[-1].end_states = ends
        out[-1].coupling_history = coupling_history([hist.get(i, []) for i in inf["cols"]])
        out[-1].engine["runners"] = bool(inf["runners"])
        if getattr(inf["setup"].start, "lumped_start", False):
            out[-1].engine["lumped_start_coupled_cycles"] = inf["setup"].start.engine["coupled_cycles"]
        if inf["runners"]:
            out[-1].engine["runner_mass_balance"] = [
                mass_balance(trs[where[i][0]], where[i][1], rows[where[i][0]])
                for i in inf["cols"]]
    return out


def _row_names(tr) -> dict:
    """A trace's row of each state name."""
    return {nm: r for r, nm in enumerate(tr.names)}


def _start_state(batch, columns, info):
    """Initial state (n_state, B) from the ``start`` engines of all columns, or None if any has none.

    States are matched by name; one the start engine does not have keeps its usual initial value.
    """
    from ..solve.solver import _RHS, _initial_state

    starts = []
    for e, k, _ in columns:
        st = info[e]["setup"].start
        if st is None or len(st.end_states) <= k:
            return None
        starts.append(st.end_states[k])
    rhs = _RHS(batch, "full")
    y = _initial_state(batch, rhs, -360.0, "full")
    for pos, d in enumerate(starts):
        for r, name in enumerate(rhs.names):
            if name in d and np.isfinite(d[name]):
                y[r, pos] = d[name]
    return y


def _engine_result(inf, res, man_tr, phi, walls_T, n_coupled, settled) -> EngineResult:
    st = inf["setup"]
    case = st.case
    n = inf["n"]
    warnings: list[str] = []
    for k, r in enumerate(res):
        if not r.ok:
            raise SolverError(f"cylinder {k + 1} ({inf['modes'][k]}): {r.error}")
        for w in r.warnings:
            if w.startswith("not settled") and inf["manifolds"] == "coupled":
                continue
            warnings.append(f"cylinder {k + 1}: {w}")
    if not settled:
        warnings.append(f"manifolds or walls not settled after {n_coupled} coupled cycles"
                        f" (raise multi_cylinder.max_coupled_cycles)")
    if inf["manifolds"] == "coupled":
        sup = supply_pressure_bar(inf["ms"])
        p_in = float(case.operating.intake_pressure_bar)
        if p_in > 1.05 * sup:
            warnings.append(
                f"the coupled intake manifold fills from {sup:g} bar ahead of the throttle"
                f" (multi_cylinder.intake_supply_pressure_bar, else ambient_pressure_bar), below the config's"
                f" intake pressure {p_in:g} bar: a boosted engine needs its charge-air pressure there")
    speed = inf["speed_rpm"]
    cps = speed / 120.0                        # cycles per second per cylinder
    Vd = float(case.engine.bore_mm * 1e-3) ** 2 * math.pi / 4 * case.engine.stroke_mm * 1e-3
    cyl = []
    W_net = np.zeros(n)
    W_gross = np.zeros(n)
    fm = np.zeros(n)
    fuel = np.zeros(n)
    air = np.zeros(n)
    incl_pumping = False
    for k, r in enumerate(res):
        s = r.summary
        zero = st.zero_cut_work and inf["modes"][k] != "fire"
        W_net[k] = 0.0 if zero else s["imep_net_bar"] * 1e5 * Vd
        W_gross[k] = 0.0 if zero else s["imep_gross_bar"] * 1e5 * Vd
        fm[k] = s["fmep_bar"]
        fuel[k] = s["fuel_mass_mg"] if inf["modes"][k] == "fire" else 0.0
        air[k] = s.get("inducted_mass_mg", 0.0) - fuel[k]
        cyl.append({"cylinder": k + 1, "mode": inf["modes"][k], "offset_deg": float(inf["offsets"][k]),
                    "imep_net_bar": W_net[k] / Vd / 1e5, "imep_gross_bar": W_gross[k] / Vd / 1e5,
                    "pmep_bar": (W_gross[k] - W_net[k]) / Vd / 1e5,
                    "p_max_bar": s["p_max_bar"], "theta_pmax_deg": s["theta_pmax_deg"],
                    "ca50_deg": s.get("ca50_deg", float("nan")), "trapped_mass_mg": s["trapped_mass_mg"],
                    "fuel_mass_mg": fuel[k], "fmep_bar": s["fmep_bar"], "wall_mean_K": float(walls_T[k]),
                    "residual_fraction": s.get("residual_fraction", float("nan")),
                    "wall_heat_J": s["wall_heat_J"]})
    if res and res[0].models.get("friction"):
        from ..registry import get_registry

        cls = get_registry(case.plugins).submodel_class("friction", res[0].models["friction"])
        incl_pumping = bool(getattr(cls, "includes_pumping", False))
    fmep = float(st.fmep_bar) if st.fmep_bar is not None else float(fm.mean())
    W_ind = W_gross if incl_pumping else W_net
    P_ind = W_net.sum() * cps
    P_fric = fmep * 1e5 * Vd * n * cps + (W_net - W_ind).sum() * cps
    P_brake = P_ind - P_fric
    omega = 2 * math.pi * speed / 60.0
    firing = [k for k in range(n) if inf["modes"][k] == "fire"]
    imf = np.array([cyl[k]["imep_net_bar"] for k in firing]) if firing else np.array([0.0])
    eng = {
        "cylinders": n, "firing_order": [int(x) for x in (inf["ms"].firing_order or range(1, n + 1))],
        "speed_rpm": speed, "manifolds": inf["manifolds"], "walls": inf["walls"],
        "exhaust_branches": [int(b) + 1 for b in inf["branches"]],
        "modes": list(inf["modes"]),
        "indicated_power_kW": P_ind / 1e3, "indicated_power_gross_kW": W_gross.sum() * cps / 1e3,
        "pumping_power_kW": (W_gross - W_net).sum() * cps / 1e3,
        "friction_power_kW": P_fric / 1e3, "brake_power_kW": P_brake / 1e3,
        "brake_torque_Nm": P_brake / omega, "indicated_torque_Nm": P_ind / omega,
        "imep_net_bar": W_net.sum() / (n * Vd) / 1e5, "fmep_bar": fmep,
        "bmep_bar": P_brake / (n * Vd * cps) / 1e5,
        "fuel_flow_g_per_s": fuel.sum() * 1e-3 * cps, "air_flow_g_per_s": air.sum() * 1e-3 * cps,
        "bsfc_g_per_kWh": (fuel.sum() * 1e-3 * cps * 3600.0 / (P_brake / 1e3)) if P_brake > 0 else float("inf"),
        "imep_net_spread_bar": float(imf.max() - imf.min()),
        "imep_net_cov_cylinders": float(imf.std(ddof=0) / imf.mean()) if imf.mean() != 0 else float("nan"),
        "coupled_cycles": n_coupled,
        "settled": bool(settled),
        "cylinder_draw_mg_per_cycle": float(sum(r.summary.get("inducted_mass_mg", 0.0) for r in res)),
        "cylinder_exhaust_mg_per_cycle": float(sum(r.summary.get("inducted_mass_mg", 0.0)
                                                   - r.summary.get("blowby_mass_mg", 0.0) for r in res)),
    }
    if "throttle_mg" in inf:
        eng["throttle_mass_mg_per_cycle"] = inf["throttle_mg"]
        eng["exhaust_outlet_mass_mg_per_cycle"] = inf["outlet_mg"]
    # crank-angle resolved engine torque on a 1-deg engine grid
    grid = -360.0 + np.arange(721) * 1.0
    torque = np.zeros(len(grid))
    p_amb = inf["ms"].ambient_pressure_bar * 1e5
    for k, r in enumerate(res):
        if st.zero_cut_work and inf["modes"][k] != "fire":
            continue
        th = r.trace["crank_deg"]
        V = r.trace["volume_m3"]
        p = r.trace["pressure_bar"] * 1e5
        tq = (p - p_amb) * np.gradient(V, th) * 180.0 / math.pi
        torque += _periodic_interp(grid - inf["offsets"][k], th, tq)
    torque -= P_fric / omega
    traces = {"crank_deg": grid, "engine_torque_Nm": torque}
    if man_tr is not None and phi is not None:
        traces["intake_manifold_bar"] = _periodic_interp(grid, phi, man_tr[0]) / 1e5
        pe = np.atleast_2d(man_tr[1])
        traces["exhaust_manifold_bar"] = _periodic_interp(grid, phi, pe[0]) / 1e5
        if len(pe) > 1:
            for b in range(len(pe)):
                traces[f"exhaust_branch_{b + 1}_bar"] = _periodic_interp(grid, phi, pe[b]) / 1e5
        for key, arr in (("intake", man_tr[0]), ("exhaust", pe)):
            eng[f"{key}_manifold_mean_bar"] = float(np.mean(arr[..., :-1])) / 1e5
            eng[f"{key}_manifold_min_bar"] = float(arr.min()) / 1e5
            eng[f"{key}_manifold_max_bar"] = float(arr.max()) / 1e5
    return EngineResult(st.label or case.name, eng, cyl, traces, warnings, res, man_tr, walls_T)


def run_engine(config: "Case | str | Path" = "demo", overrides: Sequence[str] = (), modes: Sequence[str] = (),
               progress=None, **kw) -> EngineResult:
    """Simulate one multi-cylinder engine from a config (its ``multi_cylinder`` section).

    ``modes``: per cylinder ``fire`` / ``cut`` / ``deactivated`` (default from the config);
    other keywords go to :class:`EngineSetup`.
    """
    case, label = resolve_case(config, overrides)
    if int(case.engine.cylinders) < 1:
        raise ConfigError("engine.cylinders must be >= 1")
    if case.simulation.mode != "full":
        raise ConfigError("the multi-cylinder engine needs simulation.mode: full")
    return simulate_engines([EngineSetup(case, tuple(modes), label=kw.pop("label", label), **kw)],
                            progress=progress)[0]
