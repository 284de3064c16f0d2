"""A real browser renders the report: headless Chromium takes a screenshot, which must not be blank.

Skips, saying why, only when no Chromium or Chrome is installed (CI installs Debian's ``chromium``;
see .ci/run). The browser runs offline-minded (no background networking, no component updates,
no sync) with a fresh profile in a temporary folder.
"""

from __future__ import annotations

import subprocess

import numpy as np
import pytest
from conftest import BROWSER_NAMES, CHROMIUM_FLAGS, find_tool  # noqa: E402  (tests/ is on sys.path under pytest)
from test_plots import THREE_MODES, make_analysis  # noqa: E402

from ringdown.analysis.results import Analysis
from ringdown.base.errors import InputError
from ringdown.render.report import write_report

pytestmark = pytest.mark.browser


def _browser() -> str | None:
    return find_tool("/usr/bin/chromium", *BROWSER_NAMES)


def _screenshot(browser: str, html_path, png_path, profile) -> subprocess.CompletedProcess:
    cmd = [
        browser,
        *CHROMIUM_FLAGS,
        "--hide-scrollbars",
        f"--user-data-dir={profile}",
        f"--screenshot={png_path}",
        "--window-size=1200,1600",
        f"file://{html_path}",
    ]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120)


def test_browser_renders_report(tmp_path):
    browser = _browser()
    if browser is None:
        pytest.skip(
            "no Chromium/Chrome found (looked for chromium, chromium-browser, google-chrome); "
            "install Debian's 'chromium' package to run this test"
        )
    import matplotlib.image

    good = make_analysis(path="bar_A.wav", modes=THREE_MODES, n_hits=2)
    hostile = make_analysis(path="<script>alert(1)</script>.wav", clipped=True)
    failed = Analysis.failed("missing.wav", InputError("cannot open 'missing.wav': no such file; check the path"))
    html_path = tmp_path / "report.html"
    write_report([good, hostile, failed], html_path, settings={"method": "auto"})
    png_path = tmp_path / "shot.png"
    proc = _screenshot(browser, html_path, png_path, tmp_path / "profile")
    assert png_path.exists(), f"no screenshot; browser said: {proc.stderr[-800:]}"
    img = matplotlib.image.imread(str(png_path))
    assert img.shape[0] == 1600 and img.shape[1] == 1200  # the window size asked for
    rgb = img[..., :3].reshape(-1, 3)
    # A blank page is one colour (std 0). The report's top shows a heading, a blue rule, tables
    # with shaded rows, and the first figure: many distinct colours and a clear spread of values.
    n_colours = np.unique((rgb * 255).round().astype(np.uint8), axis=0).shape[0]
    assert n_colours > 50, n_colours
    assert float(rgb.std()) > 0.05
    # Dark text occupies a sizeable share of the page (common practice, no source: a text page
    # is a few per cent ink); a blank or error page has next to none.
    dark = np.mean(rgb.mean(axis=1) < 0.4)
    assert 0.005 < dark < 0.5, dark
