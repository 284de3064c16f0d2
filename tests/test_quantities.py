"""ringdown.analysis.quantities.derive against the textbook relations of FIELD.md section 1.

Sources: Rao, *Mechanical Vibrations*, ch. 2-3 (damped free vibration, logarithmic decrement);
Inman, *Engineering Vibration* (damping ratio, Q, half-power bandwidth); the check values and the
worked example are those listed in FIELD.md section 1 [derived there]. Uncertainty propagation is
compared with a Monte Carlo propagation of distributions (JCGM 101:2008, GUM Supplement 1).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ringdown.analysis.quantities import DB_PER_NEPER, derive
from ringdown.base.errors import ParameterError

TWO_PI = 2 * math.pi


def from_zeta(f_n_hz: float, zeta: float) -> tuple[float, float]:
    """(f_d_hz, beta_per_s) of a mode with natural frequency f_n and damping ratio zeta.

    omega_d = omega_0 sqrt(1 - zeta^2), beta = zeta omega_0 (Rao, damped free vibration).
    """
    w0 = TWO_PI * f_n_hz
    return f_n_hz * math.sqrt(1 - zeta**2), zeta * w0


@pytest.mark.parametrize("zeta", [0.001, 0.01, 0.05, 0.1, 0.3])
def test_definitions(zeta):
    f_d, beta = from_zeta(1000.0, zeta)
    d = derive(f_d, beta)
    w0 = math.sqrt((TWO_PI * f_d) ** 2 + beta**2)  # omega_0 = sqrt(omega_d^2 + beta^2)
    assert d.f_d_hz == f_d and d.beta_per_s == beta
    assert d.f_n_hz == pytest.approx(1000.0, rel=1e-12)
    assert d.zeta == pytest.approx(beta / w0, rel=1e-12)  # zeta = beta / omega_0
    assert d.zeta == pytest.approx(zeta, rel=1e-12)
    assert d.q == pytest.approx(1 / (2 * zeta), rel=1e-12)  # Q = 1 / (2 zeta)
    assert d.loss_factor == pytest.approx(2 * zeta, rel=1e-12)  # eta = 2 zeta
    t_d = 1 / f_d
    assert d.log_decrement == pytest.approx(beta * t_d, rel=1e-12)  # delta = beta T_d
    # delta = 2 pi zeta / sqrt(1 - zeta^2) (Rao, logarithmic decrement)
    assert d.log_decrement == pytest.approx(TWO_PI * zeta / math.sqrt(1 - zeta**2), rel=1e-12)
    assert d.decay_db_per_s == pytest.approx(8.686 * beta, rel=1e-4)  # D = 20 log10(e) beta = 8.686 beta
    assert d.t60_s == pytest.approx(6.908 / beta, rel=1e-4)  # T60 = 60 / D = 6.908 / beta
    # displacement resonance f_r = sqrt(f_n^2 - 2 (beta / 2 pi)^2)
    assert d.f_r_hz == pytest.approx(math.sqrt(1000.0**2 - 2 * (beta / TWO_PI) ** 2), rel=1e-12)
    # without input uncertainties no derived uncertainty is invented
    assert d.zeta_u is None and d.q_u is None and d.t60_s_u is None and d.f_r_hz_u is None


def test_db_per_neper():
    assert DB_PER_NEPER == pytest.approx(8.6859, abs=5e-5)  # 20 log10(e) (FIELD.md s. 1)


@pytest.mark.parametrize(
    "zeta, delta",
    [
        (0.05, 0.31455),  # FIELD.md s. 1 check value (vs 2 pi zeta = 0.31416)
        (0.1, 0.6315),  # FIELD.md s. 1 check value (vs 2 pi zeta = 0.6283)
    ],
)
def test_log_decrement_check_values(zeta, delta):
    f_d, beta = from_zeta(250.0, zeta)
    d = derive(f_d, beta)
    assert d.log_decrement == pytest.approx(delta, abs=6e-5)  # values quoted to 5 and 4 digits
    assert d.log_decrement > TWO_PI * zeta  # light-damping approximation is low


def test_worked_example_1khz_eta_1e3():
    # FIELD.md s. 1 worked check: f = 1 kHz, eta = 1e-3 -> beta = 3.14 /s, D = 27.3 dB/s,
    # T60 = 2.2 s, half-power bandwidth 1 Hz.
    zeta = 1e-3 / 2
    f_d, beta = from_zeta(1000.0, zeta)
    d = derive(f_d, beta)
    assert d.loss_factor == pytest.approx(1e-3, rel=1e-9)
    assert d.beta_per_s == pytest.approx(3.14, abs=5e-3)
    assert d.decay_db_per_s == pytest.approx(27.3, abs=0.05)
    assert d.t60_s == pytest.approx(2.2, abs=0.05)
    # half-power bandwidth delta_f = beta / pi = f_n / Q (Inman, half-power method)
    assert d.f_n_hz / d.q == pytest.approx(1.0, abs=5e-3)


def test_resonance_absent_for_heavy_damping():
    # f_r exists only when omega_0^2 > 2 beta^2, i.e. zeta < 1/sqrt(2) (FIELD.md s. 1)
    f_d, beta = from_zeta(100.0, 0.75)
    d = derive(f_d, beta, f_d_hz_u=0.1, beta_per_s_u=1.0)
    assert d.f_r_hz is None and d.f_r_hz_u is None
    assert d.zeta == pytest.approx(0.75, rel=1e-12)
    f_d, beta = from_zeta(100.0, 0.70)  # just below 1/sqrt(2) = 0.7071
    d = derive(f_d, beta)
    assert d.f_r_hz is not None and 0 < d.f_r_hz < f_d


def monte_carlo(f_d, beta, u_f, u_b, cov, n=200_000, seed=1):
    """Derived quantities of n draws of (f_d, beta) from a bivariate normal (JCGM 101 style).

    The relations are written out here independently of ringdown (FIELD.md s. 1).
    """
    rng = np.random.default_rng(seed)
    fb = rng.multivariate_normal([f_d, beta], [[u_f**2, cov], [cov, u_b**2]], size=n)
    f, b = fb[:, 0], fb[:, 1]
    f_n = np.sqrt(f**2 + (b / TWO_PI) ** 2)
    zeta = b / (TWO_PI * f_n)
    return {
        "f_n_hz": f_n,
        "zeta": zeta,
        "q": 1 / (2 * zeta),
        "loss_factor": 2 * zeta,
        "log_decrement": b / f,
        "decay_db_per_s": 20 * np.log10(np.e) * b,
        "t60_s": 60 / (20 * np.log10(np.e) * b),
        "f_r_hz": np.sqrt(f_n**2 - 2 * (b / TWO_PI) ** 2),
    }


@pytest.mark.parametrize("rho", [0.0, 0.6, -0.4])
@pytest.mark.parametrize("zeta", [0.005, 0.2])
def test_uncertainty_against_monte_carlo(zeta, rho):
    f_d, beta = from_zeta(800.0, zeta)
    u_f, u_b = 0.004 * f_d, 0.01 * beta  # 0.4 % and 1 %: small enough for first order to hold
    cov = rho * u_f * u_b
    d = derive(f_d, beta, f_d_hz_u=u_f, beta_per_s_u=u_b, cov_f_beta=cov)
    draws = monte_carlo(f_d, beta, u_f, u_b, cov)
    for name, values in draws.items():
        # first-order GUM (JCGM 100, 5.1.2) against JCGM 101 Monte Carlo: agree within 3 %.
        # 2e5 draws give the standard deviation to 0.16 %; second-order terms at 1 % input
        # uncertainty are ~1 % of the first-order ones.
        assert getattr(d, name + "_u") == pytest.approx(float(np.std(values, ddof=1)), rel=0.03), name
        assert getattr(d, name) == pytest.approx(float(np.mean(values)), rel=1e-3), name


def test_uncertainty_none_when_an_input_uncertainty_is_missing():
    d = derive(500.0, 10.0, f_d_hz_u=0.01)
    assert d.f_d_hz_u == 0.01 and d.beta_per_s_u is None
    assert all(getattr(d, k) is None for k in ("f_n_hz_u", "zeta_u", "q_u", "t60_s_u", "decay_db_per_s_u"))


def test_zero_input_uncertainty_propagates_to_zero():
    d = derive(500.0, 10.0, f_d_hz_u=0.0, beta_per_s_u=0.0)
    assert d.q_u == 0.0 and d.t60_s_u == 0.0


@pytest.mark.parametrize(
    "f_d, beta, what",
    [
        (0.0, 10.0, "f_d_hz"),
        (-100.0, 10.0, "f_d_hz"),
        (float("nan"), 10.0, "f_d_hz"),
        (float("inf"), 10.0, "f_d_hz"),
        (100.0, 0.0, "beta_per_s"),
        (100.0, -1.0, "beta_per_s"),
        (100.0, float("nan"), "beta_per_s"),
        (100.0, "10", "beta_per_s"),
    ],
)
def test_non_positive_inputs_rejected(f_d, beta, what):
    with pytest.raises(ParameterError, match=what):
        derive(f_d, beta)


def test_to_dict_is_every_field():
    d = derive(440.0, 12.0, f_d_hz_u=0.01, beta_per_s_u=0.2)
    out = d.to_dict()
    for q in (
        "f_d_hz",
        "beta_per_s",
        "f_n_hz",
        "zeta",
        "q",
        "loss_factor",
        "log_decrement",
        "decay_db_per_s",
        "t60_s",
        "f_r_hz",
    ):
        assert q in out and q + "_u" in out
        assert out[q] == getattr(d, q)


@settings(max_examples=200, deadline=None)
@given(
    f_d=st.floats(min_value=1e-2, max_value=1e7, allow_nan=False, allow_infinity=False),
    beta=st.floats(min_value=1e-4, max_value=1e6, allow_nan=False, allow_infinity=False),
)
def test_properties(f_d, beta):
    d = derive(f_d, beta)
    assert d.q * d.loss_factor == pytest.approx(1.0, rel=1e-12)  # eta = 1 / Q
    assert d.f_n_hz >= f_d  # omega_0 = sqrt(omega_d^2 + beta^2) >= omega_d
    assert d.t60_s * d.decay_db_per_s == pytest.approx(60.0, rel=1e-12)  # T60 = 60 / D
    assert 0 < d.zeta <= 1  # zeta = b / hypot(f_d, b) (may round to 1 when f_d << beta)
    if d.f_r_hz is not None:
        assert d.f_r_hz <= d.f_n_hz
