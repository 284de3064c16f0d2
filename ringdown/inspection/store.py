"""The results history: every checked (or analysed) part in one SQLite database.

This is the only module that uses :mod:`sqlite3`. One row of ``results`` per test of a part, one
row of ``modes`` per measured mode, and the text of every limits file used (``limits_files``), so a
record can be traced to the exact recording (SHA-256), limits (SHA-256) and tool version.

Safety for batches on a line:

* one transaction per part (``with conn:``, ``BEGIN IMMEDIATE``), so a killed batch leaves every
  finished part stored and no half-written one;
* write-ahead logging and a busy timeout, so two processes (two stations) can write at once;
* a check of a file already stored with the same file SHA-256 and limits SHA-256 is skipped unless
  forced (:meth:`ResultStore.record_check`), so a killed batch can simply be run again;
* only ``?`` parameters, never SQL built from names or paths;
* fail closed: a corrupt, read-only, foreign or newer database, a dropped table or a row whose
  JSON does not parse is a :class:`~ringdown.base.errors.StoreError` naming the file, never a
  traceback and never a silently partial answer.

The schema version is ``PRAGMA user_version``; :data:`MIGRATIONS` bring an older database up to date.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import re
import sqlite3
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .._version import __version__
from ..analysis.results import Analysis
from ..base.clock import utc_stamp
from ..base.errors import ParameterError, RingdownError, StoreError

if TYPE_CHECKING:
    from .check import CheckResult
    from .limits import Limits

__all__ = [
    "SCHEMA_VERSION",
    "DEFAULT_DB",
    "ResultStore",
    "StoredResult",
    "store_analysis",
    "file_sha256",
    "part_id_from_path",
    "parse_date",
]

#: Default database file name (in the working directory).
DEFAULT_DB = "ringdown.sqlite"

_MODE_COLUMNS = (
    "f_d_hz",
    "f_d_hz_u",
    "beta_per_s",
    "beta_per_s_u",
    "f_n_hz",
    "f_n_hz_u",
    "zeta",
    "zeta_u",
    "q",
    "q_u",
    "loss_factor",
    "loss_factor_u",
    "t60_s",
    "t60_s_u",
    "amplitude",
    "snr_db",
)

#: Schema migrations: MIGRATIONS[i] takes a database from user_version i to i + 1.
MIGRATIONS: tuple[str, ...] = (
    """
    CREATE TABLE results (
        id INTEGER PRIMARY KEY AUTOINCREMENT,
        kind TEXT NOT NULL CHECK (kind IN ('check', 'analysis')),
        part_id TEXT NOT NULL,
        path TEXT,
        sha256 TEXT,
        tested_utc TEXT NOT NULL,
        station TEXT,
        operator TEXT,
        tool_version TEXT NOT NULL,
        settings_json TEXT NOT NULL,
        limits_sha256 TEXT,
        verdict TEXT CHECK (verdict IS NULL OR verdict IN ('pass', 'fail', 'error')),
        reasons_json TEXT NOT NULL DEFAULT '[]',
        notes_json TEXT NOT NULL DEFAULT '[]',
        mahalanobis REAL,
        uniform_shift REAL,
        error TEXT,
        result_json TEXT NOT NULL
    );
    CREATE INDEX results_file ON results (sha256, limits_sha256, kind);
    CREATE INDEX results_part ON results (part_id, tested_utc);
    CREATE TABLE modes (
        result_id INTEGER NOT NULL REFERENCES results(id) ON DELETE CASCADE,
        mode_index INTEGER NOT NULL,
        ref_index INTEGER,
        f_d_hz REAL, f_d_hz_u REAL, beta_per_s REAL, beta_per_s_u REAL,
        f_n_hz REAL, f_n_hz_u REAL, zeta REAL, zeta_u REAL, q REAL, q_u REAL,
        loss_factor REAL, loss_factor_u REAL, t60_s REAL, t60_s_u REAL,
        amplitude REAL, snr_db REAL,
        mode_json TEXT NOT NULL,
        PRIMARY KEY (result_id, mode_index)
    );
    CREATE INDEX modes_ref ON modes (ref_index);
    CREATE TABLE limits_files (
        sha256 TEXT PRIMARY KEY,
        source TEXT,
        first_used_utc TEXT NOT NULL,
        limits_json TEXT NOT NULL
    );
    """,
)
#: The schema version this module writes.
SCHEMA_VERSION = len(MIGRATIONS)


def file_sha256(path: str | os.PathLike) -> str | None:
    """SHA-256 (hex) of a regular file's bytes (:func:`ringdown.io.files.sha256_file`), or ``None``
    when it cannot be read or is not a regular file (a FIFO or a device is never read: it could
    block or never end)."""
    from ..io.files import sha256_file

    try:
        return sha256_file(os.fspath(path))
    except (RingdownError, OSError):  # InputError (not regular, missing, unreadable): no hash
        return None


def part_id_from_path(path: str, regex: str | None = None) -> str:
    """The part id of a recording: from its file name by ``regex``, else the file stem.

    Parameters
    ----------
    path : str
    regex : str, optional
        Searched in the file name (not the folders); the first group if the pattern has one,
        else the whole match. No match gives the file stem.

    Raises
    ------
    ParameterError
        When ``regex`` is not a valid regular expression.
    """
    name = Path(path).name
    stem = Path(path).stem
    if not regex:
        return stem
    try:
        rx = re.compile(regex)
    except re.error as exc:
        raise ParameterError(f"--part-id pattern {regex!r} is not a valid regular expression ({exc}); fix it") from None
    m = rx.search(name)
    if m is None:
        return stem
    if rx.groups >= 1 and m.group(1) is not None:
        return m.group(1)
    return m.group(0)


def parse_date(text: str, *, end: bool = False) -> str:
    """An ISO date or date-time as the UTC text stored in the database.

    A bare date ``2024-05-01`` means the start of that day (``end=False``) or its end (``end=True``).

    Raises
    ------
    ParameterError
        For text that is not an ISO 8601 date or date-time.
    """
    s = text.strip()
    try:
        if len(s) == 10:
            d = _dt.date.fromisoformat(s)
            t = _dt.datetime.combine(d, _dt.time.max if end else _dt.time.min, tzinfo=_dt.timezone.utc)
        else:
            t = _dt.datetime.fromisoformat(s.replace("Z", "+00:00"))
            if t.tzinfo is None:
                t = t.replace(tzinfo=_dt.timezone.utc)
            t = t.astimezone(_dt.timezone.utc)
    except ValueError:
        raise ParameterError(f"date {text!r} is not an ISO date; use e.g. 2024-05-01 or 2024-05-01T13:00:00Z") from None
    return t.isoformat(timespec="microseconds").replace("+00:00", "Z")


@dataclass(frozen=True, slots=True)
class StoredResult:
    """One stored test of a part, as read back from the database."""

    id: int
    kind: str
    part_id: str
    path: str | None
    sha256: str | None
    tested_utc: str
    station: str | None
    operator: str | None
    tool_version: str
    limits_sha256: str | None
    verdict: str | None
    reasons: tuple[dict, ...]
    notes: tuple[dict, ...]
    mahalanobis: float | None
    uniform_shift: float | None
    error: str | None
    settings: dict
    modes: tuple[dict, ...] = field(default_factory=tuple)
    #: The full stored record (``CheckResult.to_dict()`` or ``Analysis.to_dict()`` without hits).
    result: dict = field(default_factory=dict)

    def mode_for(self, ref_index: int) -> dict | None:
        """The stored mode matched to reference mode ``ref_index`` (checks) or with that index."""
        for m in self.modes:
            if m.get("ref_index") == ref_index:
                return m
        if self.kind == "analysis":
            for m in self.modes:
                if m.get("mode_index") == ref_index:
                    return m
        return None

    def to_dict(self) -> dict:
        return {
            "id": self.id,
            "kind": self.kind,
            "part_id": self.part_id,
            "path": self.path,
            "sha256": self.sha256,
            "tested_utc": self.tested_utc,
            "station": self.station,
            "operator": self.operator,
            "tool_version": self.tool_version,
            "limits_sha256": self.limits_sha256,
            "verdict": self.verdict,
            "reasons": [dict(r) for r in self.reasons],
            "notes": [dict(n) for n in self.notes],
            "mahalanobis": self.mahalanobis,
            "uniform_shift": self.uniform_shift,
            "error": self.error,
            "settings": dict(self.settings),
            "modes": [dict(m) for m in self.modes],
        }


def _read_only(p: Path) -> bool:
    """Whether the database file or its folder cannot be written (modes or a read-only mount)."""
    folder = p.parent if str(p.parent) else Path(".")
    return (p.exists() and not os.access(p, os.W_OK)) or not os.access(folder, os.W_OK)


def _why(exc: BaseException) -> str:
    """A one-line reason with the fix for an sqlite3 error."""
    text = " ".join(str(exc).split()) or type(exc).__name__
    low = text.lower()
    if "readonly" in low or "read-only" in low:
        return f"{text}; the file or its folder is read-only: make them writable or use another --db"
    if "malformed" in low or "not a database" in low or "corrupt" in low:
        return f"{text}; the file is damaged or not a database: restore a backup or use another --db"
    if "no such table" in low or "no such column" in low:
        return f"{text}; a table is missing: the file is damaged or not ringdown's; use another --db"
    return f"{text}; check the path, disk space and permissions or use another --db"


def _json(obj: Any) -> str:
    return json.dumps(obj, allow_nan=False, default=str, sort_keys=True)


class ResultStore:
    """An open results database.

    Parameters
    ----------
    path : str or path-like
        Database file; created (with its schema) when missing.
    timeout_s : float, default 30
        How long a writer waits for another process's transaction (SQLite busy timeout).

    Raises
    ------
    StoreError
        When the file cannot be opened, is not a ringdown database, or was written by a newer
        ringdown (a higher schema version).

    Examples
    --------
    >>> with ResultStore("ringdown.sqlite") as db:            # doctest: +SKIP
    ...     db.record_check(result, part_id="A-17", station="EOL-2")
    """

    def __init__(self, path: str | os.PathLike, *, timeout_s: float = 30.0, read_only: bool = False) -> None:
        self.path = str(path)
        p = Path(self.path)
        if p.exists() and not p.is_file():
            raise StoreError(f"results database '{self.path}' is not a regular file; use another --db")
        try:
            if read_only:
                from urllib.parse import quote

                if not p.is_file():
                    raise StoreError(f"no results database at '{self.path}'; check the path or give --db")
                uri = "file:" + quote(str(p.resolve())) + "?mode=ro"
                self._conn = sqlite3.connect(uri, uri=True, timeout=timeout_s, isolation_level=None)
                try:
                    self._conn.execute("PRAGMA user_version").fetchone()
                except sqlite3.OperationalError:
                    # a WAL database on read-only media cannot make its -shm file: read it as immutable
                    self._conn.close()
                    self._conn = sqlite3.connect(
                        uri + "&immutable=1", uri=True, timeout=timeout_s, isolation_level=None
                    )
            else:
                self._conn = sqlite3.connect(self.path, timeout=timeout_s, isolation_level=None)
        except sqlite3.Error as exc:
            raise StoreError(
                f"cannot use results database '{self.path}': {exc}; check the path or use another --db"
            ) from None
        try:
            self._conn.row_factory = sqlite3.Row
            self._conn.execute(f"PRAGMA busy_timeout = {int(timeout_s * 1000)}")
            if read_only:
                self._check_version(self.schema_version)
            else:
                self._conn.execute("PRAGMA journal_mode = WAL")
                self._conn.execute("PRAGMA foreign_keys = ON")
                self._migrate()
            self._check_schema()
        except StoreError:
            self._conn.close()
            raise
        except sqlite3.Error as exc:
            self._conn.close()
            why = _why(exc)
            if "read-only" not in why and not read_only and _read_only(p):
                why = f"{' '.join(str(exc).split())}; the file or its folder is read-only: make them writable or use another --db"
            raise StoreError(f"cannot use results database '{self.path}': {why}") from None

    def _check_version(self, version: int) -> None:
        if version > SCHEMA_VERSION:
            raise StoreError(
                f"results database '{self.path}' has schema version {version}, newer than this "
                f"ringdown writes ({SCHEMA_VERSION}); upgrade ringdown"
            )
        if version < 0:
            raise StoreError(
                f"'{self.path}' has schema version {version}: not a ringdown results database; use another --db"
            )
        if version == 0:
            tables = self._conn.execute("SELECT count(*) FROM sqlite_master WHERE type = 'table'").fetchone()[0]
            if tables:
                raise StoreError(
                    f"'{self.path}' is an SQLite database but not a ringdown results database; use another --db"
                )

    def _check_schema(self) -> None:
        """Every table and column this module uses must be there (a dropped or altered table fails here)."""
        need = {
            "results": {
                "id",
                "kind",
                "part_id",
                "path",
                "sha256",
                "tested_utc",
                "settings_json",
                "limits_sha256",
                "verdict",
                "reasons_json",
                "notes_json",
                "error",
                "result_json",
            },
            "modes": {"result_id", "mode_index", "ref_index", "mode_json", *_MODE_COLUMNS},
            "limits_files": {"sha256", "limits_json"},
        }
        for table, cols in need.items():
            have = {r[1] for r in self._conn.execute(f"PRAGMA table_info({table})")}  # names are constants
            if not cols <= have:
                what = "is missing" if not have else f"lacks column(s) {sorted(cols - have)}"
                raise StoreError(
                    f"results database '{self.path}': table {table} {what}; it is damaged or not "
                    "ringdown's; restore a backup or use another --db"
                )

    # -- housekeeping -----------------------------------------------------------------------
    def _migrate(self) -> None:
        conn = self._conn
        with conn:
            conn.execute("BEGIN IMMEDIATE")
            version = conn.execute("PRAGMA user_version").fetchone()[0]
            self._check_version(version)
            for v in range(version, SCHEMA_VERSION):
                for stmt in MIGRATIONS[v].split(";"):
                    if stmt.strip():
                        conn.execute(stmt)
                conn.execute(f"PRAGMA user_version = {v + 1}")

    def close(self) -> None:
        self._conn.close()

    def _read(self, fn, what: str = "read"):
        """Run a read; any sqlite3 or JSON error becomes one StoreError naming the file."""
        try:
            return fn()
        except sqlite3.Error as exc:
            raise StoreError(f"cannot {what} results database '{self.path}': {_why(exc)}") from None

    def __enter__(self) -> ResultStore:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    @property
    def schema_version(self) -> int:
        return int(self._conn.execute("PRAGMA user_version").fetchone()[0])

    # -- writing ----------------------------------------------------------------------------
    def _existing(self, sha256: str | None, limits_sha256: str | None) -> sqlite3.Row | None:
        if sha256 is None:
            return None
        return self._conn.execute(
            "SELECT id, verdict FROM results WHERE kind = 'check' AND sha256 = ? AND limits_sha256 IS ? "
            "ORDER BY id DESC LIMIT 1",
            (sha256, limits_sha256),
        ).fetchone()

    def find_check(self, sha256: str | None, limits_sha256: str | None) -> StoredResult | None:
        """The latest stored check of a file (by its SHA-256) against limits (by theirs), if any."""
        row = self._read(lambda: self._existing(sha256, limits_sha256))
        return None if row is None else self.get(int(row["id"]))

    def _existing_analysis(self, analysis: Analysis) -> sqlite3.Row | None:
        if analysis.sha256 is not None:
            return self._conn.execute(
                "SELECT id FROM results WHERE kind = 'analysis' AND sha256 = ? AND settings_json = ? LIMIT 1",
                (analysis.sha256, _json(dict(analysis.settings))),
            ).fetchone()
        return self._conn.execute(
            "SELECT id FROM results WHERE kind = 'analysis' AND sha256 IS NULL AND path IS ? AND settings_json = ? "
            "AND error IS ? LIMIT 1",
            (analysis.path, _json(dict(analysis.settings)), None if analysis.error is None else analysis.error.message),
        ).fetchone()

    def _insert(
        self,
        *,
        kind,
        part_id,
        path,
        sha256,
        station,
        operator,
        settings,
        limits_sha256,
        verdict,
        reasons,
        notes,
        mahalanobis,
        uniform_shift,
        error,
        result_json,
        modes,
        matched,
    ) -> int:
        cur = self._conn.execute(
            "INSERT INTO results (kind, part_id, path, sha256, tested_utc, station, operator, tool_version, "
            "settings_json, limits_sha256, verdict, reasons_json, notes_json, mahalanobis, uniform_shift, error, "
            "result_json) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (
                kind,
                part_id,
                path,
                sha256,
                utc_stamp("microseconds"),
                station,
                operator,
                __version__,
                _json(settings),
                limits_sha256,
                verdict,
                _json(reasons),
                _json(notes),
                mahalanobis,
                uniform_shift,
                error,
                result_json,
            ),
        )
        rid = cur.lastrowid
        assert rid is not None  # set by an INSERT
        ref_of = {mode_idx: ref for ref, mode_idx in matched}
        for m in modes:
            d = m.to_dict()
            self._conn.execute(
                f"INSERT INTO modes (result_id, mode_index, ref_index, {', '.join(_MODE_COLUMNS)}, mode_json) "
                f"VALUES (?, ?, ?, {', '.join('?' for _ in _MODE_COLUMNS)}, ?)",
                (rid, int(m.index), ref_of.get(int(m.index)), *[d.get(c) for c in _MODE_COLUMNS], _json(d)),
            )
        return rid

    def record_limits(self, limits: Limits) -> None:
        """Keep the limits a check used (by SHA-256), so run charts can draw them later."""
        if limits is None or limits.sha256 is None:
            return
        try:
            with self._conn:
                self._conn.execute("BEGIN IMMEDIATE")
                self._conn.execute(
                    "INSERT OR IGNORE INTO limits_files (sha256, source, first_used_utc, limits_json) VALUES (?, ?, ?, ?)",
                    (limits.sha256, limits.source, utc_stamp("microseconds"), _json(limits.to_dict())),
                )
        except sqlite3.Error as exc:
            raise StoreError(f"cannot write to results database '{self.path}': {_why(exc)}") from None

    def record_check(
        self,
        result: CheckResult,
        *,
        part_id: str,
        station: str | None = None,
        operator: str | None = None,
        force: bool = False,
    ) -> int | None:
        """Store one part's check result in its own transaction.

        Parameters
        ----------
        result : CheckResult
        part_id : str
        station, operator : str, optional
        force : bool, default False
            Store even when the same file (SHA-256) was already checked against the same limits.

        Returns
        -------
        int or None
            The new row id, or ``None`` when skipped because it was already stored.

        Raises
        ------
        StoreError
            When the database cannot be written.
        """
        a = result.analysis
        settings = {} if a is None else dict(a.settings)
        try:
            with self._conn:
                self._conn.execute("BEGIN IMMEDIATE")
                if not force and self._existing(result.sha256, result.limits_sha256) is not None:
                    return None
                return self._insert(
                    kind="check",
                    part_id=str(part_id),
                    path=result.path,
                    sha256=result.sha256,
                    station=station,
                    operator=operator,
                    settings=settings,
                    limits_sha256=result.limits_sha256,
                    verdict=result.verdict,
                    reasons=[r.to_dict() for r in result.reasons],
                    notes=[n.to_dict() for n in result.notes],
                    mahalanobis=result.mahalanobis,
                    uniform_shift=result.uniform_shift,
                    error=None if a is None or a.error is None else a.error.message,
                    result_json=_json(result.to_dict()),
                    modes=() if a is None else a.modes,
                    matched=result.matched,
                )
        except sqlite3.Error as exc:
            raise StoreError(f"cannot write to results database '{self.path}': {_why(exc)}") from None

    def record_analysis(
        self,
        analysis: Analysis,
        *,
        part_id: str | None = None,
        station: str | None = None,
        operator: str | None = None,
        skip_stored: bool = False,
    ) -> int | None:
        """Store one analysis (no verdict) in its own transaction; return the row id.

        With ``skip_stored`` an analysis of the same file (SHA-256; for a failed one, the path and
        error) with the same settings already stored is not stored again, and ``None`` is returned:
        a rerun of an interrupted batch adds no duplicate rows.
        """
        pid = part_id if part_id is not None else part_id_from_path(analysis.path or "array")
        d = analysis.to_dict()
        d.pop("hits", None)
        try:
            with self._conn:
                self._conn.execute("BEGIN IMMEDIATE")
                if skip_stored and self._existing_analysis(analysis) is not None:
                    return None
                return self._insert(
                    kind="analysis",
                    part_id=str(pid),
                    path=analysis.path,
                    sha256=analysis.sha256,
                    station=station,
                    operator=operator,
                    settings=dict(analysis.settings),
                    limits_sha256=None,
                    verdict=None,
                    reasons=[],
                    notes=[w.to_dict() for w in analysis.warnings],
                    mahalanobis=None,
                    uniform_shift=None,
                    error=None if analysis.error is None else analysis.error.message,
                    result_json=_json(d),
                    modes=analysis.modes,
                    matched=(),
                )
        except sqlite3.Error as exc:
            raise StoreError(f"cannot write to results database '{self.path}': {_why(exc)}") from None

    # -- reading ----------------------------------------------------------------------------
    def _row_to_result(self, row: sqlite3.Row) -> StoredResult:
        modes = []
        for m in self._conn.execute("SELECT * FROM modes WHERE result_id = ? ORDER BY mode_index", (row["id"],)):
            d = {c: m[c] for c in _MODE_COLUMNS}
            d.update(mode_index=m["mode_index"], ref_index=m["ref_index"])
            modes.append(d)

        def parsed(col: str, kind: type) -> Any:
            v: Any
            try:
                v = json.loads(row[col])
            except (TypeError, ValueError):
                v = None
            if not isinstance(v, kind) or (isinstance(v, list) and not all(isinstance(x, dict) for x in v)):
                raise StoreError(
                    f"results database '{self.path}': row {row['id']} holds invalid {col}; the file "
                    "is damaged or was edited; restore a backup or use another --db"
                )
            return v

        return StoredResult(
            id=int(row["id"]),
            kind=row["kind"],
            part_id=row["part_id"],
            path=row["path"],
            sha256=row["sha256"],
            tested_utc=row["tested_utc"],
            station=row["station"],
            operator=row["operator"],
            tool_version=row["tool_version"],
            limits_sha256=row["limits_sha256"],
            verdict=row["verdict"],
            reasons=tuple(parsed("reasons_json", list)),
            notes=tuple(parsed("notes_json", list)),
            mahalanobis=row["mahalanobis"],
            uniform_shift=row["uniform_shift"],
            error=row["error"],
            settings=parsed("settings_json", dict),
            modes=tuple(modes),
            result=parsed("result_json", dict),
        )

    def mode_records(self, result_id: int) -> list[dict]:
        """Every stored field of a result's modes (``Mode.to_dict()`` as stored), with ``ref_index``."""
        rows = self._conn.execute(
            "SELECT mode_json, ref_index FROM modes WHERE result_id = ? ORDER BY mode_index", (int(result_id),)
        )
        return [{**json.loads(r["mode_json"]), "ref_index": r["ref_index"]} for r in rows]

    def get(self, result_id: int) -> StoredResult | None:
        def run():
            row = self._conn.execute("SELECT * FROM results WHERE id = ?", (int(result_id),)).fetchone()
            return None if row is None else self._row_to_result(row)

        return self._read(run)

    def query(
        self,
        *,
        part: str | None = None,
        since: str | None = None,
        until: str | None = None,
        verdict: str | None = None,
        kind: str | None = None,
    ) -> list[StoredResult]:
        """Stored results in test order, filtered.

        Parameters
        ----------
        part : str, optional
            Exact part id.
        since, until : str, optional
            ISO dates or date-times (UTC); a bare date includes the whole day.
        verdict : {"pass", "fail", "error"}, optional
        kind : {"check", "analysis"}, optional

        Raises
        ------
        ParameterError
            For a bad date or verdict.
        """
        where, args = [], []
        if part is not None:
            where.append("part_id = ?")
            args.append(part)
        if since is not None:
            where.append("tested_utc >= ?")
            args.append(parse_date(since))
        if until is not None:
            where.append("tested_utc <= ?")
            args.append(parse_date(until, end=True))
        if verdict is not None:
            if verdict not in ("pass", "fail", "error"):
                raise ParameterError(f"verdict must be pass, fail or error, got {verdict!r}")
            where.append("verdict = ?")
            args.append(verdict)
        if kind is not None:
            if kind not in ("check", "analysis"):
                raise ParameterError(f"kind must be check or analysis, got {kind!r}")
            where.append("kind = ?")
            args.append(kind)
        sql = "SELECT * FROM results" + (" WHERE " + " AND ".join(where) if where else "") + " ORDER BY tested_utc, id"
        return self._read(lambda: [self._row_to_result(r) for r in self._conn.execute(sql, args).fetchall()])

    def limits_documents(self) -> dict[str, dict]:
        """Every limits file used, as ``{sha256: Limits.to_dict()}``."""

        def run():
            out = {}
            for r in self._conn.execute("SELECT sha256, limits_json FROM limits_files"):
                try:
                    doc = json.loads(r["limits_json"])
                except (TypeError, ValueError):
                    doc = None
                if not isinstance(doc, dict):
                    raise StoreError(
                        f"results database '{self.path}': the stored limits {r['sha256']} are invalid "
                        "JSON; restore a backup or use another --db"
                    )
                out[r["sha256"]] = doc
            return out

        return self._read(run)

    def count(self) -> int:
        return int(self._read(lambda: self._conn.execute("SELECT count(*) FROM results").fetchone()[0]))


def store_analysis(
    db: str | os.PathLike | ResultStore,
    analysis: Analysis,
    *,
    part_id: str | None = None,
    station: str | None = None,
    operator: str | None = None,
) -> int:
    """Store one analysis in a results database (what ``ringdown analyze --store`` does).

    Parameters
    ----------
    db : str, path-like or ResultStore
        Database file (opened and closed here) or an open store.
    analysis : Analysis
    part_id : str, optional
        Defaults to the recording's file stem.
    station, operator : str, optional

    Returns
    -------
    int
        The new row id.

    Raises
    ------
    StoreError
    """
    if isinstance(db, ResultStore):
        rid = db.record_analysis(analysis, part_id=part_id, station=station, operator=operator)
    else:
        with ResultStore(db) as store:
            rid = store.record_analysis(analysis, part_id=part_id, station=station, operator=operator)
    assert rid is not None  # None only when asked to skip what is stored (skip_stored)
    return rid
