"""Helpers the ``analyze`` command calls for ``--plot DIR``, ``--plot-format`` and ``--report OUT.html``.

No numerics and no matplotlib here: figures come from :mod:`ringdown.render.plots`, HTML from
:mod:`ringdown.render.report`. Both helpers raise only :class:`ringdown.base.errors.RingdownError` subclasses.
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterable
from pathlib import Path
from typing import TYPE_CHECKING, cast

from ..base.errors import ParameterError, RingdownError

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from ..analysis.results import Analysis

__all__ = ["PLOT_FORMATS", "check_plot_format", "write_plots", "write_report"]

#: Formats ``--plot-format`` and ``history --plot`` accept (:data:`ringdown.render.plots.FIGURE_FORMATS`,
#: repeated here so that checking an option does not import the plotting module).
PLOT_FORMATS = ("png", "svg", "pdf")


def check_plot_format(fmt: str, option: str = "--plot-format") -> str:
    """``fmt`` when figures can be written in it, else ParameterError (checked before any analysis)."""
    if fmt not in PLOT_FORMATS:
        raise ParameterError(f"{option} must be one of {', '.join(PLOT_FORMATS)}; got {fmt!r}")
    return fmt


def _safe(name: str, n: int) -> str:
    return (re.sub(r"[^A-Za-z0-9._-]+", "_", name).strip("._-") or f"recording{n}")[:80]


def _stems(analyses) -> list[str]:
    """A safe file-name stem per recording (letters, digits, ``-_.`` only).

    The file's stem; when two inputs share a stem (``tap.wav`` and ``tap.csv``) each gets its
    extension too (``tap_wav``, ``tap_csv``); names still alike (same file name in two folders)
    get ``-2``, ``-3`` ... Standard input is ``stdin``.
    """

    def base(a, n):
        if not a.path:
            return f"array{n}", ""
        if a.path == "-":
            return "stdin", ""
        p = Path(a.path)
        return _safe(p.stem, n), _safe(p.suffix.lstrip("."), n) if p.suffix else ""

    bases = [base(a, n) for n, a in enumerate(analyses, 1)]
    exts: dict[str, set] = {}
    for b, ext in bases:
        exts.setdefault(b, set()).add(ext)
    stems = [f"{b}_{ext}" if len(exts[b]) > 1 and ext else b for b, ext in bases]
    seen: dict[str, int] = {}
    out = []
    for s in stems:
        seen[s] = seen.get(s, 0) + 1
        out.append(s if seen[s] == 1 else f"{s}-{seen[s]}")
    return out


def write_plots(analyses: Iterable[Analysis], out_dir: str | os.PathLike, fmt: str = "png") -> list[str]:
    """Write every figure of every analysed recording into ``out_dir``.

    For each recording ``STEM_overview.FMT`` (recording and spectrum), and per mode
    ``STEM_modeN.FMT`` (decay, residual, peaks) and, where present, ``STEM_modeN_damping.FMT``.
    Recordings with the same stem are told apart by their extension (``tap_wav``, ``tap_csv``),
    else by ``-2``, ``-3`` ... Recordings that failed, or figures whose data were not kept, are skipped.

    Parameters
    ----------
    analyses : sequence of ringdown.Analysis
    out_dir : str or path-like
        Folder, created when missing.
    fmt : {"png", "svg", "pdf"}

    Returns
    -------
    list of str
        Paths written, in order.

    Raises
    ------
    ParameterError
        For an unknown format, or a folder or file that cannot be written.
    """
    check_plot_format(fmt)
    from ..render import plots

    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ParameterError(
            f"cannot create plot folder {str(out)!r}: {exc.strerror or exc}; choose a writable folder"
        ) from exc
    written: list[str] = []
    analyses = list(analyses)
    for a, stem in zip(analyses, _stems(analyses)):
        if a.error is not None:
            continue
        jobs = [(f"{stem}_overview", lambda a=a: plots.plot_overview(a))]
        for m in a.modes:
            if m.trace is not None:
                jobs.append((f"{stem}_mode{m.index}", lambda m=m: plots.plot_mode(m)))
            if m.damping_vs_amplitude:
                jobs.append(
                    (
                        f"{stem}_mode{m.index}_damping",
                        lambda m=m: cast("Figure", plots.plot_damping_vs_amplitude(m).figure),
                    )
                )
        for name, draw in jobs:
            try:
                data = plots.figure_bytes(draw(), fmt=fmt)
            except RingdownError:
                continue  # data not kept for this figure: nothing to draw
            path = out / f"{name}.{fmt}"
            from ..io.outputs import atomic_write

            with atomic_write(path, "wb", what="plot") as fh:  # renamed into place: never half a figure
                fh.write(data)
            written.append(os.fspath(path))
    return written


def write_report(
    analyses: Iterable[Analysis], out_path: str | os.PathLike, settings: dict | None = None, header: dict | None = None
) -> str:
    """Write the self-contained HTML report of ``analyses`` to ``out_path``; return the path.

    ``settings`` are the run's options, shown at the top of the report; ``header`` the title,
    notes and header fields (:func:`ringdown.cli._options.report_header`).

    Raises
    ------
    ParameterError
        When the file cannot be written.
    """
    from ..render import report

    return report.write_report(list(analyses), out_path, settings=settings, **(header or {}))
