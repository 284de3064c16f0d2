"""Helpers the ``analyze`` command calls for ``--plot DIR``, ``--plot-format`` and ``--report OUT.html``.

No numerics and no matplotlib here: figures come from :mod:`ringdown.plots`, HTML from
:mod:`ringdown.report`. Both helpers raise only :class:`ringdown.errors.RingdownError` subclasses.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

from ..errors import ParameterError, RingdownError

__all__ = ["PLOT_FORMATS", "write_plots", "write_report"]

#: Formats ``--plot-format`` accepts.
PLOT_FORMATS = ("png", "svg")


def _stem(analysis, n: int) -> str:
    """A safe file-name stem for one recording's figures (letters, digits, ``-_.`` only)."""
    name = Path(analysis.path).stem if analysis.path else f"array{n}"
    stem = re.sub(r"[^A-Za-z0-9._-]+", "_", name).strip("._") or f"recording{n}"
    return stem[:80]


def write_plots(analyses, out_dir, fmt: str = "png") -> list[str]:
    """Write every figure of every analysed recording into ``out_dir``.

    For each recording ``STEM_overview.FMT`` (recording and spectrum), and per mode
    ``STEM_modeN.FMT`` (decay, residual, peaks) and, where present, ``STEM_modeN_damping.FMT``.
    Recordings with the same stem get ``-2``, ``-3`` ... appended. Recordings that failed, or
    figures whose data were not kept, are skipped.

    Parameters
    ----------
    analyses : sequence of ringdown.Analysis
    out_dir : str or path-like
        Folder, created when missing.
    fmt : {"png", "svg"}

    Returns
    -------
    list of str
        Paths written, in order.

    Raises
    ------
    ParameterError
        For an unknown format, or a folder or file that cannot be written.
    """
    if fmt not in PLOT_FORMATS:
        raise ParameterError(f"--plot-format must be one of {', '.join(PLOT_FORMATS)}; got {fmt!r}")
    from .. import plots

    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ParameterError(f"cannot create plot folder {str(out)!r}: {exc.strerror or exc}; "
                             "choose a writable folder") from exc
    written: list[str] = []
    seen: dict[str, int] = {}
    for n, a in enumerate(analyses, 1):
        if a.error is not None:
            continue
        stem = _stem(a, n)
        seen[stem] = seen.get(stem, 0) + 1
        if seen[stem] > 1:
            stem = f"{stem}-{seen[stem]}"
        jobs = [(f"{stem}_overview", lambda a=a: plots.plot_overview(a))]
        for m in a.modes:
            if m.trace is not None:
                jobs.append((f"{stem}_mode{m.index}", lambda m=m: plots.plot_mode(m)))
            if m.damping_vs_amplitude:
                jobs.append((f"{stem}_mode{m.index}_damping",
                             lambda m=m: plots.plot_damping_vs_amplitude(m).figure))
        for name, draw in jobs:
            try:
                data = plots.figure_bytes(draw(), fmt=fmt)
            except RingdownError:
                continue  # data not kept for this figure: nothing to draw
            path = out / f"{name}.{fmt}"
            from ..outputs import atomic_write

            with atomic_write(path, "wb", what="plot") as fh:  # renamed into place: never half a figure
                fh.write(data)
            written.append(os.fspath(path))
    return written


def write_report(analyses, out_path, settings: dict | None = None) -> str:
    """Write the self-contained HTML report of ``analyses`` to ``out_path``; return the path.

    ``settings`` are the run's options, shown at the top of the report.

    Raises
    ------
    ParameterError
        When the file cannot be written.
    """
    from .. import report

    return report.write_report(list(analyses), out_path, settings=settings)
