"""Built-in cyclesim submodels.

Installed as ``cyclesim_plugins`` and registered through the ``cyclesim``
entry-point group in pyproject.toml, exactly as a third-party package would.
Each module lists its classes in ``SUBMODELS``.
"""

from __future__ import annotations

import importlib

from cyclesim import hookimpl

_MODULES = (
    "wiebe",
    "flame_burn",
    "entrainment_burn",
    "burn_table",
    "heat_transfer",
    "ring_leakage",
    "valve_flow",
    "boundaries",
    "friction",
    "knock",
    "emissions",
)


def _collect():
    out = []
    for mod in _MODULES:
        try:
            m = importlib.import_module(f"{__name__}.{mod}")
        except ModuleNotFoundError as exc:
            if exc.name == f"{__name__}.{mod}":
                continue  # module not written yet
            raise
        out.extend(getattr(m, "SUBMODELS", ()))
    return out


@hookimpl
def cyclesim_register_submodels():
    return _collect()


@hookimpl
def cyclesim_register_fuels():
    from cyclesim.fuels import BUILTIN_FUELS

    return list(BUILTIN_FUELS.values())
