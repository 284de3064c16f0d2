"""The test whether a later tap changed a component (ringdown.analysis.retap.phasor_changes).

References: the Wald statistic of a linear least-squares fit in Gaussian noise is chi-square with
as many degrees of freedom as coefficients tested (Wald 1943); the binomial law for the count of
exceedances over independent seeded records. Invented signals: exact damped cosines (FIELD.md
section 1) and a steady sinusoid, seeded white noise.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from ringdown.analysis.retap import _wald, phasor_changes

FS = 4000.0
N = 8000  # 2 s
TAPS = [400, 4800]  # onsets, samples
HUM = (50.0, 0.0)  # steady tone (f_hz, beta_per_s)
MODE = (120.0, math.pi * 120.0 / 2000.0)  # Q 2000, tapped twice


def _record(rng, *, hum_amp: float, mode_gain: float = 0.7, hum_f: float = HUM[0]) -> np.ndarray:
    """A steady tone from the first sample, a lightly damped mode started by each tap (the second
    with gain ``mode_gain`` and a random phase) and white noise of unit variance."""
    t = np.arange(N) / FS
    x = hum_amp * np.cos(2 * math.pi * hum_f * t + 0.3) + rng.standard_normal(N)
    f, beta = MODE
    for k, (o, g) in enumerate(zip(TAPS, (1.0, mode_gain))):
        tau = t[o:] - t[o]
        x[o:] += (
            30.0 * g * np.exp(-beta * tau) * np.cos(2 * math.pi * f * tau + (0.0 if k == 0 else rng.uniform(-3, 3)))
        )
    return x


def test_steady_tone_statistic_is_chi_square_with_two_degrees_of_freedom():
    # a steady tone 20 dB above the noise density's line (amplitude 3, unit white noise), the
    # mode beside it held: the Wald statistic of the tone follows chi2(2) (Wald 1943), so it
    # exceeds its 5 % quantile in 5 % of 300 seeded records; the count lies inside the binomial
    # 99.9 % interval of that rate. The statistic over its empirical null (phasor_changes) is
    # never larger, so it exceeds that quantile at most as often (conservative)
    rng = np.random.default_rng(20261203)
    n_rec = 300
    ws, scaled = [], []
    for _ in range(n_rec):
        x = _record(rng, hum_amp=3.0)
        (w,) = _wald(x, FS, TAPS, 20, [HUM], [MODE])
        ws.append(w)
        if len(scaled) < 60:
            ((w_s, dof),) = phasor_changes(x, FS, TAPS, 20, [HUM], [MODE])
            assert dof == 2
            assert w_s <= w * (1 + 1e-9)
            scaled.append(w_s)
    q95 = stats.chi2.isf(0.05, 2)
    over = int(np.sum(np.array(ws) > q95))
    lo, hi = stats.binom.interval(0.999, n_rec, 0.05)
    assert lo <= over <= hi, over
    assert int(np.sum(np.array(scaled) > q95)) <= stats.binom.interval(0.999, len(scaled), 0.05)[1]


def test_held_pole_slightly_off_does_not_change_a_strong_steady_tone():
    # a tone 40 dB above the noise line whose held frequency is 0.01 Hz off (0.13 rad of phase
    # over the record): the first-order term of the model takes the drift, so the statistic stays
    # below the 1e-3 quantile of chi2(2) (the pipeline's false-alarm rate, RETAP_ALPHA)
    rng = np.random.default_rng(5)
    x = _record(rng, hum_amp=30.0, hum_f=50.01)
    ((w, _),) = phasor_changes(x, FS, TAPS, 20, [HUM], [MODE])
    assert w < stats.chi2.isf(1e-3, 2), w


def test_mode_a_second_tap_excited_is_changed():
    # the mode tested as if it were steady (the hum held instead): its second tap adds a phasor of
    # amplitude 21 (gain 0.7) where the noise allows about 0.02 per coefficient, so the statistic
    # over its empirical null is far above the 1e-3 quantile of chi2(2)
    rng = np.random.default_rng(6)
    x = _record(rng, hum_amp=3.0)
    ((w, _),) = phasor_changes(x, FS, TAPS, 20, [MODE], [HUM])
    assert w > 30 * stats.chi2.isf(1e-3, 2), w


def _full_fit_wald(x, fs, onsets, skip, tested, held):
    """Reference: the Wald statistic of each tested component's steps from one least-squares fit
    of every column of the model (retap's module docstring) with numpy.linalg.lstsq, nothing
    projected out, for the partial-regression test below."""
    from ringdown.analysis.retap import DIFFERENCES, _columns, _local_density

    n0 = onsets[0]
    y = np.asarray(x[n0:], dtype=float)
    t = np.arange(y.shape[0]) / fs
    tau = t / t[-1]
    starts = [(o - n0) / fs for o in onsets]
    keep = np.ones(y.shape[0], dtype=bool)
    for o in onsets:
        keep[o - n0 : o - n0 + skip] = False
    cols, step_at = [], []
    for f, _ in tested:
        base = _columns(t, f, 0.0, 0.0)
        cols += [base, base * tau[:, None], base * (tau * tau)[:, None]]
        step_at.append(sum(c.shape[1] for c in cols))
        cols += [_columns(t, f, 0.0, s) for s in starts[1:]]
    for f, beta in held:
        for s in starts:
            c = _columns(t, f, beta, s)
            cols += [c, c * np.maximum(tau - s / t[-1], 0.0)[:, None]]
    phi = np.diff(np.concatenate(cols, axis=1), n=DIFFERENCES, axis=0)[keep[DIFFERENCES:]]
    phi /= np.sqrt(np.sum(phi * phi, axis=0))
    yk = np.diff(y, n=DIFFERENCES)[keep[DIFFERENCES:]]
    coef = np.linalg.lstsq(phi, yk, rcond=None)[0]
    resid = np.zeros(y.shape[0] - DIFFERENCES)
    resid[keep[DIFFERENCES:]] = yk - phi @ coef
    g = np.linalg.pinv(phi.T @ phi)
    lines = [f for f, _ in tested] + [f for f, _ in held]
    k = 2 * (len(onsets) - 1)
    out = []
    for (f, _), i in zip(tested, step_at):
        cov = _local_density(resid, fs, f, lines) * fs / 2.0 * g[i : i + k, i : i + k]
        out.append(float(coef[i : i + k] @ np.linalg.solve(cov, coef[i : i + k])))
    return out


def test_partial_regression_gives_the_full_fit_statistic():
    # Frisch-Waugh-Lovell theorem (Frisch & Waugh 1933, Lovell 1963 [from memory]): the
    # coefficients and covariance of a block in a least-squares fit equal those of the block
    # fitted alone once the other columns are projected out of it and the data; the statistic
    # phasor_changes takes from retap._Design must equal one full fit's (_full_fit_wald) to rounding
    from ringdown.analysis.retap import _Design

    rng = np.random.default_rng(5)
    x = _record(rng, hum_amp=3.0)
    tested = [HUM, (310.0, 0.0)]
    full = _full_fit_wald(x, FS, TAPS, 20, tested, [MODE])
    np.testing.assert_allclose(_wald(x, FS, TAPS, 20, tested, [MODE]), full, rtol=1e-6)
    fit = _Design(x, FS, TAPS, 20)
    blocks = [fit.tested(f) for f, _ in tested]
    lines = [f for f, _ in tested] + [MODE[0]]
    fast = fit.wald(blocks, fit.basis([fit.held([MODE])]), [f for f, _ in tested], lines)
    np.testing.assert_allclose(fast, full, rtol=1e-6)
    # the reference fits: one component with the other projected out with the held mode
    (ref_full,) = _full_fit_wald(x, FS, TAPS, 20, [(62.0, 0.0), tested[1]], [MODE])[:1]
    (ref_fast,) = fit.wald(
        [fit.tested(62.0)], fit.basis([blocks[1]], prior=fit.basis([fit.held([MODE])])), [62.0], [62.0, 310.0, MODE[0]]
    )
    np.testing.assert_allclose(ref_fast, ref_full, rtol=1e-6)
