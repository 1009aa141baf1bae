"""HTML report: self-contained, and rendered by a real headless browser."""

import re
import shutil
import subprocess

import pytest

import cyclesim
from cyclesim.output import CAUTION, write_case
from cyclesim.report import render_report, report_for_run, report_for_study, write_report

FAST = ["simulation.step_deg=1.0", "simulation.mode=closed"]
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")

# marks every image with its decoded width and every table with its rendered height
_PROBE = """<script>
window.addEventListener('load', function () {
  document.querySelectorAll('img').forEach(function (i) { i.setAttribute('data-natural-width', i.naturalWidth); });
  document.querySelectorAll('table').forEach(function (t) { t.setAttribute('data-height', t.offsetHeight); });
  document.body.setAttribute('data-probed', 'yes');
});
</script></body>"""


@pytest.fixture(scope="module")
def run_result():
    return cyclesim.run("demo", FAST)


def _render_in_chromium(html_path, tmp_path):
    probe = tmp_path / "probe.html"
    probe.write_text(html_path.read_text(encoding="utf-8").replace("</body>", _PROBE), encoding="utf-8")
    cmd = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
           "--disable-background-networking", "--disable-component-update", "--disable-sync",
           "--disable-dev-shm-usage", f"--user-data-dir={tmp_path / 'profile'}",
           "--run-all-compositor-stages-before-draw", "--virtual-time-budget=5000", "--dump-dom",
           probe.as_uri()]
    out = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr[-2000:]
    return out.stdout


def _check_page(html_text, dom):
    n_img = html_text.count("<img ")
    n_tab = len(re.findall(r"<table[ >]", html_text))     # plain and formatted (class="main") tables
    assert 'data-probed="yes"' in dom
    widths = [int(w) for w in re.findall(r'data-natural-width="(\d+)"', dom)]
    heights = [int(h) for h in re.findall(r'data-height="(\d+)"', dom)]
    assert len(widths) == n_img and all(w > 0 for w in widths)  # every PNG decoded
    assert len(heights) == n_tab and all(h > 0 for h in heights)  # every table laid out


def test_page_is_self_contained(run_result, tmp_path):
    path = write_report(tmp_path / "run.html", "demo closed cycle", report_for_run(run_result))
    text = path.read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>")
    assert CAUTION in text.replace("&#x27;", "'")
    # no external resources: every src is a data URI, no links, no scripts
    assert all(s.startswith("data:image/png;base64,") for s in re.findall(r'src="([^"]*)"', text))
    assert "<script" not in text and "<link" not in text and "http://" not in text and "https://" not in text
    assert text.count("<img ") >= 3 and text.count("<table>") >= 2


def test_text_is_escaped():
    text = render_report("<b>x</b>", [{"heading": "a<b", "text": "1 < 2 & 3", "table": [{"k": "<i>"}]}])
    assert "<b>x</b>" not in text and "&lt;i&gt;" in text and "1 &lt; 2 &amp; 3" in text


@pytest.mark.skipif(CHROMIUM is None, reason="chromium not installed (CI installs it)")
def test_run_report_renders_in_chromium(run_result, tmp_path):
    path = write_report(tmp_path / "run.html", "demo", report_for_run(run_result))
    _check_page(path.read_text(encoding="utf-8"), _render_in_chromium(path, tmp_path))


@pytest.mark.skipif(CHROMIUM is None, reason="chromium not installed (CI installs it)")
def test_study_folder_report_renders_in_chromium(run_result, tmp_path):
    folder = tmp_path / "study"
    write_case(run_result, folder)
    (folder / "table.csv").write_text("speed_rpm,torque_Nm\n2000,100.5\n3000,110.25\n", encoding="utf-8")
    (folder / "study.json").write_text('{"caution": "c", "mbt_deg": 24.5, "notes": ["a note"],'
                                       ' "state": {"p3_bar": 1.5}}', encoding="utf-8")
    secs = report_for_study(folder)
    path = write_report(tmp_path / "study.html", "study", secs)
    text = path.read_text(encoding="utf-8")
    assert "110.25" in text and "mbt_deg" in text and "a note" in text and "p3_bar" in text
    _check_page(text, _render_in_chromium(path, tmp_path))


def test_cli_report_of_a_folder_and_of_a_config(run_result, tmp_path, capsys):
    from cyclesim.cli import main

    folder = tmp_path / "run"
    write_case(run_result, folder)
    assert main(["report", str(folder), "--out", str(tmp_path / "a.html")]) == 0
    assert main(["report", "demo", "--set", "simulation.step_deg=1.0", "--set", "simulation.mode=closed",
                 "--out", str(tmp_path / "b.html")]) == 0
    for name in ("a.html", "b.html"):
        text = (tmp_path / name).read_text(encoding="utf-8")
        assert text.count("data:image/png;base64,") >= 3 and "Caution." in text
    assert "self-contained" in capsys.readouterr().out
    # a missing folder or config is a one-line error with exit status 2 (the CLI's convention)
    assert main(["report", str(tmp_path / "nope.yaml"), "--out", str(tmp_path / "c.html")]) == 2
    # an existing page is replaced only with --force, like the other commands' --out folders
    before = (tmp_path / "a.html").read_bytes()
    capsys.readouterr()
    assert main(["report", str(folder), "--out", str(tmp_path / "a.html"), "--title", "again"]) == 2
    assert "--force" in capsys.readouterr().err and (tmp_path / "a.html").read_bytes() == before
    assert main(["report", str(folder), "--out", str(tmp_path / "a.html"), "--title", "again", "--force"]) == 0
    assert "again" in (tmp_path / "a.html").read_text(encoding="utf-8")


def test_fit_prediction_and_analysis_folders_show_their_results(tmp_path):
    """The report of a calibration shows the fitted values, intervals and correlations; of an
    analysis its statistics (a dict holding lists); of a prediction its rows; and a CSV's comment
    lines are not taken for its header."""
    import json

    import numpy as np

    from cyclesim.calibration import fit
    from cyclesim.studies.uncertainty import propagate
    from cyclesim.traces.export import TraceSet

    case = cyclesim.load_config("demo_closed", ["simulation.step_deg=1.0"])
    r = cyclesim.simulate([cyclesim.config.case_with(case, {"burn.duration_deg": 45.0,
                                                            "simulation.output_step_deg": 0.5})])[0]
    p = r.trace["pressure_bar"] * 1e5 + np.random.default_rng(1).normal(0, 2e3, r.trace["pressure_bar"].size)
    res = fit(case, TraceSet(r.trace["crank_deg"], p[None], None, 3000.0, {}),
              ["burn.duration_deg", "heat_transfer.multiplier"], peg=None)
    fdir = tmp_path / "f"
    res.write(fdir, plots=False)
    text = render_report("fit", report_for_study(fdir))
    cal = json.loads((fdir / "calibration.json").read_text())
    for v in (cal["values"][0], cal["interval_low"][0], cal["interval_high"][1], cal["correlation"][0][1]):
        cell = f"{v:.2f}" if abs(v) >= 10 else f"{v:.4f}".rstrip("0").rstrip(".")
        assert f">{cell}<" in text, cell
    assert "interval_low" in text and "correlation" in text and "heat_transfer.multiplier" in text

    pdir = tmp_path / "p"
    propagate(case, str(fdir / "calibration.json"), vary="burn.spark_advance_deg=20,30", n_samples=4, seed=1,
              out=pdir, plots=False)
    secs = report_for_study(pdir)
    tab = next(s["table"] for s in secs if s["heading"] == "prediction.csv")
    assert tab["columns"][:2] == ["burn.spark_advance_deg", "imep_closed_bar"]      # not the comment
    assert [row[0] for row in tab["rows"]] == [20, 30]
    assert any(s["heading"] == "prediction.json: rows" for s in secs)
    csv_sec = next(s for s in secs if s["heading"] == "prediction.csv")
    assert any("prediction with uncertainty" in t for t in csv_sec["text"])

    adir = tmp_path / "a"
    adir.mkdir()
    (adir / "analysis_summary.json").write_text(json.dumps({
        "statistics": {"n_cycles": 3, "imep_net_bar_mean": 11.1749, "grid_s": [0.001, 0.002, 0.004],
                       "rss_rel": [1.5, 1.0, 1.25], "cycles": [1, 2, 3]},
        "settings": {"peg_window_deg": [-190.0, -170.0], "T_ivc_K": 340.0}}), encoding="utf-8")
    text = render_report("analysis", report_for_study(adir))
    assert "imep_net_bar_mean" in text and "11.17" in text and "rss_rel" in text and "1.25" in text
    assert "T_ivc_K" in text and "[-190.00, -170.00]" in text
