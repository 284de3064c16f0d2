"""The bookkeeping of a check batch (ringdown.inspection.check_run): skip what is stored, store the rest.

The parts are the shipped line examples (invented demo data, example_signals/README.md: the eight
good parts pass, the cracked part fails). SHA-256 values are checked against hashlib (FIPS 180-4)
computed here, not by the code under test.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest

from ringdown.analysis.pipeline import analyze_many
from ringdown.base.errors import StoreError
from ringdown.inspection.check import iter_check_files
from ringdown.inspection.check_run import CheckRun, check_summary
from ringdown.inspection.learning import learn_limits
from ringdown.inspection.limits_file import read_limits, write_limits
from ringdown.inspection.store import ResultStore

LINE = Path(__file__).resolve().parents[1] / "example_signals" / "line"


@pytest.fixture(scope="module")
def limits(tmp_path_factory):
    good = sorted(str(p) for p in LINE.glob("good_0*.wav"))
    path = tmp_path_factory.mktemp("lim") / "limits.toml"
    write_limits(learn_limits(analyze_many(good, jobs=1)), path)
    return read_limits(path)  # with its source and SHA-256, as the CLI reads it


PARTS = [str(LINE / "good_01.wav"), str(LINE / "crack.wav")]


def _check_all(run: CheckRun) -> list[dict]:
    return [run.take(pos, res) for pos, res in iter_check_files(run.todo_paths, run.limits, jobs=1)]


def test_first_run_checks_and_stores_every_part(limits, tmp_path):
    with ResultStore(tmp_path / "h.sqlite") as store:
        run = CheckRun(PARTS, limits, part_ids=["A", "B"], store=store, station="bench 1")
        assert list(run.stored_rows()) == [] and run.todo == [0, 1]
        rows = _check_all(run)
    # the SHA-256 of each file's bytes, as hashlib computes it
    assert run.shas == [hashlib.sha256(Path(p).read_bytes()).hexdigest() for p in PARTS]
    assert [r["verdict"] for r in run.finished_rows()] == ["pass", "fail"]  # example_signals/README.md
    assert all(r["skipped"] is False and isinstance(r["stored_id"], int) for r in rows)
    assert [r["part_id"] for r in run.finished_rows()] == ["A", "B"]
    doc = run.document(1.23456)
    assert list(doc) == ["tool", "limits", "station", "operator", "results", "summary"]
    assert doc["limits"] == {"path": limits.source, "sha256": limits.sha256} and doc["station"] == "bench 1"
    assert doc["summary"] == {"parts": 2, "passed": 1, "failed": 1, "errors": 0, "skipped": 0, "time_s": 1.235}


def test_second_run_skips_stored_parts_unless_forced(limits, tmp_path):
    db = tmp_path / "h.sqlite"
    with ResultStore(db) as store:
        first = CheckRun(PARTS, limits, part_ids=["A", "B"], store=store)
        list(first.stored_rows())
        ids = [r["stored_id"] for r in _check_all(first)]
    with ResultStore(db) as store:
        again = CheckRun(PARTS, limits, part_ids=["A", "B"], store=store)
        skipped = list(again.stored_rows())
        assert [i for i, _ in skipped] == [0, 1] and again.todo == [] and again.todo_paths == []
        assert [r["stored_id"] for _, r in skipped] == ids
        assert [r["verdict"] for _, r in skipped] == ["pass", "fail"] and all(r["skipped"] for _, r in skipped)
        # the stored record in full: the features of the first run come back
        assert all(r["features"] for _, r in skipped)
        assert check_summary(again.finished_rows(), 0.0)["skipped"] == 2
        forced = CheckRun(PARTS, limits, part_ids=["A", "B"], store=store, force=True)
        assert list(forced.stored_rows()) == [] and forced.todo == [0, 1]
    # without a store nothing is skipped either
    bare = CheckRun(PARTS, limits, part_ids=["A", "B"])
    assert list(bare.stored_rows()) == [] and bare.todo == [0, 1]
    assert [r["stored_id"] for r in _check_all(bare)] == [None, None]


class _BrokenStore:
    """A store whose writes fail (a full disk): each call is counted."""

    def __init__(self) -> None:
        self.calls = 0

    def find_check(self, sha, limits_sha):
        return None

    def record_check(self, result, **kw):
        self.calls += 1
        raise StoreError("results database 'x.sqlite' cannot be written: disk full")


def test_a_failing_store_stops_storing_and_keeps_every_row(limits):
    told: list[str] = []
    store = _BrokenStore()
    run = CheckRun(PARTS, limits, part_ids=["A", "B"], store=store, on_store_error=lambda e: told.append(str(e)))
    list(run.stored_rows())
    rows = _check_all(run)
    assert store.calls == 1 and run.store_failed  # tried once, then not again
    assert told == ["results database 'x.sqlite' cannot be written: disk full"]
    assert [r["verdict"] for r in rows] == ["pass", "fail"] and [r["stored_id"] for r in rows] == [None, None]


def test_summary_counts_and_part_ids_must_match():
    rows = [{"verdict": "pass"}, {"verdict": "fail", "skipped": True}, {"verdict": "error"}, {"verdict": "pass"}]
    assert check_summary(rows, 0.0004) == {
        "parts": 4,
        "passed": 2,
        "failed": 1,
        "errors": 1,
        "skipped": 1,
        "time_s": 0.0,
    }
    with pytest.raises(ValueError, match="1 part ids for 2 paths"):
        CheckRun(PARTS, None, part_ids=["A"])  # type: ignore[arg-type]
