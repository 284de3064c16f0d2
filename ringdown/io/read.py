"""Reading recordings: :func:`read_recording` sends a file to the reader of its kind.

This is the only entry point that opens recordings. Sound files are read by
:mod:`ringdown.io.sound`, delimited text by :mod:`ringdown.io.text`, data-acquisition formats by
:mod:`ringdown.io.formats`; :mod:`ringdown.io.files` holds what they share (regular files only,
the size limit, the file hash, the sample count). :func:`read_recording` returns one validated
channel as a :class:`~ringdown.io.recording.Recording`; every problem with the file comes out as a
one-line :class:`~ringdown.base.errors.InputError` (or :class:`~ringdown.base.errors.ParameterError` for an
option) that names the file, never as a raw ``OSError``, ``ValueError`` or libsndfile error.
"""

from __future__ import annotations

import os

from ..base.errors import InputError, ParameterError
from .files import (
    MIN_SAMPLES,
    _check_max_bytes,
    _check_rate,
    _fmt_bytes,
    _limit_origin,
    _open,
    _selection,
    _stat_size,
    open_regular,
    sha256_file,
)
from .recording import Recording
from .sound import AUDIO_MAGIC, read_sound, sound_info
from .text import MAX_TIMING_JITTER, TEXT_SUFFIXES, read_text

__all__ = ["read_recording", "open_regular", "sha256_file", "MIN_SAMPLES", "MAX_TIMING_JITTER", "TEXT_SUFFIXES"]


def read_recording(
    path: str | os.PathLike,
    *,
    channel: int | str | None = None,
    column: int | str | None = None,
    sample_rate: float | None = None,
    max_bytes: int | None = None,
) -> Recording:
    """Read one channel of a ring-down recording from a sound file, a delimited text file, or a
    TDMS, UFF 58, MATLAB or HDF5 file.

    Parameters
    ----------
    path : str or os.PathLike
        The file, or ``"-"`` for standard input (read into memory up to `max_bytes`, then
        sniffed the same way: a known sound format by its leading bytes, else text). Names ending
        in ``.csv``, ``.txt``, ``.tsv`` or ``.dat`` are read as text (unless the file starts like
        a known sound format); anything else is first offered to
        soundfile (WAV, FLAC, OGG, AIFF, ... any bit depth, integer or float), and read as text
        when soundfile cannot open it and it looks like text. A file whose content (else name
        ending) is TDMS, Universal File Format, MATLAB or HDF5 goes to its reader in
        :mod:`ringdown.io.formats` (see there for the channel names, the rate and the unit).
    channel : int or str, optional
        Sound files: which channel, 1-based (``2`` or ``"2"``); default the first. For a text file
        it is taken as `column` when `column` is not given. The formats of :mod:`ringdown.io.formats`
        also take a name (``"group/channel"``, a variable or dataset path).
    column : int or str, optional
        Text files: the data column, either a 1-based index among the data columns (the time
        column is not counted) or a header name (case-insensitive; ``"voltage"`` also matches
        ``"Voltage [V]"``). Default: the first data column that is not a sample index. For a
        sound file it is taken as `channel` when `channel` is not given.
    sample_rate : float, > 0, Hz, optional
        Needed for text without a time column. If the file states a rate (sound files) or
        implies one (a time column), the two must agree within 0.1 % and the file's rate is used.
    max_bytes : int, > 0, optional
        Refuse, before reading, a file whose size or decoded size exceeds this many bytes.
        Default: a quarter of physical memory (4 GiB where that cannot be found).

    Returns
    -------
    Recording
        ``samples`` as float64; ``channel`` is ``"1"``, ``"2"``... for sound files, the column's
        header (or ``"column N"``) for text; ``sha256`` of the file bytes; ``full_scale`` 1.0 for
        integer sound subtypes, else None; ``timing_jitter`` for text with a time column.

    Raises
    ------
    InputError
        The file is missing, empty, too large, damaged, neither sound nor text, has blank or
        NaN cells, non-numeric rows, irregular or non-increasing time steps, no time column and
        no `sample_rate`, or fewer than :data:`MIN_SAMPLES` samples.
    ParameterError
        `channel`/`column` out of range or unknown, `sample_rate` not a finite number > 0 or in
        conflict with the file, `max_bytes` not a positive integer.

    Notes
    -----
    How each kind is read: :mod:`ringdown.io.sound` (full scale, truncated WAVs),
    :mod:`ringdown.io.text` (the sniffer's rules, in order) and :mod:`ringdown.io.formats`.

    Examples
    --------
    >>> rec = read_recording("tap.wav", channel=2)                        # doctest: +SKIP
    >>> rec = read_recording("scope.csv", column="Voltage [V]")           # doctest: +SKIP
    >>> rec = read_recording("samples.txt", sample_rate=51200.0)          # doctest: +SKIP
    """
    name = _file_name(path)
    if name == STDIN:
        return _read_stdin(channel=channel, column=column, sample_rate=sample_rate, max_bytes=max_bytes)
    if sample_rate is not None:
        sample_rate = _check_rate(sample_rate, name)
    limit = _check_max_bytes(max_bytes, name)
    size = _checked_size(name, limit, max_bytes)
    return _read_by_kind(
        name, size, channel=channel, column=column, sample_rate=sample_rate, limit=limit, max_bytes=max_bytes
    )


def _read_by_kind(name, size, *, channel, column, sample_rate, limit, max_bytes) -> Recording:
    """Sniff the first 4096 bytes of `name` and hand it to its reader: a format of
    :mod:`ringdown.io.formats`, a sound file, else text (`limit` and `max_bytes` as in
    :func:`read_recording`, checked)."""
    with _open(name) as fh:
        head = fh.read(4096)
    magic = AUDIO_MAGIC.get(head[:4])
    from .formats import find_reader

    reader = find_reader(name, head, other_format=magic is not None)
    if reader is not None:
        return reader.read(name, channel=_selection(channel, column, name), sample_rate=sample_rate, limit=limit)
    options = dict(channel=channel, column=column, sample_rate=sample_rate, limit=limit, max_bytes=max_bytes)
    if magic is not None or not name.lower().endswith(TEXT_SUFFIXES):
        info, reason = sound_info(name)
        if info is not None:
            return read_sound(name, info, **options)
        if magic is not None:
            raise InputError(
                f"{name!r} starts like a {magic} file but cannot be read: header truncated or "
                f"corrupt ({reason}); export or copy the recording again"
            )
    return read_text(name, size, **options)


def _file_name(path: object) -> str:
    """The file name of `path` (str or os.PathLike); anything else is a ParameterError."""
    name = os.fspath(path) if isinstance(path, (str, os.PathLike)) else path
    if not isinstance(name, str):
        raise ParameterError(f"path must be a file name (str or os.PathLike); got {path!r}")
    return name


def _checked_size(name: str, limit: int, max_bytes: int | None) -> int:
    """The size of the regular file `name` in bytes, refused (InputError) above `limit`."""
    size = _stat_size(name)
    if size > limit:
        raise InputError(
            f"{name!r} is {_fmt_bytes(size)}, more than the {_fmt_bytes(limit)} allowed "
            f"({_limit_origin(max_bytes)}); split the file or pass a larger max_bytes"
        )
    return size


#: The name that means standard input.
STDIN = "-"


def _read_stdin(*, channel, column, sample_rate, max_bytes) -> Recording:
    """Read one recording from standard input: bytes into memory (at most the size limit),
    sniffed like a file (WAV/FLAC/... by their leading bytes, else text)."""
    import sys
    import tempfile

    limit = _check_max_bytes(max_bytes, "standard input")
    try:
        data = sys.stdin.buffer.read(limit + 1)
    except (OSError, ValueError, AttributeError) as exc:
        raise InputError(f"cannot read standard input ('-'): {exc}") from exc
    if len(data) > limit:
        raise InputError(
            f"standard input ('-') holds more than the {_fmt_bytes(limit)} allowed "
            f"({_limit_origin(max_bytes)}); give the recording as a file"
        )
    if not data:
        raise InputError("standard input ('-') is empty; pipe a recording into it (ringdown analyze - < tap.wav)")
    suffix = "" if data[:4] in AUDIO_MAGIC else ".csv"
    # the reader works on files: hand it a private copy, and name standard input in every message
    with tempfile.TemporaryDirectory(prefix="ringdown-stdin-") as tmp:
        tmp_name = os.path.join(tmp, "stdin" + suffix)
        with open(tmp_name, "wb") as fh:
            fh.write(data)
        try:
            rec = read_recording(tmp_name, channel=channel, column=column, sample_rate=sample_rate, max_bytes=max_bytes)
        except (InputError, ParameterError) as exc:
            raise type(exc)(str(exc).replace(repr(tmp_name), "'-' (standard input)")) from None
    return Recording(
        samples=rec.samples,
        sample_rate=rec.sample_rate,
        channel=rec.channel,
        path=STDIN,
        sha256=rec.sha256,
        full_scale=rec.full_scale,
        timing_jitter=rec.timing_jitter,
        n_channels=rec.n_channels,
    )
