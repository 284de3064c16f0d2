"""Half-power bandwidth of the spectral peak, as a cross-check.

The power spectrum of the band's complex envelope from the window start to the end of the
segment (the whole remaining decay, then noise) is a Lorentzian
``P(f) = P0 / (1 + ((f - f_d) / g)^2) + floor`` with half width at half power
``g = beta / (2 pi)``; the full half-power bandwidth is ``delta_f = beta / pi`` and
``Q ~ f / delta_f`` (Inman, *Engineering Vibration*, half-power method). The Lorentzian is
fitted by nonlinear least squares (``scipy.optimize.curve_fit``, analytic Jacobian) over the peak.

A record shorter than about ``5 / (eta f)`` puts fewer than five bins across the peak; then the
estimate is resolution-limited and carries the warning ``insufficient_resolution``.
"""

from __future__ import annotations

import math

import numpy as np

from ...base.errors import FitError
from ..bands import Band
from ..results import Estimate, Notice
from .base import Window

__all__ = ["estimate"]

METHOD = "half_power"
_PAD = 4


def _lorentz(f, p0, f0, g, floor):
    """The Lorentzian ``p0 / (1 + ((f - f0) / g)^2) + floor`` at frequencies ``f`` (m,), Hz."""
    return p0 / (1.0 + ((f - f0) / g) ** 2) + floor


def _lorentz_jac(f, p0, f0, g, floor):
    """(m, 4) derivatives of :func:`_lorentz` in ``(p0, f0, g, floor)``: with ``u = (f - f0) / g``
    and ``d = 1 + u^2``, ``(1 / d, 2 p0 u / (g d^2), 2 p0 u^2 / (g d^2), 1)`` [derived]."""
    u = (f - f0) / g
    d = 1.0 + u * u
    w = 2.0 * p0 / (g * d * d)
    return np.column_stack([1.0 / d, w * u, w * u * u, np.ones_like(u)])


def estimate(band: Band, window: Window) -> list[Estimate]:
    """Half-power (Lorentzian) estimate of one mode from its band spectrum.

    Returns
    -------
    list of one Estimate (``method="half_power"``).

    Raises
    ------
    FitError
        When the Lorentzian fit fails or gives a non-positive width.
    """
    i0 = band.index_of(window.start_s)
    z = band.z[i0:]
    n = z.shape[0]
    if n < 8:
        raise FitError(f"half-power method needs >= 8 samples after the window start; got {n}")
    nfft = 1 << int(math.ceil(math.log2(_PAD * n)))
    spec = np.fft.fftshift(np.fft.fft(z, nfft))
    f = band.f_shift_hz + np.fft.fftshift(np.fft.fftfreq(nfft, 1.0 / band.sample_rate))
    p = np.abs(spec) ** 2
    inside = (f >= band.f_lo_hz) & (f <= band.f_hi_hz)
    if not inside.any():
        raise FitError("no spectrum bins inside the band")
    k = int(np.flatnonzero(inside)[np.argmax(p[inside])])
    half = p[k] / 2.0
    lo = k
    while lo > 0 and p[lo] > half:
        lo -= 1
    hi = k
    while hi < nfft - 1 and p[hi] > half:
        hi += 1
    df = f[1] - f[0]
    g0 = max((hi - lo) * df / 2.0, df)
    sel = (f >= f[k] - 5 * g0) & (f <= f[k] + 5 * g0)
    if sel.sum() < 6:
        raise FitError("too few spectrum bins across the peak for a half-power fit")
    from scipy.optimize import curve_fit

    try:
        popt, pcov = curve_fit(
            _lorentz, f[sel], p[sel], p0=(p[k], f[k], g0, float(np.min(p[sel]))), jac=_lorentz_jac, maxfev=4000
        )
    except (RuntimeError, ValueError) as exc:
        raise FitError(f"half-power Lorentzian fit did not converge: {exc}") from exc
    p0, f0, g, _ = popt
    g = abs(g)
    if not (g > 0 and np.all(np.isfinite(pcov))):
        raise FitError("half-power fit gave no usable width")
    # zero-padding correlates neighbouring bins: _PAD bins per independent one
    u = np.sqrt(np.diag(pcov) * _PAD)
    beta = 2 * math.pi * g
    warnings: tuple[Notice, ...] = ()
    resolution = band.sample_rate / n
    if 2 * g < 5 * resolution:
        warnings = (
            Notice(
                "insufficient_resolution",
                f"half-power bandwidth {2 * g:.3g} Hz spans fewer than 5 frequency bins of the record "
                f"({resolution:.3g} Hz each); the half-power figure is resolution-limited",
            ),
        )
    return [
        Estimate(
            method=METHOD,
            f_d_hz=float(f0),
            f_d_hz_u=float(u[1]),
            beta_per_s=float(beta),
            beta_per_s_u=float(2 * math.pi * u[2]),
            amplitude=None,
            fit_start_s=float(band.t_s[i0]),
            fit_end_s=float(band.t_s[-1]),
            n_points=int(sel.sum()),
            residual_rms=None,
            converged=True,
            warnings=warnings,
        )
    ]
