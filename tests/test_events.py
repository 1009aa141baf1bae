"""Events of the cycle (cyclesim.solve.events): state created during the cycle, and the IVC capture."""

from __future__ import annotations

import numpy as np
import pytest

from cyclesim.api import _registry_for
from cyclesim.solve.batch import build_batch
from cyclesim.config import load_config
from cyclesim.errors import PluginError
from cyclesim.solve.events import StateCreation
from cyclesim.solve.solver import integrate

ELEMENT_PLUGIN = '''
import numpy as np
from cyclesim import hookimpl
from cyclesim.params import StateVar
from cyclesim.roles import Knock

class BurnedElement(Knock):
    """A dormant state for one burned-mass element (test plug-in): constant until created."""
    name = "tests_burned_element"
    summary = "one burned-mass element, created by an event"
    references = ("test plug-in",)
    def states(self):
        return (StateVar("element_mass", "kg", initial=0.0, reset_at_ivc=False),)
    def derivatives(self, s):
        return {"element_mass": np.zeros_like(s.T)}

@hookimpl
def cyclesim_register_submodels():
    return [BurnedElement]
'''


@pytest.fixture
def element_batch(tmp_path):
    (tmp_path / "element.py").write_text(ELEMENT_PLUGIN)
    (tmp_path / "c.yaml").write_text("extends: demo_closed\nplugins: [element.py]\n"
                                     "knock: {model: tests_burned_element}\n")
    cases = [load_config(str(tmp_path / "c.yaml"), [f"burn.spark_advance_deg={a}"]) for a in (10, 30)]
    return build_batch(cases, _registry_for(cases))


def test_a_state_is_created_at_its_angle_with_the_value_given_there(element_batch):
    # each case opens its element at its own angle with the burned mass at the end of the step
    # that crosses it; before, the row keeps its initial 0; after, it stays (zero derivative)
    angles = np.array([-12.3, 5.7])
    ev = StateCreation("burned element", angles, ["knock.element_mass"], lambda ctx, hit: [ctx.y[2]])
    tr = integrate(element_batch, events=(ev,))
    assert tr.loop.startswith("numpy (event burned element")
    row = tr.names.index("knock.element_mass")
    for b, a in enumerate(angles):
        i = np.searchsorted(tr.theta, a)              # first grid point at or after the angle
        assert tr.theta[i - 1] < a <= tr.theta[i]
        assert np.all(tr.Y[row, b, :i] == 0.0)
        assert np.all(tr.Y[row, b, i:] == tr.Y[2, b, i])
        assert tr.Y[2, b, i] > 0.0
    # the rest of the state is that of a run without the event
    plain = integrate(element_batch)
    others = [k for k in range(len(tr.names)) if k != row]
    assert np.array_equal(plain.Y[others], tr.Y[others])


def test_an_event_naming_an_unknown_state_is_refused(element_batch):
    ev = StateCreation("bad", -10.0, ["knock.nothing"], lambda ctx, hit: [ctx.y[2]])
    with pytest.raises(PluginError, match="no state knock.nothing"):
        integrate(element_batch, events=(ev,))


def test_the_ivc_capture_event_keeps_the_state_at_intake_valve_closing(monkeypatch):
    # the compiled loop and the numpy loop's IVC event agree on the pressure and temperature at
    # IVC (both interpolate linearly within the step)
    from cyclesim.solve import kernel

    cases = [load_config("demo", ["simulation.step_deg=1.0"])]
    got = {}
    for path in ("auto", "python"):
        monkeypatch.setenv(kernel.ENV, path)
        batch = build_batch(cases, _registry_for(cases))
        got[path] = integrate(batch, cycles=2).ivc_state
    for key in ("p", "T", "V"):
        assert np.allclose(got["auto"][key], got["python"][key], rtol=1e-10)
    assert 0.5e5 < got["python"]["p"][0] < 1.5e5
