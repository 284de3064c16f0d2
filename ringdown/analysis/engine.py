"""The block engine: hits found in samples that arrive a block at a time, in bounded memory.

A long file (a monitoring session, a batch of taps saved as one recording) and a live input
(``ringdown listen``) are both a stream of blocks (:mod:`ringdown.io.blocks`). The
:class:`Segmenter` keeps the samples since its last cut in a buffer, measures the broadband
level in frames, and cuts the stream into *segments* where the level is back at the noise after
a hit; each segment goes to the existing per-record analysis
(:func:`ringdown.pipeline.analyze_recording`), and :func:`analyze_blocks` combines the hits of a
file's segments as the whole-file path combines the hits of one record.

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
hit and what its modes are. Memory: a file's segments are at least ``min_segment`` samples long
(default :data:`SEGMENT_SAMPLES`) before they are cut at the end of the last hit that died away, so
the buffer holds at most ``min_segment`` samples plus the longest decay (a decay that is still ringing after
``max_segment`` samples is cut there, with the warning ``decay_truncated``). A source no longer
than ``min_segment`` is one segment: the result is that of the whole-file path, identical.
"""

from __future__ import annotations

import math
import os
from collections import deque
from collections.abc import Callable, Iterator
from dataclasses import dataclass, replace

import numpy as np

from ..base.errors import InputError, NoRingdownError, ParameterError
from ..io.recording import Recording
from .results import Analysis, Notice, lighten

__all__ = [
    "Segment",
    "Segmenter",
    "analyze_blocks",
    "analyze_long_file",
    "is_long_sound_file",
    "iter_long_file",
    "FRAME_SAMPLES",
    "SEGMENT_SAMPLES",
    "LONG_FILE_SAMPLES",
]

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
#: A sound file with more samples than this (per channel) is analysed by the block engine:
#: 2**20 samples (21.8 s at 48 kHz, 8 MiB of float64), where the whole-file path's peak
#: (about 25 copies of the samples) passes 200 MB. Below it, the whole-file path.
LONG_FILE_SAMPLES = 1 << 20


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


# ----------------------------------------------------------------------------------------------
# a file's analysis through the engine


def analyze_blocks(
    source,
    *,
    min_segment: int = SEGMENT_SAMPLES,
    max_segment: int | None = None,
    progress: Callable[[int, int | None], None] | None = None,
    sample_offset: int = 0,
    reader_settings: dict | None = None,
    **options,
) -> Analysis:
    """Analyse a block source (a long file) segment by segment; one :class:`Analysis` for all.

    Parameters
    ----------
    source : block source (:mod:`ringdown.io.blocks`)
        Iterable of blocks with ``sample_rate`` and ``total_samples``; a file source also has
        ``path``, ``sha256``, ``channel``, ``n_channels``, ``full_scale`` and ``notes``.
    min_segment, max_segment : int, samples
        See :class:`Segmenter`.
    progress : callable or None
        Called as ``progress(samples_read, total_samples)`` after every block.
    sample_offset : int
        Index in the file of the source's first sample (a ``start_s`` window).
    reader_settings : dict or None
        Reader options reported under ``settings`` (as :func:`ringdown.analyze_file` does).
    **options
        Those of :func:`ringdown.analyze` (``start_s``/``end_s`` only reported: the source
        already holds the window).

    Returns
    -------
    Analysis
        Hits of every segment, modes combined over the used hits as the whole-file path
        combines them; arrays (the recording, mode traces) are kept only when the source was one
        segment. A source that is one segment gives exactly the whole-file result.

    Raises
    ------
    NoRingdownError
        No segment holds a measurable mode.
    InputError, ParameterError
        As :func:`ringdown.analyze_recording`.
    """
    from .pipeline import AnalysisOptions, _combine_hits, _keep, _unique, analyze_recording

    opts = AnalysisOptions.from_kwargs(options)
    settings = opts.to_dict()
    if reader_settings:
        settings.update(reader_settings)
    seg_options = {k: v for k, v in options.items() if k not in ("start_s", "end_s")}
    path = getattr(source, "path", None)
    name = repr(path) if path else "the stream"
    fs = float(source.sample_rate)
    segmenter = Segmenter(fs, min_hit_snr_db=opts.min_hit_snr_db, min_segment=min_segment, max_segment=max_segment)
    total = getattr(source, "total_samples", None)
    results: list[tuple[Segment, int, Analysis | None, Exception | None]] = []
    n_read = 0

    def run(seg: Segment, last: bool = False) -> None:
        whole = last and segmenter.n_segments == 1  # nothing was cut: this may be the whole source
        rec = Recording(
            samples=seg.samples,
            sample_rate=fs,
            channel=getattr(source, "channel", "1"),
            path=path,
            sha256=getattr(source, "sha256", None) if path else None,
            full_scale=getattr(source, "full_scale", None),
            n_channels=getattr(source, "n_channels", 1),
            notes=tuple(getattr(source, "notes", ())),
        )
        a: Analysis | None = None
        err: Exception | None = None
        try:
            a = analyze_recording(
                rec, reader_settings=reader_settings, sample_offset=sample_offset + seg.start, **seg_options
            )
        except (NoRingdownError, InputError) as exc:
            err = exc
        else:
            err = None
            if not whole:
                a = lighten(a)  # the samples and traces of a long file's segments are not kept
        # only what the combination needs is kept: the segment's place, not its samples
        results.append((replace(seg, samples=np.empty(0)), seg.n_samples, a, err))

    for blk in source:
        n_read = blk.start + blk.samples.shape[0]
        for seg in segmenter.feed(blk):
            run(seg)
        if progress is not None:
            progress(n_read, total)
    for seg in segmenter.finish():
        run(seg, last=True)
    n_total = total if total is not None else n_read
    if len(results) == 1 and results[0][0].start == 0 and results[0][1] == n_total:
        seg, _, a, exc = results[0]
        if exc is not None or a is None:
            raise exc or NoRingdownError(f"no ring-down in {name}")
        return replace(a, settings=settings)  # the whole source in one segment: the whole-file result

    notes: list[Notice] = []
    hits: list = []
    rejected: list = []
    warnings: list[Notice] = []
    floors: list[float] = []
    sources: list[str | None] = []
    for seg, _, a, exc in results:
        t_seg = (sample_offset + seg.start) / fs
        if seg.dropped:
            notes.append(
                Notice(
                    "input_dropped",
                    f"{seg.dropped} samples were lost (input overflow) in the segment at "
                    f"{t_seg:.6g} s; times and decays after the loss are unreliable",
                )
            )
        if seg.truncated:
            notes.append(
                Notice(
                    "decay_truncated",
                    f"a decay at {t_seg:.6g} s rang longer than the "
                    f"{segmenter.max_segment}-sample buffer and was cut there",
                )
            )
        if exc is not None or a is None:
            if seg.triggers:
                t = (sample_offset + seg.triggers[0]) / fs
                notes.append(
                    Notice(
                        "segment_without_ringdown",
                        f"the level rose at {t:.6g} s but no ring-down was measured there: {exc}",
                    )
                )
            continue
        a = lighten(a)
        k = len(hits)
        hits.extend(a.hits)
        rejected.extend(replace(r, hit=r.hit + k) if r.hit is not None else r for r in a.rejected)
        warnings.extend(a.warnings)
        floors.append(float("inf") if a.noise_floor is None else a.noise_floor)
        sources.append(a.noise_source)
    used = [h for h in hits if h.used and h.modes]
    if not used and any(h.modes for h in hits):
        hits = [h if h.used or not h.modes else _keep(h) for h in hits]
        used = [h for h in hits if h.used and h.modes]
    if not used:
        reasons = "; ".join(sorted({n.message for n in notes} | {w.message for h in hits for w in h.warnings}))
        raise NoRingdownError(f"no mode could be measured in {name}: {reasons or 'no hit rose above the noise'}")
    notes.insert(
        0,
        Notice(
            "segmented",
            f"read in blocks: {len(results)} segments of about {min_segment} samples, "
            "cut where the level was back at the noise; hits combined over the file",
        ),
    )
    return Analysis(
        path=path,
        sha256=getattr(source, "sha256", None) if path else None,
        channel=getattr(source, "channel", "1"),
        unit=None,
        sample_rate_hz=fs,
        n_samples=int(n_total),
        hits=tuple(hits),
        modes=tuple(_combine_hits(used)),
        warnings=tuple(_unique(notes + warnings)),
        error=None,
        settings=settings,
        noise_floor=float(min(floors)),
        noise_source=sources[int(np.argmin(floors))],
        recording=None,
        rejected=tuple(rejected),
    )


def is_long_sound_file(path, *, threshold: int = LONG_FILE_SAMPLES) -> bool:
    """Whether ``path`` is a regular sound file (soundfile can open it) with more than
    ``threshold`` samples per channel: the files :func:`ringdown.analyze_file` sends through the
    block engine. Never raises (any doubt is ``False``: the whole-file reader then says why)."""
    try:
        name = os.fspath(path)
        if not isinstance(name, str) or name == "-" or not os.path.isfile(name):
            return False
        from ..io.read import TEXT_SUFFIXES

        if name.lower().endswith(TEXT_SUFFIXES):
            return False
        import soundfile as sf

        return int(sf.info(name).frames) > threshold
    except Exception:  # not a sound file, unreadable: the whole-file path reports it
        return False


def analyze_long_file(
    path,
    *,
    channel=None,
    column=None,
    sample_rate: float | None = None,
    progress: Callable[[int, int | None], None] | None = None,
    min_segment: int = SEGMENT_SAMPLES,
    **options,
) -> Analysis:
    """Analyse a sound file through the block engine (what :func:`ringdown.analyze_file` does for
    files of more than :data:`LONG_FILE_SAMPLES` samples). Options as for ``analyze_file``;
    ``progress(samples_read, total)`` is called after each block."""
    from ..io.blocks import SoundFileBlocks
    from .pipeline import AnalysisOptions, window_bounds

    opts = AnalysisOptions.from_kwargs(options)
    chosen = channel if channel is not None else column
    src = SoundFileBlocks(path, channel=chosen, sample_rate=sample_rate)
    n_file = src.total_samples
    start, stop = 0, n_file
    if opts.start_s is not None or opts.end_s is not None:
        start, stop = window_bounds(n_file, src.sample_rate, opts, repr(src.path))
        src = SoundFileBlocks(path, channel=chosen, sample_rate=sample_rate, start=start, stop=stop)
    reader = {"channel": channel, "column": column, "sample_rate": sample_rate}
    a = analyze_blocks(
        src, min_segment=min_segment, progress=progress, sample_offset=start, reader_settings=reader, **options
    )
    if start or stop != n_file:
        a = replace(a, n_samples=n_file)
    return a


def iter_segments(source, segmenter: Segmenter) -> Iterator[Segment]:
    """Every segment of ``source`` as it is complete (the live station's loop)."""
    for blk in source:
        yield from segmenter.feed(blk)
    yield from segmenter.finish()


def iter_long_file(
    path, *, progress: Callable[[int, int | None], None] | None = None, **options
) -> Iterator[tuple[int, Analysis]]:
    """``(0, Analysis)`` of one sound file through the block engine, under the batch failure policy.

    As :func:`analyze_long_file` (same options and ``progress``), run in this process by
    :func:`ringdown.base.batch.run_batch`: any failure is the file's result, an ``Analysis.failed``
    with its one-line error and the settings, as for every file of
    :func:`ringdown.analysis.pipeline.iter_analyze_files` (DEVELOPERS.md, "Batches and the failure
    policy"). ``ringdown analyze`` takes this path for a single long sound file, to show its
    progress by time position.
    """
    from ..base.batch import run_batch
    from .pipeline import _FileTask

    class _LongFileTask(_FileTask):
        def __call__(self, p: str) -> Analysis:
            return analyze_long_file(p, progress=progress, **self.options)

    task = _LongFileTask(dict(options))
    yield from run_batch(task, [path], on_error=task.failed, jobs=1)
