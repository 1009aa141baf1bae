"""Hook specifications: the extension points a plug-in package can implement.

Hooks are called at set-up and at the end of a run, never inside the
right-hand side of the ODE.  Implement them with :data:`cyclesim.hookimpl`
and expose the module through the ``cyclesim`` entry-point group::

    [project.entry-points.cyclesim]
    mypackage = "mypackage.cyclesim_plugin"
"""

from __future__ import annotations

import pluggy

hookspec = pluggy.HookspecMarker("cyclesim")


@hookspec
def cyclesim_register_submodels():
    """Return a list of submodel classes (subclasses of a role in :mod:`cyclesim.roles`).

    Each class declares ``role``, ``name``, ``summary``, ``params`` and
    ``references``.  Two classes with the same role and name are an error.
    """


@hookspec
def cyclesim_register_fuels():
    """Return a list of :class:`cyclesim.fuels.Fuel` objects to add to the fuel table."""


@hookspec
def cyclesim_extra_figures(summary, trace, cases):
    """Return a dict of extra summary figures (unit in the key) for a finished batch.

    ``summary`` is the dict of per-case figure arrays computed so far, ``trace``
    the dict of (B, n) trace arrays, ``cases`` the list of validated cases.
    Each value must be a sequence of length B.  Called once per batch.
    """
