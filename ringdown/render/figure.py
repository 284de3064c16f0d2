"""The house style of ringdown's figures, and what every figure module shares.

Figures are built on :class:`matplotlib.figure.Figure` (no pyplot, no global state); matplotlib is
imported inside the functions so that ``import ringdown`` and ``ringdown --help`` stay fast.

One small style (``STYLE``) is applied to each Axes drawn, never through global ``rcParams``.
Colours come from the Okabe-Ito palette, chosen to stay distinguishable with the common forms of
colour blindness (M. Okabe and K. Ito, "Color Universal Design", 2002; B. Wong, "Points of view:
Color blindness", Nature Methods 8:441, 2011). Colour is never the only cue: each mode also has
its own marker and line style, so the figures read in greyscale print. Labels are laid out with
matplotlib's constrained layout so they do not overlap. :func:`figure_bytes` renders a Figure
without the software and date metadata, so the same figure gives the same bytes.
"""

from __future__ import annotations

import io
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from matplotlib.figure import Figure

from ..base.errors import ParameterError

__all__ = ["FIGURE_FORMATS", "STYLE", "figure_bytes"]

# Okabe-Ito colours (Wong 2011), yellow left out: it is too pale on white paper.
_OI_BLACK = "#000000"
_OI_ORANGE = "#E69F00"
_OI_SKY = "#56B4E9"
_OI_GREEN = "#009E73"
_OI_BLUE = "#0072B2"
_OI_VERMILLION = "#D55E00"
_OI_PURPLE = "#CC79A7"

#: The one style of every ringdown figure (applied per Axes, never via global rcParams).
STYLE: dict[str, Any] = {
    "font_size": 8.5,
    "title_size": 9.5,
    "figure_width_in": 7.5,
    "dpi": 110,
    "face": "#FFFFFF",
    "panel_face": "#FBFBF8",
    "grid_color": "#D4D4D0",
    "signal_color": "#303030",
    "muted_color": "#8A8A8A",
    "window_color": _OI_SKY,
    "fit_color": _OI_VERMILLION,
    "noise_color": "#6E6E6E",
    "clip_color": _OI_VERMILLION,
    # One colour, marker and dash pattern per mode: modes stay apart in greyscale too.
    "mode_colors": (_OI_BLUE, _OI_VERMILLION, _OI_GREEN, _OI_PURPLE, _OI_ORANGE, _OI_SKY, _OI_BLACK),
    "mode_markers": ("o", "s", "^", "D", "v", "P", "X"),
    "mode_dashes": (
        "-",
        (0, (5, 2)),
        (0, (1, 1.2)),
        (0, (6, 2, 1, 2)),
        (0, (3, 1, 1, 1, 1, 1)),
        (0, (8, 3)),
        (0, (2, 2)),
    ),
}

#: Formats figures are written in (the one list the CLI's --plot-format and history --plot use).
FIGURE_FORMATS = ("png", "svg", "pdf")


def _new_figure(height_in: float, *, nrows: int = 1, height_ratios=None):
    """A Figure with constrained layout and its Axes (a list when ``nrows > 1``)."""
    from matplotlib.figure import Figure

    fig = Figure(
        figsize=(STYLE["figure_width_in"], height_in), dpi=STYLE["dpi"], layout="constrained", facecolor=STYLE["face"]
    )
    if nrows == 1:
        return fig, fig.add_subplot(1, 1, 1)
    axes = fig.subplots(nrows, 1, gridspec_kw={"height_ratios": height_ratios} if height_ratios else None)
    return fig, list(axes)


def _axes_or_new(ax, height_in: float = 3.0):
    if ax is not None:
        return ax
    _, ax = _new_figure(height_in)
    return ax


def _style_axes(ax, title: str | None = None) -> None:
    """Apply ``STYLE`` to one Axes (grid, ticks, spines, face)."""
    fs = STYLE["font_size"]
    ax.set_facecolor(STYLE["panel_face"])
    ax.grid(True, color=STYLE["grid_color"], linewidth=0.6, linestyle=(0, (1, 2)))
    ax.set_axisbelow(True)
    ax.tick_params(labelsize=fs, direction="out", length=3, width=0.6)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_linewidth(0.7)
        ax.spines[side].set_color("#555555")
    ax.xaxis.label.set_size(fs)
    ax.yaxis.label.set_size(fs)
    if title is not None:
        ax.set_title(title, loc="left", fontsize=STYLE["title_size"], fontweight="bold")


def _legend(ax, handles=None, labels=None, *, below: bool = False) -> None:
    """A legend outside the plotting area (right of it, or below it), so it never hides data."""
    if handles is None:
        handles, labels = ax.get_legend_handles_labels()
    if not handles:
        return
    if below:
        kw = {"loc": "upper center", "bbox_to_anchor": (0.5, -0.22), "ncols": min(len(handles), 3)}
    else:
        kw = {"loc": "upper left", "bbox_to_anchor": (1.01, 1.0)}
    leg = ax.legend(
        handles,
        labels,
        fontsize=STYLE["font_size"] - 0.5,
        frameon=True,
        framealpha=1.0,
        edgecolor="#BBBBBB",
        borderaxespad=0.0,
        **kw,
    )
    leg.get_frame().set_linewidth(0.6)


def figure_bytes(fig: Figure, *, fmt: str = "png", dpi: float | None = None) -> bytes:
    """Render a Figure to PNG, SVG or PDF bytes, without the software/date metadata.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    fmt : {"png", "svg", "pdf"}
    dpi : float or None
        Raster resolution, dots per inch; ``STYLE["dpi"]`` when None.

    Raises
    ------
    ParameterError
        For a format other than those in :data:`FIGURE_FORMATS`.
    """
    if fmt not in FIGURE_FORMATS:
        raise ParameterError(f"figure format must be one of {', '.join(FIGURE_FORMATS)}; got {fmt!r}")
    buf = io.BytesIO()
    meta = {
        "png": {"Software": None},
        "svg": {"Creator": None, "Date": None, "Format": None, "Type": None},
        "pdf": {"Creator": None, "Producer": None, "CreationDate": None},
    }[fmt]
    fig.savefig(buf, format=fmt, dpi=dpi or STYLE["dpi"], metadata=meta, facecolor=fig.get_facecolor())
    return buf.getvalue()
