"""Faster evaluations of the same numbers: each checked against the reference it replaces."""

from __future__ import annotations

import numpy as np


def test_fast_legendre_evaluation_matches_numpy():
    # reference: numpy.polynomial.legendre.legval (Clenshaw) at degree 5 on [-1, 1]
    from ringdown.condition import DRIFT_DEGREE, _legval

    u = np.linspace(-1.0, 1.0, 10001)
    for seed in range(5):
        coef = np.random.default_rng(seed).standard_normal(DRIFT_DEGREE + 1) * 10.0 ** seed
        ref = np.polynomial.legendre.legval(u, coef)
        assert np.max(np.abs(_legval(u, coef) - ref)) <= 1e-13 * np.max(np.abs(coef))
