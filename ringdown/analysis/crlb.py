"""Cramer-Rao lower bound for one exponentially damped sinusoid in white Gaussian noise.

The model is the real signal::

    s[n] = A exp(-beta t_n) cos(2 pi f t_n + phi),   t_n = n / sample_rate,  n = 0 .. N-1

observed in additive white Gaussian noise of variance ``sigma^2``. With the parameter vector
``theta = (A, beta, f, phi)`` the Fisher information is (Kay 1993, eq. 3.33 [from memory])::

    F_ij = (1 / sigma^2) sum_n (ds[n]/dtheta_i) (ds[n]/dtheta_j)

and no unbiased estimator has a variance below ``diag(F^-1)``. The partial derivatives are::

    ds/dA    =  exp(-beta t) cos(2 pi f t + phi)
    ds/dbeta = -t A exp(-beta t) cos(2 pi f t + phi)
    ds/df    = -2 pi t A exp(-beta t) sin(2 pi f t + phi)
    ds/dphi  = -A exp(-beta t) sin(2 pi f t + phi)

For light damping and a record much longer than the decay time, the bound on the decay rate and
on the angular frequency, both in units of the sample interval T, tends to
``var(beta T) ~ var(omega T) ~ 8 (beta T)^3 / eta`` with ``eta = A^2 / (2 sigma^2)`` the onset
signal-to-noise ratio.

References
----------
S. M. Kay, *Fundamentals of Statistical Signal Processing, Volume I: Estimation Theory*,
Prentice Hall, 1993, ch. 3 (the Cramer-Rao bound for a signal in white Gaussian noise).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..base.errors import ParameterError

__all__ = ["CramerRao", "crlb_damped_sinusoid"]


@dataclass(frozen=True, slots=True)
class CramerRao:
    """Lower bounds on the standard deviations of unbiased estimates of one damped sinusoid.

    Attributes
    ----------
    amplitude : float
        Bound on the standard deviation of ``A``, in the signal's units.
    beta_per_s : float
        Bound on the standard deviation of the decay rate, 1/s.
    f_hz : float
        Bound on the standard deviation of the frequency, Hz.
    phase_rad : float
        Bound on the standard deviation of the phase, rad.
    cov_f_beta : float
        The (f, beta) element of the inverse Fisher matrix, Hz/s.
    snr_db : float
        Onset signal-to-noise ratio ``10 log10(A^2 / (2 sigma^2))``, dB.
    """

    amplitude: float
    beta_per_s: float
    f_hz: float
    phase_rad: float
    cov_f_beta: float
    snr_db: float

    def to_dict(self) -> dict:
        return {
            "amplitude": self.amplitude,
            "beta_per_s": self.beta_per_s,
            "f_hz": self.f_hz,
            "phase_rad": self.phase_rad,
            "cov_f_beta": self.cov_f_beta,
            "snr_db": self.snr_db,
        }


def _check_positive(name: str, value: float, unit: str) -> float:
    v = float(value)
    if not math.isfinite(v) or v <= 0.0:
        raise ParameterError(f"{name} must be a finite number > 0 {unit}, got {value!r}; give a positive value")
    return v


def crlb_damped_sinusoid(
    *,
    n_samples: int,
    sample_rate: float,
    amplitude: float,
    beta_per_s: float,
    f_hz: float,
    phase_rad: float,
    noise_sigma: float,
) -> CramerRao:
    """Cramer-Rao bound for the parameters of a real damped sinusoid in white Gaussian noise.

    Parameters
    ----------
    n_samples : int, >= 4
        Number of samples ``N`` of the record (the first at the onset, ``t = 0``).
    sample_rate : float, > 0, Hz
    amplitude : float, > 0
        Onset amplitude ``A``, signal units.
    beta_per_s : float, >= 0, 1/s
        Decay rate (0 gives the bound for an undamped sinusoid).
    f_hz : float, 0 < f_hz < sample_rate / 2, Hz
    phase_rad : float, rad
    noise_sigma : float, > 0
        Standard deviation of the white noise per sample, signal units.

    Returns
    -------
    CramerRao
        Square roots of the diagonal of the inverse Fisher matrix, plus the (f, beta) covariance.

    Raises
    ------
    ParameterError
        For a non-positive or non-finite input, a frequency outside (0, Nyquist), or a Fisher
        matrix that is singular (too few samples to identify four parameters).

    Notes
    -----
    The Fisher matrix is built in scaled parameters (frequency and decay rate in units of the
    sample rate) so that its 4x4 inverse is well conditioned; the bound is then scaled back.

    References
    ----------
    S. M. Kay, *Fundamentals of Statistical Signal Processing I*, 1993, eq. 3.33 [from memory].

    Examples
    --------
    >>> b = crlb_damped_sinusoid(n_samples=1000, sample_rate=1.0, amplitude=math.sqrt(200.0),
    ...                          beta_per_s=0.005, f_hz=0.1, phase_rad=0.3, noise_sigma=1.0)
    >>> round(b.beta_per_s, 8)
    9.997e-05
    """
    n, fs, a, sigma = _checked_record(n_samples, sample_rate, amplitude, noise_sigma)
    beta, f, phi = _checked_pole(beta_per_s, f_hz, phase_rad, fs)
    cov = _inverse_fisher(n, a, beta / fs, f / fs, phi, sigma)
    d = np.diag(cov)
    # back to physical units: beta = b fs, f = nu fs
    return CramerRao(
        amplitude=float(math.sqrt(d[0])),
        beta_per_s=float(math.sqrt(d[1]) * fs),
        f_hz=float(math.sqrt(d[2]) * fs),
        phase_rad=float(math.sqrt(d[3])),
        cov_f_beta=float(cov[1, 2] * fs * fs),
        snr_db=float(10.0 * math.log10(a * a / (2.0 * sigma * sigma))),
    )


def _checked_record(
    n_samples: int, sample_rate: float, amplitude: float, noise_sigma: float
) -> tuple[int, float, float, float]:
    """(n, fs, A, sigma) checked: an integer count >= 4 and three finite positive numbers."""
    n = int(n_samples)
    if n != n_samples or n < 4:
        raise ParameterError(f"n_samples must be an integer >= 4, got {n_samples!r}; give a longer record")
    fs = _check_positive("sample_rate", sample_rate, "Hz")
    a = _check_positive("amplitude", amplitude, "(signal units)")
    sigma = _check_positive("noise_sigma", noise_sigma, "(signal units)")
    return n, fs, a, sigma


def _checked_pole(beta_per_s: float, f_hz: float, phase_rad: float, fs: float) -> tuple[float, float, float]:
    """(beta, f, phase) checked: beta finite and >= 0, f inside (0, Nyquist), a finite phase."""
    beta = float(beta_per_s)
    if not math.isfinite(beta) or beta < 0.0:
        raise ParameterError(f"beta_per_s must be finite and >= 0 1/s, got {beta_per_s!r}; give a decay rate")
    f = float(f_hz)
    if not math.isfinite(f) or not (0.0 < f < fs / 2.0):
        raise ParameterError(
            f"f_hz must lie in (0, {fs / 2.0:g}) Hz (Nyquist), got {f_hz!r}; give a frequency below Nyquist"
        )
    phi = float(phase_rad)
    if not math.isfinite(phi):
        raise ParameterError(f"phase_rad must be finite, got {phase_rad!r}; give a phase in radians")
    return beta, f, phi


def _inverse_fisher(n: int, a: float, b: float, nu: float, phi: float, sigma: float) -> np.ndarray:
    """(4, 4) inverse Fisher matrix of (A, b, nu, phi) for ``n`` samples, decay ``b`` and frequency
    ``nu`` in units of the sample rate; ParameterError when it is (numerically) singular."""
    # Work in sample units: k = n (t = k T), b = beta T, nu = f T; derivatives w.r.t. (A, b, nu, phi).
    k = np.arange(n, dtype=np.float64)
    env = np.exp(-b * k)
    arg = 2.0 * np.pi * nu * k + phi
    c = env * np.cos(arg)
    s = env * np.sin(arg)
    jac = np.stack([c, -k * a * c, -2.0 * np.pi * k * a * s, -a * s], axis=1)  # (N, 4)
    fisher = (jac.T @ jac) / sigma**2
    try:
        cov = np.linalg.inv(fisher)
    except np.linalg.LinAlgError as exc:
        raise ParameterError(
            f"Fisher matrix of a {n}-sample record is singular; give more samples or a lighter decay"
        ) from exc
    d = np.diag(cov)
    if not np.all(np.isfinite(d)) or np.any(d <= 0.0):
        raise ParameterError(
            f"Fisher matrix of a {n}-sample record is numerically singular; give more samples or a lighter decay"
        )
    return cov
