"""Cycle classification of a measured set: misfire, partial burn or fired.

The evidence is chosen so that a TDC phasing error of about a degree barely changes it (the
range of the apparent heat release, the former criterion, grows with a phasing error until
a misfire reads as a fired cycle):

* **net released heat**: the apparent heat release (single zone, constant gamma) level after
  burning minus its level before the spark, each the mean over a window, relative to the
  median of the clearly fired cycles.  Per window the release is
  ``Q(theta) = p V / (gamma - 1) + integral p dV`` from the window's start (Heywood 1988
  eq. 9.25 with constant gamma, from memory), so the net release between the windows is the
  difference of two values of the same state function plus the work between them.
* **gross IMEP <= 0**: a motored cycle gives no net work over compression and expansion
  (the heat loss makes it slightly negative);
* **the pressure ratio p(+40 deg) / p(-40 deg)**: near 1 (below it by the heat loss) for a
  motored cycle, well above it for a fired one (common practice for misfire detection
  on a pressure trace).

A cycle is a **misfire** when its share of the reference release is below
``misfire_release_share`` and the gross IMEP is at most zero or the pressure ratio below
``misfire_pressure_ratio``; a **partial burn** when the share is below
``partial_burn_share`` (and it is no misfire); else **fired**.  The reference is the median
release of the cycles whose release is at least half the set's 90th percentile (the
clearly fired ones), so a set with many misfires still has a fired reference.

The analyser classifies twice: on the labelled angle first, then, once the TDC offset has
been estimated from the misfires so found, on the corrected angle (see
:func:`cyclesim.traces.analysis.analyse`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["CLASSES", "ClassifySettings", "cycle_evidence", "classify_cycles"]

#: Class names, in the order of the integer codes of :func:`classify_cycles`.
CLASSES = ("fired", "partial burn", "misfire")


@dataclass(frozen=True)
class ClassifySettings:
    """Thresholds and windows of the classification (angles [deg], 0 = firing TDC).

    Attributes
    ----------
    misfire_release_share : float
        A release below this share of the fired reference may be a misfire [-].
    partial_burn_share : float
        A release below this share (and no misfire) is a partial burn [-].
    misfire_pressure_ratio : float
        p(+angle)/p(-angle) below this counts as evidence of a misfire [-].
    ratio_angle_deg : float
        The angle of the pressure ratio [deg].
    gamma : float
        Constant ratio of specific heats of the apparent release [-].
    before_window_deg, after_window_deg : (float, float) or None
        Windows of the release levels before the spark and after burning [deg]; None: from
        IVC + 5 to -60 deg, and from EVO - 40 to EVO - 5 deg.
    """

    misfire_release_share: float = 0.1
    partial_burn_share: float = 0.8
    misfire_pressure_ratio: float = 1.15
    ratio_angle_deg: float = 40.0
    gamma: float = 1.35
    before_window_deg: tuple | None = None
    after_window_deg: tuple | None = None


def _mean_in(th, y, a, b):
    m = (th >= a) & (th <= b)
    if m.sum() < 2:
        raise ValueError(f"window {a:g}..{b:g} deg holds fewer than 2 samples")
    return float(np.mean(y[m]))


def cycle_evidence(th, P, V, ivc_deg: float, evo_deg: float, Vd: float,
                   cs: ClassifySettings = ClassifySettings()) -> dict:
    """Per-cycle evidence of combustion.

    Parameters
    ----------
    th : ndarray (n,)
        Crank angle [deg] (labelled or corrected).
    P : ndarray (n_cycles, n)
        Pegged (absolute) pressure [Pa].
    V : ndarray (n,)
        Cylinder volume at ``th`` [m^3].
    ivc_deg, evo_deg : float
        Valve events [deg].
    Vd : float
        Displacement [m^3].

    Returns
    -------
    dict of ndarray (n_cycles,)
        ``net_release_J`` [J], ``imep_gross_bar`` [bar], ``pressure_ratio_40`` [-].
    """
    th = np.asarray(th, float)
    P = np.atleast_2d(np.asarray(P, float))
    V = np.asarray(V, float)
    bw = cs.before_window_deg or (ivc_deg + 5.0, -60.0)
    aw = cs.after_window_deg or (evo_deg - 40.0, evo_deg - 5.0)
    g = float(cs.gamma)
    k = (th >= bw[0]) & (th <= aw[1])
    t, Vw = th[k], V[k]
    dV = np.diff(Vw)
    # apparent release from the first sample of the window: p V / (g - 1) + integral p dV
    work = np.concatenate([np.zeros((P.shape[0], 1)),
                           np.cumsum(0.5 * (P[:, k][:, 1:] + P[:, k][:, :-1]) * dV, axis=1)], axis=1)
    Q = P[:, k] * Vw / (g - 1.0) + work
    before = np.array([_mean_in(t, q, *bw) for q in Q])
    after = np.array([_mean_in(t, q, *aw) for q in Q])
    a = float(cs.ratio_angle_deg)
    ratio = np.array([np.interp(a, th, p) / np.interp(-a, th, p) for p in P])
    g0 = (th > -180.0) & (th < 180.0)
    tg = np.concatenate([[-180.0], th[g0], [180.0]])
    Vg = np.interp(tg, th, V)
    imep_g = []
    for p in P:
        pg = np.concatenate([[np.interp(-180.0, th, p)], p[g0], [np.interp(180.0, th, p)]])
        imep_g.append(float(np.sum(0.5 * (pg[1:] + pg[:-1]) * np.diff(Vg))) / Vd / 1e5)
    return {"net_release_J": after - before, "imep_gross_bar": np.asarray(imep_g),
            "pressure_ratio_40": ratio}


def classify_cycles(ev: dict, cs: ClassifySettings = ClassifySettings()) -> tuple[np.ndarray, dict]:
    """Classes of the cycles from their evidence (:func:`cycle_evidence`).

    Returns
    -------
    codes : ndarray (n_cycles,) of int
        0 fired, 1 partial burn, 2 misfire (names in :data:`CLASSES`).
    info : dict
        ``reference_release_J`` (median of the clearly fired cycles) [J] and
        ``release_share`` per cycle [-].
    """
    q = np.asarray(ev["net_release_J"], float)
    ok = np.isfinite(q)
    codes = np.full(q.shape, 2, int)
    if not ok.any():
        return codes, {"reference_release_J": float("nan"), "release_share": np.full(q.shape, np.nan)}
    top = float(np.percentile(q[ok], 90))
    clear = ok & (q >= 0.5 * top) if top > 0 else np.zeros(q.shape, bool)
    ref = float(np.median(q[clear])) if clear.any() else float("nan")
    if not ref > 0:
        # nothing burns anywhere: every cycle is motored
        return codes, {"reference_release_J": ref, "release_share": np.full(q.shape, np.nan)}
    share = q / ref
    no_work = np.asarray(ev["imep_gross_bar"], float) <= 0.0
    flat = np.asarray(ev["pressure_ratio_40"], float) < cs.misfire_pressure_ratio
    misfire = ~ok | ((share < cs.misfire_release_share) & (no_work | flat))
    partial = ~misfire & (share < cs.partial_burn_share)
    codes = np.where(misfire, 2, np.where(partial, 1, 0))
    return codes, {"reference_release_J": ref, "release_share": share}
