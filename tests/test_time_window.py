"""A time window for every command: ``start_s``/``end_s`` in the library, ``--start``/``--end``
in ``analyze``, ``compare``, ``limits learn`` and ``check``; and a MemoryError kept to its file.

Recordings are analytic damped cosines (FIELD.md section 1) with seeded noise, written with
soundfile (conftest.write_wav), never by the code under test.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from conftest import ringdown_modes, write_wav
from typer.testing import CliRunner

from ringdown import analyze, analyze_many
from ringdown.base.errors import ParameterError
from ringdown.cli import app

FS = 16000.0
runner = CliRunner()


def two_taps(seed=0, f2=1300.0):
    """A 500 Hz tap at 0.1 s and a f2 tap at 1.0 s, 2 s at 16 kHz (invented part)."""
    a = ringdown_modes([(500.0, 15.0, 1.0)], sample_rate=FS, duration_s=0.9, pre_s=0.1, seed=seed)
    b = ringdown_modes([(f2, 25.0, 1.0)], sample_rate=FS, duration_s=1.1, pre_s=0.1, seed=seed + 1)
    return np.concatenate([a, b])


def test_library_window_keeps_times_from_the_record_start():
    x = two_taps()
    whole = analyze(x, FS)
    assert sorted(round(m.f_d_hz) for m in whole.modes) == [500, 1300]
    late = analyze(x, FS, start_s=0.85, end_s=2.0)
    assert [round(m.f_d_hz) for m in late.modes] == [1300]
    assert late.modes[0].beta_per_s == pytest.approx(25.0, rel=0.02)
    # the hit's time is from the record's first sample: 0.9 s of the first part + 0.1 s
    assert late.hits[0].start_s == pytest.approx(1.0, abs=2e-3)
    assert late.modes[0].fit_start_s > 1.0
    assert late.settings["start_s"] == 0.85 and late.settings["end_s"] == 2.0
    early = analyze(x, FS, end_s=0.85)
    assert [round(m.f_d_hz) for m in early.modes] == [500]


@pytest.mark.parametrize(
    "kw, match",
    [
        (dict(start_s=-1.0), "start_s must be a finite time >= 0"),
        (dict(start_s=1.0, end_s=0.5), "must come after start_s"),
        (dict(start_s=5.0), "lies beyond the end of the array"),
        (dict(start_s=0.5, end_s=0.5001), "holds 2 samples"),
        (dict(end_s="soon"), "end_s is a time in seconds"),
    ],
)
def test_bad_windows(kw, match):
    with pytest.raises(ParameterError, match=match):
        analyze(two_taps(), FS, **kw)


def test_cli_analyze_window(tmp_path):
    p = write_wav(tmp_path / "two.wav", two_taps(), FS)
    r = runner.invoke(app, ["analyze", p, "--start", "0.85", "--json"])
    assert r.exit_code == 0, r.output
    rec = json.loads(r.stdout)["recordings"][0]
    assert [round(m["f_d_hz"]) for m in rec["modes"]] == [1300]
    assert rec["settings"]["start_s"] == 0.85 and rec["settings"]["end_s"] is None
    r = runner.invoke(app, ["analyze", p, "--start", "3"])
    assert r.exit_code == 2
    assert "lies beyond the end" in r.output and "Traceback" not in r.output


def test_cli_compare_window(tmp_path):
    before = [write_wav(tmp_path / f"b{i}.wav", two_taps(10 + i), FS) for i in range(3)]
    after = [write_wav(tmp_path / f"a{i}.wav", two_taps(20 + i, f2=1250.0), FS) for i in range(3)]
    args = [
        "compare",
        *sum((["--before", b] for b in before), []),
        *sum((["--after", a] for a in after), []),
        "--start",
        "0.85",
        "--end",
        "2",
        "--json",
    ]
    r = runner.invoke(app, args)
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    modes = doc["modes"]
    assert len(modes) == 1  # the 500 Hz tap lies outside the window
    assert json.dumps(doc).count("1250") >= 1


def test_cli_limits_learn_and_check_window(tmp_path):
    good = [write_wav(tmp_path / f"good_{i}.wav", two_taps(30 + i), FS) for i in range(5)]
    lim = tmp_path / "limits.toml"
    r = runner.invoke(app, ["limits", "learn", *good, "-o", str(lim), "--start", "0.85", "--jobs", "1"])
    assert r.exit_code == 0, r.output
    assert "start_s = 0.85" in lim.read_text()
    assert "mode 2" not in r.stdout  # only the second tap's mode was learned
    part = write_wav(tmp_path / "part.wav", two_taps(40), FS)
    db = tmp_path / "h.sqlite"
    r = runner.invoke(app, ["check", "--limits", str(lim), part, "--db", str(db), "--json", "--jobs", "1"])
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["results"][0]["verdict"] == "pass"
    # a window holding only the first tap: its mode is not the learned one
    r = runner.invoke(
        app,
        [
            "check",
            "--limits",
            str(lim),
            part,
            "--db",
            str(db),
            "--json",
            "--jobs",
            "1",
            "--start",
            "0",
            "--end",
            "0.85",
            "--force",
        ],
    )
    assert r.exit_code == 1, r.output
    assert json.loads(r.stdout)["results"][0]["verdict"] == "fail"


def test_memory_error_stays_with_its_file(tmp_path, monkeypatch):
    import ringdown.io.read

    good = write_wav(tmp_path / "good.wav", two_taps(), FS)
    big = write_wav(tmp_path / "big.wav", two_taps(), FS)
    real = ringdown.io.read.read_recording

    def reader(path, **kw):
        if str(path).endswith("big.wav"):
            raise MemoryError("Unable to allocate 8.00 PiB")
        return real(path, **kw)

    monkeypatch.setattr(ringdown.io.read, "read_recording", reader)
    out = analyze_many([big, good])
    assert not out[0].ok and out[1].ok
    assert "needs more memory than is available" in out[0].error.message and "big.wav" in out[0].error.message
    assert "\n" not in out[0].error.message
