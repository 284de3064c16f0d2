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
import statistics
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from .._version import __version__
from ..analysis.results import Analysis, Mode, Notice
from ..base.errors import InputError, ParameterError
from ..base.matching import match_frequencies
from ..base.readthrough import ReadThrough

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
]

#: Mode (and hit) warning codes that are carried into a compared mode's warnings.
CARRIED_WARNING_CODES = ("clipped", "amplitude_dependent", "stationary_tone")

#: Quantities summarised per condition (mean and standard uncertainty), in report order.
QUANTITIES = (
    "f_d_hz", "f_n_hz", "beta_per_s", "zeta", "q", "loss_factor",
    "log_decrement", "decay_db_per_s", "t60_s",
)  # fmt: skip

#: Below this many repeats on a side, a notice ``few_repeats`` is given (common practice, no
#: source: with 2 repeats the Welch interval rests on one degree of freedom per side).
MIN_REPEATS = 3

VERDICT_INCREASED = "increased"
VERDICT_DECREASED = "decreased"
VERDICT_NO_CHANGE = "no significant change"
VERDICT_NOT_TESTED = "not tested"


# --------------------------------------------------------------------------------------------
# Result types
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class ComparisonInput:
    """One recording given to a comparison and what it contributed.

    Attributes
    ----------
    side : {"before", "after"}
    path : str or None
        Source file (``None`` for an analysis of an array).
    channel : str or None
    sample_rate_hz : float or None
    n_repeats : int
        Number of repeats (used hits with modes) taken from this recording.
    error : Notice or None
        Why the recording could not be analysed; ``None`` when it was.
    """

    side: str
    path: str | None
    channel: str | None
    sample_rate_hz: float | None
    n_repeats: int
    error: Notice | None = None

    def to_dict(self) -> dict:
        return {
            "side": self.side,
            "path": self.path,
            "channel": self.channel,
            "sample_rate_hz": self.sample_rate_hz,
            "n_repeats": self.n_repeats,
            "error": None if self.error is None else self.error.to_dict(),
        }


@dataclass(frozen=True, slots=True, eq=False)
class ConditionMode:
    """One reference mode of one condition: its repeats pooled, with means and uncertainties.

    Attributes
    ----------
    side : {"before", "after"}
    n_repeats : int
        Repeats in which this mode was found.
    n_repeats_side : int
        Repeats of the whole condition (the mode may be missing from some).
    values : dict of str -> float
        Mean over the repeats of each quantity in :data:`QUANTITIES` (``f_d_hz`` Hz, ``f_n_hz``
        Hz, ``beta_per_s`` 1/s, ``zeta``, ``q``, ``loss_factor``, ``log_decrement`` (1),
        ``decay_db_per_s`` dB/s, ``t60_s`` s).
    uncertainties : dict of str -> float or None
        Standard uncertainty of each mean, same unit: sample standard deviation / sqrt(n) when
        ``n_repeats >= 2``, else the repeat's propagated uncertainty (``None`` when it had none).
    zeta_interval : (float, float) or None
        Interval for the damping ratio at the comparison's confidence, from the log scale:
        ``exp(mean ln zeta -+ k u(ln zeta))`` with k from Student t (n - 1 dof) or the normal law
        for one repeat.
    repeat_f_d_hz, repeat_zeta : tuple of float
        Each repeat's damped frequency (Hz) and damping ratio, in the order of ``sources``.
    sources : tuple of str
        Each repeat's origin, ``"path#hit"`` (hit numbered from 1).
    warnings : tuple of Notice
        Codes from :data:`CARRIED_WARNING_CODES` found on this side, with counts.
    """

    side: str
    n_repeats: int
    n_repeats_side: int
    values: dict
    uncertainties: dict
    zeta_interval: tuple[float, float] | None
    repeat_f_d_hz: tuple[float, ...]
    repeat_zeta: tuple[float, ...]
    sources: tuple[str, ...]
    warnings: tuple[Notice, ...] = ()

    # each quantity's mean and its standard uncertainty, read through to ``values`` and
    # ``uncertainties`` (one pair per name in QUANTITIES; units there)
    f_d_hz = ReadThrough[float]("values")
    f_d_hz_u = ReadThrough[float | None]("uncertainties", "f_d_hz")
    f_n_hz = ReadThrough[float]("values")
    f_n_hz_u = ReadThrough[float | None]("uncertainties", "f_n_hz")
    beta_per_s = ReadThrough[float]("values")
    beta_per_s_u = ReadThrough[float | None]("uncertainties", "beta_per_s")
    zeta = ReadThrough[float]("values")
    zeta_u = ReadThrough[float | None]("uncertainties", "zeta")
    q = ReadThrough[float]("values")
    q_u = ReadThrough[float | None]("uncertainties", "q")
    loss_factor = ReadThrough[float]("values")
    loss_factor_u = ReadThrough[float | None]("uncertainties", "loss_factor")
    log_decrement = ReadThrough[float]("values")
    log_decrement_u = ReadThrough[float | None]("uncertainties", "log_decrement")
    decay_db_per_s = ReadThrough[float]("values")
    decay_db_per_s_u = ReadThrough[float | None]("uncertainties", "decay_db_per_s")
    t60_s = ReadThrough[float]("values")
    t60_s_u = ReadThrough[float | None]("uncertainties", "t60_s")

    def to_dict(self) -> dict:
        d: dict[str, Any] = {"side": self.side, "n_repeats": self.n_repeats, "n_repeats_side": self.n_repeats_side}
        for q in QUANTITIES:
            d[q] = self.values[q]
            d[q + "_u"] = self.uncertainties[q]
        d["zeta_interval"] = None if self.zeta_interval is None else list(self.zeta_interval)
        d["repeat_f_d_hz"] = list(self.repeat_f_d_hz)
        d["repeat_zeta"] = list(self.repeat_zeta)
        d["sources"] = list(self.sources)
        d["warnings"] = [w.to_dict() for w in self.warnings]
        return d


@dataclass(frozen=True, slots=True)
class DampingChange:
    """The change of one mode's damping, tested on ln(zeta).

    Attributes
    ----------
    scale : str
        Always ``"log_zeta"``: the test works on the natural log of the damping ratio.
    ratio : float
        ``exp(mean ln zeta_after - mean ln zeta_before)``: ratio of geometric means of zeta, the
        same ratio for the loss factor; Q changes by ``1 / ratio``.
    ratio_low, ratio_high : float or None
        Interval of the ratio at ``confidence``.
    log_ratio, log_ratio_u : float, float or None
        The difference of mean ln(zeta) and its standard uncertainty.
    dof : float or None
        Degrees of freedom of the t interval; ``None`` for a z interval or no test.
    p_value : float or None
        Two-sided p-value of "no change".
    test : {"welch_t", "t_effective_dof", "z", "none"}
    confidence : float
    verdict : {"increased", "decreased", "no significant change", "not tested"}
    """

    scale: str
    ratio: float
    ratio_low: float | None
    ratio_high: float | None
    log_ratio: float
    log_ratio_u: float | None
    dof: float | None
    p_value: float | None
    test: str
    confidence: float
    verdict: str

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True, slots=True)
class FrequencyShift:
    """The shift of one mode's damped frequency, ``mean f_d after - mean f_d before``.

    Attributes
    ----------
    shift_hz, shift_hz_u : float, float or None
        The shift and its standard uncertainty, Hz.
    low_hz, high_hz : float or None
        Interval of the shift at ``confidence``, Hz.
    relative : float
        ``shift_hz / mean f_d before`` (multiply by 100 for percent).
    dof, p_value, test, confidence, verdict
        As in :class:`DampingChange`, on the linear scale of f_d.
    """

    shift_hz: float
    shift_hz_u: float | None
    low_hz: float | None
    high_hz: float | None
    relative: float
    dof: float | None
    p_value: float | None
    test: str
    confidence: float
    verdict: str

    @property
    def percent(self) -> tuple[float, float | None, float | None]:
        """The relative shift and its interval, in percent of the mean f_d before."""
        if self.relative == 0 or self.shift_hz == 0:
            f0 = None
        else:
            f0 = self.shift_hz / self.relative
        scale = lambda v: None if v is None or f0 is None else 100.0 * v / f0  # noqa: E731
        return 100.0 * self.relative, scale(self.low_hz), scale(self.high_hz)

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True, slots=True, eq=False)
class ModeComparison:
    """One mode found before and after the treatment.

    Attributes
    ----------
    index : int
        1-based, ascending frequency.
    before, after : ConditionMode
    changes : dict of str -> dict
        Per quantity in :data:`QUANTITIES`: ``{"before", "after", "change", "ratio"}`` of the
        means (``change = after - before`` in the quantity's unit, ``ratio = after / before``).
    damping : DampingChange
    frequency : FrequencyShift
    warnings : tuple of Notice
        ``few_repeats``, ``mode_sporadic`` and any of :data:`CARRIED_WARNING_CODES` from either
        side.
    """

    index: int
    before: ConditionMode
    after: ConditionMode
    changes: dict
    damping: DampingChange
    frequency: FrequencyShift
    warnings: tuple[Notice, ...] = ()

    @property
    def verdict(self) -> str:
        return self.damping.verdict

    def to_dict(self) -> dict:
        return {
            "index": self.index,
            "before": self.before.to_dict(),
            "after": self.after.to_dict(),
            "changes": {k: dict(v) for k, v in self.changes.items()},
            "damping": self.damping.to_dict(),
            "frequency": self.frequency.to_dict(),
            "warnings": [w.to_dict() for w in self.warnings],
        }


@dataclass(frozen=True, slots=True, eq=False)
class Comparison:
    """A before/after comparison of one part's modes.

    Attributes
    ----------
    modes : tuple of ModeComparison
        Matched modes, ascending frequency.
    unmatched_before, unmatched_after : tuple of ConditionMode
        Reference modes with no partner inside the tolerance.
    inputs : tuple of ComparisonInput
        Every recording given, before then after, with errors for those that failed.
    notices : tuple of Notice
        ``few_repeats``, ``sample_rate_differs``, ``channel_differs``, ``input_failed``,
        ``unmatched_modes``.
    settings : dict
        ``tolerance``, ``cluster_tolerance``, ``confidence``, ``damping_scale`` and the analysis
        options used for paths.
    before_analyses, after_analyses : tuple of Analysis
        The analyses compared (not serialised; for plots and reports).
    """

    modes: tuple[ModeComparison, ...]
    unmatched_before: tuple[ConditionMode, ...]
    unmatched_after: tuple[ConditionMode, ...]
    inputs: tuple[ComparisonInput, ...]
    notices: tuple[Notice, ...]
    settings: dict
    n_repeats_before: int
    n_repeats_after: int
    before_analyses: tuple[Analysis, ...] = field(default=(), repr=False)
    after_analyses: tuple[Analysis, ...] = field(default=(), repr=False)

    @property
    def failed_inputs(self) -> tuple[ComparisonInput, ...]:
        return tuple(i for i in self.inputs if i.error is not None)

    @property
    def ok(self) -> bool:
        """True when every input recording was analysed."""
        return not self.failed_inputs

    def to_dict(self) -> dict:
        return {
            "tool": {"name": "ringdown", "version": __version__},
            "settings": dict(self.settings),
            "before": {
                "n_repeats": self.n_repeats_before,
                "inputs": [i.to_dict() for i in self.inputs if i.side == "before"],
            },
            "after": {
                "n_repeats": self.n_repeats_after,
                "inputs": [i.to_dict() for i in self.inputs if i.side == "after"],
            },
            "modes": [m.to_dict() for m in self.modes],
            "unmatched_before": [m.to_dict() for m in self.unmatched_before],
            "unmatched_after": [m.to_dict() for m in self.unmatched_after],
            "notices": [n.to_dict() for n in self.notices],
        }


# --------------------------------------------------------------------------------------------
# Matching
# --------------------------------------------------------------------------------------------


@dataclass(slots=True)
class _Member:
    mode: Mode
    source: str
    repeat: int
    codes: tuple[str, ...]


def _pool(repeats: list[list[_Member]], tolerance: float) -> list[list[_Member]]:
    """Group each repeat's modes into reference modes (one mode per repeat per group)."""
    order = sorted(range(len(repeats)), key=lambda r: -len(repeats[r]))  # stable: most modes first
    clusters: list[list[_Member]] = []
    for r in order:
        members = sorted(repeats[r], key=lambda mm: mm.mode.f_d_hz)
        if not members:
            continue
        clusters.sort(key=lambda c: statistics.median(mm.mode.f_d_hz for mm in c))
        centres = [statistics.median(mm.mode.f_d_hz for mm in c) for c in clusters]
        pairs = match_frequencies(centres, [mm.mode.f_d_hz for mm in members], tolerance=tolerance)
        used = set()
        for i, j in pairs:
            clusters[i].append(members[j])
            used.add(j)
        for j, mm in enumerate(members):
            if j not in used:
                clusters.append([mm])
    clusters.sort(key=lambda c: statistics.median(mm.mode.f_d_hz for mm in c))
    return clusters


# --------------------------------------------------------------------------------------------
# Statistics
# --------------------------------------------------------------------------------------------


@dataclass(slots=True)
class _Sample:
    """One side's repeats of one scalar on the working scale (ln zeta or f_d)."""

    values: np.ndarray
    u_single: float | None  # propagated standard uncertainty when there is one repeat

    @property
    def n(self) -> int:
        return int(self.values.size)

    @property
    def mean(self) -> float:
        return float(np.mean(self.values))

    def sem(self) -> float | None:
        if self.n >= 2:
            return float(np.std(self.values, ddof=1) / math.sqrt(self.n))
        return self.u_single


def _two_sample(before: _Sample, after: _Sample, confidence: float):
    """Difference after - before with interval, p-value, dof and the test used."""
    from scipy import stats

    diff = after.mean - before.mean
    if before.n >= 2 and after.n >= 2:
        var_b = float(np.var(before.values, ddof=1)) / before.n
        var_a = float(np.var(after.values, ddof=1)) / after.n
        se2 = var_a + var_b
        if se2 > 0.0:
            se = math.sqrt(se2)
            # Welch-Satterthwaite degrees of freedom (Welch 1947, eq. 29; Satterthwaite 1946).
            dof = se2**2 / (var_a**2 / (after.n - 1) + var_b**2 / (before.n - 1))
            res = stats.ttest_ind(after.values, before.values, equal_var=False)
            p = float(res.pvalue)
            k = float(stats.t.ppf(0.5 + confidence / 2.0, dof))
            return diff, se, dof, diff - k * se, diff + k * se, p, "welch_t"
        # every repeat identical on both sides: no scatter to test against, no verdict.
        return diff, None, None, None, None, None, "none"
    single = [s for s in (before, after) if s.n == 1]
    if any(s.u_single is None for s in single):
        return diff, None, None, None, None, None, "none"
    if len(single) == 1:
        many = after if after.n >= 2 else before
        var_many = float(np.var(many.values, ddof=1)) / many.n
        u_one = single[0].u_single
        assert u_one is not None  # checked above
        var_one = u_one**2
        se2 = var_many + var_one
        if se2 <= 0.0:
            return diff, None, None, None, None, None, "none"
        se = math.sqrt(se2)
        # Effective degrees of freedom, JCGM 100:2008 eq. (G.2b); the type B part counts as
        # infinite degrees of freedom.
        dof = math.inf if var_many == 0.0 else se2**2 / (var_many**2 / (many.n - 1))
        if math.isinf(dof):
            k = float(stats.norm.ppf(0.5 + confidence / 2.0))
            p = float(2.0 * stats.norm.sf(abs(diff) / se))
            return diff, se, None, diff - k * se, diff + k * se, p, "z"
        k = float(stats.t.ppf(0.5 + confidence / 2.0, dof))
        p = float(2.0 * stats.t.sf(abs(diff) / se, dof))
        return diff, se, dof, diff - k * se, diff + k * se, p, "t_effective_dof"
    assert before.u_single is not None and after.u_single is not None  # checked above
    se2 = before.u_single**2 + after.u_single**2
    if se2 <= 0.0:
        return diff, None, None, None, None, None, "none"
    se = math.sqrt(se2)
    k = float(stats.norm.ppf(0.5 + confidence / 2.0))
    p = float(2.0 * stats.norm.sf(abs(diff) / se))
    return diff, se, None, diff - k * se, diff + k * se, p, "z"


def _verdict(low: float | None, high: float | None) -> str:
    if low is None or high is None:
        return VERDICT_NOT_TESTED
    if low > 0.0:
        return VERDICT_INCREASED
    if high < 0.0:
        return VERDICT_DECREASED
    return VERDICT_NO_CHANGE


def _log_zeta_sample(members: list[_Member]) -> _Sample:
    zeta = np.array([mm.mode.zeta for mm in members], dtype=float)
    u = None
    if len(members) == 1:
        zu = members[0].mode.zeta_u
        u = None if zu is None else float(zu) / float(zeta[0])  # u(ln z) = u(z) / z (GUM 5.1.2)
    return _Sample(np.log(zeta), u)


def _f_d_sample(members: list[_Member]) -> _Sample:
    f = np.array([mm.mode.f_d_hz for mm in members], dtype=float)
    u = None
    if len(members) == 1:
        fu = members[0].mode.f_d_hz_u
        u = None if fu is None else float(fu)
    return _Sample(f, u)


def _condition_mode(side: str, members: list[_Member], n_side: int, confidence: float) -> ConditionMode:
    from scipy import stats

    members = sorted(members, key=lambda mm: mm.repeat)
    n = len(members)
    values: dict[str, float] = {}
    uncs: dict[str, float | None] = {}
    for q in QUANTITIES:
        v = np.array([getattr(mm.mode, q) for mm in members], dtype=float)
        values[q] = float(np.mean(v))
        if n >= 2:
            uncs[q] = float(np.std(v, ddof=1) / math.sqrt(n))
        else:
            u = getattr(members[0].mode, q + "_u")
            uncs[q] = None if u is None else float(u)
    lz = _log_zeta_sample(members)
    se = lz.sem()
    interval = None
    if se is not None:
        k = float(stats.t.ppf(0.5 + confidence / 2.0, n - 1) if n >= 2 else stats.norm.ppf(0.5 + confidence / 2.0))
        interval = (float(math.exp(lz.mean - k * se)), float(math.exp(lz.mean + k * se)))
    warnings = []
    for code in CARRIED_WARNING_CODES:
        count = sum(code in mm.codes for mm in members)
        if count:
            warnings.append(Notice(code, f"{side}: {count} of {n} repeats of this mode flagged '{code}'"))
    return ConditionMode(
        side=side,
        n_repeats=n,
        n_repeats_side=n_side,
        values=values,
        uncertainties=uncs,
        zeta_interval=interval,
        repeat_f_d_hz=tuple(float(mm.mode.f_d_hz) for mm in members),
        repeat_zeta=tuple(float(mm.mode.zeta) for mm in members),
        sources=tuple(mm.source for mm in members),
        warnings=tuple(warnings),
    )


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

    settings = {
        "tolerance": float(tolerance),
        "cluster_tolerance": float(cluster_tolerance),
        "confidence": float(confidence),
        "damping_scale": "log_zeta",
        "analysis_options": {k: _jsonable(v) for k, v in analysis_options.items()},
    }
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
