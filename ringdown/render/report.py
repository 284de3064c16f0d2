"""The HTML report: one self-contained file per run, readable offline and printable.

This module and its three siblings (``report_compare``, ``report_check``, ``report_moduli``)
are the only ones that write HTML. A report holds, for each recording, where it came from
(name, SHA-256, size, sample rate, duration, tool version, every setting used), the modes with
their standard uncertainties, the warnings in plain words, and the figures; then the definitions
used and a caution. Everything is inline: CSS in a ``<style>`` element, figures as ``data:`` URIs
(PNG, or SVG inside a data URI), no scripts, nothing fetched from a network.

Every string that came from outside the program (file names, channel names, CSV headers,
settings, warning and error messages) is escaped with :func:`html.escape`.

Other parts of ringdown add their own sections with :class:`Section` (the before/after
comparison in :mod:`.report_compare`, the pass/fail checks in :mod:`.report_check`, the elastic
moduli in :mod:`.report_moduli`, each built from this module's pieces): ``render_report(analyses, extra_sections=[Section("Checks", fragment)])``.
A section's ``html`` is inserted as given, so its author escapes what it holds; :func:`html_table`
builds an escaped table for that purpose.

Numbers come from :mod:`ringdown.base.numfmt` (the one formatter of ringdown): ``v(u)``, the
uncertainty to two significant digits and the value to the same place (JCGM 100:2008, GUM
7.2.2 and 7.2.6). The page is laid out for a 1280 px screen and for A4 or Letter paper: no table
is wider than the page, each recording starts a new page, and the title, part or serial number
and page number are printed at the top of every page.
"""

from __future__ import annotations

import base64
import html
import os
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, cast

from .._version import __version__
from ..base.clock import local_stamp
from ..base.errors import ParameterError, RingdownError
from ..base.numfmt import fmt_fixed, fmt_pm, fmt_value

if TYPE_CHECKING:
    from ..analysis.results import Analysis

__all__ = [
    "Cell",
    "Section",
    "analysis_html",
    "html_table",
    "render_report",
    "verdict_cell",
    "write_report",
]

_DASH = "–"  # shown for a value that does not exist


@dataclass(frozen=True, slots=True)
class Section:
    """One extra section of a report.

    Attributes
    ----------
    title : str
        Heading (escaped when rendered).
    html : str
        Body, an HTML fragment inserted as given: escape what came from outside (see
        :func:`html_table`). It must not load anything (no ``<script>``, no external URLs).
    anchor : str or None
        ``id`` of the section, for links; made from the title when None.
    """

    title: str
    html: str
    anchor: str | None = None


# --------------------------------------------------------------------------------------------
# small formatting helpers
# --------------------------------------------------------------------------------------------


def _e(value: Any) -> str:
    """Escape anything for HTML text or attribute values; control and bidi characters shown
    escaped (:func:`ringdown.io.outputs.shown`)."""
    from ..io.outputs import shown

    return html.escape(shown(value), quote=True)


def _num(v: Any, digits: int = 6) -> str:
    """A number with ``digits`` significant digits (:func:`ringdown.base.numfmt.fmt_value`), escaped."""
    return _e(fmt_value(v, digits, missing=_DASH))


def _pm(v: Any, u: Any, digits: int = 6) -> str:
    """``v(u)`` in the one number format (:func:`ringdown.base.numfmt.fmt_pm`)."""
    return fmt_pm(v, u, digits=digits, missing=_DASH)


@dataclass(frozen=True, slots=True)
class Cell:
    """A table cell with a CSS class; ``raw=True`` inserts ``text`` as HTML (escape it first)."""

    text: Any
    css_class: str | None = None
    raw: bool = False


#: How each verdict is shown: symbol and word, so that it reads without colour too.
_VERDICT_LOOK = {
    "pass": ("✓", "PASS"),
    "pass_advisory": ("✓", "PASS (advisory)"),
    "fail": ("✗", "FAIL"),
    "error": ("!", "ERROR"),
    "analysis": ("·", "analysed"),
    "increased": ("▲", "increased"),
    "decreased": ("▼", "decreased"),
    "no significant change": ("=", "no significant change"),
}


def verdict_cell(kind: str, extra: str = "") -> Cell:
    """A verdict cell: class ``verdict verdict-KIND``, a symbol and the verdict in words."""
    symbol, word = _VERDICT_LOOK.get(kind, ("?", str(kind)))
    css = "verdict verdict-" + "".join(ch if ch.isalnum() else "-" for ch in str(kind))
    return Cell(f'<span class="sym" aria-hidden="true">{symbol}</span> {_e(word)}{_e(extra)}', css, raw=True)


def html_table(
    header: Sequence[Any],
    rows: Iterable[Sequence[Any]],
    *,
    numeric: Sequence[bool] | None = None,
    css_class: str = "data",
) -> str:
    """An HTML table whose every cell is escaped (a :class:`Cell` with ``raw=True`` is not).

    Parameters
    ----------
    header : sequence of str
    rows : iterable of sequences, each as long as ``header``; a cell is text or a :class:`Cell`
    numeric : sequence of bool or None
        Columns to right-align and keep on one line (numbers).
    css_class : str
    """
    numeric = list(numeric) if numeric is not None else [False] * len(header)
    out = [f'<table class="{_e(css_class)}"><thead><tr>']
    out += [f'<th scope="col">{_e(h)}</th>' for h in header]
    out.append("</tr></thead><tbody>")
    for row in rows:
        out.append("<tr>")
        for i, cell in enumerate(row):
            classes = ["num"] if i < len(numeric) and numeric[i] else []
            if isinstance(cell, Cell):
                if cell.css_class:
                    classes.append(cell.css_class)
                body = str(cell.text) if cell.raw else _e(cell.text)
            else:
                body = _e(cell)
            cls = f' class="{_e(" ".join(classes))}"' if classes else ""
            out.append(f"<td{cls}>{body}</td>")
        out.append("</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def _kv_table(pairs: Iterable[tuple[str, Any]]) -> str:
    rows = "".join(f'<tr><th scope="row">{_e(k)}</th><td>{_e(v)}</td></tr>' for k, v in pairs)
    return f'<table class="kv"><tbody>{rows}</tbody></table>'


def _slug(text: str, used: set[str]) -> str:
    base = "".join(ch.lower() if ch.isalnum() else "-" for ch in text).strip("-") or "section"
    base = "-".join(p for p in base.split("-") if p)[:40]
    slug, k = base, 2
    while slug in used:
        slug, k = f"{base}-{k}", k + 1
    used.add(slug)
    return slug


def _file_name(a) -> str:
    if a.path == "-":
        return "standard input (-)"
    return os.path.basename(a.path) if a.path else "<array>"


def _file_size(path: str | None) -> str:
    if not path or path == "-":
        return "unknown"
    try:
        return f"{os.stat(path).st_size} bytes"
    except OSError:
        return "unknown"


# --------------------------------------------------------------------------------------------
# figures
# --------------------------------------------------------------------------------------------


def _figure(draw, caption: str, fmt: str) -> str:
    """One embedded figure, or a line saying why it could not be drawn."""
    from . import plots

    try:
        fig = draw()
        data = plots.figure_bytes(fig, fmt=fmt)
    except RingdownError as exc:
        return f'<p class="note">Figure not drawn ({_e(caption)}): {_e(exc)}</p>'
    mime = "image/png" if fmt == "png" else "image/svg+xml"
    b64 = base64.b64encode(data).decode("ascii")
    return (
        f'<figure><img alt="{_e(caption)}" src="data:{mime};base64,{b64}">'
        f"<figcaption>{_e(caption)}</figcaption></figure>"
    )


def _figures(a, fmt: str, level: bool | str = True) -> str:
    from . import plots

    parts = [_figure(lambda: plots.plot_overview(a), f"{_file_name(a)}: recording and spectrum", fmt)]
    if level == "overview":
        return "".join(parts)
    for m in a.modes:
        if m.trace is not None:
            parts.append(_figure(lambda m=m: plots.plot_mode(m), f"mode {m.index}: decay and fit", fmt))
        if m.damping_vs_amplitude:
            parts.append(
                _figure(
                    lambda m=m: plots.plot_damping_vs_amplitude(m).figure,
                    f"mode {m.index}: damping against amplitude",
                    fmt,
                )
            )
    return "".join(parts)


# --------------------------------------------------------------------------------------------
# sections
# --------------------------------------------------------------------------------------------

#: The modes are shown in two tables so that each fits a portrait page and a 1280 px screen:
#: what the mode is (frequency and damping), then how it was measured.
_MODE_HEADER = ("#", "f_d, Hz", "β, 1/s", "f_n, Hz", "ζ", "Q", "loss factor η", "log decrement δ")
_FIT_HEADER = ("#", "f_r, Hz", "decay, dB/s", "T60, s", "method", "window, s", "cycles", "SNR, dB", "hits", "warnings")


def _mode_row(m) -> list[str]:
    return [
        str(m.index),
        _pm(m.f_d_hz, m.f_d_hz_u),
        _pm(m.beta_per_s, m.beta_per_s_u),
        _pm(m.f_n_hz, m.f_n_hz_u),
        _pm(m.zeta, m.zeta_u),
        _pm(m.q, m.q_u),
        _pm(m.loss_factor, m.loss_factor_u),
        _pm(m.log_decrement, m.log_decrement_u),
    ]


def _fit_row(m) -> list[str]:
    window = _DASH
    if m.fit_start_s is not None and m.fit_end_s is not None:
        window = f"{fmt_value(m.fit_start_s, 4)} to {fmt_value(m.fit_end_s, 4)}"
    return [
        str(m.index),
        _pm(m.f_r_hz, m.f_r_hz_u),
        _pm(m.decay_db_per_s, m.decay_db_per_s_u),
        _pm(m.t60_s, m.t60_s_u),
        str(m.method) + (" (raw record)" if getattr(m, "fit_path", "band") == "raw" else ""),
        window,
        fmt_fixed(m.cycles_fitted, 0, missing=_DASH),
        fmt_fixed(m.snr_db, 1, missing=_DASH),
        str(m.n_hits),
        ", ".join(m.warning_codes) or _DASH,
    ]


def _modes_table(a) -> str:
    if not a.modes:
        return '<p class="note">No modes were found above the noise.</p>'
    return html_table(
        _MODE_HEADER, [_mode_row(m) for m in a.modes], numeric=[True] * 8, css_class="data modes"
    ) + html_table(
        _FIT_HEADER,
        [_fit_row(m) for m in a.modes],
        numeric=[True] * 4 + [False, True, True, True, True, False],
        css_class="data fit",
    )


def analysis_html(a: Analysis) -> str:
    """One analysis as an HTML fragment for a notebook (``Analysis._repr_html_``): its name, the
    two modes tables of the report, or the error; no page, no figures, no style sheet."""
    head = f"<p><b>{_e(_file_name(a))}</b>"
    if a.error is not None:
        return head + f": {_e(a.error.code)}: {_e(a.error.message)}</p>"
    facts = f" · {_num(a.sample_rate_hz)} Hz · {_num(a.duration_s, 4)} s · {len(a.hits)} hit(s)"
    codes = ", ".join(w.code for w in a.warnings)
    return head + _e(facts) + (f" · warnings: {_e(codes)}" if codes else "") + "</p>" + _modes_table(a)


def _cross_checks(a) -> str:
    rows = []
    for m in a.modes:
        for name, est in (m.cross_checks or {}).items():
            rows.append(
                [
                    str(m.index),
                    str(name),
                    _pm(est.f_d_hz, est.f_d_hz_u),
                    _pm(est.beta_per_s, est.beta_per_s_u),
                    "yes" if est.converged else "no",
                ]
            )
    if not rows:
        return ""
    return "<h4>Cross-checks by other methods</h4>" + html_table(
        ("mode", "method", "f_d, Hz", "β, 1/s", "converged"), rows, numeric=[True, False, True, True, False]
    )


def _hits_table(a) -> str:
    if not a.hits:
        return ""
    rows = []
    for k, h in enumerate(a.hits, 1):
        rows.append(
            [
                str(k),
                fmt_fixed(h.start_s, 4),
                fmt_fixed(h.peak_s, 4),
                fmt_value(h.peak_value, 4),
                fmt_fixed(h.snr_db, 1),
                fmt_fixed(h.end_s, 4),
                "yes" if h.used else "no",
                "; ".join(f"{w.message} ({w.code})" for w in h.warnings) or _DASH,
            ]
        )
    return "<h4>Hits</h4>" + html_table(
        ("hit", "onset, s", "peak, s", "peak value", "SNR, dB", "end, s", "used", "warnings"),
        rows,
        numeric=[True] * 6 + [False, False],
    )


def _warnings(a) -> str:
    items: list[tuple[str | None, Any]] = [(None, w) for w in a.warnings]
    for m in a.modes:
        items += [(f"mode {m.index}", w) for w in m.warnings]
    if not items:
        return '<p class="ok">No warnings.</p>'
    lis = "".join(
        f"<li>{'' if where is None else '<b>' + _e(where) + ':</b> '}{_e(w.message)} "
        f'<span class="code">({_e(w.code)})</span></li>'
        for where, w in items
    )
    return f'<ul class="warnings">{lis}</ul>'


def _file_section(a, n: int, anchor: str, fmt: str, figures: bool | str, extra: str = "") -> str:
    name = _file_name(a)
    out = [f'<section class="file" id="{_e(anchor)}"><h2>{n}. {_e(name)}</h2>', extra]
    sr = _DASH if a.sample_rate_hz is None else f"{fmt_value(a.sample_rate_hz, 7)} Hz"
    dur = _DASH if a.duration_s is None else f"{fmt_value(a.duration_s, 6)} s ({a.n_samples} samples)"
    out.append(
        _kv_table(
            [
                ("file", a.path if a.path else "<array>"),
                ("SHA-256", a.sha256 or "unknown"),
                ("size", _file_size(a.path)),
                ("channel", a.channel if a.channel is not None else _DASH),
                ("unit", a.unit if a.unit is not None else _DASH),
                ("sample rate", sr),
                ("duration", dur),
                (
                    "noise floor",
                    _DASH if a.noise_floor is None else f"{fmt_value(a.noise_floor, 4)} (recording units, RMS)",
                ),
                ("tool", f"ringdown {__version__}"),
            ]
        )
    )
    if a.error is not None:
        out.append(
            f'<div class="error"><b>Not analysed:</b> {_e(a.error.message)} '
            f'<span class="code">({_e(a.error.code)})</span></div>'
        )
    out.append("<h3>Settings used</h3>")
    out.append(
        _kv_table(sorted((str(k), _setting(v)) for k, v in (a.settings or {}).items()))
        if a.settings
        else '<p class="note">No settings recorded.</p>'
    )
    if a.error is None:
        out.append("<h3>Modes</h3>")
        out.append(
            '<p class="legend">Values are written v(u): u is the standard uncertainty (k = 1) in units '
            "of the last digit of v, e.g. 7.7970(40)e-4 = (7.7970 ± 0.0040) × 10<sup>−4</sup>.</p>"
        )
        out.append(_modes_table(a))
        out.append(_cross_checks(a))
        out.append(_hits_table(a))
        out.append("<h3>Warnings</h3>")
        out.append(_warnings(a))
        if figures:
            out.append("<h3>Figures</h3>")
            out.append(_figures(a, fmt, figures))
    out.append("</section>")
    return "".join(out)


def _setting(v: Any) -> str:
    if isinstance(v, (list, tuple)):
        return ", ".join(_setting(x) for x in v) or "(none)"
    if v is None:
        return "(default)"
    return str(v)


def _summary(analyses, anchors, verdicts: Sequence[str] | None = None) -> str:
    """One row per recording; with ``verdicts`` (check reports) a coloured, worded verdict column."""
    head = (
        ["#", "file"] + (["verdict"] if verdicts is not None else []) + ["analysis", "modes", "mode frequencies and Q"]
    )
    rows = []
    for n, (a, anchor) in enumerate(zip(analyses, anchors), 1):
        link = Cell(f'<a href="#{_e(anchor)}">{_e(_file_name(a))}</a>', raw=True)
        if a.error is not None:
            status = Cell(f"error: {a.error.code}", "error")
            modes = a.error.message
        else:
            n_warn = len(a.warnings) + sum(len(m.warnings) for m in a.modes)
            # "analysed" is neutral: it says the analysis ran, not that the part is good
            status = Cell(
                "analysed" if n_warn == 0 else f"analysed, {n_warn} warning{'s' if n_warn != 1 else ''}",
                "analysed" if n_warn == 0 else "warn",
            )
            modes = (
                "; ".join(f"{m.index}: {fmt_value(m.f_d_hz, 6)} Hz, Q {fmt_value(m.q, 3)}" for m in a.modes)
                or "none found"
            )
        row = [str(n), link] + ([verdict_cell(verdicts[n - 1])] if verdicts is not None else [])
        rows.append(row + [status, str(len(a.modes)), modes])
    numeric = [True, False] + ([False] if verdicts is not None else []) + [False, True, False]
    return '<section id="summary"><h2>Summary</h2>' + html_table(head, rows, numeric=numeric) + "</section>"


_DEFINITIONS = """
<section id="definitions"><h2>Definitions</h2>
<p>Each mode is modelled as a viscously damped oscillation
<i>x</i>(<i>t</i>) = <i>A</i> e<sup>−β<i>t</i></sup> cos(2π<i>f</i><sub>d</sub><i>t</i> + φ).</p>
<table class="kv"><tbody>
<tr><th scope="row">f_d</th><td>damped frequency, the frequency the record oscillates at, Hz</td></tr>
<tr><th scope="row">β</th><td>decay rate of the amplitude envelope e<sup>−βt</sup>, 1/s</td></tr>
<tr><th scope="row">f_n</th><td>natural (undamped) frequency, f_n = √(f_d² + (β/2π)²), Hz</td></tr>
<tr><th scope="row">ζ</th><td>damping ratio, ζ = β / (2π f_n)</td></tr>
<tr><th scope="row">Q</th><td>quality factor, Q = 1/(2ζ) = π f_n / β (for light damping close to the
half-power figure f/Δf)</td></tr>
<tr><th scope="row">η</th><td>loss factor, η = 1/Q = 2ζ</td></tr>
<tr><th scope="row">δ</th><td>logarithmic decrement, δ = β / f_d = ln(x<sub>n</sub>/x<sub>n+1</sub>) per cycle</td></tr>
<tr><th scope="row">f_r</th><td>displacement resonance, f_r = √(f_n² − 2(β/2π)²), Hz (– when it does not exist)</td></tr>
<tr><th scope="row">decay, dB/s</th><td>D = 20 log<sub>10</sub>(e) β ≈ 8.686 β</td></tr>
<tr><th scope="row">T60</th><td>time for the amplitude to fall by 60 dB, T60 = 60 / D ≈ 6.908 / β, s</td></tr>
<tr><th scope="row">window</th><td>the part of the record the fit used, seconds from the start of the file</td></tr>
<tr><th scope="row">cycles</th><td>oscillation cycles inside the fit window</td></tr>
<tr><th scope="row">SNR</th><td>mode envelope at the start of the fit window over the noise floor in its band, dB</td></tr>
</tbody></table>
<p>Numbers are written v(u): the standard uncertainty u in units of the last digit of v, and a
power of ten factored out (e<i>N</i>) outside 0.001 to 10<sup>6</sup> (GUM 7.2.2).
Uncertainties are standard uncertainties in the sense of the GUM (JCGM 100:2008), coverage factor
<i>k</i> = 1, propagated to the derived quantities to first order (GUM 5.1.2). They are written with
two significant digits. For about 95 % coverage multiply by <i>k</i> = 2 when the
estimate is approximately normal.</p>
<p>Sources: S. S. Rao, <i>Mechanical Vibrations</i>, ch. 2–3; D. J. Inman, <i>Engineering Vibration</i>;
ISO 2041:2018 (vocabulary); JCGM 100:2008 (GUM).</p>
</section>
"""

_CAUTION = """
<section id="caution" class="caution"><h2>Caution</h2>
<p>These results support engineering judgement; they do not replace it, nor the acceptance rules,
standards and procedures that apply where the part is used. A measurement is only as good as its
set-up: check mounting, sensor, excitation and the warnings above before relying on a number.</p>
<p>Tapping loaded structures or parts under pressure, and measuring on mains-powered circuits, carry
hazards of their own. Follow local codes, the site's safety rules and licensed practice.</p>
</section>
"""

_CSS = """
:root { color-scheme: light; }
* { box-sizing: border-box; }
body { font-family: "Liberation Sans", Arial, Helvetica, "DejaVu Sans", sans-serif; font-size: 14px;
  line-height: 1.45; color: #1d1d1b; background: #ffffff; margin: 0 auto; padding: 24px 24px 48px; max-width: 1240px; }
header.report { border-bottom: 3px solid #0072B2; margin-bottom: 18px; padding-bottom: 8px; }
h1 { font-size: 24px; margin: 0 0 4px; }
h2 { font-size: 19px; margin: 28px 0 8px; padding: 4px 0; border-bottom: 1px solid #c9c9c3; }
h3 { font-size: 15px; margin: 18px 0 6px; }
h4 { font-size: 13.5px; margin: 14px 0 4px; }
.meta { color: #4a4a47; margin: 0; }
p.notes { white-space: pre-wrap; border-left: 3px solid #0072B2; padding: 2px 0 2px 10px; margin: 8px 0; }
table { border-collapse: collapse; margin: 4px 0 10px; max-width: 100%; }
table.data th, table.data td { border: 1px solid #c9c9c3; padding: 3px 6px; vertical-align: top; }
table.data thead th { background: #eef3f7; text-align: left; white-space: normal; }
table.data tbody tr:nth-child(even) td { background: #f7f7f4; }
table.data td { overflow-wrap: anywhere; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; overflow-wrap: normal; }
table.kv th { text-align: left; font-weight: 600; padding: 2px 14px 2px 0; vertical-align: top; white-space: nowrap; }
table.kv td { padding: 2px 0; overflow-wrap: anywhere; font-variant-numeric: tabular-nums; }
.code { color: #5c5c58; font-family: "DejaVu Sans Mono", Consolas, monospace; font-size: 12.5px; }
.note { color: #4a4a47; font-style: italic; }
.legend { color: #4a4a47; margin: 0 0 4px; }
td.analysed, p.ok { color: #1d1d1b; }
td.warn { color: #8a4b00; font-weight: 600; }
td.error { color: #a33a00; font-weight: 600; }
td.verdict { font-weight: 700; white-space: nowrap; }
td.verdict-pass { color: #005c3e; background: #e3f4ec !important; }
td.verdict-pass-advisory { color: #005c3e; background: #f3f6dc !important; }
td.verdict-fail { color: #ffffff; background: #b8400a !important; }
td.verdict-error { color: #1d1d1b; background: #f2d9a6 !important; }
td.verdict-increased, td.verdict-decreased { color: #003f73; background: #e4eef7 !important; }
div.verdict { font-size: 17px; font-weight: 700; padding: 6px 10px; margin: 8px 0; border: 2px solid; }
div.verdict-pass, div.verdict-pass-advisory { color: #005c3e; background: #e3f4ec; }
div.verdict-fail { color: #b8400a; background: #fdf1ea; }
div.verdict-error { color: #6b4a00; background: #fbf0d8; }
div.error { border: 2px solid #D55E00; background: #fdf1ea; padding: 8px 12px; margin: 10px 0; }
ul.warnings li { margin: 2px 0; }
figure { margin: 10px 0 18px; break-inside: avoid; }
figure img { max-width: 100%; height: auto; border: 1px solid #e1e1dc; }
figcaption { color: #4a4a47; font-size: 12.5px; }
section.caution, p.caution { border-left: 4px solid #E69F00; padding-left: 12px; }
table.checks { width: 100%; }
table.checks td:nth-child(4) { width: 50%; }
ul.cell { margin: 0; padding-left: 1.1em; }
table.checks td:nth-child(-n+3) { white-space: nowrap; overflow-wrap: normal; width: 1%; }
table.signoff { width: 100%; margin-top: 8px; }
table.signoff th, table.signoff td { border-bottom: 1px solid #1d1d1b; padding: 16px 8px 4px 0; text-align: left;
  vertical-align: bottom; }
table.signoff thead th { border-bottom: none; padding-top: 2px; color: #4a4a47; font-weight: 600; }
table.signoff td.line { min-width: 12em; }
a { color: #005a8c; }
@media print {
  body { font-size: 9pt; padding: 0; max-width: none; }
  h1 { font-size: 16pt; } h2 { font-size: 12.5pt; margin-top: 12pt; } h3 { font-size: 10.5pt; }
  h2, h3, h4 { break-after: avoid; }
  table.data { font-size: 7.5pt; }
  table.data th, table.data td { padding: 1.5pt 3pt; }
  table.kv { font-size: 8pt; }
  thead { display: table-header-group; }
  tr, figure, table.signoff { break-inside: avoid; }
  figure img { max-height: 120mm; width: auto; }
  section.file { break-before: page; }
  section#signoff { break-inside: avoid; }
  a { color: inherit; text-decoration: none; }
  td.verdict, div.verdict { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  table.data thead th, table.data tbody tr:nth-child(even) td { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
}
"""


def _css_string(text: str) -> str:
    """``text`` as a CSS string literal (quotes, backslashes and control characters escaped)."""
    out = []
    for ch in str(text):
        if ch in '\\"<>' or ord(ch) < 32 or ch == "\x7f":
            out.append(f"\\{ord(ch):x} ")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _page_css(running: str, footer: str) -> str:
    """Paper layout: margins, and the running header and footer printed on every page (A4 and
    Letter both fit: the margins leave 186 mm of width, the narrower of the two)."""
    return (
        "@page { margin: 16mm 12mm 14mm 12mm;"
        f" @top-left {{ content: {_css_string(running)}; font: 7.5pt Arial, sans-serif; color: #333; }}"
        ' @top-right { content: "page " counter(page) " of " counter(pages); font: 7.5pt Arial, sans-serif; color: #333; }'
        f" @bottom-left {{ content: {_css_string(footer)}; font: 7pt Arial, sans-serif; color: #555; }} }}"
    )


def _signoff(names: Sequence[tuple[str, str | None]]) -> str:
    """The sign-off block: one row per role, with name (pre-filled when known), date and signature lines."""
    rows = "".join(
        f'<tr><th scope="row">{_e(role)}</th><td class="line">{_e(name or "")}</td>'
        '<td class="line"></td><td class="line"></td></tr>'
        for role, name in names
    )
    return (
        '<section id="signoff" class="signoff"><h2>Sign-off</h2>'
        '<table class="signoff"><thead><tr><th></th><th scope="col">name</th><th scope="col">date</th>'
        f'<th scope="col">signature</th></tr></thead><tbody>{rows}</tbody></table></section>'
    )


def render_report(
    analyses: Iterable[Analysis] | Analysis,
    *,
    settings: dict | None = None,
    title: str | None = None,
    extra_sections: Iterable[Section | tuple[str, str]] = (),
    figures: bool = True,
    figure_format: str = "png",
    generated: str | None = None,
    notes: str | None = None,
    fields: Sequence[tuple[str, Any]] | dict | None = None,
    signoff: Sequence[tuple[str, str | None]] | None = None,
    file_extras: Sequence[str] | None = None,
    verdicts: Sequence[str] | None = None,
) -> str:
    """Render analyses as one self-contained HTML document, laid out for screen and paper.

    Parameters
    ----------
    analyses : ringdown.Analysis or sequence of ringdown.Analysis
        One section per recording (each starts a new printed page); a recording whose ``error``
        is set shows the error.
    settings : dict or None
        Settings of the whole run (e.g. the command's options), shown near the top. Each
        recording's own ``Analysis.settings`` are shown in its section.
    title : str or None
        Document title; "Ring-down report" when None. Printed on every page with the part or
        serial field when given.
    extra_sections : iterable of Section or (title, html_fragment)
        Added after the summary, before the recordings' own sections (fragments are inserted as
        given): a comparison or a pass/fail table is what the reader came for.
    figures : bool, "overview", or a sequence of those (one per recording)
        Embed every figure (True), only the overview of the recording and its spectrum
        ("overview"), or none (False: faster, smaller).
    figure_format : {"png", "svg"}
        How figures are embedded (both as ``data:`` URIs).
    generated : str or None
        Time stamp shown in the header; the current local time (ISO 8601) when None.
    notes : str or None
        Free text shown under the title (line breaks kept).
    fields : dict or sequence of (name, value), optional
        Header fields such as serial number, part, station, operator (None values are left out).
    signoff : sequence of (role, name or None), optional
        Rows of the sign-off block; default ``[("tested by", operator field), ("reviewed by", None)]``.
    file_extras : sequence of str, optional
        One HTML fragment per recording, shown at the top of its section (a check's verdict).
    verdicts : sequence of str, optional
        One verdict kind per recording (see :func:`ringdown.inspection.check.verdict_kind`): adds a verdict
        column to the summary.

    Returns
    -------
    str
        The HTML document.

    Raises
    ------
    ParameterError
        For an unknown ``figure_format`` or a malformed extra section.
    """
    if figure_format not in ("png", "svg"):
        raise ParameterError(f"report figure format must be 'png' or 'svg'; got {figure_format!r}")
    analyses = _as_list(analyses)
    sections = _extra_sections(extra_sections)
    title = title or "Ring-down report"
    pairs = _header_pairs(fields)
    if signoff is None:
        signoff = [("tested by", next((str(v) for k, v in pairs if k == "operator"), None)), ("reviewed by", None)]
    parts = _report_head(title, generated or local_stamp(), pairs, notes, analyses)
    parts += _report_body(
        analyses,
        settings,
        sections,
        signoff,
        figure_format=figure_format,
        figures=figures,
        file_extras=file_extras,
        verdicts=verdicts,
    )
    return "".join(parts)


def _header_pairs(fields: Sequence[tuple[str, Any]] | dict | None) -> list[tuple[str, Any]]:
    """The header fields as (name, value) pairs, empty values left out."""
    items = fields.items() if isinstance(fields, dict) else (fields or ())
    return [(str(k), v) for k, v in items if v not in (None, "")]


def _extra_sections(extra_sections: Iterable[Section | tuple[str, str]]) -> list[Section]:
    """The extra sections as Sections; ParameterError for anything but a Section or (title, html)."""
    sections: list[Section] = []
    for s in extra_sections:
        if isinstance(s, Section):
            sections.append(s)
        elif isinstance(s, tuple) and len(s) == 2 and all(isinstance(p, str) for p in s):
            sections.append(Section(s[0], s[1]))
        else:
            raise ParameterError(f"an extra report section must be a Section or (title, html); got {s!r:.80}")
    return sections


def _report_head(title: str, stamp: str, pairs: list[tuple[str, Any]], notes: str | None, analyses: list) -> list[str]:
    """The document's head and its header: title, running head, version and time stamp, fields, notes."""
    running = " · ".join([title, *(f"{k} {v}" for k, v in pairs if k in ("serial", "part", "station"))])
    n_ok = sum(1 for a in analyses if a.error is None)
    parts = [
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(title)}</title><style>{_CSS}{_page_css(running, f'ringdown {__version__} · {stamp}')}"
        "</style></head><body>",
        f'<header class="report"><h1>{_e(title)}</h1>',
        f'<p class="meta">ringdown {_e(__version__)} · {_e(stamp)} · {len(analyses)} recording'
        f"{'s' if len(analyses) != 1 else ''}, {n_ok} analysed</p>",
    ]
    if pairs:
        parts.append(_kv_table(pairs))
    if notes:
        parts.append('<p class="notes">' + "<br>".join(_e(x) for x in str(notes).splitlines()) + "</p>")
    parts.append("</header>")
    return parts


def _report_body(
    analyses: list,
    settings: dict | None,
    sections: list[Section],
    signoff: Sequence[tuple[str, str | None]],
    *,
    figure_format: str,
    figures: Any,
    file_extras: Sequence[str] | None,
    verdicts: Sequence[str] | None,
) -> list[str]:
    """The run settings, the summary, the extra sections, the sign-off, one section per recording,
    the definitions, the caution and the footer (see :func:`render_report`)."""
    used: set[str] = {"summary", "definitions", "caution", "run-settings", "signoff"}
    anchors = [_slug(f"file-{n}-{_file_name(a)}", used) for n, a in enumerate(analyses, 1)]
    extras = list(file_extras) if file_extras is not None else [""] * len(analyses)
    levels = list(figures) if isinstance(figures, (list, tuple)) else [figures] * len(analyses)
    parts: list[str] = []
    if settings:
        parts.append('<section id="run-settings"><h2>Run settings</h2>')
        parts.append(_kv_table(sorted((str(k), _setting(v)) for k, v in settings.items())))
        parts.append("</section>")
    if analyses:
        parts.append(_summary(analyses, anchors, verdicts))
    else:
        parts.append('<p class="note">No recordings were given.</p>')
    # the conclusions of a comparison or a check come before the per-file detail
    for s in sections:
        anchor = s.anchor or _slug(s.title, used)
        parts.append(f'<section class="extra" id="{_e(anchor)}"><h2>{_e(s.title)}</h2>{s.html}</section>')
    parts.append(_signoff(signoff))
    for n, (a, anchor, extra, level) in enumerate(zip(analyses, anchors, extras, levels), 1):
        parts.append(_file_section(a, n, anchor, figure_format, level, extra))
    parts.append(_DEFINITIONS)
    parts.append(_CAUTION)
    parts.append(f'<footer><p class="meta">Made by ringdown {_e(__version__)}.</p></footer></body></html>\n')
    return parts


def _as_list(analyses: Iterable[Analysis] | Analysis) -> list[Analysis]:
    """One analysis or several, as a list."""
    if hasattr(analyses, "modes") and hasattr(analyses, "hits"):
        return [cast("Analysis", analyses)]
    return list(analyses)


def write_report(analyses: Iterable[Analysis], path: str | os.PathLike, **kw: Any) -> str:
    """Render the report (see :func:`render_report`, same keywords) and write it to ``path`` (UTF-8).

    Returns
    -------
    str
        The path written.

    Raises
    ------
    ParameterError
        When the file cannot be written (names the path and the reason).
    """
    return _write(render_report(analyses, **kw), path)


def _write(text: str, path) -> str:
    path = os.fspath(path)
    from ..io.outputs import atomic_write

    with atomic_write(path, what="the report to") as fh:  # renamed into place: never half a report
        fh.write(text)
    return path
