"""CLI tests of ``ringdown moduli``: exit codes, output, written files, one-line errors.

The recordings are the shipped invented example (``example_signals/make_moduli_examples.py``,
written with numpy, scipy and soundfile, not by ringdown): a 120 x 30 x 8 mm bar, 224.64 g, true
E = 196 GPa (flexural frequency from Timoshenko beam theory, which E1876's T1 matches within
0.05 % at L/t = 15) and G = 76 GPa (torsional frequency from E1876's own torsion relation).
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import pytest
import typer
from typer.testing import CliRunner

from ringdown.cli.moduli import register

EX = Path(__file__).resolve().parent.parent / "example_signals" / "moduli"
FLEX, TORS = str(EX / "norvale_flex.wav"), str(EX / "norvale_torsion.wav")
BAR = [
    "--length-mm",
    "120",
    "--width-mm",
    "30",
    "--thickness-mm",
    "8",
    "--mass-g",
    "224.64",
    "--u-length-mm",
    "0.02",
    "--u-width-mm",
    "0.01",
    "--u-thickness-mm",
    "0.005",
    "--u-mass-g",
    "0.01",
]


def _app() -> typer.Typer:
    app = typer.Typer()

    @app.callback()
    def _root() -> None:  # keeps "moduli" a sub-command, as in the real app
        pass

    register(app)
    return app


def _run(*args):
    return CliRunner().invoke(_app(), ["moduli", *args])


def test_bar_from_two_recordings_table():
    r = _run(FLEX, TORS, *BAR)
    assert r.exit_code == 0, r.output
    out = r.stdout
    assert "Young's modulus E" in out and "shear modulus G" in out and "Poisson's ratio (measured)" in out
    assert "rule: lowest" in out and "rule: window" in out
    assert "norvale_torsion.wav mode 2" in out


def test_bar_json_recovers_the_invented_truth(tmp_path):
    csv_path, report = tmp_path / "m.csv", tmp_path / "m.html"
    r = _run(FLEX, TORS, *BAR, "--json", "--csv", str(csv_path), "--report", str(report))
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    # truth of the invented bar; E within 0.1 % (T1 against Timoshenko at L/t = 15 and the
    # frequency estimate), G within 0.05 %, mu = 196 / 152 - 1
    assert doc["e_pa"] == pytest.approx(196e9, rel=1e-3)
    assert doc["g_pa"] == pytest.approx(76e9, rel=5e-4)
    assert doc["poisson"] == pytest.approx(196 / 152 - 1, abs=3e-3)
    assert doc["density_kg_per_m3"] == pytest.approx(0.22464 / (0.12 * 0.03 * 0.008), rel=1e-9)
    assert doc["flexural"]["loss_factor"] == pytest.approx(1.0e-3, rel=0.02)  # invented truth
    assert doc["torsional"]["loss_factor"] == pytest.approx(1.4e-3, rel=0.02)
    assert doc["dominant"]["e_pa"] == "thickness_m"
    rows = list(csv.DictReader(open(csv_path, encoding="utf-8")))
    assert [x["quantity"] for x in rows] == ["e_pa", "g_pa", "poisson", "density_kg_per_m3"]
    assert float(rows[0]["value"]) == pytest.approx(doc["e_pa"])
    html = report.read_text(encoding="utf-8")
    assert "Elastic moduli (ASTM E1876)" in html and "Uncertainty budget" in html
    assert "norvale_flex.wav" in html and "<script" not in html


def test_rod_from_frequencies_by_hand():
    # rod: G = 16 m f_t^2 L / (pi D^2) exactly; E = 1.6067 (L^3/D^4) m f^2 T1'
    r = _run(
        "--shape",
        "rod",
        "--length-mm",
        "200",
        "--diameter-mm",
        "10",
        "--mass-g",
        "42.41",
        "--flexural-hz",
        "1126",
        "--u-flexural-hz",
        "0.1",
        "--torsional-hz",
        "7800",
        "--json",
    )
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    g = 16 * 0.04241 * 7800**2 * 0.2 / (math.pi * 0.01**2)
    assert doc["g_pa"] == pytest.approx(g, rel=1e-12)
    assert doc["r_factor"] is None and doc["shape"] == "rod"
    assert 0.25 < doc["poisson"] < 0.4  # an aluminium-like rod (about 70 GPa, 26 GPa)
    assert any(w["code"] == "uncertainty_not_given" for w in doc["warnings"])


def test_assumed_poisson_without_torsion():
    r = _run(FLEX, *BAR, "--poisson", "0.29")
    assert r.exit_code == 0, r.output
    assert "Poisson's ratio (given)" in r.stdout and "shear modulus G" in r.stdout


@pytest.mark.parametrize(
    "args, message",
    [
        (["--length-mm", "-120"], "--length-mm must be a positive number; got -120"),
        (["--mass-g", "0"], "--mass-g must be a positive number; got 0"),
        (["--u-width-mm", "-1"], "--u-width-mm must be >= 0; got -1"),
        (["--shape", "disc"], "--shape must be 'bar' or 'rod'"),
        (["--diameter-mm", "5"], "--diameter-mm is for --shape rod"),
        (["--flexural-hz", "2800"], "give the flexural recording FLEX or --flexural-hz, one of the two"),
        (["--torsional-mode", "9"], "torsional mode 9 is not in"),
        (["--poisson", "0.8"], "poisson must lie in (-1, 0.5]"),
    ],
)
def test_bad_input_is_one_line_exit_2(args, message):
    base = dict(zip(BAR[0::2], BAR[1::2]))
    for k, v in zip(args[0::2], args[1::2]):
        base[k] = v
    flat = [x for kv in base.items() for x in kv]
    r = _run(FLEX, TORS, *flat)
    assert r.exit_code == 2
    err = r.stderr.strip()
    assert len(err.splitlines()) == 1 and err.startswith("ringdown: error: ")
    assert message in err
    assert "Traceback" not in r.output


def test_missing_dimension_and_file(tmp_path):
    r = _run(FLEX, "--length-mm", "120", "--thickness-mm", "8", "--mass-g", "224.64")
    assert r.exit_code == 2 and "--width-mm is required for --shape bar" in r.stderr
    gone = str(tmp_path / "gone.wav")
    r = _run(gone, *BAR)
    assert r.exit_code == 2
    assert len(r.stderr.strip().splitlines()) == 1 and "gone.wav" in r.stderr
