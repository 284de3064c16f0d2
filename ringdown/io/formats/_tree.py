"""Signals, sample rates and units in a tree of named arrays: MATLAB files and HDF5 files.

Both readers turn their file into :class:`Node` objects (a MATLAB struct or the top level, an
HDF5 group) holding small values already read (scalars and text), arrays not read yet, and
attributes; :func:`read_signal` then finds the channels, picks one and its rate, and reads it.

Recognised names (case-insensitive):

* sample rate in Hz: :data:`RATE_NAMES`; sample interval in s: :data:`INTERVAL_NAMES` — a scalar
  attribute of the signal's dataset, else a scalar variable, field or attribute of the struct or
  group holding it, else of the one above, up to the top;
* time vector in s: :data:`TIME_NAMES` — a vector of the signal's length beside it (or higher up);
  its steps must be uniform as for a text file's time column;
* unit: an attribute ``unit``/``units`` of the dataset, else a text variable or field
  ``NAME_unit``/``NAME_units`` or ``unit``/``units`` beside the signal ``NAME``.

Without a choice the first floating-point channel is read, else the first integer one.
A 2-D array is several channels along its longer axis: ``NAME:1``, ``NAME:2``... (samples on
the longer axis, as a MATLAB column per channel or a row per channel both give).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ...base.errors import InputError
from ..files import _RATE_RTOL
from ..recording import Recording
from ._common import (
    MIN_SAMPLES,
    TIME_NAMES,
    check_size,
    clean_unit,
    pick,
    rate_from_time,
    real_samples,
    reason,
    recording,
    resolve_rate,
)

#: Names of a scalar sample rate, Hz.
RATE_NAMES = ("fs", "sample_rate", "samplerate", "sampling_rate", "sampling_frequency", "sample_rate_hz", "fs_hz")
#: Names of a scalar sample interval, s.
INTERVAL_NAMES = ("dt", "sample_interval", "sampling_interval", "time_step", "wf_increment")
_UNIT_NAMES = ("unit", "units")


@dataclass
class Array:
    """An array not read yet: its stored shape and dtype, a reader, its attributes."""

    shape: tuple[int, ...]
    dtype: np.dtype
    read: Callable[[Any], Any]  # read(numpy index expression) -> ndarray
    attrs: dict = field(default_factory=dict)


@dataclass
class Node:
    """A struct or group: small values (numbers, text), arrays, sub-nodes, attributes."""

    values: dict = field(default_factory=dict)
    arrays: dict[str, Array] = field(default_factory=dict)
    children: dict = field(default_factory=dict)
    attrs: dict = field(default_factory=dict)


@dataclass
class _Entry:
    label: str
    leaf: str
    array: Array
    index: object
    n: int
    chain: list  # the nodes holding the array, innermost first


def _lookup(mapping: dict, names) -> tuple[str, Any] | None:
    lower = {str(k).lower(): (k, v) for k, v in mapping.items()}
    for want in names:
        if want in lower:
            return lower[want]
    return None


def _scalar(value) -> float | None:
    try:
        arr = np.asarray(value)
    except Exception:
        return None
    if arr.size != 1 or arr.dtype.kind not in "iuf":
        return None
    return float(arr.reshape(-1)[0])


def _entries(root: Node, sep: str) -> tuple[list[_Entry], dict[str, str]]:
    """The channels of the tree, and why each other numeric array is not one (lower-case path -> reason)."""
    out: list[_Entry] = []
    skipped: dict[str, str] = {}

    def walk(node: Node, prefix: str, chain: list) -> None:
        chain = [node, *chain]
        for key, arr in node.arrays.items():
            if str(key).lower() in TIME_NAMES or arr.dtype.kind not in "iufc":
                continue
            shape = tuple(int(s) for s in arr.shape)
            dims = [s for s in shape if s != 1]
            path = f"{prefix}{key}"
            if max(shape, default=0) < MIN_SAMPLES:
                skipped[path.lower()] = f"has {int(np.prod(shape))} values, fewer than the {MIN_SAMPLES} samples needed"
            elif len(dims) == 1:
                out.append(_Entry(path, str(key), arr, (), dims[0], chain))
            elif len(shape) == 2 and len(dims) == 2:
                long_axis = 0 if shape[0] >= shape[1] else 1
                for j in range(shape[1 - long_axis]):
                    index = (slice(None), j) if long_axis == 0 else (j, slice(None))
                    out.append(_Entry(f"{path}:{j + 1}", str(key), arr, index, shape[long_axis], chain))
            else:
                skipped[path.lower()] = (
                    f"is a {len(dims)}-D array {'x'.join(map(str, shape))}; ringdown reads "
                    "vectors and 2-D arrays (a channel per column or row)"
                )
        for key, child in node.children.items():
            walk(child, f"{prefix}{key}{sep}", chain)

    walk(root, "", [])
    return out, skipped


def _rate(entry: _Entry, name: str) -> tuple[float | None, str | None]:
    """(rate Hz, where it came from) for one channel, or (None, None)."""
    levels = [(entry.array.attrs, f"attribute of {entry.label.split(':')[0]!r}")]
    for node in entry.chain:
        levels.append((node.attrs, "attribute"))
        levels.append((node.values, "variable"))
    for mapping, kind in levels:
        found = []
        hit = _lookup(mapping, RATE_NAMES)
        if hit is not None and (fs := _scalar(hit[1])) is not None:
            found.append((fs, f"{kind} {hit[0]!r} = {fs:g} Hz"))
        hit = _lookup(mapping, INTERVAL_NAMES)
        if hit is not None and (dt := _scalar(hit[1])) is not None:
            found.append((1.0 / dt if dt else float("inf"), f"{kind} {hit[0]!r} = {dt:g} s"))
        if found:
            if len(found) == 2 and not math.isclose(found[0][0], found[1][0], rel_tol=_RATE_RTOL):
                raise InputError(
                    f"{name!r} states two sample rates for {entry.label!r}: {found[0][1]} and {found[1][1]}; "
                    "fix the file"
                )
            return found[0]
    for node in entry.chain:
        hit = _lookup(node.arrays, TIME_NAMES)
        if hit is None:
            continue
        key, arr = hit
        if [s for s in arr.shape if s != 1] == [entry.n]:
            return rate_from_time(arr.read(()), name, str(key)), f"time vector {key!r}"
    return None, None


def _unit(entry: _Entry) -> str | None:
    hit = _lookup(entry.array.attrs, _UNIT_NAMES)
    if hit is not None and clean_unit(hit[1]):
        return clean_unit(hit[1])
    node = entry.chain[0]
    for names in ((f"{entry.leaf.lower()}_unit", f"{entry.leaf.lower()}_units"), _UNIT_NAMES):
        hit = _lookup(node.values, names)
        if hit is not None and isinstance(hit[1], (str, bytes)):
            return clean_unit(hit[1])
    return None


def read_signal(
    root: Node, name: str, *, channel, sample_rate: float | None, limit: int, sep: str, what: str
) -> Recording:
    """Pick one channel of the tree, find its rate and unit, read it; a Recording.

    Parameters
    ----------
    root : Node
    name : str
        File name for messages.
    channel : int, str or None
        1-based index over every channel in file order, a channel label (``"s.accel"``,
        ``"run1/accel"``, ``"accel:2"``), or a variable's own name when only one channel has it.
    sample_rate : float or None, Hz
    limit : int, bytes
    sep : str
        Separator of nested names (``"."`` for MATLAB structs, ``"/"`` for HDF5 groups).
    what : str
        The kind of file for messages ("MATLAB file", "HDF5 file").
    """
    entries, skipped = _entries(root, sep)
    if isinstance(channel, str) and channel.strip().lower() in skipped:
        raise InputError(f"{channel.strip()!r} in {name!r} {skipped[channel.strip().lower()]}; pick another signal")
    if not entries:
        raise InputError(
            f"{name!r} is a {what} with no numeric vector or matrix of at least {MIN_SAMPLES} samples; "
            "save the signal as a numeric array"
        )
    labels = [e.label for e in entries]
    aliases: dict[str, list[int]] = {}
    for i, e in enumerate(entries):
        base = e.label.split(":")[0].lower()
        aliases.setdefault(base, []).append(i)
        if e.leaf.lower() != base:
            aliases.setdefault(e.leaf.lower(), []).append(i)
    if channel is None:
        # the first floating-point channel, else the first integer one (flags and counters are
        # often small integer arrays); a complex one is refused only when asked for
        i = next(
            (k for k, e in enumerate(entries) if e.array.dtype.kind == "f"),
            next((k for k, e in enumerate(entries) if e.array.dtype.kind in "iu"), 0),
        )
    else:
        i = pick(channel, labels, name, what="signal", aliases=aliases)
    entry = entries[i]
    file_rate, source = _rate(entry, name)
    rate = resolve_rate(file_rate, source, sample_rate, name, entry.label)
    check_size(entry.n, name, entry.label, limit)
    try:
        data = entry.array.read(entry.index)
    except InputError:
        raise
    except Exception as exc:  # h5py raises OSError/KeyError/ValueError on damaged data
        raise InputError(f"{entry.label!r} in {name!r} cannot be read ({reason(exc)}); save the file again") from exc
    samples = real_samples(data, name, entry.label, limit)
    return recording(samples, rate, entry.label, _unit(entry), name, len(entries))
