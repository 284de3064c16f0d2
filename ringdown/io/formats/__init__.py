"""Readers of data-acquisition file formats, behind :func:`ringdown.read_recording`.

One module per format, each with ``read(name, *, channel, sample_rate, limit) -> Recording``;
this registry picks the module for a file, by content signature first and by name ending second:

==========  ==============================================  ==========================================
module      content signature (first 4096 bytes)            name endings
==========  ==============================================  ==========================================
``tdms``    ``TDSm`` (``TDSh``: an index file)              ``.tdms`` (``.tdms_index``)
``matlab``  ``MATLAB`` text, ``IM``/``MI`` at byte 126      ``.mat`` (also v4, which has no signature)
``hdf5``    ``\\x89HDF\\r\\n\\x1a\\n`` at 0, 512, 1024, 2048  ``.h5``, ``.hdf5``, ``.hdf``, ``.he5``
``uff``     ``    -1`` then a dataset number, both I6       ``.uff``, ``.unv``, ``.uf``
==========  ==============================================  ==========================================

The format modules import their third-party library (npTDMS, pyuff, h5py, scipy.io) only when
they read, so importing ringdown stays fast; a missing library gives one line naming the
``formats`` extra. To add a format, write ``NAME.py`` with ``read`` and add a :class:`Reader`
to :data:`READERS`.
"""

from __future__ import annotations

import importlib
import re
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from ..recording import Recording

__all__ = ["Reader", "READERS", "SUFFIXES", "find_reader"]

_HDF5_MAGIC = b"\x89HDF\r\n\x1a\n"
# A UFF file is a sequence of datasets, each opened by a line holding -1 in format I6 and a line
# whose first field is the dataset number in I6 ("58b" for binary dataset 58). The signature
# asks for exactly those widths, so that a column of integers in a text file never matches; a
# file written with other widths is still read by its name ending.
_UFF_START = re.compile(rb"\A {4}-1[ \t]*\r?\n(?=[ \d]{6}(?:b|[ \t]|\r?\n)) *\d{1,6}")


def _is_hdf5(head: bytes) -> bool:
    # HDF5 File Format Specification 3.0, "Format Signature": the superblock sits at 0 or at
    # 512, 1024, 2048... (after a user block)
    return any(head[k : k + 8] == _HDF5_MAGIC for k in (0, 512, 1024, 2048))


@dataclass(frozen=True)
class Reader:
    """One file format: its label, module, name endings and content test."""

    label: str
    module: str
    suffixes: tuple[str, ...]
    signature: Callable[[bytes], bool]

    def read(self, name: str, *, channel: Any, sample_rate: float | None, limit: int) -> Recording:
        """Import the format module and read one channel of ``name`` (a Recording)."""
        mod = importlib.import_module(f".{self.module}", __name__)
        return mod.read(name, channel=channel, sample_rate=sample_rate, limit=limit)


#: The registered formats, in the order their signatures are tried (MATLAB v7.3 files are HDF5
#: files with a MATLAB header, so MATLAB comes first).
READERS: tuple[Reader, ...] = (
    Reader("TDMS", "tdms", (".tdms", ".tdms_index"), lambda h: h[:4] in (b"TDSm", b"TDSh")),
    # MAT-File Format (MathWorks): 116 bytes of text starting "MATLAB", then at byte 126 the
    # endian indicator "IM" or "MI"; v7.3 keeps that header in the HDF5 user block
    Reader("MATLAB", "matlab", (".mat",), lambda h: h[:6] == b"MATLAB" and h[126:128] in (b"IM", b"MI")),
    Reader("HDF5", "hdf5", (".h5", ".hdf5", ".hdf", ".he5"), _is_hdf5),
    Reader("UFF", "uff", (".uff", ".unv", ".uf"), lambda h: _UFF_START.match(h) is not None),
)

#: Every name ending a registered format claims (folders are expanded to these too).
SUFFIXES: tuple[str, ...] = tuple(s for r in READERS for s in r.suffixes if s != ".tdms_index")


def find_reader(name: str, head: bytes, *, other_format: bool = False) -> Reader | None:
    """The reader of a file: the first whose signature matches ``head``, else the one whose name
    ending ``name`` has (unless ``other_format``: the head is already known as another format).

    Parameters
    ----------
    name : str
        File name.
    head : bytes
        The file's first bytes (4096 or all of a shorter file).
    other_format : bool
        True when ``head`` starts like a format read elsewhere (a sound file).
    """
    for reader in READERS:
        if reader.signature(head):
            return reader
    if other_format:
        return None
    lower = name.lower()
    for reader in READERS:
        if lower.endswith(reader.suffixes):
            return reader
    return None
