"""Opening a recording's file, and the checks every reader of :mod:`ringdown.io` shares.

Regular files only (a FIFO, device or directory is refused in one line before it can block), the
size limit (a quarter of physical memory by default), the one file hash of ringdown
(:func:`sha256_file`), and the checks of an option or a result that sound files, text files and the
formats of :mod:`ringdown.io.formats` all make: the sample rate, the sample count, the channel choice.
Every problem is a one-line :class:`~ringdown.base.errors.InputError` or
:class:`~ringdown.base.errors.ParameterError` naming the file.
"""

from __future__ import annotations

import hashlib
import math
import os
import re
import stat as _stat
from typing import BinaryIO

import numpy as np

from ..base.errors import InputError, ParameterError

__all__ = ["open_regular", "sha256_file", "MIN_SAMPLES"]

#: Fewest samples a recording may have. Below this no spectrum or decay fit is meaningful
#: (project choice, common practice, no source).
MIN_SAMPLES = 64

#: Relative tolerance between a sample rate passed in and the one a file states or implies
#: (0.1 %; common practice, no source).
_RATE_RTOL = 1e-3

_CHUNK = 1 << 20


def _check_rate(sample_rate: object, name: str) -> float:
    if isinstance(sample_rate, (int, float, np.integer, np.floating)) and not isinstance(sample_rate, bool):
        value = float(sample_rate)
        if math.isfinite(value) and value > 0:
            return value
    raise ParameterError(f"sample rate for {name!r} must be a finite number > 0 Hz; got {sample_rate!r}")


def _check_max_bytes(max_bytes: object, name: str) -> int:
    if max_bytes is None:
        return _default_max_bytes()
    if isinstance(max_bytes, (int, np.integer)) and not isinstance(max_bytes, bool) and max_bytes > 0:
        return int(max_bytes)
    raise ParameterError(f"max_bytes for {name!r} must be a whole number of bytes > 0; got {max_bytes!r}")


def _default_max_bytes() -> int:
    """A quarter of physical memory, or 4 GiB when the system does not say."""
    try:
        total = os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
        if total > 0:
            return int(total // 4)
    except (ValueError, OSError, AttributeError):
        pass
    return 4 << 30


def _limit_origin(max_bytes: int | None) -> str:
    return "max_bytes" if max_bytes is not None else "a quarter of physical memory"


def _fmt_bytes(n: float) -> str:
    for unit in ("bytes", "KiB", "MiB", "GiB", "TiB"):
        if n < 1024 or unit == "TiB":
            return f"{n:.0f} {unit}" if unit == "bytes" else f"{n:.1f} {unit}"
        n /= 1024
    return f"{n:.1f} TiB"  # pragma: no cover


def _kind(mode: int) -> str | None:
    """What a non-regular file is, in words (None for a regular file)."""
    if _stat.S_ISREG(mode):
        return None
    if _stat.S_ISDIR(mode):
        return "a directory"
    if _stat.S_ISFIFO(mode):
        return "a FIFO (named pipe)"
    if _stat.S_ISCHR(mode) or _stat.S_ISBLK(mode):
        return "a device"
    if _stat.S_ISSOCK(mode):
        return "a socket"
    return "not a regular file"


def _not_regular(name: str, kind: str) -> InputError:
    if kind == "a directory":
        return InputError(f"{name!r} is a directory, not a recording; give a file")
    return InputError(
        f"{name!r} is {kind}, not a regular file; ringdown reads recordings from regular files only "
        "(copy the data to a file first)"
    )


def _stat_size(name: str) -> int:
    try:
        st = os.stat(name)
    except FileNotFoundError:
        raise InputError(f"{name!r} does not exist; check the path") from None
    except OSError as exc:
        raise InputError(f"cannot open {name!r}: {exc.strerror or exc}; check the path") from exc
    kind = _kind(st.st_mode)
    if kind is not None:
        raise _not_regular(name, kind)
    if st.st_size == 0:
        raise InputError(f"{name!r} is empty (0 bytes); record or export it again")
    return int(st.st_size)


def open_regular(name: str) -> BinaryIO:
    """Open ``name`` for reading in binary, refusing anything but a regular file.

    The file is opened without blocking (a FIFO with no writer would block ``open`` forever),
    then checked with ``fstat`` on the open descriptor, so the check and the read concern the
    same file. Returns a binary file object.

    Raises
    ------
    InputError
        Missing, unreadable, a FIFO, a device, a socket or a directory; one line naming the file.
    """
    try:
        fd = os.open(name, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0))
    except FileNotFoundError:
        raise InputError(f"{name!r} does not exist; check the path") from None
    except IsADirectoryError:
        raise _not_regular(name, "a directory") from None
    except OSError as exc:
        raise InputError(f"cannot read {name!r}: {exc.strerror or exc}") from None
    try:
        kind = _kind(os.fstat(fd).st_mode)
        if kind is not None:
            raise _not_regular(name, kind)
        if hasattr(os, "set_blocking"):
            os.set_blocking(fd, True)
        return os.fdopen(fd, "rb")
    except BaseException:
        os.close(fd)
        raise


class _open:
    """:func:`open_regular` with OS errors on reading turned into InputError."""

    def __init__(self, name: str) -> None:
        self.name = name

    def __enter__(self):
        self.fh = open_regular(self.name)
        return self

    def read(self, n: int = -1) -> bytes:
        try:
            return self.fh.read(n)
        except OSError as exc:
            raise InputError(f"cannot read {self.name!r}: {exc.strerror or exc}") from exc

    def __exit__(self, *exc_info) -> None:
        self.fh.close()


def sha256_file(name: str) -> str:
    """SHA-256 (hex) of the bytes of the regular file ``name``: the one file hash of ringdown
    (recordings, the history's skip check). Raises InputError (one line) when it cannot be read."""
    h = hashlib.sha256()
    with _open(name) as fh:
        while chunk := fh.read(_CHUNK):
            h.update(chunk)
    return h.hexdigest()


def _check_length(n: int, name: str) -> None:
    if n < MIN_SAMPLES:
        raise InputError(
            f"{name!r} has {n} sample{'s' if n != 1 else ''}; at least {MIN_SAMPLES} are needed; "
            "record a longer ring-down"
        )


def _one_line(text: object) -> str:
    return " ".join(str(text).split())


def _selection(channel: object, column: object, name: str) -> object:
    """channel and column are the same choice under two names; return the one given."""
    if channel is not None and column is not None and str(channel).strip() != str(column).strip():
        raise ParameterError(f"both channel={channel!r} and column={column!r} given for {name!r}; give one")
    return channel if channel is not None else column


def _parse_index(choice: object) -> int | None:
    if isinstance(choice, bool):
        return None
    if isinstance(choice, (int, np.integer)):
        return int(choice)
    if isinstance(choice, str) and re.fullmatch(r"\s*[+-]?\d+\s*", choice):
        return int(choice)
    return None
