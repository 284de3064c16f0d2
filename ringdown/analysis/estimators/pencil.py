"""Parametric estimator: matrix pencil poles refined by nonlinear least squares.

Inside the fit window the band's complex envelope is modelled as a sum of complex damped
exponentials, one per mode::

    z[n] = sum_k c_k exp((-beta_k + i 2 pi (f_k - f_shift)) t_n) + noise,   t_n = n / fs

(the band holds only positive frequencies, so each real mode is one complex pole).

Steps
-----
1. Decimate ``z`` by the largest integer factor that keeps the sample rate at or above the full
   width of the band mask (pass band plus both skirts): no noise or signal inside the mask is
   aliased, so nothing is lost, and the matrices get smaller.
2. Matrix pencil (Hua & Sarkar 1990): Hankel matrix with pencil parameter ``L = N/3`` (inside
   the N/3 .. N/2 range recommended by Sarkar & Pereira 1995), SVD, and the model order ``M`` is
   the number of singular values above a noise threshold (rule below), at most ``MAX_MODES``.
   Poles are the eigenvalues of the shift-invariance matrix of the signal subspace.
3. Poles that grow (``beta <= 0``), lie outside ``[f_lo - skirt, f_hi + skirt]`` or decay so fast
   that their half-power bandwidth ``beta / pi`` exceeds the band's width are rejected.
4. All kept poles are refined jointly by nonlinear least squares (MINPACK, ``scipy.optimize.leastsq``)
   with the complex amplitudes solved inside (variable projection, Golub & Pereyra 1973 [from
   memory]) and the analytic Jacobian of that projection (``_Projection``). A mode whose fitted
   amplitude is not significant (``|c| < 5 u(|c|)``), or that left the band, is dropped and the
   rest refitted.
5. Covariance (Kay 1993, ch. 3 and 8 [from memory]): the least-squares estimate with correlated
   noise has covariance ``A^-1 B A^-1`` with ``A = Re(J^H J)`` and ``B = Re(J^H R J) / 2``, where
   ``R`` is the noise covariance of ``z``. The envelope is oversampled relative to the band, so
   adjacent samples of its noise are correlated; ``R`` is computed exactly from the band mask
   (noise power spectrum proportional to the squared mask) and scaled by the residual variance.
   This keeps the uncertainty honest without guessing an "effective number of samples".

Choosing the band
-----------------
The fit is only as good as its window, and a band-based window starts after the band filter has
settled (``ringdown.bands.settling_time_s``, a few 1 / (2 pi sigma) for the Gaussian mask). That start costs a factor of
about ``exp(beta * settling time)`` in standard deviation against the Cramer-Rao bound of the whole
decay. A wide band costs nothing else here (the least-squares fit weighs the noise density at the
mode, not the band's total noise), so give this estimator a band of half-width ~20 beta or more
(skirts ~10 beta), with neighbouring modes either outside it or fitted jointly inside it.

Model-order rule
----------------
With complex noise variance ``s2`` per sample (``band.noise_rms ** 2`` when set, otherwise the
median of the squared singular values beyond ``MAX_MODES``), noise alone gives squared
singular values up to about ``(N - L) s2 g (1 + sqrt((L+1)/(N-L)))^2`` (Marchenko-Pastur edge),
with ``g`` the ratio of the noise spectral density in the pass band to its average over the
sample rate. A singular value counts as signal when its square exceeds ``SV_MARGIN`` times
that edge (the margin is common practice, no source: it covers the correlation between rows of
a Hankel matrix, which widens the noise spectrum of its singular values).

References
----------
Y. Hua and T. K. Sarkar, "Matrix pencil method for estimating parameters of exponentially
damped/undamped sinusoids in noise", IEEE Trans. ASSP 38(5):814-824, 1990.
T. K. Sarkar and O. Pereira, "Using the matrix pencil method to estimate the parameters of a sum
of complex exponentials", IEEE Antennas Propag. Mag. 37(1):48-55, 1995.
G. H. Golub and V. Pereyra, "The differentiation of pseudo-inverses and nonlinear least squares
problems whose variables separate", SIAM J. Numer. Anal. 10(2):413-432, 1973 [from memory].
S. M. Kay, *Fundamentals of Statistical Signal Processing I: Estimation Theory*, 1993.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ...base._lazy import lazy_module
from ...base.errors import FitError
from ..bands import Band
from ..results import Estimate, ModeTrace, Notice
from ._fit import GROWING_WHY, growing_text, residual_excess_acf
from .base import Window

scipy_linalg = lazy_module("scipy.linalg")
scipy_optimize = lazy_module("scipy.optimize")

__all__ = ["estimate", "MAX_MODES", "SV_MARGIN", "MAX_PENCIL_SAMPLES", "DYNAMIC_RANGE_DB"]

#: Most modes the estimator looks for in one band (common practice, no source: a band around one
#: spectral peak rarely holds more than a split pair; more poles mostly model noise).
MAX_MODES = 4
#: Margin on the noise edge of the singular values (common practice, no source; see module notes).
SV_MARGIN = 4.0
#: Most samples the pencil's SVD uses (the first ones of the window, where the SNR is highest);
#: the least-squares refinement uses the whole window. Keeps the SVD at a few milliseconds.
MAX_PENCIL_SAMPLES = 128
#: Significance a fitted mode needs, |c| / u(|c|) (common practice, no source: a 5-sigma amplitude).
MIN_AMPLITUDE_SIGNIFICANCE = 5.0
#: Dynamic range inside one band, dB (common practice, no source): a component weaker than the
#: strongest by more than this (in singular value, and in fitted energy) is not reported. The band
#: filter's own transients leave structured residuals near -60 dB that would otherwise be fitted
#: as weak spurious modes at very high SNR.
DYNAMIC_RANGE_DB = 45.0
#: Fewest samples (after decimation) per fitted mode, common practice, no source.
MIN_SAMPLES_PER_MODE = 6


def _noise_acf(band: Band, fs: float, n: int) -> tuple[np.ndarray, float]:
    """Normalised autocorrelation of the envelope's noise at rate ``fs``, lags 0 .. n-1.

    Returns ``(r, g)``: ``r[k] = E[w[j+k] w*[j]] / E|w|^2`` from the noise spectrum (the squared
    mask, aliased to ``fs``), and ``g``, the pass-band spectral density over the mean density.
    """
    m_grid = 1 << int(math.ceil(math.log2(max(4 * n, 512))))
    nu = np.fft.fftfreq(m_grid, d=1.0 / fs)
    s = np.zeros(m_grid)
    for q in (-2, -1, 0, 1, 2):  # fold any part of the mask beyond +-fs/2 (none when fs >= width)
        s += band.mask(band.f_shift_hz + nu + q * fs) ** 2
    mean_s = float(np.mean(s))
    if mean_s <= 0.0:
        return np.r_[1.0, np.zeros(n - 1)], 1.0
    r = np.fft.ifft(s)[:n] / mean_s
    return r, float(np.max(s) / mean_s)


def _basis(poles_s: np.ndarray, t: np.ndarray) -> np.ndarray:
    """(n, K) matrix exp(p_k t_n) for continuous-time poles ``p_k = -beta + i omega`` (1/s)."""
    return np.exp(np.outer(t, poles_s))


def _pencil(zd: np.ndarray, fs: float, noise_var: float | None, g: float) -> np.ndarray:
    """Continuous-time poles (1/s, baseband) of the strongest components of ``zd``."""
    y = zd[:MAX_PENCIL_SAMPLES]
    n = y.shape[0]
    lp = max(n // 3, 1)
    rows = n - lp
    hank = scipy_linalg.hankel(y[:rows], y[rows - 1 :])  # (rows, lp + 1), H[i, j] = y[i + j]
    # H = Q R: R has the singular values and right singular vectors of H, and its SVD is half the
    # cost of H's (a tall matrix: rows ~ 2 (lp + 1)); only those are used below
    tall = hank.shape[0] > hank.shape[1]
    core = np.linalg.qr(hank, mode="r") if tall else hank
    try:
        _, sv, vh = scipy_linalg.svd(core, full_matrices=False, lapack_driver="gesdd")
    except (np.linalg.LinAlgError, ValueError):
        _, sv, vh = scipy_linalg.svd(hank, full_matrices=False, lapack_driver="gesvd")
    max_order = min(MAX_MODES, lp - 1, rows - 1)
    if max_order < 1:
        return np.zeros(0, dtype=complex)
    if noise_var is None or not noise_var > 0.0:
        tail = sv[max_order:] ** 2
        noise_var = float(np.median(tail)) / rows if tail.size else 0.0
        g = 1.0  # the median already measures the in-band level
    edge = rows * noise_var * g * (1.0 + math.sqrt((lp + 1) / rows)) ** 2
    floor = 10.0 ** (-DYNAMIC_RANGE_DB / 20.0) * sv[0]
    order = int(np.sum((sv[:max_order] ** 2 > SV_MARGIN * edge) & (sv[:max_order] > floor)))
    if order == 0:
        return np.zeros(0, dtype=complex)
    # H = U S Vh: the rows of Vh span the row space of H, i.e. the vectors (z_k^j)_j themselves
    w = vh[:order].T
    psi, *_ = np.linalg.lstsq(w[:-1], w[1:], rcond=None)
    zk = np.linalg.eigvals(psi)
    zk = zk[np.abs(zk) > 0]
    return np.log(zk) * fs


def _growing(poles: np.ndarray, band: Band) -> str:
    """``"; the pole(s) ... grow ..."`` naming the poles of ``poles`` (1/s, baseband) inside
    the band that grow (beta <= 0), or ``"; check the band and the window"`` when none does."""
    grow = [
        (band.f_shift_hz + p.imag / (2.0 * np.pi), -p.real)
        for p in poles
        if -p.real <= 0.0
        and band.f_lo_hz - band.skirt_hz <= band.f_shift_hz + p.imag / (2.0 * np.pi) <= band.f_hi_hz + band.skirt_hz
    ]
    if not grow:
        return "; check the band and the window"
    return f"; the fitted pole(s) at {growing_text(grow)} grow, not decay {GROWING_WHY}"


def _keep_pole(p: complex, band: Band, f_hi_cap: float) -> bool:
    beta = -p.real
    f = band.f_shift_hz + p.imag / (2.0 * np.pi)
    if not (beta > 0.0 and math.isfinite(beta)):
        return False
    if not (band.f_lo_hz - band.skirt_hz <= f <= band.f_hi_hz + band.skirt_hz):
        return False
    # half-power bandwidth beta/pi wider than the band: not a mode this band can hold
    return beta / np.pi <= f_hi_cap


class _Projection:
    """Residual and analytic Jacobian of the variable-projection problem of :func:`_fit`.

    Parameters ``x`` are ``(beta_k dt, omega_k dt)`` interleaved (O(1) steps); the decay rate is
    capped at ``-max_growth`` (growth of at most e^20 over the window, so that a trial pole can
    never overflow the basis). The residual ``r = P_perp z`` (``P_perp = I - Phi Phi^+``,
    amplitudes solved inside) has the Jacobian of Golub & Pereyra (1973) [from memory]::

        dr/dx = -(P_perp dPhi/dx c + (Phi^+)^H (dPhi/dx)^H r)

    with ``dPhi/dx`` nonzero only in the column of the pole that ``x`` moves,
    ``d phi_k / d p_k = t phi_k``. The thin QR ``Phi = Q R`` gives ``P_perp v = v - Q Q^H v`` and
    ``(Phi^+)^H = Q R^-H``. Real vectors stack real and imaginary parts.
    """

    def __init__(self, zd: np.ndarray, t: np.ndarray, dt: float, max_growth: float) -> None:
        self.zd, self.t, self.dt, self.max_growth = zd, t, dt, max_growth
        self._x: np.ndarray | None = None

    def poles_of(self, x: np.ndarray) -> np.ndarray:
        return np.minimum(-x[0::2] / self.dt, self.max_growth) + 1j * x[1::2] / self.dt

    def _at(self, x: np.ndarray) -> None:
        # basis, QR, amplitudes and residual at x, kept for the Jacobian at the same x
        if self._x is not None and np.array_equal(self._x, x):
            return
        phi = _basis(self.poles_of(x), self.t)
        q, r_tri = np.linalg.qr(phi)
        c = None
        if np.all(np.abs(np.diag(r_tri)) > 1e-12 * max(float(np.max(np.abs(r_tri))), 1e-300)):
            c = scipy_linalg.solve_triangular(r_tri, q.conj().T @ self.zd)
        if c is None or not np.all(np.isfinite(c)):
            c, *_ = np.linalg.lstsq(phi, self.zd, rcond=None)
        self._x, self._phi, self._q, self._r, self._c = np.array(x, copy=True), phi, q, r_tri, c
        self._res = self.zd - phi @ c

    def resid(self, x: np.ndarray) -> np.ndarray:
        self._at(x)
        return np.concatenate([self._res.real, self._res.imag])

    def jac(self, x: np.ndarray) -> np.ndarray:
        self._at(x)
        phi, q, r_tri, c, res = self._phi, self._q, self._r, self._c, self._res
        k = phi.shape[1]
        capped = -x[0::2] / self.dt >= self.max_growth  # the decay rate is clipped there: no derivative
        tphi = self.t[:, None] * phi  # d phi_k / d p_k
        # d p / d x: -1/dt for the scaled decay rate, i/dt for the scaled angular frequency
        dp = np.empty(2 * k, dtype=complex)
        dp[0::2] = np.where(capped, 0.0, -1.0 / self.dt)
        dp[1::2] = 1j / self.dt
        cols = np.repeat(np.arange(k), 2)
        v = tphi[:, cols] * (dp * c[cols])  # (n, 2K): dPhi/dx c
        pv = v - q @ (q.conj().T @ v)
        # (dPhi/dx)^H r is nonzero only in the moved pole's entry
        w = np.zeros((k, 2 * k), dtype=complex)
        w[cols, np.arange(2 * k)] = np.conj(dp) * (tphi.conj().T @ res)[cols]
        try:
            y = scipy_linalg.solve_triangular(r_tri, w, trans="C")
        except (np.linalg.LinAlgError, ValueError):
            y = np.linalg.pinv(r_tri).conj().T @ w
        if not np.all(np.isfinite(y)):
            y = np.linalg.pinv(r_tri).conj().T @ w
        jc = -(pv + q @ y)
        return np.concatenate([jc.real, jc.imag])


def _fit(zd: np.ndarray, t: np.ndarray, poles0: np.ndarray):
    """Variable-projection NLS of a sum of complex exponentials; returns (poles, c, converged).

    Levenberg-Marquardt (MINPACK ``lmder`` through ``scipy.optimize.leastsq``, the thinnest
    wrapper: ``least_squares(method="lm")`` runs the same code with ~0.5 ms more per call) with
    the analytic Jacobian of :class:`_Projection`: the minimum is that of the same objective as
    with finite differences, at a third of the cost (measured on
    ``tests/benchmarks/speed.py``'s file). MINPACK scales the parameters by the Jacobian's column
    norms (``diag`` unset: ``mode=1``).
    """
    k = poles0.shape[0]
    dt = t[1] - t[0] if t.shape[0] > 1 else 1.0
    x0 = np.empty(2 * k)
    x0[0::2] = -poles0.real * dt
    x0[1::2] = poles0.imag * dt
    prob = _Projection(zd, t, dt, 20.0 / max(t[-1], dt))
    x, _, _, _, ier = scipy_optimize.leastsq(
        prob.resid, x0, Dfun=prob.jac, full_output=True, xtol=1e-12, ftol=1e-12, gtol=1e-12, maxfev=200 * (2 * k + 1)
    )
    poles = prob.poles_of(x)
    phi = _basis(poles, t)
    c, *_ = np.linalg.lstsq(phi, zd, rcond=None)
    return poles, c, ier in (1, 2, 3, 4)  # MINPACK's codes of convergence


def _covariance(zd, t, poles, c, r_acf, g):
    """Covariance of (beta_k, f_k, Re c_k, Im c_k) per mode, sandwich form for correlated noise.

    Returns ``(cov, resid, cond)`` with ``cov`` of shape (4K, 4K) in units (1/s, Hz, -, -).
    ``A^-1 B A^-1`` (Kay 1993, ch. 8 [from memory]) with ``B`` from the band's noise (the mask's
    spectrum scaled to the residual variance) plus the part of the residual's own spectrum that
    stands significantly above it (:func:`._fit.residual_excess_acf`): the mask's spectrum
    assumes a flat noise density across the band, while the record's (pink, or with a
    neighbour's leftover) can be several times higher at the mode's frequency, and a frequency
    estimate's variance follows the density there (Hannan 1973 [from memory]), as in the raw
    fit (:func:`.real._covariance`).
    """
    k = poles.shape[0]
    n = t.shape[0]
    phi = _basis(poles, t)
    resid = zd - phi @ c
    jc = np.empty((n, 4 * k), dtype=complex)
    for i in range(k):
        e = phi[:, i]
        jc[:, 4 * i] = -t * c[i] * e  # d/d beta
        jc[:, 4 * i + 1] = 1j * 2.0 * np.pi * t * c[i] * e  # d/d f
        jc[:, 4 * i + 2] = e  # d/d Re c
        jc[:, 4 * i + 3] = 1j * e  # d/d Im c
    a = (jc.conj().T @ jc).real
    n_par = 4 * k
    # residual variance per complex sample; the fit removes about n_par/2 * g of noise power
    dof = n - 0.5 * n_par * g
    if dof <= 0:
        raise FitError(f"{n} envelope samples cannot fit {k} mode(s); lengthen the window or narrow the band")
    s2 = float(np.sum(np.abs(resid) ** 2)) / dof
    rj = scipy_linalg.matmul_toeplitz((r_acf, r_acf.conj()), jc)
    b = 0.5 * s2 * (jc.conj().T @ rj).real
    excess = residual_excess_acf(resid, s2 * r_acf, dof)
    if excess is not None:
        b = b + 0.5 * (jc.conj().T @ scipy_linalg.matmul_toeplitz((excess, excess.conj()), jc)).real
    cond = float(np.linalg.cond(a))
    try:
        ainv = np.linalg.inv(a)
    except np.linalg.LinAlgError:
        ainv = np.linalg.pinv(a)
    cov = ainv @ b @ ainv
    return cov, resid, cond


def estimate(band: Band, window: Window) -> list[Estimate]:
    """Damped frequency and decay rate of every mode in a band, by matrix pencil and NLS.

    Parameters
    ----------
    band : Band
        The band's complex envelope (``noise_rms`` should be set; without it the noise level is
        estimated from the singular values).
    window : Window
        Fit window; only the samples of ``band.z`` inside it are used.

    Returns
    -------
    list of Estimate
        One per mode found, sorted by frequency, ``method="pencil"``. ``amplitude`` is ``|c_k|``
        at ``window.start_s``; uncertainties are standard uncertainties from the Jacobian and
        the residual variance with the envelope's noise correlation accounted for. Estimates of
        modes closer than the window can resolve carry a Notice ``"unresolved_modes"``.

    Raises
    ------
    FitError
        When the window holds too few samples, or no decaying mode is found inside the band.

    References
    ----------
    Hua & Sarkar, IEEE Trans. ASSP 38(5):814-824, 1990; Sarkar & Pereira, IEEE Antennas Propag.
    Mag. 37(1):48-55, 1995; Kay 1993 (covariance of least-squares estimates).
    """
    window = window.for_model_fit()
    zd, t, t_first, dec, where = _envelope_samples(band, window)
    fs = float(band.sample_rate) / dec
    n = zd.shape[0]
    r_acf, g = _noise_acf(band, fs, n)
    noise_var = None if band.noise_rms is None else float(band.noise_rms) ** 2

    found = _pencil(zd, fs, noise_var, g)
    poles = np.array([p for p in found if _keep_pole(p, band, band.width_hz)], dtype=complex)
    poles = poles[: max(n // MIN_SAMPLES_PER_MODE, 1)]
    if poles.size == 0:
        slow = _slow_fit(zd, t, found, band, r_acf, g)
        if slow is None:
            raise FitError(f"{where}: no decaying mode above the noise inside the band{_growing(found, band)}")
        poles_f, c, converged, cov, resid, cond = slow
    else:
        poles_f, c, converged, cov, resid, cond = _refine(zd, t, poles, band, r_acf, g, where)

    t_span = t[-1] if n > 1 else 1.0 / fs
    order = np.argsort(poles_f.imag)
    f_all = band.f_shift_hz + poles_f.imag / (2.0 * np.pi)
    unresolved = _unresolved(f_all, order, cov, cond, t_span)
    fit = _Fitted(
        band=band,
        window=window,
        poles=poles_f,
        c=c,
        cov=cov,
        f_all=f_all,
        unresolved=unresolved,
        t_first=t_first,
        t_last=t_first + (n - 1) * dec / float(band.sample_rate),
        n=n,
        converged=converged,
        residual_rms=float(np.sqrt(np.mean(np.abs(resid) ** 2))),
        envelope=np.abs(band.z),
        model=_model_envelope(band, t_first, poles_f, c),
    )
    return [fit.estimate(int(i)) for i in order]


@dataclass(frozen=True)
class _Fitted:
    """What :func:`estimate` found in one band, and each mode's :class:`Estimate` from it."""

    band: Band
    window: Window
    poles: np.ndarray  #: (K,) continuous-time poles, 1/s (baseband)
    c: np.ndarray  #: (K,) complex amplitudes at ``t_first``
    cov: np.ndarray  #: (4K, 4K) as from :func:`_covariance`
    f_all: np.ndarray  #: (K,) frequencies, Hz
    unresolved: set[int]
    t_first: float  #: s, first and last samples of the fit
    t_last: float
    n: int
    converged: bool
    residual_rms: float
    envelope: np.ndarray  #: |z| of the whole band, for plots
    model: np.ndarray | None

    def estimate(self, i: int) -> Estimate:
        band, window, cov, f_all = self.band, self.window, self.cov, self.f_all
        beta = float(-self.poles[i].real)
        f_hz = float(f_all[i])
        amp = float(abs(self.c[i]) * math.exp(-beta * (window.start_s - self.t_first)))
        warn: list[Notice] = []
        if i in self.unresolved:
            others = ", ".join(f"{f_all[j]:.6g}" for j in sorted(self.unresolved) if j != i)
            warn.append(
                Notice(
                    "unresolved_modes",
                    f"mode at {f_hz:.6g} Hz is closer to the mode(s) at {others} Hz than a "
                    f"{window.end_s - window.start_s:.3g} s window resolves; lengthen the window or treat the pair "
                    "as one",
                )
            )
        trace = ModeTrace(
            t_s=band.t_s,
            envelope=self.envelope,
            fit_start_s=float(self.t_first),
            fit_end_s=float(self.t_last),
            noise_floor=float(band.noise_rms) if band.noise_rms is not None else self.residual_rms,
            fit_amplitude=amp,
            fit_beta_per_s=beta,
            fit_t0_s=float(window.start_s),
            model_envelope=self.model,
            n_model_modes=int(self.poles.size),
        )
        return Estimate(
            method="pencil",
            f_d_hz=f_hz,
            f_d_hz_u=float(math.sqrt(max(cov[4 * i + 1, 4 * i + 1], 0.0))),
            beta_per_s=beta,
            beta_per_s_u=float(math.sqrt(max(cov[4 * i, 4 * i], 0.0))),
            cov_f_beta=float(cov[4 * i, 4 * i + 1]),
            amplitude=amp,
            fit_start_s=float(self.t_first),
            fit_end_s=float(self.t_last),
            n_points=int(self.n),
            residual_rms=self.residual_rms,
            converged=self.converged,
            warnings=tuple(warn),
            trace=trace,
        )


def _envelope_samples(band: Band, window: Window) -> tuple[np.ndarray, np.ndarray, float, int, str]:
    """The window's envelope samples, decimated by the largest factor that keeps the rate at or
    above the mask's full width (step 1 of the module notes).

    Returns ``(zd, t, t_first, dec, where)``: samples (n,) complex, their times (n,) from the
    first one, s; the first one's time from the recording start, s; the decimation factor; and
    the band and window in words, for errors. Raises :class:`FitError` for non-finite samples or
    fewer than ``2 * MIN_SAMPLES_PER_MODE``.
    """
    sl = window.indices(band)
    z_w = np.asarray(band.z[sl], dtype=np.complex128)
    fs_b = float(band.sample_rate)
    full_width = (band.f_hi_hz - band.f_lo_hz) + 2.0 * band.skirt_hz
    dec = max(int(math.floor(fs_b / full_width)), 1)
    zd = z_w[::dec]
    n = zd.shape[0]
    i0 = sl.start if sl.start is not None else 0
    t_first = band.t0_s + i0 / fs_b
    where = f"band {band.f_lo_hz:g}-{band.f_hi_hz:g} Hz, window {window.start_s:g}-{window.end_s:g} s"
    if not np.all(np.isfinite(z_w)):
        raise FitError(f"{where}: the envelope holds NaN or infinite samples; clean the recording first")
    if n < 2 * MIN_SAMPLES_PER_MODE:
        raise FitError(
            f"{where}: {n} usable envelope samples, need at least {2 * MIN_SAMPLES_PER_MODE}; lengthen the window"
        )
    return zd, np.arange(n) / (fs_b / dec), t_first, dec, where


def _refine(zd, t, poles, band: Band, r_acf, g: float, where: str):
    """Step 4 of the module notes: fit all ``poles`` jointly, then drop one offending mode and
    refit until none is left: first any that left the band or grew, then any below the
    dynamic-range floor, then the least significant one below ``MIN_AMPLITUDE_SIGNIFICANCE``.

    Returns ``(poles, c, converged, cov, resid, cond)`` as from :func:`_fit` and
    :func:`_covariance`; raises :class:`FitError` when the fit fails or no mode is left.
    """
    while True:
        try:
            poles_f, c, converged = _fit(zd, t, poles)
            cov, resid, cond = _covariance(zd, t, poles_f, c, r_acf, g)
        except (np.linalg.LinAlgError, ValueError, TypeError) as exc:  # TypeError: MINPACK's improper input
            raise FitError(f"{where}: least-squares fit failed ({exc}); narrow the band or shorten the window") from exc
        inside = np.array([_keep_pole(p, band, band.width_hz) for p in poles_f])
        var_c = np.array([cov[4 * i + 2, 4 * i + 2] + cov[4 * i + 3, 4 * i + 3] for i in range(poles_f.size)])
        signif = np.abs(c) / np.sqrt(np.maximum(var_c / 2.0, 1e-300))
        signif = np.where(np.isfinite(signif), signif, -1.0)
        energy = np.zeros(poles_f.size)
        energy[inside] = np.abs(c[inside]) ** 2 * np.sum(np.exp(2.0 * np.outer(t, poles_f[inside].real)), axis=0)
        too_weak = inside & (energy < 10.0 ** (-DYNAMIC_RANGE_DB / 10.0) * np.max(energy))
        if not np.all(inside):
            drop = int(np.flatnonzero(~inside)[0])
        elif np.any(too_weak):
            drop = int(np.flatnonzero(too_weak)[np.argmin(energy[too_weak])])
        elif np.min(signif) < MIN_AMPLITUDE_SIGNIFICANCE:
            drop = int(np.argmin(signif))
        else:
            return poles_f, c, converged, cov, resid, cond
        poles = np.delete(poles_f, drop)
        if poles.size == 0:
            raise FitError(f"{where}: no significant decaying mode inside the band; check the band and the window")


#: How many standard uncertainties below zero a fitted decay rate may lie and still be read as a
#: decay the window does not resolve rather than growth: 2 (about 2.3 % of unresolved decays
#: fall below it; common practice, no source).
GROWTH_TOLERANCE_U = 2.0


def _slow_fit(zd, t, found: np.ndarray, band: Band, r_acf, g: float):
    """The in-band poles of ``found`` (1/s, baseband) that came out growing, refitted jointly,
    when every one that still grows does so by at most ``GROWTH_TOLERANCE_U`` standard
    uncertainties and carries a significant amplitude: a lightly damped mode (Q 10^4 to 10^5)
    decays too little in the window to resolve, and noise pushes its fitted decay rate below zero
    about half the time. Each such decay rate is reported as its mean given ``beta >= 0``: for a
    Gaussian likelihood ``N(b, u^2)`` and a flat prior on ``beta >= 0`` the posterior is a normal
    truncated at 0, of mean ``b + u lambda`` with ``a = -b / u`` and ``lambda = phi(a) / (1 -
    Phi(a))`` (Johnson, Kotz & Balakrishnan 1994, ch. 13 [from memory]). Its standard
    uncertainty stays ``u``: the truncated posterior is narrower (0.35 u at ``b = -2 u``) and
    would put a true decay of one u outside +-2 of it, a confident number where the record
    resolves none. The pipeline names such a mode ``decay_unresolved``. Returns what
    :func:`_refine` does, or ``None``."""
    from scipy import special

    lo, hi = band.f_lo_hz - band.skirt_hz, band.f_hi_hz + band.skirt_hz
    grow = np.array(
        [p for p in found if -p.real <= 0.0 and lo <= band.f_shift_hz + p.imag / (2.0 * np.pi) <= hi], dtype=complex
    )
    if grow.size == 0:
        return None
    try:
        poles_f, c, converged = _fit(zd, t, grow)
        cov, resid, cond = _covariance(zd, t, poles_f, c, r_acf, g)
    except (np.linalg.LinAlgError, ValueError, TypeError, FitError):
        return None
    for i, p in enumerate(poles_f):
        f_i = band.f_shift_hz + p.imag / (2.0 * np.pi)
        var_c = cov[4 * i + 2, 4 * i + 2] + cov[4 * i + 3, 4 * i + 3]
        u = math.sqrt(max(cov[4 * i, 4 * i], 0.0))
        b = float(-p.real)
        if not (
            lo <= f_i <= hi
            and u > 0.0
            and abs(c[i]) >= MIN_AMPLITUDE_SIGNIFICANCE * math.sqrt(max(var_c / 2.0, 1e-300))
        ):
            return None
        if b > 0.0:
            continue
        if -b > GROWTH_TOLERANCE_U * u:
            return None
        a = -b / u
        lam = float(math.exp(-0.5 * a * a - special.log_ndtr(-a)) / math.sqrt(2.0 * math.pi))
        poles_f[i] = complex(-(b + u * lam), p.imag)
    return poles_f, c, converged, cov, resid, cond


def _unresolved(f_all: np.ndarray, order: np.ndarray, cov: np.ndarray, cond: float, t_span: float) -> set[int]:
    """Modes (indices) closer to a neighbour in frequency (Hz, ``f_all``; ``order`` sorts them)
    than the window ``t_span`` (s) resolves, or correlated with it beyond 0.95; all of them when
    the normal matrix is singular in practice (condition above 1e12)."""
    unresolved: set[int] = set()
    if f_all.shape[0] > 1:
        if cond > 1e12:
            unresolved.update(range(f_all.shape[0]))
        for a_i, b_i in zip(order[:-1], order[1:]):
            sep = abs(f_all[b_i] - f_all[a_i])
            var_a = cov[4 * a_i + 1, 4 * a_i + 1]
            var_b = cov[4 * b_i + 1, 4 * b_i + 1]
            corr = cov[4 * a_i + 1, 4 * b_i + 1] / math.sqrt(max(var_a * var_b, 1e-300))
            if sep < 1.0 / max(t_span, 1e-300) or abs(corr) > 0.95:
                unresolved.update((int(a_i), int(b_i)))
    return unresolved


def _model_envelope(band: Band, t_first: float, poles: np.ndarray, c: np.ndarray) -> np.ndarray | None:
    """``|sum_k c_k exp(p_k (t - t_first))|`` at the band's times (NaN before ``t_first``): the
    sum of the modes fitted in a band of more than one, for plots; None for one mode."""
    if poles.size <= 1:
        return None
    tt = np.asarray(band.t_s, dtype=float) - t_first
    model = np.full(tt.shape, np.nan)
    after = tt >= 0
    model[after] = np.abs(np.exp(np.outer(tt[after], poles)) @ c)
    return model
