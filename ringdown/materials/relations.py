"""The relations of ASTM E1876 for bars and rods (pure functions, SI units): Pickett's correction
T1, the torsion factor R, density, E and G from the frequencies, and the fixed-point solution
for Poisson's ratio. The formulas, their sources and where each coefficient was verified are in
the docstring of :mod:`ringdown.materials.moduli`.
"""

from __future__ import annotations

import math

__all__ = ["t1_bar", "t1_rod", "r_bar", "LAMBDA_1", "LAMBDA_2", "POISSON_RANGE"]

#: Roots of cos x cosh x = 1 (free-free Euler-Bernoulli beam; Blevins 1979).
LAMBDA_1 = 4.73004074
LAMBDA_2 = 7.85320462
#: Range of Poisson's ratio of isotropic solids used for the predictions.
POISSON_RANGE = (0.0, 0.5)
_MAX_ITER = 100


# --------------------------------------------------------------------------------------------
# the standard's relations (pure functions, SI)
# --------------------------------------------------------------------------------------------


def t1_bar(poisson: float, t_over_l: float) -> float:
    """ASTM E1876 flexural correction factor T1 of a rectangular bar (shear and rotary inertia).

    Parameters
    ----------
    poisson : float
        Poisson's ratio.
    t_over_l : float, > 0
        Thickness over length.
    """
    mu, r2 = poisson, t_over_l**2
    return (
        1.0
        + 6.585 * (1.0 + 0.0752 * mu + 0.8109 * mu**2) * r2
        - 0.868 * r2**2
        - 8.340 * (1.0 + 0.2023 * mu + 2.173 * mu**2) * r2**2 / (1.0 + 6.338 * (1.0 + 0.1408 * mu + 1.536 * mu**2) * r2)
    )


def t1_rod(poisson: float, d_over_l: float) -> float:
    """ASTM E1876 flexural correction factor T1' of a cylindrical rod."""
    mu, r2 = poisson, d_over_l**2
    return (
        1.0
        + 4.939 * (1.0 + 0.0752 * mu + 0.8109 * mu**2) * r2
        - 0.4883 * r2**2
        - 4.691 * (1.0 + 0.2023 * mu + 2.173 * mu**2) * r2**2 / (1.0 + 4.754 * (1.0 + 0.1408 * mu + 1.536 * mu**2) * r2)
    )


def r_bar(width_m: float, thickness_m: float, length_m: float) -> float:
    """ASTM E1876 torsional factor R of a rectangular bar.

    The relation is written for width >= thickness (Saint-Venant's constant belongs to the long
    side); a bar given with width < thickness is evaluated with the two swapped, since torsion
    does not depend on which side is called the width.
    """
    b, t = max(width_m, thickness_m), min(width_m, thickness_m)
    bt = b / t
    first = (1.0 + bt**2) / (4.0 - 2.521 * (t / b) * (1.0 - 1.991 / (math.exp(min(math.pi * bt, 700.0)) + 1.0)))
    return first * (1.0 + 0.00851 * (b / length_m) ** 2) - 0.060 * (b / length_m) ** 1.5 * (bt - 1.0) ** 2


def _density(spec, x: dict) -> float:
    if spec.shape == "bar":
        return x["mass_kg"] / (x["length_m"] * x["width_m"] * x["thickness_m"])
    return 4.0 * x["mass_kg"] / (math.pi * x["diameter_m"] ** 2 * x["length_m"])


def _e_of(spec, x: dict, f: float, mu: float) -> tuple[float, float]:
    """(E in Pa, T1) from flexural frequency ``f`` at Poisson's ratio ``mu``."""
    L, m = x["length_m"], x["mass_kg"]
    if spec.shape == "bar":
        b, t = x["width_m"], x["thickness_m"]
        t1 = t1_bar(mu, t / L)
        return 0.9465 * (m * f**2 / b) * (L / t) ** 3 * t1, t1
    d = x["diameter_m"]
    t1 = t1_rod(mu, d / L)
    return 1.6067 * (L**3 / d**4) * m * f**2 * t1, t1


def _g_of(spec, x: dict, f: float) -> tuple[float, float | None]:
    """(G in Pa, R or None) from torsional frequency ``f``."""
    L, m = x["length_m"], x["mass_kg"]
    if spec.shape == "bar":
        b, t = x["width_m"], x["thickness_m"]
        r = r_bar(b, t, L)
        return 4.0 * L * m * f**2 / (b * t) * r, r
    return 16.0 * m * f**2 * L / (math.pi * x["diameter_m"] ** 2), None


def _f_torsion(spec, x: dict, g_pa: float) -> float:
    """Inverse of :func:`_g_of`: torsional frequency of shear modulus ``g_pa``, Hz."""
    g1, _ = _g_of(spec, x, 1.0)
    return math.sqrt(g_pa / g1)


def _solve(spec, x: dict, guess: float) -> dict:
    """E, G, mu, density, T1, R and the iterations, from inputs ``x`` (SI; ``f_flex_hz``, ``f_tors_hz``)."""
    rho = _density(spec, x)
    if x.get("f_tors_hz") is None:
        mu = x["poisson"]
        e, t1 = _e_of(spec, x, x["f_flex_hz"], mu)
        return {"e": e, "g": None, "mu": mu, "rho": rho, "t1": t1, "r": None, "iterations": 0}
    g, r = _g_of(spec, x, x["f_tors_hz"])
    # T1 is evaluated with mu kept inside (-1, 0.5], the range of isotropic solids: a wrong mode
    # assignment can give mu far outside it, where mu -> E(T1(mu)) / 2G - 1 would run away
    clip = lambda v: min(max(v, -0.99), POISSON_RANGE[1])  # noqa: E731
    mu = guess
    for k in range(1, _MAX_ITER + 1):  # noqa: B007 (k is reported after the loop)
        e, t1 = _e_of(spec, x, x["f_flex_hz"], clip(mu))
        new = e / (2.0 * g) - 1.0
        if abs(new - mu) <= 1e-12 * max(1.0, abs(mu)):
            mu = new
            break
        mu = new
    else:
        k = _MAX_ITER
    e, t1 = _e_of(spec, x, x["f_flex_hz"], clip(mu))
    return {"e": e, "g": g, "mu": e / (2.0 * g) - 1.0, "rho": rho, "t1": t1, "r": r, "iterations": k}
