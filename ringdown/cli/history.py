"""``ringdown history``: the stored results of checked (and analysed) parts, as a table, JSON, CSV or run chart."""

from __future__ import annotations

import csv
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Optional

import typer

from ..base.numfmt import fmt_value
from ._common import EXIT_EPILOG, EXIT_ERROR, error_line, guarded, print_json, usage_error
from ._options import Db, Debug, Json

if TYPE_CHECKING:
    from ..inspection.store import StoredResult

__all__ = ["register", "format_history"]


def _f(v, digits: int) -> str:
    return fmt_value(v, digits, missing="-")


def _n_modes(records) -> int:
    seen = [
        m.get("ref_index") or (m.get("mode_index") if r.kind == "analysis" else 0) or 0
        for r in records
        for m in r.modes
    ]
    return min(max(seen or [0]), 6)


def format_history(records: Sequence[StoredResult]) -> str:
    """A text table: one line per stored test (names with control characters shown escaped)."""
    from ..inspection.check import verdict_kind
    from ..io.outputs import shown

    n = _n_modes(records)
    head = (
        ["id", "tested (UTC)", "part", "verdict", "station", "operator"]
        + [f"f{j} [Hz]" for j in range(1, n + 1)]
        + ["first reason"]
    )
    rows = []
    for r in records:
        fs = []
        for j in range(1, n + 1):
            m = r.mode_for(j)
            fs.append(_f(None if m is None else m.get("f_d_hz"), 6))
        reason = r.reasons[0]["message"] if r.reasons else (r.error or "")
        kind = verdict_kind(r.verdict, [str(n.get("code")) for n in r.notes])
        verdict = "PASS (advisory)" if kind == "pass_advisory" else shown(r.verdict or r.kind).upper()
        rows.append(
            [
                str(r.id),
                shown(str(r.tested_utc)[:19].replace("T", " ")),
                shown(r.part_id),
                verdict,
                shown(r.station or "-"),
                shown(r.operator or "-"),
                *fs,
                shown(reason),
            ]
        )
    widths = [max(len(h), *(len(x[i]) for x in rows)) if rows else len(h) for i, h in enumerate(head)]
    lines = ["  ".join(h.ljust(w) for h, w in zip(head, widths)).rstrip()]
    for x in rows:
        lines.append("  ".join(v.ljust(w) for v, w in zip(x, widths)).rstrip())
    return "\n".join(lines) + "\n"


def _write_csv(records, path: str) -> None:
    n = _n_modes(records)
    head = [
        "id",
        "kind",
        "part_id",
        "path",
        "sha256",
        "tested_utc",
        "station",
        "operator",
        "tool_version",
        "limits_sha256",
        "verdict",
        "mahalanobis",
        "uniform_shift",
        "reasons",
        "error",
    ]
    for j in range(1, n + 1):
        head += [f"mode{j}_f_d_hz", f"mode{j}_f_d_hz_u", f"mode{j}_zeta", f"mode{j}_zeta_u", f"mode{j}_q"]
    from ..io.outputs import atomic_write, csv_row

    with atomic_write(path, newline="", what="CSV") as fh:
        w = csv.writer(fh)
        w.writerow(head)
        for r in records:
            row = [
                r.id,
                r.kind,
                r.part_id,
                r.path,
                r.sha256,
                r.tested_utc,
                r.station,
                r.operator,
                r.tool_version,
                r.limits_sha256,
                r.verdict,
                r.mahalanobis,
                r.uniform_shift,
                "; ".join(str(x.get("message", "")) if isinstance(x, dict) else str(x) for x in r.reasons),
                r.error,
            ]
            for j in range(1, n + 1):
                m = r.mode_for(j) or {}
                row += [m.get("f_d_hz"), m.get("f_d_hz_u"), m.get("zeta"), m.get("zeta_u"), m.get("q")]
            w.writerow(csv_row(row))


Part = Annotated[Optional[str], typer.Option("--part", help="Only this part id.")]
Since = Annotated[Optional[str], typer.Option("--since", help="From this date or date-time (ISO, UTC).")]
Until = Annotated[Optional[str], typer.Option("--until", help="Up to this date (whole day) or date-time.")]
Verdict = Annotated[Optional[str], typer.Option("--verdict", help="Only pass, fail or error.")]
Kind = Annotated[Optional[str], typer.Option("--kind", help="Only 'check' or 'analysis' records.")]
CsvOut = Annotated[Optional[str], typer.Option("--csv", help="Write the records to this CSV file.")]
RunChart = Annotated[
    Optional[str],
    typer.Option("--plot", help="Write a run chart; the name's ending gives the format: .png, .svg or .pdf."),
]
ChartLimits = Annotated[
    Optional[str],
    typer.Option(
        "--limits", help="Draw these limits on the run chart (default: the limits each part was checked with)."
    ),
]
ParquetExport = Annotated[
    Optional[str],
    typer.Option(
        "--parquet",
        help="Write the records, one row per mode, to this Parquet dataset folder (needs the 'cluster' extra).",
    ),
]


def register(app: typer.Typer) -> None:
    """Add the ``history`` command to ``app``."""
    app.command("history", epilog=EXIT_EPILOG)(history)


def history(
    db: Db = None,
    part: Part = None,
    since: Since = None,
    until: Until = None,
    verdict: Verdict = None,
    kind: Kind = None,
    json_out: Json = False,
    csv_out: CsvOut = None,
    plot: RunChart = None,
    limits_path: ChartLimits = None,
    parquet_out: ParquetExport = None,
    debug: Debug = False,
) -> None:
    """Show stored results: a table, JSON, CSV, or a run chart of every mode in test order."""
    from ..inspection.store import ResultStore
    from ._common import resolve_db

    path = resolve_db(db)
    if plot:
        from .render import check_plot_format

        guarded(
            lambda: check_plot_format(Path(plot).suffix.lower().lstrip("."), "the --plot file's ending"),
            debug=debug,
        )
    if json_out and csv_out:
        usage_error("--json and --csv are exclusive; choose one")
    if csv_out:
        from ..io.outputs import check_writable

        guarded(lambda: check_writable(csv_out, "CSV"), debug=debug)
    if not Path(path).exists():
        error_line(f"no results database at '{path}'; run 'ringdown check' first or give --db")
        raise typer.Exit(EXIT_ERROR)

    def run():
        with ResultStore(path, read_only=True) as store:
            recs = store.query(part=part, since=since, until=until, verdict=verdict, kind=kind)
            docs = store.limits_documents()
        return recs, docs

    records, docs = guarded(run, debug=debug)
    if csv_out:
        guarded(lambda: _write_csv(records, csv_out), debug=debug)
    if parquet_out:
        from ..inspection.parquet import export_history

        sink = guarded(lambda: export_history(path, records, parquet_out), debug=debug)
        typer.echo(f"wrote {sink.rows_written} row(s) of {len(records)} record(s) to {parquet_out}", err=True)
    if plot:
        guarded(lambda: _write_run_chart(records, docs, plot, limits_path), debug=debug)
    if json_out:
        print_json({"database": path, "records": [r.to_dict() for r in records]})
    elif not csv_out:
        typer.echo(format_history(records), nl=False)
        typer.echo(f"{len(records)} record(s) in {path}")


def _write_run_chart(records, docs, plot: str, limits_path: str | None) -> None:
    """The run chart of ``records`` to ``plot`` (format from its ending), renamed into place."""
    import io

    from ..io.outputs import atomic_write
    from ..render.history_plot import plot_run_chart

    lim = None
    if limits_path:
        from ..inspection.limits_file import read_limits

        lim = read_limits(limits_path)
    fig = plot_run_chart(records, limits_by_sha=docs, limits=lim)
    buf = io.BytesIO()
    try:
        fig.savefig(buf, dpi=110, format=Path(plot).suffix.lstrip(".").lower() or "png")
    except (OSError, ValueError) as exc:
        from ..base.errors import OutputError

        raise OutputError(f"cannot write the run chart to '{plot}': {exc}; choose a writable file") from exc
    with atomic_write(plot, "wb", what="the run chart to") as fh:  # never half a figure
        fh.write(buf.getvalue())
