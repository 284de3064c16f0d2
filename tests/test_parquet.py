"""``--parquet``: one row per mode in a partitioned Parquet dataset, its schema, its values, and what
an interrupted run keeps.

References: the JSON the same command prints (``to_dict()``, the project's documented output) for
the values; the README table "Archives and clusters" for the schema; pyarrow's own dataset reader
(Apache Arrow) and pandas for reading back. Recordings are the invented example files of
example_signals/ and parts made by example_signals/make_line_examples.py (numpy/scipy/soundfile).
"""

from __future__ import annotations

import hashlib
import json
import math
import re
import signal
import sqlite3
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from typer.testing import CliRunner

import ringdown
from ringdown.analysis.results import mode_keys
from ringdown.base.errors import ParameterError
from ringdown.cli import app
from ringdown.inspection import parquet

ROOT = Path(__file__).resolve().parents[1]
LINE = ROOT / "example_signals" / "line"
THREE = [str(LINE / n) for n in ("crack.wav", "good_01.wav", "good_warm.wav")]
runner = CliRunner()

from conftest import make_parts  # noqa: E402

#: Columns that hold one mode's fields (null on a row without mode).
MODE_COLUMNS = [
    c
    for c, _, _ in parquet.COLUMNS
    if c
    not in {
        "kind",
        "file",
        "sha256",
        "part_id",
        "station",
        "operator",
        "tested_utc",
        "date",
        "verdict",
        "reasons",
        "limits_sha256",
        "channel",
        "sample_rate_hz",
        "n_samples",
        "ref_index",
        "error_code",
        "error",
        "tool_version",
        "settings_sha256",
        "settings_json",
    }
]


def _rows(out) -> list[dict]:
    return parquet.read_dataset(out).to_pylist()


def _mode_columns_of(d: dict) -> dict:
    """The columns one mode record of the JSON output must give (written out here, not by the code)."""
    cols = {
        k: d[k]
        for k in mode_keys()
        if k not in ("index", "band_hz", "warnings", "cross_checks", "damping_vs_amplitude")
    }
    cols.update(
        mode_index=d["index"],
        band_low_hz=d["band_hz"][0],
        band_high_hz=d["band_hz"][1],
        warnings=";".join(w["code"] for w in d["warnings"]),
        cross_checks_json=d["cross_checks"],
        damping_vs_amplitude_json=d["damping_vs_amplitude"],
    )
    return cols


@pytest.fixture(scope="module")
def analysed(tmp_path_factory):
    """``analyze --json --parquet`` on three gear blanks and one broken file."""
    d = tmp_path_factory.mktemp("pq")
    broken = d / "broken.wav"
    broken.write_bytes(b"RIFF....not a wav file")
    out = d / "ds"
    r = runner.invoke(
        app,
        [
            "analyze",
            *THREE,
            str(broken),
            "--json",
            "--jobs",
            "1",
            "--parquet",
            str(out),
            "--station",
            "EOL-2",
            "--operator",
            "A. Tester",
        ],
    )
    assert r.exit_code == 2, r.output  # the broken file is an error
    return {"out": out, "doc": json.loads(r.stdout), "broken": str(broken), "stderr": r.stderr}


def test_schema_is_explicit_and_documented(analysed):
    table = parquet.read_dataset(analysed["out"])
    assert table.schema.equals(parquet.schema(), check_metadata=False)
    # the types, written out (the README table states them)
    expect = {
        "f_d_hz": pa.float64(),
        "zeta_u": pa.float64(),
        "mode_index": pa.int32(),
        "n_hits": pa.int32(),
        "n_samples": pa.int64(),
        "tested_utc": pa.timestamp("us", tz="UTC"),
        "date": pa.date32(),
        "verdict": pa.string(),
        "settings_sha256": pa.string(),
    }
    for name, typ in expect.items():
        assert table.schema.field(name).type == typ, name
    files = sorted(Path(analysed["out"]).glob("date=*/*.parquet"))
    assert len(files) == 1  # one flush at the end of this small run, one partition (today, UTC)
    phys = pq.read_schema(files[0])
    assert phys.metadata[b"ringdown.schema_version"] == b"1"
    assert phys.remove_metadata().equals(parquet.schema(without=("date",)).remove_metadata())  # the key is the folder
    # every mode field of the JSON output has its column(s)
    names = set(table.schema.names)
    for k in mode_keys():
        assert {
            "index": "mode_index",
            "band_hz": "band_low_hz",
            "cross_checks": "cross_checks_json",
            "damping_vs_amplitude": "damping_vs_amplitude_json",
        }.get(k, k) in names, k
    # README "Archives and clusters" lists exactly these columns, in this order, with these types
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    section = readme[readme.index("## Archives and clusters") :]
    documented = re.findall(r"^\| `([a-z0-9_]+)` \| ([A-Za-z0-9\[\], =]+) \|", section, flags=re.M)
    assert documented == [(c, t) for c, t, _ in parquet.COLUMNS]


def test_values_match_the_json_output(analysed):
    rows = _rows(analysed["out"])
    doc = analysed["doc"]
    assert {r["file"] for r in rows} == {rec["path"] for rec in doc["recordings"]}
    for rec in doc["recordings"]:
        mine = sorted((r for r in rows if r["file"] == rec["path"]), key=lambda r: r["mode_index"] or 0)
        settings = json.dumps(rec["settings"], sort_keys=True, separators=(",", ":"))
        for r in mine:
            assert r["kind"] == "analysis" and r["verdict"] is None and r["ref_index"] is None
            assert r["sha256"] == rec["sha256"] and r["channel"] == rec["channel"]
            assert r["sample_rate_hz"] == rec["sample_rate_hz"] and r["n_samples"] == rec["n_samples"]
            assert r["station"] == "EOL-2" and r["operator"] == "A. Tester"
            assert r["part_id"] == Path(rec["path"]).stem
            assert r["tool_version"] == ringdown.__version__ == doc["tool"]["version"]
            assert r["settings_json"] == settings
            assert r["settings_sha256"] == hashlib.sha256(settings.encode()).hexdigest()
            assert r["date"] == r["tested_utc"].date()
        if rec["error"] is not None:
            assert len(mine) == 1
            assert (mine[0]["error_code"], mine[0]["error"]) == (rec["error"]["code"], rec["error"]["message"])
            assert all(mine[0][c] is None for c in MODE_COLUMNS)
            continue
        assert len(mine) == len(rec["modes"]) == 3
        for r, m in zip(mine, rec["modes"]):
            want = _mode_columns_of(m)
            for col in MODE_COLUMNS:
                got = r[col]
                if col.endswith("_json"):
                    got = None if got is None else json.loads(got)
                assert got == want[col], col  # exactly: float64 and JSON's shortest repr round-trip
            assert r["error"] is None and r["error_code"] is None
    broken = [r for r in rows if r["file"] == analysed["broken"]]
    assert broken[0]["error_code"] == "input" and broken[0]["sha256"] is None


def test_pandas_reads_the_same_rows(analysed):
    df = pd.read_parquet(analysed["out"])
    table = parquet.read_dataset(analysed["out"])
    assert len(df) == table.num_rows == 3 * 3 + 1
    key = ["file", "mode_index"]
    a = df.sort_values(key, na_position="first").reset_index(drop=True)
    b = table.to_pandas().sort_values(key, na_position="first").reset_index(drop=True)
    for col in ("f_d_hz", "f_d_hz_u", "zeta", "zeta_u", "q", "t60_s"):
        np.testing.assert_array_equal(a[col].to_numpy(dtype=float), b[col].to_numpy(dtype=float))
    assert set(df["date"].astype(str)) == {str(d) for d in b["date"]}  # hive key back as text


def test_check_and_history_rows(tmp_path):
    db = tmp_path / "h.sqlite"
    lim = tmp_path / "limits.toml"
    r = runner.invoke(
        app, ["limits", "learn", *[str(LINE / f"good_0{i}.wav") for i in range(1, 9)], "-o", str(lim), "--jobs", "1"]
    )
    assert r.exit_code == 0, r.output
    r = runner.invoke(
        app,
        [
            "check",
            "--limits",
            str(lim),
            *THREE,
            "--json",
            "--jobs",
            "1",
            "--db",
            str(db),
            "--parquet",
            str(tmp_path / "ck"),
            "--station",
            "EOL-2",
        ],
    )
    assert r.exit_code == 1, r.output  # crack fails
    doc = json.loads(r.stdout)
    rows = _rows(tmp_path / "ck")
    for res in doc["results"]:
        mine = sorted((x for x in rows if x["file"] == res["path"]), key=lambda x: x["mode_index"])
        assert [x["verdict"] for x in mine] == [res["verdict"]] * len(res["modes"])
        assert [x["ref_index"] for x in mine] == [
            next((mm["reference_mode"] for mm in res["matched"] if mm["mode"] == m["index"]), None)
            for m in res["modes"]
        ]
        assert [x["f_d_hz"] for x in mine] == [m["f_d_hz"] for m in res["modes"]]
        assert all(x["limits_sha256"] == doc["limits"]["sha256"] for x in mine)
        want_reasons = "; ".join(x["message"] for x in res["reasons"]) or None
        assert all(x["reasons"] == want_reasons for x in mine)
    assert {x["verdict"] for x in rows} == {"pass", "fail"}

    # the history of the same checks: the same rows, with the stored times
    r = runner.invoke(app, ["history", "--db", str(db), "--parquet", str(tmp_path / "hist"), "--json"])
    assert r.exit_code == 0, r.output
    stored = {rec["path"]: rec for rec in json.loads(r.stdout)["records"]}
    hist = _rows(tmp_path / "hist")
    # the database keeps no error code, channel, sample rate or length (documented as null for history)
    skip = {"tested_utc", "date", "error_code", "channel", "sample_rate_hz", "n_samples"}
    key = lambda x: (x["file"], x["mode_index"])  # noqa: E731
    assert [{k: v for k, v in x.items() if k not in skip} for x in sorted(hist, key=key)] == [
        {k: v for k, v in x.items() if k not in skip} for x in sorted(rows, key=key)
    ]
    assert all(x["channel"] is None for x in hist)
    for x in hist:
        assert x["tested_utc"].isoformat().replace("+00:00", "Z") == stored[x["file"]]["tested_utc"]
    # a snapshot is never appended to an older one (it would repeat every record)
    r = runner.invoke(app, ["history", "--db", str(db), "--parquet", str(tmp_path / "hist")])
    assert r.exit_code == 2
    assert r.stderr.strip().splitlines()[-1] == (
        f"ringdown: error: --parquet '{tmp_path / 'hist'}' already holds a "
        "dataset; this writes a whole snapshot: choose a new folder or remove "
        "that one"
    )


def test_station_partitions_and_appending(tmp_path):
    analyses = ringdown.analyze_many(THREE[:2], jobs=1)
    out = tmp_path / "by_station"
    with parquet.ParquetSink(out, partition_by="station", flush_rows=2) as sink:
        sink.add_analysis(analyses[0], station="EOL/1")
        sink.add_analysis(analyses[1])
    assert sorted(p.name for p in out.iterdir()) == [
        "_ringdown_dataset.json",
        "station=EOL%2F1",
        "station=__HIVE_DEFAULT_PARTITION__",
    ]
    first = _rows(out)
    assert sorted((r["station"] or "") for r in first) == ["", "", "", "EOL/1", "EOL/1", "EOL/1"]
    assert len(sink.files_written) == 2 and sink.rows_written == 6
    with parquet.ParquetSink(out, partition_by="station") as sink:  # a second run appends
        sink.add_analysis(analyses[0], station="EOL/1")
    assert len(_rows(out)) == 9
    with pytest.raises(ParameterError, match="partitioned by station"):
        parquet.ParquetSink(out)  # by date: another layout
    (tmp_path / "other").mkdir()
    (tmp_path / "other" / "notes.txt").write_text("x")
    with pytest.raises(ParameterError, match="not a ringdown dataset and not empty"):
        parquet.ParquetSink(tmp_path / "other")
    with pytest.raises(ParameterError, match="is a file"):
        parquet.ParquetSink(tmp_path / "other" / "notes.txt")


@pytest.fixture(scope="module")
def parts(tmp_path_factory):
    """24 distinct short gear-blank recordings (make_line_examples.py, seeded) and limits for them."""
    d = tmp_path_factory.mktemp("parts")
    paths = make_parts(d, 24, seed=7)
    lim = d / "limits.toml"
    ringdown.write_limits(ringdown.learn_limits(ringdown.analyze_many(paths[:6], jobs=1)), str(lim))
    return paths, str(lim)


def _complete(rows, n_modes_of) -> None:
    by_file: dict[str, int] = {}
    for r in rows:
        by_file[r["file"]] = by_file.get(r["file"], 0) + 1
    for f, n in by_file.items():
        assert n == n_modes_of(f), f  # every finished file whole, none half-written


def test_killed_run_keeps_what_it_wrote(parts, tmp_path):
    paths, _ = parts
    out = tmp_path / "ds"
    script = (
        "import sys, ringdown\nfrom ringdown.inspection.parquet import ParquetSink\n"
        "with ParquetSink(sys.argv[1], flush_rows=1) as sink:\n"
        "    for p in sys.argv[2:]:\n"
        "        sink.add_analysis(ringdown.analyze_file(p))\n"
        "        print(p, flush=True)\n"
    )
    proc = subprocess.Popen([sys.executable, "-c", script, str(out), *paths], stdout=subprocess.PIPE, text=True)
    done = [proc.stdout.readline().strip() for _ in range(3)]
    proc.send_signal(signal.SIGKILL)  # no clean-up at all
    proc.wait(timeout=60)
    proc.stdout.close()
    assert proc.returncode == -signal.SIGKILL
    rows = _rows(out)
    files = {r["file"] for r in rows}
    assert set(done) <= files and len(files) < len(paths)
    _complete(rows, lambda f: 3)  # each part has 3 modes (make_line_examples.py)


def test_interrupted_check_keeps_every_finished_part(parts, tmp_path):
    paths, lim = parts
    # 120 parts: their JSON lines overfill the pipe the test stops reading, so the run cannot
    # finish before the Ctrl-C however loaded the machine is
    paths = list(paths) + make_parts(tmp_path, 96, seed=11, prefix="SN-x")
    db, out = tmp_path / "h.sqlite", tmp_path / "ds"
    proc = subprocess.Popen(
        [
            sys.executable,
            "-c",
            "from ringdown.cli import main; main()",
            "check",
            "--limits",
            lim,
            *paths,
            "--jobs",
            "1",
            "--db",
            str(db),
            "--parquet",
            str(out),
            "--jsonl",
        ],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    # each part's JSON line is printed after it is stored: three lines mean three stored parts
    # (reading the lines, not polling the database, keeps this independent of the machine's load)
    got = [proc.stdout.readline() for _ in range(3)]
    assert all(line.strip() for line in got), proc.stderr.read()
    proc.send_signal(signal.SIGINT)  # Ctrl-C
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err  # interrupted, not finished
    with sqlite3.connect(str(db)) as con:
        stored = {r[0] for r in con.execute("SELECT path FROM results WHERE kind = 'check'")}
    rows = _rows(out)
    files = {r["file"] for r in rows}
    assert len(stored) >= 3 and stored <= files < set(paths)  # every stored part is in the dataset too
    _complete(rows, lambda f: 3)
    assert not list(out.rglob(".*.tmp"))
    assert all(r["kind"] == "check" and r["verdict"] in ("pass", "fail") for r in rows)
    assert not any(math.isnan(r["f_d_hz"]) for r in rows)


def test_missing_extra_is_one_line(monkeypatch, tmp_path):
    monkeypatch.setitem(sys.modules, "pyarrow", None)  # as if pyarrow were not installed
    r = runner.invoke(app, ["analyze", THREE[0], "--parquet", str(tmp_path / "ds")])
    assert r.exit_code == 2
    assert r.stderr.strip().splitlines() == [
        "ringdown: error: --parquet needs the optional 'cluster' extra (pyarrow); "
        "install it with: pip install 'ringdown[cluster]'"
    ]
    assert not (tmp_path / "ds").exists()


def test_the_extras_load_only_when_used():
    # issue 19: dask and pyarrow are imported lazily, so `ringdown --help` and plain analyses stay fast
    code = (
        "import sys, ringdown, ringdown.cli, ringdown.base.cluster, ringdown.inspection.parquet; "
        "print(','.join(m for m in ('dask', 'distributed', 'pyarrow', 'pandas') if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.strip()
    assert out == ""
