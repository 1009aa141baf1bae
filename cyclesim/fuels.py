"""Fuels: composition, heating value, stoichiometric air-fuel ratio and vapour properties.

The fuel enters the cylinder as vapour premixed with air (fresh charge).  Its
lower heating value is derived from the same formation enthalpies the
property code uses (the NASA-7 polynomials at 298.15 K, water as vapour), so
the energy bookkeeping of :mod:`cyclesim.gas.thermo` is consistent with
``lhv_J_per_kg`` by construction.  That value is on a **vapour** basis;
handbooks quote liquid fuels on a liquid basis, lower by the heat of
vaporisation (``heat_of_vaporisation_J_per_kg``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

import cyclesim.gas.thermo as thermo
from .data.nasa7 import NASA7
from .errors import ConfigError
from .params import suggestion


@dataclass(frozen=True)
class Fuel:
    """A fuel of mean formula C_c H_h O_o N_n (atoms per molecule may be fractional).

    Attributes
    ----------
    name : str
    C, H, O, N : float
        Atoms per (mean) molecule [-].
    molar_mass_kg_per_mol : float
        Mean molar mass [kg/mol].
    lhv_J_per_kg : float
        Lower heating value of the vapour at 298.15 K [J/kg].
    afr_stoich : float
        Stoichiometric air-fuel mass ratio with the air of
        :data:`cyclesim.gas.thermo.AIR_MOLE_FRACTIONS` [-].
    nasa7 : tuple
        Vapour polynomial ``(T_low, T_mid, T_high, low7, high7)`` [K, -].
    source : str
        Where the data come from.
    heat_of_vaporisation_J_per_kg : float
        Heat of vaporisation of the liquid at about 298 K [J/kg]; 0 for gases.
    """

    name: str
    C: float
    H: float
    O: float
    N: float
    molar_mass_kg_per_mol: float
    lhv_J_per_kg: float
    afr_stoich: float
    nasa7: tuple
    source: str
    heat_of_vaporisation_J_per_kg: float = 0.0

    @property
    def h_to_c(self) -> float:
        """Hydrogen-to-carbon atom ratio [-]."""
        return self.H / self.C if self.C else float("inf")

    @property
    def hf298_J_per_mol(self) -> float:
        """Enthalpy of formation of the vapour at 298.15 K [J/mol]."""
        return float(thermo.poly_h_mole(self.nasa7, thermo.T_REF))


def _h298(name: str) -> float:
    return float(thermo.species_h_mole(name, thermo.T_REF))


def lhv_from_formation(C: float, H: float, O: float, N: float, hf_J_per_mol: float, M: float) -> float:
    """Lower heating value [J/kg] of C_c H_h O_o N_n vapour with formation enthalpy ``hf`` [J/mol].

    Products CO2, H2O (vapour) and N2, reactants fuel and O2, all at 298.15 K,
    from the species data of :mod:`cyclesim.data.nasa7`.
    """
    o2 = thermo.stoich_o2_per_fuel(C, H, O)
    q = hf_J_per_mol + o2 * _h298("O2") - C * _h298("CO2") - H / 2 * _h298("H2O") - N / 2 * _h298("N2")
    return q / M


def afr_stoich(C: float, H: float, O: float, M: float) -> float:
    """Stoichiometric air-fuel mass ratio [-] with the dry air of :mod:`cyclesim.gas.thermo`."""
    n_air = thermo.stoich_o2_per_fuel(C, H, O) / thermo.AIR_MOLE_FRACTIONS["O2"]
    return n_air * thermo.air_molar_mass() / M


def richest_lambda(C: float, H: float, O: float) -> float:
    """Smallest lambda whose products the real-gas model holds as gases only [-].

    The products are gases (CO2, H2O, CO, H2, O2, N2, Ar and, with equilibrium, their
    dissociation products); solid carbon (soot) is not part of the model.  A gaseous product
    set exists while the charge has at least one O atom per C atom (all carbon as CO, all
    hydrogen as H2): O_fuel + 2 n_O2 >= C with n_O2 = (C + H/4 - O/2) lambda per mole of fuel,
    so lambda >= (C - O) / (2 (C + H/4 - O/2)) (an element balance; Heywood 1988, section
    3.4 writes the same balances for rich products, from memory).  0 where the fuel itself
    holds enough oxygen."""
    st = thermo.stoich_o2_per_fuel(C, H, O)
    return max(0.0, (C - O) / (2.0 * st)) if st > 0 else 0.0


def check_rich_limit(case, extra: Mapping[str, Any] | None = None) -> None:
    """Refuse (ConfigError) a case's lambda richer than its fuel's :func:`richest_lambda`, where
    the real-gas model is used and fuel is burned; ``extra``: the plug-ins' fuels."""
    op, f = case.operating, case.fuel
    if case.gas.properties != "real" or op.fuel_cut:
        return
    if f.C is not None:
        C, H, O = f.C, f.H, f.O or 0.0
    else:
        fuel = get_fuel(f.name, extra)
        C, H, O = fuel.C, fuel.H, fuel.O
    lim = richest_lambda(C, H, O)
    lam = vars(op)["lambda"]
    if lam < lim:
        raise ConfigError(
            f"operating.lambda = {lam:g}: too rich for fuel {f.name!r}; it needs lambda >="
            f" {math.ceil(lim * 1000) / 1000:.3f}, below which its oxygen cannot turn all its carbon into CO"
            f" and the gas model (gaseous products only, no solid carbon) has no products for it")


def _make(name: str, C: float, H: float, O: float, N: float, nasa7: tuple, source: str,
          h_vap: float = 0.0) -> Fuel:
    M = thermo.molar_mass({"C": C, "H": H, "O": O, "N": N})
    hf = float(thermo.poly_h_mole(nasa7, thermo.T_REF))
    return Fuel(
        name=name, C=C, H=H, O=O, N=N, molar_mass_kg_per_mol=M,
        lhv_J_per_kg=lhv_from_formation(C, H, O, N, hf, M),
        afr_stoich=afr_stoich(C, H, O, M), nasa7=nasa7, source=source,
        heat_of_vaporisation_J_per_kg=h_vap,
    )


def _record(species: str) -> tuple:
    r = NASA7[species]
    return (r[0], r[1], r[2], tuple(r[3]), tuple(r[4]))


def _from_species(name: str, species: str, h_vap: float, note: str) -> Fuel:
    el = NASA7[species][5]
    return _make(name, el.get("C", 0.0), el.get("H", 0.0), el.get("O", 0.0), el.get("N", 0.0),
                 _record(species), f"{NASA7[species][6]}; {note}", h_vap)


GASOLINE_SURROGATE = {"IC8H18": 0.57, "NC7H16": 0.16, "C7H8": 0.27}
"""Mole fractions of the gasoline surrogate (iso-octane, n-heptane, toluene).

Chosen here so that H/C = 1.98 and the vapour LHV = 43.8 MJ/kg, inside the
range of market gasolines (H/C about 1.8-2.0, LHV 43-44 MJ/kg: Heywood 1988,
appendix D, from memory)."""


def _blend(name: str, mole_fractions: Mapping[str, float], h_vap: float, note: str) -> Fuel:
    tot = sum(mole_fractions.values())
    x = {k: v / tot for k, v in mole_fractions.items()}
    comp = {e: sum(xi * NASA7[k][5].get(e, 0.0) for k, xi in x.items()) for e in "CHON"}
    low = tuple(float(sum(xi * NASA7[k][3][i] for k, xi in x.items())) for i in range(7))
    high = tuple(float(sum(xi * NASA7[k][4][i] for k, xi in x.items())) for i in range(7))
    t_low = max(NASA7[k][0] for k in x)
    t_high = min(NASA7[k][2] for k in x)
    nasa7 = (t_low, thermo.T_MID, t_high, low, high)
    mix = ", ".join(f"{k} {v:.2f}" for k, v in x.items())
    src = (f"surrogate blend by mole ({mix}); vapour polynomial is the mole-weighted sum of the "
           f"components' NASA TM-4513 (McBride, Gordon & Reno 1993) polynomials; {note}")
    return _make(name, comp["C"], comp["H"], comp["O"], comp["N"], nasa7, src, h_vap)


_HVAP_NOTE = "heat of vaporisation: Heywood 1988, appendix D, from memory"

BUILTIN_FUELS: dict[str, Fuel] = {
    "gasoline": _blend("gasoline", GASOLINE_SURROGATE, 350e3, "gasoline surrogate; " + _HVAP_NOTE),
    "isooctane": _from_species("isooctane", "IC8H18", 308e3, _HVAP_NOTE),
    "ethanol": _from_species("ethanol", "C2H5OH", 840e3, _HVAP_NOTE),
    "methane": _from_species("methane", "CH4", 0.0, "gaseous fuel"),
}
"""Built-in fuels by name."""

_REFERENCE_HYDROCARBON = "NC7H16"
_REFERENCE_ATOMS = sum(NASA7[_REFERENCE_HYDROCARBON][5].values())


def custom_fuel(name: str, C: float, H: float, O: float = 0.0, lhv_MJ_per_kg: float = 44.0,
                N: float = 0.0) -> Fuel:
    """A fuel C_c H_h O_o N_n of given lower heating value (vapour basis).

    Parameters
    ----------
    name : str
    C, H, O, N : float
        Atoms per mean molecule [-].
    lhv_MJ_per_kg : float
        Lower heating value [MJ/kg].

    Notes
    -----
    The enthalpy of formation follows from the LHV and the product species'
    formation enthalpies.  The vapour heat capacity is that of n-heptane
    (NASA TM-4513 polynomial) scaled by the number of atoms per molecule,
    (C + H + O + N)/23, a per-atom scaling adequate for the fuel's small share
    of the charge's heat capacity; the enthalpy constants are then set so
    that h(298.15 K) is the formation enthalpy and h is continuous at 1000 K.
    """
    vals = {"C": C, "H": H, "O": O, "N": N, "lhv_MJ_per_kg": lhv_MJ_per_kg}
    for k, v in vals.items():
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not np.isfinite(v) or v < 0:
            raise ConfigError(f"fuel {name!r}: {k} must be a number >= 0, got {v!r}")
    if C + H <= 0:
        raise ConfigError(f"fuel {name!r}: needs carbon or hydrogen atoms")
    if lhv_MJ_per_kg <= 0:
        raise ConfigError(f"fuel {name!r}: lhv_MJ_per_kg must be > 0, got {lhv_MJ_per_kg!r}")
    if thermo.stoich_o2_per_fuel(C, H, O) <= 0:
        raise ConfigError(f"fuel {name!r}: contains enough oxygen to burn itself")
    C, H, O, N = float(C), float(H), float(O), float(N)
    M = thermo.molar_mass({"C": C, "H": H, "O": O, "N": N})
    lhv = lhv_MJ_per_kg * 1e6
    o2 = thermo.stoich_o2_per_fuel(C, H, O)
    hf = lhv * M - o2 * _h298("O2") + C * _h298("CO2") + H / 2 * _h298("H2O") + N / 2 * _h298("N2")
    ref = NASA7[_REFERENCE_HYDROCARBON]
    f = (C + H + O + N) / _REFERENCE_ATOMS
    low = [f * a for a in ref[3][:5]] + [0.0, f * ref[3][6]]
    high = [f * a for a in ref[4][:5]] + [0.0, f * ref[4][6]]
    T0, Tm = thermo.T_REF, thermo.T_MID
    # a6 of the low range: h(298.15)/R = hf/R; of the high range: continuity at T_mid
    h_lo0 = float(thermo.nasa7_dimless(low, low, Tm, T0)[1]) * T0
    low[5] = hf / thermo.R_U - h_lo0
    h_lo_m = float(thermo.nasa7_dimless(low, low, Tm, Tm)[1]) * Tm
    h_hi_m = float(thermo.nasa7_dimless(high, high, Tm, Tm)[1]) * Tm
    high[5] = h_lo_m - h_hi_m
    s_lo_m = float(thermo.nasa7_dimless(low, low, Tm, Tm)[2])
    s_hi_m = float(thermo.nasa7_dimless(high, high, Tm, Tm)[2])
    high[6] += s_lo_m - s_hi_m
    nasa7 = (ref[0], Tm, ref[2], tuple(low), tuple(high))
    fuel = Fuel(
        name=name, C=C, H=H, O=O, N=N, molar_mass_kg_per_mol=M, lhv_J_per_kg=lhv,
        afr_stoich=afr_stoich(C, H, O, M), nasa7=nasa7,
        source=("user-defined composition and LHV; vapour cp: n-heptane (NASA TM-4513) "
                "polynomial scaled per atom"),
    )
    return fuel


_SPEC_KEYS = ("name", "C", "H", "O", "N", "lhv_MJ_per_kg")


def get_fuel(spec: Any, extra: Mapping[str, Any] | None = None) -> Fuel:
    """The fuel a config names.

    Parameters
    ----------
    spec : str, Fuel or mapping
        A built-in name (:data:`BUILTIN_FUELS`), a name defined in ``extra``,
        a :class:`Fuel`, or a mapping ``{C, H, O, lhv_MJ_per_kg}`` (``name``
        and ``N`` optional) for :func:`custom_fuel`.
    extra : mapping, optional
        Further named fuels: name -> Fuel or such a mapping.

    Raises
    ------
    ConfigError
        Unknown name (with a close-spelling suggestion) or a bad mapping.
    """
    if isinstance(spec, Fuel):
        return spec
    if isinstance(spec, Mapping):
        for k in spec:
            if k not in _SPEC_KEYS:
                raise ConfigError(
                    f"fuel.{k}: unknown key" + suggestion(str(k), _SPEC_KEYS)
                    + f"; allowed: {', '.join(_SPEC_KEYS)}"
                )
        for k in ("C", "H", "lhv_MJ_per_kg"):
            if k not in spec:
                raise ConfigError(f"fuel.{k}: missing value (a custom fuel needs C, H, O, lhv_MJ_per_kg)")
        return custom_fuel(str(spec.get("name", "custom")), spec["C"], spec["H"],
                           spec.get("O", 0.0), spec["lhv_MJ_per_kg"], spec.get("N", 0.0))
    if isinstance(spec, str):
        named = dict(BUILTIN_FUELS)
        if extra:
            named.update(extra)
        key = spec.strip()
        if key in named:
            f = named[key]
            if isinstance(f, Mapping):
                f = get_fuel({"name": key, **f})
            return f
        raise ConfigError(
            f"unknown fuel {spec!r}" + suggestion(key, named)
            + f"; known: {', '.join(sorted(named))}"
        )
    raise ConfigError(f"fuel: expected a name or a mapping {{C, H, O, lhv_MJ_per_kg}}, got {spec!r}")
