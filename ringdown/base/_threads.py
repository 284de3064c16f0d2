"""One BLAS thread around the numerical work, without environment variables.

The matrices of an analysis are small (Hankel matrices of a few hundred rows, Legendre fits of a
few thousand points). OpenBLAS's thread pool makes them slower, not faster: on a loaded 2-core
machine an 86 x 43 SVD took 0.6 ms on one thread and 0.6-19 ms on two, and a 100-file batch on
the default threads burnt 3x the CPU time (measured for issue 14; ``tests/benchmarks/speed.py``
shows the difference). Setting ``OPENBLAS_NUM_THREADS=1`` helps only before numpy is imported;
``threadpoolctl`` changes the limit of every BLAS/OpenMP library already loaded, including the
OpenBLAS that scipy ships and loads on its own, and restores it afterwards, so the caller's
numpy keeps its threads outside an analysis.

:func:`one_blas_thread` is a decorator: the outermost decorated call sets the limit, nested calls
and other threads inside it find it set. The controller is built once per process (about 6 ms)
after scipy's linear algebra is loaded, so that it sees both libraries; entering and leaving the
limit then costs about 30 microseconds.
"""

from __future__ import annotations

import functools
import threading
from collections.abc import Callable
from typing import Any, TypeVar

__all__ = ["one_blas_thread", "blas_limit"]

#: Threads the numerical work runs on (BLAS and OpenMP pools); ``None`` leaves the pools as they
#: are (``tests/benchmarks/speed.py`` sets it to show what the limit buys).
THREADS: int | None = 1

_F = TypeVar("_F", bound=Callable[..., Any])
_lock = threading.Lock()


class _State:
    """The process's one controller, how deep the decorated calls are nested, and the limit set."""

    controller: Any = None
    depth: int = 0
    limit: Any = None


_state = _State()


def _controller():
    if _state.controller is None:
        import scipy.linalg  # noqa: F401  (loads scipy's own OpenBLAS, so that the controller finds it)
        from threadpoolctl import ThreadpoolController

        _state.controller = ThreadpoolController()
    return _state.controller


class blas_limit:
    """Context manager: BLAS/OpenMP pools at :data:`THREADS` threads inside, as before after.

    Re-entrant and shared by threads: the limit is set when the first user enters and restored
    when the last one leaves.
    """

    def __enter__(self) -> blas_limit:
        with _lock:
            if _state.depth == 0 and THREADS is not None:
                _state.limit = _controller().limit(limits=THREADS)
            _state.depth += 1
        return self

    def __exit__(self, *exc) -> None:
        with _lock:
            _state.depth -= 1
            if _state.depth == 0 and _state.limit is not None:
                _state.limit.restore_original_limits()
                _state.limit = None


def one_blas_thread(fn: _F) -> _F:
    """Decorator: run ``fn`` inside :class:`blas_limit`."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        with blas_limit():
            return fn(*args, **kwargs)

    return wrapper  # type: ignore[return-value]
