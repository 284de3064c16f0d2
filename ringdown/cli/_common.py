"""Helpers shared by every command: exit statuses, error reporting, JSON output, path expansion."""

from __future__ import annotations

import contextlib
import glob
import json
import os
import sys
from collections.abc import Callable, Iterable, Iterator
from pathlib import Path
from typing import Any, Optional, TypeVar

import typer

from ..base.errors import RingdownError
from ..io.formats import SUFFIXES as FORMAT_SUFFIXES

T = TypeVar("T")

#: Exit status when every input was handled.
EXIT_OK = 0
#: Exit status when any part failed its limits (``check``).
EXIT_FAIL = 1
#: Exit status when any input could not be handled (errors win over failures).
EXIT_ERROR = 2
#: Exit status of a usage error: an unknown option, a bad option value, a missing argument
#: (``EX_USAGE`` of BSD ``sysexits.h``).
EXIT_USAGE = 64
#: Exit status after Ctrl-C (128 + SIGINT, the shell's convention).
EXIT_INTERRUPTED = 130

#: The exit statuses, as every command's ``--help`` shows them.
EXIT_EPILOG = (
    "Exit status: 0 done (every part passed); 1 a part FAILED its limits (check only); "
    "2 some input could not be analysed or a file (limits, history, output) could not be "
    "used; 64 usage error (bad option or argument); 130 interrupted."
)


def time_window(start: Optional[float], end: Optional[float]) -> dict:
    """The analysis options ``start_s``/``end_s`` given on the command line (only those given)."""
    return {k: v for k, v in (("start_s", start), ("end_s", end)) if v is not None}


_AUDIO_AND_TEXT = (
    ".wav",
    ".flac",
    ".ogg",
    ".oga",
    ".aiff",
    ".aif",
    ".au",
    ".caf",
    ".w64",
    ".rf64",
    ".csv",
    ".txt",
    ".tsv",
    ".dat",
) + FORMAT_SUFFIXES

#: Help of every command's ``--channel`` option.
CHANNEL_HELP = (
    "Channel: a 1-based number, or a name (TDMS 'group/channel' or channel, UFF ID line 1, "
    "MATLAB/HDF5 variable or dataset path). Default: the first."
)


def parse_channel(text: Optional[str]) -> int | str | None:
    """``--channel`` as given: digits become an int (1-based index), anything else stays a name."""
    if text is None:
        return None
    stripped = text.strip()
    return int(stripped) if stripped.isdigit() else stripped


def error_line(message: str) -> None:
    """Print one error line on stderr (never a traceback); control characters shown escaped."""
    from ..io.outputs import shown

    typer.echo(f"ringdown: error: {shown(message)}", err=True)


def note_line(message: str) -> None:
    """Print one note line on stderr."""
    from ..io.outputs import shown

    typer.echo(f"ringdown: note: {shown(message)}", err=True)


def usage_guarded(fn: Callable[[], T], *, debug: bool) -> T:
    """Run ``fn`` (option parsing); a ``RingdownError`` is a usage error: one line, exit 64."""
    return guarded(fn, debug=debug, status=EXIT_USAGE)


def usage_error(message: str) -> None:
    """A usage error found by a command itself: one line, exit 64."""
    error_line(message)
    raise typer.Exit(EXIT_USAGE)


def guarded(fn: Callable[[], T], *, debug: bool, status: int = EXIT_ERROR) -> T:
    """Run ``fn``; a ``RingdownError`` becomes one stderr line and exit ``status`` (2)."""
    try:
        return fn()
    except RingdownError as exc:
        if debug:
            raise
        error_line(str(exc))
        raise typer.Exit(status) from None


#: Set by a Ctrl-C during a batch (see :func:`catching_interrupts`).
_INTERRUPTED: list[bool] = [False]


@contextlib.contextmanager
def _sigint_handled_by(handler):
    """``handler`` for SIGINT inside the block (main thread only: elsewhere nothing changes)."""
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        yield
        return
    old = signal.signal(signal.SIGINT, handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, old)


@contextlib.contextmanager
def catching_interrupts() -> Iterator[None]:
    """During a batch: Ctrl-C raises ``KeyboardInterrupt`` as usual and is also remembered.

    A library call that happens to be running when the signal lands may turn the interrupt into
    an ordinary exception (so the file would come back as an error and the batch go on); the
    loop calls :func:`check_interrupt` before taking each result, so such a result is never
    stored and the batch stops. Installing the handler also undoes a SIGINT that the process
    inherited as ignored (as a script's background jobs are started).
    """

    def handler(signum, frame):
        _INTERRUPTED[0] = True
        raise KeyboardInterrupt

    _INTERRUPTED[0] = False
    with _sigint_handled_by(handler):
        yield


def check_interrupt() -> None:
    """Raise ``KeyboardInterrupt`` if Ctrl-C came during the batch (before a result is taken)."""
    if _INTERRUPTED[0]:
        raise KeyboardInterrupt


@contextlib.contextmanager
def sigint_deferred() -> Iterator[None]:
    """Hold Ctrl-C back while one result is being stored, so it is stored whole or not at all
    and "done (stored)" is true; the interrupt is raised as soon as the block ends."""
    caught: list[int] = []

    def hold(signum, frame):
        caught.append(signum)
        _INTERRUPTED[0] = True

    try:
        with _sigint_handled_by(hold):
            yield
    finally:
        if caught:
            raise KeyboardInterrupt


def print_json(document: Any) -> None:
    """Write a JSON document to stdout (NaN is never produced: missing values are null)."""
    sys.stdout.write(json.dumps(document, indent=2, allow_nan=False) + "\n")


def print_json_line(record: Any) -> None:
    """Write one JSON Lines record to stdout and flush, so a pipe sees it at once."""
    sys.stdout.write(json.dumps(record, allow_nan=False, separators=(",", ":")) + "\n")
    sys.stdout.flush()


#: The input name that means standard input.
STDIN = "-"


def uses_stdin(paths: Iterable[str]) -> bool:
    """Whether ``-`` (standard input) is among the inputs; given twice it is an error."""
    n = sum(1 for p in paths if p == STDIN)
    if n > 1:
        from ..base.errors import ParameterError

        raise ParameterError("'-' (standard input) is given more than once; standard input holds one recording")
    return n == 1


class Inputs(list):
    """Expanded input paths; ``problems`` counts the folders and patterns that held no recording
    (each already reported on stderr)."""

    problems: int = 0


#: First line of every CSV that ringdown writes (analyze, check, history, compare): such files
#: are outputs, not recordings, and are skipped when a folder or pattern is expanded.
_OUTPUT_CSV_HEADS = ("path,sha256,channel,", "part_id,path,sha256,verdict,", "id,kind,part_id,path,", "status,index,")


def _is_own_output(path: Path) -> bool:
    if path.suffix.lower() != ".csv":
        return False
    try:
        with open(path, "rb") as fh:
            head = fh.read(200).decode("utf-8", "replace").lstrip("\ufeff")
    except OSError:
        return False
    return head.startswith(_OUTPUT_CSV_HEADS)


def expand_inputs(items: Iterable[str], *, recursive: bool = False, exclude: Iterable[Any] = ()) -> Inputs:
    """Expand folders (their recordings, sorted) and glob patterns; keep other names as given.

    A name that matches nothing is kept, so that the analysis reports it as a missing file. A
    folder (whatever its name, ``x.wav`` too) or pattern that holds no recording is reported on
    one line and counted in ``problems``. Expanding skips this run's outputs (``exclude``) and
    files ringdown wrote (a CSV with a ringdown header), saying so. ``recursive`` descends into
    sub-folders.
    ``-`` (standard input) is kept as it is.
    """
    skip = {os.path.realpath(str(e)) for e in exclude if e}
    out = Inputs()
    skipped: list[str] = []

    def keep(q: Path) -> bool:
        if not q.is_file() or q.suffix.lower() not in _AUDIO_AND_TEXT:
            return False
        if os.path.realpath(q) in skip or _is_own_output(q):
            skipped.append(str(q))
            return False
        return True

    for item in items:
        p = Path(item)
        if item == STDIN:
            out.append(item)
        elif p.is_dir():
            found = sorted(str(q) for q in (p.rglob("*") if recursive else p.iterdir()) if keep(q))
            if not found:
                subs = not recursive and any(q.is_dir() for q in p.iterdir())
                error_line(
                    f"folder {item!r} holds no recordings ({', '.join(_AUDIO_AND_TEXT)})"
                    + ("; add --recursive to look in its sub-folders" if subs else "")
                )
                out.problems += 1
            out.extend(found)
        elif any(ch in item for ch in "*?[") and not p.exists():
            matches = sorted(glob.glob(item, recursive=True))
            found = [m for m in matches if not Path(m).is_dir() and keep(Path(m))]
            for d in (m for m in matches if Path(m).is_dir()):
                found.extend(
                    sorted(str(q) for q in (Path(d).rglob("*") if recursive else Path(d).iterdir()) if keep(q))
                )
            if not found:
                error_line(f"pattern {item!r} matches no recordings")
                out.problems += 1
            out.extend(found)
        else:
            out.append(item)
    if skipped:
        note_line(
            f"skipped {len(skipped)} file(s) written by ringdown: {', '.join(skipped[:3])}"
            + (" ..." if len(skipped) > 3 else "")
        )
    return out


def default_jobs() -> int:
    """The default number of worker processes of a batch: the number of cores."""
    return max(os.cpu_count() or 1, 1)


def check_jobs(jobs: Optional[int]) -> None:
    """``--jobs`` below 1 is a ParameterError (a usage error where it is checked before any work)."""
    if jobs is not None and jobs < 1:
        from ..base.errors import ParameterError

        raise ParameterError(f"--jobs must be >= 1; got {jobs}")


def batch_jobs(jobs: Optional[int], paths: Iterable[str]) -> int:
    """Worker processes of a batch: 1 when standard input is among ``paths`` (it is read in this
    process: workers do not share it), else ``--jobs``, else :func:`default_jobs`."""
    check_jobs(jobs)
    return 1 if uses_stdin(paths) else (jobs or default_jobs())


#: Environment variable naming the results database (read here, in the CLI layer only).
DB_ENV = "RINGDOWN_DB"


def resolve_db(db: Optional[str]) -> str:
    """The database path: ``--db``, else ``$RINGDOWN_DB``, else ``ringdown.sqlite`` here."""
    from ..inspection.store import DEFAULT_DB

    return db or os.environ.get(DB_ENV) or DEFAULT_DB


def on_terminal(json_out: bool) -> bool:
    """Whether a progress bar may be shown: a terminal on both streams and no JSON on stdout."""
    return not json_out and sys.stdout.isatty() and sys.stderr.isatty()


def progress_bar(enabled: bool, total: int, label: str) -> tuple[Any, Any]:
    """A rich progress bar on stderr when enabled, else a no-op with the same interface.

    Returns ``(context_manager, task_id)``; call ``cm.advance(task_id)`` per finished item.
    """
    if enabled:
        from rich.console import Console
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

        prog = Progress(
            TextColumn(label),
            BarColumn(),
            MofNCompleteColumn(),
            TimeRemainingColumn(),
            console=Console(stderr=True),
            transient=True,
        )
        return prog, prog.add_task(label, total=total)

    class _Null:
        def __enter__(self):
            return self

        def __exit__(self, *exc):
            return False

        def advance(self, *a, **k):
            pass

    return _Null(), None
