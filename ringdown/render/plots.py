"""Figures of ring-down results: the recording, its spectrum, each mode's decay.

matplotlib is imported inside each function so that ``import ringdown`` and ``ringdown --help``
stay fast. Figures are built on :class:`matplotlib.figure.Figure` (no pyplot, no global state);
every ``plot_x(obj, *, ax=None)`` draws on the Axes it is given, or on a new Figure of its own, and
returns the Axes. Saving is left to the caller (the CLI and the report use :func:`figure_bytes`).
The style, its colours and the shared figure helpers are in :mod:`ringdown.render.figure`.

Missing data
------------
A plot that needs data the result does not hold (no samples kept in ``Analysis.recording``, no
``Mode.trace``, no damping-against-amplitude rows) raises :class:`ringdown.base.errors.ParameterError`
naming what is missing; nothing is drawn in that case. The report catches it and prints the
reason instead of the figure.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

    from ..analysis.results import Analysis, Mode

import numpy as np

from ..analysis.quantities import DB_PER_NEPER
from ..base.errors import ParameterError
from .figure import (
    _OI_BLACK,
    _OI_BLUE,
    _OI_GREEN,
    _OI_VERMILLION,
    FIGURE_FORMATS,
    STYLE,
    _axes_or_new,
    _legend,
    _new_figure,
    _style_axes,
    figure_bytes,
)

__all__ = [
    "FIGURE_FORMATS",
    "STYLE",
    "figure_bytes",
    "plot_damping_vs_amplitude",
    "plot_decay",
    "plot_mode",
    "plot_overview",
    "plot_recording",
    "plot_spectrum",
]

#: Most points drawn for one trace; longer traces keep each bucket's minimum and maximum.
_MAX_DRAWN_POINTS = 6000
#: Largest segment transformed for the display spectrum (samples); longer decays are truncated.
_MAX_SPECTRUM_SAMPLES = 1 << 20


# --------------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------------


def _mode_style(i: int) -> dict:
    """Colour, marker and dash pattern of the ``i``-th mode (0-based)."""
    n = len(STYLE["mode_colors"])
    return {
        "color": STYLE["mode_colors"][i % n],
        "marker": STYLE["mode_markers"][i % len(STYLE["mode_markers"])],
        "linestyle": STYLE["mode_dashes"][i % len(STYLE["mode_dashes"])],
    }


def _name(analysis) -> str:
    """File name for titles (base name, shortened in the middle past 60 characters)."""
    import os

    name = "<array>"
    if getattr(analysis, "path", None):
        name = os.path.basename(str(analysis.path)) or str(analysis.path)
    return name if len(name) <= 60 else name[:35] + "…" + name[-24:]


def _samples(analysis) -> tuple[np.ndarray, float]:
    """The samples and sample rate kept with ``analysis``; ParameterError when none were kept."""
    rec = getattr(analysis, "recording", None)
    if rec is None or getattr(rec, "samples", None) is None:
        raise ParameterError(
            f"no samples kept for {_name(analysis)!r}: the plot needs Analysis.recording; "
            "analyse the file again (a failed analysis keeps none)"
        )
    x = np.asarray(rec.samples, dtype=float)
    if x.size == 0:
        raise ParameterError(f"recording {_name(analysis)!r} holds 0 samples; nothing to plot")
    return x, float(rec.sample_rate)


def _thin(t: np.ndarray, y: np.ndarray, max_points: int = _MAX_DRAWN_POINTS):
    """Thin a trace for display, keeping each bucket's minimum and maximum (peaks stay visible)."""
    n = y.shape[0]
    if n <= max_points:
        return t, y
    n_buckets = max_points // 2
    edges = np.linspace(0, n, n_buckets + 1).astype(int)
    lo_idx = np.empty(n_buckets, dtype=int)
    hi_idx = np.empty(n_buckets, dtype=int)
    for k in range(n_buckets):
        seg = y[edges[k] : edges[k + 1]]
        lo_idx[k] = edges[k] + int(np.argmin(seg))
        hi_idx[k] = edges[k] + int(np.argmax(seg))
    idx = np.sort(np.concatenate([lo_idx, hi_idx]))
    return t[idx], y[idx]


def _db(v: np.ndarray, floor: float) -> np.ndarray:
    """20 log10(v) with values below ``floor`` (linear) clamped to it."""
    return 20.0 * np.log10(np.maximum(np.asarray(v, dtype=float), floor))


def _fmt_sig(v: float | None, digits: int = 4) -> str:
    """A number for a label, in the one format of ringdown (:func:`ringdown.base.numfmt.fmt_value`)."""
    from ..base.numfmt import fmt_value

    return fmt_value(v, digits, missing="n/a")


def spread_labels(x: np.ndarray, min_gap: float, lo: float = 0.0, hi: float = 1.0) -> np.ndarray:
    """Positions near ``x`` (sorted or not; same units as ``min_gap``) at least ``min_gap`` apart,
    inside [lo, hi] when they fit: a forward then a backward sweep over the sorted positions.

    Returns the positions in the order of ``x``.
    """
    x = np.asarray(x, dtype=float)
    order = np.argsort(x, kind="stable")
    p = np.clip(x[order], lo + min_gap / 2, hi - min_gap / 2)
    for i in range(1, p.size):
        p[i] = max(p[i], p[i - 1] + min_gap)
    if p.size and p[-1] > hi - min_gap / 2:
        p[-1] = hi - min_gap / 2
        for i in range(p.size - 2, -1, -1):
            p[i] = min(p[i], p[i + 1] - min_gap)
    out = np.empty_like(p)
    out[order] = p
    return out


# --------------------------------------------------------------------------------------------
# the recording and its spectrum
# --------------------------------------------------------------------------------------------


def plot_recording(analysis: Analysis, *, ax: Axes | None = None) -> Axes:
    """Draw the recorded signal against time, with each hit and each mode's fit window.

    Parameters
    ----------
    analysis : ringdown.Analysis
        Needs ``analysis.recording`` (a :class:`ringdown.Recording`); uses ``hits`` and ``modes``.
    ax : matplotlib.axes.Axes or None
        Axes to draw on; a new Figure is made when None.

    Returns
    -------
    matplotlib.axes.Axes

    Raises
    ------
    ParameterError
        When the analysis kept no samples (``analysis.recording`` is None).

    Notes
    -----
    Each hit is a vertical line at its onset (solid when its modes were used, dotted when not)
    labelled ``hit N`` plus its warning codes, with a marker at its envelope peak. Each mode's fit
    window is a horizontal bar in a strip below the signal, in the mode's colour, marker and line
    style. When the recording knows its full scale, +-full scale is drawn and samples at or beyond
    99.9 % of it are marked as clipped. Long records are thinned for display (bucket min/max).
    """
    x, fs = _samples(analysis)
    ax = _axes_or_new(ax)
    t = np.arange(x.size) / fs
    td, xd = _thin(t, x)
    ax.plot(td, xd, color=STYLE["signal_color"], linewidth=0.6, label="signal")
    full_scale = getattr(analysis.recording, "full_scale", None)
    top = _draw_full_scale(ax, t, x, full_scale)
    _draw_fit_windows(ax, tuple(getattr(analysis, "modes", ()) or ()), top)
    _draw_hits(ax, getattr(analysis, "hits", ()) or ())
    ax.set_xlim(0.0, x.size / fs)
    ax.set_xlabel("time, s")
    unit = "full scale" if full_scale == 1.0 else "recording units"
    ax.set_ylabel(f"signal, {unit}")
    _style_axes(ax, f"Recording: {_name(analysis)}")
    _legend(ax)
    return ax


def _draw_full_scale(ax: Axes, t: np.ndarray, x: np.ndarray, full_scale: float | None) -> float:
    """Draw +-full scale and the clipped samples (at least 99.9 % of it) when the full scale is
    known; return the top of the signal's range (the larger of its peak and the full scale)."""
    peak = float(np.max(np.abs(x))) or 1.0
    top = peak
    if full_scale:
        top = max(peak, float(full_scale))
        for s in (1, -1):
            ax.axhline(
                s * full_scale,
                color=STYLE["muted_color"],
                linewidth=0.7,
                linestyle=(0, (4, 2)),
                label="full scale" if s == 1 else None,
            )
        clipped = np.flatnonzero(np.abs(x) >= 0.999 * float(full_scale))
        if clipped.size:
            if clipped.size > 400:
                clipped = clipped[np.linspace(0, clipped.size - 1, 400).astype(int)]
            ax.plot(
                t[clipped],
                x[clipped],
                linestyle="none",
                marker="x",
                markersize=4,
                color=STYLE["clip_color"],
                label="clipped samples",
            )
    return top


def _draw_fit_windows(ax: Axes, modes: tuple, top: float) -> None:
    """Set the y range and draw each mode's fit window as a bar in a strip below the signal."""
    n_bars = sum(1 for m in modes if m.fit_start_s is not None and m.fit_end_s is not None)
    # The signal occupies [-top, top]; a strip below it holds one window bar per mode.
    strip = 0.13 * top * max(n_bars, 0)
    bottom = -top * 1.08 - strip
    ax.set_ylim(bottom, top * 1.25)

    for i, m in enumerate(modes):
        if m.fit_start_s is None or m.fit_end_s is None:
            continue
        st = _mode_style(i)
        y = -top * 1.08 - 0.13 * top * (i + 0.5)
        ax.plot(
            [m.fit_start_s, m.fit_end_s],
            [y, y],
            color=st["color"],
            linestyle=st["linestyle"],
            linewidth=2.2,
            marker=st["marker"],
            markersize=4.5,
            markevery=[0, 1],
            label=f"mode {m.index} window ({_fmt_sig(m.f_d_hz, 5)} Hz)",
            gid=f"window-mode-{m.index}",
        )


def _draw_hits(ax: Axes, hits) -> None:
    """Draw each hit: a line at its onset (solid when used), a marker at its peak, its label."""
    trans = ax.get_xaxis_transform()  # x in data, y in axes fraction
    for k, h in enumerate(hits):
        used = bool(h.used)
        ax.axvline(
            h.start_s,
            color=_OI_BLACK if used else STYLE["muted_color"],
            linewidth=0.9,
            linestyle="-" if used else (0, (1, 1.5)),
            gid=f"hit-{k + 1}",
        )
        ax.plot(
            [h.peak_s],
            [0.985],
            transform=trans,
            linestyle="none",
            marker="v",
            markersize=5,
            color=_OI_BLACK if used else STYLE["muted_color"],
            gid=f"hit-peak-{k + 1}",
        )
        codes = [w.code for w in h.warnings]
        text = f"hit {k + 1}" + ("" if used else " (not used)") + ("".join(f"\n{c}" for c in codes))
        ax.text(
            h.start_s,
            0.95,
            " " + text.replace("\n", "\n "),
            transform=trans,
            va="top",
            ha="left",
            fontsize=STYLE["font_size"] - 1,
            color=_OI_BLACK if used else STYLE["muted_color"],
            bbox={"boxstyle": "square,pad=0.15", "facecolor": "white", "edgecolor": "none", "alpha": 0.85},
        )


def _decay_segment(analysis, x: np.ndarray, fs: float) -> tuple[int, int]:
    """Sample range of the decay shown in the spectrum: the first used hit, else the whole record."""
    hits = [h for h in (getattr(analysis, "hits", ()) or ()) if h.used] or list(getattr(analysis, "hits", ()) or ())
    if not hits:
        return 0, x.size
    h = hits[0]
    i0 = int(np.clip(round(h.start_s * fs), 0, x.size - 1))
    i1 = int(np.clip(round(h.end_s * fs), i0 + 1, x.size))
    if i1 - i0 < 16:
        return 0, x.size
    return i0, i1


def display_spectrum(x: np.ndarray, fs: float) -> tuple[np.ndarray, np.ndarray]:
    """Magnitude spectrum of a decay for display, dB re its largest bin.

    The segment keeps its start (where the decay is strongest) and is tapered over its last half
    by a raised cosine, so that cutting the record off does not smear the peaks; it is zero-padded
    to four times its length (a power of two) for a smooth curve. This is for display only: the
    estimators make their own transforms.

    Returns
    -------
    f_hz : (m,) ndarray of float
    level_db : (m,) ndarray of float, dB re the largest bin, floored at -160 dB
    """
    x = np.asarray(x, dtype=float)[:_MAX_SPECTRUM_SAMPLES]
    n = x.size
    x = x - np.mean(x)
    w = np.ones(n)
    half = n // 2
    if half > 1:
        w[n - half :] = 0.5 * (1.0 + np.cos(np.pi * np.arange(half) / (half - 1)))
    nfft = 1 << int(math.ceil(math.log2(max(4 * n, 16))))
    mag = np.abs(np.fft.rfft(x * w, nfft))
    ref = float(mag.max()) or 1.0
    level = 20.0 * np.log10(np.maximum(mag / ref, 1e-8))
    f = np.fft.rfftfreq(nfft, 1.0 / fs)
    return f, level


def plot_spectrum(analysis: Analysis, *, ax: Axes | None = None) -> Axes:
    """Draw the magnitude spectrum of the decay, in dB, with each mode marked and labelled.

    Parameters
    ----------
    analysis : ringdown.Analysis
        Needs ``analysis.recording``. The decay of the first used hit is transformed (the whole
        record when there are no hits); see :func:`display_spectrum`.
    ax : matplotlib.axes.Axes or None

    Returns
    -------
    matplotlib.axes.Axes

    Raises
    ------
    ParameterError
        When the analysis kept no samples.

    Notes
    -----
    Each mode gets one marker at its damped frequency (its own colour and shape) and a legend
    entry ``N: f_d Hz, Q``; its number sits in one row along the top, spread so that labels of
    close modes do not overlap (:func:`spread_labels`), with a thin line down to its marker.
    The frequency axis ends a little above the highest mode, at most at Nyquist.
    """
    x, fs = _samples(analysis)
    ax = _axes_or_new(ax)
    i0, i1 = _decay_segment(analysis, x, fs)
    f, level = display_spectrum(x[i0:i1], fs)
    modes = tuple(getattr(analysis, "modes", ()) or ())
    f_max = _spectrum_top(modes, fs / 2.0)
    keep = f <= f_max
    fd, ld = _thin(f[keep], level[keep], max_points=4000)
    ax.plot(fd, ld, color=STYLE["signal_color"], linewidth=0.7, label="spectrum of the decay")
    floor = max(float(np.percentile(level[keep], 5)) - 10.0, -160.0)
    # headroom above the largest peak (0 dB) for a row of labels: 0 dB sits at 80 % of the height
    ax.set_ylim(floor, max(12.0, 0.25 * -floor))
    _draw_mode_markers(ax, modes, f, level, f_max)
    ax.set_xlim(0.0, f_max)
    ax.set_xlabel("frequency, Hz")
    ax.set_ylabel("level, dB re largest peak")
    _style_axes(ax, "Spectrum of the decay")
    _legend(ax)
    return ax


def _spectrum_top(modes: tuple, nyq: float) -> float:
    """Top of the spectrum's frequency axis, Hz: a little above the highest mode's band, at most Nyquist."""
    if not modes:
        return nyq
    f_top = max((m.band_hz[1] if m.band_hz else m.f_d_hz) for m in modes)
    return min(nyq, max(1.3 * f_top, f_top + 0.05 * nyq))


def _draw_mode_markers(ax: Axes, modes: tuple, f: np.ndarray, level: np.ndarray, f_max: float) -> None:
    """A marker per mode at its damped frequency on the spectrum (``f`` Hz, ``level`` dB), and its
    number in one row along the top, tied to the marker by a thin line."""
    # one row of labels along the top, spread so that no two overlap, each tied to its marker
    label_x = spread_labels(np.array([m.f_d_hz / f_max for m in modes]), 0.035) if modes else np.empty(0)
    for i, m in enumerate(modes):
        st = _mode_style(i)
        j = int(np.argmin(np.abs(f - m.f_d_hz)))
        # Read the level near the mode's frequency (the display peak may sit a bin or two off).
        lo, hi = max(j - 3, 0), min(j + 4, f.size)
        y = float(np.max(level[lo:hi]))
        q = getattr(m, "q", None)
        ax.plot(
            [m.f_d_hz],
            [y],
            linestyle="none",
            marker=st["marker"],
            markersize=6.5,
            markerfacecolor=st["color"],
            markeredgecolor=_OI_BLACK,
            markeredgewidth=0.6,
            label=f"mode {m.index}: {_fmt_sig(m.f_d_hz, 5)} Hz, Q {_fmt_sig(q, 3)}",
            gid=f"marker-mode-{m.index}",
        )
        ax.annotate(
            f"{m.index}",
            xy=(m.f_d_hz, y),
            xycoords="data",
            xytext=(float(label_x[i]), 0.955),
            textcoords="axes fraction",
            ha="center",
            va="top",
            fontsize=STYLE["font_size"],
            fontweight="bold",
            color=_OI_BLACK,
            gid=f"label-mode-{m.index}",
            arrowprops={
                "arrowstyle": "-",
                "color": STYLE["muted_color"],
                "linewidth": 0.6,
                "shrinkA": 1.0,
                "shrinkB": 4.0,
            },
        )


def plot_overview(analysis: Analysis) -> Figure:
    """The recording above its spectrum, on one new Figure.

    Parameters
    ----------
    analysis : ringdown.Analysis

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    ParameterError
        When the analysis kept no samples.
    """
    _samples(analysis)  # fail before making a figure
    fig, (a1, a2) = _new_figure(6.4, nrows=2, height_ratios=[1.1, 1.0])
    plot_recording(analysis, ax=a1)
    plot_spectrum(analysis, ax=a2)
    return fig


# --------------------------------------------------------------------------------------------
# one mode
# --------------------------------------------------------------------------------------------


def _trace(mode):
    tr = getattr(mode, "trace", None)
    if tr is None:
        raise ParameterError(
            f"mode {getattr(mode, 'index', '?')} has no trace (Mode.trace is None): "
            "the decay plot needs the envelope kept by the analysis"
        )
    return tr


def _fit_db(tr, t: np.ndarray) -> np.ndarray:
    """The fitted envelope in dB re 1 unit: 20 log10(A) - 8.686 beta (t - t0)."""
    return 20.0 * math.log10(max(tr.fit_amplitude, 1e-300)) - DB_PER_NEPER * tr.fit_beta_per_s * (t - tr.fit_t0_s)


def _ref_db(tr) -> float:
    """Reference level of the decay plots: the fitted envelope at the window start, dB re 1 unit."""
    return float(_fit_db(tr, np.array([tr.fit_start_s]))[0])


def _decay_xlim(tr) -> tuple[float, float]:
    """Time range of the decay plots: the trace start to a little past the window.

    The view ends where the fitted line has fallen 15 dB below the noise floor, or one half
    window past the window end, whichever is later (at most at the end of the trace), so a short
    window is not lost in a long stretch of noise.
    """
    t = np.asarray(tr.t_s, dtype=float)
    if t.size == 0:
        return tr.fit_start_s, tr.fit_end_s
    end = tr.fit_end_s + 0.5 * (tr.fit_end_s - tr.fit_start_s)
    if tr.noise_floor and tr.noise_floor > 0 and tr.fit_beta_per_s > 0 and tr.fit_amplitude > 0:
        # fit reaches noise_floor * 10^(-15/20) at t0 + ln(A / floor) / beta + 15 dB / (8.686 beta)
        t_cross = tr.fit_t0_s + (math.log(tr.fit_amplitude / tr.noise_floor) + 15.0 / DB_PER_NEPER) / tr.fit_beta_per_s
        end = max(end, t_cross)
    lo = float(t[0])
    hi = float(min(t[-1], end))
    return (lo, hi) if hi > lo else (lo, float(t[-1]) if t[-1] > lo else lo + 1.0)


def plot_decay(mode: Mode, *, ax: Axes | None = None) -> Axes:
    """Draw one mode's envelope in dB against time, the fitted decay, its window and the noise floor.

    Parameters
    ----------
    mode : ringdown.Mode
        Needs ``mode.trace`` (:class:`ringdown.analysis.results.ModeTrace`).
    ax : matplotlib.axes.Axes or None

    Returns
    -------
    matplotlib.axes.Axes

    Raises
    ------
    ParameterError
        When the mode has no trace.

    Notes
    -----
    Levels are in dB re the fitted envelope at the start of the fit window (0 dB there), so the
    slope reads directly in dB/s. The fitted line is solid inside the window and dotted outside.
    When several modes were fitted jointly in the band (close modes), the band envelope beats:
    it is drawn against the sum of the fitted modes (``trace.model_envelope``), and the straight
    line is this mode's own decay.
    """
    tr = _trace(mode)
    ax = _axes_or_new(ax)
    t = np.asarray(tr.t_s, dtype=float)
    ref = _ref_db(tr)
    floor_lin = max(float(tr.noise_floor) * 1e-2, 1e-300) if tr.noise_floor and tr.noise_floor > 0 else 1e-12
    env_db = _db(tr.envelope, floor_lin) - ref
    td, ed = _thin(t, env_db)
    model = _model_db(tr)
    ax.axvspan(
        tr.fit_start_s,
        tr.fit_end_s,
        facecolor=STYLE["window_color"],
        alpha=0.18,
        edgecolor=_OI_BLUE,
        linewidth=0.8,
        hatch="//",
        label="fit window",
    )
    ax.plot(td, ed, color=STYLE["signal_color"], linewidth=0.8, label="envelope", zorder=3)
    _draw_fits(ax, tr, t, ref, model)
    have_noise = tr.noise_floor is not None and tr.noise_floor > 0
    if have_noise:
        nf = 20.0 * math.log10(tr.noise_floor) - ref
        ax.axhline(nf, color=STYLE["noise_color"], linewidth=1.0, linestyle=(0, (6, 2, 1, 2)), label="noise floor")
    top = max(float(np.max(env_db)) if env_db.size else 0.0, 0.0) + 6.0
    low = (nf - 15.0) if have_noise else (float(np.min(env_db)) - 5.0 if env_db.size else -60.0)
    ax.set_ylim(max(low, top - 200.0), top)
    ax.set_xlim(*_decay_xlim(tr))
    ax.set_xlabel("time, s")
    ax.set_ylabel("envelope, dB re fit at window start")
    f = getattr(mode, "f_d_hz", None)
    _style_axes(ax, f"Mode {getattr(mode, 'index', '?')} decay" + (f" at {_fmt_sig(f, 6)} Hz" if f else ""))
    _legend(ax)
    return ax


def _draw_fits(ax: Axes, tr, t: np.ndarray, ref: float, model: np.ndarray | None) -> None:
    """The fitted decay (solid in the window, dotted over the trace's times ``t``) and, for modes
    fitted jointly, the sum of the band's modes; levels in dB less ``ref``."""
    inside = np.array([tr.fit_start_s, tr.fit_end_s])
    ax.plot(
        inside,
        _fit_db(tr, inside) - ref,
        color=STYLE["fit_color"],
        linewidth=2.4,
        linestyle="-",
        zorder=2,
        alpha=0.85,
        label=(
            f"{'this mode alone' if model is not None else 'fit'}: β = {_fmt_sig(tr.fit_beta_per_s)} 1/s"
            f"\n({_fmt_sig(DB_PER_NEPER * tr.fit_beta_per_s)} dB/s)"
        ),
    )
    if t.size:
        span = np.array([t[0], t[-1]])
        ax.plot(
            span,
            _fit_db(tr, span) - ref,
            color=STYLE["fit_color"],
            linewidth=0.8,
            linestyle=(0, (1, 2)),
            label="fit, extended",
        )
    if model is not None:
        ok = np.isfinite(model) & (t <= tr.fit_end_s)
        tm, md = _thin(t[ok], model[ok] - ref)
        ax.plot(
            tm,
            md,
            color=_OI_GREEN,
            linewidth=1.3,
            linestyle=(0, (4, 1.5)),
            zorder=4,
            label=f"sum of the {tr.n_model_modes} modes\nfitted in this band",
        )


def _model_db(tr) -> np.ndarray | None:
    """The joint model of a multi-mode band in dB re 1 unit (NaN where undefined), or None."""
    model = getattr(tr, "model_envelope", None)
    if model is None or getattr(tr, "n_model_modes", 1) < 2:
        return None
    m = np.asarray(model, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(m > 0, 20.0 * np.log10(np.where(m > 0, m, 1.0)), np.nan)


def _plot_residuals(mode, ax) -> None:
    tr = _trace(mode)
    t = np.asarray(tr.t_s, dtype=float)
    sel = (t >= tr.fit_start_s) & (t <= tr.fit_end_s)
    env = np.asarray(tr.envelope, dtype=float)[sel]
    ts = t[sel]
    model = _model_db(tr)
    ref = _fit_db(tr, ts) if model is None else model[sel]  # against the sum of the jointly fitted modes
    ok = (env > 0) & np.isfinite(ref)
    ts = ts[ok]
    res = 20.0 * np.log10(env[ok]) - ref[ok]
    td, rd = _thin(ts, res)
    ax.axhline(0.0, color=STYLE["fit_color"] if model is None else _OI_GREEN, linewidth=1.0)
    ax.plot(td, rd, color=STYLE["signal_color"], linewidth=0.7, marker=".", markersize=2, label="residual")
    lim = max(float(np.max(np.abs(res))) if res.size else 1.0, 0.5) * 1.15
    ax.set_ylim(-lim, lim)
    ax.set_xlim(*_decay_xlim(tr))
    ax.set_xlabel("time, s")
    ax.set_ylabel("residual, dB")
    _style_axes(
        ax,
        "Fit residual inside the window"
        if model is None
        else f"Residual inside the window, against the sum of the {tr.n_model_modes} fitted modes",
    )


def _plot_peaks(mode, ax) -> None:
    tr = _trace(mode)
    pt = np.asarray(tr.peaks_t_s, dtype=float)
    pv = np.asarray(tr.peaks_value, dtype=float)
    ok = pv > 0
    pt, pv = pt[ok], pv[ok]
    f_d = getattr(mode, "f_d_hz", None)
    cycles = (pt - pt[0]) * f_d if f_d else np.arange(pt.size, dtype=float)
    lnp = np.log(pv)
    ax.plot(
        cycles,
        lnp,
        linestyle="none",
        marker="o",
        markersize=3.5,
        markerfacecolor="none",
        markeredgecolor=_OI_BLUE,
        label="peaks",
    )
    if pt.size >= 2:
        slope, icpt = np.polyfit(cycles, lnp, 1)
        xx = np.array([cycles[0], cycles[-1]])
        ax.plot(
            xx,
            icpt + slope * xx,
            color=STYLE["fit_color"],
            linewidth=1.4,
            linestyle=(0, (5, 2)),
            label=f"regression:\nδ = {_fmt_sig(-slope, 4)} Np/cycle",
        )
    ax.set_xlabel("cycles after the first peak")
    ax.set_ylabel("ln(peak), Np re 1 unit")
    n_joint = getattr(tr, "n_model_modes", 1) if getattr(tr, "model_envelope", None) is not None else 1
    _style_axes(
        ax, "Log decrement: peak heights" + (f" (the band holds {n_joint} modes: they beat)" if n_joint > 1 else "")
    )
    _legend(ax)


def plot_mode(mode: Mode) -> Figure:
    """One mode on one new Figure: decay, residual, and (when present) the log-decrement peaks.

    Parameters
    ----------
    mode : ringdown.Mode
        Needs ``mode.trace``; the peaks panel is drawn only when ``trace.peaks_t_s`` holds at
        least two peaks (no empty panel).

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    ParameterError
        When the mode has no trace.
    """
    tr = _trace(mode)
    have_peaks = tr.peaks_t_s is not None and tr.peaks_value is not None and np.size(tr.peaks_t_s) >= 2
    if have_peaks:
        fig, (a1, a2, a3) = _new_figure(7.0, nrows=3, height_ratios=[2.2, 1.0, 1.6])
    else:
        fig, (a1, a2) = _new_figure(4.8, nrows=2, height_ratios=[2.2, 1.0])
    plot_decay(mode, ax=a1)
    _plot_residuals(mode, a2)
    if have_peaks:
        _plot_peaks(mode, a3)
    return fig


def plot_damping_vs_amplitude(mode: Mode, *, ax: Axes | None = None) -> Axes:
    """Draw decay rate (left axis) and damped frequency (right axis) against amplitude.

    Parameters
    ----------
    mode : ringdown.Mode
        Needs ``mode.damping_vs_amplitude``: rows ``{amplitude, f_d_hz, beta_per_s}``.
    ax : matplotlib.axes.Axes or None

    Returns
    -------
    matplotlib.axes.Axes
        The decay-rate Axes (the frequency Axes is its twin).

    Raises
    ------
    ParameterError
        When the mode has no such rows.
    """
    rows = getattr(mode, "damping_vs_amplitude", None)
    if not rows:
        raise ParameterError(
            f"mode {getattr(mode, 'index', '?')} has no damping-against-amplitude rows; "
            "they exist only for decays that are not exponential"
        )
    try:
        amp = np.array([float(r["amplitude"]) for r in rows])
        beta = np.array([float(r["beta_per_s"]) for r in rows])
        fd = np.array([float(r["f_d_hz"]) for r in rows])
    except (KeyError, TypeError, ValueError) as exc:
        raise ParameterError(
            f"damping_vs_amplitude rows of mode {getattr(mode, 'index', '?')} need numeric "
            f"amplitude, f_d_hz, beta_per_s; got {rows[0]!r}"
        ) from exc
    order = np.argsort(amp)
    amp, beta, fd = amp[order], beta[order], fd[order]
    ax = _axes_or_new(ax)
    ax.plot(amp, beta, color=_OI_BLUE, marker="o", markersize=4.5, linestyle="-", linewidth=1.2, label="decay rate")
    ax.set_xlabel("amplitude, recording units")
    ax.set_ylabel("decay rate β, 1/s", color=_OI_BLUE)
    if np.all(amp > 0) and amp.max() / amp.min() > 20:
        from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

        ax.set_xscale("log")
        # labels at 1-2-5 steps in plain numbers: default minor labels crowd a short log axis
        ax.xaxis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 5.0)))
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
        ax.xaxis.set_minor_formatter(NullFormatter())
    tw = ax.twinx()
    tw.plot(
        amp,
        fd,
        color=_OI_VERMILLION,
        marker="s",
        markersize=4.5,
        linestyle=(0, (5, 2)),
        linewidth=1.2,
        label="damped frequency",
    )
    tw.set_ylabel("damped frequency, Hz", color=_OI_VERMILLION)
    tw.tick_params(labelsize=STYLE["font_size"])
    tw.yaxis.label.set_fontsize(STYLE["font_size"])
    tw.ticklabel_format(axis="y", useOffset=False)
    for side in ("top",):
        tw.spines[side].set_visible(False)
    _style_axes(ax, f"Mode {getattr(mode, 'index', '?')}: damping against amplitude")
    ax.spines["right"].set_visible(False)
    h1, l1 = ax.get_legend_handles_labels()
    h2, l2 = tw.get_legend_handles_labels()
    _legend(ax, h1 + h2, l1 + l2, below=True)
    return ax
