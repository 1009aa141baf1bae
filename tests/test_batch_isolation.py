"""One case's failure stays that case's: whatever it raises inside a batch, its result records the
message and every other case of the batch (and of the sweep, serial or in workers) is kept.

Also the rich limit of lambda: the documented range is the one that runs, per fuel."""

from __future__ import annotations

import pytest

import cyclesim
from cyclesim.config import load_config
from cyclesim.errors import ConfigError
from cyclesim.fuels import get_fuel, richest_lambda
from cyclesim.studies.sweep import read_sweep_csv, sweep
from plugin_sources import RAISES_FOR_ONE_CASE

SPARK = "burn.spark_advance_deg"


@pytest.fixture()
def boom(tmp_path):
    (tmp_path / "boom.py").write_text(RAISES_FOR_ONE_CASE)
    cfg = tmp_path / "boom.yaml"
    cfg.write_text("extends: demo_closed\nplugins: [boom.py]\nsimulation: {step_deg: 1.0}\n")
    return load_config(cfg)


def test_simulate_isolates_an_arbitrary_exception(boom):
    from cyclesim.config import case_with

    cases = [case_with(boom, {SPARK: s}) for s in (10, 20, 30)]
    res = cyclesim.simulate(cases, isolate=True)
    assert [r.ok for r in res] == [True, False, True]
    assert res[1].error == "LookupError while simulating this case: the test plug-in refuses spark 20"
    alone = cyclesim.simulate([cases[0]])[0]
    assert res[0].summary["imep_closed_bar"] == alone.summary["imep_closed_bar"]
    with pytest.raises(LookupError):
        cyclesim.simulate(cases, isolate=False)


@pytest.mark.parametrize("workers", [None, 2])
def test_sweep_keeps_every_other_row_and_resumes(boom, tmp_path, workers):
    out = tmp_path / f"s{workers}"

    def stop(done, total, elapsed):
        if done >= 2:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        sweep(boom, [(SPARK, "10,20,30,40")], out=out, chunk_size=2, progress=stop, workers=workers)
    first = read_sweep_csv(out / "sweep.csv")[1]
    # one chunk of two finished first (in workers, either one)
    assert sorted(r["case"] for r in first) in ([0, 1], [2, 3])
    assert all(r["error"].startswith("LookupError") == (r["case"] == 1) for r in first)
    res = sweep(boom, [(SPARK, "10,20,30,40")], out=out, chunk_size=2, resume=True, workers=workers)
    assert [r["case"] for r in res.rows] == [0, 1, 2, 3]
    assert [bool(r["error"]) for r in res.rows] == [False, True, False, False]
    assert "refuses spark 20" in res.rows[1]["error"]
    assert all(isinstance(r["imep_closed_bar"], float) for i, r in enumerate(res.rows) if i != 1)
    assert [r["case"] for r in read_sweep_csv(out / "sweep.csv")[1]] == [0, 1, 2, 3]


def test_rich_limit_matches_cantera_element_counts():
    # the limit is where the charge holds one O atom per C atom (all carbon as CO); Cantera counts
    # the elements of a GRI-Mech 3.0 methane-air mixture at that equivalence ratio independently
    ct = pytest.importorskip("cantera")
    gas = ct.Solution("gri30.yaml")
    m = get_fuel("methane")
    lam = richest_lambda(m.C, m.H, m.O)
    gas.set_equivalence_ratio(1.0 / lam, "CH4:1", "O2:0.2095, N2:0.7809, AR:0.0093")
    assert gas.elemental_mole_fraction("O") / gas.elemental_mole_fraction("C") == pytest.approx(1.0, rel=1e-9)
    # ethanol (C2H5OH, not in GRI-Mech): by hand, O 1 + 2 * 3 lambda = C 2 -> lambda 1/6
    assert richest_lambda(2, 6, 1) == pytest.approx(1 / 6)


@pytest.mark.parametrize("fuel", ["gasoline", "isooctane"])
def test_lambda_below_the_fuels_limit_is_one_line_and_just_above_runs(fuel):
    f = get_fuel(fuel)
    lim = richest_lambda(f.C, f.H, f.O)
    for lam in (0.3, 0.31, lim - 1e-4):
        with pytest.raises(ConfigError) as e:
            load_config("demo_closed", [f"fuel.name={fuel}", f"operating.lambda={lam}"])
        assert "too rich for fuel" in str(e.value) and "no solid carbon" in str(e.value)
    for burned in ("equilibrium", "complete"):
        res = cyclesim.run("demo_closed", {"fuel.name": fuel, "operating.lambda": lim + 1e-3,
                                           "gas.burned_gas": burned, "simulation.step_deg": 0.5})
        assert res.ok and abs(res.summary["energy_balance"]["closure_fraction"]) < 1e-3


def test_the_air_standard_gas_keeps_the_whole_documented_range():
    res = cyclesim.run("demo_closed", {"operating.lambda": 0.3, "gas.properties": "constant_gamma"})
    assert res.ok
