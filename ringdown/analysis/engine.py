"""The block engine: hits found in samples that arrive a block at a time, in bounded memory.

A long file (a monitoring session, a batch of taps saved as one recording) and a live input
(``ringdown listen``) are both a stream of blocks (:mod:`ringdown.io.blocks`). The
:class:`Segmenter` keeps the samples since its last cut in a buffer, measures the broadband
level in frames, and cuts the stream into *segments* where the level is back at the noise after
a hit; each segment goes to the existing per-record analysis
(:func:`ringdown.pipeline.analyze_recording`), and :func:`analyze_blocks` combines the hits of a
file's segments as the whole-file path combines the hits of one record.

How the level decides and where the stream is cut: :mod:`ringdown.analysis.segmenter` (the
trigger only decides where the stream is cut; the analysis of each segment decides what is a
hit and what its modes are). Memory: a file's segments are at least ``min_segment`` samples long
(default :data:`SEGMENT_SAMPLES`) before they are cut at the end of the last hit that died away, so
the buffer holds at most ``min_segment`` samples plus the longest decay (a decay that is still ringing after
``max_segment`` samples is cut there, with the warning ``decay_truncated``). A source no longer
than ``min_segment`` is one segment: the result is that of the whole-file path, identical.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterator
from dataclasses import dataclass, replace

import numpy as np

from ..base.errors import InputError, NoRingdownError
from ..io.recording import Recording
from .results import Analysis, Notice, lighten
from .segmenter import (
    FRAME_SAMPLES,
    MIN_PRE_TRIGGER_SAMPLES,
    QUIET_FRAMES,
    SEGMENT_SAMPLES,
    Segment,
    Segmenter,
    iter_segments,
)

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
    "QUIET_FRAMES",
    "MIN_PRE_TRIGGER_SAMPLES",
    "iter_segments",
]

#: A sound file with more samples than this (per channel) is analysed by the block engine:
#: 2**20 samples (21.8 s at 48 kHz, 8 MiB of float64), where the whole-file path's peak
#: (about 25 copies of the samples) passes 200 MB. Below it, the whole-file path.
LONG_FILE_SAMPLES = 1 << 20


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
    from .pipeline import AnalysisOptions

    opts = AnalysisOptions.from_kwargs(options)
    settings = opts.to_dict()
    if reader_settings:
        settings.update(reader_settings)
    path = getattr(source, "path", None)
    name = repr(path) if path else "the stream"
    seg_options = {k: v for k, v in options.items() if k not in ("start_s", "end_s")}
    stream = _Stream(source, float(source.sample_rate), path, sample_offset, reader_settings, seg_options)
    segmenter = Segmenter(
        stream.fs, min_hit_snr_db=opts.min_hit_snr_db, min_segment=min_segment, max_segment=max_segment
    )
    total = getattr(source, "total_samples", None)
    results, n_read = _run_source(stream, segmenter, progress, total)
    n_total = total if total is not None else n_read
    if len(results) == 1 and results[0].seg.start == 0 and results[0].n_samples == n_total:
        only = results[0]
        if only.error is not None or only.analysis is None:
            raise only.error or NoRingdownError(f"no ring-down in {name}")
        return replace(only.analysis, settings=settings)  # the whole source in one segment: the whole-file result
    parts = _gather(results, stream, segmenter.max_segment)
    hits, used = _used_hits(parts, name)
    notes = [
        Notice(
            "segmented",
            f"read in blocks: {len(results)} segments of about {min_segment} samples, "
            "cut where the level was back at the noise; hits combined over the file",
        )
    ]
    return _combined(
        stream, parts, n_total=int(n_total), hits=hits, used=used, notes=notes + parts.notes, settings=settings
    )


@dataclass(frozen=True)
class _Stream:
    """What every segment of one block source shares: the source, its rate (Hz), its file (or
    None), the file index of its first sample, and the options of each segment's analysis."""

    source: object
    fs: float
    path: str | None
    sample_offset: int
    reader_settings: dict | None
    seg_options: dict


@dataclass(frozen=True)
class _SegmentResult:
    """One segment's place (its samples dropped), length in samples, and analysis or error."""

    seg: Segment
    n_samples: int
    analysis: Analysis | None
    error: Exception | None


def _run_source(
    stream: _Stream, segmenter: Segmenter, progress: Callable[[int, int | None], None] | None, total: int | None
) -> tuple[list[_SegmentResult], int]:
    """Feed every block of the source to the segmenter and analyse each segment it cuts;
    (the segments' results, samples read)."""
    results: list[_SegmentResult] = []
    n_read = 0
    for blk in stream.source:  # type: ignore[attr-defined]
        n_read = blk.start + blk.samples.shape[0]
        for seg in segmenter.feed(blk):
            results.append(_analyze_segment(stream, seg, whole=False))
        if progress is not None:
            progress(n_read, total)
    for seg in segmenter.finish():
        # nothing was cut before the end: this segment may be the whole source
        results.append(_analyze_segment(stream, seg, whole=segmenter.n_segments == 1))
    return results, n_read


def _analyze_segment(stream: _Stream, seg: Segment, *, whole: bool) -> _SegmentResult:
    """The analysis of one segment (lightened unless it may be the whole source), or its error."""
    from .pipeline import analyze_recording

    source, path = stream.source, stream.path
    rec = Recording(
        samples=seg.samples,
        sample_rate=stream.fs,
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
            rec,
            reader_settings=stream.reader_settings,
            sample_offset=stream.sample_offset + seg.start,
            **stream.seg_options,
        )
    except (NoRingdownError, InputError) as exc:
        err = exc
    else:
        if not whole:
            a = lighten(a)  # the samples and traces of a long file's segments are not kept
    # only what the combination needs is kept: the segment's place, not its samples
    return _SegmentResult(replace(seg, samples=np.empty(0)), seg.n_samples, a, err)


@dataclass(frozen=True)
class _Gathered:
    """The segments' hits (renumbered rejections), warnings, notes and noise floors, in order."""

    notes: list[Notice]
    hits: list
    rejected: list
    warnings: list[Notice]
    floors: list[float]
    sources: list[str | None]


def _gather(results: list[_SegmentResult], stream: _Stream, max_segment: int) -> _Gathered:
    """Collect the hits of every analysed segment, and a note per lossy, cut or empty segment."""
    out = _Gathered([], [], [], [], [], [])
    for r in results:
        seg, a, exc = r.seg, r.analysis, r.error
        out.notes.extend(_segment_notes(seg, exc, stream, max_segment, failed=exc is not None or a is None))
        if exc is not None or a is None:
            continue
        a = lighten(a)
        k = len(out.hits)
        out.hits.extend(a.hits)
        out.rejected.extend(replace(x, hit=x.hit + k) if x.hit is not None else x for x in a.rejected)
        out.warnings.extend(a.warnings)
        out.floors.append(float("inf") if a.noise_floor is None else a.noise_floor)
        out.sources.append(a.noise_source)
    return out


def _segment_notes(
    seg: Segment, exc: Exception | None, stream: _Stream, max_segment: int, *, failed: bool
) -> list[Notice]:
    """Notes on one segment: samples lost, a decay cut at the buffer, a rise without a ring-down."""
    notes = []
    t_seg = (stream.sample_offset + seg.start) / stream.fs
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
                f"a decay at {t_seg:.6g} s rang longer than the {max_segment}-sample buffer and was cut there",
            )
        )
    if failed and seg.triggers:
        t = (stream.sample_offset + seg.triggers[0]) / stream.fs
        notes.append(
            Notice(
                "segment_without_ringdown",
                f"the level rose at {t:.6g} s but no ring-down was measured there: {exc}",
            )
        )
    return notes


def _used_hits(parts: _Gathered, name: str) -> tuple[list, list]:
    """(every hit, the used hits with modes); hits with modes are kept when none was used;
    NoRingdownError (with the segments' reasons) when no mode was measured."""
    from .pipeline import _keep

    hits = parts.hits
    used = [h for h in hits if h.used and h.modes]
    if not used and any(h.modes for h in hits):
        hits = [h if h.used or not h.modes else _keep(h) for h in hits]
        used = [h for h in hits if h.used and h.modes]
    if not used:
        reasons = "; ".join(sorted({n.message for n in parts.notes} | {w.message for h in hits for w in h.warnings}))
        raise NoRingdownError(f"no mode could be measured in {name}: {reasons or 'no hit rose above the noise'}")
    return hits, used


def _combined(
    stream: _Stream, parts: _Gathered, *, n_total: int, hits: list, used: list, notes: list[Notice], settings: dict
) -> Analysis:
    """The file's Analysis: the modes of the used hits combined as the whole-file path does."""
    from .pipeline import _combine_hits, _unique

    path, source = stream.path, stream.source
    return Analysis(
        path=path,
        sha256=getattr(source, "sha256", None) if path else None,
        channel=getattr(source, "channel", "1"),
        unit=None,
        sample_rate_hz=stream.fs,
        n_samples=n_total,
        hits=tuple(hits),
        modes=tuple(_combine_hits(used)),
        warnings=tuple(_unique(notes + parts.warnings)),
        error=None,
        settings=settings,
        noise_floor=float(min(parts.floors)),
        noise_source=parts.sources[int(np.argmin(parts.floors))],
        recording=None,
        rejected=tuple(parts.rejected),
    )


def is_long_sound_file(path, *, threshold: int = LONG_FILE_SAMPLES) -> bool:
    """Whether ``path`` is a regular sound file (soundfile can open it) with more than
    ``threshold`` samples per channel: the files :func:`ringdown.analyze_file` sends through the
    block engine. Never raises (any doubt is ``False``: the whole-file reader then says why)."""
    try:
        name = os.fspath(path)
        if not isinstance(name, str) or name == "-" or not os.path.isfile(name):
            return False
        from ..io.text import TEXT_SUFFIXES

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
