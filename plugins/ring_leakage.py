"""Ring-pack leakage (blowby) from the cylinder to the crankcase."""

from __future__ import annotations

import numpy as np

from cyclesim.cylinder.flow import DP_LIN_DEFAULT, outflow
from cyclesim.params import Param
from cyclesim.roles import GasState, RingLeakage


def orifice_blowby(p, T, R, gamma, cda, p_cc):
    """Blowby [kg/s] through the ring pack's equivalent orifice, cylinder gas upstream, zero when
    the crankcase pressure ``p_cc`` is the higher: the kernel of :class:`Orifice`
    (:func:`cyclesim.cylinder.flow.orifice_outflow`, Heywood 1988, App. C)."""
    return outflow(cda, p, T, R, gamma, np.minimum(p, p_cc), DP_LIN_DEFAULT)


class NoLeakage(RingLeakage):
    """A perfectly sealing ring pack."""

    name = "none"
    summary = "no ring-pack leakage"
    compiled_form = "none"

    def mass_flow(self, s: GasState) -> np.ndarray:
        return np.zeros(self.B)


class Orifice(RingLeakage):
    """Ring pack as one equivalent orifice between cylinder and crankcase.

    ``mdot = orifice_mass_flow(CdA, cylinder -> crankcase)``
    (:func:`cyclesim.cylinder.flow.orifice_mass_flow`, the compressible-orifice
    relation of Heywood 1988, App. C, with choking), upstream state = the
    cylinder gas.

    Notes
    -----
    * The effective area includes the discharge coefficient.  The default
      0.15 mm^2 gives a blowby of about 1.1 % of the trapped mass at
      1500 rpm and 0.6 % at 3000 rpm for a 0.5-litre cylinder at full load
      (peak pressure about 55 bar; estimate with a simple closed-cycle
      calculation).  Blowby of 0.5-1 % at full load is common practice for a
      healthy SI engine; the leaked fraction scales with the time per cycle,
      so it rises at low speed.
    * Flow is from the cylinder to the crankcase only: when the cylinder
      pressure is below the crankcase pressure (part-load intake) the flow is
      set to 0.  The gas that real ring packs return from the inter-ring
      volumes ("reverse blowby") and crevice storage are not modelled.
    * The ring pack is lumped: no inter-ring volumes, no ring dynamics.
    """

    name = "orifice"
    summary = "ring-pack leakage through one equivalent orifice to the crankcase (outflow only)"
    kernel = orifice_blowby
    params = (
        Param(
            "effective_area_mm2", "mm^2", 0.15,
            "equivalent leakage area of the ring pack, discharge coefficient included",
            min=0.0, max=20.0,
        ),
        Param(
            "crankcase_pressure_bar", "bar", 1.0, "crankcase pressure (absolute)",
            min=0.0, max=10.0, min_exclusive=True,
        ),
    )
    references = (
        "Heywood J.B. (1988) Internal Combustion Engine Fundamentals, McGraw-Hill, "
        "App. C (compressible flow through a flow restriction).",
    )

    def __init__(self, values, ctx) -> None:
        super().__init__(values, ctx)
        self._cda = np.asarray(self.p.effective_area_mm2, dtype=float) * 1e-6
        self._p_cc = np.asarray(self.p.crankcase_pressure_bar, dtype=float) * 1e5

    def pack(self) -> dict:
        """The kernel's parameters (:func:`orifice_blowby`) by name."""
        return {"cda": self._cda, "p_cc": self._p_cc}


SUBMODELS = [NoLeakage, Orifice]
