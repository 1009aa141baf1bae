"""Laminar burning velocity correlations (cyclesim.combustion.laminar_flame).

Reference: Cantera's freely propagating flame, GRI-Mech 3.0, mixture-averaged transport,
methane-air (propane-air reported only), stored in tests/data/laminar_flame_gri30.json by
benchmarks/laminar_flame_reference.py (Cantera version and settings in the file).  No flame is
solved here.  Gasoline is not checkable with GRI-Mech 3.0 (no such fuel in the mechanism).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cyclesim.combustion import laminar_flame as lf
from cyclesim.errors import ConfigError

DATA = json.loads((Path(__file__).parent / "data" / "laminar_flame_gri30.json").read_text())
CODE = {"CH4": lf.FUEL_CODES["methane"], "C3H8": lf.FUEL_CODES["propane"]}
BAND = 0.15

# Gated points (fuel, phi, T_u [K], p [bar], dilution) where the correlation misses the 15 % band
# against GRI-Mech 3.0, found when the reference was made: Gülder's (1984) methane fit (constants
# from memory) peaks at phi 1.075 and falls symmetrically, while GRI-Mech 3.0 falls faster on the
# rich side (phi 1.2: 20-33 % high); its temperature exponent 2.0 exceeds GRI's at 1 bar (GRI's
# 300 -> 450 K rise at phi 1 gives 1.68), so at 450 K, 1 bar it reads 16-33 % high; at 5 bar, 450 K
# the dilution factor's 13 % excess at f = 0.2 adds to a +3 % base.  Listed so that a change of the
# correlation or of the data that moves a point across the band edge is noticed.
KNOWN_MISSES = {
    ("CH4", 1.2, 300.0, 1.0, 0.0), ("CH4", 0.9, 450.0, 1.0, 0.0), ("CH4", 1.0, 450.0, 1.0, 0.0),
    ("CH4", 1.1, 450.0, 1.0, 0.0), ("CH4", 1.2, 450.0, 1.0, 0.0), ("CH4", 1.2, 300.0, 5.0, 0.0),
    ("CH4", 1.2, 450.0, 5.0, 0.0), ("CH4", 1.0, 450.0, 5.0, 0.2),
}


def _key(p):
    return (p["fuel"], p["phi"], p["T_u_K"], p["p_bar"], p["dilution"])


def _deviation(p):
    s = lf.laminar_burning_velocity(p["phi"], p["T_u_K"], p["p_bar"] * 1e5, p["dilution"],
                                    CODE[p["fuel"]])
    return s / p["S_L_m_per_s"] - 1.0


def test_reference_file_states_its_settings_and_is_grid_converged():
    s = DATA["settings"]
    assert s["cantera_version"] and "gri30" in s["mechanism"] and s["transport"] == "mixture-averaged"
    gated = [p for p in DATA["points"] if p["band"] == "gated"]
    assert len(gated) == 28
    for p in DATA["points"]:
        # fine grid against the coarse one (half the slope and curvature limits): below 2 %
        # (measured at most 1.5 %), so the fine grid's own error is under about 0.7 % (a
        # second-order scheme's error falls about fourfold when the spacing halves: change / 3)
        assert p["grid_change"] < 0.02, _key(p)
        assert 0.05 < p["S_L_m_per_s"] < 5.0 and 1500.0 < p["T_ad_K"] < 3000.0


def test_methane_within_band_of_gri30():
    gated = [p for p in DATA["points"] if p["band"] == "gated"]
    dev = {_key(p): _deviation(p) for p in gated}
    misses = {k for k, d in dev.items() if abs(d) > BAND}
    assert misses == KNOWN_MISSES
    inside = [abs(d) for k, d in dev.items() if k not in KNOWN_MISSES]
    assert len(inside) >= 0.7 * len(dev)  # 20 of 28 when the reference was made
    # the misses stay within 35 % (largest: +33 % at phi 1.2, 450 K, 1 bar)
    assert max(abs(dev[k]) for k in KNOWN_MISSES) < 0.35


def test_report_table():
    # reported, not gated: 700-800 K, 20-40 bar (beyond GRI-Mech 3.0's validation and the
    # correlations. range)
    rows = []
    for p in DATA["points"]:
        d = _deviation(p)
        rows.append(f"{p['fuel']:5s} phi {p['phi']:.1f} {p['T_u_K']:5.0f} K {p['p_bar']:4.0f} bar "
                    f"f {p['dilution']:.1f}  GRI {p['S_L_m_per_s']:.4f}  dev {100 * d:+6.1f} % "
                    f"[{p['band']}]")
        assert math.isfinite(d)
    print("\n" + "\n".join(rows))  # shown with pytest -s


def test_metghalchi_keck_form():
    # Metghalchi & Keck (1982) form; constants via Heywood (1988) table 9.3, from memory.
    # iso-octane, phi 1, 298 K, 1 atm: B_m + B_phi (1 - 1.13)^2 = 0.2632 - 0.8472 * 0.0169 m/s
    s = lf.laminar_burning_velocity(1.0, 298.0, 101325.0, 0.0, lf.FUEL_CODES["isooctane"])
    assert s == pytest.approx(0.2632 - 0.8472 * 0.13 ** 2, rel=1e-12)
    # the maximum over phi at 298 K, 1 atm is B_m, at phi_m
    phi = np.linspace(0.8, 1.5, 7001)
    for name, row in zip(("isooctane", "gasoline", "propane", "methanol"), lf.MK_CONSTANTS):
        s0 = lf.laminar_burning_velocity(phi, 298.0, 101325.0, 0.0, lf.FUEL_CODES[name])
        assert s0.max() == pytest.approx(row[1], rel=1e-6)
        assert phi[np.argmax(s0)] == pytest.approx(row[0], abs=2e-4)
    # exponents at phi 1: alpha 2.18, beta -0.16
    code = lf.FUEL_CODES["propane"]
    base = lf.laminar_burning_velocity(1.0, 298.0, 101325.0, 0.0, code)
    assert lf.laminar_burning_velocity(1.0, 596.0, 101325.0, 0.0, code) / base == pytest.approx(2 ** 2.18)
    assert lf.laminar_burning_velocity(1.0, 298.0, 1013250.0, 0.0, code) / base == pytest.approx(10 ** -0.16)
    # dilution: (1 - 2.06 f^0.77), Rhodes & Keck (1985, from memory)
    assert lf.laminar_burning_velocity(1.0, 298.0, 101325.0, 0.2, code) / base == pytest.approx(
        1 - 2.06 * 0.2 ** 0.77, rel=1e-12)


def test_gulder_form():
    # Gülder (1984), constants from memory: methane W 0.422 m/s, eta 0.15, xi 5.18, alpha 2, beta -0.5
    code = lf.FUEL_CODES["methane"]
    assert lf.laminar_burning_velocity(1.075, 300.0, 101325.0, 0.0, code) == pytest.approx(
        0.422 * 1.075 ** 0.15, rel=1e-12)
    assert lf.laminar_burning_velocity(1.075, 600.0, 4 * 101325.0, 0.1, code) == pytest.approx(
        0.422 * 1.075 ** 0.15 * 4.0 * 0.5 * (1 - 2.06 * 0.1 ** 0.77), rel=1e-12)
    e = lf.FUEL_CODES["ethanol"]
    assert lf.laminar_burning_velocity(1.0, 300.0, 101325.0, 0.0, e) == pytest.approx(
        0.465 * math.exp(-6.34 * 0.075 ** 2), rel=1e-12)


def test_outside_range_flags_extrapolation():
    m = lf.FUEL_CODES["methane"]
    assert not lf.outside_range(1.0, 400.0, 3e5, m)
    assert lf.outside_range(1.0, 750.0, 30e5, m)
    assert lf.outside_range(0.6, 400.0, 3e5, lf.FUEL_CODES["gasoline"])
    flags = lf.outside_range(np.array([1.0, 1.0]), np.array([400.0, 800.0]), 30e5,
                             lf.FUEL_CODES["isooctane"])
    assert flags.tolist() == [False, True]


def test_unknown_fuel_is_one_line_config_error():
    with pytest.raises(ConfigError, match="methanol"):
        lf.fuel_code("methanal")
    assert lf.fuel_code("ethanol") == 5


@settings(max_examples=60, deadline=None)
@given(code=st.integers(0, 5), phi=st.floats(0.7, 1.5), T=st.floats(300, 800),
       p=st.floats(1e5, 60e5), f=st.floats(0.0, 0.3))
def test_trends(code, phi, T, p, f):
    s = lf.laminar_burning_velocity(phi, T, p, f, code)
    assert s >= 0.0
    assert lf.laminar_burning_velocity(phi, T * 1.1, p, f, code) >= s
    assert lf.laminar_burning_velocity(phi, T, p, f + 0.05, code) <= s


def test_compiles_with_numba():
    pytest.importorskip("numba")
    from jit_helpers import njit_with_callees

    fn = njit_with_callees(lf.laminar_burning_velocity, lf, ("dilution_factor", "metghalchi_keck", "gulder"))
    for code in range(6):
        assert fn(0.95, 500.0, 20e5, 0.1, code) == pytest.approx(
            lf.laminar_burning_velocity(0.95, 500.0, 20e5, 0.1, code), rel=1e-12)


def test_extrapolation_note_names_what_lies_beyond_the_measurements():
    """The warning agrees with outside_range and names only the quantities beyond the stated
    measurement ranges (Gülder 1984 for methane; ranges from memory, RANGES)."""
    m = lf.FUEL_CODES["methane"]
    assert lf.extrapolation_note(1.0, 450.0, 6e5, m) is None
    note = lf.extrapolation_note(0.6, 450.0, 6e5, m)
    assert "Gülder (1984)" in note and "phi 0.60" in note and "K," not in note.split("meets")[1]
    note = lf.extrapolation_note(1.0, 820.0, 40e5, m)
    assert "unburned gas up to 820 K" in note and "pressure up to 39 atm" in note and "phi 1.00" not in note
    assert "820 K at the spark" in lf.extrapolation_note(1.0, 820.0, 6e5, m, at_spark=True)
    g = lf.FUEL_CODES["gasoline"]
    for phi, T, p in [(1.0, 650.0, 45e5), (0.7, 650.0, 45e5), (1.0, 750.0, 45e5), (1.0, 650.0, 60e5)]:
        assert (lf.extrapolation_note(phi, T, p, g) is None) is not bool(lf.outside_range(phi, T, p, g))


@pytest.mark.parametrize("fuel, warned", [("methane", True), ("gasoline", False)])
def test_the_entrainment_burn_warns_of_extrapolation(fuel, warned):
    """Methane's correlation (Gülder 1984) was measured up to 500 K: an engine's charge at the spark
    is hotter, so a methane run says so once; the gasoline demo at full load stays within
    Metghalchi & Keck's (1982) 700 K and 50 atm up to 90 % burned (one zone: the charge's temperature
    at the spark) and says nothing."""
    import cyclesim

    r = cyclesim.run("demo", ["burn.model=entrainment", "simulation.mode=closed", f"fuel.name={fuel}"])
    notes = [w for w in r.warnings if "laminar burning velocity extrapolated" in w]
    assert len(notes) == (1 if warned else 0)
