"""Sound files (WAV, FLAC, OGG, AIFF, ...) through soundfile (libsndfile), and the leading bytes
that tell a sound file from text.

Integer PCM is scaled to [-1, 1), so its full scale is 1.0 (used downstream to recognise
clipping); float files keep their stored values and have no known full scale. A WAV whose data
chunk claims more bytes than the file holds is read as far as it goes, with a ``truncated`` note.
"""

from __future__ import annotations

import math
import os
import re
import struct

import numpy as np

from ..base.errors import InputError, ParameterError
from .files import (
    _RATE_RTOL,
    _check_length,
    _fmt_bytes,
    _limit_origin,
    _one_line,
    _open,
    _parse_index,
    _selection,
    sha256_file,
)
from .recording import Recording

# Leading bytes of the sound formats people are likely to record in: a file that starts with
# one of these and still cannot be opened is a damaged sound file, not text.
AUDIO_MAGIC = {
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


def sound_info(name: str):
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


def read_sound(name, info, *, channel, column, sample_rate, limit, max_bytes) -> Recording:
    """One channel of the sound file ``name`` (its :func:`sound_info` ``info``) as a Recording;
    `limit` is the size limit in bytes (`max_bytes` as given, to word the error)."""
    import soundfile as sf

    n_channels = int(info.channels)
    frames = int(info.frames)
    rate = float(info.samplerate)
    index = _channel_index(_selection(channel, column, name), n_channels, name)
    _check_stated_rate(sample_rate, rate, name)
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


def _channel_index(choice: object, n_channels: int, name: str) -> int:
    """The 1-based channel ``choice`` names (the first when None); ParameterError for one that is
    not a number or not among the ``n_channels`` channels of ``name``."""
    if choice is None:
        return 1
    index = _parse_index(choice)
    if index is None:
        raise ParameterError(f"channel {choice!r} of {name!r} is not a channel number; give 1 to {n_channels}")
    if not 1 <= index <= n_channels:
        raise ParameterError(
            f"channel {index} is out of range: {name!r} has {n_channels} "
            f"channel{'s' if n_channels != 1 else ''}; pick 1 to {n_channels}"
        )
    return index


def _check_stated_rate(sample_rate: float | None, rate: float, name: str) -> None:
    """ParameterError when a sample rate passed in disagrees (beyond 0.1 %) with the ``rate`` Hz
    the sound file ``name`` states."""
    if sample_rate is not None and not math.isclose(float(sample_rate), rate, rel_tol=_RATE_RTOL):
        raise ParameterError(
            f"sample rate {float(sample_rate):g} Hz given, but {name!r} states {rate:g} Hz; "
            "drop the sample rate option (the file's own rate is used)"
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
