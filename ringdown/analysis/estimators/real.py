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
the candidates' poles. A long window is thinned to every ``D``-th sample (``D`` the smallest
that keeps at most ``MAX_SAMPLES``): a pole maps to ``exp(p D / fs)`` whatever its frequency, so
aliasing moves no parameter, and the noise covariance follows from the measured noise spectrum.
When every target lies low enough for it, each kept sample is the mean of the ``D`` samples it
starts (a boxcar before the thinning, :func:`_thinned`): a finite filter leaves every pole where
it is and multiplies a mode's complex amplitude by ``G(p) = (1/D) sum_k exp(p k / fs)``
[derived], so the model is unchanged, while white noise falls by ``D`` in variance (keeping one
sample in ``D`` loses ``sqrt(D)`` in standard deviation against the Cramer-Rao bound) and the
components the fit does not model (a mode too broad or too weak to be found, the leftover of
one subtracted with a slightly wrong pole) alias onto the targets attenuated by the boxcar's
response.

Covariance (Kay 1993, ch. 8 [from memory]): ``A^-1 B A^-1`` with ``A = J^T J``,
``B = J^T R J``, ``R`` the noise covariance of the thinned samples from the measured noise
spectrum, scaled so that its variance matches the fit's residual variance.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ...base._lazy import lazy_module
from ...base.errors import FitError
from ..results import Estimate
from ._fit import GROWING_WHY, growing_text, residual_excess_acf

scipy_linalg = lazy_module("scipy.linalg")
scipy_optimize = lazy_module("scipy.optimize")

__all__ = ["estimate_real", "MAX_SAMPLES"]

#: Most samples one fit uses (thinned beyond): keeps the least squares at a few tens of ms.
MAX_SAMPLES = 1024
#: Largest decay a trial pole may take per thinned sample (natural log units: e^20 ~ 170 dB),
#: as the growth is capped at e^20 over the window; beyond it the basis underflows to zero.
MAX_DECAY_PER_SAMPLE = 20.0


def _basis(beta: np.ndarray, omega: np.ndarray, t: np.ndarray) -> np.ndarray:
    """(n, 2K + 2) columns: exp(-beta t) cos, exp(-beta t) sin per mode, then 1 and t (what the
    record's drift removal leaves of a slow trend over a short window)."""
    e = np.exp(-np.outer(t, beta))
    ph = np.outer(t, omega)
    span = max(float(t[-1]), 1e-300)
    return np.concatenate([e * np.cos(ph), e * np.sin(ph), np.ones((t.shape[0], 1)), (t / span)[:, None]], axis=1)


def _triangular(r_tri: np.ndarray, b: np.ndarray, *, trans: int) -> np.ndarray:
    """``R^-1 b`` (``trans=0``) or ``R^-T b`` (``trans=1``) for the (2K + 2)-square upper
    triangular ``R``, by ``numpy.linalg.solve``. ``scipy.linalg.solve_triangular`` (and LAPACK
    ``dtrtrs`` through ``scipy.linalg.lapack``) took 7-19 ms per call inside this fit, against
    0.03 ms outside it (measured with scipy 1.17 on one BLAS thread; the cause, somewhere between
    numpy's and scipy's own OpenBLAS, was not found), which made the analytic Jacobian slower than
    finite differences; numpy's solver takes ~0.05 ms there."""
    return np.linalg.solve(r_tri.T if trans else r_tri, b)


class _RealProjection:
    """Residual and analytic Jacobian of the variable-projection problem of :func:`estimate_real`.

    Parameters ``x`` are ``(beta_k dt, omega_k dt)`` interleaved (O(1) steps, ``dt`` the thinned
    sample spacing in s); the decay rate is held at or above ``floor`` (1/s, growth of at most
    e^20 over the window) and at or below ``MAX_DECAY_PER_SAMPLE / dt`` (a fall of e^20 from
    one thinned sample to the next: such a mode is gone after its first sample, and a trial
    step far beyond that underflows its two basis columns to zero, a rank-deficient basis from
    which MINPACK's next step came out NaN and LAPACK printed to the terminal). A non-finite
    trial step is refused with a :class:`FitError` before any LAPACK call.

    The residual ``r = P_perp y`` (``P_perp = I - Phi Phi^+``, the linear amplitudes of
    :func:`_basis` solved inside) has the Jacobian of Golub & Pereyra (1973) [from memory]::

        dr/dx_j = -(P_perp dPhi/dx_j c + (Phi^+)^T (dPhi/dx_j)^T r)

    where ``dPhi/dx_j`` is nonzero only in the two columns (cosine, sine) of the mode that
    ``x_j`` moves: ``d/dbeta (e cos, e sin) = -t (e cos, e sin)`` and
    ``d/domega (e cos, e sin) = t (-e sin, e cos)``. With the thin QR ``Phi = Q R``,
    ``P_perp v = v - Q Q^T v`` and ``(Phi^+)^T = Q R^-T``. Shapes: ``y``, ``t`` (n,); ``x`` (2K,);
    the Jacobian (n, 2K). The real-valued counterpart of ``pencil._Projection``.
    """

    def __init__(self, y: np.ndarray, t: np.ndarray, dt: float, floor: float) -> None:
        self.y, self.t, self.dt, self.floor = y, t, dt, floor
        self._x: np.ndarray | None = None

    def unpack(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(beta_k in 1/s, omega_k in rad/s) of the parameters ``x``."""
        beta = np.clip(x[0::2] / self.dt, self.floor, MAX_DECAY_PER_SAMPLE / self.dt)
        return beta, x[1::2] / self.dt

    def _live(self, x: np.ndarray) -> np.ndarray:
        """``d beta / d x`` per mode (1/s per unit of ``x``): ``1 / dt``, 0 where beta is held."""
        b = x[0::2] / self.dt
        return ((b > self.floor) & (b < MAX_DECAY_PER_SAMPLE / self.dt)).astype(float) / self.dt

    def _at(self, x: np.ndarray) -> None:
        # basis, QR, amplitudes and residual at x, kept for the Jacobian at the same x
        if self._x is not None and np.array_equal(self._x, x):
            return
        if not np.all(np.isfinite(x)):
            raise FitError("the raw fit stepped to non-finite poles")
        beta, omega = self.unpack(x)
        phi = _basis(beta, omega, self.t)
        if not np.all(np.isfinite(phi)):
            raise FitError("the raw fit stepped to poles whose basis is not finite")
        q_full, r_tri = np.linalg.qr(phi)
        q: np.ndarray | None = q_full
        c = None
        if np.all(np.abs(np.diag(r_tri)) > 1e-12 * max(float(np.max(np.abs(r_tri))), 1e-300)):
            c = _triangular(r_tri, q_full.T @ self.y, trans=0)
        if c is None or not np.all(np.isfinite(c)):
            q = None  # the Jacobian then uses the pseudo-inverse
            c, *_ = np.linalg.lstsq(phi, self.y, rcond=None)
        self._x, self._phi, self._q, self._r, self._c = np.array(x, copy=True), phi, q, r_tri, c
        self._res = self.y - phi @ c

    def resid(self, x: np.ndarray) -> np.ndarray:
        self._at(x)
        return self._res

    def jac(self, x: np.ndarray) -> np.ndarray:
        self._at(x)
        phi, c, res, t = self._phi, self._c, self._res, self.t
        k = (phi.shape[1] - 2) // 2
        ec, es = phi[:, :k], phi[:, k : 2 * k]
        a, b = c[:k], c[k : 2 * k]
        live = self._live(x)
        v = np.empty((t.shape[0], 2 * k))
        v[:, 0::2] = -t[:, None] * (ec * a + es * b) * live
        v[:, 1::2] = t[:, None] * (es * -a + ec * b) / self.dt
        tr = t * res
        tc, ts = tr @ ec, tr @ es  # (t e cos)^T r, (t e sin)^T r per mode
        w = np.zeros((phi.shape[1], 2 * k))
        idx = np.arange(k)
        w[idx, 2 * idx], w[k + idx, 2 * idx] = -tc * live, -ts * live
        w[idx, 2 * idx + 1], w[k + idx, 2 * idx + 1] = -ts / self.dt, tc / self.dt
        if self._q is not None:
            q = self._q
            pv = v - q @ (q.T @ v)
            y = q @ _triangular(self._r, w, trans=1)
        else:  # rank-deficient basis: the pseudo-inverse itself
            pinv = np.linalg.pinv(phi)
            pv = v - phi @ (pinv @ v)
            y = pinv.T @ w
        return -(pv + y)


def _noise_acf(
    noise_f: np.ndarray, noise_p: np.ndarray, fs: float, step: int, n: int, *, averaged: bool = False
) -> np.ndarray:
    """Autocorrelation of the noise at lags ``0, step, 2 step, ...`` (n lags) samples at rate
    ``fs``, normalised to 1 at lag 0, from the one-sided PSD (Wiener-Khinchin); ``averaged``:
    of the means of ``step`` consecutive samples (the PSD times the boxcar's power response
    ``|sin(pi f D / fs) / (D sin(pi f / fs))|^2``)."""
    m = 1 << int(math.ceil(math.log2(max(4 * n * step, 1024))))
    f = np.fft.rfftfreq(m, 1.0 / fs)
    s = np.interp(f, noise_f[1:], noise_p[1:])
    if averaged and step > 1:
        s = s * _boxcar_power(f, fs, step)
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
    dropped: list[tuple[int, str]] | None = None,
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
    dropped : list, optional
        Appended with ``(i, why)`` for each target ``i`` (index into ``poles``) the fit converged
        to but that is not returned, ``why`` in plain words (growing, outside 0 to fs/2, or a
        degenerate covariance), so that the caller names it rather than dropping it silently.

    Returns
    -------
    list of Estimate
        One per target whose fit converged to a decaying mode with a positive variance of its
        frequency and decay rate, ``method="pencil"``; amplitudes
        refer to ``t0_s``; a frequency the thinned fit found as a mirror image is moved back to
        the alias nearest its starting value (:func:`_unaliased`).

    Raises
    ------
    FitError
        Too few samples for the number of modes, the least squares failed, or every target came
        out growing (beta <= 0; the message names them).
    """
    fs = float(sample_rate)
    y, step, averaged = _samples(seg, fs, duration_s, poles[:n_targets])
    k = len(poles)
    if y.shape[0] < 4 * k + 10:
        raise FitError(
            f"{y.shape[0]} samples from {t0_s:.4g} s cannot fit {k} damped cosine(s); the decay is too short"
        )
    beta, omega, c, converged = _fit(y, step / fs, poles, t0_s)
    t = np.arange(y.shape[0]) * (step / fs)
    cov, s2 = _covariance(y, t, beta, omega, c, _noise_acf(noise_f, noise_p, fs, step, y.shape[0], averaged=averaged))
    out = []
    for i in range(n_targets):
        f_i = float(omega[i]) / (2 * math.pi)
        why = None
        if not beta[i] > 0:
            why = f"the raw fit from {t0_s:.4g} s found it growing ({growing_text([(f_i, float(beta[i]))])})"
        elif not (omega[i] > 0 and f_i < fs / 2.0):
            why = f"the raw fit from {t0_s:.4g} s moved it to {f_i:.4g} Hz, outside 0 to fs/2"
        elif not (cov[4 * i, 4 * i] > 0.0 and cov[4 * i + 1, 4 * i + 1] > 0.0):
            # a degenerate covariance: no credible uncertainty, not an estimate
            why = (
                f"the raw fit from {t0_s:.4g} s gave {f_i:.2f} Hz, beta {float(beta[i]):.3g} 1/s "
                "with a degenerate covariance (no credible uncertainty)"
            )
        if why is not None:
            if dropped is not None:
                dropped.append((i, why))
            continue
        gain = abs(_boxcar_gain(complex(-beta[i], omega[i]), fs, step)) if averaged else 1.0
        out.append(
            Estimate(
                method="pencil",
                f_d_hz=float(omega[i] / (2 * math.pi)),
                f_d_hz_u=float(math.sqrt(max(cov[4 * i + 1, 4 * i + 1], 0.0))),
                beta_per_s=float(beta[i]),
                beta_per_s_u=float(math.sqrt(max(cov[4 * i, 4 * i], 0.0))),
                cov_f_beta=float(cov[4 * i, 4 * i + 1]),
                amplitude=float(math.hypot(c[i], c[k + i]) / max(gain, 1e-300)),
                fit_start_s=float(t0_s),
                fit_end_s=float(t0_s + t[-1]),
                n_points=int(y.shape[0]),
                residual_rms=float(math.sqrt(s2)),
                converged=converged,
            )
        )
    if not out:
        _raise_if_growing(beta[:n_targets], omega[:n_targets], t0_s)
    return _unaliased(out, [p[0] for p in poles[:n_targets]], fs, step)


def _samples(seg: np.ndarray, fs: float, duration_s: float, targets: list[tuple[float, float]]):
    """The samples the fit uses: ``(y, step, averaged)`` from :func:`_thinned`, as block means
    when that raises every target's SNR (:func:`_averaging_pays`; ``targets`` (f_hz, beta_per_s))."""
    y, step = _thinned(seg, fs, duration_s)
    averaged = _averaging_pays(targets, fs, step)
    if averaged:
        y, step = _thinned(seg, fs, duration_s, average=True)
    return y, step, averaged


def _raise_if_growing(beta: np.ndarray, omega: np.ndarray, t0_s: float) -> None:
    """FitError naming the targets (decay rates 1/s, angular frequencies rad/s, (K,)) that the
    fit found growing (beta <= 0), if any."""
    grow = [(float(w) / (2 * math.pi), float(b)) for b, w in zip(beta, omega) if b <= 0]
    if grow:
        raise FitError(
            f"the fit of the record from {t0_s:.4g} s found {growing_text(grow)} growing, not decaying {GROWING_WHY}"
        )


def _unaliased(ests: list[Estimate], starts: list[float], fs: float, step: int) -> list[Estimate]:
    """``ests`` with each frequency moved to the alias nearest the fit's starting frequencies
    ``starts`` (Hz). The fit sees every ``step``-th sample (:func:`_thinned`); those samples of a
    real cosine at ``f`` are the same as of every ``k fs / step +- f``, so a fit started near ``f``
    can end at a mirror image above ``fs / (2 step)``. A mirror image flips the sign of
    cov(f, beta)."""
    if step == 1 or not starts:
        return ests
    fs_d = fs / step
    k_max = int(math.ceil(0.5 * fs / fs_d)) + 1
    out = []
    for e in ests:
        aliases = [
            (k * fs_d + sign * e.f_d_hz, sign)
            for k in range(k_max + 1)
            for sign in (1.0, -1.0)
            if 0 < k * fs_d + sign * e.f_d_hz < fs / 2
        ]
        best, sign = min(aliases, key=lambda a: min(abs(a[0] - f0) for f0 in starts), default=(e.f_d_hz, 1.0))
        out.append(e if best == e.f_d_hz else replace(e, f_d_hz=best, cov_f_beta=sign * e.cov_f_beta))
    return out


def _thinned(seg: np.ndarray, fs: float, duration_s: float, *, average: bool = False) -> tuple[np.ndarray, int]:
    """The first ``duration_s`` of ``seg`` (sample rate ``fs``, Hz) as float64, keeping every
    ``step``-th sample, ``step`` the smallest that leaves at most :data:`MAX_SAMPLES`; with
    ``average``, each kept sample is the mean of the ``step`` samples from it on (the last block
    only when complete). Returns ``(y, step)``, ``y`` of shape (n,)."""
    n_full = min(seg.shape[0], max(int(round(duration_s * fs)), 1))
    step = max(1, int(math.ceil(n_full / MAX_SAMPLES)))
    if not average or step == 1:
        return np.asarray(seg[:n_full:step], dtype=np.float64), step
    n_blocks = min(int(math.ceil(n_full / step)), seg.shape[0] // step)
    blocks = np.asarray(seg[: n_blocks * step], dtype=np.float64).reshape(n_blocks, step)
    return blocks.mean(axis=1), step


def _boxcar_gain(p: complex, fs: float, step: int) -> complex:
    """``G(p) = (1/D) sum_{k<D} exp(p k / fs)``: the mean of ``D = step`` consecutive samples of
    ``exp(p t)`` over its first sample (``p`` in 1/s, complex) [derived: geometric series]."""
    z = np.exp(p / fs)
    if abs(z - 1.0) < 1e-12:
        return complex(1.0)
    return complex((1.0 - z**step) / (step * (1.0 - z)))


def _boxcar_power(f: np.ndarray, fs: float, step: int) -> np.ndarray:
    """``|G(i 2 pi f)|^2`` of :func:`_boxcar_gain` at the frequencies ``f`` (Hz): the power
    response of the mean of ``step`` samples, ``(sin(pi f D / fs) / (D sin(pi f / fs)))^2``."""
    x = np.pi * np.asarray(f, dtype=np.float64) / fs
    den = step * np.sin(x)
    out = np.ones_like(x)
    ok = np.abs(den) > 1e-12
    out[ok] = (np.sin(step * x[ok]) / den[ok]) ** 2
    return out


def _averaging_pays(targets: list[tuple[float, float]], fs: float, step: int) -> bool:
    """Whether the boxcar mean of ``step`` samples raises every target's signal-to-noise ratio
    in white noise over keeping one sample in ``step``: the mean scales the amplitude by
    ``|G(p)|`` and the noise variance by ``1 / D``, so it pays when ``D |G(p)|^2 > 1`` for each
    target pole ``p = -beta + i 2 pi f`` (``targets``: (f_hz, beta_per_s) each)."""
    if step <= 1 or not targets:
        return False
    return all(step * abs(_boxcar_gain(complex(-b, 2.0 * math.pi * f), fs, step)) ** 2 > 1.0 for f, b in targets)


def _fit(y: np.ndarray, dt: float, poles: list[tuple[float, float]], t0_s: float):
    """Variable-projection least squares of :class:`_RealProjection` from ``poles`` ((f_hz,
    beta_per_s) each) on samples ``y`` (n,) spaced ``dt`` s; returns ``(beta, omega, c,
    converged)``: decay rates (1/s), angular frequencies (rad/s), both (K,), and the (2K + 2,)
    linear coefficients of :func:`_basis`.

    Levenberg-Marquardt (MINPACK ``lmder`` through ``scipy.optimize.leastsq``) with the analytic
    Jacobian; MINPACK scales the parameters by the Jacobian's column norms (``diag`` unset), as
    ``least_squares(x_scale="jac")`` did with finite differences, and reaches the same minimum
    (``tests/test_fast_paths.py``) at a fraction of the residual evaluations.
    """
    k = len(poles)
    t = np.arange(y.shape[0]) * dt
    x0 = np.empty(2 * k)
    x0[0::2] = np.array([p[1] for p in poles]) * dt
    x0[1::2] = np.array([2.0 * math.pi * p[0] for p in poles]) * dt
    # growth is capped at e^20 over the window so that a trial pole can never overflow the basis
    prob = _RealProjection(y, t, dt, -20.0 / max(float(t[-1]), dt))
    try:
        x, _, _, _, ier = scipy_optimize.leastsq(
            prob.resid,
            x0,
            Dfun=prob.jac,
            full_output=True,
            xtol=1e-12,
            ftol=1e-12,
            gtol=1e-12,
            maxfev=10 * (2 * k + 1),
        )
    except FitError:
        raise
    except (np.linalg.LinAlgError, ValueError, TypeError) as exc:  # TypeError: MINPACK's improper input
        raise FitError(f"the fit of the record from {t0_s:.4g} s failed ({exc})") from exc
    beta, omega = prob.unpack(x)
    phi = _basis(beta, omega, t)
    c, *_ = np.linalg.lstsq(phi, y, rcond=None)
    return beta, omega, c, ier in (1, 2, 3, 4)  # MINPACK's codes of convergence


def _covariance(y, t, beta, omega, c, acf) -> tuple[np.ndarray, float]:
    """Covariance and residual variance of the fit: returns ``(cov, s2)``.

    ``cov`` (4K + 2, 4K + 2) is ordered (beta_k 1/s, f_k Hz, a_k, b_k) per mode, then the constant
    and the line; sandwich form ``A^-1 B A^-1`` with ``A = J^T J`` and ``B = s2 J^T R J`` for
    noise of normalised autocorrelation ``acf`` (n,) at the thinned lags (Kay 1993, ch. 8 [from
    memory]), plus ``J^T R_x J`` for the part of the residual's spectrum that stands
    significantly above that noise (:func:`residual_excess_acf`): what the model leaves out (a
    neighbour not found, a mode subtracted with a slightly wrong pole) acts on the estimates as
    noise of its own spectrum would, and the variance of a frequency estimate follows the
    noise density at that frequency (Hannan 1973 [from memory]), so the residual's own
    spectrum where it exceeds the noise's is the honest one. ``y``, ``t`` (n,); ``beta``,
    ``omega`` (K,); ``c`` (2K + 2,) as from :func:`_fit`.
    """
    k = beta.shape[0]
    n = t.shape[0]
    phi = _basis(beta, omega, t)
    r = y - phi @ c
    # Jacobian of the model in (beta_k, f_k, a_k, b_k) for the covariance
    jac = np.empty((n, 4 * k + 2))
    ec, es = phi[:, :k], phi[:, k : 2 * k]
    a, b = c[:k], c[k : 2 * k]
    jac[:, 0 : 4 * k : 4] = -t[:, None] * (ec * a + es * b)
    jac[:, 1 : 4 * k : 4] = 2.0 * math.pi * t[:, None] * (-es * a + ec * b)
    jac[:, 2 : 4 * k : 4] = ec
    jac[:, 3 : 4 * k : 4] = es
    jac[:, 4 * k :] = phi[:, 2 * k :]
    dof = n - 4 * k - 2
    s2 = float(np.sum(r * r)) / max(dof, 1)
    # A^-1 J^T from the SVD of the column-scaled Jacobian, J D^-1 = U S V^T: A^-1 J^T = D^-1 V S^-1 U^T,
    # and the sandwich is D^-1 V S^-1 (U^T M U) S^-1 V^T D^-1 with M = s2 R + R_x. Formed this way
    # it stays symmetric positive semi-definite when slow carried modes (a few cycles in the
    # window) make J^T J near-singular, where inverting J^T J gave negative variances
    # (Golub & Van Loan, Matrix Computations, sec. 5.3 [from memory]).
    scale = np.linalg.norm(jac, axis=0)
    scale[scale == 0.0] = 1.0
    u, sv, vt = np.linalg.svd(jac / scale, full_matrices=False)
    mu = s2 * scipy_linalg.matmul_toeplitz((acf, acf), u)
    excess = residual_excess_acf(r, s2 * acf, dof)
    if excess is not None:
        mu = mu + scipy_linalg.matmul_toeplitz((excess, excess), u)
    w = u.T @ mu
    w = 0.5 * (w + w.T)
    tol = sv[0] * max(jac.shape) * np.finfo(float).eps
    inv_sv = np.where(sv > tol, 1.0 / np.where(sv > tol, sv, 1.0), 0.0)
    g = (vt.T * inv_sv) / scale[:, None]
    return g @ w @ g.T, s2
