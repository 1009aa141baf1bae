"""Friction correlations against their published forms, and sanity of magnitudes."""

from types import SimpleNamespace

import numpy as np
import pytest

from cyclesim.cylinder.geometry import Geometry
from cyclesim.roles import Friction, FrictionInputs
from cyclesim_plugins import friction as fr

# 2-litre-class inline 4: 86 x 86 mm (4 x 0.4996 l), rc 10
BORE, STROKE, RC, NCYL = 0.086, 0.086, 10.0, 4


def geometry(B):
    return Geometry(np.full(B, BORE), np.full(B, STROKE), np.full(B, 0.145), np.full(B, RC))


def build(cls, B, **over):
    vals = {p.name: np.full(B, float(p.default)) for p in cls.params}
    vals.update({k: np.full(B, float(v)) for k, v in over.items()})
    return cls(vals, SimpleNamespace(B=B, geometry=geometry(B)))


def inputs(rpm, p_max_bar=60.0, p_intake_bar=1.0):
    rpm = np.atleast_1d(np.asarray(rpm, dtype=float))
    B = rpm.size
    g = geometry(B)
    return FrictionInputs(
        geometry=g, speed_rpm=rpm, Sp=g.mean_piston_speed(rpm), p_max=np.full(B, p_max_bar * 1e5),
        p_intake=np.full(B, p_intake_bar * 1e5), imep_gross=np.full(B, 11e5),
        theta_deg=np.zeros(1), p_trace=np.zeros((B, 1)), n_cylinders=np.full(B, float(NCYL)),
    )


def total(d):
    return sum(d.values())


def test_registered_classes():
    assert {c.name for c in fr.SUBMODELS} == {"none", "chen_flynn", "barnes_moss", "components"}
    for c in fr.SUBMODELS:
        assert issubclass(c, Friction) and c.summary
        assert all(p.doc and p.unit for p in c.params)
        if c.name != "none":
            assert c.references


def test_none_is_zero():
    assert np.all(total(build(fr.NoFriction, 2).fmep(inputs([1000, 5000]))) == 0)


def test_chen_flynn_published_form():
    # Chen & Flynn 1965 (SAE 650733): FMEP = A + B p_max + C Sp + D Sp^2, here in bar and m/s.
    A, Bc, C, D = 0.3, 0.006, 0.1, 0.001
    m = build(fr.ChenFlynn, 2, constant_bar=A, peak_pressure_factor=Bc,
              speed_coef_bar_s_per_m=C, speed_sq_coef_bar_s2_per_m2=D)
    f = inputs([2000.0, 5000.0], p_max_bar=70.0)
    Sp = 2 * STROKE * np.array([2000.0, 5000.0]) / 60
    expected = (A + Bc * 70.0 + C * Sp + D * Sp**2) * 1e5
    np.testing.assert_allclose(total(m.fmep(f)), expected, rtol=1e-12)
    assert not fr.ChenFlynn.includes_pumping
    assert "diesel" in fr.ChenFlynn.summary


def test_barnes_moss_published_form_includes_pumping():
    # Heywood 1988, eq. 13.15 (from memory): fmep[bar] = 0.97 + 0.15 (N/1000) + 0.05 (N/1000)^2
    m = build(fr.BarnesMoss, 3)
    N = np.array([1000.0, 2000.0, 6000.0])
    expected = (0.97 + 0.15 * N / 1000 + 0.05 * (N / 1000) ** 2) * 1e5
    np.testing.assert_allclose(total(m.fmep(inputs(N))), expected, rtol=1e-12)
    assert fr.BarnesMoss.includes_pumping


def published_components_kpa(N, p_i_over_pa, vis=1.0):
    """Sandoval & Heywood 2003 / Patton et al. 1989 terms, written out again (coefficients from memory).

    mm, rpm, m/s -> kPa; bearing and valve sizes as the model's default proportions of the bore.
    """
    B = S = 86.0
    nc = 4
    Sp = 2 * S / 1000 * N / 60
    v = np.sqrt(vis)
    Dmb, Lmb, nmb = 0.65 * B, 0.25 * B, nc + 1
    Drb, Lrb = 0.56 * B, 0.21 * B
    Lv, nv, ncb = 0.105 * B, 4 * nc, 2 * (nc + 1)
    crank = (
        1.22e5 * Dmb / (B**2 * S * nc)
        + 3.03e-4 * v * N * Dmb**3 * Lmb * nmb / (B**2 * S * nc)
        + 1.35e-10 * Dmb**2 * N**2 * nmb / nc
    )
    recip = (
        2.94e2 * v * Sp / B
        + 4.06e4 * (1 + 500 / N) / B**2
        + 6.89 * p_i_over_pa * (0.088 * RC + 0.182 * RC ** (1.33 - 2.38e-2 * Sp))
        + 3.03e-4 * v * N * Drb**3 * Lrb / (B**2 * S)
    )
    valve = (
        244 * v * N * ncb / (B**2 * S * nc)
        + 133 * (1 + 1000 / N) * nv / (S * nc)
        + 0.5 * v * Lv**1.5 * N**0.5 * nv / (B * S * nc)
        + 10.7 * (1 + 500 / N) * Lv * nv / (S * nc)
    )
    aux = 6.23 + 5.22e-3 * N - 1.79e-7 * N**2
    return {"crankshaft": crank, "reciprocating": recip, "valvetrain": valve, "auxiliaries": aux}


@pytest.mark.parametrize("N", [1500.0, 3000.0, 6000.0])
def test_components_published_form(N):
    m = build(fr.Components, 1, oil_viscosity_ratio=1.3)
    got = m.fmep(inputs(N, p_intake_bar=0.6))
    exp = published_components_kpa(N, 0.6e5 / 101325.0, vis=1.3)
    for k, v in exp.items():
        np.testing.assert_allclose(got[k], v * 1e3, rtol=1e-12, err_msg=k)
    assert got["accessory_load"][0] == 0.0
    terms = m.breakdown(inputs(N, p_intake_bar=0.6))
    assert total(terms)[0] == pytest.approx(total(got)[0], rel=1e-14)


def test_components_total_magnitude_2l_si():
    # Rubbing friction of a 2-litre SI engine at 2000-3000 rpm, full load: about 1-2 bar
    # (common practice; lower edge widened to 0.8 bar since the correlation describes
    # engines of the 1990s-2000s, which sit near 1 bar).
    m = build(fr.Components, 2)
    fm = total(m.fmep(inputs([2000.0, 3000.0]))) / 1e5
    assert np.all((fm > 0.8) & (fm < 2.0)), fm
    # mechanical efficiency at WOT, low-mid speed, about 90 % (Heywood 1988 sec. 2.5, from memory):
    # with imep_gross 11 bar and an assumed 0.2 bar pumping loss
    eta_m = (11.0 - 0.2 - fm) / 11.0
    assert np.all((eta_m > 0.85) & (eta_m < 0.95)), eta_m


def test_components_trends():
    m = build(fr.Components, 3)
    fm = total(m.fmep(inputs([2000.0, 4000.0, 6000.0])))
    assert np.all(np.diff(fm) > 0)  # friction rises with speed (Heywood 1988 ch. 13, common practice)
    lo = m.breakdown(inputs([3000.0] * 3, p_intake_bar=0.5))
    hi = m.breakdown(inputs([3000.0] * 3, p_intake_bar=1.0))
    # ring gas loading proportional to p_intake / p_atm (Patton et al. 1989 form)
    np.testing.assert_allclose(lo["ring_gas_loading"], 0.5 * hi["ring_gas_loading"], rtol=1e-12)


def test_components_accessory_load_adds_constant():
    base = build(fr.Components, 2)
    acc = build(fr.Components, 2, accessory_load_bar=0.25)
    f = inputs([2500.0, 5000.0])
    np.testing.assert_allclose(total(acc.fmep(f)) - total(base.fmep(f)), 0.25e5, rtol=1e-12)


def test_components_warn_beyond_their_fitted_piston_speed():
    # the component terms were fitted to production engines up to about 20 m/s mean piston speed
    # (from memory); 8000 rpm on the demo's 81.5 mm stroke is 21.7 m/s (Sp = 2 S N / 60)
    import cyclesim

    fast = cyclesim.run("demo", ["friction.model=components", "operating.speed_rpm=8000", "simulation.step_deg=1.0"])
    assert any("mean piston speed 21.7 m/s" in w for w in fast.warnings)
    mid = cyclesim.run("demo", ["friction.model=components", "simulation.step_deg=1.0"])
    assert not any("piston speed" in w for w in mid.warnings)
