"""``ringdown listen`` and the station (ringdown/live.py): replay, verdicts, overflow, part ids.

References: ``ringdown check`` of the same recordings (the issue: a replay of the line example
through ``listen --limits`` gives the same verdicts as ``check``); the invented line's parts are
written by example_signals/make_line_examples.py (numpy/scipy/soundfile only).
"""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

import pytest
import soundfile as sf
from typer.testing import CliRunner

from ringdown.cli import app
from ringdown.inspection.station import PartIds, Station
from ringdown.io.blocks import ArrayBlocks

EXAMPLES = Path(__file__).resolve().parents[1] / "example_signals"
LINE = sorted(str(p) for p in (EXAMPLES / "line").glob("*.wav"))
runner = CliRunner()


_SPEC = importlib.util.spec_from_file_location("make_station_session", EXAMPLES / "make_station_session.py")
_station = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(_station)


def _session(path, files, gap_s: float = 1.0) -> None:
    """The line's recordings in turn, each followed by ``gap_s`` of noise at its own level
    (example_signals/make_station_session.py): a station session with a tap every 1 + gap_s s."""
    _station.write_session(path, files, gap_s=gap_s)


@pytest.fixture(scope="module")
def line_limits(tmp_path_factory):
    d = tmp_path_factory.mktemp("station")
    lim = d / "limits.toml"
    r = runner.invoke(app, ["limits", "learn", *LINE[1:9], "-o", str(lim), "--jobs", "1"])
    assert r.exit_code == 0, r.output
    return str(lim)


def test_replay_through_listen_gives_the_verdicts_of_check(line_limits, tmp_path):
    session = tmp_path / "session.wav"
    _session(session, LINE)
    r = runner.invoke(app, ["check", "--limits", line_limits, "--jobs", "1", "--jsonl", "--no-store", *LINE])
    checked = [json.loads(line) for line in r.stdout.splitlines() if line.startswith("{")]
    by_path = {c["path"]: c["verdict"] for c in checked}
    expected = [by_path[p] for p in LINE]
    assert "fail" in expected and "pass" in expected  # the line holds both kinds of part
    r = runner.invoke(
        app,
        [
            "listen",
            "--replay",
            str(session),
            "--speed",
            "0",
            "--limits",
            line_limits,
            "--jsonl",
            "--save-dir",
            str(tmp_path / "taps"),
            "--part-id",
            "B7-{n:03d}",
        ],
    )
    assert r.exit_code == 0, r.output
    taps = [json.loads(line) for line in r.stdout.splitlines() if line.startswith("{")]
    assert [t["verdict"] for t in taps] == expected
    assert [t["part_id"] for t in taps] == [f"B7-{i:03d}" for i in range(1, len(LINE) + 1)]
    # taps 2 s apart in the session: trigger times within two frames of each tap
    starts = [i * 2.0 + 0.05 for i in range(len(LINE))]
    assert [t["t_s"] for t in taps] == pytest.approx(starts, abs=2 * 256 / 24_000)
    # the saved tap, analysed again, gives the station's result exactly
    saved = taps[3]["path"]
    assert Path(saved).name.endswith("_B7-004.wav")
    r2 = runner.invoke(app, ["analyze", "--json", saved])
    again = json.loads(r2.stdout)["recordings"][0]
    assert json.dumps(again, sort_keys=True) == json.dumps(taps[3]["analysis"], sort_keys=True)
    assert "done: 11 taps, 9 pass, 2 fail, 0 error; 0 input blocks dropped" in r.stderr


def test_listen_stores_each_part_with_station_and_operator(line_limits, tmp_path):
    session = tmp_path / "session.wav"
    _session(session, LINE[:3])
    db = tmp_path / "h.sqlite"
    r = runner.invoke(
        app,
        [
            "listen",
            "--replay",
            str(session),
            "--speed",
            "0",
            "--limits",
            line_limits,
            "--store",
            "--db",
            str(db),
            "--station",
            "EOL-2",
            "--operator",
            "kim",
            "--first",
            "40",
        ],
    )
    assert r.exit_code == 0, r.output
    from ringdown.inspection.store import ResultStore

    with ResultStore(db) as st:
        rows = st.query()
    assert sorted(x.part_id for x in rows) == ["part-0040", "part-0041", "part-0042"]
    assert {x.station for x in rows} == {"EOL-2"} and {x.operator for x in rows} == {"kim"}
    assert sorted(x.verdict for x in rows) == ["fail", "pass", "pass"]


def test_listen_without_limits_prints_the_modes_and_max_taps_stops(tmp_path):
    session = tmp_path / "session.wav"
    _session(session, LINE[1:4])
    r = runner.invoke(app, ["listen", "--replay", str(session), "--speed", "0", "--max-taps", "2"])
    assert r.exit_code == 0, r.output
    lines = [ln for ln in r.stdout.splitlines() if ln.startswith("tap ")]
    assert len(lines) == 2 and "f1 1498.9" in lines[0] and "Q " in lines[0]
    assert "done: 2 taps, 2 measured, 0 not measured" in r.stdout


def test_a_tap_that_overlaps_dropped_input_is_an_error_never_a_verdict(line_limits, tmp_path):
    from ringdown.inspection.limits_file import read_limits

    session = tmp_path / "session.wav"
    _session(session, LINE[1:4])
    x, fs = sf.read(str(session))
    block = 1024
    lost = (48_000 + 3000) // block  # a block in the second tap's decay (taps 2 s apart at 24 kHz)
    src = ArrayBlocks(x, fs, block_samples=block, drop=[lost])
    st = Station(fs, limits=read_limits(line_limits), part_ids=PartIds("P{n}"), subtype="PCM_16")
    taps = list(st.run(src))
    assert src.dropped_blocks == 1
    assert [t.verdict for t in taps] == ["pass", "error", "pass"]
    assert taps[1].dropped == block and "input_dropped" in [w.code for w in taps[1].analysis.warnings]
    assert "tap the part again" in taps[1].reasons[0].message
    assert st.summary(src.dropped_blocks)["taps_with_lost_input"] == 1


def test_part_ids_pattern_counter_and_prompt():
    assert [PartIds("B7-{n:03d}", start=9).next() for _ in range(1)] == ["B7-009"]
    ids = PartIds("lot4")
    assert [ids.next(), ids.next()] == ["lot4-0001", "lot4-0002"]
    answers = iter(["SN-77", ""])
    ids = PartIds(prompt=lambda q: next(answers))
    assert [ids.next(), ids.next()] == ["SN-77", "part-0002"]
    from ringdown.base.errors import ParameterError

    with pytest.raises(ParameterError, match="not a pattern"):
        PartIds("B{n:q}")


def test_listen_usage_errors_are_one_line(tmp_path):
    r = runner.invoke(app, ["listen", "--speed", "4"])
    assert r.exit_code == 64 and "--speed applies to --replay only" in r.stderr
    r = runner.invoke(app, ["listen", "--replay", str(tmp_path / "none.wav")])
    assert r.exit_code == 2 and "Traceback" not in r.output
    occupied = tmp_path / "a_file"
    occupied.write_text("x")
    r = runner.invoke(app, ["listen", "--replay", LINE[0], "--save-dir", str(occupied)])
    assert r.exit_code == 2 and "cannot use" in r.stderr and "as the save folder" in r.stderr


def test_the_terminal_view_shows_the_last_verdict_large(line_limits, tmp_path):
    from rich.console import Console

    from ringdown.cli.listen import _View, big_word
    from ringdown.inspection.limits_file import read_limits

    assert big_word("FAIL").count("\n") == 4 and "\u2588" in big_word("pass")
    session = tmp_path / "session.wav"
    _session(session, LINE[:2])
    x, fs = sf.read(str(session))
    st = Station(fs, limits=read_limits(line_limits), subtype="PCM_16")
    view = _View("replay", judged=True)
    for tap in st.run(ArrayBlocks(x, fs, block_samples=1024)):
        view.add(tap, 0)
    con = Console(record=True, width=100)
    con.print(view.render())
    text = con.export_text()
    assert text.count("\u2588") > 20 and "part-0002  (tap 2)" in text  # PASS in block letters, last part named
    assert "FAIL" in text and "2 taps; 0 input blocks dropped" in text


def test_ctrl_c_ends_a_session_cleanly_with_its_summary(tmp_path):
    import signal
    import subprocess
    import sys

    session = tmp_path / "session.wav"
    _session(session, LINE[1:6])  # 10 s at real time
    p = subprocess.Popen(
        [sys.executable, "-c", "from ringdown.cli import main; main()", "listen", "--replay", str(session)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    first = p.stdout.readline()  # the first tap is out: the session is running
    assert first.startswith("tap 1 ")
    p.send_signal(signal.SIGINT)
    out, err = p.communicate(timeout=30)
    assert p.returncode == 0, err
    assert "stopped: " in out and "Traceback" not in err
    assert sum(ln.startswith("tap ") for ln in out.splitlines()) < 4
