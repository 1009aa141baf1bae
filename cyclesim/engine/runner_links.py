"""The cylinders' runners of a multi-cylinder engine joined at the shared plenum and exhaust collector.

With ``intake.runner`` / ``exhaust.runner`` set (:mod:`cyclesim.config.runners`) and coupled
manifolds, each cylinder's intake runner draws from the shared intake plenum and its exhaust
runner discharges into the exhaust collector (one per exhaust branch).  Each shared volume is a
junction of the runners that meet it, modelled as a lumped volume at one pressure: the
filling-and-emptying manifold of :mod:`cyclesim.engine.manifolds` (isothermal, its throttle or
outlet on the other side), whose pressure is the stagnation pressure of the reservoir at every
runner's far end (an open end with the runner's entry loss on inflow into the runner, the
nozzle relation of :func:`cyclesim.pipes.set_end`), and whose inflow and outflow are the
runners' far-end fluxes.  Constant-pressure junction volume (Benson 1982, vol. 1, ch. 4: the
junction as a pressure common to its branches; the lumped volume between them is filling and
emptying, Heywood 1988, sec. 14.3; both from memory).

Coupling: waveform relaxation through the 0-D volumes, as without runners.  A coupled cycle runs
every cylinder with its runners over one cycle, each runner's far end following the volume's
pressure trace of the iteration before (in the cylinder's own crank frame); then the volumes'
periodic pressure traces are solved for the runners' far-end flows of that cycle.  The runners'
state is carried from one coupled cycle to the next (:func:`cyclesim.pipes.runners.carry_runners`).
A pulse of one cylinder travels up its runner into the collector, raises the collector's trace,
and reaches the other cylinders' runners at their far ends in the next iteration; at the fixed
point the traces, the cylinders and the runners repeat together.

What the volumes receive: the mass through a runner's far end per engine-frame interval, the
cylinder's valve mass (the cylinder's counters ``m_int``, ``m_exh``, which equal the runner's valve
fluxes, :mod:`cyclesim.solve.valve_source`) plus the change of the runner's stored mass at the
crank grid's points; over a cycle this equals the runner's far-end flux to rounding.
"""

from __future__ import annotations

import numpy as np

from ..config.runners import has_runners


LUMPED_START = True
"""Whether :func:`lumped_starts` gives engines with runners the 0-D engine's settled state (off:
the coupled cycles start from the operating point's constant pressures, as benchmarks compare)."""


def lumped_starts(setups: list, simulate) -> list:
    """The setups, each engine with runners and coupled manifolds that has no start of its own
    given the settled state of the same engine without runners (its 0-D manifolds and lumped
    cylinder flows, :func:`simulate` on those setups together) as its start.

    A 0-D engine settles in a few cheap coupled cycles; from its manifold traces and cylinder
    states the coupled cycles with runners begin near their fixed point instead of at the
    operating point's constant pressures (demo_engine_runners at 3000 rpm: the first cycle's
    trace change 6.8e-2 instead of 2.1e-1)."""
    from dataclasses import replace

    from ..config import case_with

    todo = [k for k, st in enumerate(setups)
            if LUMPED_START and has_runners(st.case) and st.start is None and st.frozen_traces is None
            and (st.manifolds or st.case.multi_cylinder.manifolds) == "coupled"]
    if not todo:
        return list(setups)
    lumped = [replace(setups[k], case=case_with(setups[k].case, {"intake.runner": "none", "exhaust.runner": "none"}))
              for k in todo]
    out = list(setups)
    for k, res in zip(todo, simulate(lumped)):
        res.lumped_start = True           # reported with the engine it starts (its coupled cycles)
        out[k] = replace(setups[k], start=res)
    return out


def far_end_draws(tr, pos: int, names: dict):
    """Cumulative masses [kg] over the reported cycle of case ``pos`` of trace ``tr`` at its crank
    points: drawn from the intake volume, and discharged into the exhaust volume.

    Without a runner on a side: the valve's (and the intake port buffer's) counters, as the 0-D
    manifolds take them.  With one: plus the runner's change of stored mass (into the runner's far
    end = through the valve + stored)."""
    I = names
    cum_i = tr.Y[I["m_int"], pos] + tr.Y[I["m_ibuf"], pos] - tr.Y[I["m_ibuf"], pos, 0]
    cum_e = -tr.Y[I["m_exh"], pos]
    rec = getattr(tr, "runners", None)
    if rec is not None:
        for j, side in enumerate(rec["sides"]):
            m = rec["mass_pts"][pos, j]
            if side == "intake":
                cum_i = cum_i + (m - m[0])
            else:
                cum_e = cum_e - (m - m[0])
    return cum_i, cum_e


def runner_cycle_means(tr, pos: int):
    """The runners' cycle-mean stored mass [kg] and valve-end pressure [Pa] of case ``pos``
    (n_sides,) each, or None without runners."""
    rec = getattr(tr, "runners", None)
    if rec is None:
        return None
    cm = rec["cycle_mean"]
    return np.asarray(cm["mass_kg"][pos], float).copy(), np.asarray(cm["valve_pressure_pa"][pos], float).copy()


def runner_far_flux_kg(tr, pos: int) -> dict:
    """Over the reported cycle of case ``pos``: per side, the mass into the runner through its far end
    (the pipe's own boundary flux), through its valve into the cylinder, and its stored-mass change
    [kg]; empty without runners."""
    rec = getattr(tr, "runners", None)
    if rec is None:
        return {}
    out = {}
    for j, side in enumerate(rec["sides"]):
        out[side] = {"far_end_in": float(rec["flows"]["outer_mass_kg"][pos, j]),
                     "to_cylinder": float(rec["flows"]["mass_kg"][pos, j]),
                     "stored_change": float(rec["end"]["mass_kg"][pos, j] - rec["start"]["mass_kg"][pos, j])}
    return out


def push_far_traces(batch, phi0: float, step: float, pi, pe) -> None:
    """Give the batch's carried runners their far-end reservoir pressures: the intake volume's
    ``pi`` and the exhaust volume's ``pe`` (B, M) [Pa], on the grid ``phi0 + step m`` of each
    case's own frame."""
    rs = getattr(batch, "carried_runners", None)
    if rs is None:
        return
    traces = np.stack([pi if side == "intake" else pe for side in rs.sides], axis=1)
    rs.set_far_traces(phi0, step, traces)


def coupling_history(per_cylinder: list) -> list[dict]:
    """The convergence of the coupled cycles: one row per cycle with the relative change from the
    cycle before of each cylinder's net IMEP (relative to at least 0.1 bar) and volumetric efficiency
    (the mass drawn from the intake volume, relative to at least 1e-9 kg) and the manifold traces'
    largest relative change.

    ``per_cylinder``: per cylinder, per coupled cycle ``(imep_net_bar, drawn_kg, manifold_change)``."""
    if not per_cylinder or not per_cylinder[0]:
        return []
    rows = []
    for c in range(len(per_cylinder[0])):
        row = {"cycle": c + 1, "manifold_change": max(h[c][2] for h in per_cylinder),
               "imep_net_bar": [h[c][0] for h in per_cylinder],
               "imep_change": [], "ve_change": []}
        for h in per_cylinder:
            if c == 0:
                row["imep_change"].append(float("nan"))
                row["ve_change"].append(float("nan"))
            else:
                row["imep_change"].append(abs(h[c][0] - h[c - 1][0]) / max(abs(h[c][0]), 0.1))
                # a deactivated cylinder draws nothing: its change is measured against 1 microgram
                row["ve_change"].append(abs(h[c][1] - h[c - 1][1]) / max(abs(h[c][1]), 1e-9))
        rows.append(row)
    return rows


def far_end_admittance(manifolds, infos: list, cases_of) -> tuple[np.ndarray, np.ndarray]:
    """How strongly the runners meeting each shared volume answer a change of its pressure [kg/(Pa deg)]:
    intake rows (E,) and exhaust-branch rows (X,) of ``manifolds`` (:class:`cyclesim.engine.manifolds._Manifolds`).

    A pressure step ``dp`` at a pipe's open end sends a simple wave into it that moves the gas by
    ``du = dp / (rho c)``, so the mass flow changes by ``A dp / c`` (the pipe's characteristic
    admittance; acoustic impedance ``rho c / A``, Kinsler et al. 2000, *Fundamentals of Acoustics*,
    sec. 10.2; from memory).  Summed over the runners of a volume, divided by the crank speed.
    ``cases_of(e)``: the cylinder cases of engine ``e``'s info, in number order."""
    from ..config.runners import runner_diameters_m
    from .manifolds import GAMMA_AIR, GAMMA_EXHAUST

    Zi = np.zeros(manifolds.E)
    Ze = np.zeros(manifolds.X)
    for j, inf in enumerate(infos):
        w = manifolds.omega[j]
        c_i = np.sqrt(GAMMA_AIR * inf["R_int"] * inf["T_int"])
        c_e = np.sqrt(GAMMA_EXHAUST * inf["R_exh"] * inf["T_exh"])
        for k, case in enumerate(cases_of(j)):
            run = getattr(case, "runners", {})
            if run.get("intake") is not None:
                d = runner_diameters_m(run["intake"])[1]
                Zi[j] += 0.25 * np.pi * d * d / c_i / w
            if run.get("exhaust") is not None:
                d = runner_diameters_m(run["exhaust"])[1]
                Ze[manifolds.ex_rows[j][inf["branches"][k]]] += 0.25 * np.pi * d * d / c_e / w
    return Zi, Ze


SHIFT_PASSES = 4
"""Most passes of the volumes' periodic solve that update the swings' mean ``shift``
(:func:`cyclesim.loops.filling.pressure_rate`; it stops once the shift moves by less than 1 Pa)."""


def solve_volumes(man, Qi, pref_i, Qe, pref_e, Zi, Ze, p0_i, p0_e):
    """Periodic pressures [Pa] of the shared intake volumes (E, n+1) and exhaust volumes (X, n+1) for
    the runners' far-end flows ``Qi``, ``Qe`` [kg/deg] seen at the pressures ``pref_i``, ``pref_e``,
    each lap's start found as :meth:`cyclesim.engine.manifolds._Manifolds.solve` finds it.

    The laps are the manifolds' own (:meth:`cyclesim.engine.manifolds._Manifolds.laps`) with the
    runners' admittance ``Zi``, ``Ze`` (:func:`far_end_admittance`): over the cycle the runners
    draw as lumped cylinders do, and they answer the volume's swings about the pressures they saw
    (:func:`cyclesim.loops.filling.pressure_rate`).  The swings' mean ``shift`` is updated by up to
    :data:`SHIFT_PASSES` periodic solves."""
    out = []
    for side, p0, Z in (("intake", p0_i, Zi), ("exhaust", p0_e, Ze)):
        shift = np.zeros(len(Z))
        start = np.asarray(p0, float)
        pref = pref_i if side == "intake" else pref_e
        for _ in range(SHIFT_PASSES):
            if side == "intake":
                lap = man.laps(Qi, pref_i, Qe, pref_e, Zi, Ze, shift, None)[0]
            else:
                lap = man.laps(Qi, pref_i, Qe, pref_e, Zi, Ze, None, shift)[1]
            tr = man._periodic(start, lap)
            new = np.mean(0.5 * (tr[:, :-1] + tr[:, 1:]) - pref, axis=1)
            start = tr[:, 0].copy()
            moved = np.max(np.abs(new - shift))
            shift = new
            if moved < 1.0:
                break
        out.append(tr)
    return out[0], out[1]


ANDERSON_MEMORY = 8
"""Pairs the traces' Anderson acceleration keeps (:func:`relaxed_traces`).  Measured on
demo_engine_runners at 3000 rpm from constant traces (benchmarks/engine_runners.py --engine):
28 coupled cycles with 3 pairs, 23 with 8 or 16; from the 0-D engine's state
(:func:`lumped_starts`) 18 with 8."""


def relaxed_traces(accel: dict, key, p_int, p_exh, new_int, new_exh, relaxation: float):
    """The volumes' next traces [Pa] of engine ``key``: the relaxed fixed-point step ``P + w (G(P) - P)``
    accelerated by Anderson's method over the last coupled cycles (:class:`cyclesim.solve.anderson.Anderson`,
    Walker & Ni 2011), held within 0.5..2 times the relaxed step; ``accel`` keeps each engine's history."""
    from ..solve.anderson import Anderson

    shape_e = p_exh.shape
    x = np.concatenate([p_int, p_exh.ravel()]) / 1e5
    g = np.concatenate([new_int, new_exh.ravel()]) / 1e5
    fx = x + relaxation * (g - x)
    acc = accel.setdefault(key, Anderson(ANDERSON_MEMORY))
    nxt = acc.step(x[:, None], fx[:, None])[:, 0]
    nxt = np.clip(nxt, 0.5 * fx, 2.0 * fx) * 1e5
    n = len(p_int)
    return nxt[:n], nxt[n:].reshape(shape_e)


def mass_balance(tr, pos: int, names: dict) -> dict:
    """The reported cycle's mass bookkeeping of case ``pos`` [kg]: the cylinder's valve counters, its
    blow-by and mass change, each runner's valve-end and far-end fluxes and stored change, and what
    the shared volumes took and got (:func:`far_end_draws`); ``throughput_kg`` the intake valve's."""
    I = names
    Y = tr.Y
    tot = lambda row: float(Y[I[row], pos, -1] - Y[I[row], pos, 0])  # noqa: E731
    out = {"valve_intake_kg": tot("m_int"), "valve_exhaust_kg": tot("m_exh"), "blowby_kg": tot("m_bb"),
           "cylinder_change_kg": tot("m")}
    for side, f in runner_far_flux_kg(tr, pos).items():
        out[f"runner_to_cylinder_{side}_kg"] = f["to_cylinder"]
        out[f"far_end_in_{side}_kg"] = f["far_end_in"]
        out[f"stored_change_{side}_kg"] = f["stored_change"]
    cum_i, cum_e = far_end_draws(tr, pos, I)
    out["volume_draw_kg"] = float(cum_i[-1] - cum_i[0])
    out["volume_gain_kg"] = float(cum_e[-1] - cum_e[0])
    out["throughput_kg"] = abs(out["valve_intake_kg"])
    return out
