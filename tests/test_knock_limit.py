"""Statistical knock limit: the advance at which a stated share of cycles knock."""

from __future__ import annotations

import numpy as np
import pytest

from cyclesim.config import load_config
from cyclesim.errors import ConfigError
from cyclesim.studies.knock_limit import statistical_knock_limit
from cyclesim.traces.synthesis import CycleVariation

OV = ["knock.model=livengood_wu", "simulation.step_deg=1.0", "simulation.max_cycles=6"]


def test_share_rises_with_advance_and_spread_brings_the_limit_forward():
    case = load_config("demo", OV)
    adv = [16.0, 22.0, 28.0, 34.0]
    wide = statistical_knock_limit(case, adv, n_cycles=10, share=0.1,
                                   variation=CycleVariation(start_sd_deg=3.0, duration_cov=0.12, seed=3))
    assert np.all(np.diff(wide.knocking_share) >= 0)          # more advance, more knocking cycles
    assert wide.knocking_share[-1] > wide.knocking_share[0]
    none = statistical_knock_limit(case, adv, n_cycles=4, share=0.1,
                                   variation=CycleVariation(start_sd_deg=0.0, duration_cov=0.0,
                                                            efficiency_sd=0.0))
    # without spread every cycle is the mean cycle: the share is 0 or 1 (common practice: knock is
    # a cycle-by-cycle event, so the limit with spread lies at or before the mean cycle's limit)
    assert set(np.unique(none.knocking_share)) <= {0.0, 1.0}
    assert wide.limit_deg is not None and none.limit_deg is not None
    assert wide.limit_deg <= none.limit_deg + 1e-9


def test_needs_a_knock_model():
    with pytest.raises(ConfigError, match="knock.model"):
        statistical_knock_limit(load_config("demo"), [20, 30], n_cycles=2)


def test_spark_study_uses_the_statistical_limit(tmp_path):
    from cyclesim.studies.spark import spark_study

    mean = spark_study("demo", "20,26,32", overrides=OV, plots=False, progress=False)
    stat = spark_study("demo", "20,26,32", overrides=OV, plots=False, progress=False, knock_cycles=8,
                       knock_cycle_share=0.1)
    assert stat.statistical_knock is not None and len(stat.statistical_knock["knocking_share"]) == 3
    # fast cycles of the spread knock before the mean cycle does (common practice)
    assert stat.knock_limited_deg is not None and mean.knock_limited_deg is not None
    assert stat.knock_limited_deg <= mean.knock_limited_deg + 1e-9
    assert stat.recommended_deg <= mean.recommended_deg + 1e-9


def test_inputs_that_cannot_give_a_limit_are_refused_or_said():
    case = load_config("demo", OV)
    with pytest.raises(ConfigError, match="n_cycles"):
        statistical_knock_limit(case, [10.0, 20.0], n_cycles=0)
    with pytest.raises(ConfigError, match="at least 2"):
        statistical_knock_limit(case, [], n_cycles=5)
    # 5 % of 10 cycles is half a knocking cycle per advance: the result says it is too thin
    kl = statistical_knock_limit(case, [20.0, 30.0], n_cycles=10, share=0.05)
    assert any("too few to place the limit" in n for n in kl.notes)
