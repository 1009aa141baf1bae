"""The interface of a subsystem coupled at the valves with sub-steps of its own (cyclesim.solve.coupling)."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from cyclesim.solve.coupling import CoupledSubsystem, ValveFlux, ValveSide, exchange

R_AIR = 287.0    # J/(kg K), common practice


class Tank:
    """A toy 0-D volume at fixed temperature, joined to the cylinder through a valve.

    The flow through the valve is linear in the pressure difference, ``q = A (p_t - p_c) /
    sqrt(R T)`` [kg/s]; each sub-step is an explicit Euler step of the tank's mass.  The
    sub-steps per crank step follow from the case's own state (the tank's time constant), so
    cases differ in how many they take.
    """

    def __init__(self, volume_m3, mass_kg, T_K):
        self.V = np.asarray(volume_m3, float)
        self.m = np.asarray(mass_kg, float).copy()
        self.T = np.asarray(T_K, float)

    def pressure(self):
        return self.m * R_AIR * self.T / self.V

    def substeps(self, theta_deg, h_deg, cyl):
        # time constant of the tank's emptying through the valve [deg]
        k = cyl.area * np.sqrt(R_AIR * self.T) / self.V
        tau_deg = cyl.omega_deg / k
        return np.maximum(1, np.ceil(2000.0 * h_deg / tau_deg)).astype(int)   # fine sub-steps (a toy)

    def advance(self, theta_deg, dtheta_deg, cyl):
        q = cyl.area * (self.pressure() - cyl.p) / np.sqrt(R_AIR * self.T)    # kg/s
        dm = q * dtheta_deg / cyl.omega_deg
        self.m = self.m - dm
        return ValveFlux(dm, dm * 1005.0 * self.T)


def _cylinder(B, p_pa):
    ones = np.ones(B)
    return ValveSide(p=np.asarray(p_pa, float) * ones, T=900.0 * ones, R=R_AIR * ones, gamma=1.35 * ones,
                     area=np.array([2e-4, 5e-4, 1e-3])[:B], omega_deg=18000.0 * ones)


def test_the_toy_tank_meets_the_protocol():
    assert isinstance(Tank(1e-3, 1e-3, 300.0), CoupledSubsystem)


def test_the_mass_through_the_valve_per_crank_step_is_the_sum_of_the_sub_step_fluxes():
    # what the cylinder receives over each crank step equals what left the tank over its
    # sub-steps, to rounding (1e-12 relative), with different sub-step counts per case
    tank = Tank([5e-4, 1e-3, 2e-3], [1.2e-3, 1.5e-3, 2.4e-3], [300.0, 320.0, 340.0])
    cyl = _cylinder(3, 1.0e5)
    m0 = tank.m.copy()
    total = np.zeros(3)
    counts = set()
    for j in range(40):
        before = tank.m.copy()
        counts.update(tank.substeps(j * 0.5, 0.5, cyl).tolist())
        f = exchange(tank, j * 0.5, 0.5, cyl)
        assert np.allclose(f.mass, before - tank.m, rtol=1e-12, atol=0.0)
        total += f.mass
    assert len(counts) > 1                           # the cases took different sub-step counts
    assert np.allclose(total, m0 - tank.m, rtol=1e-12, atol=0.0)
    assert np.all(total > 0.0)                       # the tank (above the cylinder's pressure) emptied


@settings(max_examples=25, deadline=None)
@given(st.floats(2e-4, 5e-3), st.floats(5e-4, 5e-3), st.floats(0.3e5, 3e5))
def test_a_case_exchanges_the_same_alone_and_beside_others(V, m, p_cyl):
    # the sub-steps of a case come from its own state: alone or in a batch it gives the same flux
    alone = Tank([V], [m], [300.0])
    mates = Tank([V, 1e-3, 3e-3], [m, 1e-3, 4e-3], [300.0, 310.0, 290.0])
    cyl1 = _cylinder(1, p_cyl)
    cyl3 = _cylinder(3, p_cyl)
    cyl3.area[:] = cyl1.area[0]
    fa = exchange(alone, 0.0, 1.0, cyl1)
    fb = exchange(mates, 0.0, 1.0, cyl3)
    assert fa.mass[0] == fb.mass[0]
    assert alone.m[0] == mates.m[0]
