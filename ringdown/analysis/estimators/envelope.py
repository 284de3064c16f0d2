"""Hilbert-envelope estimator: weighted log-linear fit of the decay, frequency from the phase.

On the band's complex envelope ``z`` inside the fit window, ``ln|z| = ln A - beta t`` is fitted
by least squares with weights ``|z|^2`` (the variance of ``ln|z|`` in additive noise is
``sigma^2 / (2 |z|^2)``), and the unwrapped phase ``arg z = phi + 2 pi (f_d - f_shift) t`` with
the same weights. Standard uncertainties are the least-squares covariances scaled by the
residual variance and inflated by ``sum_k rho(k / fs)``, the band noise's correlation summed
over sample lags (about ``fs / bandwidth``), since ``z`` is oversampled.

References
----------
M. Feldman, *Hilbert Transform Applications in Mechanical Vibration*, Wiley, 2011, ch. 3-4.
ISO 3382-2:2008 (decay fitting by linear regression on a level scale, 10 dB margin above noise).
"""

from __future__ import annotations

import math

import numpy as np

from ...base.errors import FitError
from ..bands import Band
from ..results import Estimate, ModeTrace
from ._fit import weighted_line
from .base import Window

__all__ = ["estimate"]

METHOD = "envelope"


def estimate(band: Band, window: Window) -> list[Estimate]:
    """Fit one mode's envelope decay and phase slope inside ``window``.

    Parameters
    ----------
    band : Band
        Complex envelope of the mode (``noise_rms`` set by the pipeline).
    window : Window
        Fit window, seconds from the start of the recording.

    Returns
    -------
    list of one Estimate (``method="envelope"``), with a ``ModeTrace`` for plots.

    Raises
    ------
    FitError
        Fewer than 4 samples in the window, or a decay that does not fall.
    """
    sl = window.indices(band)
    z = band.z[sl]
    t = band.t_s[sl]
    if z.shape[0] < 4:
        raise FitError(
            f"envelope fit window {window.start_s:.4g}-{window.end_s:.4g} s holds {z.shape[0]} samples; need >= 4"
        )
    amp = np.abs(z)
    if np.any(amp <= 0):
        raise FitError("envelope is zero inside the fit window")
    infl = max(1.0, band.noise_correlation_sum(z.shape[0], 1.0 / band.sample_rate))
    w = amp**2 / np.max(amp) ** 2
    t0 = float(t[0])
    ln_a, slope, cov, rms = weighted_line(t - t0, np.log(amp), w, inflation=infl)
    beta = -slope
    if not beta > 0:
        raise FitError(f"envelope does not decay in the window (fitted beta = {beta:.4g} 1/s)")
    phase = np.unwrap(np.angle(z))
    _, w_rad, cov_p, _ = weighted_line(t - t0, phase, w, inflation=infl)
    f_d = band.f_shift_hz + w_rad / (2 * math.pi)
    trace = ModeTrace(
        t_s=band.t_s,
        envelope=np.abs(band.z),
        fit_start_s=float(t[0]),
        fit_end_s=float(t[-1]),
        noise_floor=float(band.noise_rms or 0.0),
        fit_amplitude=float(math.exp(ln_a)),
        fit_beta_per_s=float(beta),
        fit_t0_s=t0,
    )
    return [
        Estimate(
            method=METHOD,
            f_d_hz=float(f_d),
            f_d_hz_u=float(math.sqrt(cov_p[1, 1]) / (2 * math.pi)),
            beta_per_s=float(beta),
            beta_per_s_u=float(math.sqrt(cov[1, 1])),
            cov_f_beta=0.0,
            amplitude=float(math.exp(ln_a)),
            fit_start_s=float(t[0]),
            fit_end_s=float(t[-1]),
            n_points=int(z.shape[0]),
            residual_rms=rms,
            converged=True,
            trace=trace,
        )
    ]
