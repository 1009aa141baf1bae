"""Reference analyser: IMEP, pegging, heat release, burn points and TDC offset on simulated traces.

The simulator's demo engine is the 'true' engine: its trace at 0.1 deg (fired, and motored with
``burn: {model: none}``) is measured through the artefact chain and analysed again.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

import cyclesim
from cyclesim.cli.traces import add_parsers, cmd_analyse
from cyclesim.traces.analysis_settings import analysis_inputs
from cyclesim.config import load_config
from cyclesim.errors import CyclesimError
from cyclesim.cylinder.geometry import Geometry
from cyclesim.traces.analysis import AnalysisSettings, analyse, apparent_heat_release, with_measured_masses
from cyclesim.traces.analysis_files import write_analysis
from cyclesim.traces.artefacts import ArtefactSettings, apply_artefacts
from cyclesim.traces.export import TraceSet, write_npz

FINE = ["simulation.output_step_deg=0.1"]


@pytest.fixture(scope="module")
def fired():
    return cyclesim.run("demo", FINE)


@pytest.fixture(scope="module")
def motored(tmp_path_factory):
    p = tmp_path_factory.mktemp("cfg") / "motored.yaml"
    p.write_text("extends: demo\nname: demo-motored\nburn: {model: none}\n")
    return cyclesim.run(str(p), FINE)


@pytest.fixture(scope="module")
def engine():
    # the analyst's estimate of the burned-gas share at IVC for this wide-open-throttle point: 5 %
    # (the low end of the 5-10 % Heywood 1988 sec. 6.4 gives for full load, from memory; the
    # simulator's own figure is 4.9 %), given as the config's operating.residual_fraction
    return analysis_inputs(load_config("demo", ["operating.residual_fraction=0.05"]))


def _set(res, n=1, intake_bar=None):
    th = res.trace["crank_deg"]
    P = np.tile(res.trace["pressure_bar"] * 1e5, (n, 1))
    pi = None if intake_bar is None else np.full(P.shape, intake_bar * 1e5)
    return TraceSet(th, P, pi, res.inputs["operating.speed_rpm"])


# ---------------------------------------------------------------------- noise-free trace
def test_net_and_gross_imep_match_the_simulator(fired, engine):
    g, s, _ = engine
    r = analyse(_set(fired, intake_bar=0.98), g, s)
    # same definition (Heywood 1988 §2.4: imep = work per cycle / displacement); 0.1 % is the brief's limit
    assert r.per_cycle["imep_net_bar"][0] == pytest.approx(fired.summary["imep_net_bar"], rel=1e-3)
    assert r.per_cycle["imep_gross_bar"][0] == pytest.approx(fired.summary["imep_gross_bar"], rel=1e-3)
    # peak pressure and its angle: the simulator's figures (parabolic refinement of a 0.1 deg grid)
    assert r.per_cycle["p_max_bar"][0] == pytest.approx(fired.summary["p_max_bar"], rel=1e-4)
    assert r.per_cycle["theta_pmax_deg"][0] == pytest.approx(fired.summary["theta_pmax_deg"], abs=0.05)


def test_volume_array_gives_the_same_figures_as_the_geometry(fired, engine):
    g, s, _ = engine
    a = analyse(_set(fired, intake_bar=0.98), g, s)
    b = analyse(_set(fired, intake_bar=0.98), fired.trace["volume_m3"], s)
    for k in ("imep_net_bar", "imep_gross_bar", "p_max_bar"):
        assert b.per_cycle[k][0] == pytest.approx(a.per_cycle[k][0], rel=1e-6, abs=1e-6)   # invariance
    # the wall heat of a sampled volume assumes 2.1 bore areas for head and piston (the Geometry
    # has 2.2): the burn points move by a little (0.02 deg: a tenth of the brief's CA50 limit)
    assert b.per_cycle["ca50_deg"][0] == pytest.approx(a.per_cycle["ca50_deg"][0], abs=0.02)


def test_burn_points_from_gross_heat_release_near_mass_burned(fired, engine):
    # Burn points come from the gross release: the apparent release with fresh-charge / burned-gas
    # properties mixed by the burned fraction (Klein & Eriksson 2004, SAE 2004-01-1464: a one-gas
    # gamma(T) misplaces the release during burning, from memory) plus Woschni's wall heat (Woschni
    # 1967, SAE 670931) scaled so that the release is level after burning (common practice).
    # The gross release is the chemical release, so its burn points are those of the mass burned;
    # limits: the brief's 0.2 deg for CA50, the same for CA10, 0.5 deg for CA90 (the tail is
    # where the wall-heat estimate matters most; common practice).
    g, s, _ = engine
    r = analyse(_set(fired, intake_bar=0.98), g, s)
    assert r.per_cycle["ca50_deg"][0] == pytest.approx(fired.summary["ca50_deg"], abs=0.2)
    assert r.per_cycle["ca10_deg"][0] == pytest.approx(fired.summary["ca10_deg"], abs=0.2)
    assert r.per_cycle["ca90_deg"][0] == pytest.approx(fired.summary["ca90_deg"], abs=0.5)


def test_one_gas_gamma_and_no_wall_heat_cancel_by_chance(fired, engine):
    # The measured cause of the old CA50 result: the apparent release of a one-gas linear gamma(T)
    # puts CA50 late by the gamma error and the wall heat puts it early; with proper gas
    # properties the apparent release alone is early by about the wall heat's share (0.5-0.75 deg
    # on the demo, measured), and the wall-heat correction brings it back (see the test above)
    g, s, _ = engine
    ts = _set(fired, intake_bar=0.98)
    net_only = analyse(ts, g, s.replace(wall_heat="none")).per_cycle["ca50_deg"][0]
    assert net_only < fired.summary["ca50_deg"] - 0.3


def test_apparent_heat_release_matches_chemical_minus_wall_heat_and_blowby(fired, engine):
    g, s, _ = engine
    tr = fired.trace
    # the temperature at IVC, which sets T and so gamma(T), as a test cell takes it from a
    # gas-exchange calculation: here the simulator's (the config's 340 K estimate is 17 K low and
    # moves the late apparent release by about 1.5 % of the fuel energy)
    s = s.replace(T_ivc_K=float(np.interp(s.ivc_deg, tr["crank_deg"], tr["temperature_K"])))
    r = analyse(_set(fired, intake_bar=0.98), g, s.replace(gas_model="linear"))
    th, Q = r.theta_deg, r.heat_release_J[0]
    fuel = fired.summary["fuel_energy_J"]
    # reference from the simulator's balance: chemical release - wall heat - enthalpy leaving with
    # blowby; the blowby enthalpy is taken as cp T dm with the analyser's gas (cp = gamma R/(gamma-1),
    # R = 287 J/(kg K)) so that it is the loss the apparent heat release sees (first law of an open
    # single zone, Heywood 1988 eq. 10.29, from memory)
    T = tr["temperature_K"]
    gam = np.clip(s.gamma0 + s.gamma1_per_K * T, 1.05, 1.45)
    dm = tr["blowby_rate_g_per_s"] / 1000.0 / (6.0 * fired.inputs["operating.speed_rpm"])   # kg/deg
    hb = gam / (gam - 1) * 287.0 * T * dm
    Hbb = np.concatenate([[0.0], np.cumsum(0.5 * (hb[1:] + hb[:-1]) * np.diff(tr["crank_deg"]))])
    ref = tr["cumulative_heat_release_J"] - tr["cumulative_wall_heat_J"] - Hbb
    ref = ref - np.interp(s.ivc_deg, tr["crank_deg"], ref)
    # after combustion (CA90 + 30 deg to EVO): within 1 % of the fuel energy (the brief's limit)
    late = (th >= fired.summary["ca90_deg"] + 30) & (th <= s.evo_deg)
    assert np.max(np.abs(Q[late] - ref[late])) < 0.01 * fuel
    # during combustion a one-gas gamma(T) cannot follow the change of composition (unburned to
    # burned gas at the same T differ in gamma by ~0.03; Heywood 1988 fig. 4-9, from memory): the
    # apparent release runs up to ~3 % of the fuel energy below the reference around CA50
    w = (th >= s.ivc_deg) & (th <= s.evo_deg)
    assert np.max(np.abs(Q[w] - ref[w])) < 0.04 * fuel


def test_polytropic_exponent_and_pegging_on_an_exact_polytrope():
    # p V^n = const is exact for the two-point method and the log-log fit (definition)
    g = Geometry(0.08, 0.09, 0.14, 10.0)
    th = np.arange(-360.0, 360.0 + 1e-9, 0.2)
    V = g.volume(th)[0]
    p = 1.0e5 * (V.max() / V) ** 1.32 - 0.8e5                     # offset -0.8 bar
    ts = TraceSet(th, p[None], None, 2000.0)
    s = AnalysisSettings(peg="polytropic", poly_exponent=1.32, poly_average_deg=0.0)
    r = analyse(ts, g, s)
    assert r.per_cycle["peg_offset_bar"][0] == pytest.approx(-0.8, abs=1e-9)
    assert r.per_cycle["n_compression"][0] == pytest.approx(1.32, abs=1e-9)
    assert r.per_cycle["n_expansion"][0] == pytest.approx(1.32, abs=1e-9)
    # isentropic: the apparent heat release with gamma = n is zero throughout (first law); the
    # residue is the trapezoidal rule's O(h^2) error of the integral of p dV at 0.2 deg steps
    Q, _ = apparent_heat_release(th, p + 0.8e5, V, s.replace(gamma0=1.32, gamma1_per_K=0.0))
    assert np.nanmax(np.abs(Q)) < 1e-4 * np.max((p + 0.8e5) * V)


# ---------------------------------------------------------------------- through the artefact chain
@pytest.fixture(scope="module")
def measured(fired, motored):
    """8 fired + 3 motored cycles: offset -0.8 +- 0.1 bar, 0.02 bar noise, 0.3 deg TDC error, gain 0."""
    th = fired.trace["crank_deg"]
    P = np.vstack([np.tile(fired.trace["pressure_bar"] * 1e5, (8, 1)),
                   np.tile(motored.trace["pressure_bar"] * 1e5, (3, 1))])
    s = ArtefactSettings.none().replace(offset_mean_bar=-0.8, offset_sd_bar=0.1, noise_bar=0.02,
                                        tdc_offset_deg=0.3, intake_noise_bar=0.003)
    Pm, Pi, truth = apply_artefacts(P, th, 3000.0, s, np.random.default_rng(42), intake_pressure_pa=0.98e5)
    return TraceSet(th, Pm, Pi, 3000.0), truth


def test_artefacts_recovered_by_intake_pegging_and_tdc_correction(measured, fired, engine):
    ts, truth = measured
    g, s, _ = engine
    r = analyse(ts, g, s.replace(peg="intake", tdc_correct=True))
    assert r.per_cycle["motored"].tolist() == [False] * 8 + [True] * 3
    # pegging: the offset within 0.05 bar of the recorded truth for every cycle (the brief's limit)
    err_off = r.per_cycle["peg_offset_bar"] - truth["offset_bar"]
    assert np.max(np.abs(err_off)) < 0.05
    # TDC phasing error within 0.1 deg (the brief's limit)
    assert r.tdc["estimated"] and r.tdc["offset_deg"] == pytest.approx(truth["tdc_offset_deg"], abs=0.1)
    # net IMEP within 0.5 % of the simulator's (gain 0: a gain error scales IMEP and cannot be
    # recovered from the pressure trace alone)
    fired_imep = r.per_cycle["imep_net_bar"][:8]
    assert np.max(np.abs(fired_imep / fired.summary["imep_net_bar"] - 1)) < 0.005
    assert r.stats["imep_net_bar_mean"] == pytest.approx(fired.summary["imep_net_bar"], rel=0.005)


def test_uncorrected_tdc_error_biases_imep(measured, fired, engine):
    # a 0.3 deg phasing error moves net IMEP by more than the corrected result's error (common practice:
    # about 1 % per 0.3 deg at full load), which is why the correction is needed
    ts, _ = measured
    g, s, _ = engine
    r0 = analyse(ts, g, s)
    r1 = analyse(ts, g, s.replace(tdc_correct=True))
    e0 = abs(r0.stats["imep_net_bar_mean"] / fired.summary["imep_net_bar"] - 1)
    e1 = abs(r1.stats["imep_net_bar_mean"] / fired.summary["imep_net_bar"] - 1)
    assert e0 > 0.005 and e1 < e0 / 3


def test_gain_error_scales_imep(fired, engine):
    # gain is not recoverable by pegging: IMEP scales with (1 + gain) (p dV is linear in p)
    g, s, _ = engine
    th = fired.trace["crank_deg"]
    P = fired.trace["pressure_bar"][None] * 1e5
    Pm, Pi, _ = apply_artefacts(P, th, 3000.0, ArtefactSettings.none().replace(gain_error=0.01),
                                np.random.default_rng(0), intake_pressure_pa=0.98e5)
    r = analyse(TraceSet(th, Pm, Pi, 3000.0), g, s.replace(peg="none"))
    assert r.per_cycle["imep_net_bar"][0] == pytest.approx(1.01 * fired.summary["imep_net_bar"], rel=1e-4)


def test_tdc_correction_without_motored_cycles_is_an_error(fired, engine):
    g, s, _ = engine
    with pytest.raises(CyclesimError, match="motored cycles"):
        analyse(_set(fired, 2, intake_bar=0.98), g, s.replace(tdc_correct=True))
    with pytest.raises(CyclesimError, match="intake pegging needs"):
        analyse(_set(fired, 1), g, s)


def test_command_line_analyse_writes_files(measured, tmp_path, capsys):
    import argparse

    ts, truth = measured
    f = write_npz(tmp_path / "set.npz", ts)
    ap = argparse.ArgumentParser()
    add_parsers(ap.add_subparsers(dest="command"))
    out = tmp_path / "out"
    args = ap.parse_args(["analyse", str(f), "--engine", "demo", "--out", str(out), "--tdc-correct"])
    assert cmd_analyse(args) == 0
    text = capsys.readouterr().out
    assert "net IMEP" in text and "TDC offset" in text
    doc = json.loads((out / "analysis_summary.json").read_text())
    assert doc["tdc"]["offset_deg"] == pytest.approx(truth["tdc_offset_deg"], abs=0.1)
    assert math.isfinite(doc["statistics"]["imep_net_bar_mean"])
    lines = (out / "analysis_cycles.csv").read_text().splitlines()
    assert lines[0].startswith("cycle,imep_net_bar") and len(lines) == 1 + ts.n_cycles
    assert (out / "analysis_mean_cycle.csv").is_file()
    # a second run into the same folder needs --force (one clear error)
    with pytest.raises(CyclesimError, match="--force"):
        cmd_analyse(args)


def test_write_analysis_round_trip(measured, engine, tmp_path):
    ts, _ = measured
    g, s, _ = engine
    r = analyse(ts, g, s)
    files = write_analysis(r, tmp_path)
    doc = json.loads(files[1].read_text())
    assert doc["statistics"]["imep_net_bar_mean"] == pytest.approx(r.stats["imep_net_bar_mean"])


def test_sensitivity_of_net_imep_to_a_tdc_phasing_error(fired):
    """A TDC phasing error of 1 deg moves net IMEP by a few % at full load (common practice).

    The written trace is integrated independently here (trapezoid of p dV) with its crank
    angles shifted by +-1 deg against the volume; the model shows the size and the sign.
    """
    from cyclesim.cylinder.geometry import Geometry

    case = load_config("demo")
    e = case.engine
    g = Geometry(bore_m=e.bore_mm / 1e3, stroke_m=e.stroke_mm / 1e3, conrod_m=e.conrod_mm / 1e3,
                 compression_ratio=e.compression_ratio)
    th = fired.trace["crank_deg"]
    p = fired.trace["pressure_bar"] * 1e5
    Vd = float(g.Vd[0])

    def imep(shift):
        V = g.volume(th + shift)[0]
        return float(np.sum(0.5 * (p[1:] + p[:-1]) * np.diff(V))) / Vd

    base = imep(0.0)
    assert base == pytest.approx(fired.summary["imep_net_bar"] * 1e5, rel=1e-3)
    up = imep(+1.0) / base - 1.0      # pressure taken as 1 deg later than it is
    down = imep(-1.0) / base - 1.0
    # measured on the demo at 3000 rpm, full load: about 3-4 % per degree, nearly antisymmetric
    assert 0.015 < abs(up) < 0.08 and 0.015 < abs(down) < 0.08
    assert np.sign(up) == -np.sign(down)
    print(f"net IMEP sensitivity to TDC phasing: {100 * up:+.2f} % / {100 * down:+.2f} % per +-1 deg")


# ---------------------------------------------------------------------- default artefact chain
@pytest.fixture(scope="module")
def default_set():
    """12 synthetic cycles at 0.1 deg with the default artefacts; 2 misfires serve as motored cycles."""
    from cyclesim.traces.synthesis import CycleVariation, synthesize

    ss = synthesize(load_config("demo"), 12, CycleVariation(misfire_rate=0.25, seed=3), resolution_deg=0.1,
                    artefacts=ArtefactSettings.default())
    return ss


def _analysed(ss, engine):
    g, s, _ = engine
    ts = TraceSet(ss.theta, ss.pressure_pa, ss.intake_pa, ss.meta["speed_rpm"], ss.meta)
    # as `cyclesim analyse` does: the trapped mass from the set's measured air and fuel per cycle
    return analyse(ts, g, with_measured_masses(s, ts.meta).replace(tdc_correct=True))


@pytest.fixture(scope="module")
def default_result(default_set, engine):
    """The analysis of ``default_set`` (the estimate of the drift's time constant makes it ~10 s)."""
    return _analysed(default_set, engine)


def _recovery_errors(ss, engine, r=None):
    r = _analysed(ss, engine) if r is None else r
    assert r.stats["trapped_mass_source"] == "measured air and fuel"
    fired = ~np.array([t["misfire"] for t in ss.truth])
    # the pegging truth: the signal's total offset at intake BDC (the offset, the charge amplifier's
    # high-pass error and the thermal error there), which is what pegging near BDC finds
    truth = {k: np.array([t[k] for t in ss.truth])
             for k in ("imep_net_bar", "ca50_deg", "artefact.true_signal_offset_at_bdc_bar")}
    err = {
        "imep_net_pct": np.max(np.abs(r.per_cycle["imep_net_bar"][fired] / truth["imep_net_bar"][fired] - 1)) * 100,
        "ca50_deg": np.max(np.abs(r.per_cycle["ca50_deg"][fired] - truth["ca50_deg"][fired])),
        "peg_bar": np.max(np.abs(r.per_cycle["peg_offset_bar"] - truth["artefact.true_signal_offset_at_bdc_bar"])),
        "tdc_deg": abs(r.tdc["offset_deg"] - ss.stats["artefact.tdc_offset_deg"]),
    }
    print("recovery errors (max over fired cycles): " + ", ".join(f"{k} {v:.3f}" for k, v in err.items()))
    return err, r, fired


@pytest.mark.slow
def test_default_artefacts_recovery_of_imep_pegging_and_tdc(default_set, engine, default_result):
    # the brief's limits: net IMEP 0.5 %, pegging offset 0.05 bar, TDC error 0.1 deg
    err, r, fired = _recovery_errors(default_set, engine, default_result)
    assert r.per_cycle["motored"].tolist() == (~fired).tolist()
    assert err["imep_net_pct"] < 0.5
    assert err["peg_bar"] < 0.05
    assert err["tdc_deg"] < 0.1


@pytest.mark.slow
def test_default_artefacts_recovery_of_ca50(default_set, engine, default_result):
    # the brief's limit: CA50 within 0.2 deg of the mass-burned truth on every fired cycle
    # Measured (12 cycles, 0.1 deg, trapped mass from the measured air and fuel): 0.080 deg worst with
    # the thermal-drift fit and its lag time constant estimated from an 8-cycle subsample (0.145 deg
    # worst, mean +0.12 deg, 1.4 ms found, when every fired cycle was summed); 0.12 / +0.09 deg with 2 ms assumed, 0.21 deg worst with 4 ms assumed, 0.28 / +0.22 deg
    # without the fit.  About +0.06 deg of the mean comes with the residual error of the loss-angle TDC
    # estimate (-0.05 deg).
    err, _, _ = _recovery_errors(default_set, engine, default_result)
    assert err["ca50_deg"] < 0.2


@pytest.fixture(scope="module")
def temperature_drift_set():
    """As ``default_set`` but with the generator's temperature form of the thermal drift.

    The generator's default drift follows the wall heat flow; the analyser assumes the
    temperature-lag form ``-c [L(T) - T_ivc]``, so only a set made with that form has a true c
    to compare with.
    """
    from cyclesim.traces.synthesis import CycleVariation, synthesize

    return synthesize(load_config("demo"), 12, CycleVariation(misfire_rate=0.25, seed=3), resolution_deg=0.1,
                      artefacts=ArtefactSettings.default().replace(thermal_drift_bar_per_kW=0.0))


@pytest.mark.slow
def test_thermal_drift_sensitivity_is_estimated_from_the_traces(temperature_drift_set, engine):
    # The sensor's short-term thermal error is a pressure error following the gas temperature through
    # a first-order lag (thermal shock of the diaphragm, common practice); the analyser estimates its
    # sensitivity from the level of the gross release after burning.  Against the artefact truth of a
    # set made with that form (the generator's default follows the wall heat flow instead, for which
    # c has no true value): within 30 % (one sensitivity for the set: the median of 10 cycles whose
    # own estimates scatter by about +-3e-5 bar/K, measured).  The lag time constant is given (the
    # generator's 2 ms): estimated on this set it comes out at 3.9 ms and c at 3.2e-5 bar/K (-36 %),
    # measured since the noise reaches the output at its full 0.02 bar (0.01 bar before: 2.3 ms,
    # 5.4e-5 bar/K); the estimate of the lag is tested on its own below.
    g, s, _ = engine
    ss = temperature_drift_set
    assert ss.stats["artefact.thermal_drift_proxy"] == "gas temperature"
    ts = TraceSet(ss.theta, ss.pressure_pa, ss.intake_pa, ss.meta["speed_rpm"], ss.meta)
    s = with_measured_masses(s, ts.meta).replace(tdc_correct=True,
                                                 thermal_time_constant_s=ArtefactSettings().thermal_time_constant_s)
    r = analyse(ts, g, s)
    fired = ~np.array([t["misfire"] for t in ss.truth])
    c = r.per_cycle["thermal_drift_bar_per_K"][fired]
    # the same sign convention and name as the generator's truth (positive: reads low when hot)
    true_c = ArtefactSettings.default().thermal_drift_bar_per_K
    assert np.all(c == c[0]) and np.all(np.isnan(r.per_cycle["thermal_drift_bar_per_K"][~fired]))
    assert c[0] == pytest.approx(true_c, rel=0.3)
    # without the fit the drift moves CA50 late (the measured cause of the former 0.28 deg)
    r0 = analyse(ts, g, s.replace(thermal_drift="none"))
    truth = np.array([t["ca50_deg"] for t in ss.truth])[fired]
    e0 = np.mean(r0.per_cycle["ca50_deg"][fired] - truth)
    e1 = np.mean(r.per_cycle["ca50_deg"][fired] - truth)
    print(f"CA50 mean error: thermal-drift fit {e1:+.3f} deg, none {e0:+.3f} deg; c = {c[0]:.3g} bar/K")
    assert e0 > e1 + 0.05


@pytest.mark.slow
def test_thermal_drift_time_constant_is_estimated_from_the_traces(engine):
    # The lag time constant of the drift is not assumed: the summed misfit of the level condition after
    # burning (gross release flat once burning has stopped, common practice), with the drift's
    # sensitivity, the wall-heat scale and the level fitted per cycle, is least at the time constant of
    # the sensor.  A set whose sensor has 4 ms (twice the generator's default): the estimate within
    # 25 % (measured on 12-cycle sets with every fired cycle summed, true -> found: 1 -> 1.25,
    # 2 -> 1.40, 4 -> 3.79, 5 -> 4.41, 8 -> 6.16 ms; 0.5 ms is not resolved, 2.0 found; with the
    # 8-cycle subsample 4 -> 4.35 ms), and CA50 within the brief's 0.2 deg (measured 0.083 deg worst;
    # 2 ms assumed on such a set puts CA50 later, the error this removes)
    from cyclesim.traces.synthesis import CycleVariation, synthesize

    tau_true = 0.004
    ss = synthesize(load_config("demo"), 12, CycleVariation(misfire_rate=0.25, seed=3), resolution_deg=0.1,
                    artefacts=ArtefactSettings.default().replace(thermal_time_constant_s=tau_true))
    r = _analysed(ss, engine)
    assert r.stats["thermal_time_constant_source"] == "estimated" and not r.warnings
    # the estimate sums the misfit of a fixed subsample (8 of the 10 fired cycles, evenly spread), so
    # its cost does not grow with the set
    used = r.stats["thermal_time_constant_cycles"]
    fired_numbers = [k + 1 for k, t in enumerate(ss.truth) if not t["misfire"]]
    assert len(used) == 8 and set(used) <= set(fired_numbers)
    assert r.stats["thermal_time_constant_s"] == pytest.approx(tau_true, rel=0.25)
    rel = np.asarray(r.stats["thermal_time_constant_rss_rel"])
    assert rel.min() == 1.0 and rel.max() > 1.05            # a minimum that the curve defines
    err, _, _ = _recovery_errors(ss, engine, r)
    print(f"thermal lag time constant: {1e3 * r.stats['thermal_time_constant_s']:.2f} ms found, {1e3 * tau_true:g} ms true")
    assert err["ca50_deg"] < 0.2


def test_given_thermal_time_constant_wins_and_a_flat_curve_falls_back(fired, engine):
    # a user-given time constant is used as given (no estimate); without drift in the trace (noise-free
    # simulator trace) the level misfit does not single out a time constant: the fit then uses the stated
    # default and says so (measured: least at 8 ms, the grid's end)
    g, s, _ = engine
    fuel = fired.summary["fuel_mass_mg"]
    meta = {"air_mass_per_cycle_mg": fired.summary["inducted_mass_mg"] - fuel, "fuel_mass_per_cycle_mg": fuel}
    sm = with_measured_masses(s, meta).replace(thermal_time_constant_grid_s=(0.5e-3, 8e-3, 5))
    ts = _set(fired, intake_bar=0.98)
    r = analyse(ts, g, sm.replace(thermal_time_constant_s=0.003))
    assert r.stats["thermal_time_constant_source"] == "given" and r.stats["thermal_time_constant_s"] == 0.003
    r = analyse(ts, g, sm)
    print(f"noise-free trace: level misfit over tau {np.round(r.stats['thermal_time_constant_rss_rel'], 4).tolist()}")
    assert r.stats["thermal_time_constant_source"] != "estimated"           # measured: least at the grid's end
    assert r.stats["thermal_time_constant_s"] == sm.thermal_time_constant_default_s
    assert any("not well defined" in w for w in r.warnings)
    assert r.per_cycle["ca50_deg"][0] == pytest.approx(fired.summary["ca50_deg"], abs=0.1)


# ---------------------------------------------------------------------- trapped mass from air and fuel flow
def test_trapped_mass_from_measured_air_and_fuel(fired, engine):
    # A test bed's air and fuel flow meters give the fresh charge per cycle; with the burned-gas share
    # x_r at IVC the trapped mass is (air + fuel) / (1 - x_r) (mass balance of the charge, common practice)
    g, s, _ = engine
    fuel = fired.summary["fuel_mass_mg"]
    assert load_config("demo").operating.egr_fraction == 0.0     # so all inducted mass is air and fuel
    air = fired.summary["inducted_mass_mg"] - fuel
    meta = {"air_mass_per_cycle_mg": air, "fuel_mass_per_cycle_mg": fuel}
    sm = with_measured_masses(s, meta)
    assert sm.trapped_mass() == pytest.approx((air + fuel) * 1e-6 / (1 - s.residual_fraction), rel=1e-12)
    # the balance against the simulator's own trapped mass: x_r is an estimate (0.05 against the
    # simulator's burned fraction) and the unburned part of the residual is not in the flow; 2 % (common practice)
    assert sm.trapped_mass() * 1e6 == pytest.approx(fired.summary["trapped_mass_mg"], rel=0.02)
    # a given trapped mass wins; without the metadata nothing changes
    assert sm.replace(trapped_mass_kg=4e-4).trapped_mass() == 4e-4
    assert with_measured_masses(s, {}).trapped_mass() is None
    assert with_measured_masses(s, {"air_mass_per_cycle_mg": air}).trapped_mass() is None
    with pytest.raises(CyclesimError, match="residual_fraction"):
        sm.replace(residual_fraction=1.0).trapped_mass()
    ts = _set(fired, intake_bar=0.98)
    r = analyse(ts, g, sm)
    assert r.stats["trapped_mass_source"] == "measured air and fuel"
    assert r.stats["trapped_mass_mg"] == pytest.approx(sm.trapped_mass() * 1e6)
    # on the noise-free trace the burn point with the balanced mass: 0.1 deg, half the brief's CA50
    # limit (measured here about 0.03 deg on synthetic cycles without artefacts)
    assert r.per_cycle["ca50_deg"][0] == pytest.approx(fired.summary["ca50_deg"], abs=0.1)
    r0 = analyse(ts, g, s)
    assert r0.stats["trapped_mass_source"] == "assumed IVC temperature"
    print(f"CA50 error: measured air and fuel {r.per_cycle['ca50_deg'][0] - fired.summary['ca50_deg']:+.3f} deg,"
          f" assumed IVC temperature {r0.per_cycle['ca50_deg'][0] - fired.summary['ca50_deg']:+.3f} deg")


def test_analysis_inputs_take_fuel_lambda_and_residual_from_the_config():
    _, s, _ = analysis_inputs(load_config("demo", ["operating.lambda=0.9", "fuel.name=ethanol"]))
    assert s.fuel_air_lambda == 0.9 and s.fuel == "ethanol"
    assert s.residual_fraction == AnalysisSettings().residual_fraction     # not given: the estimate
    _, s, _ = analysis_inputs(load_config("demo", ["operating.residual_fraction=0.1",
                                                   "operating.egr_fraction=0.2"]))
    # burned-gas share at IVC: residual plus EGR in the fresh part (mass balance, common practice)
    assert s.residual_fraction == pytest.approx(0.1 + 0.9 * 0.2, rel=1e-12)


def test_trace_files_carry_the_measured_air_and_fuel(tmp_path, capsys):
    import argparse

    from cyclesim.traces.export import read_trace, write_trace_set
    from cyclesim.traces.synthesis import CycleVariation, synthesize

    ss = synthesize(load_config("demo"), 3, CycleVariation(seed=5), resolution_deg=1.0,
                    artefacts=ArtefactSettings.none())
    air, fuel = ss.meta["air_mass_per_cycle_mg"], ss.meta["fuel_mass_per_cycle_mg"]
    assert air == pytest.approx(np.mean([t["air_mass_mg"] for t in ss.truth]), rel=1e-12)
    assert fuel == pytest.approx(np.mean([t["fuel_mass_mg"] for t in ss.truth]), rel=1e-12)
    # mass balance of the fresh charge against the truth: air + fuel is the unburned mass at IVC
    # less the unburned part of the residual (combustion efficiency 0.97); 1.5 % (common practice)
    fresh = np.mean([t["trapped_mass_mg"] * (1 - t["residual_fraction"]) for t in ss.truth])
    assert air + fuel == pytest.approx(fresh, rel=0.015)
    # air-fuel ratio at lambda 1: stoichiometric gasoline about 14.6 (Heywood 1988 App. D, from memory)
    assert air / fuel == pytest.approx(14.6, abs=0.4)
    formats = ["csv_long", "csv_wide", "npz"]
    try:
        import asammdf  # noqa: F401
        formats.append("mf4")
    except ImportError:
        pass
    ts = TraceSet(ss.theta, ss.pressure_pa, ss.intake_pa, ss.meta["speed_rpm"], ss.meta)
    files = write_trace_set(ts, tmp_path, "trace", formats)
    assert len(files) >= len(formats)
    for f in files:
        if f.suffix not in (".csv", ".npz", ".mf4"):
            continue
        meta = read_trace(f).meta
        assert meta["air_mass_per_cycle_mg"] == pytest.approx(air, rel=1e-9), f.name
        assert meta["fuel_mass_per_cycle_mg"] == pytest.approx(fuel, rel=1e-9), f.name
    ap = argparse.ArgumentParser()
    add_parsers(ap.add_subparsers(dest="command"))
    npz = next(f for f in files if f.suffix == ".npz")
    assert cmd_analyse(ap.parse_args(["analyse", str(npz), "--engine", "demo", "--out", str(tmp_path / "a")])) == 0
    assert "measured air and fuel" in capsys.readouterr().out
    doc = json.loads((tmp_path / "a" / "analysis_summary.json").read_text())
    assert doc["statistics"]["trapped_mass_mg"] == pytest.approx((air + fuel) / (1 - 0.07), rel=1e-9)


def test_analyser_wall_heat_uses_the_models_woschni_constants(monkeypatch):
    # one Woschni in the code: the analyser's wall heat takes C1 and C2 from the heat-transfer model,
    # so with no combustion term (start of combustion after the window) doubling the model's C1
    # scales h, and so the wall heat, by 2^0.8 (h ~ w^0.8, Woschni 1967, SAE 670931)
    from cyclesim.registry import get_registry
    from cyclesim.traces import heat_release as an
    from cyclesim.traces.cycle_math import VolumeFunction

    g = Geometry(np.array([0.086]), np.array([0.086]), np.array([0.143]), np.array([10.5]))
    vol = VolumeFunction(g)
    th = np.linspace(-120.0, -10.0, 111)
    V = vol(th)
    p = 1e5 * (V[0] / V) ** 1.35
    T = 330.0 * (V[0] / V) ** 0.35
    s = AnalysisSettings()
    base = an._woschni_wall_heat(th, p, V, T, vol, s, 2000.0, 1.35, 1e9)[-1]
    wo = get_registry().submodel_class("heat_transfer", "woschni")
    (c, cs), closed_open = wo.C1["closed"], wo.C1["open"]
    monkeypatch.setattr(wo, "C1", {"closed": (2.0 * c, cs), "open": closed_open})
    doubled = an._woschni_wall_heat(th, p, V, T, vol, s, 2000.0, 1.35, 1e9)[-1]
    assert base != 0.0
    assert doubled / base == pytest.approx(2.0 ** 0.8, rel=1e-12)
