"""Plots of full-load curves and part-load maps (:mod:`cyclesim.studies.maps`).

* full load: torque and power against speed; volumetric efficiency; spark with
  what limited it, lambda and exhaust temperature against speed;
* part load, on the speed-BMEP plane: BSFC islands at fixed levels
  (:data:`BSFC_LEVELS`), brake efficiency, spark advance with its limiting
  reason at each point, knock margin, exhaust temperature; with an emissions model NO [ppm] and
  [g/kWh], and NO against torque (:mod:`cyclesim.plots.burn_no`).  Contours are
  triangulated on the scattered points, masked above the full-load line and
  below :data:`BMEP_FLOOR_BAR`; the full-load line is drawn.  Points whose MBT
  lies beyond the advance range (``in_contours`` False) are drawn as crosses
  and kept out of the contours.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from . import _plt, _save

__all__ = ["plot_full_load", "plot_part_load", "BSFC_LEVELS", "BMEP_FLOOR_BAR", "LIMIT_STYLE"]

BSFC_LEVELS = (240, 250, 260, 280, 300, 350, 400)
"""BSFC island levels [g/kWh] (levels a calibration engineer reads; common practice)."""
BMEP_FLOOR_BAR = 1.0
"""Contours are masked below this BMEP [bar] (BSFC grows without bound towards zero load)."""
LIMIT_STYLE = {
    "MBT": ("o", "tab:green"), "knock": ("v", "tab:red"), "spark clamp": ("s", "tab:purple"),
    "peak pressure": ("^", "tab:orange"), "exhaust temperature (lambda at floor)": ("D", "tab:brown"),
    "fixed (config)": ("o", "0.4"), "MBT not found (clamp)": ("x", "k"), "failed": ("x", "tab:gray"),
}
"""Marker and colour of each limiting reason (spelt out in the legend)."""


KNOCK_MARGIN_LEVELS = (1, 2, 3, 4, 6, 8)
KNOCK_MARGIN_CAP_DEG = 10.0
"""Knock margins drawn capped here [deg]: beyond it knock does not bear on the spark."""


def knock_margin_for_map(m):
    """Knock margin [deg] per point, capped at :data:`KNOCK_MARGIN_CAP_DEG`; where no advance run
    knocked, its lower bound (largest advance run without knock less the chosen advance)."""
    km = _col(m, "knock_margin_deg")
    low = _col(m, "knock_free_to_deg") - _col(m, "spark_advance_deg")
    km = np.where(np.isfinite(km), km, low)
    return np.minimum(km, KNOCK_MARGIN_CAP_DEG)


def _col(m, name):
    return m.column(name) if name in m.columns else np.full(len(m.rows), np.nan)


def _in_contours(m):
    return np.array([bool(r.get("in_contours", True)) and not r.get("error") for r in m.rows])


def full_load_line(m):
    """(speed [rpm], BMEP [bar]) of the full-load line of a part-load map: its own full-load curve
    where given, else the highest BMEP per speed of the map's points."""
    fl = getattr(m, "full_load", None)
    if fl is not None:
        n, b = fl.column("speed_rpm"), fl.column("bmep_bar")
    else:
        sp, bm = _col(m, "speed_rpm"), _col(m, "bmep_bar")
        n = np.array(sorted(set(sp[np.isfinite(bm)])))
        b = np.array([np.nanmax(bm[sp == v]) for v in n])
    ok = np.isfinite(n) & np.isfinite(b)
    o = np.argsort(n[ok])
    return n[ok][o], b[ok][o]


def _limit_legend(ax, m, x, y):
    lim = [r.get("spark_limit") or "" for r in m.rows]
    for name in dict.fromkeys(lim):
        mk, c = LIMIT_STYLE.get(name, ("o", "k"))
        sel = np.array([v == name for v in lim]) & np.isfinite(x) & np.isfinite(y)
        if sel.any():
            ax.scatter(x[sel], y[sel], marker=mk, c=c, s=36, label=f"set by {name}", zorder=5,
                       edgecolors="k" if mk not in ("x",) else None, linewidths=0.4)


def plot_full_load(m, out: Path) -> list[Path]:
    """Torque and power, volumetric efficiency, spark with its limit, lambda and exhaust temperature."""
    plt = _plt()
    out = Path(out)
    n = _col(m, "speed_rpm")
    files = []
    fig, ax = plt.subplots(figsize=(7, 4.2))
    ax.plot(n, _col(m, "torque_Nm"), "o-", color="tab:blue")
    ax.set_xlabel("engine speed [rpm]")
    ax.set_ylabel("brake torque [N m]", color="tab:blue")
    ax2 = ax.twinx()
    ax2.plot(n, _col(m, "power_kW"), "s-", color="tab:red")
    ax2.set_ylabel("brake power [kW]", color="tab:red")
    ax2.grid(False)
    ax2.spines["right"].set_visible(True)
    ax.set_title(f"{m.base_config}: full-load torque (circles) and power (squares)")
    files.append(_save(fig, out / "full_load.png"))

    fig, ax = plt.subplots(figsize=(7, 3.8))
    ax.plot(n, 100 * _col(m, "volumetric_efficiency"), "o-", color="tab:blue")
    ax.set_xlabel("engine speed [rpm]")
    ax.set_ylabel("volumetric efficiency [%]")
    ax.set_title(f"{m.base_config}: volumetric efficiency at full load")
    files.append(_save(fig, out / "full_load_volumetric_efficiency.png"))

    fig, (a1, a2, a3) = plt.subplots(3, 1, figsize=(7, 7.4), sharex=True)
    sp = _col(m, "spark_advance_deg")
    a1.plot(n, sp, "-", color="0.5", lw=1)
    _limit_legend(a1, m, n, sp)
    if np.isfinite(_col(m, "mbt_deg")).any():
        a1.plot(n, _col(m, "mbt_deg"), "--", color="tab:green", lw=1, label="MBT")
    if np.isfinite(_col(m, "knock_limit_deg")).any():
        a1.plot(n, _col(m, "knock_limit_deg"), ":", color="tab:red", lw=1.2, label="knock-limited advance")
    a1.set_ylabel("spark advance [deg BTDC]")
    a1.legend(fontsize=7, ncol=2)
    a1.set_title(f"{m.base_config}: spark, mixture and exhaust temperature at full load")
    lam = _col(m, "lambda")
    a2.plot(n, lam, "o-", color="tab:brown")
    a2.axhline(1.0, color="0.5", lw=0.8, ls=":")
    if np.isfinite(lam).any():
        a2.set_ylim(min(np.nanmin(lam) - 0.02, 0.95), max(np.nanmax(lam) + 0.02, 1.02))
    a2.set_ylabel("lambda [-]")
    tx = _col(m, "exhaust_temperature_K")
    a3.plot(n, tx, "o-", color="tab:red")
    lim = getattr(m, "exhaust_limit_K", None)
    if lim is not None:
        a3.axhline(lim, color="k", lw=1, ls="--", label=f"limit {lim:g} K")
        a3.legend(fontsize=7)
    if np.isfinite(tx).any():
        mid = 0.5 * (np.nanmax(tx) + np.nanmin(tx))
        half = max(0.55 * (np.nanmax(tx) - np.nanmin(tx)), 40.0)
        a3.set_ylim(mid - half, mid + half)
    a3.set_ylabel("exhaust temperature [K]")
    a3.set_xlabel("engine speed [rpm]")
    files.append(_save(fig, out / "full_load_spark_mixture.png"))
    return files


def _triangulation(x, y, line):
    import matplotlib.tri as mtri

    tri = mtri.Triangulation(x, y)
    cx, cy = x[tri.triangles].mean(axis=1), y[tri.triangles].mean(axis=1)
    mask = cy < BMEP_FLOOR_BAR
    if len(line[0]) >= 2:
        top = np.interp(cx, line[0], line[1])
        mask |= cy > top * 1.001
    # long slivers along the hull join points that are not neighbours on the grid
    tri.set_mask(mask)
    return tri


def plot_part_load(m, out: Path) -> list[Path]:
    """BSFC islands, brake efficiency, spark with its limit, knock margin and exhaust temperature maps."""
    plt = _plt()
    out = Path(out)
    n = _col(m, "speed_rpm")
    bmep = _col(m, "bmep_bar")
    inside = _in_contours(m) & np.isfinite(bmep)
    line = full_load_line(m)
    files = []

    def frame(title, z, zlabel, name, levels=None, fmt="%.0f", cmap="viridis", limits=False):
        fig, ax = plt.subplots(figsize=(7.4, 4.8))
        good = inside & np.isfinite(z)
        drawn = False
        if good.sum() >= 3 and len(set(n[good])) > 1 and len(set(np.round(bmep[good], 6))) > 1:
            try:
                tri = _triangulation(n[good], bmep[good], line)
                zz = z[good]
                if levels is None:
                    cs = ax.tricontourf(tri, zz, levels=10, cmap=cmap)
                    # every other level drawn and labelled: labels stay readable where the field is steep
                    cl = ax.tricontour(tri, zz, levels=cs.levels[1:-1:2], colors="k", linewidths=0.5)
                else:
                    span = levels[-1] - levels[0]
                    fill = [min(levels[0] - 0.1 * span, float(np.nanmin(zz)) - 1e-6), *levels,
                            max(levels[-1] + 0.25 * span, float(np.nanmax(zz)) + 1e-6)]
                    cs = ax.tricontourf(tri, zz, levels=fill, cmap=cmap)
                    cl = ax.tricontour(tri, zz, levels=list(levels), colors="k", linewidths=0.8)
                ax.clabel(cl, fontsize=8, fmt=fmt, inline=True)
                cb = fig.colorbar(cs, ax=ax, label=zlabel, ticks=None if levels is None else list(levels),
                                  spacing="uniform")
                if levels is not None:
                    cb.ax.set_yticklabels([fmt % v for v in levels])
                drawn = True
            except (ValueError, RuntimeError):
                drawn = False
        if not drawn and good.any():
            sc = ax.scatter(n[good], bmep[good], c=z[good], cmap=cmap, s=30)
            fig.colorbar(sc, ax=ax, label=zlabel)
        if limits:
            _limit_legend(ax, m, n, bmep)
        else:
            ax.plot(n[inside], bmep[inside], "k.", ms=3, label="simulated point")
            out_ = ~inside & np.isfinite(bmep)
            if out_.any():
                ax.plot(n[out_], bmep[out_], "kx", ms=6, label="left out (MBT not found or failed)")
        if len(line[0]):
            ax.plot(line[0], line[1], "-", color="k", lw=2, label="full-load line")
        ax.axhline(BMEP_FLOOR_BAR, color="0.5", lw=0.8, ls=":")
        if np.isfinite(n).any():
            lo, hi = np.nanmin(n), np.nanmax(n)
            pad = 0.03 * (hi - lo if hi > lo else max(hi, 1.0))
            ax.set_xlim(lo - pad, hi + pad)
        ax.set_xlabel("engine speed [rpm]")
        ax.set_ylabel("BMEP [bar]")
        ax.set_title(f"{m.base_config}: {title}")
        ax.legend(fontsize=7, loc="lower right")
        files.append(_save(fig, out / name))

    frame("BSFC islands [g/kWh]", _col(m, "bsfc_g_per_kWh"), "BSFC [g/kWh]", "map_bsfc.png",
          levels=BSFC_LEVELS, cmap="viridis_r")
    frame("brake efficiency [%]", 100 * _col(m, "eta_brake"), "brake efficiency [%]", "map_eta_brake.png",
          fmt="%.1f")
    frame("spark advance [deg BTDC] and what set it", _col(m, "spark_advance_deg"), "spark advance [deg BTDC]",
          "map_spark.png", fmt="%.0f", limits=True)
    km = knock_margin_for_map(m)
    if np.isfinite(km).any():
        frame(f"knock margin: retard from the knock limit [deg] ({KNOCK_MARGIN_CAP_DEG:g}: that or more)", km,
              "knock margin [deg]", "map_knock_margin.png", levels=KNOCK_MARGIN_LEVELS, fmt="%.0f",
              cmap="RdYlGn")
    frame("exhaust temperature at the valve [K]", _col(m, "exhaust_temperature_K"), "exhaust temperature [K]",
          "map_exhaust_temperature.png", cmap="inferno")
    if np.isfinite(_col(m, "no_ppm_wet")).any():
        from .burn_no import plot_no_against_torque

        frame("NO [ppm, wet]", _col(m, "no_ppm_wet"), "NO [ppm]", "map_no.png", cmap="magma")
        frame("brake-specific NO [g/kWh]", _col(m, "no_g_per_kWh"), "NO [g/kWh]", "map_no_g_per_kWh.png",
              fmt="%.1f", cmap="magma")
        files.append(plot_no_against_torque(m, out))
    # intake pressure - BMEP relation (the load axis the map was run on)
    fig, ax = plt.subplots(figsize=(7, 4.2))
    for v in sorted(set(n[np.isfinite(n)])):
        sel = n == v
        ax.plot(_col(m, "intake_pressure_bar")[sel], bmep[sel], "o-", ms=3, label=f"{v:g} rpm")
    ax.set_xlabel("intake pressure [bar]")
    ax.set_ylabel("BMEP [bar]")
    ax.set_title(f"{m.base_config}: BMEP against intake pressure")
    ax.legend(fontsize=7, ncol=2)
    files.append(_save(fig, out / "map_bmep.png"))
    return files
