"""Source texts of small third-party plug-ins used by several test files."""

CONSTANT_H = '''
import numpy as np
from cyclesim import hookimpl
from cyclesim.params import Param
from cyclesim.roles import WallHeatTransfer

class ConstantCoefficient(WallHeatTransfer):
    """A constant heat-transfer coefficient (test plug-in)."""
    name = "tests_constant_h"
    summary = "constant heat-transfer coefficient"
    params = (Param("h_W_per_m2K", "W/(m^2 K)", 400.0, "coefficient", 0, 1e5),)
    references = ("test plug-in",)
    def coefficient(self, s):
        return self.p.h_W_per_m2K * np.ones_like(s.T)

@hookimpl
def cyclesim_register_submodels():
    return [ConstantCoefficient]
'''
"""A heat-transfer plug-in ``tests_constant_h``: a constant coefficient ``h_W_per_m2K``."""


def fake_install(site, dist_name: str, files: dict, entry_points: dict, version: str = "0.1"):
    """Lay out an installed distribution in the folder ``site`` (to put on sys.path): its
    ``files`` (relative path -> source) and a dist-info whose ``entry_points`` (name -> target)
    are in the ``cyclesim`` group, as pip would leave them."""
    for rel, text in files.items():
        path = site / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text)
    dist = site / f"{dist_name}-{version}.dist-info"
    dist.mkdir(parents=True)
    (dist / "METADATA").write_text(f"Metadata-Version: 2.1\nName: {dist_name}\nVersion: {version}\n")
    (dist / "entry_points.txt").write_text(
        "[cyclesim]\n" + "".join(f"{k} = {v}\n" for k, v in entry_points.items()))
    return site


RAISES_FOR_ONE_CASE = '''
from cyclesim import hookimpl

@hookimpl
def cyclesim_extra_figures(summary, trace, cases):
    for c in cases:
        if c.submodels["burn"].params["spark_advance_deg"] == 20:
            raise LookupError("the test plug-in refuses spark 20")
    return {}
'''
"""A plug-in of extra figures that raises a plain LookupError for any batch holding a case with
``burn.spark_advance_deg`` 20 (an exception of no kind the tool knows, for batch isolation)."""
KERNEL_WIEBE = '''
import numpy as np
from cyclesim import hookimpl
from cyclesim.kernel_ops import where
from cyclesim.params import Param
from cyclesim.roles import BurnRate

END_DEG = 360.0


def kwiebe_rate(theta, theta0, inv_dur, c, a, m):
    """Wiebe burn rate dx_b/dtheta [1/deg] (m is the form factor: pack() names come first)."""
    u = (theta - theta0) * inv_dur
    on = (u > 0.0) & (theta < END_DEG)
    up = where(on, u, 0.0)
    um = up ** m
    return where(on, c * um * np.exp(-a * um * up), 0.0)


class KernelWiebe(BurnRate):
    """The single Wiebe law written as a kernel, as a third-party package would."""
    name = "tests_kernel_wiebe"
    summary = "Wiebe burn given as a kernel"
    params = (Param("spark_advance_deg", "deg", 24.0, "spark timing before TDC", -30, 80),
              Param("ignition_delay_deg", "deg", 9.0, "spark to start of burning", 0, 60),
              Param("duration_deg", "deg", 48.0, "burn duration", 0, 360, min_exclusive=True),
              Param("a", "-", 5.0, "efficiency parameter", 0, 20, min_exclusive=True),
              Param("m", "-", 2.0, "form factor", 0, 10),
              Param("combustion_efficiency", "-", 0.97, "share that burns", 0, 1))
    references = ("test plug-in",)
    spark_param = "spark_advance_deg"
    kernel = kwiebe_rate

    @classmethod
    def shortest_feature_deg_for(cls, params):
        return float(params["duration_deg"])

    def __init__(self, values, ctx):
        super().__init__(values, ctx)
        b = lambda v: np.broadcast_to(np.asarray(v, float), (self.B,)).copy()  # noqa: E731
        self.spark = -b(self.p.spark_advance_deg)
        self.theta0 = self.spark + b(self.p.ignition_delay_deg)
        self.inv_dur = 1.0 / b(self.p.duration_deg)
        self.a, self.m = b(self.p.a), b(self.p.m)
        self.eff = b(self.p.combustion_efficiency)

    def start_deg(self):
        return self.theta0.copy()

    def spark_deg(self):
        return self.spark.copy()

    def combustion_efficiency(self):
        return self.eff.copy()

    def pack(self):
        return {"theta0": self.theta0, "inv_dur": self.inv_dur, "c": self.a * (self.m + 1.0) * self.inv_dur,
                "a": self.a, "m": self.m}


@hookimpl
def cyclesim_register_submodels():
    return [KernelWiebe]
'''
"""A burn plug-in ``tests_kernel_wiebe``: the built-in single Wiebe law, given as a kernel."""


RENAMED_SPARK_WIEBE = (KERNEL_WIEBE.replace("spark_advance_deg", "ignition_btdc_deg")
                       .replace("tests_kernel_wiebe", "tests_renamed_spark_wiebe"))
"""A burn plug-in ``tests_renamed_spark_wiebe``: the Wiebe law above whose spark parameter (its
``spark_param``) is called ``ignition_btdc_deg``."""


STATE_KNOCK = '''
import numpy as np
from cyclesim import hookimpl
from cyclesim.kernel_ops import where
from cyclesim.params import Param, StateVar
from cyclesim.roles import Knock


def closed_pressure_time(p, closed, p_ref):
    """d/dt of the time integral of p / p_ref [s] and of the closed time [s] (a state kernel)."""
    return where(closed, p / p_ref, 0.0), where(closed, 1.0, 0.0)


class ClosedPressureTime(Knock):
    """Two integrals of its own over the closed part of the cycle (test plug-in)."""
    name = "tests_pressure_time"
    summary = "time integral of the pressure and closed time"
    params = (Param("p_ref_bar", "bar", 1.0, "reference pressure", 0.1, 10),)
    references = ("test plug-in",)
    state_kernel = closed_pressure_time

    def states(self):
        return (StateVar("P", "s", initial=0.0, reset_at_ivc=True),
                StateVar("t", "s", initial=0.0, reset_at_ivc=True))

    def pack(self):
        return {"p_ref": self.p.p_ref_bar * 1e5}


@hookimpl
def cyclesim_register_submodels():
    return [ClosedPressureTime]
'''
"""A knock-role plug-in ``tests_pressure_time`` with two states of its own given by a state kernel:
``P``, the time integral of p / p_ref [s], and ``t``, the time spent closed [s]."""
