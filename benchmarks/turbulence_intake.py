"""The K-k turbulence run through the intake stroke, against the `entrainment` burn's IVC start.

The burn starts the K-k model (Poulos & Heywood 1983) at IVC with the mean flow at the kinetic
energy of the mean inlet flow velocity, K = v_i^2 / 2, and k = 0.1 K.  Here the same equations
(:func:`cyclesim.combustion.turbulence.kk_rates`) run instead from IVO with the intake jet as the
source of mean-flow energy, per unit mass of the charge (from memory of the published form):

    dK/dt = (mdot_in / m) (v_jet^2 / 2 - K) - P,     dk/dt = P - eps - (mdot_in / m) k,

v_jet = mdot_in / (rho C_D A_curtain), the valve model's default discharge coefficients on the
intake curtain pi D_v L_v n_v (the port area is not taken as a limit, so at high lift the jet is
if anything underestimated); the run's trace starts at gas-exchange TDC, so the first 12 deg of
the demo's intake event (IVO at -372 deg) are left out; backflow leaves the specific energies unchanged; the rapid-distortion
term acts once the valves are shut, as in the burn.  The intake flow, lift, mass and volume are
the run's own (the turbulence does not act on them).  Prints u' / S_p and the mean-flow velocity
sqrt(2 K) / S_p at IVC and TDC for both starts.

    CYCLESIM_THREADS=1 python benchmarks/turbulence_intake.py [--config demo] [--speed-rpm 3000]
"""

from __future__ import annotations

import argparse
import math

import numpy as np

from cyclesim import load_config
from cyclesim.api import simulate
from cyclesim.combustion.turbulence import integral_length, kk_rates, turbulence_intensity
from cyclesim_plugins.valve_flow import DEFAULT_CD_TABLE


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--config", default="demo")
    ap.add_argument("--speed-rpm", type=float, default=3000.0)
    ap.add_argument("--step-deg", type=float, default=0.05)
    a = ap.parse_args()
    case = load_config(a.config, ["burn.model=entrainment", "simulation.step_deg=1.0",
                                  f"operating.speed_rpm={a.speed_rpm:g}"])
    (r,) = simulate([case])
    t = r.trace
    th = np.ravel(t["crank_deg"])
    V = np.ravel(t["volume_m3"])
    m = np.ravel(t["mass_mg"]) * 1e-6
    mdot = np.ravel(t["intake_flow_g_per_s"]) * 1e-3
    lift = np.ravel(t["intake_lift_mm"]) * 1e-3
    eng, val = case.engine, case.valves
    bore = float(eng.bore_mm) * 1e-3
    D, n_v = float(val.intake_diameter_mm) * 1e-3, float(val.intake_count)
    cd = np.array(DEFAULT_CD_TABLE)
    area = n_v * math.pi * D * lift * np.interp(lift / D, cd[:, 0], cd[:, 1])
    rho = m / V
    bore_area, half_bore = math.pi * bore ** 2 / 4.0, bore / 2.0
    Sp = 2.0 * float(eng.stroke_mm) * 1e-3 * a.speed_rpm / 60.0
    omega = 6.0 * a.speed_rpm
    ivo, ivc = float(val.ivo_deg), float(val.ivc_deg)
    c_beta = float(case.submodels["burn"].params["production_coefficient"])
    K, k = 0.0, 1e-6
    report = {}
    dth = a.step_deg
    for x in np.arange(max(ivo, th[0]), 0.0 + 1e-9, dth):
        mm, md, rr, VV = (np.interp(x, th, y) for y in (m, mdot, rho, V))
        AA = np.interp(x, th, area)
        L = integral_length(VV, bore_area, half_bore)
        shut = x >= ivc
        dlnrho = (np.interp(x + dth, th, rho) - rr) / rr * omega / dth if shut else 0.0
        dK, dk = kk_rates(K, k, L, dlnrho, c_beta)
        if md > 0.0 and AA > 1e-9 and not shut:
            v = md / (rr * AA)
            dK += md / mm * (0.5 * v * v - K)
            dk -= md / mm * k
        K, k = max(K + dK * dth / omega, 0.0), max(k + dk * dth / omega, 0.0)
        for name, at in (("IVC", ivc), ("TDC", 0.0)):
            if name not in report and x >= at - 1e-9:
                report[name] = (K, k)
    tr_K, tr_k = np.ravel(t["burn.K"]), np.ravel(t["burn.k"])
    print(f"{a.config} at {a.speed_rpm:g} rpm, S_p {Sp:.2f} m/s, c_beta {c_beta:g}")
    print(f"{'start':28} {'at':>4} {'u_prime/Sp':>10} {'U/Sp':>6}")
    for name, at in (("IVC", ivc), ("TDC", 0.0)):
        Kb, kb = report[name]
        i = int(np.argmin(abs(th - at)))
        print(f"{'K-k from IVO, intake jet':28} {name:>4} {float(turbulence_intensity(kb)) / Sp:10.2f}"
              f" {math.sqrt(2 * Kb) / Sp:6.2f}")
        print(f"{'burn: IVC start (v_i^2/2)':28} {name:>4} {float(turbulence_intensity(tr_k[i])) / Sp:10.2f}"
              f" {math.sqrt(2 * tr_K[i]) / Sp:6.2f}")


if __name__ == "__main__":
    main()
