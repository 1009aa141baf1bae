"""The closed part of the cycle keeps its reference-speed step at low speed (cycle_grid.closed_step_factor):
fewer steps, the same accuracy against a tenfold finer step.

Bounds as benchmarks/run.py's accuracy figures (issue 23): net IMEP within 0.05 %, burn angles and the
angle of peak pressure within 0.05 deg; the fine reference is the same model at a tenfold finer
``simulation.step_deg`` (common practice for a convergence check of a fixed-step scheme).
"""

from __future__ import annotations

import numpy as np
import pytest

import cyclesim
from cyclesim.api import _registry_for
from cyclesim.config import effective_step_deg, load_config
from cyclesim.solve.batch import build_batch
from cyclesim.solve.cycle_grid import CLOSED_STEP_FACTOR, closed_step_factor, grid_for

SAME = ["emissions.model=none"]


def _grid(case):
    batch = build_batch([case], _registry_for([case]))
    return grid_for(batch, "full")


@pytest.mark.parametrize("speed_rpm, refined", [(3000, 1), (2000, 2), (1500, 4), (800, 8)])
def test_the_closed_step_is_the_reference_speed_one(speed_rpm, refined):
    case = load_config("demo", [f"operating.speed_rpm={speed_rpm}"] + SAME)
    h = effective_step_deg(case.simulation, speed_rpm)
    assert case.simulation.step_deg / h == refined
    theta = _grid(case)
    steps = np.diff(theta)
    ivc, evo = case.valves.ivc_deg, case.valves.evo_deg
    mid = 0.5 * (theta[:-1] + theta[1:])
    shut = steps[(mid > ivc + 10) & (mid < evo - 10)]
    # well inside IVC..EVO every step is CLOSED_STEP_FACTOR times simulation.step_deg
    assert np.allclose(shut, CLOSED_STEP_FACTOR * case.simulation.step_deg)
    assert steps.min() == pytest.approx(h)


def test_a_model_limit_still_caps_the_closed_step():
    case = load_config("demo", ["operating.speed_rpm=1500"] + SAME)
    reg = _registry_for([case])
    classes = {role: reg.submodel_class(role, case.submodels[role].model) for role in case.submodels}
    k = closed_step_factor(case, classes)
    assert k == CLOSED_STEP_FACTOR * 4
    burn = classes["burn"]

    class Short(burn):
        @classmethod
        def shortest_feature_deg_for(cls, params):
            return 16 * 0.125 * 3          # 3 steps of 0.125 deg at most

    assert closed_step_factor(case, {**classes, "burn": Short}) == 3


@pytest.mark.parametrize("cfg, over", [("demo", ["operating.speed_rpm=1500", "operating.intake_pressure_bar=0.4"]),
                                       ("demo_part_load", ["operating.speed_rpm=1500"])])
def test_low_speed_accuracy_against_a_tenfold_finer_step(cfg, over):
    case = load_config(cfg, over + SAME)
    fine = load_config(cfg, over + SAME + [f"simulation.step_deg={case.simulation.step_deg / 10}"])
    a, b = (r.summary for r in cyclesim.simulate([case, fine]))
    assert abs(a["imep_net_bar"] / b["imep_net_bar"] - 1) < 5e-4
    assert abs(a["p_max_bar"] / b["p_max_bar"] - 1) < 5e-4
    for k in ("ca10_deg", "ca50_deg", "ca90_deg", "theta_pmax_deg"):
        assert abs(a[k] - b[k]) < 0.05, k
