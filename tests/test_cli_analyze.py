"""``ringdown analyze`` through typer's CliRunner: exit codes, tables, JSON, CSV, options.

The input is an invented two-mode ring-down (440 Hz, beta 12 /s; 1250 Hz, beta 20 /s) written
with soundfile by the test fixture (tests/conftest.py). Frequencies are checked to 0.05 % and
decay rates to 3 % (the project's accuracy brief; see tests/test_analyze.py).
"""

from __future__ import annotations

import csv
import json
import re

import pytest
from typer.testing import CliRunner

from ringdown import __version__
from ringdown.analysis.results import mode_keys
from ringdown.cli import app

F_REF = (440.0, 1250.0)
BETA_REF = (12.0, 20.0)
ROW = re.compile(r"^\s+(\d+)\s+(\d+\.\d+)(?:\(\d+\))?\s")  # '611.999885(83)': value(u), ringdown.base.numfmt


def run(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


def table_rows(text):
    """(index, f_d_hz) of each mode row of the text table."""
    return [(int(m.group(1)), float(m.group(2))) for m in map(ROW.match, text.splitlines()) if m]


def error_lines(result):
    return [ln for ln in result.stderr.splitlines() if ln.strip()]


def test_table(two_mode_wav):
    r = run("analyze", two_mode_wav)
    assert r.exit_code == 0, r.stderr
    assert two_mode_wav in r.stdout
    rows = table_rows(r.stdout)
    assert [i for i, _ in rows] == [1, 2]
    for (_, f), ref in zip(rows, F_REF):
        assert f == pytest.approx(ref, rel=5e-4)
    assert "Q = 1/(2 zeta)" in r.stdout  # the table states its Q definition (FIELD.md s. 1)
    assert r.stderr == ""


def test_json_document(two_mode_wav):
    r = run("analyze", two_mode_wav, "--json")
    assert r.exit_code == 0, r.stderr
    doc = json.loads(r.stdout)  # stdout is one JSON document and nothing else
    assert doc["tool"] == {"name": "ringdown", "version": __version__}
    assert len(doc["recordings"]) == 1
    rec = doc["recordings"][0]
    for k in (
        "path",
        "sha256",
        "channel",
        "sample_rate_hz",
        "n_samples",
        "duration_s",
        "hits",
        "modes",
        "warnings",
        "error",
    ):
        assert k in rec
    assert rec["path"] == two_mode_wav and rec["error"] is None and rec["sample_rate_hz"] == 16000
    assert all({"start_s", "peak_s", "peak_value", "snr_db"} <= set(h) for h in rec["hits"])
    assert [list(m) for m in rec["modes"]] == [list(mode_keys())] * 2
    for m, f, b in zip(rec["modes"], F_REF, BETA_REF):
        assert m["f_d_hz"] == pytest.approx(f, rel=5e-4)
        assert m["beta_per_s"] == pytest.approx(b, rel=0.03)


def test_csv_row_per_mode(two_mode_wav, tmp_path):
    out = tmp_path / "modes.csv"
    r = run("analyze", two_mode_wav, "--csv", out)
    assert r.exit_code == 0, r.stderr
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 2
    for row, f, b in zip(rows, F_REF, BETA_REF):
        assert row["path"] == two_mode_wav and row["error"] == ""
        assert float(row["f_d_hz"]) == pytest.approx(f, rel=5e-4)
        assert float(row["beta_per_s"]) == pytest.approx(b, rel=0.03)
        for k in ("q", "zeta", "t60_s", "decay_db_per_s", "f_n_hz"):
            float(row[k])  # every derived quantity is a number


def test_missing_and_unreadable_files_exit_2_but_report_the_good_one(two_mode_wav, tmp_path):
    missing = tmp_path / "nope.wav"
    garbage = tmp_path / "garbage.wav"
    garbage.write_bytes(b"\x00\x01 not audio " * 50)
    r = run("analyze", two_mode_wav, missing, garbage)
    assert r.exit_code == 2
    assert [i for i, _ in table_rows(r.stdout)] == [1, 2]  # the good file's table is printed
    errs = error_lines(r)
    assert len(errs) == 2  # one line per bad file
    assert "nope.wav" in errs[0] and "garbage.wav" in errs[1]
    assert all(e.startswith("ringdown: error:") for e in errs)
    assert "Traceback" not in r.stdout + r.stderr


def test_missing_file_json_still_lists_everything(two_mode_wav, tmp_path):
    missing = tmp_path / "nope.wav"
    r = run("analyze", two_mode_wav, missing, "--json")
    assert r.exit_code == 2
    doc = json.loads(r.stdout)
    good, bad = doc["recordings"]
    assert good["error"] is None and len(good["modes"]) == 2
    assert bad["path"] == str(missing) and bad["modes"] == []
    assert set(bad["error"]) == {"code", "message"} and bad["error"]["message"]
    assert "Traceback" not in r.stdout + r.stderr


def test_band_option(two_mode_wav):
    r = run("analyze", two_mode_wav, "--band", "400:500", "--json")
    assert r.exit_code == 0, r.stderr
    modes = json.loads(r.stdout)["recordings"][0]["modes"]
    assert len(modes) == 1
    assert modes[0]["f_d_hz"] == pytest.approx(440.0, rel=5e-4)


def test_two_bands(two_mode_wav):
    r = run("analyze", two_mode_wav, "--band", "1200:1300", "--band", "400:500")
    assert r.exit_code == 0, r.stderr
    assert [f for _, f in table_rows(r.stdout)] == pytest.approx(list(F_REF), rel=5e-4)


@pytest.mark.parametrize(
    "text, needle, status",
    [
        ("x", "--band", 64),
        ("400-500", "--band", 64),
        ("400:", "--band", 64),
        ("500:400", "band", 64),
        ("9000:9500", "Nyquist", 2),
    ],
)
def test_bad_band_text(two_mode_wav, text, needle, status):
    # a band that cannot be parsed is a usage error (64); one above the file's Nyquist is that file's error (2)
    r = run("analyze", two_mode_wav, "--band", text)
    assert r.exit_code == status
    errs = error_lines(r)
    assert len(errs) == 1 and needle in errs[0]
    assert "Traceback" not in r.stdout + r.stderr


def test_max_modes(two_mode_wav):
    r = run("analyze", two_mode_wav, "--max-modes", "1")
    assert r.exit_code == 0, r.stderr
    rows = table_rows(r.stdout)
    assert len(rows) == 1 and rows[0][1] == pytest.approx(440.0, rel=5e-4)  # the stronger mode


def test_bad_max_modes(two_mode_wav):
    r = run("analyze", two_mode_wav, "--max-modes", "0")
    assert r.exit_code == 64
    assert "max_modes" in r.stderr and "Traceback" not in r.stdout + r.stderr


@pytest.mark.parametrize("method", ["envelope", "decrement", "half_power"])
def test_method_option(two_mode_wav, method):
    r = run("analyze", two_mode_wav, "--method", method, "--json")
    assert r.exit_code == 0, r.stderr
    modes = json.loads(r.stdout)["recordings"][0]["modes"]
    assert [m["method"] for m in modes] == [method, method]
    for m, f in zip(modes, F_REF):
        assert m["f_d_hz"] == pytest.approx(f, rel=1e-3)
        assert method not in m["cross_checks"] and len(m["cross_checks"]) >= 2


def test_unknown_method(two_mode_wav):
    r = run("analyze", two_mode_wav, "--method", "guess")
    assert r.exit_code == 64
    errs = error_lines(r)
    assert len(errs) == 1 and "guess" in errs[0]
    assert "Traceback" not in r.stdout + r.stderr


def test_help_lists_the_options():
    r = run("analyze", "--help")
    assert r.exit_code == 0
    for opt in ("--json", "--csv", "--band", "--max-modes", "--method", "--channel", "--min-snr-db", "--debug"):
        assert opt in r.stdout


def test_version():
    r = run("--version")
    assert r.exit_code == 0
    assert r.stdout.strip() == f"ringdown {__version__}"


def test_folder_batch_prints_a_summary(two_mode_wav, tmp_path):
    # issue: analyze accepts folders and prints a summary (files, analysed, errors, time)
    import shutil

    folder = tmp_path / "batch"
    folder.mkdir()
    for i in range(3):
        shutil.copy(two_mode_wav, folder / f"part_{i}.wav")
    (folder / "broken.wav").write_bytes(b"RIFF\x00\x00")
    r = run("analyze", folder, "--jobs", "2")
    assert r.exit_code == 2
    assert len(table_rows(r.stdout)) == 3 * 2  # two modes in each good file
    assert re.search(r"^4 files: 3 analysed, 1 error, 6 modes in [\d.]+ s$", r.stdout, re.M)


def test_store_writes_the_history(two_mode_wav, tmp_path, monkeypatch):
    # analyze --store keeps every result in the SQLite history; RINGDOWN_DB chooses the file
    db = tmp_path / "hist.sqlite"
    monkeypatch.setenv("RINGDOWN_DB", str(db))
    r = run("analyze", two_mode_wav, "--store", "--station", "S1")
    assert r.exit_code == 0, r.output
    h = run("history", "--json")
    assert h.exit_code == 0, h.output
    rows = json.loads(h.stdout)["records"]
    assert len(rows) == 1 and rows[0]["station"] == "S1" and rows[0]["kind"] == "analysis"


def test_limits_learn_accepts_bands(two_mode_wav, tmp_path):
    # --band is parsed by the same helper in every command (a broken import once hid here)
    out = tmp_path / "limits.toml"
    r = run("limits", "learn", two_mode_wav, two_mode_wav, two_mode_wav, "--band", "400:480", "-o", out)
    assert r.exit_code == 0, r.output
    assert out.exists()
