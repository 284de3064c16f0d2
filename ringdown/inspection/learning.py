"""Learning acceptance limits from the analyses of known-good parts (:func:`learn_limits`).

The windows and the multivariate check are described in :mod:`ringdown.inspection.limits`.
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Iterable
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from .._version import __version__
from ..analysis.results import Analysis, Notice
from ..base.clock import utc_stamp
from ..base.errors import ParameterError
from .limits import (
    DEFAULT_TOLERANCE,
    FEW_PARTS,
    MAHALANOBIS_MARGIN,
    READER_KEYS,
    Limits,
    MahalanobisLimits,
    ModeLimits,
    match_modes,
)
from .limits_file import _toml_value_ok, limits_to_toml
from .tolerance import mahalanobis_threshold, tolerance_k

__all__ = ["learn_limits"]


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
        said.warn("few_parts", _few_parts(n))
    f, z = _common_modes(items, tolerance, n_modes, said)
    logz = np.log(z)
    ratio = f / f[:, :1]
    k = tolerance_k(n, coverage=coverage, confidence=confidence)
    modes = [
        _mode_window(col, f[:, col], logz[:, col], ratio[:, col] if col > 0 else None, k) for col in range(f.shape[1])
    ]
    maha = _mahalanobis_limits(ratio, logz, coverage, said)

    analysis, reader = _settings_of(items[0])
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


def _settings_of(first: Analysis) -> tuple[dict, dict]:
    """(analysis options, reader options) of the first good part, as the limits file stores them
    (only values TOML can hold); ``check`` re-analyses parts with them."""
    settings = dict(first.settings or {})
    analysis = {k2: v for k2, v in settings.items() if _toml_value_ok(v) and k2 not in READER_KEYS}
    reader = {k2: settings[k2] for k2 in READER_KEYS if _toml_value_ok(settings.get(k2))}
    return analysis, reader


def _few_parts(n: int) -> str:
    """The warning of limits learned from fewer than :data:`FEW_PARTS` parts."""
    return (
        f"only {n} good parts: limits from fewer than {FEW_PARTS} parts are wide and uncertain; measure more good parts"
    )


@dataclass
class _Said:
    """The warnings of learning, each also kept as a note of the limits file."""

    warnings: list[Notice] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    def warn(self, code: str, message: str) -> None:
        self.warnings.append(Notice(code, message))
        self.notes.append(message)


def _check_learning(
    items: list[Analysis], coverage: float, confidence: float, tolerance: float, n_modes: int | None
) -> tuple[float, float]:
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


def _common_modes(
    items: list[Analysis], tolerance: float, n_modes: int | None, said: _Said
) -> tuple[np.ndarray, np.ndarray]:
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
            said.warn(
                "mode_not_in_all_parts",
                f"the mode near {f0:.1f} Hz was found in only {present} of {n} good "
                "parts and is not used; check those recordings or lower min_snr_db",
            )
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
    return ModeLimits(
        index=col + 1, f_ref_hz=fm, f_hz=(flo, fhi), zeta=(math.exp(llo), math.exp(lhi)), ratio=rwin, stats=st
    )


def _mahalanobis_limits(ratio: np.ndarray, logz: np.ndarray, coverage: float, said: _Said) -> MahalanobisLimits | None:
    """The multivariate check on the drift-free features (ratios to mode 1, log zeta), or None
    (with a warning) when the good parts are too few or their features collinear."""
    n, m = logz.shape
    names = [f"ratio_{c + 1}" for c in range(1, m)] + [f"log_zeta_{c + 1}" for c in range(m)]
    x = np.column_stack([ratio[:, 1:], logz]) if m > 1 else logz
    p = x.shape[1]
    if n - p < MAHALANOBIS_MARGIN:
        said.warn(
            "no_mahalanobis",
            f"no Mahalanobis check: {n} good parts for {p} features (needs at least "
            f"{p + MAHALANOBIS_MARGIN}); per-feature windows only",
        )
        return None
    cov = np.cov(x, rowvar=False, ddof=1).reshape(p, p)
    sd = np.sqrt(np.diag(cov))
    cond = np.linalg.cond(cov / np.outer(sd, sd)) if np.all(sd > 0) else np.inf
    if not np.isfinite(cond) or cond > 1e10:
        said.warn(
            "no_mahalanobis",
            "no Mahalanobis check: the good parts' features are (nearly) collinear; per-feature windows only",
        )
        return None
    return MahalanobisLimits(
        features=tuple(names),
        mean=tuple(float(v) for v in x.mean(axis=0)),
        covariance=tuple(tuple(float(v) for v in r) for r in cov),
        threshold=mahalanobis_threshold(n, p, probability=coverage),
        n_parts=n,
        probability=coverage,
    )
