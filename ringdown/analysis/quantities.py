"""Quantities derived from one mode's damped frequency and decay rate, with uncertainties.

The model of one mode is ``x(t) = A exp(-beta t) cos(2 pi f_d t + phi)`` (viscous damping).
Everything ringdown reports about a mode follows from ``(f_d, beta)``:

==================  =====================================  =========
quantity            relation                               unit
==================  =====================================  =========
natural frequency   f_n = sqrt(f_d^2 + (beta / 2 pi)^2)    Hz
damping ratio       zeta = beta / (2 pi f_n)               1
quality factor      Q = 1 / (2 zeta) = pi f_n / beta       1
loss factor         eta = 1 / Q = 2 zeta                   1
log decrement       delta = beta T_d = beta / f_d          1 (Np per cycle)
decay rate in dB    D = 20 log10(e) beta                   dB/s
decay time          T60 = 60 / D                           s
resonance (disp.)   f_r = sqrt(f_n^2 - 2 (beta / 2 pi)^2)  Hz, None when f_n^2 <= 2 (beta/2pi)^2
==================  =====================================  =========

Q is defined as 1/(2 zeta) everywhere in ringdown; for light damping it equals the
half-power figure f_r / delta_f (they differ by 2 % at zeta = 0.1).

Uncertainties are standard uncertainties in the sense of the GUM (JCGM 100:2008), propagated to
first order through the Jacobian of each relation from the covariance of ``(f_d, beta)``
(GUM section 5.1, law of propagation of uncertainty).

References
----------
S. S. Rao, *Mechanical Vibrations*, ch. 2-3 (damped free vibration, logarithmic decrement).
D. J. Inman, *Engineering Vibration* (damping ratio, Q, half-power bandwidth).
ISO 2041:2018, *Mechanical vibration, shock and condition monitoring - Vocabulary*.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np

from ..base.errors import ParameterError

__all__ = ["DB_PER_NEPER", "Derived", "derive"]

#: 20 log10(e): decibels per neper of amplitude decay (8.6859 dB).
DB_PER_NEPER = 20.0 / math.log(10.0)


@dataclass(frozen=True, slots=True)
class Derived:
    """Every quantity of one mode, each with its standard uncertainty (``_u``, same unit).

    A value that does not exist (``f_r_hz`` for a heavily damped mode) is ``None``, as is an
    uncertainty that was not given.
    """

    f_d_hz: float
    f_d_hz_u: float | None
    beta_per_s: float
    beta_per_s_u: float | None
    f_n_hz: float
    f_n_hz_u: float | None
    zeta: float
    zeta_u: float | None
    q: float
    q_u: float | None
    loss_factor: float
    loss_factor_u: float | None
    log_decrement: float
    log_decrement_u: float | None
    decay_db_per_s: float
    decay_db_per_s_u: float | None
    t60_s: float
    t60_s_u: float | None
    f_r_hz: float | None
    f_r_hz_u: float | None

    def to_dict(self) -> dict:
        return asdict(self)


def _values_and_gradients(f_d: float, beta: float) -> dict[str, tuple[float | None, np.ndarray | None]]:
    """Each derived value and its gradient d(value)/d(f_d, beta) as a 2-vector."""
    two_pi = 2.0 * math.pi
    b = beta / two_pi  # decay rate expressed in Hz
    f_n = math.hypot(f_d, b)
    g_fn = np.array([f_d / f_n, b / f_n / two_pi])
    zeta = b / f_n
    # zeta = b / f_n, d zeta = db / f_n - b d f_n / f_n^2
    g_zeta = np.array([-b * g_fn[0] / f_n**2, (1.0 / two_pi) / f_n - b * g_fn[1] / f_n**2])
    q = 0.5 / zeta
    g_q = -0.5 / zeta**2 * g_zeta
    eta = 2.0 * zeta
    g_eta = 2.0 * g_zeta
    delta = beta / f_d
    g_delta = np.array([-beta / f_d**2, 1.0 / f_d])
    d_db = DB_PER_NEPER * beta
    g_db = np.array([0.0, DB_PER_NEPER])
    t60 = 60.0 / d_db
    g_t60 = np.array([0.0, -60.0 / (DB_PER_NEPER * beta**2)])
    out: dict[str, tuple[float | None, np.ndarray | None]] = {
        "f_n_hz": (f_n, g_fn),
        "zeta": (zeta, g_zeta),
        "q": (q, g_q),
        "loss_factor": (eta, g_eta),
        "log_decrement": (delta, g_delta),
        "decay_db_per_s": (d_db, g_db),
        "t60_s": (t60, g_t60),
    }
    fr2 = f_n**2 - 2.0 * b**2  # = f_d^2 - b^2
    if fr2 > 0.0:
        f_r = math.sqrt(fr2)
        g_fr = np.array([f_d / f_r, -b / f_r / two_pi])
        out["f_r_hz"] = (f_r, g_fr)
    else:
        out["f_r_hz"] = (None, None)
    return out


def derive(
    f_d_hz: float,
    beta_per_s: float,
    *,
    f_d_hz_u: float | None = None,
    beta_per_s_u: float | None = None,
    cov_f_beta: float = 0.0,
) -> Derived:
    """Derive every reported quantity of one mode from its damped frequency and decay rate.

    Parameters
    ----------
    f_d_hz : float, > 0, Hz
        Damped frequency.
    beta_per_s : float, > 0, 1/s
        Decay rate of the amplitude envelope ``exp(-beta t)``.
    f_d_hz_u, beta_per_s_u : float >= 0 or None
        Standard uncertainties of the two inputs, same units. With either one ``None`` every
        derived uncertainty is ``None``.
    cov_f_beta : float, Hz/s
        Covariance of ``f_d_hz`` and ``beta_per_s`` (0 when they were estimated independently).

    Returns
    -------
    Derived
        Values and standard uncertainties (first-order propagation, GUM 5.1.2).

    Raises
    ------
    ParameterError
        When ``f_d_hz`` or ``beta_per_s`` is not a finite positive number.
    """
    for name, v in (("f_d_hz", f_d_hz), ("beta_per_s", beta_per_s)):
        if not (isinstance(v, (int, float, np.floating)) and math.isfinite(v) and v > 0):
            raise ParameterError(f"{name} must be a finite number > 0; got {v!r}")
    f_d = float(f_d_hz)
    beta = float(beta_per_s)
    cov = None
    if f_d_hz_u is not None and beta_per_s_u is not None:
        cov = np.array([[float(f_d_hz_u) ** 2, float(cov_f_beta)], [float(cov_f_beta), float(beta_per_s_u) ** 2]])
    fields: dict[str, Any] = {
        "f_d_hz": f_d,
        "f_d_hz_u": None if f_d_hz_u is None else float(f_d_hz_u),
        "beta_per_s": beta,
        "beta_per_s_u": None if beta_per_s_u is None else float(beta_per_s_u),
    }
    for name, (value, grad) in _values_and_gradients(f_d, beta).items():
        fields[name] = value
        if cov is None or value is None or grad is None:
            fields[name + "_u"] = None
        else:
            fields[name + "_u"] = float(math.sqrt(max(float(grad @ cov @ grad), 0.0)))
    return Derived(**fields)
