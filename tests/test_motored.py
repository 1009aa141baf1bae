"""Motored running: no fuel burns (fuel cut, or burn model none).

References used here:
* Cantera 3.x with GRI-Mech 3.0 (``gri30.yaml``; Smith et al. 1999), whose NASA-7 data the
  tool's species tables use: isentropic compression and expansion of an air and of a
  methane-air charge; a thermo-only Cantera phase built from the tool's own NASA-7 record of
  the gasoline surrogate (McBride, Gordon & Reno 1993, NASA TM-4513 polynomials) plus
  GRI-Mech 3.0's O2, N2 and Ar, for the gasoline charge.
* Heywood, J. B. (1988), Internal Combustion Engine Fundamentals: eq. 2.4-2.5 (slider-crank
  volume; its second derivative at TDC is (pi B^2 / 4) a (1 + a/l) per rad^2), sec. 2.7
  (motoring friction: motoring MEP = FMEP + PMEP - gross IMEP, the dynamometer absorbs it),
  sec. 4.9.1 (rich products: water-gas shift [CO][H2O] = K [CO2][H2]).
* The thermodynamic loss angle of a motored cycle: at the pressure peak dp = 0, so the first
  law gives dQ/dtheta = gamma/(gamma - 1) p dV/dtheta and, with dV/dtheta = V''(0) theta near
  TDC, the peak lies (gamma - 1)/gamma (dQ/dtheta)/(p V''(0)) before TDC (Hohenberg 1979, SAE
  790825, and the TDC-determination literature; the same relation as the analyser's
  ``estimate_tdc_offset`` notes).
"""

from __future__ import annotations
from cli_helpers import error_lines

import json
import math

import cantera as ct
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import cyclesim
from cyclesim.cli import main
from cyclesim.config import apply_override, build_case, load_raw, parse_override
from cyclesim.fuels import get_fuel
from cyclesim.cylinder.geometry import Geometry
from cyclesim.results.motoring import COMBUSTION_ONLY_KEYS, MOTORED_ONLY_KEYS, motored_energy_balance
from cyclesim.output import summary_table
from cyclesim.traces.analysis import AnalysisSettings, VolumeFunction, estimate_tdc_offset

# Dry air by mole as the package defines it (common practice: CO2 and traces folded into N2, Ar)
AIR = {"O2": 0.2095, "N2": 0.7812, "AR": 0.0093}
LOSSLESS = ["heat_transfer.model=none", "blowby.model=none", "operating.residual_fraction=0"]
NO_BURN = {"burn": {"model": "none"}}


def config(name, overrides=(), models=None):
    """A config with whole role sections replaced (``burn: none`` inherits no Wiebe keys)."""
    raw, base = load_raw(name)
    for role, section in (models or {}).items():
        raw[role] = dict(section)
    for text in overrides:
        parts, value = parse_override(text)
        raw = apply_override(raw, parts, value)
    return build_case(raw, base)


def fuel_air(C, H, O=0.0, phi=1.0):
    """Mole numbers of a CxHyOz-air charge: 1 fuel + (x + y/4 - z/2)/phi O2 with its air."""
    n_o2 = (C + H / 4.0 - O / 2.0) / phi
    n_air = n_o2 / AIR["O2"]
    return {"O2": n_o2, "N2": n_air * AIR["N2"], "AR": n_air * AIR["AR"]}


def isentrope_error(res, gas, X):
    """Largest relative difference of the trace's pressure from the Cantera isentrope through its
    first (IVC) state, at every crank angle of the trace."""
    tr = res.trace
    V, p, T = tr["volume_m3"], tr["pressure_bar"] * 1e5, tr["temperature_K"]
    gas.TPX = float(T[0]), float(p[0]), X
    s0, v0 = gas.s, gas.v
    ref = np.empty_like(p)
    for k, v in enumerate(V):
        gas.SV = s0, v0 * v / V[0]
        ref[k] = gas.P
    return float(np.max(np.abs(p / ref - 1.0)))


# ---------------------------------------------------------------------------
# Closed, motored, adiabatic and leak-free: the pressure is the charge's isentrope
# ---------------------------------------------------------------------------
def test_closed_motored_air_charge_follows_cantera_isentrope():
    # fuel cut: the charge is air (a fuel trace of phi 1e-6 keeps the tables defined)
    res = cyclesim.run(config("demo_closed", LOSSLESS + ["operating.fuel_cut=true"]))
    assert res.summary["mode"] == "motored"
    err = isentrope_error(res, ct.Solution("gri30.yaml"), AIR)
    assert err < 1e-4          # brief: 1e-4 relative at every crank angle


def test_closed_motored_methane_air_follows_cantera_isentrope():
    res = cyclesim.run(config("demo_closed", LOSSLESS + ["fuel.name=methane", "operating.lambda=1.0"], NO_BURN))
    assert res.summary["mode"] == "motored"
    X = {"CH4": 1.0, **fuel_air(1.0, 4.0)}
    assert isentrope_error(res, ct.Solution("gri30.yaml"), X) < 1e-4


def test_closed_motored_gasoline_surrogate_follows_isentrope_of_its_nasa7_record():
    # GRI-Mech 3.0 has no gasoline: a thermo-only phase of the surrogate's own NASA-7 record
    # (the polynomial the tool uses) with GRI-Mech 3.0's O2, N2 and Ar
    fuel = get_fuel("gasoline")
    t_low, t_mid, t_high, low, high = fuel.nasa7
    sp = ct.Species("FUEL", {"C": fuel.C, "H": fuel.H})
    sp.thermo = ct.NasaPoly2(t_low, t_high, ct.one_atm, [t_mid, *high, *low])
    gri = {s.name: s for s in ct.Species.list_from_file("gri30.yaml")}
    gas = ct.Solution(thermo="ideal-gas", species=[sp, gri["O2"], gri["N2"], gri["AR"]])
    res = cyclesim.run(config("demo_closed", LOSSLESS + ["operating.lambda=1.0"], NO_BURN))
    assert res.summary["mode"] == "motored"
    X = {"FUEL": 1.0, **fuel_air(fuel.C, fuel.H, fuel.O)}
    assert isentrope_error(res, gas, X) < 1e-4


# ---------------------------------------------------------------------------
# Peak of the motored pressure, the loss angle and the analyser's TDC estimate
# ---------------------------------------------------------------------------
def motored_demo(speed_rpm, heat_transfer="woschni"):
    return cyclesim.run("demo", ["operating.fuel_cut=true", "blowby.model=none", f"heat_transfer.model={heat_transfer}",
                                 "simulation.output_step_deg=0.1", f"operating.speed_rpm={speed_rpm}"])


def analyser_inputs(res):
    inp = res.inputs
    geo = Geometry(bore_m=inp["engine.bore_mm"] * 1e-3, stroke_m=inp["engine.stroke_mm"] * 1e-3,
                   conrod_m=inp["engine.conrod_mm"] * 1e-3, compression_ratio=inp["engine.compression_ratio"])
    s = AnalysisSettings(ivc_deg=inp["valves.ivc_deg"], trapped_mass_kg=res.summary["trapped_mass_mg"] * 1e-6,
                         tdc_wall_temperature_K=0.5 * (inp["walls.head_temperature_K"] + inp["walls.piston_temperature_K"]))
    return VolumeFunction(geo), s


def test_adiabatic_motored_peak_sits_at_tdc():
    res = motored_demo(3000, heat_transfer="none")
    tr = res.trace
    vol, s = analyser_inputs(res)
    est = estimate_tdc_offset(tr["crank_deg"], tr["pressure_bar"] * 1e5, vol, s, 3000.0)
    assert abs(est["theta_pmax_deg"]) < 0.01           # brief: the analyser's peak fit, 0.01 deg
    assert abs(res.summary["loss_angle_deg"]) < 0.01   # the simulator's own peak too


@pytest.fixture(scope="module")
def motored_speeds():
    return {n: motored_demo(n) for n in (1500, 3000, 6000)}


@pytest.mark.parametrize("speed", [1500, 3000, 6000])
def test_loss_angle_equals_first_law_at_the_peak(motored_speeds, speed):
    res = motored_speeds[speed]
    s, tr, inp = res.summary, res.trace, res.inputs
    th_pk, p_pk = s["theta_pmax_deg"], s["p_max_bar"] * 1e5
    assert s["loss_angle_deg"] == pytest.approx(-th_pk, abs=1e-12)          # the convention: 0 - theta_pmax
    q = float(np.interp(th_pk, tr["crank_deg"], tr["wall_heat_rate_J_per_deg"]))   # simulator's heat flow
    T_pk = float(np.interp(th_pk, tr["crank_deg"], tr["temperature_K"]))
    gas = ct.Solution("gri30.yaml")        # the fuel-cut charge is air; its gamma at the peak from Cantera
    gas.TPX = T_pk, p_pk, AIR
    g = gas.cp / gas.cv
    a, l = inp["engine.stroke_mm"] * 1e-3 / 2, inp["engine.conrod_mm"] * 1e-3
    V2 = math.pi / 4 * (inp["engine.bore_mm"] * 1e-3) ** 2 * a * (1 + a / l) * (math.pi / 180) ** 2  # Heywood eq. 2.5
    expected = (g - 1) / g * q / (p_pk * V2)
    assert s["loss_angle_deg"] > 0
    assert s["loss_angle_deg"] == pytest.approx(expected, rel=0.05)          # brief: 5 %


@pytest.mark.parametrize("speed", [1500, 3000, 6000])
def test_analyser_tdc_estimate_on_the_simulated_motored_trace_is_zero(motored_speeds, speed):
    res = motored_speeds[speed]
    vol, s = analyser_inputs(res)
    est = estimate_tdc_offset(res.trace["crank_deg"], res.trace["pressure_bar"] * 1e5, vol, s, float(speed))
    assert est["offset_deg"] == pytest.approx(0.0, abs=0.05)                 # brief: 0 +- 0.05 deg


def test_loss_angle_is_a_few_tenths_and_falls_with_speed(motored_speeds):
    la = [motored_speeds[n].summary["loss_angle_deg"] for n in (1500, 3000, 6000)]
    # a few tenths of a degree up to about 1 deg, falling with speed (from memory)
    assert 0.05 < la[2] < la[1] < la[0] < 1.5


# ---------------------------------------------------------------------------
# The motored figures, the null keys and the energy balance on the compression work
# ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def fuel_cut():
    return cyclesim.run("demo", ["operating.fuel_cut=true"])


@pytest.mark.parametrize("fuel_cut", [True, False])
def test_burn_law_warning_only_where_fuel_burns(fuel_cut):
    """A motored case burns no fuel (Heywood 1988 sec. 2.7): the predictive burn's "only x %
    burned at EVO" is its law's warning and does not apply; a fired case whose spark comes too late
    to finish (30 deg ATDC) keeps it."""
    over = ["burn.model=entrainment", "simulation.mode=closed"]
    over += ["operating.fuel_cut=true"] if fuel_cut else ["burn.spark_advance_deg=-30"]
    res = cyclesim.run("demo", over)
    assert res.summary["mode"] == ("motored" if fuel_cut else "fired")
    assert any("burned at exhaust valve opening" in w for w in res.warnings) is not fuel_cut


def test_motored_mep_identities(fuel_cut):
    s = fuel_cut.summary
    assert s["mode"] == "motored"
    # Heywood 1988 sec. 2.7: what the dynamometer absorbs = friction + pumping - gross indicated work
    assert s["motoring_mep_bar"] == pytest.approx(-s["bmep_bar"], rel=1e-12)
    assert s["motoring_mep_bar"] == pytest.approx(s["fmep_bar"] + s["pmep_bar"] - s["imep_gross_bar"], rel=1e-9)
    assert s["motoring_mep_bar"] > s["fmep_bar"] > 0
    inp = fuel_cut.inputs
    vd = math.pi / 4 * (inp["engine.bore_mm"] * 1e-3) ** 2 * inp["engine.stroke_mm"] * 1e-3
    torque = s["motoring_mep_bar"] * 1e5 * vd * inp["engine.cylinders"] / (4 * math.pi)   # T = bmep Vd n / (4 pi)
    assert s["motoring_torque_Nm"] == pytest.approx(torque, rel=1e-9)
    assert s["motoring_power_kW"] == pytest.approx(2 * math.pi * inp["operating.speed_rpm"] / 60 * torque / 1e3, rel=1e-9)
    assert 1.25 < s["polytropic_exponent_compression"] < 1.40      # motored air, hot walls (common practice)
    assert any("friction from the 'components' friction model on the motored pressure trace" in n
               for n in fuel_cut.notes)


def test_motored_energy_balance_on_compression_work(fuel_cut):
    s, tr = fuel_cut.summary, fuel_cut.trace
    eb = s["energy_balance"]
    assert "fuel_energy_J" not in eb
    th, p, V = tr["crank_deg"], tr["pressure_bar"] * 1e5, tr["volume_m3"]
    m = (th >= fuel_cut.inputs["valves.ivc_deg"]) & (th <= 0.0)
    w_c = -np.trapezoid(p[m], V[m])                 # -integral of p dV from IVC to TDC
    assert eb["compression_work_J"] == pytest.approx(w_c, rel=2e-3)
    assert abs(eb["closure_fraction"]) < cyclesim.api.REFINE_CLOSURE     # the fired cycle's limit
    assert not any("re-run" in w for w in fuel_cut.warnings)
    assert any("energy balance formed on the compression work" in n for n in fuel_cut.notes)


def test_combustion_keys_null_in_json_and_absent_from_table(fuel_cut, tmp_path):
    doc = fuel_cut.summary_json()
    assert "before TDC" in doc["conventions"]["loss_angle_deg"]
    assert "true angle = labelled - offset" in doc["conventions"]["tdc_offset_deg"]
    summ = json.loads(json.dumps(doc))["summary"]
    for k in COMBUSTION_ONLY_KEYS:
        if k != "eta_closed_cycle":             # a closed-cycle key
            assert k in summ and summ[k] is None, k
    for k in MOTORED_ONLY_KEYS:
        assert summ[k] is not None, k
    text = summary_table(fuel_cut).replace(cyclesim.output.CAUTION, "")
    for word in ("spark", "CA50", "indicated efficiency", "brake efficiency", "mechanical efficiency", "BSFC",
                 "combustion efficiency", "% of fuel energy"):
        assert word not in text, word
    assert "MOTORED" in text and "loss angle" in text and "% of compression work" in text


def test_fired_and_motored_cases_have_the_same_keys(fuel_cut):
    fired = cyclesim.run("demo")
    assert fired.summary["mode"] == "fired"
    assert math.isnan(fired.summary["loss_angle_deg"]) and math.isnan(fired.summary["motoring_mep_bar"])
    flat = lambda s: {f"{k}.{kk}" if isinstance(v, dict) else k for k, v in s.items()  # noqa: E731
                      for kk in (v if isinstance(v, dict) else [None])}
    # the energy balance's terms differ with its basis; every other figure is a column of both
    assert set(fired.summary) == set(fuel_cut.summary)
    assert {k for k in flat(fired.summary) if not k.startswith("energy_balance")} == \
        {k for k in flat(fuel_cut.summary) if not k.startswith("energy_balance")}


@pytest.mark.parametrize("args", [
    ["run", "demo", "--set", "operating.fuel_cut=true", "--set", "operating.speed_rpm=2000"],
    ["run", "demo_closed", "--set", "heat_transfer.model=none", "--set", "blowby.model=none",
     "--set", "burn.model=none"],
    ["run", "demo_closed", "--set", "operating.fuel_cut=true"],
])
def test_motored_runs_from_the_command_line(args, capsys):
    assert main(args) == 0
    out = capsys.readouterr().out.replace(cyclesim.output.CAUTION, "")
    assert "MOTORED" in out
    assert "1000000000" not in out and "spark" not in out and "fuel energy" not in out


# ---------------------------------------------------------------------------
# Unreleased chemical energy: CO, H2 and unburned fuel
# ---------------------------------------------------------------------------
def wgs_co_h2(C, H, O, phi, K):
    """CO and H2 per fuel molecule of rich complete-combustion products with the water-gas shift
    [CO][H2O] = K [CO2][H2] (Heywood 1988 sec. 4.9.1): C and H conserved, the O2 all used."""
    o_atoms = 2 * (C + H / 4 - O / 2) / phi + O
    # CO2 = a, CO = C - a, H2O = o_atoms - 2a - (C - a) = o_atoms - C - a, H2 = H/2 - H2O
    f = lambda a: (C - a) * (o_atoms - C - a) - K * a * (H / 2 - (o_atoms - C - a))  # noqa: E731
    from scipy.optimize import brentq

    a = brentq(f, max(0.0, o_atoms - C - H / 2) + 1e-12, min(C, o_atoms - C) - 1e-12)
    return C - a, H / 2 - (o_atoms - C - a)


def test_unreleased_energy_split_at_lambda_0p9():
    res = cyclesim.run("demo", ["operating.lambda=0.9"])
    s = res.summary
    un = s["unreleased_energy"]
    eb = s["energy_balance"]
    assert un["CO_J"] + un["H2_J"] + un["unburned_fuel_J"] == pytest.approx(eb["unreleased_chemical_energy_J"], rel=1e-9)
    assert un["CO_J"] + un["H2_J"] > 2 * un["unburned_fuel_J"] > 0     # mostly CO and H2 of the rich mixture
    # the CO : H2 split of the stated basis: frozen water-gas shift, K = 3.5 (Heywood 1988 sec. 4.9.1,
    # from memory), heating values of CO and H2 from GRI-Mech 3.0 at 298.15 K (Cantera)
    fuel = get_fuel("gasoline")
    n_co, n_h2 = wgs_co_h2(fuel.C, fuel.H, fuel.O, 1 / 0.9, 3.5)
    gas = ct.Solution("gri30.yaml")
    h = {}
    for sp in ("CO", "H2", "O2", "CO2", "H2O"):
        gas.TPX = 298.15, ct.one_atm, {sp: 1.0}
        h[sp] = gas.enthalpy_mole / 1e3                  # J/mol
    lhv_co = h["CO"] + 0.5 * h["O2"] - h["CO2"]
    lhv_h2 = h["H2"] + 0.5 * h["O2"] - h["H2O"]
    assert un["CO_J"] / un["H2_J"] == pytest.approx(n_co * lhv_co / (n_h2 * lhv_h2), rel=1e-6)
    text = summary_table(res)
    assert "unreleased chemical energy" in text and "of which CO" in text and "of which H2" in text
    assert "unburned fuel (exhaust and blowby)" not in text


def test_no_co_or_h2_at_stoichiometric():
    un = cyclesim.run("demo").summary["unreleased_energy"]
    assert un["CO_J"] == 0.0 and un["H2_J"] == 0.0 and un["unburned_fuel_J"] > 0


@settings(max_examples=50, deadline=None)
@given(st.lists(st.floats(-1e3, 1e3), min_size=9, max_size=9), st.floats(1.0, 500.0))
def test_motored_layout_keeps_the_closure(vals, basis):
    # rewriting the balance on the compression work nets the chemical terms and keeps the closure
    keys = ("brake_work_J", "friction_work_J", "wall_heat_J", "exhaust_minus_intake_enthalpy_J",
            "blowby_enthalpy_J", "unreleased_chemical_energy_J", "stored_energy_change_J")
    eb = {"fuel_energy_J": np.array([vals[0]]), **{k: np.array([v]) for k, v in zip(keys, vals[1:8])}}
    eb["closure_J"] = eb["fuel_energy_J"] - sum(eb[k] for k in keys)
    eb["closure_fraction"] = np.array([np.nan])
    chem = np.array([vals[8]])
    out = motored_energy_balance(eb, np.array([basis]), chem)
    terms = [k for k in out if k not in ("compression_work_J", "chemical_energy_released_J", "closure_J",
                                         "closure_fraction")]
    resid = out["chemical_energy_released_J"] - sum(out[k] for k in terms)
    assert resid[0] == pytest.approx(eb["closure_J"][0], abs=1e-9 * (1 + np.abs(vals).sum()))
    assert out["closure_fraction"][0] == pytest.approx(eb["closure_J"][0] / basis)


# ---------------------------------------------------------------------------
# The dyno and the friction test on a motored engine
# ---------------------------------------------------------------------------
def test_dyno_drives_a_motored_engine_and_reads_the_power_absorbed(fuel_cut):
    from cyclesim.studies.dyno import dyno_test

    d = dyno_test("demo", arm_length_m=0.5, overrides=["operating.fuel_cut=true"])
    r = d.reading
    assert d.motored and d.figures()["operation"] == "motored"
    assert r["force_N"] < 0                                         # the dyno drives the engine
    assert r["motoring_torque_Nm"] == pytest.approx(fuel_cut.summary["motoring_torque_Nm"], rel=1e-9)
    assert r["motoring_power_kW"] == pytest.approx(fuel_cut.summary["motoring_power_kW"], rel=1e-6)
    assert d.correction["applied"] is False and r["bsfc_g_per_kWh"] is None
    text = d.text()
    assert "MOTORED" in text and "motoring power absorbed" in text and "corrected power" not in text


def test_dyno_refuses_torque_control_of_a_motored_engine():
    from cyclesim.errors import ConfigError
    from cyclesim.studies.dyno import dyno_test

    with pytest.raises(ConfigError, match="speed-controlled"):
        dyno_test("demo", mode="torque", overrides=["operating.fuel_cut=true"], speed_grid_rpm=[2800, 3200])


def test_cut_test_of_a_motored_engine_is_the_motoring_test():
    from cyclesim.studies.cylinder_cut import cylinder_cut_test

    ct_ = cylinder_cut_test("demo", overrides=["burn.model=none"], effects=("pumping",))
    assert ct_.settings["operation"] == "motored" and [s["step"] for s in ct_.steps] == ["motoring"]
    s = ct_.steps[0]
    # absorbed power = friction + pumping - gross indicated power (Heywood 1988 sec. 2.7)
    assert s["friction_est_kW"] == pytest.approx(s["friction_true_kW"] + s["pumping_kW"] - s["indicated_gross_kW"],
                                                 rel=1e-9)
    assert s["friction_bias_kW"] > 0 and "motoring friction test" in ct_.text()


def test_loss_breakdown_splits_the_unreleased_energy_and_refuses_a_motored_case():
    from cyclesim.errors import ConfigError
    from cyclesim.studies.losses import loss_breakdown

    full = cyclesim.run("demo", ["operating.lambda=0.9"])
    lb = loss_breakdown("demo", overrides=["operating.lambda=0.9"], full_result=full, closed_step_deg=0.5)
    u = lb.figures()["unreleased_chemical_energy_points"]
    fuel = full.summary["energy_balance"]["fuel_energy_J"]
    assert u["CO"] == pytest.approx(100 * full.summary["unreleased_energy"]["CO_J"] / fuel, rel=1e-12)
    assert u["CO"] + u["H2"] + u["unburned_fuel"] == pytest.approx(u["total"], rel=1e-9)
    assert "CO" in lb.text() and "unburned fuel" in lb.text()
    with pytest.raises(ConfigError, match="motored"):
        loss_breakdown("demo", overrides=["operating.fuel_cut=true"])


def test_sweep_and_report_of_motored_cases(fuel_cut):
    from cyclesim.report import report_for_run
    from cyclesim.studies.sweep import sweep

    sw = sweep("demo", {"operating.speed_rpm": [2000, 4000]}, overrides=["operating.fuel_cut=true"])
    assert [r["mode"] for r in sw.rows] == ["motored", "motored"]
    assert all(r["eta_brake"] is None and r["loss_angle_deg"] > 0 and r["motoring_mep_bar"] > 0 for r in sw.rows)
    assert "energy_balance.compression_work_J" in sw.rows[0]
    secs = report_for_run(fuel_cut, plots=False)
    eb = next(s for s in secs if s["heading"] == "Energy balance")
    # units in the header, the basis in words (the report table convention)
    assert eb["table"]["columns"][2] == "share of the compression work, IVC to TDC [%]"
    assert any(s["heading"] == "Notes" for s in secs)


def test_spark_study_of_a_motored_engine_is_refused_in_one_line(tmp_path, capsys):
    assert main(["spark", "demo", "--set", "operating.fuel_cut=true", "--advance", "10:30:10",
                 "--out", str(tmp_path / "s")]) == 2
    err = error_lines(capsys.readouterr().err)
    assert len(err) == 1 and "motored" in err[0]


@pytest.mark.parametrize("mode", ["closed", "full"])
def test_motored_balance_releases_no_chemical_energy_with_fuel_in_the_leaking_charge(mode):
    # burn none with a stoichiometric charge: fuel leaks past the rings (and, full cycle, leaves
    # through the exhaust) unburned, so the balance's released chemical energy is zero
    res = cyclesim.run(config("demo_closed" if mode == "closed" else "demo", [], NO_BURN))
    eb = res.summary["energy_balance"]
    assert res.summary["blowby_mass_mg"] > 0
    assert abs(eb["chemical_energy_released_J"]) < 1e-6 * eb["compression_work_J"]
    assert abs(eb["closure_fraction"]) < cyclesim.api.REFINE_CLOSURE
