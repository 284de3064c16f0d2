"""Fast decays fitted on the record itself: real damped cosines by nonlinear least squares.

A heavily damped mode (damping ratio of several per cent up to ~20 %, Q down to ~3) has a
half-power bandwidth ``beta / pi`` comparable to its frequency. A band filter narrow enough to
exclude DC and the mode's own negative-frequency image is then too narrow for the mode: a
zero-phase filter biases the decay unless its bandwidth is at least ~1.8x the half-power
bandwidth (Jacobsen & Rindel, J. Sound Vib. 117, 1987 [from memory]), and the filter's settling
eats the few cycles such a mode has. This estimator therefore fits the real samples from the hit
onset on, without any filter::

    x[n] = sum_k exp(-beta_k t_n) (a_k cos(2 pi f_k t_n) + b_k sin(2 pi f_k t_n)) + noise

plus a constant and a straight line (what the record's drift removal leaves over a short window),
for the target modes and every other mode that carries energy in the same window (nuisance
modes, fitted jointly and not reported from here). The linear amplitudes are solved inside the
nonlinear least squares (variable projection, Golub & Pereyra 1973 [from memory]), started from
the candidates' poles. A long window is thinned by keeping every ``D``-th sample (``D`` the
smallest that keeps at most ``MAX_SAMPLES``): a pole maps to ``exp(p D / fs)`` whatever its
frequency, so aliasing moves no parameter, and the noise covariance follows from the measured
noise spectrum.

Covariance (Kay 1993, ch. 8 [from memory]): ``A^-1 B A^-1`` with ``A = J^T J``,
``B = J^T R J``, ``R`` the noise covariance of the thinned samples from the measured noise
spectrum, scaled so that its variance matches the fit's residual variance.
"""

from __future__ import annotations

import math

import numpy as np

from ...base._lazy import lazy_module
from ...base.errors import FitError
from ..results import Estimate

scipy_linalg = lazy_module("scipy.linalg")
scipy_optimize = lazy_module("scipy.optimize")

__all__ = ["estimate_real", "MAX_SAMPLES"]

#: Most samples one fit uses (thinned beyond): keeps the least squares at a few tens of ms.
MAX_SAMPLES = 1024


def _basis(beta: np.ndarray, omega: np.ndarray, t: np.ndarray) -> np.ndarray:
    """(n, 2K + 2) columns: exp(-beta t) cos, exp(-beta t) sin per mode, then 1 and t (what the
    record's drift removal leaves of a slow trend over a short window)."""
    e = np.exp(-np.outer(t, beta))
    ph = np.outer(t, omega)
    span = max(float(t[-1]), 1e-300)
    return np.concatenate([e * np.cos(ph), e * np.sin(ph), np.ones((t.shape[0], 1)), (t / span)[:, None]], axis=1)


def _noise_acf(noise_f: np.ndarray, noise_p: np.ndarray, fs: float, step: int, n: int) -> np.ndarray:
    """Autocorrelation of the noise at lags ``0, step, 2 step, ...`` (n lags) samples at rate
    ``fs``, normalised to 1 at lag 0, from the one-sided PSD (Wiener-Khinchin)."""
    m = 1 << int(math.ceil(math.log2(max(4 * n * step, 1024))))
    f = np.fft.rfftfreq(m, 1.0 / fs)
    s = np.interp(f, noise_f[1:], noise_p[1:])
    r = np.fft.irfft(s, m)
    lags = np.arange(n) * step
    lags = lags[lags < m // 2]
    out = np.zeros(n)
    out[: lags.shape[0]] = r[lags] / r[0]
    return out


def estimate_real(
    seg: np.ndarray,
    sample_rate: float,
    *,
    t0_s: float,
    poles: list[tuple[float, float]],
    n_targets: int,
    duration_s: float,
    noise_f: np.ndarray,
    noise_p: np.ndarray,
) -> list[Estimate]:
    """Fit real damped cosines to the record from its decay start.

    Parameters
    ----------
    seg : (n,) ndarray of float
        The conditioned record from the decay start (hit onset or end of clipping) on.
    sample_rate : float, Hz
    t0_s : float
        Time of ``seg[0]`` from the recording start, s.
    poles : list of (f_hz, beta_per_s)
        Starting values: the targets first, then the nuisance modes.
    n_targets : int
        How many of ``poles`` (the first) are reported.
    duration_s : float
        Length of the fit window from ``seg[0]``, s.
    noise_f, noise_p : (k,) ndarray of float
        Measured one-sided noise PSD (Hz, units^2/Hz).

    Returns
    -------
    list of Estimate
        One per target whose fit converged to a decaying mode, ``method="pencil"``; amplitudes
        refer to ``t0_s``.

    Raises
    ------
    FitError
        Too few samples for the number of modes, or the least squares failed.
    """
    fs = float(sample_rate)
    n_full = min(seg.shape[0], max(int(round(duration_s * fs)), 1))
    step = max(1, int(math.ceil(n_full / MAX_SAMPLES)))
    y = np.asarray(seg[:n_full:step], dtype=np.float64)
    n = y.shape[0]
    k = len(poles)
    if n < 4 * k + 10:
        raise FitError(f"{n} samples from {t0_s:.4g} s cannot fit {k} damped cosine(s); the decay is too short")
    t = np.arange(n) * (step / fs)
    dt = step / fs
    x0 = np.empty(2 * k)
    x0[0::2] = np.array([p[1] for p in poles]) * dt
    x0[1::2] = np.array([2.0 * math.pi * p[0] for p in poles]) * dt

    # growth is capped at e^20 over the window so that a trial pole can never overflow the basis
    floor = -20.0 / max(float(t[-1]), dt)

    def unpack(x):
        return np.maximum(x[0::2] / dt, floor), x[1::2] / dt

    def resid(x):
        b, w = unpack(x)
        phi = _basis(b, w, t)
        c, *_ = np.linalg.lstsq(phi, y, rcond=None)
        return y - phi @ c

    try:
        res = scipy_optimize.least_squares(
            resid, x0, method="lm", x_scale="jac", xtol=1e-12, ftol=1e-12, gtol=1e-12, max_nfev=10 * (2 * k + 1)
        )
    except (np.linalg.LinAlgError, ValueError) as exc:
        raise FitError(f"the fit of the record from {t0_s:.4g} s failed ({exc})") from exc
    beta, omega = unpack(res.x)
    phi = _basis(beta, omega, t)
    c, *_ = np.linalg.lstsq(phi, y, rcond=None)
    r = y - phi @ c
    # Jacobian of the model in (beta_k, f_k, a_k, b_k) for the covariance
    jac = np.empty((n, 4 * k + 2))
    e = np.exp(-np.outer(t, beta))
    cs, sn = np.cos(np.outer(t, omega)), np.sin(np.outer(t, omega))
    for i in range(k):
        a_i, b_i = c[i], c[k + i]
        m_i = e[:, i] * (a_i * cs[:, i] + b_i * sn[:, i])
        jac[:, 4 * i] = -t * m_i
        jac[:, 4 * i + 1] = 2.0 * math.pi * t * e[:, i] * (-a_i * sn[:, i] + b_i * cs[:, i])
        jac[:, 4 * i + 2] = e[:, i] * cs[:, i]
        jac[:, 4 * i + 3] = e[:, i] * sn[:, i]
    jac[:, 4 * k] = 1.0
    jac[:, 4 * k + 1] = t / max(float(t[-1]), 1e-300)
    dof = n - 4 * k - 2
    s2 = float(np.sum(r * r)) / max(dof, 1)
    acf = _noise_acf(noise_f, noise_p, fs, step, n)
    a = jac.T @ jac
    rj = scipy_linalg.matmul_toeplitz((acf, acf), jac)
    bmat = s2 * (jac.T @ rj)
    try:
        ainv = np.linalg.inv(a)
    except np.linalg.LinAlgError:
        ainv = np.linalg.pinv(a)
    cov = ainv @ bmat @ ainv
    converged = bool(res.success) and res.status > 0
    out = []
    for i in range(n_targets):
        if not (beta[i] > 0 and omega[i] > 0 and omega[i] / (2 * math.pi) < fs / 2.0):
            continue
        amp = float(math.hypot(c[i], c[k + i]))
        out.append(
            Estimate(
                method="pencil",
                f_d_hz=float(omega[i] / (2 * math.pi)),
                f_d_hz_u=float(math.sqrt(max(cov[4 * i + 1, 4 * i + 1], 0.0))),
                beta_per_s=float(beta[i]),
                beta_per_s_u=float(math.sqrt(max(cov[4 * i, 4 * i], 0.0))),
                cov_f_beta=float(cov[4 * i, 4 * i + 1]),
                amplitude=amp,
                fit_start_s=float(t0_s),
                fit_end_s=float(t0_s + t[-1]),
                n_points=int(n),
                residual_rms=float(math.sqrt(s2)),
                converged=converged,
            )
        )
    return out
