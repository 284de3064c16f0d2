"""``ringdown analyze``: measure every mode of one or more recordings."""

from __future__ import annotations

import csv
import math
import sys
import time
from pathlib import Path
from typing import List, Optional

import typer

from ._common import (CHANNEL_HELP, DEBUG_OPTION, EXIT_ERROR, EXIT_OK, default_jobs, error_line, expand_inputs,
                      guarded, on_terminal, parse_channel, print_json, progress_bar)

__all__ = ["register", "parse_band", "format_table"]


def parse_band(text: str) -> tuple[float, float]:
    """Parse ``"400:500"`` (Hz) into ``(400.0, 500.0)``."""
    from ..errors import ParameterError

    parts = text.replace(",", ".").split(":") if text.count(":") == 1 else [text]
    try:
        lo, hi = (float(p) for p in parts)
    except ValueError:
        raise ParameterError(f"--band {text!r} is not LOW:HIGH in Hz (e.g. 400:500)") from None
    return lo, hi


def _fmt(v, u=None, digits=5) -> str:
    """``v`` alone to ``digits`` significant digits, or ``v ± u`` with u to 2 significant digits
    and v to the same decimal place."""
    if v is None:
        return "-"
    if u is None or not (u > 0) or not math.isfinite(u):
        return f"{v:.{digits}g}"
    dec = max(0, 1 - int(math.floor(math.log10(u))))
    if dec > 12 or abs(v) >= 1e7:
        return f"{v:.{digits}g} ± {u:.2g}"
    return f"{v:.{dec}f} ± {u:.{dec}f}"


def format_table(analysis) -> str:
    """A readable text table of one analysis (what ``analyze`` prints without ``--json``)."""
    lines = []
    head = f"{analysis.path or '<array>'}"
    if analysis.error is not None:
        return f"{head}\n  error: {analysis.error.message}\n"
    used = sum(1 for h in analysis.hits if h.used)
    unit = f" [{analysis.unit}]" if analysis.unit else ""
    head += (f"  ({analysis.sample_rate_hz:g} Hz, {analysis.duration_s:.3g} s, channel {analysis.channel}{unit}, "
             f"{len(analysis.hits)} hit(s), {used} used)")
    lines.append(head)
    cols = ("#", "f_d [Hz]", "beta [1/s]", "f_n [Hz]", "zeta", "Q", "dB/s", "T60 [s]", "SNR dB", "method", "warnings")
    rows = []
    for m in analysis.modes:
        rows.append((
            str(m.index), _fmt(m.f_d_hz, m.f_d_hz_u, 7), _fmt(m.beta_per_s, m.beta_per_s_u, 4), _fmt(m.f_n_hz, None, 7),
            _fmt(m.zeta, m.zeta_u, 3), _fmt(m.q, m.q_u, 4), _fmt(m.decay_db_per_s, None, 4), _fmt(m.t60_s, None, 3),
            _fmt(m.snr_db, None, 3), m.method + (f" x{m.n_hits}" if m.n_hits > 1 else ""), ",".join(m.warning_codes) or "-",
        ))
    widths = [max(len(c), *(len(r[i]) for r in rows)) if rows else len(c) for i, c in enumerate(cols)]
    lines.append("  " + "  ".join(c.rjust(w) for c, w in zip(cols, widths)))
    for r in rows:
        lines.append("  " + "  ".join(v.rjust(w) for v, w in zip(r, widths)))
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
    lines.append("  (± standard uncertainty, k = 1; Q = 1/(2 zeta))")
    return "\n".join(lines) + "\n"


def write_csv(analyses, path: str) -> None:
    """One row per mode of every analysed file (files that failed get one row with the error)."""
    from ..results import mode_keys

    keys = [k for k in mode_keys() if k not in ("warnings", "cross_checks", "damping_vs_amplitude", "band_hz")]
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["path", "sha256", "channel", *keys, "warnings", "error"])
        for a in analyses:
            if a.error is not None:
                w.writerow([a.path, a.sha256, a.channel, *([""] * len(keys)), "", a.error.message])
                continue
            for m in a.modes:
                d = m.to_dict()
                w.writerow([a.path, a.sha256, a.channel, *["" if d[k] is None else d[k] for k in keys],
                            ";".join(m.warning_codes), ""])


def register(app: typer.Typer) -> None:
    @app.command("analyze")
    def analyze_cmd(
        files: List[str] = typer.Argument(..., help="Recordings (WAV/FLAC/OGG/CSV, TDMS, UFF 58, MAT, HDF5), folders "
                                                    "or glob patterns."),
        json_out: bool = typer.Option(False, "--json", help="Print one JSON document instead of tables."),
        csv_out: Optional[Path] = typer.Option(None, "--csv", help="Also write one CSV row per mode to this file."),
        channel: Optional[str] = typer.Option(None, "--channel", help=CHANNEL_HELP),
        column: Optional[str] = typer.Option(None, "--column", help="Text files: data column (1-based index or header name)."),
        sample_rate: Optional[float] = typer.Option(None, "--sample-rate", help="Sample rate, Hz, for files that do not state "
                                                    "it (text without a time column, TDMS/MAT/HDF5 without one)."),
        method: str = typer.Option("auto", "--method", help="Estimator reported per mode: auto, envelope, decrement, half_power, pencil."),
        band: Optional[List[str]] = typer.Option(None, "--band", help="Analyse this band LOW:HIGH in Hz instead of searching (repeatable)."),
        max_modes: Optional[int] = typer.Option(None, "--max-modes", help="Keep at most this many modes (the strongest)."),
        min_snr_db: float = typer.Option(10.0, "--min-snr-db", help="Fits end where a mode is this far above its band noise, dB."),
        min_hit_snr_db: float = typer.Option(20.0, "--min-hit-snr-db", help="A hit must rise this far above the noise floor, dB."),
        keep_double_hits: bool = typer.Option(False, "--keep-double-hits", help="Combine hits flagged as hammer bounces too."),
        jobs: Optional[int] = typer.Option(None, "--jobs", help="Worker processes for a batch (default: the number of cores)."),
        plot: Optional[Path] = typer.Option(None, "--plot", help="Write figures for each file into this folder."),
        plot_format: str = typer.Option("png", "--plot-format", help="Figure format: png or svg."),
        report: Optional[Path] = typer.Option(None, "--report", help="Write one self-contained HTML report."),
        store: bool = typer.Option(False, "--store", help="Also store every result in the results history (SQLite)."),
        db: Optional[str] = typer.Option(None, "--db", help="History database (default $RINGDOWN_DB, else ringdown.sqlite here)."),
        part_id: Optional[str] = typer.Option(None, "--part-id", help="Regex taking the part id from the file name (first group)."),
        station: Optional[str] = typer.Option(None, "--station", help="Test station, stored with each result."),
        operator: Optional[str] = typer.Option(None, "--operator", help="Operator, stored with each result."),
        debug: bool = DEBUG_OPTION,
    ) -> None:
        """Measure every mode of each recording: f_d, beta, f_n, zeta, Q, loss factor, dB/s, T60."""
        from ..pipeline import AnalysisOptions, analyze_many

        started = time.perf_counter()

        def run():
            bands = [parse_band(b) for b in band] if band else None
            options = dict(channel=parse_channel(channel), column=column, sample_rate=sample_rate, method=method, bands=bands,
                           max_modes=max_modes, min_snr_db=min_snr_db, min_hit_snr_db=min_hit_snr_db,
                           keep_double_hits=keep_double_hits)
            AnalysisOptions(method=method, bands=bands, max_modes=max_modes, min_snr_db=min_snr_db,
                            min_hit_snr_db=min_hit_snr_db)
            paths = expand_inputs(files)
            bar, task = progress_bar(on_terminal(json_out) and len(paths) > 1, len(paths), "analysing")
            with bar:
                done = analyze_many(paths, jobs=jobs or default_jobs(), progress=lambda _a: bar.advance(task), **options)
            return options, done

        options, analyses = guarded(run, debug=debug)
        if debug:
            for a in analyses:
                if a.error is not None:
                    from ..pipeline import analyze_file

                    analyze_file(a.path, **options)  # raises with the traceback
        for a in analyses:
            if a.error is not None:
                error_line(f"{a.path}: {a.error.message}" if a.path and a.path not in a.error.message else a.error.message)
        if json_out:
            from ..results import results_document

            print_json(results_document(analyses))
        else:
            for a in analyses:
                sys.stdout.write(format_table(a))
        if csv_out is not None:
            guarded(lambda: write_csv(analyses, str(csv_out)), debug=debug)
        _render(analyses, plot, plot_format, report, options, debug)
        if store:
            guarded(lambda: _store(analyses, db, part_id, station, operator), debug=debug)
        errors = sum(1 for a in analyses if a.error is not None)
        if len(analyses) > 1 and not json_out:
            typer.echo(f"{len(analyses)} files: {len(analyses) - errors} analysed, {errors} errors, "
                       f"{sum(len(a.modes) for a in analyses)} modes in {time.perf_counter() - started:.1f} s")
        raise typer.Exit(EXIT_ERROR if errors else EXIT_OK)


def _store(analyses, db, part_id, station, operator) -> None:
    from ..store import ResultStore, part_id_from_path
    from ._common import resolve_db

    path = resolve_db(db)
    with ResultStore(path) as st:
        for a in analyses:
            st.record_analysis(a, part_id=part_id_from_path(a.path or "array", part_id), station=station,
                               operator=operator)
    typer.echo(f"stored {len(analyses)} result(s) in {path}", err=True)


def _render(analyses, plot, plot_format, report, options, debug) -> None:
    if plot is None and report is None:
        return
    try:
        from . import render
    except ImportError:  # plots and reports not built yet
        error_line("plots and reports are not available in this build")
        raise typer.Exit(EXIT_ERROR) from None
    if plot is not None:
        guarded(lambda: render.write_plots(analyses, plot, plot_format), debug=debug)
    if report is not None:
        guarded(lambda: render.write_report(analyses, report, options), debug=debug)
