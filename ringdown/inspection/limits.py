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
the section number]). See :func:`parse_limits` for the schema.

Caution: limits learned from a few dozen parts describe those parts. A part that passes is
*consistent with the good population* at the chosen coverage and confidence, nothing more; for
safety-relevant parts follow the applicable standard and your quality system.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import math
import sys
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from .._version import __version__
from ..analysis.results import Analysis, Notice
from ..base.clock import utc_stamp
from ..base.errors import LimitsError, ParameterError
from .tolerance import mahalanobis_threshold, tolerance_k

if sys.version_info >= (3, 11):
    import tomllib as _toml
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as _toml

__all__ = [
    "FORMAT_VERSION",
    "MAHALANOBIS_MARGIN",
    "FEW_PARTS",
    "ModeLimits",
    "MahalanobisLimits",
    "Limits",
    "learn_limits",
    "parse_limits",
    "read_limits",
    "write_limits",
    "limits_to_toml",
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
_ANALYSIS_KEYS = ("method", "bands", "max_modes", "min_snr_db", "min_hit_snr_db", "keep_double_hits", "start_s",
                  "end_s", "detection") + READER_KEYS


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


# --------------------------------------------------------------------------------------------
# Learning


def _mode_features(mode) -> tuple[float, float]:
    f = getattr(mode, "f_d_hz", None)
    z = getattr(mode, "zeta", None)
    return (float("nan") if f is None else float(f), float("nan") if z is None else float(z))


def _interval(values: np.ndarray, k: float) -> tuple[float, float, float, float]:
    m = float(np.mean(values))
    s = float(np.std(values, ddof=1))
    return m, s, m - k * s, m + k * s


def learn_limits(
    analyses: Iterable[Analysis],
    *,
    coverage: float = 0.99,
    confidence: float = 0.95,
    tolerance: float = DEFAULT_TOLERANCE,
    n_modes: int | None = None,
) -> Limits:
    """Learn acceptance limits from the analyses of known-good parts.

    Parameters
    ----------
    analyses : iterable of Analysis
        One analysis per good part (at least 3). An analysis with ``error`` set is refused.
    coverage : float in (0, 1), default 0.99
        Fraction of good parts each window must contain (ISO 16269-6 "p"); also the probability
        used for the Mahalanobis threshold.
    confidence : float in (0, 1), default 0.95
        Confidence of each tolerance interval (ISO 16269-6 "1 - alpha").
    tolerance : float in (0, 0.5), default 0.10
        Relative distance within which modes of different parts are taken as the same mode, and
        within which ``check`` matches a measured mode to a reference mode.
    n_modes : int, optional
        Use only the lowest ``n_modes`` reference modes. By default every mode found in all good
        parts is used.

    Returns
    -------
    Limits
        With ``warnings`` for fewer than :data:`FEW_PARTS` parts, for modes seen in only some
        parts (not used), and when the Mahalanobis check had to be left out.

    Raises
    ------
    ParameterError
        For fewer than 3 parts, an analysis with an error, a bad option, or no mode common to
        all parts.

    Notes
    -----
    Reference modes are seeded from the part whose number of modes is the most common, then
    every part's modes are matched to them (:func:`match_modes`); a reference mode is kept when
    every part shows it. Features: ``f_d`` (normal), ``log(zeta)`` (normal in the log: damping
    ratios are positive and skewed) and ``f_d / f_d,1`` (normal).
    """
    items = list(analyses)
    coverage, confidence = _check_learning(items, coverage, confidence, tolerance, n_modes)
    n = len(items)
    said = _Said()
    if n < FEW_PARTS:
        said.warn("few_parts", f"only {n} good parts: limits from fewer than {FEW_PARTS} parts are wide and "
                               "uncertain; measure more good parts")
    f, z = _common_modes(items, tolerance, n_modes, said)
    logz = np.log(z)
    ratio = f / f[:, :1]
    k = tolerance_k(n, coverage=coverage, confidence=confidence)
    modes = [_mode_window(col, f[:, col], logz[:, col], ratio[:, col] if col > 0 else None, k)
             for col in range(f.shape[1])]
    maha = _mahalanobis_limits(ratio, logz, coverage, said)

    settings = dict(items[0].settings or {})
    analysis = {k2: v for k2, v in settings.items() if _toml_value_ok(v) and k2 not in READER_KEYS}
    reader = {k2: settings[k2] for k2 in READER_KEYS if _toml_value_ok(settings.get(k2))}
    parts = tuple((Path(a.path).name if a.path else f"part_{i + 1}", a.sha256 or "") for i, a in enumerate(items))
    limits = Limits(
        modes=tuple(modes),
        tolerance=float(tolerance),
        mahalanobis=maha,
        coverage=coverage,
        confidence=confidence,
        k_factor=k,
        n_parts=n,
        parts=parts,
        analysis=analysis,
        reader=reader,
        tool_version=__version__,
        created_utc=utc_stamp(),
        notes=tuple(said.notes),
        warnings=tuple(said.warnings),
    )
    text = limits_to_toml(limits)
    return replace(limits, sha256=hashlib.sha256(text.encode("utf-8")).hexdigest())


@dataclass
class _Said:
    """The warnings of learning, each also kept as a note of the limits file."""

    warnings: list[Notice] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    def warn(self, code: str, message: str) -> None:
        self.warnings.append(Notice(code, message))
        self.notes.append(message)


def _check_learning(items: list[Analysis], coverage: float, confidence: float, tolerance: float,
                    n_modes: int | None) -> tuple[float, float]:
    """Refuse bad options and unusable good parts; returns (coverage, confidence) as floats."""
    from .tolerance import _check_probability

    coverage = _check_probability("coverage", coverage)
    confidence = _check_probability("confidence", confidence)
    if not (0.0 < float(tolerance) < 0.5):
        raise ParameterError(f"tolerance must lie between 0 and 0.5 (relative), got {tolerance!r}; e.g. 0.1")
    if n_modes is not None and (int(n_modes) != n_modes or n_modes < 1):
        raise ParameterError(f"n_modes must be a positive integer, got {n_modes!r}")
    for a in items:
        if a.error is not None:
            raise ParameterError(
                f"good part {a.path!r} could not be analysed ({a.error.message}); remove it from the good parts"
            )
    if len(items) < 3:
        raise ParameterError(f"learning limits needs at least 3 good parts, got {len(items)}; measure more good parts")
    return coverage, confidence


def _common_modes(items: list[Analysis], tolerance: float, n_modes: int | None,
                  said: _Said) -> tuple[np.ndarray, np.ndarray]:
    """The damped frequencies (Hz) and damping ratios of the modes every good part shows, each
    ``(n_parts, n_modes)``, matched to the modes of a seed part (the most common mode count)."""
    n = len(items)
    counts = [len(a.modes) for a in items]
    if max(counts) == 0:
        raise ParameterError("no good part has any mode; check the recordings and analysis options")
    values, freq = np.unique(counts, return_counts=True)
    common = int(values[np.argmax(freq)]) if max(freq) > 1 else int(np.median(counts))
    seed_part = next(a for a in items if len(a.modes) == common) if common > 0 else items[0]
    seeds = sorted(_mode_features(m)[0] for m in seed_part.modes)

    # feats[part][seed] = (f, zeta) or None
    feats: list[list[tuple[float, float] | None]] = []
    for a in items:
        fz = [_mode_features(m) for m in a.modes]
        pairs = match_modes([x[0] for x in fz], seeds, tolerance=tolerance)
        feats.append([fz[pairs[j]] if j in pairs else None for j in range(len(seeds))])

    keep: list[int] = []
    for j, f0 in enumerate(seeds):
        present = sum(1 for row in feats if row[j] is not None)
        if present == n:
            keep.append(j)
        else:
            said.warn("mode_not_in_all_parts", f"the mode near {f0:.1f} Hz was found in only {present} of {n} good "
                                               "parts and is not used; check those recordings or lower min_snr_db")
    if not keep:
        raise ParameterError("no mode was found in every good part; check the recordings and analysis options")
    if n_modes is not None:
        if len(keep) < n_modes:
            raise ParameterError(
                f"n_modes={n_modes} but only {len(keep)} modes were found in every good part; lower n_modes"
            )
        keep = keep[: int(n_modes)]

    kept = [[row[j] for j in keep] for row in feats]  # every entry is set: each kept mode is in every part
    f = np.array([[fz[0] if fz else math.nan for fz in row] for row in kept])  # (n, m)
    z = np.array([[fz[1] if fz else math.nan for fz in row] for row in kept])
    if not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise ParameterError("a good part has a mode without a positive damped frequency; check its analysis")
    if not np.all(np.isfinite(z)) or np.any(z <= 0):
        raise ParameterError("a good part has a mode without a positive damping ratio; check its analysis")
    return f, z


def _mode_window(col: int, f: np.ndarray, logz: np.ndarray, ratio: np.ndarray | None, k: float) -> ModeLimits:
    """The windows of reference mode ``col`` (0-based) from its values over the good parts."""
    fm, fs, flo, fhi = _interval(f, k)
    lm, ls, llo, lhi = _interval(logz, k)
    st = {"f_hz_mean": fm, "f_hz_sd": fs, "log_zeta_mean": lm, "log_zeta_sd": ls}
    rwin = None
    if ratio is not None:
        rm, rs, rlo, rhi = _interval(ratio, k)
        st.update(ratio_mean=rm, ratio_sd=rs)
        rwin = (rlo, rhi)
    return ModeLimits(index=col + 1, f_ref_hz=fm, f_hz=(flo, fhi), zeta=(math.exp(llo), math.exp(lhi)), ratio=rwin,
                      stats=st)


def _mahalanobis_limits(ratio: np.ndarray, logz: np.ndarray, coverage: float,
                        said: _Said) -> MahalanobisLimits | None:
    """The multivariate check on the drift-free features (ratios to mode 1, log zeta), or None
    (with a warning) when the good parts are too few or their features collinear."""
    n, m = logz.shape
    names = [f"ratio_{c + 1}" for c in range(1, m)] + [f"log_zeta_{c + 1}" for c in range(m)]
    x = np.column_stack([ratio[:, 1:], logz]) if m > 1 else logz
    p = x.shape[1]
    if n - p < MAHALANOBIS_MARGIN:
        said.warn("no_mahalanobis", f"no Mahalanobis check: {n} good parts for {p} features (needs at least "
                                    f"{p + MAHALANOBIS_MARGIN}); per-feature windows only")
        return None
    cov = np.cov(x, rowvar=False, ddof=1).reshape(p, p)
    sd = np.sqrt(np.diag(cov))
    cond = np.linalg.cond(cov / np.outer(sd, sd)) if np.all(sd > 0) else np.inf
    if not np.isfinite(cond) or cond > 1e10:
        said.warn("no_mahalanobis", "no Mahalanobis check: the good parts' features are (nearly) collinear; "
                                    "per-feature windows only")
        return None
    return MahalanobisLimits(
        features=tuple(names),
        mean=tuple(float(v) for v in x.mean(axis=0)),
        covariance=tuple(tuple(float(v) for v in r) for r in cov),
        threshold=mahalanobis_threshold(n, p, probability=coverage),
        n_parts=n,
        probability=coverage,
    )


# --------------------------------------------------------------------------------------------
# TOML writing (a small writer for this fixed schema) and reading


def _toml_value_ok(v: Any) -> bool:
    if v is None:
        return False
    if isinstance(v, (bool, int, float, str)):
        return not (isinstance(v, float) and not math.isfinite(v))
    if isinstance(v, (list, tuple)):
        return all(_toml_value_ok(x) for x in v)
    return False


def _toml_str(s: str) -> str:
    out = ['"']
    for ch in s:
        if ch == '"':
            out.append('\\"')
        elif ch == "\\":
            out.append("\\\\")
        elif ch == "\n":
            out.append("\\n")
        elif ch == "\t":
            out.append("\\t")
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04x}")
        else:
            out.append(ch)
    out.append('"')
    return "".join(out)


def _toml_val(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if not math.isfinite(v):
            raise LimitsError(f"cannot write a non-finite number ({v}) to a limits file")
        return repr(v)
    if isinstance(v, str):
        return _toml_str(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_val(x) for x in v) + "]"
    raise LimitsError(f"cannot write a value of type {type(v).__name__} to a limits file")


def _fmt(x: float) -> float:
    """Round to 10 significant digits so a hand-edited file stays readable."""
    return float(f"{x:.10g}")


def limits_to_toml(limits: Limits) -> str:
    """The TOML text of a limits file (hand-editable; comments explain each key)."""
    L: list[str] = []
    w = L.append
    w("# ringdown acceptance limits for one part type.")
    w("# Windows may be widened or narrowed by hand; keep [lo, hi] pairs with lo < hi.")
    w("# f_hz: damped frequency, Hz; zeta: damping ratio; ratio: f_d / f_d of mode 1.")
    w("# Caution: a pass means 'consistent with the good parts', not 'safe'; follow your standard.")
    w(f"format_version = {FORMAT_VERSION}")
    w(f"tool_version = {_toml_val(limits.tool_version or __version__)}")
    if limits.created_utc:
        w(f"created_utc = {_toml_val(limits.created_utc)}")
    w("")
    w("[check]")
    w("# relative distance within which a measured mode is matched to a reference mode")
    w(f"tolerance = {_toml_val(float(limits.tolerance))}")
    w("# absolute frequency windows are advisory when all ratios pass and every mode moved by the")
    w("# same fraction (spread <= uniform_shift_tolerance) of at most max_uniform_shift (temperature)")
    w(f"max_uniform_shift = {_toml_val(float(limits.max_uniform_shift))}")
    w(f"uniform_shift_tolerance = {_toml_val(float(limits.uniform_shift_tolerance))}")
    if limits.coverage is not None:
        w("")
        w("[settings]")
        w("# two-sided normal tolerance intervals, ISO 16269-6, exact k (Odeh & Owen)")
        w(f"coverage = {_toml_val(float(limits.coverage))}")
        if limits.confidence is not None:  # a hand-written file may give coverage alone
            w(f"confidence = {_toml_val(float(limits.confidence))}")
        if limits.k_factor is not None:
            w(f"k_factor = {_toml_val(_fmt(float(limits.k_factor)))}")
        w(f"n_parts = {int(limits.n_parts or 0)}")
        w('damping_model = "log(zeta) is normal"')
    if limits.notes:
        w(f"notes = {_toml_val(list(limits.notes))}")
    if limits.analysis:
        w("")
        w("[analysis]")
        w("# options the good parts were analysed with; check analyses parts the same way")
        for key, v in limits.analysis.items():
            if _toml_value_ok(v):
                w(f"{_key(key)} = {_toml_val(v)}")
    w("")
    w("[reader]")
    w("# how the good parts were read (channel of a sound file, column and sample rate of a text file);")
    w("# check reads parts the same way unless --channel/--column/--sample-rate say otherwise")
    for key in READER_KEYS:
        v = limits.reader.get(key)
        if v is not None and _toml_value_ok(v):
            w(f"{key} = {_toml_val(v)}")
    for name, sha in limits.parts:
        w("")
        w("[[parts]]")
        w(f"name = {_toml_val(name)}")
        w(f"sha256 = {_toml_val(sha)}")
    for m in limits.modes:
        w("")
        w("[[modes]]")
        w(f"index = {m.index}")
        w(f"f_ref_hz = {_toml_val(_fmt(m.f_ref_hz))}")
        if m.f_hz is not None:
            w(f"f_hz = {_toml_val([_fmt(v) for v in m.f_hz])}")
        if m.zeta is not None:
            w(f"zeta = {_toml_val([_fmt(v) for v in m.zeta])}")
        if m.ratio is not None:
            w(f"ratio = {_toml_val([_fmt(v) for v in m.ratio])}")
        if m.stats:
            w(f"stats = {{ {', '.join(f'{k} = {_toml_val(_fmt(v))}' for k, v in m.stats.items())} }}")
    if limits.mahalanobis is not None:
        mh = limits.mahalanobis
        w("")
        w("[mahalanobis]")
        w("# distance of the drift-free features from the good parts; threshold from")
        w("# T^2 ~ p(n+1)(n-1)/(n(n-p)) F(p, n-p) (Tracy, Young & Mason 1992). Delete this table to")
        w("# turn the multivariate check off.")
        w(f"features = {_toml_val(list(mh.features))}")
        w(f"mean = {_toml_val([float(v) for v in mh.mean])}")
        w("covariance = [")
        for row in mh.covariance:
            w(f"    {_toml_val([float(v) for v in row])},")
        w("]")
        w(f"threshold = {_toml_val(_fmt(mh.threshold))}")
        w(f"n_parts = {int(mh.n_parts)}")
        w(f"probability = {_toml_val(float(mh.probability))}")
    return "\n".join(L) + "\n"


def _key(k: str) -> str:
    if k and all(c.isalnum() or c in "_-" for c in k):
        return k
    return _toml_str(k)


def write_limits(limits: Limits, path: str | Path) -> str:
    """Write a limits file; return the SHA-256 of the bytes written.

    Raises
    ------
    LimitsError
        When the file cannot be written.
    """
    from ..base.errors import RingdownError
    from ..io.outputs import atomic_write

    text = limits_to_toml(limits)
    try:
        with atomic_write(path, "wb", what="limits file") as fh:  # never a 0-byte or half file
            fh.write(text.encode("utf-8"))
    except RingdownError as exc:
        raise LimitsError(str(exc)) from None
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def read_limits(path: str | Path) -> Limits:
    """Read a limits file (learned or hand-written).

    Raises
    ------
    LimitsError
        When the file is missing, unreadable or malformed; the message names the file and key.
    """
    p = Path(path)
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        raise LimitsError(f"limits file '{p}' not found; learn one with 'ringdown limits learn' or check the path") from None
    except OSError as exc:
        raise LimitsError(f"cannot read limits file '{p}': {exc.strerror or exc}") from exc
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise LimitsError(f"limits file '{p}' is not UTF-8 text; save it as UTF-8") from None
    lim = parse_limits(text, source=str(p))  # a UTF-8 byte-order mark is accepted there
    return replace(lim, sha256=hashlib.sha256(data).hexdigest())


def _window(src: str, where: str, key: str, v: Any, *, positive: bool = False) -> tuple[float, float] | None:
    if v is None:
        return None
    if not (isinstance(v, list) and len(v) == 2 and all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v)):
        raise LimitsError(f"limits file '{src}': {where}.{key} must be a pair of numbers [lo, hi], got {v!r}; e.g. {key} = [1720.0, 1765.0]")
    lo, hi = float(v[0]), float(v[1])
    if not (math.isfinite(lo) and math.isfinite(hi)) or not lo < hi:
        raise LimitsError(f"limits file '{src}': {where}.{key} = {v!r} needs finite lo < hi; swap or fix the numbers")
    if positive and lo < 0:
        raise LimitsError(f"limits file '{src}': {where}.{key} = {v!r} must not be negative; fix the lower end")
    return lo, hi


def _num(src: str, where: str, key: str, v: Any, default: float | None, *, lo: float, hi: float) -> float | None:
    if v is None:
        return default
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(float(v)) or not lo < float(v) < hi:
        raise LimitsError(f"limits file '{src}': {where}{key} must be a number between {lo} and {hi}, got {v!r}")
    return float(v)


def parse_limits(text: str, *, source: str = "<string>") -> Limits:
    """Parse the TOML text of a limits file.

    Schema (every key but ``[[modes]]`` is optional; ``f_hz`` or ``f_ref_hz`` is required per mode)::

        format_version = 1
        [check]
        tolerance = 0.1                 # mode matching, relative
        max_uniform_shift = 0.01        # uniform-shift rule, relative
        uniform_shift_tolerance = 0.002
        [[modes]]
        f_hz = [1720.0, 1765.0]         # damped frequency window, Hz
        zeta = [0.0002, 0.0009]         # damping ratio window (optional)
        ratio = [2.752, 2.761]          # f_d / f_d of mode 1 (optional, modes 2..)
        [mahalanobis]                   # optional: features, mean, covariance, threshold, n_parts
        [reader]                        # optional: channel = 2, column = "accel", sample_rate = 51200.0

    Raises
    ------
    LimitsError
        Naming the file, the key and the fix.
    """
    src = source
    doc = _load_toml(text, src)
    tolerance, mus, ust = _parse_check(src, doc)
    modes = _parse_modes(src, doc)
    mh = doc.get("mahalanobis")
    maha = None if mh is None else _parse_maha(src, mh, len(modes))
    st = doc.get("settings", {})
    if not isinstance(st, dict):
        raise LimitsError(f"limits file '{src}': [settings] must be a table")
    coverage = _num(src, "settings.", "coverage", st.get("coverage"), None, lo=0.0, hi=1.0)
    confidence = _num(src, "settings.", "confidence", st.get("confidence"), None, lo=0.0, hi=1.0)
    k_factor = _num(src, "settings.", "k_factor", st.get("k_factor"), None, lo=0.0, hi=1e6)
    n_parts = st.get("n_parts")
    if n_parts is not None and (isinstance(n_parts, bool) or not isinstance(n_parts, int) or n_parts < 0):
        raise LimitsError(f"limits file '{src}': settings.n_parts must be a whole number >= 0, got {n_parts!r}")
    parts = _parse_parts(src, doc)
    analysis = doc.get("analysis", {})
    if not isinstance(analysis, dict):
        raise LimitsError(f"limits file '{src}': [analysis] must be a table")
    reader = _parse_reader(src, doc)
    _check_analysis(src, analysis)
    notes = st.get("notes", doc.get("notes", []))
    if not isinstance(notes, list) or not all(isinstance(x, str) for x in notes):
        raise LimitsError(f"limits file '{src}': notes must be a list of strings")
    for key in ("tool_version", "created_utc"):
        if key in doc and not isinstance(doc[key], (str, _dt.datetime, _dt.date)):
            raise LimitsError(f"limits file '{src}': {key} must be a string, got {doc[key]!r}")
    return Limits(
        modes=tuple(modes),
        tolerance=tolerance,
        max_uniform_shift=mus,
        uniform_shift_tolerance=ust,
        mahalanobis=maha,
        coverage=coverage,
        confidence=confidence,
        k_factor=k_factor,
        n_parts=n_parts,
        parts=tuple(parts),
        analysis=dict(analysis),
        reader=dict(reader),
        tool_version=None if doc.get("tool_version") is None else str(doc["tool_version"]),
        created_utc=str(doc["created_utc"]) if "created_utc" in doc else None,
        notes=tuple(notes),
        source=source,
        sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(),
    )


def _load_toml(text: str, src: str) -> dict[str, Any]:
    """The TOML document of a limits file, its top-level keys and format version checked."""
    body = text[1:] if text.startswith("\ufeff") else text  # a byte-order mark some editors add
    try:
        doc = _toml.loads(body)
    except _toml.TOMLDecodeError as exc:
        raise LimitsError(f"limits file '{src}' is not valid TOML ({exc}); fix the line named") from None
    except RecursionError:
        raise LimitsError(f"limits file '{src}' nests arrays or tables too deeply to be a limits file; "
                          "fix or relearn it") from None
    unknown = set(doc) - _TOP_KEYS
    if unknown:
        raise LimitsError(f"limits file '{src}' has unknown key(s) {sorted(unknown)}; allowed: "
                          f"{', '.join(sorted(_TOP_KEYS))} (a misspelt key would be ignored silently)")
    fv = doc.get("format_version", FORMAT_VERSION)
    if not isinstance(fv, int) or isinstance(fv, bool) or fv < 1:
        raise LimitsError(f"limits file '{src}': format_version must be a positive integer, got {fv!r}")
    if fv > FORMAT_VERSION:
        raise LimitsError(f"limits file '{src}' has format_version {fv}, newer than this ringdown reads "
                          f"({FORMAT_VERSION}); upgrade ringdown")
    return doc


def _num_or(src: str, where: str, key: str, v: Any, default: float, *, lo: float, hi: float) -> float:
    """:func:`_num` for a key with a default (so never None)."""
    x = _num(src, where, key, v, default, lo=lo, hi=hi)
    return default if x is None else x


def _parse_check(src: str, doc: dict[str, Any]) -> tuple[float, float, float]:
    """``[check]``: (tolerance, max_uniform_shift, uniform_shift_tolerance), defaults filled in."""
    chk = doc.get("check", {})
    if not isinstance(chk, dict):
        raise LimitsError(f"limits file '{src}': [check] must be a table")
    bad = set(chk) - {"tolerance", "max_uniform_shift", "uniform_shift_tolerance"}
    if bad:
        raise LimitsError(f"limits file '{src}': [check] has unknown key(s) {sorted(bad)}; "
                          "allowed: tolerance, max_uniform_shift, uniform_shift_tolerance")
    tolerance = _num_or(src, "check.", "tolerance", chk.get("tolerance"), DEFAULT_TOLERANCE, lo=0.0, hi=0.5)
    mus = _num_or(src, "check.", "max_uniform_shift", chk.get("max_uniform_shift"), DEFAULT_MAX_UNIFORM_SHIFT,
                  lo=-1e-12, hi=0.5)
    ust = _num_or(src, "check.", "uniform_shift_tolerance", chk.get("uniform_shift_tolerance"),
                  DEFAULT_UNIFORM_SHIFT_TOLERANCE, lo=-1e-12, hi=0.5)
    return tolerance, mus, ust


def _parse_modes(src: str, doc: dict[str, Any]) -> list[ModeLimits]:
    """``[[modes]]``: one entry per reference mode, in ascending frequency."""
    raw_modes = doc.get("modes")
    if not isinstance(raw_modes, list) or not raw_modes:
        raise LimitsError(f"limits file '{src}': no [[modes]] entries; add at least one, e.g. [[modes]] f_hz = [1720.0, 1765.0]")
    modes = [_parse_mode(src, i, m) for i, m in enumerate(raw_modes)]
    refs = [m.f_ref_hz for m in modes]
    if any(b <= a for a, b in zip(refs, refs[1:])):
        raise LimitsError(f"limits file '{src}': modes must be listed in ascending frequency; reorder the [[modes]] entries")
    return modes


def _parse_mode(src: str, i: int, m: Any) -> ModeLimits:
    """Entry ``i`` (0-based) of ``[[modes]]``."""
    where = f"modes[{i + 1}]"
    if not isinstance(m, dict):
        raise LimitsError(f"limits file '{src}': {where} must be a table ([[modes]])")
    unknown = set(m) - {"index", "f_ref_hz", "f_hz", "zeta", "ratio", "stats"}
    if unknown:
        raise LimitsError(f"limits file '{src}': {where} has unknown key(s) {sorted(unknown)}; "
                          "allowed: index, f_ref_hz, f_hz, zeta, ratio, stats")
    fwin = _window(src, where, "f_hz", m.get("f_hz"), positive=True)
    zwin = _window(src, where, "zeta", m.get("zeta"), positive=True)
    rwin = _window(src, where, "ratio", m.get("ratio"), positive=True)
    fref = m.get("f_ref_hz")
    if fref is None:
        if fwin is None:
            raise LimitsError(f"limits file '{src}': {where} needs f_hz = [lo, hi] (or f_ref_hz); add the frequency window")
        fref = 0.5 * (fwin[0] + fwin[1])
    f_ref_hz = _num_or(src, where + ".", "f_ref_hz", fref, math.nan, lo=0.0, hi=1e12)  # fref is set: no default
    if rwin is not None and i == 0:
        raise LimitsError(f"limits file '{src}': {where}.ratio given for the first mode; ratios are to mode 1, remove it")
    stats_ = m.get("stats", {})
    if not isinstance(stats_, dict):
        raise LimitsError(f"limits file '{src}': {where}.stats must be a table")
    idx = m.get("index", i + 1)
    if idx != i + 1:
        raise LimitsError(f"limits file '{src}': {where}.index is {idx!r}, expected {i + 1}; list modes in order")
    return ModeLimits(index=i + 1, f_ref_hz=f_ref_hz, f_hz=fwin, zeta=zwin, ratio=rwin,
                      stats={k: float(v) for k, v in stats_.items() if _is_number(v) and math.isfinite(float(v))})


def _parse_parts(src: str, doc: dict[str, Any]) -> list[tuple[str, str]]:
    """``[[parts]]``: (name, sha256) of each good part the limits were learned from."""
    parts_ = doc.get("parts", []) or []
    if not isinstance(parts_, list):
        raise LimitsError(f"limits file '{src}': parts must be [[parts]] tables with name and sha256")
    parts = []
    for i, pt in enumerate(parts_):
        if not isinstance(pt, dict) or not isinstance(pt.get("name", ""), str) or not isinstance(pt.get("sha256", ""), str):
            raise LimitsError(f"limits file '{src}': parts[{i + 1}] must be a table with name and sha256")
        parts.append((str(pt.get("name", "")), str(pt.get("sha256", ""))))
    return parts


def _parse_reader(src: str, doc: dict[str, Any]) -> dict[str, Any]:
    """``[reader]``: the reader options the good parts were read with."""
    reader = doc.get("reader", {})
    if not isinstance(reader, dict):
        raise LimitsError(f"limits file '{src}': [reader] must be a table")
    unknown = sorted(set(reader) - set(READER_KEYS))
    if unknown:
        raise LimitsError(f"limits file '{src}': [reader] has unknown key(s) {unknown}; allowed: {', '.join(READER_KEYS)}")
    rate = reader.get("sample_rate")
    if rate is not None:
        _num(src, "reader.", "sample_rate", rate, None, lo=0.0, hi=1e12)
    for key in ("channel", "column"):
        v = reader.get(key)
        if v is not None and (isinstance(v, bool) or not isinstance(v, (int, str))):
            raise LimitsError(f"limits file '{src}': reader.{key} must be a number or a name, got {v!r}")
    return reader


#: Top-level keys of a limits file (anything else is a typo that would be ignored silently).
_TOP_KEYS = frozenset({"format_version", "tool_version", "created_utc", "check", "modes", "mahalanobis", "settings",
                       "parts", "analysis", "reader", "notes"})


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _is_finite_number(v: Any) -> bool:
    return _is_number(v) and math.isfinite(float(v))


def _check_analysis(src: str, analysis: dict) -> None:
    """The [analysis] table: every key known and every value of the right kind (check reuses them)."""
    where = f"limits file '{src}': [analysis]"
    known = set(_ANALYSIS_KEYS) | {"primary_method"}
    bad = set(analysis) - known
    if bad:
        raise LimitsError(f"{where} has unknown key(s) {sorted(bad)}; allowed: {', '.join(sorted(known))}")

    def fail(key: str, want: str) -> None:
        raise LimitsError(f"{where} {key} = {analysis[key]!r} must be {want}; fix it or relearn the limits")

    for key in ("method", "primary_method"):
        if key in analysis:
            from ..analysis.estimators import method_names

            names = set(method_names()) | {"auto"}
            if not isinstance(analysis[key], str) or analysis[key] not in names:
                fail(key, f"one of {', '.join(sorted(names))}")
    for key in ("min_snr_db", "min_hit_snr_db"):
        if key in analysis and not (_is_finite_number(analysis[key]) and analysis[key] >= 0):
            fail(key, "a finite number of dB >= 0")
    if "max_modes" in analysis and not (isinstance(analysis["max_modes"], int)
                                        and not isinstance(analysis["max_modes"], bool) and analysis["max_modes"] >= 1):
        fail("max_modes", "a whole number >= 1")
    if "keep_double_hits" in analysis and not isinstance(analysis["keep_double_hits"], bool):
        fail("keep_double_hits", "true or false")
    if "sample_rate" in analysis and not (_is_finite_number(analysis["sample_rate"]) and analysis["sample_rate"] > 0):
        fail("sample_rate", "a finite number of Hz > 0")
    for key in ("channel", "column"):
        if key in analysis and not (isinstance(analysis[key], str) or (isinstance(analysis[key], int)
                                                                          and not isinstance(analysis[key], bool))):
            fail(key, "a channel number or a column name")
    if "bands" in analysis:
        b = analysis["bands"]
        ok = isinstance(b, list) and all(isinstance(x, list) and len(x) == 2 and all(_is_finite_number(v) for v in x)
                                         and 0 <= x[0] < x[1] for x in b)
        if not ok:
            fail("bands", "a list of [low, high] pairs in Hz with 0 <= low < high")


def _parse_maha(src: str, mh: Any, n_modes: int) -> MahalanobisLimits:
    where = "mahalanobis"
    if not isinstance(mh, dict):
        raise LimitsError(f"limits file '{src}': [mahalanobis] must be a table; delete it to turn the check off")
    for key in ("features", "mean", "covariance", "threshold"):
        if key not in mh:
            raise LimitsError(f"limits file '{src}': {where}.{key} is missing; relearn the limits or delete [mahalanobis]")
    feats = mh["features"]
    valid = {f"ratio_{j}" for j in range(2, n_modes + 1)} | {f"log_zeta_{j}" for j in range(1, n_modes + 1)}
    if not isinstance(feats, list) or not feats or any(f not in valid for f in feats):
        raise LimitsError(f"limits file '{src}': {where}.features must name ratio_J / log_zeta_J of the listed modes, "
                          f"got {feats!r}; relearn the limits or delete [mahalanobis]")
    bad = set(mh) - {"features", "mean", "covariance", "threshold", "n_parts", "probability"}
    if bad:
        raise LimitsError(f"limits file '{src}': [mahalanobis] has unknown key(s) {sorted(bad)}; allowed: features, "
                          "mean, covariance, threshold, n_parts, probability")
    if len(set(feats)) != len(feats):
        raise LimitsError(f"limits file '{src}': {where}.features names a feature twice; relearn the limits")
    p = len(feats)
    mean = mh["mean"]
    cov = mh["covariance"]
    if not (isinstance(mean, list) and len(mean) == p and all(_is_finite_number(v) for v in mean)):
        raise LimitsError(f"limits file '{src}': {where}.mean must hold {p} finite numbers, got {mean!r}; "
                          "relearn the limits or delete [mahalanobis]")
    if not (isinstance(cov, list) and len(cov) == p
            and all(isinstance(r, list) and len(r) == p and all(_is_finite_number(v) for v in r) for r in cov)):
        raise LimitsError(f"limits file '{src}': {where}.covariance must be a {p}x{p} array of finite numbers; "
                          "relearn the limits or delete [mahalanobis]")
    c = np.asarray(cov, dtype=float)
    if not np.all(np.isfinite(c)) or not np.allclose(c, c.T, rtol=1e-6, atol=0) or np.any(np.linalg.eigvalsh(c) <= 0):
        raise LimitsError(f"limits file '{src}': {where}.covariance must be symmetric positive definite; relearn the limits")
    thr = _num_or(src, where + ".", "threshold", mh["threshold"], math.nan, lo=0.0, hi=1e6)  # required: no default
    n = mh.get("n_parts", 0)
    if isinstance(n, bool) or not isinstance(n, int) or n < 0:
        raise LimitsError(f"limits file '{src}': {where}.n_parts must be a whole number >= 0, got {n!r}")
    prob = _num_or(src, where + ".", "probability", mh.get("probability"), 0.99, lo=0.0, hi=1.0)
    return MahalanobisLimits(
        features=tuple(feats),
        mean=tuple(float(v) for v in mean),
        covariance=tuple(tuple(float(v) for v in r) for r in cov),
        threshold=float(thr),
        n_parts=int(n),
        probability=float(prob),
    )
