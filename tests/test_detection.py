"""Mode detection through the whole pipeline, with both searches (the default spectral one and the
model-based ringdown.analysis.detect).

Exact references: analytic damped cosines (FIELD.md section 1) and a 3-DOF chain whose truth is
the complex eigenvalues of its state matrix (numpy.linalg.eig), its response stepped exactly with
scipy.linalg.expm. Invented test signals, seeded noise.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from conftest import ringdown_modes
from scipy import linalg

from ringdown import analyze as _analyze
from ringdown.analysis.results import REJECTION_REASONS
from ringdown.base.errors import NoRingdownError


@pytest.fixture(autouse=True, params=["spectral", "model"])
def detection(request):
    """Every test runs with the default search (``spectral``: spectral peaks, then the residual
    search with the measured modes subtracted) and the experimental model-based one."""
    global _DETECTION
    _DETECTION = request.param
    yield request.param


_DETECTION = "spectral"


def analyze(x, fs, **options):
    """The pipeline with the search under test (see the ``detection`` fixture)."""
    return _analyze(x, fs, detection=_DETECTION, **options)


def _heavy(f_n, zeta):
    w = 2 * math.pi * f_n
    return w * math.sqrt(1 - zeta**2) / (2 * math.pi), zeta * w  # f_d, beta (FIELD.md s. 1)


@pytest.mark.parametrize("f_n", [300.0, 2000.0])
@pytest.mark.parametrize("zeta", [0.05, 0.10, 0.20])
def test_heavily_damped_mode_found_and_measured(f_n, zeta):
    f_d, beta = _heavy(f_n, zeta)
    x = ringdown_modes([(f_d, beta, 1.0, 0.3)], sample_rate=48000.0, duration_s=0.5, snr_db=60.0, seed=1)
    a = analyze(x, 48000.0)
    assert len(a.modes) == 1, [m.f_d_hz for m in a.modes]
    m = a.modes[0]
    assert m.beta_per_s == pytest.approx(beta, rel=0.02)  # issue target: 2 %
    assert m.f_d_hz == pytest.approx(f_d, rel=0.002)  # issue target: 0.2 %
    assert m.fit_path in ("band", "raw")
    # honest: truth within 4 standard uncertainties (a 60 dB record, one draw)
    assert abs(m.beta_per_s - beta) <= 4 * m.beta_per_s_u
    assert abs(m.f_d_hz - f_d) <= 4 * m.f_d_hz_u


def test_q_three_is_fitted_on_the_raw_record():
    f_d, beta = _heavy(2000.0, 0.2)  # Q = 2.5 by 1/(2 zeta)
    a = analyze(
        ringdown_modes([(f_d, beta, 1.0, 0.3)], sample_rate=48000.0, duration_s=0.5, snr_db=60.0, seed=2), 48000.0
    )
    assert [m.fit_path for m in a.modes] == ["raw"]
    assert a.to_dict()["modes"][0]["fit_path"] == "raw"


def _chain_with_local_dashpot():
    """3-DOF fixed-free chain, masses 1 kg, springs 4e6 N/m, a light dashpot at every mass
    (2 N s/m to ground) and one local dashpot (300 N s/m) between masses 1 and 2: damping that is
    not proportional to mass or stiffness, so the modes are complex."""
    m = np.eye(3)
    k = np.array([[8e6, -4e6, 0], [-4e6, 8e6, -4e6], [0, -4e6, 4e6]])
    c = 2.0 * np.eye(3)
    cd = 300.0
    c[0, 0] += cd
    c[1, 1] += cd
    c[0, 1] -= cd
    c[1, 0] -= cd
    return np.block([[np.zeros((3, 3)), np.eye(3)], [-np.linalg.solve(m, k), -np.linalg.solve(m, c)]])


def test_three_dof_chain_with_local_dashpot():
    s = _chain_with_local_dashpot()
    lam = np.linalg.eig(s)[0]  # exact reference: eigenvalues of the state matrix
    lam = lam[lam.imag > 0]
    lam = lam[np.argsort(lam.imag)]
    f_ref, beta_ref = lam.imag / (2 * math.pi), -lam.real
    fs, n_pre, n = 16000.0, 800, 24000
    step = linalg.expm(s / fs)
    state = np.zeros(6)
    state[3] = 1.0  # unit velocity of mass 1
    x = np.zeros(n)
    for i in range(n_pre, n):
        x[i] = state[2]  # displacement of the last mass
        state = step @ state
    x += np.random.default_rng(5).normal(0, 1e-3 * np.max(np.abs(x)), n)
    a = analyze(x, fs)
    got = sorted(a.modes, key=lambda m: m.f_d_hz)
    assert len(got) == 3, [(m.f_d_hz, m.beta_per_s) for m in got]
    for m, f, b in zip(got, f_ref, beta_ref):
        assert m.f_d_hz == pytest.approx(f, rel=2e-3)
        assert m.beta_per_s == pytest.approx(b, rel=0.02)


def test_fast_decay_next_to_slow_mode():
    # a 5 ms decay (beta = 6.9 / 5 ms: 60 dB in 5 ms) at 1500 Hz beside a slow mode at 1000 Hz
    beta_fast = 6.908 / 5e-3
    x = ringdown_modes(
        [(1000.0, 3.0, 1.0), (1500.0, beta_fast, 1.0, 0.5)], sample_rate=48000.0, duration_s=1.0, snr_db=70.0, seed=3
    )
    a = analyze(x, 48000.0)
    f = sorted(m.f_d_hz for m in a.modes)
    assert len(f) == 2, f
    assert f[0] == pytest.approx(1000.0, rel=1e-4) and f[1] == pytest.approx(1500.0, rel=5e-3)


@pytest.mark.parametrize("kind", ["white", "pink"])
def test_noise_only_gives_no_mode(kind):
    fs, n = 16000.0, 32000
    rng = np.random.default_rng(9)
    for _ in range(3):
        w = rng.standard_normal(n)
        if kind == "pink":
            spec = np.fft.rfft(w)
            f = np.fft.rfftfreq(n, 1 / fs)
            w = np.fft.irfft(spec / np.sqrt(np.maximum(f, 10.0)), n)
        try:
            a = analyze(w, fs)
        except NoRingdownError:
            continue
        assert a.modes == ()


def test_rejections_are_named_in_warnings_and_json():
    # four clear modes and max_modes = 2: the two weaker ones are named as rejected
    modes = [(400.0, 5.0, 1.0), (900.0, 8.0, 0.5), (1700.0, 10.0, 0.2), (2600.0, 12.0, 0.1)]
    a = analyze(ringdown_modes(modes, sample_rate=16000.0, duration_s=1.0, snr_db=60.0, seed=4), 16000.0, max_modes=2)
    assert len(a.modes) == 2
    rej = [r for r in a.rejected if r.reason == "max_modes"]
    assert sorted(round(r.f_hz) for r in rej) == [1700, 2600]
    d = json.loads(json.dumps(a.to_dict()))
    assert {r["reason"] for r in d["rejected"]} >= {"max_modes"}
    assert all(set(r) == {"f_hz", "beta_per_s", "snr_db", "reason", "detail", "hit"} for r in d["rejected"])
    assert all(r["reason"] in REJECTION_REASONS for r in d["rejected"])
    msgs = [w.message for w in a.warnings if w.code == "candidate_rejected"]
    assert any("1700" in m for m in msgs) and any("2600" in m for m in msgs)


def test_close_pair_one_half_power_bandwidth_apart():
    # two equal modes 1 half-power bandwidth (beta / pi) apart at 40 dB: two modes, beta within 10 %
    beta = 10.0
    x = ringdown_modes(
        [(1000.0, beta, 1.0), (1000.0 + beta / math.pi, beta, 1.0, 1.0)],
        sample_rate=8000.0,
        duration_s=2.0,
        snr_db=40.0,
        seed=3,
    )
    a = analyze(x, 8000.0)
    assert len(a.modes) == 2, [m.f_d_hz for m in a.modes]
    for m in a.modes:
        assert m.beta_per_s == pytest.approx(beta, rel=0.10)


@pytest.mark.xfail(
    strict=True,
    reason="19 of the 20 modes are found by the default search (2273 Hz, Q 20 and 23 dB down, is "
    "proposed by the broad search of the round after the one that measured 1544 and 2760 Hz, but "
    "its raw fit over 9 ms, the floor of the window rule for a candidate without a measured SNR, "
    "gives beta 258 +- 120 1/s against the true 357 and it is named near_noise) and 16 by the "
    "model search",
)
def test_twenty_modes_40_db_apart():
    rng = np.random.default_rng(1)
    f = np.geomspace(150, 6000, 20)
    q = np.geomspace(20, 2000, 20)
    rng.shuffle(q)
    amp = 10 ** (-np.linspace(0, 40, 20) / 20)
    rng.shuffle(amp)
    modes = [(fi, math.pi * fi / qi, ai, rng.uniform(0, 6)) for fi, qi, ai in zip(f, q, amp)]
    a = analyze(ringdown_modes(modes, sample_rate=16000.0, duration_s=2.0, snr_db=80.0, seed=2), 16000.0)
    found = [m.f_d_hz for m in a.modes]
    missed = [fi for fi, b, *_ in modes if not any(abs(g - fi) < max(b / math.pi, 0.002 * fi) for g in found)]
    assert missed == []


def test_decay_starting_after_the_smoothed_level_onset(detection):
    """A strong lightly damped low mode (48.6 Hz) sets the level's smoothing width to its period
    (~20 ms), so the smoothed level's onset comes ~6 ms before the first sample of the decay,
    and the drift removal bends the pre-trigger by ~30 noise sigma just before it. A band fit
    started at the level's onset saw the band's silence (the 4338 Hz mode was lost as "near
    noise", or its jump was fitted with poles of its own), and a raw fit started on the curved
    pre-trigger lost the 0 dB mode at 261 Hz. Exact truth: the stated parameters (FIELD.md
    section 1); white noise 80 dB below the signal power, seeds 0-2."""
    if detection == "model":
        pytest.skip(
            "the experimental model search names the 48.6 Hz mode unresolved with the 261 Hz one here (not looked into)"
        )
    truth = [(48.577, 0.009655, 0.2, 1.0), (260.977, 85.33, 0.75, 2.2), (4338.569, 88.55, 0.03, -0.7)]
    for seed in range(3):
        x = ringdown_modes(truth, sample_rate=44100.0, duration_s=1.2, pre_s=0.1, snr_db=80.0, seed=seed)
        a = analyze(x, 44100.0)
        assert len(a.modes) == 3, [(m.f_d_hz, m.beta_per_s) for m in a.modes]
        for m, (f, beta, _, _) in zip(a.modes, truth):
            # within 4 standard uncertainties (one draw each; 2 % of beta where u is tiny)
            assert abs(m.f_d_hz - f) <= 4 * m.f_d_hz_u
            assert abs(m.beta_per_s - beta) <= max(4 * m.beta_per_s_u, 0.02 * beta)


def test_cramped_heavily_damped_mode_is_refitted_on_the_record(detection):
    """Damping ratio 20 % at 300 Hz: DC bounds its band, whose mask then settles for ~11 ms,
    four decay times of the mode (exp(beta * 11 ms) ~ 60 in standard deviation). The band fit
    is replaced by the fit on the record from the decay's first sample, whose u is at the
    Cramer-Rao bound of the whole decay (ringdown.analysis.crlb, Kay 1993 ch. 3): within 0.8-1.5
    of it (u is scaled by the residual variance of ~800 boxcar-averaged samples, a few per cent
    either way; 40 seeds gave a scatter of 1.01 and a mean u of 0.99 times the bound for beta);
    the band fit's u(beta) was 40x the bound. Exact truth: f_d = f_n sqrt(1 - zeta^2),
    beta = zeta omega_n (FIELD.md section 1)."""
    from ringdown.analysis.crlb import crlb_damped_sinusoid

    if detection == "model":
        pytest.skip("the refit belongs to the default search")
    fs, snr_db = 48000.0, 60.0
    f_d, beta = _heavy(300.0, 0.2)
    x = ringdown_modes([(f_d, beta, 1.0, 0.3)], sample_rate=fs, duration_s=0.5, snr_db=snr_db, seed=1)
    (m,) = analyze(x, fs).modes
    assert m.fit_path == "raw"
    sigma = math.sqrt(0.5 / 10 ** (snr_db / 10))  # ringdown_modes: A^2/2 over the noise variance
    bound = crlb_damped_sinusoid(
        n_samples=int(0.45 * fs),
        sample_rate=fs,
        amplitude=1.0,
        beta_per_s=beta,
        f_hz=f_d,
        phase_rad=0.3,
        noise_sigma=sigma,
    )
    assert 0.8 * bound.beta_per_s <= m.beta_per_s_u <= 1.5 * bound.beta_per_s
    assert 0.8 * bound.f_hz <= m.f_d_hz_u <= 1.5 * bound.f_hz
    assert abs(m.beta_per_s - beta) <= 3 * m.beta_per_s_u
    assert abs(m.f_d_hz - f_d) <= 3 * m.f_d_hz_u


def _benchmark_record(index: int, seed: int = 20261201):
    """Record ``index`` of the detection benchmark's seeded population
    (tests/benchmarks/detection.py: stated modes, pink noise, 16-bit quantisation) and its truth."""
    import importlib.util
    from pathlib import Path

    path = Path(__file__).parent / "benchmarks" / "detection.py"
    spec = importlib.util.spec_from_file_location("_detection_benchmark", path)
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    rng = np.random.default_rng(seed)
    for _ in range(index):
        bench.make_record(rng)
    return bench.make_record(rng)


def _all_true(a, truth):
    """Every reported mode of ``a`` lies within ``max(3 beta / pi, 0.2 %)`` of a true one
    (``truth``: the benchmark's stated modes; the tolerance is the benchmark's pairing rule,
    tests/benchmarks/detection.py, without its 3 u term, so a wide u cannot excuse a distance):
    no invented mode."""
    for m in a.modes:
        assert min(abs(m.f_d_hz - t["f"]) for t in truth) <= max(3 * m.beta_per_s / math.pi, 0.002 * m.f_d_hz), m


def test_unresolved_envelope_fallback_is_not_a_mode(detection):
    """Record 59 of the benchmark (8 kHz: 44.6 Hz, Q 311 at 0 dB, and 594.6 Hz, Q 23, 43 dB
    down; exact truth: the stated parameters). In a band near 3.3 kHz the pencil found nothing
    and the envelope fit reported in its place gave beta = 38 +- 25 1/s over 12 ms, a decay
    within 2 u of none: it was reported as a mode with no true mode within 2.6 kHz. It is now a
    fit_failed rejection that says so, and every reported mode is a true one."""
    if detection == "model":
        pytest.skip("the rule is tested on the default search")
    x, fs, truth = _benchmark_record(59)
    a = analyze(x, fs)
    _all_true(a, truth)
    assert any(
        r.reason == "fit_failed" and "not resolved from the noise" in r.detail and 3000 < r.f_hz < 3600
        for r in a.rejected
    )


def _found_and_within(a, tr, k_u: float = 3.0):
    """The reported mode paired with the true mode ``tr`` by the benchmark's rule (within
    ``max(3 beta / pi, 3 u(f_d), 0.2 %)`` of its frequency: tests/benchmarks/detection.py),
    checked against the truth within ``k_u`` standard uncertainties in f_d and beta (3 u: a
    miss 1 time in 370 for an honest Gaussian u, common practice, no source)."""
    near = [
        m
        for m in a.modes
        if abs(m.f_d_hz - tr["f"]) <= max(3 * m.beta_per_s / math.pi, 3 * m.f_d_hz_u, 0.002 * tr["f"])
    ]
    assert near, (tr["f"], [round(m.f_d_hz, 2) for m in a.modes])
    m = min(near, key=lambda m: abs(m.f_d_hz - tr["f"]))
    assert abs(m.f_d_hz - tr["f"]) <= k_u * m.f_d_hz_u, (tr["f"], m.f_d_hz, m.f_d_hz_u)
    assert abs(m.beta_per_s - tr["beta"]) <= k_u * m.beta_per_s_u, (tr["beta"], m.beta_per_s, m.beta_per_s_u)
    return m


def _record_mode_found(detection, index, f_true, *, seed=20261201, tol=0.01, part="the residual search"):
    """Benchmark record ``index`` analysed: its true mode at ``f_true`` (within ``tol`` Hz) is
    found within 3 u (:func:`_found_and_within`) and every reported mode is a true one
    (:func:`_all_true`); returns the mode. Skipped for the model search, which ``part`` is not of."""
    if detection == "model":
        pytest.skip(f"{part} belongs to the default search")
    x, fs, truth = _benchmark_record(index, seed=seed)
    a = analyze(x, fs)
    (tr,) = [t for t in truth if abs(t["f"] - f_true) < tol]
    m = _found_and_within(a, tr)
    _all_true(a, truth)
    return m


def test_broad_mode_beside_a_retried_one_is_found(detection):
    """Record 35 of the benchmark (48 kHz, 7 modes; exact truth: the stated parameters): the
    0 dB mode at 2066 Hz (Q 16) is not measured by the first pass (its band fit left it out) and
    is looked for again by the residual search, whose first round measures it; the 3482 Hz mode
    (Q 12, 15 dB down, 1.5 half-power widths of the first away) was hidden under the first
    mode's hump in that round's broad search and never looked for again (later rounds look for
    sharp peaks only). The broad search now runs on the residual of the round after the retried
    candidates are measured, and finds it."""
    assert _record_mode_found(detection, 35, 3482.116, tol=1.0).fit_path == "raw"


def test_broad_peak_within_a_widened_u_is_not_taken_for_a_remnant(detection):
    """Record 31 of the benchmark (48 kHz, two taps; exact truth: the stated parameters): the
    modes at 84, 95 and 102 Hz share a band, their cross-checks disagree, and their u are
    widened to 17-34 Hz (``methods_disagree``). A 16 Hz wide peak of the residual at 152 Hz
    (the mode of Q 9.7, 20 dB down) lay within 3 u of them and was taken for their remnant. A
    remnant of a subtracted mode is as narrow as the mode (beta / pi, or the resolution:
    Lorentzian line, FIELD.md section 1); the peak is now measured, within 3 u of the truth."""
    _record_mode_found(detection, 31, 151.915, tol=0.5)


@pytest.mark.parametrize("seed, index, f_true", [(7, 47, 538.029), (20261201, 42, 41.628)])
def test_sharp_residual_peak_is_not_fitted_with_a_broad_hump(detection, seed, index, f_true):
    """Benchmark records (exact truth: the stated parameters) where the residual search finds a
    sharp peak of a lightly damped mode (538 Hz, Q 76 000, 46 dB down; 41.6 Hz, Q 890, 48 dB
    down) and, in the same round, a broad hump thousands of Hz away (5.7 kHz, Q 7; 261 Hz, Q 3.4).
    The hump's band, many of its widths wide, took the sharp peak into its raw fit, whose short
    window (tens to hundreds of ms) cannot resolve a decay of a few dB per second; the fit was
    dropped as decaying less than 6 dB and the candidate named "fitted as one mode" with the
    hump. Sharp peaks and broad humps are now banded apart: the sharp one is measured in its own
    band, within 3 u of the truth."""
    assert _record_mode_found(detection, index, f_true, seed=seed).fit_path == "band"


def test_raw_fit_far_wider_than_its_peak_is_not_a_mode(detection):
    """Record 18 of the benchmark (48 kHz; exact truth: the stated parameters, no mode above
    10.2 kHz): a 15 Hz wide residual peak at 17.7 kHz, left by the subtraction of the strong
    modes, was fitted on the record as a decay of half-power width 105 Hz (beta 330 1/s) and
    reported as a mode at 17.8 kHz. A decay explains a peak only with about its width (beta / pi,
    Lorentzian line: FIELD.md section 1); a fit ``WIDTH_MISMATCH`` times wider is now named
    ``unresolved`` with that reason, and every reported mode is a true one. Since the 279.6 Hz
    mode of this record is measured (``test_first_pass_band_fit_lost_to_settling_...``) the
    residual no longer holds that peak, so the rule itself is checked on the fit's own numbers:
    beta 330 1/s against the 15 Hz peak is rejected, a decay of the peak's width is kept."""
    if detection == "model":
        pytest.skip("the residual search belongs to the default search")
    from types import SimpleNamespace

    from ringdown.analysis.detect import Candidate
    from ringdown.analysis.pipeline import _raw_doubt

    x, fs, truth = _benchmark_record(18)
    a = analyze(x, fs)
    _all_true(a, truth)
    peak = Candidate(17715.5, math.pi * 14.8, 14.8, None, None, "residual", -2, 0.47)
    wide = SimpleNamespace(f_d_hz=17801.2, beta_per_s=329.2, beta_per_s_u=20.0)
    doubt = _raw_doubt(wide, peak)
    assert doubt is not None and doubt[0] == "unresolved" and "far wider than" in doubt[1]
    # half-power width beta / pi equal to the peak's (Lorentzian line, FIELD.md section 1): a mode
    assert _raw_doubt(SimpleNamespace(f_d_hz=17715.5, beta_per_s=math.pi * 14.8, beta_per_s_u=2.0), peak) is None


def test_band_fit_lost_to_settling_is_refitted_on_the_record(detection):
    """Record 8 of the benchmark (16 kHz; exact truth: the stated parameters): the residual
    search finds the mode at 2387 Hz (Q 12, 32 dB down, beta 629 1/s), but its band filter
    settles when the mode is 11.5 dB above the band noise and the band fit fails (``near_noise``).
    The fit is repeated on the record from the decay's first sample, which holds the whole
    decay, and the mode is found within 3 u of the truth."""
    if detection == "model":
        pytest.skip("the residual search belongs to the default search")
    x, fs, truth = _benchmark_record(8)
    a = analyze(x, fs)
    (tr,) = [t for t in truth if abs(t["f"] - 2386.89) < 0.1]
    assert _found_and_within(a, tr).fit_path == "raw"


def test_first_pass_band_fit_lost_to_settling_is_fitted_on_the_record(detection):
    """Record 18 of the benchmark (48 kHz, 6 modes; exact truth: the stated parameters): the
    first pass's spectral peak at 279.6 Hz (Q 6.2, 8.9 dB below the 10159 Hz mode, beta
    142 1/s) is banded with a drift peak near 10 Hz; the band filter settles when the mode is
    -4.1 dB above its band noise and the band fit fails (``near_noise``). It was named
    ``fit_failed`` and never looked at again. Such a band's candidates are now fitted on the
    record from the decay's first sample once every other mode is subtracted (as the residual
    search does with a band lost to settling), and the mode is found within 3 u of the truth;
    no mode is invented."""
    assert _record_mode_found(detection, 18, 279.65, tol=0.1).fit_path == "raw"


def test_short_raw_fit_holds_the_poles_of_slow_modes(detection):
    """Record 45 of the second benchmark population (seed 7, 16 kHz; exact truth: the stated
    parameters): two broad modes (3609 Hz, Q 16 at 0 dB; 4979 Hz, Q 18) fill a raw-fit window
    of 5.5 ms, in which the measured modes at 383 and 446 Hz complete about two cycles. Carried
    as free poles they wandered (to 0 Hz, and to 404 Hz growing), the covariance came out
    indefinite and both targets were dropped ("no decaying mode was fitted in its band"), and
    with them the 1652 Hz mode 42 dB down. A measured mode with fewer than
    ``detect.MIN_CYCLES`` cycles in the window is now subtracted with its pole held; every
    clearly detectable mode of the record is found within 3 u."""
    if detection == "model":
        pytest.skip("the raw fits of the residual search belong to the default search")
    x, fs, truth = _benchmark_record(45, seed=7)
    a = analyze(x, fs)
    for tr in truth:
        if tr["clear"]:
            _found_and_within(a, tr)


def test_growing_fit_is_named_growing(detection):
    """A 437 Hz component whose amplitude grows as exp(+1 t) (exact: the stated signal) is not a
    decay: every candidate is rejected as fit_failed, and the reason says the fitted pole grows
    (beta = -1 1/s), not just that no decaying mode was found. The raw fit says the same of a
    target that ends growing (exp(+2 t) at 100 Hz)."""
    from ringdown.analysis.estimators import real
    from ringdown.base.errors import FitError

    if detection == "model":
        pytest.skip("the reason text is tested on the default search")
    fs = 8000.0
    t = np.arange(7200) / fs
    x = np.zeros(8000)
    x[800:] = np.exp(1.0 * t) * np.cos(2 * math.pi * 437.0 * t)
    x += 1e-5 * np.random.default_rng(1).standard_normal(8000)
    with pytest.raises(NoRingdownError, match=r"437 Hz \(beta = -1 1/s\) grow, not decay"):
        analyze(x, fs)
    t = np.arange(4000) / fs
    y = np.exp(2.0 * t) * np.cos(2 * math.pi * 100.0 * t + 0.3) + 1e-4 * np.random.default_rng(0).standard_normal(4000)
    nf, npsd = np.linspace(0.0, fs / 2, 129), np.full(129, 2e-8 / fs)
    with pytest.raises(FitError, match=r"100 Hz \(beta = -2 1/s\) growing, not decaying"):
        real.estimate_real(y, fs, t0_s=0.0, poles=[(100.5, 1.0)], n_targets=1, duration_s=0.5, noise_f=nf, noise_p=npsd)


def test_raw_fit_of_a_record_whose_trial_pole_underflowed_prints_nothing(detection, capfd):
    # Record 40 of the benchmark's default population (48 kHz): a raw fit's trial step took one
    # carried pole to beta dt ~ 700, its basis underflowed to zero columns, and LAPACK printed
    # "On entry to DLASCL parameter number 4 had an illegal value" to stderr (at the file
    # descriptor, so capfd, not capsys). A user must see nothing; the record's modes are still
    # measured: every reported mode within 3 u in f_d of a stated one is taken as found, and the
    # strongest stated mode must be among them.
    x, fs, truth = _benchmark_record(40)
    a = analyze(x, fs)
    out, err = capfd.readouterr()
    assert "DLASCL" not in err and err == "" and out == ""
    strongest = max(truth, key=lambda m: m["level_db"])
    assert any(abs(m.f_d_hz - strongest["f"]) <= max(3 * m.f_d_hz_u, 3 * strongest["beta"] / math.pi) for m in a.modes)


def test_broad_mode_whose_tallest_bin_looks_sharp_is_found(detection):
    """Record 10 of the benchmark (48 kHz; exact truth: the stated parameters): a 9623 Hz mode of
    Q 48 (half-power width 202 Hz) 39 dB below the strongest. Its noisy periodogram's tallest bin
    was taken for a sharp peak 0.73 Hz wide, the broad search dropped the hump for the sharp peak
    inside it, the sharp peak's 117 Hz band lost the decay to its settling and the raw fit that
    then found the mode (9621 Hz, beta 630 1/s) was dropped as "far wider than the peak". A sharp
    peak no taller over the hump than its largest noise bin is now taken as the hump's
    (``peaks._ripple_of``); the mode is found within 3 u and every reported mode is a true one."""
    _record_mode_found(detection, 10, 9622.988, part="the broad-peak search")


def test_sharp_mode_on_a_broad_hump_keeps_its_own_peak(detection):
    """A sharp mode (2050 Hz, Q 2000) on a broad one (2000 Hz, Q 10), 34 dB weaker in amplitude,
    in white noise 60 dB below the hump's spectrum (exact truth: the stated parameters). Its line
    stands 12 dB over the hump: within what the largest of the hump's bins would reach were the
    hump noise (``peaks._largest_cell``, ~12.5 dB), far above what noise does to a hump this
    strong (the Rice bound of ``peaks._ripple_of``). So it is no ripple of the hump: the
    spectrum search keeps a sharp peak at it and a broad peak at the hump, and the pipeline
    measures both within 3 u."""
    if detection == "model":
        pytest.skip("the broad peaks feed the default search")
    from ringdown.analysis.peaks import find_peaks

    fs, n = 16000.0, 32000
    t = np.arange(n) / fs
    modes = [(2000.0, math.pi * 2000.0 / 10, 1.0), (2050.0, math.pi * 2050.0 / 2000, 0.02)]
    x = sum(a * np.exp(-b * t) * np.cos(2 * math.pi * f * t) for f, b, a in modes)
    sigma = 1e-4
    x = x + sigma * np.random.default_rng(3).standard_normal(n)
    nf = np.linspace(0, fs / 2, 513)
    peaks = find_peaks(x, fs, noise_psd=(nf, np.full(513, 2 * sigma**2 / fs)))
    sharp = [p for p in peaks if not p.broad and abs(p.f_hz - 2050.0) < 2.0]
    broad = [p for p in peaks if p.broad and abs(p.f_hz - 2000.0) < 100.0]
    assert sharp and broad, [(round(p.f_hz, 1), p.width_hz, p.broad) for p in peaks]
    xr = np.concatenate([sigma * np.random.default_rng(4).standard_normal(4000), x])
    a = analyze(xr, fs)
    for f, b, _ in modes:
        _found_and_within(a, {"f": f, "beta": b})


def test_a_raw_fit_target_it_did_not_keep_is_named_with_its_reason(detection):
    """A raw fit that reaches a target and does not keep it says why (exact truth: the stated
    signal, a 300 Hz decay and a 100 Hz component growing as exp(+2 t)): ``estimate_real``
    returns the decaying target and names the growing one in ``dropped``, and the pipeline's
    matching turns that reason into the candidate's rejection instead of "no decaying mode was
    fitted in its band"."""
    if detection == "model":
        pytest.skip("the raw fit's reasons are tested on the default search")
    from ringdown.analysis.detect import Candidate
    from ringdown.analysis.estimators import real
    from ringdown.analysis.pipeline import _match_candidates

    fs = 8000.0
    t = np.arange(4000) / fs
    rng = np.random.default_rng(0)
    y = np.exp(2.0 * t) * np.cos(2 * math.pi * 100.0 * t + 0.3) + np.exp(-20.0 * t) * np.cos(2 * math.pi * 300.0 * t)
    y += 1e-4 * rng.standard_normal(4000)
    nf, npsd = np.linspace(0.0, fs / 2, 129), np.full(129, 2e-8 / fs)
    dropped = []
    ests = real.estimate_real(
        y, fs, t0_s=0.0, poles=[(100.5, 1.0), (300.5, 19.0)], n_targets=2, duration_s=0.5,
        noise_f=nf, noise_p=npsd, dropped=dropped,
    )  # fmt: skip
    assert [round(e.f_d_hz) for e in ests] == [300] and abs(ests[0].beta_per_s - 20.0) < 0.1
    assert len(dropped) == 1 and dropped[0][0] == 0 and "growing" in dropped[0][1] and "100 Hz" in dropped[0][1]
    c = Candidate(100.5, 1.0, 0.32, 1.0, 1e6, "spectrum")
    _, out = _match_candidates([], [c], False, why={c: ("fit_failed", dropped[0][1])})
    assert [(r.reason, r.detail) for r in out] == [("fit_failed", dropped[0][1])]
    _, out = _match_candidates([], [c], False)
    assert [r.detail for r in out] == ["no decaying mode was fitted in its band"]


@pytest.mark.parametrize("seed", [1, 4, 8, 13])
def test_unresolved_decay_fitted_growing_is_reported_not_failed(detection, seed, monkeypatch):
    """A 180-220 Hz mode of Q 1e5 (beta ~ 0.006 1/s) beside a tap's 1500 Hz mode in white noise,
    1.1 s after a 0.1 s pre-trigger (exact truth: the stated parameters): the record resolves no
    decay (u ~ 0.0025 1/s), and in these draws the band fit's decay rate came out below zero,
    which the pencil named "grow, not decay" (seed 4 then lost the mode; the others fell back
    on another fit of the same band). A growth within 2 u of zero is now read as
    an unresolved decay (``pencil._slow_fit``): the mode is reported with ``decay_unresolved``, a
    positive beta (the mean for beta >= 0 of a truncated normal) and u kept at the likelihood's
    own width, and both f_d and beta lie within 3 u of the truth."""
    if detection == "model":
        pytest.skip("the band fit is shared; tested once on the default search")
    from ringdown.analysis.estimators import pencil

    used = []
    orig = pencil._slow_fit
    monkeypatch.setattr(pencil, "_slow_fit", lambda *a: used.append(1) or orig(*a))
    fs, n, pre = 8000.0, 9600, 800
    rng = np.random.default_rng(seed)
    f = 200.0 + rng.uniform(-20, 20)
    beta = math.pi * f / 1e5  # Q = pi f_d / beta (FIELD.md section 1; f_n ~ f_d at this Q)
    t = np.arange(n - pre) / fs
    x = np.zeros(n)
    x[pre:] = np.exp(-beta * t) * np.cos(2 * math.pi * f * t + rng.uniform(0, 6.28))
    x[pre:] += np.exp(-100 * t) * np.cos(2 * math.pi * 1500 * t)
    x += 0.05 * rng.standard_normal(n)
    a = analyze(x, fs)
    assert used
    m = _found_and_within(a, {"f": f, "beta": beta})
    assert m.beta_per_s > 0 and any(w.code == "decay_unresolved" for w in m.warnings)


_NOT_YET = pytest.mark.xfail(
    strict=True,
    reason="the second-tap statistic's empirical null (retap.REFERENCES) is raised beside this "
    "mode by what the model lacks, and the change stays below RETAP_ALPHA (DEVELOPERS.md, Known gaps)",
)


@pytest.mark.parametrize(
    "seed, index, f_true",
    [
        pytest.param(20261201, 6, 40.446, marks=_NOT_YET),
        (20261201, 26, 79.538),
        pytest.param(20261201, 26, 53.656, marks=_NOT_YET),
        pytest.param(7, 41, 133.090, marks=_NOT_YET),
    ],
)
def test_lightly_damped_mode_a_second_tap_changed_is_not_a_steady_tone(detection, seed, index, f_true):
    """Records of the benchmark with two taps (exact truth: the stated parameters): seed
    20261201 record 6 (40.446 Hz, Q 8.8e4, 37 dB below the strongest), record 26 (79.538 Hz,
    Q 3.2e4, and 53.656 Hz, Q 1.2e4) and seed 7 record 41 (133.090 Hz, Q 3.7e3). Their decay is
    not resolved in the record, and the bound the short pre-trigger sets on a tone at their
    frequency lies above their amplitude, so they were named steady tones. The second tap changes
    their amplitude and phase, which no steady tone does (a linear structure's response to a tap
    is free decays at its modes): they are modes, within 3 u of the truth, with decay_unresolved,
    and no reported mode is invented. Record 26's 79.538 Hz mode passes the test now; the others
    are still named steady tones (xfail: the test's empirical null is too wide beside them)."""
    x, fs, truth = _benchmark_record(index, seed)
    a = analyze(x, fs)
    (tr,) = [t for t in truth if abs(t["f"] - f_true) < 0.01]
    m = _found_and_within(a, tr)
    assert any(w.code == "decay_unresolved" for w in m.warnings)
    _all_true(a, truth)


def test_hum_through_two_taps_stays_a_steady_tone(detection, monkeypatch):
    """Record 6 of the benchmark (seed 20261201, two taps; exact truth: the stated parameters)
    with a 60 Hz hum of amplitude 1e-3 added from its first sample (invented; 52 dB below the
    strongest mode). The hum's fit names it a steady tone in the first hit, so the second-tap
    test looks at it (the spy records it), and the second tap does not change it: no mode within
    1 Hz of 60 Hz, and no reported mode is invented. An earlier form of the test, with no null
    of its own, made it a mode."""
    from ringdown.analysis import retap

    tested = []
    real = retap.phasor_changes

    def spy(x, fs, onsets, skip, comps, held):
        tested.extend(f for f, _ in comps)
        return real(x, fs, onsets, skip, comps, held)

    monkeypatch.setattr(retap, "phasor_changes", spy)
    x, fs, truth = _benchmark_record(6)
    t = np.arange(x.size) / fs
    a = analyze(x + 1e-3 * np.cos(2 * math.pi * 60.0 * t + 0.4), fs)
    assert any(abs(f - 60.0) < 0.1 for f in tested), tested
    assert not [m for m in a.modes if abs(m.f_d_hz - 60.0) < 1.0], a.modes
    _all_true(a, truth)


def test_broad_mode_under_a_broad_mode_is_unveiled_and_fitted_as_a_pair(detection):
    """Record 2 of the benchmark (16 kHz; exact truth: the stated parameters): 3239 Hz, Q 4.7 at
    0 dB and 5819 Hz, Q 3.7, 7.8 dB down (76.8 dB matched-filter SNR). The second showed in the
    spectrum as a shoulder of the first, and only once the first was subtracted as a hump, in a
    round that no longer looked for broad peaks: nothing proposed it, and the first, fitted with
    it in its residual, came out at beta 1953 +- 162 1/s (truth 2165). The round after the first
    broad raw fit now looks for broad peaks once more, and an unveiled hump is fitted on the
    record jointly with the broad mode it lay under (``_pair_refit``): both within 3 u."""
    if detection == "model":
        pytest.skip("the residual search belongs to the default search")
    x, fs, truth = _benchmark_record(2)
    a = analyze(x, fs)
    for f_true in (3239.01, 5818.63):
        (tr,) = [t for t in truth if abs(t["f"] - f_true) < 0.01]
        assert _found_and_within(a, tr).fit_path == "raw"
    _all_true(a, truth)


def test_ripple_bound_takes_a_running_mean_rounded_below_zero():
    """A running mean of non-negative powers (``ndimage.uniform_filter1d``, running sums) can
    round to a tiny negative number where the spectrum is near zero; the ripple bound took its
    square root and a benchmark record stopped with "math domain error". Such a level counts
    as zero (exact: the bound is then the noise's own, ``sigma^2 c``)."""
    from ringdown.analysis.peaks import Peak, _largest_cell, _ripple_of

    f = np.linspace(0.0, 100.0, 101)
    ps, ns = np.full(101, -1e-30), np.full(101, 1e-20)
    bound = 1e-20 * _largest_cell(1, 5.0)
    assert _ripple_of(Peak(50.0, 10 * math.log10(0.99 * bound), 10.0, 1.0), 1, ps, ns, f, 10, 2.0)
    assert not _ripple_of(Peak(50.0, 10 * math.log10(1.01 * bound), 10.0, 1.0), 1, ps, ns, f, 10, 2.0)


def test_sharp_peak_without_a_measured_snr_gets_the_rest_of_the_hit(detection):
    """Record 37 of the second benchmark population (seed 7, 44.1 kHz; exact truth: the stated
    parameters): 123.68 Hz, Q 302 (beta 1.29 1/s), 35 dB below the strongest, 7.4 Hz below a
    Q 2.4e4 mode. Its raw fit's window came from the sharp peak's width (1.35 Hz, the
    resolution's: beta 4.2 1/s) and no SNR: 0.24 s of a decay time of 0.78 s, beta 1.17 +- 1.18
    1/s, named ``near_noise``. Such a target alone now gets the rest of the hit: within 3 u."""
    _record_mode_found(detection, 37, 123.681, seed=7)
