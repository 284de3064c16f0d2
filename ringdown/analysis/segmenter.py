"""The segmenter of the block engine: a stream of blocks cut into segments, one or more hits
each, in bounded memory (:mod:`ringdown.analysis.engine` analyses a file's segments; the live
station, :mod:`ringdown.inspection.station`, one tap per segment).

How the level decides (every span in samples, never in seconds, like :mod:`ringdown.condition`):

* the level of a frame of :data:`FRAME_SAMPLES` samples is its mean square in dB;
* the noise floor is the lowest median of blocks of 8 frames over the last
  :data:`NOISE_MEMORY_FRAMES` frames outside hits: the record's own quietest stretch, as
  :func:`ringdown.condition.noise_floor_db` takes it;
* a trigger is a rise of 12 dB within 2 frames to at least ``min_hit_snr_db`` above the floor
  (the rise that :func:`ringdown.condition.find_hits` asks for);
* a hit ends when the level has stayed within 3 dB of the floor for :data:`QUIET_FRAMES` frames
  (at +3.01 dB the signal power equals the noise power: the modes are at the noise).

The trigger only decides where the stream is cut; the analysis of each segment decides what is a
hit and what its modes are.
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

from ..base.errors import ParameterError

__all__ = ["Segment", "Segmenter", "iter_segments", "FRAME_SAMPLES", "SEGMENT_SAMPLES"]

#: Samples per frame of the trigger's level: 256, a common audio block (common practice, no
#: source). Short against a tap's decay at audio rates, long enough that the mean square of
#: Gaussian noise over a frame scatters by only +-0.4 dB (sqrt(2/256) relative [derived]).
FRAME_SAMPLES = 256
#: A trigger rises this much within :data:`RISE_FRAMES` frames (as :func:`condition.find_hits`).
RISE_DB = 12.0
RISE_FRAMES = 2
#: A second rise within this many frames of a trigger is the same hit (a bounce); after it,
#: a rise must also stand 3 dB above the level of those frames (as ``find_hits``'s hold-off).
HOLD_FRAMES = 8
#: The level must stay at the noise this many frames (8, the noise floor's block) to end a hit.
QUIET_FRAMES = 8
#: Frames per block whose median the noise floor takes (as :data:`condition.NOISE_BLOCK_WIDTHS`).
NOISE_BLOCK_FRAMES = 8
#: How far back (frames outside hits) the noise floor looks: 256 frames, 64 Ki samples.
NOISE_MEMORY_FRAMES = 256
#: Within this of the floor the level is "at the noise": signal power <= noise power [derived].
END_MARGIN_DB = 10.0 * math.log10(2.0)
#: The level of a frame of exact zeros (mean square 0, i.e. 10 log10(1e-300)); such frames do not
#: enter the noise floor.
_SILENT_DB = -2999.0
#: Fewest samples of pre-trigger a live segment keeps (64 frames, 16 Ki samples); more when a
#: longer decay has been seen, because the analysis looks as far before an onset as the decay
#: is long (:func:`ringdown.pipeline.analyze_recording`).
MIN_PRE_TRIGGER_SAMPLES = 64 * FRAME_SAMPLES
#: Buffer a file's segment may fill before it is cut: 2**18 samples (2 MiB of float64; 5.5 s at 48 kHz). The analysis
#: of a segment of this length with 8 taps peaks near 55 MB (tracemalloc), whatever the file's length.
SEGMENT_SAMPLES = 1 << 18


@dataclass(frozen=True, slots=True, eq=False)
class Segment:
    """A stretch of the stream with its hits, cut where the level was back at the noise.

    Attributes
    ----------
    samples : (n,) ndarray of float64
    start : int
        Index in the stream of ``samples[0]`` (samples lost to overflows counted).
    triggers : tuple of int
        Stream indices of the frames where the level rose (a trigger each).
    dropped : int
        Samples lost inside the segment (input overflow): times after the loss are late by up
        to that many samples and the decay there has a gap.
    truncated : bool
        Cut while a decay was still ringing (``max_segment`` reached).
    """

    samples: np.ndarray
    start: int
    triggers: tuple[int, ...]
    dropped: int = 0
    truncated: bool = False

    @property
    def n_samples(self) -> int:
        return int(self.samples.shape[0])


class _Buffer:
    """A growable float64 buffer with cheap appends and removal from the front."""

    def __init__(self) -> None:
        self._a = np.empty(1 << 16)
        self._lo = 0
        self._hi = 0

    def __len__(self) -> int:
        return self._hi - self._lo

    def append(self, x: np.ndarray) -> None:
        n = x.shape[0]
        if self._hi + n > self._a.shape[0]:
            live = self._a[self._lo : self._hi]
            cap = (
                max(self._a.shape[0], 2 * (live.shape[0] + n))
                if live.shape[0] + n > self._a.shape[0] // 2
                else self._a.shape[0]
            )
            new = np.empty(cap)
            new[: live.shape[0]] = live
            self._a, self._lo, self._hi = new, 0, live.shape[0]
        self._a[self._hi : self._hi + n] = x
        self._hi += n

    def view(self, lo: int, hi: int) -> np.ndarray:
        return self._a[self._lo + lo : self._lo + hi]

    def take(self, n: int) -> np.ndarray:
        """Remove and return (a copy of) the first ``n`` samples."""
        out = self._a[self._lo : self._lo + n].copy()
        self._lo += n
        return out

    def drop(self, n: int) -> None:
        self._lo += n


class Segmenter:
    """Cut a stream of blocks into segments, each with its hits and the noise around them.

    Parameters
    ----------
    sample_rate : float, Hz
        Only carried (every span is in samples).
    min_hit_snr_db : float, dB
        A trigger must rise this far above the noise floor (the analysis option of that name).
    min_segment : int >= 0, samples
        Cut only once the buffer holds at least this many samples (0: after every hit, the live
        station; a file: :data:`SEGMENT_SAMPLES`). Below it nothing is cut or dropped.
    max_segment : int or None, samples
        Cut a decay still ringing when the buffer reaches this (default ``8 * min_segment``,
        at least 2**22 samples).
    one_hit_per_segment : bool
        Cut before every new trigger too, so that each segment holds one hit (the live station:
        one tap, one part).
    frame : int, samples
        Frame of the level (:data:`FRAME_SAMPLES`).
    """

    def __init__(
        self,
        sample_rate: float,
        *,
        min_hit_snr_db: float = 20.0,
        min_segment: int = SEGMENT_SAMPLES,
        max_segment: int | None = None,
        one_hit_per_segment: bool = False,
        frame: int = FRAME_SAMPLES,
    ) -> None:
        if not (isinstance(min_segment, (int, np.integer)) and min_segment >= 0):
            raise ParameterError(f"min_segment must be a whole number of samples >= 0; got {min_segment!r}")
        self.sample_rate = float(sample_rate)
        self.min_hit_snr_db = float(min_hit_snr_db)
        self.frame = int(frame)
        self.min_segment = int(min_segment)
        self.max_segment = int(max_segment) if max_segment is not None else max(8 * self.min_segment, 1 << 22)
        self.one_hit = bool(one_hit_per_segment)
        self._buf = _Buffer()
        self._recv0 = 0  # received-sample index of the buffer's first sample
        self._received = 0  # samples received so far (lost ones not counted)
        self._framed = 0  # received samples already framed
        self._drops: list[tuple[int, int]] = []  # (received index, samples lost just before it)
        self._lost = 0
        self._recent: deque[float] = deque(maxlen=max(RISE_FRAMES, HOLD_FRAMES))
        self._idle: list[float] = []
        self._medians: deque[float] = deque(maxlen=max(1, NOISE_MEMORY_FRAMES // NOISE_BLOCK_FRAMES))
        self._active = False
        self._trig_frame = -(10**9)
        self._quiet = 0
        self._triggers: list[int] = []  # received indices of triggers in the buffer
        self._cut_at: int | None = None  # received index where a cut may be made (after a hit)
        self._truncated_open = False
        self.longest_decay = 0  #: samples from a trigger to the end of its hit, longest seen
        self.n_segments = 0
        self.floor_db: float | None = None  #: the current noise floor of the frame level, dB

    # -- stream bookkeeping ---------------------------------------------------------------
    def _stream_index(self, r: int) -> int:
        """Stream index (lost samples counted) of received index ``r``."""
        return r + sum(n for ri, n in self._drops if ri <= r)

    def _lost_in(self, r_lo: int, r_hi: int) -> int:
        return sum(n for ri, n in self._drops if r_lo < ri < r_hi)

    @property
    def buffered(self) -> int:
        """Samples held now."""
        return len(self._buf)

    # -- feeding ----------------------------------------------------------------------------
    def feed(self, block) -> list[Segment]:
        """Take one :class:`~ringdown.io.blocks.Block`; return the segments it completed."""
        x = np.asarray(block.samples, dtype=np.float64)
        if getattr(block, "dropped", 0):
            self._drops.append((self._received, int(block.dropped)))
        self._buf.append(x)
        self._received += x.shape[0]
        out: list[Segment] = []
        F = self.frame
        n_new = (self._received - self._framed) // F
        if n_new <= 0:
            return out
        seg = self._buf.view(self._framed - self._recv0, self._framed - self._recv0 + n_new * F)
        levels = 10.0 * np.log10(np.mean(seg.reshape(n_new, F) ** 2, axis=1) + 1e-300)
        first = self._framed // F
        for j, lv in enumerate(levels.tolist()):
            self._frame(first + j, lv, out)
        self._framed += n_new * F
        self._after_frames(out)
        return out

    def _floor(self) -> float | None:
        if self._medians:
            return min(self._medians)
        # before the first full block of noise (a tap early in the stream): the frames so far
        return float(np.median(self._idle)) if len(self._idle) >= RISE_FRAMES else None

    def _frame(self, k: int, lv: float, out: list[Segment]) -> None:
        F = self.frame
        floor = self._floor()
        recent = list(self._recent)
        rise = (
            floor is not None
            and len(recent) >= RISE_FRAMES
            and lv - min(recent[-RISE_FRAMES:]) >= RISE_DB
            and lv >= floor + self.min_hit_snr_db
        )
        if not self._active:
            if rise:
                self._start_hit(k)
            elif lv <= _SILENT_DB:
                pass  # digital silence (a virtual device, a muted input) says nothing of the noise
            else:
                self._idle.append(lv)
                if len(self._idle) == NOISE_BLOCK_FRAMES:
                    self._medians.append(float(np.median(self._idle)))
                    self._idle.clear()
                    self.floor_db = self._floor()
        else:
            if rise and k - self._trig_frame >= HOLD_FRAMES and lv >= max(recent) + 3.0:
                if self.one_hit:
                    # one tap, one segment: cut just before the new rise
                    cut = (k - RISE_FRAMES) * F
                    if cut > self._recv0:
                        self._cut(cut, out, truncated=False)
                self._start_hit(k)
            elif floor is not None and lv <= floor + END_MARGIN_DB:  # (a hit starts only once there is a floor)
                self._quiet += 1
                if self._quiet >= QUIET_FRAMES:
                    self._active = False
                    end = (k - QUIET_FRAMES + 1) * F
                    self.longest_decay = max(self.longest_decay, end - self._trig_frame * F)
                    self._cut_at = (k + 1) * F
            else:
                self._quiet = 0
        self._recent.append(lv)

    def _start_hit(self, k: int) -> None:
        self._active = True
        self._trig_frame = k
        self._quiet = 0
        self._triggers.append(k * self.frame)

    def _after_frames(self, out: list[Segment]) -> None:
        if self._cut_at is not None and not self._active and len(self._buf) >= self.min_segment:
            # at the end of the last hit that died away: the buffer then holds at most
            # min_segment samples, one decay, one quiet run and one block
            self._cut(self._cut_at, out, truncated=False)
        if self._active and len(self._buf) >= self.max_segment:
            self._cut(self._framed, out, truncated=True)
        if not self._active and not self._triggers:
            keep = self.min_segment if self.min_segment > 0 else max(MIN_PRE_TRIGGER_SAMPLES, self.longest_decay)
            keep = max(keep, self.frame)
            excess = min(len(self._buf) - keep, self._framed - self._recv0)
            if excess > 0:
                self._buf.drop(excess)
                self._recv0 += excess

    def _cut(self, r_cut: int, out: list[Segment], *, truncated: bool) -> None:
        n = r_cut - self._recv0
        if n <= 0:
            return
        trig = [t for t in self._triggers if t < r_cut]
        self._triggers = [t for t in self._triggers if t >= r_cut]
        samples = self._buf.take(n)
        start = self._stream_index(self._recv0)
        out.append(
            Segment(
                samples=samples,
                start=start,
                triggers=tuple(self._stream_index(t) for t in trig),
                dropped=self._lost_in(self._recv0, r_cut),
                truncated=truncated or self._truncated_open,
            )
        )
        self._truncated_open = truncated
        self._recv0 = r_cut
        self.n_segments += 1
        if self._cut_at is not None and self._cut_at <= r_cut:
            self._cut_at = None

    def finish(self) -> list[Segment]:
        """The end of the stream: the last segment, when it holds a trigger or nothing was cut yet."""
        out: list[Segment] = []
        if len(self._buf) and (self._triggers or self.n_segments == 0 or self._active):
            self._cut(self._received, out, truncated=False)
        return out


def iter_segments(source, segmenter: Segmenter) -> Iterator[Segment]:
    """Every segment of ``source`` as it is complete (the live station's loop)."""
    for blk in source:
        yield from segmenter.feed(blk)
    yield from segmenter.finish()
