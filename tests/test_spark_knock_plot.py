"""The spark study's knock plot (spark_knock_onset.png): drawn only where a knock model ran, from the
onset angle and the unburned mass fraction at onset of each advance."""

import numpy as np
import pytest

from cyclesim.studies.spark import spark_study
from cyclesim.studies.spark_knock_plot import KNOCK_PLOT, knock_points

FAST = ["simulation.step_deg=1.0", "simulation.step_reference_rpm=0"]


def test_the_knock_plot_is_drawn_with_a_knock_model_and_reads_the_cases(tmp_path):
    out = tmp_path / "k"
    st = spark_study("demo_turbo", "6:36:6", overrides=FAST + ["knock.model=livengood_wu"], out=out, traces=2)
    assert (out / KNOCK_PLOT).is_file() and (out / KNOCK_PLOT).stat().st_size > 10_000
    k = knock_points(st)
    assert list(k["advance_deg"]) == sorted(k["advance_deg"])
    knocks = np.isfinite(k["onset_deg"])
    assert knocks.any() and (~knocks).any()            # the sweep crosses the knock limit
    # the unburned share at onset is 1 - x_b(onset) of the case's own burn trace (its definition)
    key = st.spark_key
    for r in st.table.results:
        a, on = r.inputs[key], r.summary.get("knock_onset_deg")
        j = int(np.flatnonzero(k["advance_deg"] == a)[0])
        if on is None or not np.isfinite(on):
            assert np.isnan(k["unburned"][j])
            continue
        want = 1.0 - np.interp(on, r.trace["crank_deg"], r.trace["mfb"])
        assert k["unburned"][j] == pytest.approx(want, abs=0.01)
        # an onset is counted only with more unburned than the model's cut-off (Livengood-Wu integral stops there)
        assert k["unburned"][j] >= k["cutoff"] - 0.01
    # a later onset at more advance would contradict the integral's monotone build-up (Livengood and Wu 1955)
    on = k["onset_deg"][knocks]
    assert np.all(np.diff(on) <= 1e-9)


def test_no_knock_plot_without_a_knock_model(tmp_path):
    out = tmp_path / "n"
    st = spark_study("demo_closed", "10:40:10", overrides=FAST, out=out, traces=2)
    assert knock_points(st) is None and not (out / KNOCK_PLOT).exists()
