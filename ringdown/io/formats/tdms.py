"""TDMS files (the file format of many data-acquisition systems), read with npTDMS.

A TDMS file holds groups of channels. Each channel is offered as ``"group/channel"``; a plain
channel name works when only one group has it. The sample rate is ``1 / wf_increment`` (the
waveform property in seconds per sample, looked up on the channel, then its group, then the
file); without it, from a channel of the same group and length named ``t``, ``time``,
``time_s`` or ``times`` (seconds, or timestamps), whose steps must be uniform as for a text time
column. The unit is the channel's ``unit_string`` property.
"""

from __future__ import annotations

import logging
import re

import numpy as np

from ...base.errors import InputError
from ..recording import Recording
from ._common import TIME_NAMES, check_size, need, pick, rate_from_time, real_samples, reason, recording, resolve_rate

__all__ = ["read"]

_NUMERIC = "iuf"


def read(name: str, *, channel: int | str | None = None, sample_rate: float | None = None, limit: int) -> Recording:
    """Read one channel of a TDMS file as a :class:`~ringdown.io.recording.Recording`.

    Parameters
    ----------
    name : str
        The ``.tdms`` file (its ``.tdms_index`` beside it is used by npTDMS when present).
    channel : int, str or None
        1-based index over every channel of every group in file order, ``"group/channel"``, or a
        channel name that only one group has. Default: the first numeric channel.
    sample_rate : float or None, Hz
        Used when the file has no ``wf_increment``; must agree within 0.1 % when it has one.
    limit : int, bytes
        Largest decoded size (float64) accepted for the channel.

    Raises
    ------
    InputError
        npTDMS missing, the file is damaged or not TDMS, the channel is empty or not numeric,
        or no rate is known.
    ParameterError
        Unknown or ambiguous channel, or a sample rate that contradicts ``wf_increment``.
    """
    with open(name, "rb") as fh:
        if fh.read(4) == b"TDSh":
            raise InputError(
                f"{name!r} is a TDMS index file (.tdms_index), which holds no samples; give the .tdms file beside it"
            )
    nptdms = need("nptdms", "TDMS", name)
    with _LibraryWarnings() as damage:
        try:
            try:
                # raw timestamps: seconds and 2^-64 s fractions as stored, not rounded to microseconds
                tdms = nptdms.TdmsFile.open(name, raw_timestamps=True)
            except Exception as exc:  # npTDMS raises ValueError, struct.error, EOFError, KeyError... on damage
                raise InputError(
                    f"{name!r} cannot be read as TDMS ({reason(exc)}); export or copy the file again"
                ) from exc
            with tdms:
                rec = _read_channel(tdms, name, channel, sample_rate, limit)
        except InputError:
            if not damage.messages:
                raise
    if damage.messages:
        # npTDMS reads what it can of a truncated or damaged file and logs a warning: refuse the
        # file rather than analyse part of it without saying so
        raise InputError(
            f"{name!r} is damaged or truncated (npTDMS: {damage.messages[0].rstrip('.')}); export or copy the file "
            "again"
        )
    return rec


class _LibraryWarnings(logging.Handler):
    """Collects (and keeps off stderr) what npTDMS logs at WARNING or above while reading."""

    def __init__(self) -> None:
        super().__init__(level=logging.WARNING)
        self.messages: list[str] = []

    def emit(self, record: logging.LogRecord) -> None:
        # "..., will attempt to read to the end": what npTDMS tries, not what ringdown does
        self.messages.append(reason(re.split(r"[,.]\s*[Ww]ill attempt", record.getMessage())[0]))

    def __enter__(self):
        # npTDMS (1.x) gives each module logger its own console handler: mute it while we listen
        try:
            from nptdms.log import log_manager

            self._console = log_manager.console_handler
        except (ImportError, AttributeError):  # another layout: its messages then reach stderr too
            self._console = None
        if self._console is not None:
            self._console_level = self._console.level
            self._console.setLevel(logging.CRITICAL + 1)
        logging.getLogger("nptdms").addHandler(self)
        return self

    def __exit__(self, *exc_info) -> None:
        logging.getLogger("nptdms").removeHandler(self)
        if self._console is not None:
            self._console.setLevel(self._console_level)


def _read_channel(tdms, name: str, channel, sample_rate: float | None, limit: int):
    """The chosen channel of an open TdmsFile as a Recording (see :func:`read`)."""
    channels = [(g, c) for g in tdms.groups() for c in g.channels()]
    if not channels:
        raise InputError(f"{name!r} is a TDMS file with no channels; export the measurement again")
    labels = [f"{g.name}/{c.name}" for g, c in channels]
    aliases: dict[str, list[int]] = {}
    for i, (_, c) in enumerate(channels):
        aliases.setdefault(c.name.lower(), []).append(i)
    if channel is None:
        numeric = [
            i
            for i, (_, c) in enumerate(channels)
            if _dtype_kind(c) in _NUMERIC and len(c) > 0 and c.name.lower() not in TIME_NAMES
        ]
        if not numeric:
            raise InputError(
                f"{name!r} has no channel of numbers (its channels are {', '.join(map(repr, labels[:12]))}); "
                "export the measurement again"
            )
        index = numeric[0]
    else:
        index = pick(channel, labels, name, aliases=aliases)
    group, chan = channels[index]
    label = labels[index]
    if len(chan) == 0:
        raise InputError(f"channel {label!r} of {name!r} holds no samples; pick another channel")
    if _dtype_kind(chan) not in _NUMERIC:
        raise InputError(
            f"channel {label!r} of {name!r} holds {_dtype_name(chan)} values, not numbers; pick a numeric channel"
        )
    increment, where = _property(tdms, group, chan, "wf_increment")
    x_unit, _ = _property(tdms, group, chan, "wf_xunit_string")
    if x_unit is not None and str(x_unit).strip().lower() not in ("s", "sec", "seconds", ""):
        raise InputError(
            f"channel {label!r} of {name!r} has its x axis in {str(x_unit).strip()!r}, not seconds: "
            "it is not a time record; pick a time channel"
        )
    file_rate: float | None = None
    source: str | None = f"wf_increment = {increment!r} s on the {where}"
    if increment is not None:
        try:
            file_rate = 1.0 / float(increment) if float(increment) != 0 else float("inf")
        except (TypeError, ValueError):
            file_rate = float("nan")
    else:
        file_rate, source = _time_channel_rate(group, chan, name, limit)
    rate = resolve_rate(file_rate, source, sample_rate, name, label)
    samples = real_samples(_decode(chan, label, name, limit), name, label, limit)
    return recording(samples, rate, label, chan.properties.get("unit_string"), name, len(channels))


def _decode(chan, label: str, name: str, limit: int):
    """All values of a channel (its size checked first); a decoding failure is one line."""
    check_size(len(chan), name, label, limit)
    try:
        return chan.read_data()
    except Exception as exc:  # npTDMS raises ValueError, EOFError, struct.error... on damaged data
        raise InputError(
            f"channel {label!r} of {name!r} cannot be decoded ({reason(exc)}); export the file again"
        ) from exc


def _time_channel_rate(group, chan, name: str, limit: int) -> tuple[float | None, str | None]:
    """Rate from a time channel of the same group and length (seconds, or timestamps), else (None, None)."""
    for other in group.channels():
        if other is chan or other.name.lower() not in TIME_NAMES or len(other) != len(chan):
            continue
        label = f"{group.name}/{other.name}"
        t = _decode(other, label, name, limit)
        if _dtype_kind(other) == "M":
            # TDMS timestamps: whole seconds and 2^-64 s fractions (TDMS file format, data types);
            # seconds since the first
            seconds = np.asarray(t["seconds"], dtype=np.int64)
            fractions = np.asarray(t["second_fractions"], dtype=np.float64)
            t = (seconds - seconds[0]) + (fractions - fractions[0]) / 2.0**64
        elif _dtype_kind(other) not in _NUMERIC:
            continue
        return rate_from_time(t, name, label), f"time channel {label!r}"
    return None, None


def _dtype_kind(chan) -> str:
    try:
        return chan.dtype.kind
    except Exception:  # DAQmx raw data or unknown types may have no plain dtype
        return "?"


def _dtype_name(chan) -> str:
    try:
        return str(chan.dtype)
    except Exception:
        return "unreadable"


def _property(tdms, group, chan, key: str):
    """(value, where) of a property on the channel, else its group, else the file; (None, None)."""
    for obj, where in ((chan, "channel"), (group, "group"), (tdms, "file")):
        value = obj.properties.get(key)
        if value is not None:
            return value, where
    return None, None
