"""The statistics of a before/after comparison: pooling one condition's repeats into reference
modes, and the two-sample tests on ln(zeta) and f_d with their intervals and verdicts.

See :mod:`ringdown.treatment.compare` (steps 2, 4 and 5 of its docstring) for the method.
"""

from __future__ import annotations

import math
import statistics
from dataclasses import dataclass

import numpy as np

from ..analysis.results import Mode, Notice
from ..base.matching import match_frequencies
from .results import (
    CARRIED_WARNING_CODES,
    QUANTITIES,
    VERDICT_DECREASED,
    VERDICT_INCREASED,
    VERDICT_NO_CHANGE,
    VERDICT_NOT_TESTED,
    ConditionMode,
)

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
