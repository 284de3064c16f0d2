"""Run charts of stored results: each mode's frequency and damping ratio in test order, with limits.

A run chart shows drift (tooling wear, a furnace running hot, a new powder lot) before parts start
to fail (common SPC practice; e.g. Montgomery, *Introduction to Statistical Quality Control*,
ch. 5 [from memory for the chapter]). matplotlib is imported lazily and only the object-oriented
``Figure`` API is used (no pyplot state); the caller saves the figure.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from ..inspection.limits import Limits

__all__ = ["plot_run_chart"]

_FEATURES = {
    "f_d_hz": ("f_d [Hz]", "f_hz"),
    "zeta": ("damping ratio", "zeta"),
    "ratio": ("f_d / f_d of mode 1", "ratio"),
}
# Okabe-Ito colours (Wong, Nature Methods 8:441, 2011), as in plots.py; markers and fill differ
# too, so the chart reads in greyscale: an advisory pass (absolute windows excused, e.g. a warm
# part) is a hollow diamond, apart from plain passes
_LOOK: dict[str, dict[str, Any]] = {
    "pass": dict(color="#0072B2", marker="o", label="pass"),
    "pass_advisory": dict(color="#E69F00", marker="D", label="pass, advisory windows", hollow=True),
    "fail": dict(color="#D55E00", marker="X", label="fail"),
    "error": dict(color="#000000", marker="s", label="error"),
    "analysis": dict(color="#009E73", marker="d", label="analysis only"),
}
#: Most part names written along the x axis; with more, every k-th is written (all are plotted).
_MAX_X_LABELS = 40


def plot_run_chart(
    records: Sequence,
    *,
    limits_by_sha: dict | None = None,
    limits: Limits | None = None,
    features: Sequence[str] = ("f_d_hz", "ratio", "zeta"),
    n_modes: int | None = None,
) -> Figure:
    """A run chart per reference mode and feature, in test order, with the acceptance windows.

    Parameters
    ----------
    records : sequence of StoredResult
        From :meth:`ringdown.inspection.store.ResultStore.query`, in test order.
    limits_by_sha : dict, optional
        ``{limits sha256: Limits.to_dict()}`` (:meth:`ResultStore.limits_documents`): each point is
        drawn against the windows of the limits it was checked with (steps where limits changed).
    limits : Limits, optional
        Draw these windows for every point instead.
    features : sequence of {"f_d_hz", "ratio", "zeta"}
        Panels per mode; ``ratio`` (f_d over f_d of mode 1 of the same test, the feature that a
        uniform temperature shift leaves alone) is drawn for modes 2 and up.
    n_modes : int, optional
        Number of modes to chart (default: the most seen in the records, at most 6).

    Returns
    -------
    matplotlib.figure.Figure

    Notes
    -----
    The x axis is the part (its id, in test order; one position per test, so a part tested twice
    appears twice). Marks: pass (filled circle), pass with advisory windows (hollow diamond),
    fail (cross), error (square), analysis without a verdict (thin diamond).
    """
    from matplotlib.figure import Figure

    from ..inspection.check import verdict_kind

    for f in features:
        if f not in _FEATURES:
            from ..base.errors import ParameterError

            raise ParameterError(f"run chart feature must be one of {sorted(_FEATURES)}, got {f!r}")
    if n_modes is None:
        n_modes = _modes_seen(records)
    fixed = None if limits is None else limits.to_dict()
    panels = [(j, feat) for j in range(1, n_modes + 1) for feat in features if not (feat == "ratio" and j == 1)]
    if not panels:
        panels = [(1, features[0])]
    fig = Figure(figsize=(9.0, 1.7 * len(panels) + 1.2), layout="constrained")
    axes = fig.subplots(len(panels), 1, sharex=True, squeeze=False)[:, 0]
    x_all = list(range(1, len(records) + 1))
    kinds = [verdict_kind(r.verdict, [n.get("code") for n in r.notes]) for r in records]
    docs = [fixed or (limits_by_sha or {}).get(r.limits_sha256) for r in records]
    for ax, (j, feat) in zip(axes, panels):
        _draw_panel(ax, records, j, feat, kinds, docs)
    _legend_and_parts(fig, axes, records, x_all)
    fig.suptitle("Run chart of stored results")
    return fig


def _modes_seen(records: Sequence) -> int:
    """The most modes seen in the records (reference index, else an analysis' mode index), at most 6."""
    seen = [
        m.get("ref_index") or (m.get("mode_index") if r.kind == "analysis" else None) for r in records for m in r.modes
    ]
    return min(max([s for s in seen if s] or [1]), 6)


def _draw_panel(ax, records: Sequence, j: int, feat: str, kinds: list, docs: list) -> None:
    """One panel: feature ``feat`` of mode ``j`` for every record, marked by verdict ``kinds``, with
    the windows of the limits each record was checked with (``docs``, a limits document or None each)."""
    label, key = _FEATURES[feat]
    x_all = list(range(1, len(records) + 1))
    lo, hi = [], []
    for doc in docs:
        win = None
        if doc is not None and j <= len(doc["modes"]):
            win = doc["modes"][j - 1].get(key)
        lo.append(win[0] if win else float("nan"))
        hi.append(win[1] if win else float("nan"))
    if any(v == v for v in lo):
        ax.step(x_all, lo, where="mid", color="k", lw=1.0, ls="--", label="limits")
        ax.step(x_all, hi, where="mid", color="k", lw=1.0, ls="--")
    values = [_value(r, j, feat) for r in records]
    ax.plot(x_all, values, color="0.75", lw=0.8, zorder=1)
    for kind, look in _LOOK.items():
        xs = [x for x, k in zip(x_all, kinds) if k == kind]
        ys = [v for v, k in zip(values, kinds) if k == kind]
        if xs:
            hollow = look.get("hollow", False)
            ax.scatter(
                xs,
                ys,
                s=30 if hollow else 24,
                marker=look["marker"],
                zorder=2,
                label=look["label"],
                facecolors="none" if hollow else look["color"],
                edgecolors=look["color"],
                linewidths=1.3 if hollow else 0.5,
            )
    ax.set_ylabel(f"mode {j}\n{label}", fontsize="small")
    ax.ticklabel_format(axis="y", useOffset=False)
    ax.grid(True, alpha=0.3)


def _legend_and_parts(fig: Figure, axes, records: Sequence, x_all: list[int]) -> None:
    """One legend for all panels below them, and the parts' ids along the last x axis."""
    handles: dict = {}
    for ax in axes:
        for h, lab in zip(*ax.get_legend_handles_labels()):
            handles.setdefault(lab, h)
    fig.legend(
        list(handles.values()),
        list(handles),
        loc="outside lower center",
        ncols=min(len(handles), 6),
        fontsize="small",
        frameon=False,
    )
    step = max(1, -(-len(records) // _MAX_X_LABELS))
    last = axes[-1]
    last.set_xticks(x_all[::step])
    last.set_xticklabels([r.part_id for r in records][::step], rotation=60, ha="right", fontsize="small")
    last.set_xlabel("part (in test order)" + (f"; every {step}th named" if step > 1 else ""))


def _value(rec, j: int, feat: str) -> float:
    if feat == "ratio":
        m, m1 = rec.mode_for(j), rec.mode_for(1)
        if m is None or m1 is None or not m.get("f_d_hz") or not m1.get("f_d_hz"):
            return float("nan")
        return float(m["f_d_hz"]) / float(m1["f_d_hz"])
    m = rec.mode_for(j)
    if m is None or m.get(feat) is None:
        return float("nan")
    return float(m[feat])
