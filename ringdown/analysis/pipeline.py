"""The analysis pipeline: a recording in, every mode of every hit out.

read -> condition -> find hits -> find modes -> extract each band -> estimate -> combine.

``analyze`` takes an array, ``analyze_file`` a path, ``analyze_many`` a batch of paths (a file
that cannot be analysed gives an ``Analysis`` whose ``error`` is set; the others still run).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from ..base._threads import one_blas_thread
from ..base.errors import FitError, InputError, NoRingdownError, ParameterError
from ..io.files import MIN_SAMPLES
from ..io.recording import Recording
from . import condition, detect
from .bands import Band, Spectrum, extract_band, settling_time_s, spectrum_of
from .detect import Candidate
from .estimators import ESTIMATORS, Window, method_names
from .estimators.decrement import band_peaks
from .peaks import Peak, find_peaks, group_bands
from .quantities import DB_PER_NEPER, derive
from .results import Analysis, Estimate, Hit, Mode, ModeTrace, Notice, Rejected

__all__ = ["analyze", "analyze_recording", "analyze_file", "analyze_many", "iter_analyze_files", "AnalysisOptions"]

#: Largest sample magnitude accepted: power sums of larger values overflow float64.
MAX_ABS_SAMPLE = 1e100
#: How modes are found: ``"spectral"`` (the default: spectral peaks of the decay judged against
#: the noise spectrum) or ``"model"`` (experimental: matrix-pencil candidates from the onset on,
#: judged by matched-filter SNR, with fast decays fitted on the raw record; see ``detect.py``;
#: it does not yet meet the detection benchmark's targets, see README).
DETECTIONS = ("spectral", "model")
#: Estimators that resolve several modes in one band jointly.
_MULTI_MODE = frozenset({"pencil"})


@dataclass(frozen=True, slots=True)
class AnalysisOptions:
    """Options of one analysis, validated once (see :func:`analyze` for their meaning)."""

    method: str = "auto"
    bands: tuple[tuple[float, float], ...] | None = None
    max_modes: int | None = None
    min_snr_db: float = 10.0
    min_hit_snr_db: float = 20.0
    keep_double_hits: bool = False
    start_s: float | None = None
    end_s: float | None = None
    detection: str = "spectral"

    def __post_init__(self) -> None:
        if self.detection not in DETECTIONS:
            raise ParameterError(f"unknown detection {self.detection!r}; choose one of {', '.join(DETECTIONS)}")
        for name in ("start_s", "end_s"):
            v = getattr(self, name)
            if v is not None:
                try:
                    v = float(v)
                except (TypeError, ValueError):
                    raise ParameterError(f"{name} is a time in seconds from the record start; got {v!r}") from None
                if not (math.isfinite(v) and v >= 0):
                    raise ParameterError(f"{name} must be a finite time >= 0 s; got {v!r}")
                object.__setattr__(self, name, v)
        if self.start_s is not None and self.end_s is not None and self.end_s <= self.start_s:
            raise ParameterError(f"end_s ({self.end_s:g} s) must come after start_s ({self.start_s:g} s)")
        if self.method not in method_names():
            raise ParameterError(f"unknown method {self.method!r}; choose one of {', '.join(method_names())}")
        if self.max_modes is not None and (not isinstance(self.max_modes, (int, np.integer)) or self.max_modes < 1):
            raise ParameterError(f"max_modes must be a whole number >= 1; got {self.max_modes!r}")
        if not (math.isfinite(self.min_snr_db) and self.min_snr_db >= 0):
            raise ParameterError(f"min_snr_db must be >= 0 dB; got {self.min_snr_db!r}")
        if self.bands is not None:
            clean = []
            for b in self.bands:
                try:
                    lo, hi = (float(v) for v in b)
                except (TypeError, ValueError):
                    raise ParameterError(f"a band is two frequencies low:high in Hz; got {b!r}") from None
                if not (math.isfinite(lo) and math.isfinite(hi) and 0 <= lo < hi):
                    raise ParameterError(f"band {lo:g}:{hi:g} Hz must have 0 <= low < high")
                clean.append((lo, hi))
            object.__setattr__(self, "bands", tuple(sorted(clean)))

    @classmethod
    def from_kwargs(cls, options: dict) -> AnalysisOptions:
        """Validated options from keyword arguments; an unknown name is a ParameterError."""
        unknown = sorted(set(options) - set(cls.__slots__))
        if unknown:
            raise ParameterError(
                f"unknown analysis option(s) {', '.join(map(repr, unknown))}; known: {', '.join(cls.__slots__)}"
            )
        return cls(**options)

    @property
    def primary(self) -> str:
        """The estimator whose figures a mode reports."""
        if self.method != "auto":
            return self.method
        return "pencil" if "pencil" in ESTIMATORS else "envelope"

    def to_dict(self) -> dict:
        return {
            "method": self.method,
            "primary_method": self.primary,
            "bands": None if self.bands is None else [list(b) for b in self.bands],
            "max_modes": self.max_modes,
            "min_snr_db": self.min_snr_db,
            "min_hit_snr_db": self.min_hit_snr_db,
            "keep_double_hits": self.keep_double_hits,
            "start_s": self.start_s,
            "end_s": self.end_s,
            "detection": self.detection,
        }


# ----------------------------------------------------------------------------------------------
# public entry points


def analyze(
    x,
    sample_rate: float,
    *,
    method: str = "auto",
    bands: Sequence[tuple[float, float]] | None = None,
    max_modes: int | None = None,
    min_snr_db: float = 10.0,
    min_hit_snr_db: float = 20.0,
    keep_double_hits: bool = False,
    start_s: float | None = None,
    end_s: float | None = None,
    detection: str = "spectral",
) -> Analysis:
    """Measure every mode of a ring-down record given as an array.

    Parameters
    ----------
    x : (n_samples,) array_like of float
        One channel, any unit (the unit of amplitudes in the result).
    sample_rate : float, > 0, Hz
    method : {"auto", "envelope", "decrement", "half_power", "pencil"}
        Estimator whose figures each mode reports; the others are kept in ``cross_checks``.
        ``"auto"`` is the parametric (matrix pencil) fit when available.
    bands : sequence of (low_hz, high_hz) or None
        Analyse these bands instead of searching for spectral peaks.
    max_modes : int >= 1 or None
        Keep at most this many modes (the strongest).
    min_snr_db : float, dB, default 10
        A fit window ends where the mode's envelope falls to this margin above its band noise
        (ISO 3382-2 keeps 10 dB above the noise; FIELD notes: the log-envelope bias is ~0 there).
    min_hit_snr_db : float, dB, default 20
        A hit must rise this far above the broadband noise floor (common practice, no source).
    keep_double_hits : bool
        Combine hits flagged ``double_hit`` (hammer bounce) with the others instead of leaving
        them out.
    start_s, end_s : float or None, s
        Analyse only the samples from ``start_s`` to ``end_s`` (seconds from the first sample;
        ``None``: the record's start or end), for a user who knows where the decay is. Times in
        the result stay measured from the record's first sample.
    detection : {"spectral", "model"}
        How modes are found. ``"spectral"`` (default): peaks of the decay's spectrum judged
        against the measured noise spectrum. ``"model"`` (experimental): matrix-pencil candidates
        over the whole band from the hit onset on, judged by their matched-filter SNR, with fast
        decays fitted on the raw record (:mod:`ringdown.detect`); it finds heavily damped modes
        the default misses but does not yet meet the detection benchmark's targets
        (``tests/benchmarks/detection.py``).

    Returns
    -------
    Analysis

    Raises
    ------
    InputError
        Non-finite samples, too few samples, or a silent record.
    NoRingdownError
        Nothing rises above the noise and decays.
    ParameterError
        An option out of range (a band above Nyquist, an unknown method, ...).
    """
    rec = Recording(np.asarray(x, dtype=np.float64), sample_rate)
    return analyze_recording(
        rec,
        method=method,
        bands=bands,
        max_modes=max_modes,
        min_snr_db=min_snr_db,
        min_hit_snr_db=min_hit_snr_db,
        keep_double_hits=keep_double_hits,
        start_s=start_s,
        end_s=end_s,
        detection=detection,
    )


def analyze_file(
    path,
    *,
    channel=None,
    column=None,
    sample_rate: float | None = None,
    **options,
) -> Analysis:
    """Read a recording (see :func:`ringdown.read_recording`) and analyse it.

    ``channel`` (a number, or a name for TDMS/UFF/MATLAB/HDF5), ``column`` and ``sample_rate``
    (text, and files that state no rate) go to the reader;
    the other keyword options are those of :func:`analyze`.

    A sound file of more than :data:`ringdown.analysis.engine.LONG_FILE_SAMPLES` samples (2**20) is read
    in blocks and analysed segment by segment (:func:`ringdown.analysis.engine.analyze_long_file`), in
    memory bounded by the longest decay rather than by the file.
    """
    from ..io.read import read_recording
    from .engine import analyze_long_file, is_long_sound_file

    try:
        if is_long_sound_file(path):
            return analyze_long_file(path, channel=channel, column=column, sample_rate=sample_rate, **options)
        rec = read_recording(path, channel=channel, column=column, sample_rate=sample_rate)
        reader = {"channel": channel, "column": column, "sample_rate": sample_rate}
        return analyze_recording(rec, reader_settings=reader, **options)
    except MemoryError as exc:
        # one line for this file; a batch keeps the other files' results
        raise InputError(
            f"{str(path)!r} needs more memory than is available to read or analyse it; "
            "cut it shorter (--start/--end) or split it"
        ) from exc


def analyze_many(
    paths: Iterable,
    *,
    jobs: int = 1,
    progress: Callable[[Analysis], None] | None = None,
    client=None,
    **options,
) -> list[Analysis]:
    """Analyse several files; a file that fails gets ``Analysis.error`` and the rest go on.

    Parameters
    ----------
    paths : iterable of str or path
    jobs : int >= 1
        Worker processes when > 1 (:mod:`ringdown.batch`).
    progress : callable or None
        Called with each finished Analysis (in completion order).
    client : distributed.Client or None
        Run one task per file on this Dask cluster's workers instead (``jobs`` is then unused;
        :mod:`ringdown.cluster`, extra ``ringdown[cluster]``). The paths must be readable there.
    **options
        As for :func:`analyze_file`.

    Returns
    -------
    list of Analysis, in the order of ``paths``.

    Notes
    -----
    Any failure on one file (a bad recording, but also ``MemoryError``, ``OverflowError`` or a
    worker process killed twice) becomes that file's ``error``; see :mod:`ringdown.batch`.
    """
    paths = [str(p) for p in paths]
    results: list[Analysis | None] = [None] * len(paths)
    for i, a in iter_analyze_files(paths, jobs=jobs, client=client, **options):
        results[i] = a
        if progress:
            progress(a)
    return [r for r in results if r is not None]


def iter_analyze_files(
    paths: Sequence[str], *, jobs: int = 1, executor=None, on_notice=None, client=None, **options
) -> Iterator[tuple[int, Analysis]]:
    """Analyse several files; yield ``(position, Analysis)`` as each finishes.

    The batch runner of every command (:func:`ringdown.batch.run_batch`): a file whose analysis
    fails in any way yields ``Analysis.failed`` with the reason; ``executor`` and ``on_notice``
    are passed on. With a Dask ``client``, the files are analysed on its workers instead
    (:func:`ringdown.cluster.iter_results`, the same failure policy; ``jobs`` is then unused).

    Raises
    ------
    ParameterError
        For bad options or ``jobs`` (before anything is analysed).
    """
    from ..base.batch import run_batch

    paths = [str(p) for p in paths]
    AnalysisOptions.from_kwargs({k: v for k, v in options.items() if k not in ("channel", "column", "sample_rate")})
    if jobs is None or isinstance(jobs, bool) or not isinstance(jobs, int) or jobs < 1:
        raise ParameterError(f"jobs must be >= 1; got {jobs!r}")
    task = _FileTask(dict(options))
    if client is not None:
        from ..base.cluster import iter_results

        yield from iter_results(client, task, paths, on_error=task.failed)
        return
    yield from run_batch(task, paths, on_error=task.failed, jobs=jobs, executor=executor, on_notice=on_notice)


#: Modules the analysis of a file imports lazily: batch workers import them before their first
#: file (``batch.run_batch``'s warm start), instead of paying ~0.6-1 s each on it.
WORKER_PRELOAD = (
    "soundfile",
    "scipy.fft",
    "scipy.linalg",
    "scipy.ndimage",
    "scipy.optimize",
    "scipy.signal",
    "threadpoolctl",
    "ringdown.io.read",
    "ringdown.io.formats",
)


class _FileTask:
    """Picklable ``analyze_file`` with fixed options, and the failed record of a path."""

    preload = WORKER_PRELOAD

    def __init__(self, options: dict) -> None:
        self.options = options

    def __call__(self, path: str) -> Analysis:
        return analyze_file(path, **self.options)

    def failed(self, path: str, exc: Exception) -> Analysis:
        return Analysis.failed(path, exc, settings=dict(self.options))


# ----------------------------------------------------------------------------------------------
# the pipeline


@one_blas_thread
def analyze_recording(
    rec: Recording, *, reader_settings: dict | None = None, sample_offset: int = 0, **options
) -> Analysis:
    """Analyse a :class:`Recording` (the common path of :func:`analyze` and :func:`analyze_file`).

    Keyword options are those of :func:`analyze`. ``sample_offset`` is the index, in a longer
    source, of ``rec``'s first sample (a segment of the block engine, :mod:`ringdown.analysis.engine`):
    every time in the result is then measured from the source's first sample. The numerical work
    runs on one BLAS thread (:mod:`ringdown.base._threads`; the caller's thread limits are
    restored afterwards).
    """
    opts = AnalysisOptions.from_kwargs(options)
    settings = opts.to_dict()
    if reader_settings:
        settings.update(reader_settings)
    name = repr(rec.path) if rec.path else "the array"
    fs = rec.sample_rate
    raw, i0 = _checked_samples(rec, opts, name)
    i0 += int(sample_offset)
    x, step, f_dom = condition.remove_drift_and_step(raw, fs)
    scale = float(np.max(np.abs(x)))
    if scale == 0.0 or scale < 1e-12 * max(float(np.max(np.abs(raw))), 1e-300):
        raise InputError(f"{name} holds only a constant offset or a straight drift: nothing rings down")
    lv = _levels(x, fs, f_dom)
    spans, band_note = _find_spans(rec, name, lv, opts)
    # where each free decay starts: at the hit, or where a steady drive stops
    spans = condition.free_decay_starts(raw, lv.slow, spans, smoothing=lv.smoothing, noise_db=lv.noise_db)
    if step is not None:
        # a step of the mean where a hit rises: a held deflection let go
        spans = [
            replace(sp, kind="release") if sp.kind == "impulse" and abs(sp.onset - step) <= 2 * lv.smoothing else sp
            for sp in spans
        ]
    rec_warnings = _record_notes(rec, name, band_note)
    noise_f, noise_p, noise_source, noise_note = _noise_spectrum(x, fs, spans, lv.level, lv.noise_db, lv.smoothing)
    if noise_note is not None:
        rec_warnings.append(noise_note)
    tones = condition.steady_tones(noise_f, noise_p) if noise_source == "pre_trigger" else []
    rec_warnings.extend(_tone_note(f_tone) for f_tone in tones)
    ctx = _RecordContext(
        x=x,
        fs=fs,
        opts=opts,
        noise_f=noise_f,
        noise_p=noise_p,
        noise_db=lv.noise_db,
        level=lv.level,
        clipped=condition.find_clipping(raw, full_scale=rec.full_scale),
        tones=tuple(tones),
        i0=i0,
        smoothing=lv.smoothing,
        burst=condition.burst_length(lv.innovation),
    )
    hits = _measure_hits(ctx, spans, name)
    modes = _combine_hits([h for h in hits if h.used and h.modes])
    rec_warnings.extend(w for h in hits for w in h.warnings if w.code in _RECORD_LEVEL_CODES)
    return Analysis(
        path=rec.path,
        sha256=rec.sha256,
        channel=rec.channel,
        unit=rec.unit,
        sample_rate_hz=fs,
        n_samples=rec.n_samples,
        hits=tuple(hits),
        modes=tuple(modes),
        warnings=tuple(_unique(rec_warnings)),
        error=None,
        settings=settings,
        noise_floor=float(10 ** (lv.noise_db / 20.0)),
        noise_source=noise_source,
        recording=rec,
        rejected=tuple(replace(r, hit=j + 1) for j, h in enumerate(hits) for r in h.rejected),
    )


#: Warnings of a hit that are repeated in the recording's own list.
_RECORD_LEVEL_CODES = ("double_hit", "clipped", "stationary_tone", "start_uncertain", "candidate_rejected")


def _tone_note(f_tone: float) -> Notice:
    """The recording's warning for a steady tone found in the pre-trigger at ``f_tone`` Hz."""
    return Notice(
        "stationary_tone",
        f"steady tone near {f_tone:.1f} Hz before the hit (mains hum or another running source?); not a mode",
    )


def _checked_samples(rec: Recording, opts: AnalysisOptions, name: str) -> tuple[np.ndarray, int]:
    """The samples of ``rec`` to analyse (its time window) and the index of the first, after
    the checks that refuse a recording or options no analysis can use (:class:`InputError`,
    :class:`ParameterError`, one line naming ``name``)."""
    fs = rec.sample_rate
    if rec.n_samples < MIN_SAMPLES:
        raise InputError(f"{name} has {rec.n_samples} samples; at least {MIN_SAMPLES} are needed")
    nyq = fs / 2.0
    for lo, hi in opts.bands or ():
        if hi > nyq:
            raise ParameterError(
                f"band {lo:g}-{hi:g} Hz lies above Nyquist ({nyq:g} Hz) for {name}; lower the band or resample"
            )
    raw, i0 = _time_window(rec, opts, name)
    peak_abs = float(np.max(np.abs(raw)))
    if peak_abs > MAX_ABS_SAMPLE:
        raise InputError(
            f"{name} holds values up to {peak_abs:.3g}, beyond the {MAX_ABS_SAMPLE:g} that can be squared "
            "without overflow; rescale the signal (e.g. to volts or m/s^2)"
        )
    if float(np.ptp(raw)) == 0.0:
        raise InputError(f"{name} is constant (every sample is {raw[0]:g}): nothing rings down")
    return raw, i0


@dataclass(frozen=True, slots=True, eq=False)
class _Levels:
    """The smoothed levels of one conditioned record that hit detection works on."""

    x: np.ndarray  #: (n_samples,) conditioned samples
    fs: float  #: sample rate, Hz
    smoothing: int  #: width W of the broadband level's smoothing (one period of the dominant frequency), samples
    level: np.ndarray  #: (n_samples,) broadband level smoothed over W, dB
    slow: np.ndarray  #: (n_samples,) broadband level smoothed over 2 W, dB
    noise_db: float  #: broadband noise floor of ``level``, dB
    innovation: np.ndarray  #: (n_samples,) prediction error of ``x`` (:func:`condition.innovation`)
    innovation_level: np.ndarray  #: (n_samples,) its level over the burst length, dB


def _levels(x: np.ndarray, fs: float, f_dom: float | None) -> _Levels:
    """The levels of ``x`` (conditioned, (n,)) at ``fs`` Hz with dominant frequency ``f_dom``."""
    smoothing = condition.envelope_smoothing(x, fs, dominant_hz=f_dom)
    level = condition.envelope_db(x, fs, smoothing=smoothing)
    # the prediction error shows a second tap on a record still ringing from the first
    inn = condition.innovation(x)
    return _Levels(
        x=x,
        fs=fs,
        smoothing=smoothing,
        level=level,
        slow=condition.envelope_db(x, fs, smoothing=2 * smoothing),
        noise_db=condition.noise_floor_db(level, smoothing),
        innovation=inn,
        innovation_level=condition.envelope_db(inn, fs, smoothing=condition.innovation_smoothing(inn, smoothing)),
    )


def _find_spans(
    rec: Recording, name: str, lv: _Levels, opts: AnalysisOptions
) -> tuple[list[condition.HitSpan], Notice | None]:
    """The hits of the record (:func:`condition.find_hits`; in the band of the strongest
    spectral peak when the broadband level shows none, with the ``hits_in_band`` notice
    returned) or :class:`NoRingdownError`."""
    spans = condition.find_hits(
        lv.level,
        lv.fs,
        noise_db=lv.noise_db,
        min_hit_snr_db=opts.min_hit_snr_db,
        smoothing=lv.smoothing,
        slow_level_db=lv.slow,
        innovation_level_db=lv.innovation_level,
    )
    band_note = None
    if not spans:
        # a narrowband mode can stand far above its band's noise while the broadband level does
        # not rise min_hit_snr_db: look for the hits in the band of the strongest spectral peak
        found = _hits_in_strongest_band(lv.x, lv.fs, opts.min_hit_snr_db, lv.smoothing)
        if found is not None:
            spans, f_band = found
            band_note = Notice(
                "hits_in_band",
                f"the broadband level does not rise {opts.min_hit_snr_db:g} dB above its "
                f"noise; hits were found in the band around {f_band:.1f} Hz",
            )
    if not spans:
        peak_db = float(lv.level.max() - lv.noise_db)
        hint = (
            f"; it holds {rec.n_channels} channels (this is {rec.channel!r}): try another with --channel"
            if rec.n_channels > 1
            else ""
        )
        raise NoRingdownError(
            f"no ring-down found in {name}: the envelope never rises {opts.min_hit_snr_db:g} dB above its "
            f"noise floor (highest {peak_db:.1f} dB); check the gain, the trigger or the file{hint}"
        )
    return spans, band_note


def _record_notes(rec: Recording, name: str, band_note: Notice | None) -> list[Notice]:
    """The recording-level notices: hits found in a band, other channels, the reader's notes, timing jitter."""
    notes: list[Notice] = [band_note] if band_note is not None else []
    if rec.n_channels > 1:
        notes.append(
            Notice(
                "multichannel",
                f"{name} holds {rec.n_channels} channels (or data columns); only "
                f"{rec.channel!r} was analysed (choose another with --channel)",
            )
        )
    notes.extend(Notice(code, message) for code, message in getattr(rec, "notes", ()))
    if rec.timing_jitter is not None and rec.timing_jitter > 1e-6:
        notes.append(Notice("timing_jitter", f"time steps jitter by {100 * rec.timing_jitter:.3g} % RMS (accepted)"))
    return notes


def _measure_hits(ctx: _RecordContext, spans: list[condition.HitSpan], name: str) -> list[Hit]:
    """Every hit measured (:func:`_analyze_hit`, each knowing the modes of the hits before it);
    :class:`NoRingdownError` when none gives a usable mode. When every measurable hit is flagged
    (e.g. as a bounce), the flagged ones are used: better a flagged result than none."""
    steady: list = []
    hits = _hits_in_turn(ctx, spans, steady=steady)
    retapped = _retapped(ctx, spans, hits, steady)
    if retapped:
        # components named steady tones that a later tap changed are modes: measured again
        hits = _hits_in_turn(ctx, spans, retapped=retapped)
    if not any(h.used and h.modes for h in hits) and any(h.modes for h in hits):
        hits = [h if h.used or not h.modes else _keep(h) for h in hits]
    if not any(h.used and h.modes for h in hits):
        reasons = "; ".join(sorted({w.message for h in hits for w in h.warnings})) or "no mode stood above the noise"
        raise NoRingdownError(f"no mode could be measured in {name}: {reasons}")
    return hits


def _hits_in_turn(ctx: _RecordContext, spans: list[condition.HitSpan], **kw) -> list[Hit]:
    """Every hit measured in turn (:func:`_analyze_hit`, keywords ``kw`` passed on), each
    knowing the modes of the hits before it."""
    hits: list[Hit] = []
    for j, span in enumerate(spans):
        earlier = tuple(
            (m.f_d_hz, max(m.beta_per_s / math.pi, 3.0 * (m.f_d_hz_u or 0.0))) for h in hits for m in h.modes
        )
        hits.append(_analyze_hit(ctx, span, prev_end=spans[j - 1].end if j > 0 else 0, earlier=earlier, **kw))
    return hits


#: False-alarm probability of :func:`_retapped`'s test per record, shared among the components
#: it tests (Bonferroni): with 1e-3 per component, one of the nine high-frequency lines of benchmark
#: record 29 (seed 20261201) came out at p = 7e-4 and was reported as a mode (common practice, no
#: source).
RETAP_ALPHA = 1e-3


def _retapped(
    ctx: _RecordContext, spans: list[condition.HitSpan], hits: list[Hit], steady: list
) -> tuple[tuple[float, float], ...]:
    """``(f_hz, tolerance_hz)`` of the components named steady tones by their fit (``steady``,
    ``(f_hz, beta_per_s)``) whose amplitude and phase a later tap changed beyond what the noise
    allows (:func:`ringdown.analysis.retap.phasor_changes`, false alarm ``RETAP_ALPHA`` per record).

    A steady tone (hum, a running drive) is not changed by a tap, since a linear structure's
    response to a tap adds free decays at its modes' frequencies; a lightly damped mode that the
    first tap started, or that rang before it, is excited again, with a new amplitude and phase.
    Only records whose hits are all taps (impulses) and that nothing clipped are tested: a drive
    switched off changes its tone, and clipping changes every component. The tolerance is two
    resolution bins of the record from the first tap on (components closer are one)."""
    if len(spans) < 2 or not steady or any(sp.kind != "impulse" for sp in spans) or ctx.clipped.size:
        return ()
    from .retap import chi2_sf_even, phasor_changes

    n0 = spans[0].onset
    tol = 2.0 * ctx.fs / max(ctx.x.shape[0] - n0, 1)
    tested: list[tuple[float, float]] = []
    for f, beta in steady:
        if all(abs(f - g) > tol for g, _ in tested):
            tested.append((f, beta))
    held = (
        [
            (m.f_d_hz, m.beta_per_s)
            for m in _combine_hits([h for h in hits if h.modes])
            if all(abs(m.f_d_hz - f) > tol for f, _ in tested)
        ]
        if any(h.modes for h in hits)
        else []
    )
    stats = phasor_changes(ctx.x, ctx.fs, [sp.onset for sp in spans], ctx.burst + ctx.smoothing, tested, held)
    # the false alarm is per record: shared among the components tested (Bonferroni)
    alpha = RETAP_ALPHA / len(tested)
    return tuple((f, tol) for (f, _), (w, dof) in zip(tested, stats) if chi2_sf_even(w, dof) < alpha)


def _time_window(rec: Recording, opts: AnalysisOptions, name: str) -> tuple[np.ndarray, int]:
    """The samples between ``opts.start_s`` and ``opts.end_s`` and the index of the first."""
    if opts.start_s is None and opts.end_s is None:
        return rec.samples, 0
    i_lo, i_hi = window_bounds(rec.n_samples, rec.sample_rate, opts, name)
    return rec.samples[i_lo:i_hi], i_lo


def window_bounds(n: int, fs: float, opts: AnalysisOptions, name: str) -> tuple[int, int]:
    """Sample indices ``[i_lo, i_hi)`` of the ``start_s``..``end_s`` window of ``n`` samples at ``fs`` Hz."""
    dur = n / fs
    start = 0.0 if opts.start_s is None else opts.start_s
    end = dur if opts.end_s is None else min(opts.end_s, dur)
    if start >= dur:
        raise ParameterError(f"start {start:g} s lies beyond the end of {name} ({dur:g} s); give an earlier --start")
    i_lo, i_hi = int(math.floor(start * fs)), min(n, int(math.ceil(end * fs)))
    if i_hi - i_lo < MIN_SAMPLES:
        raise ParameterError(
            f"the time window {start:g}-{end:g} s of {name} holds {max(i_hi - i_lo, 0)} samples; "
            f"at least {MIN_SAMPLES} are needed"
        )
    return i_lo, i_hi


def _hits_in_strongest_band(x: np.ndarray, fs: float, min_hit_snr_db: float, smoothing: int):
    """Hits found in the level of the band around the record's strongest spectral peak.

    Returns ``(spans, f_hz)`` or ``None`` when there is no clear peak or no hit in its band. The
    peak must stand 20 dB above the running median of the spectrum; the band is ±20 half-power
    widths of the peak (at least 4 frequency bins); its envelope level is interpolated to the
    record's rate, and a hit must rise 12 dB within twice the band filter's settling time (at
    least the broadband rise window, 2 smoothing widths) to ``min_hit_snr_db`` above the band
    level's median.
    """
    found = find_peaks(x, fs, max_peaks=1, min_prominence_db=20.0)
    if not found:
        return None
    p = found[0]
    half = max(20.0 * p.width_hz, 4.0 * fs / x.shape[0])
    lo, hi = max(p.f_hz - half, 0.0), min(p.f_hz + half, fs / 2.0)
    band = extract_band(spectrum_of(x, fs), lo + 0.25 * (hi - lo), hi - 0.25 * (hi - lo), skirt_hz=0.25 * (hi - lo))
    t = np.arange(x.shape[0]) / fs
    level = np.interp(t, band.t_s, 20.0 * np.log10(np.abs(band.z) + 1e-300))
    rise = max(
        int(round(condition.RISE_WIDTHS * smoothing)),
        int(round(2.0 * settling_time_s(band, beta_per_s=math.pi * p.width_hz, level=1e-2) * fs)),
    )
    hold = max(int(round(condition.HOLD_OFF_WIDTHS * smoothing)), 2 * rise)
    # the median, not the 5th percentile: an unsmoothed narrowband level dips far below its mean
    # (|z|^2 of noise is exponential: 5th percentile -13 dB, median -1.6 dB re the mean)
    spans = condition.find_hits(
        level,
        fs,
        noise_db=float(np.median(level)),
        min_hit_snr_db=min_hit_snr_db,
        rise_samples=rise,
        hold_off_samples=hold,
        smoothing=max(3, rise),
        bounce_window_samples=int(round(condition.BOUNCE_WIDTHS * smoothing)),
    )
    return (spans, p.f_hz) if spans else None


def _keep(hit: Hit) -> Hit:
    note = Notice(
        "flagged_hit_used",
        f"hit at {hit.start_s:.6g} s was flagged but is the only measurable one; its modes are reported anyway",
    )
    return replace(hit, used=True, warnings=hit.warnings + (note,))


def _unique(notices: Iterable[Notice]) -> list[Notice]:
    seen, out = set(), []
    for n in notices:
        if (n.code, n.message) not in seen:
            seen.add((n.code, n.message))
            out.append(n)
    return out


#: Fewest samples a noise-only stretch must hold to give the noise spectrum: a Welch estimate
#: with 129 frequency bins (common practice, no source), and at least 4 smoothing widths.
MIN_NOISE_SAMPLES = 256
#: Names of where the noise spectrum came from (``Analysis.noise_source``).
NOISE_SOURCES = ("pre_trigger", "tail", "record_end")


def _noise_spectrum(
    x: np.ndarray, fs: float, spans, level: np.ndarray, noise_db: float, smoothing: int
) -> tuple[np.ndarray, np.ndarray, str, Notice | None]:
    """Noise PSD from where only noise is, where it came from, and a warning when in doubt.

    1. ``"pre_trigger"``: the samples before the first hit's rise (the tap, or the start of a
       drive), less one smoothing width, when they are at least :data:`MIN_NOISE_SAMPLES` and
       one smoothing width long;
    2. ``"tail"``: else the record's end after the last block (4 smoothing widths, at least 32
       samples) whose median level is more than 4 dB above the noise floor, when that long;
    3. ``"record_end"``: else the record's last 10 % (at least :data:`MIN_NOISE_SAMPLES`),
       which still holds the decay: the noise is over-estimated, fit windows end early and
       uncertainties (scaled by each fit's residual) grow; the warning ``noise_uncertain`` says so.
    """
    sm = max(1, int(smoothing))
    n = x.shape[0]
    min_len = max(MIN_NOISE_SAMPLES, 4 * sm)
    first = spans[0].rise if spans[0].rise is not None else spans[0].onset
    pre_end = first - sm
    # a pre-trigger of one smoothing width (at least 256 samples) is noise alone: better than
    # the decay's tail, which a slow mode still fills
    if pre_end >= max(MIN_NOISE_SAMPLES, sm):
        return (*condition.noise_psd(x[:pre_end], fs), "pre_trigger", None)
    blk = max(32, 4 * sm)
    last = spans[-1].peak
    m = (n - last) // blk
    loud = last
    if m > 0:
        med = np.median(level[last : last + m * blk].reshape(m, blk), axis=1)
        above = np.flatnonzero(med > noise_db + 4.0)
        loud = last + (int(above[-1]) + 1) * blk if above.size else last
    rest = level[last + m * blk :]
    if rest.size and float(np.median(rest)) > noise_db + 4.0:
        loud = n
    if n - loud >= min_len:
        return (*condition.noise_psd(x[loud:], fs), "tail", None)
    n_tail = min(n, max(min_len, n // 10))
    note = Notice(
        "noise_uncertain",
        f"no stretch of noise alone in the record (the pre-trigger holds {max(first, 0)} "
        "samples and the decay still rings at the end): the noise was taken from the "
        "record's last 10 %, an upper bound; fit windows may end early and the hit's "
        "SNR is under-stated. Record more before the hit or until the decay has died away",
    )
    return (*condition.noise_psd(x[-n_tail:], fs), "record_end", note)


@dataclass(frozen=True, slots=True, eq=False)
class _RecordContext:
    """What every hit of one record shares: the conditioned samples and what was measured on them."""

    x: np.ndarray  #: (n_samples,) conditioned samples (offset and drift removed)
    fs: float  #: sample rate, Hz
    opts: AnalysisOptions
    noise_f: np.ndarray  #: (n_freq,) Welch frequencies of the noise PSD, Hz
    noise_p: np.ndarray  #: (n_freq,) noise PSD, unit^2/Hz
    noise_db: float  #: broadband noise floor of the smoothed level, dB
    level: np.ndarray  #: (n_samples,) smoothed broadband level, dB
    clipped: np.ndarray  #: indices of clipped samples
    tones: tuple[float, ...]  #: steady tones found before the first hit, Hz
    i0: int = 0  #: index in the recording of ``x[0]`` (the start of the time window)
    smoothing: int = 3  #: width of the level's smoothing, samples
    burst: int = 1  #: length of a tap's force in the prediction error (:func:`condition.burst_length`), samples


@dataclass(frozen=True, slots=True, eq=False)
class _HitContext:
    """One hit's decay: its record, its spectrum and where its decay may be fitted."""

    record: _RecordContext
    spec: Spectrum  #: spectrum of the hit's segment (from before the onset to ``seg_end``)
    onset_s: float  #: start of the free decay, s from the recording's first sample
    clip_end: int | None  #: first sample (index in the recording) after the last clipped one in the hit, or None
    seg_end: int  #: index in the recording where the hit's segment ends
    pre_rms: float | None = None  #: RMS of the samples before the hit's rise (None: too few), recording units
    earlier: tuple = ()  #: (f_hz, width_hz) of modes measured in earlier hits of the record
    pre: np.ndarray | None = None  #: (n_pre,) the samples before the hit's rise (None: too few)
    #: Candidate -> (reason, detail) for each raw-fit target the fit reached but did not keep
    #: (:func:`_measure_raw`), so that its rejection says why (:func:`_match_candidates`)
    drops: dict = field(default_factory=dict)
    #: (f_hz, tolerance_hz) of components a later tap changed (:func:`_retapped`): modes, not
    #: steady tones, however little they decay or whatever their band held before this hit
    retapped: tuple = ()
    #: where the components named steady tones by their fit are collected, ``(f_hz,
    #: beta_per_s)`` (None: not collected), for :func:`_retapped`
    steady: list | None = None

    def was_retapped(self, f_hz: float) -> bool:
        """Whether a component at ``f_hz`` is one a later tap changed (``retapped``)."""
        return any(abs(f_hz - f) <= tol for f, tol in self.retapped)

    def new_above(self, f_hz: float) -> float | None:
        """Amplitude (recording units) above which a component at ``f_hz`` was not there before
        the hit, so that the hit started it (None without samples before the hit).

        ``STEADY_MARGIN_DB`` above the lesser of two bounds on a steady tone's amplitude there:
        ``sqrt(2) pre_rms`` (a tone of amplitude ``a`` alone gives an RMS of ``a / sqrt(2)``),
        and the amplitude of a cosine at ``f_hz`` least-squares fitted (with a constant) to the
        samples before the hit plus three of its standard deviations (the least-squares
        covariance with the larger of the fit's residual variance and the white-noise variance
        ``S(f) fs / 2`` of the measured noise density at ``f_hz``). The fit bounds a narrowband
        tone far below the broadband RMS, so that a lightly damped mode far weaker than the
        broadband noise is seen to start with the hit."""
        if self.pre_rms is None or self.pre is None:
            return None
        margin = 10 ** (STEADY_MARGIN_DB / 20)
        bound = math.sqrt(2.0) * self.pre_rms
        ctx = self.record
        n = self.pre.shape[0]
        if n < 8:
            return bound * margin
        t = np.arange(n) / ctx.fs
        w = 2.0 * math.pi * f_hz * t
        phi = np.stack([np.cos(w), np.sin(w), np.ones(n)], axis=1)
        coef, *_ = np.linalg.lstsq(phi, self.pre, rcond=None)
        resid = self.pre - phi @ coef
        s_f = float(detect.noise_density(f_hz, ctx.noise_f, ctx.noise_p))
        var = max(float(np.sum(resid * resid)) / max(n - 3, 1), s_f * ctx.fs / 2.0)
        try:
            cov = var * np.linalg.inv(phi.T @ phi)
        except np.linalg.LinAlgError:
            return bound * margin
        sd = math.sqrt(max(float(cov[0, 0] + cov[1, 1]) / 2.0, 0.0))
        a = math.hypot(float(coef[0]), float(coef[1]))
        return min(bound, a + 3.0 * sd) * margin

    @property
    def onset_lag_s(self) -> float:
        """How much later than ``onset_s`` the decay may start, s: half the broadband level's
        smoothing width, by which the level's onset can precede the first sample of the decay
        (and :func:`_free_decay_start` cannot always find that sample: drift removal can leave
        a curved offset of many noise sigma before the hit)."""
        return 0.5 * self.record.smoothing / self.record.fs

    def rings_from_earlier(self, f_hz: float, width_hz: float = 0.0) -> bool:
        """Whether a component at ``f_hz`` is a mode an earlier hit excited: it was there before
        this hit because it still rings, not because it is a steady tone."""
        return any(abs(f_hz - f) <= max(w, width_hz, 2.0 * self.spec.df_hz) for f, w in self.earlier)


def _analyze_hit(
    ctx: _RecordContext,
    span,
    *,
    prev_end: int,
    earlier: tuple = (),
    retapped: tuple = (),
    steady: list | None = None,
) -> Hit:
    """Every mode of one hit (``span``, from :func:`condition.find_hits` and
    :func:`condition.free_decay_start`); ``prev_end`` is the sample where the previous hit's
    segment ended (0 for the first); ``earlier`` holds ``(f_hz, width_hz)`` of the modes of
    earlier hits, which still ring when this hit comes; ``retapped`` ``(f_hz, tolerance_hz)``
    the components a later tap changed (:func:`_retapped`); the components named steady tones
    by their fit are appended to ``steady`` as ``(f_hz, beta_per_s)`` when it is a list.
    Indices are into ``ctx.x``; times are from the recording's first sample (``ctx.i0`` samples
    before ``ctx.x[0]``)."""
    x, fs, opts = ctx.x, ctx.fs, ctx.opts
    i0 = ctx.i0
    warnings: list[Notice] = []
    seg_end = span.end
    onset_s = (span.onset + i0) / fs
    if span.kind == "impulse":
        # before the onset, as much as the decay is long (the data's own scale, not a fixed time):
        # room for the band filter to settle, then a look at what the band held before the hit
        # (a steady tone is there already, a mode is not)
        seg_start = max(prev_end, span.onset - (seg_end - span.onset), 0)
    else:
        # before a switch-off or release the record holds the drive, not the free decay: the
        # segment starts where the free decay does, as a tap's would in a silent record
        seg_start = span.onset
    used, clip_end = _hit_notices(ctx, span, warnings)
    model = opts.detection == "model"
    decay_from = max(span.onset if model else span.peak, clip_end or 0)
    peak_value = float(np.max(np.abs(x[span.onset : seg_end])))
    hit_snr = float(ctx.level[span.peak] - ctx.noise_db)

    def hit(used_: bool, modes_=(), rejected_=()) -> Hit:
        return Hit(
            onset_s,
            (span.peak + i0) / fs,
            peak_value,
            hit_snr,
            (seg_end + i0) / fs,
            used_,
            tuple(warnings),
            tuple(modes_),
            tuple(rejected_),
            start_kind=span.kind,
        )

    if seg_end - decay_from < MIN_SAMPLES:
        warnings.append(Notice("short_decay", f"hit at {onset_s:.6g} s leaves {seg_end - decay_from} samples of decay"))
        return hit(False)

    # the free decay's first sample: the smoothed level's onset can precede it (see _hit_context)
    free_start = _free_decay_start(ctx, span, clip_end) if span.kind == "impulse" else max(span.onset, clip_end or 0)
    hctx = replace(
        _hit_context(ctx, span, seg_start, prev_end, clip_end, earlier, free_start), retapped=retapped, steady=steady
    )
    rejected: list[Rejected] = []
    cands: list[Candidate] = []
    start = decay_from
    if opts.bands is not None:
        groups: list[tuple[list[Peak], float, float, list[Candidate]]] = [([], lo, hi, []) for lo, hi in opts.bands]
    elif model:
        start = free_start
        cands, groups = _candidates(ctx, start, seg_end, rejected, parametric=clip_end is None, broad=clip_end is None)
    else:
        # spectral peaks of the decay as candidates: each one not reported as a mode is named
        cands, groups = _candidates(ctx, start, seg_end, rejected, parametric=False, max_peaks=opts.max_modes)
    # the residual search looks at the decay from its first sample after the tap's force (a
    # fast decay can be gone by the broadband level's peak, one smoothing width on)
    resid_start = decay_from
    if span.kind == "impulse" and not model and opts.bands is None:
        resid_start = min(decay_from, free_start + ctx.burst)
    residual = opts.bands is None and not model and hctx.seg_end - ctx.i0 - resid_start >= MIN_SAMPLES
    modes, failed, deferred, retry = _measure_groups(hctx, groups, cands, start, residual, warnings, rejected)
    if residual:
        # after clipping, the residual holds what the clipped samples did to the decay: no broad search
        tried = [c for c in cands if c not in deferred and c not in retry]
        modes = _with_residual(hctx, resid_start, modes, tried, deferred, retry, rejected, broad=clip_end is None)
        modes = _raw_refits(hctx, resid_start, modes)
    modes = _drop_driven(modes, onset_s, warnings, hctx.was_retapped)
    if failed:
        shown = "; ".join(failed[:3]) + (f"; and {len(failed) - 3} more" if len(failed) > 3 else "")
        warnings.append(
            Notice("fit_failed", f"{len(failed)} band(s) in the hit at {onset_s:.6g} s could not be fitted: {shown}")
        )
    modes = _strongest(modes, opts.max_modes, rejected)
    modes = [m.with_updates(index=i + 1) for i, m in enumerate(modes)]
    warnings.extend(r.notice() for r in rejected)
    return hit(used, modes, rejected)


def _with_residual(
    hctx: _HitContext,
    start: int,
    modes: list[Mode],
    tried: list[Candidate],
    deferred: list[Candidate],
    retry: list[Candidate],
    rejected: list[Rejected],
    *,
    broad: bool,
) -> list[Mode]:
    """The first pass's ``modes`` and those the residual search (:func:`_residual_round`) adds;
    the ``retry`` candidates it did not find either are named in ``rejected`` now, as the first
    pass would have (against the first pass's modes only: a residual-search mode far from one is
    not its pair)."""
    more, more_rejected = _residual_round(
        hctx, start, modes, tried, deferred, broad=broad, broad_round=int(bool(retry))
    )
    rejected.extend(more_rejected)
    first, unmatched = _match_candidates(
        modes, [c for c in retry if not any(_near(m, c) for m in more)], False, why=hctx.drops
    )
    rejected.extend(unmatched)
    return first + more


def _hit_notices(ctx: _RecordContext, span, warnings: list[Notice]) -> tuple[bool, int | None]:
    """The notices on one hit (an uncertain start, a bounce, clipping: appended to
    ``warnings``); returns whether the hit is used (a bounce is left out unless
    ``keep_double_hits``) and the first sample (index into ``ctx.x``) after its clipping, or None."""
    fs, i0, opts = ctx.fs, ctx.i0, ctx.opts
    onset_s = (span.onset + i0) / fs
    used = True
    if span.doubt is not None:
        warnings.append(Notice("start_uncertain", f"hit at {onset_s:.6g} s: {span.doubt}"))
    if span.bounce is not None:
        warnings.append(
            Notice(
                "double_hit",
                f"hit at {onset_s:.6g} s has a second onset {1e3 * (span.bounce - span.onset) / fs:.3g} ms later (hammer bounce?)"
                + ("" if opts.keep_double_hits else "; left out of the combined result"),
            )
        )
        used = opts.keep_double_hits
    clipped = ctx.clipped
    clip_in = clipped[(clipped >= span.onset) & (clipped < span.end)] if clipped.size else clipped
    clip_end = None
    if clip_in.size:
        clip_end = int(clip_in[-1]) + 1
        warnings.append(
            Notice(
                "clipped",
                f"{clip_in.size} samples clipped between {(clip_in[0] + i0) / fs:.6g} and "
                f"{(clip_end + i0) / fs:.6g} s; fits start after the clipping ends",
            )
        )
    return used, clip_end


def _hit_context(
    ctx: _RecordContext, span, seg_start: int, prev_end: int, clip_end: int | None, earlier: tuple, free_start: int
) -> _HitContext:
    """The context of one hit whose segment is ``ctx.x[seg_start:span.end]``, with what the
    record held before the hit's rise (at least one smoothing width of it, after ``prev_end``),
    which bounds the amplitude any steady tone could have had there. Its ``onset_s`` is the later
    of the level's onset and ``free_start`` (index into ``ctx.x`` of the free decay's first
    sample, :func:`_free_decay_start`), so that no band fit starts before the decay does: the
    smoothed level's onset can precede it by up to half a smoothing width (a period of the
    dominant mode), and a band fit started there saw the band's silence and fitted the jump
    with poles of its own."""
    x, fs, i0 = ctx.x, ctx.fs, ctx.i0
    rise = span.rise if span.rise is not None else span.onset
    pre_x = x[prev_end : max(prev_end, rise - ctx.smoothing)]
    pre_rms = (
        float(np.sqrt(np.mean(pre_x**2))) if span.kind == "impulse" and pre_x.size >= max(ctx.smoothing, 16) else None
    )
    return _HitContext(
        record=ctx,
        spec=spectrum_of(x[seg_start : span.end], fs, t0_s=(seg_start + i0) / fs),
        onset_s=(max(span.onset, free_start) + i0) / fs,
        clip_end=None if clip_end is None else clip_end + i0,
        seg_end=span.end + i0,
        pre_rms=pre_rms,
        earlier=earlier,
        pre=pre_x if pre_rms is not None else None,
    )


def _measure_groups(
    hctx: _HitContext,
    groups: list[tuple[list[Peak], float, float, list[Candidate]]],
    cands: list[Candidate],
    start: int,
    residual: bool,
    warnings: list[Notice],
    rejected: list[Rejected],
) -> tuple[list[Mode], list[str], list[Candidate], list[Candidate]]:
    """The first pass over one hit's groups ``(peaks, lo_hz, hi_hz, candidates)``: each group
    measured in its band (:func:`_measure_group`) or, too broad for one, on the raw record from
    ``start`` (:func:`_measure_raw`), or deferred to the residual search when ``residual``.
    Rejections are appended to ``rejected``, notices to ``warnings``. Returns the modes, the
    bands that could not be fitted (as text), the deferred candidates and those left to the
    residual search to look for again (``_match_candidates``' ``retry``)."""
    modes: list[Mode] = []
    failed: list[str] = []
    deferred: list[Candidate] = []
    retry: list[Candidate] = []
    for peaks_g, lo, hi, group_cands in groups:
        n_warn = len(warnings)
        raw = _needs_raw_fit(group_cands, lo, hi)
        if residual and raw:
            # too broad for a band: fitted on the residual, once every other mode is subtracted
            deferred.extend(group_cands)
            continue
        try:
            if raw:
                found = _measure_raw(hctx, group_cands, cands, start)
            else:
                found = _measure_group(hctx, peaks_g, lo, hi, warnings)
        except FitError as exc:
            if residual and not raw and exc.reason == "near_noise":
                # the band's settling ate the decay (a fast decay beside a strong neighbour):
                # fitted on the record from the decay's first sample once every other mode is
                # subtracted, as the residual search does with such a band (``_residual_round``)
                deferred.extend(group_cands)
                continue
            failed.append(f"{lo:.1f}-{hi:.1f} Hz ({exc})")
            rejected.extend(_rejection(c, "fit_failed", str(exc)) for c in group_cands)
            continue
        steady = any(w.code == "stationary_tone" for w in warnings[n_warn:])
        found, unmatched = _match_candidates(found, group_cands, steady, retry if residual else None, hctx.drops)
        rejected.extend(unmatched)
        modes.extend(found)
    return modes, failed, deferred, retry


def _strongest(modes: list[Mode], max_modes: int | None, rejected: list[Rejected]) -> list[Mode]:
    """``modes`` by frequency, at most the ``max_modes`` of largest amplitude; the others are
    ``max_modes`` rejections appended to ``rejected``."""
    modes = sorted(modes, key=lambda m: m.f_d_hz)
    if max_modes is None or len(modes) <= max_modes:
        return modes
    ranked = sorted(modes, key=lambda m: -(m.amplitude or 0.0))
    for m in ranked[max_modes:]:
        rejected.append(
            Rejected(
                m.f_d_hz,
                m.beta_per_s,
                None,
                "max_modes",
                f"amplitude {m.amplitude:.3g} is below the {max_modes} strongest",
            )
        )
    return sorted(ranked[:max_modes], key=lambda m: m.f_d_hz)


#: Rounds of the residual search (each subtracts every mode measured so far and looks again).
RESIDUAL_ROUNDS = 2


def _subtract_modes(seg: np.ndarray, fs: float, modes: Sequence[Mode]) -> np.ndarray:
    """``seg`` less the least-squares sum of the damped cosines of ``modes`` (their poles fixed,
    amplitudes and phases fitted on ``seg``; t = 0 at ``seg[0]``): :func:`_subtract_poles`."""
    return _subtract_poles(seg, fs, [(m.f_d_hz, m.beta_per_s) for m in modes])


def _subtract_poles(
    seg: np.ndarray, fs: float, poles: Sequence[tuple[float, float]], keep: Sequence[tuple[float, float]] = ()
) -> np.ndarray:
    """``seg`` (n,) less the least-squares sum of damped cosines with the given poles
    ``(f_hz, beta_per_s)`` held (amplitudes and phases fitted; t = 0 at ``seg[0]``). The poles
    ``keep`` are fitted jointly with them (so that what they hold is not taken for the others')
    but left in. ``fs`` Hz; returns (n,) float.

    The basis ``exp(p_k t)`` comes from one exponential per block of ~sqrt(n) samples times one
    per sample of a block (``exp(p (a + b)) = exp(p a) exp(p b)``, a few ulp from the direct
    exponential), and the amplitudes from the normal equations of the column-scaled basis; a
    Gram matrix conditioned worse than 1e8 (residual errors above ~1e-8 of the segment) takes
    ``numpy.linalg.lstsq`` instead.
    """
    if not poles:
        return np.array(seg, dtype=np.float64)
    n = seg.shape[0]
    p = np.array([complex(-beta, 2.0 * math.pi * f_hz) for f_hz, beta in list(poles) + list(keep)]) / fs  # per sample
    b = max(int(math.isqrt(n)), 1)
    nb = -(-n // b)
    z = (np.exp(np.outer(np.arange(nb) * b, p))[:, None, :] * np.exp(np.outer(np.arange(b), p))[None, :, :]).reshape(
        nb * b, p.shape[0]
    )[:n]
    # columns Re z_0, Im z_0, Re z_1, ...: the complex array's own memory read as floats (no copy)
    phi = z.view(np.float64)
    gram = phi.T @ phi
    d = 1.0 / np.sqrt(np.maximum(np.diag(gram), 1e-300))
    gram_s = gram * np.outer(d, d)
    if np.linalg.cond(gram_s) < 1e8:
        coef = d * np.linalg.solve(gram_s, d * (phi.T @ seg))
    else:
        coef, *_ = np.linalg.lstsq(phi, seg, rcond=None)
    n_sub = 2 * len(poles)
    return seg - phi[:, :n_sub] @ coef[:n_sub]


def _residual_round(
    hctx: _HitContext,
    start: int,
    modes: list[Mode],
    cands: list[Candidate],
    deferred: Sequence[Candidate] = (),
    *,
    broad: bool = True,
    broad_round: int = 0,
):
    """Modes the first search could not see beside stronger ones: subtract every measured mode
    from the decay (CLEAN, Hogbom 1974 [from memory]: successive cancellation of the strongest
    components), look for spectral peaks in what is left against the same noise spectrum, and
    measure each new one: in its band of the record (bounded by the measured modes) when the band
    has room, else on the record itself jointly with the measured modes (a broad, fast decay: raw
    fit, :func:`_measure_raw`). The ``deferred`` candidates (too broad for a band) are fitted so
    after the first round. Broad peaks
    (``find_peaks(broad=True)``) are looked for in one residual only, where the sharp
    modes and their skirts are gone: the first, or round ``broad_round`` (1 when the first pass
    left candidates for the residual search to look for again, whose modes, measured in the
    first round, would hide broad humps beside them until subtracted); other rounds look for
    sharp peaks only, since subtracting a strong broad mode leaves a broadband remnant, except
    the round after the first that found modes (from ``broad_round`` on), once: a hump under a
    mode just found shows only when it is subtracted, and one under a broad raw-fit mode is then
    fitted jointly with it (:func:`_pair_refit`). Returns ``(modes, rejected)``."""
    ctx = hctx.record
    fs, x = ctx.fs, ctx.x
    seg_end = hctx.seg_end - ctx.i0
    known = list(modes)
    tried = [(c.f_hz, max(c.width_hz, c.resolution_hz)) for c in cands]
    new_modes: list[Mode] = []
    rejected: list[Rejected] = []
    decay = x[start:seg_end]
    res_hz = fs / decay.shape[0]
    if deferred:
        got = _fit_deferred(hctx, start, deferred, known, res_hz, rejected)
        known += got
        new_modes += got
    # humps of a row too long for one raw fit: named unresolved at the end unless a later, sharp
    # round finds a mode there (a row of real modes, each sharp enough once the others are gone)
    row: list[Rejected] = []
    row_cands: list[Candidate] = []
    unveil: int | None = None  # the round after the first (from broad_round on) that found modes
    for round_ in range(RESIDUAL_ROUNDS + broad_round + 1):
        if round_ >= RESIDUAL_ROUNDS + broad_round and unveil != round_:
            break
        resid = _subtract_modes(decay, fs, known)
        # broad peaks in few residuals only: after a strong broad mode is subtracted, its
        # broadband remnant makes humps a smoothed search would take for modes; but the modes
        # the broad round found may have hidden a broader or weaker one under their skirts
        # (benchmark record 2: 5819 Hz, Q 3.7 beside 3239 Hz, Q 4.7), looked for once more
        peaks = find_peaks(
            resid, fs, noise_psd=(ctx.noise_f, ctx.noise_p), broad=broad and round_ in (broad_round, unveil)
        )
        fresh = _fresh_peaks(peaks, known, tried, res_hz)
        if not fresh and round_ >= broad_round:
            break
        tried += [(p.f_hz, max(p.width_hz, res_hz)) for p in fresh]
        found_round: list[Mode] = []
        # band fits first: a raw fit then carries (or subtracts) every mode measured in this round too
        n_row, n_rejected = len(row_cands), len(rejected)
        for g, lo, hi, gc, raw in _round_groups(fresh, fs, res_hz, tuple(ctx.tones), known):
            if raw and _too_many(gc, row):
                row_cands += gc
                continue
            olds = _hidden_under(gc, new_modes) if raw and round_ == unveil else []
            try:
                if olds:
                    got = _pair_refit(hctx, gc, olds, known, found_round, new_modes, res_hz, start)
                elif raw:
                    got = _measure_raw(hctx, gc, gc + _as_candidates(known + found_round, res_hz), start)
                else:
                    got = _measure_group(hctx, g, lo, hi, [])
            except FitError as exc:
                reason = exc.reason
                got = []
                if not raw and reason == "near_noise":
                    # the band's settling ate the decay (a fast decay, or a band bounded by its
                    # neighbours): the record itself from the decay's first sample holds it all
                    try:
                        got = _measure_raw(hctx, gc, gc + _as_candidates(known + found_round, res_hz), start)
                    except FitError:
                        got = []
                if not got:
                    rejected.extend(_rejection(c, reason, str(exc)) for c in gc)
                    continue
            got = _resolved_raw(_new_near(got, gc, known + found_round, res_hz), rejected, gc)
            got, unmatched = _match_candidates(got, gc, False, why=hctx.drops)
            rejected.extend(unmatched)
            found_round.extend(got)
        # the row's humps may be looked at again by the next (sharp) round
        gone = {(c.f_hz, c.width_hz) for c in row_cands[n_row:]}
        tried = [t for t in tried if t not in gone]
        if not found_round and len(row_cands) == n_row and round_ >= broad_round:
            break
        if (
            unveil is None
            and round_ >= broad_round
            and found_round
            and len(found_round) >= len(rejected) - n_rejected + len(row)
        ):
            # not after a round that rejected more candidates than it found modes: its residual
            # is a field of remnants (over a hundred humps in a crowded record), the next one too
            unveil = round_ + 1
        known += found_round
        new_modes += found_round
    rejected += [r for r, c in zip(row, row_cands) if not any(_near(m, c) for m in new_modes)]
    return new_modes, rejected


#: Two broad modes overlap, and are fitted jointly, when their frequencies lie within this many
#: times the sum of their half-power widths (a Lorentzian holds 1 / (1 + 16) of its peak power
#: density there: common practice, no source).
OVERLAP_WIDTHS = 2.0


def _hidden_under(cands: list[Candidate], modes: list[Mode]) -> list[Mode]:
    """The raw-fit modes of ``modes`` whose hump overlaps one of ``cands``' (within
    ``OVERLAP_WIDTHS`` times the sum of their half-power widths)."""
    return [
        m
        for m in modes
        if m.fit_path == "raw"
        and any(abs(m.f_d_hz - c.f_hz) <= OVERLAP_WIDTHS * (c.width_hz + m.beta_per_s / math.pi) for c in cands)
    ]


def _pair_refit(
    hctx: _HitContext,
    cands: list[Candidate],
    olds: list[Mode],
    known: list[Mode],
    found_round: list[Mode],
    new_modes: list[Mode],
    res_hz: float,
    start: int,
) -> list[Mode]:
    """A broad candidate unveiled by subtracting the broad modes ``olds`` (raw fits, members of
    ``new_modes``) fitted on the record jointly with them, all as targets: the first fit of
    ``olds`` had the unveiled mode in its residual, and the two humps' poles are correlated.
    Returns the fit's modes other than the refits; each of ``olds`` is replaced in ``new_modes``
    and ``known`` (in place) by its refit when the refit lies at it (:func:`_near`) with a
    credible u and an unveiled mode near ``cands`` has a resolved decay, so that the pair is
    reported from one joint model."""
    old_c = _as_candidates(olds, res_hz)
    others = [m for m in known + found_round if all(m is not o for o in olds)]
    got = _measure_raw(hctx, cands + old_c, cands + old_c + _as_candidates(others, res_hz), start)
    refit: dict[int, Mode] = {}
    for i, c in enumerate(old_c):
        near = [g for g in got if _near(g, c) and g.beta_per_s_u and g.f_d_hz_u]
        if near:
            refit[i] = min(near, key=lambda g: abs(g.f_d_hz - c.f_hz))
    fresh = [g for g in got if all(g is not r for r in refit.values())]
    kept = [g for g in fresh if any(_near(g, c, 2.0) for c in cands) and _decay_resolved(g)]
    if kept and len(refit) == len(olds):
        for i, m in enumerate(olds):
            for modes in (new_modes, known):
                j = next(j for j, k in enumerate(modes) if k is m)
                modes[j] = refit[i]
    return fresh


def _round_groups(fresh: list, fs: float, res_hz: float, tones: tuple, known: list[Mode]) -> list[tuple]:
    """The residual round's bands, band fits first: ``(peaks, lo_hz, hi_hz, candidates, raw)``.

    Bands are bounded by the steady tones and the measured modes (:func:`group_bands`); ``raw``
    says the band is too narrow for its candidates or holds a measured mode, so it is fitted on
    the record itself (:func:`_measure_raw`).
    """
    barriers = tones + tuple(m.f_d_hz for m in known)
    sharp, broad = [p for p in fresh if not p.broad], [p for p in fresh if p.broad]
    # the sharp peaks and the smoothed search's broad humps are banded apart: a broad hump needs
    # a band many of its widths wide, and one grouped with a sharp peak took it into its raw fit,
    # whose short window cannot resolve a lightly damped decay (the sharp peak was then lost as
    # decaying less than 6 dB); a sharp peak's band stops short of a hump's centre
    parts = [
        group_bands(sharp, sample_rate=fs, resolution_hz=res_hz, barriers_hz=barriers + tuple(p.f_hz for p in broad)),
        group_bands(broad, sample_rate=fs, resolution_hz=res_hz, barriers_hz=barriers),
    ]
    groups = []
    for g, lo, hi in (grp for part in parts for grp in part):
        gc = [_peak_candidate(p, res_hz) for p in g]
        groups.append((g, lo, hi, gc, _needs_raw_fit(gc, lo, hi) or any(lo < m.f_d_hz < hi for m in known)))
    return sorted(groups, key=lambda r: r[4])


def _peak_candidate(p: Peak, res_hz: float) -> Candidate:
    """A residual peak as a candidate (source ``"residual"``): decay rate ``pi`` times its
    half-power width, at least the resolution ``res_hz`` wide."""
    return Candidate(p.f_hz, math.pi * p.width_hz, max(p.width_hz, res_hz), None, None, "residual", -2, res_hz)


def _fresh_peaks(
    peaks: list[Peak], known: Sequence[Mode], tried: Sequence[tuple[float, float]], res_hz: float
) -> list[Peak]:
    """The peaks of a residual not near a mode measured so far (within twice its half-power
    width, three resolutions or three standard uncertainties) nor near a candidate already tried
    (``(f_hz, width_hz)``, within its width or two resolutions).

    The three uncertainties count only for a peak that could be the mode's remnant: one at most
    ``WIDTH_MISMATCH`` times as wide as the mode's half-power width ``beta / pi`` or the
    resolution. A mode subtracted with a slightly wrong pole leaves a line of its own width
    (Lorentzian, FIELD.md section 1); a far broader hump within a u that the disagreement of
    cross-checks widened (tens of Hz for a lightly damped mode of a crowded band) is another
    mode."""

    def near(p: Peak, m: Mode) -> bool:
        d = abs(p.f_hz - m.f_d_hz)
        if d <= max(2.0 * m.beta_per_s / math.pi, 3.0 * res_hz):
            return True
        remnant = p.width_hz <= WIDTH_MISMATCH * max(m.beta_per_s / math.pi, res_hz)
        return remnant and d <= 3.0 * (m.f_d_hz_u or 0.0)

    fresh = []
    for p in peaks:
        near_mode = any(near(p, m) for m in known)
        near_cand = any(abs(p.f_hz - f) <= max(w, 2.0 * res_hz) for f, w in tried)
        if not (near_mode or near_cand):
            fresh.append(p)
    return fresh


def _fit_deferred(
    hctx: _HitContext,
    start: int,
    deferred: Sequence[Candidate],
    known: list[Mode],
    res_hz: float,
    rejected: list[Rejected],
) -> list[Mode]:
    """The candidates too broad for a band (``deferred`` by the first pass), grouped and fitted
    on the raw record from ``start`` with the ``known`` modes carried or subtracted
    (:func:`_measure_raw`); what gives no resolved new mode is appended to ``rejected``.
    ``res_hz`` is the decay's frequency resolution."""
    ctx = hctx.record
    found: list[Mode] = []
    peaks_d = [Peak(c.f_hz, float("nan"), float("nan"), c.width_hz, broad=True) for c in deferred]
    of_peak = {id(p): c for p, c in zip(peaks_d, deferred)}
    for g, _lo, _hi in group_bands(peaks_d, sample_rate=ctx.fs, resolution_hz=res_hz, barriers_hz=ctx.tones):
        gc = [of_peak[id(p)] for p in g]
        if _too_many(gc, rejected):
            continue
        have = known + found
        try:
            got = _measure_raw(hctx, gc, gc + _as_candidates(have, res_hz), start)
        except FitError as exc:
            rejected.extend(_rejection(c, "fit_failed", str(exc)) for c in gc)
            continue
        got = _resolved_raw(_new_near(got, gc, have, res_hz), rejected, gc)
        got, unmatched = _match_candidates(got, gc, False, why=hctx.drops)
        rejected.extend(unmatched)
        found += got
    return found


def _new_near(got: list[Mode], cands: list[Candidate], known: Sequence[Mode], resolution_hz: float) -> list[Mode]:
    """The modes of a residual fit that are new (not a mode already measured) and lie where one
    of its candidates was (within the larger of the candidate's and the mode's half-power width,
    three of the mode's standard uncertainties and the resolution): a fit that wandered off to
    model something else is not a mode of its own (its candidate is then named as rejected)."""

    def near(m: Mode, f: float, w: float) -> bool:
        return abs(m.f_d_hz - f) <= max(w, m.beta_per_s / math.pi, 3.0 * (m.f_d_hz_u or 0.0), resolution_hz)

    return [
        m
        for m in got
        if not any(abs(m.f_d_hz - k.f_d_hz) <= max(k.beta_per_s / math.pi, 3.0 * resolution_hz) for k in known)
        and any(near(m, c.f_hz, c.width_hz) for c in cands)
    ]


#: A broad hump is a heavily damped mode only if the fitted decay explains its width: the half-power
#: width of a decay is beta / pi (Lorentzian line, FIELD.md section 1); a fit this many times
#: narrower than the hump modelled something else (common practice, no source).
WIDTH_MISMATCH = 4.0


def _resolved_raw(got: list[Mode], rejected: list[Rejected], cands: Sequence[Candidate] = ()) -> list[Mode]:
    """Raw-fit modes of the residual search whose decay is resolved (beta above 3 standard
    uncertainties) and explains the width of the peak it was fitted to (neither ``WIDTH_MISMATCH``
    times narrower nor that many times wider than it or the resolution):
    a broad hump in the residual is a heavily damped mode only then; the others are named
    ``near_noise`` (no decay resolved) or ``unresolved`` (a remnant of a subtracted mode)."""
    out = []
    for m in got:
        if m.fit_path != "raw":
            out.append(m)
            continue
        broad = [c for c in cands if c.source in ("spectrum", "residual") and c.beta_per_s is not None]
        c = min(broad, key=lambda c: abs(c.f_hz - m.f_d_hz), default=None)
        doubt = _raw_doubt(m, c)
        if doubt is None:
            out.append(m)
        else:
            rejected.append(Rejected(m.f_d_hz, m.beta_per_s, None, *doubt))
    return out


def _raw_doubt(m: Mode, c: Candidate | None) -> tuple[str, str] | None:
    """``(reason, detail)`` when the raw-fit mode ``m`` is not a mode of the peak ``c`` it was
    fitted to (see :func:`_resolved_raw`), else ``None``."""
    width = m.beta_per_s / math.pi  # half-power width, Hz
    if not _decay_resolved(m):
        return (
            "near_noise",
            f"fitted decay {m.beta_per_s:.3g} +- {m.beta_per_s_u or float('nan'):.2g} 1/s "
            "is not resolved: noise, not a heavily damped mode",
        )
    if c is not None and WIDTH_MISMATCH * width < c.width_hz:
        return (
            "unresolved",
            f"fitted half-power width {width:.3g} Hz is far narrower than the {c.width_hz:.3g} Hz "
            "hump it was fitted to: a remnant of a subtracted mode, not a heavily damped one",
        )
    if c is not None and width > WIDTH_MISMATCH * max(c.width_hz, c.resolution_hz):
        return (
            "unresolved",
            f"fitted half-power width {width:.3g} Hz is far wider than the {c.width_hz:.3g} Hz "
            "peak it was fitted to: the fit modelled something else (a remnant of the subtracted "
            "modes), not this peak",
        )
    return None


#: Most candidates one raw fit of the residual search takes on (each adds four parameters to the
#: least squares; a row of broad humps side by side is a remnant of the subtraction far more
#: often than that many heavily damped modes: common practice, no source).
MAX_RAW_TARGETS = 4


def _too_many(group: list[Candidate], rejected: list[Rejected]) -> bool:
    """Whether a group is too large for one raw fit; if so its candidates are named ``unresolved``."""
    if len(group) <= MAX_RAW_TARGETS:
        return False
    rejected.extend(
        _rejection(
            c,
            "unresolved",
            f"one of {len(group)} broad humps side by side between "
            f"{group[0].f_hz:.1f} and {group[-1].f_hz:.1f} Hz (a remnant of the "
            "subtracted modes, or more heavily damped modes than one fit can "
            "separate); not fitted",
        )
        for c in group
    )
    return True


def _as_candidates(modes: Sequence[Mode], resolution_hz: float) -> list[Candidate]:
    """Measured modes as candidates, to be fitted jointly (as nuisance modes) with a new one."""
    return [
        Candidate(
            m.f_d_hz,
            m.beta_per_s,
            max(m.beta_per_s / math.pi, resolution_hz),
            m.amplitude,
            None if m.snr_db is None else 10 ** (m.snr_db / 10.0),
            "measured",
            -3,
            resolution_hz,
        )
        for m in modes
    ]


#: A group is fitted on the raw record when a mode's band would reach less than this many
#: half-power widths either side of it (8 widths across: 4.4x the 1.8x that Jacobsen & Rindel 1987
#: give for negligible zero-phase filter bias; more is safer, common practice, no source), e.g.
#: because DC, Nyquist or a neighbour is that close.
RAW_MARGIN_WIDTHS = 4.0
#: The free decay starts at the first sample this many noise standard deviations out (Gaussian
#: noise exceeds 5 sigma in one sample in 6e-7 of the cases [derived]).
START_SIGMAS = 5.0


def _free_decay_start(ctx: _RecordContext, span, clip_end: int | None) -> int:
    """First sample of the free decay: the first sample near the onset that stands
    ``START_SIGMAS`` noise standard deviations away from both a linear and a quadratic trend
    of the samples before it (the smoothed level's onset can precede it by half its
    smoothing), and never inside the clipping."""
    x = ctx.x
    sigma = math.sqrt(max(float(np.sum(ctx.noise_p[1:])) * float(ctx.noise_f[1] - ctx.noise_f[0]), 1e-300))
    lo = max(0, span.onset - max(span.peak - span.onset, 1))
    hi = max(span.peak, span.onset + 1)
    # relative to the trend just before: drift removal over the whole record can leave a local
    # offset, slope and curvature of many sigma before the hit (in a quiet, quantised
    # pre-trigger the noise sigma is far below what drift removal leaves; a strong low mode
    # bends the fitted drift). A sample starts the decay only when it departs from both a
    # straight-line and a quadratic trend of the samples before (a departure that one smooth
    # drift explains is not the decay: a line misses a curvature, whose error is largest at
    # the end of the samples fitted; a quadratic extrapolated far swings away); the scatter
    # about each trend bounds sigma from below
    b0 = max(0, lo - 4 * (hi - lo) - 16)
    before = x[b0:lo]
    loud_at = np.abs(x[lo : hi + 1]) > START_SIGMAS * sigma
    if before.size >= 8:
        loud_at[:] = True
        scale = max(lo - b0, 1)
        u = (np.arange(b0, lo, dtype=np.float64) - lo) / scale
        u_test = np.arange(0, hi - lo + 1, dtype=np.float64) / scale
        for degree in (1, 2):
            coef = np.polyfit(u, before, degree)
            s_k = max(sigma, float(np.std(before - np.polyval(coef, u))))
            loud_at &= np.abs(x[lo : hi + 1] - np.polyval(coef, u_test)) > START_SIGMAS * s_k
    loud = np.flatnonzero(loud_at)
    start = lo + int(loud[0]) if loud.size else span.onset
    return max(start, clip_end or 0)


def _candidates(
    ctx: _RecordContext,
    start: int,
    seg_end: int,
    rejected: list[Rejected],
    *,
    parametric: bool = True,
    broad: bool = False,
    max_peaks: int | None = None,
):
    """Candidates of one decay (``detect.find_candidates``) and their bands (``group_bands``);
    candidates not measured are appended to ``rejected``.

    Returns ``(candidates, groups)``, each group ``(peaks, lo_hz, hi_hz, candidates)``."""
    x, fs = ctx.x, ctx.fs
    decay = x[start:seg_end]
    # ``broad``: also the smoothed search for broad peaks. The default search leaves it to the
    # residual search, once the sharp modes are subtracted (their skirts and the valleys between
    # them make broad humps of the smoothed spectrum)
    spectral = find_peaks(decay, fs, noise_psd=(ctx.noise_f, ctx.noise_p), max_peaks=max_peaks, broad=broad)
    found, below = detect.find_candidates(
        x,
        fs,
        start=start,
        end=seg_end,
        noise_f=ctx.noise_f,
        noise_p=ctx.noise_p,
        spectral=spectral,
        parametric=parametric,
    )
    thr_db = 10.0 * math.log10(detect.snr_threshold(seg_end - start, fs))
    for c in below:
        rejected.append(
            _rejection(
                c,
                "near_noise",
                f"matched-filter SNR {c.snr_db:.1f} dB, below the {thr_db:.1f} dB "
                f"that noise alone exceeds in {detect.P_FALSE:g} of records",
            )
        )
    kept: list[Candidate] = []
    for c in found:
        if c.beta_per_s and c.snr and c.snr > 1.0:
            # time until the remaining matched-filter SNR falls to 1: ln(d) / (2 beta)
            cycles = c.f_hz * math.log(c.snr) / (2.0 * c.beta_per_s)
            if cycles < 1.0:
                rejected.append(
                    _rejection(
                        c, "few_cycles", f"{cycles:.2f} cycles above the noise; an oscillation needs at least one"
                    )
                )
                continue
        kept.append(c)
    peaks = [Peak(c.f_hz, float("nan"), float("nan"), c.width_hz) for c in kept]
    of_peak = {id(p): c for p, c in zip(peaks, kept)}
    groups = group_bands(peaks, sample_rate=fs, resolution_hz=fs / decay.shape[0], barriers_hz=ctx.tones)
    return kept, [(g, lo, hi, [of_peak[id(p)] for p in g]) for g, lo, hi in groups]


def _rejection(c: Candidate, reason: str, detail: str) -> Rejected:
    return Rejected(c.f_hz, c.beta_per_s, c.snr_db, reason, detail)


def _needs_raw_fit(cands: list[Candidate], lo: float, hi: float) -> bool:
    """Whether a band ``lo``-``hi`` Hz is too narrow for one of its candidates (see
    ``RAW_MARGIN_WIDTHS``)."""
    return any(
        c.beta_per_s is not None and min(c.f_hz - lo, hi - c.f_hz) < RAW_MARGIN_WIDTHS * c.width_hz for c in cands
    )


def _raw_refits(hctx: _HitContext, start: int, modes: list[Mode]) -> list[Mode]:
    """``modes`` with each band fit that started too late for its decay refitted on the record.

    A band fit starts once its Gaussian mask has settled after the onset, which costs a factor
    ``exp(beta * delay)`` in standard deviation against a fit from the decay's first sample
    (``delay`` from ``start``, index into the record's samples, to the fit's start;
    ``estimators/pencil.py``, "Choosing the band"). A band narrowed by DC or a neighbour
    settles slowly, and a heavily damped mode in it has lost most of its decay by then. Past a
    factor ``SETTLING_COST`` the mode is fitted on the record from ``start``
    (:func:`_measure_raw`, the other measured modes carried or subtracted), and the raw fit
    replaces the band fit when it lies at the same mode (within half its half-power width or
    three standard uncertainties) and is more precise in beta, and either agrees with the band
    fit within 3 combined standard uncertainties in f_d and beta or the band fit carries
    ``filter_bias`` (a band narrower than the mode, whose decay rate is known to be biased).
    Returns a new list."""
    ctx = hctx.record
    t_start = (start + ctx.i0) / ctx.fs
    res_hz = ctx.fs / max(hctx.seg_end - ctx.i0 - start, 1)
    out = list(modes)
    for i, m in enumerate(modes):
        if m.fit_path != "band" or m.fit_start_s is None or not m.beta_per_s_u or not m.f_d_hz_u:
            continue
        if m.beta_per_s * (m.fit_start_s - t_start) <= math.log(SETTLING_COST):
            continue
        (c,) = _as_candidates([m], res_hz)
        try:
            got = _measure_raw(hctx, [c], [c] + _as_candidates(out[:i] + out[i + 1 :], res_hz), start)
        except FitError:
            continue
        # a raw fit with a zero u (a degenerate covariance) is not credible: never taken
        near = [g for g in got if _near(g, c) and g.beta_per_s_u and g.f_d_hz_u]
        if not near:
            continue
        g = min(near, key=lambda g: abs(g.f_d_hz - m.f_d_hz))
        agree = all(
            abs(getattr(g, q) - getattr(m, q)) <= 3.0 * math.hypot(getattr(g, q + "_u"), getattr(m, q + "_u"))
            for q in ("f_d_hz", "beta_per_s")
        )
        biased = any(w.code == "filter_bias" for w in m.warnings)
        if (g.beta_per_s_u or math.inf) < m.beta_per_s_u and (agree or biased):  # 'or': typed for mypy
            out[i] = g
    return out


#: Largest factor on a band fit's standard uncertainty that its filter's settling may cost before
#: the record itself is fitted instead (common practice, no source).
SETTLING_COST = 2.0


def _near(m: Mode, c: Candidate, k: float = 0.5) -> bool:
    """Whether mode ``m`` lies within ``k`` times the larger half-power width of candidate ``c``
    (or three standard uncertainties of its frequency, or the search's resolution)."""
    tol = max(k * max(c.width_hz, m.beta_per_s / math.pi), 3.0 * (m.f_d_hz_u or 0.0), c.resolution_hz)
    return abs(m.f_d_hz - c.f_hz) <= tol


def _match_candidates(
    modes: list[Mode],
    cands: list[Candidate],
    steady: bool,
    retry: list[Candidate] | None = None,
    why: Mapping[Candidate, tuple[str, str]] | None = None,
):
    """Pair a group's candidates with the modes measured there. A candidate no mode lies near
    (within half the larger half-power width, three standard uncertainties or the search's
    resolution) is a rejection: ``steady_tone`` when the group was a steady tone, the raw fit's
    own ``(reason, detail)`` from ``why`` when it reached the candidate and did not keep it
    (:func:`_measure_raw`: growing, a degenerate covariance, too little decay), ``unresolved``
    (with a warning on the nearest mode naming the pair) when another mode took its place,
    ``fit_failed`` when the fit found nothing. With a ``retry`` list, a candidate whose band fit
    found nothing, or only modes more than two half-power widths away (a joint fit that missed
    it, not a pair it could not separate), is appended there instead, for the residual search
    to look for again."""
    out: list[Rejected] = []
    modes = list(modes)
    for c in cands:
        if any(_near(m, c) for m in modes):
            continue
        if steady:
            out.append(_rejection(c, "steady_tone", "its band held it before the hit"))
        elif retry is not None and not any(_near(m, c, 2.0) for m in modes):
            retry.append(c)
        elif why and c in why:
            out.append(_rejection(c, *why[c]))
        elif modes:
            j = min(range(len(modes)), key=lambda i: abs(modes[i].f_d_hz - c.f_hz))
            m = modes[j]
            out.append(_rejection(c, "unresolved", f"fitted as one mode with the mode at {m.f_d_hz:.2f} Hz"))
            note = Notice(
                "unresolved_modes",
                f"a second mode near {c.f_hz:.2f} Hz may be merged into this one "
                f"(suspected pair {min(c.f_hz, m.f_d_hz):.2f} and "
                f"{max(c.f_hz, m.f_d_hz):.2f} Hz); treat its figures as a blend",
            )
            modes[j] = m.with_updates(warnings=m.warnings + (note,))
        else:
            out.append(_rejection(c, "fit_failed", "no decaying mode was fitted in its band"))
    return modes, out


def _measure_raw(hctx: _HitContext, targets: list[Candidate], cands: list[Candidate], start: int) -> list[Mode]:
    """Fast decays fitted on the unfiltered record from the free decay's start
    (:func:`ringdown.estimators.real.estimate_real`), with every other candidate that holds
    energy in the same window fitted jointly."""
    from .estimators.real import estimate_real

    ctx = hctx.record
    fs, x = ctx.fs, ctx.x
    seg = x[start : hctx.seg_end - ctx.i0]  # hctx.seg_end counts from the recording's first sample
    t_rest = seg.shape[0] / fs

    def beta_of(c: Candidate) -> float:
        return c.beta_per_s if c.beta_per_s is not None else math.pi * c.width_hz

    def unknown(c: Candidate) -> bool:
        """A sharp spectral peak whose width, within ``WIDTH_MISMATCH`` resolutions, is the
        resolution's rather than the decay's, and whose SNR the search did not measure: its decay
        rate is only an upper bound, and a window from it too short (benchmark seed 7, record 37:
        123.7 Hz, Q 302 was given 0.24 s of its 0.78 s decay time)."""
        return c.snr is None and c.width_hz <= WIDTH_MISMATCH * c.resolution_hz

    # the window: until the slowest target's remaining matched-filter SNR falls to 1, from the
    # targets that give one; targets that are all ``unknown`` get the rest of the hit (one that
    # joins a fast decay does not: thinned to MAX_SAMPLES over the whole hit, the fast one's
    # decay falls between the samples kept)
    known_t = [c for c in targets if not unknown(c)]
    if known_t:
        dur = max(math.log(max(c.snr or math.e**2, math.e**2)) / (2.0 * beta_of(c)) for c in known_t)
        dur = min(max(dur, 20.0 / min(c.f_hz for c in targets)), t_rest)
    else:
        dur = t_rest
    thr = detect.snr_threshold(seg.shape[0], fs)
    ranked: list[tuple[float, Candidate]] = []
    for c in cands:
        if c in targets:
            continue
        b = beta_of(c)
        share = -math.expm1(-2 * b * dur) / max(-math.expm1(-2 * b * t_rest), 1e-300)
        if c.snr is None or c.snr * share >= thr:
            ranked.append((c.snr * share if c.snr is not None else float("inf"), c))
    others = [c for _, c in sorted(ranked, key=lambda o: -o[0])][:MAX_RAW_NUISANCE]

    def fit_with(carried: list[Candidate], joint: bool = False) -> Callable[..., list[Estimate]]:
        """The fit over a window (s) with ``carried`` modes' poles free. Every other measured
        mode is subtracted with its pole held (amplitudes fitted over the window at the full
        rate, jointly with the carried poles, and with the targets' too when ``joint``): left
        in, it would alias into the thinned samples of the fit."""
        poles = [(c.f_hz, beta_of(c)) for c in targets + carried]
        fixed = [c for c in cands if c.source == "measured" and c not in targets and c not in carried]
        fit_seg = seg
        if fixed:
            n_win = min(seg.shape[0], max(int(round(dur * fs)), 1))
            fit_seg = np.array(seg, dtype=np.float64)
            fit_seg[:n_win] = _subtract_poles(
                seg[:n_win],
                fs,
                [(c.f_hz, beta_of(c)) for c in fixed],
                keep=[(c.f_hz, beta_of(c)) for c in (targets if joint else []) + carried],
            )

        def fit(duration_s: float, skip_s: float = 0.0, dropped: list | None = None) -> list[Estimate]:
            k = int(round(skip_s * fs))
            return estimate_real(
                fit_seg[k:],
                fs,
                t0_s=(start + k + ctx.i0) / fs,
                poles=poles,
                n_targets=len(targets),
                duration_s=duration_s - k / fs,
                noise_f=ctx.noise_f,
                noise_p=ctx.noise_p,
                dropped=dropped,
            )

        return fit

    fit = fit_with(others)
    slow = [c for c in others if c.source == "measured" and c.f_hz * dur < detect.MIN_CYCLES]
    dropped: list[tuple[int, str]] = []  # (target index, why) of targets the fit reached, not kept
    try:
        ests = fit(dur, dropped=dropped)
    except FitError:
        if not slow:
            raise
        ests = []
    if not ests and slow:
        # no target came out decaying with a credible covariance: a carried mode with fewer than
        # detect.MIN_CYCLES cycles in the window cannot have its pole refined there, and free it
        # wandered (to 0 Hz, or growing) and made the covariance indefinite. Its pole is held
        # (measured over its whole decay) and its amplitude fitted jointly with the targets'
        fit = fit_with([c for c in others if c not in slow], joint=True)
        dropped = []
        ests = fit(dur, dropped=dropped)
    for i, why in dropped:
        hctx.drops[targets[i]] = ("fit_failed", why)
    kept = [i for i in range(len(targets)) if i not in {d[0] for d in dropped}]  # ests' targets, in order
    try:
        half = fit(0.5 * dur)
    except FitError:
        half = []
    # the same window started one amplitude e-fold of the fastest target later: what the model
    # leaves out at the window's start (a faster neighbour not found, the onset) has decayed there
    skip = min(1.0 / max(beta_of(c) for c in targets), 0.5 * dur)
    try:
        late = fit(dur, skip)
    except FitError:
        late = []
    modes = []
    for i, e in zip(kept, ests):
        est = _with_model_error(e, [("first half", half, False), ("later start", late, True)])
        if DB_PER_NEPER * est.beta_per_s * t_rest < 6.0:
            # decays less than 6 dB over the whole hit: a steady tone, as in _is_stationary
            hctx.drops[targets[i]] = (
                "steady_tone",
                f"the raw fit from {(start + ctx.i0) / fs:.4g} s gave {est.f_d_hz:.2f} Hz, beta "
                f"{est.beta_per_s:.3g} 1/s: less than 6 dB of decay over the hit's {t_rest:.3g} s",
            )
            continue
        density = float(detect.noise_density(est.f_d_hz, ctx.noise_f, ctx.noise_p))
        # band noise over the mode's own half-power bandwidth beta / pi (as |z| of a band that wide)
        noise_rms = math.sqrt(max(2.0 * density * est.beta_per_s / math.pi, 1e-300))
        modes.append(_make_raw_mode(est, noise_rms, seg, fs, (start + ctx.i0) / fs))
    return modes


#: Most other modes a raw fit carries along (the strongest in its window).
MAX_RAW_NUISANCE = 3


#: Chi-square quantile, 2 degrees of freedom at 95 % (scipy.stats.chi2.ppf(0.95, 2) = 5.991): the
#: Hausman statistic of (f_d, beta) above which a tested subset's contrast counts as model error
#: (the 5 % level is common practice, no source).
HAUSMAN_CHI2_95 = 5.991


def _with_model_error(est: Estimate, subsets: Sequence[tuple[str, Sequence[Estimate], bool]]) -> Estimate:
    """``est`` with its standard uncertainties widened by the excess spread of the same raw fit
    over subsets of its window: ``subsets`` names each (``"first half"``: the first half of the
    window; ``"later start"``: the window started one amplitude e-fold of the fastest target
    later) with its estimates; from each the estimate nearest in frequency within
    ``max(beta / pi, 3 u(f))`` is taken, if its half-power width is within ``WIDTH_MISMATCH``
    times this one's (else it describes another mode: a neighbour the shorter fit latched onto
    once the target had decayed, not the same mode's model error). The third item of each
    subset says whether its contrast is tested first.

    A subset's data are a subset of the full window's: with a right model and an efficient
    estimator the difference of the two has variance ``u_sub^2 - u^2`` (Hausman 1978 [from
    memory]). A larger difference is model error (a neighbour left out, which the first half
    weighs more; a faster one not found or the onset, which the later start has let decay; a
    decay that is not exponential); its excess ``max(0, d^2 - (u_sub^2 - u^2))`` is added to
    ``u^2``, for f_d and beta each and for each subset, and the estimate carries a
    ``model_error`` warning when that more than doubles a u. The later start loses an e-fold of
    amplitude, so its difference has a variance of several u^2, and its excess added in every
    case widened clean fits twice over (one mode in white noise: u(beta) 2.3x the Cramer-Rao
    bound); a tested subset's excess is added only where the Hausman statistic
    ``d_f^2 / v_f + d_beta^2 / v_beta`` (``v = u_sub^2 - u^2``; f_d and beta of one damped mode
    are nearly uncorrelated) exceeds ``HAUSMAN_CHI2_95``."""
    if est.f_d_hz_u is None or est.beta_per_s_u is None:
        return est
    extra = {"f_d_hz": 0.0, "beta_per_s": 0.0}
    seen: list[str] = []
    for name, sub, tested in subsets:
        near = [
            h
            for h in sub
            if abs(h.f_d_hz - est.f_d_hz) <= max(est.beta_per_s / math.pi, 3.0 * est.f_d_hz_u)
            and est.beta_per_s / WIDTH_MISMATCH <= h.beta_per_s <= WIDTH_MISMATCH * est.beta_per_s
        ]
        if not near:
            continue
        h = min(near, key=lambda h: abs(h.f_d_hz - est.f_d_hz))
        terms = {}
        for q in extra:
            u, uh = getattr(est, q + "_u"), getattr(h, q + "_u") or 0.0
            d = getattr(h, q) - getattr(est, q)
            terms[q] = (d * d, max(uh * uh - u * u, 0.0))
        stat = sum(d2 / v if v > 0.0 else (math.inf if d2 > 0.0 else 0.0) for d2, v in terms.values())
        if tested and stat <= HAUSMAN_CHI2_95:
            continue
        grew = False
        for q, (d2, v) in terms.items():
            add = max(0.0, d2 - v)
            extra[q] += add
            grew = grew or add > 0.0
        if grew:
            seen.append(name)
    new_u = {q: math.sqrt(getattr(est, q + "_u") ** 2 + extra[q]) for q in extra}
    if new_u["f_d_hz"] == est.f_d_hz_u and new_u["beta_per_s"] == est.beta_per_s_u:
        return est
    widened = [
        f"{q} {getattr(est, q + '_u'):.3g} -> {new_u[q]:.3g}"
        for q in ("f_d_hz", "beta_per_s")
        if new_u[q] > 2.0 * getattr(est, q + "_u")
    ]
    notes = est.warnings
    if widened:
        notes = notes + (
            Notice(
                "model_error",
                "the fit over part of its window ("
                + ", ".join(seen)
                + ") differs beyond its noise; u widened ("
                + ", ".join(widened)
                + ")",
            ),
        )
    return replace(
        est,
        f_d_hz_u=new_u["f_d_hz"],
        beta_per_s_u=new_u["beta_per_s"],
        warnings=notes,
    )


def _make_raw_mode(est: Estimate, noise_rms: float, seg: np.ndarray, fs: float, t0_s: float) -> Mode:
    derived = derive(
        est.f_d_hz, est.beta_per_s, f_d_hz_u=est.f_d_hz_u, beta_per_s_u=est.beta_per_s_u, cov_f_beta=est.cov_f_beta
    )
    if est.fit_start_s is None or est.fit_end_s is None or est.amplitude is None:
        raise FitError("the raw fit returned no fit window or amplitude")
    start, end, amplitude = est.fit_start_s, est.fit_end_s, est.amplitude
    cycles = est.f_d_hz * (end - start)
    warnings = list(est.warnings)
    if cycles < 10:
        warnings.append(Notice("few_cycles", f"fit spans {cycles:.1f} cycles; 10 or more are advised"))
    n = min(seg.shape[0], int(round((end - start) * fs)) + 1)
    t = t0_s + np.arange(n) / fs
    trace = ModeTrace(
        t_s=t,
        envelope=np.abs(seg[:n]),
        fit_start_s=start,
        fit_end_s=end,
        noise_floor=noise_rms,
        fit_amplitude=float(amplitude),
        fit_beta_per_s=est.beta_per_s,
        fit_t0_s=start,
    )
    return Mode(
        index=0,
        derived=derived,
        amplitude=est.amplitude,
        snr_db=20 * math.log10(max(amplitude, 1e-300) / noise_rms),
        method=est.method,
        fit_start_s=start,
        fit_end_s=end,
        cycles_fitted=float(cycles),
        n_hits=1,
        band_hz=None,
        warnings=tuple(warnings),
        cross_checks={},
        trace=trace,
        fit_path="raw",
    )


def _window_for(band: Band, hctx: _HitContext, beta_hint: float = 0.0) -> Window:
    """The fit window of one band of the hit ``hctx``: from its onset (``onset_s``, s) plus the
    filter's settling time for a decay of ``beta_hint`` (1/s; and after clipping, after
    ``clip_end``, a sample index), never before the band envelope's maximum within
    ``onset_lag_s`` (s, how much later than the onset the decay may start) plus the settling
    time after the onset, to where the smoothed envelope falls to the options' ``min_snr_db``
    above the band noise (``end_s``) and to the noise itself (``model_end_s``), before the hit's
    ``seg_end`` (a sample index at the record's rate). Raises :class:`FitError` when fewer than
    5 samples remain."""
    onset_s, clip_end, seg_end, lag_s = hctx.onset_s, hctx.clip_end, hctx.seg_end, hctx.onset_lag_s
    fs, min_snr_db = hctx.record.fs, hctx.record.opts.min_snr_db
    env = np.abs(band.z)
    if band.noise_rms is None:
        raise FitError("band noise level unknown")
    # the filter's leftover transient need only fall to a third of the noise relative to the
    # mode's peak (no further: every bit of settling costs decay, common practice, no source)
    i_on = band.index_of(onset_s)
    peak = float(np.max(env[i_on:])) if env[i_on:].size else float(np.max(env))
    level = min(1e-2, max(1e-8, 0.3 * band.noise_rms / max(peak, 1e-300)))
    settle = settling_time_s(band, beta_per_s=beta_hint, level=level)
    start = onset_s + settle
    if clip_end is not None:
        start = max(start, clip_end / fs + settle)
    i0 = band.index_of(start)
    # never before the band envelope's own maximum after the onset: the decay may start up to
    # lag_s after onset_s, and a window started while the band is still quiet ends at once
    # (or, fitted, models the jump with poles of its own)
    i_late = max(i0, band.index_of(start + lag_s)) + 1
    i_pk = i_on + int(np.argmax(env[i_on : max(i_late, i_on + 1)]))
    i0 = max(i0, i_pk)
    i_last = band.index_of(seg_end / fs - settle)
    thr = band.noise_rms * 10 ** (min_snr_db / 20.0)
    k = max(1, int(round(band.sample_rate / band.width_hz)))
    smooth = np.convolve(env, np.ones(k) / k, mode="same")
    below = np.flatnonzero(smooth[i0 : i_last + 1] < thr)
    i1 = i0 + int(below[0]) - 1 if below.size else i_last
    at_noise = np.flatnonzero(smooth[i0 : i_last + 1] < band.noise_rms)
    i_model = i0 + int(at_noise[0]) - 1 if at_noise.size else i_last
    if i1 - i0 < 5:
        snr = 20 * math.log10(max(env[i0], 1e-300) / band.noise_rms)
        raise FitError(
            f"the mode is {snr:.1f} dB above its band noise after the filter settles; "
            f"a fit needs {min_snr_db:g} dB over several samples",
            reason="near_noise",
        )
    return Window(
        start_s=float(band.t_s[i0]),
        end_s=float(band.t_s[i1]),
        onset_s=onset_s,
        model_end_s=float(band.t_s[max(i_model, i1)]),
    )


def _extract(spec: Spectrum, lo: float, hi: float, noise_f, noise_p) -> Band:
    skirt = 0.25 * (hi - lo)
    band = extract_band(spec, lo + skirt, hi - skirt, skirt_hz=skirt, real=True)
    return band.with_noise(detect.band_noise_rms(band, noise_f, noise_p))


def _measure_group(
    hctx: _HitContext, peaks_g: list[Peak], lo: float, hi: float, hit_warnings: list[Notice]
) -> list[Mode]:
    """The modes of one band ``lo``-``hi`` Hz holding the spectral peaks ``peaks_g`` (none when
    the band was given by the user); warnings about the hit are appended to ``hit_warnings``."""
    ctx = hctx.record
    opts, noise_f, noise_p = ctx.opts, ctx.noise_f, ctx.noise_p
    primary = opts.primary
    group_band = _extract(hctx.spec, lo, hi, noise_f, noise_p)
    # first guess of the decay rate from the spectral peaks' half-power width (beta ~ pi width)
    beta_hint = max((math.pi * p.width_hz for p in peaks_g), default=0.0)
    if _steady_group(hctx, group_band, peaks_g, beta_hint, hit_warnings):
        return []
    group_window = _window_for(group_band, hctx, beta_hint)
    subs = _sub_bands(hctx, peaks_g, lo, hi, beta_hint) if len(peaks_g) > 1 else [(group_band, group_window)]
    cross: list[tuple[float, dict[str, Estimate], Band, Window]] = []
    joint: list[Estimate] | None = None  # every mode a multi-mode method found in the group band
    why = ""  # what the primary method said when it found nothing
    for sb, sw in subs:
        found: dict[str, Estimate] = {}
        for name, fn in ESTIMATORS.items():
            if name in _MULTI_MODE and len(peaks_g) > 1:
                continue  # run once on the whole group below
            try:
                ests = fn(sb, sw)
            except FitError as exc:
                why = str(exc) if name == primary else why
                continue
            if ests:
                centre = 0.5 * (sb.f_lo_hz + sb.f_hi_hz)
                found[name] = min(ests, key=lambda e: abs(e.f_d_hz - centre))
                if name == primary and sb is group_band:
                    joint = list(ests)
        cross.append((0.5 * (sb.f_lo_hz + sb.f_hi_hz), found, sb, sw))
    extra: list[Notice] = []
    if primary in _MULTI_MODE:
        if joint is None and len(peaks_g) > 1:
            joint = list(ESTIMATORS[primary](group_band, group_window))
        primaries = [(e, group_band, group_window) for e in joint or ()]
        if not primaries:
            # the parametric fit found nothing usable: report the envelope fit, and say so
            primaries = [(c[1]["envelope"], c[2], c[3]) for c in cross if "envelope" in c[1]]
            extra.append(
                Notice(
                    "fallback_method",
                    f"the {primary} fit found no decaying mode in this band; the envelope fit is reported instead",
                )
            )
    else:
        primaries = [(c[1][primary], c[2], c[3]) for c in cross if primary in c[1]]
        if len(peaks_g) > 1:
            extra.append(
                Notice(
                    "close_modes",
                    f"modes at {', '.join(f'{p.f_hz:.1f}' for p in peaks_g)} Hz are too close "
                    "for band filters to separate; estimates may be biased (method 'auto' fits them jointly)",
                )
            )
    if not primaries:
        raise FitError("no estimator found a decaying mode in the band" + (f" ({why})" if why else ""))
    return _group_modes(hctx, primaries, cross, extra, len(peaks_g) <= 1, hit_warnings)


def _steady_group(
    hctx: _HitContext, group_band: Band, peaks_g: list[Peak], beta_hint: float, hit_warnings: list[Notice]
) -> bool:
    """Whether a group's band held its peaks before the hit (:func:`_steady_before_onset`) and
    none of them rings from an earlier hit: a steady tone, named in ``hit_warnings`` unless the
    recording already named it (a tone of the pre-trigger within two Welch bins)."""
    ctx = hctx.record
    ringing = bool(peaks_g) and all(
        hctx.rings_from_earlier(p.f_hz, p.width_hz) or hctx.was_retapped(p.f_hz) for p in peaks_g
    )
    if not peaks_g or ringing or not _steady_before_onset(group_band, hctx.onset_s, beta_hint):
        return False
    near = 2.0 * (ctx.noise_f[1] - ctx.noise_f[0])  # two Welch bins
    if all(any(abs(p.f_hz - f) <= near for f in ctx.tones) for p in peaks_g):
        return True  # already named at the recording level
    where = ", ".join(f"{p.f_hz:.1f}" for p in peaks_g)
    hit_warnings.append(
        Notice(
            "stationary_tone",
            f"steady tone at {where} Hz was already there before the hit "
            "(mains hum or another running source?); not reported as a mode",
        )
    )
    return True


def _sub_bands(
    hctx: _HitContext, peaks_g: list[Peak], lo: float, hi: float, beta_hint: float
) -> list[tuple[Band, Window]]:
    """Single-mode sub-bands of the group ``lo``-``hi`` Hz, one per peak, split at the
    midpoints, each with its fit window (a sub-band without one is left out)."""
    ctx = hctx.record
    edges = [lo] + [0.5 * (a.f_hz + b.f_hz) for a, b in zip(peaks_g, peaks_g[1:])] + [hi]
    subs = []
    for a, b in zip(edges, edges[1:]):
        sb = _extract(hctx.spec, a, b, ctx.noise_f, ctx.noise_p)
        try:
            window = _window_for(sb, hctx, beta_hint)
        except FitError:
            continue
        subs.append((sb, window))
    return subs


def _group_modes(
    hctx: _HitContext,
    primaries: list[tuple[Estimate, Band, Window]],
    cross: list[tuple[float, dict[str, Estimate], Band, Window]],
    extra: list[Notice],
    single: bool,
    hit_warnings: list[Notice],
) -> list[Mode]:
    """The modes of a group's primary estimates (with the cross-checks of the nearest
    sub-band); steady tones are named in ``hit_warnings`` and left out, components that started
    with the hit but whose decay is unresolved are kept with ``decay_unresolved``; a ``single``
    mode's band is tested for amplitude dependence. An envelope fit standing in for a pencil fit
    that found nothing is left out when its decay is not resolved (:func:`_unresolved_fallback`);
    when that leaves no mode, :class:`FitError` says why (the caller names the candidates)."""
    seg_end = hctx.seg_end
    fs = hctx.record.fs
    modes = []
    unresolved_fits: list[str] = []
    for est, band, window in primaries:
        if not cross:
            others, sb, sw = {}, band, window
        else:
            _, found, sb, sw = min(cross, key=lambda c: abs(c[0] - est.f_d_hz))
            others = {k: v for k, v in found.items() if k != est.method}
        unresolved_decay: list[Notice] = []
        pre_bound = hctx.new_above(est.f_d_hz)
        if not hctx.rings_from_earlier(est.f_d_hz) and _is_stationary(est, sb, sw, seg_end / fs, pre_bound=pre_bound):
            # an envelope fit standing in for a pencil fit that found nothing, with no decay
            # resolved, is no mode even when a later tap changed the band (_unresolved_fallback)
            retapped = hctx.was_retapped(est.f_d_hz) and not _unresolved_fallback(est, extra)
            if retapped:
                # a later tap changed it: a mode (:func:`_retapped`), its decay maybe unresolved
                if not _decay_resolved(est):
                    unresolved_decay.append(_decay_unresolved(est, retapped=True))
            elif not _started_with_hit(est, pre_bound):
                if hctx.steady is not None:
                    hctx.steady.append((est.f_d_hz, est.beta_per_s))
                hit_warnings.append(
                    Notice(
                        "stationary_tone",
                        f"steady tone at {est.f_d_hz:.1f} Hz does not decay (mains "
                        "hum or another running source?); not reported as a mode",
                    )
                )
                continue
            else:
                unresolved_decay.append(_decay_unresolved(est))
        elif _unresolved_fallback(est, extra):
            unresolved_fits.append(
                f"the envelope fit at {est.f_d_hz:.1f} Hz (the pencil found no decaying mode in its "
                f"band) gives beta = {est.beta_per_s:.3g} +- {est.beta_per_s_u or float('nan'):.2g} 1/s: "
                "a decay not resolved from the noise, not a measured mode"
            )
            continue
        mode = _make_mode(est, others, band, window, extra + unresolved_decay)
        if single:
            mode = _amplitude_dependence(mode, sb, sw)
        modes.append(mode)
    if unresolved_fits and not modes:
        raise FitError("; ".join(unresolved_fits))
    return modes


def _unresolved_fallback(est: Estimate, extra: list[Notice]) -> bool:
    """Whether ``est`` is the envelope fit reported in place of a parametric fit that found
    nothing (a ``fallback_method`` notice in ``extra``) and its decay is not resolved (beta
    within 3 standard uncertainties of 0, as ``_resolved_raw`` asks of a raw fit): with no
    parametric fit to confirm it and no decay, nothing shows that the band held a mode (a
    component that does not decay is judged before this, by ``_is_stationary``)."""
    fallback = any(n.code == "fallback_method" for n in extra)
    return fallback and not _decay_resolved(est)


def _decay_resolved(m: Mode | Estimate) -> bool:
    """Whether a fit resolves a decay: beta more than 3 standard uncertainties above 0 (a
    missing u resolves nothing; the 3-sigma rule is common practice, no source)."""
    return m.beta_per_s > 3.0 * (m.beta_per_s_u or math.inf)


def _started_with_hit(est: Estimate, pre_bound: float | None) -> bool:
    """Whether a component too far above what the record held before the hit to have been there
    (amplitude over ``pre_bound``, :meth:`_HitContext.new_above`) started with the hit."""
    return pre_bound is not None and est.amplitude is not None and est.amplitude > pre_bound


def _decay_unresolved(est: Estimate, *, retapped: bool = False) -> Notice:
    """The warning on a mode that started with the hit (or that a later tap changed:
    ``retapped``, :func:`_retapped`) but whose decay the record does not resolve."""
    u = est.beta_per_s_u or 0.0
    f_n = math.hypot(est.f_d_hz, est.beta_per_s / (2.0 * math.pi))
    q_low = math.pi * f_n / max(est.beta_per_s + 2.0 * u, 1e-300)
    why = (
        "a later tap changed its amplitude and phase (a steady tone would not)" if retapped else "started with the hit"
    )
    return Notice(
        "decay_unresolved",
        f"mode at {est.f_d_hz:.6g} Hz {why} but decays too little in the record "
        f"to measure: beta = {est.beta_per_s:.3g} +- {u:.2g} 1/s, Q above about {q_low:.3g} "
        "(beta + 2u); record longer for its damping"
        + ("" if retapped else ". Alone in a hit it is taken for a drive switched on, not a mode"),
    )


#: A component that does not decay, within this many half-power bandwidths of a decaying mode of
#: the same hit and within FORCED_LEVEL_DB of its level at the onset, is the forced response of a
#: drive switched on near that resonance: switched on from rest, the forced response and the
#: resonance's free transient start with comparable amplitudes (they cancel at t = 0), and the
#: transient decays while the drive runs on (common practice, no source).
FORCED_BANDWIDTHS = 3.0
FORCED_LEVEL_DB = 10.0


def _drop_driven(
    modes: list[Mode], onset_s: float, warnings: list[Notice], retapped: Callable[[float], bool] = lambda f: False
) -> list[Mode]:
    """The hit's modes less those whose decay is unresolved and that are a drive switched on
    (alone in the hit, or the forced response next to a resonance's start-up transient: see
    ``FORCED_BANDWIDTHS``); each dropped one is named as a steady tone in ``warnings``. A mode a
    later tap changed (``retapped(f_hz)``, :func:`_retapped`) is no drive: a tap does not change
    a forced response."""

    def unresolved(m: Mode) -> bool:
        return any(w.code == "decay_unresolved" for w in m.warnings)

    def at_onset(m: Mode) -> float:
        fit_start_s = m.fit_start_s if m.fit_start_s is not None else onset_s
        return (m.amplitude or 0.0) * math.exp(min(m.beta_per_s * max(fit_start_s - onset_s, 0.0), 700.0))

    decaying = [m for m in modes if not unresolved(m)]
    out = []
    for m in modes:
        if unresolved(m) and not retapped(m.f_d_hz):
            driven = not decaying or any(
                abs(m.f_d_hz - d.f_d_hz) <= FORCED_BANDWIDTHS * d.beta_per_s / math.pi
                and abs(20.0 * math.log10(max(at_onset(m), 1e-300) / max(at_onset(d), 1e-300))) <= FORCED_LEVEL_DB
                for d in decaying
            )
            if driven:
                warnings.append(
                    Notice(
                        "stationary_tone",
                        f"steady tone at {m.f_d_hz:.1f} Hz does not decay and started "
                        "with the hit (a drive switched on?); not reported as a mode",
                    )
                )
                continue
        out.append(m)
    return out


def _level_before_onset(band: Band, onset_s: float, settle_s: float) -> float | None:
    """Median of ``|z|`` before the hit, clear of the filter's settling on both sides (the
    segment start and the onset); ``None`` with fewer than 3 such samples."""
    t = band.t_s
    before = np.abs(band.z[(t >= band.t0_s + settle_s) & (t <= onset_s - settle_s)])
    return float(np.median(before)) if before.size >= 3 else None


#: A band whose level before the hit is within this many dB of its level after the hit was
#: already ringing: a steady tone, not a mode (common practice, no source).
STEADY_MARGIN_DB = 10.0


def _steady_before_onset(band: Band, onset_s: float, beta_hint: float) -> bool:
    """Whether the band held, before the hit, a level within 10 dB of its peak after the hit:
    then the hit did not start it, and it is a steady tone, not a mode. False when the band
    holds too few samples before the onset to tell."""
    before = _level_before_onset(band, onset_s, settling_time_s(band, beta_per_s=beta_hint, level=1e-2))
    after = np.abs(band.z[band.t_s >= onset_s])
    if before is None or after.size == 0:
        return False
    return bool(before > float(np.max(after)) * 10 ** (-STEADY_MARGIN_DB / 20))


def _is_stationary(
    est: Estimate, band: Band, window: Window, seg_end_s: float, *, pre_bound: float | None = None
) -> bool:
    """Whether a component is a steady tone (hum, a running drive) rather than a mode.

    A component whose decay rate is within 3 standard uncertainties of zero and that decays
    less than 6 dB over the hit is steady, whatever came before: a drive switched on with the
    hit and still running is not a mode. A mode starts with the hit. When the band holds at
    least 3 samples before the onset (clear
    of the filter's settling), a tone is steady if it was already there within 10 dB of its
    level at the window start. Without such samples, it is steady if it decays less than 6 dB
    over the whole hit, or its tail stays within 6 dB of the level at the window start
    (thresholds: common practice, no source). A lightly damped mode in a short record is
    therefore kept (with ``short_decay``) when the record shows it start.

    ``pre_bound`` is the amplitude above which a component at its frequency was not there before
    the hit (:meth:`_HitContext.new_above`; ``None`` when there are too few samples there): a
    component above it it is a mode however little it decays in the record (a very
    lightly damped resonator whose band filter is too narrow to settle in a short pre-trigger)
    when its decay rate is resolved (more than 5 standard uncertainties above zero: common
    practice, no source). A drive switched on with the hit and still running has a decay rate
    consistent with zero and stays a steady tone.
    """
    env = np.abs(band.z)
    i0 = band.index_of(window.start_s)
    span = max(seg_end_s - window.onset_s, 1e-300)
    if (
        est.beta_per_s_u is not None
        and est.beta_per_s <= 3.0 * est.beta_per_s_u
        and DB_PER_NEPER * est.beta_per_s * span < 6.0
    ):
        return True  # no decay resolved: a drive switched on with the hit and still running
    before = _level_before_onset(band, window.onset_s, window.start_s - window.onset_s)
    if before is not None:
        return bool(before > env[i0] * 10 ** (-STEADY_MARGIN_DB / 20))
    if (
        pre_bound is not None
        and est.amplitude is not None
        and est.beta_per_s_u is not None
        and est.amplitude > pre_bound
        and est.beta_per_s > 5.0 * est.beta_per_s_u
    ):
        return False
    if DB_PER_NEPER * est.beta_per_s * span < 6.0:
        return True
    n = env.shape[0]
    tail = env[max(i0 + 1, n - max(n // 5, 1)) :]
    return bool(tail.size and np.median(tail) > env[i0] * 10 ** (-6 / 20))


#: Local decay rates in the two halves of the fit window that differ by more than this ratio ...
AMPLITUDE_RATIO_LIMIT = 1.25
#: ... and by more than this many combined standard uncertainties mark a non-exponential decay.
AMPLITUDE_Z_LIMIT = 3.0


def _amplitude_dependence(mode: Mode, band: Band, window: Window) -> Mode:
    """Test the decay for amplitude-dependent damping and, if found, tabulate it.

    Statistic: the local decay rates ``beta_1``, ``beta_2`` fitted (weighted log-linear, as the
    envelope estimator) to the first and second half of the fit window. The decay is called
    non-exponential when ``max(beta_2/beta_1, beta_1/beta_2) > 1.25`` and
    ``|beta_2 - beta_1| > 3 sqrt(u_1^2 + u_2^2)`` (thresholds: common practice, no source).
    Viscous damping gives equal rates; dry friction raises the rate as the amplitude falls
    (Feldman 2011, ch. 4: instantaneous damping against amplitude). The table has eight
    sliding windows across the fit window, half overlapping.
    """
    from .estimators import envelope

    mid = 0.5 * (window.start_s + window.end_s)
    try:
        a = envelope.estimate(band, Window(window.start_s, mid, window.onset_s))[0]
        b = envelope.estimate(band, Window(mid, window.end_s, window.onset_s))[0]
    except FitError:
        return mode
    ratio = b.beta_per_s / a.beta_per_s
    uc = math.hypot(a.beta_per_s_u or 0.0, b.beta_per_s_u or 0.0)
    if not (
        max(ratio, 1 / ratio) > AMPLITUDE_RATIO_LIMIT
        and uc > 0
        and abs(b.beta_per_s - a.beta_per_s) > AMPLITUDE_Z_LIMIT * uc
    ):
        return mode
    rows = []
    n_win = 8
    length = (window.end_s - window.start_s) * 2 / (n_win + 1)
    for i in range(n_win):
        s0 = window.start_s + i * length / 2
        try:
            e = envelope.estimate(band, Window(s0, s0 + length, window.onset_s))[0]
        except FitError:
            continue
        seg = np.abs(band.z[Window(s0, s0 + length, window.onset_s).indices(band)])
        rows.append(
            {
                "amplitude": float(np.mean(seg)),
                "f_d_hz": e.f_d_hz,
                "beta_per_s": e.beta_per_s,
                "beta_per_s_u": e.beta_per_s_u,
            }
        )
    note = Notice(
        "amplitude_dependent",
        f"decay is not exponential: local decay rate {a.beta_per_s:.4g} 1/s in the first "
        f"half of the fit, {b.beta_per_s:.4g} 1/s in the second (ratio {ratio:.2f}); "
        "damping depends on amplitude (friction?), see damping_vs_amplitude",
    )
    return mode.with_updates(warnings=mode.warnings + (note,), damping_vs_amplitude=tuple(rows))


def _make_mode(est: Estimate, others: dict[str, Estimate], band: Band, window: Window, extra: list[Notice]) -> Mode:
    warnings = list(est.warnings) + list(extra)
    disagree = _disagreements(est, others)
    est = _widened_by_disagreement(est, others)
    derived = derive(
        est.f_d_hz, est.beta_per_s, f_d_hz_u=est.f_d_hz_u, beta_per_s_u=est.beta_per_s_u, cov_f_beta=est.cov_f_beta
    )
    start = est.fit_start_s if est.fit_start_s is not None else window.start_s
    end = est.fit_end_s if est.fit_end_s is not None else window.end_s
    amp = est.amplitude
    snr = None
    if amp is not None and band.noise_rms:
        snr = 20 * math.log10(max(amp, 1e-300) / band.noise_rms)
    cycles = est.f_d_hz * (end - start)
    decay_db = DB_PER_NEPER * est.beta_per_s * (end - start)
    if cycles < 10:
        warnings.append(Notice("few_cycles", f"fit spans {cycles:.1f} cycles; 10 or more are advised"))
    if decay_db < 20:
        warnings.append(Notice("short_decay", f"fit spans {decay_db:.1f} dB of decay; 20 dB or more are advised"))
    # the zero-phase band filter biases decay unless its bandwidth exceeds ~1.8x beta/pi
    # (Jacobsen & Rindel 1987, FIELD notes)
    if band.width_hz < 1.8 * est.beta_per_s / math.pi:
        warnings.append(
            Notice(
                "filter_bias",
                f"band {band.width_hz:.3g} Hz is narrower than 1.8x the mode's half-power "
                f"bandwidth {est.beta_per_s / math.pi:.3g} Hz; the decay rate may be biased",
            )
        )
    warnings.extend(disagree)
    env_est = others.get("envelope") if est.method != "envelope" else est
    trace = _trace(est, band, window, env_est)
    return Mode(
        index=0,
        derived=derived,
        amplitude=amp,
        snr_db=snr,
        method=est.method,
        fit_start_s=start,
        fit_end_s=end,
        cycles_fitted=float(cycles),
        n_hits=1,
        band_hz=(band.f_lo_hz - band.skirt_hz, band.f_hi_hz + band.skirt_hz),
        warnings=tuple(_unique(warnings)),
        cross_checks=dict(others),
        trace=trace,
    )


#: Cross-checks compared with the reported estimate for the ``methods_disagree`` warning.
_AGREEMENT_METHODS = ("pencil", "envelope", "decrement")
#: Relative differences below this are within the band filter's own bias (0.1-0.5 % seen in
#: tests/benchmarks/accuracy.py at high SNR) and are not called a disagreement.
_AGREEMENT_FLOOR = 0.005


def _disagree(est: Estimate, other: Estimate, q: str) -> float | None:
    """``|difference|`` of quantity ``q`` (``"f_d_hz"`` or ``"beta_per_s"``) between two
    estimates when it exceeds 3 combined standard uncertainties and ``_AGREEMENT_FLOOR``, else None."""
    a, b = getattr(est, q), getattr(other, q)
    ua, ub = getattr(est, q + "_u"), getattr(other, q + "_u")
    if ua is None or ub is None:
        return None
    uc = math.hypot(ua, ub)
    d = abs(a - b)
    return d if uc > 0 and d > 3 * uc and d > _AGREEMENT_FLOOR * abs(a) else None


def _widened_by_disagreement(est: Estimate, others: dict[str, Estimate]) -> Estimate:
    """``est`` with each standard uncertainty widened, in quadrature, by half the largest
    difference to a time-domain cross-check that disagrees with it (``_disagree``): two
    estimators of one quantity that differ beyond their noise show a model error of unknown
    sign, and a u that reaches half way covers both at 2 u (common practice, no source)."""
    if est.method not in _AGREEMENT_METHODS:
        return est
    new_u = {}
    for q in ("f_d_hz", "beta_per_s"):
        ds = [d for name, o in others.items() if name in _AGREEMENT_METHODS for d in [_disagree(est, o, q)] if d]
        u = getattr(est, q + "_u")
        new_u[q] = math.hypot(u, 0.5 * max(ds)) if ds and u is not None else u
    if new_u["f_d_hz"] == est.f_d_hz_u and new_u["beta_per_s"] == est.beta_per_s_u:
        return est
    return replace(est, f_d_hz_u=new_u["f_d_hz"], beta_per_s_u=new_u["beta_per_s"])


def _disagreements(est: Estimate, others: dict[str, Estimate]) -> list[Notice]:
    """Time-domain cross-checks (pencil, envelope, decrement) that differ from the reported
    estimate by more than 3 combined standard uncertainties (coverage factor 3: common
    practice, no source) and by more than 0.5 %. The half-power figure is kept in
    ``cross_checks`` but not compared: it is resolution-limited for light damping."""
    out = []
    for name, o in others.items():
        if name not in _AGREEMENT_METHODS or est.method not in _AGREEMENT_METHODS:
            continue
        for q, unit in (("beta_per_s", "1/s"), ("f_d_hz", "Hz")):
            d = _disagree(est, o, q)
            if d is not None:
                a, b = getattr(est, q), getattr(o, q)
                uc = math.hypot(getattr(est, q + "_u"), getattr(o, q + "_u"))
                out.append(
                    Notice(
                        "methods_disagree",
                        f"{name} gives {q} = {b:.6g} {unit}, {est.method} {a:.6g} {unit} "
                        f"(difference {d / uc:.1f} combined standard uncertainties)",
                    )
                )
    return out


def _trace(est: Estimate, band: Band, window: Window, env_est: Estimate | None) -> ModeTrace:
    if est.trace is not None:
        base = est.trace
    else:
        amp = est.amplitude if est.amplitude is not None else float(np.abs(band.z[band.index_of(window.start_s)]))
        base = ModeTrace(
            t_s=band.t_s,
            envelope=np.abs(band.z),
            fit_start_s=window.start_s,
            fit_end_s=window.end_s,
            noise_floor=float(band.noise_rms or 0.0),
            fit_amplitude=float(amp),
            fit_beta_per_s=float(est.beta_per_s),
            fit_t0_s=float(est.fit_start_s or window.start_s),
        )
    try:
        pt, pv = band_peaks(band, window)
    except FitError:
        pt, pv = None, None
    return ModeTrace(
        base.t_s,
        base.envelope,
        base.fit_start_s,
        base.fit_end_s,
        base.noise_floor,
        base.fit_amplitude,
        base.fit_beta_per_s,
        base.fit_t0_s,
        pt,
        pv,
        base.model_envelope,
        base.n_model_modes,
    )


# ----------------------------------------------------------------------------------------------
# combining hits


def _combine_hits(hits: Sequence[Hit]) -> list[Mode]:
    """Match modes across hits by frequency and combine them.

    Modes of different hits are the same mode when their frequencies differ by less than
    ``max(0.5 %, 3 beta / pi)`` of the first one's (common practice, no source). The strongest
    hit's modes start the clusters; each other hit's modes are paired with them by
    :func:`ringdown.base.matching.match_frequencies` (in order, closest first), first within
    0.5 %, then the rest within the wider tolerance, so a cluster never takes two modes of one
    hit; a mode left unpaired starts a cluster of its own. The
    combined frequency and decay rate are inverse-variance weighted means; their uncertainty is
    the internal one scaled by the Birge ratio ``sqrt(chi2 / (n - 1))`` when that exceeds 1,
    which folds the between-hit scatter in (R. T. Birge, Phys. Rev. 40, 207, 1932).
    """
    from ..base.matching import match_frequencies

    ref = max(hits, key=lambda h: h.peak_value)
    clusters: list[list[Mode]] = [[m] for m in ref.modes]
    for h in hits:
        if h is ref:
            continue
        clusters.sort(key=lambda c: c[0].f_d_hz)
        ms = sorted(h.modes, key=lambda m: m.f_d_hz)
        fc = [c[0].f_d_hz for c in clusters]
        # first within 0.5 %, then what is left within the wider tolerance of a broad mode: in
        # one pass, leaving a broad cluster unpaired costs the matcher its wide tolerance, so it
        # took a lightly damped mode of the next hit from the lightly damped cluster beside it
        pairs = match_frequencies(fc, [m.f_d_hz for m in ms], tolerance=0.005)
        took_c, took_m = {i for i, _ in pairs}, {j for _, j in pairs}
        left_c = [i for i in range(len(clusters)) if i not in took_c]
        left_m = [j for j in range(len(ms)) if j not in took_m]
        if left_c and left_m:
            tol = [max(0.005, 3 * clusters[i][0].beta_per_s / (math.pi * fc[i])) for i in left_c]
            more = match_frequencies([fc[i] for i in left_c], [ms[j].f_d_hz for j in left_m], tolerance=tol)
            pairs = pairs + [(left_c[a], left_m[b]) for a, b in more]
        for i, j in pairs:
            clusters[i].append(ms[j])
        paired = {j for _, j in pairs}
        clusters.extend([m] for j, m in enumerate(ms) if j not in paired)
    out = [_combine_modes(c) for c in clusters]
    out.sort(key=lambda m: m.f_d_hz)
    return [m.with_updates(index=i + 1) for i, m in enumerate(out)]


def _weighted(values: np.ndarray, us: np.ndarray) -> tuple[float, float]:
    if np.any(~np.isfinite(us)) or np.any(us <= 0):
        mean = float(np.mean(values))
        u = float(np.std(values, ddof=1) / math.sqrt(len(values))) if len(values) > 1 else float("nan")
        return mean, u
    w = 1.0 / us**2
    mean = float(np.sum(w * values) / np.sum(w))
    u_int = float(1.0 / math.sqrt(np.sum(w)))
    n = len(values)
    if n > 1:
        chi2 = float(np.sum(w * (values - mean) ** 2))
        birge = math.sqrt(chi2 / (n - 1))
        u_int *= max(1.0, birge)
    return mean, u_int


def _combine_modes(ms: list[Mode]) -> Mode:
    if len(ms) == 1:
        return ms[0]
    f = np.array([m.f_d_hz for m in ms])
    b = np.array([m.beta_per_s for m in ms])
    uf = np.array([m.f_d_hz_u if m.f_d_hz_u is not None else np.nan for m in ms])
    ub = np.array([m.beta_per_s_u if m.beta_per_s_u is not None else np.nan for m in ms])
    f_m, f_u = _weighted(f, uf)
    b_m, b_u = _weighted(b, ub)
    strongest = max(ms, key=lambda m: m.amplitude or 0.0)
    derived = derive(
        f_m, b_m, f_d_hz_u=None if not math.isfinite(f_u) else f_u, beta_per_s_u=None if not math.isfinite(b_u) else b_u
    )
    warnings = _unique([w for m in ms for w in m.warnings])
    return strongest.with_updates(derived=derived, n_hits=len(ms), warnings=tuple(warnings))
