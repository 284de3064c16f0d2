"""HTML section (and a standalone page) for a before/after comparison.

Meant to be merged into :mod:`ringdown.report` (the one place HTML is written). Every string that
came from a file name, a recording or the user is escaped with :func:`html.escape`; the figure is
embedded as a base64 PNG so the page is one self-contained file.
"""

from __future__ import annotations

import base64
import html
import math

from ._version import __version__

__all__ = ["SECTION_TITLE", "comparison_html", "comparison_page"]

#: Heading of the comparison's report section.
SECTION_TITLE = "Before and after treatment"

_CAUTION = (
    "A before/after comparison only holds when the part was supported, struck and measured the "
    "same way both times (support points, sensor position and mass, temperature). These figures "
    "do not by themselves show that a loaded or safety-relevant structure is fit for use; follow "
    "local codes and licensed engineering practice for such decisions."
)


def _e(s) -> str:
    from .outputs import shown

    return html.escape(shown(s), quote=True)


def _num(v, digits: int = 4) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "&ndash;"
    return _e(f"{v:.{digits}g}")


def _pm(v, u, digits: int = 4) -> str:
    if u is None:
        return _num(v, digits)
    return f"{_num(v, digits)} &plusmn; {_num(u, 2)}"


def _figure(comparison) -> str:
    """The comparison figure as an <img>, or a one-line reason when it cannot be drawn."""
    try:
        from .compare_plot import plot_comparison
        from .plots import figure_bytes

        ax = plot_comparison(comparison)
        png = figure_bytes(ax.figure, fmt="png")
    except Exception as exc:  # the report still renders without its figure
        return f'<p class="note">Figure not drawn: {_e(exc)}</p>'
    data = base64.b64encode(png).decode("ascii")
    return (f'<img alt="Damping ratio before and after per mode, with intervals, and frequency '
            f'shift" src="data:image/png;base64,{data}" style="max-width:100%">')


def comparison_html(comparison) -> str:
    """The body of a report section describing a :class:`ringdown.compare.Comparison`.

    Insert it with ``ringdown.report.render_report(..., extra_sections=[Section(SECTION_TITLE,
    comparison_html(c))])``; the report adds the ``<section>`` and its heading.

    Parameters
    ----------
    comparison : ringdown.compare.Comparison

    Returns
    -------
    str
        An HTML fragment (a ``<div>``; no heading, ``<html>`` or ``<body>``), every string that
        came from a file or the user escaped.
    """
    s = comparison.settings
    conf = 100.0 * s.get("confidence", 0.95)
    out = ['<div class="comparison">']
    out.append(
        f"<p>Repeats: before {comparison.n_repeats_before}, after {comparison.n_repeats_after}. "
        f"Modes paired within &plusmn;{_num(100 * s.get('tolerance', 0.1), 3)} % in frequency "
        f"(ordered, closest in log frequency). Damping is tested on ln(zeta); the ratio is that of "
        f"geometric means (loss factor changes by the same ratio, Q by its inverse). Intervals and "
        f"verdicts at {_num(conf, 3)} % confidence, each mode on its own.</p>"
    )
    out.append(_figure(comparison))
    out.append('<table class="modes"><thead><tr>'
               "<th>mode</th><th>f<sub>d</sub> before, Hz</th><th>f<sub>d</sub> after, Hz</th>"
               "<th>shift, %</th><th>&zeta; before</th><th>&zeta; after</th>"
               f"<th>damping ratio after/before [{_num(conf, 3)} %]</th><th>test</th><th>p</th>"
               "<th>verdict</th><th>Q before</th><th>Q after</th><th>T60 before, s</th>"
               "<th>T60 after, s</th><th>warnings</th></tr></thead><tbody>")
    for m in comparison.modes:
        b, a, d, f = m.before, m.after, m.damping, m.frequency
        ci = "&ndash;" if d.ratio_low is None else f"[{_num(d.ratio_low, 3)}, {_num(d.ratio_high, 3)}]"
        fci = "" if f.low_hz is None else (
            f" [{_num(100 * f.low_hz / b.values['f_d_hz'], 3)}, {_num(100 * f.high_hz / b.values['f_d_hz'], 3)}]")
        warn = "; ".join(f"{_e(w.code)}: {_e(w.message)}" for w in m.warnings) or "&ndash;"
        out.append(
            "<tr>"
            f"<td>{m.index}</td><td>{_pm(b.f_d_hz, b.f_d_hz_u, 6)}</td><td>{_pm(a.f_d_hz, a.f_d_hz_u, 6)}</td>"
            f"<td>{_num(100 * f.relative, 3)}{fci}</td>"
            f"<td>{_pm(b.zeta, b.zeta_u)}</td><td>{_pm(a.zeta, a.zeta_u)}</td>"
            f"<td>x{_num(d.ratio, 3)} {ci}</td><td>{_e(d.test)}</td><td>{_num(d.p_value, 2)}</td>"
            f"<td><strong>{_e(d.verdict)}</strong></td>"
            f"<td>{_pm(b.q, b.q_u)}</td><td>{_pm(a.q, a.q_u)}</td>"
            f"<td>{_pm(b.t60_s, b.t60_s_u, 3)}</td><td>{_pm(a.t60_s, a.t60_s_u, 3)}</td>"
            f"<td>{warn}</td></tr>"
        )
    out.append("</tbody></table>")
    for label, ms in (("before only", comparison.unmatched_before), ("after only", comparison.unmatched_after)):
        if ms:
            items = ", ".join(f"{_pm(cm.f_d_hz, cm.f_d_hz_u, 6)} Hz (&zeta; {_pm(cm.zeta, cm.zeta_u)})" for cm in ms)
            out.append(f"<p>Unmatched, {_e(label)}: {items}</p>")
    if comparison.notices:
        out.append("<ul class=\"notices\">")
        out.extend(f"<li><code>{_e(n.code)}</code> {_e(n.message)}</li>" for n in comparison.notices)
        out.append("</ul>")
    out.append('<table class="inputs"><thead><tr><th>condition</th><th>file</th><th>channel</th>'
               "<th>sample rate, Hz</th><th>repeats</th><th>error</th></tr></thead><tbody>")
    for i in comparison.inputs:
        err = "&ndash;" if i.error is None else _e(i.error.message)
        out.append(f"<tr><td>{_e(i.side)}</td><td>{_e(i.path if i.path is not None else '(array)')}</td>"
                   f"<td>{_e(i.channel if i.channel is not None else '')}</td><td>{_num(i.sample_rate_hz, 6)}</td>"
                   f"<td>{i.n_repeats}</td><td>{err}</td></tr>")
    out.append("</tbody></table>")
    out.append(f'<p class="caution">{_e(_CAUTION)}</p>')
    out.append("</div>")
    return "\n".join(out)


def comparison_page(comparison, *, title: str | None = None) -> str:
    """A standalone, self-contained HTML page holding :func:`comparison_html`.

    Used until the comparison section is merged into the main report.
    """
    t = _e(title if title is not None else "ringdown: before/after comparison")
    style = (
        "body{font-family:system-ui,sans-serif;margin:2em;max-width:80em;color:#222}"
        "table{border-collapse:collapse;margin:1em 0;font-size:0.9em}"
        "th,td{border:1px solid #ccc;padding:0.25em 0.5em;text-align:left;vertical-align:top}"
        "th{background:#f2f2ee}.caution{font-size:0.9em;color:#444;border-left:3px solid #D55E00;"
        "padding-left:0.7em}"
    )
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        f"<title>{t}</title><style>{style}</style></head><body>\n<h1>{t}</h1>\n"
        f'<section id="comparison"><h2>{_e(SECTION_TITLE)}</h2>\n{comparison_html(comparison)}</section>\n'
        f"<footer><p>ringdown {_e(__version__)}</p></footer>\n</body></html>\n"
    )
