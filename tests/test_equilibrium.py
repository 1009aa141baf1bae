"""Burned-gas chemical equilibrium at given temperature and density."""

from __future__ import annotations

import cantera as ct
import numpy as np
import pytest

from cyclesim.gas import equilibrium as eq
from cyclesim.gas import thermo
from cyclesim.fuels import BUILTIN_FUELS, custom_fuel

STATES = [(1500.0, 5.0), (2200.0, 1.0), (2600.0, 30.0), (3000.0, 0.1), (3400.0, 100.0)]


@pytest.fixture(scope="module")
def products_gas():
    # Cantera ideal gas of exactly our 12 species with their GRI-Mech 3.0 data
    gri = {s.name: s for s in ct.Species.list_from_file("gri30.yaml")}
    return ct.Solution(thermo="ideal-gas", species=[gri[s] for s in eq.SPECIES])


def _cantera_tv(gas, b, T, rho):
    prod = thermo.complete_products(b)
    gas.TDX = T, rho, {k: float(v) for k, v in prod.items() if v > 0}
    gas.equilibrate("TV")
    return np.array([gas[s].X[0] for s in eq.SPECIES])


@pytest.mark.parametrize("fuel", ["methane", "isooctane"])
@pytest.mark.parametrize("phi", [0.6, 1.0, 1.4])
def test_composition_matches_cantera_same_species(products_gas, fuel, phi):
    # Cantera equilibrate('TV') of the same 12 species and data: the same
    # problem, so agreement is to solver precision (tighter than needed:
    # majors 1e-6 absolute, species above 1e-5 within 1e-4 relative).
    b, _ = thermo.fresh_charge_elements(BUILTIN_FUELS[fuel], phi)
    T = np.array([s[0] for s in STATES])
    rho = np.array([s[1] for s in STATES])
    x = eq.equilibrate_tv(T, rho, b).n
    x = x / x.sum(axis=1, keepdims=True)
    for i, (t, r) in enumerate(STATES):
        xc = _cantera_tv(products_gas, b, t, r)
        np.testing.assert_allclose(x[i], xc, atol=1e-6)
        big = xc > 1e-5
        np.testing.assert_allclose(x[i][big], xc[big], rtol=1e-4)


@pytest.mark.parametrize("phi", [0.8, 1.0, 1.2])
def test_composition_close_to_full_mechanism_species_set(phi):
    # Cantera gri30 with all 53 species (HO2, NO2, N2O, HNO, CH4 ... added):
    # our 12-species set (Olikara & Borman 1975, from memory) should leave the
    # majors within 1e-3 absolute and minors above 1e-4 within 3 % relative.
    gas = ct.Solution("gri30.yaml")
    b, _ = thermo.fresh_charge_elements(BUILTIN_FUELS["methane"], phi)
    for T, rho in [(2400.0, 10.0), (2800.0, 30.0)]:
        gas.set_equivalence_ratio(phi, "CH4", {"O2": 0.2095, "N2": 0.7812, "AR": 0.0093})
        gas.TD = T, rho
        gas.equilibrate("TV")
        xc = np.array([gas[s].X[0] for s in eq.SPECIES])
        n = eq.equilibrate_tv([T], [rho], b).n[0]
        x = n / n.sum()
        np.testing.assert_allclose(x, xc, atol=1e-3)
        big = xc > 1e-4
        np.testing.assert_allclose(x[big], xc[big], rtol=3e-2)


def test_converges_over_the_whole_range_and_conserves_elements():
    # 250-4000 K, 0.01-300 kg/m^3, phi 0.3-2, every built-in fuel: converged,
    # non-negative, and the element balances hold (conservation of atoms).
    T, rho = np.meshgrid(np.linspace(250.0, 4000.0, 40), np.geomspace(0.01, 300.0, 12))
    T, rho = T.ravel(), rho.ravel()
    A = np.array([[thermo.NASA7[s][5].get(e, 0.0) for s in eq.SPECIES] for e in thermo.ELEMENTS])
    for fuel in BUILTIN_FUELS.values():
        for phi in (0.3, 0.7, 1.0, 1.3, 2.0):
            b, _ = thermo.fresh_charge_elements(fuel, phi)
            res = eq.equilibrate_tv(T, rho, b)
            assert res.iterations < 40
            assert np.all(res.n >= 0)
            np.testing.assert_allclose(res.n @ A.T, np.broadcast_to(b, (T.size, 5)), rtol=1e-9)


def test_low_temperature_limit_is_complete_combustion():
    # At low temperature dissociation and NO vanish: lean products are CO2,
    # H2O, N2, O2 (stoichiometry; at 500 K NO is ~1e-8); rich, the water-gas
    # shift CO2 + H2 = CO + H2O sits at its equilibrium constant K = exp(-dG°/RT)
    # (no mole change, Kc = Kp), the rest is negligible.
    T = np.array([800.0])
    rho = np.array([2.0])
    b, _ = thermo.fresh_charge_elements(BUILTIN_FUELS["isooctane"], 0.8)
    n = eq.equilibrate_tv(np.array([500.0]), rho, b).n[0]
    ref = thermo.complete_products(b)
    for k in ("CO2", "H2O", "N2", "O2", "AR"):
        assert n[eq.SPECIES.index(k)] == pytest.approx(float(ref[k]), rel=1e-6)
    b, _ = thermo.fresh_charge_elements(BUILTIN_FUELS["isooctane"], 1.3)
    n = dict(zip(eq.SPECIES, eq.equilibrate_tv(T, rho, b).n[0]))
    g = {s: float(thermo.species_h_mole(s, 800.0)) - 800.0 * float(thermo.species_s_mole(s, 800.0))
         for s in ("CO2", "H2", "CO", "H2O")}
    K = np.exp(-(g["CO"] + g["H2O"] - g["CO2"] - g["H2"]) / (thermo.R_U * 800.0))
    assert n["CO"] * n["H2O"] / (n["CO2"] * n["H2"]) == pytest.approx(K, rel=1e-8)


def test_dissociation_grows_as_density_falls():
    # Le Chatelier: dissociation (more moles) is favoured at low density, so
    # R rises and u rises as rho falls at fixed T (Heywood 1988 section 4.9, from memory).
    b, _ = thermo.fresh_charge_elements(BUILTIN_FUELS["gasoline"], 1.0)
    p = eq.equilibrium_properties(np.full(4, 2800.0), np.array([0.1, 1.0, 10.0, 100.0]), b)
    assert np.all(np.diff(p["R"]) < 0) and np.all(np.diff(p["u"]) < 0)
    assert np.all(p["u_lnrho"] < 0) and np.all(p["R_lnrho"] < 0)


def test_analytic_sensitivities_match_central_differences():
    # u_T, R_T (constant rho) and u_lnrho, R_lnrho (constant T) include the
    # composition shift: compare with central differences of the equilibrium.
    rng = np.random.default_rng(11)
    T = rng.uniform(300.0, 3900.0, 400)
    rho = np.exp(rng.uniform(np.log(0.01), np.log(300.0), 400))
    for phi in (0.7, 1.0, 1.4):
        b, _ = thermo.fresh_charge_elements(BUILTIN_FUELS["gasoline"], phi)
        p = eq.equilibrium_properties(T, rho, b)
        h = 0.5
        pp = eq.equilibrium_properties(T + h, rho, b)
        pm = eq.equilibrium_properties(T - h, rho, b)
        np.testing.assert_allclose((pp["u"] - pm["u"]) / (2 * h), p["u_T"], rtol=1e-4)
        np.testing.assert_allclose((pp["R"] - pm["R"]) / (2 * h), p["R_T"], rtol=1e-3, atol=1e-7)
        e = 1e-4
        pp = eq.equilibrium_properties(T, rho * np.exp(e), b)
        pm = eq.equilibrium_properties(T, rho * np.exp(-e), b)
        np.testing.assert_allclose((pp["u"] - pm["u"]) / (2 * e), p["u_lnrho"], rtol=1e-4, atol=1e-2)
        np.testing.assert_allclose((pp["R"] - pm["R"]) / (2 * e), p["R_lnrho"], rtol=1e-4, atol=1e-6)
        # equilibrium cv exceeds frozen cv (the composition shift absorbs energy)
        assert np.all(p["u_T"] >= p["cv_frozen"] * (1 - 1e-9))


def test_carbon_free_fuel_is_handled():
    # hydrogen: the carbon potential has no carbon to balance; the solver
    # still converges and leaves only traces of carbon species
    f = custom_fuel("hydrogen", 0.0, 2.0, 0.0, 120.0)
    b, _ = thermo.fresh_charge_elements(f, 0.8)
    n = eq.equilibrate_tv(np.array([300.0, 2500.0]), np.array([1.0, 10.0]), b).n
    assert n[:, eq.SPECIES.index("CO2")].max() < 1e-12
    assert n[:, eq.SPECIES.index("H2O")].min() > 0.1
