"""Reference laminar burning velocities from Cantera's freely propagating flame.

    python benchmarks/laminar_flame_reference.py             # all points (30-60 min on one core)
    python benchmarks/laminar_flame_reference.py --only 0    # one point, printed, not stored

Computes the one-dimensional, adiabatic, freely propagating premixed flame
(``cantera.FreeFlame``) with GRI-Mech 3.0 (``gri30.yaml``) and
mixture-averaged transport, and stores the burning velocities in
``tests/data/laminar_flame_gri30.json`` together with the Cantera version
and the solver settings.  The tests compare the laminar-burning-velocity
correlations of :mod:`cyclesim.combustion.laminar_flame` with this file; no
flame is solved in the test suite.

Grid convergence: every flame is solved twice, first with the refine
criteria ``COARSE`` and then, continuing from that solution, with ``FINE``
(half the slope and curvature limits, so about twice the points in the flame
zone).  The stored velocity is the fine one; ``grid_change`` is
|S_fine - S_coarse| / S_fine, which the tests require below 1 %.

Mixtures: fuel in the dry air of :data:`cyclesim.gas.thermo.AIR_MOLE_FRACTIONS`
(O2 0.2095, N2 0.7812, Ar 0.0093 by mole).  Burned-gas dilution is a mass
fraction ``f`` of the *complete-combustion* products (CO2, H2O, N2, O2, Ar:
all the points diluted are lean or stoichiometric) of the same fuel-air
mixture, mixed in at the unburned temperature.

Points, in the order solved: phi 0.8-1.2 at 1 bar, 300 and 450 K; f = 0.1
and 0.2 at phi 0.9 and 1.0, 1 bar, 300 K; phi 0.8-1.2 at 5 bar, 300 and 450 K;
engine-like states at phi 1, 700 K and 20 bar, 800 K and 40 bar (beyond
GRI-Mech 3.0's validation: reported, not gated); f = 0.1 and 0.2 at phi 0.9
and 1.0, 5 bar, 450 K; the engine-like states at phi 0.9; propane-air at
1 bar, 300 K, phi 0.8, 1.0, 1.2 (GRI-Mech 3.0 has a propane sub-mechanism but
is not validated for propane flames: reported, not gated).

The run is resumable: points already in the output file with the same
settings are skipped.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import cantera as ct

OUT = Path(__file__).resolve().parent.parent / "tests" / "data" / "laminar_flame_gri30.json"
MECH = "gri30.yaml"
AIR = {"O2": 0.2095, "N2": 0.7812, "AR": 0.0093}
COARSE = {"ratio": 3.0, "slope": 0.07, "curve": 0.14}
FINE = {"ratio": 3.0, "slope": 0.035, "curve": 0.07}
TOL_SS = (1e-9, 1e-14)
TOL_TS = (1e-5, 1e-13)


def points() -> list[dict]:
    pts = []
    for T in (300.0, 450.0):
        for phi in (0.8, 0.9, 1.0, 1.1, 1.2):
            pts.append(dict(fuel="CH4", phi=phi, T_u_K=T, p_bar=1.0, dilution=0.0, band="gated"))
    for phi in (0.9, 1.0):
        for f in (0.1, 0.2):
            pts.append(dict(fuel="CH4", phi=phi, T_u_K=300.0, p_bar=1.0, dilution=f, band="gated"))
    for T in (300.0, 450.0):
        for phi in (0.8, 0.9, 1.0, 1.1, 1.2):
            pts.append(dict(fuel="CH4", phi=phi, T_u_K=T, p_bar=5.0, dilution=0.0, band="gated"))
    for p, T in ((20.0, 700.0), (40.0, 800.0)):
        pts.append(dict(fuel="CH4", phi=1.0, T_u_K=T, p_bar=p, dilution=0.0, band="reported"))
    for phi in (0.9, 1.0):
        for f in (0.1, 0.2):
            pts.append(dict(fuel="CH4", phi=phi, T_u_K=450.0, p_bar=5.0, dilution=f, band="gated"))
    for p, T in ((20.0, 700.0), (40.0, 800.0)):
        pts.append(dict(fuel="CH4", phi=0.9, T_u_K=T, p_bar=p, dilution=0.0, band="reported"))
    for phi in (0.8, 1.0, 1.2):
        pts.append(dict(fuel="C3H8", phi=phi, T_u_K=300.0, p_bar=1.0, dilution=0.0,
                        band="reported"))
    return pts


def key(pt: dict) -> tuple:
    return (pt["fuel"], pt["phi"], pt["T_u_K"], pt["p_bar"], pt["dilution"])


def unburned_mixture(gas: ct.Solution, fuel: str, phi: float, T: float, p: float, f: float):
    """Set ``gas`` to the fresh mixture diluted by a mass fraction ``f`` of its complete products."""
    gas.set_equivalence_ratio(phi, fuel, AIR)
    gas.TP = T, p
    if f == 0.0:
        return
    fresh = gas.Y.copy()
    c = gas.elemental_mole_fraction("C")
    h = gas.elemental_mole_fraction("H")
    o = gas.elemental_mole_fraction("O")
    n = gas.elemental_mole_fraction("N")
    ar = gas.elemental_mole_fraction("Ar")
    o2_left = (o - 2 * c - h / 2) / 2
    if o2_left < -1e-12:
        raise ValueError("dilution by complete products is defined here for phi <= 1 only")
    gas.TPX = T, p, {"CO2": c, "H2O": h / 2, "N2": n / 2, "O2": max(o2_left, 0.0), "AR": ar}
    prod = gas.Y.copy()
    gas.TPY = T, p, (1 - f) * fresh + f * prod


def width_m(p_bar: float) -> float:
    # the flame thins roughly as p^-0.7 here; the solver widens the domain itself if needed
    return 0.03 * p_bar ** -0.7


def solve(pt: dict, loglevel: int = 0) -> dict:
    gas = ct.Solution(MECH)
    unburned_mixture(gas, pt["fuel"], pt["phi"], pt["T_u_K"], pt["p_bar"] * 1e5, pt["dilution"])
    flame = ct.FreeFlame(gas, width=width_m(pt["p_bar"]))
    flame.transport_model = "mixture-averaged"
    flame.flame.set_steady_tolerances(default=TOL_SS)
    flame.flame.set_transient_tolerances(default=TOL_TS)
    t0 = time.perf_counter()
    flame.set_refine_criteria(**COARSE)
    flame.solve(loglevel=loglevel, auto=True)
    s_coarse = float(flame.velocity[0])
    n_coarse = int(flame.grid.size)
    flame.set_refine_criteria(**FINE)
    flame.solve(loglevel=loglevel, auto=False)
    s_fine = float(flame.velocity[0])
    return {
        **pt,
        "S_L_m_per_s": s_fine,
        "S_L_coarse_m_per_s": s_coarse,
        "grid_change": abs(s_fine - s_coarse) / s_fine,
        "grid_points_coarse": n_coarse,
        "grid_points": int(flame.grid.size),
        "domain_m": float(flame.grid[-1] - flame.grid[0]),
        "T_ad_K": float(flame.T[-1]),
        "solve_s": round(time.perf_counter() - t0, 1),
    }


def settings() -> dict:
    return {
        "cantera_version": ct.__version__,
        "mechanism": MECH + " (GRI-Mech 3.0, Smith et al. 1999)",
        "transport": "mixture-averaged",
        "flame": "cantera.FreeFlame, adiabatic, freely propagating, no Soret, no radiation",
        "air_mole_fractions": AIR,
        "dilution": "mass fraction of the complete-combustion products of the same fuel-air mixture",
        "refine_coarse": COARSE,
        "refine_fine": FINE,
        "steady_tolerances": TOL_SS,
        "transient_tolerances": TOL_TS,
        "velocity": "unburned-gas velocity at the inlet of the fine grid [m/s]",
    }


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--only", type=int, help="solve one point (by index) and print it")
    args = ap.parse_args(argv)
    pts = points()
    if args.only is not None:
        print(json.dumps(solve(pts[args.only], loglevel=1), indent=1))
        return 0
    data = {"settings": settings(), "points": []}
    if OUT.exists():
        old = json.loads(OUT.read_text())
        if old.get("settings") == json.loads(json.dumps(settings())):
            data = old
    done = {key(p) for p in data["points"]}
    for pt in pts:
        if key(pt) in done:
            continue
        res = solve(pt)
        data["points"].append(res)
        OUT.parent.mkdir(parents=True, exist_ok=True)
        tmp = OUT.with_suffix(".tmp")
        tmp.write_text(json.dumps(data, indent=1) + "\n")
        tmp.replace(OUT)
        print(f"{pt['fuel']} phi {pt['phi']:.2f} T {pt['T_u_K']:.0f} K p {pt['p_bar']:.0f} bar "
              f"f {pt['dilution']:.2f}: S_L {res['S_L_m_per_s']:.4f} m/s (grid change "
              f"{100 * res['grid_change']:.2f} %, {res['grid_points']} points, {res['solve_s']} s)",
              flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
