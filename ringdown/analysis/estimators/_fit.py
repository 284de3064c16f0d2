"""Small weighted least-squares helpers shared by the estimators."""

from __future__ import annotations

import numpy as np

from ...base.errors import FitError


def growing_text(poles: list[tuple[float, float]]) -> str:
    """``"F Hz (beta = B 1/s), ..."`` for fitted poles ``(f_hz, beta_per_s)`` that grow (at most
    three shown): the one wording of a fit that found no decay, used by every estimator."""
    return ", ".join(f"{f:.6g} Hz (beta = {b:.3g} 1/s)" for f, b in poles[:3])


#: why a fit may come out growing (said after the poles)
GROWING_WHY = "(a steady tone, or a decay too slow for the window)"


def weighted_line(t: np.ndarray, y: np.ndarray, w: np.ndarray, *, inflation: float = 1.0):
    """Weighted least-squares line ``y = a + b t``.

    Parameters
    ----------
    t, y, w : (n,) ndarray of float, n >= 3; ``w`` >= 0 are weights (1 / variance up to scale)
    inflation : float >= 1
        Factor on the covariance for correlated residuals (samples per independent sample).

    Returns
    -------
    a, b : float
    cov : (2, 2) ndarray
        Covariance of ``(a, b)`` scaled by the weighted residual variance (the usual
        "unknown sigma" least-squares covariance, e.g. Press et al., Numerical Recipes, 15.4).
    rms : float
        Unweighted RMS of the residuals.
    """
    n = t.shape[0]
    if n < 3:
        raise FitError(f"a line fit needs at least 3 points; got {n}")
    tc = t.mean()
    A = np.column_stack([np.ones(n), t - tc])
    Aw = A * w[:, None]
    ata = A.T @ Aw
    try:
        inv = np.linalg.inv(ata)
    except np.linalg.LinAlgError as exc:
        raise FitError("line fit is singular (all points at one time)") from exc
    coef = inv @ (Aw.T @ y)
    r = y - A @ coef
    s2 = float(np.sum(w * r**2) / (n - 2))
    cov = inv * s2 * inflation
    # back to intercept at t = 0
    J = np.array([[1.0, -tc], [0.0, 1.0]])
    coef0 = J @ coef
    cov0 = J @ cov @ J.T
    return float(coef0[0]), float(coef0[1]), cov0, float(np.sqrt(np.mean(r**2)))
