"""The report as a colleague sees it: rendered by headless Chromium at 1280 px, on screen and with the
print stylesheet applied.  Skipped where Chromium is not installed (CI installs it)."""

import json
import re
import shutil
import subprocess

import pytest

import cyclesim
from cyclesim.output import CAUTION
from cyclesim.report import report_for_run, report_for_study, write_report
from cyclesim.studies.maps import full_load_curve, part_load_map

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
FIXED = ["simulation.step_deg=1.0", "simulation.step_reference_rpm=0"]
pytestmark = pytest.mark.skipif(CHROMIUM is None, reason="chromium not installed (CI installs it)")

# Measures the page after load and writes the figures as JSON into <pre id="probe">
_PROBE = """<script>
window.addEventListener('load', function () {
  var r = {imgs: [], main: [], summary: [], caution: [], clipped: [], docw: document.documentElement.scrollWidth,
           winw: window.innerWidth, appendix: []};
  document.querySelectorAll('img').forEach(function (i) { r.imgs.push(i.complete ? i.naturalWidth : 0); });
  document.querySelectorAll('table.main').forEach(function (t) {
    var b = t.getBoundingClientRect(); r.main.push([b.right, document.body.getBoundingClientRect().right]); });
  document.querySelectorAll('dl.summary').forEach(function (d) { r.summary.push([d.scrollWidth, d.clientWidth]); });
  document.querySelectorAll('.caution').forEach(function (c) {
    r.caution.push([c.scrollWidth, c.clientWidth, c.scrollHeight, c.clientHeight, c.textContent]); });
  document.querySelectorAll('body *').forEach(function (e) {
    var s = getComputedStyle(e);
    if (!e.closest('details.appendix') &&
        ['hidden', 'auto', 'scroll', 'clip'].indexOf(s.overflowX) >= 0 && e.scrollWidth > e.clientWidth + 1)
      r.clipped.push(e.tagName + '.' + e.className);
  });
  document.querySelectorAll('details.appendix > :not(summary)').forEach(function (e) {
    r.appendix.push(e.getBoundingClientRect().height); });
  var p = document.createElement('pre'); p.id = 'probe'; p.textContent = JSON.stringify(r);
  document.body.appendChild(p);
});
</script></body>"""


def _measure(html_path, tmp_path, print_rules=False):
    text = html_path.read_text(encoding="utf-8")
    if print_rules:          # apply the print stylesheet on screen, at an A4 page's width
        text = text.replace("@media print{", "@media all{")
    probe = tmp_path / ("print.html" if print_rules else "screen.html")
    probe.write_text(text.replace("</body>", _PROBE), encoding="utf-8")
    width = 794 if print_rules else 1280
    cmd = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
           "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-dev-shm-usage",
           f"--user-data-dir={tmp_path / 'profile'}", f"--window-size={width},900", "--hide-scrollbars",
           "--run-all-compositor-stages-before-draw", "--virtual-time-budget=5000", "--dump-dom", probe.as_uri()]
    out = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr[-2000:]
    m = re.search(r'<pre id="probe">(.*?)</pre>', out.stdout, re.S)
    assert m, "the probe did not run"
    import html as _html

    return json.loads(_html.unescape(m.group(1))), text


def _check(path, tmp_path):
    r, text = _measure(path, tmp_path)
    assert r["docw"] <= r["winw"]                               # no horizontal scroll of the page
    assert len(r["imgs"]) == text.count("<img ") and all(w > 0 for w in r["imgs"])   # every image loads
    assert r["main"] and all(right <= body + 0.5 for right, body in r["main"])      # main tables fit
    assert all(sw <= cw for sw, cw in r["summary"])
    for sw, cw, sh, ch, txt in r["caution"]:
        assert sw <= cw and sh <= ch                            # the caution box holds its text
        assert " ".join(CAUTION.split()) in " ".join(txt.split())
    assert not r["clipped"], r["clipped"]      # nothing outside the appendix scrolls inside a box
    p, _ = _measure(path, tmp_path, print_rules=True)
    assert not p["clipped"], p["clipped"]                      # print: nothing clipped
    assert p["docw"] <= p["winw"]
    assert all(h > 0 for h in p["appendix"])                   # print: the appendix is unfolded
    for sw, cw, sh, ch, _ in p["caution"]:
        assert sw <= cw and sh <= ch


def test_run_report_reads_at_1280_px(tmp_path):
    res = cyclesim.run("demo_turbo", FIXED)
    path = write_report(tmp_path / "run.html", "cyclesim run: demo_turbo", report_for_run(res))
    text = path.read_text(encoding="utf-8")
    assert text.index('class="summary"') < text.index("<img ") < text.index('class="appendix"')
    _check(path, tmp_path)


@pytest.mark.slow
def test_map_report_reads_at_1280_px(tmp_path):
    out = tmp_path / "map"
    fl = full_load_curve("demo_turbo", [1500, 4500], overrides=FIXED, out=out)
    part_load_map("demo_turbo", [1500, 4500], [0.6, 1.6], overrides=FIXED, out=out, full_load=fl)
    path = write_report(tmp_path / "map.html", "cyclesim report: map", report_for_study(out))
    text = path.read_text(encoding="utf-8")
    # summary first, then plots, then the formatted tables with units in their headers
    assert text.index("peak torque") < text.index("<img ") < text.index("BSFC [g/kWh]</th>")
    assert "snake_case" not in text and "<th>bsfc_g_per_kWh</th>" not in text.split('class="appendix"')[0]
    _check(path, tmp_path)


def test_motored_run_folder_report_reads_at_1280_px(tmp_path):
    # `cyclesim run demo --set operating.fuel_cut=true --out run`, then `cyclesim report run`: the summary
    # says the run is motored and gives what the dynamometer absorbs, not brake figures of a fired run
    from cyclesim.cli import main

    run = tmp_path / "run"
    assert main(["run", "demo", "--set", "operating.fuel_cut=true", "--set", FIXED[0], "--set", FIXED[1],
                 "--out", str(run)]) in (0, None)
    path = write_report(tmp_path / "motored.html", "cyclesim report: run", report_for_study(run))
    text = path.read_text(encoding="utf-8")
    head = text.split('class="appendix"')[0]
    assert text.index('class="summary"') < text.index("<img ") < text.index('class="appendix"')
    assert "no fuel burns" in head and "motoring MEP (absorbed)" in head
    assert "brake torque" not in head and "<td>spark_deg</td>" not in head
    assert "energy [J]</th>" in head
    _check(path, tmp_path)
