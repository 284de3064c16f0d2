"""Writing outputs that cannot be forged, injected or left half-written.

Three rules, used by every command and writer (CSV, JSON, HTML, TOML, figures):

* **Names are shown escaped.** :func:`shown` replaces control characters (C0, DEL, C1), line and
  paragraph separators and the bidirectional-text controls (U+061C, U+200E/F, U+202A-U+202E,
  U+2066-U+2069) in a name with a visible escape (``\\n``, ``\\t``, ``\\u202e``), so a newline in a
  file name cannot forge a line of output and a right-to-left override cannot reorder what is
  shown. Used for terminal text, CSV cells and the HTML report.
* **CSV cells cannot be formulas.** :func:`csv_cell` prefixes a single quote ``'`` to every text
  cell that starts with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return, the characters a
  spreadsheet reads as the start of a formula (the usual mitigation of "CSV injection", OWASP);
  numbers are written as numbers. A part id ``-12`` is therefore written ``'-12``.
* **Outputs appear whole or not at all.** :func:`atomic_write` writes to a temporary file in the
  same folder and renames it into place (``os.replace``, atomic on POSIX), so a killed run or a
  full disk never leaves a truncated or empty output; :func:`check_writable` checks, before any
  work starts, that an output can be created.
"""

from __future__ import annotations

import contextlib
import os
import re
import tempfile
from collections.abc import Iterable, Iterator
from pathlib import Path
from typing import Any

from ..base.errors import OutputError

__all__ = ["shown", "csv_cell", "csv_row", "atomic_write", "check_writable", "remove_stale"]

# C0 controls, DEL, C1 controls, line/paragraph separators, bidi embedding/override/isolate marks.
_HIDDEN = re.compile("[\x00-\x1f\x7f-\x9f\u061c\u200e\u200f\u2028\u2029\u202a-\u202e\u2066-\u2069\ufeff]")
_NAMED = {"\n": "\\n", "\r": "\\r", "\t": "\\t"}
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def _escape(m: re.Match) -> str:
    ch = m.group(0)
    named = _NAMED.get(ch)
    if named is not None:
        return named
    code = ord(ch)
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"


def shown(text: Any) -> str:
    """``text`` with control and bidi characters replaced by visible escapes (one line, same order).

    >>> shown("part\\nPASS")
    'part\\\\nPASS'
    >>> shown("abc\\u202edef")
    'abc\\\\u202edef'
    """
    return _HIDDEN.sub(_escape, str(text))


def csv_cell(value: Any) -> Any:
    """One CSV cell: ``None`` as empty, numbers as they are, text escaped (:func:`shown`) and with a
    ``'`` before a leading ``= + - @``, tab or carriage return."""
    if value is None:
        return ""
    if isinstance(value, (bool, int, float)):
        return value
    text = str(value)
    starts_formula = text.startswith(_FORMULA_START)
    text = shown(text)
    if starts_formula or text.startswith(_FORMULA_START):
        text = "'" + text
    return text


def csv_row(values: Iterable[Any]) -> list:
    """Every cell of a row through :func:`csv_cell`."""
    return [csv_cell(v) for v in values]


def _temp_in(path: Path, mode: str):
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".partial", dir=str(path.parent or Path(".")))
    return fd, tmp


@contextlib.contextmanager
def atomic_write(
    path: str | os.PathLike,
    mode: str = "w",
    *,
    encoding: str | None = "utf-8",
    newline: str | None = None,
    what: str = "output",
) -> Iterator[Any]:
    """Open a temporary file beside ``path``; on success rename it onto ``path``.

    On any error (or interruption) the temporary file is removed and ``path`` is untouched.
    ``OSError`` becomes :class:`~ringdown.base.errors.OutputError` (a ParameterError) naming ``what`` and the path.
    """
    p = Path(path)
    try:
        fd, tmp = _temp_in(p, mode)
    except OSError as exc:
        raise OutputError(
            f"cannot write {what} {shown(str(p))!r}: {exc.strerror or exc}; choose a writable path"
        ) from None
    try:
        binary = "b" in mode
        text_options: dict[str, Any] = {} if binary else {"encoding": encoding, "newline": newline}
        with os.fdopen(fd, mode, **text_options) as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        try:
            os.chmod(tmp, 0o666 & ~_umask())
        except OSError:
            pass
        os.replace(tmp, p)
    except OSError as exc:
        _unlink(tmp)
        raise OutputError(
            f"cannot write {what} {shown(str(p))!r}: {exc.strerror or exc}; free disk space or choose a writable path"
        ) from None
    except BaseException:
        _unlink(tmp)
        raise


def _umask() -> int:
    m = os.umask(0)
    os.umask(m)
    return m


def _unlink(path: str) -> None:
    try:
        os.unlink(path)
    except OSError:
        pass


def check_writable(path: str | os.PathLike, what: str, *, folder: bool = False) -> None:
    """Check, before any work, that ``path`` (a file, or with ``folder`` a folder) can be written.

    A file's folder must exist and accept a new file (a temporary probe file is created and
    removed); ``path`` must not be a folder. A folder is created when missing.

    Raises
    ------
    OutputError (a ParameterError)
        One line naming ``what`` and the path.
    """
    p = Path(path)
    name = shown(str(p))
    if folder:
        try:
            p.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(
                f"cannot create {what} folder {name!r}: {exc.strerror or exc}; choose a writable folder"
            ) from None
        target = p
    else:
        if p.is_dir():
            raise OutputError(f"{what} {name!r} is a folder; give a file name")
        target = p.parent if str(p.parent) else Path(".")
        if not target.is_dir():
            raise OutputError(
                f"cannot write {what} {name!r}: folder {shown(str(target))!r} does not exist; "
                "create it or choose another path"
            )
    try:
        fd, tmp = tempfile.mkstemp(prefix=".ringdown-probe.", dir=str(target))
        os.close(fd)
        os.unlink(tmp)
    except OSError as exc:
        raise OutputError(f"cannot write {what} {name!r}: {exc.strerror or exc}; choose a writable path") from None


def remove_stale(path: str | os.PathLike) -> None:
    """Remove an output left by an earlier run, so that a killed run cannot leave it looking current."""
    p = Path(path)
    if p.is_file() or p.is_symlink():
        try:
            p.unlink()
        except OSError as exc:
            raise OutputError(
                f"cannot replace {shown(str(p))!r}: {exc.strerror or exc}; choose a writable path"
            ) from None
