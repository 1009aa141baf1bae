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
