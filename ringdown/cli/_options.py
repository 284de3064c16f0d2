"""Options shared by several commands, each defined once (typer's ``Annotated`` style).

A command declares a shared option by its alias, ``channel: Channel = None``, so that the name,
type and help are the same in every command that takes it; the default stays in the command's
signature (typer copies the ``typer.Option`` of an alias before it sets the default). An option
only one command takes is declared in that command's module, in the same style.

Every command that reads recordings (``analyze``, ``compare``, ``limits learn``, ``check``) takes
the reader options under the same names, types and help; every command that writes a report takes
the report header options. :func:`reader_options` and :func:`report_header` turn them into keyword
arguments of the library.

To add a reader option: declare its ``Annotated`` type here, add its name to
:data:`READER_OPTIONS`, accept it in :func:`reader_options`, and add ``name: Type = None`` to the
four commands (``tests/test_cli_options.py`` checks that they all accept the same set).
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Any, Optional

import typer

from ._common import CHANNEL_HELP, parse_channel

__all__ = [
    "Band",
    "Db",
    "Debug",
    "Jobs",
    "Json",
    "MaxModes",
    "Method",
    "MethodIfGiven",
    "MinHitSnrDb",
    "MinSnrDb",
    "MinSnrDbIfGiven",
    "Operator",
    "Parquet",
    "PartIdRegex",
    "Recursive",
    "Report",
    "Scheduler",
    "Station",
    "READER_OPTIONS",
    "WINDOW_OPTIONS",
    "Channel",
    "Column",
    "SampleRate",
    "Start",
    "End",
    "Title",
    "Notes",
    "Serial",
    "Jsonl",
    "reader_options",
    "report_header",
]

#: Option names (keyword names of ``ringdown.read_recording``) every reading command accepts.
READER_OPTIONS = ("channel", "column", "sample_rate")
#: The time window (analysis options ``start_s``/``end_s``) of analyze, compare, limits learn, check.
WINDOW_OPTIONS = ("start", "end")

_READING = "Reading recordings"
_REPORT = "Report header"

Channel = Annotated[Optional[str], typer.Option("--channel", help=CHANNEL_HELP, rich_help_panel=_READING)]
Column = Annotated[
    Optional[str],
    typer.Option(
        "--column",
        help="Text files: data column, a 1-based number (time column not counted) or a header name.",
        rich_help_panel=_READING,
    ),
]
SampleRate = Annotated[
    Optional[float],
    typer.Option(
        "--sample-rate",
        help="Sample rate, Hz, for files that do not state it (text without a time column, TDMS/MAT/HDF5 without one).",
        rich_help_panel=_READING,
    ),
]

Start = Annotated[
    Optional[float],
    typer.Option(
        "--start",
        help="Analyse from this time on, s from the record's first sample (check: as learned unless given).",
        rich_help_panel=_READING,
    ),
]
End = Annotated[
    Optional[float],
    typer.Option(
        "--end",
        help="Analyse up to this time, s from the record's first sample (check: as learned unless given).",
        rich_help_panel=_READING,
    ),
]

Title = Annotated[
    Optional[str],
    typer.Option("--title", help="Report title, printed at the top of every page.", rich_help_panel=_REPORT),
]
Notes = Annotated[
    Optional[str],
    typer.Option(
        "--notes", help="Free text shown under the report title (set-up, fixture, purpose).", rich_help_panel=_REPORT
    ),
]
Serial = Annotated[
    Optional[str],
    typer.Option(
        "--serial", help="Serial or part number, printed in the report header of every page.", rich_help_panel=_REPORT
    ),
]

Jsonl = Annotated[
    bool, typer.Option("--jsonl", help="Print one JSON record per line as each result is ready (JSON Lines).")
]
Json = Annotated[bool, typer.Option("--json", help="Print one JSON document on stdout instead of the text.")]
Report = Annotated[Optional[Path], typer.Option("--report", help="Also write a self-contained HTML report.")]

Debug = Annotated[bool, typer.Option("--debug", help="Show the full traceback of an error.")]
Recursive = Annotated[bool, typer.Option("--recursive", "-r", help="Look for recordings in sub-folders too.")]
Jobs = Annotated[
    Optional[int], typer.Option("--jobs", "-j", help="Worker processes for a batch (default: the number of cores).")
]
Scheduler = Annotated[
    Optional[str],
    typer.Option(
        "--scheduler",
        help="Run on a Dask cluster: scheduler ADDRESS "
        "(tcp://HOST:8786) or local:N worker processes (needs the 'cluster' extra).",
    ),
]
Parquet = Annotated[
    Optional[Path],
    typer.Option(
        "--parquet",
        help="Also append one row per mode to this Parquet "
        "dataset folder, as results arrive (needs the 'cluster' extra).",
    ),
]

# the results history
Db = Annotated[
    Optional[str],
    typer.Option("--db", help="Results database, SQLite (default $RINGDOWN_DB, else ringdown.sqlite here)."),
]
Station = Annotated[Optional[str], typer.Option("--station", help="Test station, stored with each result.")]
Operator = Annotated[Optional[str], typer.Option("--operator", help="Operator, stored with each result.")]
PartIdRegex = Annotated[
    Optional[str],
    typer.Option(
        "--part-id",
        help="Regex taking the part id from the file name (first group, or the whole match); default the file stem.",
    ),
]

# analysis options (the defaults are AnalysisOptions'; a command that leaves them to the limits
# or to the library declares them None: the ...IfGiven aliases, same option and help)
_METHOD = typer.Option("--method", help="Estimator reported per mode: auto, envelope, decrement, half_power, pencil.")
Method = Annotated[str, _METHOD]
MethodIfGiven = Annotated[Optional[str], _METHOD]
Band = Annotated[
    Optional[list[str]],
    typer.Option(
        "--band", metavar="LOW:HIGH", help="Analyse this band LOW:HIGH in Hz instead of searching (repeatable)."
    ),
]
MaxModes = Annotated[Optional[int], typer.Option("--max-modes", help="Keep at most this many modes (the strongest).")]
_MIN_SNR = typer.Option(
    "--min-snr-db",
    help="Fits end where a mode is this far above its band noise, dB (10: the margin ISO 3382-2 keeps above the noise).",
)
MinSnrDb = Annotated[float, _MIN_SNR]
MinSnrDbIfGiven = Annotated[Optional[float], _MIN_SNR]
MinHitSnrDb = Annotated[
    float,
    typer.Option(
        "--min-hit-snr-db", help="A hit must rise this far above the noise floor, dB (20: common practice, no source)."
    ),
]


def reader_options(
    channel: Optional[str] = None, column: Optional[str] = None, sample_rate: Optional[float] = None
) -> dict:
    """The reader keyword arguments that were given (None values left out)."""
    given = {"channel": parse_channel(channel), "column": parse_channel(column), "sample_rate": sample_rate}
    return {k: v for k, v in given.items() if v is not None}


def report_header(
    title: Optional[str] = None, notes: Optional[str] = None, serial: Optional[str] = None, **fields: Any
) -> dict:
    """Keyword arguments of ``ringdown.render.report.render_report`` for the header options.

    ``fields`` are further header lines (station, operator, limits ...); None values are left out.
    """
    pairs = [("serial", serial)] + list(fields.items())
    return {"title": title, "notes": notes, "fields": [(k, v) for k, v in pairs if v not in (None, "")]}
