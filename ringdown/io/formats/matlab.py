"""MATLAB ``.mat`` files: v4 and v5 (v6, v7) through ``scipy.io.loadmat``, v7.3 through h5py.

Variables and struct fields (``s.field``, nested to any depth) that are numeric vectors or 2-D
matrices are channels; the sample rate, time vector and unit are found by the names listed in
:mod:`ringdown.io.formats._tree` (``fs``, ``dt``, ``t``, ``NAME_unit``...). A v7.3 file (an HDF5
file behind MATLAB's 512-byte header) goes to :func:`ringdown.io.formats.hdf5.read_hdf5`, which
names its variables the same way.
"""

from __future__ import annotations

import operator
from functools import partial

import numpy as np

from ...base.errors import InputError
from ..files import _fmt_bytes
from ..recording import Recording
from ._common import reason
from ._tree import Array, Node, read_signal

__all__ = ["read"]

_HDF5_MAGIC = b"\x89HDF\r\n\x1a\n"


def read(name: str, *, channel: int | str | None = None, sample_rate: float | None = None, limit: int) -> Recording:
    """Read one channel of a MATLAB file as a :class:`~ringdown.io.recording.Recording`.

    Parameters are those of :func:`ringdown.io.formats.hdf5.read_hdf5` (without ``matlab``).

    Raises
    ------
    InputError
        The file is damaged or not a MAT-file, too large, holds no numeric signal or no rate.
    ParameterError
        Unknown or ambiguous channel, or a sample rate that contradicts the file.
    """
    with open(name, "rb") as fh:
        head = fh.read(520)
    if head[512:520] == _HDF5_MAGIC or head[:10] == b"MATLAB 7.3":
        from .hdf5 import read_hdf5

        return read_hdf5(name, channel=channel, sample_rate=sample_rate, limit=limit, matlab=True)
    import scipy.io

    try:
        listed = scipy.io.whosmat(name)
    except Exception as exc:  # ValueError "Unknown mat file type", MatReadError, zlib errors...
        raise InputError(f"{name!r} cannot be read as a MATLAB file ({reason(exc)}); save it again") from exc
    decoded = sum(int(np.prod(shape)) * 8 for _, shape, cls in listed if cls not in ("struct", "cell", "char"))
    if decoded > limit:
        raise InputError(
            f"{name!r} holds {_fmt_bytes(decoded)} of numbers, more than the {_fmt_bytes(limit)} allowed; "
            "save the one signal alone or pass a larger max_bytes"
        )
    try:
        content = scipy.io.loadmat(name, simplify_cells=True)
    except Exception as exc:
        raise InputError(f"{name!r} cannot be read as a MATLAB file ({reason(exc)}); save it again") from exc
    return read_signal(
        _node(content), name, channel=channel, sample_rate=sample_rate, limit=limit, sep=".", what="MATLAB file"
    )


def _node(mapping: dict) -> Node:
    node = Node()
    for key, value in mapping.items():
        if key.startswith("__"):
            continue  # __header__, __version__, __globals__
        if isinstance(value, dict):
            node.children[key] = _node(value)
        elif isinstance(value, str):
            node.values[key] = value
        elif isinstance(value, (int, float, np.number)) and not isinstance(value, bool):
            node.values[key] = value
        elif isinstance(value, np.ndarray) and value.dtype.kind in "iufc":
            if value.size == 1:
                node.values[key] = value.reshape(-1)[0]
            elif value.size > 1:
                node.arrays[key] = Array(value.shape, value.dtype, partial(operator.getitem, value))
        # cell arrays (lists, object arrays), struct arrays, logicals: not signals
    return node
