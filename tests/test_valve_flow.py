"""Poppet-valve lift, flow area and compressible mass flow."""

from __future__ import annotations

import math
from types import SimpleNamespace as NS

import numpy as np
import pytest

from cyclesim.errors import ConfigError, InputFileError
from cyclesim.params import validate_section
from cyclesim.roles import GasState, SetupContext, ValveFlow
from cyclesim_plugins import valve_flow as VF

THRESHOLD_M = 0.1e-3
EVENTS = dict(ivo=-370.0, ivc=-140.0, evo=130.0, evc=370.0)


def make_ctx(B=1, base_dir=None, **over):
    ev = {**EVENTS, **{k: v for k, v in over.items() if k in EVENTS}}
    valves = dict(intake_diameter_mm=32.0, exhaust_diameter_mm=27.0, intake_max_lift_mm=9.0,
                  exhaust_max_lift_mm=8.5, intake_count=2.0, exhaust_count=2.0)
    valves.update({k: v for k, v in over.items() if k in valves})
    arr = lambda v: np.broadcast_to(np.asarray(v, dtype=float), (B,)).copy()  # noqa: E731
    return SetupContext(
        B=B, geometry=None, speed_rpm=arr(2000.0),
        events=NS(**{k: arr(v) for k, v in ev.items()}, threshold_lift_m=arr(THRESHOLD_M)),
        valves=NS(**{k: arr(v) for k, v in valves.items()}),
        operating=NS(), gas=None, base_dir=base_dir)


def make_valves(B=1, base_dir=None, ctx_over=None, **values):
    vals = validate_section({}, VF.PoppetValves.params, "valve_flow")
    vals.update(values)
    vals = {k: (np.full(B, v, dtype=float) if isinstance(v, float) else v) for k, v in vals.items()}
    return VF.PoppetValves(vals, make_ctx(B, base_dir, **(ctx_over or {})))


def state(theta, p, T=1000.0, R=290.0, g=1.3, p_int=1.0e5, p_exh=1.05e5, B=1):
    o = np.ones(B)
    return GasState(theta=theta, p=p * o, T=T * o, R=R * o, gamma=g * o,
                    p_int=p_int * o, T_int=300.0 * o, R_int=287.0 * o, gamma_int=1.4 * o,
                    p_exh=p_exh * o, T_exh=900.0 * o, R_exh=290.0 * o, gamma_exh=1.33 * o)


def test_declared_defaults_validate():
    for cls in VF.SUBMODELS:
        assert issubclass(cls, ValveFlow) and cls.name
        validate_section({}, cls.params, cls.name)


@pytest.mark.parametrize("dwell", [0.0, 0.15, 0.6])
def test_lift_is_threshold_at_events_and_max_between(dwell):
    v = make_valves(lift_dwell_fraction=dwell)
    L = v.lift(np.array([-370.0, -140.0, 130.0, 370.0, -255.0, 250.0]))
    # events are defined at the threshold lift (the brief's convention)
    np.testing.assert_allclose(L["intake"][0, :2], THRESHOLD_M, rtol=1e-9)
    np.testing.assert_allclose(L["exhaust"][0, 2:4], THRESHOLD_M, rtol=1e-9)
    # mid-way between the events the valve is at full lift
    assert L["intake"][0, 4] == pytest.approx(9.0e-3, rel=1e-9)
    assert L["exhaust"][0, 5] == pytest.approx(8.5e-3, rel=1e-9)


def test_lift_bounded_periodic_and_below_threshold_outside_events():
    v = make_valves()
    th = np.arange(-720.0, 720.0, 0.05)
    L = v.lift(th)
    L720 = v.lift(th + 720.0)
    for k, lmax in (("intake", 9e-3), ("exhaust", 8.5e-3)):
        assert np.all(L[k] >= 0.0) and np.all(L[k] <= lmax * (1 + 1e-12))
        np.testing.assert_allclose(L720[k], L[k], rtol=0, atol=1e-15)
        # continuous: steps on a 0.05 deg grid stay far below the max lift
        assert np.max(np.abs(np.diff(L[k][0]))) < 0.01 * lmax
    phase = np.mod(th + 370.0, 720.0)  # degrees after IVO
    closed = phase > 230.0  # IVC - IVO = 230 deg
    assert np.all(L["intake"][0, closed] < THRESHOLD_M * (1 + 1e-9))
    assert np.all(L["intake"][0, ~closed] >= THRESHOLD_M * (1 - 1e-9))
    # overlap around the gas-exchange TDC (+-360): both valves open
    both = v.lift(np.array([360.0, -360.0]))
    assert np.all(both["intake"] > THRESHOLD_M) and np.all(both["exhaust"] > THRESHOLD_M)


def test_curtain_area_at_low_lift_port_area_at_high_lift():
    # Unit C_D isolates the geometric area (Heywood 1988 ch. 6: curtain pi D L).
    v = make_valves(cd_table=[[0.0, 1.0]], port_area_ratio=0.9)
    th = np.array([-365.0, -255.0])
    L = v.lift(th)["intake"][0]
    A = v.flow_area(th)["intake"][0]
    D = 32e-3
    assert L[0] / D < 0.9 / 4  # below the lift where curtain = port area
    assert A[0] == pytest.approx(2 * math.pi * D * L[0], rel=1e-12)
    assert A[1] == pytest.approx(2 * 0.9 * math.pi * D**2 / 4, rel=1e-12)


def test_user_cd_table_is_interpolated():
    v = make_valves(cd_table=[[0.0, 0.7], [0.3, 0.4]], port_area_ratio=10.0)
    th = np.linspace(-369.0, -141.0, 25)
    L = v.lift(th)["intake"][0]
    A = v.flow_area(th)["intake"][0]
    D = 32e-3
    want_cd = np.interp(L / D, [0.0, 0.3], [0.7, 0.4])
    np.testing.assert_allclose(A / (2 * math.pi * D * L), want_cd, rtol=1e-12)


def test_default_cd_curve_shape():
    # Heywood 1988 ch. 6, from memory: about 0.6-0.7 at low L/D, falling at high lift.
    v = make_valves()
    cd = v.discharge_coefficient(np.array([0.02, 0.08, 0.15, 0.25, 0.35]))
    assert np.all((cd[:2] >= 0.6) & (cd[:2] <= 0.7))
    assert np.all(np.diff(cd) < 0.0)


@pytest.mark.parametrize("table, msg", [
    ([[0.0, 0.7], [0.0, 0.6]], "does not increase"),
    ([[0.0, 0.7], [0.2, 1.3]], "(0, 1]"),
    ([[0.0, "x"]], "number pairs"),
])
def test_bad_cd_table_rejected(table, msg):
    with pytest.raises(ConfigError, match=msg.replace("(", r"\(").replace("]", r"\]")):
        make_valves(cd_table=table)


def test_flow_signs_and_backflow():
    v = make_valves()
    th = -300.0  # intake stroke, intake open, exhaust shut
    m_in, m_ex = v.mass_flows(state(th, p=0.9e5))
    assert m_in[0] > 0.0 and m_ex[0] == 0.0
    m_in, _ = v.mass_flows(state(th, p=1.2e5))  # cylinder above intake: backflow
    assert m_in[0] < 0.0
    m_in, _ = v.mass_flows(state(th, p=1.0e5))
    assert m_in[0] == 0.0
    # closed part of the cycle: no flow at all
    m_in, m_ex = v.mass_flows(state(0.0, p=40e5))
    assert m_in[0] == 0.0 and m_ex[0] == 0.0
    # exhaust stroke with exhaust above cylinder: flow back in from the exhaust
    _, m_ex = v.mass_flows(state(250.0, p=1.0e5, p_exh=1.1e5))
    assert m_ex[0] > 0.0


def test_choked_blowdown_matches_textbook_formula():
    # Choked orifice flow, Heywood 1988 App. C:
    # mdot = CdA p0 / sqrt(R T0) sqrt(g) (2/(g+1))^((g+1)/(2(g-1)))
    v = make_valves()
    p0, T0, R, g = 5.0e5, 1400.0, 290.0, 1.3
    theta = 180.0  # a node of the area grid; exhaust open, intake shut
    cda = v.flow_area(np.array([theta]))["exhaust"][0, 0]
    want = cda * p0 / math.sqrt(R * T0) * math.sqrt(g) * (2 / (g + 1)) ** ((g + 1) / (2 * (g - 1)))
    m_in, m_ex = v.mass_flows(state(theta, p=p0, T=T0, R=R, g=g, p_exh=1.0e5))
    assert m_in[0] == 0.0
    assert -m_ex[0] == pytest.approx(want, rel=1e-9)
    # between grid nodes the tabulated area differs from the exact one by < 1e-4
    cda2 = v.flow_area(np.array([180.1]))["exhaust"][0, 0]
    _, m_ex2 = v.mass_flows(state(180.1, p=p0, T=T0, R=R, g=g, p_exh=1.0e5))
    assert -m_ex2[0] == pytest.approx(want * cda2 / cda, rel=1e-4)


def test_subsonic_intake_matches_textbook_formula():
    # Subsonic orifice flow, Heywood 1988 App. C:
    # mdot = CdA p0/sqrt(R T0) (pT/p0)^(1/g) sqrt(2g/(g-1) (1 - (pT/p0)^((g-1)/g)))
    v = make_valves()
    theta = -250.0
    cda = v.flow_area(np.array([theta]))["intake"][0, 0]
    p0, T0, R, g, pT = 1.0e5, 300.0, 287.0, 1.4, 0.9e5
    r = pT / p0
    want = cda * p0 / math.sqrt(R * T0) * r ** (1 / g) * math.sqrt(2 * g / (g - 1) * (1 - r ** ((g - 1) / g)))
    m_in, _ = v.mass_flows(state(theta, p=pT))
    assert m_in[0] == pytest.approx(want, rel=1e-9)


def test_batch_matches_single_cases_and_per_case_angles():
    ivc = np.array([-150.0, -120.0, -100.0])
    batch = make_valves(B=3, ctx_over=dict(ivc=ivc, intake_count=np.array([1.0, 2.0, 2.0])))
    s3 = state(-130.0, p=0.95e5, B=3)
    m3, _ = batch.mass_flows(s3)
    for b in range(3):
        one = make_valves(ctx_over=dict(ivc=ivc[b], intake_count=[1.0, 2.0, 2.0][b]))
        assert m3[b] == one.mass_flows(state(-130.0, p=0.95e5))[0][0]
    assert m3[0] == 0.0 and m3[1] > 0.0  # case 0 closed at IVC = -150
    s3.theta = np.full(3, -130.0)  # per-case angles take the general path
    np.testing.assert_allclose(batch.mass_flows(s3)[0], m3, rtol=1e-12)


def test_event_errors():
    with pytest.raises(ConfigError, match="max_lift"):
        make_valves(ctx_over=dict(intake_max_lift_mm=0.05))
    with pytest.raises(ConfigError, match="720"):
        make_valves(ctx_over=dict(ivo=-370.0, ivc=-370.0))


def write(path, text):
    path.write_text(text)
    return path.name


def test_user_lift_table_read_relative_to_base_dir(tmp_path):
    name = write(tmp_path / "intake_lift.csv",
                 "# measured intake lift\ncrank_deg,lift_mm\n-380,0\n-370,0.1\n-255,9.5\n-140,0.1\n-130,0\n")
    v = make_valves(base_dir=tmp_path, intake_lift_table=name)
    th = np.array([-370.0, -312.5, -255.0, -140.0, 0.0, -255.0 + 720.0])
    L = v.lift(th)["intake"][0]
    np.testing.assert_allclose(L, [0.1e-3, 0.5 * (0.1 + 9.5) * 1e-3, 9.5e-3, 0.1e-3, 0.0, 9.5e-3],
                               rtol=1e-12)
    assert v.warnings({}) == [[]]  # table crosses the threshold at the configured events
    # exhaust still from the events
    assert v.lift(np.array([130.0]))["exhaust"][0, 0] == pytest.approx(THRESHOLD_M, rel=1e-9)


def test_lift_table_event_mismatch_warned(tmp_path):
    name = write(tmp_path / "l.csv", "-390,0\n-380,0.1\n-255,9\n-140,0.1\n-130,0\n")
    v = make_valves(base_dir=tmp_path, intake_lift_table=name)
    w = v.warnings({})[0]
    assert len(w) == 1 and "ivo" in w[0]


@pytest.mark.parametrize("text, line, what", [
    ("crank_deg,lift_mm\n-380,0\n-300,5\n-300,6\n", 4, "does not increase"),
    ("crank_deg,lift_mm\n-380,0\n-300,-1\n-200,0\n", 3, "negative"),
    ("crank_deg,lift_mm\n-380,0\n-300,abc\n", 3, "not a number"),
    ("angle,lift\n-380,0\n", 1, "missing column"),
])
def test_bad_lift_tables_rejected(tmp_path, text, line, what):
    name = write(tmp_path / "bad.csv", text)
    with pytest.raises(InputFileError) as err:
        make_valves(base_dir=tmp_path, exhaust_lift_table=name)
    msg = str(err.value)
    assert "bad.csv" in msg and f"line {line}" in msg and what in msg and "\n" not in msg


def test_missing_lift_table_rejected(tmp_path):
    with pytest.raises(InputFileError, match="not found"):
        make_valves(base_dir=tmp_path, intake_lift_table="nowhere.csv")


def test_shut_valves():
    v = VF.ShutValves({}, make_ctx(2))
    m_in, m_ex = v.mass_flows(state(-300.0, p=0.5e5, B=2))
    assert np.all(m_in == 0.0) and np.all(m_ex == 0.0)
    assert v.lift(np.linspace(-360, 360, 7))["intake"].shape == (2, 7)
    assert np.all(v.flow_area(np.linspace(-360, 360, 7))["exhaust"] == 0.0)


def test_flow_area_of_a_batch_with_shared_and_distinct_settings():
    # flow_area evaluates each distinct valve setting once; every case must still get the
    # area it has alone (reference: the single-case evaluation of the same class)
    th = np.linspace(-360.0, 360.0, 1441)
    ivc = np.array([-140.0, -120.0, -140.0, -140.0])
    batch = make_valves(B=4, ctx_over=dict(ivc=ivc))
    assert batch._distinct()[0].size == 2
    got = batch.flow_area(th)
    for b in range(4):
        one = make_valves(ctx_over=dict(ivc=ivc[b])).flow_area(th)
        for k in ("intake", "exhaust"):
            np.testing.assert_array_equal(got[k][b], one[k][0])
    same = make_valves(B=3).flow_area(th)
    assert same["intake"].shape == (3, th.size) and same["intake"].flags.writeable
    np.testing.assert_array_equal(same["intake"][2], make_valves().flow_area(th)["intake"][0])


def test_flow_area_on_a_grid_per_case():
    # a (B, n) grid gives each case the areas at its own angles, even where the cases share
    # their valve settings (reference: each case alone on its own grid)
    grids = np.array([[-300.0, -200.0], [100.0, 200.0]])
    got = make_valves(B=2).flow_area(grids)
    for b in range(2):
        one = make_valves().flow_area(grids[b])
        for k in ("intake", "exhaust"):
            np.testing.assert_array_equal(got[k][b], one[k][0])
