"""The before/after comparison's report section and its report (``ringdown compare``),
built from :mod:`.report`'s escaped pieces."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from ..base.numfmt import fmt_interval, fmt_pm, fmt_value
from .report import _DASH, Section, _e, _figure, _num, _pm, html_table, render_report, verdict_cell

if TYPE_CHECKING:
    from ..treatment.compare import Comparison
    from ..treatment.results import ModeComparison

__all__ = ["COMPARISON_TITLE", "comparison_cells", "comparison_html", "render_comparison_report"]

#: Heading of the comparison's report section.
COMPARISON_TITLE = "Before and after treatment"

_COMPARISON_CAUTION = (
    "A before/after comparison only holds when the part was supported, struck and measured the "
    "same way both times (support points, sensor position and mass, temperature). These figures "
    "do not by themselves show that a loaded or safety-relevant structure is fit for use; follow "
    "local codes and licensed engineering practice for such decisions."
)


def _comparison_figure(comparison) -> str:
    from .compare_plot import plot_comparison

    return _figure(
        lambda: plot_comparison(comparison).figure,
        "damping ratio before and after per mode, with intervals, and the frequency shift",
        "png",
    )


def comparison_html(comparison: Comparison) -> str:
    """The body of a report section describing a :class:`ringdown.treatment.compare.Comparison`.

    An HTML fragment (no heading): the method in words, the figure, the damping table (verdict
    coloured and worded), Q and T60, unmatched modes, notices and the inputs; every string that
    came from a file or the user is escaped.
    """
    s = comparison.settings
    conf = 100.0 * s.get("confidence", 0.95)
    c = fmt_value(conf, 3)
    out = [
        '<div class="comparison">',
        f"<p>Repeats: before {comparison.n_repeats_before}, after {comparison.n_repeats_after}. "
        f"Modes paired within ±{_num(100 * s.get('tolerance', 0.1), 3)} % in frequency "
        "(ordered, closest in log frequency). Damping is tested on ln(ζ); the ratio is that of "
        "geometric means (loss factor changes by the same ratio, Q by its inverse). Intervals and "
        f"verdicts at {_e(c)} % confidence, each mode on its own.</p>",
    ]
    out += _comparison_tables(comparison, c)
    out.append(_comparison_figure(comparison))  # after the tables: the numbers come first on paper
    for label, ms in (("before only", comparison.unmatched_before), ("after only", comparison.unmatched_after)):
        if ms:
            items = ", ".join(f"{_pm(cm.f_d_hz, cm.f_d_hz_u)} Hz (ζ {_pm(cm.zeta, cm.zeta_u)})" for cm in ms)
            out.append(f"<p>Unmatched, {_e(label)}: {_e(items)}</p>")
    if comparison.notices:
        out.append('<ul class="warnings">')
        out.extend(f'<li>{_e(n.message)} <span class="code">({_e(n.code)})</span></li>' for n in comparison.notices)
        out.append("</ul>")
    out.append(_comparison_inputs(comparison))
    out.append(f'<p class="caution">{_e(_COMPARISON_CAUTION)}</p>')
    out.append("</div>")
    return "".join(out)


def comparison_cells(m: ModeComparison, *, times: str, digits: int, missing: str) -> list[str]:
    """The cells of one paired mode in the damping table, without its verdict: index, f_d before
    and after, the frequency shift (%, its interval), zeta before and after, the zeta ratio (its
    interval, after the ``times`` sign), the test and its p-value; ``digits`` as for
    :func:`ringdown.base.numfmt.fmt_pm`. The one builder of these rows for the HTML report and
    the text ``ringdown compare`` prints."""
    b, a, d, f = m.before, m.after, m.damping, m.frequency
    return [
        str(m.index),
        fmt_pm(b.f_d_hz, b.f_d_hz_u, digits=digits, missing=missing),
        fmt_pm(a.f_d_hz, a.f_d_hz_u, digits=digits, missing=missing),
        fmt_interval(*f.percent, decimals=2, sign=True),
        fmt_pm(b.zeta, b.zeta_u, digits=digits, missing=missing),
        fmt_pm(a.zeta, a.zeta_u, digits=digits, missing=missing),
        times + fmt_interval(d.ratio, d.ratio_low, d.ratio_high, digits=3),
        str(d.test),
        fmt_value(d.p_value, 2, missing=missing),
    ]


def _comparison_tables(comparison: Comparison, c: str) -> list[str]:
    """The damping table (f_d, shift, zeta, ratio, test, verdict) and the Q and T60 table of the
    paired modes, intervals at ``c`` % confidence; a note when no mode was paired."""
    main: list[list[Any]] = []
    more: list[list[str]] = []
    for m in comparison.modes:
        b, a = m.before, m.after
        main.append([*comparison_cells(m, times="×", digits=6, missing=_DASH), verdict_cell(m.damping.verdict)])
        more.append(
            [
                str(m.index),
                _pm(b.q, b.q_u),
                _pm(a.q, a.q_u),
                _pm(b.t60_s, b.t60_s_u),
                _pm(a.t60_s, a.t60_s_u),
                "; ".join(f"{w.code}: {w.message}" for w in m.warnings) or _DASH,
            ]
        )
    if not main:
        return ['<p class="note">No mode was found on both sides.</p>']
    return [
        html_table(
            (
                "mode",
                "f_d before, Hz",
                "f_d after, Hz",
                f"shift, % [{c} %]",
                "ζ before",
                "ζ after",
                f"ζ after/before [{c} %]",
                "test",
                "p",
                "verdict",
            ),
            main,
            numeric=[True] * 7 + [False, True, False],
            css_class="data comparison-main",
        ),
        html_table(
            ("mode", "Q before", "Q after", "T60 before, s", "T60 after, s", "warnings"),
            more,
            numeric=[True] * 5 + [False],
            css_class="data comparison-q",
        ),
    ]


def _comparison_inputs(comparison: Comparison) -> str:
    """The heading and table of the comparison's input files."""
    out = []
    out.append("<h3>Inputs</h3>")
    out.append(
        html_table(
            ("condition", "file", "channel", "sample rate, Hz", "repeats", "error"),
            [
                [
                    i.side,
                    i.path if i.path is not None else "(array)",
                    "" if i.channel is None else i.channel,
                    fmt_value(i.sample_rate_hz, 7, missing=_DASH),
                    str(i.n_repeats),
                    _DASH if i.error is None else i.error.message,
                ]
                for i in comparison.inputs
            ],
            numeric=[False, False, False, True, True, False],
            css_class="data inputs",
        )
    )
    return "".join(out)


def render_comparison_report(comparison: Comparison, **kw: Any) -> str:
    """The comparison report: the shared report with the comparison section first.

    Keywords are those of :func:`render_report` (``title``, ``notes``, ``fields`` ...); the
    per-recording figures are left out unless ``figures=True`` is given.
    """
    s = comparison.settings
    kw["title"] = kw.get("title") or "Before/after comparison"
    kw.setdefault("figures", False)
    kw.setdefault(
        "settings",
        {
            "command": "compare",
            "tolerance": s["tolerance"],
            "confidence": s["confidence"],
            "damping_scale": s["damping_scale"],
        },
    )
    return render_report(
        [*comparison.before_analyses, *comparison.after_analyses],
        extra_sections=[Section(COMPARISON_TITLE, comparison_html(comparison), anchor="comparison")],
        **kw,
    )
