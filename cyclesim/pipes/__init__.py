"""Quasi-one-dimensional unsteady compressible flow in pipes (intake and exhaust runners).

Standalone: not yet coupled to the cylinder.  :class:`Pipes` holds a batch of
pipes and advances them in CFL sub-steps (:meth:`Pipes.advance`), returning the
time-integrated mass, energy and burned mass through each end so that a coupled
volume can stay exactly conservative.  Ends are nozzles to reservoirs
(:func:`set_end`): closed, open to a plenum, or a valve or throttle given its
effective area; :func:`junction_fluxes` joins several pipe ends at one pressure.
"""

from .gas import PipeGas, constant_gamma, fuel_mixture
from .junction import junction_fluxes
from .pipe import Pipes, closed_ends, set_end

__all__ = ["PipeGas", "Pipes", "closed_ends", "constant_gamma", "fuel_mixture", "junction_fluxes", "set_end"]
