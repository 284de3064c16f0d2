"""Batches on a Dask cluster: one task per recording on the workers of a ``dask.distributed`` scheduler.

The engine is Dask's (``dask.distributed``, https://distributed.dask.org): a laptop's
``LocalCluster`` and a scheduler with workers on many machines (started by hand, by dask-jobqueue
on a batch system, or on Kubernetes) are used the same way, through a :class:`distributed.Client`.
This module only opens the client and runs a batch on it; the failure policy is the local batch's:

* Any exception raised while handling one item becomes that item's result through the caller's
  ``on_error(item, error)``, on the worker; the other items go on.
* A path that the worker cannot read is that file's :class:`~ringdown.errors.InputError`, naming
  the worker: the files must be readable by the workers (a shared file system mounted at the same
  path on every machine), not only by the machine that submits the batch.
* A worker that dies (killed, out of memory, its machine lost) takes no result with it: the
  scheduler runs its tasks again on other workers. A task that was running each time a worker died
  ``distributed.scheduler.allowed-failures`` + 1 times (Dask's default 3 + 1) is given up by Dask
  (``KilledWorker``) and becomes a :class:`~ringdown.errors.ClusterError` for that file alone.
  ``retries`` (Dask's task retries) re-runs a task whose *exception* reached the scheduler; the
  tasks here catch their exceptions, so it only matters for a result that cannot be sent back.
* Interrupting the batch (Ctrl-C) cancels the tasks not yet finished.

Dask and its dependencies are an optional extra (``pip install 'ringdown[cluster]'``), imported
only when a batch runs on a cluster.
"""

from __future__ import annotations

import logging
import os
import uuid
from collections.abc import Callable, Iterator, Sequence
from typing import Any

from .errors import ClusterError, InputError, ParameterError, RingdownError

__all__ = ["connect", "open_client", "iter_results", "ClusterExecutor", "check_versions", "require_extra"]

#: Tasks submitted to the scheduler at once; each finished task lets the next one in. Bounds the
#: scheduler's and this process's memory for a batch of millions of files. A task costs the
#: scheduler roughly 1 ms (Dask's documentation, "best practices": from memory), so a few hundred
#: tasks of ~0.1 s in flight keep every worker of a cluster of some dozen cores busy.
MAX_IN_FLIGHT = 1000

#: Seconds to wait for a scheduler at an address before saying it cannot be reached (our choice:
#: long enough for a scheduler on a busy network, short enough to fail a mistyped address soon).
CONNECT_TIMEOUT_S = 20.0


def require_extra(what: str = "--scheduler") -> None:
    """Raise a one-line :class:`ParameterError` when the ``cluster`` extra is not installed."""
    try:
        import distributed  # noqa: F401
    except ImportError:
        raise ParameterError(
            f"{what} needs the optional 'cluster' extra (dask[distributed], pyarrow); install it "
            "with: pip install 'ringdown[cluster]'"
        ) from None


def _local_workers(spec: str) -> int:
    text = spec.split(":", 1)[1].strip()
    try:
        n = int(text)
    except ValueError:
        n = 0
    if n < 1:
        raise ParameterError(
            f"--scheduler {spec!r}: local:N needs a whole number of worker processes N >= 1 (e.g. local:4)"
        )
    return n


def open_client(scheduler: str):
    """A :class:`distributed.Client` for ``scheduler``, and the LocalCluster it started (or None).

    Parameters
    ----------
    scheduler : str
        ``"local:N"`` starts a ``distributed.LocalCluster`` of N worker processes with one thread
        each on this machine (its HTTP server on a free loopback port); anything else is the address of a running scheduler,
        e.g. ``"tcp://10.0.0.5:8786"`` (``dask scheduler`` prints it).

    Returns
    -------
    (distributed.Client, distributed.LocalCluster or None)

    Raises
    ------
    ParameterError
        The extra is not installed, or ``local:N`` is malformed.
    ClusterError
        No scheduler answers at the address.
    """
    require_extra()
    import dask
    from distributed import Client, LocalCluster

    scheduler = str(scheduler).strip()
    if scheduler.lower().startswith("local:"):
        n = _local_workers(scheduler)
        # The scheduler's HTTP server on a free loopback port: Dask's default 8787 may be taken.
        # Dask's own warnings (e.g. on cancelling tasks after Ctrl-C) stay off the terminal.
        # worker-saturation 1.0: a worker holds only the task it runs. Dask counts a worker's death
        # against every task assigned to it (Scheduler.remove_worker), so with tasks queued on
        # workers (Dask's default 1.1) a file that kills its worker could take an innocent one down.
        with dask.config.set({"distributed.scheduler.worker-saturation": 1.0}):
            cluster = LocalCluster(
                n_workers=n,
                threads_per_worker=1,
                processes=True,
                dashboard_address="127.0.0.1:0",
                silence_logs=logging.ERROR,
            )
        return Client(cluster), cluster
    if not scheduler:
        raise ParameterError("--scheduler is empty; give a scheduler address (tcp://HOST:8786) or local:N")
    try:
        client = Client(scheduler, timeout=CONNECT_TIMEOUT_S)
    except (OSError, TimeoutError, ValueError) as exc:
        raise ClusterError(
            f"cannot reach a Dask scheduler at {scheduler!r} within {CONNECT_TIMEOUT_S:g} s "
            f"({' '.join(str(exc).split()) or type(exc).__name__}); start one with 'dask scheduler' "
            "and workers with 'dask worker ADDRESS', or use --scheduler local:N"
        ) from None
    return client, None


class connect:
    """A client for ``scheduler`` (see :func:`open_client`), opened now and closed on leaving ``with``.

    ``connect(None)`` stands for "run locally": ``with connect(None) as client`` gives ``None``, so
    that callers need one code path. Opening checks that the workers run this ringdown version
    (:func:`check_versions`); errors are raised here, before any work is submitted.
    """

    def __init__(self, scheduler: str | None) -> None:
        self.client = self._cluster = None
        if scheduler is not None:
            self.client, self._cluster = open_client(scheduler)
            try:
                check_versions(self.client)
            except BaseException:
                self.close()
                raise

    def close(self) -> None:
        if self.client is not None:
            self.client.close()
        if self._cluster is not None:
            self._cluster.close()
        self.client = self._cluster = None

    def __enter__(self):
        return self.client

    def __exit__(self, *exc) -> None:
        self.close()


def _where() -> str:
    try:
        from distributed import get_worker

        return f"Dask worker {get_worker().address}"
    except (ImportError, ValueError):
        import socket

        return f"host {socket.gethostname()}"


def _run_task(fn: Callable, on_error: Callable, item: Any):
    """Worker side: ``fn(item)``, or ``on_error(item, error)`` for any exception or an unreadable path."""
    if isinstance(item, (str, os.PathLike)):
        path = os.fspath(item)
        if not os.path.exists(path) or not os.access(path, os.R_OK):
            why = "does not exist" if not os.path.exists(path) else "cannot be read (permissions)"
            hint = (
                ""
                if os.path.isabs(path)
                else " and given as absolute paths (a worker resolves a relative one from its own working folder)"
            )
            return on_error(
                item,
                InputError(
                    f"{path!r} {why} on the {_where()}; the recordings must be readable by every worker "
                    f"(a shared file system mounted at the same path on each machine){hint}"
                ),
            )
    try:
        return fn(item)
    except Exception as exc:  # any failure on one file is that file's error, as in the local batch
        from .batch import as_ringdown_error

        return on_error(item, as_ringdown_error(exc))


def iter_results(
    client,
    fn: Callable[[Any], Any],
    items: Sequence[Any],
    *,
    on_error: Callable[[Any, RingdownError], Any],
    retries: int = 1,
    max_in_flight: int = MAX_IN_FLIGHT,
) -> Iterator[tuple[int, Any]]:
    """Run ``fn`` on every item on the cluster's workers; yield ``(position, result)`` as each finishes.

    Parameters
    ----------
    client : distributed.Client
    fn : callable
        ``fn(item) -> result``, run on a worker. It, ``on_error``, the items and the results are
        sent with cloudpickle: module-level functions (or ``functools.partial`` of them) of a
        package installed on every worker, and plain data.
    items : sequence
        One task per item. Items that are paths are checked to be readable on the worker first.
    on_error : callable
        ``on_error(item, error) -> result`` for an item whose handling raised (on the worker) or
        whose task Dask gave up after losing its workers (here, with a ``ClusterError``).
    retries : int >= 0
        Dask's task retries (``Client.submit(retries=)``): for a task whose exception reaches the
        scheduler (a result that cannot be sent back). Lost workers are retried by the scheduler
        (``distributed.scheduler.allowed-failures``).
    max_in_flight : int >= 1
        Tasks submitted at once (:data:`MAX_IN_FLIGHT`).

    Yields
    ------
    (int, result)
        Every position exactly once, in completion order, unless interrupted (then the unfinished
        tasks are cancelled).
    """
    from distributed import as_completed
    from distributed.scheduler import KilledWorker

    items = list(items)
    if max_in_flight < 1:
        raise ParameterError(f"max_in_flight must be >= 1; got {max_in_flight!r}")
    batch = uuid.uuid4().hex[:12]
    running: dict[str, tuple[int, Any]] = {}  # task key -> (position, future)
    nxt = 0

    def submit_next():
        nonlocal nxt
        fut = client.submit(
            _run_task, fn, on_error, items[nxt], key=f"ringdown-{batch}-{nxt}", pure=False, retries=retries
        )
        running[fut.key] = (nxt, fut)
        nxt += 1
        return fut

    ac = as_completed([submit_next() for _ in range(min(max_in_flight, len(items)))])
    try:
        for fut in ac:
            pos, _ = running.pop(fut.key)
            try:
                # waits when the result was lost with its worker after finishing: Dask computes it again
                res = fut.result()
            except KilledWorker:
                res = on_error(items[pos], _killed_error())
            except Exception as exc:  # cancelled, or a result that could not be sent back
                res = on_error(
                    items[pos],
                    ClusterError(
                        f"the cluster could not run it: {type(exc).__name__}: "
                        f"{' '.join(str(exc).split()) or fut.status}"
                    ),
                )
            fut.release()
            if nxt < len(items):
                ac.add(submit_next())
            yield pos, res
    finally:
        if running:  # interrupted, or the consumer stopped early: drop the rest
            client.cancel([f for _, f in running.values()], force=True)


class ClusterExecutor:
    """A Dask client behind the executor interface of a generic batch runner.

    ``submit(fn, *args)`` returns a :class:`concurrent.futures.Future`; ``as_completed(futures)``
    yields them as they finish; ``shutdown(cancel=True)`` cancels what has not finished. A task
    Dask gave up after losing its workers fails with a :class:`~ringdown.errors.ClusterError`
    (not Dask's ``KilledWorker``). Unlike :func:`iter_results`, it neither bounds the tasks in
    flight nor checks paths on the worker; it is for runners that bring their own loop.
    """

    def __init__(self, client, *, retries: int = 1) -> None:
        self.client = client
        self.retries = retries
        self._dask: list = []

    def submit(self, fn: Callable, /, *args):
        from concurrent.futures import Future

        out: Future = Future()
        fut = self.client.submit(fn, *args, pure=False, retries=self.retries)
        self._dask.append(fut)

        def done(f) -> None:  # runs on the client's callback thread
            if out.cancelled():
                return
            try:
                out.set_result(f.result())
            except BaseException as exc:
                out.set_exception(_as_cluster_error(exc))

        fut.add_done_callback(done)
        return out

    def as_completed(self, futures):
        from concurrent.futures import as_completed

        return as_completed(list(futures))

    def shutdown(self, *, cancel: bool = False) -> None:
        if cancel and self._dask:
            self.client.cancel(self._dask, force=True)
        self._dask = []


def _killed_error() -> ClusterError:
    """The error of a task whose Dask workers died each time it was tried (``KilledWorker``)."""
    return ClusterError(
        "the Dask workers running it died each time it was tried (killed, out of memory or their "
        "machine lost); check the file and the workers' memory"
    )


def _as_cluster_error(exc: BaseException) -> BaseException:
    from distributed.scheduler import KilledWorker

    return _killed_error() if isinstance(exc, KilledWorker) else exc


def worker_versions(client) -> dict[str, str]:
    """The ringdown version importable on each worker (address -> version), to catch a mixed cluster."""
    return client.run(_ringdown_version)


def _ringdown_version() -> str:
    from .._version import __version__

    return __version__


def check_versions(client) -> None:
    """Raise :class:`ClusterError` when a worker runs another ringdown version than this process."""
    from .._version import __version__

    try:
        versions = worker_versions(client)
    except Exception as exc:  # e.g. ringdown not importable on a worker
        raise ClusterError(
            f"cannot import ringdown on the Dask workers ({type(exc).__name__}: {exc}); install "
            f"ringdown {__version__} in every worker's environment"
        ) from None
    # No worker yet is no error: an adaptive cluster (dask-jobqueue, Kubernetes) starts them later.
    other = {a: v for a, v in versions.items() if v != __version__}
    if other:
        addr, v = sorted(other.items())[0]
        raise ClusterError(
            f"{len(other)} Dask worker(s) run ringdown {v} (first {addr}), this process "
            f"{__version__}; install the same version everywhere so results agree"
        )
