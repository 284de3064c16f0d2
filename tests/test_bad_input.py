"""Bad inputs through ``ringdown analyze``: one error line naming the file and the problem,
exit status 2, no traceback; in a batch the good file keeps its results.

Every file is made here (invented signals, soundfile / plain text). The expected behaviour is
the project's error contract (STYLE.md, cli/_common.py), not an outside reference.
"""

from __future__ import annotations

import json
import math
import os

import numpy as np
import pytest
import soundfile as sf
from hypothesis import example, given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp
from typer.testing import CliRunner

from ringdown.analysis.pipeline import analyze
from ringdown.base.errors import NoRingdownError, RingdownError
from ringdown.cli import app

FS = 8000


def good_wav(path):
    t = np.arange(FS) / FS
    x = 0.5 * np.exp(-20 * t) * np.cos(2 * math.pi * 440 * t)
    x = np.concatenate([np.zeros(400), x]) + np.random.default_rng(1).normal(0, 1e-5, FS + 400)
    sf.write(str(path), x, FS, subtype="PCM_24")
    return str(path)


def _bytes(path, data: bytes):
    with open(path, "wb") as fh:
        fh.write(data)
    return str(path)


def _text(path, text: str):
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(text)
    return str(path)


def _wav(path, x):
    sf.write(str(path), np.asarray(x, dtype=float), FS, subtype="FLOAT")
    return str(path)


def make_bad(kind, d):
    """(path, extra CLI args) of one bad input."""
    rng = np.random.default_rng(7)
    if kind == "empty":
        return _bytes(d / "empty.wav", b""), []
    if kind == "not_audio":
        return _bytes(d / "noise_bytes.wav", rng.bytes(4000)), []
    if kind == "truncated_header":
        real = good_wav(d / "real.wav")
        return _bytes(d / "truncated.wav", open(real, "rb").read()[:20]), []
    if kind == "missing":
        return str(d / "no_such_file.wav"), []
    if kind == "zeros":
        return _wav(d / "zeros.wav", np.zeros(FS)), []
    if kind == "dc":
        return _wav(d / "dc.wav", np.full(FS, 0.25)), []
    if kind == "ten_samples":
        return _wav(d / "ten.wav", rng.normal(0, 0.1, 10)), []
    if kind == "white_noise":
        return _wav(d / "white.wav", rng.normal(0, 0.1, FS)), []
    if kind == "text_csv":
        return _text(d / "words.csv", "name,colour\napple,red\npear,green\n"), []
    if kind in ("nan_csv", "blank_csv"):
        t = np.arange(200) / FS
        rows = [f"{float(a)!r},{float(b)!r}" for a, b in zip(t, np.cos(2 * math.pi * 440 * t) * np.exp(-20 * t))]
        rows[50] = f"{float(t[50])!r},nan"
        if kind == "blank_csv":
            rows[80] = f"{float(t[80])!r},"
        return _text(d / f"{kind}.csv", "time [s],x\n" + "\n".join(rows) + "\n"), []
    if kind == "irregular_time":
        t = np.cumsum(rng.uniform(0.5, 1.5, 400)) / FS
        rows = [f"{float(a)!r},{float(b)!r}" for a, b in zip(t, np.cos(2 * math.pi * 440 * t) * np.exp(-20 * t))]
        return _text(d / "irregular.csv", "time [s],x\n" + "\n".join(rows) + "\n"), []
    if kind == "header_only_csv":
        return _text(d / "header_only.csv", "time [s],x\n"), []
    if kind == "newlines_csv":
        return _text(d / "newlines.csv", "\n\n\n"), []
    if kind == "band_above_nyquist":
        return good_wav(d / "good_for_band.wav"), ["--band", "5000:6000"]
    if kind in ("rate_zero", "rate_negative"):
        t = np.arange(2000) / FS
        x = np.concatenate([np.zeros(100), np.cos(2 * math.pi * 440 * t) * np.exp(-20 * t)])
        p = _text(d / f"{kind}.csv", "\n".join(repr(v) for v in x) + "\n")
        return p, ["--sample-rate", "0" if kind == "rate_zero" else "-5"]
    raise AssertionError(kind)


KINDS = [
    "empty",
    "not_audio",
    "truncated_header",
    "missing",
    "zeros",
    "dc",
    "ten_samples",
    "white_noise",
    "text_csv",
    "nan_csv",
    "blank_csv",
    "irregular_time",
    "header_only_csv",
    "newlines_csv",
    "band_above_nyquist",
    "rate_zero",
    "rate_negative",
]
# options that are wrong for every file end the run before any file is read: the message names the
# option, not a file, and no per-file record is produced
OPTION_ERRORS = {"band_above_nyquist": False, "rate_zero": True, "rate_negative": True}


def run(args):
    runner = CliRunner()
    try:
        res = runner.invoke(app, args, catch_exceptions=True)
    except TypeError:  # older click
        res = runner.invoke(app, args)
    out = res.stdout
    try:
        err = res.stderr
    except ValueError:
        err = ""
    return res, out, err


def _error_lines(text):
    return [ln for ln in text.splitlines() if ln.startswith("ringdown: error:")]


@pytest.mark.parametrize("kind", KINDS)
def test_bad_input_alone(kind, tmp_path):
    path, extra = make_bad(kind, tmp_path)
    res, out, err = run(["analyze", path, *extra])
    text = out + err
    assert res.exit_code == 2, text
    assert res.exception is None or isinstance(res.exception, SystemExit), repr(res.exception)
    assert "Traceback" not in text
    lines = _error_lines(err or out)
    assert len(lines) == 1, text
    if not OPTION_ERRORS.get(kind):
        assert os.path.basename(path) in lines[0], lines[0]
    print(f"{kind}: {lines[0]}")


@pytest.mark.parametrize("kind", [k for k in KINDS if k not in OPTION_ERRORS])
def test_bad_input_in_batch_keeps_good_results(kind, tmp_path):
    good = good_wav(tmp_path / "good.wav")
    path, extra = make_bad(kind, tmp_path)
    res, out, err = run(["analyze", "--json", good, path, *extra])
    assert res.exit_code == 2, out + err
    assert "Traceback" not in out + err
    doc = json.loads(out)
    recs = {r["path"]: r for r in doc["recordings"]}
    assert recs[good]["error"] is None
    assert recs[good]["modes"] and abs(recs[good]["modes"][0]["f_d_hz"] - 440.0) < 0.5
    bad = recs[path]
    assert bad["modes"] == []
    assert set(bad["error"]) >= {"code", "message"}
    assert bad["error"]["code"] in {"input", "no_ringdown", "parameter"}
    assert os.path.basename(path) in bad["error"]["message"] or os.path.basename(path) in err
    assert len(_error_lines(err or out)) == 1


@pytest.mark.parametrize("kind", ["band_above_nyquist"])
def test_option_error_in_batch(kind, tmp_path):
    # the band lies above Nyquist for every file of this rate: each file gets the error
    good = good_wav(tmp_path / "good.wav")
    path, extra = make_bad(kind, tmp_path)
    res, out, err = run(["analyze", good, path, *extra])
    assert res.exit_code == 2
    assert "Traceback" not in out + err
    assert _error_lines(err or out)


# ------------------------------------------------------------------------------------------
# the library boundary: only RingdownError subclasses come out of analyze

arrays = st.one_of(
    hnp.arrays(np.float64, st.integers(0, 3000), elements=st.floats(allow_nan=True, allow_infinity=True)),
    hnp.arrays(np.float64, st.integers(0, 3000), elements=st.floats(-1e-300, 1e-300)),
    st.builds(lambda n, v: np.full(n, v), st.integers(0, 3000), st.floats(-1e6, 1e6)),
    st.builds(
        lambda n, s, seed: np.random.default_rng(seed).normal(0, s, n),
        st.integers(1, 3000),
        st.floats(1e-30, 1e30),
        st.integers(0, 2**32 - 1),
    ),
)


SHORT_STEP = np.r_[0.0, np.ones(99)]  # 100 samples: shorter than the 3 ms rise window at 48 kHz


def test_record_shorter_than_rise_window():
    # 100 samples at 48 kHz (shorter than the 3 ms rise window) holding a step: a one-line
    # project error (the flat top reads as clipping and leaves no decay), never a raw exception
    with pytest.raises(NoRingdownError, match="no mode could be measured"):
        analyze(SHORT_STEP, 48000.0)


@settings(max_examples=100, deadline=None, derandomize=True)
@given(x=arrays, fs=st.sampled_from([1.0, 100.0, 8000.0, 48000.0]))
@example(x=SHORT_STEP, fs=48000.0)
def test_analyze_raises_only_ringdown_errors(x, fs):
    try:
        an = analyze(x, fs)
    except RingdownError as exc:
        msg = str(exc)
        assert msg and "\n" not in msg
    else:
        assert an.error is None and an.modes
