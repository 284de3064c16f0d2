"""Limits learned from a simulated population of good parts, and checks of good and bad parts.

The population is a three-mass chain (example_signals/make_line_examples.py): its natural
frequencies are the generalised eigenvalues of (K, M) from scipy.linalg.eigh (exact reference);
each part's record is synthesised with seeded noise and analysed by ringdown.analyze.
"""

import math
from dataclasses import replace

import numpy as np
import pytest
from conftest import line_sim as sim  # noqa: E402
from numpy.testing import assert_allclose
from scipy.spatial.distance import mahalanobis as scipy_mahalanobis

from ringdown.analysis.pipeline import analyze as rd_analyze
from ringdown.analysis.quantities import derive
from ringdown.analysis.results import Analysis, Mode
from ringdown.base.errors import LimitsError, ParameterError
from ringdown.inspection.check import check
from ringdown.inspection.learning import learn_limits
from ringdown.inspection.limits import Limits, MahalanobisLimits, ModeLimits
from ringdown.inspection.limits_file import limits_to_toml, parse_limits, read_limits, write_limits
from ringdown.inspection.tolerance import tolerance_k

FS = sim.SAMPLE_RATE


def analysed(rng, kind="good", **kw):
    x = sim.synthesize(sim.part_modes(rng, kind, **kw), rng, duration_s=0.5)
    return rd_analyze(x, FS)


@pytest.fixture(scope="module")
def population():
    rng = np.random.default_rng(1234)
    good = [analysed(rng) for _ in range(30)]
    unseen = [analysed(rng) for _ in range(40)]
    bad = {k: analysed(rng, k) for k in ("crack", "soft", "warm")}
    return good, unseen, bad


@pytest.fixture(scope="module")
def limits(population):
    return learn_limits(population[0])


def hand_mode(index, f_d, zeta, amplitude=0.1):
    f_n = f_d / math.sqrt(1 - zeta**2)
    return Mode(
        index=index,
        derived=derive(f_d, 2 * math.pi * f_n * zeta),
        amplitude=amplitude,
        snr_db=40.0,
        method="envelope",
        fit_start_s=0.0,
        fit_end_s=0.3,
        cycles_fitted=100.0,
    )


def hand_analysis(modes, path="part.wav"):
    ms = tuple(hand_mode(i + 1, f, z, *rest) for i, (f, z, *rest) in enumerate(modes))
    return Analysis(path=path, sha256="0" * 64, channel="1", sample_rate_hz=24000.0, n_samples=24000, modes=ms)


# ---------------------------------------------------------------------------------------------- learning


def test_learned_limits_structure(limits, population):
    good = population[0]
    assert len(limits.modes) == 3
    assert limits.n_parts == 30 and limits.coverage == 0.99 and limits.confidence == 0.95
    assert_allclose(limits.k_factor, tolerance_k(30, coverage=0.99, confidence=0.95))
    assert limits.mahalanobis is not None  # n - p = 30 - 5 >= 10
    assert not any(w.code == "few_parts" for w in limits.warnings)
    # Reference frequencies against the nominal chain (scipy.linalg.eigh, exact for the model);
    # the population scatter is ~0.1 % per part, so the mean of 30 is within ~0.1 % (4 sd).
    nominal = sim.chain_frequencies(sim.MASS_KG, sim.STIFFNESS_N_PER_M)
    assert_allclose([m.f_ref_hz for m in limits.modes], nominal, rtol=1e-3)
    # Windows are mean +- k sd of the parts' own values (ISO 16269-6 form).
    f1 = np.array([a.modes[0].f_d_hz for a in good])
    assert_allclose(
        limits.modes[0].f_hz,
        (f1.mean() - limits.k_factor * f1.std(ddof=1), f1.mean() + limits.k_factor * f1.std(ddof=1)),
        rtol=1e-12,
    )
    # Damping learned in log(zeta): the window is geometric about the geometric mean.
    z1 = np.log([a.modes[0].zeta for a in good])
    lo, hi = limits.modes[0].zeta
    assert_allclose(math.sqrt(lo * hi), math.exp(z1.mean()), rtol=1e-9)
    assert limits.modes[0].ratio is None and limits.modes[1].ratio is not None


def test_few_parts_warn_and_drop_mahalanobis(population):
    lim = learn_limits(population[0][:10])
    codes = [w.code for w in lim.warnings]
    assert "few_parts" in codes and "no_mahalanobis" in codes
    assert lim.mahalanobis is None
    assert any("only 10 good parts" in n for n in lim.notes)


def test_n_modes_option(population):
    assert len(learn_limits(population[0], n_modes=2).modes) == 2
    with pytest.raises(ParameterError, match="n_modes"):
        learn_limits(population[0], n_modes=5)


def test_learn_refuses_bad_input(population):
    good = population[0]
    with pytest.raises(ParameterError, match="at least 3"):
        learn_limits(good[:2])
    failed = Analysis.failed("broken.wav", ParameterError("unreadable"))
    with pytest.raises(ParameterError, match="broken.wav"):
        learn_limits(good[:5] + [failed])
    with pytest.raises(ParameterError, match="coverage"):
        learn_limits(good, coverage=1.5)


def test_mode_missing_in_some_parts_is_not_used(population):
    good = list(population[0][:25])
    good[3] = replace(good[3], modes=good[3].modes[:2])
    lim = learn_limits(good)
    assert len(lim.modes) == 2
    assert any(w.code == "mode_not_in_all_parts" for w in lim.warnings)


# ---------------------------------------------------------------------------------------------- checking


def test_unseen_good_parts_pass_at_about_coverage(limits, population):
    # Each window holds >= 99 % of good parts with 95 % confidence (ISO 16269-6) and the T^2 test
    # rejects 1 % of good parts (Tracy et al. 1992); with 8 windows plus T^2 a good part is falsely
    # rejected with probability of a few percent at most. 40 parts: allow 3 failures
    # (P(>= 4 | q = 0.03) = 0.03).
    results = [check(a, limits) for a in population[1]]
    fails = [r for r in results if r.verdict != "pass"]
    assert len(fails) <= 3, [r.reasons for r in fails]


def test_crack_fails_on_ratio_and_damping(limits, population):
    r = check(population[2]["crack"], limits)
    assert r.verdict == "fail"
    codes = {n.code for n in r.reasons}
    assert codes & {"ratio_above", "ratio_below"}, r.reasons
    assert "zeta_above" in codes
    assert any("frequency ratio of mode" in n.message for n in r.reasons)
    assert any(re_match("damping ratio of mode \\d is [0-9.]+x the upper limit", n.message) for n in r.reasons)
    assert not any(n.code == "uniform_shift" for n in r.notes)


def re_match(pattern, text):
    import re

    return re.search(pattern, text) is not None


def test_wrong_heat_treatment_fails(limits, population):
    r = check(population[2]["soft"], limits)
    assert r.verdict == "fail"
    codes = [n.code for n in r.reasons]
    assert codes.count("f_below") == 3
    assert "shift_too_large" in codes and "zeta_above" in codes
    # all stiffness x 0.97 -> every frequency x sqrt(0.97) = -1.51 % (exact for the chain model)
    assert_allclose(r.uniform_shift, math.sqrt(0.97) - 1, atol=0.003)
    assert any(
        re_match(r"mode 1 at [0-9.]+ Hz is below its window [0-9.]+ to [0-9.]+ Hz", n.message) for n in r.reasons
    )


def test_warm_good_part_passes_on_ratios_and_says_why(limits, population):
    r = check(population[2]["warm"], limits)
    assert r.verdict == "pass", r.reasons
    assert r.notes[0].code == "uniform_shift"
    assert "advisory" in r.notes[0].message and "ratio" in r.notes[0].message
    # 40 K at -0.014 %/K = -0.56 % (FIELD.md section 4, from memory); the part's own scatter adds ~0.1 %.
    assert_allclose(r.uniform_shift, -0.0056, atol=0.002)
    # The absolute windows did fail, so the rule was needed (otherwise this test proves nothing).
    assert any(f.status == "advisory" and f.feature == "f_hz" for f in r.features)


def test_warm_part_fails_without_ratio_windows(limits, population):
    # The rule needs ratio windows: with them removed by hand the absolute windows bind.
    stripped = replace(limits, modes=tuple(replace(m, ratio=None) for m in limits.modes), mahalanobis=None)
    r = check(population[2]["warm"], stripped)
    assert r.verdict == "fail"
    assert "f_below" in {n.code for n in r.reasons}


def test_missing_mode_and_extra_mode():
    lim = parse_limits(
        "[[modes]]\nf_hz = [990.0, 1010.0]\n[[modes]]\nf_hz = [2790.0, 2810.0]\n[[modes]]\nf_hz = [5390.0, 5410.0]\n"
    )
    r = check(hand_analysis([(1000.0, 1e-3, 0.5), (2800.0, 1e-3, 0.3), (4000.0, 1e-3, 0.2)]), lim)
    assert r.verdict == "fail"
    assert [n.message for n in r.reasons] == ["mode 3 missing (no mode within 10 % of 5400.0 Hz)"]
    assert [n.code for n in r.notes] == ["extra_mode"] and "4000.0 Hz" in r.notes[0].message
    weak = check(hand_analysis([(1000.0, 1e-3, 0.5), (2800.0, 1e-3, 0.3), (4000.0, 1e-3, 0.01)]), lim)
    assert not weak.notes  # -34 dB: below the 0.1 (-20 dB) level for an "extra strong" mode


def test_hand_written_windows_only():
    # ASTM E1876 style: frequency windows only, no statistics.
    lim = parse_limits("format_version = 1\n[[modes]]\nf_hz = [1720.0, 1765.0]\n")
    assert check(hand_analysis([(1742.0, 1e-3)]), lim).verdict == "pass"
    r = check(hand_analysis([(1712.4, 1e-3)]), lim)
    assert r.verdict == "fail"
    assert r.reasons[0].message == "mode 1 at 1712.4 Hz is below its window 1720.00 to 1765.00 Hz"


def test_damping_reason_wording():
    lim = parse_limits("[[modes]]\nf_hz = [990.0, 1010.0]\nzeta = [0.0005, 0.0015]\n")
    r = check(hand_analysis([(1000.0, 0.0042)]), lim)
    assert r.reasons[0].message.startswith("damping ratio of mode 1 is 2.8x the upper limit")


def test_error_analysis_is_error():
    lim = parse_limits("[[modes]]\nf_hz = [990.0, 1010.0]\n")
    r = check(Analysis.failed("gone.wav", ParameterError("file not found")), lim)
    assert r.verdict == "error" and "file not found" in r.reasons[0].message


def test_mahalanobis_catches_a_broken_pattern():
    # Two strongly correlated features; a part inside both windows but against the correlation.
    cov = ((1e-6, 0.95e-6), (0.95e-6, 1e-6))
    maha = MahalanobisLimits(
        features=("ratio_2", "log_zeta_1"),
        mean=(2.8, math.log(1e-3)),
        covariance=cov,
        threshold=4.0,
        n_parts=40,
        probability=0.99,
    )
    lim = Limits(
        modes=(ModeLimits(1, 1000.0, (990.0, 1010.0)), ModeLimits(2, 2800.0, (2700.0, 2900.0), ratio=(2.797, 2.803))),
        mahalanobis=maha,
    )
    a = hand_analysis([(1000.0, 1e-3 * math.exp(-0.002)), (2802.0, 1e-3)])
    r = check(a, lim)
    # Exact reference: scipy.spatial.distance.mahalanobis with the inverse covariance.
    x = [2802.0 / 1000.0, math.log(1e-3 * math.exp(-0.002))]
    ref = scipy_mahalanobis(x, maha.mean, np.linalg.inv(np.array(cov)))
    assert_allclose(r.mahalanobis, ref, rtol=1e-9)
    assert r.verdict == "fail" and r.reasons[-1].code == "mahalanobis"
    assert re_match(r"Mahalanobis distance [0-9.]+ above 4.0", r.reasons[-1].message)


def test_check_rejects_non_limits():
    with pytest.raises(ParameterError, match="Limits"):
        check(hand_analysis([(1000.0, 1e-3)]), {"modes": []})


# ---------------------------------------------------------------------------------------------- files


def test_toml_round_trip(limits, tmp_path, population):
    p = tmp_path / "limits.toml"
    sha = write_limits(limits, p)
    back = read_limits(p)
    assert back.sha256 == sha and back.source == str(p)
    for a, b in zip(limits.modes, back.modes):
        assert_allclose(a.f_hz, b.f_hz, rtol=1e-9)
        assert_allclose(a.zeta, b.zeta, rtol=1e-9)
        if a.ratio:
            assert_allclose(a.ratio, b.ratio, rtol=1e-9)
    assert_allclose(back.mahalanobis.covariance, limits.mahalanobis.covariance, rtol=1e-12)
    assert back.parts == limits.parts and back.n_parts == 30
    # Same verdicts from the file as from memory.
    for a in population[1][:10]:
        assert check(a, back).verdict == check(a, limits).verdict


def test_hand_widened_window_changes_verdict(limits, population, tmp_path):
    text = limits_to_toml(limits)
    lo, hi = limits.modes[0].f_hz
    part = hand_analysis([(lo - 1.0, math.sqrt(limits.modes[0].zeta[0] * limits.modes[0].zeta[1]))])
    one = parse_limits(text.split("[[modes]]")[0] + "[[modes]]" + text.split("[[modes]]")[1])
    assert check(part, one).verdict == "fail"
    widened = text.replace(f"f_hz = [{lo:.10g}", f"f_hz = [{lo - 5.0:.10g}", 1)
    assert widened != text
    two = parse_limits(widened.split("[[modes]]")[0] + "[[modes]]" + widened.split("[[modes]]")[1])
    assert check(part, two).verdict == "pass"


def test_strings_with_quotes_survive(tmp_path):
    lim = Limits(modes=(ModeLimits(1, 1000.0, (990.0, 1010.0)),), parts=(('a "quoted"\\name.wav', "ab"),))
    back = parse_limits(limits_to_toml(lim))
    assert back.parts == (('a "quoted"\\name.wav', "ab"),)


@pytest.mark.parametrize(
    "text,match",
    [
        ("", "no \\[\\[modes\\]\\]"),
        ("[[modes]]\nf_hz = [1765.0, 1720.0]\n", "modes\\[1\\].f_hz .* lo < hi"),
        ("[[modes]]\nf_hz = 1720.0\n", "modes\\[1\\].f_hz must be a pair"),
        ("[[modes]]\nzeta = [0.1, 0.2]\n", "modes\\[1\\] needs f_hz"),
        ("[[modes]]\nf_hz = [1.0, 2.0]\nratio = [1.0, 2.0]\n", "ratio given for the first mode"),
        ("[[modes]]\nf_hz = [1.0, 2.0]\nfreq = 3\n", "unknown key"),
        ("[[modes]]\nf_hz = [5.0, 6.0]\n[[modes]]\nf_hz = [1.0, 2.0]\n", "ascending"),
        ("format_version = 99\n[[modes]]\nf_hz = [1.0, 2.0]\n", "newer"),
        ("[check]\ntolerance = 2\n[[modes]]\nf_hz = [1.0, 2.0]\n", "check.tolerance"),
        ("[[modes]\n", "not valid TOML"),
        (
            "[[modes]]\nf_hz = [1.0, 2.0]\n[mahalanobis]\nfeatures = ['ratio_9']\nmean = [1.0]\n"
            "covariance = [[1.0]]\nthreshold = 3.0\n",
            "mahalanobis.features",
        ),
        (
            "[[modes]]\nf_hz = [1.0, 2.0]\n[mahalanobis]\nfeatures = ['log_zeta_1']\nmean = [1.0]\n"
            "covariance = [[-1.0]]\nthreshold = 3.0\n",
            "positive definite",
        ),
    ],
)
def test_malformed_limits(text, match):
    with pytest.raises(LimitsError, match="limits file 'bad.toml'.*" + match):
        parse_limits(text, source="bad.toml")


def test_missing_limits_file(tmp_path):
    with pytest.raises(LimitsError, match="not found"):
        read_limits(tmp_path / "nope.toml")
