"""Plots of the burn angles and NO in the studies: against spark advance (spark study) and NO
against torque across a part-load map ("emissions against torque")."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from . import _plt, _save

__all__ = ["plot_spark_burn_no", "plot_no_against_torque"]


def _finite(a) -> bool:
    return bool(np.isfinite(np.asarray(a, float)).any())


def plot_spark_burn_no(st, out: Path) -> Path | None:
    """``spark_burn_no.png``: the 0-10 % and 10-90 % burn angles against spark advance and, where an
    emissions model ran, NO [ppm] on the right axis; None where the cases have no burn angles."""
    t = st.table
    adv = t.column(st.spark_key)

    def col(name):
        return t.column(name) if name in t.columns else np.full(len(adv), np.nan)

    b010, b1090, no = col("burn_0_10_deg"), col("burn_10_90_deg"), col("no_ppm_wet")
    ok = np.isfinite(adv) & (np.isfinite(b010) | np.isfinite(no))
    if not ok.any():
        return None
    o = np.argsort(adv[ok])
    a = adv[ok][o]
    plt = _plt()
    fig, ax = plt.subplots(figsize=(7, 4.2))
    ax.plot(a, b010[ok][o], "o-", color="tab:blue", ms=3, label="0-10 % (spark to CA10)")
    ax.plot(a, b1090[ok][o], "s-", color="tab:cyan", ms=3, label="10-90 %")
    ax.set_xlabel("spark advance [deg BTDC]")
    ax.set_ylabel("burn angle [deg]")
    handles, labels = ax.get_legend_handles_labels()
    if _finite(no[ok]):
        ax2 = ax.twinx()
        ax2.plot(a, no[ok][o], "^-", color="tab:red", ms=4, label="NO (wet)")
        ax2.set_ylabel("NO [ppm, wet]", color="tab:red")
        ax2.grid(False)
        h2, l2 = ax2.get_legend_handles_labels()
        handles, labels = handles + h2, labels + l2
    if st.mbt_deg is not None:
        ax.axvline(st.mbt_deg, color="tab:green", ls="--", lw=1)
    ax.legend(handles, labels, fontsize=8, loc="best")
    ax.set_title(f"{st.base_config}: burn angles and NO vs spark advance")
    return _save(fig, Path(out) / "spark_burn_no.png")


def plot_no_against_torque(m, out: Path) -> Path | None:
    """``map_no_torque.png``: brake-specific NO [g/kWh] and NO [ppm] against brake torque, one line
    per speed, from the points of a map; None without NO."""
    def col(name):
        return m.column(name) if name in m.columns else np.full(len(m.rows), np.nan)

    n, tq = col("speed_rpm"), col("torque_Nm")
    bs, ppm = col("no_g_per_kWh"), col("no_ppm_wet")
    if not _finite(ppm):
        return None
    plt = _plt()
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(10, 4.2))
    for v in sorted(set(n[np.isfinite(n)])):
        sel = (n == v) & np.isfinite(tq)
        o = np.argsort(tq[sel])
        ax1.plot(tq[sel][o], bs[sel][o], "o-", ms=3, label=f"{v:g} rpm")
        ax2.plot(tq[sel][o], ppm[sel][o], "o-", ms=3, label=f"{v:g} rpm")
    ax1.set_xlabel("brake torque [N m]")
    ax1.set_ylabel("brake-specific NO [g/kWh]")
    ax2.set_xlabel("brake torque [N m]")
    ax2.set_ylabel("NO [ppm, wet]")
    ax1.legend(fontsize=7, ncol=2)
    fig.suptitle(f"{m.base_config}: NO against torque (extended Zeldovich, burned-mass elements)")
    return _save(fig, Path(out) / "map_no_torque.png")
