"""The two-zone cylinder's pressure and zone temperatures on a finished trace.

The same solve as in the running cycle (:func:`cyclesim.loops.zones.cylinder_zones`), at the
solver's points, from the integrated states: the trace's pressure is the two zones' pressure.
"""

from __future__ import annotations

import numpy as np

from ..loops import zones


def two_zone_columns(batch, tr, d: dict) -> dict[str, np.ndarray]:
    """``p`` and ``dp`` [Pa, Pa/deg] of the two zones and their temperatures ``T_u``, ``T_b`` [K]
    (B, n) (T_b NaN where there is no burned zone); ``d`` holds the one-zone columns of
    :func:`cyclesim.results.figures.derived_trace`."""
    th = tr.theta
    Y = tr.Y
    B, n = Y.shape[1], th.size
    I = {nm: i for i, nm in enumerate(tr.names)}
    m, T, mb = Y[0], Y[1], Y[2]
    m_bz = Y[I[f"{zones.ZONE_ROLE}.m_bz"]]
    s_u = Y[I[f"{zones.ZONE_ROLE}.s_u"]]
    V = d["V"]
    p1 = d["p"]
    U = m * d["u"]
    ivc = np.asarray(batch.valves.ivc_deg, float) * np.ones(B)
    evo = np.asarray(batch.valves.evo_deg, float) * np.ones(B)
    if batch.simulation.mode == "full":
        closed = (th[None, :] >= ivc[:, None]) & (th[None, :] < evo[:, None])
        p_ivc, T_ivc = tr.ivc_state["p"], tr.ivc_state["T"]
    else:
        closed = np.ones((B, n), dtype=bool)
        p_ivc, T_ivc = p1[:, 0], T[:, 0]
    col = lambda a: np.broadcast_to(np.asarray(a, float)[:, None], (B, n))  # noqa: E731
    case = np.broadcast_to(np.arange(B)[:, None], (B, n))
    with np.errstate(all="ignore"):
        p, T_u, T_b, _, _, _ = zones.cylinder_zones(batch.gas, zones.ZoneTables(batch.gas), case, m, V, U, mb,
                                                    m_bz, s_u, p1, T, col(T_ivc), col(p_ivc), closed)
        ratio = p / p1
        dp = ratio * d["dp"] + p1 * np.gradient(ratio, th, axis=1)
    gone = closed & (m_bz >= zones.X_MERGE * m)      # merged: no unburned zone left
    return {"p": p, "dp": dp, "T_u": np.where(gone, np.nan, T_u), "T_b": T_b}


FIGURES = ("burned_zone_temperature_max_K", "burned_zone_temperature_max_deg")
"""Summary figures of a two-zone run (NaN where no burned zone forms)."""


def two_zone_figures(cols: dict) -> dict[str, np.ndarray]:
    """Peak burned-zone temperature [K] and its crank angle [deg] from the output trace columns
    (B, n); NaN where the burned zone never forms (a motored case)."""
    Tb = np.asarray(cols["burned_temperature_K"], float)
    th = np.broadcast_to(np.asarray(cols["crank_deg"], float), Tb.shape)
    have = np.isfinite(Tb).any(axis=1)
    k = np.argmax(np.where(np.isfinite(Tb), Tb, -np.inf), axis=1)
    r = np.arange(Tb.shape[0])
    return {"burned_zone_temperature_max_K": np.where(have, Tb[r, k], np.nan),
            "burned_zone_temperature_max_deg": np.where(have, th[r, k], np.nan)}
