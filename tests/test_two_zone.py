"""The two-zone cylinder (simulation.zones: two; cyclesim.loops.zones) against outside references."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import cyclesim
from cyclesim.combustion import burned_zones as bz
from cyclesim.errors import CyclesimError
from cyclesim.fuels import BUILTIN_FUELS
from cyclesim.gas import thermo
from cyclesim.loops import zones
from cyclesim.solve import kernel
from cyclesim.solve.gas_tables import build_gas_tables

AIR = {"O2": 0.2095, "N2": 0.7812, "AR": 0.0093}   # the tool's air (cyclesim.gas.thermo), by moles
TWO = ["simulation.zones=two"]
METHANE = ["fuel.name=methane"]


LOOPS = ("auto", "python")
"""The cycle loops: the compiled one (where numba is installed) and the numpy one."""


def _run(config, overrides):
    return cyclesim.run(config, list(overrides))


def _run_on(monkeypatch, loop, config, overrides):
    """A run on one loop (CYCLESIM_KERNEL), checked to have run there."""
    monkeypatch.setenv(kernel.ENV, loop)
    r = _run(config, overrides)
    if loop == "python":
        assert r.cycle_loop.startswith("numpy")
    elif kernel.compiled_module() is not None:
        assert r.cycle_loop == "compiled"
    return r


def _figures(summary, prefix=""):
    """The summary's values (nested dicts flattened) by dotted key, each with its scale: 0 for a
    top-level figure, the largest magnitude of its group for a figure in a nested dict (an energy
    balance's residuals are differences of its terms, zero but for rounding)."""
    out = {}
    for k, v in summary.items():
        if isinstance(v, dict):
            sub = _figures(v, f"{prefix}{k}.")
            scale = max((abs(x) for x, _ in sub.values() if isinstance(x, float) and np.isfinite(x)), default=0.0)
            out.update({key: (x, scale) for key, (x, _) in sub.items()})
        else:
            out[prefix + k] = (v, 0.0)
    return out


@pytest.fixture
def closed_pair(shared_runs):
    """The closed-cycle demo in one zone and in two, run once per session (tests/conftest.py)."""
    return shared_runs.run("demo_closed"), shared_runs.run("demo_closed", TWO)


def _cantera():
    ct = pytest.importorskip("cantera", reason="Cantera (test dependency) is not installed")
    return ct.Solution("gri30.yaml")


def _methane_charge(y_u):
    """Mass-specific mole numbers of methane-air at phi = 1 with the burned fraction y_u as frozen
    complete-combustion products (the composition the tool's unburned zone stands for)."""
    fuel = BUILTIN_FUELS["methane"]
    fresh = thermo.fresh_charge(fuel, 1.0)
    mass = sum(n * thermo.species_molar_mass("CH4" if s == "FUEL" else s) for s, n in fresh.items())
    b, _ = thermo.fresh_charge_elements(fuel, 1.0)
    X = {}
    for s, n in fresh.items():
        k = "CH4" if s == "FUEL" else s
        X[k] = X.get(k, 0.0) + (1 - y_u) * n / mass
    for s, n in thermo.complete_products(b).items():
        if float(n) > 0:
            X[s] = X.get(s, 0.0) + y_u * float(n)
    return X


def test_the_key_is_validated_in_one_line():
    with pytest.raises(CyclesimError, match="zones"):
        cyclesim.load_config("demo_closed", ["simulation.zones=three"])


@pytest.mark.parametrize("loop", LOOPS)
def test_without_a_burn_two_zones_equal_one_zone(monkeypatch, loop):
    # no burn (fuel cut): the cylinder is its unburned zone; within 1e-4 (the check)
    one = _run_on(monkeypatch, loop, "demo_closed", ["operating.fuel_cut=true"])
    two = _run_on(monkeypatch, loop, "demo_closed", ["operating.fuel_cut=true"] + TWO)
    p1, p2 = one.trace["pressure_bar"], two.trace["pressure_bar"]
    assert np.max(np.abs(p2 - p1) / p1) < 1e-4
    assert np.max(np.abs(two.trace["unburned_temperature_K"] / one.trace["temperature_K"] - 1.0)) < 1e-4
    assert np.all(np.isnan(two.trace["burned_temperature_K"]))


@pytest.mark.parametrize("config,extra", [("demo", ["simulation.max_cycles=3"]),
                                          ("demo", ["burn.model=entrainment", "simulation.max_cycles=3"]),
                                          ("demo_closed", ["burn.model=entrainment"])])
def test_two_zones_compiled_equal_the_numpy_loop(monkeypatch, capfd, config, extra):
    # one source for both loops (cyclesim.loops.zone_solve): every summary figure of the compiled two-zone
    # run within 1e-9 relative of the numpy loop's (rounding only: the same arithmetic in another order),
    # with no fall-back notice and the compiled-cycle counter risen; full cycles: a fixed count (3) to
    # keep the numpy runs short
    if kernel.compiled_module() is None:
        pytest.skip("numba is not installed: one loop only")
    ref = _run_on(monkeypatch, "python", config, TWO + extra)
    capfd.readouterr()
    before = kernel._used["compiled"]
    got = _run_on(monkeypatch, "auto", config, TWO + extra)
    assert kernel._used["compiled"] > before
    assert "numpy loop" not in capfd.readouterr().err
    a, b = _figures(got.summary), _figures(ref.summary)
    assert set(a) == set(b)
    compared = 0
    for k, (v, scale) in b.items():
        w = a[k][0]
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not isinstance(w, (int, float)):
            assert w == v or (v is None and w is None), k
        elif np.isfinite(v):
            assert w == pytest.approx(v, rel=1e-9, abs=1e-9 * scale), k
            compared += 1
        else:
            assert not np.isfinite(w), k
    assert compared > 40
    assert np.nanmax(np.abs(got.trace["unburned_temperature_K"] - ref.trace["unburned_temperature_K"])) < 1e-6
    # the one-zone option is untouched by the new key (reference figures: benchmarks/reference_figures.py)
    assert "unburned_temperature_K" not in _run(config, extra).trace


def test_zones_in_the_trace_are_consistent(closed_pair):
    # both zones fill the volume at the common pressure (ideal gas, p V = sum m_z R_z T_z), the burned
    # zone is hotter, and its temperature is the equilibrium gas of the burned-zone energy
    _, two = closed_pair
    tr = two.trace
    m = tr["mass_mg"] * 1e-6
    x = tr["zones.m_bz"] / m
    Tu, Tb = tr["unburned_temperature_K"], tr["burned_temperature_K"]
    on = (x > zones.X_BIRTH) & (x < zones.X_MERGE)
    assert on.sum() > 50
    assert np.all(np.isfinite(Tb[on])) and np.all(Tb[on] > Tu[on] + 800.0)
    assert np.all(np.diff(x) >= -1e-9)
    assert np.nanmax(Tb) == pytest.approx(two.summary["burned_zone_temperature_max_K"], rel=1e-9)


def test_constant_pressure_burn_gives_cantera_hp_flame_temperature():
    # a burn at constant pressure (H = U + p V held) leaves the burned zone at the adiabatic flame
    # temperature: against Cantera's equilibrate('HP') with GRI-Mech 3.0 (Smith et al. 1999), methane-air
    # phi = 1, within 5 K (the band: the tool's 12 species and its table interpolation)
    gri = _cantera()
    gas = build_gas_tables(BUILTIN_FUELS["methane"], [1.0])
    tab = zones.ZoneTables(gas)
    c = np.zeros(1, dtype=np.intp)
    for Tu0, p0, x in [(700.0, 20e5, 0.3), (850.0, 50e5, 0.6)]:
        m = np.array([1e-3])
        T0, P0 = np.array([Tu0]), np.array([p0])
        u_u, _, R_u = gas.unburned(T0)
        H = m * (u_u + R_u * Tu0)
        m_bz = x * m

        def p_at(V):
            p, _, Tb = zones.solve(gas, tab, c, m, V, H - p0 * V, m_bz, np.zeros(1), np.zeros(1), P0, T0, P0,
                                   np.ones(1, bool), np.ones(1, bool))
            return p, Tb

        V0 = m * R_u * Tu0 / p0 * (1 + 6.0 * x)
        lo, hi = V0 * 0.2, V0 * 2.0
        for _ in range(80):   # bisection on the volume for the pressure p0
            mid = 0.5 * (lo + hi)
            if p_at(mid)[0][0] > p0:
                lo = mid
            else:
                hi = mid
        p, Tb = p_at(0.5 * (lo + hi))
        assert p[0] == pytest.approx(p0, rel=1e-9)
        gri.set_equivalence_ratio(1.0, "CH4", AIR)
        gri.TP = Tu0, p0
        gri.equilibrate("HP")
        assert Tb[0] == pytest.approx(gri.T, abs=5.0)


def test_constant_volume_complete_burn_gives_cantera_uv_state():
    # an adiabatic constant-volume burn of the whole charge (U and V held) ends at Cantera's
    # equilibrate('UV') (GRI-Mech 3.0): within 3 K and 0.2 % in pressure (the band); just
    # before the merge (x = 0.9985) the resolved zones give the same pressure within 0.2 %
    gri = _cantera()
    gas = build_gas_tables(BUILTIN_FUELS["methane"], [1.0])
    tab = zones.ZoneTables(gas)
    c = np.zeros(1, dtype=np.intp)
    for Tu0, p0 in [(650.0, 15e5), (800.0, 40e5)]:
        m = np.array([1e-3])
        T0, P0 = np.array([Tu0]), np.array([p0])
        u_u, _, R_u = gas.unburned(T0)
        V = m * R_u * Tu0 / p0
        U = m * u_u
        rho = m / V
        T_end = bz.solve_T_urho(gas, u_u, rho, np.array([2800.0]))        # the merged zone: burned gas
        p_end = rho * gas.burned(T_end, rho)[3] * T_end
        p_m, _, Tb_m, _, _, _ = zones.cylinder_zones(gas, tab, c, m, V, U, m, m, np.zeros(1), p_end, T_end, T0, P0,
                                                     np.ones(1, bool))
        gri.set_equivalence_ratio(1.0, "CH4", AIR)
        gri.TP = Tu0, p0
        gri.equilibrate("UV")
        assert Tb_m[0] == pytest.approx(gri.T, abs=3.0)
        assert p_m[0] == pytest.approx(gri.P, rel=2e-3)
        x = 0.9985
        # the unburned rest on its isentrope at that pressure: the entropy above IVC is 0
        p_x, Tu_x, Tb_x = zones.solve(gas, tab, c, m, V, U, x * m, np.zeros(1), np.zeros(1), p_end, T0, P0,
                                      np.ones(1, bool), np.ones(1, bool))
        assert p_x[0] == pytest.approx(gri.P, rel=2e-3)


@pytest.mark.parametrize("loop", LOOPS)
def test_unburned_zone_follows_cantera_isentrope_without_heat(monkeypatch, loop):
    # no wall heat and no blowby: the unburned zone (methane-air with 6 % residual as frozen complete
    # products) follows Cantera's isentrope (GRI-Mech 3.0, gri.SP) from IVC to the end of the burn,
    # within 1 K (the 5 K entropy-table step and the explicit step)
    gri = _cantera()
    r = _run_on(monkeypatch, loop, "demo_closed", METHANE + TWO + ["heat_transfer.model=none", "blowby.model=none"])
    tr = r.trace
    Tu, p = tr["unburned_temperature_K"], tr["pressure_bar"] * 1e5
    m = tr["mass_mg"] * 1e-6
    x = tr["zones.m_bz"] / m
    gri.TPX = Tu[0], p[0], _methane_charge(0.06)
    s0 = gri.s
    worst = 0.0
    for j in np.flatnonzero(x < 0.95):
        gri.SP = s0, p[j]
        worst = max(worst, abs(Tu[j] - gri.T))
    assert worst < 1.0
    assert np.max(np.abs(tr["zones.s_u"])) < 1e-9


def test_wall_heat_cools_the_unburned_zone(closed_pair):
    # with heat loss the end gas ends below its isentrope (the heat flows out of the hot gas); the
    # knock model's one-zone end gas is that isentrope, an upper estimate (common practice)
    one, two = closed_pair
    tr = two.trace
    assert np.min(tr["zones.s_u"]) < 0.0


@pytest.mark.parametrize("loop", LOOPS)
def test_knock_integral_uses_the_unburned_zone_temperature(monkeypatch, loop):
    # the knock integral of a two-zone run is the integral of 1/tau (Douaud & Eyzat 1978, the kernel's
    # own correlation) at the trace's p and T_u: within 1 % (the trapezoidal rule on the output grid);
    # the compiled loop's knock state kernel reads the unburned zone's temperature as the numpy loop's
    from cyclesim_plugins import knock as kn

    r = _run_on(monkeypatch, loop, "demo_turbo", TWO + ["simulation.mode=closed", "knock.model=livengood_wu"])
    tr = r.trace
    th = tr["crank_deg"]
    p, Tu, xb = tr["pressure_bar"] * 1e5, tr["unburned_temperature_K"], tr["mfb"]
    speed = 3000.0
    case = cyclesim.load_config("demo_turbo", TWO + ["simulation.mode=closed"])
    on = case.submodels["knock"].params["octane_number"]
    tau_s = kn.douaud_eyzat_delay_ms(on, p, Tu) * 1e-3
    rate = np.where(xb < 1.0 - case.submodels["knock"].params["min_unburned_fraction"], 1.0 / tau_s, 0.0)
    dt = np.diff(th) / (6.0 * speed)
    I = np.concatenate([[0.0], np.cumsum(0.5 * (rate[1:] + rate[:-1]) * dt)])
    got = tr["knock.I"]
    k = np.argmax(got)
    assert got[k] > 0.05
    assert I[k] == pytest.approx(got[k], rel=1e-2)


@settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(spark=st.floats(5.0, 40.0), lam=st.floats(0.8, 1.3), p_ivc=st.floats(0.4, 2.0),
       speed=st.floats(1000.0, 6000.0))
def test_mass_and_energy_close_over_operating_points(spark, lam, p_ivc, speed):
    # the first law holds for every drawn point (energy closure as in one zone, about 1e-5 of the
    # released heat), the zones never hold more than the cylinder, and nothing is NaN where they live
    r = cyclesim.run("demo_closed", TWO + [f"burn.spark_advance_deg={spark}", f"operating.lambda={lam}",
                                           f"operating.ivc_pressure_bar={p_ivc}", f"operating.speed_rpm={speed}"])
    assert r.error is None
    eb = r.summary["energy_balance"]
    assert abs(eb["closure_fraction"]) < 1e-4
    tr = r.trace
    m = tr["mass_mg"] * 1e-6
    x = tr["zones.m_bz"] / m
    assert np.all(x <= 1.0 + 1e-12) and np.all(x >= 0.0)
    live = (x > zones.X_BIRTH) & (x < zones.X_MERGE)
    assert np.all(np.isfinite(tr["pressure_bar"]))
    assert np.all(np.isfinite(tr["unburned_temperature_K"][x < zones.X_MERGE]))
    assert np.all(np.isfinite(tr["burned_temperature_K"][live]))


def test_entrainment_flame_wets_the_walls_it_reaches():
    # the burned zone's share of the wall from the entrainment burn's spherical flame centred at the plug
    # (combustion.flame_geometry tables, whose wetted areas sum to the chamber's areas: checked in
    # tests/test_flame_geometry.py): none at no burned volume, all of it when the flame fills the
    # chamber, growing with the burned volume
    from cyclesim.registry import get_registry
    from cyclesim.roles import GasState
    from cyclesim.solve.batch import build_batch

    case = cyclesim.load_config("demo", ["burn.model=entrainment"])
    batch = build_batch([case], get_registry())
    burn, g = batch.models["burn"], batch.geometry
    for theta in (-20.0, 0.0, 25.0):
        V = np.atleast_1d(g.volume(theta)).astype(float)
        s = GasState(V=V)
        shares = [burn.burned_wall_share(s, f * V)[0] for f in np.linspace(0.0, 1.0, 11)]
        assert shares[-1] == pytest.approx(1.0, abs=1e-9)
        assert shares[0] == pytest.approx(0.0, abs=1e-3)
        assert np.all(np.diff(shares) >= -1e-9)


def test_entrainment_burn_runs_with_two_zones(shared_runs):
    # the flame-geometry split of the wall heat in the running cycle: energy closes, zones finite
    r = shared_runs.run("demo_closed", TWO + ["burn.model=entrainment", "simulation.step_deg=1.0"])
    assert abs(r.summary["energy_balance"]["closure_fraction"]) < 1e-4
    x = r.trace["zones.m_bz"] / (r.trace["mass_mg"] * 1e-6)
    live = (x > zones.X_BIRTH) & (x < zones.X_MERGE)
    assert live.sum() > 20 and np.all(np.isfinite(r.trace["burned_temperature_K"][live]))


def test_shared_runs_are_made_once(shared_runs, closed_pair):
    # the session's runs (tests/conftest.py SharedRuns) are made once: asking again returns the same
    # result without a new simulation
    made = shared_runs.made
    assert shared_runs.run("demo_closed", TWO) is closed_pair[1]
    assert shared_runs.run("demo_closed") is closed_pair[0]
    assert shared_runs.made == made
