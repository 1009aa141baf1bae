"""One zone against two zones (simulation.zones) on the demo engines: figures and time per run.

    python benchmarks/two_zone.py

Prints JSON: per config, net IMEP (closed-cycle IMEP for demo_closed), knock integral peak,
end-gas temperature peak, burned-zone temperature peak and its angle, energy closure, the loop
and the wall time of one run (numpy loop for two zones, compiled for one where numba is there).
"""

from __future__ import annotations

import json
import time

import cyclesim

KEYS = ("imep_net_bar", "imep_closed_bar", "knock_integral_max", "end_gas_temperature_max_K",
        "burned_zone_temperature_max_K", "burned_zone_temperature_max_deg")


def main() -> None:
    out = {}
    for config, extra in (("demo_closed", []), ("demo_turbo", []), ("demo_closed", ["burn.model=entrainment"])):
        label = config + ("+" + ",".join(extra) if extra else "")
        for zones in ("one", "two"):
            cyclesim.run(config, extra + [f"simulation.zones={zones}"])        # compile / warm caches
            t0 = time.perf_counter()
            r = cyclesim.run(config, extra + [f"simulation.zones={zones}"])
            dt = time.perf_counter() - t0
            s = r.summary
            row = {k: s[k] for k in KEYS if k in s and s[k] is not None}
            row["closure_fraction"] = s["energy_balance"]["closure_fraction"]
            row["loop"] = r.cycle_loop.split(" ")[0]
            row["seconds"] = round(dt, 2)
            out[f"{label} zones={zones}"] = row
    print(json.dumps(out, indent=1, default=float))


if __name__ == "__main__":
    main()
