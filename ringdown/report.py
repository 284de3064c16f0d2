"""The HTML report: one self-contained file per run, readable offline and printable.

This is the only module that writes HTML. A report holds, for each recording, where it came from
(name, SHA-256, size, sample rate, duration, tool version, every setting used), the modes with
their standard uncertainties, the warnings in plain words, and the figures; then the definitions
used and a caution. Everything is inline: CSS in a ``<style>`` element, figures as ``data:`` URIs
(PNG, or SVG inside a data URI), no scripts, nothing fetched from a network.

Every string that came from outside the program (file names, channel names, CSV headers,
settings, warning and error messages) is escaped with :func:`html.escape`.

Other parts of ringdown add their own sections (a before/after comparison, pass/fail checks)
with :class:`Section`: ``render_report(analyses, extra_sections=[Section("Checks", fragment)])``.
A section's ``html`` is inserted as given, so its author escapes what it holds; :func:`html_table`
builds an escaped table for that purpose.

Numbers are written with the uncertainty rounded to two significant digits and the value to the
same decimal place (JCGM 100:2008, GUM section 7.2.6).
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import math
import os
from dataclasses import dataclass
from typing import Any, Iterable, Sequence

from ._version import __version__
from .errors import ParameterError, RingdownError

__all__ = ["Section", "html_table", "render_report", "write_report"]

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
    """Escape anything for HTML text or attribute values."""
    return html.escape(str(value), quote=True)


def _finite(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _num(v: Any, digits: int = 6) -> str:
    """A number with ``digits`` significant digits, or a dash when missing."""
    if v is None:
        return _DASH
    try:
        f = float(v)
    except (TypeError, ValueError):
        return _e(v)
    if not math.isfinite(f):
        return _DASH
    return _e(f"{f:.{digits}g}")


def format_pm(value: Any, u: Any) -> str:
    """``value ± u`` with ``u`` to two significant digits and ``value`` to the same place (plain text).

    Follows JCGM 100:2008 (GUM) 7.2.6: an uncertainty is given with at most two significant
    digits. Values outside [1e-3, 1e6) use a shared power of ten: ``(1.234 ± 0.056)e-04``.
    Without an uncertainty the value has six significant digits.
    """
    if value is None or not _finite(float(value)):
        return _DASH
    v = float(value)
    if u is None or not _finite(float(u)) or float(u) <= 0:
        return f"{v:.6g}"
    u = float(u)
    scale = 0
    mag = max(abs(v), u)
    if mag >= 1e6 or mag < 1e-3:
        scale = int(math.floor(math.log10(mag)))
        v, u = v / 10.0**scale, u / 10.0**scale
    decimals = 1 - int(math.floor(math.log10(u)))
    if round(u * 10.0**decimals) >= 100:  # 0.0996 rounds to 0.100: keep two digits, 0.10
        decimals -= 1
    if decimals < 0:  # u >= 100: round both to tens, hundreds ...
        v, u, decimals = round(v, decimals), round(u, decimals), 0
    text = f"{v:.{decimals}f} ± {u:.{decimals}f}"
    return f"({text})e{scale:+03d}" if scale else text


def html_table(header: Sequence[Any], rows: Iterable[Sequence[Any]], *, numeric: Sequence[bool] | None = None,
               css_class: str = "data") -> str:
    """An HTML table whose every cell is escaped.

    Parameters
    ----------
    header : sequence of str
    rows : iterable of sequences, each as long as ``header``
    numeric : sequence of bool or None
        Columns to right-align (numbers).
    css_class : str
    """
    numeric = list(numeric) if numeric is not None else [False] * len(header)
    out = [f'<div class="scroll"><table class="{_e(css_class)}"><thead><tr>']
    out += [f'<th scope="col">{_e(h)}</th>' for h in header]
    out.append("</tr></thead><tbody>")
    for row in rows:
        out.append("<tr>")
        for i, cell in enumerate(row):
            cls = ' class="num"' if i < len(numeric) and numeric[i] else ""
            out.append(f"<td{cls}>{_e(cell)}</td>")
        out.append("</tr>")
    out.append("</tbody></table></div>")
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
    return os.path.basename(a.path) if a.path else "<array>"


def _file_size(path: str | None) -> str:
    if not path:
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
    return (f'<figure><img alt="{_e(caption)}" src="data:{mime};base64,{b64}">'
            f"<figcaption>{_e(caption)}</figcaption></figure>")


def _figures(a, fmt: str) -> str:
    from . import plots

    parts = [_figure(lambda: plots.plot_overview(a), f"{_file_name(a)}: recording and spectrum", fmt)]
    for m in a.modes:
        if m.trace is not None:
            parts.append(_figure(lambda m=m: plots.plot_mode(m), f"mode {m.index}: decay and fit", fmt))
        if m.damping_vs_amplitude:
            parts.append(_figure(lambda m=m: plots.plot_damping_vs_amplitude(m).figure,
                                 f"mode {m.index}: damping against amplitude", fmt))
    return "".join(parts)


# --------------------------------------------------------------------------------------------
# sections
# --------------------------------------------------------------------------------------------

_MODE_HEADER = (
    "#", "f_d, Hz", "β, 1/s", "f_n, Hz", "ζ", "Q", "loss factor η", "decay, dB/s", "T60, s",
    "method", "window, s", "cycles", "SNR, dB", "hits",
)


def _pm_cell(value, u) -> str:
    # A no-break space after "±" lets a narrow table wrap the cell before "±" only.
    return format_pm(value, u).replace(" ± ", " ±\u00a0")


def _mode_row(m) -> list[str]:
    window = _DASH
    if m.fit_start_s is not None and m.fit_end_s is not None:
        window = f"{m.fit_start_s:.4g} to\u00a0{m.fit_end_s:.4g}"
    return [
        str(m.index),
        _pm_cell(m.f_d_hz, m.f_d_hz_u),
        _pm_cell(m.beta_per_s, m.beta_per_s_u),
        _pm_cell(m.f_n_hz, m.f_n_hz_u),
        _pm_cell(m.zeta, m.zeta_u),
        _pm_cell(m.q, m.q_u),
        _pm_cell(m.loss_factor, m.loss_factor_u),
        _pm_cell(m.decay_db_per_s, m.decay_db_per_s_u),
        _pm_cell(m.t60_s, m.t60_s_u),
        str(m.method) + (" (raw record)" if getattr(m, "fit_path", "band") == "raw" else ""),
        window,
        _DASH if m.cycles_fitted is None else f"{m.cycles_fitted:.0f}",
        _DASH if m.snr_db is None else f"{m.snr_db:.1f}",
        str(m.n_hits),
    ]


def _modes_table(a) -> str:
    if not a.modes:
        return '<p class="note">No modes were found above the noise.</p>'
    numeric = [True] * 9 + [False, True, True, True, True]
    return html_table(_MODE_HEADER, [_mode_row(m) for m in a.modes], numeric=numeric, css_class="data modes")


def _cross_checks(a) -> str:
    rows = []
    for m in a.modes:
        for name, est in (m.cross_checks or {}).items():
            rows.append([str(m.index), str(name), format_pm(est.f_d_hz, est.f_d_hz_u),
                         format_pm(est.beta_per_s, est.beta_per_s_u), "yes" if est.converged else "no"])
    if not rows:
        return ""
    return ("<h4>Cross-checks by other methods</h4>"
            + html_table(("mode", "method", "f_d, Hz", "β, 1/s", "converged"), rows,
                         numeric=[True, False, True, True, False]))


def _hits_table(a) -> str:
    if not a.hits:
        return ""
    rows = []
    for k, h in enumerate(a.hits, 1):
        rows.append([str(k), f"{h.start_s:.4f}", f"{h.peak_s:.4f}", _num(h.peak_value, 4), f"{h.snr_db:.1f}",
                     f"{h.end_s:.4f}", "yes" if h.used else "no",
                     "; ".join(f"{w.message} ({w.code})" for w in h.warnings) or _DASH])
    return ("<h4>Hits</h4>"
            + html_table(("hit", "onset, s", "peak, s", "peak value", "SNR, dB", "end, s", "used", "warnings"),
                         rows, numeric=[True] * 6 + [False, False]))


def _warnings(a) -> str:
    items = [(None, w) for w in a.warnings]
    for m in a.modes:
        items += [(f"mode {m.index}", w) for w in m.warnings]
    if not items:
        return '<p class="ok">No warnings.</p>'
    lis = "".join(
        f"<li>{'' if where is None else '<b>' + _e(where) + ':</b> '}{_e(w.message)} "
        f"<span class=\"code\">({_e(w.code)})</span></li>"
        for where, w in items
    )
    return f'<ul class="warnings">{lis}</ul>'


def _file_section(a, n: int, anchor: str, fmt: str, figures: bool) -> str:
    name = _file_name(a)
    out = [f'<section class="file" id="{_e(anchor)}"><h2>{n}. {_e(name)}</h2>']
    sr = _DASH if a.sample_rate_hz is None else f"{a.sample_rate_hz:g} Hz"
    dur = _DASH if a.duration_s is None else f"{a.duration_s:.6g} s ({a.n_samples} samples)"
    out.append(_kv_table([
        ("file", a.path if a.path else "<array>"),
        ("SHA-256", a.sha256 or "unknown"),
        ("size", _file_size(a.path)),
        ("channel", a.channel if a.channel is not None else _DASH),
        ("unit", a.unit if a.unit is not None else _DASH),
        ("sample rate", sr),
        ("duration", dur),
        ("noise floor", _DASH if a.noise_floor is None else f"{a.noise_floor:.4g} (recording units, RMS)"),
        ("tool", f"ringdown {__version__}"),
    ]))
    if a.error is not None:
        out.append(f'<div class="error"><b>Not analysed:</b> {_e(a.error.message)} '
                   f'<span class="code">({_e(a.error.code)})</span></div>')
    out.append("<h3>Settings used</h3>")
    out.append(_kv_table(sorted((str(k), _setting(v)) for k, v in (a.settings or {}).items()))
               if a.settings else '<p class="note">No settings recorded.</p>')
    if a.error is None:
        out.append("<h3>Modes</h3>")
        out.append('<p class="legend">Values are given as value ± standard uncertainty (k = 1).</p>')
        out.append(_modes_table(a))
        out.append(_cross_checks(a))
        out.append(_hits_table(a))
        out.append("<h3>Warnings</h3>")
        out.append(_warnings(a))
        if figures:
            out.append("<h3>Figures</h3>")
            out.append(_figures(a, fmt))
    out.append("</section>")
    return "".join(out)


def _setting(v: Any) -> str:
    if isinstance(v, (list, tuple)):
        return ", ".join(_setting(x) for x in v) or "(none)"
    if v is None:
        return "(default)"
    return str(v)


def _summary(analyses, anchors) -> str:
    rows = []
    for n, (a, anchor) in enumerate(zip(analyses, anchors), 1):
        if a.error is not None:
            status = f"error: {_e(a.error.code)}"
            modes = _e(a.error.message)
        else:
            n_warn = len(a.warnings) + sum(len(m.warnings) for m in a.modes)
            status = "ok" if n_warn == 0 else f"{n_warn} warning{'s' if n_warn != 1 else ''}"
            modes = "; ".join(f"{m.index}: {m.f_d_hz:.6g} Hz, Q {m.q:.3g}" for m in a.modes) or "none found"
            modes = _e(modes)
        cls = "error" if a.error is not None else ("ok" if status == "ok" else "warn")
        rows.append(f'<tr><td class="num">{n}</td><td><a href="#{_e(anchor)}">{_e(_file_name(a))}</a></td>'
                    f'<td class="{cls}">{status}</td><td class="num">{len(a.modes)}</td><td>{modes}</td></tr>')
    return ('<section id="summary"><h2>Summary</h2><div class="scroll"><table class="data"><thead><tr>'
            '<th scope="col">#</th><th scope="col">file</th><th scope="col">status</th>'
            '<th scope="col">modes</th><th scope="col">mode frequencies and Q</th></tr></thead><tbody>'
            + "".join(rows) + "</tbody></table></div></section>")


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
<tr><th scope="row">decay, dB/s</th><td>D = 20 log<sub>10</sub>(e) β ≈ 8.686 β</td></tr>
<tr><th scope="row">T60</th><td>time for the amplitude to fall by 60 dB, T60 = 60 / D ≈ 6.908 / β, s</td></tr>
<tr><th scope="row">window</th><td>the part of the record the fit used, seconds from the start of the file</td></tr>
<tr><th scope="row">cycles</th><td>oscillation cycles inside the fit window</td></tr>
<tr><th scope="row">SNR</th><td>mode envelope at the start of the fit window over the noise floor in its band, dB</td></tr>
</tbody></table>
<p>Uncertainties are standard uncertainties in the sense of the GUM (JCGM 100:2008), coverage factor
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
body { font-family: "DejaVu Sans", "Liberation Sans", Arial, Helvetica, sans-serif; font-size: 14px;
  line-height: 1.45; color: #1d1d1b; background: #ffffff; margin: 0; padding: 24px 32px 48px; max-width: 1200px; }
header { border-bottom: 3px solid #0072B2; margin-bottom: 18px; padding-bottom: 8px; }
h1 { font-size: 24px; margin: 0 0 4px; }
h2 { font-size: 19px; margin: 28px 0 8px; padding: 4px 0; border-bottom: 1px solid #c9c9c3; }
h3 { font-size: 15px; margin: 18px 0 6px; }
h4 { font-size: 13.5px; margin: 14px 0 4px; }
.meta { color: #4a4a47; margin: 0; }
.scroll { overflow-x: auto; }
table { border-collapse: collapse; margin: 4px 0 10px; }
table.data th, table.data td { border: 1px solid #c9c9c3; padding: 3px 7px; vertical-align: top; }
table.data thead th { background: #eef3f7; text-align: left; white-space: nowrap; }
table.data tbody tr:nth-child(even) td { background: #f7f7f4; }
table.modes td { white-space: normal; }
table.modes th { white-space: normal; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
table.kv th { text-align: left; font-weight: 600; padding: 2px 14px 2px 0; vertical-align: top; white-space: nowrap; }
table.kv td { padding: 2px 0; overflow-wrap: anywhere; font-variant-numeric: tabular-nums; }
.code { color: #5c5c58; font-family: "DejaVu Sans Mono", Consolas, monospace; font-size: 12.5px; }
.note { color: #4a4a47; font-style: italic; }
.legend { color: #4a4a47; margin: 0 0 4px; }
td.ok, p.ok { color: #006046; }
td.warn { color: #8a4b00; font-weight: 600; }
td.error { color: #a33a00; font-weight: 600; }
div.error { border: 2px solid #D55E00; background: #fdf1ea; padding: 8px 12px; margin: 10px 0; }
ul.warnings li { margin: 2px 0; }
figure { margin: 10px 0 18px; page-break-inside: avoid; }
figure img { max-width: 100%; height: auto; border: 1px solid #e1e1dc; }
figcaption { color: #4a4a47; font-size: 12.5px; }
section.caution { border-left: 4px solid #E69F00; padding-left: 12px; }
a { color: #005a8c; }
@media print { body { padding: 0; } h2 { page-break-after: avoid; } section.file { page-break-before: always; } }
"""


def render_report(analyses, *, settings: dict | None = None, title: str | None = None,
                  extra_sections: Iterable[Section | tuple[str, str]] = (), figures: bool = True,
                  figure_format: str = "png", generated: str | None = None) -> str:
    """Render analyses as one self-contained HTML document.

    Parameters
    ----------
    analyses : ringdown.Analysis or sequence of ringdown.Analysis
        One section per recording; a recording whose ``error`` is set shows the error.
    settings : dict or None
        Settings of the whole run (e.g. the command's options), shown near the top. Each
        recording's own ``Analysis.settings`` are shown in its section.
    title : str or None
        Document title; "Ring-down report" when None.
    extra_sections : iterable of Section or (title, html_fragment)
        Added after the summary, before the recordings' own sections (fragments are inserted as
        given): a comparison or a pass/fail table is what the reader came for.
    figures : bool
        Embed figures (True) or leave them out (faster, smaller).
    figure_format : {"png", "svg"}
        How figures are embedded (both as ``data:`` URIs).
    generated : str or None
        Time stamp shown in the header; the current local time (ISO 8601) when None.

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
    if hasattr(analyses, "modes") and hasattr(analyses, "hits"):
        analyses = [analyses]
    analyses = list(analyses)
    sections: list[Section] = []
    for s in extra_sections:
        if isinstance(s, Section):
            sections.append(s)
        elif isinstance(s, tuple) and len(s) == 2 and all(isinstance(p, str) for p in s):
            sections.append(Section(s[0], s[1]))
        else:
            raise ParameterError(f"an extra report section must be a Section or (title, html); got {s!r:.80}")
    title = title or "Ring-down report"
    stamp = generated or _dt.datetime.now().astimezone().isoformat(timespec="seconds")
    used: set[str] = {"summary", "definitions", "caution", "run-settings"}
    anchors = [_slug(f"file-{n}-{_file_name(a)}", used) for n, a in enumerate(analyses, 1)]

    n_ok = sum(1 for a in analyses if a.error is None)
    parts = [
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">",
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(title)}</title><style>{_CSS}</style></head><body>",
        f"<header><h1>{_e(title)}</h1>",
        f'<p class="meta">ringdown {_e(__version__)} · {_e(stamp)} · {len(analyses)} recording'
        f"{'s' if len(analyses) != 1 else ''}, {n_ok} analysed</p></header>",
    ]
    if settings:
        parts.append('<section id="run-settings"><h2>Run settings</h2>')
        parts.append(_kv_table(sorted((str(k), _setting(v)) for k, v in settings.items())))
        parts.append("</section>")
    if analyses:
        parts.append(_summary(analyses, anchors))
    else:
        parts.append('<p class="note">No recordings were given.</p>')
    # the conclusions of a comparison or a check come before the per-file detail
    for s in sections:
        anchor = s.anchor or _slug(s.title, used)
        parts.append(f'<section class="extra" id="{_e(anchor)}"><h2>{_e(s.title)}</h2>{s.html}</section>')
    for n, (a, anchor) in enumerate(zip(analyses, anchors), 1):
        parts.append(_file_section(a, n, anchor, figure_format, figures))
    parts.append(_DEFINITIONS)
    parts.append(_CAUTION)
    parts.append(f'<footer><p class="meta">Made by ringdown {_e(__version__)}.</p></footer></body></html>\n')
    return "".join(parts)


def write_report(analyses, path, **kw) -> str:
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
    text = render_report(analyses, **kw)
    path = os.fspath(path)
    try:
        with open(path, "w", encoding="utf-8") as fh:
            fh.write(text)
    except OSError as exc:
        raise ParameterError(
            f"cannot write the report to {path!r}: {exc.strerror or exc}; choose a writable path"
        ) from exc
    return path


# --------------------------------------------------------------------------------------------
# elastic moduli (ringdown.moduli): a section of its own
# --------------------------------------------------------------------------------------------

#: Heading of the elastic-moduli section.
MODULI_SECTION_TITLE = "Elastic moduli (ASTM E1876)"

_MODULI_FORMULAS = """
<p>Formulas: ASTM E1876 (impulse excitation; the family of ASTM C1259), after Pickett (1945) and
Spinner &amp; Tefft (1961). Rectangular bar: E = 0.9465 (m f<sub>f</sub>² / b)(L³ / t³) T1 with
Pickett's shear and rotary-inertia correction T1(μ, t/L); G = (4 L m f<sub>t</sub>² / (b t)) R with
R(b/t, b/L) from Saint-Venant torsion (Spinner &amp; Valore 1958). Cylindrical rod:
E = 1.6067 (L³ / D⁴) m f<sub>f</sub>² T1′, G = 16 m f<sub>t</sub>² L / (π D²).
Poisson's ratio μ = E / (2G) − 1, iterated with T1(μ). Uncertainties: first-order propagation
(JCGM 100:2008, GUM 5.1.2) of the frequency, dimension and mass uncertainties, inputs uncorrelated;
where each coefficient was verified is listed in the docstring of <code>ringdown.moduli</code>.</p>
<p class="note">The relations hold for homogeneous, isotropic, elastic specimens of uniform section
supported at the nodes of the mode measured; a dynamic modulus is not a design allowable. Decisions
on parts that carry load follow the applicable codes and licensed engineering practice.</p>
"""


def moduli_section(result) -> Section:
    """The report section of a :class:`ringdown.moduli.ModuliResult`: inputs, moduli, modes, budget.

    Insert it with ``render_report(result.analyses, extra_sections=[moduli_section(result)])``.
    Every string from outside (file names, warnings) is escaped.
    """
    sp = result.specimen
    mm = lambda v, u: format_pm(None if v is None else v * 1e3, None if u is None else u * 1e3)  # noqa: E731
    rows = [("shape", "rectangular bar" if result.shape == "bar" else "cylindrical rod"),
            ("length, mm", mm(sp["length_m"], sp["length_m_u"]))]
    if result.shape == "bar":
        rows += [("width, mm", mm(sp["width_m"], sp["width_m_u"])),
                 ("thickness, mm", mm(sp["thickness_m"], sp["thickness_m_u"]))]
    else:
        rows.append(("diameter, mm", mm(sp["diameter_m"], sp["diameter_m_u"])))
    rows.append(("mass, g", format_pm(sp["mass_kg"] * 1e3, sp["mass_kg_u"] * 1e3)))
    out = ["<h3>Specimen</h3>", _kv_table(rows)]
    gpa = lambda v, u: format_pm(None if v is None else v / 1e9, None if u is None else u / 1e9)  # noqa: E731
    res_rows = [
        ("Young's modulus E, GPa", gpa(result.e_pa, result.e_pa_u), result.dominant("e_pa") or _DASH),
        ("shear modulus G, GPa", gpa(result.g_pa, result.g_pa_u) if result.g_pa is not None else _DASH,
         result.dominant("g_pa") or _DASH),
        (f"Poisson's ratio ({result.poisson_source})", format_pm(result.poisson, result.poisson_u),
         result.dominant("poisson") or _DASH),
        ("density, kg/m³", format_pm(result.density_kg_per_m3, result.density_kg_per_m3_u),
         result.dominant("density_kg_per_m3") or _DASH),
    ]
    out += ["<h3>Moduli</h3>",
            '<p class="legend">Value ± standard uncertainty (k = 1); the dominant input has the largest share of '
            "the variance.</p>",
            html_table(("quantity", "value", "dominant input"), res_rows, numeric=[False, True, False])]
    factors = f"T1 = {result.t1:.6g}"
    if result.r_factor is not None:
        factors += f", R = {result.r_factor:.6g}"
    factors += f"; {result.iterations} iteration{'s' if result.iterations != 1 else ''} of the Poisson's-ratio loop"
    out.append(f"<p>{_e(factors)}</p>")
    mode_rows = []
    for m in (result.flexural, result.torsional):
        if m is None:
            continue
        where = _DASH if m.source is None else f"{os.path.basename(m.source)}, mode {m.mode_index}"
        window = _DASH if m.predicted_low_hz is None else f"{m.predicted_low_hz:.6g} to {m.predicted_high_hz:.6g}"
        mode_rows.append((m.role, format_pm(m.f_hz, m.f_hz_u), format_pm(m.loss_factor, m.loss_factor_u), where,
                          window, m.rule))
    out += ["<h3>Modes used</h3>",
            html_table(("mode", "f, Hz", "loss factor η", "from", "predicted window, Hz", "how it was chosen"),
                       mode_rows, numeric=[False, True, True, False, True, False])]
    pred_rows = [(p["mode"].replace("_", " "), _num(p["f_hz"]), f"{p['low_hz']:.6g} to {p['high_hz']:.6g}",
                  _DASH if p["found_hz"] is None else _num(p["found_hz"])) for p in result.predictions]
    out += ["<h4>Predicted modes</h4>",
            html_table(("mode", "predicted, Hz", "window, Hz", "found, Hz"), pred_rows,
                       numeric=[False, True, True, True])]
    unit = {"e_pa": "Pa", "g_pa": "Pa", "poisson": "", "density_kg_per_m3": "kg/m³"}
    b_rows = [(b.quantity, b.input, _num(b.input_value), _num(b.input_u, 3), _num(b.sensitivity, 4),
               f"{_num(b.contribution, 3)} {unit.get(b.quantity, '')}".rstrip(), f"{100 * b.share:.1f} %")
              for b in result.budget if b.input_u > 0]
    out += ["<h3>Uncertainty budget</h3>",
            html_table(("quantity", "input", "value (SI)", "u (SI)", "sensitivity", "contribution", "share"),
                       b_rows, numeric=[False, False, True, True, True, True, True])]
    if result.warnings:
        lis = "".join(f"<li>{_e(w.message)} <span class=\"code\">({_e(w.code)})</span></li>" for w in result.warnings)
        out.append(f'<h3>Warnings</h3><ul class="warnings">{lis}</ul>')
    out.append(_MODULI_FORMULAS)
    return Section(MODULI_SECTION_TITLE, "".join(out), anchor="moduli")
