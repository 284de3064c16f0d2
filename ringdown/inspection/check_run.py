"""A check batch against the results history: which parts to skip, storing each result, the rows.

``ringdown check`` is this bookkeeping over :func:`ringdown.inspection.check.iter_check_files`, and
a script can do the same::

    run = CheckRun(paths, limits, part_ids=ids, store=ResultStore("ringdown.sqlite"))
    for i, row in run.stored_rows():
        ...                               # parts already checked with these limits: not analysed again
    for pos, result in iter_check_files(run.todo_paths, limits):
        row = run.take(pos, result)       # stored, and the row is the JSON record of the part
    document = run.document(elapsed_s)    # exactly what ``ringdown check --json`` prints

The rules: a part whose file (SHA-256 of its bytes) was already checked against the same limits
(their SHA-256) is skipped, and its row is the stored record, marked ``skipped``, unless ``force``
is given or there is no store; every other part is checked, its result goes to the Parquet
dataset first and then to the store (so whatever is stored is in the dataset too), and a store
that fails stops the storing for the rest of the run without losing any row.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence
from dataclasses import replace
from typing import TYPE_CHECKING, Any

from ..base.errors import RingdownError

if TYPE_CHECKING:
    from .check import CheckResult
    from .limits import Limits
    from .store import ResultStore, StoredResult

__all__ = ["CheckRun", "check_summary", "stored_row"]


class CheckRun:
    """The bookkeeping of one check batch (see the module docstring for the rules).

    Parameters
    ----------
    paths : sequence of str
        The recordings, in input order (``-`` for standard input).
    limits : Limits
        The limits checked against; ``limits.sha256`` identifies them in the store.
    part_ids : sequence of str
        The part id of each path (same length as ``paths``).
    store : ResultStore, optional
        The results history; without one nothing is skipped or stored.
    force : bool
        Check and store again parts already stored with the same limits.
    station, operator : str, optional
        Stored with each result.
    on_store_error : callable, optional
        Called once with the ``RingdownError`` of the store when storing fails.
    """

    def __init__(
        self,
        paths: Sequence[str],
        limits: Limits,
        *,
        part_ids: Sequence[str],
        store: ResultStore | None = None,
        force: bool = False,
        station: str | None = None,
        operator: str | None = None,
        on_store_error: Callable[[RingdownError], None] | None = None,
    ) -> None:
        if len(part_ids) != len(paths):
            raise ValueError(f"{len(part_ids)} part ids for {len(paths)} paths")
        self.paths, self.part_ids = list(paths), list(part_ids)
        self.limits, self.store, self.force = limits, store, force
        self.station, self.operator = station, operator
        self.on_store_error = on_store_error
        #: SHA-256 of each file's bytes (None for standard input or a file that cannot be read),
        #: read by :meth:`stored_rows` (or the first :meth:`take`).
        self.shas: list[str | None] = []
        #: Each part's row (the JSON record of ``check``) once known, in input order.
        self.rows: list[dict | None] = [None] * len(self.paths)
        #: Positions in ``paths`` of the parts to check (set by :meth:`stored_rows`).
        self.todo: list[int] = list(range(len(self.paths)))
        #: Whether the store failed (nothing was stored after that).
        self.store_failed = False

    @property
    def todo_paths(self) -> list[str]:
        """The paths of the parts to check, in the order of :attr:`todo`."""
        return [self.paths[i] for i in self.todo]

    def stored_rows(self) -> Iterator[tuple[int, dict]]:
        """``(position, row)`` of each part already checked with these limits, as it is found.

        The row is the stored record in full (:func:`stored_row`). When the iteration ends,
        :attr:`todo` holds the other parts. Nothing is skipped without a store or with ``force``.
        A store that cannot be read raises its ``StoreError``.
        """
        self._hash()
        todo = []
        for i, p in enumerate(self.paths):
            old = None
            if self.store is not None and not self.force and self.shas[i] is not None:
                old = self.store.find_check(self.shas[i], self.limits.sha256)
            if old is None:
                todo.append(i)
                continue
            self.rows[i] = row = stored_row(old, self.part_ids[i], p, self.shas[i])
            yield i, row
        self.todo = todo

    def take(self, pos: int, result: CheckResult, sink: Any = None) -> dict:
        """The row of the ``pos``-th part of :attr:`todo` from its check ``result``.

        The file's SHA-256 is filled in when the result lacks it; the result is added to ``sink``
        (a :class:`ringdown.inspection.parquet.ParquetSink`; its errors propagate) and then
        recorded in the store, whose ``StoreError`` stops the storing (``on_store_error``).
        """
        self._hash()
        i = self.todo[pos]
        if result.sha256 is None and self.shas[i] is not None:
            result = replace(result, sha256=self.shas[i])
        pid = self.part_ids[i]
        if sink is not None:
            sink.add_check(result, part_id=pid, station=self.station, operator=self.operator)
        stored = None
        if self.store is not None and not self.store_failed:
            try:
                stored = self.store.record_check(
                    result, part_id=pid, station=self.station, operator=self.operator, force=self.force
                )
            except RingdownError as exc:
                self.store_failed = True
                if self.on_store_error is not None:
                    self.on_store_error(exc)
        self.rows[i] = row = {"part_id": pid, "skipped": False, "stored_id": stored, **result.to_dict()}
        return row

    def _hash(self) -> None:
        from .store import file_sha256

        if not self.shas:
            self.shas = [file_sha256(p) for p in self.paths]

    def finished_rows(self) -> list[dict]:
        """The rows known so far, in input order (all of them unless the run was interrupted)."""
        return [r for r in self.rows if r is not None]

    def document(self, elapsed_s: float) -> dict[str, Any]:
        """The JSON document of the run (what ``ringdown check --json`` prints)."""
        from .._version import __version__

        rows = self.finished_rows()
        return {
            "tool": {"name": "ringdown", "version": __version__},
            "limits": {"path": self.limits.source, "sha256": self.limits.sha256},
            "station": self.station,
            "operator": self.operator,
            "results": rows,
            "summary": check_summary(rows, elapsed_s),
        }


def check_summary(rows: Sequence[dict], elapsed_s: float) -> dict[str, Any]:
    """The counts of a check run (the JSON ``summary``): parts, passed, failed, errors, skipped, time_s.

    Parameters
    ----------
    rows : sequence of dict
        The rows of the parts (``verdict`` "pass", "fail" or "error"; ``skipped`` true when taken
        from the store).
    elapsed_s : float
        Wall-clock time of the run, s (rounded to 1 ms).
    """
    counts = {v: sum(1 for r in rows if r["verdict"] == v) for v in ("pass", "fail", "error")}
    return {
        "parts": len(rows),
        "passed": counts["pass"],
        "failed": counts["fail"],
        "errors": counts["error"],
        "skipped": sum(1 for r in rows if r.get("skipped")),
        "time_s": round(elapsed_s, 3),
    }


def stored_row(old: StoredResult, part_id: str, path: str, sha: str | None) -> dict:
    """The row of a part skipped as already stored: the stored record in full (features, modes)."""
    rec = (
        dict(old.result)
        if old.result
        else {
            "reasons": list(old.reasons),
            "notes": list(old.notes),
            "features": [],
            "modes": [],
            "mahalanobis": old.mahalanobis,
            "uniform_shift": old.uniform_shift,
            "verdict": old.verdict,
        }
    )
    rec.update(part_id=part_id, path=path, sha256=sha, verdict=old.verdict, skipped=True, stored_id=old.id)
    return rec
