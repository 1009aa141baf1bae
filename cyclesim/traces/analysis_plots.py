"""Plots of an analysis (imports matplotlib; nothing else under cyclesim.traces does).

``analysis_cycles.png``: net IMEP and CA50 cycle by cycle, misfires and partial burns marked;
``analysis_pressure.png``: the mean fired cycle's pressure against crank angle and as log p -
log V; ``analysis_heat_release.png``: the mean and spread of the apparent heat release and of
the burned fraction over the fired cycles; ``analysis_tdc.png`` (where the TDC offset was
estimated): the motored mean pressure near TDC with its peak, the corrected TDC and the
offset, or the fired-cycle compression fit with its interval.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np

from ..plots import _plain_log_ticks, _plt, _save
from .analysis import AnalysisResult
from .analysis_settings import BAR
from .heat_release import _normalised
from .analysis_files import fired_selection

__all__ = ["plot_analysis"]

_MARK = {"misfire": ("x", "tab:red"), "partial burn": ("^", "tab:orange")}


def _nan_stats(X):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return np.nanmean(X, axis=0), np.nanstd(X, axis=0)


def _cycles(plt, res: AnalysisResult, title: str, path: Path) -> Path:
    per = res.per_cycle
    cls = np.asarray(per["cycle_class"])
    cyc = np.arange(1, cls.size + 1)
    fig, (a1, a2) = plt.subplots(2, 1, figsize=(8, 6), sharex=True)
    imep = np.asarray(per["imep_net_bar"], float)
    a1.plot(cyc, imep, color="tab:blue", lw=0.8, marker=".", ms=4, label="net IMEP")
    fired = cls == "fired"
    if fired.any():
        m = float(np.mean(imep[fired]))
        a1.axhline(m, color="tab:blue", lw=0.8, ls=":", label=f"fired mean {m:.2f} bar")
    for name, (mk, col) in _MARK.items():
        k = cls == name
        if k.any():
            a1.plot(cyc[k], imep[k], mk, color=col, ms=7, label=f"{name} ({int(k.sum())})")
            a2.plot(cyc[k], np.zeros(int(k.sum())) if name == "misfire" else per["ca50_deg"][k], mk,
                    color=col, ms=7, label=f"{name}" + (" (no CA50; drawn at 0)" if name == "misfire" else ""))
    a1.set_ylabel("net IMEP [bar]")
    cov = res.stats.get("imep_net_cov", float("nan"))
    a1.set_title(f"{title}\nnet IMEP and CA50 per cycle (COV of net IMEP {100 * cov:.2f} %, fired cycles)"
                 if np.isfinite(cov) else f"{title}\nnet IMEP and CA50 per cycle")
    a1.legend(fontsize=7, loc="best")
    ca50 = np.asarray(per["ca50_deg"], float)
    a2.plot(cyc[fired], ca50[fired], color="tab:green", lw=0.8, marker=".", ms=4, label="CA50, fired")
    a2.set_xlabel("cycle")
    a2.set_ylabel("CA50 [deg after TDC]")
    a2.legend(fontsize=7, loc="best")
    return _save(fig, path)


def _pressure(plt, res: AnalysisResult, vol_m3, title: str, path: Path) -> Path:
    sel = fired_selection(res)
    th = res.theta_deg
    pm = np.mean(res.pressure_pa[sel], axis=0) / BAR
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(10, 4.2))
    a1.plot(th, pm, color="tab:blue", lw=1.0, label=f"mean of {int(sel.sum())} cycles")
    a1.set_xlim(-180, 180)
    a1.set_xlabel("crank angle [deg] (0 = firing TDC)")
    a1.set_ylabel("cylinder pressure [bar]")
    a1.set_title("mean pressure (pegged, TDC corrected)")
    a1.legend(fontsize=7)
    ok = pm > 0
    a2.loglog(vol_m3[ok] * 1e6, pm[ok], color="tab:blue", lw=0.8)
    _plain_log_ticks(a2)
    a2.set_xlabel("cylinder volume [cm^3] (log)")
    a2.set_ylabel("cylinder pressure [bar] (log)")
    st = res.stats
    a2.set_title(f"log p - log V (n compression {st.get('n_compression_mean', np.nan):.3f},"
                 f" expansion {st.get('n_expansion_mean', np.nan):.3f})")
    fig.suptitle(title, fontsize=10)
    return _save(fig, path)


def _heat_release(plt, res: AnalysisResult, title: str, path: Path) -> Path:
    sel = fired_selection(res)
    th = res.theta_deg
    Q = res.heat_release_J[sel]
    qm, qs = _nan_stats(Q)
    # burned fraction of each cycle from its own release (0 at its minimum before the maximum, 1 there)
    X = np.full(Q.shape, np.nan)
    for i, q in enumerate(Q):
        ok = np.isfinite(q)
        if ok.sum() >= 3:
            X[i, ok] = _normalised(th[ok], q[ok])[0]
    xm, xs = _nan_stats(X)
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(10, 4.2))
    k = np.isfinite(qm)
    for ax, m, sd, lab in ((a1, qm, qs, "apparent net heat release [J]"),
                           (a2, xm, xs, "apparent burned fraction [-]")):
        ax.plot(th[k], m[k], color="tab:red", lw=1.0, label=f"mean of {int(sel.sum())} cycles")
        ax.fill_between(th[k], (m - sd)[k], (m + sd)[k], color="tab:red", alpha=0.25, lw=0, label="+- 1 sd")
        ax.set_xlim(-60, 120)
        ax.set_xlabel("crank angle [deg] (0 = firing TDC)")
        ax.set_ylabel(lab)
        ax.legend(fontsize=7, loc="upper left")
    st = res.stats
    a2.set_title(f"CA10 / CA50 / CA90 {st.get('ca10_deg_mean', np.nan):.1f} / {st.get('ca50_deg_mean', np.nan):.1f}"
                 f" / {st.get('ca90_deg_mean', np.nan):.1f} deg (means)")
    a1.set_title("apparent heat release from IVC (net of wall heat)")
    fig.suptitle(title, fontsize=10)
    return _save(fig, path)


def _tdc(plt, res: AnalysisResult, title: str, path: Path) -> Path:
    tdc = res.tdc
    th = res.theta_deg
    d = float(tdc["offset_deg"])
    fig, ax = plt.subplots(figsize=(7, 4.2))
    mis = np.asarray(res.per_cycle["cycle_class"]) == "misfire"
    if tdc.get("interval_deg") is None and mis.any():
        pm = np.mean(res.pressure_pa[mis], axis=0) / BAR
        lab = th + d                          # the recording's labelled angle
        k = np.abs(th) <= 6.0
        ax.plot(lab[k], pm[k], color="tab:blue", lw=1.0, label=f"motored mean ({int(mis.sum())} cycles), labelled angle")
        pk = tdc.get("theta_pmax_motored_deg")
        if pk is not None:
            ax.axvline(pk, color="tab:orange", ls="--", lw=1.0, label=f"pressure peak at {pk:+.2f} deg labelled")
        ax.axvline(d, color="tab:green", lw=1.2,
                   label=f"true TDC at {d:+.2f} deg labelled (loss angle {tdc.get('loss_angle_deg') or 0:.2f} deg)")
        ax.axvline(0.0, color="0.4", ls=":", lw=1.0, label="labelled TDC (0 deg)")
        ax.set_xlabel("labelled crank angle [deg]")
        ax.set_ylabel("cylinder pressure [bar]")
        ax.set_title(f"TDC estimate from motored cycles: offset {d:+.2f} deg")
    else:
        lo, hi = tdc["interval_deg"]
        ax.errorbar([0], [d], yerr=[[d - lo], [hi - d]], fmt="o", color="tab:green", capsize=6,
                    label=f"offset {d:+.2f} deg, 95 % interval {lo:+.2f}..{hi:+.2f} deg")
        ax.axhline(0.0, color="0.4", ls=":", lw=1.0, label="no offset")
        ax.set_xticks([])
        ax.set_xlim(-1, 1)
        ax.set_ylabel("TDC offset [deg] (true TDC at this labelled angle)")
        ax.set_title(f"TDC estimate from the fired cycles' compression (n {tdc.get('n_compression', np.nan):.3f})")
    ax.legend(fontsize=7, loc="lower center")
    fig.suptitle(title, fontsize=10)
    return _save(fig, path)


def plot_analysis(res: AnalysisResult, out, volume_m3=None, title: str = "") -> list[Path]:
    """Draw the analysis plots into ``out``; returns their paths.

    Parameters
    ----------
    res : AnalysisResult
    out : path-like
        Folder of the PNG files.
    volume_m3 : ndarray (n,), optional
        Cylinder volume at ``res.theta_deg`` [m^3], for log p - log V; default from the
        result's volume function.
    title : str
        Heading of each plot (the engine and the file).
    """
    plt = _plt()
    out = Path(out)
    V = res.volume_m3 if volume_m3 is None else np.asarray(volume_m3, float)
    files = [_cycles(plt, res, title, out / "analysis_cycles.png"),
             _pressure(plt, res, V, title, out / "analysis_pressure.png"),
             _heat_release(plt, res, title, out / "analysis_heat_release.png")]
    if res.tdc.get("estimated"):
        files.append(_tdc(plt, res, title, out / "analysis_tdc.png"))
    return files
