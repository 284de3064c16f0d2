"""The exceptions ringdown raises.

Every error the library raises on purpose derives from :class:`RingdownError`, so a caller
(and the CLI) can catch one class and still tell the kinds apart::

    RingdownError
     ├── InputError        (also ValueError)   a file or array that cannot be read or used
     │    └── NoRingdownError                  readable, but holds no decay to measure
     ├── ParameterError    (also ValueError)   an option out of range or inconsistent
     │    └── OutputError                      an output file or folder that cannot be written
     ├── FitError          (also RuntimeError) a fit that could not converge
     ├── LimitsError       (also ValueError)   a limits file that is missing or malformed
     ├── StoreError                            the results database cannot be used
     ├── ClusterError                          a Dask scheduler or its workers cannot run a batch
     └── InternalError                         anything else that went wrong on one input
          └── WorkerError                      the worker process handling it died (twice)

Each class has a stable ``code`` that the JSON output carries in ``error.code``.
Messages name the thing, the limit, the value received and the fix, on one line.
"""

from __future__ import annotations

__all__ = [
    "RingdownError",
    "InputError",
    "NoRingdownError",
    "ParameterError",
    "OutputError",
    "FitError",
    "LimitsError",
    "StoreError",
    "ClusterError",
    "InternalError",
    "WorkerError",
]


class RingdownError(Exception):
    """Base class of every error ringdown raises on purpose."""

    code = "error"


class InputError(RingdownError, ValueError):
    """A recording (file or array) that cannot be read or used as it is."""

    code = "input"


class NoRingdownError(InputError):
    """A readable recording that holds no decaying mode above its noise."""

    code = "no_ringdown"


class ParameterError(RingdownError, ValueError):
    """An option that is out of range or inconsistent with the recording."""

    code = "parameter"


class OutputError(ParameterError):
    """An output (report, figure, CSV, JSON, limits file, folder) that cannot be written: the one
    error for it, raised by :mod:`ringdown.io.outputs`. A ParameterError, since the fix is
    another path."""

    code = "output"


class FitError(RingdownError, RuntimeError):
    """A fit that did not converge or gave no usable result.

    ``reason`` says why, in the words of a rejected candidate's reason (``"fit_failed"``, the
    default; ``"near_noise"``: the mode stands too little above its band noise over its fit
    window), so a caller branches on it rather than on the message's text.
    """

    code = "fit"

    def __init__(self, message: str = "", *, reason: str = "fit_failed") -> None:
        super().__init__(message)
        self.reason = reason

    def __reduce__(self):  # the reason survives a trip to and from a worker process
        return (_fit_error, (str(self), self.reason))


def _fit_error(message: str, reason: str) -> FitError:
    return FitError(message, reason=reason)


class LimitsError(RingdownError, ValueError):
    """A limits file that is missing, malformed or inconsistent."""

    code = "limits"


class StoreError(RingdownError):
    """The results database cannot be opened, migrated or written."""

    code = "store"


class ClusterError(RingdownError):
    """A Dask scheduler that cannot be reached or used, or a task its workers kept dying on."""

    code = "cluster"


class InternalError(RingdownError):
    """An unexpected failure on one input (MemoryError, OverflowError, a bug), as that input's error."""

    code = "internal"


class WorkerError(InternalError):
    """The worker process handling one input died twice (e.g. killed for memory)."""

    code = "worker_died"
