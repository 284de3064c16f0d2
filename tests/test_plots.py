"""Tests of ringdown.render.plots: every figure draws on a given Axes and on its own, and shows what it says.

The analyses here are built by hand from the result dataclasses around a simulated signal whose
parameters are known exactly (a sum of damped cosines, x = sum A exp(-beta t) cos(2 pi f t);
Rao, Mechanical Vibrations, ch. 2), with seeded noise. The checks are on the artists drawn:
lines, markers, labels and axis units, and on the numbers the figures show (the fitted decay line
must have the slope 20 log10(e) beta dB/s, a textbook relation, quantities.DB_PER_NEPER).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from ringdown.analysis.quantities import DB_PER_NEPER, derive
from ringdown.analysis.results import Analysis, Hit, Mode, ModeTrace, Notice
from ringdown.base.errors import ParameterError
from ringdown.io.recording import Recording

matplotlib = pytest.importorskip("matplotlib")

from ringdown.render import plots  # noqa: E402

FS = 8000.0


# --------------------------------------------------------------------------------------------
# hand-built analyses of simulated signals (invented test data)
# --------------------------------------------------------------------------------------------


def _mode_for(index, f, beta, amp, t_hit, t_end, rng, *, noise, with_peaks=True, dva=False):
    """A Mode whose trace is the exact envelope of ``amp exp(-beta (t - t_hit))`` plus noise."""
    env_rate = 400.0
    t = np.arange(t_hit, t_end, 1.0 / env_rate)
    env = amp * np.exp(-beta * (t - t_hit))
    env = np.abs(env + noise * (rng.standard_normal(t.size) + 1j * rng.standard_normal(t.size)) / math.sqrt(2))
    fit_start = t_hit + 0.02
    # End the window where the decay reaches 10 dB above the noise (FIELD.md s.2, ISO 3382 margin).
    fit_end = min(t_hit + math.log(amp / (noise * 10**0.5)) / beta, t_end - 0.01)
    peaks_t = peaks_v = None
    if with_peaks:
        peaks_t = t_hit + np.arange(1, int((fit_end - t_hit) * f)) / f
        peaks_v = amp * np.exp(-beta * (peaks_t - t_hit)) * (1 + 0.002 * rng.standard_normal(peaks_t.size))
    trace = ModeTrace(
        t_s=t,
        envelope=env,
        fit_start_s=fit_start,
        fit_end_s=fit_end,
        noise_floor=noise,
        fit_amplitude=amp,
        fit_beta_per_s=beta,
        fit_t0_s=t_hit,
        peaks_t_s=peaks_t,
        peaks_value=peaks_v,
    )
    rows = None
    if dva:
        rows = tuple(
            {"amplitude": a, "f_d_hz": f * (1 - 0.001 * a), "beta_per_s": beta * (1 + 2 * a)}
            for a in (0.5, 0.2, 0.08, 0.03, 0.01)
        )
    d = derive(f, beta, f_d_hz_u=0.01 * beta, beta_per_s_u=0.02 * beta)
    return Mode(
        index=index,
        derived=d,
        amplitude=amp,
        snr_db=20 * math.log10(amp / noise),
        method="envelope",
        fit_start_s=fit_start,
        fit_end_s=fit_end,
        cycles_fitted=(fit_end - fit_start) * f,
        band_hz=(f * 0.9, f * 1.1),
        warnings=(),
        damping_vs_amplitude=rows,
        trace=trace,
    )


def make_analysis(
    *,
    modes=((440.0, 3.0, 0.5),),
    n_hits=1,
    clipped=False,
    seed=0,
    keep_samples=True,
    path="bar_A.wav",
    dva=False,
    peaks=True,
):
    """A hand-built Analysis of a simulated ring-down: each mode is (f_d Hz, beta 1/s, amplitude)."""
    rng = np.random.default_rng(seed)
    dur = 2.0
    t = np.arange(int(dur * FS)) / FS
    x = 1e-3 * rng.standard_normal(t.size)
    starts = [0.1 + 0.9 * k for k in range(n_hits)]
    for k, t0 in enumerate(starts):
        on = t >= t0
        scale = 1.0 if k == 0 else 0.6
        for f, beta, amp in modes:
            x[on] += scale * amp * np.exp(-beta * (t[on] - t0)) * np.cos(2 * np.pi * f * (t[on] - t0))
    warnings = ()
    hit_warn = ()
    full_scale = 1.0
    if clipped:
        x *= 2.5
        x = np.clip(x, -1.0, 1.0)
        hit_warn = (Notice("clipped", "the hit reaches full scale; its first 0.05 s were skipped"),)
        warnings = hit_warn
    rec = Recording(x, FS, channel="1", path=path, sha256="ab" * 32, full_scale=full_scale)
    hits = []
    for k, t0 in enumerate(starts):
        end = starts[k + 1] if k + 1 < len(starts) else dur
        w = hit_warn if k == 0 else ((Notice("double_hit", "a second tap 0.9 s after the first"),) if k else ())
        hits.append(
            Hit(
                start_s=t0,
                peak_s=t0 + 0.001,
                peak_value=float(np.max(np.abs(x))),
                snr_db=50.0,
                end_s=end,
                used=(k == 0),
                warnings=w,
            )
        )
    mode_objs = tuple(
        _mode_for(
            i + 1, f, b, a, starts[0], starts[1] if n_hits > 1 else dur, rng, noise=1e-3, with_peaks=peaks, dva=dva
        )
        for i, (f, b, a) in enumerate(modes)
    )
    return Analysis(
        path=path,
        sha256="ab" * 32,
        channel="1",
        sample_rate_hz=FS,
        n_samples=t.size,
        hits=tuple(hits),
        modes=mode_objs,
        warnings=warnings,
        settings={"method": "auto", "min_snr_db": 10.0},
        noise_floor=1e-3,
        recording=rec if keep_samples else None,
    )


THREE_MODES = ((440.0, 3.0, 0.4), (1212.0, 9.0, 0.25), (2900.0, 20.0, 0.15))

CASES = {
    "single": dict(),
    "multi_mode": dict(modes=THREE_MODES),
    "multi_hit": dict(modes=THREE_MODES[:2], n_hits=2),
    "clipped": dict(clipped=True),
}


def _new_axes():
    from matplotlib.figure import Figure

    return Figure().add_subplot()


def _labels(ax):
    return [ln.get_label() for ln in ax.get_lines()]


# --------------------------------------------------------------------------------------------
# plot_recording
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("case", sorted(CASES))
@pytest.mark.parametrize("given_ax", [True, False])
def test_recording_marks_hits_and_windows(case, given_ax):
    a = make_analysis(**CASES[case])
    ax_in = _new_axes() if given_ax else None
    ax = plots.plot_recording(a, ax=ax_in)
    if given_ax:
        assert ax is ax_in
    else:
        assert ax.figure is not None and ax.figure.get_layout_engine() is not None  # constrained layout
    labels = _labels(ax)
    assert "signal" in labels
    windows = [ln for ln in ax.get_lines() if ln.get_label().startswith("mode ")]
    assert len(windows) == len(a.modes)
    for m, ln in zip(a.modes, windows):
        np.testing.assert_allclose(ln.get_xdata(), [m.fit_start_s, m.fit_end_s])
    hit_lines = [ln for ln in ax.get_lines() if (ln.get_gid() or "").startswith("hit-") and "peak" not in ln.get_gid()]
    assert len(hit_lines) == len(a.hits)
    for h, ln in zip(a.hits, hit_lines):
        assert ln.get_xdata()[0] == pytest.approx(h.start_s)
    texts = [t.get_text() for t in ax.texts]
    assert sum("hit" in t for t in texts) == len(a.hits)
    if case == "multi_hit":
        assert any("not used" in t and "double_hit" in t for t in texts)
    assert ax.get_xlabel() == "time, s"
    assert "full scale" in ax.get_ylabel()


def test_recording_marks_clipped_samples():
    a = make_analysis(clipped=True)
    ax = plots.plot_recording(a)
    clip = [ln for ln in ax.get_lines() if ln.get_label() == "clipped samples"]
    assert len(clip) == 1
    # Every marked sample is at full scale (|x| >= 99.9 % of 1.0) by the plot's own rule.
    assert np.all(np.abs(clip[0].get_ydata()) >= 0.999)
    assert any("clipped" in t.get_text() for t in ax.texts)
    # An unclipped recording gets no such marker.
    ax2 = plots.plot_recording(make_analysis())
    assert "clipped samples" not in _labels(ax2)


def test_recording_thins_long_records_but_keeps_extremes():
    a = make_analysis()
    ax = plots.plot_recording(a)
    sig = next(ln for ln in ax.get_lines() if ln.get_label() == "signal")
    y = sig.get_ydata()
    x = a.recording.samples
    assert y.size <= plots._MAX_DRAWN_POINTS < x.size
    # Bucket min/max thinning keeps the global extremes exactly.
    assert y.max() == x.max() and y.min() == x.min()


def test_recording_without_samples_raises():
    a = make_analysis(keep_samples=False)
    with pytest.raises(ParameterError, match="no samples kept for 'bar_A.wav'"):
        plots.plot_recording(a)
    with pytest.raises(ParameterError, match="no samples"):
        plots.plot_spectrum(a)
    with pytest.raises(ParameterError, match="no samples"):
        plots.plot_overview(a)


# --------------------------------------------------------------------------------------------
# plot_spectrum
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("case", sorted(CASES))
@pytest.mark.parametrize("given_ax", [True, False])
def test_spectrum_marks_each_mode_once(case, given_ax):
    a = make_analysis(**CASES[case])
    ax_in = _new_axes() if given_ax else None
    ax = plots.plot_spectrum(a, ax=ax_in)
    if given_ax:
        assert ax is ax_in
    markers = [ln for ln in ax.get_lines() if (ln.get_gid() or "").startswith("marker-mode-")]
    assert len(markers) == len(a.modes)
    for m, ln in zip(a.modes, markers):
        assert ln.get_xdata()[0] == pytest.approx(m.f_d_hz)
        assert f"Q {m.q:.3g}" in ln.get_label()
    assert [t.get_text() for t in ax.texts] == [str(m.index) for m in a.modes]
    assert ax.get_xlabel() == "frequency, Hz"
    assert "dB" in ax.get_ylabel()
    # Distinct markers per mode, so the modes stay apart in greyscale.
    assert len({ln.get_marker() for ln in markers}) == len(markers)


def test_display_spectrum_peaks_at_the_simulated_frequencies():
    # A damped cosine's spectrum peaks at its damped frequency (Lorentzian line, light damping;
    # Inman, Engineering Vibration). Resolution: the zero-padded bin is FS / nfft < 0.1 Hz here.
    rng = np.random.default_rng(3)
    t = np.arange(int(1.5 * FS)) / FS
    x = np.exp(-4 * t) * np.cos(2 * np.pi * 700.0 * t) + 0.3 * np.exp(-6 * t) * np.cos(2 * np.pi * 1900.0 * t)
    x += 1e-4 * rng.standard_normal(t.size)
    f, level = plots.display_spectrum(x, FS)
    assert level.max() == pytest.approx(0.0)
    i = int(np.argmax(level))
    # Half-width of the 4 1/s line is beta/(2 pi) = 0.64 Hz; the taper widens it, 1 Hz covers it.
    assert f[i] == pytest.approx(700.0, abs=1.0)
    hi = (f > 1500) & (f < 2300)
    assert f[hi][np.argmax(level[hi])] == pytest.approx(1900.0, abs=1.0)
    # Second line is 0.3 x the first: about 20 log10(0.3 * 4/6) = -14 dB (peak height ~ A / beta for a
    # Lorentzian); the window and leakage move it, so allow 3 dB.
    assert level[hi].max() == pytest.approx(20 * math.log10(0.3 * 4 / 6), abs=3.0)


# --------------------------------------------------------------------------------------------
# plot_overview
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("case", sorted(CASES))
def test_overview_stacks_recording_and_spectrum(case):
    a = make_analysis(**CASES[case])
    fig = plots.plot_overview(a)
    axes = fig.get_axes()
    assert len(axes) == 2
    assert axes[0].get_xlabel() == "time, s" and axes[1].get_xlabel() == "frequency, Hz"
    png = plots.figure_bytes(fig, fmt="png")
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    assert b"Software" not in png[:200]


# --------------------------------------------------------------------------------------------
# plot_decay, plot_mode
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("given_ax", [True, False])
def test_decay_fit_line_has_the_decay_rate_slope(given_ax):
    a = make_analysis(modes=THREE_MODES)
    for m in a.modes:
        ax_in = _new_axes() if given_ax else None
        ax = plots.plot_decay(m, ax=ax_in)
        if given_ax:
            assert ax is ax_in
        labels = _labels(ax)
        assert labels[:2] == ["envelope", labels[1]] and labels[1].startswith("fit:")
        assert "noise floor" in labels
        fit = ax.get_lines()[1]
        (t0, t1), (y0, y1) = fit.get_xdata(), fit.get_ydata()
        # Slope of the fitted line in dB/s = -20 log10(e) beta (quantities.py table; Rao ch. 2).
        assert (y1 - y0) / (t1 - t0) == pytest.approx(-DB_PER_NEPER * m.beta_per_s, rel=1e-12)
        # 0 dB at the start of the fit window (the plot's documented reference).
        assert y0 == pytest.approx(0.0, abs=1e-9)
        np.testing.assert_allclose([t0, t1], [m.fit_start_s, m.fit_end_s])
        # The shaded window spans the fit window.
        patches = [p for p in ax.patches if p.get_label() == "fit window"]
        assert len(patches) == 1
        # Noise floor sits 20 log10(noise / A) below the window start.
        nf = next(ln for ln in ax.get_lines() if ln.get_label() == "noise floor").get_ydata()[0]
        assert nf == pytest.approx(
            20 * math.log10(m.trace.noise_floor / m.trace.fit_amplitude)
            + DB_PER_NEPER * m.beta_per_s * (m.fit_start_s - m.trace.fit_t0_s),
            rel=1e-9,
        )
        assert ax.get_xlabel() == "time, s" and "dB" in ax.get_ylabel()


def test_plot_mode_has_decay_residual_and_peaks_panels():
    a = make_analysis(modes=THREE_MODES)
    m = a.modes[1]
    fig = plots.plot_mode(m)
    axes = fig.get_axes()
    assert len(axes) == 3
    assert axes[1].get_ylabel() == "residual, dB"
    # The simulated envelope is the fit plus small noise: inside the window, where the SNR is
    # >= 10 dB, residuals stay within a few dB (20 log10(1 + 1/sqrt(10)) = 2.4 dB at 10 dB SNR).
    res = axes[1].get_lines()[1].get_ydata()
    assert res.size > 10 and np.max(np.abs(res)) < 6.0
    peaks_ax = axes[2]
    reg = [ln for ln in peaks_ax.get_lines() if ln.get_label().startswith("regression")]
    assert len(reg) == 1
    # Log decrement delta = beta / f_d (Rao ch. 2; quantities.py table).
    delta = float(reg[0].get_label().split("δ = ")[1].split(" ")[0])
    assert delta == pytest.approx(m.beta_per_s / m.f_d_hz, rel=0.02)
    assert peaks_ax.get_xlabel() == "cycles after the first peak"


def test_plot_mode_without_peaks_has_no_empty_panel():
    a = make_analysis(peaks=False)
    fig = plots.plot_mode(a.modes[0])
    assert len(fig.get_axes()) == 2
    for ax in fig.get_axes():
        assert ax.get_lines()


def test_decay_without_trace_raises():
    m = make_analysis().modes[0].with_updates(trace=None)
    with pytest.raises(ParameterError, match="mode 1 has no trace"):
        plots.plot_decay(m)
    with pytest.raises(ParameterError, match="no trace"):
        plots.plot_mode(m)


# --------------------------------------------------------------------------------------------
# plot_damping_vs_amplitude
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("given_ax", [True, False])
def test_damping_vs_amplitude(given_ax):
    m = make_analysis(dva=True).modes[0]
    ax_in = _new_axes() if given_ax else None
    ax = plots.plot_damping_vs_amplitude(m, ax=ax_in)
    if given_ax:
        assert ax is ax_in
    (beta_line,) = ax.get_lines()
    rows = sorted(m.damping_vs_amplitude, key=lambda r: r["amplitude"])
    np.testing.assert_allclose(beta_line.get_xdata(), [r["amplitude"] for r in rows])
    np.testing.assert_allclose(beta_line.get_ydata(), [r["beta_per_s"] for r in rows])
    assert ax.get_xlabel() == "amplitude, recording units"
    assert ax.get_ylabel().endswith("1/s")
    twin = [o for o in ax.figure.get_axes() if o is not ax and o.bbox.bounds == ax.bbox.bounds]
    assert twin and twin[0].get_ylabel() == "damped frequency, Hz"
    assert twin[0].get_lines()[0].get_marker() != beta_line.get_marker()  # greyscale-safe
    assert len(ax.get_legend().get_texts()) == 2


def test_damping_vs_amplitude_needs_rows():
    m = make_analysis().modes[0]
    with pytest.raises(ParameterError, match="no damping-against-amplitude rows"):
        plots.plot_damping_vs_amplitude(m)
    bad = m.with_updates(damping_vs_amplitude=({"amplitude": 1.0},))
    with pytest.raises(ParameterError, match="need numeric"):
        plots.plot_damping_vs_amplitude(bad)


def test_figure_bytes_formats():
    fig = plots.plot_mode(make_analysis().modes[0])
    svg = plots.figure_bytes(fig, fmt="svg")
    assert svg.lstrip().startswith(b"<?xml") and b"<svg" in svg
    pdf = plots.figure_bytes(fig, fmt="pdf")
    assert pdf.startswith(b"%PDF")
    with pytest.raises(ParameterError, match="one of png, svg, pdf; got 'jpg'"):
        plots.figure_bytes(fig, fmt="jpg")


def test_spread_labels_keeps_close_labels_apart():
    # three modes within 1 % of the axis and one far away: labels end >= the gap apart, in order,
    # inside [0, 1], and a label with room stays where its mode is
    x = np.array([0.500, 0.505, 0.502, 0.9])
    p = plots.spread_labels(x, 0.035)
    order = np.argsort(x)
    assert np.all(np.diff(p[order]) >= 0.035 - 1e-12)
    assert p[3] == pytest.approx(0.9)
    assert np.all((p >= 0) & (p <= 1))
    edge = plots.spread_labels(np.array([0.99, 0.995, 1.0]), 0.035)
    assert edge.max() <= 1.0 - 0.035 / 2 + 1e-12 and np.all(np.diff(edge) >= 0.035 - 1e-12)


def test_import_does_not_load_matplotlib():
    # `import ringdown.render.plots` must stay light: matplotlib is imported inside the functions.
    import subprocess
    import sys

    code = "import sys, ringdown, ringdown.render.plots, ringdown.render.report; print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_no_pyplot_used():
    # Drawing and rendering every kind of figure never imports pyplot (no global figure state).
    import subprocess
    import sys

    code = (
        f"import sys; sys.path.insert(0, {str(__import__('pathlib').Path(__file__).parent)!r})\n"
        "from test_plots import make_analysis, THREE_MODES\n"
        "from ringdown.render import plots, report\n"
        "a = make_analysis(modes=THREE_MODES, dva=True)\n"
        "plots.figure_bytes(plots.plot_overview(a)); plots.figure_bytes(plots.plot_mode(a.modes[0]))\n"
        "plots.plot_damping_vs_amplitude(a.modes[0])\n"
        "print('matplotlib' in sys.modules, 'matplotlib.pyplot' in sys.modules)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["True", "False"]


# --------------------------------------------------------------------------------------------
# real analyses of simulated signals (seeded), through ringdown.analyze
# --------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def real_analysis():
    import ringdown

    analyze = ringdown.analyze
    rng = np.random.default_rng(5)
    t = np.arange(int(2.0 * FS)) / FS
    # Invented two-mode decay: 523 Hz at 4 1/s and 1377 Hz at 11 1/s, noise about 60 dB down.
    x = 0.5 * np.exp(-4 * t) * np.sin(2 * np.pi * 523 * t) + 0.3 * np.exp(-11 * t) * np.sin(2 * np.pi * 1377 * t)
    x = np.concatenate([np.zeros(800), x]) + 5e-4 * rng.standard_normal(t.size + 800)
    return analyze(x, FS)


def test_plots_of_a_real_analysis(real_analysis):
    a = real_analysis
    assert a.error is None and a.modes
    fig = plots.plot_overview(a)
    rec_ax, spec_ax = fig.get_axes()
    assert len([ln for ln in spec_ax.get_lines() if (ln.get_gid() or "").startswith("marker-mode-")]) == len(a.modes)
    assert len([ln for ln in rec_ax.get_lines() if ln.get_label().startswith("mode ")]) == sum(
        1 for m in a.modes if m.fit_start_s is not None
    )
    for m in a.modes:
        if m.trace is None:
            continue
        ax = plots.plot_decay(m)
        fit = ax.get_lines()[1]
        (t0, t1), (y0, y1) = fit.get_xdata(), fit.get_ydata()
        # The drawn line has the slope of the trace's fitted decay rate, 20 log10(e) beta dB/s.
        assert (y1 - y0) / (t1 - t0) == pytest.approx(-DB_PER_NEPER * m.trace.fit_beta_per_s, rel=1e-9)


def test_close_modes_are_drawn_against_the_sum_of_the_fitted_modes():
    # Invented pair 3 Hz apart (1000 Hz at 4 1/s, 1003 Hz at 6 1/s): the band envelope beats.
    # The exact envelope of the simulated pair is |a1 e^{-b1 t} e^{i w1 t} + a2 e^{-b2 t} e^{i(w2 t + 1)}|
    # (analytic signal of a sum of damped sines, FIELD.md section 1); the drawn sum must follow it.
    import ringdown

    fs = 16000.0
    rng = np.random.default_rng(8)
    t = np.arange(int(3.0 * fs)) / fs
    x = 0.5 * np.exp(-4 * t) * np.sin(2 * np.pi * 1000 * t) + 0.4 * np.exp(-6 * t) * np.sin(2 * np.pi * 1003 * t + 1)
    x = np.concatenate([np.zeros(3200), x]) + 1e-4 * rng.standard_normal(t.size + 3200)
    a = ringdown.analyze(x, fs)
    m1 = min(a.modes, key=lambda m: abs(m.f_d_hz - 1000.0))
    assert m1.trace.n_model_modes == 2 and m1.trace.model_envelope is not None
    fig = plots.plot_mode(m1)
    decay_ax, res_ax = fig.get_axes()[:2]
    (sum_line,) = [ln for ln in decay_ax.get_lines() if ln.get_label().startswith("sum of the 2 modes")]
    assert any(ln.get_label().startswith("this mode alone") for ln in decay_ax.get_lines())
    # the drawn sum against the exact envelope, over the first second of the window (beats included)
    ts, db = sum_line.get_xdata(), sum_line.get_ydata()
    tr = m1.trace
    tau = ts - 3200 / fs
    # sin(w t + p) has the analytic signal -i e^{i(w t + p)}; the common -i drops out of the magnitude
    exact = np.abs(0.5 * np.exp((-4 + 2j * np.pi * 1000) * tau) + 0.4 * np.exp((-6 + 2j * np.pi * 1003) * tau + 1j))
    sel = (ts > tr.fit_start_s) & (ts < tr.fit_start_s + 1.0)
    # the drawn curve is in dB re the fit at the window start, with the band's gain: compare shapes
    shape = db[sel] - 20 * np.log10(exact[sel])
    assert np.ptp(shape) < 1.0, np.ptp(shape)  # within 1 dB across beats of ~12 dB depth
    # residual against the sum stays small (it was about +-10 dB against one exponential)
    res = res_ax.get_lines()[-1].get_ydata()
    assert np.max(np.abs(res[: len(res) // 2])) < 1.0
