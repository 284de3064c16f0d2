"""``ringdown analyze``: measure every mode of one or more recordings."""

from __future__ import annotations

import contextlib
import csv
import sys
from collections.abc import Iterable
from functools import partial
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, NoReturn, Optional

import typer

from ..base.clock import seconds
from ..base.numfmt import fmt_fixed, fmt_pm, fmt_value
from ._common import (
    EXIT_EPILOG,
    EXIT_ERROR,
    EXIT_INTERRUPTED,
    EXIT_OK,
    batch_jobs,
    catching_interrupts,
    check_interrupt,
    check_jobs,
    error_line,
    expand_inputs,
    guarded,
    note_line,
    on_terminal,
    print_json,
    print_json_line,
    progress_bar,
    resolve_db,
    time_window,
    usage_guarded,
)
from ._options import (
    Band,
    Channel,
    Column,
    Db,
    Debug,
    End,
    Jobs,
    Json,
    Jsonl,
    MaxModes,
    Method,
    MinHitSnrDb,
    MinSnrDb,
    Notes,
    Operator,
    Parquet,
    PartIdRegex,
    Recursive,
    Report,
    SampleRate,
    Scheduler,
    Serial,
    Start,
    Station,
    Title,
    reader_options,
    report_header,
)

if TYPE_CHECKING:
    from ..analysis.results import Analysis

__all__ = ["register", "parse_band", "parse_columns", "format_table", "TABLE_COLUMNS", "DEFAULT_COLUMNS"]


def parse_band(text: str) -> tuple[float, float]:
    """Parse ``"400:500"`` (Hz) into ``(400.0, 500.0)``."""
    from ..base.errors import ParameterError

    parts = text.replace(",", ".").split(":") if text.count(":") == 1 else [text]
    try:
        lo, hi = (float(p) for p in parts)
    except ValueError:
        raise ParameterError(f"--band {text!r} is not LOW:HIGH in Hz (e.g. 400:500)") from None
    return lo, hi


#: Columns of the terminal table: key -> (heading, cell of a mode). ``--columns`` picks and orders them.
TABLE_COLUMNS = {
    "f_d": ("f_d [Hz]", lambda m: fmt_pm(m.f_d_hz, m.f_d_hz_u, digits=7, missing="-")),
    "beta": ("beta [1/s]", lambda m: fmt_pm(m.beta_per_s, m.beta_per_s_u, digits=4, missing="-")),
    "f_n": ("f_n [Hz]", lambda m: fmt_pm(m.f_n_hz, m.f_n_hz_u, digits=7, missing="-")),
    "zeta": ("zeta", lambda m: fmt_pm(m.zeta, m.zeta_u, digits=3, missing="-")),
    "q": ("Q", lambda m: fmt_pm(m.q, m.q_u, digits=4, missing="-")),
    "loss_factor": ("eta", lambda m: fmt_pm(m.loss_factor, m.loss_factor_u, digits=3, missing="-")),
    "log_decrement": ("delta", lambda m: fmt_pm(m.log_decrement, m.log_decrement_u, digits=3, missing="-")),
    "f_r": ("f_r [Hz]", lambda m: fmt_pm(m.f_r_hz, m.f_r_hz_u, digits=7, missing="-")),
    "decay": ("dB/s", lambda m: fmt_pm(m.decay_db_per_s, m.decay_db_per_s_u, digits=4, missing="-")),
    "t60": ("T60 [s]", lambda m: fmt_pm(m.t60_s, m.t60_s_u, digits=3, missing="-")),
    "snr": ("SNR dB", lambda m: fmt_fixed(m.snr_db, 1, missing="-")),
    "method": ("method", lambda m: m.method + (f" x{m.n_hits}" if m.n_hits > 1 else "")),
    "warnings": ("warnings", lambda m: ",".join(m.warning_codes) or "-"),
}
#: What the table shows without ``--columns``.
DEFAULT_COLUMNS = (
    "f_d",
    "beta",
    "f_n",
    "zeta",
    "q",
    "loss_factor",
    "log_decrement",
    "f_r",
    "t60",
    "snr",
    "method",
    "warnings",
)


def parse_columns(text: str | None) -> tuple[str, ...]:
    """``"f_d,zeta,q"`` -> the column keys, checked; None -> :data:`DEFAULT_COLUMNS`."""
    from ..base.errors import ParameterError

    if text is None:
        return DEFAULT_COLUMNS
    keys = tuple(k.strip() for k in text.split(",") if k.strip())
    bad = [k for k in keys if k not in TABLE_COLUMNS]
    if bad or not keys:
        raise ParameterError(
            f"--columns {text!r}: unknown column(s) {', '.join(map(repr, bad)) or '(none given)'}; "
            f"choose from {','.join(TABLE_COLUMNS)}"
        )
    return keys


def format_table(analysis: Analysis, columns: tuple[str, ...] = DEFAULT_COLUMNS) -> str:
    """A readable text table of one analysis (what ``analyze`` prints without ``--json``).

    A recording that could not be analysed gives an empty string: its error goes to stderr only.
    Numbers are written by :func:`ringdown.base.numfmt.fmt_pm`: ``611.999885(83)`` is
    611.999885 ± 0.000083.
    """
    from ..io.outputs import shown

    if analysis.error is not None:
        return ""
    lines = []
    head = "- (standard input)" if analysis.path == "-" else shown(analysis.path or "<array>")
    used = sum(1 for h in analysis.hits if h.used)
    unit = f" [{analysis.unit}]" if analysis.unit else ""
    head += (
        f"  ({fmt_value(analysis.sample_rate_hz, 7)} Hz, {fmt_value(analysis.duration_s, 3)} s, "
        f"channel {analysis.channel}{unit}, {len(analysis.hits)} hit(s), {used} used)"
    )
    lines.append(head)
    cols = ("#", *(TABLE_COLUMNS[k][0] for k in columns))
    rows = [(str(m.index), *(TABLE_COLUMNS[k][1](m) for k in columns)) for m in analysis.modes]
    widths = [max(len(c), *(len(r[i]) for r in rows)) if rows else len(c) for i, c in enumerate(cols)]
    lines.append("  " + "  ".join(c.rjust(w) for c, w in zip(cols, widths)).rstrip())
    for r in rows:
        lines.append("  " + "  ".join(v.rjust(w) for v, w in zip(r, widths)).rstrip())
    for w in analysis.warnings:
        if w.code != "candidate_rejected":  # listed below, one line each
            lines.append(f"  warning [{w.code}]: {w.message}")
    for m in analysis.modes:
        for w in m.warnings:
            lines.append(f"  mode {m.index} [{w.code}]: {w.message}")
    rejected = getattr(analysis, "rejected", ())
    if rejected:
        lines.append(f"  {len(rejected)} candidate(s) not reported as modes:")
        for r in rejected:
            beta = "" if r.beta_per_s is None else f", beta {r.beta_per_s:.4g} 1/s"
            lines.append(f"    hit {r.hit}: {r.f_hz:.2f} Hz{beta}: {r.reason} ({r.detail})")
    for h in analysis.hits:
        if h.start_kind != "impulse":
            before = "the drive before it is not a mode" if h.start_kind == "switch-off" else "a held deflection let go"
            lines.append(f"  hit at {fmt_value(h.start_s, 6)} s: free decay from a {h.start_kind} ({before})")
    lines.append("  (v(u): u is the standard uncertainty, k = 1, in units of the last digit; Q = 1/(2 zeta))")
    return "\n".join(lines) + "\n"


def write_csv(analyses: Iterable[Analysis], path: str) -> None:
    """One row per mode of every analysed file (files that failed get one row with the error).

    Written to a temporary file and renamed into place; text cells are neutralised
    (:func:`ringdown.io.outputs.csv_cell`)."""
    from ..analysis.results import mode_keys
    from ..io.outputs import atomic_write, csv_row

    keys = [k for k in mode_keys() if k not in ("warnings", "cross_checks", "damping_vs_amplitude", "band_hz")]
    with atomic_write(path, newline="", what="CSV") as fh:
        w = csv.writer(fh)
        w.writerow(["path", "sha256", "channel", *keys, "warnings", "error"])
        for a in analyses:
            if a.error is not None:
                w.writerow(csv_row([a.path, a.sha256, a.channel, *([None] * len(keys)), None, a.error.message]))
                continue
            for m in a.modes:
                d = m.to_dict()
                w.writerow(
                    csv_row([a.path, a.sha256, a.channel, *[d[k] for k in keys], ";".join(m.warning_codes), None])
                )


Files = Annotated[
    list[str],
    typer.Argument(
        metavar="FILE",
        help="Recordings (WAV/FLAC/OGG/CSV, TDMS, UFF 58, MAT, HDF5), folders "
        "or glob patterns; '-' reads one recording from standard input.",
    ),
]
CsvOut = Annotated[Optional[Path], typer.Option("--csv", help="Also write one CSV row per mode to this file.")]
Columns = Annotated[
    Optional[str],
    typer.Option("--columns", help="Table columns, comma-separated, from " + ",".join(TABLE_COLUMNS) + "."),
]
KeepDoubleHits = Annotated[bool, typer.Option("--keep-double-hits", help="Combine hits flagged as hammer bounces too.")]
PlotDir = Annotated[Optional[Path], typer.Option("--plot", help="Write figures for each file into this folder.")]
PlotFormat = Annotated[str, typer.Option("--plot-format", help="Figure format: png, svg or pdf.")]
Store = Annotated[bool, typer.Option("--store", help="Also store every result in the results history (SQLite).")]


def register(app: typer.Typer) -> None:
    """Add the ``analyze`` command to ``app``."""
    app.command("analyze", epilog=EXIT_EPILOG)(analyze_cmd)


def analyze_cmd(
    files: Files,
    json_out: Json = False,
    jsonl: Jsonl = False,
    csv_out: CsvOut = None,
    channel: Channel = None,
    column: Column = None,
    sample_rate: SampleRate = None,
    columns: Columns = None,
    method: Method = "auto",
    band: Band = None,
    max_modes: MaxModes = None,
    min_snr_db: MinSnrDb = 10.0,
    min_hit_snr_db: MinHitSnrDb = 20.0,
    keep_double_hits: KeepDoubleHits = False,
    start: Start = None,
    end: End = None,
    jobs: Jobs = None,
    plot: PlotDir = None,
    plot_format: PlotFormat = "png",
    report: Report = None,
    title: Title = None,
    notes: Notes = None,
    serial: Serial = None,
    store: Store = False,
    db: Db = None,
    part_id: PartIdRegex = None,
    station: Station = None,
    operator: Operator = None,
    recursive: Recursive = False,
    scheduler: Scheduler = None,
    parquet_out: Parquet = None,
    debug: Debug = False,
) -> None:
    """Measure every mode of each recording: f_d, beta, f_n, zeta, Q, loss factor, dB/s, T60."""
    started = seconds()

    def parse() -> tuple[dict, tuple[str, ...]]:
        _check_streams(json_out, jsonl)
        given = dict(reader_options(channel, column, sample_rate), method=method, bands=band, max_modes=max_modes)
        given.update(min_snr_db=min_snr_db, min_hit_snr_db=min_hit_snr_db, keep_double_hits=keep_double_hits)
        opts = _checked_options(plot, plot_format, part_id, jobs, given, time_window(start, end))
        return opts, parse_columns(columns)

    options, cols = usage_guarded(parse, debug=debug)  # every option is checked before any file is read
    db_path = resolve_db(db) if store else None
    paths = expand_inputs(files, recursive=recursive, exclude=[csv_out, report, db_path])
    if not paths:
        error_line(f"no recordings to analyse in {', '.join(files)}")
        raise typer.Exit(EXIT_ERROR)
    # '-' is read in this process: worker processes do not share standard input
    n_jobs = usage_guarded(lambda: batch_jobs(jobs, paths), debug=debug)
    history = guarded(lambda: _prepare_outputs(csv_out, report, plot, db_path), debug=debug)
    storer = _Storer(history, part_id, station, operator)
    sink = _Sink(parquet_out, part_id, station, operator, debug)
    show = on_terminal(json_out or jsonl)
    try:
        results, interrupted = _run(
            paths, options, n_jobs, storer, sink, scheduler, debug, partial(_arrived, json_out, jsonl, cols), show
        )
    finally:
        storer.close()
    analyses = [a for a in results if a is not None]
    if debug and not interrupted:
        _raise_first_error(analyses, options)
    if json_out:
        from ..analysis.results import results_document

        print_json(results_document(analyses))
    header = report_header(title, notes, serial, station=station, operator=operator)
    failed_outputs = _write_outputs(analyses, csv_out, plot, plot_format, report, options, debug, header)
    storer.report()
    _exit(analyses, paths, interrupted, failed_outputs or storer.failed, history is not None, json_out, jsonl, started)


def _count(n: int, noun: str) -> str:
    """``n`` and the noun, plural unless ``n`` is 1 ("1 mode", "0 errors", "3 modes")."""
    return f"{n} {noun}" + ("" if n == 1 else "s")


def _exit(analyses, paths, interrupted, failed_outputs, stored, json_out, jsonl, started) -> NoReturn:
    """The last line (interrupted, or the batch's counts) and the exit status of ``analyze``."""
    if interrupted:
        error_line(
            f"interrupted: {len(analyses)} of {len(paths)} done" + (" (stored)" if stored else "") + ", rerun to resume"
        )
        raise typer.Exit(EXIT_INTERRUPTED)
    errors = sum(1 for a in analyses if a.error is not None)
    if len(analyses) > 1 and not json_out:
        typer.echo(
            f"{len(analyses)} files: {len(analyses) - errors} analysed, {_count(errors, 'error')}, "
            f"{_count(sum(len(a.modes) for a in analyses), 'mode')} in {seconds() - started:.1f} s",
            err=jsonl,
        )
    bad = errors or failed_outputs or paths.problems
    raise typer.Exit(EXIT_ERROR if bad else EXIT_OK)


def _check_streams(json_out: bool, jsonl: bool) -> None:
    """``--json`` and ``--jsonl`` together are a ParameterError."""
    from ..base.errors import ParameterError

    if json_out and jsonl:
        raise ParameterError(
            "--json and --jsonl are exclusive: --json prints one document at the end, "
            "--jsonl one line per file as it is ready; choose one"
        )


def _checked_options(plot, plot_format, part_id, jobs, given: dict, window: dict) -> dict:
    """The analysis keyword arguments, after every check that needs no file (each a ParameterError).

    ``given`` holds the analysis options as given (``bands`` as the ``--band`` texts), ``window``
    the time window (``start_s``/``end_s``, only those given)."""
    from ..analysis.pipeline import AnalysisOptions
    from .render import check_plot_format

    bands = [parse_band(b) for b in given["bands"]] if given["bands"] else None
    opts = {**given, "bands": bands, **window}
    AnalysisOptions(  # raises for a bad value
        method=opts["method"],
        bands=None if bands is None else tuple(bands),
        max_modes=opts["max_modes"],
        min_snr_db=opts["min_snr_db"],
        min_hit_snr_db=opts["min_hit_snr_db"],
        **window,
    )
    check_jobs(jobs)
    if plot is not None:
        check_plot_format(plot_format)
    if part_id:  # a bad --part-id regex is a usage error (the history module is imported only for one)
        from ..inspection.store import part_id_from_path

        part_id_from_path("x", part_id)
    return opts


def _arrived(json_out: bool, jsonl: bool, cols: tuple[str, ...], a) -> None:
    """Each result as it is ready: its error on stderr, its line or table on stdout."""
    if a.error is not None:
        error_line(f"{a.path}: {a.error.message}" if a.path and a.path not in a.error.message else a.error.message)
    if jsonl:
        print_json_line(a.to_dict())
    elif not json_out:
        sys.stdout.write(format_table(a, cols))
        sys.stdout.flush()


def _run(paths, options, n_jobs, storer, sink, scheduler, debug, arrived, show_progress) -> tuple[list, bool]:
    """Analyse every file; each result is stored, added to the dataset and shown as it arrives.

    Returns the results in input order (None for a file not done) and whether Ctrl-C stopped it."""
    from ..analysis.engine import is_long_sound_file
    from ..analysis.pipeline import iter_analyze_files

    results: list = [None] * len(paths)
    bar, task = progress_bar(show_progress and len(paths) > 1, len(paths), "analysing")
    cluster: contextlib.AbstractContextManager = contextlib.nullcontext(None)
    if scheduler is not None:  # the cluster module only when asked for (start-up time)
        from ..base.cluster import connect

        cluster = guarded(lambda: connect(scheduler), debug=debug)
    opened = guarded(sink.open, debug=debug)
    try:
        with catching_interrupts(), cluster as client, opened, bar:
            if client is None and len(paths) == 1 and is_long_sound_file(paths[0]):
                # one long recording: the block engine in this process, with its progress by time
                found = _iter_long_file(paths[0], options, show_progress)
            else:
                found = iter_analyze_files(paths, jobs=n_jobs, on_notice=note_line, client=client, **options)
            for i, a in found:
                check_interrupt()  # a result that finished after a Ctrl-C is not taken
                results[i] = a
                storer.add(a)  # durable before anything else is written
                sink.add(a)
                bar.advance(task)
                arrived(a)
            guarded(opened.close, debug=debug)
    except KeyboardInterrupt:
        return results, True
    return results, False


def _raise_first_error(analyses, options: dict) -> None:
    """``--debug``: analyse the first file that failed again here, so its traceback shows."""
    from ..analysis.pipeline import analyze_file

    for a in analyses:
        if a.error is not None and a.path != "-":
            analyze_file(a.path, **options)  # raises with the traceback


def _write_outputs(analyses, csv_out, plot, plot_format, report, options, debug, header) -> int:
    """CSV, figures and report; returns the number of outputs that could not be written."""
    failed = 0
    if csv_out is not None:
        failed += _try(lambda: write_csv(analyses, str(csv_out)), debug)
    if plot is not None or report is not None:
        for a in analyses:
            if a.error is None and a.recording is None:
                note_line(f"{a.path}: analysed in segments (a long file), no samples kept: its figures are not drawn")
    return failed + _render(analyses, plot, plot_format, report, options, debug, header)


class _NoDataset:
    """What :meth:`_Sink.open` gives without ``--parquet``: a context with nothing to close."""

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        pass

    def close(self) -> None:
        pass


class _Sink:
    """``--parquet``: each result appended to the dataset as it arrives (an error ends the run, exit 2)."""

    def __init__(self, out, part_id, station, operator, debug) -> None:
        self.out, self.part_id, self.station, self.operator, self.debug = out, part_id, station, operator, debug
        self.sink: Any = None

    def open(self):
        if self.out is None:  # no --parquet: the Parquet and history modules stay unimported (start-up time)
            return _NoDataset()
        from ..inspection.parquet import open_sink

        self.sink = open_sink(self.out)
        return self.sink

    def add(self, a) -> None:
        if self.sink is None:
            return
        from ..inspection.store import part_id_from_path

        pid = part_id_from_path(a.path or "array", self.part_id)
        guarded(
            lambda: self.sink.add_analysis(a, part_id=pid, station=self.station, operator=self.operator),
            debug=self.debug,
        )


def _iter_long_file(path: str, options: dict, show: bool):
    """``(0, Analysis)`` of one long sound file (:func:`ringdown.analysis.engine.iter_long_file`),
    with a progress bar by time position on stderr when ``show``."""
    from ..analysis.engine import iter_long_file

    if not show:
        yield from iter_long_file(path, **options)
        return
    import soundfile as sf
    from rich.console import Console
    from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn

    rate = float(sf.info(path).samplerate)
    columns = (TextColumn("analysing"), BarColumn(), TextColumn("{task.fields[at]}"), TimeRemainingColumn())
    with Progress(*columns, console=Console(stderr=True), transient=True) as prog:
        task_id = prog.add_task("analysing", total=None, at="")

        def advance(done: int, total) -> None:
            if total:
                prog.update(task_id, completed=done, total=total, at=f"{_clock(done / rate)} of {_clock(total / rate)}")

        yield from iter_long_file(path, progress=advance, **options)


def _clock(seconds: float) -> str:
    """``m:ss``, or ``h:mm:ss`` from an hour on."""
    m, s = divmod(int(seconds), 60)
    return f"{m // 60}:{m % 60:02d}:{s:02d}" if m >= 60 else f"{m}:{s:02d}"


def _prepare_outputs(csv_out, report, plot, db_path):
    """Check every output before the analysis starts; open the history. Returns the store or None."""
    from ..io.outputs import check_writable, remove_stale

    if csv_out is not None:
        check_writable(csv_out, "CSV")
    if report is not None:
        check_writable(report, "report")
    if plot is not None:
        check_writable(plot, "plot", folder=True)
    history = None
    if db_path is not None:
        from ..inspection.store import ResultStore

        history = ResultStore(db_path)
    for out in (csv_out, report):
        if out is not None:
            remove_stale(out)  # a killed run must not leave the last run's output looking current
    return history


def _try(fn, debug) -> int:
    """Run one output writer; its error is one line (the other outputs still get written). 1 on error."""
    from ..base.errors import RingdownError

    try:
        fn()
        return 0
    except RingdownError as exc:
        if debug:
            raise
        error_line(str(exc))
        return 1


class _Storer:
    """``--store``: each result in its own transaction as it arrives; one already stored (same
    file SHA-256 and settings) is not stored again."""

    def __init__(self, history, part_id, station, operator) -> None:
        self.history, self.part_id, self.station, self.operator = history, part_id, station, operator
        self.stored = self.skipped = 0
        self.failed = False

    def add(self, a) -> None:
        if self.history is None or self.failed:
            return
        from ..base.errors import StoreError
        from ..inspection.store import part_id_from_path
        from ._common import sigint_deferred

        try:
            with sigint_deferred():
                rid = self.history.record_analysis(
                    a,
                    part_id=part_id_from_path(a.path or "array", self.part_id),
                    station=self.station,
                    operator=self.operator,
                    skip_stored=True,
                )
        except StoreError as exc:
            error_line(f"{exc}; results from here on are not stored")
            self.failed = True
            return
        if rid is None:
            self.skipped += 1
        else:
            self.stored += 1

    def close(self) -> None:
        if self.history is not None:
            self.history.close()

    def report(self) -> None:
        if self.history is not None:
            extra = f" ({self.skipped} already stored, skipped)" if self.skipped else ""
            typer.echo(f"stored {self.stored} result(s) in {self.history.path}{extra}", err=True)


def _render(analyses, plot, plot_format, report, options, debug, header=None) -> int:
    """Figures and report; returns the number of outputs that could not be written."""
    if plot is None and report is None:
        return 0
    from . import render

    bad = 0
    if plot is not None:
        bad += _try(lambda: render.write_plots(analyses, plot, plot_format), debug)
    if report is not None:
        bad += _try(lambda: render.write_report(analyses, report, options, header), debug)
    return bad
