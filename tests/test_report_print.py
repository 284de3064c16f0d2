"""Each kind of report (analysis, comparison, check) printed to PDF by headless Chromium.

What is checked, per report and per paper size (A4, and Letter, Chromium's default):
- every column heading of the wide tables is in the PDF's text (``pdftotext``): nothing was cut
  off at the page edge;
- no word lies outside the page box (``pdftotext -bbox``: each word's box against the page size);
- the first page, rendered by ``pdftoppm``, holds ink (not blank);
- on a 1280 px wide screen no table reaches past the window (the right edges of the tables,
  measured by Chromium's own layout in a copy of the page with a measuring script).

Inputs are the shipped example recordings (invented demo data, example_signals/README.md) and a
simulated two-mode decay. Skips, saying why, when Chromium or poppler-utils is missing (.ci/run
installs both).
"""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

import numpy as np
import pytest
from conftest import BROWSER_NAMES, CHROMIUM_FLAGS, find_tool, ringdown_modes  # noqa: E402  (tests/ is on sys.path under pytest)
from typer.testing import CliRunner

import ringdown
from ringdown.cli import app

pytestmark = pytest.mark.browser

EXAMPLES = Path(__file__).resolve().parents[1] / "example_signals"

#: Column headings of the wide tables of each report kind (what printing used to cut off).
ANALYSIS_HEADINGS = [
    "f_d, Hz",
    "β, 1/s",
    "f_n, Hz",
    "ζ",
    "Q",
    "loss factor η",
    "log decrement δ",
    "f_r, Hz",
    "decay, dB/s",
    "T60, s",
    "method",
    "window, s",
    "cycles",
    "SNR, dB",
    "hits",
    "warnings",
]
COMPARISON_HEADINGS = [
    "f_d before, Hz",
    "f_d after, Hz",
    "shift, %",
    "ζ before",
    "ζ after",
    "ζ after/before",
    "test",
    "verdict",
    "Q before",
    "Q after",
    "T60 before, s",
    "T60 after, s",
    "condition",
    "sample rate, Hz",
    "repeats",
    "error",
]
CHECK_HEADINGS = [
    "part",
    "verdict",
    "reasons",
    "notes",
    "feature",
    "measured",
    "window",
    "result",
    "f_d, Hz",
    "T60, s",
    "SNR, dB",
    "warnings",
]


def _need_tools() -> tuple[str, str, str]:
    browser = find_tool(*BROWSER_NAMES)
    pdftotext, pdftoppm = find_tool("pdftotext"), find_tool("pdftoppm")
    if browser is None:
        pytest.skip("no Chromium/Chrome found; install Debian's 'chromium' package (.ci/run does)")
    if pdftotext is None or pdftoppm is None:
        pytest.skip("pdftotext/pdftoppm not found; install Debian's 'poppler-utils' package (.ci/run does)")
    return browser, pdftotext, pdftoppm


def _chromium(browser: str, profile: Path, *args: str) -> subprocess.CompletedProcess:
    cmd = [
        browser,
        *CHROMIUM_FLAGS,
        f"--user-data-dir={profile}",
        *args,
    ]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=180)


def _print_pdf(browser: str, html: Path, pdf: Path, profile: Path) -> None:
    proc = _chromium(browser, profile, "--no-pdf-header-footer", f"--print-to-pdf={pdf}", f"file://{html}")
    assert pdf.exists() and pdf.stat().st_size > 1000, f"no PDF; browser said: {proc.stderr[-800:]}"


def _with_paper(html: Path, paper: str, out: Path) -> Path:
    """A copy of the report printed on ``paper`` (the report itself leaves the size to the printer)."""
    text = html.read_text(encoding="utf-8")
    out.write_text(text.replace("</style>", f"@page {{ size: {paper}; }}</style>", 1), encoding="utf-8")
    return out


def _words(pdftotext: str, pdf: Path) -> list[tuple[int, float, float, float, float, float, float, str]]:
    """(page, page width, page height, xmin, ymin, xmax, ymax, word) of every word, points."""
    html = subprocess.run([pdftotext, "-bbox", str(pdf), "-"], capture_output=True, text=True, check=True).stdout
    out, page, pw, ph = [], 0, 0.0, 0.0
    for line in html.splitlines():
        m = re.search(r'<page width="([\d.]+)" height="([\d.]+)"', line)
        if m:
            page, pw, ph = page + 1, float(m.group(1)), float(m.group(2))
            continue
        m = re.search(r'<word xMin="([-\d.]+)" yMin="([-\d.]+)" xMax="([-\d.]+)" yMax="([-\d.]+)">(.*)</word>', line)
        if m:
            out.append((page, pw, ph, *(float(m.group(k)) for k in range(1, 5)), m.group(5)))
    return out


def _text(pdftotext: str, pdf: Path) -> str:
    raw = subprocess.run([pdftotext, str(pdf), "-"], capture_output=True, text=True, check=True).stdout
    return re.sub(r"\s+", " ", raw)


def _assert_printable(tools, html: Path, headings: list[str], tmp: Path) -> list[Path]:
    browser, pdftotext, pdftoppm = tools
    pngs = []
    for paper in ("A4", "letter"):
        copy = _with_paper(html, paper, tmp / f"{html.stem}_{paper}.html")
        pdf = tmp / f"{html.stem}_{paper}.pdf"
        _print_pdf(browser, copy, pdf, tmp / "profile")
        words = _words(pdftotext, pdf)
        assert words, "the PDF holds no text"
        page_w = {"A4": 595.3, "letter": 612.0}[paper]
        assert abs(words[0][1] - page_w) < 1.5, (paper, words[0][1])
        # no word outside the page box (a table wider than the page is cut at its edge)
        outside = [w for w in words if w[3] < -0.5 or w[5] > w[1] + 0.5 or w[6] > w[2] + 0.5]
        assert not outside, outside[:5]
        # and every heading of the wide tables is there, whole
        text = _text(pdftotext, pdf)
        flat = " ".join(w[7] for w in words)
        missing = [h for h in headings if h not in text and h not in flat]
        assert not missing, (paper, missing)
        stem = tmp / f"{html.stem}_{paper}"
        subprocess.run([pdftoppm, "-r", "60", "-f", "1", "-l", "1", "-png", str(pdf), str(stem)], check=True)
        png = next(tmp.glob(f"{stem.name}*.png"))
        import matplotlib.image

        img = matplotlib.image.imread(str(png))[..., :3]
        ink = float(np.mean(img.mean(axis=2) < 0.5))
        assert 0.003 < ink < 0.5, ink  # common practice, no source: a printed text page is a few per cent ink
        pngs.append(png)
    return pngs


def _assert_fits_1280(browser: str, html: Path, tmp: Path) -> None:
    """No table's right edge past a 1280 px window (Chromium's layout, read from the DOM)."""
    script = (
        "<script>addEventListener('load', () => { const r = [...document.querySelectorAll('table')]"
        ".map(t => t.getBoundingClientRect().right); document.body.setAttribute('data-right', "
        "Math.max(0, ...r)); document.body.setAttribute('data-width', document.documentElement.clientWidth);"
        " });</script>"
    )
    probe = tmp / f"{html.stem}_probe.html"
    probe.write_text(html.read_text(encoding="utf-8").replace("</body>", script + "</body>", 1), encoding="utf-8")
    proc = _chromium(
        browser,
        tmp / "profile",
        "--window-size=1280,900",
        "--virtual-time-budget=5000",
        "--dump-dom",
        f"file://{probe}",
    )
    m = re.search(r'data-right="([\d.]+)" data-width="(\d+)"', proc.stdout)
    assert m, proc.stderr[-800:]
    right, width = float(m.group(1)), int(m.group(2))
    assert 1000 <= width <= 1280 and right <= width, (right, width)


@pytest.fixture(scope="module")
def tools():
    return _need_tools()


def test_analysis_report_prints_whole(tools, tmp_path):
    # invented two-mode decay, seeded noise; three modes would do as well
    x = ringdown_modes([(523.0, 4.0, 0.5), (1377.0, 11.0, 0.3)], sample_rate=8000.0, duration_s=1.5, seed=3)
    a = ringdown.analyze(x, 8000.0)
    html = tmp_path / "analysis.html"
    ringdown.write_report(
        [a, a],
        html,
        title="Bracket tap test",
        notes="invented demo data",
        fields=[("serial", "BR-0042"), ("operator", "A. Tester")],
    )
    _assert_printable(tools, html, ANALYSIS_HEADINGS + ["Sign-off", "BR-0042"], tmp_path)
    _assert_fits_1280(tools[0], html, tmp_path)


def test_comparison_report_prints_whole(tools, tmp_path):
    html = tmp_path / "comparison.html"
    t = EXAMPLES / "treatment"
    r = CliRunner().invoke(
        app,
        [
            "compare",
            "--before",
            str(t / "before_*.wav"),
            "--after",
            str(t / "after_*.wav"),
            "--report",
            str(html),
            "--serial",
            "BR-7",
            "--title",
            "Patch trial",
        ],
    )
    assert r.exit_code == 0, r.output
    _assert_printable(tools, html, COMPARISON_HEADINGS + ["Patch trial", "BR-7"], tmp_path)
    _assert_fits_1280(tools[0], html, tmp_path)


def test_check_report_prints_whole(tools, tmp_path):
    line = EXAMPLES / "line"
    lim = tmp_path / "limits.toml"
    r = CliRunner().invoke(
        app, ["limits", "learn", *map(str, sorted(line.glob("good_0*.wav"))), "-o", str(lim), "--jobs", "1"]
    )
    assert r.exit_code == 0, r.output
    html = tmp_path / "check.html"
    r = CliRunner().invoke(
        app,
        [
            "check",
            "--limits",
            str(lim),
            str(line / "crack.wav"),
            str(line / "good_warm.wav"),
            str(line / "good_01.wav"),
            "--db",
            str(tmp_path / "h.sqlite"),
            "--jobs",
            "1",
            "--report",
            str(html),
            "--station",
            "EOL-2",
            "--operator",
            "A. Tester",
            "--serial",
            "LOT-7",
        ],
    )
    assert r.exit_code == 1, r.output  # the cracked part fails
    _assert_printable(tools, html, CHECK_HEADINGS + ["EOL-2", "A. Tester", "LOT-7", "limits SHA-256"], tmp_path)
    _assert_fits_1280(tools[0], html, tmp_path)
