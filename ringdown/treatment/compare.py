"""Before/after comparison of a damping treatment, mode by mode, with a significance test.

The job: a part is tapped several times, a treatment is applied (viscoelastic pad, constrained
layer, tuned absorber, a different joint), the part is tapped again; per mode, how did frequency
and damping change, and is the change larger than the scatter between repeats?

Steps
-----
1. **Repeats.** Every used hit of every analysed recording is one repeat of its condition
   (``Analysis.hits[i].modes`` where ``hit.used``); a recording with a single hit contributes its
   mode list as one repeat.
2. **Reference modes per condition.** The repeats of one condition are pooled by frequency: each
   repeat's modes are matched to the current reference modes by the monotone assignment below
   (relative tolerance ``cluster_tolerance``, default 2 %, common practice, no source: repeat
   taps of one part scatter far less than that), and unmatched modes start new reference modes.
   One repeat contributes at most one mode to a reference mode.
3. **Before-to-after matching.** Reference modes are paired by frequency proximity with a stated
   relative ``tolerance`` (default 10 %: added mass and stiffness move modes by several percent).
   The assignment is ordered (no two pairs cross) and minimises the summed ``|ln(f_after /
   f_before)|`` plus a penalty ``ln(1 + tolerance)`` per unpaired mode, by dynamic programming (the
   sequence-alignment recursion of Needleman & Wunsch, J. Mol. Biol. 48:443-453, 1970, with
   log-frequency distance as the cost). A mode with no partner inside the tolerance is reported
   unmatched rather than forced onto a neighbour.
4. **Statistics per matched mode.** Each condition's value of every quantity is the mean over
   its repeats with the standard uncertainty of the mean (sample standard deviation / sqrt(n)),
   or the propagated uncertainty of the single repeat when there is only one. The damping change
   is tested on **log(zeta)** (the damping ratio is dimensionless and its scatter is roughly
   proportional to its size, so a log scale makes the two spreads comparable and turns the
   ratio into a difference); the reported ratio ``exp(mean ln zeta_after - mean ln zeta_before)``
   is the ratio of geometric means, and the loss factor changes by the same ratio
   (eta = 2 zeta), Q by its inverse. The test used is recorded in ``test``:

   - ``"welch_t"``: each side has >= 2 repeats. Welch's unequal-variance t-test
     (``scipy.stats.ttest_ind(..., equal_var=False)``) for the p-value, and a Student-t interval
     with the Welch-Satterthwaite degrees of freedom (Welch, Biometrika 34:28-35, 1947;
     Satterthwaite, Biometrics Bull. 2:110-114, 1946).
   - ``"t_effective_dof"``: one side has a single repeat. Its propagated standard uncertainty is a
     type B component with infinite degrees of freedom, the other side's standard error of the
     mean has n - 1; the interval uses the Welch-Satterthwaite effective degrees of freedom
     (JCGM 100:2008, G.4.1). This is more cautious than a z interval when the repeated side has
     only a few repeats.
   - ``"z"``: both sides have a single repeat; a normal (z) interval from the propagated
     uncertainties (JCGM 100:2008, G.6.6 for the coverage factor).
   - ``"none"``: no uncertainty is available; the verdict is ``"not tested"``.

   The verdict is ``"increased"`` or ``"decreased"`` when the two-sided interval at
   ``confidence`` excludes no change, otherwise ``"no significant change"``. The frequency shift
   of ``f_d`` is tested the same way on a linear scale (Hz).

Each mode is tested on its own at the stated confidence: with several modes, the chance that at
least one unchanged mode is declared changed is larger than 1 - confidence.

Cautions: a comparison only means something when the part is supported, excited and measured the
same way before and after (same support points, sensor position and mass, temperature). A
damping change measured here says nothing about the safety of a loaded structure; follow local
codes and licensed practice for any pass/fail decision on a safety part.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from typing import Any

import numpy as np

from ..analysis.results import Analysis, Notice
from ..base.errors import InputError, ParameterError
from ..base.matching import match_frequencies
from .results import (
    CARRIED_WARNING_CODES,
    MIN_REPEATS,
    QUANTITIES,
    VERDICT_DECREASED,
    VERDICT_INCREASED,
    VERDICT_NO_CHANGE,
    VERDICT_NOT_TESTED,
    Comparison,
    ComparisonInput,
    ConditionMode,
    DampingChange,
    FrequencyShift,
    ModeComparison,
)
from .stats import _condition_mode, _f_d_sample, _log_zeta_sample, _Member, _pool, _two_sample, _verdict

__all__ = [
    "CARRIED_WARNING_CODES",
    "Comparison",
    "ComparisonInput",
    "ConditionMode",
    "DampingChange",
    "FrequencyShift",
    "ModeComparison",
    "compare",
    "comparison_rows",
    "match_frequencies",
    "MIN_REPEATS",
    "QUANTITIES",
    "VERDICT_DECREASED",
    "VERDICT_INCREASED",
    "VERDICT_NO_CHANGE",
    "VERDICT_NOT_TESTED",
]


# --------------------------------------------------------------------------------------------
# Inputs
# --------------------------------------------------------------------------------------------


def _as_analyses(items, side: str, analysis_options: dict) -> list[Analysis]:
    if isinstance(items, (Analysis, str, os.PathLike)):
        items = [items]
    try:
        items = list(items)
    except TypeError:
        raise ParameterError(
            f"{side} must be a sequence of Analysis objects or file paths; got {type(items).__name__}"
        ) from None
    if not items:
        raise ParameterError(f"{side} is empty; give at least one recording or Analysis per condition")
    paths = [(k, os.fspath(it)) for k, it in enumerate(items) if isinstance(it, (str, os.PathLike))]
    for k, it in enumerate(items):
        if not isinstance(it, (Analysis, str, os.PathLike)):
            raise ParameterError(f"{side}[{k}] is a {type(it).__name__}; give an Analysis or a file path")
    out: list[Any] = list(items)
    if paths:
        from ..analysis.pipeline import analyze_many  # imported here: the pipeline is only needed for paths

        analysed = analyze_many([p for _, p in paths], **analysis_options)
        for (k, _), a in zip(paths, analysed):
            out[k] = a
    return out


def _repeats_of(analysis: Analysis, label: str, side: str, first_repeat: int) -> list[list[_Member]]:
    """Each repeat (used hit) of one analysis as a list of members."""
    used = [(k, h) for k, h in enumerate(analysis.hits) if h.used and h.modes]
    groups: list[tuple[str, tuple, tuple[str, ...]]] = []
    if len(used) >= 2:
        for k, h in used:
            groups.append((f"{label}#{k + 1}", h.modes, tuple(w.code for w in h.warnings)))
    elif analysis.modes:
        hit_codes: tuple[str, ...] = ()
        k = 0
        if used:
            k = used[0][0]
            hit_codes = tuple(w.code for w in used[0][1].warnings)
        groups.append((f"{label}#{k + 1}", analysis.modes, hit_codes))
    elif used:
        k, h = used[0]
        groups.append((f"{label}#{k + 1}", h.modes, tuple(w.code for w in h.warnings)))
    out = []
    for r, (source, modes, hit_codes) in enumerate(groups):
        out.append(
            [
                _Member(
                    mode=m, source=source, repeat=first_repeat + r, codes=tuple(set(m.warning_codes) | set(hit_codes))
                )
                for m in modes
            ]
        )
    return out


def _changes(before: ConditionMode, after: ConditionMode) -> dict:
    out = {}
    for q in QUANTITIES:
        b, a = before.values[q], after.values[q]
        out[q] = {"before": b, "after": a, "change": a - b, "ratio": a / b if b != 0 else None}
    return out


def _finite_or_none(x):
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


# --------------------------------------------------------------------------------------------
# Public entry point
# --------------------------------------------------------------------------------------------


def compare(
    before: Sequence[Analysis | str | os.PathLike],
    after: Sequence[Analysis | str | os.PathLike],
    *,
    tolerance: float = 0.1,
    confidence: float = 0.95,
    cluster_tolerance: float = 0.02,
    **analysis_options: Any,
) -> Comparison:
    """Compare each mode's frequency and damping before and after a treatment.

    Parameters
    ----------
    before, after : sequence of Analysis or path-like, or one of them
        Each side's recordings. Paths are analysed with
        ``ringdown.analyze_many(paths, **analysis_options)``. Every used hit of every recording
        is one repeat; a recording with a single hit gives its mode list as one repeat.
    tolerance : float, 0 < tolerance < 1, default 0.1
        Relative frequency tolerance for pairing a before mode with an after mode (0.1 = the
        higher frequency within 10 % of the lower). Default 10 %: a treatment adds mass and
        stiffness, which moves modes by several percent (common practice, no source).
    confidence : float, 0 < confidence < 1, default 0.95
        Two-sided confidence level of the intervals and verdicts.
    cluster_tolerance : float, 0 < cluster_tolerance <= tolerance, default 0.02
        Relative tolerance for pooling repeats of one condition into reference modes.
    **analysis_options
        Passed to ``analyze_many`` for paths (``method``, ``max_modes``, ``channel`` ...).

    Returns
    -------
    Comparison

    Raises
    ------
    ParameterError
        For an option out of range, or an input that is neither an Analysis nor a path.
    InputError
        When one side has no repeat with modes at all (every recording failed or held none).

    Notes
    -----
    See the module docstring for the pooling, matching and tests. Damping is tested on ln(zeta).

    Examples
    --------
    >>> c = ringdown.compare(["bare_1.wav", "bare_2.wav", "bare_3.wav"],
    ...                      ["pad_1.wav", "pad_2.wav", "pad_3.wav"])   # doctest: +SKIP
    >>> [(m.before.f_d_hz, m.damping.ratio, m.verdict) for m in c.modes]  # doctest: +SKIP
    """
    _check_compare_options(tolerance, confidence, cluster_tolerance)
    sides = {}
    inputs: list[ComparisonInput] = []
    notices: list[Notice] = []
    for side, items in (("before", before), ("after", after)):
        sides[side] = _one_side(side, items, analysis_options, inputs, notices)
    _note_differences(sides, notices)

    pooled = {}
    for side, (_, repeats) in sides.items():
        clusters = _pool(repeats, cluster_tolerance)
        pooled[side] = [(c, _condition_mode(side, c, len(repeats), confidence)) for c in clusters]

    modes, unmatched_b, unmatched_a = _pair_modes(pooled, tolerance, confidence, notices)
    settings = _compare_settings(tolerance, confidence, cluster_tolerance, analysis_options)
    return Comparison(
        modes=tuple(modes),
        unmatched_before=unmatched_b,
        unmatched_after=unmatched_a,
        inputs=tuple(inputs),
        notices=tuple(notices),
        settings=settings,
        n_repeats_before=len(sides["before"][1]),
        n_repeats_after=len(sides["after"][1]),
        before_analyses=tuple(sides["before"][0]),
        after_analyses=tuple(sides["after"][0]),
    )


def _pair_modes(
    pooled: dict, tolerance: float, confidence: float, notices: list[Notice]
) -> tuple[list[ModeComparison], tuple[ConditionMode, ...], tuple[ConditionMode, ...]]:
    """Pair the pooled modes of both sides by frequency (``tolerance``, relative) and compare each
    pair; (comparisons, before only, after only), a notice appended when some have no partner."""
    f_b = [cm.values["f_d_hz"] for _, cm in pooled["before"]]
    f_a = [cm.values["f_d_hz"] for _, cm in pooled["after"]]
    pairs = match_frequencies(f_b, f_a, tolerance=tolerance)
    modes = [
        _mode_comparison(idx, pooled["before"][i], pooled["after"][j], confidence)
        for idx, (i, j) in enumerate(pairs, start=1)
    ]

    paired_b = {i for i, _ in pairs}
    paired_a = {j for _, j in pairs}
    unmatched_b = tuple(cm for k, (_, cm) in enumerate(pooled["before"]) if k not in paired_b)
    unmatched_a = tuple(cm for k, (_, cm) in enumerate(pooled["after"]) if k not in paired_a)
    if unmatched_b or unmatched_a:
        fmt = lambda ms: ", ".join(f"{cm.values['f_d_hz']:.1f} Hz" for cm in ms) or "none"  # noqa: E731
        notices.append(
            Notice(
                "unmatched_modes",
                f"modes with no partner within {100 * tolerance:g} %: before {fmt(unmatched_b)}; "
                f"after {fmt(unmatched_a)}",
            )
        )
    return modes, unmatched_b, unmatched_a


def _compare_settings(tolerance: float, confidence: float, cluster_tolerance: float, analysis_options: dict) -> dict:
    """The comparison's settings as stored in its JSON."""
    return {
        "tolerance": float(tolerance),
        "cluster_tolerance": float(cluster_tolerance),
        "confidence": float(confidence),
        "damping_scale": "log_zeta",
        "analysis_options": {k: _jsonable(v) for k, v in analysis_options.items()},
    }


def _check_compare_options(tolerance: float, confidence: float, cluster_tolerance: float) -> None:
    for name, v, lo, hi in (
        ("tolerance", tolerance, 0.0, 1.0),
        ("confidence", confidence, 0.0, 1.0),
        ("cluster_tolerance", cluster_tolerance, 0.0, 1.0),
    ):
        ok = isinstance(v, (int, float, np.floating)) and math.isfinite(v) and lo < v < hi
        if not ok:
            raise ParameterError(f"{name} must lie in ({lo:g}, {hi:g}); got {v!r}")
    if cluster_tolerance > tolerance:
        raise ParameterError(
            f"cluster_tolerance ({cluster_tolerance:g}) must not exceed tolerance ({tolerance:g}); "
            "lower cluster_tolerance or raise tolerance"
        )


def _one_side(
    side: str, items: Sequence[Any], analysis_options: dict, inputs: list[ComparisonInput], notices: list[Notice]
) -> tuple[list[Analysis], list[list[_Member]]]:
    """The analyses of one condition and their repeats (one per used hit); appends each input's
    record to ``inputs`` and the side's notices to ``notices``."""
    analyses = _as_analyses(items, side, analysis_options)
    repeats: list[list[_Member]] = []
    for k, a in enumerate(analyses):
        label = a.path if a.path is not None else f"{side}[{k}]"
        if a.error is not None:
            inputs.append(ComparisonInput(side, a.path, a.channel, a.sample_rate_hz, 0, a.error))
            notices.append(Notice("input_failed", f"{side}: {label} could not be analysed: {a.error.message}"))
            continue
        reps = _repeats_of(a, label, side, len(repeats))
        repeats.extend(reps)
        inputs.append(ComparisonInput(side, a.path, a.channel, a.sample_rate_hz, len(reps)))
    if not repeats:
        raise InputError(
            f"{side}: none of the {len(analyses)} recording(s) gave a mode to compare; "
            "check the files (see each one with 'ringdown analyze') or lower min_snr_db"
        )
    if len(repeats) < MIN_REPEATS:
        notices.append(
            Notice(
                "few_repeats",
                f"{side}: only {len(repeats)} repeat(s); at least {MIN_REPEATS} are needed for a "
                "useful scatter estimate, so intervals are wide or rest on propagated uncertainties",
            )
        )
    return analyses, repeats


def _note_differences(sides: dict, notices: list[Notice]) -> None:
    """Sample rates and channels may differ between the sides; that is fine but worth noting."""
    for attr, code, what in (
        ("sample_rate_hz", "sample_rate_differs", "sample rate"),
        ("channel", "channel_differs", "channel"),
    ):
        vals = {s: sorted({str(getattr(a, attr)) for a in sides[s][0] if a.error is None}) for s in sides}
        if vals["before"] != vals["after"]:
            notices.append(
                Notice(
                    code,
                    f"{what} differs between conditions (before: {', '.join(vals['before'])}; "
                    f"after: {', '.join(vals['after'])}); the comparison is still valid if the same "
                    "sensor position and a band below both Nyquist limits were used",
                )
            )


def _mode_comparison(
    idx: int, before: tuple[list[_Member], ConditionMode], after: tuple[list[_Member], ConditionMode], confidence: float
) -> ModeComparison:
    """One paired mode: its damping change (on ln zeta), its frequency shift and its warnings."""
    mb, cb = before
    ma, ca = after
    d, se, dof, lo, hi, p, test = _two_sample(_log_zeta_sample(mb), _log_zeta_sample(ma), confidence)
    damping = DampingChange(
        scale="log_zeta",
        ratio=float(math.exp(d)),
        ratio_low=None if lo is None else float(math.exp(lo)),
        ratio_high=None if hi is None else float(math.exp(hi)),
        log_ratio=float(d),
        log_ratio_u=_finite_or_none(se),
        dof=_finite_or_none(dof),
        p_value=_finite_or_none(p),
        test=test,
        confidence=float(confidence),
        verdict=_verdict(lo, hi),
    )
    d, se, dof, lo, hi, p, test = _two_sample(_f_d_sample(mb), _f_d_sample(ma), confidence)
    freq = FrequencyShift(
        shift_hz=float(d),
        shift_hz_u=_finite_or_none(se),
        low_hz=_finite_or_none(lo),
        high_hz=_finite_or_none(hi),
        relative=float(d / cb.values["f_d_hz"]),
        dof=_finite_or_none(dof),
        p_value=_finite_or_none(p),
        test=test,
        confidence=float(confidence),
        verdict=_verdict(lo, hi),
    )
    warnings: list[Notice] = []
    for cm in (cb, ca):
        if cm.n_repeats < MIN_REPEATS:
            warnings.append(
                Notice(
                    "few_repeats",
                    f"{cm.side}: this mode was measured in {cm.n_repeats} repeat(s) (fewer than {MIN_REPEATS})",
                )
            )
        if 2 * cm.n_repeats < cm.n_repeats_side:
            warnings.append(
                Notice(
                    "mode_sporadic",
                    f"{cm.side}: this mode was found in only {cm.n_repeats} of {cm.n_repeats_side} repeats",
                )
            )
    warnings.extend(cb.warnings)
    warnings.extend(ca.warnings)
    if damping.test == "none":
        warnings.append(Notice("not_tested", "no uncertainty available for the damping of this mode; no verdict"))
    return ModeComparison(
        index=idx,
        before=cb,
        after=ca,
        changes=_changes(cb, ca),
        damping=damping,
        frequency=freq,
        warnings=tuple(warnings),
    )


def _jsonable(v):
    if v is None or isinstance(v, (bool, int, float, str)):
        return v
    if isinstance(v, (list, tuple)):
        return [_jsonable(x) for x in v]
    if isinstance(v, dict):
        return {str(k): _jsonable(x) for k, x in v.items()}
    return str(v)


def comparison_rows(comparison: Comparison) -> list[dict]:
    """Flat rows of a comparison, one per mode (matched, then before only, then after only).

    Every row has the same keys (for a CSV file): ``status`` (``"matched"``, ``"before_only"``,
    ``"after_only"``), ``index``, then per quantity in :data:`QUANTITIES` ``before_<q>``,
    ``before_<q>_u``, ``after_<q>``, ``after_<q>_u``, then ``n_repeats_before/after``, the
    frequency shift, the damping ratio with its interval, test and verdict, and the warning codes
    joined by ``;``. Missing values are ``None``.
    """

    def side(prefix, cm):
        d = {}
        for q in QUANTITIES:
            d[f"{prefix}_{q}"] = None if cm is None else cm.values[q]
            d[f"{prefix}_{q}_u"] = None if cm is None else cm.uncertainties[q]
        return d

    def row(status, index, b, a, m):
        r: dict[str, Any] = {"status": status, "index": index}
        r.update(side("before", b))
        r.update(side("after", a))
        r["n_repeats_before"] = None if b is None else b.n_repeats
        r["n_repeats_after"] = None if a is None else a.n_repeats
        f = None if m is None else m.frequency
        d = None if m is None else m.damping
        r.update(
            shift_hz=None if f is None else f.shift_hz,
            shift_low_hz=None if f is None else f.low_hz,
            shift_high_hz=None if f is None else f.high_hz,
            shift_relative=None if f is None else f.relative,
            shift_verdict=None if f is None else f.verdict,
            damping_ratio=None if d is None else d.ratio,
            damping_ratio_low=None if d is None else d.ratio_low,
            damping_ratio_high=None if d is None else d.ratio_high,
            p_value=None if d is None else d.p_value,
            test=None if d is None else d.test,
            dof=None if d is None else d.dof,
            confidence=comparison.settings.get("confidence"),
            verdict=None if d is None else d.verdict,
        )
        codes = [] if m is None else [w.code for w in m.warnings]
        for cm in (b, a):
            if m is None and cm is not None:
                codes.extend(w.code for w in cm.warnings)
        r["warnings"] = ";".join(dict.fromkeys(codes))
        return r

    rows = [row("matched", m.index, m.before, m.after, m) for m in comparison.modes]
    rows += [row("before_only", None, cm, None, None) for cm in comparison.unmatched_before]
    rows += [row("after_only", None, None, cm, None) for cm in comparison.unmatched_after]
    return rows
