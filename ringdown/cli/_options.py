"""Options shared by every command, defined once (typer ``Annotated`` style).

Every command that reads recordings (``analyze``, ``compare``, ``limits learn``, ``check``) takes
the reader options below under the same names, types and help; every command that writes a
report takes the report header options. A command declares them as
``channel: Channel = None`` and turns them into keyword arguments with :func:`reader_options`
and :func:`report_header`.

To add a reader option: declare its ``Annotated`` type here, add its name to
:data:`READER_OPTIONS`, accept it in :func:`reader_options`, and add ``name: Type = None`` to the
four commands (``tests/test_cli_options.py`` checks that they all accept the same set).
"""

from __future__ import annotations

from typing import Annotated, Optional

import typer

from ._common import CHANNEL_HELP, parse_channel

__all__ = [
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


def reader_options(channel=None, column=None, sample_rate=None) -> dict:
    """The reader keyword arguments that were given (None values left out)."""
    given = {"channel": parse_channel(channel), "column": parse_channel(column), "sample_rate": sample_rate}
    return {k: v for k, v in given.items() if v is not None}


def report_header(title=None, notes=None, serial=None, **fields) -> dict:
    """Keyword arguments of ``ringdown.render.report.render_report`` for the header options.

    ``fields`` are further header lines (station, operator, limits ...); None values are left out.
    """
    pairs = [("serial", serial)] + list(fields.items())
    return {"title": title, "notes": notes, "fields": [(k, v) for k, v in pairs if v not in (None, "")]}
