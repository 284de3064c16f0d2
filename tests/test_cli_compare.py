"""CLI tests of ``ringdown compare``: exit codes, output shape, written files.

Fixture recordings are written here with numpy + soundfile (not by ringdown): sums of
exponentially decaying sinusoids x(t) = sum A exp(-beta t) cos(2 pi f t), beta = 2 pi zeta f_n
(Rao, Mechanical Vibrations, ch. 2), with seeded white noise.
"""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest
import soundfile as sf
import typer
from typer.testing import CliRunner

from ringdown.cli.compare import register

FS = 16000  # Hz


def _app() -> typer.Typer:
    app = typer.Typer()

    @app.callback()
    def _root() -> None:  # keeps "compare" a sub-command, as in the real app
        pass

    register(app)
    return app


def _tap(path, modes, seed):
    """Write one tap: modes is [(f_d Hz, zeta, amplitude)], 0.05 s lead-in, 1 s long, 16-bit."""
    rng = np.random.default_rng(seed)
    n = FS
    t = np.arange(n) / FS - 0.05
    x = np.zeros(n)
    for f, z, a in modes:
        a = a * math.exp(0.05 * rng.standard_normal())
        z = z * math.exp(0.03 * rng.standard_normal())  # repeat-to-repeat scatter of damping
        beta = 2 * math.pi * z * f / math.sqrt(1 - z * z)
        x += np.where(t >= 0, a * np.exp(-beta * np.clip(t, 0, None)) * np.cos(2 * math.pi * f * t), 0.0)
    x += 1e-3 * rng.standard_normal(n)
    sf.write(path, x, FS, subtype="PCM_16")
    return str(path)


BEFORE = [(500.0, 0.002, 0.4), (1300.0, 0.002, 0.2)]
AFTER = [(490.0, 0.006, 0.4), (1290.0, 0.006, 0.2)]  # damping x3, frequencies down 1-2 %


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("cmp")
    (d / "before").mkdir()
    (d / "after").mkdir()
    b = [_tap(d / "before" / f"b{k}.wav", BEFORE, 10 + k) for k in range(3)]
    a = [_tap(d / "after" / f"a{k}.wav", AFTER, 20 + k) for k in range(3)]
    return d, b, a


def _args(side, paths):
    out = []
    for p in paths:
        out += [f"--{side}", p]
    return out


def test_json_document(files):
    _, b, a = files
    r = CliRunner().invoke(_app(), ["compare", *_args("before", b), *_args("after", a), "--json"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert set(doc) == {
        "tool",
        "settings",
        "before",
        "after",
        "modes",
        "unmatched_before",
        "unmatched_after",
        "notices",
    }
    assert doc["settings"]["damping_scale"] == "log_zeta"
    assert doc["settings"]["confidence"] == 0.95 and doc["settings"]["tolerance"] == 0.1
    assert doc["before"]["n_repeats"] == 3 and doc["after"]["n_repeats"] == 3
    assert [round(m["before"]["f_d_hz"]) for m in doc["modes"]] == [500, 1300]
    for m in doc["modes"]:
        assert m["damping"]["verdict"] == "increased"
        assert m["damping"]["test"] == "welch_t"
        # the invented treatment triples zeta; 15 % allows the 3 % per-tap scatter on 3 taps
        assert m["damping"]["ratio"] == pytest.approx(3.0, rel=0.15)
        assert m["damping"]["ratio_low"] < m["damping"]["ratio"] < m["damping"]["ratio_high"]
        assert m["frequency"]["verdict"] == "decreased"
    assert doc["unmatched_before"] == [] and doc["unmatched_after"] == []


def test_table_and_patterns(files):
    d, _, _ = files
    # a folder on one side and a quoted pattern on the other
    r = CliRunner().invoke(
        _app(),
        ["compare", "--before", str(d / "before"), "--after", str(d / "after" / "a*.wav"), "--confidence", "0.9"],
    )
    assert r.exit_code == 0, r.output
    assert "verdict" in r.stdout and "increased" in r.stdout
    assert "90 % intervals" in r.stdout
    assert "repeats: before 3, after 3" in r.stdout


def test_failed_input_gives_exit_2_and_still_reports(files, tmp_path):
    _, b, a = files
    missing = str(tmp_path / "nope.wav")
    r = CliRunner().invoke(_app(), ["compare", *_args("before", [*b, missing]), *_args("after", a), "--json"])
    assert r.exit_code == 2
    doc = json.loads(r.stdout)
    assert len(doc["modes"]) == 2
    failed = [i for i in doc["before"]["inputs"] if i["error"] is not None]
    assert [i["path"] for i in failed] == [missing]
    assert "ringdown: error: before:" in r.stderr


def test_no_usable_side_is_an_error(files, tmp_path):
    _, _, a = files
    r = CliRunner().invoke(_app(), ["compare", "--before", str(tmp_path / "gone.wav"), *_args("after", a)])
    assert r.exit_code == 2
    assert "before: none of the 1 recording" in r.stderr
    assert "Traceback" not in r.output


def test_bad_option_value(files):
    _, b, a = files
    r = CliRunner().invoke(_app(), ["compare", *_args("before", b), *_args("after", a), "--tolerance", "2"])
    assert r.exit_code == 2
    assert "tolerance must lie in" in r.stderr


def test_stray_paths_are_refused_with_a_hint(files):
    _, b, a = files
    r = CliRunner().invoke(_app(), ["compare", "--before", b[0], b[1], "--after", a[0]])
    assert r.exit_code == 64  # a usage error
    assert "give each file its own --before/--after" in r.stderr


def test_csv_plot_report(files, tmp_path):
    d, b, a = files
    # a file name that needs escaping in HTML
    odd = tmp_path / "tap<1>&.wav"
    odd.write_bytes(open(a[0], "rb").read())
    out_csv = tmp_path / "modes.csv"
    out_html = tmp_path / "report.html"
    plot_dir = tmp_path / "plots"
    r = CliRunner().invoke(
        _app(),
        [
            "compare",
            *_args("before", b),
            *_args("after", [str(odd), *a[1:]]),
            "--csv",
            str(out_csv),
            "--plot",
            str(plot_dir),
            "--report",
            str(out_html),
        ],
    )
    assert r.exit_code == 0, r.output
    rows = list(csv.DictReader(open(out_csv, newline="")))
    assert [row["status"] for row in rows] == ["matched", "matched"]
    assert [row["verdict"] for row in rows] == ["increased", "increased"]
    assert (plot_dir / "comparison.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    html_text = out_html.read_text(encoding="utf-8")
    assert "tap&lt;1&gt;&amp;.wav" in html_text
    assert "tap<1>" not in html_text
    assert "data:image/png;base64," in html_text


def test_analysis_options_reach_the_analysis(files):
    # --method / --band are passed to every analysis and recorded in the settings
    _, b, a = files
    r = CliRunner().invoke(
        _app(),
        ["compare", *_args("before", b), *_args("after", a), "--json", "--method", "envelope", "--band", "400:600"],
    )
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert doc["settings"]["analysis_options"]["method"] == "envelope"
    assert doc["settings"]["analysis_options"]["bands"] == [[400.0, 600.0]]
    assert [round(m["before"]["f_d_hz"]) for m in doc["modes"]] == [500]  # only the band given
