"""Logarithmic decrement by regression of log peak height over many cycles.

The positive peaks of the band-passed real signal inside the fit window are located with
parabolic interpolation; ``ln(peak)`` is regressed on peak time (``ln x_m = c - beta t_m``) and
peak time on peak number (the period). Regressing over all cycles rather than using two peaks
is the robust form of the decrement (Rao, *Mechanical Vibrations*, 2.6: delta = ln(x_0/x_m)/m;
FIELD notes). The log regression is weighted by ``peak^2`` (the variance of ``ln x`` in additive
noise is ``sigma^2 / x^2``); standard errors come from the residual variance and are inflated by
``sum_k rho(k / f_d)``, the band noise's correlation summed over peak spacings, since
neighbouring peaks share noise when the band is narrower than the frequency.
"""

from __future__ import annotations

import math

import numpy as np

from ...base.errors import FitError
from ..bands import Band
from ..results import Estimate
from ._fit import weighted_line
from .base import Window

__all__ = ["estimate", "band_peaks"]

METHOD = "decrement"


def band_peaks(band: Band, window: Window) -> tuple[np.ndarray, np.ndarray]:
    """Times (s) and heights of the positive peaks of ``band.real`` inside ``window``.

    Returns
    -------
    t_s, height : (m,) ndarray of float
    """
    if band.real is None or band.real_rate is None:
        raise FitError("log decrement needs the band-passed real signal (extract_band(..., real=True))")
    fs = band.real_rate
    i0 = max(int(math.floor((window.start_s - band.t0_s) * fs)), 1)
    i1 = min(int(math.ceil((window.end_s - band.t0_s) * fs)), band.real.shape[0] - 2)
    x = band.real
    seg = x[i0 - 1 : i1 + 2]
    k = np.flatnonzero((seg[1:-1] > seg[:-2]) & (seg[1:-1] >= seg[2:]) & (seg[1:-1] > 0)) + 1
    a, b, c = seg[k - 1], seg[k], seg[k + 1]
    den = a - 2 * b + c
    off = np.where(den != 0, 0.5 * (a - c) / np.where(den != 0, den, 1.0), 0.0)
    off = np.clip(off, -0.5, 0.5)
    h = b - 0.25 * (a - c) * off
    t = band.t0_s + (i0 - 1 + k + off) / fs
    return t, h


def estimate(band: Band, window: Window) -> list[Estimate]:
    """Log-decrement estimate of one mode inside ``window``.

    Returns
    -------
    list of one Estimate (``method="decrement"``).

    Raises
    ------
    FitError
        Fewer than 4 peaks, or peaks that do not decay.
    """
    t, h = band_peaks(band, window)
    if t.shape[0] < 4:
        raise FitError(f"log decrement found {t.shape[0]} peaks in the fit window; need >= 4")
    # one peak per cycle: drop spurious extra maxima closer than 0.6 of the median spacing
    dt = np.diff(t)
    med = float(np.median(dt))
    keep = np.concatenate(([True], dt > 0.6 * med))
    t, h = t[keep], h[keep]
    m = np.arange(t.shape[0], dtype=float)
    infl = max(1.0, band.noise_correlation_sum(t.shape[0], med))
    t0 = float(t[0])
    ln_a, slope, cov, rms = weighted_line(t - t0, np.log(h), (h / h.max()) ** 2, inflation=infl)
    beta = -slope
    if not beta > 0:
        raise FitError(f"peaks do not decay in the window (fitted beta = {beta:.4g} 1/s)")
    _, period, cov_t, _ = weighted_line(m, t - t0, (h / h.max()) ** 2, inflation=infl)
    f_d = 1.0 / period
    f_u = math.sqrt(cov_t[1, 1]) / period**2
    return [
        Estimate(
            method=METHOD,
            f_d_hz=float(f_d),
            f_d_hz_u=float(f_u),
            beta_per_s=float(beta),
            beta_per_s_u=float(math.sqrt(cov[1, 1])),
            amplitude=float(math.exp(ln_a)),
            fit_start_s=float(t[0]),
            fit_end_s=float(t[-1]),
            n_points=int(t.shape[0]),
            residual_rms=rms,
            converged=True,
        )
    ]
