"""Figure of a before/after comparison: damping per mode on a log axis, and the frequency shift.

Reuses the style helpers of :mod:`ringdown.render.plots` and the number format of :mod:`ringdown.base.numfmt`. matplotlib is imported lazily, figures use
:class:`matplotlib.figure.Figure` (no pyplot), and nothing is saved here.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

from ..base.errors import ParameterError
from ..base.numfmt import fmt_fixed, fmt_value

if TYPE_CHECKING:
    from matplotlib.axes import Axes

    from ..treatment.compare import Comparison

__all__ = ["plot_comparison"]

_BEFORE = "#0072B2"  # Okabe-Ito blue (Wong, Nature Methods 8:441, 2011)
_AFTER = "#D55E00"  # Okabe-Ito vermillion


def _centre(cm) -> float:
    """Geometric centre of the side's zeta interval (= exp(mean ln zeta)), or the mean zeta."""
    if cm.zeta_interval is not None:
        lo, hi = cm.zeta_interval
        return math.sqrt(lo * hi)
    return cm.values["zeta"]


def _draw_side(ax, x, cm, color, marker, label, *, hollow=False):
    y = _centre(cm)
    if cm.zeta_interval is not None:
        lo, hi = cm.zeta_interval
        yerr = [[y - lo], [hi - y]]
    else:
        yerr = None
    ax.errorbar(
        [x],
        [y],
        yerr=yerr,
        fmt=marker,
        color=color,
        mfc="none" if hollow else color,
        ms=6,
        capsize=3,
        elinewidth=1.0,
        label=label,
        zorder=3,
    )
    # each repeat as a small dot beside the mean
    ax.plot([x + 0.08] * len(cm.repeat_zeta), cm.repeat_zeta, ".", color=color, ms=3, alpha=0.6, zorder=2)


def plot_comparison(comparison: Comparison, *, ax: Axes | None = None) -> Axes:
    """Damping ratio before and after, per mode, with interval bars on a log axis.

    Parameters
    ----------
    comparison : ringdown.treatment.compare.Comparison
    ax : matplotlib.axes.Axes or None
        Where to draw the damping panel. With ``None`` a new Figure holds two panels: the damping
        (returned) and, below it, the frequency shift of each mode in percent with its interval.
        When an Axes is given only the damping panel is drawn, and the frequency shift goes into
        the tick labels.

    Returns
    -------
    matplotlib.axes.Axes
        The damping panel.

    Raises
    ------
    ParameterError
        When the comparison holds no mode at all.

    Notes
    -----
    Markers sit at ``exp(mean ln zeta)`` with the interval of the comparison's confidence level
    (Student t over the repeats, or normal from the propagated uncertainty for one repeat); small
    dots are the individual repeats. Modes without a partner are drawn hollow at the end.
    """
    from .figure import _legend, _new_figure, _style_axes

    matched = list(comparison.modes)
    only_b = list(comparison.unmatched_before)
    only_a = list(comparison.unmatched_after)
    if not (matched or only_b or only_a):
        raise ParameterError("the comparison holds no mode to plot; check the inputs' analyses")
    freq_ax = None
    if ax is None:
        _, (ax, freq_ax) = _new_figure(5.2, nrows=2, height_ratios=(3, 2))
    conf = comparison.settings.get("confidence", 0.95)

    labels = _draw_modes(ax, matched, only_b, only_a, shift_in_labels=freq_ax is None)
    x = len(labels)
    ax.set_yscale("log")
    ax.set_xticks(range(x))
    ax.set_xticklabels(labels)
    ax.set_xlim(-0.6, x - 0.4)
    ax.margins(y=0.25)
    ax.set_ylabel("damping ratio zeta")
    _style_axes(ax, f"Damping before and after ({100 * conf:g} % intervals, ratio of geometric means)")
    _legend(ax)

    if freq_ax is not None:
        _draw_shifts(freq_ax, matched, labels)
    return ax


def _draw_modes(ax: Axes, matched: list, only_b: list, only_a: list, *, shift_in_labels: bool) -> list[str]:
    """Draw both sides of each paired mode with its damping ratio written above, then the unpaired
    modes hollow; return the tick labels, one per position (the frequency shift in them when asked)."""
    from .figure import STYLE

    labels = []
    x = 0
    first = True
    for m in matched:
        _draw_side(ax, x - 0.18, m.before, _BEFORE, "o", "before" if first else None)
        _draw_side(ax, x + 0.18, m.after, _AFTER, "s", "after" if first else None)
        first = False
        r = m.damping
        txt = "x" + fmt_value(r.ratio, 3, trim=False)
        if r.ratio_low is not None:
            txt += f"\n[{fmt_value(r.ratio_low, 3, trim=False)}, {fmt_value(r.ratio_high, 3, trim=False)}]"
        top = max(
            v
            for v in (m.before.zeta_interval or (m.before.values["zeta"],) * 2)[1:]
            + (m.after.zeta_interval or (m.after.values["zeta"],) * 2)[1:]
        )
        ax.annotate(
            txt,
            (x, top),
            xytext=(0, 4),
            textcoords="offset points",
            ha="center",
            va="bottom",
            fontsize=STYLE["font_size"] - 1,
        )
        lab = f"mode {m.index}\n{fmt_value(m.before.values['f_d_hz'], 5)} Hz"
        if shift_in_labels:
            lab += f"\n{fmt_fixed(100 * m.frequency.relative, 1, sign=True)} %"
        labels.append(lab)
        x += 1
    for cm in only_b:
        _draw_side(ax, x - 0.18, cm, _BEFORE, "o", None, hollow=True)
        labels.append(f"before only\n{fmt_value(cm.values['f_d_hz'], 5)} Hz")
        x += 1
    for cm in only_a:
        _draw_side(ax, x + 0.18, cm, _AFTER, "s", None, hollow=True)
        labels.append(f"after only\n{fmt_value(cm.values['f_d_hz'], 5)} Hz")
        x += 1
    return labels


def _draw_shifts(freq_ax: Axes, matched: list, labels: list[str]) -> None:
    """The panel of each paired mode's frequency shift in percent, with its interval."""
    from .figure import _style_axes

    x = len(labels)
    for k, m in enumerate(matched):
        f0 = m.before.values["f_d_hz"]
        y = 100.0 * m.frequency.relative
        yerr = None
        if m.frequency.low_hz is not None and m.frequency.high_hz is not None:
            yerr = [[y - 100.0 * m.frequency.low_hz / f0], [100.0 * m.frequency.high_hz / f0 - y]]
        freq_ax.errorbar([k], [y], yerr=yerr, fmt="D", color="#303030", ms=5, capsize=3)
    freq_ax.axhline(0.0, color="#8A8A8A", linewidth=0.8)
    freq_ax.set_xticks(range(x))
    freq_ax.set_xticklabels(labels)
    freq_ax.set_xlim(-0.6, x - 0.4)
    freq_ax.set_ylabel("shift of f_d, %")
    _style_axes(freq_ax, "Frequency shift (after - before) / before")
