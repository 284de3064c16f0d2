"""Per-mode estimators behind one interface (see ``base.py``) and their registry.

``ESTIMATORS`` maps a method name to its ``estimate(band, window) -> list[Estimate]``.
"""

from __future__ import annotations

from . import decrement, envelope, half_power, pencil
from .base import EstimatorFn, Window

__all__ = ["ESTIMATORS", "EstimatorFn", "Window", "method_names"]

ESTIMATORS: dict[str, EstimatorFn] = {
    "envelope": envelope.estimate,
    "decrement": decrement.estimate,
    "half_power": half_power.estimate,
    "pencil": pencil.estimate,
}


def method_names() -> tuple[str, ...]:
    """Every accepted ``method`` option: ``"auto"`` and the registered estimators."""
    return ("auto",) + tuple(ESTIMATORS)
