"""The results of a before/after comparison (frozen dataclasses; ``to_dict()`` is the CLI's JSON)
and the constants they are worded with: verdicts, quantities, warning codes carried over.

See :mod:`ringdown.treatment.compare` for the method.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

from .._version import __version__
from ..analysis.results import Analysis, Notice
from ..base.readthrough import ReadThrough

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
