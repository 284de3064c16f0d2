"""ringdown: measure the modes of ring-down recordings.

The public API is re-exported here; everything else is internal. Plotting functions import
matplotlib only when they draw.
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
from .results import Analysis, Estimate, Hit, Mode, ModeTrace, Notice, results_document
from .io import read_recording
from .crlb import CramerRao, crlb_damped_sinusoid
from .pipeline import AnalysisOptions, analyze, analyze_file, analyze_many, analyze_recording
from .compare import Comparison, compare
from .compare_plot import plot_comparison
from .limits import Limits, learn_limits, read_limits, write_limits
from .check import CheckResult, check, check_file
from .store import ResultStore, store_analysis
from .plots import (
    plot_damping_vs_amplitude,
    plot_decay,
    plot_mode,
    plot_overview,
    plot_recording,
    plot_spectrum,
)
from .history_plot import plot_run_chart
from .report import Section, render_report, write_report
from .moduli import CylindricalRod, ModuliResult, RectangularBar, moduli

__all__ = [
    "__version__",
    "Analysis",
    "AnalysisOptions",
    "CheckResult",
    "Comparison",
    "CramerRao",
    "CylindricalRod",
    "Derived",
    "Estimate",
    "FitError",
    "Hit",
    "InputError",
    "Limits",
    "LimitsError",
    "Mode",
    "ModeTrace",
    "ModuliResult",
    "NoRingdownError",
    "Notice",
    "ParameterError",
    "RectangularBar",
    "Recording",
    "ResultStore",
    "Section",
    "RingdownError",
    "StoreError",
    "analyze",
    "analyze_file",
    "analyze_many",
    "analyze_recording",
    "check",
    "check_file",
    "compare",
    "crlb_damped_sinusoid",
    "derive",
    "learn_limits",
    "moduli",
    "plot_comparison",
    "plot_damping_vs_amplitude",
    "plot_decay",
    "plot_mode",
    "plot_overview",
    "plot_recording",
    "plot_run_chart",
    "plot_spectrum",
    "read_limits",
    "read_recording",
    "render_report",
    "results_document",
    "store_analysis",
    "write_limits",
    "write_report",
]
