"""Helpers shared by every command: error reporting, JSON output, path expansion."""

from __future__ import annotations

import glob
import json
import os
import sys
from pathlib import Path
from typing import Any, Callable, Iterable, Optional, TypeVar

import typer

from ..errors import RingdownError
from ..formats import SUFFIXES as FORMAT_SUFFIXES

T = TypeVar("T")

#: Exit status when every input was handled.
EXIT_OK = 0
#: Exit status when any part failed its limits (``check``).
EXIT_FAIL = 1
#: Exit status when any input could not be handled (errors win over failures).
EXIT_ERROR = 2

DEBUG_OPTION = typer.Option(False, "--debug", help="Show the full traceback of an error.")

_AUDIO_AND_TEXT = (".wav", ".flac", ".ogg", ".oga", ".aiff", ".aif", ".au", ".caf", ".w64", ".rf64",
                   ".csv", ".txt", ".tsv", ".dat") + FORMAT_SUFFIXES

#: Help of every command's ``--channel`` option.
CHANNEL_HELP = ("Channel: a 1-based number, or a name (TDMS 'group/channel' or channel, UFF ID line 1, "
                "MATLAB/HDF5 variable or dataset path). Default: the first.")


def parse_channel(text: Optional[str]):
    """``--channel`` as given: digits become an int (1-based index), anything else stays a name."""
    if text is None:
        return None
    stripped = text.strip()
    return int(stripped) if stripped.isdigit() else stripped


def error_line(message: str) -> None:
    """Print one error line on stderr (never a traceback)."""
    typer.echo(f"ringdown: error: {message}", err=True)


def guarded(fn: Callable[[], T], *, debug: bool) -> T:
    """Run ``fn``; a ``RingdownError`` becomes one stderr line and exit status 2."""
    try:
        return fn()
    except RingdownError as exc:
        if debug:
            raise
        error_line(str(exc))
        raise typer.Exit(EXIT_ERROR) from None


def print_json(document: Any) -> None:
    """Write a JSON document to stdout (NaN is never produced: missing values are null)."""
    sys.stdout.write(json.dumps(document, indent=2, allow_nan=False) + "\n")


def expand_inputs(items: Iterable[str]) -> list[str]:
    """Expand folders (their recordings, sorted) and glob patterns; keep other names as given.

    A name that matches nothing is kept, so that the analysis reports it as a missing file.
    """
    out: list[str] = []
    for item in items:
        p = Path(item)
        if p.is_dir():
            out.extend(sorted(str(q) for q in p.iterdir() if q.is_file() and q.suffix.lower() in _AUDIO_AND_TEXT))
        elif any(ch in item for ch in "*?[") and not p.exists():
            matches = sorted(glob.glob(item, recursive=True))
            out.extend(matches if matches else [item])
        else:
            out.append(item)
    return out


def default_jobs() -> int:
    return max(os.cpu_count() or 1, 1)


#: Environment variable naming the results database (read here, in the CLI layer only).
DB_ENV = "RINGDOWN_DB"


def resolve_db(db: Optional[str]) -> str:
    """The database path: ``--db``, else ``$RINGDOWN_DB``, else ``ringdown.sqlite`` here."""
    from ..store import DEFAULT_DB

    return db or os.environ.get(DB_ENV) or DEFAULT_DB


def on_terminal(json_out: bool) -> bool:
    """Whether a progress bar may be shown: a terminal on both streams and no JSON on stdout."""
    return not json_out and sys.stdout.isatty() and sys.stderr.isatty()


def progress_bar(enabled: bool, total: int, label: str):
    """A rich progress bar on stderr when enabled, else a no-op with the same interface.

    Returns ``(context_manager, task_id)``; call ``cm.advance(task_id)`` per finished item.
    """
    if enabled:
        from rich.console import Console
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

        prog = Progress(TextColumn(label), BarColumn(), MofNCompleteColumn(), TimeRemainingColumn(),
                        console=Console(stderr=True), transient=True)
        return prog, prog.add_task(label, total=total)

    class _Null:
        def __enter__(self):
            return self

        def __exit__(self, *exc):
            return False

        def advance(self, *a, **k):
            pass

    return _Null(), None
