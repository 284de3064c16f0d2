"""Delimited text (CSV, TSV, columns of a scope or logger export): decoding, the sniffer that
finds the delimiter, the header, the decimal comma and the time column, and the reader
:func:`read_text` (called by :func:`ringdown.io.read.read_recording`).

A text file is read in this order:

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
"""

from __future__ import annotations

import hashlib
import io as _stdio
import math
import re
from dataclasses import dataclass

import numpy as np

from ..base.errors import InputError, ParameterError
from .files import _RATE_RTOL, _check_length, _fmt_bytes, _limit_origin, _one_line, _open, _parse_index, _selection
from .recording import Recording

__all__ = ["MAX_TIMING_JITTER", "TEXT_SUFFIXES"]

#: Largest accepted relative RMS jitter of the time steps of a text file's time column
#: (RMS deviation of the steps from their mean, over the mean step). Common practice, no source.
MAX_TIMING_JITTER = 1e-3

#: File name endings always read as delimited text.
TEXT_SUFFIXES = (".csv", ".txt", ".tsv", ".dat")

#: Peak memory of parsing text, as a multiple of the file size (about 7 measured with tracemalloc on a 1e6-row,
#: two-column CSV: Python string, one copy for decimal commas, the float64 array).
_TEXT_MEMORY_FACTOR = 8

_COMMENT_MARKERS = ("#", "%", "//")
_LINE_SPLIT = re.compile(r"[,;\s]+")
_HEADER_SPACES = re.compile(r"\t|\s{2,}")
_BLANKISH = re.compile(r"^[ \t\f\v]+$", re.MULTILINE)

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


@dataclass(frozen=True)
class _Head:
    """The lines above and among the first data rows, as the sniffer sees them."""

    headers: list[str]  # text lines above the data
    last_comment: str | None  # the last comment line above the data, without its marker
    first_text_line: str | None  # the first text line (to word the error of a file without numbers)
    data_start: int | None  # character offset of the first data line (None: no data line)
    sample: list[str]  # the first data lines (up to 20)


def _scan_head(text: str) -> _Head:
    """Walk the lines of ``text`` up to the 20th data row (or the first text line after data)."""
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
    return _Head(headers, last_comment, first_text_line, data_start, sample)


def _no_data(head: _Head, name: str) -> InputError:
    """The error of a text file without a row of numbers."""
    if head.first_text_line is not None:
        first = head.first_text_line
        shown = first if len(first) <= 40 else first[:37] + "..."
        return InputError(
            f"{name!r} holds text but no rows of numbers (first line: {shown!r}); "
            "expected columns of numbers such as 'time,signal'"
        )
    return InputError(
        f"{name!r} holds no columns of data (only blank lines, comments or delimiters); "
        "expected columns of numbers such as 'time,signal'"
    )


def _n_columns(sample: list[str], delim: str | None, count: int) -> int:
    """Columns of numbers of ``count`` fields per row: one less when every row ends in ``delim``."""
    trailing = delim is not None and count >= 2 and all(not _split(s, delim)[-1] for s in sample)
    return count - 1 if trailing else count


def _choose_delimiter(head: _Head) -> tuple[str | None, int]:
    """(delimiter, fields per row): the first that splits the sample rows evenly, unless another
    splits the header (or the last comment) into as many names as the rows into columns."""
    sample = head.sample
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
    header = head.headers[-1] if head.headers else None
    for source in ([header] if header else []) + ([head.last_comment] if head.last_comment else []):
        ordered = multi + [c for c in candidates if c not in multi]
        fitting = [c for c in ordered if _header_names(source, c[0], _n_columns(sample, *c)) is not None]
        if fitting:
            return fitting[0]
    return multi[0]


def _sniff(text: str, name: str) -> _Layout:
    """The layout of the delimited text ``text`` (rules 2-4 of the module docstring)."""
    head = _scan_head(text)
    if head.data_start is None:
        raise _no_data(head, name)
    delim, count = _choose_delimiter(head)
    n_columns = _n_columns(head.sample, delim, count)
    decimal_comma = delim != "," and any("," in s for s in head.sample)

    header = head.headers[-1] if head.headers else None
    names = _header_names(header, delim, n_columns) if header else None
    if names is None and not head.headers and head.last_comment is not None:
        from_comment = _header_names(head.last_comment, delim, n_columns)
        if from_comment and not all(_is_number(f) for f in from_comment if f):
            names = from_comment
    return _Layout(
        delimiter=delim,
        n_fields=count,
        n_columns=n_columns,
        decimal_comma=decimal_comma,
        names=names,
        data_start=head.data_start,
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


def read_text(name, size, *, channel, column, sample_rate, limit, max_bytes) -> Recording:
    """One column of the text file ``name`` (``size`` bytes) as a Recording, by the rules above;
    `limit` is the size limit in bytes (`max_bytes` as given, to word the error)."""
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
