"""What every format reader shares: the library import, channel choice, the sample rate, errors."""

from __future__ import annotations

import importlib
import math
import re

import numpy as np

from ...base.errors import InputError, ParameterError
from ..files import _RATE_RTOL, MIN_SAMPLES, _check_length, _fmt_bytes, _one_line, _parse_index, sha256_file
from ..recording import Recording
from ..text import MAX_TIMING_JITTER

#: How many names an error message lists before it says how many more there are.
_LISTED = 12

#: Names of a time vector or time channel, s (matched case-insensitively).
TIME_NAMES = ("t", "time", "time_s", "times")


def need(module: str, what: str, name: str):
    """Import an optional library, or raise one line naming the ``formats`` extra."""
    try:
        return importlib.import_module(module)
    except ImportError:
        raise InputError(
            f"reading {what} needs the 'formats' extra: pip install 'ringdown[formats]' ({name!r} was not read)"
        ) from None


def reason(exc: BaseException | str) -> str:
    """A library exception (or its message) as a short phrase for a one-line message."""
    text = _one_line(exc) or type(exc).__name__
    return text if len(text) <= 120 else text[:117] + "..."


def listing(labels) -> str:
    """``'a', 'b', 'c'`` (the first dozen, then how many more)."""
    labels = list(labels)
    shown = ", ".join(repr(s) for s in labels[:_LISTED])
    return shown + (f" and {len(labels) - _LISTED} more" if len(labels) > _LISTED else "")


def pick(
    choice, labels: list[str], name: str, *, what: str = "channel", aliases: dict[str, list[int]] | None = None
) -> int:
    """Index (0-based) of the entry ``choice`` names in ``labels``.

    Parameters
    ----------
    choice : int, str or None
        A 1-based index (``2`` or ``"2"``), a label (exact, then case-insensitive), or an alias
        (another name an entry answers to, such as a TDMS channel name without its group) that
        only one entry has. ``None``: the first entry.
    labels : list of str
        The entries, in file order.
    name : str
        File name for messages.
    what : str
        What an entry is called in messages ("channel", "dataset 58", "signal").
    aliases : dict of str to list of int, optional
        Lower-case alias -> indices of the entries it names.

    Raises
    ------
    ParameterError
        Out of range, unknown, or an alias several entries share; the message lists the names.
    """
    if not labels:
        raise InputError(f"{name!r} holds no {what}")  # the caller words this case better
    if choice is None:
        return 0
    index = _parse_index(choice)
    if index is not None:
        if not 1 <= index <= len(labels):
            raise ParameterError(
                f"{what} {index} is out of range: {name!r} has {len(labels)} {what}"
                f"{'s' if len(labels) != 1 else ''} ({listing(labels)}); pick 1 to {len(labels)} or a name"
            )
        return index - 1
    if not isinstance(choice, str):
        raise ParameterError(f"{what} must be a 1-based number or a name; got {choice!r}")
    want = choice.strip()
    if want in labels:
        return labels.index(want)
    lower = [s.lower() for s in labels]
    if want.lower() in lower:
        return lower.index(want.lower())
    hits = sorted(set((aliases or {}).get(want.lower(), [])))
    if len(hits) == 1:
        return hits[0]
    if len(hits) > 1:
        raise ParameterError(
            f"{what} name {choice!r} is ambiguous in {name!r}: it names {listing(labels[i] for i in hits)}; "
            "give the full name"
        )
    raise ParameterError(f"no {what} named {choice!r} in {name!r}; its {what}s are {listing(labels)}")


def resolve_rate(file_rate: float | None, source: str | None, given: float | None, name: str, label: str) -> float:
    """The sample rate to use: the file's, else the one given; raise when they disagree or both are missing.

    Parameters
    ----------
    file_rate : float or None, Hz
        What the file states; None when it states nothing.
    source : str or None
        Where the file states it (for messages), e.g. ``"property wf_increment"``.
    given : float or None, Hz
        The ``sample_rate`` option (already checked > 0).
    """
    if file_rate is None:
        if given is None:
            raise InputError(
                f"{label!r} in {name!r} carries no sample rate; pass the sample rate in Hz "
                "(--sample-rate, or sample_rate=)"
            )
        return given
    if not (math.isfinite(file_rate) and file_rate > 0):
        raise InputError(
            f"{label!r} in {name!r} states a sample rate of {file_rate:g} Hz ({source}); fix the file, "
            "it must be a finite number > 0"
        )
    if given is not None and not math.isclose(given, file_rate, rel_tol=_RATE_RTOL):
        raise ParameterError(
            f"sample rate {given:g} Hz given, but {label!r} in {name!r} states {file_rate:.9g} Hz "
            f"({source}); drop the sample rate option (the file's own rate is used)"
        )
    return float(file_rate)


def rate_from_time(t: np.ndarray, name: str, label: str, *, resolution: float | None = None) -> float:
    """Sample rate (Hz) of a time vector in seconds: ``(n - 1) / (t[-1] - t[0])``.

    The steps must increase and be uniform within :data:`ringdown.io.text.MAX_TIMING_JITTER` (relative
    RMS deviation from the mean step), as for a text file's time column; with ``resolution`` (s,
    the step the values were printed to), steps uneven only through that printing (each within
    one resolution of the mean step, the resolution below half a step) are accepted too.
    """
    t = np.asarray(t, dtype=np.float64).ravel()
    steps = np.diff(t)
    if t.size < 2 or not np.all(np.isfinite(t)) or np.any(steps <= 0):
        raise InputError(f"time vector {label!r} in {name!r} does not increase steadily; fix it or pass --sample-rate")
    mean = (t[-1] - t[0]) / (t.size - 1)
    jitter = float(np.sqrt(np.mean((steps - mean) ** 2)) / mean)
    printed = (
        resolution is not None and resolution < 0.5 * mean and float(np.max(np.abs(steps - mean))) <= 1.001 * resolution
    )
    if jitter > MAX_TIMING_JITTER and not printed:
        raise InputError(
            f"time vector {label!r} in {name!r} has steps varying by {100 * jitter:.2g} % RMS (at most "
            f"{100 * MAX_TIMING_JITTER:g} % is accepted); resample to a uniform step"
        )
    return 1.0 / mean


def real_samples(data, name: str, label: str, limit: int) -> np.ndarray:
    """One channel as contiguous float64, or one line saying why it is not a usable signal."""
    arr = np.asarray(data)
    if arr.dtype.kind == "c":
        raise InputError(f"{label!r} in {name!r} holds complex values, not a time signal; pick a real channel")
    if arr.dtype.kind not in "iuf":
        raise InputError(f"{label!r} in {name!r} holds {arr.dtype} values, not numbers; pick a numeric channel")
    check_size(arr.size, name, label, limit)
    return np.ascontiguousarray(arr.reshape(-1), dtype=np.float64)


def check_size(n_values: int, name: str, label: str, limit: int) -> None:
    """Refuse, before decoding, a channel of ``n_values`` samples larger than ``limit`` bytes as float64."""
    if n_values * 8 > limit:
        raise InputError(
            f"{label!r} in {name!r} decodes to {_fmt_bytes(n_values * 8)}, more than the {_fmt_bytes(limit)} "
            "allowed; cut the recording or pass a larger max_bytes"
        )


def recording(samples: np.ndarray, rate: float, label: str, unit: str | None, name: str, n_channels: int) -> Recording:
    """The Recording of one channel read from a format file (length and finiteness checked)."""
    _check_length(samples.shape[0], name)
    bad = ~np.isfinite(samples)
    if bad.any():
        raise InputError(
            f"{label!r} in {name!r} holds {int(bad.sum())} NaN or infinite value(s) (first at sample "
            f"{int(np.flatnonzero(bad)[0])}); cut them or pick another channel"
        )
    return Recording(
        samples=samples,
        sample_rate=rate,
        channel=label,
        path=name,
        sha256=sha256_file(name),
        full_scale=None,
        timing_jitter=None,
        n_channels=n_channels,
        unit=clean_unit(unit),
    )


def clean_unit(unit) -> str | None:
    """A unit label as text: bytes decoded, blanks and ``NONE`` (UFF's placeholder) as None."""
    if unit is None:
        return None
    if isinstance(unit, (bytes, np.bytes_)):
        unit = bytes(unit).decode("utf-8", "replace")
    if isinstance(unit, np.ndarray):
        if unit.size != 1:
            return None
        return clean_unit(unit.reshape(-1)[0])
    text = re.sub(r"\s+", " ", str(unit)).strip()
    return text if text and text.upper() != "NONE" else None


__all__ = [
    "TIME_NAMES",
    "need",
    "reason",
    "listing",
    "pick",
    "resolve_rate",
    "rate_from_time",
    "real_samples",
    "check_size",
    "recording",
    "clean_unit",
    "MIN_SAMPLES",
]
