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
from typing import TYPE_CHECKING, Any, Optional

import typer

from ..base.clock import seconds
from ..base.numfmt import fmt_value, fmt_values
from ._common import (
    DB_ENV,
    DEBUG_OPTION,
    EXIT_EPILOG,
    EXIT_ERROR,
    EXIT_FAIL,
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
    resolve_db,
    sigint_deferred,
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

if TYPE_CHECKING:
    from ..inspection.check import CheckResult
    from ..inspection.limits import Limits

__all__ = ["register", "format_check"]


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
    from ..render.report import Section, _write, html_table, render_check_report

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


def register(app: typer.Typer) -> None:
    limits_app = typer.Typer(help="Acceptance limits learned from known-good parts.", no_args_is_help=True)

    @limits_app.command("learn", epilog=EXIT_EPILOG)
    def learn(
        files: list[str] = typer.Argument(..., help="Recordings of known-good parts (files, folders, glob patterns)."),
        output: str = typer.Option("limits.toml", "-o", "--output", help="Limits file to write (TOML)."),
        coverage: float = typer.Option(0.99, help="Fraction of good parts each window must hold (ISO 16269-6)."),
        confidence: float = typer.Option(0.95, help="Confidence of each tolerance interval (ISO 16269-6)."),
        tolerance: float = typer.Option(0.10, help="Relative distance for matching modes between parts."),
        n_modes: Optional[int] = typer.Option(None, "--modes", help="Use only the lowest N reference modes."),
        method: Optional[str] = typer.Option(None, help="Estimator (as for analyze)."),
        min_snr_db: Optional[float] = typer.Option(None, help="Smallest mode SNR, dB (as for analyze)."),
        max_modes: Optional[int] = typer.Option(None, help="Most modes per recording (as for analyze)."),
        band: Optional[list[str]] = typer.Option(None, "--band", help="Band LOW:HIGH in Hz (repeatable)."),
        channel: Channel = None,
        column: Column = None,
        sample_rate: SampleRate = None,
        start: Start = None,
        end: End = None,
        jobs: int = typer.Option(default_jobs(), "--jobs", "-j", help="Worker processes."),
        force: bool = typer.Option(False, "--force", help="Overwrite an existing limits file."),
        json_out: bool = typer.Option(False, "--json", help="Print the limits as JSON."),
        recursive: bool = RECURSIVE_OPTION,
        debug: bool = DEBUG_OPTION,
    ) -> None:
        """Learn acceptance limits from recordings of known-good parts and write them as TOML."""
        from ..analysis.pipeline import analyze_many
        from ..inspection.learning import learn_limits
        from ..inspection.limits_file import write_limits

        opts = usage_guarded(
            lambda: {
                **_analysis_options(method, min_snr_db, max_modes, band, start, end),
                **reader_options(channel, column, sample_rate),
            },
            debug=debug,
        )

        def run():
            from ..base.errors import ParameterError
            from ..io.outputs import check_writable

            paths = expand_inputs(files, recursive=recursive, exclude=[output])
            if paths.problems:
                raise ParameterError("every good part must be readable; fix the folders or patterns named above")
            if Path(output).exists() and not force:
                raise ParameterError(f"'{output}' exists; use --force to overwrite it or -o to choose another file")
            check_writable(output, "limits file")
            try:
                with catching_interrupts():
                    analyses = analyze_many(paths, jobs=1 if uses_stdin(paths) else max(1, jobs), **opts)
                    check_interrupt()
            except KeyboardInterrupt:
                error_line(f"interrupted: no limits written to '{output}'; rerun to learn them")
                raise typer.Exit(EXIT_INTERRUPTED) from None
            bad = [(a.path, a.error) for a in analyses if a.error is not None]
            if bad:
                from ..base.errors import ParameterError

                raise ParameterError(
                    f"{len(bad)} good part(s) could not be analysed, first {bad[0][0]!r}: "
                    f"{bad[0][1].message}; remove or re-record them"
                )
            lim = learn_limits(analyses, coverage=coverage, confidence=confidence, tolerance=tolerance, n_modes=n_modes)
            sha = write_limits(lim, output)
            return replace(lim, source=output, sha256=sha)

        lim = guarded(run, debug=debug)
        for w in lim.warnings:
            typer.echo(f"ringdown: warning: {w.message}", err=True)
        if json_out:
            print_json(lim.to_dict())
            return
        typer.echo(
            f"learned limits from {lim.n_parts} good parts (coverage {lim.coverage:g}, confidence "
            f"{lim.confidence:g}, k = {lim.k_factor:.4f}) -> {output}"
        )
        if lim.reader:
            typer.echo("  read with " + ", ".join(f"{k} {v}" for k, v in lim.reader.items()))
        for m in lim.modes:
            line = (
                f"  mode {m.index}: f_d {' to '.join(fmt_values(m.f_hz, 6))} Hz, "
                f"zeta {' to '.join(fmt_values(m.zeta, 3))}"
            )
            if m.ratio is not None:
                line += f", ratio to mode 1 {' to '.join(fmt_values(m.ratio, 6))}"
            typer.echo(line)
        if lim.mahalanobis is not None:
            mh = lim.mahalanobis
            typer.echo(f"  Mahalanobis distance of {len(mh.features)} features at most {fmt_value(mh.threshold, 3)}")

    app.add_typer(limits_app, name="limits")

    @app.command("check", epilog=EXIT_EPILOG)
    def check_cmd(
        files: list[str] = typer.Argument(..., help="Recordings of parts to check (files, folders, glob patterns)."),
        limits_path: str = typer.Option(..., "--limits", "-l", help="Limits file (TOML)."),
        json_out: bool = typer.Option(False, "--json", help="Print every result as JSON on stdout."),
        jsonl: Jsonl = False,
        csv_out: Optional[str] = typer.Option(None, "--csv", help="Write one row per part to this CSV file."),
        report: Optional[str] = typer.Option(None, "--report", help="Write a self-contained HTML report."),
        title: Title = None,
        notes: Notes = None,
        serial: Serial = None,
        channel: Channel = None,
        column: Column = None,
        sample_rate: SampleRate = None,
        db: Optional[str] = typer.Option(
            None, "--db", help=f"Results database (default ${DB_ENV} or ringdown.sqlite)."
        ),
        no_store: bool = typer.Option(False, "--no-store", help="Do not write results to the database."),
        station: Optional[str] = typer.Option(None, "--station", help="Test station name, stored with each result."),
        operator: Optional[str] = typer.Option(None, "--operator", help="Operator, stored with each result."),
        part_id: Optional[str] = typer.Option(
            None,
            "--part-id",
            help="Regex taking the part id from the file name "
            "(first group, or the whole match); default the file stem.",
        ),
        force: bool = typer.Option(False, "--force", help="Re-check files already stored with the same limits."),
        start: Start = None,
        end: End = None,
        jobs: int = typer.Option(default_jobs(), "--jobs", "-j", help="Worker processes."),
        recursive: bool = RECURSIVE_OPTION,
        scheduler: Optional[str] = typer.Option(
            None,
            "--scheduler",
            help="Run on a Dask cluster: scheduler ADDRESS "
            "(tcp://HOST:8786) or local:N worker processes (needs the 'cluster' extra).",
        ),
        parquet_out: Optional[str] = typer.Option(
            None,
            "--parquet",
            help="Also append one row per mode to this Parquet "
            "dataset folder, as results arrive (needs the 'cluster' extra).",
        ),
        debug: bool = DEBUG_OPTION,
    ) -> None:
        """Check parts against limits: PASS or FAIL with every reason; store each result."""
        from ..base.errors import RingdownError
        from ..inspection.check import iter_check_files
        from ..inspection.limits_file import read_limits
        from ..inspection.store import file_sha256, part_id_from_path

        t0 = seconds()
        if json_out and jsonl:
            from ._common import usage_error

            usage_error(
                "--json and --jsonl are exclusive: --json prints one document at the end, --jsonl one "
                "line per part as it is checked; choose one"
            )
        overrides = usage_guarded(lambda: reader_options(channel, column, sample_rate), debug=debug)
        usage_guarded(lambda: part_id_from_path("x", part_id), debug=debug)  # a bad regex is a usage error
        lim = guarded(lambda: read_limits(limits_path), debug=debug)
        db_path = None if no_store else resolve_db(db)
        paths = expand_inputs(files, recursive=recursive, exclude=[csv_out, report, db_path, limits_path])
        n_jobs = usage_guarded(lambda: 1 if uses_stdin(paths) else max(1, jobs), debug=debug)
        if not paths:
            error_line(f"no recordings found in {', '.join(files)}; give files, folders or glob patterns")
            raise typer.Exit(EXIT_ERROR)
        ids = [part_id_from_path(p, part_id) for p in paths]

        store = guarded(partial(_prepare_check_outputs, csv_out, report, db_path, lim), debug=debug)
        rows: list[dict | None] = [None] * len(paths)
        results: list[CheckResult | None] = [None] * len(paths)
        interrupted = store_failed = False
        try:
            shas = [file_sha256(p) for p in paths]
            todo = []
            for i, p in enumerate(paths):
                old = (
                    None
                    if (store is None or force or shas[i] is None)
                    else guarded(partial(store.find_check, shas[i], lim.sha256), debug=debug)
                )
                if old is not None:
                    rows[i] = row = _stored_row(old, ids[i], p, shas[i])
                    _stream(row, json_out, jsonl)
                else:
                    todo.append(i)
            prog, task = progress_bar(on_terminal(json_out) and len(todo) > 1, len(todo), "checking")
            from ..base.cluster import connect
            from ..inspection.parquet import open_sink

            cluster = guarded(lambda: connect(scheduler), debug=debug)
            sink = guarded(lambda: open_sink(parquet_out), debug=debug)
            with catching_interrupts(), cluster as client, sink, prog:
                it = iter_check_files(
                    [paths[i] for i in todo],
                    lim,
                    jobs=n_jobs,
                    on_notice=note_line,
                    options={**overrides, **time_window(start, end)},
                    client=client,
                )
                for pos, res in it:
                    check_interrupt()  # a result that finished after a Ctrl-C is not taken
                    i = todo[pos]
                    if res.sha256 is None and shas[i] is not None:
                        res = replace(res, sha256=shas[i])
                    with sigint_deferred():  # stored and counted whole, or not at all
                        # to the dataset before the database: whatever is stored is in the dataset too
                        guarded(
                            partial(sink.add_check, res, part_id=ids[i], station=station, operator=operator),
                            debug=debug,
                        )
                        stored = None
                        if store is not None and not store_failed:
                            try:
                                stored = store.record_check(
                                    res, part_id=ids[i], station=station, operator=operator, force=force
                                )
                            except RingdownError as exc:
                                error_line(f"{exc}; results from here on are not stored")
                                store_failed = True
                        results[i] = res
                        rows[i] = row = {"part_id": ids[i], "skipped": False, "stored_id": stored, **res.to_dict()}
                    prog.advance(task)
                    _stream(row, json_out, jsonl)
                guarded(sink.close, debug=debug)
        except KeyboardInterrupt:
            interrupted = True
        finally:
            if store is not None:
                store.close()

        rows_f = [r for r in rows if r is not None]
        elapsed = seconds() - t0
        summary = _check_summary(rows_f, elapsed)
        from .analyze import _try

        window = time_window(start, end)
        failed_outputs = 0
        if csv_out:
            failed_outputs += _try(lambda: _write_csv(rows_f, lim, csv_out), debug)
        if report:
            header = report_header(
                title,
                notes,
                serial,
                station=station,
                operator=operator,
                limits=lim.source,
                **{"limits SHA-256": lim.sha256},
            )
            failed_outputs += _try(lambda: _write_report(rows_f, lim, report, {**overrides, **window}, header), debug)
        if json_out:
            from .._version import __version__

            print_json(
                {
                    "tool": {"name": "ringdown", "version": __version__},
                    "limits": {"path": lim.source, "sha256": lim.sha256},
                    "station": station,
                    "operator": operator,
                    "results": rows_f,
                    "summary": summary,
                }
            )
        skipped = summary["skipped"]
        line = (
            f"{summary['parts']} parts: {summary['passed']} passed, {summary['failed']} failed, "
            f"{summary['errors']} errors"
            + (f" ({skipped} already stored, skipped)" if skipped else "")
            + f" in {elapsed:.1f} s"
        )
        typer.echo(line, err=json_out or jsonl)
        if interrupted:
            error_line(
                f"interrupted: {len(rows_f)} of {len(paths)} done"
                + (" (stored)" if store is not None else "")
                + ", rerun to resume"
            )
            raise typer.Exit(EXIT_INTERRUPTED)
        bad = summary["errors"] or failed_outputs or store_failed or paths.problems
        code = EXIT_ERROR if bad else EXIT_FAIL if summary["failed"] else EXIT_OK
        raise typer.Exit(code)


def _prepare_check_outputs(csv_out: str | None, report: str | None, db_path: str | None, lim: Limits) -> Any:
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


def _check_summary(rows: list[dict], elapsed_s: float) -> dict[str, Any]:
    """The counts of a check run (the JSON ``summary``): parts, passed, failed, errors, skipped, time_s."""
    counts = {v: sum(1 for r in rows if r["verdict"] == v) for v in ("pass", "fail", "error")}
    return {
        "parts": len(rows),
        "passed": counts["pass"],
        "failed": counts["fail"],
        "errors": counts["error"],
        "skipped": sum(1 for r in rows if r.get("skipped")),
        "time_s": round(elapsed_s, 3),
    }


def _stored_row(old, part_id: str, path: str, sha: str | None) -> dict:
    """The row of a part skipped as already stored: the stored record in full (features, modes)."""
    rec = (
        dict(old.result)
        if old.result
        else {
            "reasons": list(old.reasons),
            "notes": list(old.notes),
            "features": [],
            "modes": [],
            "mahalanobis": old.mahalanobis,
            "uniform_shift": old.uniform_shift,
            "verdict": old.verdict,
        }
    )
    rec.update(part_id=part_id, path=path, sha256=sha, verdict=old.verdict, skipped=True, stored_id=old.id)
    return rec
