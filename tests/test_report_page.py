"""Tests of the self-contained HTML page of ``fftgauge report --html``: plots inside the page,
no outside address, the pick's ranking, the machine fingerprint, a viewport and a print
stylesheet; then the page in a real headless browser (Chromium), at phone and desktop width.

Inputs are the DEMO results files of tests/data (invented numbers, said in their "note") and
a pick document built from them by the pick's own ranking
(:func:`fftgauge.harness.selection.run.pick_document`): they exercise the page, they measure
nothing.
"""

from __future__ import annotations

import argparse
import base64
import html
import json
import os
import re
import shutil
import subprocess
import xml.etree.ElementTree as ET

import pytest

from fftgauge.harness.cli import report as cmd_report
from fftgauge.harness.errors import UsageError

DATA = os.path.join(os.path.dirname(__file__), "data")
TIME_FILE = os.path.join(DATA, "sample_time.json")
CHECK_FILE = os.path.join(DATA, "sample_check.json")
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), file signature
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
NO_CHROMIUM = ("chromium is not installed: it is a Debian package, not a pip one (apt-get install chromium; "
               "make test installs it where it runs as root with apt-get)")

#: Any address that would make the browser reach outside the page: a scheme with //, a
#: protocol-relative source, a CSS import or url() that is not a data: URI.
OUTSIDE_ADDRESS = re.compile(r"[a-z][a-z0-9+.-]*://|(?:src|href)\s*=\s*\"//|@import|url\((?!data:)", re.I)


def load(path: str) -> dict:
    with open(path, encoding="utf-8") as fh:
        return json.load(fh)


def pick_doc(sizes: str = "1024,4096") -> dict:
    """A pick document of the demo battery and timing: numpy and scipy pass, demo-recurrence fails at 4096
    (precision), pyfftw has no battery rows (so it does not take the cases)."""
    from fftgauge.harness.selection.run import PickSettings, pick_document
    from fftgauge.harness.selection.workload import build_workload

    return pick_document(build_workload(sizes, "fft", "float64"), ["numpy", "scipy", "pyfftw", "demo-recurrence"],
                         PickSettings(), load(CHECK_FILE), load(TIME_FILE))


def run_report(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(prog="fftgauge report")
    cmd_report.add_arguments(parser)
    return cmd_report.run(parser.parse_args(argv))


@pytest.fixture(scope="module")
def page(tmp_path_factory) -> dict:
    """The page of a pick file and the demo check file, with its plots folder and the pick file."""
    root = tmp_path_factory.mktemp("page")
    pick_path = root / "pick.json"
    pick_path.write_text(json.dumps(pick_doc()), encoding="utf-8")
    out, page_path = root / "plots", root / "report.html"
    assert run_report([str(pick_path), CHECK_FILE, "--out", str(out), "--html", str(page_path)]) == 0
    return {"path": page_path, "text": page_path.read_text(encoding="utf-8"), "out": out, "pick": pick_path}


def sources(text: str) -> list[str]:
    return [html.unescape(s) for s in re.findall(r'\bsrc="([^"]*)"', text)]


# --------------------------------------------------------------------------- the page's text

def test_page_carries_its_plots_inside(page):
    """Every plot written to --out is in the page as a data: URI (RFC 2397) whose bytes are that PNG file."""
    plots = sorted(p for p in os.listdir(page["out"]) if p.endswith(".png"))
    assert len(plots) == 4  # relative speed, time per point, accuracy of the pick's battery and of the check file
    srcs = sources(page["text"])
    assert len(srcs) == len(plots)
    embedded = set()
    for src in srcs:
        assert src.startswith("data:image/png;base64,")
        embedded.add(base64.b64decode(src.split(",", 1)[1]))
    for name in plots:
        data = (page["out"] / name).read_bytes()
        assert data.startswith(PNG_MAGIC) and data in embedded


def test_page_names_no_outside_address(page):
    """No URL with a scheme, no protocol-relative source, no CSS import; the only links are anchors of the page."""
    assert OUTSIDE_ADDRESS.findall(page["text"]) == []
    ids = set(re.findall(r'\bid="([^"]+)"', page["text"]))
    links = re.findall(r'\bhref="([^"]*)"', page["text"])
    assert links and all(link.startswith("#") and link[1:] in ids for link in links)


def test_page_is_for_phones_and_paper(page):
    """A viewport meta (phones lay it out at their width), images no wider than the page, tables in a box that
    scrolls sideways, and a print stylesheet; the page still parses as XML."""
    text = page["text"]
    assert '<meta name="viewport" content="width=device-width, initial-scale=1"/>' in text
    style = re.search(r"<style>(.*?)</style>", text, re.S).group(1)
    assert "img{max-width:100%" in style and ".table-wrap{overflow-x:auto" in style
    assert "@media print{" in style and "nav{display:none}" in style.split("@media print{", 1)[1]
    tables = text.count("<table>")
    assert tables == text.count('<div class="table-wrap"><table>') and tables >= 8
    ET.fromstring(text.split("\n", 1)[1])


def test_page_shows_the_pick_ranking(page):
    """The verdict names the recommended backend; the ranking has scipy first (in bold), numpy second, and the
    reasons of the two that are not recommended."""
    text = page["text"]
    assert '<p class="verdict FAIL">FAIL: pick, scipy recommended; correctness' in text
    pick = text[text.index('<h2 id="pick-which-backend-to-ship">'):text.index('<h2 id="correctness">')]
    assert "<th class=\"text\">backend</th>" in pick
    rows = re.findall(r"<tr><td>(\d|-)</td><td class=\"text short\">(.*?)</td>", pick)
    assert rows == [("1", "<strong>scipy</strong>"), ("2", "numpy"), ("-", "pyfftw"), ("-", "demo-recurrence")]
    assert "<li>pyfftw: does not take fft float64 n=1024: no battery row</li>" in pick
    assert "<li>demo-recurrence: fails the battery: accuracy (precision) at 1 case(s)" in pick
    assert "Workload: sizes 1024, 4096; kinds fft; precisions float64" in pick


def test_page_shows_failures_and_the_machine(page):
    """The battery's findings with their diagnosis, and the machine fingerprint and versions of every input."""
    text = page["text"]
    assert "precision (errors at the level of a lower precision than the one asked for)" in text
    machine = text[text.index('<h2 id="machine">'):]
    assert "Demo CPU (invented)" in machine and "L1d 32K, L1i 32K, L2 1024K, L3 4096K" in machine
    assert "<td class=\"text short\">python</td>" in machine and "<td class=\"text short\">library</td>" not in machine
    assert machine.count("Measured on this machine:") == 2  # the pick's (this machine) and the demo CPU's


def test_pick_with_no_recommendation_fails_the_page(tmp_path):
    """A pick that recommends nothing (only the failing backend weighed, at its failing size) is a FAIL."""
    from fftgauge.harness.selection.run import PickSettings, pick_document
    from fftgauge.harness.selection.workload import build_workload

    doc = pick_document(build_workload("4096", "fft", "float64"), ["demo-recurrence"], PickSettings(),
                        load(CHECK_FILE), {"rows": []})
    path = tmp_path / "none.json"
    path.write_text(json.dumps(doc), encoding="utf-8")
    md, page_path = tmp_path / "p.md", tmp_path / "p.html"
    assert run_report([str(path), "--no-plots", "--out", str(tmp_path / "o"), "--markdown", str(md),
                       "--html", str(page_path)]) == 0
    assert md.read_text(encoding="utf-8").split("\n\n")[1].startswith(
        "## FAIL: pick, no backend can be recommended")
    assert "demo-recurrence: fails the battery" in page_path.read_text(encoding="utf-8")


def test_svg_plots_are_embedded_too(tmp_path):
    page_path = tmp_path / "s.html"
    assert run_report([CHECK_FILE, "--format", "svg", "--out", str(tmp_path / "o"), "--html", str(page_path)]) == 0
    src = sources(page_path.read_text(encoding="utf-8"))
    assert len(src) == 1 and src[0].startswith("data:image/svg+xml;base64,")
    assert b"<svg" in base64.b64decode(src[0].split(",", 1)[1])


@pytest.mark.parametrize("rows", [[{"backend": "x"}], ["not a row"], [{"backend": "x", "recommended": True,
                                                                         "reasons": [], "failed_checks": [],
                                                                         "cases": [], "surprise": 1}]])
def test_a_pick_file_with_foreign_rows_is_refused(tmp_path, rows):
    from fftgauge.harness.report.inputs import load_inputs

    doc = {**pick_doc(), "rows": rows}
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(doc), encoding="utf-8")
    with pytest.raises(UsageError, match="ranking row is not what fftgauge pick writes"):
        load_inputs([str(path)])


# --------------------------------------------------------------------------- in a real browser

#: Put first in <head>: records every uncaught error, resource that failed to load and rejected promise.
CATCH_ERRORS = ("<script>window.__errors=[];window.addEventListener('error',function(e){window.__errors.push("
                "String(e.message||e.type))},true);window.addEventListener('unhandledrejection',function(e){"
                "window.__errors.push('rejection')});</script>")

#: Put last in <body>: after load, writes what the test reads as data- attributes of <html>.
REPORT_STATE = """<script>window.addEventListener('load', function () {
  var d = document.documentElement, imgs = Array.prototype.slice.call(document.images);
  var shown = imgs.filter(function (i) { return i.complete && i.naturalWidth > 0 && i.naturalHeight > 0; });
  var fits = imgs.filter(function (i) { return i.getBoundingClientRect().width <= document.body.clientWidth + 1; });
  var outside = performance.getEntriesByType('resource').filter(function (r) { return !/^data:/.test(r.name); });
  var print = false;
  Array.prototype.forEach.call(document.styleSheets, function (s) {
    Array.prototype.forEach.call(s.cssRules, function (r) {
      if (r.media && r.media.mediaText === 'print' && /nav\\s*\\{\\s*display:\\s*none/.test(r.cssText)) print = true;
    });
  });
  d.setAttribute('data-images', imgs.length); d.setAttribute('data-images-shown', shown.length);
  d.setAttribute('data-images-fit', fits.length); d.setAttribute('data-tables', document.querySelectorAll('table').length);
  d.setAttribute('data-outside', outside.length); d.setAttribute('data-print-rule', print);
  d.setAttribute('data-overflow', d.scrollWidth - window.innerWidth);
  d.setAttribute('data-errors', window.__errors.length);
});</script>"""


def browse(page_path, tmp_path, width: int, height: int) -> tuple[dict, list[str]]:
    """Open a copy of the page (with the two test scripts added), in a folder without the plots, in headless
    Chromium at ``width`` x ``height``; return the data- attributes the scripts set and the browser's console lines."""
    text = page_path.read_text(encoding="utf-8")
    probe = tmp_path / f"probe-{width}.html"
    probe.write_text(text.replace("<head>\n", "<head>\n" + CATCH_ERRORS + "\n", 1)
                     .replace("</body>", REPORT_STATE + "\n</body>", 1), encoding="utf-8")
    done = subprocess.run([CHROMIUM, "--headless", "--disable-gpu", "--no-sandbox", "--enable-logging=stderr",
                           "--v=0", f"--window-size={width},{height}", "--virtual-time-budget=5000",
                           f"--user-data-dir={tmp_path / f'profile-{width}'}", "--dump-dom", probe.as_uri()],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
    root = re.search(r"<html[^>]*>", done.stdout).group(0)
    state = dict(re.findall(r'data-([a-z-]+)="([^"]*)"', root))
    console = [line for line in done.stderr.splitlines() if ":CONSOLE" in line]
    return state, console


@pytest.mark.skipif(CHROMIUM is None, reason=NO_CHROMIUM)
@pytest.mark.parametrize("width, height", [(390, 844), (1366, 900)])
def test_page_in_a_real_browser(page, tmp_path, width, height):
    """Phone (390 px) and desktop width: no console message or script error, every plot decoded and no wider
    than the page, every table there, nothing fetched from outside the page, the page itself no wider than the
    window (wide tables scroll inside their box), and the browser parses the print rule."""
    state, console = browse(page["path"], tmp_path, width, height)
    assert console == [] and state["errors"] == "0"
    images = int(state["images"])
    assert images == 4 and state["images-shown"] == str(images) and state["images-fit"] == str(images)
    assert int(state["tables"]) == page["text"].count("<table>")
    assert state["outside"] == "0" and state["print-rule"] == "true"
    assert int(state["overflow"]) <= 0


@pytest.mark.skipif(CHROMIUM is None, reason=NO_CHROMIUM)
def test_the_probe_sees_a_broken_plot_and_a_script_error(page, tmp_path):
    """The browser check can fail: an image whose data is not a PNG is not shown, and a thrown error is counted."""
    text = page["text"]
    first = sources(text)[0]
    broken = text.replace(html.escape(first), "data:image/png;base64," + base64.b64encode(b"not a png").decode(), 1)
    broken = broken.replace("</body>", "<script>throw new Error('demo');</script>\n</body>", 1)
    path = tmp_path / "broken.html"
    path.write_text(broken, encoding="utf-8")
    state, console = browse(path, tmp_path, 390, 844)
    assert state["images-shown"] == "3"
    assert state["errors"] == "2"  # the image's load error (caught in the capture phase) and the thrown one
    assert any("demo" in line for line in console)


@pytest.mark.skipif(CHROMIUM is None, reason=NO_CHROMIUM)
def test_page_prints(page, tmp_path):
    """Printed to PDF by the browser (the print stylesheet applies): a PDF file of several pages."""
    pdf = tmp_path / "report.pdf"
    done = subprocess.run([CHROMIUM, "--headless", "--disable-gpu", "--no-sandbox", "--no-pdf-header-footer",
                           f"--user-data-dir={tmp_path / 'profile-pdf'}", f"--print-to-pdf={pdf}",
                           page["path"].as_uri()], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF-")  # ISO 32000-1, 7.5.2 file header
    assert len(re.findall(rb"/Type\s*/Page[^s]", data)) >= 2
