"""The one interface every estimator implements.

An estimator is a function::

    estimate(band: Band, window: Window) -> list[Estimate]

It receives one band's complex envelope (:class:`ringdown.bands.Band`, with ``noise_rms`` set)
and the fit window the pipeline chose, and returns what it found there: one ``Estimate`` for a
single-mode method, possibly several for a method that resolves close modes jointly (the
parametric one). It raises :class:`ringdown.errors.FitError` when it cannot produce a result.
Estimators never read files, print or plot. Register a new one in ``ESTIMATORS``
(``ringdown/estimators/__init__.py``).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

from ..bands import Band
from ..results import Estimate

__all__ = ["Window", "EstimatorFn"]


@dataclass(frozen=True, slots=True)
class Window:
    """The part of a band's envelope a fit may use.

    Attributes
    ----------
    start_s, end_s : float
        Seconds from the start of the recording; ``start_s`` is after the onset and the band
        filter's settling, ``end_s`` where the mode is still ``min_snr_db`` above the noise.
    onset_s : float
        Time of the hit (amplitudes are referred to the window start, not the onset).
    model_end_s : float or None
        A later end for estimators that fit the complex envelope itself (no logarithm, so no
        low-SNR bias): where the mode falls to its band noise (0 dB), or the end of the decay.
        Samples down there still carry information to a least-squares fit. ``None``: use
        ``end_s``.
    """

    start_s: float
    end_s: float
    onset_s: float
    model_end_s: float | None = None

    def for_model_fit(self) -> Window:
        """The window a direct (non-logarithmic) fit of the envelope may use."""
        if self.model_end_s is None or self.model_end_s <= self.end_s:
            return self
        return Window(self.start_s, self.model_end_s, self.onset_s, None)

    def indices(self, band: Band) -> slice:
        """Slice of ``band.z`` inside the window (end inclusive)."""
        return slice(band.index_of(self.start_s), band.index_of(self.end_s) + 1)


EstimatorFn = Callable[[Band, Window], Sequence[Estimate]]
