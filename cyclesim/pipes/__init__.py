"""Quasi-one-dimensional unsteady compressible flow in pipes (intake and exhaust runners).

Coupled to the cylinder as the intake and exhaust runners (:mod:`cyclesim.pipes.runners`).
:class:`Pipes` holds a batch of
pipes and advances them in CFL sub-steps (:meth:`Pipes.advance`), returning the
time-integrated mass, energy and burned mass through each end so that a coupled
volume can stay exactly conservative.  Ends are nozzles to reservoirs
(:func:`set_end`): closed, open to a plenum, or a valve or throttle given its
effective area; :func:`junction_fluxes` joins several pipe ends at one pressure.
:func:`advance_crank_step` advances a :class:`PipeSystem` (runners at the
cylinder's valves) over one crank step for a coupled cylinder; a throttle
(:func:`throttle_end`) and the turbine (:func:`turbine_end`, :func:`turbine_power_W`)
close the runners' other ends.
"""

from .gas import PipeGas, constant_gamma, fuel_mixture
from .junction import junction_fluxes
from .pipe import Pipes, closed_ends, set_end
from .coupling import PipeSystem, advance_crank_step, throttle_end, turbine_end, turbine_power_W

__all__ = ["PipeGas", "PipeSystem", "Pipes", "advance_crank_step", "closed_ends", "constant_gamma", "fuel_mixture",
           "junction_fluxes", "set_end", "throttle_end", "turbine_end", "turbine_power_W"]
