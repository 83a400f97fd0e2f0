"""report.html in a real browser: headless Chromium (Debian's chromium package) loads the page.

A small script appended to a copy of the page records, once the page has
loaded, whether every image decoded and the width of every table against the
box that holds it; Chromium's --dump-dom prints the page with that record.
A table wider than its box is cut off (the reader must scroll sideways to
find its last column).  Skipped, with the reason, where no Chromium is
installed (.ci/run installs it where apt can).
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess

import pytest

pytest.importorskip("pyvista", reason="the report's renders need the plot extra")
BROWSER = shutil.which("chromium") or shutil.which("chromium-browser")
pytestmark = pytest.mark.skipif(BROWSER is None, reason="no chromium on PATH (apt-get install chromium)")

PROBE = """<script>window.addEventListener('load', () => {
  const images = [...document.images].map(i => ({alt: i.alt, loaded: i.complete && i.naturalWidth > 0,
                                               shown: i.getBoundingClientRect().width}));
  const page = document.documentElement.clientWidth;
  const tables = [...document.querySelectorAll('table')].map(t => ({
      head: [...t.querySelectorAll('th')].map(h => h.textContent).join('|'),
      width: t.scrollWidth, box: t.parentElement.clientWidth, right: t.getBoundingClientRect().right, page}));
  const out = document.createElement('pre');
  out.id = 'probe';
  out.textContent = JSON.stringify({images, tables});
  document.body.appendChild(out);
});</script>"""


def _probe(report, tmp_path, width: int) -> dict:
    page = tmp_path / f"probe-{width}.html"
    page.write_text(report.read_text(encoding="utf-8").replace("</body>", PROBE + "</body>"), encoding="utf-8")
    done = subprocess.run([BROWSER, "--headless", "--no-sandbox", "--disable-gpu", f"--user-data-dir={tmp_path / 'p'}",
                           f"--window-size={width},900", "--virtual-time-budget=5000", "--dump-dom",
                           page.as_uri()], capture_output=True, text=True, timeout=180)
    match = re.search(r'<pre id="probe">(.*?)</pre>', done.stdout, re.S)
    assert match, f"chromium printed no probe record (status {done.returncode}): {done.stderr[-500:]}"
    return json.loads(match.group(1).replace("&quot;", '"').replace("&amp;", "&").replace("&lt;", "<")
                      .replace("&gt;", ">"))


def _assert_whole(report, tmp_path, images_at_least: int):
    n_img = report.read_text(encoding="utf-8").count("<img ")
    assert n_img >= images_at_least
    # 1024 px: a laptop window; with the earlier table style the convergence table overflowed its box here
    for width in (1024, 1280):
        record = _probe(report, tmp_path, width)
        assert len(record["images"]) == n_img
        for image in record["images"]:
            assert image["loaded"] and image["shown"] > 0, image
        assert record["tables"]
        for table in record["tables"]:
            assert table["width"] <= table["box"], table  # nothing to scroll sideways to
            assert table["right"] <= table["page"], table


SPHERE = """title = "browser probe"
[surface]
shape = "sphere"
[resolution]
degree = 2
subdivisions = 2
[modes]
count = 9
"""


def test_run_report_with_convergence_loads_whole_in_chromium(tmp_path, run_cli):
    case = tmp_path / "probe.toml"
    case.write_text(SPHERE, encoding="utf-8")
    assert run_cli("run", case, "--out", tmp_path / "probe", "-q").status == 0
    assert run_cli("converge", case, "--out", tmp_path / "probe-convergence", "-q").status == 0
    assert run_cli("report", tmp_path / "probe", "-q").status == 0
    report = tmp_path / "probe" / "report.html"
    assert "Convergence study" in report.read_text(encoding="utf-8")
    _assert_whole(report, tmp_path, images_at_least=3)  # level diagram and two mode renders


def test_sweep_and_convergence_folder_reports_load_whole_in_chromium(tmp_path, run_cli):
    case = tmp_path / "grow.toml"
    case.write_text('title = "growing sphere"\n[surface]\nshape = "sphere"\n[resolution]\nsubdivisions = 1\n'
                    "[modes]\ncount = 4\n[sweep]\nworkers = 1\n"
                    'parameters = [{ key = "surface.radius", values = [1.0, 1.5, 2.0] }]\n', encoding="utf-8")
    assert run_cli("sweep", case, "--out", tmp_path / "grow", "-q").status == 0
    assert run_cli("report", tmp_path / "grow", "-q").status == 0
    text = (tmp_path / "grow" / "report.html").read_text(encoding="utf-8")
    assert "Tracks" in text and "radius" in text
    _assert_whole(tmp_path / "grow" / "report.html", tmp_path, images_at_least=1)  # levels.png

    sphere = tmp_path / "s.toml"
    sphere.write_text(SPHERE, encoding="utf-8")
    assert run_cli("converge", sphere, "--out", tmp_path / "s-convergence", "-q").status == 0
    assert run_cli("report", tmp_path / "s-convergence", "-q").status == 0
    text = (tmp_path / "s-convergence" / "report.html").read_text(encoding="utf-8")
    assert "Error estimates" in text and "extrapolated" in text
    record = _probe(tmp_path / "s-convergence" / "report.html", tmp_path, 1024)
    assert record["tables"] and all(t["width"] <= t["box"] for t in record["tables"])
