"""ringdown: measure the modes of ring-down recordings.

The public API is the names in ``__all__``; everything else is internal. Each name is imported
from its room on first use (PEP 562 module ``__getattr__``), so ``import ringdown`` loads no
numpy, scipy or matplotlib until a function is used. The rooms (``ringdown.io``,
``ringdown.analysis``, ...) and their modules are described in DEVELOPERS.md; no public name is
also the name of a subpackage or module of ``ringdown``, so ``ringdown.compare`` is always the
function and ``ringdown.treatment.compare`` the module.
"""

import importlib as _importlib
import typing as _typing

from ._version import __version__

# public name -> the module (relative to this package) that defines it
_PUBLIC: dict[str, str] = {
    "FitError": "base.errors",
    "InputError": "base.errors",
    "LimitsError": "base.errors",
    "NoRingdownError": "base.errors",
    "ParameterError": "base.errors",
    "RingdownError": "base.errors",
    "StoreError": "base.errors",
    "Derived": "analysis.quantities",
    "derive": "analysis.quantities",
    "Recording": "io.recording",
    "Analysis": "analysis.results",
    "Estimate": "analysis.results",
    "Hit": "analysis.results",
    "Mode": "analysis.results",
    "ModeTrace": "analysis.results",
    "Notice": "analysis.results",
    "results_document": "analysis.results",
    "read_recording": "io.read",
    "CramerRao": "analysis.crlb",
    "crlb_damped_sinusoid": "analysis.crlb",
    "AnalysisOptions": "analysis.pipeline",
    "analyze": "analysis.pipeline",
    "analyze_file": "analysis.pipeline",
    "analyze_many": "analysis.pipeline",
    "analyze_recording": "analysis.pipeline",
    "Comparison": "treatment.compare",
    "compare": "treatment.compare",
    "plot_comparison": "render.compare_plot",
    "Limits": "inspection.limits",
    "learn_limits": "inspection.limits",
    "read_limits": "inspection.limits",
    "write_limits": "inspection.limits",
    "CheckResult": "inspection.check",
    "check": "inspection.check",
    "check_file": "inspection.check",
    "ResultStore": "inspection.store",
    "store_analysis": "inspection.store",
    "plot_damping_vs_amplitude": "render.plots",
    "plot_decay": "render.plots",
    "plot_mode": "render.plots",
    "plot_overview": "render.plots",
    "plot_recording": "render.plots",
    "plot_spectrum": "render.plots",
    "plot_run_chart": "render.history_plot",
    "Section": "render.report",
    "render_report": "render.report",
    "write_report": "render.report",
    "CylindricalRod": "materials.moduli",
    "ModuliResult": "materials.moduli",
    "RectangularBar": "materials.moduli",
    "moduli": "materials.moduli",
}

if _typing.TYPE_CHECKING:  # the names as static analysis and IDEs see them
    from .analysis.crlb import CramerRao, crlb_damped_sinusoid
    from .analysis.pipeline import AnalysisOptions, analyze, analyze_file, analyze_many, analyze_recording
    from .analysis.quantities import Derived, derive
    from .analysis.results import Analysis, Estimate, Hit, Mode, ModeTrace, Notice, results_document
    from .base.errors import (
        FitError,
        InputError,
        LimitsError,
        NoRingdownError,
        ParameterError,
        RingdownError,
        StoreError,
    )
    from .inspection.check import CheckResult, check, check_file
    from .inspection.limits import Limits, learn_limits, read_limits, write_limits
    from .inspection.store import ResultStore, store_analysis
    from .io.read import read_recording
    from .io.recording import Recording
    from .materials.moduli import CylindricalRod, ModuliResult, RectangularBar, moduli
    from .render.compare_plot import plot_comparison
    from .render.history_plot import plot_run_chart
    from .render.plots import (
        plot_damping_vs_amplitude,
        plot_decay,
        plot_mode,
        plot_overview,
        plot_recording,
        plot_spectrum,
    )
    from .render.report import Section, render_report, write_report
    from .treatment.compare import Comparison, compare


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


def __getattr__(name: str) -> _typing.Any:
    """Import a public name from its module on first use (PEP 562)."""
    try:
        module = _PUBLIC[name]
    except KeyError:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}") from None
    value = getattr(_importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
