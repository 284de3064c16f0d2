"""The pass/fail check report (``ringdown check``): verdicts, features against their windows, the
limits used; built from :mod:`.report`'s escaped pieces."""

from __future__ import annotations

import os
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

from ..base.numfmt import fmt_value, fmt_values
from .report import _DASH, Cell, Section, _e, _kv_table, html_table, render_report, verdict_cell

if TYPE_CHECKING:
    from ..inspection.limits import Limits

__all__ = ["render_check_report"]

_FEATURE_NAMES = {"f_hz": "f_d, Hz", "zeta": "ζ", "ratio": "f_d / f_d,1"}


def _feature_table(features) -> str:
    rows = []
    for fc in features:
        d = fc if isinstance(fc, dict) else fc.to_dict()
        win = d.get("window")
        status = str(d.get("status"))
        kind = {"pass": "pass", "advisory": "pass_advisory", "unchecked": "analysis"}.get(status, "fail")
        rows.append(
            [
                str(d.get("mode")),
                _FEATURE_NAMES.get(str(d.get("feature")), str(d.get("feature"))),
                fmt_value(d.get("value"), 6, missing=_DASH),
                _DASH if not win else " to ".join(fmt_values(win, 6)),
                verdict_cell(kind, "" if status in ("pass", "advisory") else f": {status}"),
            ]
        )
    if not rows:
        return ""
    return html_table(
        ("mode", "feature", "measured", "window", "result"),
        rows,
        numeric=[True, False, True, True, False],
        css_class="data features",
    )


def _list_cell(items: Sequence[dict]) -> Cell:
    """Messages one per line (escaped), or a dash."""
    if not items:
        return Cell(_DASH)
    return Cell('<ul class="cell">' + "".join(f"<li>{_e(x['message'])}</li>" for x in items) + "</ul>", raw=True)


def render_check_report(
    rows: Sequence[dict], analyses: Sequence, limits: Limits, *, more_sections: Sequence[Section] = (), **kw: Any
) -> str:
    """The check report: verdicts first, the limits used, then each part with its figures
    (all of them for a part that failed, the overview for one that passed).

    Parameters
    ----------
    rows : sequence of dict
        One per part, as ``ringdown check --json`` prints them (``part_id``, ``path``,
        ``verdict``, ``reasons``, ``notes``, ``features``, ``skipped``).
    analyses : sequence of Analysis or None
        Per row, the part's analysis (with samples for figures), or None (skipped or not kept).
    limits : ringdown.inspection.limits.Limits
        The limits used: file, SHA-256, coverage, confidence, good parts, reader settings.
    **kw
        Keywords of :func:`render_report` (``title``, ``notes``, ``fields`` with station and
        operator ...).
    more_sections : sequence of Section
        Shown after the limits (e.g. parts taken from the history).
    """
    from ..inspection.check import verdict_kind

    kinds = [verdict_kind(r["verdict"], [n.get("code") for n in r.get("notes", [])]) for r in rows]
    table = html_table(
        ["part", "file", "verdict", "reasons", "notes"],
        [
            [
                r["part_id"],
                os.path.basename(r.get("path") or ""),
                verdict_cell(k, " (stored)" if r.get("skipped") else ""),
                _list_cell(r.get("reasons", [])),
                _list_cell(r.get("notes", [])),
            ]
            for r, k in zip(rows, kinds)
        ],
        css_class="data checks",
    )
    counts = {k: sum(1 for r in rows if r["verdict"] == k) for k in ("pass", "fail", "error")}
    head = f"<p>{len(rows)} parts: {counts['pass']} passed, {counts['fail']} failed, {counts['error']} errors.</p>"
    lim = _limits_used(limits)
    shown = [(r, a, k) for r, a, k in zip(rows, analyses, kinds) if a is not None]
    extras = []
    for r, _a, k in shown:
        banner = verdict_cell(k)
        extras.append(
            f'<div class="{banner.css_class}">{banner.text} · part '
            f"{_e(r['part_id'])}</div>" + _feature_table(r.get("features", []))
        )
    kw["title"] = kw.get("title") or "Part check report"
    # every figure of a part that failed; the overview of one that passed keeps the report short
    kw.setdefault("figures", [True if k in ("fail", "error") else "overview" for _r, _a, k in shown])
    return render_report(
        [a for _r, a, _k in shown],
        extra_sections=[
            Section("Pass/fail", head + table, anchor="checks"),
            Section("Limits used", lim, anchor="limits"),
            *more_sections,
        ],
        file_extras=extras,
        verdicts=[k for _r, _a, k in shown],
        **kw,
    )


def _limits_used(limits: Limits) -> str:
    """The table of the limits a check used: file, SHA-256, coverage, confidence, good parts,
    reader settings and each mode's windows."""
    reader = getattr(limits, "reader", None) or {}
    return _kv_table(
        [
            ("limits file", limits.source or _DASH),
            ("SHA-256", limits.sha256 or _DASH),
            ("coverage", fmt_value(limits.coverage, 4, missing=_DASH)),
            ("confidence", fmt_value(limits.confidence, 4, missing=_DASH)),
            ("good parts", limits.n_parts or _DASH),
            ("reader", ", ".join(f"{k} {v}" for k, v in reader.items()) or "defaults"),
            (
                "modes",
                "; ".join(
                    f"{m.index}: f_d {' to '.join(fmt_values(m.f_hz, 6))} Hz"
                    + ("" if m.zeta is None else f", ζ {' to '.join(fmt_values(m.zeta, 3))}")
                    for m in limits.modes
                    if m.f_hz is not None
                )
                or _DASH,
            ),
        ]
    )
