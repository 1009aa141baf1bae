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
