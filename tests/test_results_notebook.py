"""Results in a notebook and back from JSON: short reprs, an HTML view, a DataFrame, from_dict.

The analyses are of a simulated two-mode decay (exact damped sinusoids, seeded noise), so the
round trip is checked on a record with hits, cross-checks and warnings in it.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

import ringdown
from ringdown.analysis.quantities import Derived
from ringdown.analysis.results import Analysis, Mode, mode_keys

FS = 48_000.0


def _decay(n_hits: int = 1) -> np.ndarray:
    # two modes: 612 Hz with zeta 0.002 and 1510 Hz with zeta 0.004 (invented), white noise 1e-4
    rng = np.random.default_rng(5)
    t = np.arange(int(0.8 * FS)) / FS
    one = sum(
        a * np.exp(-2 * np.pi * f * z * t) * np.sin(2 * np.pi * f * np.sqrt(1 - z * z) * t)
        for a, f, z in ((1.0, 612.0, 0.002), (0.5, 1510.0, 0.004))
    )
    pre = np.zeros(int(0.05 * FS))
    x = np.concatenate([pre, *([one] * n_hits)])
    return x + 1e-4 * rng.standard_normal(x.size)


@pytest.fixture(scope="module")
def analysis() -> Analysis:
    a = ringdown.analyze(_decay(2), FS)
    assert a.ok and len(a.modes) >= 2
    return a


def test_repr_is_short_and_holds_no_arrays(analysis):
    # the samples and traces (tens of thousands of numbers) are not printed (issue 13: < 1 kB)
    text = repr(analysis)
    assert len(text) < 1000, len(text)
    assert "array" not in text and "611.99" in text  # f_d = 612 sqrt(1 - 0.002^2) Hz
    for m in analysis.modes:
        assert len(repr(m)) < 1000 and "array" not in repr(m)
    for h in analysis.hits:
        assert len(repr(h)) < 1000
    assert len(repr(Analysis.failed("x.wav", ringdown.InputError("broken " * 500)))) < 1000


def test_repr_caps_the_mode_list():
    d = Derived(*([1.0, 0.1] * 10))
    modes = tuple(
        Mode(
            index=i,
            derived=d,
            amplitude=1.0,
            snr_db=30.0,
            method="envelope",
            fit_start_s=0.0,
            fit_end_s=1.0,
            cycles_fitted=10.0,
        )
        for i in range(1, 41)
    )
    a = Analysis(path="many.wav", sha256=None, channel="1", sample_rate_hz=FS, n_samples=48000, modes=modes)
    text = repr(a)
    assert len(text) < 1000 and "32 more" in text


def test_round_trip_through_json(analysis):
    d = analysis.to_dict()
    back = Analysis.from_dict(json.loads(json.dumps(d)))
    assert back.to_dict() == d
    assert back.recording is None and all(m.trace is None for m in back.modes)
    assert back.modes[0].f_d_hz == analysis.modes[0].f_d_hz
    assert back.modes[0].cross_checks.keys() == analysis.modes[0].cross_checks.keys()
    assert [len(h.rejected) for h in back.hits] == [len(h.rejected) for h in analysis.hits]


def test_round_trip_of_a_failure():
    a = Analysis.failed("gone.wav", ringdown.InputError("cannot read 'gone.wav': no such file"), settings={"x": 1})
    assert Analysis.from_dict(a.to_dict()).to_dict() == a.to_dict()


def test_round_trip_of_the_cli_json(tmp_path, analysis):
    # the document `ringdown analyze --json` prints: each recording becomes an Analysis again
    doc = json.loads(json.dumps(ringdown.results_document([analysis])))
    assert [Analysis.from_dict(r).to_dict() for r in doc["recordings"]] == [analysis.to_dict()]


def test_html_view(analysis):
    html = analysis._repr_html_()
    assert html.count("<table") == 2 and "<tr>" in html
    # the damped frequency of mode 1, written by the one formatter (value(u) form)
    assert ringdown.render_report is not None
    from ringdown.base.numfmt import fmt_pm

    m = analysis.modes[0]
    assert fmt_pm(m.f_d_hz, m.f_d_hz_u) in html
    failed = Analysis.failed("a<b>.wav", ringdown.InputError("bad <file>"))._repr_html_()
    assert "<table" not in failed and "&lt;file&gt;" in failed and "a&lt;b&gt;.wav" in failed


def test_dataframe(analysis):
    pd = pytest.importorskip("pandas")
    df = analysis.to_dataframe()
    assert isinstance(df, pd.DataFrame)
    assert len(df) == len(analysis.modes)
    assert df.columns[0] == "path"
    for k in mode_keys():
        if k not in ("band_hz", "warnings", "cross_checks", "damping_vs_amplitude"):
            assert k in df.columns
    np.testing.assert_array_equal(df["f_d_hz"].to_numpy(), [m.f_d_hz for m in analysis.modes])
    assert df["band_lo_hz"].iloc[0] == analysis.modes[0].band_hz[0]
    empty = Analysis.failed("x.wav", ringdown.InputError("no")).to_dataframe()
    assert len(empty) == 0 and list(empty.columns) == list(df.columns)


def test_mode_attributes_are_declared(analysis):
    # explicit read-through attributes instead of __getattr__: dir() and the class show them
    m = analysis.modes[0]
    from dataclasses import fields

    for f in fields(Derived):
        assert f.name in dir(Mode)
        assert getattr(m, f.name) == getattr(m.derived, f.name)
    assert not hasattr(Mode, "__getattr__")
    with pytest.raises(AttributeError):
        m.not_a_quantity  # noqa: B018


def test_condition_mode_attributes_cover_the_quantities():
    from ringdown.treatment.compare import QUANTITIES, ConditionMode

    assert not hasattr(ConditionMode, "__getattr__")
    values = {q: float(i) for i, q in enumerate(QUANTITIES)}
    unc = {q: 0.1 * i for i, q in enumerate(QUANTITIES)}
    cm = ConditionMode("before", 3, 3, values, unc, None, (), (), ())
    for q in QUANTITIES:
        assert getattr(cm, q) == values[q] and getattr(cm, q + "_u") == unc[q]
