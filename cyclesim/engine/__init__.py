"""Multi-cylinder engine: N cylinders on one crankshaft, coupled through shared manifolds.

>>> from cyclesim.engine import run_engine
>>> eng = run_engine("demo")                         # four cylinders, firing order 1-3-4-2
>>> eng.engine["brake_torque_Nm"], eng.engine["imep_net_spread_bar"]
>>> cut = run_engine("demo", modes=("fire", "fire", "cut", "fire"))

Each cylinder is one column of a batch (a case of its own, with its own
spread of trapped mass, spark, compression ratio and wall temperature), so an
engine is a cylinder axis beside the case axis, and several engines (say the
steps of a cylinder-cut test) share batches.  Cylinder ``k`` runs in its own
crank frame ``theta``; the engine frame is that of the first cylinder in the
firing order, ``phi = theta + offset_k`` with ``offset_k = 720 i / N`` for the
cylinder in position ``i`` of the firing order.

Manifolds (``multi_cylinder.manifolds``):

* ``constant``: every cylinder sees the operating point's plenum pressures
  (no interaction between cylinders).
* ``coupled``: one intake manifold (volume ``V_i`` at the intake temperature,
  isothermal, fed through a throttle from ambient air) and one exhaust
  manifold (volume ``V_e`` at the operating exhaust temperature, isothermal,
  emptied through an effective restriction to ambient), filling and emptying
  [Heywood 1988, sec. 14.3, from memory].  ``multi_cylinder.exhaust_branches``
  divides the exhaust: each branch is a volume of its own, with its
  cylinders' share of the volume and of the restriction's area, joining the
  others only downstream of the restriction:

      dp_i/dt = R_i T_i / V_i (mdot_throttle(p_i) - sum_k mdot_k,in)
      dp_e/dt = R_e T_e / V_e (sum_k mdot_k,out - mdot_outlet(p_e))

  with the throttle's open area ``pi D^2/4 (1 - cos psi / cos psi_0)``
  (plate angle psi, closed angle psi_0; the plate-shaft blockage is left
  out) [Heywood 1988, eq. 7.7, from memory].  The cylinders and the manifolds
  are solved by waveform relaxation: one cycle of all cylinders with the
  manifold pressure traces of the previous iteration, then the periodic
  manifold traces for those cylinder flows, until both settle.  In the
  manifold step the cylinders' intake flow is taken proportional to the
  manifold pressure about the trace they saw (a Newton-like estimate of their
  response); at the settled state that factor is 1, so the fixed point is
  the coupled solution.

Walls (``multi_cylinder.walls``): ``fixed`` as configured, or ``lumped``: one
thermal mass per cylinder between gas and coolant; its mean temperature
relaxes with time constant ``tau`` towards ``T_coolant + R Qdot_wall``, and
each surface keeps its configured offset from the configured mean.  After a
change of operating state (a cylinder cut, say) the walls are read at
``elapsed_s`` seconds: ``T = T_ss + (T_start - T_ss) exp(-t/tau)``.

Engine figures: indicated power is the sum over cylinders of net work times
cycles per second; friction is the engine's FMEP (mean over the cylinders of
the friction model evaluated on each cylinder's own trace, or a fixed value
given by the caller) times the total displacement; brake = indicated -
friction.  The crank-angle resolved torque is the sum of each cylinder's
``(p - p_ambient) dV/dtheta`` shifted to the engine frame, minus the mean
friction torque.
"""

from .driver import run_engine, simulate_engines
from .setup import EngineResult, EngineSetup, cylinder_cases, cylinder_modes, firing_offsets, throttle_area

__all__ = ["EngineSetup", "EngineResult", "run_engine", "simulate_engines", "firing_offsets", "cylinder_modes",
           "throttle_area", "cylinder_cases"]
