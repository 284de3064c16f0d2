"""Block sources: samples arriving a block at a time, for the block engine (:mod:`ringdown.analysis.engine`).

A block source is an iterable of :class:`Block` with the attributes ``sample_rate`` (Hz),
``total_samples`` (int, or ``None`` for a live input) and ``dropped_blocks`` (how many blocks the
source lost: an input overflow). Three are here:

* :class:`SoundFileBlocks` reads one channel of a sound file through ``soundfile.blocks``
  (libsndfile), never holding more than one block;
* :class:`ArrayBlocks` cuts an array into blocks and can drop chosen blocks: the simulated input
  of the tests;
* :class:`Paced` hands another source's blocks on at real time, or ``speed`` times faster
  (``ringdown listen --replay``).

The sound-card input (sounddevice, PortAudio) is :class:`ringdown.io.device.DeviceBlocks`.
"""

from __future__ import annotations

import math
import os
import time
from collections.abc import Iterator, Sequence
from dataclasses import dataclass

import numpy as np

from ..base.errors import InputError, ParameterError

__all__ = ["Block", "SoundFileBlocks", "ArrayBlocks", "Paced", "DEFAULT_BLOCK_SAMPLES"]

#: Samples per block read from a file: 64 Ki samples (512 KiB of float64), small against the
#: segments the engine analyses and large enough that reading costs little per sample
#: (common practice, no source).
DEFAULT_BLOCK_SAMPLES = 1 << 16


@dataclass(frozen=True, slots=True, eq=False)
class Block:
    """One block of samples.

    Attributes
    ----------
    samples : (n,) ndarray of float64
        One channel, in the source's units (full scale 1.0 for audio).
    start : int
        Index in the stream of ``samples[0]``; samples lost to an overflow still count, so
        ``start / sample_rate`` is the block's time from the stream's start.
    dropped : int
        Samples lost just before this block (an input overflow), 0 normally.
    """

    samples: np.ndarray
    start: int
    dropped: int = 0


class ArrayBlocks:
    """An array handed out in blocks, optionally dropping some: the simulated input of the tests.

    Parameters
    ----------
    x : (n_samples,) array_like of float
    sample_rate : float, Hz
    block_samples : int >= 1
    drop : sequence of int
        Indices of blocks that are lost (as an input overflow loses them): they are not handed
        out, the next block's ``dropped`` counts their samples, and ``dropped_blocks`` counts them.
    """

    def __init__(
        self, x, sample_rate: float, *, block_samples: int = DEFAULT_BLOCK_SAMPLES, drop: Sequence[int] = ()
    ) -> None:
        self.x = np.asarray(x, dtype=np.float64)
        self.sample_rate = float(sample_rate)
        self.block_samples = _check_block(block_samples)
        self.drop = frozenset(int(d) for d in drop)
        self.total_samples = int(self.x.shape[0])
        self.dropped_blocks = 0
        self.full_scale = None

    def __iter__(self) -> Iterator[Block]:
        lost = 0
        b = self.block_samples
        for j, k in enumerate(range(0, self.total_samples, b)):
            if j in self.drop:
                self.dropped_blocks += 1
                lost += min(b, self.total_samples - k)
                continue
            yield Block(self.x[k : k + b].copy(), k, lost)
            lost = 0


class SoundFileBlocks:
    """One channel of a sound file (WAV, FLAC, ...), read a block at a time.

    The checks of :func:`ringdown.read_recording` apply (channel in range, a given sample rate
    that agrees with the file's); the attributes ``path``, ``sha256``, ``channel``,
    ``n_channels``, ``full_scale`` and ``notes`` are those the whole-file reader gives the
    :class:`~ringdown.recording.Recording`. ``start`` and ``stop`` (sample indices) read part of
    the file only.

    Raises
    ------
    InputError
        The file cannot be opened as a sound file.
    ParameterError
        ``channel`` out of range, ``sample_rate`` in conflict with the file's.
    """

    def __init__(
        self,
        path,
        *,
        channel=None,
        sample_rate: float | None = None,
        block_samples: int = DEFAULT_BLOCK_SAMPLES,
        start: int = 0,
        stop: int | None = None,
    ) -> None:
        from . import files as _files
        from . import sound as _sound

        name = os.fspath(path)
        info, reason = _sound.sound_info(name)
        if info is None:
            raise InputError(f"{name!r} cannot be read as a sound file ({reason})")
        n_channels = int(info.channels)
        index = _sound._channel_index(_files._selection(channel, None, name), n_channels, name)
        rate = float(info.samplerate)
        _sound._check_stated_rate(sample_rate, rate, name)
        frames = int(info.frames)
        self.path = name
        self.info = info
        self.sample_rate = rate
        self.channel = str(index)
        self.n_channels = n_channels
        self.full_scale = _sound._full_scale(str(info.subtype))
        self.start = max(0, int(start))
        self.stop = frames if stop is None else min(frames, int(stop))
        self.total_samples = max(0, self.stop - self.start)
        self.block_samples = _check_block(block_samples)
        self.dropped_blocks = 0
        self._index = index
        self.notes = _sound._wav_truncation(name, frames) if str(info.format).upper().startswith("WAV") else ()
        self._sha256: str | None = None

    @property
    def sha256(self) -> str:
        """SHA-256 of the file's bytes (read in 1 MiB chunks, on first use)."""
        if self._sha256 is None:
            from .files import sha256_file

            self._sha256 = sha256_file(self.path)
        return self._sha256

    def __iter__(self) -> Iterator[Block]:
        import soundfile as sf

        pos = self.start
        try:
            for data in sf.blocks(
                self.path,
                blocksize=self.block_samples,
                dtype="float64",
                always_2d=True,
                start=self.start,
                stop=self.stop,
            ):
                yield Block(np.ascontiguousarray(data[:, self._index - 1]), pos - self.start)
                pos += data.shape[0]
        except (RuntimeError, sf.LibsndfileError) as exc:
            raise InputError(
                f"cannot decode {self.path!r} after {pos} samples: {exc}; export or copy the recording again"
            ) from exc


class Paced:
    """Hand on another source's blocks at the pace of real time, or ``speed`` times faster.

    ``speed`` > 0; ``math.inf`` hands them on as fast as they come. The attributes of the
    wrapped source are available on this object.
    """

    def __init__(self, source, speed: float = 1.0, *, clock=None, sleep=time.sleep) -> None:
        if not (isinstance(speed, (int, float)) and speed > 0):
            raise ParameterError(f"speed must be a number > 0 (1 = real time); got {speed!r}")
        self.source = source
        self.speed = float(speed)
        if clock is None:
            from ..base.clock import seconds as clock
        self._clock, self._sleep = clock, sleep

    def __getattr__(self, name):
        return getattr(self.source, name)

    def __iter__(self) -> Iterator[Block]:
        t0 = self._clock()
        fs = self.source.sample_rate
        for blk in self.source:
            due = t0 + (blk.start + blk.samples.shape[0]) / fs / self.speed
            wait = due - self._clock()
            if wait > 0 and math.isfinite(wait):
                self._sleep(wait)
            yield blk


def _check_block(n) -> int:
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
        raise ParameterError(f"block size must be a whole number of samples >= 1; got {n!r}")
    return int(n)
