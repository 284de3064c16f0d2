"""Tests of ringdown.analysis.crlb: the Cramer-Rao bound of a damped sinusoid in white Gaussian noise."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ringdown.analysis.crlb import CramerRao, crlb_damped_sinusoid
from ringdown.base.errors import ParameterError


def _bound(n, beta_t, snr_db, *, f=0.1, phi=0.3, sample_rate=1.0):
    """Bound for sample-unit parameters: sigma = 1 and A^2 / (2 sigma^2) = 10^(snr_db/10)."""
    eta = 10.0 ** (snr_db / 10.0)
    return crlb_damped_sinusoid(
        n_samples=n,
        sample_rate=sample_rate,
        amplitude=math.sqrt(2.0 * eta),
        beta_per_s=beta_t * sample_rate,
        f_hz=f * sample_rate,
        phase_rad=phi,
        noise_sigma=1.0,
    )


# FIELD.md section 3 check values [derived there from Kay 1993 eq. 3.33]: T = 1, f = 0.1 cycle/sample,
# phi = 0.3. Given to 4 significant figures, so rtol 1e-3 (3 figures for the second case: 5e-3).
def test_field_check_value_n1000_20db():
    b = _bound(1000, 0.005, 20.0)
    assert b.beta_per_s == pytest.approx(9.997e-5, rel=1e-3)
    assert 2.0 * math.pi * b.f_hz == pytest.approx(1.000e-4, rel=1e-3)  # sd(omega T)


def test_field_check_value_n4096_40db():
    b = _bound(4096, 0.001, 40.0)
    assert b.beta_per_s == pytest.approx(9.03e-7, rel=5e-3)
    assert 2.0 * math.pi * b.f_hz == pytest.approx(9.03e-7, rel=5e-3)


@pytest.mark.parametrize("beta_t", [0.002, 0.001, 0.0005])
def test_light_damping_asymptote(beta_t):
    # FIELD.md section 3 [derived]: var(beta T) ~ var(omega T) -> 8 (beta T)^3 / eta for light damping and
    # a record much longer than the decay (N beta T = 40 here, so exp(-80) end effects vanish). The
    # first neglected term is of relative order beta T / 2 in the standard deviation, hence rtol = beta T.
    n = int(round(40.0 / beta_t))
    snr_db = 30.0
    b = _bound(n, beta_t, snr_db)
    limit = math.sqrt(8.0 * beta_t**3 / 10.0 ** (snr_db / 10.0))
    assert b.beta_per_s == pytest.approx(limit, rel=beta_t)
    assert 2.0 * math.pi * b.f_hz == pytest.approx(limit, rel=beta_t)


def _fisher_by_finite_differences(n, fs, theta, sigma):
    """Independent Fisher matrix (Kay 1993, eq. 3.33): central differences of the model itself."""
    t = np.arange(n) / fs

    def model(th):
        a, beta, f, phi = th
        return a * np.exp(-beta * t) * np.cos(2.0 * np.pi * f * t + phi)

    theta = np.asarray(theta, dtype=float)
    cols = []
    for i in range(4):
        h = 1e-6 * max(abs(theta[i]), 1.0)
        up = theta.copy()
        dn = theta.copy()
        up[i] += h
        dn[i] -= h
        cols.append((model(up) - model(dn)) / (2.0 * h))
    j = np.stack(cols, axis=1)
    return j.T @ j / sigma**2


@pytest.mark.parametrize(
    "n, fs, a, beta, f, phi, sigma",
    [
        (2000, 48000.0, 1.0, 5.0, 1000.0, 0.3, 0.01),
        (500, 100.0, 2.0, 0.19, 1.5, -1.0, 0.05),
        (3000, 8000.0, 0.3, 40.0, 700.0, 2.0, 0.002),
    ],
)
def test_against_finite_difference_fisher(n, fs, a, beta, f, phi, sigma):
    # Exact reference computed another way: numerical derivatives of the model, numpy inverse.
    # Central differences with h ~ 1e-6 are accurate to ~1e-8 relative; rtol 1e-5 leaves room for
    # the conditioning of the 4x4 inverse.
    fisher = _fisher_by_finite_differences(n, fs, (a, beta, f, phi), sigma)
    sd = np.sqrt(np.diag(np.linalg.inv(fisher)))
    b = crlb_damped_sinusoid(
        n_samples=n, sample_rate=fs, amplitude=a, beta_per_s=beta, f_hz=f, phase_rad=phi, noise_sigma=sigma
    )
    np.testing.assert_allclose([b.amplitude, b.beta_per_s, b.f_hz, b.phase_rad], sd, rtol=1e-5)
    cov = np.linalg.inv(fisher)
    assert b.cov_f_beta == pytest.approx(cov[1, 2], rel=1e-4)


@settings(max_examples=30, deadline=None)
@given(
    sigma=st.floats(1e-4, 10.0),
    scale=st.floats(0.1, 10.0),
)
def test_bound_scales_linearly_with_noise(sigma, scale):
    # The Fisher matrix is proportional to 1/sigma^2 (Kay 1993, eq. 3.33), so every bound is
    # proportional to sigma: a property of the definition, checked to rounding.
    kw = dict(n_samples=400, sample_rate=1000.0, amplitude=1.0, beta_per_s=10.0, f_hz=123.0, phase_rad=0.7)
    b1 = crlb_damped_sinusoid(noise_sigma=sigma, **kw)
    b2 = crlb_damped_sinusoid(noise_sigma=sigma * scale, **kw)
    np.testing.assert_allclose(
        [b2.amplitude, b2.beta_per_s, b2.f_hz, b2.phase_rad],
        scale * np.array([b1.amplitude, b1.beta_per_s, b1.f_hz, b1.phase_rad]),
        rtol=1e-9,
    )


def test_result_is_frozen_and_serialises():
    b = _bound(1000, 0.005, 20.0)
    assert isinstance(b, CramerRao)
    d = b.to_dict()
    assert set(d) == {"amplitude", "beta_per_s", "f_hz", "phase_rad", "cov_f_beta", "snr_db"}
    assert d["snr_db"] == pytest.approx(20.0)
    with pytest.raises(AttributeError):
        b.f_hz = 0.0  # type: ignore[misc]


@pytest.mark.parametrize(
    "change, match",
    [
        (dict(n_samples=3), "n_samples"),
        (dict(sample_rate=0.0), "sample_rate"),
        (dict(amplitude=-1.0), "amplitude"),
        (dict(noise_sigma=float("nan")), "noise_sigma"),
        (dict(beta_per_s=-0.1), "beta_per_s"),
        (dict(f_hz=600.0), "Nyquist"),
        (dict(phase_rad=float("inf")), "phase_rad"),
    ],
)
def test_bad_parameters_raise(change, match):
    kw = dict(
        n_samples=400, sample_rate=1000.0, amplitude=1.0, beta_per_s=10.0, f_hz=123.0, phase_rad=0.7, noise_sigma=0.1
    )
    kw.update(change)
    with pytest.raises(ParameterError, match=match):
        crlb_damped_sinusoid(**kw)
