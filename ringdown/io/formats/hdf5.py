"""HDF5 files, and MATLAB v7.3 files (HDF5 with MATLAB's layout), read with h5py.

Every numeric dataset of one or two dimensions with at least :data:`ringdown.io.files.MIN_SAMPLES`
samples, anywhere in the file, is a channel named by its path (``"run1/accel"``; ``"accel:2"``
for the second channel of a 2-D dataset); a dataset's own name works when only one has it. The
sample rate and unit come from the names listed in :mod:`ringdown.io.formats._tree`.

In a MATLAB v7.3 file (MATLAB's own layout: a 512-byte header, then HDF5 with every variable a
dataset carrying a ``MATLAB_class`` attribute and structs as groups), struct fields are named
``s.field`` as in a v5 file, ``char`` variables are read as text, and the ``#refs#`` and
``#subsystem#`` groups (cell arrays, objects), sparse, logical and complex variables are skipped.
"""

from __future__ import annotations

import operator
from functools import partial

from ...base.errors import InputError
from ..recording import Recording
from ._common import need, reason
from ._tree import Array, Node, read_signal

__all__ = ["read", "read_hdf5"]

#: MATLAB classes read as numbers (MAT-File Format, MATLAB array classes).
_MATLAB_NUMERIC = {"double", "single", "int8", "uint8", "int16", "uint16", "int32", "uint32", "int64", "uint64"}


def read(name: str, *, channel: int | str | None = None, sample_rate: float | None = None, limit: int) -> Recording:
    """Read one channel of an HDF5 file (see :func:`read_hdf5`)."""
    return read_hdf5(name, channel=channel, sample_rate=sample_rate, limit=limit, matlab=False)


def read_hdf5(
    name: str, *, channel: int | str | None = None, sample_rate: float | None = None, limit: int, matlab: bool
) -> Recording:
    """Read one channel of an HDF5 or MATLAB v7.3 file as a :class:`~ringdown.io.recording.Recording`.

    Parameters
    ----------
    name : str
    channel : int, str or None
        1-based index over the channels in file order, a path (``"run1/accel"``, ``"s.accel"``
        in a MATLAB file, ``"accel:2"``), or a dataset's own name when unique. Default: the first.
    sample_rate : float or None, Hz
        Used when the file names no rate; must agree within 0.1 % when it names one.
    limit : int, bytes
        Largest decoded size (float64) accepted for the channel.
    matlab : bool
        Read MATLAB's v7.3 layout (struct fields with ``.``, ``char`` as text).

    Raises
    ------
    InputError
        h5py missing, the file damaged, no numeric signal, no rate known.
    ParameterError
        Unknown or ambiguous channel, or a sample rate that contradicts the file.
    """
    what = "MATLAB v7.3" if matlab else "HDF5"
    h5py = need("h5py", what, name)
    try:
        fh = h5py.File(name, "r")
    except Exception as exc:  # OSError for truncated or damaged files
        raise InputError(f"{name!r} cannot be read as {what} ({reason(exc)}); save or copy the file again") from exc
    with fh:
        try:
            root = _node(fh, h5py, matlab)
        except Exception as exc:
            raise InputError(f"{name!r} cannot be read as {what} ({reason(exc)}); save or copy the file again") from exc
        return read_signal(
            root,
            name,
            channel=channel,
            sample_rate=sample_rate,
            limit=limit,
            sep="." if matlab else "/",
            what=f"{what} file",
        )


def _text(value) -> str | None:
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, str):
        return value
    if hasattr(value, "dtype") and value.dtype.kind in "SU" and value.size == 1:
        return _text(value.reshape(-1)[0].item() if hasattr(value, "reshape") else value)
    return None


def _attrs(obj) -> dict:
    out = {}
    for key in obj.attrs:
        try:
            out[key] = obj.attrs[key]
        except Exception:  # an attribute of a type h5py cannot read: not one we look for
            continue
    return out


def _node(group, h5py, matlab: bool) -> Node:
    node = Node(attrs=_attrs(group))
    for key in group:
        if matlab and key.startswith("#"):
            continue  # #refs# (cell contents), #subsystem# (objects)
        obj = group.get(key)
        if obj is None:
            continue  # a dangling link holds nothing to read
        if isinstance(obj, h5py.Group):
            if matlab and "MATLAB_sparse" in obj.attrs:
                continue  # a sparse matrix (data/ir/jc datasets), not a struct of signals
            node.children[key] = _node(obj, h5py, matlab)
            continue
        if not isinstance(obj, h5py.Dataset):
            continue
        attrs = _attrs(obj)
        kind = obj.dtype.kind
        if matlab:
            cls = _text(attrs.get("MATLAB_class")) or ""
            if "MATLAB_empty" in attrs:
                continue
            if cls == "char":
                node.values[key] = "".join(chr(c) for c in obj[()].reshape(-1, order="F"))
                continue
            if cls not in _MATLAB_NUMERIC:
                continue  # logical, cell, function handles, objects: not signals
        if kind in "SUO":
            text = _text(obj[()]) if obj.shape == () or obj.size == 1 else None
            if text is not None:
                node.values[key] = text
            continue
        if kind not in "iufc":
            continue
        if obj.size == 1:
            node.values[key] = obj[()]
            continue
        node.arrays[key] = Array(tuple(obj.shape), obj.dtype, partial(operator.getitem, obj), attrs)
    return node
