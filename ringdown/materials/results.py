"""The results of :func:`ringdown.materials.moduli.moduli` (frozen dataclasses; ``to_dict()`` is the
CLI's JSON): the moduli with their standard uncertainties, the modes used and the GUM budget.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from ..analysis.results import Analysis, Notice

__all__ = ["ModeUsed", "BudgetTerm", "ModuliResult"]

# --------------------------------------------------------------------------------------------
# results
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class ModeUsed:
    """One measured mode the moduli were computed from.

    Attributes
    ----------
    role : {"flexural", "torsional"}
    f_hz, f_hz_u : float, float
        Frequency used (the natural frequency f_n of an analysed mode) and its standard uncertainty, Hz.
    loss_factor, loss_factor_u : float or None
        Loss factor eta = 1/Q of the mode (None for a frequency given by hand).
    source : str or None
        File the mode came from.
    mode_index : int or None
        Index of the mode in that file's analysis.
    rule : str
        How the mode was chosen: ``lowest``, ``window`` or ``given``, in words.
    predicted_hz, predicted_low_hz, predicted_high_hz : float or None
        Prediction of this mode from the other one (torsional only), Hz.
    """

    role: str
    f_hz: float
    f_hz_u: float
    loss_factor: float | None
    loss_factor_u: float | None
    source: str | None
    mode_index: int | None
    rule: str
    predicted_hz: float | None = None
    predicted_low_hz: float | None = None
    predicted_high_hz: float | None = None

    def to_dict(self) -> dict:
        return {
            "role": self.role,
            "f_hz": self.f_hz,
            "f_hz_u": self.f_hz_u,
            "loss_factor": self.loss_factor,
            "loss_factor_u": self.loss_factor_u,
            "source": self.source,
            "mode_index": self.mode_index,
            "rule": self.rule,
            "predicted_hz": self.predicted_hz,
            "predicted_low_hz": self.predicted_low_hz,
            "predicted_high_hz": self.predicted_high_hz,
        }


@dataclass(frozen=True, slots=True)
class BudgetTerm:
    """One line of an uncertainty budget (GUM 5.1.3): input ``input`` acting on ``quantity``.

    ``contribution`` = |sensitivity| * input_u, in the unit of the quantity; ``share`` its fraction
    of the quantity's variance.
    """

    quantity: str
    input: str
    input_value: float
    input_u: float
    sensitivity: float
    contribution: float
    share: float

    def to_dict(self) -> dict:
        return {
            "quantity": self.quantity,
            "input": self.input,
            "input_value": self.input_value,
            "input_u": self.input_u,
            "sensitivity": self.sensitivity,
            "contribution": self.contribution,
            "share": self.share,
        }


_QUANTITIES = ("e_pa", "g_pa", "poisson", "density_kg_per_m3")


@dataclass(frozen=True, slots=True, eq=False)
class ModuliResult:
    """Dynamic elastic moduli of one specimen, with standard uncertainties (k = 1).

    Attributes
    ----------
    shape : {"bar", "rod"}
    specimen : dict
        The specimen's dimensions and mass with their uncertainties, SI.
    e_pa, e_pa_u : float
        Dynamic Young's modulus, Pa.
    g_pa, g_pa_u : float or None
        Dynamic shear modulus, Pa (None without a torsional mode).
    poisson, poisson_u : float
        Poisson's ratio; measured from E and G, else the value given or assumed.
    poisson_source : {"measured", "given", "assumed"}
    density_kg_per_m3, density_kg_per_m3_u : float
    t1 : float
        Flexural correction factor used (T1 or T1').
    r_factor : float or None
        Torsional factor R of a bar (None for a rod or without torsion).
    iterations : int
        Fixed-point iterations of the Poisson's-ratio loop (0 without torsion).
    flexural, torsional : ModeUsed, ModeUsed or None
    predictions : tuple of dict
        Predicted windows of the modes, each ``{mode, f_hz, low_hz, high_hz, found_hz}``.
    budget : tuple of BudgetTerm
    warnings : tuple of Notice
    analyses : tuple of Analysis
        The analyses the modes came from (for reports; not serialised).
    """

    shape: str
    specimen: dict
    e_pa: float
    e_pa_u: float
    g_pa: float | None
    g_pa_u: float | None
    poisson: float
    poisson_u: float
    poisson_source: str
    density_kg_per_m3: float
    density_kg_per_m3_u: float
    t1: float
    r_factor: float | None
    iterations: int
    flexural: ModeUsed
    torsional: ModeUsed | None
    predictions: tuple[dict, ...] = ()
    budget: tuple[BudgetTerm, ...] = ()
    warnings: tuple[Notice, ...] = ()
    analyses: tuple[Analysis, ...] = field(default=(), repr=False)

    def dominant(self, quantity: str) -> str | None:
        """Name of the input with the largest share of ``quantity``'s variance (None if no budget)."""
        terms = [b for b in self.budget if b.quantity == quantity and b.share > 0]
        return max(terms, key=lambda b: b.share).input if terms else None

    @property
    def warning_codes(self) -> tuple[str, ...]:
        return tuple(w.code for w in self.warnings)

    def to_dict(self) -> dict:
        return {
            "shape": self.shape,
            "specimen": dict(self.specimen),
            "e_pa": self.e_pa,
            "e_pa_u": self.e_pa_u,
            "g_pa": self.g_pa,
            "g_pa_u": self.g_pa_u,
            "poisson": self.poisson,
            "poisson_u": self.poisson_u,
            "poisson_source": self.poisson_source,
            "density_kg_per_m3": self.density_kg_per_m3,
            "density_kg_per_m3_u": self.density_kg_per_m3_u,
            "t1": self.t1,
            "r_factor": self.r_factor,
            "iterations": self.iterations,
            "flexural": self.flexural.to_dict(),
            "torsional": None if self.torsional is None else self.torsional.to_dict(),
            "predictions": [dict(p) for p in self.predictions],
            "budget": [b.to_dict() for b in self.budget],
            "dominant": {q: self.dominant(q) for q in _QUANTITIES},
            "warnings": [w.to_dict() for w in self.warnings],
            "method": "ASTM E1876 (rectangular bar / cylindrical rod), GUM first-order propagation",
        }
