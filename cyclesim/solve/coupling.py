"""The interface of a subsystem coupled to the cylinder at its valves, with sub-steps of its own.

A pipe system (an intake runner solved in one dimension, say) has a stability limit of its own
(for an explicit scheme the CFL condition on its cells) and so takes several sub-steps per
crank step of the cylinder.  The coupling is conservative when the cylinder receives, over a
crank step, exactly the gas the subsystem gave up through the valve over its sub-steps: the
shared flux is the *sum of the sub-step fluxes*, not a rate sampled once.  This module states
that contract (:class:`CoupledSubsystem`) and carries it out (:func:`exchange`).

Per case: the number of sub-steps comes from the case's own state (never its batch-mates'), so
a case gives the same result alone and in any batch; cases that need fewer sub-steps sit out
the later ones (a zero sub-step, which must exchange nothing).

The runners (:mod:`cyclesim.pipes.runners`) are coupled by the same rule through
:mod:`cyclesim.solve.valve_source` (their sub-steps inside :func:`cyclesim.pipes.advance_crank_step`);
this contract is the general form for another subsystem (see DEVELOPERS.md).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol, runtime_checkable

import numpy as np


@dataclass
class ValveSide:
    """The cylinder's gas as a coupled subsystem sees it over one crank step (arrays (B,)).

    Attributes
    ----------
    p : pressure [Pa]
    T : temperature [K]
    R : specific gas constant [J/(kg K)]
    gamma : ratio of specific heats [-]
    area : effective valve flow area (discharge coefficient times area) [m^2]
    omega_deg : crank speed [deg/s]
    """

    p: np.ndarray
    T: np.ndarray
    R: np.ndarray
    gamma: np.ndarray
    area: np.ndarray
    omega_deg: np.ndarray


@dataclass
class ValveFlux:
    """Gas through the valve into the cylinder over an interval (arrays (B,)): mass [kg] and
    absolute enthalpy [J]; negative where the gas leaves the cylinder."""

    mass: np.ndarray
    enthalpy: np.ndarray


@runtime_checkable
class CoupledSubsystem(Protocol):
    """What a subsystem coupled at the valves gives.

    Methods
    -------
    substeps(theta_deg, h_deg, cyl) -> ndarray of int (B,)
        Sub-steps each case needs over the crank step ``theta_deg .. theta_deg + h_deg`` [deg],
        from its own state (e.g. the CFL condition of its cells), at least 1.
    advance(theta_deg, dtheta_deg, cyl) -> ValveFlux
        Advance its own state by one sub-step of ``dtheta_deg`` (B,) [deg] per case (0 for a
        case that sits it out, which must leave its state alone and exchange nothing), and
        return the gas it sent through the valve into the cylinder over that sub-step.
    """

    def substeps(self, theta_deg: float, h_deg: float, cyl: ValveSide) -> np.ndarray: ...

    def advance(self, theta_deg: np.ndarray, dtheta_deg: np.ndarray, cyl: ValveSide) -> ValveFlux: ...


def exchange(sub: CoupledSubsystem, theta_deg: float, h_deg: float, cyl: ValveSide) -> ValveFlux:
    """Advance ``sub`` over one crank step by its own sub-steps; the gas it sent into the cylinder
    over the step (the sum of its sub-step fluxes), which the cylinder takes as its valve flow."""
    n = np.maximum(np.asarray(sub.substeps(theta_deg, h_deg, cyl), dtype=int), 1)
    dth = h_deg / n
    mass = np.zeros(n.shape)
    enthalpy = np.zeros(n.shape)
    for k in range(int(n.max())):
        active = k < n
        step = np.where(active, dth, 0.0)
        f = sub.advance(theta_deg + k * dth, step, cyl)
        mass += np.where(active, f.mass, 0.0)
        enthalpy += np.where(active, f.enthalpy, 0.0)
    return ValveFlux(mass, enthalpy)
