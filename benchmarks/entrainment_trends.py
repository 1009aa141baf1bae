"""Burn angles of the predictive `entrainment` burn with its default constants, at MBT.

For 1500/3000/5000 rpm at full load (demo) and part load (demo_part_load) this runs the spark
study on a coarse advance grid, reads MBT from its torque fit, and prints MBT, CA50 at MBT and
the 0-10 % and 10-90 % burn angles of the case at MBT (one run per point at the rounded MBT),
its net IMEP, the combustion efficiency (share of the fuel's energy released) and the turbulence
intensity at TDC over the mean piston speed.

    CYCLESIM_THREADS=1 python benchmarks/entrainment_trends.py [--speeds 1500,3000,5000]
        [--loads full,part] [--advances 10:60:5] [--set operating.lambda=0.9 ...]

``--set`` adds config overrides to every point (mixture, EGR, intake pressure, burn constants).

Results are estimates; approach spark limits gradually with knock detection, within the
manufacturer's limits, following the test cell's procedures.
"""

from __future__ import annotations

import argparse
import time

from cyclesim import load_config
from cyclesim.api import simulate
from cyclesim.studies.spark import spark_study

LOADS = {"full": "demo", "part": "demo_part_load"}


def point(config: str, speed: float, extra=(), advances: str = "10:60:5"):
    ov = ["burn.model=entrainment", f"operating.speed_rpm={speed:g}", "simulation.step_deg=1.0", *extra]
    st = spark_study(config, advances, overrides=ov, plots=False)
    mbt = st.mbt_deg
    row = {"mbt_deg": mbt, "ca50_at_mbt_deg": st.ca50_at_mbt_deg}
    if mbt is not None:
        r = simulate(load_config(config, ov + [f"burn.spark_advance_deg={mbt:.1f}"]))[0]
        f = r.summary
        row.update(ca10_deg=f["ca10_deg"], burn_0_10_deg=f["ca10_deg"] + mbt, burn_10_90_deg=f["burn_10_90_deg"],
                   imep_net_bar=f["imep_net_bar"], u_tdc_over_sp=f["turbulence_to_piston_speed_at_tdc"],
                   eff_pct=100.0 * f["combustion_efficiency"])
    return row


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--speeds", default="1500,3000,5000")
    ap.add_argument("--loads", default="full,part")
    ap.add_argument("--advances", default="10:60:5", help="spark advances of each point's study [deg BTDC]")
    ap.add_argument("--set", action="append", default=[], metavar="KEY=VALUE", help="config override (repeatable)")
    a = ap.parse_args()
    print(f"{'load':5} {'rpm':>5} {'MBT':>6} {'CA50':>6} {'0-10':>6} {'10-90':>6} {'IMEPn':>6} {'eff%':>6} {'uT/Sp':>6}  s")
    for load in a.loads.split(","):
        for n in (float(x) for x in a.speeds.split(",")):
            t = time.time()
            r = point(LOADS[load], n, a.set, a.advances)
            fmt = lambda k: "   n/a" if r.get(k) is None else f"{r[k]:6.1f}"  # noqa: E731
            print(f"{load:5} {n:5.0f} {fmt('mbt_deg')} {fmt('ca50_at_mbt_deg')} {fmt('burn_0_10_deg')}"
                  f" {fmt('burn_10_90_deg')} {fmt('imep_net_bar')} {fmt('eff_pct')} {r.get('u_tdc_over_sp', float('nan')):6.2f}"
                  f"  {time.time() - t:.0f}", flush=True)
    print("estimates only: approach spark limits gradually with knock detection, within the manufacturer's"
          " limits, following the test cell's procedures")


if __name__ == "__main__":
    main()
