"""Prediction with uncertainty (sampling a calibration's covariance), the fit/predict command
line, and the coverage of the fit's confidence intervals on synthetic traces."""

from __future__ import annotations
from cli_helpers import error_lines

import argparse
import json
import math

import numpy as np
import pytest

from cyclesim.config import case_with, load_config
from cyclesim.traces.export import TraceSet

BAR = 1e5


def _calibration(keys, values, sd, lower, upper):
    return {"parameters": keys, "values": values, "covariance": np.diag(np.square(sd)).tolist(),
            "lower_bounds": lower, "upper_bounds": upper}


def test_sampling_follows_the_covariance_and_the_bounds():
    from scipy import stats

    from cyclesim.studies.uncertainty import sample_parameters

    C = [[4.0, 1.2], [1.2, 1.0]]
    cal = {"parameters": ["a", "b"], "values": [10.0, 0.0], "covariance": C,
           "lower_bounds": [None, -1.0], "upper_bounds": [None, None]}
    n = 4000
    keys, X = sample_parameters(cal, n, seed=2)
    assert keys == ["a", "b"] and X.shape == (n, 2)
    assert X[:, 1].min() >= -1.0                      # the bound is respected
    # no probability piled up on the bound: clipping would put Phi(-1) = 16 % of the draws there
    assert np.mean(X[:, 1] == -1.0) == 0.0
    # the draws follow the normal truncated to b >= -1 (rejection): its moments from scipy's
    # truncated normal (Johnson, Kotz & Balakrishnan 1994, vol. 1, sec. 13.10, from memory);
    # clipping instead gives E[max(b, -1)] = 0.083, far outside the tolerance.  Sampling sd of
    # a mean of n draws: sd / sqrt(n); allow 4 of those
    tn = stats.truncnorm(-1.0, np.inf)
    assert np.mean(X[:, 1]) == pytest.approx(tn.mean(), abs=4 * tn.std() / math.sqrt(n))
    assert np.var(X[:, 1], ddof=1) == pytest.approx(tn.var(), rel=4 * math.sqrt(2 / (n - 1)) * 1.5)
    # a is correlated with b: E[a | b > -1] = 10 + (C_ab / C_bb) E[b | b > -1] (linear regression of a
    # bivariate normal, common practice); its conditional sd sqrt(4 - 1.2^2) = 1.6
    assert np.mean(X[:, 0]) == pytest.approx(10.0 + 1.2 * tn.mean(), abs=4 * 2.0 / math.sqrt(n))
    # the same seed gives the same samples
    assert np.array_equal(sample_parameters(cal, n, seed=2)[1], X)


def test_sampling_without_active_bounds_keeps_mean_and_variance():
    from cyclesim.studies.uncertainty import sample_parameters

    cal = {"parameters": ["a"], "values": [10.0], "covariance": [[4.0]],
           "lower_bounds": [-100.0], "upper_bounds": [None]}
    info = {}
    _, X = sample_parameters(cal, 4000, seed=3, info=info)
    # the bound lies 55 sd away: nothing is rejected, and the normal's moments are kept
    # (sampling sd of the variance of n normal draws sigma^2 sqrt(2/(n-1)), chi-square; allow 4)
    assert info["acceptance"] == 1.0 and info["reflected"] == 0
    assert np.mean(X[:, 0]) == pytest.approx(10.0, abs=4 * 2.0 / math.sqrt(4000))
    assert np.var(X[:, 0], ddof=1) == pytest.approx(4.0, rel=4 * math.sqrt(2 / 3999))


def test_a_parameter_at_its_bound_is_stated_and_a_free_one_keeps_the_nominal_in_its_band():
    from cyclesim.studies.uncertainty import propagate

    case = load_config("demo_closed", ["simulation.step_deg=1.0"])
    # the heat-transfer multiplier fitted at its lower bound 0 with a standard error of 0.4 (the
    # situation of a calibration that stopped at the bound): every sample lies above it, and
    # more wall heat lowers IMEP (common practice), so the nominal lies at or above the top of
    # the band; the result must say why
    at_bound = _calibration(["heat_transfer.multiplier"], [0.0], [0.4], [0.0], [10.0])
    res = propagate(case, at_bound, vary="burn.spark_advance_deg=20,30", n_samples=16, seed=1)
    assert np.all(res.samples[:, 0] > 0.0)
    assert any("lies at its lower bound" in n for n in res.notes)
    d = res.figures["imep_closed_bar"]
    assert np.all(d["nominal"] > d["upper"])
    assert any(n.startswith("imep_closed_bar: the nominal value lies outside its band")
               and "heat_transfer.multiplier lies at a bound" in n for n in res.notes)
    # away from the bounds the nominal lies inside its 5-95 % band (a monotonic figure of a
    # symmetric parameter distribution has its median at the nominal; common practice)
    free = _calibration(["heat_transfer.multiplier"], [1.0], [0.1], [0.0], [10.0])
    res = propagate(case, free, vary="burn.spark_advance_deg=20,30", n_samples=16, seed=1)
    d = res.figures["imep_closed_bar"]
    assert np.all((d["lower"] <= d["nominal"]) & (d["nominal"] <= d["upper"]))
    assert not any("outside its band" in n for n in res.notes)


def test_band_width_matches_linear_propagation(tmp_path):
    import cyclesim
    from cyclesim.studies.uncertainty import propagate

    case = load_config("demo_closed", ["simulation.step_deg=1.0"])
    sd = 2.0
    cal = _calibration(["burn.duration_deg"], [48.0], [sd], [1e-4], [360.0])
    res = propagate(case, cal, study="spark", vary="10:40:10", n_samples=40, seed=4, out=tmp_path)
    d = res.figures["imep_closed_bar"]
    # nominal column = the calibrated case itself
    r0 = cyclesim.simulate([case_with(case, {"burn.spark_advance_deg": 10})])[0]
    assert d["nominal"][0] == pytest.approx(r0.summary["imep_closed_bar"], rel=1e-9)
    assert np.all(d["lower"] <= d["upper"])
    # first-order (delta-method) propagation: sd(IMEP) = |dIMEP/d duration| sd(duration),
    # derivative by central differences; the sample sd of 40 draws has a relative sampling
    # sd of 1/sqrt(2 (n-1)) = 11 %; allow 3 of those plus 5 % for the curvature
    cs = [case_with(case, {"burn.spark_advance_deg": 10, "burn.duration_deg": 48.0 + s}) for s in (-0.5, 0.5)]
    lo, hi = cyclesim.simulate(cs)
    slope = (hi.summary["imep_closed_bar"] - lo.summary["imep_closed_bar"]) / 1.0
    assert d["sd"][0] == pytest.approx(abs(slope) * sd, rel=3 / math.sqrt(2 * 39) + 0.05)
    names = {p.name for p in tmp_path.iterdir()}
    assert {"prediction.csv", "prediction.json", "band_imep_closed_bar.png", "band_ca50_deg.png"} <= names
    header = [ln for ln in (tmp_path / "prediction.csv").read_text().splitlines() if not ln.startswith("#")][0]
    assert "imep_closed_bar_p05" in header and "imep_closed_bar_p95" in header
    assert set(res.mbt) >= {"nominal_deg", "lower_deg", "upper_deg"}


def _parser():
    from cyclesim.cli.fit import add_parsers

    ap = argparse.ArgumentParser(prog="cyclesim")
    add_parsers(ap.add_subparsers(dest="command", required=True))
    return ap


def test_fit_and_predict_commands(tmp_path, capsys):
    import cyclesim
    from cyclesim.cli.fit import HANDLERS
    from cyclesim.traces.export import write_npz

    case = load_config("demo_closed", ["simulation.step_deg=1.0", "simulation.output_step_deg=0.5"])
    r = cyclesim.simulate([case_with(case, {"burn.duration_deg": 45.0})])[0]
    rng = np.random.default_rng(1)
    p = r.trace["pressure_bar"] * BAR + rng.normal(0, 0.02 * BAR, r.trace["pressure_bar"].size)
    trace = write_npz(tmp_path / "meas.npz", TraceSet(r.trace["crank_deg"], p[None], None, 3000.0, {}))
    out = tmp_path / "cal"
    args = _parser().parse_args(["fit", "demo_closed", str(trace), "--param", "burn.duration_deg",
                                 "--param", "heat_transfer.multiplier", "--peg", "none", "--step", "1.0",
                                 "--weight=-30:60=2", "--out", str(out)])
    assert HANDLERS[args.command](args) == 0
    assert "burn.duration_deg" in capsys.readouterr().out
    cal = json.loads((out / "calibration.json").read_text())
    j = cal["parameters"].index("burn.duration_deg")
    # 95 % t interval of a correct model with white noise: contains the truth (checked value)
    assert cal["interval_low"][j] < 45.0 < cal["interval_high"][j]
    # the calibrated config runs through the normal loader
    assert cyclesim.simulate([load_config(out / "calibrated.yaml")])[0].ok
    pred = tmp_path / "pred"
    args = _parser().parse_args(["predict", str(out / "calibrated.yaml"), "--calibration",
                                 str(out / "calibration.json"), "--vary", "burn.spark_advance_deg=15:35:10",
                                 "--samples", "8", "--out", str(pred)])
    capsys.readouterr()
    assert HANDLERS[args.command](args) == 0
    assert (pred / "prediction.csv").is_file()
    # the printed table has column headings: the swept key, the nominal value and the band
    lines = capsys.readouterr().out.splitlines()
    head = next(i for i, ln in enumerate(lines) if "burn.spark_advance_deg" in ln and "nominal" in ln)
    assert lines[head].split()[-3:] == ["p5", "p95", "mean"]
    assert lines[head + 1].split()[0] == "15"


def test_cli_help_states_units_and_defaults():
    ap = _parser()
    sub = next(a for a in ap._actions if a.dest == "command").choices
    fit_help = " ".join(sub["fit"].format_help().split())
    pred_help = " ".join(sub["predict"].format_help().split())
    # every option of fit and predict carries a help text
    for name in ("fit", "predict"):
        for a in sub[name]._actions:
            if a.option_strings and a.dest != "help":
                assert a.help, (name, a.option_strings)
    assert "pressure [bar] (default)" in fit_help and "intake pressure near BDC (default)" in fit_help
    assert "operating conditions" in fit_help
    assert "default 1" in pred_help and "prediction.csv" in pred_help


def test_fit_refuses_operating_conditions_with_one_line_and_status_2(tmp_path, capsys):
    from cyclesim.cli import main

    trace = tmp_path / "never_read.npz"
    for key in ("operating.speed_rpm", "operating.intake_pressure_bar", "burn.spark_advance_deg",
                "engine.bore_mm", "simulation.tolerance"):
        out = tmp_path / "out"
        assert main(["fit", "demo_closed", str(trace), "--param", key, "--out", str(out)]) == 2, key
        err = error_lines(capsys.readouterr().err)
        assert len(err) == 1 and "cannot be fitted" in err[0] and key in err[0]
        assert not out.exists()          # refused before anything is written
    # the IVC state is a model parameter in closed mode, and refused in full mode
    assert main(["fit", "demo_closed", str(trace), "--param", "operating.ivc_temperature_K", "--mode", "full",
                 "--out", str(tmp_path / "o2")]) == 2
    assert "closed-mode parameter" in capsys.readouterr().err


def _relabel(theta, rows, shift_deg):
    """Rows re-sampled so that each carries an extra crank-angle labelling error [deg]:
    the sample labelled theta is taken at theta - shift (cubic spline of each row)."""
    from scipy.interpolate import CubicSpline

    return np.stack([CubicSpline(theta, r)(theta - e) for r, e in zip(rows, shift_deg)])


@pytest.mark.slow
def test_interval_coverage_on_synthetic_traces_with_default_artefacts():
    """Coverage of the 95 % and 68 % intervals of per-cycle fits on the tool's own synthetic
    traces with the default artefact chain (offset per cycle, offset drift, gain, thermal
    drift, charge-amplifier high-pass, TDC error, encoder jitter, noise, quantisation).

    Trials: 4 recordings (seeds) of 10 cycles.  Drawn per recording: the cycle-to-cycle
    variation of the burn, the noise, offsets and jitter, and the chain's systematic
    settings (gain error, thermal-drift sensitivity, mean offset, TDC error).  Each
    record's TDC reference is known to sd 0.1 deg (a TDC probe or a loss-angle estimate,
    common practice): each cycle is relabelled by its own draw of that error, and the fit
    is told the recording's TDC offset and the 0.1 deg standard uncertainty.

    The fit estimates the pressure offset and the sensor's thermal shock as measurement
    terms (the gain is absorbed by the fitted IVC pressure) and carries the TDC
    uncertainty as a systematic term.  True parameter: the burn parameter each cycle was
    synthesised with.

    Tolerance: the share of 40 trials inside the interval is binomial; 3 sd of it is
    3 sqrt(q (1 - q) / 40) = 0.10 at q = 0.95 and 0.22 at q = 0.683.  Trials of one
    recording share its chain settings, so they are not quite independent; the 3-sd band
    leaves room for that.  The 68 % check bounds the coverage from above as well: an
    interval inflated to safety fails it.
    """
    import cyclesim
    from scipy import stats

    from cyclesim.calibration import fit
    from cyclesim.traces.artefacts import ArtefactSettings
    from cyclesim.traces.synthesis import CycleVariation, synthesize

    full = load_config("demo", ["simulation.step_deg=1.0"])
    ref = cyclesim.simulate([full])[0]
    th = ref.trace["crank_deg"]
    i = int(np.argmin(np.abs(th - full.valves.ivc_deg)))
    T_ivc, xr = float(ref.trace["temperature_K"][i]), float(ref.trace["burned_gas_fraction"][i])
    case = load_config("demo_closed", ["simulation.step_deg=1.0", f"operating.ivc_temperature_K={T_ivc}",
                                       f"operating.residual_fraction={xr}"])
    keys = ["burn.ignition_delay_deg", "burn.duration_deg", "operating.ivc_pressure_bar"]
    sd_tdc = 0.1
    err = {k: [] for k in keys[:2]}
    se = {k: [] for k in keys[:2]}
    dof = []
    for seed in (31, 32, 33, 34):
        rng = np.random.default_rng(seed)
        d = ArtefactSettings.default()
        # systematic settings of this recording, spread about the default chain (common practice
        # magnitudes: gain within about 1 %, TDC within about half a degree)
        chain = d.replace(gain_error=float(rng.normal(0.0, 0.005)),
                          thermal_drift_bar_per_K=float(d.thermal_drift_bar_per_K * rng.uniform(0.5, 1.5)),
                          offset_mean_bar=float(d.offset_mean_bar + rng.normal(0.0, 0.3)),
                          tdc_offset_deg=float(rng.uniform(-0.5, 0.5)))
        ss = synthesize(full, 10, CycleVariation(start_sd_deg=1.5, duration_cov=0.08, efficiency_sd=0.0,
                                                 seed=seed), 0.5, artefacts=chain)
        e_tdc = rng.normal(0.0, sd_tdc, len(ss.truth))
        P = _relabel(ss.theta, ss.pressure_pa, e_tdc)
        Pi = _relabel(ss.theta, ss.intake_pa, e_tdc)
        ts = TraceSet(ss.theta, P, Pi, 3000.0, {})
        res = fit(case, ts, keys, ensemble="each", tdc_offset_deg=chain.tdc_offset_deg, tdc_sd_deg=sd_tdc,
                  nuisance=("offset", "thermal"))
        assert len(res.cycles) == len(ss.truth)
        for c, t in zip(res.cycles, ss.truth):
            for k in err:
                j = keys.index(k)
                err[k].append(c.values[j] - t[k])
                se[k].append(c.stderr[j])
            dof.append(c.dof)
    dof = np.array(dof)
    m = dof.size
    for k in err:
        e, s = np.array(err[k]), np.array(se[k])
        for level in (0.95, 0.683):
            tq = stats.t.ppf(0.5 + level / 2.0, dof)
            cover = float(np.mean(np.abs(e) <= tq * s))
            tol = 3.0 * math.sqrt(level * (1.0 - level) / m)
            print(f"{k}: {100 * level:.1f} % coverage {cover:.3f} of {m} (allowed {level - tol:.3f}.."
                  f"{min(level + tol, 1.0):.3f}); median half-width {np.median(tq * s):.3f} deg;"
                  f" error mean {e.mean():+.3f}, sd {e.std(ddof=1):.3f} deg")
            assert level - tol <= cover <= level + tol, (k, level, cover)
