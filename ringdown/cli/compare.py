"""``ringdown compare``: each mode's frequency and damping before and after a treatment.

Inputs: ``--before`` and ``--after`` are repeatable, one value each
(``--before b1.wav --before b2.wav --after a1.wav``); each value may also be a folder (its
recordings, sorted) or a quoted glob pattern (``--before 'bare_*.wav'``). Several paths after a
single ``--before`` are not accepted: click options take one value each, and an unquoted
pattern that the shell expands would otherwise leave stray arguments whose side is unknown; such
stray arguments are refused with a one-line hint.

Exit status: 0 when done, 2 when any input file could not be analysed (the rest are still
compared and reported) or when the comparison itself cannot be made.
"""

from __future__ import annotations

import csv
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Optional, cast

import typer

from ..base.numfmt import fmt_pm
from ._common import (
    EXIT_EPILOG,
    EXIT_ERROR,
    EXIT_OK,
    error_line,
    expand_inputs,
    guarded,
    print_json,
    time_window,
    usage_error,
)
from ._options import (
    Band,
    Channel,
    Column,
    Debug,
    End,
    Json,
    Method,
    MinHitSnrDb,
    Notes,
    Report,
    SampleRate,
    Serial,
    Start,
    Title,
    reader_options,
    report_header,
)

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from ..treatment.results import Comparison

__all__ = ["register", "format_table"]


def _pm(v, u, digits: int = 4) -> str:
    return fmt_pm(v, u, digits=digits, missing="-")


def format_table(comparison: Comparison) -> str:
    """The readable summary ``ringdown compare`` prints by default."""
    s = comparison.settings
    conf = 100.0 * s["confidence"]
    lines = [
        f"repeats: before {comparison.n_repeats_before}, after {comparison.n_repeats_after}; "
        f"modes paired within ±{100 * s['tolerance']:g} %; damping tested on ln(zeta), "
        f"{conf:g} % intervals",
        "",
    ]
    head = (
        "mode",
        "f_d before Hz",
        "f_d after Hz",
        f"shift % [{conf:g} %]",
        "zeta before",
        "zeta after",
        f"zeta after/before [{conf:g} %]",
        "test",
        "p",
        "verdict",
    )
    from ..render.report_compare import comparison_cells

    rows = [(*comparison_cells(m, times="x", digits=4, missing="-"), m.damping.verdict) for m in comparison.modes]
    widths = [max(len(r[k]) for r in [head, *rows]) for k in range(len(head))]
    fmt = lambda r: "  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip()  # noqa: E731
    lines.append(fmt(head))
    lines.extend(fmt(r) for r in rows)
    if not rows:
        lines.append("(no mode found on both sides)")
    for label, ms in (("before only", comparison.unmatched_before), ("after only", comparison.unmatched_after)):
        for cm in ms:
            lines.append(
                f"unmatched, {label}: {_pm(cm.f_d_hz, cm.f_d_hz_u)} Hz, "
                f"zeta {_pm(cm.zeta, cm.zeta_u)} ({cm.n_repeats} repeats)"
            )
    notes = [f"mode {m.index}: {w.code}: {w.message}" for m in comparison.modes for w in m.warnings]
    notes += [f"{n.code}: {n.message}" for n in comparison.notices]
    if notes:
        lines.append("")
        lines.append("notes:")
        lines.extend(f"  {n}" for n in notes)
    return "\n".join(lines)


def _write_csv(comparison, out: Path) -> None:
    from ..io.outputs import atomic_write, csv_row
    from ..treatment.compare import comparison_rows

    rows = comparison_rows(comparison)
    if not rows:
        return
    with atomic_write(out, newline="", what="CSV file") as fh:
        w = csv.writer(fh)
        w.writerow(list(rows[0].keys()))
        for r in rows:
            w.writerow(csv_row(r.values()))


def _write_plot(comparison, out_dir: Path) -> Path:
    from ..io.outputs import atomic_write, check_writable
    from ..render.compare_plot import plot_comparison
    from ..render.plots import figure_bytes

    check_writable(out_dir, "plot", folder=True)
    path = out_dir / "comparison.png"
    data = figure_bytes(cast("Figure", plot_comparison(comparison).figure), fmt="png")
    with atomic_write(path, "wb", what="plot") as fh:  # renamed into place: never half a figure
        fh.write(data)
    return path


def _write_report(comparison, out: Path, header: dict) -> None:
    from ..io.outputs import atomic_write
    from ..render.report_compare import render_comparison_report

    text = render_comparison_report(comparison, **header)
    with atomic_write(out, what="report") as fh:  # renamed into place: never half a report
        fh.write(text)


Before = Annotated[
    list[str],
    typer.Option(
        "--before",
        "-b",
        metavar="FILE",
        help="Recording(s) before the treatment (repeatable; file, folder or quoted pattern).",
    ),
]
After = Annotated[
    list[str],
    typer.Option(
        "--after",
        "-a",
        metavar="FILE",
        help="Recording(s) after the treatment (repeatable; file, folder or quoted pattern).",
    ),
]
CsvOut = Annotated[Optional[Path], typer.Option("--csv", help="Also write one row per mode to this CSV file.")]
PlotDir = Annotated[Optional[Path], typer.Option("--plot", help="Also write comparison.png into this folder.")]
Confidence = Annotated[
    float, typer.Option("--confidence", help="Two-sided confidence level of intervals and verdicts.")
]
Tolerance = Annotated[
    float, typer.Option("--tolerance", help="Relative frequency tolerance for pairing modes (0.1 = 10 %).")
]
KeepDoubleHits = Annotated[bool, typer.Option("--keep-double-hits", help="Count bounced hits as repeats too.")]

HELP = (
    "Compare each mode's frequency and damping before and after a treatment. "
    "Repeat --before/--after per file, or give a folder or a quoted pattern. "
    "Every used hit is one repeat; damping is tested on ln(zeta) (Welch t with >= 2 "
    "repeats a side)."
)


def register(app: typer.Typer) -> None:
    """Add the ``compare`` command to ``app``."""
    app.command("compare", context_settings={"allow_extra_args": True}, help=HELP, epilog=EXIT_EPILOG)(compare_cmd)


def compare_cmd(
    ctx: typer.Context,
    before: Before,
    after: After,
    json_out: Json = False,
    csv_out: CsvOut = None,
    plot_dir: PlotDir = None,
    report_out: Report = None,
    confidence: Confidence = 0.95,
    tolerance: Tolerance = 0.1,
    method: Method = "auto",
    channel: Channel = None,
    column: Column = None,
    sample_rate: SampleRate = None,
    band: Band = None,
    min_hit_snr_db: MinHitSnrDb = 20.0,
    keep_double_hits: KeepDoubleHits = False,
    title: Title = None,
    notes: Notes = None,
    serial: Serial = None,
    start: Start = None,
    end: End = None,
    debug: Debug = False,
) -> None:
    if ctx.args:
        usage_error(
            f"unexpected argument '{ctx.args[0]}': give each file its own --before/--after, "
            "a folder, or a quoted pattern (--before 'bare_*.wav')"
        )
    from ..treatment.compare import compare

    b = expand_inputs(before)
    a = expand_inputs(after)

    def run():
        from ._common import uses_stdin
        from .analyze import parse_band

        uses_stdin([*b, *a])  # '-' once at most: standard input holds one recording
        options = dict(
            reader_options(channel, column, sample_rate),
            method=method,
            min_hit_snr_db=min_hit_snr_db,
            keep_double_hits=keep_double_hits,
            **time_window(start, end),
        )
        if band:
            options["bands"] = [parse_band(x) for x in band]
        return compare(b, a, tolerance=tolerance, confidence=confidence, **options)

    comparison = guarded(run, debug=debug)
    if json_out:
        print_json(comparison.to_dict())
    else:
        typer.echo(format_table(comparison))
    _write_outputs(comparison, csv_out, plot_dir, report_out, report_header(title, notes, serial), debug)
    for i in comparison.failed_inputs:
        error_line(f"{i.side}: {i.error.message}")
    raise typer.Exit(EXIT_OK if comparison.ok and not (a.problems or b.problems) else EXIT_ERROR)


def _write_outputs(comparison, csv_out, plot_dir, report_out, header: dict, debug: bool) -> None:
    """The CSV, the figure and the report that were asked for (the first that fails ends the run, exit 2)."""
    if csv_out is not None:
        guarded(lambda: _write_csv(comparison, csv_out), debug=debug)
    if plot_dir is not None:
        guarded(lambda: _write_plot(comparison, plot_dir), debug=debug)
    if report_out is not None:
        guarded(lambda: _write_report(comparison, report_out, header), debug=debug)
