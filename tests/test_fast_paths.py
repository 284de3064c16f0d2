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
