"""The one clock: every time stamp ringdown writes (limits files, the history, Parquet rows and
file names, reports) is read here, so a test can stop it in one place.

Durations (a batch's elapsed time, a flush interval) are differences of :func:`seconds`, a
monotonic clock that never steps back when the wall clock is set.

Stamps are ISO 8601 (RFC 3339 profile): UTC with a ``Z``, or local time with its offset for a
report a person reads.
"""

from __future__ import annotations

import datetime as _dt
import time as _time

__all__ = ["utc_now", "utc_stamp", "local_stamp", "seconds"]


def utc_now() -> _dt.datetime:
    """The current time, timezone-aware, in UTC."""
    return _dt.datetime.now(_dt.timezone.utc)


def utc_stamp(timespec: str = "seconds") -> str:
    """The current UTC time as ISO 8601 text ending ``Z``: ``2026-12-02T01:15:00Z``.

    Parameters
    ----------
    timespec : str
        As :meth:`datetime.datetime.isoformat`: ``"seconds"`` (limits files) or
        ``"microseconds"`` (the history, where rows written within one second must sort).
    """
    return utc_now().isoformat(timespec=timespec).replace("+00:00", "Z")


def local_stamp() -> str:
    """The current local time with its UTC offset, to the second: ``2026-12-02T02:15:00+01:00``."""
    return utc_now().astimezone().isoformat(timespec="seconds")


def seconds() -> float:
    """A monotonic clock, s (only differences mean anything): :func:`time.monotonic`."""
    return _time.monotonic()
