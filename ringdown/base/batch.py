"""The one batch runner every command uses: each item's failure of any kind is that item's result.

:func:`run_batch` applies a function to many items (recordings) on a pluggable executor and yields
``(position, result)`` as each finishes, so that callers can store, stream or print each result
the moment it exists. The failure policy, the same for ``analyze``, ``check`` and
``limits learn``:

* Any exception raised while handling an item (a :class:`~ringdown.errors.RingdownError`, but
  also ``MemoryError``, ``OverflowError``, ``RecursionError`` or a bug) becomes that item's result
  through the caller's ``on_error(item, exc)``; the other items go on.
* A worker process that dies (killed by the out-of-memory killer or by hand: the pool is then
  broken, ``BrokenProcessPool``) takes no result with it: every item that had not finished is
  run again once, each in a fresh process of its own; an item whose process dies a second time
  becomes a :class:`~ringdown.errors.WorkerError` for that item alone.
* ``KeyboardInterrupt`` (Ctrl-C, SIGINT) cancels the pending items, stops the worker processes
  without waiting for them and propagates, so the caller can write what finished and exit
  promptly. Workers ignore SIGINT themselves (the parent decides).

Workers start warm: a task may name the modules its work imports lazily (``fn.preload``, a tuple
of module names). They are imported in this process before the pool starts (a forked worker
inherits them) and by each worker's initializer (``forkserver`` and ``spawn`` workers pay them
once, not per item; the ``forkserver`` also preloads them), so no item waits for scipy.

Executors are pluggable: anything with ``submit``, ``as_completed`` and ``shutdown`` (the
:class:`BatchExecutor` protocol) can run a batch, e.g. a cluster client. The default is a
process pool (:class:`ProcessExecutor`) for ``jobs > 1`` and this process (:class:`SerialExecutor`)
for ``jobs == 1``.
"""

from __future__ import annotations

import os
import signal
from collections.abc import Callable, Iterable, Iterator, Sequence
from concurrent.futures import Future
from typing import Any, Protocol, TypeVar

from .errors import InternalError, ParameterError, RingdownError, WorkerError

__all__ = ["BatchExecutor", "SerialExecutor", "ProcessExecutor", "run_batch", "as_ringdown_error", "default_executor"]

T = TypeVar("T")
R = TypeVar("R")


class BatchExecutor(Protocol):
    """What :func:`run_batch` needs of an executor (a process pool, this process, a cluster)."""

    def submit(self, fn: Callable[..., Any], /, *args: Any) -> Future:
        """Schedule ``fn(*args)``; return its future."""

    def as_completed(self, futures: Iterable[Future]) -> Iterator[Future]:
        """Yield the futures as they finish."""

    def shutdown(self, *, cancel: bool = False) -> None:
        """Release the workers; with ``cancel`` drop pending work and do not wait for running work."""


class SerialExecutor:
    """Runs each submitted call in this process, lazily, when :meth:`as_completed` reaches it."""

    def __init__(self, max_workers: int = 1) -> None:
        self._pending: dict[int, tuple[Callable, tuple]] = {}

    def submit(self, fn, /, *args) -> Future:
        fut: Future = Future()
        self._pending[id(fut)] = (fn, args)
        return fut

    def as_completed(self, futures):
        for fut in list(futures):
            call = self._pending.pop(id(fut), None)
            if call is not None and fut.set_running_or_notify_cancel():
                try:
                    fut.set_result(call[0](*call[1]))
                except Exception as exc:  # handed to the caller through the future, like a pool
                    fut.set_exception(exc)
            yield fut

    def shutdown(self, *, cancel: bool = False) -> None:
        self._pending.clear()


def preload(modules: Iterable[str]) -> None:
    """Import ``modules`` (names) in this process; one that fails to import is left to the item
    that needs it, which then reports the error as its own result."""
    import importlib

    for name in modules:
        try:
            importlib.import_module(name)
        except Exception:  # noqa: BLE001  (the item that needs it will say why)
            pass


def _init_worker(parent_pid: int | None, modules: tuple[str, ...] = ()) -> None:
    """Worker initializer: Ctrl-C is the parent's to handle; a worker dies with its parent;
    ``modules`` are imported before the first item (warm start).

    Without the second rule a ``kill -9`` of the command leaves its workers waiting forever
    on a queue nobody writes (Linux ``prctl(PR_SET_PDEATHSIG)``; elsewhere best effort).
    ``parent_pid`` is the process that should be the worker's parent (``None``: not known, as
    under the ``forkserver`` start method, where the server is the parent and itself ends when
    the command does).
    """
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, int(signal.SIGKILL), 0, 0, 0)  # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass
    if parent_pid is not None and os.getppid() != parent_pid:  # the parent died before the line above
        os._exit(1)
    preload(modules)


class ProcessExecutor:
    """A :class:`concurrent.futures.ProcessPoolExecutor` whose workers ignore SIGINT and whose
    :meth:`shutdown` with ``cancel`` terminates them instead of waiting.

    ``preload`` names modules every worker imports before its first item; they are imported
    here first, so that forked workers inherit them (see :func:`run_batch`). ``context``: a
    ``multiprocessing`` context (default: the process's default start method).
    """

    def __init__(self, max_workers: int, *, preload: Iterable[str] = (), context=None) -> None:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        modules = tuple(preload)
        globals()["preload"](modules)
        ctx = context if context is not None else multiprocessing.get_context()
        # a forkserver's workers are the server's children, not this process's
        server = ctx.get_start_method() == "forkserver"
        if modules and server:
            ctx.set_forkserver_preload(list(modules))
        self._pool = ProcessPoolExecutor(
            max_workers=max_workers,
            mp_context=ctx,
            initializer=_init_worker,
            initargs=(None if server else os.getpid(), modules),
        )

    def submit(self, fn, /, *args) -> Future:
        return self._pool.submit(fn, *args)

    def as_completed(self, futures):
        from concurrent.futures import as_completed

        return as_completed(list(futures))

    def shutdown(self, *, cancel: bool = False) -> None:
        if cancel:
            self._terminate()
        else:
            self._pool.shutdown(wait=True)

    def _terminate(self) -> None:
        """Drop pending work and terminate the workers, never one halfway through sending a result.

        ProcessPoolExecutor has no public way to stop running work; its worker table is the
        documented-by-use way (CPython 3.8+) to terminate them. A worker killed while it writes
        its (pickled) result to the result pipe leaves a partial message there: the pool's
        manager thread then waits for the rest for ever, and the interpreter, which joins that
        thread at exit, hangs (seen on Ctrl-C in a 2-job batch). Every worker writes under the
        result queue's write lock (``multiprocessing.SimpleQueue.put``), so the workers are
        terminated while this process holds that lock, and the lock is released only once
        they are gone. The wait for a write in progress is bounded (``_WRITE_WAIT_S``).
        """
        pool = self._pool
        procs = list((getattr(pool, "_processes", None) or {}).values())
        lock = getattr(getattr(pool, "_result_queue", None), "_wlock", None)
        held = lock is not None and lock.acquire(timeout=_WRITE_WAIT_S)
        try:
            pool.shutdown(wait=False, cancel_futures=True)
            for p in procs:
                try:
                    p.terminate()
                except Exception:  # already gone
                    pass
            for p in procs:
                p.join(timeout=_WRITE_WAIT_S)
        finally:
            if held and lock is not None:
                lock.release()


#: longest wait, s, for a worker's result write in progress before it is terminated anyway, and
#: for a terminated worker to exit (a result of a few MB goes through a pipe in well under 1 s;
#: common practice, no source)
_WRITE_WAIT_S = 5.0


def default_executor(max_workers: int, *, preload: Iterable[str] = ()) -> BatchExecutor:
    """This process for one worker, else a process pool of ``max_workers`` (warm: ``preload``)."""
    return SerialExecutor() if max_workers <= 1 else ProcessExecutor(max_workers, preload=preload)


def as_ringdown_error(exc: BaseException) -> RingdownError:
    """An exception as the one-line error of the item it happened on."""
    if isinstance(exc, RingdownError):
        return exc
    text = " ".join(str(exc).split())
    if isinstance(exc, MemoryError):
        return InternalError(
            "ran out of memory (MemoryError); the file is too large for this machine or its header states absurd sizes"
        )
    if isinstance(exc, OverflowError):
        return InternalError(
            f"a number overflowed ({text or 'OverflowError'}); check the time step, sample rate and values of the file"
        )
    if isinstance(exc, RecursionError):
        return InternalError("nesting too deep (RecursionError)")
    return InternalError(f"internal error {type(exc).__name__}: {text}")


def _guarded_call(fn, on_error, item):
    """Worker side: ``fn(item)``, or ``on_error(item, exc)`` for any exception."""
    try:
        return fn(item)
    except Exception as exc:
        return on_error(item, as_ringdown_error(exc))


def _is_broken(exc: BaseException) -> bool:
    from concurrent.futures.process import BrokenProcessPool

    return isinstance(exc, BrokenProcessPool)


def run_batch(
    fn: Callable[[T], R],
    items: Sequence[T],
    *,
    on_error: Callable[[T, RingdownError], R],
    jobs: int = 1,
    on_result: Callable[[int, R], None] | None = None,
    executor: Callable[[int], BatchExecutor] | None = None,
    on_notice: Callable[[str], None] | None = None,
) -> Iterator[tuple[int, R]]:
    """Apply ``fn`` to every item; yield ``(position, result)`` in completion order.

    Parameters
    ----------
    fn : callable
        ``fn(item) -> result``. With a process executor, ``fn``, ``on_error``, the items and the
        results must pickle (module-level functions, plain data). An attribute ``fn.preload``
        (tuple of module names) makes workers start warm: they are imported before any item
        runs, here and in each worker.
    items : sequence
    on_error : callable
        ``on_error(item, error) -> result``: the result of an item whose handling raised
        (``error`` is a :class:`~ringdown.errors.RingdownError`; other exceptions are wrapped by
        :func:`as_ringdown_error`) or whose worker died twice (:class:`~ringdown.errors.WorkerError`).
    jobs : int >= 1
        Workers. ``1`` runs in this process.
    on_result : callable, optional
        Called with ``(position, result)`` as each item finishes, before it is yielded.
    executor : callable, optional
        ``executor(max_workers) -> BatchExecutor``; default :func:`default_executor`.
    on_notice : callable, optional
        Called with a plain-words line when a worker died and items are run again.

    Yields
    ------
    (int, result)
        Every position exactly once, unless the batch is interrupted.

    Raises
    ------
    ParameterError
        When ``jobs < 1``.
    KeyboardInterrupt
        After cancelling pending work and stopping the workers.
    """
    if isinstance(jobs, bool) or not isinstance(jobs, int) or jobs < 1:
        raise ParameterError(f"jobs must be a whole number >= 1; got {jobs!r}")
    n = len(items)
    if n == 0:
        return
    modules = tuple(getattr(fn, "preload", ()) or ())
    make = _executor_factory(executor, modules, parallel=min(jobs, n) > 1)

    def finish(pos: int, res):
        if on_result is not None:
            on_result(pos, res)
        return pos, res

    retry: list[int] = []
    yield from _first_pass(fn, on_error, items, make(min(jobs, n)), retry, finish)
    # A worker died: every unfinished item once more, each in a fresh process of its own, so
    # that the item that kills its process takes only itself down.
    retry.sort()
    if retry and on_notice is not None:
        on_notice(
            f"a worker process died (killed by the system?); {len(retry)} item(s) not finished are run "
            "again, each in a fresh process"
        )

    def make_one() -> BatchExecutor:
        return ProcessExecutor(1, preload=modules) if executor is None else make(1)

    yield from _retry_pass(fn, on_error, items, retry, jobs, make_one, finish)


def _executor_factory(
    executor: Callable[[int], BatchExecutor] | None, modules: tuple[str, ...], *, parallel: bool
) -> Callable[[int], BatchExecutor]:
    """``executor``, or the default executor that preloads ``modules`` in its workers; a custom
    executor running in parallel gets them imported here first (a forking one inherits them)."""
    if executor is not None:
        if parallel:
            preload(modules)
        return executor

    def make(k: int) -> BatchExecutor:
        return default_executor(k, preload=modules)

    return make


def _first_pass(fn, on_error, items, ex: BatchExecutor, retry: list[int], finish) -> Iterator[tuple[int, Any]]:
    """Every item on ``ex``; positions whose worker died go to ``retry``, the others are yielded
    as ``finish(position, result)``. ``ex`` is shut down at the end, on an interrupt and when the
    consumer stops (cancelling what is pending)."""
    try:
        futs = {ex.submit(_guarded_call, fn, on_error, items[i]): i for i in range(len(items))}
        for fut in ex.as_completed(futs):
            pos = futs[fut]
            try:
                res = fut.result()
            except Exception as exc:
                if _is_broken(exc):
                    retry.append(pos)
                    continue
                res = on_error(items[pos], as_ringdown_error(exc))  # e.g. a result that would not pickle
            yield finish(pos, res)
    except BaseException:
        ex.shutdown(cancel=True)
        raise
    else:
        ex.shutdown(cancel=bool(retry))


def _retry_pass(fn, on_error, items, retry: list[int], jobs: int, make_one, finish) -> Iterator[tuple[int, Any]]:
    """The positions ``retry`` again, ``jobs`` at a time, each on an executor of its own from
    ``make_one()``; a worker that dies again gives :class:`WorkerError` for its item."""
    while retry:
        chunk, retry = retry[: max(jobs, 1)], retry[max(jobs, 1) :]
        pools: list[BatchExecutor] = []
        try:
            futs: dict[Future, tuple[int, BatchExecutor]] = {}
            for pos in chunk:
                one = make_one()
                pools.append(one)
                futs[one.submit(_guarded_call, fn, on_error, items[pos])] = (pos, one)
            for fut in _merged_as_completed(futs):
                pos, _ = futs[fut]
                try:
                    res = fut.result()
                except Exception as exc:
                    err = (
                        WorkerError(
                            "the worker process analysing it died twice (killed by the system, "
                            "e.g. out of memory); check the file and the free memory"
                        )
                        if _is_broken(exc)
                        else as_ringdown_error(exc)
                    )
                    res = on_error(items[pos], err)
                yield finish(pos, res)
        except BaseException:
            for p in pools:
                p.shutdown(cancel=True)
            raise
        for p in pools:
            p.shutdown(cancel=True)


def _merged_as_completed(futs: dict) -> Iterator[Future]:
    """as_completed over futures that may come from several executors."""
    from concurrent.futures import as_completed

    serial = [f for f, (_, ex) in futs.items() if isinstance(ex, SerialExecutor)]
    for f in serial:
        yield from futs[f][1].as_completed([f])
    yield from as_completed([f for f in futs if f not in serial])
