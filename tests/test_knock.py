"""End-gas autoignition: Douaud-Eyzat delay, Livengood-Wu integral, end-gas temperature, trends."""

from __future__ import annotations

import math
from types import SimpleNamespace as NS

import numpy as np
import pytest
from scipy.optimize import brentq

import cyclesim
from cyclesim.config import load_config
from cyclesim.params import validate_section
from cyclesim.roles import GasState, Knock, SetupContext
from cyclesim_plugins import knock as K

CLOSED = ["simulation.mode=closed", "simulation.step_deg=1.0", "knock.model=livengood_wu"]


def douaud_eyzat_ms(on, p_atm, T):
    """tau [ms] = 17.68 (ON/100)^3.402 p[atm]^-1.7 exp(3800/T) (Douaud & Eyzat 1978, SAE 780080; from memory)."""
    return 17.68 * (on / 100.0) ** 3.402 * p_atm ** -1.7 * math.exp(3800.0 / T)


class ConstantCpGas:
    """Fresh charge with constant cv, cp (ideal gas), for closed-form isentropes."""

    def __init__(self, cv, R):
        self.cv, self.R = cv, R

    def unburned(self, T):
        T = np.asarray(T, float)
        return self.cv * T, np.full_like(T, self.cv), np.full_like(T, self.R)


class LinearCpGas:
    """Fresh charge with cv = c0 + c1 T (ideal gas), for an isentrope solved independently."""

    def __init__(self, c0, c1, R):
        self.c0, self.c1, self.R = c0, c1, R

    def unburned(self, T):
        T = np.asarray(T, float)
        return self.c0 * T + 0.5 * self.c1 * T**2, self.c0 + self.c1 * T, np.full_like(T, self.R)


def build(B=1, gas=None, **values):
    vals = validate_section({}, K.LivengoodWu.params, "knock")
    vals.update(values)
    vals = {k: np.broadcast_to(np.asarray(v, float), (B,)).copy() for k, v in vals.items()}
    ctx = SetupContext(B=B, geometry=None, speed_rpm=np.full(B, 3000.0),
                       events=NS(ivc=np.full(B, -136.0), evo=np.full(B, 134.0)), valves=NS(),
                       operating=NS(), gas=gas or ConstantCpGas(750.0, 287.0), base_dir=None)
    return K.LivengoodWu(vals, ctx)


def state(**kw):
    base = dict(theta=-10.0, p=np.array([30e5]), p_ivc=np.array([30e5]), T_ivc=np.array([800.0]),
                x_b=np.array([0.0]), closed=np.array([True]), sub={})
    base.update(kw)
    return GasState(**base)


# -- the ignition-delay correlation -------------------------------------------

@pytest.mark.parametrize("on, p_atm, T, anchor_ms", [
    (95.0, 40.0, 900.0, 1.914),   # the formula below worked by hand, 4 digits
    (90.0, 30.0, 800.0, 4.402),
])
def test_douaud_eyzat_delay_matches_published_form(on, p_atm, T, anchor_ms):
    # Douaud & Eyzat 1978 (SAE 780080), coefficients from memory
    want = douaud_eyzat_ms(on, p_atm, T)
    got = K.douaud_eyzat_delay_ms(on, p_atm * 101325.0, T)
    assert got == pytest.approx(want, rel=1e-12)
    assert got == pytest.approx(anchor_ms, abs=6e-4)   # anchors are rounded to 4 digits


def test_delay_shortens_with_lower_octane_higher_pressure_and_temperature():
    # Douaud & Eyzat 1978: tau grows with ON (exponent 3.402), falls with p (-1.7) and T (exp(B/T))
    base = K.douaud_eyzat_delay_ms(95.0, 40 * 101325.0, 850.0)
    assert K.douaud_eyzat_delay_ms(85.0, 40 * 101325.0, 850.0) == pytest.approx(base * (85 / 95) ** 3.402)
    assert K.douaud_eyzat_delay_ms(95.0, 80 * 101325.0, 850.0) == pytest.approx(base * 2.0 ** -1.7)
    assert K.douaud_eyzat_delay_ms(95.0, 40 * 101325.0, 900.0) == pytest.approx(
        base * math.exp(3800.0 / 900.0 - 3800.0 / 850.0))


# -- the end-gas temperature ----------------------------------------------------

def test_isentropic_temperature_constant_cp():
    # ideal gas, constant cp: T2 = T1 (p2/p1)^(R/cp) (any thermodynamics text, e.g. Heywood 1988 ch. 3)
    gas = ConstantCpGas(cv=717.5, R=287.0)
    T = K.isentropic_temperature(gas, np.array([350.0]), np.array([40.0]))
    assert T[0] == pytest.approx(350.0 * 40.0 ** (287.0 / (717.5 + 287.0)), rel=1e-12)


def test_isentropic_temperature_variable_cp():
    # ideal gas with cp = (c0 + R) + c1 T: isentrope (c0 + R) ln(T/T1) + c1 (T - T1) = R ln(p2/p1)
    # (entropy of an ideal gas, any thermodynamics text), solved here by root finding.
    c0, c1, R, T1, r = 600.0, 0.35, 290.0, 345.0, 45.0   # cp rises about 1.2 %/100 K, like a fuel-air charge
    exact = brentq(lambda T: (c0 + R) * math.log(T / T1) + c1 * (T - T1) - R * math.log(r), T1, 3 * T1)
    got = K.isentropic_temperature(LinearCpGas(c0, c1, R), np.array([T1]), np.array([r]))[0]
    # cp at the log-mean temperature is exact for linear cp; 4 fixed-point passes leave about 0.01 K
    assert got == pytest.approx(exact, rel=1e-4)


# -- the integral's rate ---------------------------------------------------------

def test_rate_is_inverse_delay_at_ivc_state():
    # Livengood & Wu 1955: dI/dt = 1/tau.  At p = p_ivc the end gas is at T_ivc.
    m = build(octane_number=90.0)
    d = m.derivatives(state())[m.STATE]
    assert d[0] == pytest.approx(1e3 / douaud_eyzat_ms(90.0, 30e5 / 101325.0, 800.0), rel=1e-12)
    m2 = build(octane_number=90.0, delay_multiplier=4.0)
    assert m2.derivatives(state())[m.STATE][0] == pytest.approx(d[0] / 4.0, rel=1e-12)


def test_rate_stops_when_open_or_nearly_burned():
    m = build(min_unburned_fraction=0.1)
    assert m.derivatives(state(x_b=np.array([0.85])))[m.STATE][0] > 0.0
    assert m.derivatives(state(x_b=np.array([0.95])))[m.STATE][0] == 0.0
    assert m.derivatives(state(closed=np.array([False])))[m.STATE][0] == 0.0
    # before the first IVC the reference state is unknown: no count, no NaN
    got = m.derivatives(state(p_ivc=np.array([np.nan]), T_ivc=np.array([np.nan]), closed=np.array([False])))
    assert got[m.STATE][0] == 0.0


def test_declares_role_params_and_references():
    assert issubclass(K.LivengoodWu, Knock) and K.LivengoodWu.name == "livengood_wu"
    assert K.LivengoodWu in K.SUBMODELS and K.NoKnock in K.SUBMODELS
    assert len(K.LivengoodWu.references) >= 2
    (sv,) = build().states()
    assert sv.reset_at_ivc and sv.initial == 0.0


# -- whole closed cycles ----------------------------------------------------------

def closed_runs(*overrides):
    cases = [load_config("demo_closed", [*CLOSED, *ov]) for ov in overrides]
    res = cyclesim.simulate(cases)
    assert all(r.ok for r in res), [r.error for r in res]
    return [r.summary for r in res]


def grows(lo, hi):
    """hi knocks at least as much as lo: earlier onset, or a larger integral."""
    if math.isfinite(lo["knock_onset_deg"]) and math.isfinite(hi["knock_onset_deg"]):
        return hi["knock_onset_deg"] < lo["knock_onset_deg"]
    return hi["knock_integral_max"] > lo["knock_integral_max"] and not (
        math.isfinite(lo["knock_onset_deg"]) and not math.isfinite(hi["knock_onset_deg"]))


def test_hotter_intake_charge_knocks_more():
    # hotter end gas, shorter delay (Douaud & Eyzat 1978: exp(B/T)); Heywood 1988 §9.6 (from memory)
    cool, hot = closed_runs(["operating.ivc_temperature_K=335"], ["operating.ivc_temperature_K=375"])
    assert grows(cool, hot)
    assert hot["end_gas_temperature_max_K"] > cool["end_gas_temperature_max_K"]


def test_higher_compression_ratio_knocks_more():
    # higher end-gas pressure and temperature (Heywood 1988 §9.6, from memory)
    lo, hi = closed_runs(["engine.compression_ratio=9.5"], ["engine.compression_ratio=12"])
    assert grows(lo, hi)


def test_lower_octane_knocks_more_and_can_reach_onset():
    # Douaud & Eyzat 1978: tau ~ ON^3.402
    hi_on, lo_on, very_lo = closed_runs(["knock.octane_number=98"], ["knock.octane_number=90"],
                                        ["knock.octane_number=70"])
    assert grows(hi_on, lo_on) and grows(lo_on, very_lo)
    assert math.isfinite(very_lo["knock_onset_deg"])       # the check can find knock ...
    assert very_lo["knock_intensity"] == pytest.approx(very_lo["knock_unburned_fraction_at_onset"])
    assert very_lo["knock_integral_margin"] < 0.0
    assert very_lo["knock_unburned_fraction_at_onset"] >= 0.1 - 1e-9


def test_huge_delay_multiplier_gives_no_knock():
    (s,) = closed_runs(["knock.octane_number=70", "knock.delay_multiplier=100000"])
    assert math.isnan(s["knock_onset_deg"])
    assert s["knock_intensity"] == 0.0
    assert 0.0 < s["knock_integral_max"] < 1e-3 and s["knock_integral_margin"] > 0.999


def test_no_onset_once_almost_all_charge_is_burned():
    # with no cut-off the integral reaches 1 only after 90 % is burned; with the default
    # 10 % cut-off that late crossing must not be reported as knock.
    late, cut = closed_runs(
        ["knock.octane_number=85", "knock.delay_multiplier=1.2", "knock.min_unburned_fraction=0"],
        ["knock.octane_number=85", "knock.delay_multiplier=1.2"],
    )
    assert math.isfinite(late["knock_onset_deg"]) and late["knock_unburned_fraction_at_onset"] < 0.1
    assert math.isnan(cut["knock_onset_deg"]) and cut["knock_intensity"] == 0.0
    assert cut["knock_integral_max"] < 1.0


def test_figures_use_ivc_to_evo_of_the_trace():
    # plumbing: a full-cycle trace holds the previous cycle's integral before IVC (-136 deg);
    # the figures must ignore it.  Synthetic trace: I = (theta + 136)/200 after IVC, so
    # I = 1 at 64 deg, where mfb = (64 - 44)/40 = 0.5.
    m = build(octane_number=75.0)
    th = np.linspace(-360.0, 360.0, 721)[None, :]
    I = np.where(th < -136.0, 2.0, (th + 136.0) / 200.0)
    trace = {"crank_deg": th, "knock.I": I, "mfb": np.clip((th - 44.0) / 40.0, 0.0, 1.0),
             "pressure_bar": 1.0 + 40.0 * np.exp(-(th / 40.0) ** 2), "temperature_K": np.full_like(th, 350.0)}
    f = m.figures(trace)
    assert f["knock_onset_deg"][0] == pytest.approx(64.0, abs=1e-9)
    assert f["knock_unburned_fraction_at_onset"][0] == pytest.approx(0.5, abs=1e-9)
    assert f["knock_intensity"][0] == pytest.approx(0.5, abs=1e-9)
    assert f["knock_integral_max"][0] == pytest.approx(270.0 / 200.0)     # at EVO, 134 deg
    assert f["knock_integral_margin"][0] == pytest.approx(1.0 - 270.0 / 200.0)
    w = m.warnings(trace)[0]
    assert any("octane number 75" in x for x in w) and any("autoignition predicted" in x for x in w)


def test_printed_summary_has_the_knock_figures():
    # the run table shows the end-gas check whenever a knock model is chosen: the integral's maximum
    # (Livengood & Wu 1955: autoignition where it reaches 1), the onset or "none", the end-gas peak T
    from cyclesim.output import summary_table

    quiet = cyclesim.run("demo_turbo", ["simulation.step_deg=1.0"])
    loud = cyclesim.run("demo_turbo", ["simulation.step_deg=1.0", "burn.spark_advance_deg=30"])
    for res in (quiet, loud):
        text = summary_table(res)
        assert "Knock (end gas)" in text
        line = next(ln for ln in text.splitlines() if ln.strip().startswith("knock integral max"))
        assert float(line.split()[-1]) == pytest.approx(res.summary["knock_integral_max"], abs=6e-4)
    assert quiet.summary["knock_integral_max"] < 1.0 < loud.summary["knock_integral_max"]
    onset = next(ln for ln in summary_table(quiet).splitlines() if "autoignition onset" in ln)
    assert onset.split()[-1] == "none"
    onset = next(ln for ln in summary_table(loud).splitlines() if "autoignition onset" in ln)
    assert float(onset.split()[-3]) == pytest.approx(loud.summary["knock_onset_deg"], abs=0.06)
    assert "Knock" not in summary_table(cyclesim.run("demo", ["simulation.mode=closed", "simulation.step_deg=1.0"]))
