"""Statistics for limits learned from good parts: tolerance intervals and Mahalanobis thresholds.

Two questions are answered here, both for a feature (or a vector of features) that is normally
distributed over the population of good parts and has been measured on ``n`` of them:

1. **Two-sided tolerance interval** (ISO 16269-6:2014, section 5 and Annex tables; Odeh & Owen
   1980). The interval ``mean +- k s`` contains at least a fraction ``coverage`` of the population
   with probability ``confidence``. The factor ``k`` is computed *exactly* by numerical
   integration, not by Howe's (1969) or Wald-Wolfowitz's approximations.
2. **Mahalanobis threshold for a new part** (Hotelling's T^2 for a future observation). With the
   mean and covariance estimated from ``n`` good parts and ``p`` features, the squared distance of
   a new, independent good part follows

       T^2 = d^2 ~ p (n + 1)(n - 1) / (n (n - p)) * F(p, n - p)

   (Tracy, Young & Mason, J. Quality Technology 24(2):88-95, 1992, the "Phase II" limit for
   individual observations; also Mason & Young, *Multivariate Statistical Process Control with
   Industrial Applications*, SIAM 2002 [from memory for the exact section]). The threshold at
   probability ``coverage`` is the ``coverage`` quantile of that distribution.

The numerical core imports only numpy/scipy; nothing here reads files or prints.

References
----------
ISO 16269-6:2014, *Statistical interpretation of data - Part 6: Determination of statistical
tolerance intervals*.
R. E. Odeh and D. B. Owen, *Tables for Normal Tolerance Limits, Sampling Plans and Screening*,
Marcel Dekker, 1980.
NIST/SEMATECH e-Handbook of Statistical Methods, section 7.2.6.3 "Tolerance intervals for a
normal distribution".
W. G. Howe, "Two-sided tolerance limits for normal populations - some improvements",
J. Am. Stat. Assoc. 64:610-620, 1969 (the approximation this module does *not* use).
N. D. Tracy, J. C. Young and R. L. Mason, "Multivariate control charts for individual
observations", J. Quality Technology 24(2):88-95, 1992.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

from ..base._lazy import lazy_module
from ..base.errors import ParameterError

# scipy.stats alone takes about 0.4 s to import: load it when a limit is first computed
integrate = lazy_module("scipy.integrate")
optimize = lazy_module("scipy.optimize")
stats = lazy_module("scipy.stats")


__all__ = [
    "tolerance_k",
    "tolerance_k_howe",
    "tolerance_content_probability",
    "mahalanobis_threshold",
    "mahalanobis_scale",
]


def _check_probability(name: str, value: float) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a number between 0 and 1, got {value!r}") from None
    if not (0.0 < v < 1.0) or not math.isfinite(v):
        raise ParameterError(f"{name} must lie strictly between 0 and 1, got {value!r}; e.g. 0.99")
    return v


def _check_n(n: int, minimum: int = 2) -> int:
    if int(n) != n or n < minimum:
        raise ParameterError(f"sample size must be an integer >= {minimum}, got {n!r}; measure more good parts")
    return int(n)


def _half_width(z: float, coverage: float) -> float:
    """r such that Phi(z + r) - Phi(z - r) = coverage (content of N(0,1) in [z-r, z+r]).

    Phi(z + r) - Phi(z - r) is the probability that a noncentral chi-square with 1 degree of
    freedom and noncentrality z^2 is <= r^2, so r^2 is that distribution's ``coverage`` quantile.
    """
    if z == 0.0:
        return float(stats.norm.ppf(0.5 + coverage / 2.0))
    return math.sqrt(float(stats.ncx2.ppf(coverage, 1, z * z)))


def tolerance_content_probability(k: float, n: int, coverage: float, *, dof: int | None = None) -> float:
    """Probability that ``mean +- k s`` from ``n`` normal samples covers >= ``coverage``.

    Parameters
    ----------
    k : float, > 0
        Tolerance factor.
    n : int, >= 2
        Number of samples the mean was computed from.
    coverage : float in (0, 1)
        Required population fraction inside the interval.
    dof : int, optional
        Degrees of freedom of ``s``; ``n - 1`` by default.

    Returns
    -------
    float
        The confidence level of the interval: ``P(content >= coverage)``.

    Notes
    -----
    With ``xbar = mu + sigma z / sqrt(n)`` and ``s^2 = sigma^2 chi2_nu / nu``, the interval covers
    at least ``coverage`` exactly when ``k s / sigma >= r(z)`` where ``r`` is the half-width
    of a centred-at-z interval holding ``coverage`` of N(0, 1). Hence

        confidence = 2 int_0^inf sqrt(n) phi(sqrt(n) u) P(chi2_nu > nu r(u)^2 / k^2) du

    (Odeh & Owen 1980; ISO 16269-6:2014 Annex F [from memory for the annex letter]).
    """
    n = _check_n(n)
    nu = n - 1 if dof is None else int(dof)
    sqrt_n = math.sqrt(n)

    def integrand(u: float) -> float:
        r = _half_width(u, coverage)
        return sqrt_n * stats.norm.pdf(sqrt_n * u) * stats.chi2.sf(nu * r * r / (k * k), nu)

    # The normal weight is negligible beyond 10 standard errors of the mean.
    upper = 10.0 / sqrt_n
    value, _ = integrate.quad(integrand, 0.0, upper, limit=200, epsabs=1e-12, epsrel=1e-10)
    return 2.0 * value


@lru_cache(maxsize=256)
def _k_exact(n: int, coverage: float, confidence: float) -> float:
    def f(k: float) -> float:
        return tolerance_content_probability(k, n, coverage) - confidence

    # Bracket: the known-sigma factor is a lower bound; grow the upper end until it brackets.
    lo = float(stats.norm.ppf(0.5 + coverage / 2.0)) * 0.999
    hi = max(2.0 * lo, tolerance_k_howe(n, coverage=coverage, confidence=confidence) * 1.5)
    while f(hi) < 0.0:
        hi *= 2.0
    return float(optimize.brentq(f, lo, hi, xtol=1e-10, rtol=1e-12))


def tolerance_k(n: int, *, coverage: float = 0.99, confidence: float = 0.95) -> float:
    """Exact factor k of the two-sided normal tolerance interval ``mean +- k s``.

    Parameters
    ----------
    n : int, >= 2
        Number of good parts measured.
    coverage : float in (0, 1), default 0.99
        Fraction of the population the interval must contain (ISO 16269-6 "p").
    confidence : float in (0, 1), default 0.95
        Confidence level (ISO 16269-6 "1 - alpha").

    Returns
    -------
    float
        k, solved with :func:`scipy.optimize.brentq` on the exact integral of
        :func:`tolerance_content_probability`.

    Raises
    ------
    ParameterError
        For ``n < 2`` or a probability outside (0, 1).

    Examples
    --------
    >>> round(tolerance_k(10, coverage=0.90, confidence=0.95), 3)  # NIST e-Handbook 7.2.6.3
    2.856
    """
    n = _check_n(n)
    coverage = _check_probability("coverage", coverage)
    confidence = _check_probability("confidence", confidence)
    return _k_exact(n, coverage, confidence)


def tolerance_k_howe(n: int, *, coverage: float = 0.99, confidence: float = 0.95) -> float:
    """Howe's (1969) approximation of the two-sided k (for comparison only; not used for limits).

    ``k = z_{(1+p)/2} sqrt(nu (1 + 1/n) / chi2_{1-gamma, nu})`` with ``nu = n - 1``
    (NIST/SEMATECH e-Handbook 7.2.6.3).
    """
    n = _check_n(n)
    nu = n - 1
    z = stats.norm.ppf(0.5 + coverage / 2.0)
    return float(z * math.sqrt(nu * (1.0 + 1.0 / n) / stats.chi2.ppf(1.0 - confidence, nu)))


def mahalanobis_scale(n: int, p: int) -> float:
    """The factor c in ``T^2 ~ c F(p, n - p)`` for a new observation: p(n+1)(n-1)/(n(n-p)).

    Source: Tracy, Young & Mason (1992), Phase II limit for individual observations.
    """
    if p < 1 or n <= p:
        raise ParameterError(f"a Mahalanobis threshold needs more parts than features: n={n}, p={p}")
    return p * (n + 1) * (n - 1) / (n * (n - p))


def mahalanobis_threshold(n: int, p: int, *, probability: float = 0.99) -> float:
    """Largest Mahalanobis distance d (not d^2) a new good part shows with the given probability.

    Parameters
    ----------
    n : int
        Number of good parts the mean and covariance were estimated from (> p).
    p : int, >= 1
        Number of features.
    probability : float in (0, 1), default 0.99
        Probability that a new good part falls within the threshold.

    Returns
    -------
    float
        ``sqrt(c * F.ppf(probability, p, n - p))`` with ``c = p(n+1)(n-1)/(n(n-p))``.
    """
    probability = _check_probability("probability", probability)
    c = mahalanobis_scale(int(n), int(p))
    return float(np.sqrt(c * stats.f.ppf(probability, p, n - p)))
