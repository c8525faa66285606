"""The study report in a real browser: headless Chromium loads it, checks it and prints it.

Asserted: the page loads without a single console message (the report has no scripts, so any
message is a fault: a script error, a blocked resource, a Content-Security-Policy violation);
every section is shown by its heading; every image decodes with a non-zero size; markup and
script in the spec's notes stay text (nothing runs even with the page's script ban removed); and
printing gives at least the expected number of pages.

`make test` installs Debian's ``chromium`` when it is missing. Without it this module is skipped
with the reason, except under ``CI=true``, where a missing browser fails.

Sources: the PDF page-object convention (``/Type /Page``, ISO 32000-1:2008, sec. 7.7.3.3) for
counting printed pages; the rest are properties of the page itself (common practice for a
browser smoke test), no published values.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import tempfile
from pathlib import Path

import pytest

from simloop.report_html import SECTIONS, write_report
from simloop.spec import load
from simloop.studies import run_study
from tests.conftest import write_spec
from tests.test_study import SMALL_IMPERIAL

#: Pages the small test report prints to at least. Measured: 11 pages (Chromium, Letter, the
#: browser's default paper; 8 before the boost and pattern sections). The lower bound holds for
#: A4 too and catches a layout that lost its figures or tables (a report of headings alone
#: prints on 2).
EXPECTED_MIN_PAGES = 8

#: The report's figures in order (their alt texts), one per section that has one.
FIGURES = ["front and side views of the loop", "coverage, setting and bandwidth against frequency",
           "boost against frequency, capacitor and spacing", "placement maps of the radio in the table plane",
           "polar receive patterns with their nulls"]

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--hide-scrollbars"]

PROBE = """<script id="probe-script">
window.__errors = [];
window.addEventListener("error", function (e) {
  window.__errors.push(String(e.message || (e.target && e.target.tagName) || e.type));
}, true);
window.addEventListener("load", function () {
  var imgs = Array.prototype.slice.call(document.images);
  var r = {
    title: document.title,
    errors: window.__errors,
    scripts: document.scripts.length,
    images: imgs.map(function (i) { return {w: i.naturalWidth, h: i.naturalHeight, done: i.complete,
                                            shown: i.getBoundingClientRect().width, alt: i.alt}; }),
    headings: Array.prototype.slice.call(document.querySelectorAll("h2")).map(function (h) {
      return {text: h.textContent, shown: h.getBoundingClientRect().height > 0 &&
              getComputedStyle(h).visibility !== "hidden"}; })
  };
  var pre = document.createElement("pre");
  pre.id = "probe";
  pre.textContent = JSON.stringify(r);
  document.body.appendChild(pre);
});
</script>"""


def _chromium() -> str:
    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    if exe:
        return exe
    if os.environ.get("CI", "").lower() == "true":
        pytest.fail("chromium is not installed: the browser test must run in CI (make test installs it)")
    pytest.skip("chromium is not installed and could not be installed here (make test tries apt-get); "
                "the report's browser checks did not run")


def _run(exe: str, *args: str) -> subprocess.CompletedProcess:
    with tempfile.TemporaryDirectory() as home:
        env = {**os.environ, "XDG_CONFIG_HOME": home, "XDG_CACHE_HOME": home, "HOME": home}
        return subprocess.run([exe, *FLAGS, f"--user-data-dir={home}", *args], env=env,
                              capture_output=True, text=True, timeout=120)


def _console(stderr: str) -> list[str]:
    """Console messages the page produced (Chromium logs them as ``INFO:CONSOLE...`` lines)."""
    return [line for line in stderr.splitlines() if ":CONSOLE" in line]


@pytest.fixture(scope="module")
def report(tmp_path_factory) -> Path:
    exe = _chromium()
    folder = tmp_path_factory.mktemp("browser")
    spec = load(write_spec(folder, SMALL_IMPERIAL))
    result = run_study(spec, workers=1, convergence=False)
    return exe, write_report(result, folder / "out")


def test_report_loads_without_console_messages_and_shows_every_section(report):
    exe, path = report
    run = _run(exe, "--enable-logging=stderr", "--v=0", "--virtual-time-budget=5000", "--dump-dom",
               path.as_uri())
    assert run.returncode == 0, run.stderr[-2000:]
    assert _console(run.stderr) == []
    headings = re.findall(r"<h2>(.*?)</h2>", run.stdout)
    assert headings == [h for _, h, _ in SECTIONS]
    assert "<script" not in run.stdout.lower()


def test_every_image_decodes_and_user_text_stays_text(report, tmp_path):
    """The same report with the script ban lifted and a probe script added: images decode with a
    size, every heading is laid out, and the spec's script and onerror markup did not run."""
    exe, path = report
    page = path.read_text(encoding="utf-8")
    page, n = re.subn(r'<meta http-equiv="Content-Security-Policy"[^>]*>', "", page)
    assert n == 1
    page = page.replace("<head>", "<head>" + PROBE, 1)
    probe_page = tmp_path / "probe.html"
    probe_page.write_text(page, encoding="utf-8")
    run = _run(exe, "--enable-logging=stderr", "--v=0", "--virtual-time-budget=5000", "--dump-dom",
               probe_page.as_uri())
    assert run.returncode == 0, run.stderr[-2000:]
    found = re.search(r'<pre id="probe">(.*?)</pre>', run.stdout, re.S)
    assert found, "the probe did not run: the page never finished loading"
    import html

    r = json.loads(html.unescape(found.group(1)))
    assert r["errors"] == []
    assert _console(run.stderr) == []
    assert r["title"] == "small-imperial: loop study"  # the notes' script would set "PWNED"
    assert r["scripts"] == 1  # the probe alone
    # the loop drawing, coverage, boost, placement map and the polar patterns
    assert [i["alt"] for i in r["images"]] == FIGURES
    for img in r["images"]:
        assert img["done"] and img["w"] > 0 and img["h"] > 0 and img["shown"] > 0, img
    assert [h["text"] for h in r["headings"]] == [h for _, h, _ in SECTIONS]
    assert all(h["shown"] for h in r["headings"])
    assert "Bench &lt;b&gt;test&lt;/b&gt;" in run.stdout


def test_report_prints_to_the_expected_pages(report, tmp_path):
    exe, path = report
    pdf = tmp_path / "report.pdf"
    run = _run(exe, "--no-pdf-header-footer", f"--print-to-pdf={pdf}", path.as_uri())
    assert run.returncode == 0, run.stderr[-2000:]
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF")
    pages = len(re.findall(rb"/Type\s*/Page(?![A-Za-z])", data))
    assert pages >= EXPECTED_MIN_PAGES
