"""Checking parts against acceptance limits: PASS, FAIL or ERROR, with every reason in plain words.

Rules (applied by :func:`check`, in this order):

1. A recording that could not be analysed (``Analysis.error``) is an **ERROR**: neither pass nor
   fail. The CLI exits with status 2 when any part is an error (errors win over failures).
2. Measured modes are matched one-to-one to the reference modes by frequency, within the limits'
   relative ``tolerance`` (:func:`ringdown.inspection.limits.match_modes`). A reference mode with no match
   is a failure ("mode 3 missing"). A measured mode that matches nothing and is strong (amplitude
   at least :data:`EXTRA_MODE_LEVEL` of the strongest matched mode) is reported as a note; it does
   not fail the part by itself.
3. Per matched mode: the damped frequency against ``f_hz``, the damping ratio against ``zeta``,
   and (modes 2..) the frequency ratio to mode 1 against ``ratio``. Any value outside is a failure.
4. The drift-free feature vector (ratios and ``log(zeta)``) against the Mahalanobis threshold,
   when the limits have one and every feature was measured.
5. **Uniform-shift rule.** Let ``s_j = f_j / f_ref,j - 1`` be each mode's relative shift. When
   (a) the limits have ratio windows and every ratio passes, (b) the Mahalanobis check (if any)
   passes, (c) no mode is missing, (d) the shifts agree, ``max s_j - min s_j <=
   uniform_shift_tolerance``, and (e) their mean is at most ``max_uniform_shift`` in size, then
   failures of the *absolute frequency windows* are advisory: they are listed as notes, and the
   result says that all modes moved together as a temperature or density change moves them
   (steel about -0.014 %/K, FIELD.md section 4 [from memory]). Damping windows are never excused.
   When (a), (c) and (d) hold but the shift exceeds ``max_uniform_shift``, the result says so as
   a reason (a different material, density or size moves all modes together, too).

A part PASSES when no failure remains.

Caution: the verdict states whether the part rings like the good parts it was learned from. It is
not a certification; on safety-relevant parts follow the applicable standard (e.g. ASTM E3397,
E2001) and your quality procedures, and have a qualified person decide doubtful cases.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

from ..analysis.results import Analysis, Mode, Notice, lighten
from ..base.errors import ParameterError
from ..base.numfmt import fmt_value, fmt_values
from .limits import Limits, ModeLimits, match_modes

__all__ = [
    "EXTRA_MODE_LEVEL",
    "FeatureCheck",
    "CheckResult",
    "check",
    "check_file",
    "iter_check_files",
    "lighten",
    "verdict_kind",
]

#: An unmatched mode whose amplitude is at least this fraction of the strongest matched mode's
#: (-20 dB) is reported as an extra strong mode (our choice).
EXTRA_MODE_LEVEL = 0.1

PASS, FAIL, ERROR = "pass", "fail", "error"
#: Code prefix of a note that excuses a failed window (the part passes on the ratio features).
ADVISORY_PREFIX = "advisory_"


def verdict_kind(verdict: str | None, note_codes: Iterable[str] = ()) -> str:
    """``"pass"``, ``"pass_advisory"`` (a pass with advisory windows), ``"fail"``, ``"error"``
    or ``"analysis"`` (no verdict): how reports and run charts mark a result."""
    if verdict == PASS and any(str(c).startswith(ADVISORY_PREFIX) for c in note_codes):
        return "pass_advisory"
    return verdict if verdict in (PASS, FAIL, ERROR) else "analysis"


@dataclass(frozen=True, slots=True)
class FeatureCheck:
    """One feature of one reference mode against its window.

    ``status`` is ``"pass"``, ``"below"``, ``"above"``, ``"missing"`` (mode not found),
    ``"advisory"`` (outside, excused by the uniform-shift rule) or ``"unchecked"`` (no window).
    """

    mode: int
    feature: str
    value: float | None
    window: tuple[float, float] | None
    status: str

    def to_dict(self) -> dict:
        return {
            "mode": self.mode,
            "feature": self.feature,
            "value": self.value,
            "window": None if self.window is None else list(self.window),
            "status": self.status,
        }


@dataclass(frozen=True, slots=True, eq=False)
class CheckResult:
    """The verdict on one part.

    Attributes
    ----------
    path, sha256 : str or None
        The recording checked.
    verdict : str
        ``"pass"``, ``"fail"`` or ``"error"``.
    reasons : tuple of Notice
        Why it failed (or the error); empty for a pass.
    notes : tuple of Notice
        Remarks that do not change the verdict (advisory windows, extra modes).
    features : tuple of FeatureCheck
    matched : tuple of (int, int)
        (reference mode, measured mode index) pairs, both 1-based.
    mahalanobis, mahalanobis_threshold : float or None
    uniform_shift : float or None
        Mean relative frequency shift of the matched modes from their reference frequencies.
    uniform_shift_spread : float or None
        max - min of the per-mode relative shifts.
    limits_sha256 : str or None
    analysis : Analysis
    """

    path: str | None
    sha256: str | None
    verdict: str
    reasons: tuple[Notice, ...] = ()
    notes: tuple[Notice, ...] = ()
    features: tuple[FeatureCheck, ...] = ()
    matched: tuple[tuple[int, int], ...] = ()
    mahalanobis: float | None = None
    mahalanobis_threshold: float | None = None
    uniform_shift: float | None = None
    uniform_shift_spread: float | None = None
    limits_sha256: str | None = None
    analysis: Analysis | None = None

    @property
    def passed(self) -> bool:
        return self.verdict == PASS

    def to_dict(self) -> dict:
        return {
            "path": self.path,
            "sha256": self.sha256,
            "verdict": self.verdict,
            "reasons": [r.to_dict() for r in self.reasons],
            "notes": [n.to_dict() for n in self.notes],
            "features": [f.to_dict() for f in self.features],
            "matched": [{"reference_mode": r, "mode": m} for r, m in self.matched],
            "mahalanobis": self.mahalanobis,
            "mahalanobis_threshold": self.mahalanobis_threshold,
            "uniform_shift": self.uniform_shift,
            "uniform_shift_spread": self.uniform_shift_spread,
            "limits_sha256": self.limits_sha256,
            "modes": [] if self.analysis is None else [m.to_dict() for m in self.analysis.modes],
            "error": None if self.analysis is None or self.analysis.error is None else self.analysis.error.to_dict(),
        }


def _g(x: float, digits: int = 3) -> str:
    """A number for a message, in the one number format (:func:`ringdown.base.numfmt.fmt_value`)."""
    return fmt_value(x, digits)


def _win(window: tuple[float, float], digits: int = 6) -> str:
    return " to ".join(fmt_values(window, digits))


def _pct(x: float) -> str:
    return f"{abs(x) * 100:.2f} %"


def _status(value: float, window: tuple[float, float] | None) -> str:
    if window is None:
        return "unchecked"
    if value < window[0]:
        return "below"
    if value > window[1]:
        return "above"
    return "pass"


def check(analysis: Analysis, limits: Limits) -> CheckResult:
    """Check one analysed part against acceptance limits.

    Parameters
    ----------
    analysis : Analysis
        The part's analysis (``ringdown.analyze_file``); ``analysis.modes`` are used.
    limits : Limits
        From :func:`ringdown.learn_limits` or :func:`ringdown.read_limits`.

    Returns
    -------
    CheckResult
        Verdict ``"pass"``, ``"fail"`` or ``"error"`` with every reason in plain words. The rules
        are in the module docstring (matching, windows, Mahalanobis, uniform-shift rule).

    Raises
    ------
    ParameterError
        When ``limits`` is not a :class:`~ringdown.inspection.limits.Limits`.
    """
    if not isinstance(limits, Limits):
        raise ParameterError(
            f"limits must be a Limits object (read_limits or learn_limits), got {type(limits).__name__}"
        )
    if analysis.error is not None:
        return CheckResult(
            verdict=ERROR,
            reasons=(Notice(analysis.error.code, f"recording could not be analysed: {analysis.error.message}"),),
            path=analysis.path,
            sha256=analysis.sha256,
            limits_sha256=limits.sha256,
            analysis=analysis,
        )

    modes = list(analysis.modes)
    freqs = [float(m.f_d_hz) for m in modes]
    refs = limits.modes
    pairs = match_modes(freqs, [r.f_ref_hz for r in refs], tolerance=limits.tolerance)
    t = _Tally()
    f1 = freqs[pairs[0]] if 0 in pairs else None
    for j, ref in enumerate(refs):
        if j not in pairs:
            _missing_mode(t, ref, limits.tolerance)
            continue
        m, f = modes[pairs[j]], freqs[pairs[j]]
        t.shifts.append(f / ref.f_ref_hz - 1.0)
        _check_frequency(t, ref, f)
        _check_damping(t, ref, getattr(m, "zeta", None))
        if j > 0:
            _check_ratio(t, ref, f, f1)
    d, thr = _check_mahalanobis(t, limits)
    shift, spread = _check_uniform_shift(t, limits, maha_ok=d is None or thr is None or d <= thr)
    t.reasons.sort(key=lambda r: t.order.get(id(r), (10**6, 0)))
    t.feats.sort(key=lambda fc: (fc.mode, ("f_hz", "zeta", "ratio").index(fc.feature)))
    _note_extra_modes(t, modes, freqs, set(pairs.values()))
    return CheckResult(
        verdict=FAIL if t.reasons else PASS,
        reasons=tuple(t.reasons),
        notes=tuple(t.notes),
        features=tuple(t.feats),
        matched=tuple((refs[j].index, modes[i].index) for j, i in sorted(pairs.items())),
        mahalanobis=d,
        mahalanobis_threshold=thr,
        uniform_shift=shift,
        uniform_shift_spread=spread,
        path=analysis.path,
        sha256=analysis.sha256,
        limits_sha256=limits.sha256,
        analysis=analysis,
    )


@dataclass
class _Tally:
    """What :func:`check` collects while it goes through the reference modes."""

    reasons: list[Notice] = field(default_factory=list)
    notes: list[Notice] = field(default_factory=list)
    feats: list[FeatureCheck] = field(default_factory=list)
    #: frequencies outside their windows, with their reasons: failures, or advisory on a uniform shift
    f_fail: list[tuple[FeatureCheck, Notice]] = field(default_factory=list)
    #: id(notice) -> (mode, feature rank): the reasons are sorted by mode
    order: dict[int, tuple[int, int]] = field(default_factory=dict)
    #: the features of the Mahalanobis check (log zeta per mode, ratio to mode 1)
    values: dict[str, float] = field(default_factory=dict)
    #: each matched mode's relative frequency shift from its reference
    shifts: list[float] = field(default_factory=list)
    ratio_ok: bool = True
    missing: bool = False

    def add(self, mode: int, rank: int, notice: Notice) -> None:
        self.order[id(notice)] = (mode, rank)
        self.reasons.append(notice)


def _missing_mode(t: _Tally, ref: ModeLimits, tolerance: float) -> None:
    t.missing = True
    t.ratio_ok = t.ratio_ok and ref.ratio is None
    t.add(
        ref.index,
        0,
        Notice(
            "mode_missing",
            f"mode {ref.index} missing (no mode within {tolerance * 100:.0f} % of {ref.f_ref_hz:.1f} Hz)",
        ),
    )
    for feat, win in (("f_hz", ref.f_hz), ("zeta", ref.zeta), ("ratio", ref.ratio)):
        if win is not None:
            t.feats.append(FeatureCheck(ref.index, feat, None, win, "missing"))


def _check_frequency(t: _Tally, ref: ModeLimits, f: float) -> None:
    st = _status(f, ref.f_hz)
    fc = FeatureCheck(ref.index, "f_hz", f, ref.f_hz, st)
    if st in ("below", "above") and ref.f_hz is not None:
        t.f_fail.append(
            (fc, Notice(f"f_{st}", f"mode {ref.index} at {_g(f, 6)} Hz is {st} its window {_win(ref.f_hz)} Hz"))
        )
    else:
        t.feats.append(fc)


def _check_damping(t: _Tally, ref: ModeLimits, z: float | None) -> None:
    name = f"mode {ref.index}"
    if z is not None and z > 0:
        t.values[f"log_zeta_{ref.index}"] = math.log(z)
        st = _status(z, ref.zeta)
        t.feats.append(FeatureCheck(ref.index, "zeta", float(z), ref.zeta, st))
        if ref.zeta is None:
            return
        if st == "above":
            t.add(
                ref.index,
                2,
                Notice(
                    "zeta_above",
                    f"damping ratio of {name} is {z / ref.zeta[1]:.1f}x the upper "
                    f"limit ({' against '.join(fmt_values([z, ref.zeta[1]]))})",
                ),
            )
        elif st == "below":
            t.add(
                ref.index,
                2,
                Notice(
                    "zeta_below",
                    f"damping ratio of {name} is {z / ref.zeta[0]:.2f}x the lower "
                    f"limit ({' against '.join(fmt_values([z, ref.zeta[0]]))})",
                ),
            )
    elif ref.zeta is not None:
        t.feats.append(FeatureCheck(ref.index, "zeta", None, ref.zeta, "missing"))
        t.add(ref.index, 2, Notice("zeta_missing", f"damping ratio of {name} could not be measured"))


def _check_ratio(t: _Tally, ref: ModeLimits, f: float, f1: float | None) -> None:
    if f1 is None:
        if ref.ratio is not None:
            t.feats.append(FeatureCheck(ref.index, "ratio", None, ref.ratio, "missing"))
            t.ratio_ok = False
        return
    r = f / f1
    t.values[f"ratio_{ref.index}"] = r
    st = _status(r, ref.ratio)
    t.feats.append(FeatureCheck(ref.index, "ratio", r, ref.ratio, st))
    if st in ("below", "above") and ref.ratio is not None:
        t.ratio_ok = False
        t.add(
            ref.index,
            3,
            Notice(
                f"ratio_{st}",
                f"frequency ratio of mode {ref.index} to mode 1 is {_g(r, 6)}, {st} its window {_win(ref.ratio)}",
            ),
        )


def _check_mahalanobis(t: _Tally, limits: Limits) -> tuple[float | None, float | None]:
    """The multivariate check: (distance, threshold), or (None, None) when it does not apply."""
    mh = limits.mahalanobis
    if mh is None or not all(k in t.values for k in mh.features):
        return None, None
    d = mh.distance([t.values[k] for k in mh.features])
    thr = mh.threshold
    if d > thr:
        t.reasons.append(
            Notice(
                "mahalanobis",
                f"Mahalanobis distance {d:.1f} above {thr:.1f} (the pattern of "
                "frequency ratios and damping differs from the good parts)",
            )
        )
    return d, thr


def _check_uniform_shift(t: _Tally, limits: Limits, *, maha_ok: bool) -> tuple[float | None, float | None]:
    """The uniform-shift rule: frequencies outside their windows are advisory when every mode moved
    by the same fraction and the ratios hold. Returns (mean shift, spread) of the matched modes."""
    if not t.shifts:
        return None, None  # no mode matched: nothing outside a frequency window either
    shift = sum(t.shifts) / len(t.shifts)
    spread = max(t.shifts) - min(t.shifts)
    uniform = (
        limits.has_ratios
        and len(limits.modes) > 1
        and t.ratio_ok
        and not t.missing
        and spread <= limits.uniform_shift_tolerance
    )
    if not t.f_fail:
        return shift, spread
    direction = "below" if shift < 0 else "above"
    if uniform and maha_ok and abs(shift) <= limits.max_uniform_shift:
        for fc, note in t.f_fail:
            t.feats.append(replace(fc, status="advisory"))
            t.notes.append(Notice(ADVISORY_PREFIX + note.code, note.message + " (advisory)"))
        t.notes.insert(
            0,
            Notice(
                "uniform_shift",
                f"all {len(t.shifts)} modes are {_pct(shift)} {direction} their reference frequencies by the same "
                f"fraction (spread {_pct(spread)}), as a temperature or density change moves them; every frequency "
                "ratio is within its window, so the absolute frequency windows are advisory and the part passes on "
                "the ratio features",
            ),
        )
        return shift, spread
    for fc, note in t.f_fail:
        t.feats.append(fc)
        t.add(fc.mode, 1, note)
    if uniform and abs(shift) > limits.max_uniform_shift:
        t.reasons.append(
            Notice(
                "shift_too_large",
                f"all {len(t.shifts)} modes are {_pct(shift)} {direction} their reference frequencies by the same "
                f"fraction, more than the {_pct(limits.max_uniform_shift)} a temperature change may excuse "
                "(max_uniform_shift): different material, density or size",
            )
        )
    return shift, spread


def _note_extra_modes(t: _Tally, modes: list[Mode], freqs: list[float], used: set[int]) -> None:
    """A note for each strong mode that matches no reference mode."""
    amps = [a for a in (modes[i].amplitude for i in used) if a is not None]
    top = max(amps) if amps else None
    for i, m in enumerate(modes):
        if i in used:
            continue
        if top is not None and m.amplitude is not None:
            if m.amplitude >= EXTRA_MODE_LEVEL * top:
                level = 20.0 * math.log10(m.amplitude / top) if m.amplitude > 0 else float("-inf")
                t.notes.append(
                    Notice(
                        "extra_mode",
                        f"extra strong mode at {freqs[i]:.1f} Hz ({level:+.0f} dB from "
                        "the strongest matched mode) matches no reference mode",
                    )
                )
        elif m.snr_db is not None and m.snr_db >= 20.0:
            t.notes.append(
                Notice(
                    "extra_mode",
                    f"extra strong mode at {freqs[i]:.1f} Hz (SNR {m.snr_db:.0f} dB) matches no reference mode",
                )
            )


# --------------------------------------------------------------------------------------------
# Files and batches


def check_file(path: str, limits: Limits, **options: Any) -> CheckResult:
    """Analyse one recording with ``options`` (``ringdown.analyze_file``) and check it.

    Never raises for a bad recording: that part's result is an ERROR. The analysis options
    stored in the limits are used unless ``options`` overrides them.
    """
    from ..analysis.pipeline import analyze_file  # the pipeline; imported late so limits load without it
    from ..base.batch import as_ringdown_error

    opts = {**limits.analysis_options(), **options}
    try:
        analysis = analyze_file(path, **opts)
    except Exception as exc:  # a batch on a line must go on; the part is an ERROR, with the cause
        analysis = Analysis.failed(path, as_ringdown_error(exc), settings=opts)
    return check(lighten(analysis), limits)


class _CheckTask:
    """Picklable ``check_file`` with fixed limits and options, and the ERROR result of a path."""

    @property
    def preload(self) -> tuple[str, ...]:
        """Modules batch workers import before their first file (see ``batch.run_batch``)."""
        from ..analysis.pipeline import WORKER_PRELOAD

        return WORKER_PRELOAD

    def __init__(self, limits: Limits, options: dict) -> None:
        self.limits = limits
        self.options = options

    def __call__(self, path: str) -> CheckResult:
        return check_file(path, self.limits, **self.options)

    def failed(self, path: str, exc: Exception) -> CheckResult:
        opts = {**self.limits.analysis_options(), **self.options}
        return check(Analysis.failed(path, exc, settings=opts), self.limits)


def iter_check_files(
    paths: Sequence[str],
    limits: Limits,
    *,
    jobs: int | None = None,
    options: dict | None = None,
    executor: Any = None,
    on_notice: Callable[[str], None] | None = None,
    client: Any = None,
) -> Iterator[tuple[int, CheckResult]]:
    """Check many recordings, on several processes; yield ``(position, result)`` as each finishes.

    Parameters
    ----------
    paths : sequence of str
        Recordings (already expanded: no folders or patterns).
    limits : Limits
    jobs : int, optional
        Worker processes (default: the number of CPU cores; 1 runs in this process).
    options : dict, optional
        Analysis options overriding the ones stored in the limits.
    executor, on_notice : callable, optional
        See :func:`ringdown.base.batch.run_batch`.
    client : distributed.Client, optional
        Run one task per file on this Dask cluster's workers instead (:mod:`ringdown.base.cluster`;
        ``jobs`` and ``executor`` are then unused).

    Yields
    ------
    (int, CheckResult)
        Position in ``paths`` and the result, in completion order. Any failure on one part (a
        dead worker included, see :mod:`ringdown.base.batch`) is that part's ERROR.
    """
    from ..base.batch import run_batch

    jobs = (os.cpu_count() or 1) if jobs is None else int(jobs)
    if jobs < 1:
        raise ParameterError(f"jobs must be >= 1, got {jobs}")
    task = _CheckTask(limits, dict(options or {}))
    if client is not None:
        from ..base.cluster import iter_results

        yield from iter_results(client, task, list(paths), on_error=task.failed)
        return
    yield from run_batch(task, list(paths), on_error=task.failed, jobs=jobs, executor=executor, on_notice=on_notice)
