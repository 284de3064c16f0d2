"""Commands that script the same way: shared reader options, standard input, JSON Lines streaming,
options checked before any work, a note for multichannel files, reader settings kept in limits.

Recordings are written here with soundfile from analytic decays (tests/conftest.py, and
example_signals/make_line_examples.py for the line parts), never by the code under test.
"""

from __future__ import annotations

import json
import os
import select
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf
import typer
from conftest import line_sim as sim  # noqa: E402
from conftest import ringdown_modes  # noqa: E402
from typer.testing import CliRunner

from ringdown.cli import app
from ringdown.cli._common import parse_channel
from ringdown.cli._options import READER_OPTIONS, reader_options
from ringdown.inspection.limits_file import parse_limits, read_limits

runner = CliRunner()
READING = {
    "analyze": ("analyze",),
    "compare": ("compare",),
    "limits learn": ("limits", "learn"),
    "check": ("check",),
    "moduli": ("moduli",),
}
REPORTING = {"analyze": ("analyze",), "compare": ("compare",), "check": ("check",), "moduli": ("moduli",)}


def _command(path: tuple[str, ...]):
    cmd = typer.main.get_command(app)
    for name in path:
        cmd = cmd.commands[name]
    return cmd


def _options(path):
    return {opt: p for p in _command(path).params for opt in getattr(p, "opts", ())}


# --------------------------------------------------------------------------------------------
# one definition of the shared options


def test_every_reading_command_takes_the_same_reader_options():
    flags = {"channel": "--channel", "column": "--column", "sample_rate": "--sample-rate"}
    assert set(flags) == set(READER_OPTIONS)
    seen = {}
    for name, path in READING.items():
        opts = _options(path)
        for flag in flags.values():
            assert flag in opts, f"{name} lacks {flag}"
            p = opts[flag]
            sig = (p.name, p.help, _type_text(p), p.default)
            assert seen.setdefault(flag, sig) == sig, f"{name} {flag} differs from the shared definition"


def _type_text(param) -> str:
    # typer 0.29 keeps an option's type as `display_type`, typer 0.28 (click's way) as `type`
    return str(getattr(param, "display_type", None) or param.type)


def test_every_windowed_command_takes_the_same_time_window():
    # --start/--end (issue 11) from the one shared definition on analyze, compare, limits learn, check
    for name in ("analyze", "compare", "limits learn", "check"):
        opts = _options(READING[name])
        for flag in ("--start", "--end"):
            assert flag in opts, f"{name} lacks {flag}"
    sigs = {
        (p.name, p.help, _type_text(p))
        for name in ("analyze", "compare", "limits learn", "check")
        for flag in ("--start", "--end")
        for p in [_options(READING[name])[flag]]
    }
    assert len(sigs) == 2, sigs  # one definition each for --start and --end


def test_every_report_command_takes_the_same_header_options():
    for name, path in REPORTING.items():
        opts = _options(path)
        for flag in ("--report", "--title", "--notes", "--serial"):
            assert flag in opts, f"{name} lacks {flag}"


def test_flags_show_no_type_in_help():
    r = runner.invoke(app, ["check", "--help"])
    assert r.exit_code == 0 and "--force" in r.stdout and "<bool>" not in r.stdout


def test_channel_value_turns_digits_into_numbers():
    assert parse_channel("2") == 2 and parse_channel(" 3 ") == 3
    assert parse_channel("accel") == "accel" and parse_channel(None) is None
    assert reader_options("2", None, 51200.0) == {"channel": 2, "sample_rate": 51200.0}


# --------------------------------------------------------------------------------------------
# validated before any work; errors once, on stderr


def test_bad_plot_format_is_refused_before_any_file_is_read(tmp_path):
    r = runner.invoke(
        app, ["analyze", str(tmp_path / "missing.wav"), "--plot", str(tmp_path / "p"), "--plot-format", "jpg"]
    )
    assert r.exit_code == 64  # a usage error (EX_USAGE), see README "Exit statuses"
    assert "--plot-format must be one of png, svg, pdf; got 'jpg'" in r.stderr
    assert "missing.wav" not in r.stderr  # nothing was read
    assert not (tmp_path / "p").exists()


def test_history_plot_format_checked_like_analyze(tmp_path):
    r = runner.invoke(app, ["history", "--db", str(tmp_path / "none.sqlite"), "--plot", str(tmp_path / "run.jpg")])
    assert r.exit_code == 2 and "must be one of png, svg, pdf; got 'jpg'" in r.stderr


def test_error_is_printed_once_on_stderr_only(two_mode_wav, tmp_path):
    r = runner.invoke(app, ["analyze", two_mode_wav, str(tmp_path / "gone.wav"), "--jobs", "1"])
    assert r.exit_code == 2
    assert "gone.wav" not in r.stdout
    assert sum("gone.wav" in ln for ln in r.stderr.splitlines()) == 1


def test_pdf_plots(two_mode_wav, tmp_path):
    r = runner.invoke(app, ["analyze", two_mode_wav, "--plot", str(tmp_path / "p"), "--plot-format", "pdf"])
    assert r.exit_code == 0, r.stderr
    pdfs = sorted((tmp_path / "p").glob("*.pdf"))
    assert pdfs and all(p.read_bytes()[:4] == b"%PDF" for p in pdfs)


# --------------------------------------------------------------------------------------------
# the terminal table


def test_table_has_loss_factor_log_decrement_f_r_and_f_n_uncertainty(two_mode_wav):
    r = runner.invoke(app, ["analyze", two_mode_wav, "--json"])
    m = json.loads(r.stdout)["recordings"][0]["modes"][0]
    r = runner.invoke(app, ["analyze", two_mode_wav])
    lines = r.stdout.splitlines()
    head = lines[1].split()
    for col in ("f_n", "eta", "delta", "f_r"):
        assert any(h.startswith(col) for h in head), head
    row = lines[2].split()
    from ringdown.base.numfmt import fmt_pm

    # f_n with its uncertainty, eta and delta as the JSON holds them, in the one number format
    assert fmt_pm(m["f_n_hz"], m["f_n_hz_u"], digits=7) in row
    assert fmt_pm(m["loss_factor"], m["loss_factor_u"], digits=3) in row
    assert fmt_pm(m["log_decrement"], m["log_decrement_u"], digits=3) in row
    # eta = 2 zeta and delta = beta / f_d (FIELD.md section 1) hold between the printed fields
    assert m["loss_factor"] == pytest.approx(2 * m["zeta"], rel=1e-9)
    assert m["log_decrement"] == pytest.approx(m["beta_per_s"] / m["f_d_hz"], rel=1e-9)


def test_columns_choice(two_mode_wav):
    r = runner.invoke(app, ["analyze", two_mode_wav, "--columns", "f_d,q"])
    assert r.exit_code == 0
    assert r.stdout.splitlines()[1].split() == ["#", "f_d", "[Hz]", "Q"]
    r = runner.invoke(app, ["analyze", two_mode_wav, "--columns", "f_d,bogus"])
    assert r.exit_code == 64 and "unknown column(s) 'bogus'" in r.stderr


# --------------------------------------------------------------------------------------------
# standard input and streaming


def _stereo(path: Path, x: np.ndarray, fs: float, on: int) -> str:
    """A two-channel WAV with the ring-down on channel ``on`` (1-based) and low noise on the other."""
    y = np.zeros((x.size, 2))
    y[:, on - 1] = 0.5 * x / np.max(np.abs(x))
    y[:, 2 - on] = 1e-4 * np.random.default_rng(5).standard_normal(x.size)
    sf.write(str(path), y, int(fs), subtype="PCM_24")
    return str(path)


@pytest.mark.parametrize("kind", ["wav", "csv"])
def test_stdin_reads_wav_and_csv(tmp_path, kind, two_mode_wav):
    if kind == "wav":
        data = Path(two_mode_wav).read_bytes()
    else:
        x, fs = sf.read(two_mode_wav)
        t = np.arange(x.size) / fs
        data = ("time [s],accel\n" + "\n".join(f"{a:.8f},{b:.7g}" for a, b in zip(t, x))).encode()
    r = runner.invoke(app, ["analyze", "-", "--json"], input=data)
    assert r.exit_code == 0, r.stderr
    rec = json.loads(r.stdout)["recordings"][0]
    assert rec["path"] == "-" and rec["sample_rate_hz"] == pytest.approx(16000.0, rel=1e-6)
    # the two modes of the conftest signal: 440 Hz and 1250 Hz, to 0.05 %
    assert [m["f_d_hz"] for m in rec["modes"]] == pytest.approx([440.0, 1250.0], rel=5e-4)


def test_stdin_empty_and_twice(two_mode_wav):
    r = runner.invoke(app, ["analyze", "-"], input=b"")
    assert r.exit_code == 2 and "standard input ('-') is empty" in r.stderr
    r = runner.invoke(app, ["analyze", "-", "-"], input=b"x")
    assert r.exit_code == 64 and "more than once" in r.stderr


def test_jsonl_first_line_arrives_before_the_batch_ends(two_mode_wav, tmp_path):
    # the second input is standard input, written only after the first line has been read: the
    # first result must reach the pipe while the batch is still waiting for its second file
    cmd = [sys.executable, "-c", "from ringdown.cli import main; main()", "analyze", "--jsonl", two_mode_wav, "-"]
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[1])}
    proc = subprocess.Popen(cmd, stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)
    try:
        ready, _, _ = select.select([proc.stdout], [], [], 120)
        assert ready, "no line within 120 s"
        first = json.loads(proc.stdout.readline())
        assert first["path"] == two_mode_wav and len(first["modes"]) == 2
        assert proc.poll() is None  # still running: the batch has not ended
        proc.stdin.write(Path(two_mode_wav).read_bytes())
        proc.stdin.close()
        rest = proc.stdout.read().decode().splitlines()
        assert proc.wait(120) == 0, proc.stderr.read().decode()
    finally:
        if proc.poll() is None:
            proc.kill()
    assert len(rest) == 1 and json.loads(rest[0])["path"] == "-"


def test_json_and_jsonl_exclusive(two_mode_wav):
    r = runner.invoke(app, ["analyze", two_mode_wav, "--json", "--jsonl"])
    assert r.exit_code == 64 and "exclusive" in r.stderr


# --------------------------------------------------------------------------------------------
# multichannel files, and the reader settings kept with the limits


def test_multichannel_note(tmp_path):
    fs = 16000.0
    x = ringdown_modes([(440.0, 12.0, 1.0)], sample_rate=fs, duration_s=1.0, seed=2)
    path = _stereo(tmp_path / "st.wav", x, fs, on=1)
    r = runner.invoke(app, ["analyze", path, "--json"])
    rec = json.loads(r.stdout)["recordings"][0]
    notes = [w for w in rec["warnings"] if w["code"] == "multichannel"]
    assert len(notes) == 1 and "2 channels" in notes[0]["message"] and "'1'" in notes[0]["message"]


def test_limits_keep_the_channel_and_check_uses_it(tmp_path):
    rng = np.random.default_rng(21)
    good = []
    for i in range(5):
        x = sim.synthesize(sim.part_modes(rng, "good"), rng, duration_s=0.5)
        good.append(_stereo(tmp_path / f"g{i}.wav", x, sim.SAMPLE_RATE, on=2))
    crack = _stereo(
        tmp_path / "crack.wav", sim.synthesize(sim.part_modes(rng, "crack"), rng, duration_s=0.5), sim.SAMPLE_RATE, on=2
    )
    lim = tmp_path / "lim.toml"
    r = runner.invoke(app, ["limits", "learn", *good, "-o", str(lim), "--channel", "2", "--jobs", "1"])
    assert r.exit_code == 0, r.output
    text = lim.read_text()
    assert "[reader]\n" in text and "channel = 2" in text
    assert read_limits(lim).reader == {"channel": 2}
    db = str(tmp_path / "h.sqlite")
    # no --channel: the limits' channel 2 is used, the good part passes and the crack fails
    r = runner.invoke(app, ["check", "--limits", str(lim), good[0], crack, "--db", db, "--jobs", "1", "--json"])
    assert r.exit_code == 1, r.output
    verdicts = [x["verdict"] for x in json.loads(r.stdout)["results"]]
    assert verdicts == ["pass", "fail"]
    # --channel 1 overrides it: channel 1 holds only noise, so the part cannot be analysed
    r = runner.invoke(
        app, ["check", "--limits", str(lim), good[0], "--db", db, "--jobs", "1", "--force", "--channel", "1", "--json"]
    )
    assert r.exit_code == 2 and json.loads(r.stdout)["results"][0]["verdict"] == "error"


def test_reader_table_is_checked():
    base = "[[modes]]\nf_hz = [100.0, 110.0]\n"
    assert parse_limits(base + "[reader]\nchannel = 2\nsample_rate = 51200.0\n").reader == {
        "channel": 2,
        "sample_rate": 51200.0,
    }
    assert parse_limits(base).reader == {}
    from ringdown.base.errors import LimitsError

    with pytest.raises(LimitsError, match=r"\[reader\] has unknown key\(s\) \['gain'\]"):
        parse_limits(base + "[reader]\ngain = 2\n")
    with pytest.raises(LimitsError, match="reader.sample_rate must be a number between"):
        parse_limits(base + "[reader]\nsample_rate = -5.0\n")


def test_check_and_learn_read_standard_input(tmp_path):
    line = Path(__file__).resolve().parents[1] / "example_signals" / "line"
    good = sorted(str(p) for p in line.glob("good_0*.wav"))
    lim = tmp_path / "lim.toml"
    # one good part through standard input, the rest as files
    r = runner.invoke(
        app, ["limits", "learn", "-", *good[1:], "-o", str(lim), "--jobs", "2"], input=Path(good[0]).read_bytes()
    )
    assert r.exit_code == 0, r.output
    assert "learned limits from 8 good parts" in r.stdout
    r = runner.invoke(
        app,
        ["check", "--limits", str(lim), "-", "--db", str(tmp_path / "h.sqlite"), "--jsonl"],
        input=(line / "crack.wav").read_bytes(),
    )
    assert r.exit_code == 1, r.output  # the cracked part (example_signals/README.md) fails
    (row,) = [json.loads(x) for x in r.stdout.splitlines()]
    assert row["path"] == "-" and row["verdict"] == "fail"


# flags that a command declares itself because they mean something else there (DEVELOPERS.md,
# "Adding a command"): listen's sound-card input, tap threshold and part-id pattern; history's
# Parquet export (a whole history, not a batch as it arrives)
OWN_MEANING = {
    ("listen", "--channel"),
    ("listen", "--sample-rate"),
    ("listen", "--min-hit-snr-db"),
    ("listen", "--part-id"),
    ("history", "--parquet"),
}


def _shared_aliases():
    """Each flag of cli/_options.py with the help, decls and type of its one definition."""
    import typing

    from ringdown.cli import _options

    out = {}
    for name in _options.__all__:
        alias = getattr(_options, name)
        if typing.get_origin(alias) is not typing.Annotated:
            continue
        info = typing.get_args(alias)[1]
        # in an Annotated alias typer keeps the first flag in `default` (it moves it to the
        # declarations when it reads a command)
        decls = (info.default, *info.param_decls)
        out.setdefault(decls[0], set()).add((decls, info.help))
    return out


def _all_commands():
    root = typer.main.get_command(app)
    for name, cmd in root.commands.items():
        if hasattr(cmd, "commands"):
            for sub, c in cmd.commands.items():
                yield f"{name} {sub}", c
        else:
            yield name, cmd


def test_shared_options_have_one_definition_in_every_command():
    shared = _shared_aliases()
    assert {"--json", "--jobs", "--db", "--station", "--operator", "--report", "--debug"} <= set(shared)
    uses = {}
    for name, cmd in _all_commands():
        for p in cmd.params:
            flag = next((o for o in p.opts if o in shared), None)
            if flag is None or (name, flag) in OWN_MEANING:
                continue
            assert (tuple(p.opts), p.help) in shared[flag] or (tuple(reversed(p.opts)), p.help) in shared[flag], (
                f"{name} {flag} is not the shared definition of cli/_options.py: {p.opts} {p.help!r}"
            )
            uses.setdefault(flag, set()).add(name)
    # the shared options really are shared: --json by six commands, --db by four, --jobs by three
    assert len(uses["--json"]) == 6 and len(uses["--db"]) == 4 and len(uses["--jobs"]) == 3, uses


@pytest.mark.parametrize(
    "args",
    [
        ["analyze", "gone.wav", "--jobs", "0"],
        ["limits", "learn", "gone.wav", "-o", "lim.toml", "-j", "0"],
        ["check", "gone.wav", "--limits", "gone.toml", "--jobs", "0"],
    ],
)
def test_jobs_below_one_is_a_usage_error_everywhere(args, tmp_path, monkeypatch):
    # README "Exit statuses": a bad option value such as --jobs 0 is a usage error (64), found
    # before any file is read (neither the recording nor the limits file is named)
    monkeypatch.chdir(tmp_path)
    r = runner.invoke(app, args)
    assert r.exit_code == 64, r.output
    assert r.stderr.strip() == "ringdown: error: --jobs must be >= 1; got 0"
    assert list(tmp_path.iterdir()) == []  # nothing written (no limits file, no database)
