"""Figures and trace columns of the intake and exhaust runners (:mod:`cyclesim.pipes.runners`).

From the reported cycle's runner record (``CycleTrace.runners``, per case):

- trace columns ``{side}_runner_valve_pressure_bar`` (at the runner's valve end),
  ``{side}_runner_mid_pressure_bar`` and ``{side}_runner_mid_velocity_m_per_s`` (its middle cell), and
  at each station of ``stations_mm`` ``{side}_runner_at_<x>mm_pressure_bar`` and
  ``..._velocity_m_per_s`` (the cell holding it), on the output grid; velocities are positive in
  the side's normal flow (towards the valve on the intake, away from it on the exhaust);
- figures ``{side}_runner_mass_change_mg`` and ``{side}_runner_energy_change_J`` over the reported
  cycle (zero at a periodic state), ``{side}_runner_mean_mass_change`` (of the cycle-mean mass
  against the cycle before, relative), ``{side}_runner_mean_valve_pressure_bar``, and ``runner_energy_balance``: the energy that came in through
  the runners' far ends, what they passed to the cylinder, their stored-energy change and, as the
  closing term, the heat their walls took (the pipe scheme conserves energy but for its wall heat).
"""

from __future__ import annotations

import numpy as np


def runner_figures(tr) -> dict:
    """Figures (B,) of the runners of the reported cycle (empty without runners)."""
    rec = getattr(tr, "runners", None)
    if rec is None:
        return {}
    out = {}
    flows, start, end = rec["flows"], rec["start"], rec["end"]
    stored = np.zeros(end["energy_J"].shape[0])
    for j, side in enumerate(rec["sides"]):
        out[f"{side}_runner_mass_change_mg"] = (end["mass_kg"][:, j] - start["mass_kg"][:, j]) * 1e6
        dE = end["energy_J"][:, j] - start["energy_J"][:, j]
        out[f"{side}_runner_energy_change_J"] = dE
        out[f"{side}_runner_mass_to_cylinder_mg"] = flows["mass_kg"][:, j] * 1e6
        stored = stored + dE
    e_in = flows["outer_energy_J"].sum(axis=1)
    to_cyl = flows["enthalpy_J"].sum(axis=1)
    out["runner_energy_balance"] = {"far_end_energy_in_J": e_in, "energy_to_cylinder_J": to_cyl,
                                    "stored_energy_change_J": stored,
                                    "wall_heat_J": e_in - to_cyl - stored}
    out["runner_settle_change"] = rec["change"].copy()
    cm, cb = rec["cycle_mean"], rec["cycle_mean_before"]
    for j, side in enumerate(rec["sides"]):
        m = np.abs(cm["mass_kg"][:, j])
        out[f"{side}_runner_mean_mass_change"] = np.abs(cm["mass_kg"][:, j] - cb["mass_kg"][:, j]) / m
        out[f"{side}_runner_mean_valve_pressure_bar"] = cm["valve_pressure_pa"][:, j] / 1e5
    return out


def runner_columns(tr, grid: np.ndarray) -> dict:
    """Trace columns (B, len(grid)) of the runners' pressures [bar], linear between the solver's
    points (empty without runners)."""
    rec = getattr(tr, "runners", None)
    if rec is None:
        return {}
    th = tr.theta
    cols = {}
    same = grid is th or (len(grid) == len(th) and np.allclose(grid, th))
    def on_grid(rows):
        return rows if same else np.stack([np.interp(grid, th, row) for row in rows])

    for j, side in enumerate(rec["sides"]):
        for what, key in (("valve", "p_valve"), ("mid", "p_mid")):
            cols[f"{side}_runner_{what}_pressure_bar"] = on_grid(rec[key][:, j, :]) / 1e5
        cols[f"{side}_runner_mid_velocity_m_per_s"] = on_grid(rec["u_mid"][:, j, :])
        st = rec["stations"][side]
        for k, x in enumerate(st["x_mm"]):
            name = f"{side}_runner_at_{x:g}mm"
            cols[f"{name}_pressure_bar"] = on_grid(st["pressure_pa"][:, k, :]) / 1e5
            cols[f"{name}_velocity_m_per_s"] = on_grid(st["velocity_m_per_s"][:, k, :])
    return cols
