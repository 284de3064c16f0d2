"""Results as a Parquet dataset: one row per mode, a fixed schema, appended as results arrive.

A data team reads millions of results from a Parquet dataset (pandas, DuckDB, Spark, Polars)
rather than from the SQLite history. :class:`ParquetSink` writes analyses, checks or stored
history records into a folder laid out as a Hive-partitioned dataset (Apache Parquet format,
https://parquet.apache.org; Hive partitioning as read by ``pyarrow.dataset``)::

    OUT/_ringdown_dataset.json            what the folder holds (schema version, partition key)
    OUT/date=2026-12-01/part-<run>-00000.parquet
    OUT/date=2026-12-01/part-<run>-00001.parquet
    OUT/date=2026-12-02/...

Rules:

* One row per mode of every file. A file that failed, or that has no mode, is one row with the
  error (``error_code``, ``error``) and null mode fields: no file vanishes.
* The columns and their types are :data:`SCHEMA`, written explicitly (never inferred): a column
  never appears or vanishes with the inputs, a missing value is null. The partition key
  (``date``, the UTC day of ``tested_utc``, or ``station``) is in the folder names, not in the files.
* Rows are buffered and written as a new file every ``flush_rows`` rows or ``flush_s`` seconds
  and when the sink closes (also on Ctrl-C). Each file is written under a name starting with "."
  (which dataset readers skip) and then renamed, so a killed run leaves only whole files: it keeps
  everything up to its last write. Running again appends new files; nothing is rewritten.

pyarrow is part of the optional ``cluster`` extra and imported only when a sink is opened.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import os
import uuid
from collections.abc import Iterable
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .._version import __version__
from ..analysis.results import mode_keys
from ..base.clock import seconds, utc_now
from ..base.errors import ParameterError, StoreError

if TYPE_CHECKING:
    from ..analysis.results import Analysis
    from .check import CheckResult
    from .store import StoredResult

__all__ = [
    "SCHEMA_VERSION",
    "COLUMNS",
    "schema",
    "ParquetSink",
    "open_sink",
    "export_history",
    "read_dataset",
    "settings_sha256",
]

#: Version of the column layout; stored in the files' metadata and in ``_ringdown_dataset.json``.
SCHEMA_VERSION = 1

#: Name of the file that says what a dataset folder holds.
MANIFEST = "_ringdown_dataset.json"

_F = "float64"
#: (column, Arrow type, meaning). The documented, stable schema; README "Archives and clusters".
COLUMNS: tuple[tuple[str, str, str], ...] = (
    ("kind", "string", "'analysis' or 'check'"),
    ("file", "string", "path of the recording as given"),
    ("sha256", "string", "SHA-256 of the recording's bytes (null when it could not be read)"),
    ("part_id", "string", "part id (file stem, or --part-id pattern)"),
    ("station", "string", "test station (--station), or null"),
    ("operator", "string", "operator (--operator), or null"),
    ("tested_utc", "timestamp[us, tz=UTC]", "when the result was made (history: when stored)"),
    ("date", "date32", "UTC day of tested_utc (the default partition key)"),
    ("verdict", "string", "checks: 'pass', 'fail' or 'error'; analyses: null"),
    ("reasons", "string", "checks: the reasons of a fail, '; '-separated, or null"),
    ("limits_sha256", "string", "checks: SHA-256 of the limits file"),
    ("channel", "string", "channel analysed (history: null, not stored)"),
    ("sample_rate_hz", _F, "sample rate, Hz (history: null)"),
    ("n_samples", "int64", "samples in the channel (history: null)"),
    ("mode_index", "int32", "1-based mode number in the file (ascending frequency); null for a row without mode"),
    ("ref_index", "int32", "checks: the reference mode it was matched to, or null"),
    ("f_d_hz", _F, "damped frequency, Hz"), ("f_d_hz_u", _F, "its standard uncertainty, Hz"),
    ("beta_per_s", _F, "decay rate, 1/s"), ("beta_per_s_u", _F, "standard uncertainty"),
    ("f_n_hz", _F, "natural frequency, Hz"), ("f_n_hz_u", _F, "standard uncertainty"),
    ("zeta", _F, "damping ratio"), ("zeta_u", _F, "standard uncertainty"),
    ("q", _F, "quality factor Q"), ("q_u", _F, "standard uncertainty"),
    ("loss_factor", _F, "loss factor"), ("loss_factor_u", _F, "standard uncertainty"),
    ("log_decrement", _F, "logarithmic decrement"), ("log_decrement_u", _F, "standard uncertainty"),
    ("decay_db_per_s", _F, "decay, dB/s"), ("decay_db_per_s_u", _F, "standard uncertainty"),
    ("t60_s", _F, "time to decay 60 dB, s"), ("t60_s_u", _F, "standard uncertainty"),
    ("f_r_hz", _F, "displacement resonance frequency, Hz"), ("f_r_hz_u", _F, "standard uncertainty"),
    ("amplitude", _F, "amplitude at the start of the fit, recording units"),
    ("snr_db", _F, "mode over its band noise at the start of the fit, dB"),
    ("method", "string", "estimator of the reported figures"),
    ("fit_path", "string", "'band' (band-filtered envelope) or 'raw' (fast decay fitted on the record itself)"),
    ("fit_start_s", _F, "fit window start, s"), ("fit_end_s", _F, "fit window end, s"),
    ("cycles_fitted", _F, "cycles inside the fit window"),
    ("n_hits", "int32", "hits combined into the mode"),
    ("band_low_hz", _F, "band the mode was extracted from: low edge, Hz"),
    ("band_high_hz", _F, "high edge, Hz"),
    ("warnings", "string", "the mode's warning codes, ';'-separated ('' for none)"),
    ("cross_checks_json", "string", "the other estimators' results, JSON as in analyze --json"),
    ("damping_vs_amplitude_json", "string", "rows of damping against amplitude (JSON), or null"),
    ("error_code", "string", "why the file has no result (error code; history: null), or null"),
    ("error", "string", "the one-line error, or null"),
    ("tool_version", "string", "ringdown version that made the result"),
    ("settings_sha256", "string", "SHA-256 of the analysis settings (canonical JSON)"),
    ("settings_json", "string", "the analysis settings, canonical JSON"),
)  # fmt: skip

#: Mode fields (``Mode.to_dict``) and the column(s) each one fills.
_MODE_COLUMN = {
    "index": ("mode_index",),
    "band_hz": ("band_low_hz", "band_high_hz"),
    "cross_checks": ("cross_checks_json",),
    "damping_vs_amplitude": ("damping_vs_amplitude_json",),
}

PARTITION_KEYS = ("date", "station")


def schema(*, without: Iterable[str] = ()) -> Any:
    """The Arrow schema of :data:`COLUMNS` (a ``pyarrow.Schema``), less the columns ``without``."""
    pa = _pyarrow()
    types = {
        "string": pa.string(),
        "float64": pa.float64(),
        "int64": pa.int64(),
        "int32": pa.int32(),
        "date32": pa.date32(),
        "timestamp[us, tz=UTC]": pa.timestamp("us", tz="UTC"),
    }
    skip = set(without)
    fields = [pa.field(name, types[t], nullable=True) for name, t, _ in COLUMNS if name not in skip]
    return pa.schema(fields, metadata={"ringdown.schema_version": str(SCHEMA_VERSION)})


def _pyarrow():
    try:
        import pyarrow
    except ImportError:
        raise ParameterError(
            "--parquet needs the optional 'cluster' extra (pyarrow); install it with: pip install 'ringdown[cluster]'"
        ) from None
    return pyarrow


def settings_sha256(settings: dict) -> tuple[str, str]:
    """``(sha256 hex, canonical JSON)`` of analysis settings (sorted keys, no spaces)."""
    text = json.dumps(settings, sort_keys=True, separators=(",", ":"), default=str, allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest(), text


def _mode_cells(d: dict) -> dict:
    """The columns of one mode from its ``Mode.to_dict()`` record (stored records may lack keys)."""
    out: dict[str, Any] = {}
    for k in mode_keys():
        v = d.get(k)
        if k == "index":
            out["mode_index"] = v
        elif k == "band_hz":
            out["band_low_hz"], out["band_high_hz"] = (None, None) if not v else (v[0], v[1])
        elif k == "warnings":
            out["warnings"] = None if v is None else ";".join(w["code"] if isinstance(w, dict) else str(w) for w in v)
        elif k in ("cross_checks", "damping_vs_amplitude"):
            out[_MODE_COLUMN[k][0]] = None if v is None else json.dumps(v, sort_keys=True, allow_nan=False)
        else:
            out[k] = v
    return out


class ParquetSink:
    """Append results to a Parquet dataset folder as they arrive (see the module docstring).

    Parameters
    ----------
    out : str or path
        Dataset folder (made if missing; an existing ringdown dataset is appended to).
    partition_by : {"date", "station"} or None
        Partition key: the UTC day of the result (default), the station, or none (files at the top).
    flush_rows : int >= 1
        Write a file when this many rows are buffered (default 5000: our choice; 5000 rows of
        the example recordings made a 62 kB file, so a long run makes few files and holds little).
    flush_s : float > 0
        ... or when this many seconds passed since the last write (default 30 s, our choice),
        checked as each result arrives. A killed run loses at most what arrived since the last write.

    append : bool, default True
        Add files to an existing dataset of the same layout; ``False`` requires a new or empty folder.

    Use as a context manager; :meth:`close` writes the rest.
    """

    def __init__(
        self,
        out,
        *,
        partition_by: str | None = "date",
        flush_rows: int = 5000,
        flush_s: float = 30.0,
        append: bool = True,
    ):
        self._pa = _pyarrow()
        import pyarrow.parquet  # noqa: F401 (imported once here, used in flush)

        if partition_by is not None and partition_by not in PARTITION_KEYS:
            raise ParameterError(
                f"partition_by must be one of {', '.join(PARTITION_KEYS)} or None; got {partition_by!r}"
            )
        if int(flush_rows) < 1 or not (float(flush_s) > 0):
            raise ParameterError(f"flush_rows must be >= 1 and flush_s > 0; got {flush_rows!r}, {flush_s!r}")
        self.out = Path(out)
        self.partition_by = partition_by
        self.flush_rows = int(flush_rows)
        self.flush_s = float(flush_s)
        self._schema = schema(without=() if partition_by is None else (partition_by,))
        self._rows: list[dict] = []
        self._last = seconds()
        self._run = f"{utc_now():%Y%m%dT%H%M%SZ}-{uuid.uuid4().hex[:8]}"
        self._seq = 0
        self.files_written: list[Path] = []
        self.rows_written = 0
        self._open_folder(append)

    # -- the folder ---------------------------------------------------------------------------
    def _open_folder(self, append: bool) -> None:
        if self.out.exists() and not self.out.is_dir():
            raise ParameterError(f"--parquet '{self.out}' is a file; give a folder for the dataset")
        manifest = self.out / MANIFEST
        want = {"format": "ringdown results", "schema_version": SCHEMA_VERSION, "partition_by": self.partition_by}
        try:
            self.out.mkdir(parents=True, exist_ok=True)
            if manifest.exists() and not append:
                raise ParameterError(
                    f"--parquet '{self.out}' already holds a dataset; this writes a whole snapshot: "
                    "choose a new folder or remove that one"
                )
            if manifest.exists():
                have = json.loads(manifest.read_text(encoding="utf-8"))
                if have.get("schema_version") != SCHEMA_VERSION or have.get("partition_by") != self.partition_by:
                    raise ParameterError(
                        f"--parquet '{self.out}' holds a dataset of schema {have.get('schema_version')} partitioned by "
                        f"{have.get('partition_by')}; this run writes schema {SCHEMA_VERSION} by {self.partition_by}: "
                        "choose another folder"
                    )
            elif any(self.out.iterdir()):
                raise ParameterError(
                    f"--parquet '{self.out}' is a folder that is not a ringdown dataset and not "
                    "empty; choose a new or empty folder"
                )
            else:
                manifest.write_text(json.dumps(want, indent=2) + "\n", encoding="utf-8")
        except (OSError, ValueError) as exc:
            if isinstance(exc, ParameterError):
                raise
            raise StoreError(
                f"cannot use '{self.out}' for the Parquet dataset: {getattr(exc, 'strerror', None) or exc}; "
                "choose a writable folder"
            ) from exc

    # -- adding results -----------------------------------------------------------------------
    def _add(self, base: dict, modes: list[dict], matched: dict[int, int] | None = None) -> None:
        now = base.pop("tested_utc", None) or utc_now()
        base.update(tested_utc=now, date=now.date(), tool_version=base.get("tool_version") or __version__)
        sha, text = settings_sha256(base.pop("settings", {}) or {})
        base.update(settings_sha256=sha, settings_json=text)
        if not modes:
            self._rows.append(dict(base))
        for d in modes:
            row = dict(base)
            row.update(_mode_cells(d))
            if matched is not None:
                row["ref_index"] = matched.get(row["mode_index"])
            self._rows.append(row)
        if len(self._rows) >= self.flush_rows or seconds() - self._last >= self.flush_s:
            self.flush()

    @staticmethod
    def _analysis_base(a) -> dict:
        return dict(
            file=a.path,
            sha256=a.sha256,
            channel=a.channel,
            sample_rate_hz=a.sample_rate_hz,
            n_samples=a.n_samples,
            settings=dict(a.settings),
            error_code=None if a.error is None else a.error.code,
            error=None if a.error is None else a.error.message,
        )

    def add_analysis(
        self, analysis: Analysis, *, part_id: str | None = None, station: str | None = None, operator: str | None = None
    ) -> None:
        """Add one :class:`~ringdown.analysis.results.Analysis` (``kind`` 'analysis', no verdict)."""
        from .store import part_id_from_path

        base = self._analysis_base(analysis)
        base.update(
            kind="analysis",
            station=station,
            operator=operator,
            part_id=part_id if part_id is not None else part_id_from_path(analysis.path or "array"),
        )
        self._add(base, [m.to_dict() for m in analysis.modes])

    def add_check(
        self,
        result: CheckResult,
        *,
        part_id: str | None = None,
        station: str | None = None,
        operator: str | None = None,
    ) -> None:
        """Add one :class:`~ringdown.inspection.check.CheckResult` (``kind`` 'check', with verdict and reasons)."""
        from .store import part_id_from_path

        a = result.analysis
        base = self._analysis_base(a) if a is not None else dict(file=result.path, settings={})
        base.update(
            kind="check",
            sha256=result.sha256 or base.get("sha256"),
            station=station,
            operator=operator,
            part_id=part_id if part_id is not None else part_id_from_path(result.path or "array"),
            verdict=result.verdict,
            limits_sha256=result.limits_sha256,
            reasons="; ".join(r.message for r in result.reasons) or None,
        )
        modes = [] if a is None else [m.to_dict() for m in a.modes]
        self._add(base, modes, matched={m: r for r, m in result.matched})

    def add_stored(self, record: StoredResult, modes: list[dict]) -> None:
        """Add one stored history record (:class:`~ringdown.inspection.store.StoredResult`) with its full mode records."""
        tested = _dt.datetime.fromisoformat(record.tested_utc.replace("Z", "+00:00"))
        base = dict(
            kind=record.kind,
            file=record.path,
            sha256=record.sha256,
            part_id=record.part_id,
            station=record.station,
            operator=record.operator,
            tested_utc=tested,
            verdict=record.verdict,
            limits_sha256=record.limits_sha256,
            settings=dict(record.settings),
            error_code=None,
            error=record.error,
            tool_version=record.tool_version,
        )  # the store keeps no code
        if record.kind == "check":
            base["reasons"] = "; ".join(r["message"] for r in record.reasons) or None
        self._add(
            base,
            [dict(m) for m in modes],
            matched={m["index"]: int(m["ref_index"]) for m in modes if m.get("ref_index") is not None},
        )

    # -- writing --------------------------------------------------------------------------------
    def _partition_dir(self, value) -> Path:
        if self.partition_by is None:
            return self.out
        if value is None:
            text = "__HIVE_DEFAULT_PARTITION__"  # pyarrow's (and Hive's) name for a null key
        else:
            from urllib.parse import quote

            text = quote(value.isoformat() if hasattr(value, "isoformat") else str(value), safe="")
        return self.out / f"{self.partition_by}={text}"

    def flush(self) -> None:
        """Write the buffered rows as one new file per partition (atomically: temporary name, then rename)."""
        import pyarrow.parquet as pq

        self._last = seconds()
        if not self._rows:
            return
        groups: dict[Any, list[dict]] = {}
        for r in self._rows:
            groups.setdefault(None if self.partition_by is None else r.get(self.partition_by), []).append(r)
        names = self._schema.names
        try:
            for key, rows in groups.items():
                folder = self._partition_dir(key)
                folder.mkdir(parents=True, exist_ok=True)
                table = self._pa.Table.from_pylist([{n: r.get(n) for n in names} for r in rows], schema=self._schema)
                final = folder / f"part-{self._run}-{self._seq:05d}.parquet"
                tmp = folder / f".{final.name}.tmp"
                pq.write_table(table, tmp)
                os.replace(tmp, final)
                self.files_written.append(final)
                self.rows_written += len(rows)
            self._seq += 1
        except OSError as exc:
            raise StoreError(
                f"cannot write the Parquet dataset in '{self.out}': {exc.strerror or exc}; check "
                "disk space and permissions"
            ) from exc
        self._rows = []

    def close(self) -> None:
        self.flush()

    def __enter__(self) -> ParquetSink:
        return self

    def __exit__(self, *exc) -> None:
        self.close()  # also on KeyboardInterrupt: what finished is kept


class _NoSink:
    """Stands in for a sink when no ``--parquet`` was given."""

    def add_analysis(self, *a, **k) -> None:
        pass

    add_check = add_stored = add_analysis

    def close(self) -> None:
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        pass


def open_sink(out: str | os.PathLike | None, **kwargs: Any) -> ParquetSink | _NoSink:
    """A :class:`ParquetSink` for ``out``, or a do-nothing stand-in when ``out`` is None."""
    return _NoSink() if out is None else ParquetSink(out, **kwargs)


def export_history(
    db: str | os.PathLike, records: Iterable[StoredResult], out: str | os.PathLike, **kwargs: Any
) -> ParquetSink:
    """Write stored history records (``ResultStore.query``) of database ``db`` to the dataset ``out``.

    Every stored mode field is written (from the stored mode records). ``out`` must be a new or
    empty folder (a snapshot; appending would repeat the records already there). Returns the closed sink
    (``rows_written``, ``files_written``).
    """
    from .store import ResultStore

    sink = ParquetSink(out, append=False, **kwargs)
    with ResultStore(db) as store, sink:
        for rec in records:
            sink.add_stored(rec, store.mode_records(rec.id))
    return sink


def read_dataset(out: str | os.PathLike) -> Any:
    """Read a dataset folder written by :class:`ParquetSink` as one ``pyarrow.Table`` of :data:`SCHEMA`.

    The partition key comes back as a column of its documented type (``date`` as date32).
    """
    pa = _pyarrow()
    import pyarrow.dataset as ds

    out = Path(out)
    try:
        manifest = json.loads((out / MANIFEST).read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise ParameterError(
            f"'{out}' is not a ringdown Parquet dataset (no readable {MANIFEST}); give the folder that --parquet wrote"
        ) from exc
    full = schema()
    key = manifest.get("partition_by")
    part = None if key is None else ds.partitioning(pa.schema([full.field(key)]), flavor="hive")
    return ds.dataset(str(out), format="parquet", partitioning=part, schema=full).to_table()
