"""Checking parts against acceptance limits: PASS, FAIL or ERROR, with every reason in plain words.

Rules (applied by :func:`check`, in this order):

1. A recording that could not be analysed (``Analysis.error``) is an **ERROR**: neither pass nor
   fail. The CLI exits with status 2 when any part is an error (errors win over failures).
2. Measured modes are matched one-to-one to the reference modes by frequency, within the limits'
   relative ``tolerance`` (:func:`ringdown.limits.match_modes`). A reference mode with no match
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
from dataclasses import dataclass, replace
from typing import Iterator, Sequence

from .errors import ParameterError
from .limits import Limits, match_modes
from .numfmt import fmt_value, fmt_values
from .results import Analysis, Notice

__all__ = ["EXTRA_MODE_LEVEL", "FeatureCheck", "CheckResult", "check", "check_file", "iter_check_files",
           "lighten", "verdict_kind"]

#: An unmatched mode whose amplitude is at least this fraction of the strongest matched mode's
#: (-20 dB) is reported as an extra strong mode (our choice).
EXTRA_MODE_LEVEL = 0.1

PASS, FAIL, ERROR = "pass", "fail", "error"
#: Code prefix of a note that excuses a failed window (the part passes on the ratio features).
ADVISORY_PREFIX = "advisory_"


def verdict_kind(verdict: str | None, note_codes=()) -> str:
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
    """A number for a message, in the one number format (:func:`ringdown.numfmt.fmt_value`)."""
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
        From :func:`ringdown.learn_limits` or :func:`ringdown.limits.read_limits`.

    Returns
    -------
    CheckResult
        Verdict ``"pass"``, ``"fail"`` or ``"error"`` with every reason in plain words. The rules
        are in the module docstring (matching, windows, Mahalanobis, uniform-shift rule).

    Raises
    ------
    ParameterError
        When ``limits`` is not a :class:`~ringdown.limits.Limits`.
    """
    if not isinstance(limits, Limits):
        raise ParameterError(f"limits must be a Limits object (read_limits or learn_limits), got {type(limits).__name__}")
    base = dict(path=analysis.path, sha256=analysis.sha256, limits_sha256=limits.sha256, analysis=analysis)
    if analysis.error is not None:
        return CheckResult(verdict=ERROR, reasons=(Notice(analysis.error.code,
                           f"recording could not be analysed: {analysis.error.message}"),), **base)

    modes = list(analysis.modes)
    freqs = [float(m.f_d_hz) for m in modes]
    refs = limits.modes
    pairs = match_modes(freqs, [r.f_ref_hz for r in refs], tolerance=limits.tolerance)

    reasons: list[Notice] = []
    notes: list[Notice] = []
    feats: list[FeatureCheck] = []
    f_fail: list[tuple[FeatureCheck, Notice]] = []
    order: dict[int, tuple[int, int]] = {}  # id(notice) -> (mode, feature rank): reasons sorted by mode

    def add(mode: int, rank: int, notice: Notice) -> None:
        order[id(notice)] = (mode, rank)
        reasons.append(notice)

    ratio_ok = True
    missing = False
    f1 = freqs[pairs[0]] if 0 in pairs else None
    values: dict[str, float] = {}
    shifts: list[float] = []

    for j, ref in enumerate(refs):
        name = f"mode {ref.index}"
        if j not in pairs:
            missing = True
            ratio_ok = ratio_ok and ref.ratio is None
            add(ref.index, 0, Notice("mode_missing", f"{name} missing (no mode within {limits.tolerance * 100:.0f} % "
                                                  f"of {ref.f_ref_hz:.1f} Hz)"))
            for feat, win in (("f_hz", ref.f_hz), ("zeta", ref.zeta), ("ratio", ref.ratio)):
                if win is not None:
                    feats.append(FeatureCheck(ref.index, feat, None, win, "missing"))
            continue
        m = modes[pairs[j]]
        f = freqs[pairs[j]]
        shifts.append(f / ref.f_ref_hz - 1.0)
        # frequency
        st = _status(f, ref.f_hz)
        fc = FeatureCheck(ref.index, "f_hz", f, ref.f_hz, st)
        if st in ("below", "above"):
            lo, hi = ref.f_hz
            f_fail.append((fc, Notice(f"f_{st}", f"{name} at {_g(f, 6)} Hz is {st} its window {_win((lo, hi))} Hz")))
        else:
            feats.append(fc)
        # damping ratio
        z = getattr(m, "zeta", None)
        if z is not None and z > 0:
            values[f"log_zeta_{ref.index}"] = math.log(z)
            st = _status(z, ref.zeta)
            feats.append(FeatureCheck(ref.index, "zeta", float(z), ref.zeta, st))
            if st == "above":
                add(ref.index, 2, Notice("zeta_above", f"damping ratio of {name} is {z / ref.zeta[1]:.1f}x the upper "
                                                    f"limit ({' against '.join(fmt_values([z, ref.zeta[1]]))})"))
            elif st == "below":
                add(ref.index, 2, Notice("zeta_below", f"damping ratio of {name} is {z / ref.zeta[0]:.2f}x the lower "
                                                    f"limit ({' against '.join(fmt_values([z, ref.zeta[0]]))})"))
        elif ref.zeta is not None:
            feats.append(FeatureCheck(ref.index, "zeta", None, ref.zeta, "missing"))
            add(ref.index, 2, Notice("zeta_missing", f"damping ratio of {name} could not be measured"))
        # ratio to mode 1
        if j > 0:
            if f1 is None:
                if ref.ratio is not None:
                    feats.append(FeatureCheck(ref.index, "ratio", None, ref.ratio, "missing"))
                    ratio_ok = False
            else:
                r = f / f1
                values[f"ratio_{ref.index}"] = r
                st = _status(r, ref.ratio)
                feats.append(FeatureCheck(ref.index, "ratio", r, ref.ratio, st))
                if st in ("below", "above"):
                    ratio_ok = False
                    lo, hi = ref.ratio
                    add(ref.index, 3, Notice(f"ratio_{st}", f"frequency ratio of {name} to mode 1 is {_g(r, 6)}, {st} its "
                                                         f"window {_win((lo, hi))}"))

    # Multivariate check.
    d = thr = None
    maha_ok = True
    mh = limits.mahalanobis
    if mh is not None and all(k in values for k in mh.features):
        d = mh.distance([values[k] for k in mh.features])
        thr = mh.threshold
        if d > thr:
            maha_ok = False
            reasons.append(Notice("mahalanobis", f"Mahalanobis distance {d:.1f} above {thr:.1f} (the pattern of "
                                                 "frequency ratios and damping differs from the good parts)"))

    # Uniform-shift rule.
    shift = spread = None
    if shifts:
        shift = sum(shifts) / len(shifts)
        spread = max(shifts) - min(shifts)
    uniform = (limits.has_ratios and len(refs) > 1 and ratio_ok and not missing
               and spread is not None and spread <= limits.uniform_shift_tolerance)
    if f_fail:
        direction = "below" if shift < 0 else "above"
        if uniform and maha_ok and abs(shift) <= limits.max_uniform_shift:
            for fc, note in f_fail:
                feats.append(replace(fc, status="advisory"))
                notes.append(Notice(ADVISORY_PREFIX + note.code, note.message + " (advisory)"))
            notes.insert(0, Notice(
                "uniform_shift",
                f"all {len(shifts)} modes are {_pct(shift)} {direction} their reference frequencies by the same "
                f"fraction (spread {_pct(spread)}), as a temperature or density change moves them; every frequency "
                "ratio is within its window, so the absolute frequency windows are advisory and the part passes on "
                "the ratio features",
            ))
        else:
            for fc, note in f_fail:
                feats.append(fc)
                add(fc.mode, 1, note)
            if uniform and abs(shift) > limits.max_uniform_shift:
                reasons.append(Notice(
                    "shift_too_large",
                    f"all {len(shifts)} modes are {_pct(shift)} {direction} their reference frequencies by the same "
                    f"fraction, more than the {_pct(limits.max_uniform_shift)} a temperature change may excuse "
                    "(max_uniform_shift): different material, density or size",
                ))
    reasons.sort(key=lambda r: order.get(id(r), (10**6, 0)))
    feats.sort(key=lambda fc: (fc.mode, ("f_hz", "zeta", "ratio").index(fc.feature)))

    # Extra strong modes.
    used = set(pairs.values())
    amps = [modes[i].amplitude for i in used if modes[i].amplitude is not None]
    top = max(amps) if amps else None
    for i, m in enumerate(modes):
        if i in used:
            continue
        if top is not None and m.amplitude is not None:
            if m.amplitude >= EXTRA_MODE_LEVEL * top:
                level = 20.0 * math.log10(m.amplitude / top) if m.amplitude > 0 else float("-inf")
                notes.append(Notice("extra_mode", f"extra strong mode at {freqs[i]:.1f} Hz ({level:+.0f} dB from the "
                                                  "strongest matched mode) matches no reference mode"))
        elif m.snr_db is not None and m.snr_db >= 20.0:
            notes.append(Notice("extra_mode", f"extra strong mode at {freqs[i]:.1f} Hz (SNR {m.snr_db:.0f} dB) "
                                              "matches no reference mode"))

    return CheckResult(
        verdict=FAIL if reasons else PASS,
        reasons=tuple(reasons),
        notes=tuple(notes),
        features=tuple(feats),
        matched=tuple((refs[j].index, modes[i].index) for j, i in sorted(pairs.items())),
        mahalanobis=d,
        mahalanobis_threshold=thr,
        uniform_shift=shift,
        uniform_shift_spread=spread,
        **base,
    )


# --------------------------------------------------------------------------------------------
# Files and batches


def lighten(analysis: Analysis) -> Analysis:
    """A copy without arrays (recording, mode traces), cheap to send between processes."""

    def light_mode(m):
        cc = {k: replace(e, trace=None) for k, e in m.cross_checks.items()}
        return replace(m, trace=None, cross_checks=cc)

    hits = tuple(replace(h, modes=tuple(light_mode(m) for m in h.modes)) for h in analysis.hits)
    return replace(analysis, recording=None, modes=tuple(light_mode(m) for m in analysis.modes), hits=hits)


def check_file(path: str, limits: Limits, **options) -> CheckResult:
    """Analyse one recording with ``options`` (``ringdown.analyze_file``) and check it.

    Never raises for a bad recording: that part's result is an ERROR. The analysis options
    stored in the limits are used unless ``options`` overrides them.
    """
    from .batch import as_ringdown_error
    from .pipeline import analyze_file  # the pipeline; imported late so limits load without it

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
        from .pipeline import WORKER_PRELOAD

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
    executor=None,
    on_notice=None,
    client=None,
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
        See :func:`ringdown.batch.run_batch`.
    client : distributed.Client, optional
        Run one task per file on this Dask cluster's workers instead (:mod:`ringdown.cluster`;
        ``jobs`` and ``executor`` are then unused).

    Yields
    ------
    (int, CheckResult)
        Position in ``paths`` and the result, in completion order. Any failure on one part (a
        dead worker included, see :mod:`ringdown.batch`) is that part's ERROR.
    """
    from .batch import run_batch

    jobs = (os.cpu_count() or 1) if jobs is None else int(jobs)
    if jobs < 1:
        raise ParameterError(f"jobs must be >= 1, got {jobs}")
    task = _CheckTask(limits, dict(options or {}))
    if client is not None:
        from .cluster import iter_results

        yield from iter_results(client, task, list(paths), on_error=task.failed)
        return
    yield from run_batch(task, list(paths), on_error=task.failed, jobs=jobs, executor=executor, on_notice=on_notice)
