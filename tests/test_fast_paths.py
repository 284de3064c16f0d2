"""Faster evaluations of the same numbers: each checked against the reference it replaces."""

from __future__ import annotations

import numpy as np
import pytest


def test_fast_legendre_evaluation_matches_numpy():
    # reference: numpy.polynomial.legendre.legval (Clenshaw) at degree 5 on [-1, 1]
    from ringdown.analysis.condition import DRIFT_DEGREE, _legval

    u = np.linspace(-1.0, 1.0, 10001)
    for seed in range(5):
        coef = np.random.default_rng(seed).standard_normal(DRIFT_DEGREE + 1) * 10.0**seed
        ref = np.polynomial.legendre.legval(u, coef)
        assert np.max(np.abs(_legval(u, coef) - ref)) <= 1e-13 * np.max(np.abs(coef))


def test_noise_correlation_sum_matches_the_full_sum():
    # reference: the plain sum of Band.noise_correlation over every lag -(n-1)..(n-1)
    from ringdown.analysis.bands import Band

    band = Band(
        z=np.zeros(8, complex),
        sample_rate=400.0,
        t0_s=0.0,
        f_shift_hz=1000.0,
        f_lo_hz=980.0,
        f_hi_hz=1020.0,
        skirt_hz=10.0,
    )
    for n, spacing in ((1, 0.0025), (7, 0.0025), (5000, 0.0025), (5000, 1e-5), (300, 0.05), (40, 0.0)):
        full = float(np.sum(band.noise_correlation(np.arange(-n + 1, n) * spacing)))
        assert band.noise_correlation_sum(n, spacing) == pytest.approx(full, rel=1e-14)


def _heavily_damped_record(seed: int = 3):
    """Invented record: a Q ~ 4 mode at 200 Hz beside a lighter one at 900 Hz, an offset and a
    slope, in white noise, 8 kHz; the two modes' (f_hz, beta_per_s) are returned with it."""
    fs = 8000.0
    t = np.arange(4000) / fs
    truth = [(200.0, 150.0), (900.0, 30.0)]
    x = 0.02 + 0.01 * t
    for (f, b), a, ph in zip(truth, (1.0, 0.4), (0.3, -1.1)):
        x = x + a * np.exp(-b * t) * np.cos(2 * np.pi * f * t + ph)
    x = x + 1e-3 * np.random.default_rng(seed).standard_normal(t.shape[0])
    return x, fs, truth


def test_real_fit_analytic_jacobian_matches_central_differences():
    # reference: central differences of the same residual, error O(h^2) (Nocedal & Wright,
    # Numerical Optimization, 2006, sec. 8.1 [from memory]); h = 1e-6 on parameters of order
    # 0.02-0.7 leaves a truncation error near 1e-7 of the column norms, hence the 1e-5 bound
    from ringdown.analysis.estimators.real import _RealProjection

    x, fs, truth = _heavily_damped_record()
    dt = 2.0 / fs  # every 2nd sample, as the thinning does
    y = x[::2]
    t = np.arange(y.shape[0]) * dt
    prob = _RealProjection(y, t, dt, -20.0 / t[-1])
    # away from the minimum (a 3 % and 1 % start error), where the second Golub-Pereyra term matters
    x0 = np.array([truth[0][1] * 1.03, 2 * np.pi * truth[0][0] * 1.01, truth[1][1] * 0.97, 2 * np.pi * truth[1][0]])
    x0 = np.ravel(np.column_stack([x0[0::2], x0[1::2]])) * dt
    jac = prob.jac(x0)
    h = 1e-6
    ref = np.empty_like(jac)
    for j in range(x0.shape[0]):
        e = np.zeros_like(x0)
        e[j] = h
        ref[:, j] = (prob.resid(x0 + e) - prob.resid(x0 - e)) / (2 * h)
    scale = np.linalg.norm(ref, axis=0)
    assert np.all(scale > 0)
    assert np.max(np.abs(jac - ref) / scale) < 1e-5


def test_real_fit_reaches_the_numeric_jacobian_minimum():
    # reference: scipy.optimize.least_squares (MINPACK Levenberg-Marquardt, forward-difference
    # Jacobian) on the plain residual y - Phi Phi^+ y (numpy.linalg.lstsq): the fit this estimator
    # used before its analytic Jacobian. Both stop at xtol = ftol = gtol = 1e-12, so they must give
    # the same poles to far better than their standard uncertainties (1e-6 relative bound).
    from scipy.optimize import least_squares

    from ringdown.analysis.estimators import real

    x, fs, truth = _heavily_damped_record()
    noise_f = np.linspace(0.0, fs / 2, 257)
    noise_p = np.full(257, 2.0 * 1e-6 / fs)
    ests = real.estimate_real(
        x,
        fs,
        t0_s=0.0,
        poles=[(f * 1.01, b * 1.05) for f, b in truth],
        n_targets=2,
        duration_s=0.5,
        noise_f=noise_f,
        noise_p=noise_p,
    )
    # the samples the fit used: thinned, and boxcar means where that raises every target's SNR
    starts = [(f * 1.01, b * 1.05) for f, b in truth]
    y, step, _ = real._samples(x, fs, 0.5, starts)
    dt = step / fs
    t = np.arange(y.shape[0]) * dt

    def resid(p):
        phi = real._basis(np.maximum(p[0::2] / dt, -20.0 / t[-1]), p[1::2] / dt, t)
        return y - phi @ np.linalg.lstsq(phi, y, rcond=None)[0]

    x0 = np.ravel([[b * 1.05 * dt, 2 * np.pi * f * 1.01 * dt] for f, b in truth])
    ref = least_squares(resid, x0, method="lm", x_scale="jac", xtol=1e-12, ftol=1e-12, gtol=1e-12).x
    assert [e.beta_per_s for e in ests] == pytest.approx(list(ref[0::2] / dt), rel=1e-6)
    assert [e.f_d_hz for e in ests] == pytest.approx(list(ref[1::2] / dt / (2 * np.pi)), rel=1e-9)
    # and the fit is honest against the simulated truth: within 4 of its standard uncertainties
    for e, (f, b) in zip(ests, truth):
        assert abs(e.beta_per_s - b) < 4 * e.beta_per_s_u
        assert abs(e.f_d_hz - f) < 4 * e.f_d_hz_u
        assert e.converged


@pytest.mark.parametrize("kind", ["white", "ties", "walk", "plateaus", "smoothed spectrum"])
def test_prominent_peaks_equal_scipy_find_peaks(kind):
    # reference: scipy.signal.find_peaks(x, prominence=h) and its "prominences", which the broad
    # peak search used before; equal bit for bit (indices and values), ties and flat tops included
    from scipy import ndimage, signal

    from ringdown.base._prominence import prominent_peaks

    rng = np.random.default_rng(["white", "ties", "walk", "plateaus", "smoothed spectrum"].index(kind))
    for _ in range(60):
        n = int(rng.integers(1, 3000))
        if kind == "white":
            x = rng.standard_normal(n)
        elif kind == "ties":
            x = rng.integers(0, 4, n).astype(float)
        elif kind == "walk":
            x = np.cumsum(rng.standard_normal(n))
        elif kind == "plateaus":
            x = np.repeat(rng.integers(0, 6, n // 3 + 1).astype(float), 3)[:n] + np.linspace(0, rng.uniform(-3, 3), n)
        else:  # a decaying spectrum of noise, smoothed as the broad search does: ripple maxima on slopes
            p = rng.exponential(size=n) * np.exp(-np.linspace(0, 10, n)) + 1e-6
            x = 10 * np.log10(ndimage.uniform_filter1d(p, int(rng.integers(2, 64)), mode="nearest"))
        for h in (0.0, 0.5, 3.0, 6.0):
            ref_idx, props = signal.find_peaks(x, prominence=h)
            idx, prom = prominent_peaks(x, h)
            assert np.array_equal(idx, ref_idx)
            assert np.array_equal(prom, props["prominences"])


def test_prominent_peaks_where_keeps_scipy_prominences_of_the_chosen_peaks():
    # reference: scipy.signal.find_peaks(x, prominence=h) on the whole array, then only the peaks
    # at samples where the mask is True: the masked-out peaks still bound the others' walks, so
    # indices and prominences equal scipy's bit for bit
    from scipy import ndimage, signal

    from ringdown.base._prominence import prominent_peaks

    rng = np.random.default_rng(11)
    for _ in range(80):
        n = int(rng.integers(1, 3000))
        p = rng.exponential(size=n) * np.exp(-np.linspace(0, 10, n)) + 1e-6
        x = 10 * np.log10(ndimage.uniform_filter1d(p, int(rng.integers(2, 64)), mode="nearest"))
        where = rng.random(n) < rng.choice([0.0, 0.01, 0.3, 1.0])
        for h in (0.0, 3.0, 6.0):
            ref_idx, props = signal.find_peaks(x, prominence=h)
            sel = where[ref_idx]
            idx, prom = prominent_peaks(x, h, where=where)
            assert np.array_equal(idx, ref_idx[sel])
            assert np.array_equal(prom, props["prominences"][sel])


def test_envelope_level_equals_the_clipped_window_means():
    # reference: the mean of x^2 over each sample's window [i - w//2, i - w//2 + w) clipped to the
    # record, from the cumulative sum indexed at the clipped ends (what condition.envelope_db
    # computed before it took slices); equal bit for bit, windows longer than the record included
    from ringdown.analysis.condition import _EPS, envelope_db

    rng = np.random.default_rng(12)
    for n in [*range(1, 30), 997, 96_000]:
        x = rng.standard_normal(n)
        for w in sorted({1, 2, 3, 4, 7, 8, 37, max(n - 1, 1), n, n + 1, 2 * n, 2 * n + 3}):
            c = np.concatenate(([0.0], np.cumsum(x * x)))
            lo = np.clip(np.arange(n) - w // 2, 0, n)
            hi = np.clip(np.arange(n) - w // 2 + w, 0, n)
            ref = 10.0 * np.log10((c[hi] - c[lo]) / np.maximum(hi - lo, 1) + _EPS)
            assert np.array_equal(envelope_db(x, 1000.0, smoothing=w), ref), (n, w)


def test_rises_equal_the_full_running_extrema():
    # reference: the rule of condition._rises written with scipy.ndimage's running minimum and
    # maximum over the whole level (constant borders), as it was computed before the maximum was
    # taken at the candidate rises alone; equal index for index
    from scipy.ndimage import maximum_filter1d, minimum_filter1d

    from ringdown.analysis.condition import _rises

    def reference(level, w, hold, rise_db, threshold):
        n = level.shape[0]
        prev_min = np.full(n, np.inf)
        prev_min[1:] = minimum_filter1d(level, size=w, origin=(w - 1) // 2, mode="constant", cval=np.inf)[:-1]
        prev_max = np.full(n, -np.inf)
        span = min(hold - w, n)
        if span > 0 and n > w:
            mx = maximum_filter1d(level, size=span, origin=(span - 1) // 2, mode="constant", cval=-np.inf)
            prev_max[w:] = mx[: n - w]
        return np.flatnonzero((level - prev_min >= rise_db) & (level >= threshold) & (level >= prev_max + 3.0))

    rng = np.random.default_rng(13)
    for _ in range(200):
        n = int(rng.integers(2, 4000))
        # a noisy level with a few steps up (taps) and slow decays between them
        level = np.cumsum(rng.normal(-0.01, 0.5, n))
        for k in rng.integers(0, n, int(rng.integers(0, 12))):
            level[k:] += rng.uniform(5.0, 40.0)
        w = int(rng.integers(1, 40))
        hold = int(rng.integers(1, 600))
        for rise_db, threshold in ((3.0, -np.inf), (12.0, float(np.median(level))), (1.0, float(level.max()) + 1)):
            assert np.array_equal(
                _rises(level, w, hold, rise_db, threshold), reference(level, w, hold, rise_db, threshold)
            )


def test_peak_height_at_the_maxima_equals_the_whole_array():
    # reference: the same level computed over every bin of the spectrum (what find_peaks did
    # before it asked for the local maxima alone), then read at the maxima; numpy.interp and
    # log10 work element by element, so the values are equal bit for bit
    from ringdown.analysis.peaks import _peak_height, _spectrum

    rng = np.random.default_rng(14)
    fs = 8000.0
    for n in (64, 1000, 5001):
        t = np.arange(n) / fs
        x = np.exp(-20 * t) * np.cos(2 * np.pi * 700 * t) + 1e-3 * rng.standard_normal(n)
        f, p_db, w2 = _spectrum(x, fs)
        inner = p_db[1:-1]
        maxima = np.flatnonzero((inner > p_db[:-2]) & (inner >= p_db[2:])) + 1
        noise = (np.linspace(0, fs / 2, 129), rng.uniform(0.5, 2.0, 129) * 2e-6 / fs)
        for psd in (None, noise):
            whole = _peak_height(f, p_db, n, fs, w2, 15.0, psd, None, at=np.arange(f.shape[0]))
            assert np.array_equal(_peak_height(f, p_db, n, fs, w2, 15.0, psd, None, at=maxima), whole[maxima])


def test_half_power_lorentzian_jacobian_and_fit_match_finite_differences():
    # reference: central differences of the Lorentzian (error O(h^2), h = 1e-6 of each
    # parameter: ~1e-9 of the column norms, hence 1e-6), and scipy.optimize.curve_fit with its own
    # finite-difference Jacobian on the same data, which must reach the same minimum (1e-6)
    from scipy.optimize import curve_fit

    from ringdown.analysis.estimators.half_power import _lorentz, _lorentz_jac

    f = np.linspace(990.0, 1010.0, 161)
    par = np.array([2.0, 1000.3, 1.7, 0.05])
    jac = _lorentz_jac(f, *par)
    ref = np.empty_like(jac)
    for j in range(4):
        h = 1e-6 * abs(par[j])
        e = np.zeros(4)
        e[j] = h
        ref[:, j] = (_lorentz(f, *(par + e)) - _lorentz(f, *(par - e))) / (2 * h)
    assert np.max(np.abs(jac - ref) / np.linalg.norm(ref, axis=0)) < 1e-6
    y = _lorentz(f, *par) * (1 + 0.05 * np.random.default_rng(2).standard_normal(f.shape[0]))
    start = (1.5, 1000.0, 2.5, 0.0)
    with_jac, _ = curve_fit(_lorentz, f, y, p0=start, jac=_lorentz_jac, maxfev=4000)
    numeric, _ = curve_fit(_lorentz, f, y, p0=start, maxfev=4000)
    assert with_jac == pytest.approx(numeric, rel=1e-6, abs=1e-9)


def test_residual_subtraction_matches_lstsq():
    # reference: numpy.linalg.lstsq on the directly evaluated basis exp(-beta t) cos / sin (what
    # pipeline._subtract_modes solved before its normal equations and block exponentials); the
    # residual may differ by rounding only: 1e-10 of the segment's peak (the Gram matrix of these
    # well separated modes is conditioned near 10, so the normal equations lose ~1 digit)
    from types import SimpleNamespace

    from ringdown.analysis.pipeline import _subtract_modes

    fs = 48000.0
    t = np.arange(93_499) / fs
    modes = [SimpleNamespace(f_d_hz=f, beta_per_s=b) for f, b in ((440.0, 4.0), (1370.0, 9.0), (3120.0, 20.0))]
    rng = np.random.default_rng(5)
    seg = sum(
        a * np.exp(-m.beta_per_s * t) * np.cos(2 * np.pi * m.f_d_hz * t + p)
        for m, a, p in zip(modes, (0.5, 0.3, 0.2), (0.1, 1.0, 2.0))
    )
    seg = seg + 0.01 * np.sin(2 * np.pi * 2000.0 * t) * np.exp(-30.0 * t) + 1e-4 * rng.standard_normal(t.shape[0])
    cols = []
    for m in modes:
        cols += [
            np.exp(-m.beta_per_s * t) * np.cos(2 * np.pi * m.f_d_hz * t),
            np.exp(-m.beta_per_s * t) * np.sin(2 * np.pi * m.f_d_hz * t),
        ]
    phi = np.stack(cols, axis=1)
    ref = seg - phi @ np.linalg.lstsq(phi, seg, rcond=None)[0]
    got = _subtract_modes(seg, fs, modes)
    assert np.max(np.abs(got - ref)) < 1e-10 * np.max(np.abs(seg))
    # what is left is the fourth component and the noise: the subtraction removed the three modes
    assert np.std(got) == pytest.approx(np.std(ref), rel=1e-9)


def test_innovation_matches_fft_autocorrelation_predictor():
    # reference: the Yule-Walker predictor from scipy.signal.correlate's (FFT) autocorrelation,
    # scipy.linalg.solve_toeplitz and scipy.signal.lfilter, as condition.innovation computed it
    # before its lags came from dot products; equal to 1e-9 of the record's peak
    from scipy import linalg, signal

    from ringdown.analysis.condition import INNOVATION_ORDER, innovation

    rng = np.random.default_rng(9)
    t = np.arange(20_000) / 8000.0
    x = np.exp(-3.0 * t) * np.cos(2 * np.pi * 700.0 * t) + 0.3 * np.exp(-8.0 * t) * np.cos(2 * np.pi * 1900.0 * t)
    x = x + 1e-3 * rng.standard_normal(t.shape[0])
    p = INNOVATION_ORDER
    r = signal.correlate(x, x, mode="full", method="fft")[x.shape[0] - 1 : x.shape[0] + p] / x.shape[0]
    r[0] *= 1.0 + 1e-9  # the same white-noise regularisation
    a = linalg.solve_toeplitz(r[:p], r[1 : p + 1])
    ref = signal.lfilter(np.concatenate(([1.0], -a)), [1.0], x)
    assert np.max(np.abs(innovation(x) - ref)) < 1e-9 * np.max(np.abs(x))


def test_thinned_fit_mirror_image_is_moved_back_to_its_start():
    # Sampling theorem (Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed., 4.2):
    # samples taken at fs / step = 12 kHz (48 kHz, every 4th) of cos(2 pi f t) equal those of
    # k 12 kHz +- f, so 6207 Hz and 2 * 12000 - 6207 = 17793 Hz give the same thinned samples;
    # the mirror image (sign -1) flips the sign of cov(f, beta). Hand-worked numbers.
    from ringdown.analysis.estimators.real import _unaliased
    from ringdown.analysis.results import Estimate

    e = Estimate(method="pencil", f_d_hz=17793.0, f_d_hz_u=0.1, beta_per_s=50.0, beta_per_s_u=1.0, cov_f_beta=0.02)
    (back,) = _unaliased([e], [6210.0], 48000.0, 4)
    assert back.f_d_hz == pytest.approx(6207.0, abs=1e-9)
    assert back.cov_f_beta == pytest.approx(-0.02)
    # started near the mirror image itself, or not thinned at all: left as it is
    assert _unaliased([e], [17790.0], 48000.0, 4)[0].f_d_hz == 17793.0
    assert _unaliased([e], [6210.0], 48000.0, 1)[0].f_d_hz == 17793.0


def test_real_fit_holds_a_vanishing_trial_pole_and_refuses_a_non_finite_step(capfd):
    # A trial step to beta dt = 700 underflows exp(-beta t) to zero after the first sample
    # (exp(-700) ~ 1e-304, below it denormal/zero), which once made MINPACK's next step NaN and
    # LAPACK print "DLASCL parameter 4" to the terminal. The decay is held at 20 per sample
    # (MAX_DECAY_PER_SAMPLE), with no derivative there, and a NaN step is a FitError before
    # any LAPACK call: nothing reaches the file descriptors (capfd).
    from ringdown.analysis.estimators.real import MAX_DECAY_PER_SAMPLE, _RealProjection
    from ringdown.base.errors import FitError

    x, fs, truth = _heavily_damped_record()
    dt = 2.0 / fs
    y = x[::2]
    t = np.arange(y.shape[0]) * dt
    prob = _RealProjection(y, t, dt, -20.0 / t[-1])
    x0 = np.array([truth[0][1] * dt, 2 * np.pi * truth[0][0] * dt, 700.0, 711.0])
    beta, _ = prob.unpack(x0)
    assert beta[0] == pytest.approx(truth[0][1], rel=1e-12)
    assert beta[1] == MAX_DECAY_PER_SAMPLE / dt
    assert np.all(np.isfinite(prob.resid(x0)))
    jac = prob.jac(x0)
    assert np.all(np.isfinite(jac))
    assert np.all(jac[:, 2] == 0.0)  # the held decay rate moves nothing
    with pytest.raises(FitError, match="non-finite"):
        prob.resid(np.array([np.nan, 0.1, 0.2, 0.3]))
    out, err = capfd.readouterr()
    assert out == "" and err == ""


def test_raw_fit_covariance_is_the_textbook_one_and_stays_positive():
    """``estimators.real._covariance`` in white noise (normalised autocorrelation 1, 0, 0, ...)
    is the least-squares covariance s2 (J^T J)^-1 (Kay 1993, ch. 8 [from memory]): checked on a
    well-conditioned two-mode window against that formula, to 1e-8. With slow carried modes of a
    few cycles in the window (383 and 446 Hz over 5.5 ms beside 3610 and 4980 Hz, benchmark
    record 45 of seed 7) J^T J is near-singular; a sandwich of a positive semi-definite matrix is
    positive semi-definite (Golub & Van Loan, Matrix Computations [from memory]), so every
    variance must come out positive. (The negative variance that inverting J^T J gave on that
    record, with its measured noise correlation, is not reproduced by this white-noise window;
    the record itself is checked by test_detection's
    test_short_raw_fit_holds_the_poles_of_slow_modes.)"""
    import math

    from ringdown.analysis.estimators import real

    fs = 16000.0
    rng = np.random.default_rng(3)

    def cov_of(freqs, betas, n):
        t = np.arange(n) / fs
        beta, omega = np.array(betas), 2 * math.pi * np.array(freqs)
        c = np.concatenate([rng.uniform(0.2, 1.0, 2 * len(freqs)), [0.0, 0.0]])
        y = real._basis(beta, omega, t) @ c + 1e-3 * rng.standard_normal(n)
        acf = np.zeros(n)
        acf[0] = 1.0
        return real._covariance(y, t, beta, omega, c, acf), y, t, beta, omega, c

    (cov, s2), y, t, beta, omega, c = cov_of([1000.0, 2500.0], [50.0, 80.0], 4000)
    k = 2
    phi = real._basis(beta, omega, t)
    jac = np.empty((t.shape[0], 4 * k + 2))
    ec, es = phi[:, :k], phi[:, k : 2 * k]
    jac[:, 0 : 4 * k : 4] = -t[:, None] * (ec * c[:k] + es * c[k : 2 * k])
    jac[:, 1 : 4 * k : 4] = 2 * math.pi * t[:, None] * (-es * c[:k] + ec * c[k : 2 * k])
    jac[:, 2 : 4 * k : 4], jac[:, 3 : 4 * k : 4], jac[:, 4 * k :] = ec, es, phi[:, 2 * k :]
    ref = s2 * np.linalg.inv(jac.T @ jac)
    assert np.allclose(cov, ref, rtol=1e-8, atol=0.0)
    (cov, _), *_ = cov_of([3610.0, 4980.0, 383.0, 446.0], [700.0, 880.0, 13.8, 1.3], 88)
    assert np.all(np.diag(cov) > 0.0)
