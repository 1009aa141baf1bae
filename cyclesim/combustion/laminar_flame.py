"""Laminar burning velocity of premixed fuel-air mixtures diluted by burned gas.

Two published power-law correlations

    S_L = S_L0(phi) (T_u/T0)^alpha (p/p0)^beta (1 - 2.06 f^0.77)

- **Metghalchi & Keck (1982)**, Combust. Flame 48:191-210, for iso-octane,
  gasoline (indolene), propane and methanol:
  S_L0 = B_m + B_phi (phi - phi_m)^2, T0 = 298 K, p0 = 1 atm,
  alpha = 2.18 - 0.8 (phi - 1), beta = -0.16 + 0.22 (phi - 1).
  Constants as tabulated by Heywood (1988, table 9.3), **from memory** (the
  form is checked, the numbers are not checkable here).
- **Gülder (1984)**, SAE 841000, for methane and ethanol:
  S_L0 = W phi^eta exp(-xi (phi - 1.075)^2), T0 = 300 K, p0 = 1 atm,
  fuel-specific alpha and beta.  Constants **from memory**.

Burned-gas dilution: the factor (1 - 2.06 f^0.77) of Rhodes & Keck (1985),
SAE 850047 (from memory), f the mass fraction of burned gas (residual + EGR)
in the unburned mixture, used for both correlations.  It was chosen over
Metghalchi & Keck's (1 - 2.1 f) against the GRI-Mech 3.0 flames diluted by
complete-combustion products: their own ratio S_L(f)/S_L(0) at f = 0.1-0.2
(1 bar, 300 K; 5 bar, 450 K) is matched by the later factor within -3 to
+13 %, while the earlier one reads 18-62 % high.  It is floored at
0 (f above about 0.39 gives no flame).

Ranges of the underlying measurements (from memory): Metghalchi & Keck
phi 0.8-1.5, 298-700 K, 0.4-50 atm; Gülder phi 0.7-1.4, 300-500 K, 1-8 atm.
:func:`outside_range` flags states beyond them (extrapolation).

Checked against Cantera's freely propagating flame with GRI-Mech 3.0 for
methane-air (``tests/data/laminar_flame_gri30.json``, made by
``benchmarks/laminar_flame_reference.py``); gasoline is not checkable with
GRI-Mech 3.0 (no such fuel in the mechanism).

All functions take floats or numpy arrays (broadcast together), SI units,
and compile with numba as they are.
"""

from __future__ import annotations

import numpy as np

from ..errors import ConfigError
from ..params import suggestion

P_REF_PA = 101325.0
"""Reference pressure p0 of both correlations [Pa] (1 atm)."""

DILUTION_COEFFICIENT = 2.06
DILUTION_EXPONENT = 0.77
"""Rhodes & Keck (1985): S_L reduced by (1 - 2.06 f^0.77) at burned-gas mass fraction f [-]."""

FUEL_CODES = {"isooctane": 0, "gasoline": 1, "propane": 2, "methanol": 3,
              "methane": 4, "ethanol": 5}
"""Fuel name -> integer code of the tables below."""

CORRELATION_OF_FUEL = {"isooctane": "Metghalchi & Keck 1982", "gasoline": "Metghalchi & Keck 1982",
                       "propane": "Metghalchi & Keck 1982", "methanol": "Metghalchi & Keck 1982",
                       "methane": "Gülder 1984", "ethanol": "Gülder 1984"}

# Metghalchi & Keck (1982) via Heywood (1988) table 9.3, from memory:
# phi_m [-], B_m [m/s], B_phi [m/s]  (rows: isooctane, gasoline/indolene, propane, methanol)
MK_CONSTANTS = np.array([
    [1.13, 0.2632, -0.8472],
    [1.13, 0.2758, -0.7834],
    [1.08, 0.3422, -1.3865],
    [1.11, 0.3692, -1.4051],
])
MK_T0_K = 298.0

# Gülder (1984), from memory: W [m/s], eta, xi, alpha, beta  (rows: methane, ethanol)
GULDER_CONSTANTS = np.array([
    [0.422, 0.15, 5.18, 2.0, -0.5],
    [0.465, 0.25, 6.34, 1.75, -0.17],
])
GULDER_T0_K = 300.0

# measurement ranges (from memory): phi_lo, phi_hi, T_lo [K], T_hi [K], p_lo [Pa], p_hi [Pa]
RANGES = np.array([
    [0.8, 1.5, 298.0, 700.0, 0.4 * P_REF_PA, 50.0 * P_REF_PA],  # Metghalchi & Keck
    [0.7, 1.4, 300.0, 500.0, 1.0 * P_REF_PA, 8.0 * P_REF_PA],   # Gülder
])


def dilution_factor(f):
    """Rhodes & Keck (1985) dilution factor max(1 - 2.06 f^0.77, 0) [-] at burned mass fraction f [-]."""
    return np.maximum(1.0 - DILUTION_COEFFICIENT * np.maximum(f, 0.0) ** DILUTION_EXPONENT, 0.0)


def metghalchi_keck(phi, T_u, p, f, phi_m, B_m, B_phi):
    """Laminar burning velocity [m/s], Metghalchi & Keck (1982).

    Parameters
    ----------
    phi : numeric
        Fuel-air equivalence ratio [-].
    T_u : numeric
        Unburned-gas temperature [K].
    p : numeric
        Pressure [Pa].
    f : numeric
        Burned-gas mass fraction in the unburned mixture [-].
    phi_m, B_m, B_phi : numeric
        Fuel constants [-, m/s, m/s] (:data:`MK_CONSTANTS`).
    """
    s0 = np.maximum(B_m + B_phi * (phi - phi_m) ** 2, 0.0)
    alpha = 2.18 - 0.8 * (phi - 1.0)
    beta = -0.16 + 0.22 * (phi - 1.0)
    return s0 * (T_u / MK_T0_K) ** alpha * (p / P_REF_PA) ** beta * dilution_factor(f)


def gulder(phi, T_u, p, f, W, eta, xi, alpha, beta):
    """Laminar burning velocity [m/s], Gülder (1984).

    Parameters
    ----------
    phi, T_u, p, f : numeric
        As :func:`metghalchi_keck` [-, K, Pa, -].
    W, eta, xi, alpha, beta : numeric
        Fuel constants [m/s, -, -, -, -] (:data:`GULDER_CONSTANTS`).
    """
    s0 = W * phi ** eta * np.exp(-xi * (phi - 1.075) ** 2)
    return s0 * (T_u / GULDER_T0_K) ** alpha * (p / P_REF_PA) ** beta * dilution_factor(f)


def laminar_burning_velocity(phi, T_u, p, f, fuel_code):
    """Laminar burning velocity [m/s] of fuel ``fuel_code`` (:data:`FUEL_CODES`, a scalar int).

    Metghalchi & Keck (1982) for codes 0-3, Gülder (1984) for 4-5; see the module notes.
    """
    if fuel_code < 4:
        c = MK_CONSTANTS[fuel_code]
        return metghalchi_keck(phi, T_u, p, f, c[0], c[1], c[2])
    c = GULDER_CONSTANTS[fuel_code - 4]
    return gulder(phi, T_u, p, f, c[0], c[1], c[2], c[3], c[4])


AUTO = "auto"
"""The burn's ``fuel_flame_data`` choice that follows the config's fuel."""


def flame_fuel(choice: str, fuel_name: str | None, covered=FUEL_CODES) -> tuple[str, str | None]:
    """The fuel whose laminar burning velocity a burn uses, and a note when it is not the charge's.

    ``choice`` is the burn's ``fuel_flame_data``: a fuel name of ``covered`` is taken as given;
    :data:`AUTO` takes the config's fuel (``fuel_name``) where a correlation covers it, and
    gasoline's otherwise, with a note saying so (a custom fuel, or a fuel outside ``covered``).
    """
    if choice != AUTO:
        return choice, None
    if fuel_name in covered:
        return str(fuel_name), None
    return "gasoline", (f"burn law: no laminar burning velocity correlation for fuel {fuel_name!r}; gasoline's"
                        f" ({CORRELATION_OF_FUEL['gasoline']}) is used: set burn.fuel_flame_data to choose"
                        f" one of {', '.join(covered)}")


def outside_range(phi, T_u, p, fuel_code):
    """True where (phi, T_u [K], p [Pa]) lies beyond the correlation's measurements (extrapolation)."""
    r = RANGES[0] if fuel_code < 4 else RANGES[1]
    return ((phi < r[0]) | (phi > r[1]) | (T_u < r[2]) | (T_u > r[3])
            | (p < r[4]) | (p > r[5]))


def extrapolation_note(phi: float, T_u_max: float, p_max: float, code: int, at_spark: bool = False) -> str | None:
    """A warning where a burn's charge goes beyond the measurements of its laminar burning velocity
    correlation (:data:`RANGES`): the equivalence ratio ``phi``, the highest unburned temperature
    ``T_u_max`` [K] (``at_spark``: only the temperature at the spark is known, a lower bound) and
    pressure ``p_max`` [Pa] it meets; ``None`` within them."""
    r = RANGES[0] if code < 4 else RANGES[1]
    name = "Metghalchi & Keck (1982)" if code < 4 else "Gülder (1984)"
    beyond = []
    if phi < r[0] or phi > r[1]:
        beyond.append(f"phi {phi:.2f}")
    if T_u_max > r[3]:
        beyond.append(f"unburned gas {T_u_max:.0f} K at the spark" if at_spark else f"unburned gas up to {T_u_max:.0f} K")
    if p_max > r[5]:
        beyond.append(f"pressure up to {p_max / P_REF_PA:.0f} atm")
    if not beyond:
        return None
    return (f"laminar burning velocity extrapolated: {name} measured phi {r[0]:g}-{r[1]:g},"
            f" {r[2]:.0f}-{r[3]:.0f} K, {r[4] / P_REF_PA:g}-{r[5] / P_REF_PA:g} atm (from memory); this burn meets "
            + ", ".join(beyond))


def fuel_code(name: str) -> int:
    """The integer code of a fuel name; unknown names raise ConfigError with the known ones."""
    if name not in FUEL_CODES:
        raise ConfigError(f"no laminar burning velocity correlation for fuel {name!r}"
                          + suggestion(name, FUEL_CODES) + f"; known: {', '.join(FUEL_CODES)}")
    return FUEL_CODES[name]
