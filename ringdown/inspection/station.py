"""The live test station: taps found in an input stream, each analysed, judged, saved and stored.

:class:`Station` takes any block source (:mod:`ringdown.io.blocks`): the sound card through
:class:`ringdown.io.device.DeviceBlocks` (sounddevice, PortAudio; imported only when used), or a
recording replayed at real time or faster (:class:`ringdown.io.blocks.Paced`, ``ringdown listen
--replay``). The block engine (:class:`ringdown.analysis.segmenter.Segmenter`, one tap per segment) cuts the stream after each tap,
when its level is back at the noise, or just before the next tap. For each tap the station

1. takes the next part id (:class:`PartIds`: a pattern with a counter, or a prompt);
2. writes the tap's samples as a WAV into the save folder, named by UTC time and part, and
   analyses that file (so ``ringdown analyze`` of the saved file gives the same result);
3. with limits, checks the part (:func:`ringdown.check.check`); a tap that overlaps lost input
   (an overflow) is an ERROR, never a verdict on damaged samples;
4. with a store, keeps the result in the history with station and operator.

Input overflow: a block PortAudio flags as overflowed, or one the station had no room to queue
(the analysis fell behind), counts as a dropped block; the samples lost are counted into the
stream's time, and the tap whose segment holds the loss is marked (``input_dropped``).
"""

from __future__ import annotations

import datetime as _dt
import os
import re
from collections.abc import Callable, Iterator
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from ..analysis.results import Analysis, Notice
from ..analysis.segmenter import Segment, Segmenter
from ..base.clock import utc_now
from ..base.errors import InputError, ParameterError

__all__ = ["TapResult", "Station", "PartIds"]


class PartIds:
    """Part ids for taps: a pattern with a counter (``"B7-{n:04d}"``), or asked for by ``prompt``.

    ``pattern`` is a Python format string with the field ``n`` (the tap's number, from
    ``start``); a pattern without ``{n}`` gets ``-{n:04d}`` appended so that ids stay unique.
    ``prompt`` (a callable taking a question, returning the answer) is asked instead when given;
    an empty answer takes the pattern's id.
    """

    def __init__(
        self, pattern: str = "part-{n:04d}", *, start: int = 1, prompt: Callable[[str], str] | None = None
    ) -> None:
        if "{n" not in pattern:
            pattern = pattern + "-{n:04d}"
        try:
            pattern.format(n=1)
        except (KeyError, IndexError, ValueError) as exc:
            raise ParameterError(
                f"--part-id {pattern!r} is not a pattern with {{n}} (e.g. 'B7-{{n:04d}}'): {exc}"
            ) from None
        self.pattern = pattern
        self.n = int(start) - 1
        self.prompt = prompt

    def next(self) -> str:
        self.n += 1
        default = self.pattern.format(n=self.n)
        if self.prompt is not None:
            answer = (self.prompt(f"part id for tap {self.n} [{default}]: ") or "").strip()
            return answer or default
        return default


@dataclass(frozen=True, slots=True, eq=False)
class TapResult:
    """One tap at the station.

    Attributes
    ----------
    number : int
        1-based tap number in the session.
    part_id : str
    time_utc : str
        ISO 8601 UTC time of the tap's trigger.
    t_s : float
        Time of the trigger from the session's start, s.
    path : str or None
        The tap's saved WAV, or None.
    analysis : Analysis
        The tap's analysis (``error`` set when nothing could be measured).
    verdict : str or None
        ``"pass"``, ``"fail"`` or ``"error"`` with limits, else None.
    reasons : tuple of Notice
        Why the part failed or could not be judged.
    dropped : int
        Input samples lost inside the tap (0: none).
    stored_id : int or None
        Row id in the history, when stored.
    """

    number: int
    part_id: str
    time_utc: str
    t_s: float
    path: str | None
    analysis: Analysis
    verdict: str | None = None
    reasons: tuple[Notice, ...] = ()
    dropped: int = 0
    stored_id: int | None = None
    check: object = None

    def to_dict(self) -> dict:
        return {
            "tap": self.number,
            "part_id": self.part_id,
            "time_utc": self.time_utc,
            "t_s": self.t_s,
            "path": self.path,
            "verdict": self.verdict,
            "reasons": [r.to_dict() for r in self.reasons],
            "dropped_samples": self.dropped,
            "stored_id": self.stored_id,
            "analysis": self.analysis.to_dict(),
        }


def _stamp(t: _dt.datetime) -> str:
    return t.strftime("%Y%m%dT%H%M%S") + f"{t.microsecond // 1000:03d}Z"


def _safe(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9._-]+", "_", text).strip("._-")[:80] or "part"


class Station:
    """Taps in, results out: see the module docstring.

    Parameters
    ----------
    sample_rate : float, Hz
    options : dict
        Analysis options (those of :func:`ringdown.analyze`).
    limits : Limits or None
        Check each part against these.
    save_dir : path or None
        Write each tap's WAV here (created when missing).
    store : ResultStore or None
        Keep each result in this history.
    station, operator : str or None
        Stored with each result.
    part_ids : PartIds or None
    subtype : str
        WAV subtype of saved taps (``"PCM_24"``: a sound card's float32 samples in full scale).
    full_scale : float or None
        Full scale of the input (1.0 for a sound card), for clipping when not saved.
    started : datetime or None
        UTC time of the stream's first sample (default: now).
    """

    def __init__(
        self,
        sample_rate: float,
        *,
        options: dict | None = None,
        limits=None,
        save_dir=None,
        store=None,
        station: str | None = None,
        operator: str | None = None,
        part_ids: PartIds | None = None,
        subtype: str = "PCM_24",
        full_scale: float | None = 1.0,
        started: _dt.datetime | None = None,
    ) -> None:
        from ..analysis.pipeline import AnalysisOptions

        self.sample_rate = float(sample_rate)
        self.options = dict(options or {})
        if limits is not None:
            # the analysis options the limits were learned with; not their reader options (the
            # station's input is its own) nor a time window (a tap's segment starts before its tap)
            learned = {
                k: v
                for k, v in limits.analysis_options().items()
                if k not in ("channel", "column", "sample_rate", "start_s", "end_s")
            }
            self.options = {**learned, **self.options}
        self.opts = AnalysisOptions.from_kwargs(self.options)
        self.limits = limits
        self.save_dir = None if save_dir is None else Path(save_dir)
        if self.save_dir is not None:
            try:
                self.save_dir.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise ParameterError(
                    f"cannot use {str(self.save_dir)!r} as the save folder: "
                    f"{exc.strerror or exc}; choose a writable folder"
                ) from None
        self.store = store
        self.station, self.operator = station, operator
        self.part_ids = part_ids or PartIds()
        self.subtype = subtype
        self.full_scale = full_scale
        self.started = started or utc_now()
        self.segmenter = Segmenter(
            self.sample_rate, min_hit_snr_db=self.opts.min_hit_snr_db, min_segment=0, one_hit_per_segment=True
        )
        self.taps: list[TapResult] = []

    def warm_up(self) -> None:
        """Run the analysis once on an invented decay (a damped sine at fs/20 in weak noise), so
        that its imports and first calls do not hold up the first tap of a live input."""
        from ..analysis.pipeline import analyze
        from ..base.errors import RingdownError

        fs = self.sample_rate
        n = max(256, int(0.25 * fs))
        t = np.arange(n) / fs
        x = 1e-4 * np.random.default_rng(0).standard_normal(n)
        n0 = n // 8
        x[n0:] += 0.5 * np.exp(-8.0 * fs / 1000.0 * t[: n - n0]) * np.sin(2 * np.pi * fs / 20.0 * t[: n - n0])
        try:
            analyze(x, fs)
        except RingdownError:
            pass

    def run(self, source) -> Iterator[TapResult]:
        """Every tap of ``source`` as it is complete; ends with the source (or Ctrl-C)."""
        for blk in source:
            for seg in self.segmenter.feed(blk):
                yield self._tap(seg)
        for seg in self.segmenter.finish():
            if seg.triggers:
                yield self._tap(seg)

    def _tap(self, seg: Segment) -> TapResult:
        from ..analysis.pipeline import analyze_file, analyze_recording
        from ..analysis.results import lighten
        from ..io.recording import Recording
        from .check import check

        number = len(self.taps) + 1
        part = self.part_ids.next()
        trig = seg.triggers[0] if seg.triggers else seg.start
        t_s = trig / self.sample_rate
        when = self.started + _dt.timedelta(seconds=t_s)
        path = None
        try:
            if self.save_dir is not None:
                path = str(self.save_dir / f"{_stamp(when)}_{_safe(part)}.wav")
                self._save(path, seg.samples)
                analysis = analyze_file(path, **self.options)
            else:
                rec = Recording(seg.samples, self.sample_rate, path=None, full_scale=self.full_scale)
                analysis = analyze_recording(rec, **self.options)
        except Exception as exc:  # any failure is this tap's result; the session goes on
            from ..base.batch import as_ringdown_error

            analysis = Analysis.failed(path, as_ringdown_error(exc), settings=self.opts.to_dict())
        analysis = lighten(analysis)
        dropped = seg.dropped
        if dropped:
            note = Notice(
                "input_dropped",
                f"{dropped} input samples were lost (overflow) during this tap: "
                "its decay has a gap; tap the part again",
            )
            analysis = replace(analysis, warnings=analysis.warnings + (note,))
        verdict: str | None = None
        reasons: tuple[Notice, ...] = ()
        result = None
        if self.limits is not None:
            judged = analysis
            if dropped:
                judged = Analysis.failed(path, InputError(note.message), settings=self.opts.to_dict())
            result = check(judged, self.limits)
            verdict, reasons = result.verdict, tuple(result.reasons)
        elif analysis.error is not None:
            reasons = (analysis.error,)
        stored = None
        if self.store is not None:
            if result is not None:
                stored = self.store.record_check(
                    result, part_id=part, station=self.station, operator=self.operator, force=True
                )
            else:
                stored = self.store.record_analysis(
                    analysis, part_id=part, station=self.station, operator=self.operator
                )
        tap = TapResult(
            number=number,
            part_id=part,
            time_utc=when.isoformat(timespec="milliseconds"),
            t_s=t_s,
            path=path,
            analysis=analysis,
            verdict=verdict,
            reasons=reasons,
            dropped=dropped,
            stored_id=stored,
            check=result,
        )
        self.taps.append(tap)
        return tap

    def _save(self, path: str, samples: np.ndarray) -> None:
        """Write one tap as a WAV; a full disk or an unwritable folder is an InputError."""
        import soundfile as sf

        y = samples if self.subtype.startswith("FLOAT") or self.subtype == "DOUBLE" else np.clip(samples, -1.0, 1.0)
        try:
            sf.write(path, y, int(round(self.sample_rate)), subtype=self.subtype)
        except (OSError, RuntimeError, sf.LibsndfileError) as exc:
            raise InputError(f"cannot save the tap as {path!r}: {exc}") from None

    def summary(self, dropped_blocks: int = 0) -> dict:
        """Counts of the session: taps, verdicts, taps with lost input, blocks dropped."""
        verdicts = [t.verdict for t in self.taps]
        return {
            "taps": len(self.taps),
            "pass": verdicts.count("pass"),
            "fail": verdicts.count("fail"),
            "error": verdicts.count("error"),
            "not_measured": sum(1 for t in self.taps if t.analysis.error is not None),
            "taps_with_lost_input": sum(1 for t in self.taps if t.dropped),
            "dropped_blocks": int(dropped_blocks),
            "saved": sum(1 for t in self.taps if t.path and os.path.exists(t.path)),
            "stored": sum(1 for t in self.taps if t.stored_id is not None),
        }
