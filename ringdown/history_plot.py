"""Run charts of stored results: each mode's frequency and damping ratio in test order, with limits.

A run chart shows drift (tooling wear, a furnace running hot, a new powder lot) before parts start
to fail (common SPC practice; e.g. Montgomery, *Introduction to Statistical Quality Control*,
ch. 5 [from memory for the chapter]). matplotlib is imported lazily and only the object-oriented
``Figure`` API is used (no pyplot state); the caller saves the figure.
"""

from __future__ import annotations

from typing import Sequence

__all__ = ["plot_run_chart"]

_FEATURES = {"f_d_hz": ("f_d [Hz]", "f_hz"), "zeta": ("damping ratio", "zeta")}
# Okabe-Ito colours (Wong, Nature Methods 8:441, 2011), as in plots.py; markers differ too, so
# the chart reads in greyscale
_COLOURS = {"pass": "#0072B2", "fail": "#D55E00", "error": "#000000", None: "#009E73"}
_MARKERS = {"pass": "o", "fail": "X", "error": "s", None: "D"}


def plot_run_chart(records: Sequence, *, limits_by_sha: dict | None = None, limits=None,
                   features: Sequence[str] = ("f_d_hz", "zeta"), n_modes: int | None = None):
    """A run chart per reference mode and feature, in test order, with the acceptance windows.

    Parameters
    ----------
    records : sequence of StoredResult
        From :meth:`ringdown.store.ResultStore.query`, in test order.
    limits_by_sha : dict, optional
        ``{limits sha256: Limits.to_dict()}`` (:meth:`ResultStore.limits_documents`): each point is
        drawn against the windows of the limits it was checked with (steps where limits changed).
    limits : Limits, optional
        Draw these windows for every point instead.
    features : sequence of {"f_d_hz", "zeta"}
    n_modes : int, optional
        Number of modes to chart (default: the most seen in the records, at most 6).

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.figure import Figure

    for f in features:
        if f not in _FEATURES:
            from .errors import ParameterError

            raise ParameterError(f"run chart feature must be one of {sorted(_FEATURES)}, got {f!r}")
    if n_modes is None:
        seen = [m.get("ref_index") or (m.get("mode_index") if r.kind == "analysis" else None)
                for r in records for m in r.modes]
        n_modes = min(max([s for s in seen if s] or [1]), 6)
    fixed = None if limits is None else limits.to_dict()
    fig = Figure(figsize=(9.0, 1.9 * n_modes * len(features) + 0.6), layout="constrained")
    axes = fig.subplots(n_modes * len(features), 1, sharex=True, squeeze=False)[:, 0]
    x_all = list(range(1, len(records) + 1))
    for j in range(1, n_modes + 1):
        for fi, feat in enumerate(features):
            ax = axes[(j - 1) * len(features) + fi]
            label, key = _FEATURES[feat]
            lo, hi = [], []
            for rec in records:
                doc = fixed or (limits_by_sha or {}).get(rec.limits_sha256)
                win = None
                if doc is not None and j <= len(doc["modes"]):
                    win = doc["modes"][j - 1].get(key)
                lo.append(win[0] if win else float("nan"))
                hi.append(win[1] if win else float("nan"))
            if any(v == v for v in lo):
                ax.step(x_all, lo, where="mid", color="k", lw=1.0, ls="--", label="limits")
                ax.step(x_all, hi, where="mid", color="k", lw=1.0, ls="--")
            ax.plot(x_all, [_value(r, j, feat) for r in records], color="0.75", lw=0.8, zorder=1)
            for verdict in ("pass", "fail", "error", None):
                xs = [x for x, r in zip(x_all, records) if r.verdict == verdict]
                ys = [_value(r, j, feat) for r in records if r.verdict == verdict]
                if xs:
                    ax.scatter(xs, ys, s=22, color=_COLOURS[verdict], marker=_MARKERS[verdict], zorder=2,
                               label=verdict or "analysis only")
            ax.set_ylabel(f"mode {j}\n{label}")
            ax.grid(True, alpha=0.3)
            if j == 1 and fi == 0:
                ax.legend(loc="best", fontsize="small", ncols=5)
    axes[-1].set_xlabel("test number (in time order)")
    fig.suptitle("Run chart of stored results")
    return fig


def _value(rec, j: int, feat: str) -> float:
    m = rec.mode_for(j)
    if m is None or m.get(feat) is None:
        return float("nan")
    return float(m[feat])
