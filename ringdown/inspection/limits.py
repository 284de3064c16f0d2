"""Acceptance limits for parts: learned from known-good parts, or written by hand, in TOML.

Resonance inspection (ASTM E2001, E3397-23, E3081) accepts a part when its modes ring where the
good population rings. For each *reference mode* ``j`` the limits hold:

* a window of the damped frequency ``f_d`` (Hz);
* a window of the damping ratio ``zeta``. Damping ratios are positive and right-skewed over a
  population, so the interval is learned on ``log(zeta)`` and exponentiated: the window is
  ``[exp(m - k s), exp(m + k s)]`` with ``m, s`` the mean and standard deviation of ``log(zeta)``;
* for modes after the first, a window of the frequency ratio ``f_d,j / f_d,1``. Ratios cancel what
  moves every frequency by the same fraction (temperature, density, a uniform size change).

Each window is a two-sided normal tolerance interval ``mean +- k s`` (ISO 16269-6:2014) with the
exact ``k`` of :func:`ringdown.inspection.tolerance.tolerance_k`: by default it contains at least 99 % of
good parts with 95 % confidence. On top, the vector of drift-free features (all ratios and all
``log(zeta)``) is checked by its Mahalanobis distance against the good population, with the
threshold of Tracy, Young & Mason (1992) for a new observation (see :mod:`ringdown.inspection.tolerance`).
The multivariate check needs a well-estimated covariance: it is learned only when the number of
good parts ``n`` exceeds the number of features ``p`` by at least :data:`MAHALANOBIS_MARGIN`;
otherwise the limits say so and only the per-feature windows are used.

A limits file written by hand needs no statistics: ``[[modes]]`` entries with ``f_hz = [lo, hi]``
are a complete file (the frequency-range acceptance of ASTM E1876-22 section 5.5 [from memory for
the section number]). See :func:`ringdown.inspection.limits_file.parse_limits` for the schema.

This module holds the limits themselves and the matching of measured modes to reference modes;
learning them is :mod:`ringdown.inspection.learning`, the TOML file
:mod:`ringdown.inspection.limits_file`.

Caution: limits learned from a few dozen parts describe those parts. A part that passes is
*consistent with the good population* at the chosen coverage and confidence, nothing more; for
safety-relevant parts follow the applicable standard and your quality system.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from ..analysis.results import Notice

__all__ = [
    "FORMAT_VERSION",
    "MAHALANOBIS_MARGIN",
    "FEW_PARTS",
    "ModeLimits",
    "MahalanobisLimits",
    "Limits",
    "match_modes",
]

#: Version of the limits file schema this module writes and reads.
FORMAT_VERSION = 1
#: Minimum n - p for a Mahalanobis check: with fewer spare parts the covariance is too poorly
#: estimated for the threshold to mean much (our choice; the F(p, n - p) threshold itself is valid
#: for any n > p, but grows very fast as n - p shrinks).
MAHALANOBIS_MARGIN = 10
#: Fewer good parts than this gives a warning (common practice, no source: ASTM E2534 asks for
#: a representative training set without fixing a number [from memory]).
FEW_PARTS = 20
#: Default relative tolerance for matching a measured mode to a reference mode.
DEFAULT_TOLERANCE = 0.10
#: Default largest common relative shift of all frequencies that the ratio rule may excuse:
#: 1 % is about 70 K for steel at -0.014 %/K (FIELD.md section 4, from memory).
DEFAULT_MAX_UNIFORM_SHIFT = 0.01
#: Default largest spread of the per-mode relative shifts that still counts as "uniform" (our choice).
DEFAULT_UNIFORM_SHIFT_TOLERANCE = 0.002

#: Reader options (``ringdown.read_recording`` keywords) kept in the ``[reader]`` table.
READER_KEYS = ("channel", "column", "sample_rate")
_ANALYSIS_KEYS = (
    "method",
    "bands",
    "max_modes",
    "min_snr_db",
    "min_hit_snr_db",
    "keep_double_hits",
    "start_s",
    "end_s",
    "detection",
) + READER_KEYS


# --------------------------------------------------------------------------------------------
# Data


@dataclass(frozen=True, slots=True)
class ModeLimits:
    """The acceptance windows of one reference mode.

    Attributes
    ----------
    index : int
        1-based number of the reference mode (ascending frequency).
    f_ref_hz : float
        Reference damped frequency: the good parts' mean, or the window centre of hand-written
        limits. Used to match measured modes and to measure shifts.
    f_hz : (float, float) or None
        Acceptance window of the damped frequency, Hz.
    zeta : (float, float) or None
        Acceptance window of the damping ratio (dimensionless).
    ratio : (float, float) or None
        Acceptance window of ``f_d / f_d(mode 1)``; ``None`` for mode 1.
    stats : dict
        The statistics the windows came from (``f_hz_mean``, ``f_hz_sd``, ``log_zeta_mean``,
        ``log_zeta_sd``, ``ratio_mean``, ``ratio_sd``), empty for hand-written limits.
    """

    index: int
    f_ref_hz: float
    f_hz: tuple[float, float] | None = None
    zeta: tuple[float, float] | None = None
    ratio: tuple[float, float] | None = None
    stats: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {
            "index": self.index,
            "f_ref_hz": self.f_ref_hz,
            "f_hz": None if self.f_hz is None else list(self.f_hz),
            "zeta": None if self.zeta is None else list(self.zeta),
            "ratio": None if self.ratio is None else list(self.ratio),
            "stats": dict(self.stats),
        }


@dataclass(frozen=True, slots=True)
class MahalanobisLimits:
    """Mean, covariance and threshold of the drift-free feature vector of good parts.

    Attributes
    ----------
    features : tuple of str
        Feature names, e.g. ``("ratio_2", "ratio_3", "log_zeta_1", ...)``.
    mean : tuple of float
    covariance : tuple of tuple of float
        Sample covariance (divisor n - 1), p x p.
    threshold : float
        Largest accepted distance d (not d^2).
    n_parts : int
        Number of good parts the estimates came from.
    probability : float
        Probability that a new good part falls within ``threshold``.
    """

    features: tuple[str, ...]
    mean: tuple[float, ...]
    covariance: tuple[tuple[float, ...], ...]
    threshold: float
    n_parts: int
    probability: float

    def distance(self, values: Sequence[float]) -> float:
        """Mahalanobis distance of a feature vector (same order as ``features``)."""
        x = np.asarray(values, dtype=float) - np.asarray(self.mean)
        cov = np.asarray(self.covariance, dtype=float)
        sol = np.linalg.lstsq(cov, x, rcond=None)[0]
        return float(math.sqrt(max(float(x @ sol), 0.0)))

    def to_dict(self) -> dict:
        return {
            "features": list(self.features),
            "mean": list(self.mean),
            "covariance": [list(r) for r in self.covariance],
            "threshold": self.threshold,
            "n_parts": self.n_parts,
            "probability": self.probability,
        }


@dataclass(frozen=True, slots=True)
class Limits:
    """Acceptance limits for one part type: per-mode windows and an optional multivariate check.

    Attributes
    ----------
    modes : tuple of ModeLimits
        Reference modes, ascending frequency.
    tolerance : float
        Relative distance within which a measured mode is matched to a reference mode.
    max_uniform_shift, uniform_shift_tolerance : float
        The uniform-shift rule (see :func:`ringdown.inspection.check.check`): absolute frequency windows are
        advisory when every ratio passes and all modes moved by the same fraction (spread at most
        ``uniform_shift_tolerance``) of at most ``max_uniform_shift``.
    mahalanobis : MahalanobisLimits or None
    coverage, confidence, k_factor : float or None
        Tolerance-interval settings (``None`` for hand-written limits).
    n_parts : int or None
    parts : tuple of (str, str)
        Names and SHA-256 of the good parts used.
    analysis : dict
        Analysis options the good parts were analysed with; ``check`` reuses them.
    reader : dict
        Reader options the good parts were read with (``channel``, ``column``, ``sample_rate``;
        only those given); ``check`` reads parts the same way unless told otherwise.
    tool_version, created_utc : str or None
    notes : tuple of str
        Plain-words remarks written at learning time (few parts, no covariance ...).
    source : str or None
        File the limits were read from.
    sha256 : str or None
        SHA-256 of that file's bytes (or of the TOML text the limits serialise to).
    warnings : tuple of Notice
    """

    modes: tuple[ModeLimits, ...]
    tolerance: float = DEFAULT_TOLERANCE
    max_uniform_shift: float = DEFAULT_MAX_UNIFORM_SHIFT
    uniform_shift_tolerance: float = DEFAULT_UNIFORM_SHIFT_TOLERANCE
    mahalanobis: MahalanobisLimits | None = None
    coverage: float | None = None
    confidence: float | None = None
    k_factor: float | None = None
    n_parts: int | None = None
    parts: tuple[tuple[str, str], ...] = ()
    analysis: dict = field(default_factory=dict)
    reader: dict = field(default_factory=dict)
    tool_version: str | None = None
    created_utc: str | None = None
    notes: tuple[str, ...] = ()
    source: str | None = None
    sha256: str | None = None
    warnings: tuple[Notice, ...] = ()

    @property
    def has_ratios(self) -> bool:
        return any(m.ratio is not None for m in self.modes)

    def analysis_options(self) -> dict:
        """The stored analysis and reader options that :func:`ringdown.analyze_file` accepts."""
        opts = {k: v for k, v in self.analysis.items() if k in _ANALYSIS_KEYS and v is not None}
        opts.update({k: v for k, v in self.reader.items() if k in READER_KEYS and v is not None})
        return opts

    def to_dict(self) -> dict:
        return {
            "format_version": FORMAT_VERSION,
            "tool_version": self.tool_version,
            "created_utc": self.created_utc,
            "source": self.source,
            "sha256": self.sha256,
            "tolerance": self.tolerance,
            "max_uniform_shift": self.max_uniform_shift,
            "uniform_shift_tolerance": self.uniform_shift_tolerance,
            "coverage": self.coverage,
            "confidence": self.confidence,
            "k_factor": self.k_factor,
            "n_parts": self.n_parts,
            "parts": [{"name": n, "sha256": h} for n, h in self.parts],
            "analysis": dict(self.analysis),
            "reader": dict(self.reader),
            "notes": list(self.notes),
            "modes": [m.to_dict() for m in self.modes],
            "mahalanobis": None if self.mahalanobis is None else self.mahalanobis.to_dict(),
            "warnings": [w.to_dict() for w in self.warnings],
        }


# --------------------------------------------------------------------------------------------
# Matching measured modes to reference modes


def match_modes(freqs_hz: Sequence[float], ref_hz: Sequence[float], *, tolerance: float) -> dict[int, int]:
    """Pair measured modes with reference modes by frequency.

    Parameters
    ----------
    freqs_hz : sequence of float, Hz
        Measured frequencies.
    ref_hz : sequence of float, Hz
        Reference frequencies.
    tolerance : float, > 0
        A pair's higher frequency exceeds its lower one by at most this fraction.

    Returns
    -------
    dict of int -> int
        ``{reference position: measured position}`` (0-based); unmatched ones are absent.

    Notes
    -----
    One-to-one and in frequency order (no crossing), closest in log frequency
    (:func:`ringdown.base.matching.match_frequencies`), so two close reference modes never claim the
    same measured mode and a missing mode never shifts its neighbours' pairs.
    """
    from ..base.matching import match_frequencies

    f = np.asarray(list(freqs_hz), dtype=float)
    r = np.asarray(list(ref_hz), dtype=float)
    if f.size == 0 or r.size == 0:
        return {}
    fo, ro = np.argsort(f), np.argsort(r)
    pairs = match_frequencies(r[ro].tolist(), f[fo].tolist(), tolerance=tolerance)
    return {int(ro[i]): int(fo[j]) for i, j in pairs}
