"""Prediction with uncertainty (sampling a calibration's covariance), the fit/predict command
line, and the coverage of the fit's confidence intervals on synthetic traces."""

from __future__ import annotations

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
    from cyclesim.studies.uncertainty import sample_parameters

    C = [[4.0, 1.2], [1.2, 1.0]]
    cal = {"parameters": ["a", "b"], "values": [10.0, 0.0], "covariance": C,
           "lower_bounds": [None, -1.0], "upper_bounds": [None, None]}
    keys, X = sample_parameters(cal, 4000, seed=2)
    assert keys == ["a", "b"]
    assert X[:, 1].min() >= -1.0                      # clipped to the bound
    # the unclipped column keeps mean and variance; sampling sd of the variance of n normal
    # draws is sigma^2 sqrt(2/(n-1)) (chi-square), i.e. 2.2 % here: allow 4 sd
    assert np.mean(X[:, 0]) == pytest.approx(10.0, abs=4 * 2.0 / math.sqrt(4000))
    assert np.var(X[:, 0], ddof=1) == pytest.approx(4.0, rel=4 * math.sqrt(2 / 3999))
    # the same seed gives the same samples
    assert np.array_equal(sample_parameters(cal, 4000, seed=2)[1], X)


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
    from cyclesim.cli_fit import add_parsers

    ap = argparse.ArgumentParser(prog="cyclesim")
    add_parsers(ap.add_subparsers(dest="command", required=True))
    return ap


def test_fit_and_predict_commands(tmp_path, capsys):
    import cyclesim
    from cyclesim.cli_fit import HANDLERS
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
    assert HANDLERS[args.command](args) == 0
    assert (pred / "prediction.csv").is_file()


@pytest.mark.slow
def test_interval_coverage_on_synthetic_traces_with_default_artefacts():
    """Per-cycle fits of 30 synthetic cycles (independent draws of burn parameters and of the
    measurement noise; default artefact chain: offset, gain, thermal drift, charge-amplifier
    high-pass, TDC error, jitter, noise, quantisation), TDC offset estimated from the misfired
    (motored) cycles of the same recording.

    What is checked and why:

    * The sensor's thermal drift (a smooth negative error during combustion) is a systematic
      measurement error no residual-based interval can see; it biases every cycle the same
      way (measured: burn duration about -0.3 deg, ignition delay about +0.09 deg).  The bias
      is bounded below (1 deg, 0.3 deg) - an engineering limit, not a statistical one.
    * The intervals must not be narrower than the random part of the error: the scatter of
      the errors about their bias (leave-one-out mean) over the median standard error stays
      below the chi-square 99.5 % point (n = 30: sd ratio < 1.38, scipy.stats.chi2 with
      n - 2 dof), and the bias-corrected 95 % intervals cover at least 0.95 minus the
      binomial sampling tolerance, 3 sd = 3 sqrt(0.95 0.05 / n) = 0.12.
    """
    import cyclesim
    from scipy import stats

    from cyclesim.fit import fit
    from cyclesim.traces.artefacts import ArtefactSettings
    from cyclesim.traces.synthesis import CycleVariation, synthesize

    full = load_config("demo", ["simulation.step_deg=1.0"])
    ref = cyclesim.simulate([full])[0]
    th = ref.trace["crank_deg"]
    i = int(np.argmin(np.abs(th - full.valves.ivc_deg)))
    T_ivc, xr = float(ref.trace["temperature_K"][i]), float(ref.trace["burned_gas_fraction"][i])
    n = 33
    ss = synthesize(full, n, CycleVariation(start_sd_deg=1.5, duration_cov=0.08, seed=21, misfire_rate=0.08), 0.5,
                    artefacts=ArtefactSettings.default())
    ts = TraceSet(ss.theta, ss.pressure_pa, ss.intake_pa, 3000.0, {})
    case = load_config("demo_closed", ["simulation.step_deg=1.0", f"operating.ivc_temperature_K={T_ivc}",
                                       f"operating.residual_fraction={xr}"])
    keys = ["burn.ignition_delay_deg", "burn.duration_deg", "burn.combustion_efficiency",
            "operating.ivc_pressure_bar"]
    res = fit(case, ts, keys, ensemble="each", tdc_correct=True)
    fired = [r for r in ss.truth if not r["misfire"]]
    assert len(res.cycles) == len(fired) >= 25
    truth_key = {"burn.ignition_delay_deg": "burn.ignition_delay_deg", "burn.duration_deg": "burn.duration_deg"}
    limits = {"burn.ignition_delay_deg": 0.3, "burn.duration_deg": 1.0}
    m = len(fired)
    lo_ratio = math.sqrt(stats.chi2.ppf(0.005, m - 2) / (m - 2))
    hi_ratio = math.sqrt(stats.chi2.ppf(0.995, m - 2) / (m - 2))
    tol = 3 * math.sqrt(0.95 * 0.05 / m)
    for k, tk in truth_key.items():
        j = keys.index(k)
        err = np.array([c.values[j] for c in res.cycles]) - np.array([r[tk] for r in fired])
        se = np.array([c.stderr[j] for c in res.cycles])
        tq = np.array([c.stats["t_quantile"] for c in res.cycles])
        bias = err.mean()
        assert abs(bias) < limits[k], (k, bias)
        loo = (err.sum() - err) / (m - 1)                 # leave-one-out bias
        resid = err - loo
        ratio = np.std(resid, ddof=1) * math.sqrt((m - 1) / m) / np.median(se)
        # intervals must not be too narrow for the random error (they may be wider: the
        # drift's misfit enters s^2 too, measured ratio ~0.5 for the delay, ~1 for the duration)
        assert ratio < hi_ratio, (k, ratio)
        cover = np.mean(np.abs(resid) * math.sqrt((m - 1) / m) <= tq * se)
        raw = np.mean(np.abs(err) <= tq * se)
        print(f"{k}: bias {bias:+.4f}, scatter/se {ratio:.2f} (chi2 99 %: {lo_ratio:.2f}..{hi_ratio:.2f}),"
              f" bias-corrected coverage {cover:.3f}, coverage of the truth {raw:.3f}")
        assert cover >= 0.95 - tol, (k, cover)
