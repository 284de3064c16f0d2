"""``ringdown limits learn`` and ``ringdown check``: acceptance limits and pass/fail of parts.

Exit status of ``check``: 0 every part passed, 1 any part failed, 2 any part could not be
analysed or a file could not be used (errors win over failures), 64 usage error, 130 interrupted.
"""

from __future__ import annotations

import csv
import sys
from dataclasses import replace
from functools import partial
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, Optional

import typer

from ..base.clock import seconds
from ..base.numfmt import fmt_value, fmt_values
from ._common import (
    EXIT_EPILOG,
    EXIT_ERROR,
    EXIT_FAIL,
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
    sigint_deferred,
    time_window,
    usage_error,
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
    MethodIfGiven,
    MinSnrDbIfGiven,
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
    from ..inspection.limits import Limits

__all__ = ["register", "learn_cmd", "check_cmd", "format_check", "format_learned"]


def _analysis_options(method, min_snr_db, max_modes, bands, start=None, end=None) -> dict:
    opts: dict = time_window(start, end)
    if method is not None:
        opts["method"] = method
    if min_snr_db is not None:
        opts["min_snr_db"] = min_snr_db
    if max_modes is not None:
        opts["max_modes"] = max_modes
    if bands:
        from .analyze import parse_band

        opts["bands"] = [parse_band(b) for b in bands]
    return opts


def _stream(row: dict, json_out: bool, jsonl: bool) -> None:
    """One part's result as soon as it is known: a JSON line, or its text lines (not with --json).
    An ERROR is a verdict like PASS and FAIL: it is listed with its reason on stdout, once."""
    if jsonl:
        print_json_line(row)
    elif not json_out:
        typer.echo(format_check(row))
        sys.stdout.flush()


def format_check(row: dict) -> str:
    """Plain-text lines for one part (what ``check`` prints without ``--json``)."""
    from ..io.outputs import shown

    verdict = row["verdict"].upper()
    skipped = "  (already stored, skipped)" if row.get("skipped") else ""
    lines = [f"{verdict:5}  {shown(row['part_id'])}  {shown(row['path'])}{skipped}"]
    for r in row.get("reasons", []):
        lines.append(f"       - {shown(r['message'])}")
    for n in row.get("notes", []):
        lines.append(f"       note: {shown(n['message'])}")
    return "\n".join(lines)


def _write_csv(rows: list[dict], limits, path: str) -> None:
    n = len(limits.modes)
    head = ["part_id", "path", "sha256", "verdict", "skipped", "mahalanobis", "uniform_shift", "reasons", "notes"]
    for j in range(1, n + 1):
        head += [f"mode{j}_f_d_hz", f"mode{j}_zeta", f"mode{j}_ratio"]
    from ..io.outputs import atomic_write, csv_row

    with atomic_write(path, newline="", what="CSV") as fh:
        w = csv.writer(fh)
        w.writerow(head)
        for r in rows:
            vals = {(f["mode"], f["feature"]): f["value"] for f in r.get("features", [])}
            line = [
                r["part_id"],
                r["path"],
                r.get("sha256"),
                r["verdict"],
                bool(r.get("skipped")),
                r.get("mahalanobis"),
                r.get("uniform_shift"),
                "; ".join(x["message"] for x in r.get("reasons", [])),
                "; ".join(x["message"] for x in r.get("notes", [])),
            ]
            for j in range(1, n + 1):
                line += [vals.get((j, "f_hz")), vals.get((j, "zeta")), vals.get((j, "ratio"))]
            w.writerow(csv_row(line))


def _write_report(rows: list[dict], limits, path: str, options: dict, header: dict) -> None:
    """The check report, with each analysed part's figures: the parts are analysed again here,
    in this process, because a batch keeps no samples (the verdicts come from the batch)."""
    from ..analysis.pipeline import analyze_file
    from ..analysis.results import Analysis
    from ..render.report import Section, _write, html_table
    from ..render.report_check import render_check_report

    opts = {**limits.analysis_options(), **options}
    analyses: list[Analysis | None] = []
    for r in rows:
        if r.get("skipped") or not r.get("path") or r["path"] == "-":
            analyses.append(None)
            continue
        try:
            analyses.append(analyze_file(r["path"], **opts))
        except Exception as exc:  # noqa: BLE001  the verdict stands; the report says why figures are missing
            analyses.append(Analysis.failed(r["path"], exc, settings=opts))
    sections = []
    stored = [r for r in rows if r.get("skipped")]
    if stored:
        # parts skipped as already stored: their modes from the stored record, in full
        body = []
        for r in stored:
            body.append(
                html_table(
                    [
                        "part",
                        "path",
                        "verdict",
                        "mode",
                        "f_d [Hz]",
                        "u(f_d) [Hz]",
                        "beta [1/s]",
                        "zeta",
                        "u(zeta)",
                        "Q",
                    ],
                    [
                        [
                            r["part_id"],
                            r["path"],
                            r["verdict"].upper(),
                            m.get("index"),
                            m.get("f_d_hz"),
                            m.get("f_d_hz_u"),
                            m.get("beta_per_s"),
                            m.get("zeta"),
                            m.get("zeta_u"),
                            m.get("q"),
                        ]
                        for m in r.get("modes", [])
                    ]
                    or [[r["part_id"], r["path"], r["verdict"].upper(), "-", "-", "-", "-", "-", "-", "-"]],
                )
            )
        sections.append(
            Section("Parts taken from the history (already stored, not re-analysed)", "".join(body), anchor="stored")
        )
    _write(render_check_report(rows, analyses, limits, more_sections=sections, **header), path)


LearnFiles = Annotated[
    list[str], typer.Argument(metavar="FILE", help="Recordings of known-good parts (files, folders, glob patterns).")
]
LimitsOut = Annotated[str, typer.Option("-o", "--output", help="Limits file to write (TOML).")]
Coverage = Annotated[float, typer.Option(help="Fraction of good parts each window must hold (ISO 16269-6).")]
Confidence = Annotated[float, typer.Option(help="Confidence of each tolerance interval (ISO 16269-6).")]
Tolerance = Annotated[float, typer.Option(help="Relative distance for matching modes between parts.")]
NModes = Annotated[Optional[int], typer.Option("--modes", help="Use only the lowest N reference modes.")]
Overwrite = Annotated[bool, typer.Option("--force", help="Overwrite an existing limits file.")]

CheckFiles = Annotated[
    list[str], typer.Argument(metavar="FILE", help="Recordings of parts to check (files, folders, glob patterns).")
]
LimitsIn = Annotated[str, typer.Option("--limits", "-l", help="Limits file (TOML).")]
CheckCsv = Annotated[Optional[Path], typer.Option("--csv", help="Write one row per part to this CSV file.")]
NoStore = Annotated[bool, typer.Option("--no-store", help="Do not write results to the database.")]
Recheck = Annotated[bool, typer.Option("--force", help="Re-check files already stored with the same limits.")]


def register(app: typer.Typer) -> None:
    """Add ``limits learn`` and ``check`` to ``app``."""
    limits_app = typer.Typer(help="Acceptance limits learned from known-good parts.", no_args_is_help=True)
    limits_app.command("learn", epilog=EXIT_EPILOG)(learn_cmd)
    app.add_typer(limits_app, name="limits")
    app.command("check", epilog=EXIT_EPILOG)(check_cmd)


def learn_cmd(
    files: LearnFiles,
    output: LimitsOut = "limits.toml",
    coverage: Coverage = 0.99,
    confidence: Confidence = 0.95,
    tolerance: Tolerance = 0.10,
    n_modes: NModes = None,
    method: MethodIfGiven = None,
    min_snr_db: MinSnrDbIfGiven = None,
    max_modes: MaxModes = None,
    band: Band = None,
    channel: Channel = None,
    column: Column = None,
    sample_rate: SampleRate = None,
    start: Start = None,
    end: End = None,
    jobs: Jobs = None,
    force: Overwrite = False,
    json_out: Json = False,
    recursive: Recursive = False,
    debug: Debug = False,
) -> None:
    """Learn acceptance limits from recordings of known-good parts and write them as TOML."""

    def options() -> dict:
        check_jobs(jobs)
        return {
            **_analysis_options(method, min_snr_db, max_modes, band, start, end),
            **reader_options(channel, column, sample_rate),
        }

    opts = usage_guarded(options, debug=debug)
    lim = guarded(
        lambda: _learn(files, output, force, recursive, jobs, opts, coverage, confidence, tolerance, n_modes),
        debug=debug,
    )
    for w in lim.warnings:
        typer.echo(f"ringdown: warning: {w.message}", err=True)
    if json_out:
        print_json(lim.to_dict())
    else:
        typer.echo(format_learned(lim, output))


def _learn(files, output, force, recursive, jobs, opts, coverage, confidence, tolerance, n_modes):
    """Analyse the good parts (every one must be analysed) and write the limits learned from them."""
    from ..analysis.pipeline import analyze_many
    from ..base.errors import ParameterError
    from ..inspection.learning import learn_limits
    from ..inspection.limits_file import write_limits
    from ..io.outputs import check_writable

    paths = expand_inputs(files, recursive=recursive, exclude=[output])
    if paths.problems:
        raise ParameterError("every good part must be readable; fix the folders or patterns named above")
    if Path(output).exists() and not force:
        raise ParameterError(f"'{output}' exists; use --force to overwrite it or -o to choose another file")
    check_writable(output, "limits file")
    try:
        with catching_interrupts():
            analyses = analyze_many(paths, jobs=batch_jobs(jobs, paths), **opts)
            check_interrupt()
    except KeyboardInterrupt:
        error_line(f"interrupted: no limits written to '{output}'; rerun to learn them")
        raise typer.Exit(EXIT_INTERRUPTED) from None
    bad = [(a.path, a.error) for a in analyses if a.error is not None]
    if bad:
        raise ParameterError(
            f"{len(bad)} good part(s) could not be analysed, first {bad[0][0]!r}: "
            f"{bad[0][1].message}; remove or re-record them"
        )
    lim = learn_limits(analyses, coverage=coverage, confidence=confidence, tolerance=tolerance, n_modes=n_modes)
    sha = write_limits(lim, output)
    return replace(lim, source=output, sha256=sha)


def format_learned(lim: Limits, output: str) -> str:
    """The lines ``limits learn`` prints without ``--json``: the windows of every mode."""
    lines = [
        f"learned limits from {lim.n_parts} good parts (coverage {lim.coverage:g}, confidence "
        f"{lim.confidence:g}, k = {lim.k_factor:.4f}) -> {output}"
    ]
    if lim.reader:
        lines.append("  read with " + ", ".join(f"{k} {v}" for k, v in lim.reader.items()))
    for m in lim.modes:
        line = f"  mode {m.index}: f_d {_window(m.f_hz, 6)} Hz, zeta {_window(m.zeta, 3)}"
        if m.ratio is not None:
            line += f", ratio to mode 1 {_window(m.ratio, 6)}"
        lines.append(line)
    if lim.mahalanobis is not None:
        mh = lim.mahalanobis
        lines.append(f"  Mahalanobis distance of {len(mh.features)} features at most {fmt_value(mh.threshold, 3)}")
    return "\n".join(lines)


def _window(window: tuple[float, float] | None, digits: int) -> str:
    """``low to high`` in the one number format, "-" for a window the limits do not have."""
    return "-" if window is None else " to ".join(fmt_values(window, digits))


def check_cmd(
    files: CheckFiles,
    limits_path: LimitsIn,
    json_out: Json = False,
    jsonl: Jsonl = False,
    csv_out: CheckCsv = None,
    report: Report = None,
    title: Title = None,
    notes: Notes = None,
    serial: Serial = None,
    channel: Channel = None,
    column: Column = None,
    sample_rate: SampleRate = None,
    db: Db = None,
    no_store: NoStore = False,
    station: Station = None,
    operator: Operator = None,
    part_id: PartIdRegex = None,
    force: Recheck = False,
    start: Start = None,
    end: End = None,
    jobs: Jobs = None,
    recursive: Recursive = False,
    scheduler: Scheduler = None,
    parquet_out: Parquet = None,
    debug: Debug = False,
) -> None:
    """Check parts against limits: PASS or FAIL with every reason; store each result."""
    from ..inspection.check_run import CheckRun, check_summary
    from ..inspection.limits_file import read_limits
    from ..inspection.store import part_id_from_path

    t0 = seconds()
    if json_out and jsonl:
        usage_error(f"--json and --jsonl are exclusive: {_STREAMS}")
    overrides = usage_guarded(lambda: reader_options(channel, column, sample_rate), debug=debug)
    usage_guarded(lambda: part_id_from_path("x", part_id), debug=debug)  # a bad regex is a usage error
    usage_guarded(lambda: check_jobs(jobs), debug=debug)
    lim = guarded(lambda: read_limits(limits_path), debug=debug)
    db_path = None if no_store else resolve_db(db)
    paths = expand_inputs(files, recursive=recursive, exclude=[csv_out, report, db_path, limits_path])
    n_jobs = usage_guarded(lambda: batch_jobs(jobs, paths), debug=debug)
    if not paths:
        error_line(f"no recordings found in {', '.join(files)}; give files, folders or glob patterns")
        raise typer.Exit(EXIT_ERROR)
    store = guarded(partial(_prepare_check_outputs, csv_out, report, db_path, lim), debug=debug)
    ids = [part_id_from_path(p, part_id) for p in paths]
    run = CheckRun(
        paths, lim, part_ids=ids, store=store, force=force, station=station, operator=operator, on_store_error=_unstored
    )
    window = time_window(start, end)
    stream = partial(_stream, json_out=json_out, jsonl=jsonl)
    interrupted = False
    try:
        guarded(lambda: [stream(row) for _, row in run.stored_rows()], debug=debug)
        _check_todo(run, n_jobs, {**overrides, **window}, scheduler, parquet_out, on_terminal(json_out), stream, debug)
    except KeyboardInterrupt:
        interrupted = True
    finally:
        if store is not None:
            store.close()
    rows = run.finished_rows()
    elapsed = seconds() - t0
    summary = check_summary(rows, elapsed)
    header = report_header(
        title, notes, serial, station=station, operator=operator, limits=lim.source, **{"limits SHA-256": lim.sha256}
    )
    failed_outputs = _write_check_outputs(rows, lim, csv_out, report, {**overrides, **window}, header, debug)
    if json_out:
        print_json(run.document(elapsed))
    _check_exit(summary, elapsed, interrupted, len(paths), store is not None, json_out or jsonl)
    bad = summary["errors"] or failed_outputs or run.store_failed or paths.problems
    raise typer.Exit(EXIT_ERROR if bad else EXIT_FAIL if summary["failed"] else EXIT_OK)


def _check_exit(summary: dict, elapsed: float, interrupted: bool, n_paths: int, stored: bool, to_err: bool) -> None:
    """The counts line (on stderr with JSON on stdout); after Ctrl-C the interrupt line and exit 130."""
    skipped = summary["skipped"]
    typer.echo(
        f"{summary['parts']} parts: {summary['passed']} passed, {summary['failed']} failed, "
        f"{summary['errors']} errors"
        + (f" ({skipped} already stored, skipped)" if skipped else "")
        + f" in {elapsed:.1f} s",
        err=to_err,
    )
    if interrupted:
        error_line(
            f"interrupted: {summary['parts']} of {n_paths} done" + (" (stored)" if stored else "") + ", rerun to resume"
        )
        raise typer.Exit(EXIT_INTERRUPTED)


#: Why ``check`` takes one of ``--json`` and ``--jsonl``.
_STREAMS = "--json prints one document at the end, --jsonl one line per part as it is checked; choose one"


def _unstored(exc) -> None:
    """The store failed: said once, the check goes on without storing."""
    error_line(f"{exc}; results from here on are not stored")


def _check_todo(run, n_jobs: int, options: dict, scheduler, parquet_out, show_progress: bool, stream, debug) -> None:
    """Check the parts not skipped, each stored and streamed as its result arrives."""
    from ..base.cluster import connect
    from ..inspection.check import iter_check_files
    from ..inspection.parquet import open_sink

    prog, task = progress_bar(show_progress and len(run.todo) > 1, len(run.todo), "checking")
    cluster = guarded(lambda: connect(scheduler), debug=debug)
    sink = guarded(lambda: open_sink(parquet_out), debug=debug)
    with catching_interrupts(), cluster as client, sink, prog:
        it = iter_check_files(
            run.todo_paths, run.limits, jobs=n_jobs, on_notice=note_line, options=options, client=client
        )
        for pos, res in it:
            check_interrupt()  # a result that finished after a Ctrl-C is not taken
            with sigint_deferred():  # stored and counted whole, or not at all
                row = guarded(partial(run.take, pos, res, sink), debug=debug)
            prog.advance(task)
            stream(row)
        guarded(sink.close, debug=debug)


def _write_check_outputs(rows, lim, csv_out, report, options: dict, header: dict, debug) -> int:
    """The CSV and the report; returns the number of outputs that could not be written."""
    from .analyze import _try

    failed = 0
    if csv_out:
        failed += _try(lambda: _write_csv(rows, lim, str(csv_out)), debug)
    if report:
        failed += _try(lambda: _write_report(rows, lim, str(report), options, header), debug)
    return failed


def _prepare_check_outputs(csv_out, report, db_path: str | None, lim: Limits) -> Any:
    """Before any part is checked: the outputs are writable, the limits are in the database (an
    open ResultStore, or None without one), and the last run's outputs are gone."""
    from ..inspection.store import ResultStore
    from ..io.outputs import check_writable, remove_stale

    for out, what in ((csv_out, "CSV"), (report, "report")):
        if out:
            check_writable(out, what)
    st = None
    if db_path is not None:
        st = ResultStore(db_path)
        try:
            st.record_limits(lim)
        except Exception:
            st.close()
            raise
    for out in (csv_out, report):
        if out:
            remove_stale(out)  # a killed run must not leave the last run's output looking current
    return st
