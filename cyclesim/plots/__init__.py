"""Plots (the only module that imports matplotlib)."""

from __future__ import annotations

from pathlib import Path

import numpy as np


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    plt.rcParams.update({
        "figure.dpi": 110, "axes.grid": True, "grid.alpha": 0.3, "axes.spines.top": False,
        "axes.spines.right": False, "font.size": 10, "axes.titlesize": 11,
    })
    return plt


def _save(fig, path: Path) -> Path:
    from ..results.atomic_files import atomic_write_bytes
    import io

    buf = io.BytesIO()
    fig.tight_layout()
    fig.savefig(buf, format="png")
    atomic_write_bytes(path, buf.getvalue())
    import matplotlib.pyplot as plt

    plt.close(fig)
    return path


def _tdc_lines(ax, th, label: bool = True):
    """Dotted lines at the dead centres, named at the top of the axes (TDC, BDC)."""
    for x in (-360, -180, 0, 180, 360):
        if th.min() <= x <= th.max():
            ax.axvline(x, color="0.6", lw=0.6, ls=":")
            if label:
                ax.text(x, 1.0, "BDC" if abs(x) == 180 else "TDC", transform=ax.get_xaxis_transform(),
                        fontsize=7, color="0.45", ha="center", va="bottom")


def _plain_log_ticks(ax):
    """Log axes labelled with plain numbers at 1-2-5 steps (not only at the powers of ten)."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    for axis in (ax.xaxis, ax.yaxis):
        axis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
        axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
        axis.set_minor_formatter(NullFormatter())


def plot_case(res, out: Path) -> list[Path]:
    """Pressure and gas temperature vs crank angle, p-V, log p - log V, heat release and mfb, valves,
    energy balance."""
    plt = _plt()
    out = Path(out)
    t = res.trace
    th = t["crank_deg"]
    p = t["pressure_bar"]
    V = t["volume_m3"] * 1e6  # cm^3
    s = res.summary
    files = []
    title = res.name

    fig, ax = plt.subplots(figsize=(7.5, 4.2))
    ax.plot(th, p, color="tab:blue", lw=1.4, label="cylinder")
    if "motored_pressure_bar" in t:
        closed = np.isfinite(t["motored_pressure_bar"])
        ax.plot(th[closed], t["motored_pressure_bar"][closed], color="0.5", lw=1, ls="--", label="motored (Woschni reference)")
    if "theta_pmax_deg" in s:
        motored = s.get("mode") == "motored"
        ax.plot([s["theta_pmax_deg"]], [s["p_max_bar"]], "o", color="tab:red", ms=4,
                label=(f"motored peak {s['p_max_bar']:.2f} bar, {s['loss_angle_deg']:.2f} deg before TDC (loss angle)"
                       if motored else f"peak {s['p_max_bar']:.1f} bar at {s['theta_pmax_deg']:.1f} deg"))
    if np.isfinite(s.get("spark_deg", np.nan)) and th.min() <= s["spark_deg"] <= th.max():
        ax.axvline(s["spark_deg"], color="tab:orange", lw=0.9, ls="--", label=f"spark {s['spark_advance_deg']:.1f} deg BTDC")
    _tdc_lines(ax, th)
    ax.set_xlabel("crank angle [deg]  (0 = firing TDC)")
    ax.set_ylabel("cylinder pressure [bar]")
    ax.set_title(f"Cylinder pressure - {title}", pad=14)
    ax.legend(frameon=False, fontsize=8, loc="upper right" if s.get("mode") == "motored" else "best")
    files.append(_save(fig, out / "pressure.png"))

    if "temperature_K" in t:
        fig, ax = plt.subplots(figsize=(7.5, 4.2))
        ax.plot(th, t["temperature_K"], color="tab:red", lw=1.4,
                label="mean gas temperature (" + ("mixture of the zones" if "burned_temperature_K" in t else "one zone")
                + ")")
        if "burned_temperature_K" in t:   # simulation.zones: two
            # each zone is drawn while the two are distinct: once they merge (at EVO at the latest)
            # the cylinder is one zone again and the mean line holds its temperature
            T_b = np.array(t["burned_temperature_K"], dtype=float)
            T_u = np.array(t["unburned_temperature_K"], dtype=float)
            distinct = np.flatnonzero(np.isfinite(T_b) & (np.abs(T_b - T_u) > 1.0))
            if distinct.size:
                T_b[distinct[-1] + 1:] = np.nan
                T_u[distinct[-1] + 1:] = np.nan
            ax.plot(th, T_b, color="tab:orange", lw=1.2, label="burned zone")
            ax.plot(th, T_u, color="tab:blue", lw=1.2, label="unburned zone (end gas)")
        if np.isfinite(s.get("exhaust_temperature_K", np.nan)):
            ax.axhline(s["exhaust_temperature_K"], color="tab:brown", lw=0.9, ls="--",
                       label=f"exhaust, enthalpy average at the valve {s['exhaust_temperature_K']:.0f} K")
        _tdc_lines(ax, th)
        ax.set_xlabel("crank angle [deg]  (0 = firing TDC)")
        ax.set_ylabel("gas temperature [K]")
        ax.set_title(f"Gas temperature - {title}", pad=14)
        ax.legend(frameon=False, fontsize=8)
        files.append(_save(fig, out / "temperature.png"))

    fig, ax = plt.subplots(figsize=(6, 4.5))
    ax.plot(V, p, color="tab:blue", lw=1.3)
    ax.set_xlabel("cylinder volume [cm$^3$]")
    ax.set_ylabel("cylinder pressure [bar]")
    ax.set_title("Indicator diagram p-V")
    files.append(_save(fig, out / "pv.png"))

    fig, ax = plt.subplots(figsize=(6, 4.5))
    ax.loglog(V, p, color="tab:blue", lw=1.3)
    ax.set_xlabel("cylinder volume [cm$^3$] (log)")
    ax.set_ylabel("cylinder pressure [bar] (log)")
    ax.set_title("log p - log V" + (" (pumping loop at the bottom)" if "pmep_bar" in s else ""))
    ax.grid(True, which="both", alpha=0.25)
    _plain_log_ticks(ax)
    files.append(_save(fig, out / "logp_logv.png"))

    fig, ax1 = plt.subplots(figsize=(7.5, 4.2))
    lo = s.get("spark_deg", -40) - 10 if np.isfinite(s.get("spark_deg", np.nan)) else -60
    hi = (s.get("ca90_deg", 60) or 60) + 40 if np.isfinite(s.get("ca90_deg", np.nan)) else 100
    win = (th >= lo) & (th <= hi)
    ax1.plot(th[win], t["heat_release_rate_J_per_deg"][win], color="tab:red", lw=1.4, label="heat release rate")
    ax1.plot(th[win], t["wall_heat_rate_J_per_deg"][win], color="tab:purple", lw=1.0, ls="--", label="wall heat rate")
    ax1.set_xlabel("crank angle [deg]  (0 = firing TDC)")
    ax1.set_ylabel("rate [J/deg]")
    ax2 = ax1.twinx()
    if s.get("mode") != "motored":            # motored: nothing burns (a fuel cut's trace burn is not shown)
        ax2.plot(th[win], t["mfb"][win], color="tab:green", lw=1.2, label="mass fraction burned")
    ax2.set_ylabel("mass fraction burned [-]")
    ax2.set_ylim(0, 1.05)
    ax2.grid(False)
    for key, lab in (("ca10_deg", "CA10"), ("ca50_deg", "CA50"), ("ca90_deg", "CA90")):
        v = s.get(key)
        if v is not None and np.isfinite(v):
            ax2.axvline(v, color="tab:green", lw=0.6, ls=":")
            ax2.text(v, 1.01, lab, fontsize=7, ha="center", color="tab:green")
    h1, l1 = ax1.get_legend_handles_labels()
    h2, l2 = ax2.get_legend_handles_labels()
    ax1.legend(h1 + h2, l1 + l2, frameon=False, fontsize=8, loc="center right")
    ax1.set_title("Heat release and mass fraction burned" if s.get("mode") != "motored"
                  else "Motored: no heat release; wall heat rate")
    files.append(_save(fig, out / "heat_release.png"))

    if "intake_lift_mm" in t:
        fig, (a1, a2) = plt.subplots(2, 1, figsize=(7.5, 5.5), sharex=True)
        a1.plot(th, t["intake_lift_mm"], color="tab:blue", label="intake")
        a1.plot(th, t["exhaust_lift_mm"], color="tab:red", label="exhaust")
        a1.set_ylabel("valve lift [mm]")
        a1.legend(frameon=False, fontsize=8)
        a1.set_title("Valve lift and mass flow (positive into the cylinder)", pad=14)
        a2.plot(th, t["intake_flow_g_per_s"], color="tab:blue", label="intake valves")
        a2.plot(th, t["exhaust_flow_g_per_s"], color="tab:red", label="exhaust valves")
        a2.axhline(0, color="0.4", lw=0.6)
        a2.set_ylabel("mass flow [g/s]")
        a2.set_xlabel("crank angle [deg]  (0 = firing TDC)")
        a2.legend(frameon=False, fontsize=8)
        _tdc_lines(a1, th)
        _tdc_lines(a2, th, label=False)
        files.append(_save(fig, out / "valves.png"))

    runners = [side for side in ("intake", "exhaust") if f"{side}_runner_valve_pressure_bar" in t]
    if runners:
        fig, axes = plt.subplots(len(runners), 1, figsize=(7.5, 2.8 * len(runners) + 0.6), sharex=True,
                                 squeeze=False)
        for ax, side in zip(axes[:, 0], runners):
            ax.plot(th, t[f"{side}_runner_valve_pressure_bar"], color="tab:blue", label="at the valves")
            ax.plot(th, t[f"{side}_runner_mid_pressure_bar"], color="tab:orange", lw=0.9, label="mid-length")
            ax.plot(th, p, color="0.5", lw=0.6, label="cylinder")
            ax.set_ylim(0.5 * min(np.min(t[f"{side}_runner_valve_pressure_bar"]), 1.0),
                        1.3 * max(np.max(t[f"{side}_runner_valve_pressure_bar"]), np.max(t[f"{side}_runner_mid_pressure_bar"])))
            ax.set_ylabel(f"{side} runner [bar]")
            ax.legend(frameon=False, fontsize=8)
            _tdc_lines(ax, th, label=ax is axes[0, 0])
        axes[0, 0].set_title("Runner pressures", pad=14)
        axes[-1, 0].set_xlabel("crank angle [deg]  (0 = firing TDC)")
        files.append(_save(fig, out / "runners.png"))

    eb = s.get("energy_balance")
    if isinstance(eb, dict) and _basis_positive(eb):
        files.append(plot_energy_balance(eb, s.get("unreleased_energy"), out / "energy_balance.png"))
    return files


def _basis_positive(eb: dict) -> bool:
    from ..results.motoring import energy_basis

    v = eb[energy_basis(eb)[0]]
    return bool(np.isfinite(v) and v > 0)


def plot_energy_balance(eb: dict, unreleased: dict | None, path: Path) -> Path:
    """Bars of the energy-balance terms in % of its basis (fuel energy, chemical energy released
    or, motored, the compression work); the unreleased chemical energy split by carrier."""
    from ..results.motoring import energy_basis
    from ..results.energy_labels import UNRELEASED_LABELS, energy_label

    plt = _plt()
    base_key, base_label = energy_basis(eb)
    base = eb[base_key]
    keys = [k for k in eb if k not in (base_key, "closure_fraction")]
    vals = [100 * eb[k] / base for k in keys]
    labels = [energy_label(k) for k in keys]
    fig, ax = plt.subplots(figsize=(7.5, 4.2))
    colors = ["tab:green", "tab:olive", "tab:purple", "tab:red", "tab:brown", "tab:gray", "0.7", "0.85", "0.6"]
    ypos = np.arange(len(keys))[::-1]
    for y, k, v, c in zip(ypos, keys, vals, colors):
        if k == "unreleased_chemical_energy_J" and unreleased:
            left = 0.0
            for (kk, lab), cc in zip(UNRELEASED_LABELS, ("tab:gray", "0.55", "0.8")):
                w = 100 * unreleased[kk] / base
                ax.barh(y, w, left=left, color=cc, label=f"{lab} {w:.1f} %")
                left += w
        else:
            ax.barh(y, v, color=c)
        right = v > -0.5
        ax.text(max(v, 0.0) + 0.5 if right else v - 0.5, y, f"{v:.1f} %".replace("-0.0 ", "0.0 "),
                va="center", ha="left" if right else "right", fontsize=8)
    ax.set_yticks(ypos, labels)
    if unreleased and "unreleased_chemical_energy_J" in keys:
        ax.legend(frameon=False, fontsize=7, loc="lower right", title="unreleased chemical energy", title_fontsize=7)
    lo = min(vals)
    ax.set_xlim(lo * 1.3 - 3 if lo < -0.5 else min(0.0, lo - 3), max(max(vals), 0.0) * 1.12 + 1)
    ax.set_xlabel(f"share of the {base_label} [%]")
    if base_key == "compression_work_J":
        ax.set_title(f"Motored cycle: energy balance on {base:.0f} J of compression work")
    else:
        ax.set_title(f"Where the {base_label} goes ({base:.0f} J per cylinder and cycle)")
    ax.axvline(0, color="0.3", lw=0.6)
    return _save(fig, path)


def plot_cut_bias(res, path: Path) -> Path:
    """Cylinder-cut test: friction estimate against truth after each step, and each step's share of the bias."""
    plt = _plt()
    steps = res.steps
    names = [s["step"] for s in steps]
    x = np.arange(len(steps))
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(10, 4))
    a1.bar(x - 0.2, [s["friction_est_kW"] for s in steps], 0.4, color="tab:orange", label="cut-test estimate")
    a1.bar(x + 0.2, [s["friction_true_kW"] for s in steps], 0.4, color="tab:blue", label="model truth")
    a1.set_xticks(x, names, rotation=30, ha="right")
    a1.set_ylabel("friction power [kW]")
    a1.set_title("friction: estimate and truth after each step")
    a1.legend(fontsize=8)
    d = [s["friction_bias_step_kW"] for s in steps]
    a2.bar(x, d, color=["tab:red" if v > 0 else "tab:green" for v in d])
    a2.axhline(0, color="0.3", lw=0.8)
    a2.set_xticks(x, names, rotation=30, ha="right")
    a2.set_ylabel("change of friction bias [kW]")
    a2.set_title("bias added by each step (order matters)")
    fig.suptitle(f"cylinder-cut test: {res.label}, {res.speed_rpm:.0f} rpm", fontsize=11)
    return _save(fig, path)


def plot_engine(eng, out: Path) -> list[Path]:
    """Multi-cylinder engine: crank-resolved engine torque, manifold pressures, per-cylinder IMEP."""
    plt = _plt()
    out = Path(out)
    t = eng.traces
    files = []
    fig, ax = plt.subplots(figsize=(7.5, 4))
    ax.plot(t["crank_deg"], t["engine_torque_Nm"], color="tab:blue", lw=1.2, label="engine torque")
    ax.axhline(eng.engine["brake_torque_Nm"], color="tab:red", lw=1, ls="--",
               label=f"mean (brake) {eng.engine['brake_torque_Nm']:.1f} N m")
    ax.set_xlabel("crank angle, engine frame [deg] (0 = firing TDC of the first cylinder in the firing order)")
    ax.set_ylabel("torque [N m]")
    ax.set_title(f"{eng.label}: crank-angle resolved torque")
    ax.legend(fontsize=8)
    files.append(_save(fig, out / "engine_torque.png"))
    if "intake_manifold_bar" in t:
        fig, (a1, a2) = plt.subplots(2, 1, figsize=(7.5, 5), sharex=True)
        a1.plot(t["crank_deg"], t["intake_manifold_bar"], color="tab:green", lw=1.2)
        a1.set_ylabel("intake manifold [bar]")
        branches = sorted(k for k in t if k.startswith("exhaust_branch_"))
        if branches:
            br = eng.engine.get("exhaust_branches", [])
            for key, colour in zip(branches, ("tab:red", "tab:purple", "tab:orange", "tab:brown", "tab:pink")):
                b = int(key.split("_")[2])
                cyls = ", ".join(str(k + 1) for k, x in enumerate(br) if x == b)
                a2.plot(t["crank_deg"], t[key], color=colour, lw=1.2, label=f"branch {b} (cylinders {cyls})")
            a2.legend(fontsize=8)
        else:
            a2.plot(t["crank_deg"], t["exhaust_manifold_bar"], color="tab:red", lw=1.2)
        a2.set_ylabel("exhaust manifold [bar]")
        a2.set_xlabel("crank angle, engine frame [deg]")
        a1.set_title(f"{eng.label}: manifold pressures")
        files.append(_save(fig, out / "engine_manifolds.png"))
    fig, ax = plt.subplots(figsize=(6, 3.6))
    c = eng.cylinders
    ax.bar([str(x["cylinder"]) for x in c], [x["imep_net_bar"] for x in c],
           color=["tab:blue" if x["mode"] == "fire" else "0.6" for x in c])
    vals = [x["imep_net_bar"] for x in c if x["mode"] == "fire"]
    if vals and all(x["mode"] == "fire" for x in c):
        # all firing: zoom on the spread (bars from zero would all look alike)
        lo, hi = min(vals), max(vals)
        pad = max(0.5 * (hi - lo), 0.01 * abs(hi), 1e-3)
        ax.set_ylim(lo - pad, hi + pad)
        for i, v in enumerate(vals):
            ax.text(i, v, f"{v:.3f}", ha="center", va="bottom", fontsize=8)
    ax.set_xlabel("cylinder")
    ax.set_ylabel("net IMEP [bar]")
    ax.set_title("per-cylinder net IMEP (grey: cut or deactivated)")
    files.append(_save(fig, out / "engine_cylinders.png"))
    return files


def plot_trace_set(ss, out: Path) -> list[Path]:
    """Synthetic set: the first cycles as measured against the truth, and net IMEP per cycle."""
    plt = _plt()
    out = Path(out)
    th = np.asarray(ss.theta, float)
    n = min(3, len(ss.truth))
    fig, (a1, a2) = plt.subplots(2, 1, figsize=(7.5, 6), gridspec_kw={"height_ratios": [3, 2]})
    colours = ("tab:blue", "tab:orange", "tab:green")
    for k in range(n):
        a1.plot(th, ss.pressure_pa[k] / 1e5, color=colours[k], lw=1.0, label=f"cycle {k + 1} measured")
        a1.plot(th, ss.pressure_true_pa[k] / 1e5, color=colours[k], lw=0.8, ls="--",
                label=f"cycle {k + 1} true")
    a1.set_xlim(-180, 180)
    a1.set_xlabel("crank angle [deg] (0 = firing TDC)")
    a1.set_ylabel("cylinder pressure [bar]")
    a1.set_title(f"{ss.meta.get('operating_point', '')}: synthetic cycles, measured (with flaws) and true")
    a1.legend(fontsize=7, ncol=2)
    imep = np.array([r["imep_net_bar"] for r in ss.truth], float)
    cyc = np.arange(1, len(imep) + 1)
    mis = np.array([bool(r.get("misfire")) for r in ss.truth])
    a2.plot(cyc, imep, color="tab:blue", lw=0.8, marker=".", ms=3, label="net IMEP (true)")
    if mis.any():
        a2.plot(cyc[mis], imep[mis], "x", color="tab:red", label="misfire")
    a2.set_xlabel("cycle")
    a2.set_ylabel("net IMEP [bar]")
    a2.legend(fontsize=7)
    fig.tight_layout()
    return [_save(fig, out / "traces.png")]
