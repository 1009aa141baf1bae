"""Loss breakdown from the air-standard Otto cycle to brake efficiency."""

import csv
import json

import numpy as np
import pytest

import cyclesim
from cyclesim.config import load_config
from cyclesim.errors import ConfigError
from cyclesim.studies.losses import ALT_ORDER, CLOSED_STEPS, loss_breakdown, otto_efficiency

FAST = ["simulation.step_deg=1.0"]


@pytest.fixture(scope="module")
def demo_losses(tmp_path_factory):
    out = tmp_path_factory.mktemp("losses")
    lb = loss_breakdown("demo", overrides=FAST, second_order=ALT_ORDER, closed_step_deg=0.2, out=out)
    return lb, out


def test_otto_formula_values():
    # Heywood 1988 eq. 5.31, 1 - r^(1 - gamma), worked by hand to 4 digits:
    # r 8 -> 0.5647, r 10 -> 0.6019, r 12 -> 0.6299 at gamma 1.4; r 10, gamma 1.3 -> 0.4988
    assert otto_efficiency([8, 10, 12]) == pytest.approx([0.5647, 0.6019, 0.6299], abs=6e-5)
    assert otto_efficiency(10, 1.3) == pytest.approx(0.4988, abs=6e-5)


def test_first_step_is_the_air_standard_otto_cycle(demo_losses):
    lb, _ = demo_losses
    r = load_config("demo").engine.compression_ratio
    # Heywood 1988 eq. 5.31: eta = 1 - r^(1-gamma), gamma = 1.4; the brief's tolerance 0.2 %
    assert lb.steps[0]["key"] == "otto"
    assert lb.steps[0]["efficiency"] == pytest.approx(1 - r ** (1 - 1.4), rel=2e-3)


def test_losses_add_up_from_otto_to_brake(demo_losses):
    lb, _ = demo_losses
    # bookkeeping: eta_otto - sum(losses) = eta_brake, to rounding
    eta = lb.efficiencies
    assert eta[0] - np.sum(lb.losses) / 100 == pytest.approx(eta[-1], abs=1e-12)
    assert lb.steps[-1]["key"] == "friction"
    # invariance: the last step is the brake efficiency of the same case simulated on its own
    alone = cyclesim.run("demo", FAST)
    assert eta[-1] == pytest.approx(alone.summary["eta_brake"], rel=1e-9)
    # the second order changes the split, not the end points
    assert lb.second.efficiencies[0] == pytest.approx(eta[0], rel=1e-12)
    assert lb.second.efficiencies[-1] == pytest.approx(eta[-1], rel=1e-12)


def test_fuel_air_cycle_is_about_three_quarters_of_air_standard(demo_losses):
    lb, _ = demo_losses
    # Heywood 1988 figs. 5-9, 5-10 (from memory): the fuel-air cycle reaches about
    # 0.75-0.8 of the air-standard efficiency at phi = 1; band widened by 0.03 either side
    ratio = lb.step("dissociation")["efficiency"] / lb.step("otto")["efficiency"]
    assert 0.72 < ratio < 0.83
    # dissociation lowers the efficiency (Heywood 1988 §5.5, from memory)
    assert lb.step("dissociation")["loss_points"] > 0


def test_real_losses_are_losses_and_order_matters(demo_losses):
    lb, _ = demo_losses
    for key in ("heat_transfer", "blowby", "combustion", "pumping", "friction"):
        assert lb.step(key)["loss_points"] > 0, key
    # incomplete combustion takes at most (1 - eta_c) of the efficiency it multiplies
    # (definition of combustion efficiency, Heywood 1988 §4.9.4, from memory); a little
    # less, since the cooler gas of the smaller release loses less heat and dissociates
    # less (Heywood 1988 §5.5, from memory): band 0.75..1.0 of that share
    eta_c = load_config("demo").submodels["burn"].params["combustion_efficiency"]
    before = lb.steps[lb.step("combustion")["step"] - 1]["efficiency"]
    share = lb.step("combustion")["loss_points"] / 100 / ((1 - eta_c) * before)
    assert 0.75 < share <= 1.0
    # wall heat transfer takes more with the instant burn, whose gas is hotter
    # (heat flux grows with gas temperature: Heywood 1988 §12.1, from memory)
    assert lb.second.step("heat_transfer")["loss_points"] > lb.step("heat_transfer")["loss_points"]


def test_files_agree(demo_losses):
    lb, out = demo_losses
    data = json.loads((out / "losses.json").read_text())
    with open(out / "losses.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["key"] for r in rows] == [s["key"] for s in data["steps"]]
    # round trip: CSV and JSON hold the same numbers
    for r, s in zip(rows, data["steps"]):
        assert float(r["efficiency"]) == pytest.approx(s["efficiency"], rel=1e-12)
        assert float(r["second_order_loss_points"]) == pytest.approx(
            lb.second.step(r["key"])["loss_points"], rel=1e-12, abs=1e-12)
    assert data["caution"] and "order" in " ".join(data["notes"])
    png = (out / "losses_waterfall.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize("order", [
    ("dissociation", "real_gas", "burn", "heat_transfer", "blowby", "combustion", "evo"),
    CLOSED_STEPS[:-1],
    CLOSED_STEPS[:-1] + ("friction",),
])
def test_bad_orders_are_refused(order):
    with pytest.raises(ConfigError):
        loss_breakdown("demo", order=order)
