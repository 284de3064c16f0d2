"""``ringdown limits learn``, ``ringdown check`` and ``ringdown history`` through typer's CliRunner.

Recordings are written by example_signals/make_line_examples.py (numpy/scipy/soundfile only),
never by the code under test.
"""

import csv
import json
from pathlib import Path

import numpy as np
import pytest
import typer
from conftest import line_sim as sim  # noqa: E402
from typer.testing import CliRunner

from ringdown.cli import history as history_cli
from ringdown.cli import limits as limits_cli

app = typer.Typer()
limits_cli.register(app)
history_cli.register(app)
runner = CliRunner()


@pytest.fixture(scope="module")
def line(tmp_path_factory):
    d = tmp_path_factory.mktemp("line")
    rng = np.random.default_rng(99)
    good = []
    for i in range(8):
        p = d / f"SN-{i:04d}_good.wav"
        sim.write_part(p, sim.part_modes(rng, "good"), rng, duration_s=0.5)
        good.append(str(p))
    crack = d / "SN-0100_crack.wav"
    sim.write_part(crack, sim.part_modes(rng, "crack"), rng, duration_s=0.5)
    broken = d / "SN-0200_broken.wav"
    broken.write_bytes(b"RIFF....not a wav file")
    lim = d / "limits.toml"
    r = runner.invoke(app, ["limits", "learn", *good[:6], "-o", str(lim), "--jobs", "1"])
    assert r.exit_code == 0, r.output
    return {"dir": d, "good": good, "crack": str(crack), "broken": str(broken), "limits": str(lim), "learn": r}


def run(args, db, **kw):
    return runner.invoke(app, [*args, "--db", str(db)], **kw)


def test_learn_output_and_warning(line):
    r = line["learn"]
    assert "learned limits from 6 good parts" in r.stdout
    assert "mode 3: f_d" in r.stdout
    assert "only 6 good parts" in r.stderr and "no Mahalanobis check" in r.stderr
    text = Path(line["limits"]).read_text()
    assert "format_version = 1" in text and "SN-0000_good.wav" in text and "coverage = 0.99" in text


def test_learn_refuses_to_overwrite_and_json(line, tmp_path):
    r = runner.invoke(app, ["limits", "learn", *line["good"][:4], "-o", line["limits"], "--jobs", "1"])
    assert r.exit_code == 2 and "--force" in r.stderr
    out = tmp_path / "l.toml"
    r = runner.invoke(
        app, ["limits", "learn", *line["good"][:4], "-o", str(out), "--json", "--jobs", "1", "--coverage", "0.9"]
    )
    assert r.exit_code == 0
    doc = json.loads(r.stdout)
    assert doc["coverage"] == 0.9 and doc["n_parts"] == 4 and len(doc["modes"]) == 3


def test_learn_with_a_broken_good_part(line, tmp_path):
    r = runner.invoke(
        app, ["limits", "learn", *line["good"][:4], line["broken"], "-o", str(tmp_path / "x.toml"), "--jobs", "1"]
    )
    assert r.exit_code == 2 and "could not be analysed" in r.stderr


def test_exit_codes(line, tmp_path):
    lim = ["check", "--limits", line["limits"], "--jobs", "1"]
    r = run([*lim, *line["good"][6:]], tmp_path / "a.sqlite")
    assert r.exit_code == 0, r.output
    assert "2 parts: 2 passed, 0 failed, 0 errors" in r.stdout
    r = run([*lim, line["good"][6], line["crack"]], tmp_path / "b.sqlite")
    assert r.exit_code == 1
    assert "FAIL   SN-0100_crack" in r.stdout and "frequency ratio of mode" in r.stdout
    r = run([*lim, line["good"][6], line["crack"], line["broken"]], tmp_path / "c.sqlite")
    assert r.exit_code == 2  # errors win over failures
    assert "ERROR  SN-0200_broken" in r.stdout
    # an ERROR is a verdict: listed once, on stdout with the others, not repeated on stderr
    assert "SN-0200_broken" not in r.stderr


def test_json_csv_station_and_part_id(line, tmp_path):
    db = tmp_path / "j.sqlite"
    csv_path = tmp_path / "out.csv"
    r = run(
        [
            "check",
            "--limits",
            line["limits"],
            "--jobs",
            "2",
            "--json",
            "--csv",
            str(csv_path),
            "--station",
            "EOL-2",
            "--operator",
            "O'Brien",
            "--part-id",
            r"SN-(\d+)",
            line["good"][7],
            line["crack"],
            line["broken"],
        ],
        db,
    )
    assert r.exit_code == 2
    doc = json.loads(r.stdout)  # stdout is pure JSON; the summary went to stderr
    verdicts = {x["part_id"]: x["verdict"] for x in doc["results"]}
    assert verdicts == {"0007": "pass", "0100": "fail", "0200": "error"}
    assert doc["summary"]["parts"] == 3 and doc["summary"]["errors"] == 1
    assert "3 parts: 1 passed, 1 failed, 1 errors" in r.stderr
    rows = list(csv.DictReader(csv_path.open()))
    assert [x["verdict"] for x in rows] == ["pass", "fail", "error"]
    assert rows[1]["reasons"] and rows[0]["mode2_ratio"]
    r = run(["history", "--json"], db)
    recs = json.loads(r.stdout)["records"]
    assert {x["station"] for x in recs} == {"EOL-2"} and {x["operator"] for x in recs} == {"O'Brien"}


def test_rerun_skips_and_force(line, tmp_path):
    db = tmp_path / "s.sqlite"
    args = ["check", "--limits", line["limits"], "--jobs", "1", line["good"][6], line["crack"]]
    assert run(args, db).exit_code == 1
    r = run(args, db)
    assert r.exit_code == 1  # the stored verdicts still count
    assert "already stored, skipped" in r.stdout and "(2 already stored, skipped)" in r.stdout
    r = run([*args, "--force"], db)
    assert "skipped" not in r.stdout
    h = json.loads(run(["history", "--json"], db).stdout)["records"]
    assert len(h) == 4


def test_env_db_and_no_store(line, tmp_path):
    db = tmp_path / "env.sqlite"
    r = runner.invoke(
        app, ["check", "--limits", line["limits"], "--jobs", "1", line["good"][6]], env={"RINGDOWN_DB": str(db)}
    )
    assert r.exit_code == 0 and db.exists()
    other = tmp_path / "none.sqlite"
    r = runner.invoke(
        app,
        ["check", "--limits", line["limits"], "--jobs", "1", "--no-store", line["good"][6]],
        env={"RINGDOWN_DB": str(other)},
    )
    assert r.exit_code == 0 and not other.exists()


def test_report(line, tmp_path):
    out = tmp_path / "r.html"
    r = run(
        ["check", "--limits", line["limits"], "--jobs", "1", "--report", str(out), line["crack"]], tmp_path / "r.sqlite"
    )
    assert r.exit_code == 1
    html = out.read_text()
    assert "Pass/fail" in html and "SN-0100_crack" in html and "FAIL" in html


def test_bad_limits_file(line, tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("[[modes]]\nf_hz = [2.0, 1.0]\n")
    r = run(["check", "--limits", str(bad), line["good"][0]], tmp_path / "x.sqlite")
    assert r.exit_code == 2 and "limits file" in r.stderr and "f_hz" in r.stderr


def test_folder_input(line, tmp_path):
    r = run(["check", "--limits", line["limits"], "--jobs", "2", "--json", str(line["dir"])], tmp_path / "f.sqlite")
    doc = json.loads(r.stdout)
    assert doc["summary"]["parts"] == 10 and r.exit_code == 2


def test_history_filters_and_outputs(line, tmp_path):
    db = tmp_path / "h.sqlite"
    run(
        [
            "check",
            "--limits",
            line["limits"],
            "--jobs",
            "1",
            "--part-id",
            r"SN-(\d+)",
            *line["good"][5:],
            line["crack"],
        ],
        db,
    )
    r = run(["history"], db)
    assert r.exit_code == 0 and "4 record(s)" in r.stdout and "0100" in r.stdout
    r = run(["history", "--verdict", "fail"], db)
    assert "1 record(s)" in r.stdout and "FAIL" in r.stdout and "PASS" not in r.stdout
    r = run(["history", "--part", "0005", "--json"], db)
    assert [x["part_id"] for x in json.loads(r.stdout)["records"]] == ["0005"]
    r = run(["history", "--since", "2999-01-01"], db)
    assert "0 record(s)" in r.stdout
    r = run(["history", "--since", "last week"], db)
    assert r.exit_code == 2 and "ISO date" in r.stderr
    out = tmp_path / "h.csv"
    r = run(["history", "--csv", str(out)], db)
    rows = list(csv.DictReader(out.open()))
    assert len(rows) == 4 and rows[0]["mode1_f_d_hz"]
    png = tmp_path / "run.png"
    r = run(["history", "--plot", str(png)], db)
    assert r.exit_code == 0 and png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_history_without_database(tmp_path):
    r = run(["history"], tmp_path / "missing.sqlite")
    assert r.exit_code == 2 and "no results database" in r.stderr
