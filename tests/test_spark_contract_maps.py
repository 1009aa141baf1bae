"""The maps, the full-load boost match and the spark-band prediction find the spark timing through
the burn model's contract (``BurnRate.spark_param``), not through a parameter's name: a burn
plug-in whose spark parameter is called ``ignition_btdc_deg`` gives the same spark and figures as
the built-in Wiebe law it copies."""

import pytest

from cyclesim.config import load_config
from cyclesim.errors import ConfigError
from cyclesim.studies.maps import part_load_map
from cyclesim.studies.point_spark import check_spark_mode
from plugin_sources import RENAMED_SPARK_WIEBE

FAST = ["simulation.step_deg=1.0", "simulation.step_reference_rpm=0"]


@pytest.fixture
def renamed(tmp_path):
    (tmp_path / "renamed.py").write_text(RENAMED_SPARK_WIEBE)
    cfg = tmp_path / "renamed.yaml"
    cfg.write_text("extends: demo\nplugins: [renamed.py]\n"
                   "burn: {model: tests_renamed_spark_wiebe, ignition_btdc_deg: 24, ignition_delay_deg: 9,"
                   " duration_deg: 48, a: 5.0, m: 2.0, combustion_efficiency: 0.97}\n")
    return cfg


def test_the_spark_modes_accept_a_renamed_spark_parameter(renamed):
    case = load_config(str(renamed))
    assert "spark_advance_deg" not in case.submodels["burn"].params
    assert check_spark_mode("mbt", case) == "mbt"
    # a burn model with no spark parameter at all: one line naming the contract
    with pytest.raises(ConfigError, match="not timed by a spark parameter"):
        check_spark_mode("mbt", load_config("demo", ["burn.model=wiebe_ca50"]))


def test_an_mbt_map_point_is_the_same_with_a_renamed_spark_parameter(renamed):
    # the same law under two parameter names: MBT, the spark set and BMEP agree to rounding
    kw = dict(speeds=[2500], loads=[0.7], spark="mbt", advances=[14, 20, 26, 32], overrides=FAST, plots=False)
    a = part_load_map(str(renamed), **kw).rows[0]
    b = part_load_map("demo", **kw).rows[0]
    assert a["error"] == "" and b["error"] == ""
    assert a["spark_limit"] == b["spark_limit"]
    assert a["spark_advance_deg"] == pytest.approx(b["spark_advance_deg"], abs=1e-6)
    assert 14 < a["spark_advance_deg"] < 32            # a bracketed MBT, not the config's 24 deg
    assert a["bmep_bar"] == pytest.approx(b["bmep_bar"], rel=1e-9)


def test_the_fixed_mode_records_the_renamed_parameter(renamed):
    r = part_load_map(str(renamed), speeds=[2500], loads=[0.7], spark="fixed", overrides=FAST, plots=False).rows[0]
    assert r["spark_advance_deg"] == pytest.approx(24.0)


def test_the_spark_band_prediction_sweeps_the_declared_parameter(renamed):
    from cyclesim.studies.uncertainty import _parse_vary, _spark_key

    key = _spark_key(load_config(str(renamed)))
    assert key == "burn.ignition_btdc_deg"
    assert _parse_vary("10:30:10", "spark", key) == (key, "10:30:10")
    with pytest.raises(ConfigError, match="sweeps burn.ignition_btdc_deg"):
        _parse_vary("burn.spark_advance_deg=10:30:10", "spark", key)


def test_the_boosted_full_load_sets_the_renamed_parameter(tmp_path):
    # the turbocharger match at fixed spark: the boost iteration writes the spark through the contract
    (tmp_path / "renamed.py").write_text(RENAMED_SPARK_WIEBE)
    cfg = tmp_path / "t.yaml"
    cfg.write_text("extends: demo_turbo\nplugins: [renamed.py]\n"
                   "burn: {model: tests_renamed_spark_wiebe, ignition_btdc_deg: 18, ignition_delay_deg: 9,"
                   " duration_deg: 48, a: 5.0, m: 2.0, combustion_efficiency: 0.97}\n")
    from cyclesim.studies.maps import full_load_curve

    m = full_load_curve(str(cfg), speeds=[3000], spark="fixed", overrides=FAST, plots=False, boost_bar=1.6)
    r = m.rows[0]
    assert r["error"] == "" and r["spark_advance_deg"] == pytest.approx(18.0)
    assert r["intake_pressure_bar"] > 1.2
