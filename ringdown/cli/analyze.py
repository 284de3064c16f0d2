"""``ringdown analyze``: measure every mode of one or more recordings."""

from __future__ import annotations

import contextlib
import csv
import functools
import sys
from pathlib import Path
from typing import Optional

import typer

from ..base.clock import seconds
from ..base.numfmt import fmt_fixed, fmt_pm, fmt_value
from ._common import (
    DEBUG_OPTION,
    EXIT_EPILOG,
    EXIT_ERROR,
    EXIT_INTERRUPTED,
    EXIT_OK,
    RECURSIVE_OPTION,
    catching_interrupts,
    check_interrupt,
    default_jobs,
    error_line,
    expand_inputs,
    guarded,
    note_line,
    on_terminal,
    print_json,
    print_json_line,
    progress_bar,
    time_window,
    usage_guarded,
    uses_stdin,
)
from ._options import (
    Channel,
    Column,
    End,
    Jsonl,
    Notes,
    SampleRate,
    Serial,
    Start,
    Title,
    reader_options,
    report_header,
)

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


def format_table(analysis, columns: tuple[str, ...] = DEFAULT_COLUMNS) -> str:
    """A readable text table of one analysis (what ``analyze`` prints without ``--json``).

    A recording that could not be analysed gives an empty string: its error goes to stderr only.
    Numbers are written by :func:`ringdown.numfmt.fmt_pm`: ``611.999885(83)`` is
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


def write_csv(analyses, path: str) -> None:
    """One row per mode of every analysed file (files that failed get one row with the error).

    Written to a temporary file and renamed into place; text cells are neutralised
    (:func:`ringdown.outputs.csv_cell`)."""
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


def register(app: typer.Typer) -> None:
    @app.command("analyze", epilog=EXIT_EPILOG)
    def analyze_cmd(
        files: list[str] = typer.Argument(
            ...,
            help="Recordings (WAV/FLAC/OGG/CSV, TDMS, UFF 58, MAT, HDF5), folders "
            "or glob patterns; '-' reads one recording from standard input.",
        ),
        json_out: bool = typer.Option(False, "--json", help="Print one JSON document instead of tables."),
        jsonl: Jsonl = False,
        csv_out: Optional[Path] = typer.Option(None, "--csv", help="Also write one CSV row per mode to this file."),
        channel: Channel = None,
        column: Column = None,
        sample_rate: SampleRate = None,
        columns: Optional[str] = typer.Option(
            None, "--columns", help="Table columns, comma-separated, from " + ",".join(TABLE_COLUMNS) + "."
        ),
        method: str = typer.Option(
            "auto", "--method", help="Estimator reported per mode: auto, envelope, decrement, half_power, pencil."
        ),
        band: Optional[list[str]] = typer.Option(
            None, "--band", help="Analyse this band LOW:HIGH in Hz instead of searching (repeatable)."
        ),
        max_modes: Optional[int] = typer.Option(
            None, "--max-modes", help="Keep at most this many modes (the strongest)."
        ),
        min_snr_db: float = typer.Option(
            10.0, "--min-snr-db", help="Fits end where a mode is this far above its band noise, dB."
        ),
        min_hit_snr_db: float = typer.Option(
            20.0, "--min-hit-snr-db", help="A hit must rise this far above the noise floor, dB."
        ),
        keep_double_hits: bool = typer.Option(
            False, "--keep-double-hits", help="Combine hits flagged as hammer bounces too."
        ),
        start: Start = None,
        end: End = None,
        jobs: Optional[int] = typer.Option(
            None, "--jobs", help="Worker processes for a batch (default: the number of cores)."
        ),
        plot: Optional[Path] = typer.Option(None, "--plot", help="Write figures for each file into this folder."),
        plot_format: str = typer.Option("png", "--plot-format", help="Figure format: png or svg."),
        report: Optional[Path] = typer.Option(None, "--report", help="Write one self-contained HTML report."),
        title: Title = None,
        notes: Notes = None,
        serial: Serial = None,
        store: bool = typer.Option(False, "--store", help="Also store every result in the results history (SQLite)."),
        db: Optional[str] = typer.Option(
            None, "--db", help="History database (default $RINGDOWN_DB, else ringdown.sqlite here)."
        ),
        part_id: Optional[str] = typer.Option(
            None, "--part-id", help="Regex taking the part id from the file name (first group)."
        ),
        station: Optional[str] = typer.Option(None, "--station", help="Test station, stored with each result."),
        operator: Optional[str] = typer.Option(None, "--operator", help="Operator, stored with each result."),
        recursive: bool = RECURSIVE_OPTION,
        scheduler: Optional[str] = typer.Option(
            None,
            "--scheduler",
            help="Run on a Dask cluster: scheduler ADDRESS "
            "(tcp://HOST:8786) or local:N worker processes (needs the 'cluster' extra).",
        ),
        parquet_out: Optional[Path] = typer.Option(
            None,
            "--parquet",
            help="Also append one row per mode to this Parquet "
            "dataset folder, as results arrive (needs the 'cluster' extra).",
        ),
        debug: bool = DEBUG_OPTION,
    ) -> None:
        """Measure every mode of each recording: f_d, beta, f_n, zeta, Q, loss factor, dB/s, T60."""
        from ..analysis.engine import is_long_sound_file
        from ..analysis.pipeline import AnalysisOptions, iter_analyze_files

        started = seconds()

        def parse():
            from ..base.errors import ParameterError
            from .render import check_plot_format

            if json_out and jsonl:
                raise ParameterError(
                    "--json and --jsonl are exclusive: --json prints one document at the end, "
                    "--jsonl one line per file as it is ready; choose one"
                )
            bands = [parse_band(b) for b in band] if band else None
            opts = dict(
                reader_options(channel, column, sample_rate),
                method=method,
                bands=bands,
                max_modes=max_modes,
                min_snr_db=min_snr_db,
                min_hit_snr_db=min_hit_snr_db,
                keep_double_hits=keep_double_hits,
                **time_window(start, end),
            )
            AnalysisOptions(
                method=method,
                bands=bands,
                max_modes=max_modes,
                min_snr_db=min_snr_db,
                min_hit_snr_db=min_hit_snr_db,
                **time_window(start, end),
            )
            if jobs is not None and jobs < 1:
                raise ParameterError(f"--jobs must be >= 1; got {jobs}")
            if plot is not None:
                check_plot_format(plot_format)
            if part_id:  # a bad --part-id regex is a usage error (the history is imported only for one)
                from ..inspection.store import part_id_from_path

                part_id_from_path("x", part_id)
            return opts, parse_columns(columns)

        # every option is checked before any file is read
        options, cols = usage_guarded(parse, debug=debug)
        db_path = None
        if store:
            from ._common import resolve_db

            db_path = resolve_db(db)
        paths = expand_inputs(files, recursive=recursive, exclude=[csv_out, report, db_path])
        if not paths:
            error_line(f"no recordings to analyse in {', '.join(files)}")
            raise typer.Exit(EXIT_ERROR)
        # '-' is read in this process: worker processes do not share standard input
        n_jobs = 1 if usage_guarded(lambda: uses_stdin(paths), debug=debug) else (jobs or default_jobs())
        history = guarded(lambda: _prepare_outputs(csv_out, report, plot, db_path), debug=debug)

        def arrived(a) -> None:
            """Each result as it is ready: its error on stderr, its line or table on stdout."""
            if a.error is not None:
                error_line(
                    f"{a.path}: {a.error.message}" if a.path and a.path not in a.error.message else a.error.message
                )
            if jsonl:
                print_json_line(a.to_dict())
            elif not json_out:
                sys.stdout.write(format_table(a, cols))
                sys.stdout.flush()

        results: list = [None] * len(paths)
        interrupted = False
        storer = _Storer(history, part_id, station, operator)
        bar, task = progress_bar(on_terminal(json_out or jsonl) and len(paths) > 1, len(paths), "analysing")
        # the cluster and Parquet modules only when asked for (start-up time)
        cluster: contextlib.AbstractContextManager = contextlib.nullcontext(None)
        if scheduler is not None:
            from ..base.cluster import connect

            cluster = guarded(lambda: connect(scheduler), debug=debug)
        sink = None
        if parquet_out is not None:
            from ..inspection.parquet import open_sink
            from ..inspection.store import part_id_from_path

            sink = guarded(lambda: open_sink(parquet_out), debug=debug)

        def to_sink(a) -> None:
            if sink is not None:
                sink.add_analysis(
                    a, part_id=part_id_from_path(a.path or "array", part_id), station=station, operator=operator
                )

        try:
            with catching_interrupts(), cluster as client, sink or contextlib.nullcontext(), bar:
                if client is None and len(paths) == 1 and is_long_sound_file(paths[0]):
                    # one long recording: the block engine in this process, with its progress by time
                    found = _iter_long_file(paths[0], options, on_terminal(json_out or jsonl))
                else:
                    found = iter_analyze_files(paths, jobs=n_jobs, on_notice=note_line, client=client, **options)
                for i, a in found:
                    check_interrupt()  # a result that finished after a Ctrl-C is not taken
                    results[i] = a
                    storer.add(a)  # durable before anything else is written
                    if sink is not None:
                        guarded(functools.partial(to_sink, a), debug=debug)
                    bar.advance(task)
                    arrived(a)
                if sink is not None:
                    guarded(sink.close, debug=debug)
        except KeyboardInterrupt:
            interrupted = True
        finally:
            storer.close()
        analyses = [a for a in results if a is not None]

        if debug and not interrupted:
            for a in analyses:
                if a.error is not None and a.path != "-":
                    from ..analysis.pipeline import analyze_file

                    analyze_file(a.path, **options)  # raises with the traceback
        if json_out:
            from ..analysis.results import results_document

            print_json(results_document(analyses))
        failed_outputs = 0
        if csv_out is not None:
            failed_outputs += _try(lambda: write_csv(analyses, str(csv_out)), debug)
        header = report_header(title, notes, serial, station=station, operator=operator)
        if plot is not None or report is not None:
            for a in analyses:
                if a.error is None and a.recording is None:
                    note_line(
                        f"{a.path}: analysed in segments (a long file), no samples kept: its figures are not drawn"
                    )
        failed_outputs += _render(analyses, plot, plot_format, report, options, debug, header)
        storer.report()
        errors = sum(1 for a in analyses if a.error is not None)
        if interrupted:
            error_line(
                f"interrupted: {len(analyses)} of {len(paths)} done"
                + (" (stored)" if history is not None else "")
                + ", rerun to resume"
            )
            raise typer.Exit(EXIT_INTERRUPTED)
        if len(analyses) > 1 and not json_out:
            typer.echo(
                f"{len(analyses)} files: {len(analyses) - errors} analysed, {errors} errors, "
                f"{sum(len(a.modes) for a in analyses)} modes in {seconds() - started:.1f} s",
                err=jsonl,
            )
        bad = errors or failed_outputs or storer.failed or paths.problems
        raise typer.Exit(EXIT_ERROR if bad else EXIT_OK)


def _iter_long_file(path: str, options: dict, show: bool):
    """``(0, Analysis)`` of one long sound file through the block engine, with a progress bar by
    time position on stderr when ``show``; any failure is the file's result (the batch policy)."""
    from ..analysis.engine import analyze_long_file
    from ..analysis.pipeline import _FileTask
    from ..base.batch import run_batch

    class _Task(_FileTask):
        def __call__(self, p: str):
            return analyze_long_file(p, progress=advance, **self.options)

    if show:
        from rich.console import Console
        from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn

        prog = Progress(
            TextColumn("analysing"),
            BarColumn(),
            TextColumn("{task.fields[at]}"),
            TimeRemainingColumn(),
            console=Console(stderr=True),
            transient=True,
        )
    else:
        prog = None
    task_id = None

    def clock(seconds: float) -> str:
        m, s = divmod(int(seconds), 60)
        return f"{m // 60}:{m % 60:02d}:{s:02d}" if m >= 60 else f"{m}:{s:02d}"

    def advance(done: int, total) -> None:
        if prog is not None and task_id is not None and total:
            prog.update(task_id, completed=done, total=total, at=f"{clock(done / rate)} of {clock(total / rate)}")

    import soundfile as sf

    rate = float(sf.info(path).samplerate)
    task = _Task(dict(options))
    if prog is None:
        yield from run_batch(task, [path], on_error=task.failed, jobs=1)
        return
    with prog:
        task_id = prog.add_task("analysing", total=None, at="")
        yield from run_batch(task, [path], on_error=task.failed, jobs=1)


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
