"""Tests of ringdown.render.report and ringdown.cli.render: a self-contained, escaped, complete HTML report.

Analyses are hand-built around simulated signals (see tests/test_plots.py, invented data). The
report is parsed with the standard library's html.parser; checks are on its structure (tables,
images, links) and on the numbers in the modes table, read back and compared with the mode's
values to the rounding the report documents (GUM, JCGM 100:2008, 7.2.6: the uncertainty to two
significant digits, the value to the same decimal place).
"""

from __future__ import annotations

import base64
import math
import os
import re
from html.parser import HTMLParser

import numpy as np
import pytest
from test_plots import THREE_MODES, make_analysis  # noqa: E402  (tests/ is on sys.path under pytest)

import ringdown
from ringdown.analysis.results import Analysis, Notice
from ringdown.base.errors import InputError, ParameterError
from ringdown.cli import render
from ringdown.render.report import Section, html_table, render_report, write_report


class _Doc(HTMLParser):
    """Collects tags, attributes, tables (as lists of rows of cell text) and text."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.tables: list[list[list[str]]] = []
        self._cell: list[str] | None = None
        self._row: list[str] | None = None
        self.text: list[str] = []
        self.headings: list[str] = []
        self._in_h = False

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag == "table":
            self.tables.append([])
        elif tag == "tr":
            self._row = []
        elif tag in ("td", "th"):
            self._cell = []
        elif tag in ("h1", "h2", "h3"):
            self._in_h = True
            self.headings.append("")

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            self._row.append("".join(self._cell).strip())
            self._cell = None
        elif tag == "tr" and self._row is not None:
            self.tables[-1].append(self._row)
            self._row = None
        elif tag in ("h1", "h2", "h3"):
            self._in_h = False

    def handle_data(self, data):
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)
        if self._in_h:
            self.headings[-1] += data


def _parse(text: str) -> _Doc:
    d = _Doc()
    d.feed(text)
    d.close()
    return d


def _modes_table(doc: _Doc) -> list[list[str]]:
    tables = [t for t in doc.tables if t and t[0][:2] == ["#", "f_d, Hz"]]
    fits = [t for t in doc.tables if t and t[0][:2] == ["#", "f_r, Hz"]]
    assert len(fits) == len(tables), "each modes table has its fit table"
    # join each pair row by row (the '#' column is repeated)
    tables = [[a + b[1:] for a, b in zip(t, f)] for t, f in zip(tables, fits)]
    assert tables, "no modes table"
    return tables


def _read_pm(cell: str) -> tuple[float, float, float]:
    """Parse the concise form 'v(u)' or 'v(u)eN' into (value, u, place of the last digit)."""
    m = re.fullmatch(r"(-?\d+(?:\.(\d+))?)\((\d+)\)(?:e(-?\d+))?", cell)
    assert m, cell
    exp = int(m.group(4)) if m.group(4) else 0
    dec = len(m.group(2)) if m.group(2) else 0
    place = 10.0 ** (exp - dec)
    return float(m.group(1)) * 10.0**exp, int(m.group(3)) * place, place


def _assert_close_to_rounding(cell: str, value: float, u: float):
    v, uu, place = _read_pm(cell)
    half = 0.5 * place * (1 + 1e-9)
    assert abs(v - value) <= half + 1e-12 * abs(value), (cell, value)
    assert abs(uu - u) <= half, (cell, u)
    # Two significant digits in the uncertainty (GUM 7.2.6): 10..99 units of the last place.
    assert 10 <= round(uu / place) <= 99, cell


@pytest.fixture(scope="module")
def three_mode_report():
    a = make_analysis(modes=THREE_MODES, n_hits=2)
    return a, render_report([a], settings={"method": "auto"}, generated="2024-01-01T00:00:00+00:00")


# --------------------------------------------------------------------------------------------
# content
# --------------------------------------------------------------------------------------------


def test_modes_table_holds_the_mode_values(three_mode_report):
    a, text = three_mode_report
    doc = _parse(text)
    (table,) = _modes_table(doc)
    header, rows = table[0], table[1:]
    assert header == [
        "#",
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
    assert len(rows) == len(a.modes)
    for row, m in zip(rows, a.modes):
        assert row[0] == str(m.index)
        col = dict(zip(header, row))
        _assert_close_to_rounding(col["f_d, Hz"], m.f_d_hz, m.f_d_hz_u)
        _assert_close_to_rounding(col["β, 1/s"], m.beta_per_s, m.beta_per_s_u)
        _assert_close_to_rounding(col["ζ"], m.zeta, m.zeta_u)
        _assert_close_to_rounding(col["Q"], m.q, m.q_u)
        _assert_close_to_rounding(col["T60, s"], m.t60_s, m.t60_s_u)
        # Q = 1/(2 zeta) (the report's stated definition; quantities.py): check the printed pair.
        q, _, _ = _read_pm(col["Q"])
        z, _, _ = _read_pm(col["ζ"])
        assert q == pytest.approx(1 / (2 * z), rel=2e-2)
        assert col["method"] == "envelope"
        lo, hi = (float(s) for s in col["window, s"].split(" to "))
        assert lo == pytest.approx(m.fit_start_s, rel=1e-3) and hi == pytest.approx(m.fit_end_s, rel=1e-3)
        assert float(col["SNR, dB"]) == pytest.approx(m.snr_db, abs=0.05)


def test_report_has_file_facts_settings_definitions_and_caution(three_mode_report, tmp_path):
    a, text = three_mode_report
    doc = _parse(text)
    kv = {r[0]: r[1] for t in doc.tables for r in t if len(r) == 2}
    assert kv["SHA-256"] == a.sha256
    assert kv["size"] == "unknown"  # bar_A.wav does not exist where the test runs
    assert kv["sample rate"] == "8000 Hz"
    assert kv["duration"].startswith("2 s")
    assert kv["tool"] == f"ringdown {ringdown.__version__}"
    assert kv["min_snr_db"] == "10.0" and kv["method"] == "auto"
    body = " ".join(doc.text)
    assert "Q = 1/(2ζ)" in body
    flat = re.sub(r"\s+", " ", body)
    assert "JCGM 100:2008" in flat and "coverage factor k = 1" in flat
    assert "Caution" in doc.headings and "licensed practice" in body
    # Warnings in plain words with their code.
    assert "a second tap 0.9 s after the first" in body and "(double_hit)" in body
    # Size from os.stat when the file exists: write 1234 bytes and point the analysis at them.
    f = tmp_path / "real.wav"
    f.write_bytes(b"\0" * 1234)
    b = make_analysis(path=str(f))
    kv2 = {r[0]: r[1] for t in _parse(render_report([b], figures=False)).tables for r in t if len(r) == 2}
    assert kv2["size"] == "1234 bytes"


def test_report_embeds_figures_and_loads_nothing(three_mode_report):
    _, text = three_mode_report
    doc = _parse(text)
    imgs = [attrs for tag, attrs in doc.tags if tag == "img"]
    # overview + one figure per mode with a trace (3 modes).
    assert len(imgs) == 4
    for attrs in imgs:
        src = attrs["src"]
        assert src.startswith("data:image/png;base64,")
        png = base64.b64decode(src.split(",", 1)[1])
        assert png[:8] == b"\x89PNG\r\n\x1a\n"
        assert attrs.get("alt")
    assert not [t for t, _ in doc.tags if t in ("script", "link", "iframe", "object", "embed")]
    low = text.lower()
    assert "http:" not in low and "https:" not in low  # ':' is not in the base64 alphabet
    assert "@import" not in low and "url(" not in low
    for _tag, attrs in doc.tags:
        for k in ("src", "href"):
            if k in attrs:
                assert attrs[k].startswith(("data:", "#")), attrs[k]


def test_svg_figures_are_embedded_as_data_uris():
    a = make_analysis()
    text = render_report(a, figure_format="svg")
    imgs = [attrs["src"] for tag, attrs in _parse(text).tags if tag == "img"]
    assert len(imgs) == 2 and all(s.startswith("data:image/svg+xml;base64,") for s in imgs)
    assert b"<svg" in base64.b64decode(imgs[0].split(",", 1)[1])
    assert "http:" not in text
    with pytest.raises(ParameterError, match="'png' or 'svg'"):
        render_report(a, figure_format="gif")


def test_hostile_names_are_escaped():
    evil = "<script>alert(1)</script>.wav"
    a = make_analysis(path=evil, modes=THREE_MODES[:1])
    a = Analysis(
        **{
            **{k: getattr(a, k) for k in a.__dataclass_fields__},
            "channel": '"><img src=x onerror=alert(2)>',
            "settings": {"<u>bold</u>": "</td><script>x()</script>"},
            "warnings": (Notice("<marquee>code</marquee>", "level <blink> & more"),),
        }
    )
    failed = Analysis.failed("<svg onload=alert(3)>.csv", InputError("cannot read '<svg onload=alert(3)>.csv'"))
    # A name without '/' is its own base name: it is the section heading, as text.
    img = make_analysis(path="<img src=x onerror=alert(4)>.wav")
    text = render_report(
        [a, failed, img],
        title="<title>t</title>",
        figures=False,
        extra_sections=[Section("<h1>x</h1>", "<p>trusted</p>")],
    )
    doc = _parse(text)
    # None of these tags is ever written by the report itself: each would come from an input.
    assert not [t for t, _ in doc.tags if t in ("script", "svg", "blink", "u", "marquee")]
    assert [t for t, _ in doc.tags if t in ("title", "h1")] == ["title", "h1"]  # the report's own
    assert not [attrs for t, attrs in doc.tags if t == "img"]  # figures off: no image at all
    assert "&lt;script&gt;alert(1)&lt;/script&gt;.wav" in text
    body = "".join(doc.text)
    assert evil in body and "<svg onload=alert(3)>.csv" in body and "level <blink> & more" in body
    assert doc.headings.count("<h1>x</h1>") == 1  # the extra section's title is text
    assert "3. <img src=x onerror=alert(4)>.wav" in doc.headings
    assert "<p>trusted</p>" in text  # its body is inserted as given
    for _, attrs in doc.tags:
        assert not any(k.startswith("on") for k in attrs)


def test_several_files_summary_and_failed_file():
    good = make_analysis(path="bar_A.wav")
    warn = make_analysis(path="bar_B.wav", clipped=True)
    bad = Analysis.failed("missing.wav", InputError("cannot open 'missing.wav': no such file; check the path"))
    text = render_report([good, warn, bad], figures=False)
    doc = _parse(text)
    assert doc.headings[:2] == ["Ring-down report", "Summary"]
    summary = next(t for t in doc.tables if t[0][:3] == ["#", "file", "analysis"])
    assert [r[1] for r in summary[1:]] == ["bar_A.wav", "bar_B.wav", "missing.wav"]
    # "analysed" is neutral: it says the analysis ran, not that a part passed
    assert summary[1][2] == "analysed" and summary[2][2] == "analysed, 1 warning" and summary[3][2] == "error: input"
    assert "cannot open 'missing.wav'" in summary[3][4]
    # Summary links point to each file's section.
    links = [attrs["href"] for t, attrs in doc.tags if t == "a"]
    ids = {attrs["id"] for t, attrs in doc.tags if "id" in attrs}
    assert len(links) == 3 and all(h[1:] in ids for h in links)
    # One section per file; the failed one shows its error and no modes table.
    assert [h for h in doc.headings if re.match(r"\d+\. ", h)] == ["1. bar_A.wav", "2. bar_B.wav", "3. missing.wav"]
    assert len(_modes_table(doc)) == 2
    assert "Not analysed:" in "".join(doc.text)


def test_extra_sections_and_bad_section():
    a = make_analysis()
    frag = html_table(["part", "result"], [["<A1>", "pass"]])
    text = render_report(a, figures=False, extra_sections=[Section("Checks", frag), ("Comparison", "<p>c</p>")])
    doc = _parse(text)
    h = doc.headings
    assert h.index("Checks") < h.index("Comparison") < h.index("Definitions") < h.index("Caution")
    assert "&lt;A1&gt;" in text
    with pytest.raises(ParameterError, match="extra report section"):
        render_report(a, extra_sections=["just a string"])


# --------------------------------------------------------------------------------------------
# writing files, and the CLI helpers
# --------------------------------------------------------------------------------------------


def test_write_report_and_errors(tmp_path):
    a = make_analysis()
    out = tmp_path / "r.html"
    assert write_report([a], out, figures=False) == str(out)
    assert out.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    with pytest.raises(ParameterError, match="cannot write the report to .*; choose a writable path"):
        write_report([a], tmp_path / "no" / "such" / "dir" / "r.html", figures=False)


def test_cli_write_plots(tmp_path):
    a = make_analysis(path="/x/bar A.wav", dva=True)
    b = make_analysis(path="/y/bar A.wav", keep_samples=False)  # same stem, no samples kept
    bad = Analysis.failed("gone.wav", InputError("cannot open 'gone.wav'"))
    paths = render.write_plots([a, b, bad], tmp_path / "plots", "svg")
    names = sorted(os.path.basename(p) for p in paths)
    # b has the same stem (suffix -2) and no samples: its overview is skipped, its mode figure is not.
    assert names == ["bar_A-2_mode1.svg", "bar_A_mode1.svg", "bar_A_mode1_damping.svg", "bar_A_overview.svg"]
    for p in paths:
        assert open(p, "rb").read(200).lstrip().startswith(b"<?xml")
    pngs = render.write_plots([make_analysis()], tmp_path / "png", "png")
    assert len(pngs) == 2 and all(open(p, "rb").read(8) == b"\x89PNG\r\n\x1a\n" for p in pngs)
    with pytest.raises(ParameterError, match="--plot-format must be one of png, svg, pdf; got 'jpg'"):
        render.write_plots([a], tmp_path, "jpg")
    blocker = tmp_path / "file"
    blocker.write_text("x")
    with pytest.raises(ParameterError, match="cannot create plot folder"):
        render.write_plots([a], blocker / "sub", "png")


def test_cli_write_report(tmp_path):
    out = render.write_report([make_analysis()], tmp_path / "r.html", {"plot_format": "png", "bands": None})
    text = open(out, encoding="utf-8").read()
    kv = {r[0]: r[1] for t in _parse(text).tables for r in t if len(r) == 2}
    assert kv["plot_format"] == "png" and kv["bands"] == "(default)"


# --------------------------------------------------------------------------------------------
# a real analysis of a simulated signal, once the pipeline is exported
# --------------------------------------------------------------------------------------------


def test_report_of_a_real_analysis():
    analyze = ringdown.analyze
    fs = 8000.0
    rng = np.random.default_rng(11)
    t = np.arange(int(2.0 * fs)) / fs
    # Two modes, 523 Hz (beta 4 /s) and 1377 Hz (beta 11 /s), invented; seeded noise 60 dB down.
    x = 0.5 * np.exp(-4 * t) * np.sin(2 * np.pi * 523 * t) + 0.3 * np.exp(-11 * t) * np.sin(2 * np.pi * 1377 * t)
    x = np.concatenate([np.zeros(800), x]) + 5e-4 * rng.standard_normal(t.size + 800)
    a = analyze(x, fs)
    assert a.error is None and len(a.modes) >= 2
    text = render_report([a])
    doc = _parse(text)
    (table,) = _modes_table(doc)
    assert len(table) - 1 == len(a.modes)
    f_cells = [_read_pm(r[1])[0] if "(" in r[1] else float(r[1]) for r in table[1:]]
    # The exact simulated frequencies, to the 0.5 Hz a 2 s record resolves easily (the estimators'
    # own accuracy is tested in their modules; here only that the report prints what was found).
    assert min(abs(f - 523) for f in f_cells) < 0.5 and min(abs(f - 1377) for f in f_cells) < 0.5
    assert sum(1 for tag, _ in doc.tags if tag == "img") >= 1
    assert math.isfinite(a.modes[0].q)


# --------------------------------------------------------------------------------------------
# print-ready parts: verdicts in words, header fields, sign-off (the PDF itself:
# tests/test_report_print.py)
# --------------------------------------------------------------------------------------------


def _cells_with_class(text: str, css: str) -> list[str]:
    return [re.sub(r"<[^>]+>", "", m) for m in re.findall(rf'<td class="[^"]*\b{css}\b[^"]*">(.*?)</td>', text)]


def test_check_report_verdicts_header_and_signoff():
    from ringdown.inspection.limits_file import parse_limits
    from ringdown.render.report_check import render_check_report

    lim = parse_limits("[[modes]]\nf_hz = [1400.0, 1500.0]\n", source="lim.toml")
    rows = [
        {"part_id": "A1", "path": "a1.wav", "verdict": "pass", "reasons": [], "notes": [], "features": []},
        {
            "part_id": "A2",
            "path": "a2.wav",
            "verdict": "fail",
            "reasons": [{"code": "f_below", "message": "low"}],
            "notes": [],
            "features": [
                {"mode": 1, "feature": "f_hz", "value": 1390.0, "window": [1400.0, 1500.0], "status": "below"}
            ],
        },
        {
            "part_id": "A3",
            "path": "a3.wav",
            "verdict": "pass",
            "reasons": [],
            "notes": [{"code": "advisory_f_below", "message": "warm (advisory)"}],
            "features": [],
        },
    ]
    analyses = [make_analysis(path=r["path"], keep_samples=False) for r in rows]
    text = render_check_report(
        rows,
        analyses,
        lim,
        figures=False,
        fields=[("station", "EOL-2"), ("operator", "A. Tester"), ("limits SHA-256", lim.sha256)],
    )
    # every verdict coloured by class AND worded with a symbol (readable without colour)
    assert "✓ PASS" in _cells_with_class(text, "verdict-pass")
    assert "✗ FAIL" in _cells_with_class(text, "verdict-fail")
    assert "✓ PASS (advisory)" in _cells_with_class(text, "verdict-pass-advisory")
    assert "✗ FAIL: below" in _cells_with_class(text, "verdict-fail")  # the feature row
    # the summary says "analysed", never a green "ok", beside a FAIL
    doc = _parse(text)
    summary = next(t for t in doc.tables if t[0][:4] == ["#", "file", "verdict", "analysis"])
    assert [r[2] for r in summary[1:]] == ["✓ PASS", "✗ FAIL", "✓ PASS (advisory)"]
    assert all(r[3] == "analysed" for r in summary[1:])
    assert not any(c.strip().lower() == "ok" for r in summary for c in r)
    kv = {r[0]: r[1] for t in doc.tables for r in t if len(r) == 2}
    assert kv["station"] == "EOL-2" and kv["operator"] == "A. Tester" and kv["limits SHA-256"] == lim.sha256
    assert kv["limits file"] == "lim.toml"
    # sign-off: name (operator filled in), date and signature lines
    sign = next(t for t in doc.tables if t[0][1:] == ["name", "date", "signature"])
    assert sign[1] == ["tested by", "A. Tester", "", ""] and sign[2] == ["reviewed by", "", "", ""]
    # the title and station printed at the top of every page (a CSS page margin box)
    assert re.search(r'@top-left \{ content: "Part check report · station EOL-2"', text)
    assert 'counter(page) " of " counter(pages)' in text


def test_header_fields_are_escaped_in_css_and_html():
    a = make_analysis(keep_samples=False)
    text = render_report(
        [a], figures=False, title='</style><script>x"', notes="line 1\nline <2>", fields=[("serial", "S<1>")]
    )
    assert "<script>" not in text and "</style><script>" not in text
    assert "line 1<br>line &lt;2&gt;" in text
    doc = _parse(text)
    kv = {r[0]: r[1] for t in doc.tables for r in t if len(r) == 2}
    assert kv["serial"] == "S<1>"
