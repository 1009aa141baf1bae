"""Labels of the energy-balance terms, shared by the text table and the plot."""

ENERGY_LABELS = {"unreleased_chemical_energy_J": "unreleased chemical energy"}
"""Energy-balance terms whose key does not read well as a label (table and plot share them)."""


def energy_label(key: str) -> str:
    """Label of an energy-balance term: ``wall_heat_J`` -> ``wall heat``."""
    return ENERGY_LABELS.get(key, key.replace("_J", "").replace("_", " "))


UNRELEASED_LABELS = (("CO_J", "CO"), ("H2_J", "H2"), ("unburned_fuel_J", "unburned fuel"))
"""Carriers of the unreleased chemical energy, in the order the outputs list them."""
