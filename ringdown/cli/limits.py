"""``ringdown limits learn`` and ``ringdown check``: acceptance limits and pass/fail of parts.

Exit status of ``check``: 0 every part passed, 1 any part failed, 2 any part could not be
analysed or the command could not run (errors win over failures).
"""

from __future__ import annotations

import csv
import time
from dataclasses import replace
from pathlib import Path
from typing import List, Optional

import typer

from ._common import (CHANNEL_HELP, DEBUG_OPTION, EXIT_ERROR, EXIT_FAIL, EXIT_OK, default_jobs, error_line,
                      expand_inputs, guarded, on_terminal, parse_channel, print_json, progress_bar, resolve_db, DB_ENV)

__all__ = ["register", "format_check"]

def _analysis_options(method, min_snr_db, max_modes, bands, channel=None) -> dict:
    opts: dict = {}
    if channel is not None:
        opts["channel"] = parse_channel(channel)
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


def format_check(row: dict) -> str:
    """Plain-text lines for one part (what ``check`` prints without ``--json``)."""
    verdict = row["verdict"].upper()
    skipped = "  (already stored, skipped)" if row.get("skipped") else ""
    lines = [f"{verdict:5}  {row['part_id']}  {row['path']}{skipped}"]
    for r in row.get("reasons", []):
        lines.append(f"       - {r['message']}")
    for n in row.get("notes", []):
        lines.append(f"       note: {n['message']}")
    return "\n".join(lines)


def _write_csv(rows: list[dict], limits, path: str) -> None:
    n = len(limits.modes)
    head = ["part_id", "path", "sha256", "verdict", "skipped", "mahalanobis", "uniform_shift", "reasons", "notes"]
    for j in range(1, n + 1):
        head += [f"mode{j}_f_d_hz", f"mode{j}_zeta", f"mode{j}_ratio"]
    try:
        with open(path, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(head)
            for r in rows:
                vals = {(f["mode"], f["feature"]): f["value"] for f in r.get("features", [])}
                line = [r["part_id"], r["path"], r.get("sha256"), r["verdict"], bool(r.get("skipped")),
                        r.get("mahalanobis"), r.get("uniform_shift"),
                        "; ".join(x["message"] for x in r.get("reasons", [])),
                        "; ".join(x["message"] for x in r.get("notes", []))]
                for j in range(1, n + 1):
                    line += [vals.get((j, "f_hz")), vals.get((j, "zeta")), vals.get((j, "ratio"))]
                w.writerow(["" if v is None else v for v in line])
    except OSError as exc:
        from ..errors import ParameterError

        raise ParameterError(f"cannot write CSV '{path}': {exc.strerror or exc}; choose a writable path") from exc


def _write_report(results, rows: list[dict], limits, path: str) -> None:
    from ..report import Section, html_table, write_report

    table = html_table(
        ["part", "verdict", "reasons", "notes"],
        [[r["part_id"], r["verdict"].upper() + (" (stored)" if r.get("skipped") else ""),
          "; ".join(x["message"] for x in r.get("reasons", [])) or "-",
          "; ".join(x["message"] for x in r.get("notes", [])) or "-"] for r in rows],
    )
    lim = html_table(["limits file", "SHA-256", "coverage", "confidence", "good parts"],
                     [[limits.source or "-", limits.sha256 or "-", limits.coverage if limits.coverage else "-",
                       limits.confidence if limits.confidence else "-", limits.n_parts or "-"]])
    analyses = [r.analysis for r in results if r is not None and r.analysis is not None]
    write_report(analyses, path, title="Part check report", figures=False,
                 extra_sections=[Section("Pass/fail", table, anchor="checks"), Section("Limits used", lim)])


def register(app: typer.Typer) -> None:
    limits_app = typer.Typer(help="Acceptance limits learned from known-good parts.", no_args_is_help=True)

    @limits_app.command("learn")
    def learn(
        files: List[str] = typer.Argument(..., help="Recordings of known-good parts (files, folders, glob patterns)."),
        output: str = typer.Option("limits.toml", "-o", "--output", help="Limits file to write (TOML)."),
        coverage: float = typer.Option(0.99, help="Fraction of good parts each window must hold (ISO 16269-6)."),
        confidence: float = typer.Option(0.95, help="Confidence of each tolerance interval (ISO 16269-6)."),
        tolerance: float = typer.Option(0.10, help="Relative distance for matching modes between parts."),
        n_modes: Optional[int] = typer.Option(None, "--modes", help="Use only the lowest N reference modes."),
        method: Optional[str] = typer.Option(None, help="Estimator (as for analyze)."),
        min_snr_db: Optional[float] = typer.Option(None, help="Smallest mode SNR, dB (as for analyze)."),
        max_modes: Optional[int] = typer.Option(None, help="Most modes per recording (as for analyze)."),
        band: Optional[List[str]] = typer.Option(None, "--band", help="Band LOW:HIGH in Hz (repeatable)."),
        channel: Optional[str] = typer.Option(None, "--channel", help=CHANNEL_HELP + " Kept in the limits file for check."),
        jobs: int = typer.Option(default_jobs(), "--jobs", "-j", help="Worker processes."),
        force: bool = typer.Option(False, "--force", help="Overwrite an existing limits file."),
        json_out: bool = typer.Option(False, "--json", help="Print the limits as JSON."),
        debug: bool = DEBUG_OPTION,
    ) -> None:
        """Learn acceptance limits from recordings of known-good parts and write them as TOML."""
        from ..pipeline import analyze_many
        from ..limits import learn_limits, write_limits

        def run():
            paths = expand_inputs(files)
            if Path(output).exists() and not force:
                from ..errors import ParameterError

                raise ParameterError(f"'{output}' exists; use --force to overwrite it or -o to choose another file")
            opts = _analysis_options(method, min_snr_db, max_modes, band, channel)
            analyses = analyze_many(paths, jobs=max(1, jobs), **opts)
            bad = [a for a in analyses if a.error is not None]
            if bad:
                from ..errors import ParameterError

                raise ParameterError(f"{len(bad)} good part(s) could not be analysed, first {bad[0].path!r}: "
                                     f"{bad[0].error.message}; remove or re-record them")
            lim = learn_limits(analyses, coverage=coverage, confidence=confidence, tolerance=tolerance,
                               n_modes=n_modes)
            sha = write_limits(lim, output)
            return replace(lim, source=output, sha256=sha)

        lim = guarded(run, debug=debug)
        for w in lim.warnings:
            typer.echo(f"ringdown: warning: {w.message}", err=True)
        if json_out:
            print_json(lim.to_dict())
            return
        typer.echo(f"learned limits from {lim.n_parts} good parts (coverage {lim.coverage:g}, confidence "
                   f"{lim.confidence:g}, k = {lim.k_factor:.4f}) -> {output}")
        for m in lim.modes:
            line = f"  mode {m.index}: f_d {m.f_hz[0]:.1f}-{m.f_hz[1]:.1f} Hz, zeta {m.zeta[0]:.3g}-{m.zeta[1]:.3g}"
            if m.ratio is not None:
                line += f", ratio to mode 1 {m.ratio[0]:.5f}-{m.ratio[1]:.5f}"
            typer.echo(line)
        if lim.mahalanobis is not None:
            mh = lim.mahalanobis
            typer.echo(f"  Mahalanobis distance of {len(mh.features)} features at most {mh.threshold:.2f}")

    app.add_typer(limits_app, name="limits")

    @app.command("check")
    def check_cmd(
        files: List[str] = typer.Argument(..., help="Recordings of parts to check (files, folders, glob patterns)."),
        limits_path: str = typer.Option(..., "--limits", "-l", help="Limits file (TOML)."),
        json_out: bool = typer.Option(False, "--json", help="Print every result as JSON on stdout."),
        csv_out: Optional[str] = typer.Option(None, "--csv", help="Write one row per part to this CSV file."),
        report: Optional[str] = typer.Option(None, "--report", help="Write a self-contained HTML report."),
        db: Optional[str] = typer.Option(None, "--db", help=f"Results database (default ${DB_ENV} or ringdown.sqlite)."),
        no_store: bool = typer.Option(False, "--no-store", help="Do not write results to the database."),
        station: Optional[str] = typer.Option(None, "--station", help="Test station name, stored with each result."),
        operator: Optional[str] = typer.Option(None, "--operator", help="Operator, stored with each result."),
        part_id: Optional[str] = typer.Option(None, "--part-id", help="Regex taking the part id from the file name "
                                              "(first group, or the whole match); default the file stem."),
        force: bool = typer.Option(False, "--force", help="Re-check files already stored with the same limits."),
        jobs: int = typer.Option(default_jobs(), "--jobs", "-j", help="Worker processes."),
        debug: bool = DEBUG_OPTION,
    ) -> None:
        """Check parts against limits: PASS or FAIL with every reason; store each result."""
        from ..check import iter_check_files
        from ..limits import read_limits
        from ..store import ResultStore, file_sha256, part_id_from_path

        t0 = time.monotonic()
        lim = guarded(lambda: read_limits(limits_path), debug=debug)
        paths = expand_inputs(files)
        if not paths:
            error_line(f"no recordings found in {', '.join(files)}; give files, folders or glob patterns")
            raise typer.Exit(EXIT_ERROR)
        ids = guarded(lambda: [part_id_from_path(p, part_id) for p in paths], debug=debug)
        store = None
        if not no_store:
            store = guarded(lambda: ResultStore(resolve_db(db)), debug=debug)
            guarded(lambda: store.record_limits(lim), debug=debug)
        try:
            rows: list[dict | None] = [None] * len(paths)
            results = [None] * len(paths)
            shas = [file_sha256(p) for p in paths]
            todo = []
            for i, p in enumerate(paths):
                old = None if (store is None or force or shas[i] is None) else store.find_check(shas[i], lim.sha256)
                if old is not None:
                    rows[i] = {"part_id": ids[i], "path": p, "sha256": shas[i], "verdict": old.verdict,
                               "skipped": True, "stored_id": old.id, "reasons": list(old.reasons),
                               "notes": list(old.notes), "features": [], "mahalanobis": old.mahalanobis,
                               "uniform_shift": old.uniform_shift}
                else:
                    todo.append(i)
            prog, task = progress_bar(on_terminal(json_out) and len(todo) > 1, len(todo), "checking")
            with prog:
                it = iter_check_files([paths[i] for i in todo], lim, jobs=max(1, jobs))
                for pos, res in it:
                    i = todo[pos]
                    if res.sha256 is None and shas[i] is not None:
                        res = replace(res, sha256=shas[i])
                    stored = None
                    if store is not None:
                        r_ = res
                        stored = guarded(lambda: store.record_check(r_, part_id=ids[i], station=station,
                                                                    operator=operator, force=force), debug=debug)
                    results[i] = res
                    rows[i] = {"part_id": ids[i], "skipped": False, "stored_id": stored, **res.to_dict()}
                    prog.advance(task)
        finally:
            if store is not None:
                store.close()

        rows_f = [r for r in rows if r is not None]
        counts = {v: sum(1 for r in rows_f if r["verdict"] == v) for v in ("pass", "fail", "error")}
        skipped = sum(1 for r in rows_f if r.get("skipped"))
        elapsed = time.monotonic() - t0
        summary = {"parts": len(rows_f), "passed": counts["pass"], "failed": counts["fail"],
                   "errors": counts["error"], "skipped": skipped, "time_s": round(elapsed, 3)}
        if csv_out:
            guarded(lambda: _write_csv(rows_f, lim, csv_out), debug=debug)
        if report:
            guarded(lambda: _write_report(results, rows_f, lim, report), debug=debug)
        if json_out:
            from .._version import __version__

            print_json({"tool": {"name": "ringdown", "version": __version__},
                        "limits": {"path": lim.source, "sha256": lim.sha256},
                        "station": station, "operator": operator,
                        "results": rows_f, "summary": summary})
        else:
            for r in rows_f:
                typer.echo(format_check(r))
        line = (f"{summary['parts']} parts: {summary['passed']} passed, {summary['failed']} failed, "
                f"{summary['errors']} errors" + (f" ({skipped} already stored, skipped)" if skipped else "")
                + f" in {elapsed:.1f} s")
        typer.echo(line, err=json_out)
        code = EXIT_ERROR if counts["error"] else EXIT_FAIL if counts["fail"] else EXIT_OK
        raise typer.Exit(code)
