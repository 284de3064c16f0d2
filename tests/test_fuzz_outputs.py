"""Hypothesis fuzzing of the limits parser and of the CSV/JSON writers with hostile strings (issue 12).

Properties (project rules, README "Bad input"):

* the limits parser returns limits whose every window and number is finite, or raises
  LimitsError naming the file, never another exception, and never limits that silently check
  less than the file says;
* every CSV writer writes one row per record whose text cells hold no control or bidi character
  and never start with a formula character (= + - @ tab CR: the quote prefix, OWASP "CSV
  injection"); the text after the prefix is the name shown escaped;
* the JSON writer keeps a hostile name exactly (JSON escapes it) and prints pure ASCII.
"""

from __future__ import annotations

import csv
import io
import json
import math
import re
from contextlib import redirect_stdout

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from ringdown.analysis.results import Analysis, results_document
from ringdown.base.errors import InputError, LimitsError
from ringdown.inspection.limits_file import parse_limits
from ringdown.io.outputs import shown

FORMULA = ("=", "+", "-", "@", "\t", "\r")
HIDDEN = re.compile("[\x00-\x1f\x7f-\x9f\u061c\u200e\u200f\u2028\u2029\u202a-\u202e\u2066-\u2069\ufeff]")

hostile = st.one_of(
    st.text(min_size=1, max_size=40),
    st.sampled_from(
        [
            '=HYPERLINK("x")',
            "+1",
            "-1+2",
            "@SUM(A1)",
            "\tx",
            "\rx",
            "a\nPASS b",
            "x\u202egnp.wav",
            "\u2066x\u2069",
            "\x1b[31mred",
            "\x85next",
            "=\n=",
            "'quoted",
        ]
    ),
    st.builds(lambda a, b: a + b, st.sampled_from(FORMULA), st.text(max_size=10)),
)

# ----------------------------------------------------------------------------------------------
# the limits parser

BASE = """format_version = 1
[check]
tolerance = 0.1
[[modes]]
f_hz = [1480.0, 1520.0]
zeta = [0.0005, 0.0011]
[[modes]]
f_hz = [4150.0, 4250.0]
ratio = [2.79, 2.81]
"""

toml_value = st.recursive(
    st.one_of(
        st.sampled_from(
            [
                "nan",
                "-nan",
                "inf",
                "-inf",
                "+inf",
                "1e400",
                "0",
                "-1",
                "true",
                "false",
                '"text"',
                '""',
                "1979-05-27",
                "0.5",
                "3",
                "1e-320",
            ]
        ),
        st.floats(allow_nan=False, allow_infinity=False).map(repr),
        st.text(alphabet=st.characters(blacklist_categories=("Cs",), blacklist_characters='"\\'), max_size=8).map(
            lambda s: '"' + s + '"'
        ),
    ),
    lambda inner: st.one_of(
        st.lists(inner, max_size=4).map(lambda xs: "[" + ", ".join(xs) + "]"),
        st.lists(st.tuples(st.sampled_from(["a", "b", "mean"]), inner), max_size=3).map(
            lambda kv: "{" + ", ".join(f"{k} = {v}" for k, v in dict(kv).items()) + "}"
        ),
    ),
    max_leaves=12,
)

sections = st.sampled_from(
    [
        ("[check]", ["tolerance", "max_uniform_shift", "uniform_shift_tolerance", "tolerence"]),
        ("[[modes]]", ["f_hz", "zeta", "ratio", "f_ref_hz", "index", "stats"]),
        ("[mahalanobis]", ["features", "mean", "covariance", "threshold", "n_parts", "probability"]),
        ("[settings]", ["coverage", "confidence", "k_factor", "n_parts", "notes"]),
        (
            "[analysis]",
            [
                "method",
                "bands",
                "max_modes",
                "min_snr_db",
                "min_hit_snr_db",
                "keep_double_hits",
                "channel",
                "sample_rate",
                "misspelt",
            ],
        ),
    ]
)


def _assert_finite_limits(lim) -> None:
    for m in lim.modes:
        assert math.isfinite(m.f_ref_hz) and m.f_ref_hz > 0
        for w in (m.f_hz, m.zeta, m.ratio):
            if w is not None:
                assert math.isfinite(w[0]) and math.isfinite(w[1]) and w[0] < w[1]
    for v in (lim.tolerance, lim.max_uniform_shift, lim.uniform_shift_tolerance):
        assert math.isfinite(v)
    if lim.mahalanobis is not None:
        mh = lim.mahalanobis
        assert all(math.isfinite(v) for v in mh.mean)
        assert all(math.isfinite(v) for row in mh.covariance for v in row)
        assert math.isfinite(mh.threshold) and mh.threshold > 0
    from ringdown.analysis.pipeline import AnalysisOptions

    opts = {k: v for k, v in lim.analysis_options().items() if k not in ("channel", "column", "sample_rate")}
    AnalysisOptions.from_kwargs(opts)  # every stored analysis option is one the analysis accepts


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(edits=st.lists(st.tuples(sections, st.integers(0, 20), toml_value), min_size=1, max_size=4), bom=st.booleans())
def test_limits_parser_fuzzed_values_fail_closed(edits, bom):
    text = BASE
    for (head, keys), k, value in edits:
        key = keys[k % len(keys)]
        text += f"\n{head}\n{key} = {value}\n"
    if bom:
        text = "\ufeff" + text
    try:
        lim = parse_limits(text, source="fuzz.toml")
    except LimitsError as exc:
        msg = str(exc)
        assert "fuzz.toml" in msg and "\n" not in msg
        return
    _assert_finite_limits(lim)


@settings(max_examples=200, deadline=None)
@given(text=st.text(max_size=300))
def test_limits_parser_fuzzed_text_is_limits_or_one_line(text):
    try:
        lim = parse_limits(text, source="any.toml")
    except LimitsError as exc:
        assert "any.toml" in str(exc)
        return
    _assert_finite_limits(lim)


# ----------------------------------------------------------------------------------------------
# the CSV and JSON writers


def _expected_cell(text: str) -> str:
    out = shown(text)
    return "'" + out if text.startswith(FORMULA) or out.startswith(FORMULA) else out


def _is_number(cell: str) -> bool:
    try:
        float(cell)
        return True
    except ValueError:
        return False


def _read(path) -> list[list[str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.reader(fh))


def _safe_cells(rows) -> None:
    for row in rows:
        for cell in row:
            assert not HIDDEN.search(cell), cell
            assert _is_number(cell) or not cell.startswith(FORMULA), cell


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(names=st.lists(hostile, min_size=1, max_size=4))
def test_analyze_csv_writer_with_hostile_names(tmp_path, names):
    from ringdown.cli.analyze import write_csv

    analyses = [Analysis.failed(n, InputError(f"cannot read {n}")) for n in names]
    out = tmp_path / "a.csv"
    write_csv(analyses, str(out))
    rows = _read(out)
    assert len(rows) == 1 + len(names)
    _safe_cells(rows)
    assert [r[0] for r in rows[1:]] == [_expected_cell(n) for n in names]
    assert [r[-1] for r in rows[1:]] == [_expected_cell(f"cannot read {n}") for n in names]


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(part=hostile, path=hostile, reason=hostile)
def test_check_csv_writer_with_hostile_names(tmp_path, part, path, reason):
    from ringdown.cli.limits import _write_csv
    from ringdown.inspection.limits_file import parse_limits as parse

    lim = parse(BASE)
    row = {
        "part_id": part,
        "path": path,
        "sha256": None,
        "verdict": "fail",
        "skipped": False,
        "reasons": [{"code": "x", "message": reason}],
        "notes": [],
        "features": [],
        "mahalanobis": -1.5,
        "uniform_shift": -0.004,
    }
    out = tmp_path / "c.csv"
    _write_csv([row], lim, str(out))
    rows = _read(out)
    assert len(rows) == 2
    _safe_cells(rows)
    assert rows[1][:2] == [_expected_cell(part), _expected_cell(path)]
    assert rows[1][5:7] == ["-1.5", "-0.004"]  # numbers stay numbers
    assert rows[1][7] == _expected_cell(reason)


@settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(part=hostile, station=hostile, operator=hostile)
def test_history_csv_writer_with_hostile_names(tmp_path, part, station, operator):
    from ringdown.cli.history import _write_csv
    from ringdown.inspection.store import StoredResult

    rec = StoredResult(
        id=1,
        kind="check",
        part_id=part,
        path="p.wav",
        sha256=None,
        tested_utc="2026-01-01T00:00:00Z",
        station=station,
        operator=operator,
        tool_version="0",
        limits_sha256=None,
        verdict="pass",
        reasons=(),
        notes=(),
        mahalanobis=None,
        uniform_shift=None,
        error=None,
        settings={},
    )
    out = tmp_path / "h.csv"
    _write_csv([rec], str(out))
    rows = _read(out)
    assert len(rows) == 2
    _safe_cells(rows)
    assert [rows[1][2], rows[1][6], rows[1][7]] == [
        _expected_cell(part),
        _expected_cell(station),
        _expected_cell(operator),
    ]


@settings(max_examples=150, deadline=None)
@given(names=st.lists(hostile, min_size=1, max_size=4))
def test_json_writer_keeps_hostile_names_exactly_in_ascii(names):
    from ringdown.cli._common import print_json

    buf = io.StringIO()
    with redirect_stdout(buf):
        print_json(results_document([Analysis.failed(n, InputError("bad")) for n in names]))
    text = buf.getvalue()
    assert text.isascii()  # no raw control or bidi character can reach a terminal or parser
    assert [r["path"] for r in json.loads(text)["recordings"]] == names


@pytest.mark.parametrize(
    "text, want",
    [
        ("a\nb", "a\\nb"),
        ("x\u202ey", "x\\u202ey"),
        ("\x1b[31m", "\\x1b[31m"),
        ("tab\there", "tab\\there"),
        ("plain ü ñ 中", "plain ü ñ 中"),
    ],
)
def test_shown_escapes_control_and_bidi_only(text, want):
    assert shown(text) == want
