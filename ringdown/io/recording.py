"""The ``Recording``: one channel of samples with its sample rate and where it came from."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..base.errors import InputError, ParameterError

__all__ = ["Recording"]


@dataclass(frozen=True, slots=True, eq=False)
class Recording:
    """One channel of a ring-down record, ready for analysis.

    Attributes
    ----------
    samples : (n_samples,) ndarray of float64
        The signal, in the file's units (full scale = 1.0 for audio files).
    sample_rate : float, > 0, Hz
    channel : str
        Channel name: ``"1"``-based index for audio files, the column header for text files,
        the channel, variable or dataset name for the formats of :mod:`ringdown.io.formats`
        (``"group/channel"`` for TDMS).
    path : str or None
        Source file, ``None`` for an array given directly.
    sha256 : str or None
        SHA-256 of the source file's bytes (hex), ``None`` for an array.
    full_scale : float or None
        Largest magnitude the source could hold (1.0 for integer audio); ``None`` when unknown
        (float audio, text files). Used to recognise clipping.
    timing_jitter : float or None
        For text files with a time column: RMS deviation of the time steps from their mean,
        as a fraction of the mean step.
    n_channels : int
        How many channels (audio) or data columns (text) the source holds; 1 for an array.
    notes : tuple of (code, message)
        Warnings the reader found about the file (e.g. ``truncated``); the analysis reports them.
    unit : str or None
        Unit of the samples as the file states it (``"m/s^2"``, ``"V"``); ``None`` when unknown.
    """

    samples: np.ndarray
    sample_rate: float
    channel: str = "1"
    path: str | None = None
    sha256: str | None = None
    full_scale: float | None = None
    timing_jitter: float | None = None
    n_channels: int = 1
    notes: tuple = ()
    unit: str | None = None

    def __post_init__(self) -> None:
        x = np.asarray(self.samples, dtype=np.float64)
        where = f" in {self.path!r}" if self.path else ""
        if x.ndim != 1:
            raise InputError(f"samples{where} must be one channel (1-D); got shape {x.shape}")
        if not (
            isinstance(self.sample_rate, (int, float, np.number))
            and math.isfinite(self.sample_rate)
            and self.sample_rate > 0
        ):
            raise ParameterError(f"sample rate{where} must be a finite number > 0 Hz; got {self.sample_rate!r}")
        if not np.all(np.isfinite(x)):
            bad = int(np.count_nonzero(~np.isfinite(x)))
            raise InputError(f"samples{where} hold {bad} NaN or infinite value(s); clean or cut them")
        object.__setattr__(self, "samples", x)
        object.__setattr__(self, "sample_rate", float(self.sample_rate))

    @property
    def n_samples(self) -> int:
        return int(self.samples.shape[0])

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.sample_rate

    @property
    def name(self) -> str:
        """File name for messages, or ``"<array>"``."""
        return self.path if self.path else "<array>"
