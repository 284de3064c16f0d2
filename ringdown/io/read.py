"""Reading recordings: sound files (through soundfile) and delimited text.

This is the only module that opens recordings. :func:`read_recording` returns one validated
channel as a :class:`~ringdown.io.recording.Recording`; every problem with the file comes out as a
one-line :class:`~ringdown.base.errors.InputError` (or :class:`~ringdown.base.errors.ParameterError` for an
option) that names the file, never as a raw ``OSError``, ``ValueError`` or libsndfile error.
"""

from __future__ import annotations

import hashlib
import io as _stdio
import math
import os
import re
import stat as _stat
import struct
from dataclasses import dataclass
from typing import BinaryIO

import numpy as np

from ..base.errors import InputError, ParameterError
from .recording import Recording

__all__ = ["read_recording", "open_regular", "sha256_file", "MIN_SAMPLES", "MAX_TIMING_JITTER", "TEXT_SUFFIXES"]

#: Fewest samples a recording may have. Below this no spectrum or decay fit is meaningful
#: (project choice, common practice, no source).
MIN_SAMPLES = 64

#: Largest accepted relative RMS jitter of the time steps of a text file's time column
#: (RMS deviation of the steps from their mean, over the mean step). Common practice, no source.
MAX_TIMING_JITTER = 1e-3

#: File name endings always read as delimited text.
TEXT_SUFFIXES = (".csv", ".txt", ".tsv", ".dat")

#: Relative tolerance between a sample rate passed in and the one a file states or implies
#: (0.1 %; common practice, no source).
_RATE_RTOL = 1e-3

#: Peak memory of parsing text, as a multiple of the file size (about 7 measured with tracemalloc on a 1e6-row,
#: two-column CSV: Python string, one copy for decimal commas, the float64 array).
_TEXT_MEMORY_FACTOR = 8

_CHUNK = 1 << 20
_COMMENT_MARKERS = ("#", "%", "//")
_LINE_SPLIT = re.compile(r"[,;\s]+")
_HEADER_SPACES = re.compile(r"\t|\s{2,}")
_BLANKISH = re.compile(r"^[ \t\f\v]+$", re.MULTILINE)

# Leading bytes of the sound formats people are likely to record in: a file that starts with
# one of these and still cannot be opened is a damaged sound file, not text.
_AUDIO_MAGIC = {
    b"RIFF": "WAV",
    b"RIFX": "WAV",
    b"RF64": "WAV (RF64)",
    b"BW64": "WAV (BW64)",
    b"fLaC": "FLAC",
    b"OggS": "OGG",
    b"FORM": "AIFF",
    b".snd": "AU",
    b"caff": "CAF",
    b"riff": "W64",
}

# soundfile subtypes whose decoded values are bounded by +-1.0 (integer PCM and its
# companded/ADPCM relatives). Everything else (FLOAT, DOUBLE, VORBIS, OPUS, MPEG) decodes to
# floats that can exceed 1.0, so full scale is unknown.
_INT_SUBTYPE_PREFIXES = ("PCM_", "DPCM_", "DWVW_", "ALAC_", "NMS_ADPCM")
_INT_SUBTYPES = {"ALAW", "ULAW", "IMA_ADPCM", "MS_ADPCM", "GSM610", "VOX_ADPCM", "G721_32", "G723_24", "G723_40"}

# Column names.
_TIME_WORDS = r"(?:time|t|zeit|tiempo|temps|tempo|timestamp)"
_TIME_NAME = re.compile(
    _TIME_WORDS
    + r"(?:\s*[\[\(\{<]\s*(?P<u1>[^\]\)\}>]*?)\s*[\]\)\}>]"  # time [ms], t (s)
    + r"|\s*/\s*(?P<u2>\S+)"  # time / s
    + r"|\s+in\s+(?P<u3>\S+)"  # Zeit in ms
    + r"|[_\-\s]\s*(?P<u4>[a-z]+))?"  # t_us, time-ms, time s
)
_TIME_UNITS = {
    "s": 1.0,
    "sec": 1.0,
    "secs": 1.0,
    "second": 1.0,
    "seconds": 1.0,
    "ms": 1e-3,
    "msec": 1e-3,
    "millisecond": 1e-3,
    "milliseconds": 1e-3,
    "us": 1e-6,
    "usec": 1e-6,
    "microsecond": 1e-6,
    "microseconds": 1e-6,
    "ns": 1e-9,
    "nsec": 1e-9,
    "nanosecond": 1e-9,
    "nanoseconds": 1e-9,
}
_INDEX_NAMES = {
    "index",
    "idx",
    "sample",
    "samples",
    "sample index",
    "sample no",
    "n",
    "i",
    "no",
    "no.",
    "nr",
    "nr.",
    "#",
    "point",
    "points",
    "pt",
    "row",
}
_DECIMALS = re.compile(r"[+-]?\d*(?:[.,](\d*))?(?:[eE]([+-]?\d+))?")


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
        sniffed the same way: a known sound format by its leading bytes, else text). Names ending in ``.csv``, ``.txt``, ``.tsv`` or ``.dat`` are read as text
        (unless the file starts like a known sound format); anything else is first offered to
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
    **Sound files** are decoded by soundfile (libsndfile) to float64. Integer PCM is scaled to
    [-1, 1), so its full scale is 1.0 (used downstream to recognise clipping); float files keep
    their stored values and have no known full scale.

    **Text files** are read in this order:

    1. Encoding: UTF-8 (with or without BOM), UTF-16 with BOM, else Windows-1252, else Latin-1.
       A file with NUL bytes
       or more than 1 % control characters is binary, not text.
    2. Lines starting with ``#``, ``%`` or ``//`` are comments; blank lines are skipped.
    3. Every line before the first line made only of numbers is a header line; the last one
       names the columns. With no header line, a comment line just above the data that splits
       into as many names as there are columns is used instead (as ``numpy.savetxt`` writes).
    4. The delimiter is the first of tab, ``;``, ``,`` and runs of spaces that splits the first
       20 data rows into the same number (>= 2) of numeric fields; but one that splits the
       header into as many names as the data into fields wins. With ``;``, tab or spaces,
       ``0,5`` is a decimal comma. So ``Spannung`` over ``0,5`` rows is one column, while
       ``0,5`` rows with no header are ambiguous and read as two comma-separated columns.
       A delimiter at the end of every row is ignored.
    5. The time column is the first column whose header is a time name (``time``, ``t``,
       ``Zeit``, ``tiempo``, ``temps``, ``tempo``, ``timestamp``), optionally with a unit in
       brackets, after ``/`` or ``in``, or as a suffix (``Time [ms]``, ``t_us``, ``t/s``,
       ``Zeit in ms``); units s, ms, us/µs, ns; no unit means seconds. If no header names one,
       the first column is taken as time in seconds when there are at least two columns, it is
       strictly increasing and no other column is, unless it counts 0, 1, 2... or 1, 2, 3...
       (a sample index).
    6. The time steps must be uniform: relative RMS jitter of the steps up to
       :data:`MAX_TIMING_JITTER` (1e-3, common practice, no source) is accepted and reported as
       ``timing_jitter``. Steps that are uneven only because the times were printed with few
       digits (every step within one unit in the last printed digit of the mean step) are
       also accepted. The sample rate is ``(n - 1) / (t[-1] - t[0])``.

    Numbers are parsed by :func:`numpy.loadtxt`; a 1e6-row two-column CSV reads in about a
    second.

    Examples
    --------
    >>> rec = read_recording("tap.wav", channel=2)                        # doctest: +SKIP
    >>> rec = read_recording("scope.csv", column="Voltage [V]")           # doctest: +SKIP
    >>> rec = read_recording("samples.txt", sample_rate=51200.0)          # doctest: +SKIP
    """
    name = os.fspath(path) if isinstance(path, (str, os.PathLike)) else path
    if not isinstance(name, str):
        raise ParameterError(f"path must be a file name (str or os.PathLike); got {path!r}")
    if name == STDIN:
        return _read_stdin(channel=channel, column=column, sample_rate=sample_rate, max_bytes=max_bytes)
    if sample_rate is not None:
        sample_rate = _check_rate(sample_rate, name)
    limit = _check_max_bytes(max_bytes, name)

    size = _stat_size(name)
    if size > limit:
        raise InputError(
            f"{name!r} is {_fmt_bytes(size)}, more than the {_fmt_bytes(limit)} allowed "
            f"({_limit_origin(max_bytes)}); split the file or pass a larger max_bytes"
        )

    with _open(name) as fh:
        head = fh.read(4096)
    magic = _AUDIO_MAGIC.get(head[:4])
    from .formats import find_reader

    reader = find_reader(name, head, other_format=magic is not None)
    if reader is not None:
        return reader.read(name, channel=_selection(channel, column, name), sample_rate=sample_rate, limit=limit)
    is_text_name = name.lower().endswith(TEXT_SUFFIXES)

    if magic is not None or not is_text_name:
        info, reason = _sound_info(name)
        if info is not None:
            return _read_sound(
                name, info, channel=channel, column=column, sample_rate=sample_rate, limit=limit, max_bytes=max_bytes
            )
        if magic is not None:
            raise InputError(
                f"{name!r} starts like a {magic} file but cannot be read: header truncated or "
                f"corrupt ({reason}); export or copy the recording again"
            )
    return _read_text(
        name, size, channel=channel, column=column, sample_rate=sample_rate, limit=limit, max_bytes=max_bytes
    )


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
    suffix = "" if data[:4] in _AUDIO_MAGIC else ".csv"
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


# --------------------------------------------------------------------------------------------
# checks shared by both kinds of file


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


# --------------------------------------------------------------------------------------------
# sound files


def _sound_info(name: str):
    """soundfile.info, or (None, reason) when libsndfile cannot open the file."""
    import soundfile as sf

    try:
        return sf.info(name), ""
    except Exception as exc:  # libsndfile raises LibsndfileError/RuntimeError/TypeError
        reason = re.sub(r"^Error opening .*?: ", "", _one_line(exc)).rstrip(".")
        return None, reason or type(exc).__name__


def _full_scale(subtype: str) -> float | None:
    if subtype.startswith(_INT_SUBTYPE_PREFIXES) or subtype in _INT_SUBTYPES:
        return 1.0
    return None


def _read_sound(name, info, *, channel, column, sample_rate, limit, max_bytes) -> Recording:
    import soundfile as sf

    n_channels = int(info.channels)
    frames = int(info.frames)
    rate = float(info.samplerate)
    choice = _selection(channel, column, name)
    if choice is None:
        index = 1
    else:
        parsed = _parse_index(choice)
        if parsed is None:
            raise ParameterError(f"channel {choice!r} of {name!r} is not a channel number; give 1 to {n_channels}")
        index = parsed
        if not 1 <= index <= n_channels:
            raise ParameterError(
                f"channel {index} is out of range: {name!r} has {n_channels} "
                f"channel{'s' if n_channels != 1 else ''}; pick 1 to {n_channels}"
            )
    if sample_rate is not None and not math.isclose(sample_rate, rate, rel_tol=_RATE_RTOL):
        raise ParameterError(
            f"sample rate {sample_rate:g} Hz given, but {name!r} states {rate:g} Hz; "
            "drop the sample rate option (the file's own rate is used)"
        )
    need = frames * n_channels * 8
    if need > limit:
        raise InputError(
            f"{name!r} decodes to {frames} frames x {n_channels} channels = {_fmt_bytes(need)}, "
            f"more than the {_fmt_bytes(limit)} allowed ({_limit_origin(max_bytes)}); "
            "cut the recording or pass a larger max_bytes"
        )
    _check_length(frames, name)
    try:
        data, _ = sf.read(name, dtype="float64", always_2d=True)
    except Exception as exc:
        raise InputError(
            f"cannot decode {name!r} ({info.format}/{info.subtype}): {_one_line(exc)}; "
            "export or copy the recording again"
        ) from exc
    if data.ndim != 2 or data.shape[1] < index:
        raise InputError(f"{name!r} decoded to an unexpected shape {data.shape}")
    samples = np.ascontiguousarray(data[:, index - 1])
    del data
    _check_length(samples.shape[0], name)
    notes: tuple[tuple[str, str], ...] = ()
    if str(info.format).upper().startswith("WAV"):
        notes = _wav_truncation(name, samples.shape[0])
    return Recording(
        samples=samples,
        sample_rate=rate,
        channel=str(index),
        path=name,
        sha256=sha256_file(name),
        full_scale=_full_scale(str(info.subtype)),
        timing_jitter=None,
        n_channels=n_channels,
        notes=notes,
    )


def _wav_truncation(name: str, frames_read: int) -> tuple[tuple[str, str], ...]:
    """A ``truncated`` warning when a WAV's data chunk claims more bytes than the file holds.

    Walks the RIFF chunks (Microsoft/IBM RIFF WAVE layout: ``RIFF size WAVE``, then chunks of a
    4-byte id and a little-endian 4-byte size, padded to even length) up to the ``data`` chunk.
    """
    with _open(name) as fh:
        head = fh.read(1 << 16)
        size = os.fstat(fh.fh.fileno()).st_size
    if len(head) < 12 or head[:4] != b"RIFF" or head[8:12] != b"WAVE":
        return ()
    pos, block = 12, None
    while pos + 8 <= len(head):
        cid, csize = head[pos : pos + 4], struct.unpack("<I", head[pos + 4 : pos + 8])[0]
        if cid == b"fmt " and pos + 22 <= len(head):
            block = struct.unpack("<H", head[pos + 20 : pos + 22])[0]
        if cid == b"data":
            held = size - (pos + 8)
            if csize in (0, 0xFFFFFFFF) or csize <= held or not block:
                return ()
            claimed = csize // block
            return (
                (
                    "truncated",
                    f"{name!r} is truncated: its header states {claimed} frames but the file "
                    f"holds {held // block}; {frames_read} frames were analysed (copy or export "
                    "the recording again)",
                ),
            )
        pos += 8 + csize + (csize & 1)
    return ()


def _parse_index(choice: object) -> int | None:
    if isinstance(choice, bool):
        return None
    if isinstance(choice, (int, np.integer)):
        return int(choice)
    if isinstance(choice, str) and re.fullmatch(r"\s*[+-]?\d+\s*", choice):
        return int(choice)
    return None


# --------------------------------------------------------------------------------------------
# delimited text


@dataclass
class _Layout:
    """What sniffing the text found out."""

    delimiter: str | None  # None = runs of whitespace
    n_fields: int  # fields per row, including a trailing empty one
    n_columns: int  # columns of numbers
    decimal_comma: bool
    names: list[str] | None
    data_start: int  # character offset of the first data line


def _decode(raw: bytes, name: str) -> str:
    text = None
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            text = raw.decode("utf-16")
        except UnicodeDecodeError:
            text = None
    elif b"\x00" not in raw:
        for encoding in ("utf-8-sig", "cp1252", "latin-1"):  # latin-1 decodes any bytes
            try:
                text = raw.decode(encoding)
                break
            except UnicodeDecodeError:
                continue
    if text is not None:
        sample = text[:65536]
        control = sum(1 for ch in sample if (ord(ch) < 32 and ch not in "\t\n\r\f\v") or 0x7F <= ord(ch) < 0xA0)
        if control <= 0.01 * len(sample):
            return text
    raise InputError(
        f"{name!r} is neither a sound file soundfile can read nor text (it holds binary data); "
        "give a WAV/FLAC/OGG file or delimited text such as 'time,signal'"
    )


def _is_comment(line: str) -> bool:
    return line.lstrip().startswith(_COMMENT_MARKERS)


def _is_number(token: str, decimal_comma: bool = True) -> bool:
    token = token.strip().strip("\"'")
    if not token or "_" in token:
        return False
    try:
        float(token)
        return True
    except ValueError:
        pass
    if decimal_comma and token.count(",") == 1 and "." not in token:
        try:
            float(token.replace(",", "."))
            return True
        except ValueError:
            return False
    return False


def _is_data_line(line: str) -> bool | None:
    """True: only numbers; False: has text; None: nothing but delimiters."""
    tokens = [t for t in _LINE_SPLIT.split(line.strip()) if t]
    if not tokens:
        return None
    return all(_is_number(t) for t in tokens)


def _split(line: str, delimiter: str | None) -> list[str]:
    line = line.strip()
    return line.split() if delimiter is None else [f.strip() for f in line.split(delimiter)]


def _fields_fit(lines: list[str], delimiter: str | None) -> int | None:
    """Number of fields per line if ``delimiter`` splits every line into equal numeric/blank fields."""
    count = None
    for line in lines:
        fields = _split(line, delimiter)
        if count is None:
            count = len(fields)
        elif len(fields) != count:
            return None
        blank = 0
        for f in fields:
            if not f.strip().strip("\"'"):
                blank += 1
            elif not _is_number(f, decimal_comma=delimiter != ","):
                return None
        if blank == len(fields):
            return None
    return count


def _header_names(line: str, delimiter: str | None, n: int) -> list[str] | None:
    def clean(fields):
        return [f.strip().strip("\"'").strip() for f in fields]

    line = line.strip()
    if delimiter is not None:
        fields = clean(line.split(delimiter))
        if len(fields) == n + 1 and not fields[-1]:
            fields = fields[:-1]
        return fields if len(fields) == n else None
    fields = clean(_HEADER_SPACES.split(line))
    if len(fields) == n:
        return fields
    merged: list[str] = []  # "Time [s] Volts (V)" -> ["Time [s]", "Volts (V)"]; "t / ms" too
    glue = False
    for tok in line.split():
        if merged and (glue or tok[0] in "[({<" or tok.startswith("/")):
            merged[-1] += " " + tok
        else:
            merged.append(tok)
        glue = tok.endswith("/")
    fields = clean(merged)
    return fields if len(fields) == n else None


def _sniff(text: str, name: str) -> _Layout:
    headers: list[str] = []
    last_comment: str | None = None
    first_text_line = None
    pos = 0
    n = len(text)
    data_start = None
    sample: list[str] = []
    while pos < n and len(sample) < 20:
        end = text.find("\n", pos)
        if end < 0:
            end = n
        line = text[pos:end]
        if line.strip() and not _is_comment(line):
            kind = _is_data_line(line)
            if kind is True:
                if data_start is None:
                    data_start = pos
                sample.append(line)
            elif kind is False:
                if data_start is not None:
                    break  # a text line among the data rows: reported when parsing
                headers.append(line)
                if first_text_line is None:
                    first_text_line = line.strip()
        elif _is_comment(line) and data_start is None:
            last_comment = line.lstrip()
            for marker in _COMMENT_MARKERS:
                if last_comment.startswith(marker):
                    last_comment = last_comment[len(marker) :]
                    break
        pos = end + 1
    if data_start is None:
        if first_text_line is not None:
            shown = first_text_line if len(first_text_line) <= 40 else first_text_line[:37] + "..."
            raise InputError(
                f"{name!r} holds text but no rows of numbers (first line: {shown!r}); "
                "expected columns of numbers such as 'time,signal'"
            )
        raise InputError(
            f"{name!r} holds no columns of data (only blank lines, comments or delimiters); "
            "expected columns of numbers such as 'time,signal'"
        )

    header = headers[-1] if headers else None
    candidates = []
    for delim in ("\t", ";", ",", None):
        count = _fields_fit(sample, delim)
        if count is not None:
            candidates.append((delim, count))
    if not candidates:
        # Rows disagree already at the top: take the split of the first row, report later.
        first = sample[0]
        for delim in ("\t", ";", ",", None):
            fields = _split(first, delim)
            if len(fields) >= 2 or delim is None:
                candidates.append((delim, len(fields)))
                break
    multi = [c for c in candidates if c[1] >= 2] or candidates

    def n_cols(delim, count):
        trailing = delim is not None and count >= 2 and all(not _split(s, delim)[-1] for s in sample)
        return count - 1 if trailing else count

    chosen = multi[0]
    for source in ([header] if header else []) + ([last_comment] if last_comment else []):
        ordered = multi + [c for c in candidates if c not in multi]
        fitting = [c for c in ordered if _header_names(source, c[0], n_cols(*c)) is not None]
        if fitting:
            chosen = fitting[0]
            break
    delim, count = chosen
    n_columns = n_cols(delim, count)
    decimal_comma = delim != "," and any("," in s for s in sample)

    names = _header_names(header, delim, n_columns) if header else None
    if names is None and not headers and last_comment is not None:
        from_comment = _header_names(last_comment, delim, n_columns)
        if from_comment and not all(_is_number(f) for f in from_comment if f):
            names = from_comment
    return _Layout(
        delimiter=delim,
        n_fields=count,
        n_columns=n_columns,
        decimal_comma=decimal_comma,
        names=names,
        data_start=data_start,
    )


def _data_rows(text: str, layout: _Layout):
    """(file line number, line) of every data row, in order (only used to word errors)."""
    first_line = text.count("\n", 0, layout.data_start) + 1
    for k, line in enumerate(text[layout.data_start :].split("\n")):
        if line.strip() and not _is_comment(line):
            yield first_line + k, line


def _column_label(j: int, layout: _Layout) -> str:
    if layout.names and layout.names[j]:
        return f"column {j + 1} ({layout.names[j]!r})"
    return f"column {j + 1}"


def _diagnose(text: str, layout: _Layout, name: str, exc: Exception) -> InputError:
    """Find the first row numpy could not parse and say what is wrong with it."""
    for lineno, line in _data_rows(text, layout):
        if _is_data_line(line) is None and layout.delimiter is not None:
            return InputError(f"{name!r} line {lineno} is blank (only delimiters); fill or remove the row")
        fields = _split(line, layout.delimiter)
        if len(fields) != layout.n_fields:
            return InputError(
                f"{name!r} line {lineno} has {len(fields)} fields but the rows above have "
                f"{layout.n_fields}; fix or remove that row"
            )
        for j, field in enumerate(fields[: layout.n_columns]):
            token = field.strip().strip('"')
            if layout.decimal_comma:
                token = token.replace(",", ".")
            if not token:
                return InputError(
                    f"{name!r} line {lineno}, {_column_label(j, layout)} is blank; fill the cell or remove the row"
                )
            if not _is_number(token, decimal_comma=False):
                shown = token if len(token) <= 20 else token[:17] + "..."
                return InputError(
                    f"{name!r} line {lineno}, {_column_label(j, layout)}: {shown!r} is not a "
                    "number; fix the cell or remove the row"
                )
    return InputError(f"cannot read the numbers in {name!r}: {_one_line(exc)}")


def _parse_numbers(text: str, layout: _Layout, name: str) -> np.ndarray:
    body = text[layout.data_start :]
    if layout.decimal_comma:
        body = body.replace(",", ".")
    quotechar = '"' if '"' in body else None
    source: object
    if any(m in body for m in _COMMENT_MARKERS) or _BLANKISH.search(body):
        # numpy cannot skip whitespace-only lines, nor combine several comment markers with
        # quotes: drop those lines here (slower, still ~0.5 s per 1e6 lines)
        source = [ln for ln in body.split("\n") if ln.strip() and not _is_comment(ln)]
    else:
        source = _stdio.StringIO(body)
    usecols = range(layout.n_columns) if layout.n_columns != layout.n_fields else None
    try:
        arr = np.loadtxt(
            source,
            dtype=np.float64,
            delimiter=layout.delimiter,
            comments=None,
            quotechar=quotechar,
            ndmin=2,
            usecols=usecols,
        )
    except (ValueError, TypeError, IndexError) as exc:
        raise _diagnose(text, layout, name, exc) from exc
    if arr.ndim != 2 or arr.shape[1] != layout.n_columns:
        raise InputError(f"{name!r} parsed to an unexpected shape {arr.shape}; check the delimiter")
    finite = np.isfinite(arr)
    if not finite.all():
        row, col = (int(v[0]) for v in np.nonzero(~finite))
        lineno = _nth_row_line(text, layout, row)
        value = "NaN" if math.isnan(arr[row, col]) else "an infinite value"
        raise InputError(
            f"{name!r} line {lineno}, {_column_label(col, layout)} holds {value}; "
            "fill the cell with a number or remove the row"
        )
    return arr


def _nth_row_line(text: str, layout: _Layout, row: int) -> int:
    for k, (lineno, _) in enumerate(_data_rows(text, layout)):
        if k == row:
            return lineno
    return -1  # pragma: no cover


def _time_unit(header: str) -> float | None:
    """Seconds per unit of a column whose header is a time name, else None."""
    h = header.strip().strip("\"'").strip().lower().replace("µ", "u").replace("μ", "u")
    m = _TIME_NAME.fullmatch(h)
    if not m:
        return None
    unit = m.group("u1") or m.group("u2") or m.group("u3") or m.group("u4")
    if unit is None:
        return 1.0
    return _TIME_UNITS.get(unit.strip())


def _is_index_name(header: str | None) -> bool:
    return bool(header) and str(header).strip().strip("\"'").strip().lower() in _INDEX_NAMES


def _counts_up(col: np.ndarray) -> bool:
    return bool(col[0] in (0.0, 1.0) and np.all(np.diff(col) == 1.0))


def _find_time(arr: np.ndarray, layout: _Layout) -> tuple[int | None, float]:
    """(time column, seconds per unit); the column is None when there is none."""
    names = layout.names
    if names:
        for j, header in enumerate(names):
            scale = _time_unit(header)
            if scale is not None:
                return j, scale
    if arr.shape[1] >= 2 and arr.shape[0] >= 2 and not (names and _is_index_name(names[0])):
        steps = np.diff(arr, axis=0)
        increasing = np.all(steps > 0, axis=0)
        if increasing[0] and not increasing[1:].any() and not _counts_up(arr[:, 0]):
            return 0, 1.0
    return None, 1.0


def _printed_step(text: str, layout: _Layout, col: int) -> float | None:
    """Resolution (file units) of the time column as printed in the last rows, or None."""
    tail = text[layout.data_start :].rsplit("\n", 60)[-60:]
    decimals = None
    for line in tail:
        if not line.strip() or _is_comment(line):
            continue
        fields = _split(line, layout.delimiter)
        if len(fields) <= col:
            continue
        m = _DECIMALS.fullmatch(fields[col].strip().strip('"'))
        if not m:
            continue
        d = len(m.group(1) or "") - int(m.group(2) or 0)
        decimals = d if decimals is None else max(decimals, d)
    return None if decimals is None else 10.0 ** (-decimals)


def _fmt_time(seconds: float) -> str:
    a = abs(seconds)
    for unit, scale in (("s", 1.0), ("ms", 1e-3), ("us", 1e-6), ("ns", 1e-9)):
        if a >= scale or unit == "ns":
            return f"{seconds / scale:.4g} {unit}"
    return f"{seconds:g} s"  # pragma: no cover


def _time_axis(arr, j, scale, text, layout, name) -> tuple[float, float]:
    """Sample rate (Hz) and timing jitter from time column ``j``; raise if unusable."""
    t = arr[:, j]
    label = _column_label(j, layout).replace("column", "time column", 1)
    steps = np.diff(t)
    bad = np.flatnonzero(steps <= 0)
    if bad.size:
        i = int(bad[0])
        lineno = _nth_row_line(text, layout, i + 1)
        raise InputError(
            f"{label} of {name!r} does not increase at line {lineno} ({t[i]:g} then "
            f"{t[i + 1]:g}); sort the rows or remove repeated times"
        )
    n = t.shape[0]
    mean = (t[-1] - t[0]) / (n - 1)
    dev = steps - mean
    jitter = float(np.sqrt(np.mean(dev * dev)) / mean)
    if jitter > MAX_TIMING_JITTER:
        q = _printed_step(text, layout, j)
        rounded = q is not None and q < 0.5 * mean and float(np.max(np.abs(dev))) <= q * 1.001
        if not rounded:
            raise InputError(
                f"time steps in {name!r} vary by {100 * jitter:.2g} % RMS (largest step "
                f"{_fmt_time(steps.max() * scale)}, smallest {_fmt_time(steps.min() * scale)}, "
                f"mean {_fmt_time(mean * scale)}; at most {100 * MAX_TIMING_JITTER:g} % is "
                "accepted); resample to a uniform step"
            )
    return 1.0 / (mean * scale), jitter


def _pick_column(choice, data_cols: list[int], time_col, layout, arr, name) -> int:
    names = layout.names
    listing = ", ".join(repr(names[j]) if names and names[j] else f"column {k + 1}" for k, j in enumerate(data_cols))
    if choice is None:
        for j in data_cols:
            if names and _is_index_name(names[j]):
                continue
            if j == 0 and len(data_cols) > 1 and _counts_up(arr[:, 0]):
                continue
            return j
        return data_cols[0]
    index = _parse_index(choice)
    if index is not None:
        if not 1 <= index <= len(data_cols):
            extra = " (not counting the time column)" if time_col is not None else ""
            raise ParameterError(
                f"column {index} is out of range: {name!r} has {len(data_cols)} data "
                f"column{'s' if len(data_cols) != 1 else ''}{extra}; pick 1 to {len(data_cols)}"
            )
        return data_cols[index - 1]
    if not isinstance(choice, str):
        raise ParameterError(f"column must be a 1-based number or a header name; got {choice!r}")
    want = choice.strip().lower()
    if names:
        if time_col is not None and names[time_col].strip().lower() == want:
            raise ParameterError(f"{choice!r} is the time column of {name!r}; pick a data column: {listing}")
        exact = [j for j in data_cols if names[j].strip().lower() == want]
        if exact:
            return exact[0]
        loose = [j for j in data_cols if re.split(r"\s*[\[\(\{<]", names[j].strip().lower(), maxsplit=1)[0] == want]
        if len(loose) == 1:
            return loose[0]
    raise ParameterError(f"no column named {choice!r} in {name!r}; its data columns are {listing}")


def _read_text(name, size, *, channel, column, sample_rate, limit, max_bytes) -> Recording:
    need = size * _TEXT_MEMORY_FACTOR
    if need > limit:
        raise InputError(
            f"{name!r} is {_fmt_bytes(size)} of text; parsing it needs about {_fmt_bytes(need)}, "
            f"more than the {_fmt_bytes(limit)} allowed ({_limit_origin(max_bytes)}); "
            "split the file or pass a larger max_bytes"
        )
    with _open(name) as fh:
        raw = fh.read()
    digest = hashlib.sha256(raw).hexdigest()
    text = _decode(raw, name)
    del raw
    if "\r" in text:
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    layout = _sniff(text, name)
    arr = _parse_numbers(text, layout, name)
    choice = _selection(channel, column, name)

    time_col, scale = _find_time(arr, layout)
    data_cols = [j for j in range(arr.shape[1]) if j != time_col]
    if not data_cols:
        raise InputError(f"{name!r} has only a time column and no data column; add the signal column")
    j = _pick_column(choice, data_cols, time_col, layout, arr, name)
    n = arr.shape[0]
    _check_length(n, name)

    jitter = None
    if time_col is not None:
        rate, jitter = _time_axis(arr, time_col, scale, text, layout, name)
        if sample_rate is not None and not math.isclose(sample_rate, rate, rel_tol=_RATE_RTOL):
            raise ParameterError(
                f"sample rate {sample_rate:g} Hz given, but the time column of {name!r} implies "
                f"{rate:.6g} Hz (step {_fmt_time(1.0 / rate)}); drop the sample rate option or "
                "fix the time column"
            )
    elif sample_rate is None:
        raise InputError(
            f"{name!r} has no time column; pass the sample rate in Hz (--sample-rate, or "
            "sample_rate=) or add a first column named 'time [s]'"
        )
    else:
        rate = sample_rate

    if layout.names and layout.names[j]:
        label = layout.names[j]
    else:
        label = f"column {data_cols.index(j) + 1}"
    samples = np.ascontiguousarray(arr[:, j])
    del arr
    return Recording(
        samples=samples,
        sample_rate=rate,
        channel=label,
        path=name,
        sha256=digest,
        full_scale=None,
        timing_jitter=jitter,
        n_channels=len(data_cols),
    )
