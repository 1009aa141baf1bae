"""Gas properties: species polynomials, fresh charge and complete-combustion products.

Two layers, bottom up (the solver's tables built on them are in :mod:`cyclesim.solve.gas_tables`):

1. Species properties from NASA 7-coefficient polynomials
   (:mod:`cyclesim.data.nasa7`): :func:`species_thermo_dimless`,
   :func:`species_cp_mole`, :func:`species_h_mole`, :func:`species_s_mole`.
2. Ideal-gas mixtures of fixed composition: their polynomial is the
   mole-weighted sum of the species' (:func:`mixture_nasa7`); the fresh charge
   of air and fuel vapour at an equivalence ratio (:func:`fresh_charge`).

Energy datum
------------
All energies and enthalpies are "absolute": they include the enthalpy of
formation, with the elements in their reference states at 298.15 K as zero
(the datum of the NASA and GRI-Mech data sets).  Burning at constant
temperature therefore lowers ``u`` by the heat of reaction, and the solver
needs no separate heat-release term.

Units are SI and per unit mass [J/kg, J/(kg K)] unless a name says ``_mole``.
"""

from __future__ import annotations

from typing import Mapping, Sequence

import numpy as np

from ..data.nasa7 import ATOMIC_MASS_KG_PER_MOL, NASA7
from ..errors import ConfigError
from ..params import suggestion



R_U = 8.314462618
"""Molar gas constant [J/(mol K)] (CODATA 2018, exact by the 2019 SI)."""

P_REF = 101325.0
"""Standard-state pressure of the polynomial data sets [Pa] (1 atm, GRI-Mech 3.0)."""

T_REF = 298.15
"""Reference temperature of the enthalpy datum [K]."""

T_MID = 1000.0
"""Common switch temperature of the low and high polynomial ranges [K]."""

AIR_MOLE_FRACTIONS: dict[str, float] = {"O2": 0.2095, "N2": 0.7812, "AR": 0.0093}
"""Dry air by mole (common practice; CO2 and traces folded into N2 and Ar)."""

ELEMENTS = ("C", "H", "O", "N", "AR")
"""Element order of element-amount vectors (``b`` arrays) [-]."""

K_WGS_COMPLETE = 3.5
"""Water-gas-shift constant [CO][H2O]/([CO2][H2]) used for rich complete-combustion
products (Heywood 1988, section 4.9.1, from memory: 3.5 as a representative value)."""


# ----------------------------------------------------------------------------
# 1. Species
# ----------------------------------------------------------------------------
def molar_mass(elements: Mapping[str, float]) -> float:
    """Molar mass [kg/mol] of a formula given as ``{element: atoms}``."""
    return float(sum(ATOMIC_MASS_KG_PER_MOL[e] * n for e, n in elements.items()))


def species_molar_mass(name: str) -> float:
    """Molar mass [kg/mol] of a species in :data:`cyclesim.data.nasa7.NASA7`."""
    return molar_mass(_species_record(name)[5])


def _species_record(name: str) -> tuple:
    try:
        return NASA7[name]
    except KeyError:
        raise ConfigError(
            f"unknown species {name!r}" + suggestion(name, NASA7)
        ) from None


def nasa7_arrays(names: Sequence[str]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Stacked coefficients of several species.

    Returns
    -------
    low, high : ndarray (S, 7)
        Coefficients of the low and high temperature ranges [-].
    t_mid : ndarray (S,)
        Switch temperatures [K].
    """
    recs = [_species_record(n) for n in names]
    low = np.array([r[3] for r in recs], dtype=float)
    high = np.array([r[4] for r in recs], dtype=float)
    t_mid = np.array([r[1] for r in recs], dtype=float)
    return low, high, t_mid


def nasa7_dimless(low, high, t_mid: float, T) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """cp/R, h/(R T) and s°/R of one polynomial at temperatures ``T``.

    Parameters
    ----------
    low, high : array_like (7,)
        Coefficients of the low and high range [-].
    t_mid : float
        Switch temperature [K].
    T : numeric
        Temperature [K], any shape.

    Returns
    -------
    cp_R, h_RT, s_R : ndarray
        Dimensionless heat capacity, enthalpy and standard entropy (at
        :data:`P_REF`), shape of ``T``.
    """
    T = np.asarray(T, dtype=float)
    low = np.asarray(low, dtype=float)[None, :]
    high = np.asarray(high, dtype=float)[None, :]
    cp, h, s = _dimless_many(low, high, np.array([t_mid], dtype=float), T)
    return cp[..., 0], h[..., 0], s[..., 0]


def species_thermo_dimless(names: Sequence[str], T) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """cp/R, h/(RT), s°/R of species ``names`` at ``T``; shape ``T.shape + (S,)``."""
    low, high, t_mid = nasa7_arrays(names)
    T = np.asarray(T, dtype=float)
    return _dimless_many(low, high, t_mid, T)


def _dimless_many(low, high, t_mid, T):
    """As :func:`nasa7_dimless` for S species: result shape ``T.shape + (S,)``."""
    Tn = T[..., None]
    a = np.where(Tn[..., None] <= t_mid[:, None], low, high)  # (..., S, 7)
    a1, a2, a3, a4, a5, a6, a7 = (a[..., i] for i in range(7))
    cp = a1 + Tn * (a2 + Tn * (a3 + Tn * (a4 + Tn * a5)))
    h = a1 + Tn * (a2 / 2 + Tn * (a3 / 3 + Tn * (a4 / 4 + Tn * a5 / 5))) + a6 / Tn
    s = a1 * np.log(Tn) + Tn * (a2 + Tn * (a3 / 2 + Tn * (a4 / 3 + Tn * a5 / 4))) + a7
    return cp, h, s


def species_cp_mole(name: str, T) -> np.ndarray:
    """Molar isobaric heat capacity [J/(mol K)] of one species at ``T`` [K]."""
    return species_thermo_dimless([name], T)[0][..., 0] * R_U


def species_h_mole(name: str, T) -> np.ndarray:
    """Absolute molar enthalpy [J/mol] (formation included) of one species at ``T`` [K]."""
    T = np.asarray(T, dtype=float)
    return species_thermo_dimless([name], T)[1][..., 0] * R_U * T


def species_s_mole(name: str, T) -> np.ndarray:
    """Molar standard entropy at :data:`P_REF` [J/(mol K)] of one species at ``T`` [K]."""
    return species_thermo_dimless([name], T)[2][..., 0] * R_U


def poly_h_mole(nasa: tuple, T) -> np.ndarray:
    """Absolute molar enthalpy [J/mol] from a ``(T_low, T_mid, T_high, low7, high7)`` record."""
    T = np.asarray(T, dtype=float)
    return nasa7_dimless(nasa[3], nasa[4], nasa[1], T)[1] * R_U * T


def poly_cp_mole(nasa: tuple, T) -> np.ndarray:
    """Molar isobaric heat capacity [J/(mol K)] from a NASA-7 record."""
    return nasa7_dimless(nasa[3], nasa[4], nasa[1], T)[0] * R_U


# ----------------------------------------------------------------------------
# 2. Mixtures of fixed composition
# ----------------------------------------------------------------------------
def mixture_nasa7(
    mole_fractions: Mapping[str, float], records: Mapping[str, tuple] | None = None
) -> tuple[np.ndarray, np.ndarray, float]:
    """Polynomial of an ideal-gas mixture of fixed composition.

    The mixture's cp/R, h/RT, s°/R (the last without the mixing entropy) are
    the mole-weighted sums of the species', hence so are the coefficients.

    Parameters
    ----------
    mole_fractions : mapping
        Species name -> mole fraction [-] (normalised here).
    records : mapping, optional
        Extra NASA-7 records ``(T_low, T_mid, T_high, low7, high7, elements)``
        by name (e.g. a fuel vapour) that are not in the species data.

    Returns
    -------
    low, high : ndarray (7,)
        Mixture coefficients (per mole of mixture) [-].
    M : float
        Mixture molar mass [kg/mol].
    """
    records = {} if records is None else records
    total = float(sum(mole_fractions.values()))
    low = np.zeros(7)
    high = np.zeros(7)
    M = 0.0
    for name, x in mole_fractions.items():
        rec = records[name] if name in records else _species_record(name)
        if abs(rec[1] - T_MID) > 1e-9:
            raise ValueError(f"{name}: polynomial switch at {rec[1]} K, mixing needs {T_MID} K")
        x = x / total
        low += x * np.asarray(rec[3], dtype=float)
        high += x * np.asarray(rec[4], dtype=float)
        M += x * molar_mass(rec[5])
    return low, high, M


def stoich_o2_per_fuel(C: float, H: float, O: float) -> float:
    """Moles of O2 needed per mole of fuel C_c H_h O_o for complete combustion [-]."""
    return C + H / 4.0 - O / 2.0


def air_molar_mass() -> float:
    """Molar mass of the dry air of :data:`AIR_MOLE_FRACTIONS` [kg/mol]."""
    return sum(x * species_molar_mass(n) for n, x in AIR_MOLE_FRACTIONS.items())


def fresh_charge(fuel: "Fuel", phi: float) -> dict[str, float]:
    """Moles of each component of the fresh charge per mole of fuel [-].

    Keys ``"FUEL"``, ``"O2"``, ``"N2"``, ``"AR"``.  ``phi`` is the fuel-air
    equivalence ratio (actual over stoichiometric fuel/air) [-].
    """
    n_o2 = stoich_o2_per_fuel(fuel.C, fuel.H, fuel.O) / phi
    n_air = n_o2 / AIR_MOLE_FRACTIONS["O2"]
    return {
        "FUEL": 1.0,
        "O2": n_o2,
        "N2": n_air * AIR_MOLE_FRACTIONS["N2"],
        "AR": n_air * AIR_MOLE_FRACTIONS["AR"],
    }


def fresh_charge_elements(fuel: "Fuel", phi: float) -> tuple[np.ndarray, float]:
    """Element amounts of the fresh charge [mol/kg] (order :data:`ELEMENTS`) and y_fuel [-]."""
    n = fresh_charge(fuel, phi)
    m = (
        fuel.molar_mass_kg_per_mol
        + n["O2"] * species_molar_mass("O2")
        + n["N2"] * species_molar_mass("N2")
        + n["AR"] * species_molar_mass("AR")
    )
    b = np.array(
        [fuel.C, fuel.H, fuel.O + 2 * n["O2"], fuel.N + 2 * n["N2"], n["AR"]]
    ) / m
    return b, fuel.molar_mass_kg_per_mol / m


def complete_products(b, k_wgs: float = K_WGS_COMPLETE) -> dict[str, np.ndarray]:
    """Complete-combustion products of element amounts ``b`` [mol/kg] (order :data:`ELEMENTS`).

    Lean or stoichiometric: CO2, H2O, N2, O2, AR.  Rich: the oxygen short of
    complete combustion is taken from CO2 and H2O in the ratio set by the
    water-gas-shift equilibrium ``[CO][H2O] = K [CO2][H2]`` at the fixed ``k_wgs``
    (Heywood 1988, section 4.9.1, from memory).  Oxygen too scarce to turn all
    carbon into CO (no such case below phi ~3) raises ValueError.

    Returns
    -------
    dict
        Species -> amount [mol/kg] (same shape as ``b[..., 0]``).
    """
    b = np.asarray(b, dtype=float)
    C, H, O, N, Ar = (b[..., i] for i in range(5))
    excess = O - 2 * C - H / 2  # O atoms beyond complete combustion
    lean = excess >= -1e-12 * O  # stoichiometric to rounding counts as lean
    q = O - C  # O atoms for CO2 + H2O beyond CO: a + c = q
    if np.any(~lean & (q < 0)):
        raise ValueError("mixture too rich for gaseous products (not enough O for CO)")
    # Rich: a = CO2, c = H2O with (K-1) a^2 + beta a - C q = 0 (stable root form).
    beta = k_wgs * (H / 2 - q) + C + q
    disc = np.sqrt(np.maximum(beta * beta + 4 * (k_wgs - 1) * C * q, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        a_rich = np.where(beta + disc > 0, 2 * C * q / (beta + disc), 0.0)
    co2 = np.where(lean, C, a_rich)
    h2o = np.where(lean, H / 2, q - a_rich)
    return {
        "CO2": co2,
        "H2O": h2o,
        "N2": N / 2,
        "O2": np.where(lean, np.maximum(excess, 0.0) / 2, 0.0),
        "CO": np.where(lean, 0.0, C - co2),
        "H2": np.where(lean, 0.0, H / 2 - h2o),
        "AR": Ar,
    }


def heating_value_CO_H2() -> tuple[float, float]:
    """Lower heating values of CO and H2 [J/mol] from the species data at 298.15 K."""
    h = {n: float(species_h_mole(n, T_REF)) for n in ("CO", "H2", "O2", "CO2", "H2O")}
    lhv_co = h["CO"] + 0.5 * h["O2"] - h["CO2"]
    lhv_h2 = h["H2"] + 0.5 * h["O2"] - h["H2O"]
    return lhv_co, lhv_h2
