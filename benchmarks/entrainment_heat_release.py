"""Shape of the `entrainment` burn's heat-release rate, flat piston and bowl piston.

Runs the closed-cycle demo (configs/demo_closed.yaml) with the predictive burn, once with the
demo's flat piston and once with a bowl piston (40 mm by 8 mm, demo data), and prints the shape
figures of the heat-release rate (cyclesim_plugins.entrainment_burn.heat_release_shape): the angle
of the peak, the widths from half the peak to the peak (rise) and from the peak back to half of it
(fall), their ratio and the number of humps above half the peak.  For comparison, a Wiebe burn
(a = 5, m = 2) has a fall-to-rise ratio of 1.0 and one hump.

    CYCLESIM_THREADS=1 python benchmarks/entrainment_heat_release.py [--set KEY=VALUE ...]
        [--npz traces.npz] [--png plot.png] [--compare before.npz]

``--npz`` stores the traces, ``--png`` plots them (with the traces of ``--compare`` dashed).
"""

from __future__ import annotations

import argparse

import numpy as np

from cyclesim import load_config
from cyclesim.api import simulate
from cyclesim_plugins.entrainment_burn import heat_release_shape

PISTONS = {"flat": [],
           "bowl": ["engine.chamber.piston=bowl", "engine.chamber.bowl_diameter_mm=40",
                    "engine.chamber.bowl_depth_mm=8"]}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--set", action="append", default=[], metavar="KEY=VALUE", help="config override (repeatable)")
    ap.add_argument("--npz", help="store the traces here")
    ap.add_argument("--png", help="plot the heat-release rates here")
    ap.add_argument("--compare", help="traces stored by an earlier --npz, plotted dashed")
    a = ap.parse_args()
    traces = {}
    print(f"{'piston':6} {'peak':>6} {'rise':>6} {'fall':>6} {'fall/rise':>9} {'humps':>5} {'CA10':>6} {'CA50':>6}"
          f" {'10-90':>6}")
    for name, ov in PISTONS.items():
        (r,) = simulate([load_config("demo_closed", ["burn.model=entrainment", *ov, *a.set])])
        th = np.ravel(r.trace["crank_deg"])
        q = np.ravel(r.trace["heat_release_rate_J_per_deg"])
        traces[f"{name}_deg"], traces[f"{name}_J_per_deg"] = th, q
        f, s = heat_release_shape(th, q), r.summary
        print(f"{name:6} {f['peak_deg']:6.1f} {f['rise_deg']:6.1f} {f['fall_deg']:6.1f} {f['fall_to_rise']:9.2f}"
              f" {f['maxima']:5d} {s['ca10_deg']:6.1f} {s['ca50_deg']:6.1f} {s['burn_10_90_deg']:6.1f}")
    if a.npz:
        np.savez(a.npz, **traces)
    if a.png:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt

        old = np.load(a.compare) if a.compare else None
        fig, ax = plt.subplots(figsize=(7, 4))
        for name, color in zip(PISTONS, ("C0", "C1")):
            ax.plot(traces[f"{name}_deg"], traces[f"{name}_J_per_deg"], color=color, label=f"{name} piston")
            if old is not None:
                ax.plot(old[f"{name}_deg"], old[f"{name}_J_per_deg"], color=color, ls="--",
                        label=f"{name} piston, {a.compare}")
        ax.set_xlim(-30, 70)
        ax.set_xlabel("crank angle [deg ATDC]")
        ax.set_ylabel("heat-release rate [J/deg]")
        ax.legend()
        ax.grid(alpha=0.3)
        fig.tight_layout()
        fig.savefig(a.png, dpi=110)


if __name__ == "__main__":
    main()
