"""Closed-cycle reference checks (IVC to EVO): thermodynamics, combustion, figures, numerics.

References used here:
* Cantera 3.x with GRI-Mech 3.0 (``gri30.yaml``): isentropic compression of a
  methane-air charge, constant-volume (UV) equilibrium, fixed-composition
  complete-combustion products at given internal energy and density.
* Heywood, J. B. (1988), Internal Combustion Engine Fundamentals, eq. 5.31:
  air-standard Otto efficiency 1 - r^(1-gamma).
* Wiebe, I. I. (1970); Heywood (1988) ch. 9: Wiebe burn law and its closed-form
  burn angles theta0 + dtheta (-ln(1-x)/a)^(1/(m+1)).
* Woschni, G. (1967), SAE 670931: motored pressure used by the correlation.

Methane is used wherever Cantera is the reference: GRI-Mech 3.0 has no
gasoline surrogate.
"""

from __future__ import annotations

import math

import cantera as ct
import numpy as np
import pytest

import cyclesim
from cyclesim.config import apply_override, build_case, load_config, load_raw, parse_override

# Dry air by mole as the brief and the package define it (common practice: CO2 and
# traces folded into N2 and Ar).
AIR = {"O2": 0.2095, "N2": 0.7812, "AR": 0.0093}

LOSSLESS = [
    "heat_transfer.model=none",
    "blowby.model=none",
    "operating.residual_fraction=0",
]
METHANE = ["fuel.name=methane", "operating.lambda=1.0"]


def config(name, overrides=(), models=None):
    """Load a config, replace whole role sections (``{"burn": {"model": "none"}}``), apply overrides.

    A role section is replaced rather than overridden key by key, so a
    parameter-free model such as ``burn: none`` does not inherit the base
    config's Wiebe parameters.
    """
    raw, base = load_raw(name)
    for role, section in (models or {}).items():
        raw[role] = dict(section)
    for text in overrides:
        parts, value = parse_override(text)
        raw = apply_override(raw, parts, value)
    return build_case(raw, base)


def methane_air(phi=1.0):
    """Mole numbers of a methane-air charge: CH4 + (2/phi) (O2 + 3.729 N2 + 0.0444 Ar)."""
    n_o2 = 2.0 / phi
    n_air = n_o2 / AIR["O2"]
    return {"CH4": 1.0, "O2": n_o2, "N2": n_air * AIR["N2"], "AR": n_air * AIR["AR"]}


def methane_complete_products():
    """Complete-combustion products of the stoichiometric charge: CO2 + 2 H2O + the inerts."""
    n = methane_air(1.0)
    return {"CO2": 1.0, "H2O": 2.0, "N2": n["N2"], "AR": n["AR"]}


def rel(a, b):
    return abs(a - b) / abs(b)


def displaced_volume(case):
    e = case.engine
    return math.pi / 4.0 * (e.bore_mm * 1e-3) ** 2 * (e.stroke_mm * 1e-3)


# ---------------------------------------------------------------------------
# 0. A role can be switched off from the command line / overrides
# ---------------------------------------------------------------------------
def test_burn_model_none_by_override():
    # The README promises every role has a 'none' model that switches the loss or
    # process off; the brief uses '--set burn.model=none' on the demo configs.
    case = load_config("demo_closed", ["burn.model=none", "heat_transfer.model=none"])
    assert case.submodels["burn"].model == "none"
    assert case.submodels["burn"].params == {}
    assert case.submodels["heat_transfer"].model == "none"


# ---------------------------------------------------------------------------
# 1. Motored adiabatic compression = Cantera isentrope
# ---------------------------------------------------------------------------
def test_motored_adiabatic_compression_matches_cantera_isentrope():
    case = config("demo_closed", METHANE + LOSSLESS + ["simulation.step_deg=0.5"],
                  models={"burn": {"model": "none"}})
    res = cyclesim.run(case)
    tr = res.trace
    th, V, p, T = tr["crank_deg"], tr["volume_m3"], tr["pressure_bar"], tr["temperature_K"]
    assert th[0] == pytest.approx(case.valves.ivc_deg)
    p_tdc = float(np.interp(0.0, th, p))
    T_tdc = float(np.interp(0.0, th, T))
    ratio = float(np.interp(0.0, th, V)) / float(V[0])

    # Reference: Cantera 3.x with GRI-Mech 3.0, fresh methane-air charge at the IVC
    # state, compressed at constant entropy in small volume steps to V(0)/V(IVC).
    gas = ct.Solution("gri30.yaml")
    gas.TPX = float(T[0]), float(p[0]) * 1e5, methane_air(1.0)
    s0, v0 = gas.s, gas.v
    for f in np.geomspace(1.0, ratio, 400)[1:]:
        gas.SV = s0, v0 * f
    assert rel(p_tdc, gas.P / 1e5) < 1e-3      # brief: within 0.1 %
    assert rel(T_tdc, gas.T) < 1e-3            # same isentrope, temperature


# ---------------------------------------------------------------------------
# 2. Near-instant adiabatic burn at TDC = Cantera UV state of the products
# ---------------------------------------------------------------------------
def fuel_air_cycle_work(phi: float, p0: float, T0: float, V0: float, Vc: float, V1: float) -> float:
    """Work [J] of the fuel-air cycle (Heywood 1988 sec. 5.5) by Cantera with GRI-Mech 3.0: the fresh
    methane-air charge compressed at constant entropy, frozen, from V0 to Vc, burned to equilibrium at
    constant volume and internal energy, expanded at constant entropy in shifting equilibrium to V1."""
    gas = ct.Solution("gri30.yaml")
    gas.TPX = T0, p0, methane_air(phi)
    m = gas.density * V0
    u0, s0 = gas.u, gas.s
    gas.SV = s0, Vc / m
    u_c = gas.u
    gas.equilibrate("UV")
    u_b, s_b = gas.u, gas.s
    for v in np.geomspace(Vc, V1, 200)[1:] / m:
        gas.SV = s_b, v
        gas.equilibrate("SV")
    return m * ((u0 - u_c) + (u_b - gas.u))


@pytest.mark.parametrize("lam", [0.8, 0.9, 1.0, 1.1, 1.25])
def test_fuel_air_cycle_work_over_lambda_matches_cantera(lam):
    # the whole closed cycle against the fuel-air cycle: rich, stoichiometric and lean charges,
    # the products at equilibrium through the expansion (the rich CO and H2 included)
    case = config("demo_closed", [o for o in INSTANT_BURN if not o.startswith("operating.lambda")]
                  + [f"operating.lambda={lam}"])
    tr = cyclesim.run(case).trace
    p, T, V = tr["pressure_bar"] * 1e5, tr["temperature_K"], tr["volume_m3"]
    W = float(np.trapezoid(p, V))
    ref = fuel_air_cycle_work(1.0 / lam, float(p[0]), float(T[0]), float(V[0]), float(V.min()), float(V[-1]))
    # 0.1 %: the burn takes 1 deg about TDC instead of none, and the trapezoid on the 0.1 deg grid
    assert W == pytest.approx(ref, rel=1e-3)
INSTANT_BURN = METHANE + LOSSLESS + [
    "simulation.step_deg=0.1",
    "burn.spark_advance_deg=0.5",       # 1 deg Wiebe burn centred at TDC
    "burn.ignition_delay_deg=0",
    "burn.duration_deg=1",
    "burn.combustion_efficiency=1",
]


@pytest.mark.parametrize("burned_gas", ["equilibrium", "complete"])
def test_instant_burn_matches_cantera_constant_volume_products(burned_gas):
    case = config("demo_closed", INSTANT_BURN + [f"gas.burned_gas={burned_gas}"])
    tr = cyclesim.run(case).trace
    th, V, p, T, mfb = (tr[k] for k in ("crank_deg", "volume_m3", "pressure_bar", "temperature_K", "mfb"))
    m = tr["mass_mg"] * 1e-6
    i0 = int(np.flatnonzero(mfb == 0.0)[-1])          # last unburned point, just before the burn
    i1 = int(np.argmax(mfb > 0.999))                  # first point with 99.9 % burned
    assert -0.7 < th[i0] <= -0.5 and 0.0 < th[i1] < 1.5
    assert m[i1] == pytest.approx(m[i0], rel=1e-12)   # closed, no blowby

    # Unburned state just before the burn, in Cantera 3.x with GRI-Mech 3.0.
    gas = ct.Solution("gri30.yaml")
    gas.TPX = float(T[i0]), float(p[i0]) * 1e5, methane_air(1.0)
    # the same T and p must give the same density (ideal-gas mixture, same molar mass)
    assert rel(gas.density, m[i0] / V[i0]) < 1e-6
    u0 = gas.int_energy_mass
    # The piston moves a little during the burn: the gas does the work p dV
    # (trapezoid on the trace), so u_end = u0 - W/m at the density of the end point.
    work = float(np.trapezoid(p[i0:i1 + 1] * 1e5, V[i0:i1 + 1]))
    u1 = u0 - work / m[i0]
    v1 = float(V[i1] / m[i1])
    if burned_gas == "equilibrium":
        gas.UV = u1, v1
        gas.equilibrate("UV")
    else:
        # complete-combustion products, composition frozen, same u and density
        gas.TPX = 2500.0, 50e5, methane_complete_products()
        gas.UV = u1, v1
    assert rel(p[i1], gas.P / 1e5) < 5e-3      # brief: 0.5 % in pressure
    # brief: 10 K in temperature; with complete-combustion products Cantera holds the same species
    # data (NASA-7 of GRI-Mech 3.0), so only the integration (the trapezoid work above, the burn
    # over one step) and the property tables' interpolation remain: 2 K at about 3100 K (0.06 %)
    assert abs(T[i1] - gas.T) < (10.0 if burned_gas == "equilibrium" else 2.0)


def test_short_burn_between_grid_points_cannot_release_more_than_the_fuel():
    # First law and mass conservation: with combustion efficiency 1 the chemical
    # energy released is at most the fuel's (the charge cannot burn twice), and the
    # mass fraction burned cannot exceed 1.  Start of burning -0.527 deg lies between
    # the grid points -0.6 and -0.5 of the 0.1 deg grid from IVC at -136 deg.
    over = [o for o in INSTANT_BURN if not o.startswith("burn.spark_advance_deg")]
    case = config("demo_closed", over + ["burn.spark_advance_deg=0.527"])
    res = cyclesim.run(case)
    s = res.summary
    assert s["heat_release_J"] <= s["fuel_energy_J"] * (1.0 + 1e-6)
    # the burn progress itself is a quadrature of the burn rate: over a 10-step burn its
    # the fixed-step error is of order 1e-4, so it may pass 1 by that much without any charge burning twice
    assert res.trace["mfb"].max() <= 1.0 + 2e-4


# ---------------------------------------------------------------------------
# 3. Air-standard Otto cycle
# ---------------------------------------------------------------------------
def _crank_radius(S, l, e):
    """Crank radius [m] whose piston travel sqrt((l+a)^2-e^2) - sqrt((l-a)^2-e^2) equals S."""
    from scipy.optimize import brentq

    return brentq(lambda a: math.sqrt((l + a) ** 2 - e ** 2) - math.sqrt((l - a) ** 2 - e ** 2) - S,
                  0.3 * S, 0.7 * S, xtol=1e-15)


@pytest.mark.parametrize("gamma, pin_offset_mm", [
    (1.4, 0.0),
    (1.3, 0.0),
    (1.4, 15.0),
    (1.4, -15.0),
])
def test_air_standard_otto_efficiency(gamma, pin_offset_mm):
    from cyclesim.cylinder.geometry import Geometry

    r = 10.0
    base = load_config("demo_closed")
    e = base.engine
    geo = Geometry(e.bore_mm * 1e-3, e.stroke_mm * 1e-3, e.conrod_mm * 1e-3, r, pin_offset_mm * 1e-3)
    bdc = float(geo.bdc_deg[0])
    # independent slider-crank check of the BDC angle: the crank turns
    # pi + asin(e/(l+a)) - asin(e/(l-a)) (or the mirror) from TDC to BDC
    S, l, off = e.stroke_mm * 1e-3, e.conrod_mm * 1e-3, abs(pin_offset_mm) * 1e-3
    a = _crank_radius(S, l, off)
    shift = math.degrees(math.asin(off / (l - a)) - math.asin(off / (l + a)))
    assert abs(bdc - 180.0) == pytest.approx(shift, abs=1e-9)

    case = config("demo_closed", LOSSLESS + [
        "gas.properties=constant_gamma", f"gas.gamma={gamma}",
        f"engine.compression_ratio={r}", f"engine.pin_offset_mm={pin_offset_mm}",
        f"valves.ivc_deg={bdc - 360.0}", f"valves.evo_deg={bdc}",      # IVC and EVO at BDC
        "simulation.step_deg=0.1",
        "burn.spark_advance_deg=0.5", "burn.ignition_delay_deg=0", "burn.duration_deg=1",
        "burn.combustion_efficiency=1",
    ])
    res = cyclesim.run(case)
    tr = res.trace
    Vd = displaced_volume(case)
    Vc = Vd / (r - 1.0)
    V, th = tr["volume_m3"], tr["crank_deg"]
    # the cycle spans the full stroke and 0 deg is the piston's TDC, also with an offset
    assert V[0] == pytest.approx(Vc + Vd, rel=1e-9)
    assert V[-1] == pytest.approx(Vc + Vd, rel=1e-9)
    assert V.min() >= Vc * (1 - 1e-12)
    assert float(np.interp(0.0, th, V)) == pytest.approx(Vc, rel=1e-5)  # linear interpolation near the minimum
    eta_otto = 1.0 - r ** (1.0 - gamma)                                 # Heywood 1988 eq. 5.31
    assert rel(res.summary["eta_closed_cycle"], eta_otto) < 2e-3        # brief: 0.2 %


# ---------------------------------------------------------------------------
# 4. Burn angles = Wiebe closed form
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("a, m", [(5.0, 2.0), (6.908, 1.0)])
def test_burn_angles_match_wiebe_closed_form(a, m):
    spark, delay, dur = 20.37, 9.0, 48.0       # start of burning -11.37 deg, between 0.5 deg grid points
    case = load_config("demo_closed", [
        "simulation.step_deg=0.5", f"burn.spark_advance_deg={spark}", f"burn.ignition_delay_deg={delay}",
        f"burn.duration_deg={dur}", f"burn.a={a}", f"burn.m={m}"])
    s = cyclesim.run(case).summary
    theta0 = -spark + delay

    def closed_form(x):   # Wiebe 1970; Heywood 1988 ch. 9
        return theta0 + dur * (-math.log(1.0 - x) / a) ** (1.0 / (m + 1.0))

    for key, x in (("ca10_deg", 0.10), ("ca50_deg", 0.50), ("ca90_deg", 0.90)):
        assert abs(s[key] - closed_form(x)) < 0.05, key
    assert abs(s["burn_10_90_deg"] - (closed_form(0.9) - closed_form(0.1))) < 0.05
    assert s["spark_deg"] == pytest.approx(-spark)


# ---------------------------------------------------------------------------
# 5. Default fired closed case: energy balance and the motored pressure
# ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def closed_demo():
    return cyclesim.run("demo_closed")


def test_closed_demo_energy_balance_closes(closed_demo):
    eb = closed_demo.summary["energy_balance"]
    # first law of the closed system with leakage: the released chemical energy against work, wall
    # heat, blowby enthalpy and the change of the internal energy of the state (the integrated terms
    # and the state are computed independently, so the closure measures the integration)
    assert abs(eb["closure_fraction"]) < 1e-4
    # piston work agrees with an independent integral of the pressure and volume columns
    tr = closed_demo.trace
    W = float(np.trapezoid(tr["pressure_bar"] * 1e5, tr["volume_m3"]))
    assert rel(eb["piston_work_J"], W) < 2e-3      # trapezoid on the 0.5 deg grid


def _start_of_combustion(case):
    b = case.submodels["burn"].params
    return -b["spark_advance_deg"] + b["ignition_delay_deg"]


def test_motored_pressure_is_exact_for_an_adiabatic_leak_free_charge():
    # Woschni's motored pressure is that of the same trapped charge without
    # combustion: with walls that take no heat (multiplier 0), no leakage and no
    # residual it must equal the fired pressure until burning starts.
    case = load_config("demo_closed", ["heat_transfer.multiplier=0", "blowby.model=none",
                                       "operating.residual_fraction=0"])
    tr = cyclesim.run(case).trace
    th, p, pm = tr["crank_deg"], tr["pressure_bar"], tr["motored_pressure_bar"]
    before = th <= _start_of_combustion(case)
    assert before.sum() > 50          # trace points of the solver (2 deg steps with the valves shut)
    assert np.max(np.abs(pm[before] / p[before] - 1.0)) < 1e-5


def test_motored_pressure_is_the_adiabatic_reference_before_combustion(closed_demo):
    tr = closed_demo.trace
    assert "motored_pressure_bar" in tr
    th, p, pm = tr["crank_deg"], tr["pressure_bar"], tr["motored_pressure_bar"]
    assert np.all(np.isfinite(pm))
    soc = _start_of_combustion(load_config("demo_closed"))
    before = th <= soc
    # Woschni (1967) uses the motored pressure of the same engine; here it is the adiabatic
    # compression of the trapped charge from IVC. Before combustion the fired charge differs only
    # by its wall heat exchange and blowby: within 1 % (wall heat during compression is a few % of
    # the compression work, common practice); with heat transfer and blowby off both agree (test
    # below). Early in compression the walls are hotter than the charge, the charge gains heat
    # and so its pressure lies above the adiabatic reference.
    ratio = pm[before] / p[before]
    assert np.max(np.abs(ratio - 1.0)) < 1e-2
    qw = tr["cumulative_wall_heat_J"][before]
    k = int(np.argmin(qw))
    assert qw[k] < 0 and ratio[k] < 1.0
    after = th > soc + 20
    assert np.all(pm[after] < p[after])


def test_motored_pressure_lies_below_fired_pressure_after_start_of_combustion(closed_demo):
    tr = closed_demo.trace
    th, p, pm = tr["crank_deg"], tr["pressure_bar"], tr["motored_pressure_bar"]
    soc = _start_of_combustion(load_config("demo_closed"))
    after = th > soc
    assert after.sum() > 50           # trace points of the solver (2 deg steps with the valves shut)
    assert np.all(pm[after] < p[after])


# ---------------------------------------------------------------------------
# 6. Resolution
# ---------------------------------------------------------------------------
@pytest.mark.slow
def test_tenfold_finer_step_changes_figures_negligibly():
    coarse, fine = cyclesim.simulate([
        load_config("demo_closed", ["simulation.step_deg=0.5"]),
        load_config("demo_closed", ["simulation.step_deg=0.05"]),
    ])
    a, b = coarse.summary, fine.summary
    assert rel(a["imep_closed_bar"], b["imep_closed_bar"]) < 5e-4
    assert rel(a["p_max_bar"], b["p_max_bar"]) < 5e-4
    for key in ("ca10_deg", "ca50_deg", "ca90_deg", "theta_pmax_deg"):
        assert abs(a[key] - b[key]) < 0.05, key


# ---------------------------------------------------------------------------
# 7. A case's figures do not depend on its batch-mates
# ---------------------------------------------------------------------------
def _assert_same_figures(alone, inside, rtol=1e-9):
    assert alone.error is None and inside.error is None
    assert alone.summary.keys() == inside.summary.keys()
    for key, v in alone.summary.items():
        w = inside.summary[key]
        if isinstance(v, dict):
            for kk, vv in v.items():
                # closure terms are differences of large numbers: compare on the fuel-energy scale
                scale = max(abs(vv), 1e-6 * abs(alone.summary["fuel_energy_J"]))
                assert abs(w[kk] - vv) <= rtol * scale, f"{key}.{kk}"
        elif isinstance(v, (bool, str)):
            assert v == w, key
        else:
            assert np.isclose(w, v, rtol=rtol, atol=0.0, equal_nan=True), key
    for key, col in alone.trace.items():
        np.testing.assert_allclose(inside.trace[key], col, rtol=rtol, atol=0.0, equal_nan=True, err_msg=key)


def test_closed_case_alone_equals_case_inside_batch_of_fifty():
    target = ["burn.spark_advance_deg=23.3", "operating.speed_rpm=2710",
              "operating.lambda=0.95", "engine.compression_ratio=10.1"]
    rng = np.random.default_rng(20240607)
    others = []
    for _ in range(50):
        others.append(load_config("demo_closed", [
            f"burn.spark_advance_deg={rng.uniform(5, 40):.3f}",
            f"operating.speed_rpm={rng.uniform(1000, 6500):.1f}",
            f"operating.lambda={rng.choice([0.85, 0.95, 1.0, 1.1, 1.25])}",
            f"engine.compression_ratio={rng.uniform(8, 13):.2f}",
        ]))
    alone = cyclesim.simulate([load_config("demo_closed", target)])[0]
    batch = cyclesim.simulate(others[:17] + [load_config("demo_closed", target)] + others[17:])
    _assert_same_figures(alone, batch[17])


def test_full_cycle_case_alone_equals_case_inside_batch():
    coarse = ["simulation.step_deg=1.0", "simulation.max_cycles=6"]
    target = coarse + ["burn.spark_advance_deg=23.3", "operating.speed_rpm=3100",
                       "operating.lambda=0.95", "engine.compression_ratio=10.1"]
    mates = [(10, 2500, 1.0, 9.5), (35, 5500, 0.9, 11.0), (25, 4000, 1.1, 10.5),
             (15, 3000, 1.2, 12.0), (30, 6000, 0.85, 9.0), (20, 3500, 1.0, 10.5), (28, 4500, 1.05, 11.5)]
    others = [load_config("demo", coarse + [f"burn.spark_advance_deg={s}", f"operating.speed_rpm={n}",
                                            f"operating.lambda={lam}", f"engine.compression_ratio={r}"])
              for s, n, lam, r in mates]
    alone = cyclesim.simulate([load_config("demo", target)])[0]
    batch = cyclesim.simulate(others[:3] + [load_config("demo", target)] + others[3:])
    _assert_same_figures(alone, batch[3])
