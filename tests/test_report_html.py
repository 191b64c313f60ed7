"""report.html as a reader's browser shows it.

The page is opened in headless Chromium (the Debian ``chromium`` package) at a
desktop width (1280 px) and a phone width (420 px): a screenshot must be
made, and the page must not be wider than the window (a wide results table
scrolls inside its own box instead). The narrow width is set by loading the
report into an iframe of that width, because headless Chromium keeps its
window at least 500 px wide. Without Chromium these tests are skipped with a
message saying how to install it; the checks on the HTML text itself always
run.
"""

from __future__ import annotations

import contextlib
import io
import re
import shutil
import subprocess
from pathlib import Path

import pytest
from matplotlib.image import imread

from simcheck.cli import main

SCENARIO = """
title = "Minutes per service call (invented example, a very long title that has to wrap on a phone screen)"
[target]
estimand = "mean"
confidence = 0.95
margin = 2.0
assurance = 0.5
coverage_tolerance = 0.01
[data]
model = "gamma"
mean = 10.0
cv = 0.8
[method]
interval = ["t", "johnson-t"]
[simulation]
replicates = 600
seed = 777
n_min = 5
n_max = 200
budget = 4000
"""

WIDTHS = (1280, 420)


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome", "chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


needs_chromium = pytest.mark.skipif(
    _chromium() is None,
    reason="headless Chromium not found; install it with `apt-get install -y chromium` to check report.html in a browser",
)


@pytest.fixture(scope="module")
def report_dir(tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("html")
    (d / "s.toml").write_text(SCENARIO, encoding="utf-8")
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        rc = main(["report", str(d / "s.toml"), "--out", str(d / "out")])
    assert rc == 0
    return d / "out"


def _browser(*args: str, timeout: float = 90) -> subprocess.CompletedProcess:
    cmd = [_chromium(), "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars",
           "--allow-file-access-from-files", "--virtual-time-budget=5000", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=timeout)


def _overflow(page: Path, width: int, tmp: Path) -> tuple[int, int]:
    """(scrollWidth, clientWidth) of the report shown in a frame ``width`` px wide."""
    wrap = tmp / f"wrap{width}.html"
    wrap.write_text(
        f'<!DOCTYPE html><html><body style="margin:0"><iframe id="f" src="{page.as_uri()}" '
        f'style="width:{width}px;height:900px;border:0"></iframe><script>'
        'window.addEventListener("load", function () {'
        ' var d = document.getElementById("f").contentDocument;'
        ' document.body.setAttribute("data-check", d ? d.documentElement.scrollWidth + "," +'
        ' d.documentElement.clientWidth : "no-access"); });</script></body></html>',
        encoding="utf-8")
    out = _browser("--window-size=1400,1000", "--dump-dom", wrap.as_uri())
    m = re.search(r'data-check="(\d+),(\d+)"', out.stdout)
    assert m, f"the check script did not run: {out.stdout[-300:]} {out.stderr[-300:]}"
    return int(m.group(1)), int(m.group(2))


@needs_chromium
@pytest.mark.parametrize("width", WIDTHS)
def test_report_html_renders_without_horizontal_overflow(report_dir, tmp_path, width):
    page = report_dir / "report.html"
    shot = tmp_path / f"report-{width}.png"
    out = _browser(f"--window-size={width},2400", f"--screenshot={shot}", page.as_uri())
    assert shot.is_file() and shot.stat().st_size > 10_000, out.stderr[-500:]
    img = imread(shot)
    assert img.shape[1] == width and img.shape[0] == 2400
    # the page is never wider than the window: wide tables scroll in their own box
    scroll, client = _overflow(page, width, tmp_path)
    assert scroll <= client, f"page {scroll} px wide in a {client} px window"


def test_report_html_is_small_and_says_what_figures_show(report_dir):
    page = report_dir / "report.html"
    text = page.read_text(encoding="utf-8")
    # screen-resolution PNG inside, full resolution beside (common practice for web pages: < about 300 KB)
    assert page.stat().st_size < 300_000
    for name in ("coverage", "margin", "misses"):
        assert f'href="figures/{name}.png"' in text and (report_dir / "figures" / f"{name}.png").is_file()
    alts = re.findall(r'<img alt="([^"]*)"', text)
    assert len(alts) == 3
    assert all(len(a) > 60 and "figure" not in a.split()[-1] for a in alts)
    assert alts[0].startswith("Line chart of coverage against sample size n")
    # tables scroll instead of being cut
    assert "overflow-x: auto" in text
    assert text.count('<div class="table-scroll"><table>') == text.count("<table>")
