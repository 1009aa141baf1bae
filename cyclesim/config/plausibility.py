"""Warnings for values that are valid but implausible for their place (a likely slip of unit).

A temperature key in kelvin given a Celsius number (``walls.head_temperature_K: 90``) is inside
the key's allowed range but colder than any running engine's wall, coolant or intake charge.
"""

from __future__ import annotations

COLDEST_PLAUSIBLE_K = 250.0
"""Below this a wall, coolant or intake temperature is warned (about -23 degC: colder than engines
are run or tested, common practice; a Celsius value written in a kelvin key lands below it)."""

_KEYS = (
    ("walls", "head_temperature_K", None), ("walls", "piston_temperature_K", None),
    ("walls", "liner_temperature_K", None),
    ("operating", "intake_temperature_K", "full"), ("operating", "ivc_temperature_K", "closed"),
)
"""Section, key and the simulation mode that uses it (None: every mode); the coolant key's own range
already starts at 250 K."""


def input_warnings(case) -> list[str]:
    """One line per implausibly cold wall, coolant or intake temperature of a validated case."""
    out = []
    for sec, key, mode in _KEYS:
        if mode is not None and case.simulation.mode != mode:
            continue
        v = getattr(case.section(sec), key, None)
        if isinstance(v, (int, float)) and v < COLDEST_PLAUSIBLE_K:
            out.append(f"{sec}.{key} = {v:g} K is below {COLDEST_PLAUSIBLE_K:g} K, colder than a running"
                       f" engine's walls, coolant or intake: a value in degrees Celsius? (K = degC + 273.15)")
    return out
