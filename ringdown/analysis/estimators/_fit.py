"""Small weighted least-squares helpers shared by the estimators."""

from __future__ import annotations

import math

import numpy as np

from ...base._lazy import lazy_module
from ...base.errors import FitError

scipy_stats = lazy_module("scipy.stats")


def growing_text(poles: list[tuple[float, float]]) -> str:
    """``"F Hz (beta = B 1/s), ..."`` for fitted poles ``(f_hz, beta_per_s)`` that grow (at most
    three shown): the one wording of a fit that found no decay, used by every estimator."""
    return ", ".join(f"{f:.6g} Hz (beta = {b:.3g} 1/s)" for f, b in poles[:3])


#: why a fit may come out growing (said after the poles)
GROWING_WHY = "(a steady tone, or a decay too slow for the window)"


def weighted_line(t: np.ndarray, y: np.ndarray, w: np.ndarray, *, inflation: float = 1.0):
    """Weighted least-squares line ``y = a + b t``.

    Parameters
    ----------
    t, y, w : (n,) ndarray of float, n >= 3; ``w`` >= 0 are weights (1 / variance up to scale)
    inflation : float >= 1
        Factor on the covariance for correlated residuals (samples per independent sample).

    Returns
    -------
    a, b : float
    cov : (2, 2) ndarray
        Covariance of ``(a, b)`` scaled by the weighted residual variance (the usual
        "unknown sigma" least-squares covariance, e.g. Press et al., Numerical Recipes, 15.4).
    rms : float
        Unweighted RMS of the residuals.
    """
    n = t.shape[0]
    if n < 3:
        raise FitError(f"a line fit needs at least 3 points; got {n}")
    tc = t.mean()
    A = np.column_stack([np.ones(n), t - tc])
    Aw = A * w[:, None]
    ata = A.T @ Aw
    try:
        inv = np.linalg.inv(ata)
    except np.linalg.LinAlgError as exc:
        raise FitError("line fit is singular (all points at one time)") from exc
    coef = inv @ (Aw.T @ y)
    r = y - A @ coef
    s2 = float(np.sum(w * r**2) / (n - 2))
    cov = inv * s2 * inflation
    # back to intercept at t = 0
    J = np.array([[1.0, -tc], [0.0, 1.0]])
    coef0 = J @ coef
    cov0 = J @ cov @ J.T
    return float(coef0[0]), float(coef0[1]), cov0, float(np.sqrt(np.mean(r**2)))


#: Independent periodogram bins the residual's spectrum is averaged over (chi-square with twice
#: as many degrees of freedom; common practice, no source).
EXCESS_BINS = 9
#: Chance that noise alone gives a significant excess anywhere in one fit's residual spectrum
#: (the threshold is corrected for the number of independent averages looked at).
EXCESS_FALSE_ALARM = 0.01


def residual_excess_acf(r: np.ndarray, model_acf: np.ndarray, dof: float) -> np.ndarray | None:
    """Autocovariance (n lags) of the part of the residual ``r`` (n,) that the noise model of
    autocovariance ``model_acf`` (n,) does not explain, or None where there is none.

    ``r`` real (the raw fit) or complex (a band's envelope, :mod:`.pencil`; ``model_acf`` then
    ``E[w_{j+k} w_j^*]``, the spectrum two-sided). Both spectra are taken on the same grid (2n
    points and more): the residual's periodogram ``|FFT r|^2 / n`` and its expectation under
    the model, ``sum_k (1 - |k|/n) R(k) e^{-i w k}`` (Bartlett-weighted: exact for the
    periodogram's mean), each averaged over ``EXCESS_BINS`` independent bins. Where the averaged
    periodogram exceeds the model by more than the chi-square quantile of ``2 EXCESS_BINS``
    degrees of freedom at ``1 - EXCESS_FALSE_ALARM`` divided by the number of independent
    averages (a per-fit family-wise false alarm), the difference is kept; its inverse transform
    is returned (Wiener-Khinchin)."""
    n = r.shape[0]
    if n < 4 * EXCESS_BINS or dof < 4 * EXCESS_BINS:
        return None
    cplx = np.iscomplexobj(r) or np.iscomplexobj(model_acf)
    m = 1 << int(math.ceil(math.log2(2 * n)))
    per_bin = m / n  # grid points per independent periodogram bin
    lags = np.arange(n)
    taper = model_acf * (1.0 - lags / n)
    seq = np.zeros(m, dtype=complex if cplx else float)
    seq[:n] = taper
    seq[m - n + 1 :] = np.conj(taper[1:])[::-1]
    if cplx:
        s_model = np.maximum(np.real(np.fft.fft(seq)), 0.0)
        s_resid = np.abs(np.fft.fft(r, m)) ** 2 / n
    else:
        s_model = np.maximum(np.real(np.fft.rfft(seq)), 0.0)
        s_resid = np.abs(np.fft.rfft(r, m)) ** 2 / n
    width = max(int(round(EXCESS_BINS * per_bin)), 1)
    kernel = np.ones(width) / width
    if cplx:  # the two-sided spectrum is circular: average across its wrap too
        pad = width // 2 + 1
        p_avg = np.convolve(np.r_[s_resid[-pad:], s_resid, s_resid[:pad]], kernel, mode="same")[pad:-pad]
        m_avg = np.convolve(np.r_[s_model[-pad:], s_model, s_model[:pad]], kernel, mode="same")[pad:-pad]
    else:
        p_avg = np.convolve(s_resid, kernel, mode="same")
        m_avg = np.convolve(s_model, kernel, mode="same")
    looks = max(n / (EXCESS_BINS if cplx else 2.0 * EXCESS_BINS), 1.0)
    q = float(scipy_stats.chi2.ppf(1.0 - EXCESS_FALSE_ALARM / looks, 2 * EXCESS_BINS)) / (2 * EXCESS_BINS)
    excess = np.where(p_avg > q * m_avg, p_avg - m_avg, 0.0)
    if not np.any(excess > 0.0):
        return None
    if cplx:
        return np.fft.ifft(excess)[:n]
    return np.fft.irfft(excess, m)[:n]
