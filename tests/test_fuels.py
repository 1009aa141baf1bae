"""Fuel data: heating values, stoichiometry, vapour properties, look-up."""

from __future__ import annotations

import cantera as ct
import numpy as np
import pytest

from cyclesim.solve import gas_tables
from cyclesim.gas import thermo
from cyclesim.errors import ConfigError
from cyclesim.fuels import BUILTIN_FUELS, GASOLINE_SURROGATE, Fuel, custom_fuel, get_fuel

# Heywood 1988, Internal Combustion Engine Fundamentals, appendix D, from
# memory: LHV of the fuel as supplied (liquid for liquid fuels) [MJ/kg] and
# stoichiometric air-fuel ratio [-].
HEYWOOD_LHV = {"isooctane": 44.3, "methane": 50.0, "ethanol": 26.9, "gasoline": 44.0}
HEYWOOD_AFR = {"isooctane": 15.1, "methane": 17.2, "ethanol": 9.0, "gasoline": 14.6}


@pytest.mark.parametrize("name", list(BUILTIN_FUELS))
def test_lower_heating_value_against_handbook(name):
    # Our LHV is on a vapour basis; the handbook's liquid-basis value is lower
    # by the heat of vaporisation.  1 % for pure fuels; 2 % for the gasoline
    # surrogate (market gasolines themselves spread over about 43-44 MJ/kg).
    f = BUILTIN_FUELS[name]
    lhv_as_supplied = (f.lhv_J_per_kg - f.heat_of_vaporisation_J_per_kg) / 1e6
    rel = 2e-2 if name == "gasoline" else 1e-2
    assert lhv_as_supplied == pytest.approx(HEYWOOD_LHV[name], rel=rel)


@pytest.mark.parametrize("name", list(BUILTIN_FUELS))
def test_heating_value_consistent_with_cantera_enthalpies(name):
    # Heat of reaction at 298.15 K from Cantera's enthalpies of the same species
    # (gri30.yaml, nasa_gas.yaml): checks our bookkeeping, vapour basis.
    gri = ct.Solution("gri30.yaml")
    nasa = {s.name: s for s in ct.Species.list_from_file("nasa_gas.yaml")}
    key = {"isooctane": "C8H18,isooctane", "ethanol": "C2H5OH", "methane": "CH4"}
    f = BUILTIN_FUELS[name]
    if name == "gasoline":
        comp = {"IC8H18": "C8H18,isooctane", "NC7H16": "C7H16,n-heptane", "C7H8": "C7H8"}
        tot = sum(GASOLINE_SURROGATE.values())
        hf = sum(x / tot * nasa[comp[k]].thermo.h(298.15) for k, x in GASOLINE_SURROGATE.items())
    else:
        hf = nasa[key[name]].thermo.h(298.15)
    h = {s: gri.species(s).thermo.h(298.15) for s in ("O2", "CO2", "H2O", "N2")}
    o2 = f.C + f.H / 4 - f.O / 2
    q = (hf + o2 * h["O2"] - f.C * h["CO2"] - f.H / 2 * h["H2O"]) / 1e3  # J/mol
    assert f.lhv_J_per_kg == pytest.approx(q / f.molar_mass_kg_per_mol, rel=1e-9)


@pytest.mark.parametrize("name", list(BUILTIN_FUELS))
def test_stoichiometric_air_fuel_ratio(name):
    # Heywood 1988 appendix D (from memory): 0.5 % for pure fuels (3 digits),
    # 1.5 % for the surrogate.  Hydrocarbons C H_y also against Heywood's
    # (A/F)s = 34.56 (4 + y)/(12.011 + 1.008 y) (Heywood 1988 ch. 3, from memory).
    f = BUILTIN_FUELS[name]
    rel = 1.5e-2 if name == "gasoline" else 5e-3
    assert f.afr_stoich == pytest.approx(HEYWOOD_AFR[name], rel=rel)
    if f.O == 0:
        y = f.H / f.C
        assert f.afr_stoich == pytest.approx(34.56 * (4 + y) / (12.011 + 1.008 * y), rel=1e-3)


def test_gasoline_surrogate_is_gasoline_like():
    # market gasoline: H/C about 1.8-2.0, LHV 43-44 MJ/kg (Heywood 1988 app. D,
    # from memory); molar mass ~100-110 g/mol (common practice)
    f = BUILTIN_FUELS["gasoline"]
    assert 1.8 <= f.h_to_c <= 2.0
    assert 43.0e6 <= f.lhv_J_per_kg <= 44.0e6
    assert 0.095 < f.molar_mass_kg_per_mol < 0.115
    assert "surrogate" in f.source


def test_blend_vapour_properties_match_cantera_mixture():
    # the blend polynomial is the mole-weighted sum of the components'; check
    # cp and h against a Cantera ideal-gas mixture of the same NASA species
    nasa = {s.name: s for s in ct.Species.list_from_file("nasa_gas.yaml")}
    comp = {"IC8H18": "C8H18,isooctane", "NC7H16": "C7H16,n-heptane", "C7H8": "C7H8"}
    gas = ct.Solution(thermo="ideal-gas", species=[nasa[v] for v in comp.values()])
    f = BUILTIN_FUELS["gasoline"]
    for T in (300.0, 700.0, 1000.0, 1400.0):
        gas.TPX = T, 1e5, {comp[k]: v for k, v in GASOLINE_SURROGATE.items()}
        assert float(thermo.poly_cp_mole(f.nasa7, T)) == pytest.approx(gas.cp_mole / 1e3, rel=1e-9)
        assert float(thermo.poly_h_mole(f.nasa7, T)) == pytest.approx(gas.enthalpy_mole / 1e3, rel=1e-9)
    assert f.molar_mass_kg_per_mol == pytest.approx(gas.mean_molecular_weight / 1e3, rel=1e-9)


def test_custom_fuel_round_trip_and_scaled_heat_capacity():
    ref = BUILTIN_FUELS["isooctane"]
    f = custom_fuel("my-octane", 8, 18, 0, ref.lhv_J_per_kg / 1e6)
    # the LHV given fixes the formation enthalpy: back to iso-octane's
    assert f.hf298_J_per_mol == pytest.approx(ref.hf298_J_per_mol, rel=1e-9)
    assert f.afr_stoich == pytest.approx(ref.afr_stoich, rel=1e-12)
    # per-atom n-heptane scaling against the real iso-octane vapour (NASA
    # TM-4513): within 8 % over 300-1500 K (1 % at 300 K); for a fuel that is
    # ~6 % of the charge's mass that is < 0.5 % of the charge's cp
    T = np.linspace(300.0, 1500.0, 13)
    np.testing.assert_allclose(thermo.poly_cp_mole(f.nasa7, T), thermo.poly_cp_mole(ref.nasa7, T), rtol=8e-2)
    assert float(thermo.poly_cp_mole(f.nasa7, 300.0)) == pytest.approx(float(thermo.poly_cp_mole(ref.nasa7, 300.0)), rel=1e-2)
    # enthalpy continuous at the range joint
    h = thermo.poly_h_mole(f.nasa7, np.array([1000.0 - 1e-9, 1000.0 + 1e-9]))
    assert h[0] == pytest.approx(h[1], rel=1e-9)
    # energy bookkeeping of the tables holds for a custom fuel too
    g = gas_tables.build_gas_tables(f, [0.9], "complete")
    assert (g.h298_u - g.h298_b)[0] == pytest.approx(g.lhv_mix[0], rel=1e-10)


def test_get_fuel_by_name_mapping_and_errors():
    assert get_fuel("gasoline") is BUILTIN_FUELS["gasoline"]
    f = get_fuel({"C": 7.0, "H": 13.0, "O": 0.0, "lhv_MJ_per_kg": 43.0})
    assert isinstance(f, Fuel) and f.lhv_J_per_kg == pytest.approx(43.0e6)
    extra = {"e85": {"C": 2.6, "H": 7.1, "O": 0.85, "lhv_MJ_per_kg": 29.2}}
    assert get_fuel("e85", extra).name == "e85"
    with pytest.raises(ConfigError, match="did you mean 'gasoline'"):
        get_fuel("gasolene")
    with pytest.raises(ConfigError, match="did you mean 'lhv_MJ_per_kg'"):
        get_fuel({"C": 1, "H": 4, "lhv_MJ_per_kg_": 50.0})
    with pytest.raises(ConfigError, match="missing"):
        get_fuel({"C": 1, "H": 4})
    with pytest.raises(ConfigError):
        custom_fuel("bad", 1, 4, 0, -5.0)
    # frozen and hashable: usable as a cache key
    assert hash(BUILTIN_FUELS["ethanol"]) == hash(get_fuel("ethanol"))
