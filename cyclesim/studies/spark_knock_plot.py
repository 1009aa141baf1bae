"""The spark study's knock plot: the knock onset angle and the unburned mass fraction at onset
against spark advance, drawn only where a knock model ran.

The intensity plotted is the unburned mass fraction at onset, ``1 - x_b(theta_onset)`` [-]: the
share of the charge still unburned when the end gas autoignites, which sets how much energy the
autoignition releases at once (the usual knock-intensity indicator of an onset model, Heywood 1988,
ch. 9.6; common practice).  It is the figure ``knock_unburned_fraction_at_onset`` where the knock
model gives it, else read from the case's mass-fraction-burned trace.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["plot_knock_onset", "KNOCK_PLOT"]

KNOCK_PLOT = "spark_knock_onset.png"


def knock_points(st) -> dict | None:
    """The advances [deg BTDC], onset angles [deg ATDC] and unburned shares at onset [-] of a spark
    study, sorted by advance (NaN where no onset); None where no knock model ran."""
    from .knock_onset import model_cutoff, unburned_at_onset

    t = st.table
    if st.knock_status == "no model" or "knock_onset_deg" not in t.columns:
        return None
    adv = t.column(st.spark_key)
    ok = np.isfinite(adv)
    onset = t.column("knock_onset_deg")[ok]
    share = unburned_at_onset(t, ok, onset)
    share = np.full(len(onset), np.nan) if share is None else np.where(np.isfinite(onset), share, np.nan)
    o = np.argsort(adv[ok])
    return {"advance_deg": adv[ok][o], "onset_deg": onset[o], "unburned": share[o], "cutoff": model_cutoff(t)}


def plot_knock_onset(st, out: Path) -> Path | None:
    """``spark_knock_onset.png`` in ``out`` (None where no knock model ran)."""
    k = knock_points(st)
    if k is None:
        return None
    from ..plots import _plt, _save

    plt = _plt()
    a, on, un = k["advance_deg"], k["onset_deg"], k["unburned"]
    knocks = np.isfinite(on)
    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(7, 5.6), sharex=True)
    ax1.plot(a[knocks], on[knocks], "o-", color="tab:red", ms=4, label="knock onset")
    if (~knocks).any():
        y0 = np.nanmin(on) if knocks.any() else 0.0
        ax1.plot(a[~knocks], np.full((~knocks).sum(), y0), "x", color="0.45", ms=6,
                 label="no onset at this advance")
    ax1.axhline(0, color="0.6", lw=0.6, ls=":")
    ax1.set_ylabel("knock onset [deg ATDC]")
    ax1.set_title(f"{st.base_config}: knock onset and unburned charge at onset")
    ax2.plot(a[knocks], 100 * un[knocks], "s-", color="tab:purple", ms=4, label="unburned at onset")
    if k["cutoff"] is not None:
        ax2.axhline(100 * k["cutoff"], color="0.4", ls="--", lw=1,
                    label=f"knock model's cut-off {100 * k['cutoff']:g} % (no onset counted below)")
    ax2.set_ylabel("unburned mass at onset [% of charge]")
    ax2.set_ylim(bottom=0)
    ax2.set_xlabel("spark advance [deg BTDC]")
    for ax in (ax1, ax2):
        if st.knock_limited_deg is not None:
            ax.axvline(st.knock_limited_deg, color="tab:red", ls="-.", lw=1,
                       label=f"knock limit {st.knock_limited_deg:.1f} deg BTDC" if ax is ax1 else None)
        if st.recommended_deg is not None:
            ax.axvline(st.recommended_deg, color="tab:orange", lw=4, alpha=0.35, zorder=1,
                       label=f"recommended {st.recommended_deg:.1f} deg BTDC" if ax is ax1 else None)
        ax.legend(fontsize=8, loc="best")
    return _save(fig, Path(out) / KNOCK_PLOT)
