"""The SQLite results history: round trips, concurrent writers, interrupted batches, odd names."""

import hashlib
import math
import multiprocessing as mp
import sqlite3

import pytest
from numpy.testing import assert_allclose

from ringdown.analysis.quantities import derive
from ringdown.analysis.results import Analysis, Mode
from ringdown.base.errors import ParameterError, StoreError
from ringdown.inspection.check import check
from ringdown.inspection.limits_file import parse_limits
from ringdown.inspection.store import (
    SCHEMA_VERSION,
    ResultStore,
    file_sha256,
    parse_date,
    part_id_from_path,
    store_analysis,
)

LIMITS = parse_limits(
    "[[modes]]\nf_hz = [990.0, 1010.0]\nzeta = [0.0005, 0.002]\n"
    "[[modes]]\nf_hz = [2790.0, 2810.0]\nratio = [2.79, 2.81]\n",
    source="lim.toml",
)


def mode(index, f_d, zeta):
    f_n = f_d / math.sqrt(1 - zeta**2)
    return Mode(
        index=index,
        derived=derive(f_d, 2 * math.pi * f_n * zeta, f_d_hz_u=0.01, beta_per_s_u=0.05),
        amplitude=0.3,
        snr_db=45.0,
        method="envelope",
        fit_start_s=0.0,
        fit_end_s=0.5,
        cycles_fitted=300.0,
    )


def analysis(path, sha, f1=1000.0, f2=2800.0, zeta=1e-3):
    return Analysis(
        path=path,
        sha256=sha,
        channel="1",
        sample_rate_hz=24000.0,
        n_samples=24000,
        modes=(mode(1, f1, zeta), mode(2, f2, zeta)),
        settings={"method": "auto"},
    )


def sha(text):
    return hashlib.sha256(text.encode()).hexdigest()


def test_round_trip_of_a_check(tmp_path):
    db = tmp_path / "r.sqlite"
    res = check(analysis("parts/A-17.wav", sha("a"), f1=985.0), LIMITS)
    assert res.verdict == "fail"
    with ResultStore(db) as st:
        assert st.schema_version == SCHEMA_VERSION
        st.record_limits(LIMITS)
        rid = st.record_check(res, part_id="A-17", station="EOL-2", operator="J. Doe")
        got = st.get(rid)
        assert st.limits_documents()[LIMITS.sha256]["modes"][0]["f_hz"] == [990.0, 1010.0]
    assert got.part_id == "A-17" and got.station == "EOL-2" and got.operator == "J. Doe"
    assert got.verdict == "fail" and got.sha256 == sha("a") and got.limits_sha256 == LIMITS.sha256
    assert got.reasons[0]["message"] == res.reasons[0].message
    assert got.tested_utc.endswith("Z") and got.tool_version
    assert got.settings == {"method": "auto"}
    m1 = got.mode_for(1)
    assert_allclose([m1["f_d_hz"], m1["zeta"], m1["f_d_hz_u"]], [985.0, 1e-3, 0.01], rtol=1e-12)
    assert m1["zeta_u"] is not None and m1["ref_index"] == 1


def test_store_analysis_without_verdict(tmp_path):
    db = tmp_path / "r.sqlite"
    rid = store_analysis(db, analysis("x/bar_3.wav", sha("b")), station="lab")
    with ResultStore(db) as st:
        got = st.get(rid)
        assert st.query(kind="analysis")[0].id == rid
        assert st.query(kind="check") == []
    assert got.kind == "analysis" and got.verdict is None and got.part_id == "bar_3"
    assert got.mode_for(2)["f_d_hz"] == 2800.0  # analysis records are indexed by mode number


def test_skip_already_stored_unless_forced(tmp_path):
    db = tmp_path / "r.sqlite"
    res = check(analysis("p.wav", sha("p")), LIMITS)
    with ResultStore(db) as st:
        assert st.record_check(res, part_id="p") is not None
        assert st.record_check(res, part_id="p") is None
        assert st.find_check(sha("p"), LIMITS.sha256).verdict == "pass"
        assert st.find_check(sha("p"), "other-limits") is None
        assert st.record_check(res, part_id="p", force=True) is not None
        assert st.count() == 2


def _writer(db, start, n):
    with ResultStore(db) as st:
        for i in range(start, start + n):
            st.record_check(check(analysis(f"part_{i}.wav", sha(str(i))), LIMITS), part_id=f"P{i}")


def test_two_processes_write_at_once(tmp_path):
    db = str(tmp_path / "r.sqlite")
    ResultStore(db).close()  # schema first, so both writers only insert
    # fork is quick; the parent holds no open connection at fork time (sqlite3 connections must not
    # cross a fork). Two separate processes, each with its own connection, as two stations would be.
    ctx = mp.get_context("fork" if "fork" in mp.get_all_start_methods() else "spawn")
    procs = [ctx.Process(target=_writer, args=(db, k * 40, 40)) for k in range(2)]
    for p in procs:
        p.start()
    for p in procs:
        p.join(60)
        assert p.exitcode == 0
    with ResultStore(db) as st:
        rows = st.query()
        assert sorted(r.part_id for r in rows) == sorted(f"P{i}" for i in range(80))
        assert all(len(r.modes) == 2 for r in rows)
    assert sqlite3.connect(db).execute("PRAGMA journal_mode").fetchone()[0] == "wal"


def test_interrupted_batch_rerun_stores_each_part_once(tmp_path):
    db = tmp_path / "r.sqlite"
    parts = [(f"batch/part_{i}.wav", sha(f"batch{i}")) for i in range(10)]

    class Killed(Exception):
        pass

    def run(stop_after=None):
        with ResultStore(db) as st:
            for k, (path, h) in enumerate(parts):
                if stop_after is not None and k == stop_after:
                    raise Killed
                if st.find_check(h, LIMITS.sha256) is None:
                    st.record_check(check(analysis(path, h), LIMITS), part_id=path)

    with pytest.raises(Killed):
        run(stop_after=6)
    with ResultStore(db) as st:
        assert st.count() == 6
    run()
    with ResultStore(db) as st:
        ids = [r.part_id for r in st.query()]
    assert sorted(ids) == sorted(p for p, _ in parts)


def test_a_failed_transaction_leaves_nothing(tmp_path, monkeypatch):
    # One transaction per part: a failure half-way through writing a part stores none of it.
    db = tmp_path / "r.sqlite"
    res = check(analysis("p.wav", sha("q")), LIMITS)
    with ResultStore(db) as st:
        bad = res.analysis.modes[1].with_updates(index="not-a-number")  # fails inside the mode insert
        from dataclasses import replace

        broken = replace(res, analysis=replace(res.analysis, modes=(res.analysis.modes[0], bad)))
        with pytest.raises((StoreError, ValueError)):
            st.record_check(broken, part_id="p")
        assert st.count() == 0
        assert sqlite3.connect(db).execute("SELECT count(*) FROM modes").fetchone()[0] == 0


def test_sql_in_a_file_name_is_text(tmp_path):
    db = tmp_path / "r.sqlite"
    name = 'x\'); DROP TABLE results; --"quoted".wav'
    with ResultStore(db) as st:
        st.record_check(check(analysis(name, sha("evil")), LIMITS), part_id=part_id_from_path(name))
        st.record_check(check(analysis("ok.wav", sha("ok")), LIMITS), part_id="ok")
        rows = st.query()
        assert [r.path for r in rows] == [name, "ok.wav"]
        assert st.query(part='x\'); DROP TABLE results; --"quoted"')[0].path == name


def test_query_filters(tmp_path):
    db = tmp_path / "r.sqlite"
    with ResultStore(db) as st:
        st.record_check(check(analysis("a.wav", sha("1")), LIMITS), part_id="A")
        st.record_check(check(analysis("b.wav", sha("2"), f1=980.0), LIMITS), part_id="B")
        st.record_check(check(Analysis.failed("c.wav", ParameterError("bad")), LIMITS), part_id="C")
        assert [r.part_id for r in st.query(verdict="fail")] == ["B"]
        assert [r.part_id for r in st.query(verdict="error")] == ["C"]
        assert [r.part_id for r in st.query(part="A")] == ["A"]
        assert len(st.query(since="2000-01-01", until="2999-12-31")) == 3
        assert st.query(until="2000-01-01") == []
        with pytest.raises(ParameterError, match="verdict"):
            st.query(verdict="maybe")
        with pytest.raises(ParameterError, match="ISO date"):
            st.query(since="yesterday")


def test_parse_date():
    assert parse_date("2024-05-01") == "2024-05-01T00:00:00.000000Z"
    assert parse_date("2024-05-01", end=True) == "2024-05-01T23:59:59.999999Z"
    assert parse_date("2024-05-01T14:00:00+02:00") == "2024-05-01T12:00:00.000000Z"


def test_part_id_from_path():
    assert part_id_from_path("/line/SN-00417_tap.wav") == "SN-00417_tap"
    assert part_id_from_path("/line/SN-00417_tap.wav", r"SN-(\d+)") == "00417"
    assert part_id_from_path("/line/SN-00417_tap.wav", r"SN-\d+") == "SN-00417"
    assert part_id_from_path("/line/other.wav", r"SN-(\d+)") == "other"
    with pytest.raises(ParameterError, match="regular expression"):
        part_id_from_path("a.wav", "(")


def test_file_sha256(tmp_path):
    p = tmp_path / "f.bin"
    p.write_bytes(b"abc")
    # FIPS 180-2 appendix B.1 test vector: SHA-256("abc").
    assert file_sha256(p) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    assert file_sha256(tmp_path / "missing") is None


def test_refuses_foreign_and_newer_databases(tmp_path):
    foreign = tmp_path / "foreign.sqlite"
    c = sqlite3.connect(foreign)
    c.execute("CREATE TABLE t (x)")
    c.commit()
    c.close()
    with pytest.raises(StoreError, match="not a ringdown results database"):
        ResultStore(foreign)
    newer = tmp_path / "newer.sqlite"
    ResultStore(newer).close()
    c = sqlite3.connect(newer)
    c.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    c.commit()
    c.close()
    with pytest.raises(StoreError, match="newer"):
        ResultStore(newer)
    garbage = tmp_path / "garbage.sqlite"
    garbage.write_bytes(b"this is not sqlite at all" * 100)
    with pytest.raises(StoreError, match="garbage.sqlite"):
        ResultStore(garbage)
