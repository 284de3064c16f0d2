"""ringdown: measure the modes of ring-down recordings.

The public API is re-exported here; everything else is internal.
"""

from ._version import __version__
from .errors import (
    FitError,
    InputError,
    LimitsError,
    NoRingdownError,
    ParameterError,
    RingdownError,
    StoreError,
)
from .quantities import Derived, derive
from .recording import Recording
from .results import Analysis, Estimate, Hit, Mode, Notice, results_document

__all__ = [
    "__version__",
    "Analysis",
    "Derived",
    "Estimate",
    "FitError",
    "Hit",
    "InputError",
    "LimitsError",
    "Mode",
    "NoRingdownError",
    "Notice",
    "ParameterError",
    "Recording",
    "RingdownError",
    "StoreError",
    "derive",
    "results_document",
]
