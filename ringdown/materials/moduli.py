"""Dynamic elastic moduli from resonance frequencies: Young's modulus, shear modulus, Poisson's ratio.

A bar or rod of known size and mass, hung or laid on supports at the nodes of the mode wanted and
tapped, rings at frequencies fixed by its elastic moduli and density. ASTM E1876 ("Dynamic Young's
Modulus, Shear Modulus, and Poisson's Ratio by Impulse Excitation of Vibration"; ASTM C1259 for
ceramics is of the same family) turns the fundamental flexural frequency into Young's modulus E and
the fundamental torsional frequency into the shear modulus G; Poisson's ratio follows from
mu = E / (2 G) - 1, and because the flexural correction factor depends on mu the three are solved
by fixed-point iteration.

Shapes and relations (SI units; the same numbers hold for grams and millimetres, because the
factors 1e-3 kg/g and 1e3 mm/m cancel in each relation)
=============================================================================================

Rectangular bar, length L, width b, thickness t (t in the direction of the flexural vibration),
mass m, fundamental out-of-plane flexural frequency f_f, fundamental torsional frequency f_t::

    E  = 0.9465 (m f_f^2 / b) (L^3 / t^3) T1
    T1 = 1 + 6.585 (1 + 0.0752 mu + 0.8109 mu^2) (t/L)^2 - 0.868 (t/L)^4
           - 8.340 (1 + 0.2023 mu + 2.173 mu^2) (t/L)^4 / (1 + 6.338 (1 + 0.1408 mu + 1.536 mu^2) (t/L)^2)
    G  = (4 L m f_t^2 / (b t)) R
    R  = [(1 + (b/t)^2) / (4 - 2.521 (t/b) (1 - 1.991 / (exp(pi b/t) + 1)))] [1 + 0.00851 (b/L)^2]
           - 0.060 (b/L)^(3/2) (b/t - 1)^2

Cylindrical rod, length L, diameter D::

    E   = 1.6067 (L^3 / D^4) m f_f^2 T1'
    T1' = 1 + 4.939 (1 + 0.0752 mu + 0.8109 mu^2) (D/L)^2 - 0.4883 (D/L)^4
            - 4.691 (1 + 0.2023 mu + 2.173 mu^2) (D/L)^4 / (1 + 4.754 (1 + 0.1408 mu + 1.536 mu^2) (D/L)^2)
    G   = 16 m f_t^2 L / (pi D^2)

Where each coefficient was verified
-----------------------------------
The standard's text was not at hand; FIELD.md section 6 lists these relations as recalled. Each was
checked against a published reproduction or against independent physics before any test relied on it:

* 0.9465 and 1.6067: public Python reproductions of the E1876 equations on GitHub, found by a
  code search of stored public repositories (repository names were not shown; the files compute
  ``E = 0.9465 (m f^2 / b)(L/t)^3 T`` and ``E = 1.6067 (L^3/D^4) m f^2 T`` with
  ``T = 1 + 6.585 (t/L)^2`` and ``T = 1 + 4.939 (D/L)^2``), and Húlan et al., Appl. Sci. 11 (2021)
  10802, whose constants K = 0.97286 (prism) and 1.12336 (cylinder) are consistent with them
  (0.97286^2 = 0.94646; 1.12336^2 x 4/pi = 1.6067). Both equal the Euler-Bernoulli free-free result
  48 pi^2 / (4.73004)^4 = 0.94642 and 256 pi / (4.73004)^4 = 1.6067 (Blevins, Formulas for Natural
  Frequency and Mode Shape); ``tests/test_moduli.py`` checks the Euler-Bernoulli limit.
* 6.585 and 4.939 (leading T1 terms): the same public reproductions; 4.939 = 0.75 x 6.585 because
  the squared radius of gyration is D^2/16 for a circle and t^2/12 for a rectangle.
* The full T1 (0.868, 8.340, 6.338 and the Poisson polynomials 0.0752, 0.8109, 0.2023, 2.173,
  0.1408, 1.536), and the rod's 0.4883, 4.691, 4.754: recalled (FIELD.md), NOT found in a
  published reproduction. Verified instead against free-free Timoshenko beam theory solved
  numerically (state-space transfer matrix, scipy.linalg.expm, Cowper's 1966 shear coefficients):
  for a bar with mu = 0 the full T1 agrees within 0.01 % at L/t = 10 and 0.1 % at L/t = 3.3,
  which pins the mu-free coefficients; with 0 <= mu <= 0.3 within 0.12 % for L/t >= 10 and 0.5 %
  for L/t >= 3.3; at mu = 0.45 within 0.3 % at L/t = 10 and 1 % at L/t = 5. The rod's T1' is the
  bar's T1 with (t/L)^2 replaced by 0.75 (D/L)^2 (0.4883 = 0.5625 x 0.868, 4.691 = 0.5625 x 8.340,
  4.754 = 0.75 x 6.338), and agrees with Timoshenko theory within 0.07 % at L/D = 10, mu <= 0.3.
* R (2.521, 1.991, 0.00851, 0.060): two separate public Python reproductions of the E1876
  shear-modulus equation (the same code search) agree with it term by term. Its slender-bar part (1 + (b/t)^2) / (4 - ...) equals
  I_p / K_t with Saint-Venant's torsion constant of a rectangle (series solution, Timoshenko &
  Goodier, Theory of Elasticity, sec. 109) to 3e-6 relative for 1 <= b/t <= 20; the length
  terms (0.00851, 0.060) are empirical (Spinner & Valore 1958) and are checked only against the
  reproductions.
* Rod torsion 16 m f^2 L / (pi D^2): exact, from f_t = (1 / 2L) sqrt(G / rho) for a circular
  section (the torsion constant equals the polar moment); also in the reproductions.

Which peak is which
-------------------
From the flexural frequency and Poisson's ratio between 0 and 0.5 (the range of isotropic solids)
the first torsional frequency must lie between f_t(mu = 0.5) and f_t(mu = 0); the second flexural
frequency lies below the Euler-Bernoulli value 2.7565 f_f (shear and rotary inertia only lower it);
the bar's in-plane flexural frequency is near (b/t) f_f. The flexural mode is the lowest mode of
the flexural record (rule ``lowest``); the torsional mode is the mode of the torsional record
inside the predicted torsional window, the one nearest the prediction at the first-guess Poisson's
ratio when several lie there (rule ``window``). Either can be overridden by a mode index or an
explicit frequency (rule ``given``); a given mode outside its window gets a warning.

Uncertainty
-----------
Standard uncertainties (JCGM 100:2008, GUM 5.1.2) are propagated to first order from the
frequencies, dimensions and mass (and Poisson's ratio when it is assumed rather than measured)
through the whole calculation, iteration included, with a central-difference Jacobian. The
inputs are taken as uncorrelated. An assumed Poisson's ratio with no stated uncertainty is a
uniform distribution over [0, 0.5] (u = 0.5 / sqrt(12), GUM 4.3.7).

References
----------
ASTM E1876-22; ASTM C1259. G. Pickett, Proc. ASTM 45 (1945) 846-865. S. Spinner and W. E. Tefft,
Proc. ASTM 61 (1961) 1221-1238. S. Spinner, T. W. Reichard and W. E. Tefft, J. Res. NBS 64A (1960)
147-155. S. Spinner and R. C. Valore, J. Res. NBS 60 (1958) 459-464. G. R. Cowper, J. Appl. Mech.
33 (1966) 335-340. R. D. Blevins, Formulas for Natural Frequency and Mode Shape (1979).
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, ClassVar

from ..analysis.results import Analysis, Mode, Notice
from ..base.errors import InputError, ParameterError
from .relations import _MAX_ITER, LAMBDA_1, LAMBDA_2, POISSON_RANGE, _e_of, _f_torsion, _solve, r_bar, t1_bar, t1_rod
from .results import BudgetTerm, ModeUsed, ModuliResult

__all__ = [
    "RectangularBar",
    "CylindricalRod",
    "ModeUsed",
    "BudgetTerm",
    "ModuliResult",
    "moduli",
    "t1_bar",
    "t1_rod",
    "r_bar",
    "budget_rows",
]

# --------------------------------------------------------------------------------------------
# specimens
# --------------------------------------------------------------------------------------------


def _check_positive(name: str, value: float) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a number; got {value!r}") from None
    if not math.isfinite(v) or v <= 0:
        raise ParameterError(f"{name} must be a positive finite number; got {value!r}")
    return v


def _check_u(name: str, value: float) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a number; got {value!r}") from None
    if not math.isfinite(v) or v < 0:
        raise ParameterError(f"{name} must be a finite number >= 0; got {value!r}")
    return v


_SPECIMEN_KEYS = ("length_m", "width_m", "thickness_m", "diameter_m", "mass_kg")


class _Specimen:
    """What both specimen types share: validation, the inputs with their uncertainties, to_dict."""

    __slots__ = ()
    _inputs: ClassVar[tuple[str, ...]] = ()
    shape: ClassVar[str]

    def __post_init__(self) -> None:
        for n in self._inputs:
            what, unit = n.split("_")
            object.__setattr__(self, n, _check_positive(f"{what} ({unit})", getattr(self, n)))
            object.__setattr__(self, n + "_u", _check_u(f"uncertainty of {what}", getattr(self, n + "_u")))

    def inputs(self) -> dict[str, tuple[float, float]]:
        """Input name -> (value, standard uncertainty), SI."""
        return {n: (getattr(self, n), getattr(self, n + "_u")) for n in self._inputs}

    def to_dict(self) -> dict:
        """Every dimension key for every shape (None where the shape has no such dimension)."""
        d: dict[str, Any] = {"shape": self.shape}
        for k in _SPECIMEN_KEYS:
            d[k] = getattr(self, k, None)
            d[k + "_u"] = getattr(self, k + "_u", None)
        return d


@dataclass(frozen=True, slots=True)
class RectangularBar(_Specimen):
    """A uniform bar of rectangular section (ASTM E1876 rectangular bar).

    Attributes
    ----------
    length_m, width_m, thickness_m : float, > 0, m
        ``thickness_m`` is the dimension in the direction of the flexural vibration.
    mass_kg : float, > 0, kg
    length_m_u, width_m_u, thickness_m_u, mass_kg_u : float, >= 0
        Standard uncertainties, same units (0 = not given; a warning says so).
    """

    length_m: float
    width_m: float
    thickness_m: float
    mass_kg: float
    length_m_u: float = 0.0
    width_m_u: float = 0.0
    thickness_m_u: float = 0.0
    mass_kg_u: float = 0.0
    shape: ClassVar[str] = "bar"

    _inputs: ClassVar[tuple[str, ...]] = ("length_m", "width_m", "thickness_m", "mass_kg")


@dataclass(frozen=True, slots=True)
class CylindricalRod(_Specimen):
    """A uniform solid rod of circular section (ASTM E1876 cylindrical rod).

    Attributes
    ----------
    length_m, diameter_m : float, > 0, m
    mass_kg : float, > 0, kg
    length_m_u, diameter_m_u, mass_kg_u : float, >= 0
        Standard uncertainties, same units.
    """

    length_m: float
    diameter_m: float
    mass_kg: float
    length_m_u: float = 0.0
    diameter_m_u: float = 0.0
    mass_kg_u: float = 0.0
    shape: ClassVar[str] = "rod"

    _inputs: ClassVar[tuple[str, ...]] = ("length_m", "diameter_m", "mass_kg")


# --------------------------------------------------------------------------------------------
# inputs: frequencies, modes, analyses, files
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class _Candidate:
    f_hz: float
    f_hz_u: float
    loss_factor: float | None
    loss_factor_u: float | None
    source: str | None
    mode_index: int | None


def _candidates(
    value, role: str, u_given: float | None, options: dict
) -> tuple[list[_Candidate], bool, Analysis | None]:
    """The candidate modes of one input, whether they were given explicitly, and the analysis."""
    if isinstance(value, (str, os.PathLike)):
        from ..analysis.pipeline import analyze_file

        value = analyze_file(os.fspath(value), **options)
    if isinstance(value, Analysis):
        name = value.path or "<array>"
        if value.error is not None:
            raise InputError(f"{role} recording '{name}' could not be analysed: {value.error.message}")
        cands = [
            _Candidate(
                m.f_n_hz,
                m.f_n_hz_u if m.f_n_hz_u is not None else 0.0,
                m.loss_factor,
                m.loss_factor_u,
                value.path,
                m.index,
            )
            for m in value.modes
        ]
        if not cands:
            raise InputError(
                f"{role} recording '{name}' holds no mode above its noise; tap it again or give the frequency by hand"
            )
        return cands, False, value
    if isinstance(value, Mode):
        u_f = value.f_n_hz_u if value.f_n_hz_u is not None else 0.0
        return [_Candidate(value.f_n_hz, u_f, value.loss_factor, value.loss_factor_u, None, value.index)], True, None
    if isinstance(value, (tuple, list)) and len(value) == 2:
        f, u = value
    else:
        f, u = value, u_given
    f = _check_positive(f"{role} frequency (Hz)", f)
    u = 0.0 if u is None else _check_u(f"uncertainty of the {role} frequency (Hz)", u)
    return [_Candidate(f, u, None, None, None, None)], True, None


def _by_index(cands: list[_Candidate], index: int, role: str) -> _Candidate:
    for c in cands:
        if c.mode_index == index:
            return c
    have = ", ".join(f"{c.mode_index} ({c.f_hz:.6g} Hz)" for c in cands)
    raise ParameterError(f"{role} mode {index} is not in '{cands[0].source}'; its modes are {have}")


def _users_choice(cands: list[_Candidate], given: bool, index: int | None, role: str):
    """(candidate, rule) the user chose, by mode index or by giving one frequency; (None, None) if neither."""
    if index is not None and not given:
        return _by_index(cands, index, role), f"given: mode {index} chosen by the user"
    if given:
        return cands[0], "given: frequency or mode given by the user"
    return None, None


# --------------------------------------------------------------------------------------------
# predictions
# --------------------------------------------------------------------------------------------


def _predictions(spec, x: dict, f_flex: float, mu_guess: float, rel_u: float) -> dict[str, dict]:
    """Windows where the other modes must lie, from the flexural frequency (Hz)."""
    lo_mu, hi_mu = POISSON_RANGE
    margin = 3.0 * rel_u  # k = 3 of the flexural frequency's relative uncertainty
    out: dict[str, dict] = {}
    # first torsional: G = E(mu) / (2 (1 + mu)) for mu across the isotropic range
    ft = {
        mu: _f_torsion(spec, x, _e_of(spec, x, f_flex, mu)[0] / (2.0 * (1.0 + mu))) for mu in (lo_mu, hi_mu, mu_guess)
    }
    out["torsional_1"] = {
        "mode": "torsional_1",
        "f_hz": ft[mu_guess],
        "low_hz": min(ft[lo_mu], ft[hi_mu]) * (1 - margin),
        "high_hz": max(ft[lo_mu], ft[hi_mu]) * (1 + margin),
        "found_hz": None,
    }
    # second flexural: below Euler-Bernoulli (ratio (lambda2/lambda1)^2); T1 at the mode's wavelength
    L = x["length_m"]
    h = x["thickness_m"] if spec.shape == "bar" else x["diameter_m"]
    t1 = t1_bar if spec.shape == "bar" else t1_rod
    ratio = (LAMBDA_2 / LAMBDA_1) ** 2
    f_eb2 = f_flex * ratio * math.sqrt(t1(hi_mu, h / L))
    f_est = f_flex * ratio * math.sqrt(t1(mu_guess, h / L) / t1(mu_guess, (LAMBDA_2 / LAMBDA_1) * h / L))
    low = f_est * (f_est / f_eb2)
    out["flexural_2"] = {
        "mode": "flexural_2",
        "f_hz": f_est,
        "low_hz": low * (1 - margin),
        "high_hz": f_eb2 * (1 + margin),
        "found_hz": None,
    }
    if spec.shape == "bar":
        b, t = x["width_m"], x["thickness_m"]
        f_ip = f_flex * (b / t) * math.sqrt(t1(mu_guess, t / L) / t1(mu_guess, b / L))
        f_ip_eb = f_flex * (b / t) * math.sqrt(t1(hi_mu, t / L))
        lo_ip = f_ip * (f_ip / f_ip_eb)
        out["flexural_in_plane_1"] = {
            "mode": "flexural_in_plane_1",
            "f_hz": f_ip,
            "low_hz": min(lo_ip, f_ip_eb) * (1 - margin),
            "high_hz": max(lo_ip, f_ip_eb) * (1 + margin),
            "found_hz": None,
        }
    return out


def _inside(f: float, w: dict) -> bool:
    return w["low_hz"] <= f <= w["high_hz"]


# --------------------------------------------------------------------------------------------
# uncertainty propagation
# --------------------------------------------------------------------------------------------


def _propagate(fun: Callable[[dict], dict], x: dict, u: dict) -> tuple[dict, dict, list[BudgetTerm]]:
    """First-order GUM propagation with a central-difference Jacobian; inputs uncorrelated."""
    y0 = fun(x)
    keys = {"e_pa": "e", "g_pa": "g", "poisson": "mu", "density_kg_per_m3": "rho"}
    contrib: dict[str, list[tuple[str, float, float]]] = {q: [] for q in keys}
    for name, ui in u.items():
        xi = x[name]
        h = 1e-6 * max(abs(xi), 1e-3)
        up, dn = dict(x), dict(x)
        up[name], dn[name] = xi + h, xi - h
        yu, yd = fun(up), fun(dn)
        for q, k in keys.items():
            if y0[k] is None:
                continue
            c = (yu[k] - yd[k]) / (2.0 * h)
            contrib[q].append((name, c, ui))
    uy: dict[str, float | None] = {}
    budget: list[BudgetTerm] = []
    for q, k in keys.items():
        if y0[k] is None:
            uy[q] = None
            continue
        var = sum((c * ui) ** 2 for _, c, ui in contrib[q])
        uy[q] = math.sqrt(var)
        for name, c, ui in contrib[q]:
            part = abs(c) * ui
            budget.append(BudgetTerm(q, name, x[name], ui, c, part, part**2 / var if var > 0 else 0.0))
    return y0, uy, budget


# --------------------------------------------------------------------------------------------
# the public function
# --------------------------------------------------------------------------------------------

#: What gives one frequency to :func:`moduli`: Hz, (Hz, u Hz), a mode, an analysis or a recording.
FrequencySource = float | tuple[float, float] | Mode | Analysis | str | os.PathLike


def moduli(
    specimen: RectangularBar | CylindricalRod,
    flexural: FrequencySource,
    torsional: FrequencySource | None = None,
    *,
    flexural_hz_u: float | None = None,
    torsional_hz_u: float | None = None,
    flexural_mode: int | None = None,
    torsional_mode: int | None = None,
    poisson: float | None = None,
    poisson_u: float | None = None,
    poisson_guess: float = 0.3,
    analysis_options: dict | None = None,
) -> ModuliResult:
    """Dynamic Young's modulus, shear modulus and Poisson's ratio of a bar or rod (ASTM E1876).

    Parameters
    ----------
    specimen : RectangularBar or CylindricalRod
        Dimensions and mass with their standard uncertainties (SI).
    flexural : float, (float, float), Mode, Analysis, or path
        The fundamental flexural frequency in Hz (optionally with its standard uncertainty), a
        mode, or a recording (analysed with :func:`ringdown.analyze_file`) or its analysis, whose
        lowest mode is taken unless ``flexural_mode`` names another.
    torsional : same kinds as ``flexural``, or None
        The fundamental torsional mode; from a recording the mode inside the predicted torsional
        window is taken unless ``torsional_mode`` names another. Without it, G is not measured
        and Poisson's ratio is ``poisson`` (or assumed).
    flexural_hz_u, torsional_hz_u : float or None, Hz
        Standard uncertainties of frequencies given as plain numbers.
    flexural_mode, torsional_mode : int or None
        Mode index (as ``ringdown analyze`` numbers them) to use instead of the automatic choice.
    poisson : float or None
        Poisson's ratio for T1 when no torsional mode is given; measured otherwise (a value given
        with a torsional mode is only the loop's starting value).
    poisson_u : float or None
        Its standard uncertainty; when None, 0 for a given value and 0.5/sqrt(12) (uniform over
        [0, 0.5]) for the assumed default.
    poisson_guess : float
        Start of the Poisson's-ratio loop and of the predictions (0.3, common for metals; common
        practice, no source).
    analysis_options : dict or None
        Keyword options for :func:`ringdown.analyze_file` when paths are given.

    Returns
    -------
    ModuliResult

    Raises
    ------
    ParameterError
        For a non-positive dimension, mass or frequency, a mode index that does not exist, or a
        Poisson's ratio outside (-1, 0.5].
    InputError
        For a recording that cannot be analysed or holds no mode.
    """
    _check_arguments(specimen, poisson, poisson_guess)
    opts = dict(analysis_options or {})
    warnings: list[Notice] = []
    flex = _choose_flexural(flexural, flexural_hz_u, flexural_mode, opts)
    fc = flex.mode
    assert fc is not None  # the flexural choice always finds a mode (or raises)
    x, u = _inputs(specimen, fc)
    mu_guess = float(poisson if poisson is not None else poisson_guess)
    preds = _predicted_modes(specimen, x, flex, mu_guess)
    tors = None
    if torsional is not None:
        t_in = _candidates(torsional, "torsional", torsional_hz_u, opts)
        tors = _choose_torsional(t_in, torsional_mode, flex, preds, mu_guess, warnings)
    if tors is not None and tors.mode is not None:
        mu_src = "measured"
        x["f_tors_hz"], u["f_tors_hz"] = tors.mode.f_hz, tors.mode.f_hz_u
    else:
        if torsional is None and flex.analysis is not None:
            warnings += _torsional_in_flexural_record(flex.cands, fc, preds["torsional_1"])
        x["f_tors_hz"] = None
        mu_src, x["poisson"], u["poisson"] = _poisson_without_torsion(poisson, poisson_u, poisson_guess, warnings)
    y, uy, budget = _propagate(lambda xx: _solve(specimen, xx, mu_guess), x, u)
    warnings += _condition_warnings(specimen, y, mu_src, u)
    return _result(specimen, (y, uy, u, mu_src, budget), flex, tors, preds, warnings)


def _inputs(specimen: RectangularBar | CylindricalRod, fc: _Candidate) -> tuple[dict[str, Any], dict[str, float]]:
    """(values, standard uncertainties) of the inputs by name, SI: the specimen's and the flexural frequency."""
    x: dict[str, Any] = {k: v for k, (v, _) in specimen.inputs().items()}
    u: dict[str, float] = {k: ui for k, (_, ui) in specimen.inputs().items()}
    x["f_flex_hz"], u["f_flex_hz"] = fc.f_hz, fc.f_hz_u
    return x, u


def _predicted_modes(
    specimen: RectangularBar | CylindricalRod, x: dict[str, Any], flex: _Choice, mu_guess: float
) -> dict[str, dict]:
    """The windows of the other modes (:func:`_predictions`); the second flexural mode marked found
    when the flexural record has it (it confirms the choice of the first)."""
    fc = flex.mode
    assert fc is not None
    preds = _predictions(specimen, x, fc.f_hz, mu_guess, fc.f_hz_u / fc.f_hz)
    for c in flex.cands:
        if c is not fc and _inside(c.f_hz, preds["flexural_2"]):
            preds["flexural_2"]["found_hz"] = c.f_hz
            break
    return preds


@dataclass(frozen=True)
class _Choice:
    """The mode chosen from one input (None when none fits), the rule that chose it, the input's
    candidate modes and its analysis (None for a frequency given by hand)."""

    mode: _Candidate | None
    rule: str | None
    cands: list[_Candidate]
    analysis: Analysis | None


def _choose_flexural(value: FrequencySource, u_given: float | None, index: int | None, opts: dict) -> _Choice:
    """The flexural mode and the rule that chose it: the user's, else the record's lowest mode."""
    cands, given, an = _candidates(value, "flexural", u_given, opts)
    fc, rule = _users_choice(cands, given, index, "flexural")
    if fc is None:
        fc = min(cands, key=lambda c: c.f_hz)
        rule = "lowest: the lowest mode of the flexural record is the fundamental flexural mode"
    return _Choice(fc, rule, cands, an)


def _choose_torsional(
    found: tuple[list[_Candidate], bool, Analysis | None],
    index: int | None,
    flex: _Choice,
    preds: dict,
    mu_guess: float,
    warnings: list[Notice],
) -> _Choice:
    """The torsional mode among ``found`` (:func:`_candidates` of the torsional input): the user's,
    else the one in its predicted window (not the flexural mode when both come from one record);
    warnings on the choice appended, the window marked found."""
    cands, given, an = found
    tc, rule = _users_choice(cands, given, index, "torsional")
    if tc is None:
        others = [c for c in cands if not (an is flex.analysis and c is flex.mode)]
        tc, rule = _torsional_in_window(cands, others, preds["torsional_1"], mu_guess, warnings)
    if tc is not None:
        warnings += _torsional_checks(tc, cands, preds)
    return _Choice(tc, rule, cands, an)


def _result(
    specimen: RectangularBar | CylindricalRod,
    solved: tuple[dict, dict, dict, str, list[BudgetTerm]],
    flex: _Choice,
    tors: _Choice | None,
    preds: dict,
    warnings: list[Notice],
) -> ModuliResult:
    """The result from the solution ``solved`` = (values, their uncertainties, the inputs'
    uncertainties, the source of Poisson's ratio, the budget) and the modes chosen."""
    y, uy, u, mu_src, budget = solved
    assert flex.mode is not None and flex.rule is not None
    return ModuliResult(
        shape=specimen.shape,
        specimen=specimen.to_dict(),
        e_pa=y["e"],
        e_pa_u=uy["e_pa"],
        g_pa=y["g"],
        g_pa_u=uy["g_pa"],
        poisson=y["mu"],
        poisson_u=uy["poisson"] if mu_src == "measured" else u["poisson"],
        poisson_source=mu_src,
        density_kg_per_m3=y["rho"],
        density_kg_per_m3_u=uy["density_kg_per_m3"],
        t1=y["t1"],
        r_factor=y["r"],
        iterations=y["iterations"],
        flexural=_mode_used(flex.mode, "flexural", flex.rule, None),
        torsional=None
        if tors is None or tors.mode is None
        else _mode_used(tors.mode, "torsional", tors.rule or "", preds["torsional_1"]),
        predictions=tuple(preds.values()),
        budget=tuple(budget),
        warnings=tuple(warnings),
        analyses=tuple(c.analysis for c in (flex, tors) if c is not None and c.analysis is not None),
    )


def _check_arguments(specimen: object, poisson: float | None, poisson_guess: float) -> None:
    """Refuse (ParameterError) a specimen of another type and a Poisson's ratio outside (-1, 0.5]."""
    if not isinstance(specimen, (RectangularBar, CylindricalRod)):
        raise ParameterError(f"specimen must be a RectangularBar or CylindricalRod; got {type(specimen).__name__}")
    for name, v in (("poisson", poisson), ("poisson_guess", poisson_guess)):
        if v is not None and not (math.isfinite(float(v)) and -1.0 < float(v) <= 0.5):
            raise ParameterError(f"{name} must lie in (-1, 0.5] (isotropic solids); got {v!r}")


def _torsional_in_window(
    cands: list[_Candidate], others: list[_Candidate], w: dict, mu_guess: float, warnings: list[Notice]
) -> tuple[_Candidate | None, str | None]:
    """The torsional mode among ``others`` (the candidates that are not the flexural mode) inside
    the predicted window ``w``, nearest its prediction, and the rule; warnings appended."""
    inside = [c for c in others if _inside(c.f_hz, w)]
    if not inside:
        have = ", ".join(f"{c.f_hz:.6g}" for c in cands)
        warnings.append(
            Notice(
                "no_torsional_mode",
                (
                    f"no mode of the torsional record ({have} Hz) lies where the first torsional mode must be "
                    f"for 0 <= Poisson's ratio <= 0.5 ({w['low_hz']:.6g}-{w['high_hz']:.6g} Hz); G not measured. "
                    "Check the set-up (tap off the axis at a corner) or name the mode"
                ),
            )
        )
        return None, None
    tc = min(inside, key=lambda c: abs(math.log(c.f_hz / w["f_hz"])))
    rule = (
        f"window: the mode inside the window predicted for the first torsional mode from E and "
        f"0 <= Poisson's ratio <= 0.5 ({w['low_hz']:.6g}-{w['high_hz']:.6g} Hz)"
    )
    if len(inside) > 1:
        warnings.append(
            Notice(
                "several_torsional_candidates",
                (
                    "several modes lie in the torsional window ("
                    + ", ".join(f"{c.f_hz:.6g}" for c in inside)
                    + f" Hz); took the one nearest the prediction at Poisson's ratio {mu_guess:g} "
                    f"({w['f_hz']:.6g} Hz); name the mode to choose another"
                ),
            )
        )
    return tc, rule


def _torsional_checks(tc: _Candidate, cands: list[_Candidate], preds: dict) -> list[Notice]:
    """Warnings on the chosen torsional mode ``tc`` (outside its window, where another mode is
    predicted, too close to a neighbour); marks it found in ``preds["torsional_1"]``."""
    warnings = []
    w = preds["torsional_1"]
    if not _inside(tc.f_hz, w):
        warnings.append(
            Notice(
                "torsional_outside_prediction",
                (
                    f"the torsional frequency {tc.f_hz:.6g} Hz lies outside the window that 0 <= Poisson's ratio "
                    f"<= 0.5 allows ({w['low_hz']:.6g}-{w['high_hz']:.6g} Hz): check which mode it is"
                ),
            )
        )
    w["found_hz"] = tc.f_hz
    for name in ("flexural_2", "flexural_in_plane_1"):
        p = preds.get(name)
        if p is not None and _inside(tc.f_hz, p):
            warnings.append(
                Notice(
                    "assignment_ambiguous",
                    (
                        f"the torsional mode at {tc.f_hz:.6g} Hz also lies where the {name.replace('_', ' ')} mode "
                        f"is predicted ({p['low_hz']:.6g}-{p['high_hz']:.6g} Hz); confirm it by tapping for torsion "
                        "and for bending separately"
                    ),
                )
            )
    # a neighbour within the modes' half-power bandwidths cannot be told apart
    for c in cands:
        if c is tc or c.loss_factor is None or tc.loss_factor is None:
            continue
        if abs(c.f_hz - tc.f_hz) < c.loss_factor * c.f_hz + tc.loss_factor * tc.f_hz:
            warnings.append(
                Notice(
                    "modes_close",
                    (
                        f"modes at {tc.f_hz:.6g} and {c.f_hz:.6g} Hz overlap within their half-power bandwidths; "
                        "they cannot be told apart reliably"
                    ),
                )
            )
    return warnings


def _torsional_in_flexural_record(f_cands: list[_Candidate], fc: _Candidate, w: dict) -> list[Notice]:
    """A hint when the flexural record, given alone, also holds a mode in the torsional window ``w``."""
    seen = [c for c in f_cands if c is not fc and _inside(c.f_hz, w)]
    if not seen:
        return []
    return [
        Notice(
            "torsional_in_flexural_record",
            (
                f"the flexural record has a mode at {seen[0].f_hz:.6g} Hz inside the torsional window "
                f"({w['low_hz']:.6g}-{w['high_hz']:.6g} Hz); give the same recording as the torsional one too "
                "to use it for G"
            ),
        )
    ]


def _poisson_without_torsion(
    poisson: float | None, poisson_u: float | None, poisson_guess: float, warnings: list[Notice]
) -> tuple[str, float, float]:
    """(source, value, standard uncertainty) of Poisson's ratio without a torsional mode: given,
    else assumed (uniform over 0-0.5 unless ``poisson_u``; a warning appended)."""
    if poisson is not None:
        mu_u = 0.0 if poisson_u is None else _check_u("uncertainty of Poisson's ratio", poisson_u)
        return "given", float(poisson), mu_u
    mu_val = poisson_guess
    mu_u = (POISSON_RANGE[1] - POISSON_RANGE[0]) / math.sqrt(12.0) if poisson_u is None else poisson_u
    warnings.append(
        Notice(
            "poisson_assumed",
            (
                f"no torsional mode: Poisson's ratio assumed {mu_val:g} ± {mu_u:.2g} (uniform over 0-0.5 unless "
                "given) for the T1 correction; G not measured"
            ),
        )
    )
    return "assumed", mu_val, mu_u


def _condition_warnings(
    specimen: RectangularBar | CylindricalRod, y: dict, mu_src: str, u: dict[str, float]
) -> list[Notice]:
    """Warnings on the conditions of the standard and of this implementation: slenderness, aspect
    ratio, a measured Poisson's ratio outside 0-0.5, the loop's convergence, missing uncertainties."""
    warnings = []
    L = specimen.length_m
    h = specimen.thickness_m if isinstance(specimen, RectangularBar) else specimen.diameter_m
    if L / h < 5.0:
        what = "L/t" if specimen.shape == "bar" else "L/D"
        warnings.append(
            Notice(
                "slenderness",
                (
                    f"{what} = {L / h:.3g} is below 5, where T1 was verified within 1 % of Timoshenko beam theory "
                    "(tests/test_moduli.py); the beam relations lose accuracy for stubby specimens"
                ),
            )
        )
    if isinstance(specimen, RectangularBar):
        b, t = specimen.width_m, specimen.thickness_m
        if max(b, t) / min(b, t) > 20.0:
            warnings.append(
                Notice(
                    "aspect_ratio",
                    (
                        f"width/thickness = {max(b, t) / min(b, t):.3g} exceeds 20, beyond the range where R was checked "
                        "against Saint-Venant torsion"
                    ),
                )
            )
    if mu_src == "measured" and not (POISSON_RANGE[0] <= y["mu"] <= POISSON_RANGE[1]):
        warnings.append(
            Notice(
                "poisson_implausible",
                (
                    f"Poisson's ratio {y['mu']:.3g} lies outside 0-0.5: the frequencies are probably assigned to the wrong "
                    "modes (or the material is not isotropic)"
                ),
            )
        )
    if y["iterations"] >= _MAX_ITER:
        warnings.append(Notice("not_converged", "the Poisson's-ratio loop did not converge in 100 iterations"))
    zero = [k for k, v in u.items() if v == 0.0]
    if zero:
        warnings.append(
            Notice(
                "uncertainty_not_given",
                (
                    "no uncertainty given for " + ", ".join(zero) + ": the budget leaves them out, so the stated "
                    "uncertainties are too small"
                ),
            )
        )
    return warnings


def _mode_used(c: _Candidate, role: str, rule: str, pred: dict | None) -> ModeUsed:
    """The result's record of the mode ``c`` used as ``role``, with its prediction window ``pred``."""
    return ModeUsed(
        role,
        c.f_hz,
        c.f_hz_u,
        c.loss_factor,
        c.loss_factor_u,
        c.source,
        c.mode_index,
        rule,
        None if pred is None else pred["f_hz"],
        None if pred is None else pred["low_hz"],
        None if pred is None else pred["high_hz"],
    )


def budget_rows(result: ModuliResult) -> list[dict]:
    """The budget as flat rows (CSV and report)."""
    return [b.to_dict() for b in result.budget]
