"""Result types: what an analysis returns, and the JSON record each one prints.

All results are frozen dataclasses. ``to_dict()`` returns exactly the JSON the CLI prints for
that object: keys never appear or vanish with the inputs, a missing value is ``None``.
Arrays kept for plotting (``ModeTrace``, the recording) are never part of ``to_dict()``.

Units are in the field names: ``_hz`` hertz, ``_per_s`` 1/s, ``_s`` seconds, ``_db`` decibels.
A field ending ``_u`` is the standard uncertainty (GUM sense, JCGM 100:2008) of the field
before it, in the same unit.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field, fields, replace
from typing import Any

import numpy as np

from .._version import __version__
from ..base.numfmt import fmt_pm, fmt_value
from ..base.readthrough import ReadThrough
from .quantities import Derived

__all__ = [
    "Notice",
    "Estimate",
    "ModeTrace",
    "Mode",
    "Hit",
    "Rejected",
    "Analysis",
    "results_document",
    "lighten",
]


@dataclass(frozen=True, slots=True)
class Notice:
    """A warning or error with a stable machine-readable ``code`` and a plain-words message."""

    code: str
    message: str

    def to_dict(self) -> dict:
        return {"code": self.code, "message": self.message}

    @classmethod
    def from_dict(cls, d: dict) -> Notice:
        """The notice of a ``to_dict()`` record."""
        return cls(d["code"], d["message"])


@dataclass(frozen=True, slots=True, eq=False)
class Estimate:
    """What one estimator found for one mode, before derived quantities are added.

    Attributes
    ----------
    method : str
        Estimator name (``"envelope"``, ``"decrement"``, ``"half_power"``, ``"pencil"``).
    f_d_hz, f_d_hz_u : float, float or None
        Damped frequency and its standard uncertainty, Hz.
    beta_per_s, beta_per_s_u : float, float or None
        Decay rate of the envelope and its standard uncertainty, 1/s.
    cov_f_beta : float
        Covariance of the two, Hz/s (0 when not estimated).
    amplitude : float or None
        Amplitude of the mode at the start of its fit window, in the recording's units.
    fit_start_s, fit_end_s : float or None
        Fit window, seconds from the start of the recording.
    n_points : int
        Number of points the fit used.
    residual_rms : float or None
        RMS of the fit residual, in the unit the fit worked in (nepers for log fits).
    converged : bool
        Whether the fit reached its convergence criterion.
    warnings : tuple of Notice
    trace : ModeTrace or None
        Arrays for plotting (never serialised).
    """

    method: str
    f_d_hz: float
    f_d_hz_u: float | None
    beta_per_s: float
    beta_per_s_u: float | None
    cov_f_beta: float = 0.0
    amplitude: float | None = None
    fit_start_s: float | None = None
    fit_end_s: float | None = None
    n_points: int = 0
    residual_rms: float | None = None
    converged: bool = True
    warnings: tuple[Notice, ...] = ()
    trace: ModeTrace | None = field(default=None, repr=False)

    def to_dict(self) -> dict:
        return {
            "f_d_hz": self.f_d_hz,
            "f_d_hz_u": self.f_d_hz_u,
            "beta_per_s": self.beta_per_s,
            "beta_per_s_u": self.beta_per_s_u,
            "fit_start_s": self.fit_start_s,
            "fit_end_s": self.fit_end_s,
            "n_points": self.n_points,
            "converged": self.converged,
        }

    @classmethod
    def from_dict(cls, d: dict, method: str) -> Estimate:
        """The estimate of a ``to_dict()`` record (a cross-check, keyed by ``method``); the fields
        that record does not hold (covariance, amplitude, residual, warnings, trace) take their
        defaults."""
        return cls(method=method, **{k: d[k] for k in _ESTIMATE_KEYS})


@dataclass(frozen=True, slots=True, eq=False)
class ModeTrace:
    """Arrays behind one mode's fit, for plots. Never serialised.

    Attributes
    ----------
    t_s : (n,) ndarray of float
        Times of the band envelope samples, seconds from the start of the recording.
    envelope : (n,) ndarray of float
        Magnitude of the mode's analytic (band) signal, recording units.
    fit_start_s, fit_end_s : float
        The window the fit used.
    noise_floor : float
        Envelope level of the noise in this band, recording units.
    fit_amplitude, fit_beta_per_s, fit_t0_s : float
        The fitted envelope is ``fit_amplitude * exp(-fit_beta_per_s * (t - fit_t0_s))``.
    peaks_t_s, peaks_value : (m,) ndarray of float or None
        Peak times and heights used by the log-decrement regression.
    model_envelope : (n,) ndarray of float or None
        Magnitude of the sum of every mode fitted jointly in this band, at ``t_s`` (NaN before
        the fit window), recording units; None for single-mode fits.
    n_model_modes : int
        How many modes that sum holds (1 when ``model_envelope`` is None).
    """

    t_s: np.ndarray = field(repr=False)
    envelope: np.ndarray = field(repr=False)
    fit_start_s: float
    fit_end_s: float
    noise_floor: float
    fit_amplitude: float
    fit_beta_per_s: float
    fit_t0_s: float
    peaks_t_s: np.ndarray | None = field(default=None, repr=False)
    peaks_value: np.ndarray | None = field(default=None, repr=False)
    model_envelope: np.ndarray | None = field(default=None, repr=False)
    n_model_modes: int = 1


_MODE_KEYS = (
    "index",
    "f_d_hz", "f_d_hz_u", "beta_per_s", "beta_per_s_u",
    "f_n_hz", "f_n_hz_u", "zeta", "zeta_u", "q", "q_u",
    "loss_factor", "loss_factor_u", "log_decrement", "log_decrement_u",
    "decay_db_per_s", "decay_db_per_s_u", "t60_s", "t60_s_u", "f_r_hz", "f_r_hz_u",
    "amplitude", "snr_db", "method", "fit_path", "fit_start_s", "fit_end_s", "cycles_fitted",
    "n_hits", "band_hz", "warnings", "cross_checks", "damping_vs_amplitude",
)  # fmt: skip


@dataclass(frozen=True, slots=True, eq=False)
class Mode:
    """One mode of a recording: the chosen estimate, its derived quantities and cross-checks.

    Attributes
    ----------
    index : int
        1-based position in the recording's list of modes (ascending frequency).
    derived : Derived
        Damped frequency, decay rate and everything that follows, with standard uncertainties.
    amplitude : float or None
        Mode amplitude at the start of the fit window, recording units.
    snr_db : float or None
        Mode envelope at the start of the fit window over its band noise floor, dB.
    method : str
        Estimator that produced ``derived``.
    fit_path : str
        ``"band"``: fitted on the mode's band-filtered complex envelope; ``"raw"``: a fast decay
        fitted on the unfiltered record itself (no band filter could pass it unbiased; see
        :mod:`ringdown.analysis.estimators.real`).
    fit_start_s, fit_end_s : float or None
        Fit window, seconds from the start of the recording.
    cycles_fitted : float or None
        Number of oscillation cycles inside the fit window.
    n_hits : int
        Number of hits whose estimates were combined into this mode.
    band_hz : (float, float) or None
        Frequency band the mode was extracted from.
    warnings : tuple of Notice
    cross_checks : dict of str -> Estimate
        The other estimators' results for the same mode.
    damping_vs_amplitude : tuple of dict or None
        For a decay that is not exponential: rows of ``{amplitude, f_d_hz, beta_per_s}``.
    trace : ModeTrace or None
        Arrays for plots, not serialised.
    """

    index: int
    derived: Derived
    amplitude: float | None
    snr_db: float | None
    method: str
    fit_start_s: float | None
    fit_end_s: float | None
    cycles_fitted: float | None
    n_hits: int = 1
    band_hz: tuple[float, float] | None = None
    warnings: tuple[Notice, ...] = ()
    cross_checks: dict[str, Estimate] = field(default_factory=dict)
    damping_vs_amplitude: tuple[dict, ...] | None = None
    trace: ModeTrace | None = field(default=None, repr=False)
    fit_path: str = "band"

    # the derived quantities, read through to ``derived`` (units as in :class:`Derived`)
    f_d_hz = ReadThrough[float]("derived")
    f_d_hz_u = ReadThrough[float | None]("derived")
    beta_per_s = ReadThrough[float]("derived")
    beta_per_s_u = ReadThrough[float | None]("derived")
    f_n_hz = ReadThrough[float]("derived")
    f_n_hz_u = ReadThrough[float | None]("derived")
    zeta = ReadThrough[float]("derived")
    zeta_u = ReadThrough[float | None]("derived")
    q = ReadThrough[float]("derived")
    q_u = ReadThrough[float | None]("derived")
    loss_factor = ReadThrough[float]("derived")
    loss_factor_u = ReadThrough[float | None]("derived")
    log_decrement = ReadThrough[float]("derived")
    log_decrement_u = ReadThrough[float | None]("derived")
    decay_db_per_s = ReadThrough[float]("derived")
    decay_db_per_s_u = ReadThrough[float | None]("derived")
    t60_s = ReadThrough[float]("derived")
    t60_s_u = ReadThrough[float | None]("derived")
    f_r_hz = ReadThrough[float | None]("derived")
    f_r_hz_u = ReadThrough[float | None]("derived")

    def __repr__(self) -> str:
        return (
            f"Mode(index={self.index}, f_d_hz={fmt_pm(self.f_d_hz, self.f_d_hz_u)}, "
            f"zeta={fmt_pm(self.zeta, self.zeta_u)}, q={fmt_pm(self.q, self.q_u)}, method={self.method!r}, "
            f"warnings={list(self.warning_codes)})"
        )

    @property
    def warning_codes(self) -> tuple[str, ...]:
        return tuple(w.code for w in self.warnings)

    def with_updates(self, **changes: Any) -> Mode:
        """A copy with some fields replaced (dataclasses.replace)."""
        return replace(self, **changes)

    def to_dict(self) -> dict:
        d: dict[str, Any] = {"index": self.index}
        d.update(self.derived.to_dict())
        d.update(
            amplitude=self.amplitude,
            snr_db=self.snr_db,
            method=self.method,
            fit_path=self.fit_path,
            fit_start_s=self.fit_start_s,
            fit_end_s=self.fit_end_s,
            cycles_fitted=self.cycles_fitted,
            n_hits=self.n_hits,
            band_hz=None if self.band_hz is None else [float(b) for b in self.band_hz],
            warnings=[w.to_dict() for w in self.warnings],
            cross_checks={k: v.to_dict() for k, v in self.cross_checks.items()},
            damping_vs_amplitude=None
            if self.damping_vs_amplitude is None
            else [dict(r) for r in self.damping_vs_amplitude],
        )
        return {k: d[k] for k in _MODE_KEYS}

    @classmethod
    def from_dict(cls, d: dict) -> Mode:
        """The mode of a ``to_dict()`` record (without ``trace``, which is never serialised)."""
        derived = Derived(**{f.name: d[f.name] for f in fields(Derived)})
        band = d["band_hz"]
        dva = d["damping_vs_amplitude"]
        return cls(
            index=d["index"],
            derived=derived,
            amplitude=d["amplitude"],
            snr_db=d["snr_db"],
            method=d["method"],
            fit_start_s=d["fit_start_s"],
            fit_end_s=d["fit_end_s"],
            cycles_fitted=d["cycles_fitted"],
            n_hits=d["n_hits"],
            band_hz=None if band is None else (band[0], band[1]),
            warnings=tuple(Notice.from_dict(w) for w in d["warnings"]),
            cross_checks={k: Estimate.from_dict(v, k) for k, v in d["cross_checks"].items()},
            damping_vs_amplitude=None if dva is None else tuple(dict(r) for r in dva),
            fit_path=d["fit_path"],
        )


#: Why a candidate mode was not reported (the ``reason`` of a :class:`Rejected`).
REJECTION_REASONS = {
    "near_noise": "its matched-filter SNR is below the noise threshold",
    "few_cycles": "it completes less than one cycle before it reaches the noise",
    "steady_tone": "it does not decay (a steady tone)",
    "fit_failed": "its band could not be fitted",
    "unresolved": "the fit merged it with a neighbour",
    "max_modes": "more modes were found than max_modes allows",
}


@dataclass(frozen=True, slots=True)
class Rejected:
    """A candidate mode that a search proposed and that is not reported as a mode.

    Attributes
    ----------
    f_hz : float
        Frequency of the candidate, Hz.
    beta_per_s : float or None
        Its decay rate where the search estimated one, 1/s.
    snr_db : float or None
        Its matched-filter SNR where measured, dB.
    reason : str
        One of ``REJECTION_REASONS``.
    detail : str
        Plain-words detail (the numbers behind the reason).
    hit : int
        1-based index of the hit whose decay held it (0 before the pipeline numbers them).
    """

    f_hz: float
    beta_per_s: float | None
    snr_db: float | None
    reason: str
    detail: str
    hit: int = 0

    def to_dict(self) -> dict:
        return {
            "f_hz": self.f_hz,
            "beta_per_s": self.beta_per_s,
            "snr_db": self.snr_db,
            "reason": self.reason,
            "detail": self.detail,
            "hit": self.hit,
        }

    @classmethod
    def from_dict(cls, d: dict) -> Rejected:
        """The rejection of a ``to_dict()`` record."""
        return cls(**{f.name: d[f.name] for f in fields(cls)})

    def notice(self) -> Notice:
        """The warning that names this rejection."""
        beta = "" if self.beta_per_s is None else f", beta {self.beta_per_s:.4g} 1/s"
        return Notice(
            "candidate_rejected", f"candidate at {self.f_hz:.2f} Hz{beta} not reported ({self.reason}): {self.detail}"
        )


@dataclass(frozen=True, slots=True, eq=False)
class Hit:
    """One excitation (tap, pluck, release, drive switch-off) found in a recording and the
    modes of its decay.

    Attributes
    ----------
    start_s : float
        Start of the free decay, seconds from the start of the recording: the onset of a tap,
        or where a steady drive stopped.
    peak_s : float
        Time of the envelope maximum after the onset, s.
    peak_value : float
        Largest absolute sample of the hit, recording units.
    snr_db : float
        Peak envelope over the broadband noise floor, dB.
    end_s : float
        End of the decay analysed for this hit (next hit or end of record), s.
    used : bool
        Whether this hit's modes were combined into the recording's modes.
    warnings : tuple of Notice
    modes : tuple of Mode
        Modes measured in this hit's decay alone.
    rejected : tuple of Rejected
        Candidates of this hit's decay not reported as modes (serialised once, under
        ``Analysis.rejected``).
    start_kind : str
        How the start of the free decay was found: ``"impulse"`` (a sharp rise, then the decay),
        ``"switch-off"`` (a steady forced oscillation stopped: the level left its plateau and
        fell) or ``"release"`` (a held static deflection let go). The warning
        ``start_uncertain`` says when the start is in doubt.
    """

    start_s: float
    peak_s: float
    peak_value: float
    snr_db: float
    end_s: float
    used: bool = True
    warnings: tuple[Notice, ...] = ()
    modes: tuple[Mode, ...] = ()
    rejected: tuple[Rejected, ...] = ()
    start_kind: str = "impulse"

    def to_dict(self) -> dict:
        return {
            "start_s": self.start_s,
            "start_kind": self.start_kind,
            "peak_s": self.peak_s,
            "peak_value": self.peak_value,
            "snr_db": self.snr_db,
            "end_s": self.end_s,
            "used": self.used,
            "warnings": [w.to_dict() for w in self.warnings],
            "modes": [m.to_dict() for m in self.modes],
        }

    def __repr__(self) -> str:
        return (
            f"Hit(start_s={fmt_value(self.start_s)}, start_kind={self.start_kind!r}, "
            f"snr_db={fmt_value(self.snr_db, 3)}, used={self.used}, modes={len(self.modes)}, "
            f"rejected={len(self.rejected)}, warnings={[w.code for w in self.warnings]})"
        )

    @classmethod
    def from_dict(cls, d: dict, rejected: tuple[Rejected, ...] = ()) -> Hit:
        """The hit of a ``to_dict()`` record; ``rejected`` are its rejections (a hit's record does
        not hold them: they are serialised once, under the analysis)."""
        return cls(
            start_s=d["start_s"],
            peak_s=d["peak_s"],
            peak_value=d["peak_value"],
            snr_db=d["snr_db"],
            end_s=d["end_s"],
            used=d["used"],
            warnings=tuple(Notice.from_dict(w) for w in d["warnings"]),
            modes=tuple(Mode.from_dict(m) for m in d["modes"]),
            rejected=rejected,
            start_kind=d["start_kind"],
        )


@dataclass(frozen=True, slots=True, eq=False)
class Analysis:
    """Everything ringdown found in one recording, or why it could not.

    ``error`` is ``None`` for a recording that was analysed; otherwise it holds the reason and
    ``modes`` and ``hits`` are empty. ``rejected`` lists every candidate mode of every hit that
    is not reported, with the reason. ``recording`` keeps the samples for plots (not serialised).
    ``channel`` is the channel's name or number as the reader gives it, ``unit`` the unit of the
    samples as the file states it (TDMS, UFF 58, MATLAB, HDF5), ``None`` when unknown.
    ``noise_source`` says where the noise spectrum came from: ``"pre_trigger"`` (before the first
    hit), ``"tail"`` (after the decays died away) or ``"record_end"`` (the record's last 10 %,
    which still holds the decay: an upper bound, with the warning ``noise_uncertain``); ``None``
    for a failed analysis.
    """

    path: str | None
    sha256: str | None
    channel: str | None
    sample_rate_hz: float | None
    n_samples: int | None
    hits: tuple[Hit, ...] = ()
    modes: tuple[Mode, ...] = ()
    warnings: tuple[Notice, ...] = ()
    error: Notice | None = None
    settings: dict = field(default_factory=dict)
    noise_floor: float | None = None
    noise_source: str | None = None
    recording: Any = field(default=None, repr=False)
    rejected: tuple[Rejected, ...] = ()
    unit: str | None = None

    @property
    def duration_s(self) -> float | None:
        if self.n_samples is None or not self.sample_rate_hz:
            return None
        return self.n_samples / self.sample_rate_hz

    @property
    def ok(self) -> bool:
        return self.error is None

    @classmethod
    def failed(cls, path: str | None, error: Exception, *, settings: dict | None = None) -> Analysis:
        """The record of a recording that could not be analysed."""
        code = getattr(error, "code", "error")
        return cls(
            path=None if path is None else str(path),
            sha256=None,
            channel=None,
            sample_rate_hz=None,
            n_samples=None,
            error=Notice(code, str(error)),
            settings=dict(settings or {}),
        )

    def to_dict(self) -> dict:
        return {
            "path": self.path,
            "sha256": self.sha256,
            "channel": self.channel,
            "unit": self.unit,
            "sample_rate_hz": self.sample_rate_hz,
            "n_samples": self.n_samples,
            "duration_s": self.duration_s,
            "noise_floor": self.noise_floor,
            "noise_source": self.noise_source,
            "settings": dict(self.settings),
            "hits": [h.to_dict() for h in self.hits],
            "modes": [m.to_dict() for m in self.modes],
            "warnings": [w.to_dict() for w in self.warnings],
            "rejected": [r.to_dict() for r in self.rejected],
            "error": None if self.error is None else self.error.to_dict(),
        }

    @classmethod
    def from_dict(cls, d: dict) -> Analysis:
        """The analysis of a ``to_dict()`` record (one of the ``recordings`` of the JSON the CLI
        prints, or a record kept in the history), so that ``Analysis.from_dict(a.to_dict())``
        gives back an analysis with the same ``to_dict()``. What the record does not hold stays
        unset: ``recording`` (the samples) and each mode's ``trace`` are None."""
        rejected = tuple(Rejected.from_dict(r) for r in d["rejected"])
        error = d["error"]
        return cls(
            path=d["path"],
            sha256=d["sha256"],
            channel=d["channel"],
            sample_rate_hz=d["sample_rate_hz"],
            n_samples=d["n_samples"],
            hits=tuple(
                Hit.from_dict(h, tuple(r for r in rejected if r.hit == i)) for i, h in enumerate(d["hits"], start=1)
            ),
            modes=tuple(Mode.from_dict(m) for m in d["modes"]),
            warnings=tuple(Notice.from_dict(w) for w in d["warnings"]),
            error=None if error is None else Notice.from_dict(error),
            settings=dict(d["settings"]),
            noise_floor=d["noise_floor"],
            noise_source=d["noise_source"],
            rejected=rejected,
            unit=d["unit"],
        )

    def __repr__(self) -> str:
        head = f"Analysis(path={self.path!r}, "
        if self.error is not None:
            return head + f"error={self.error.code!r}: {self.error.message[:200]!r})"
        shown = ", ".join(f"{fmt_pm(m.f_d_hz, m.f_d_hz_u)} Hz" for m in self.modes[:_REPR_MODES])
        more = f", ... {len(self.modes) - _REPR_MODES} more" if len(self.modes) > _REPR_MODES else ""
        return (
            head + f"sample_rate_hz={fmt_value(self.sample_rate_hz)}, duration_s={fmt_value(self.duration_s)}, "
            f"hits={len(self.hits)}, modes=[{shown}{more}], rejected={len(self.rejected)}, "
            f"warnings={[w.code for w in self.warnings][:_REPR_MODES]})"
        )

    def _repr_html_(self) -> str:
        """The modes as HTML tables, for notebooks (drawn by :mod:`ringdown.render.report`)."""
        from ..render.report import analysis_html  # the one HTML module; imported only when shown

        return analysis_html(self)

    def to_dataframe(self) -> Any:
        """The modes as a pandas DataFrame: one row per mode, one column per scalar key of the
        mode record (:func:`mode_keys`, same names and units), with ``path`` first; ``band_hz``
        becomes ``band_lo_hz`` and ``band_hi_hz``, ``warnings`` the comma-separated codes.
        ``cross_checks`` and ``damping_vs_amplitude`` (nested) are left out. A failed analysis
        gives an empty frame with the same columns.

        pandas is imported here: install it with the ``dataframe`` extra (``ringdown[dataframe]``).
        """
        try:
            import pandas as pd
        except ImportError:
            from ..base.errors import ParameterError

            raise ParameterError(
                "Analysis.to_dataframe needs pandas; install it: pip install 'ringdown[dataframe]'"
            ) from None
        return pd.DataFrame([_mode_row(self.path, m.to_dict()) for m in self.modes], columns=list(_FRAME_COLUMNS))


def lighten(analysis: Analysis) -> Analysis:
    """A copy without arrays (recording, mode traces), cheap to send between processes or to keep
    by the thousand (the block engine's segments)."""

    def light_mode(m):
        cc = {k: replace(e, trace=None) for k, e in m.cross_checks.items()}
        return replace(m, trace=None, cross_checks=cc)

    hits = tuple(replace(h, modes=tuple(light_mode(m) for m in h.modes)) for h in analysis.hits)
    return replace(analysis, recording=None, modes=tuple(light_mode(m) for m in analysis.modes), hits=hits)


def results_document(analyses: Iterable[Analysis]) -> dict:
    """The JSON document ``ringdown analyze --json`` prints for a sequence of analyses."""
    return {
        "tool": {"name": "ringdown", "version": __version__},
        "recordings": [a.to_dict() for a in analyses],
    }


#: How many modes and warning codes ``repr(Analysis)`` lists (the rest are counted), so that it
#: stays under 1 kB whatever the recording holds.
_REPR_MODES = 8

_ESTIMATE_KEYS = (
    "f_d_hz",
    "f_d_hz_u",
    "beta_per_s",
    "beta_per_s_u",
    "fit_start_s",
    "fit_end_s",
    "n_points",
    "converged",
)

_NESTED_KEYS = ("band_hz", "warnings", "cross_checks", "damping_vs_amplitude")
_FRAME_COLUMNS = (
    ("path",) + tuple(k for k in _MODE_KEYS if k not in _NESTED_KEYS) + ("band_lo_hz", "band_hi_hz", "warnings")
)


def _mode_row(path: str | None, d: dict) -> dict:
    """One row of :meth:`Analysis.to_dataframe` from a mode record."""
    row = {k: d[k] for k in _FRAME_COLUMNS if k in d and k not in _NESTED_KEYS}
    band = d["band_hz"] or (None, None)
    row.update(path=path, band_lo_hz=band[0], band_hi_hz=band[1], warnings=",".join(w["code"] for w in d["warnings"]))
    return row


def mode_keys() -> tuple[str, ...]:
    """The keys of every mode record, in order (used by the CSV writer and the tests)."""
    return _MODE_KEYS
