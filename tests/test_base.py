"""One of each: the clock, the file hash and the error for an output that cannot be written.

Each is checked for what it does (against a fixed time, the FIPS 180-2 test vector) and for
being the only one (no other module reads the wall clock or hashes a file by itself).
"""

from __future__ import annotations

import datetime as dt
import re
from pathlib import Path

import pytest

import ringdown
from ringdown.base import clock
from ringdown.base.errors import OutputError, ParameterError
from ringdown.io.outputs import atomic_write, check_writable
from ringdown.io.read import sha256_file

PACKAGE = Path(ringdown.__file__).parent
FIXED = dt.datetime(2026, 1, 2, 3, 4, 5, 678901, tzinfo=dt.timezone.utc)


def _sources():
    for p in sorted(PACKAGE.rglob("*.py")):
        yield p.relative_to(PACKAGE).as_posix(), p.read_text(encoding="utf-8")


def test_stamps_of_a_fixed_time(monkeypatch):
    monkeypatch.setattr(clock, "utc_now", lambda: FIXED)
    assert clock.utc_stamp() == "2026-01-02T03:04:05Z"
    assert clock.utc_stamp("microseconds") == "2026-01-02T03:04:05.678901Z"
    local = dt.datetime.fromisoformat(clock.local_stamp())
    assert local.utcoffset() is not None and local == FIXED.replace(microsecond=0)


def test_the_history_and_the_report_read_the_one_clock(monkeypatch, tmp_path):
    monkeypatch.setattr(clock, "utc_now", lambda: FIXED)
    a = ringdown.Analysis(path="p.wav", sha256=None, channel="1", sample_rate_hz=48000.0, n_samples=100)
    with ringdown.ResultStore(tmp_path / "h.sqlite") as db:
        rid = db.record_analysis(a)
        assert db.get(rid).tested_utc == "2026-01-02T03:04:05.678901Z"
    html = ringdown.render_report([a], figures=False)
    assert clock.local_stamp() in html


def test_no_other_clock_or_file_hash():
    # every wall-clock read and every monotonic interval goes through base/clock.py; every file
    # hash through io/files.sha256_file (hashing bytes already in memory is hashlib's own job)
    clocks = re.compile(r"datetime\.now\(|\.utcnow\(|time\.time\(|time\.monotonic\(|perf_counter\(")
    for name, text in _sources():
        if name != "base/clock.py":
            assert not clocks.search(text), name
    defs = [name for name, text in _sources() if re.search(r"h = hashlib\.sha256\(\)", text)]
    assert defs == ["io/files.py"]


def test_file_hash_is_the_standard_digest(tmp_path):
    # FIPS 180-2, appendix B.1: SHA-256("abc")
    p = tmp_path / "abc.bin"
    p.write_bytes(b"abc")
    assert sha256_file(str(p)) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    with pytest.raises(ringdown.InputError, match="does not exist"):
        sha256_file(str(tmp_path / "missing.wav"))


def test_one_error_for_an_output_that_cannot_be_written(tmp_path):
    assert issubclass(OutputError, ParameterError) and OutputError.code == "output"
    with pytest.raises(OutputError, match="folder .* does not exist"):
        check_writable(tmp_path / "no" / "such" / "out.csv", "CSV file")
    with pytest.raises(OutputError, match="is a folder"):
        check_writable(tmp_path, "report")
    with pytest.raises(OutputError, match="cannot write report"):
        with atomic_write(tmp_path / "missing_dir" / "r.html", what="report") as fh:
            fh.write("x")
    # no module defines an error class of its own for it any more
    for name, text in _sources():
        assert not re.search(r"class _?\w*OutputError\(", text) or name == "base/errors.py", name


def test_a_fit_error_keeps_its_reason_across_processes():
    import pickle

    from ringdown.base.errors import FitError

    # the pipeline branches on ``reason`` (not on the message's text), and batch runs raise in
    # worker processes: the reason must survive pickling (Python docs, object.__reduce__)
    err = pickle.loads(pickle.dumps(FitError("the mode is 3.0 dB above its band noise", reason="near_noise")))
    assert isinstance(err, FitError) and err.reason == "near_noise"
    assert str(err) == "the mode is 3.0 dB above its band noise"
    assert FitError("did not converge").reason == "fit_failed"
    # the only raise that words its message about band noise says so in its reason too
    src = (Path(ringdown.__file__).parent / "analysis" / "pipeline.py").read_text()
    assert "in str(exc)" not in src
    calls = []
    for m in re.finditer(r"raise FitError\(", src):
        depth, i = 1, m.end()
        while depth:  # to the call's closing parenthesis
            depth += {"(": 1, ")": -1}.get(src[i], 0)
            i += 1
        calls.append(src[m.end() : i])
    noisy = [c for c in calls if "above its band noise" in c]
    assert noisy and all('reason="near_noise"' in c for c in noisy)
