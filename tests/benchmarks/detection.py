"""Detection benchmark: which modes of a tap recording ringdown finds, and which it invents.

Invented test population (our own scenario, seeded): each record holds 1-8 modes with Q from 3
to 100 000 (log-uniform), frequencies log-uniform between 40 Hz and 0.4x the sample rate (at
least 3 % apart), amplitudes over 50 dB (log-uniform), random phases; sample rates 8, 16, 44.1
and 48 kHz; pink noise (1/f density, made by shaping white noise in the FFT) at a random level;
half the records have a second tap 0.6-0.8 of the record later with other amplitudes; every
record is quantised to 16 bits after scaling to a random peak level (-1 to -20 dBFS). Truth is
the stated (f_d, beta) of each mode.

A mode is *clearly detectable* when its matched-filter SNR over the first hit,
``A^2 (1 - exp(-2 beta T)) / (4 beta S(f))`` (``ringdown.analysis.detect.mf_snr``, S the one-sided noise
density of the added noise plus the 16-bit quantisation), is at least 30 dB and it completes at
least 10 cycles before its envelope falls to the noise (``ln(d) / (2 beta)`` seconds). It is
*found* when a reported mode lies within ``max(3 beta / pi, 3 u(f_d), 0.2 %)`` of its frequency
[common practice, no source] and is paired with it: true and reported modes are paired one to
one, nearest first (``_pair``), so one broad reported mode is never credited to several true
modes. A reported mode paired with no true mode (none within the tolerance, or a second mode on a
true mode already paired) is a false mode. Coverage: the fraction of found modes whose true f_d
and beta lie within +-2 reported standard uncertainties of the mode paired with them.

Run: ``python tests/benchmarks/detection.py [RECORDS] [NOISE_RECORDS] [--seed N] [--misses]
[--detection spectral|model]`` (default 60 and 200, seed 20261201, and the library's default mode
search ``spectral``; ``python tests/benchmarks/detection.py 1000 500`` for a bigger population).
``--misses`` also lists every clearly detectable mode that was not found (record, f_d, Q, level
below the strongest, matched-filter SNR, cycles, and the nearest reported mode and nearest
rejected candidate with its reason), every false mode, and every found mode whose truth lies
outside +-2u. Prints markdown tables; asserts nothing.
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import math
import sys
import time
from collections import defaultdict

import numpy as np

import ringdown
from ringdown.analysis.detect import mf_snr

RATES = (8000.0, 16000.0, 44100.0, 48000.0)


def pink(rng, n: int, fs: float, density_at_1k: float) -> tuple[np.ndarray, callable]:
    """Pink noise of one-sided density ``density_at_1k * 1000 / f`` (units^2/Hz), and that
    density as a function of frequency (above 10 Hz: flat below, to keep it finite)."""
    white = rng.standard_normal(n)
    spec = np.fft.rfft(white)
    f = np.fft.rfftfreq(n, 1.0 / fs)
    shape = np.sqrt(1000.0 / np.maximum(f, 10.0))
    x = np.fft.irfft(spec * shape, n)
    # white noise of unit variance has one-sided density 2 / fs
    x *= math.sqrt(density_at_1k * fs / 2.0)
    return x, (lambda fr: density_at_1k * 1000.0 / np.maximum(fr, 10.0))


def make_record(rng):
    fs = float(rng.choice(RATES))
    k = int(rng.integers(1, 9))
    dur = float(rng.uniform(1.0, 2.5))
    n = int(dur * fs)
    pre = int(rng.uniform(0.05, 0.15) * fs)
    f_lo, f_hi = 40.0, 0.4 * fs
    freqs: list[float] = []
    while len(freqs) < k:
        f = math.exp(rng.uniform(math.log(f_lo), math.log(f_hi)))
        if all(abs(f - g) > 0.03 * g for g in freqs):
            freqs.append(f)
    modes = []
    for f in freqs:
        q = math.exp(rng.uniform(math.log(3.0), math.log(1e5)))
        beta = math.pi * f / q  # Q = pi f_n / beta for the mode's natural frequency; f_d below
        zeta = 1.0 / (2.0 * q)
        f_d = f * math.sqrt(1.0 - zeta**2)
        amp = 10 ** (-rng.uniform(0.0, 50.0) / 20.0)
        modes.append((f_d, beta, amp, rng.uniform(-math.pi, math.pi), q))
    t = np.arange(n - pre) / fs
    x = np.zeros(n)
    for f_d, beta, amp, ph, _ in modes:
        x[pre:] += amp * np.exp(-beta * t) * np.cos(2 * math.pi * f_d * t + ph)
    second = rng.random() < 0.5
    if second:
        i2 = pre + int(rng.uniform(0.6, 0.8) * (n - pre))
        t2 = np.arange(n - i2) / fs
        g = rng.uniform(0.3, 1.0)
        for f_d, beta, amp, _ph, _ in modes:
            x[i2:] += g * amp * np.exp(-beta * t2) * np.cos(2 * math.pi * f_d * t2 + rng.uniform(-math.pi, math.pi))
    # noise: pink, its level at 1 kHz set so that the strongest mode stands 60-110 dB (matched filter)
    strongest = max(modes, key=lambda m: m[2])
    d_target = 10 ** (rng.uniform(60.0, 110.0) / 10.0)
    s1k = strongest[2] ** 2 / (4 * strongest[1] * d_target) * (max(strongest[0], 10.0) / 1000.0)
    noise, dens = pink(rng, n, fs, s1k)
    x = x + noise
    peak = 10 ** (-rng.uniform(1.0, 20.0) / 20.0)
    scale = peak / float(np.max(np.abs(x)))
    q16 = np.round(x * scale * 32767.0) / 32767.0
    # quantisation noise: uniform, variance lsb^2 / 12, white, in units of x
    lsb = 1.0 / 32767.0 / scale
    q_density = lsb**2 / 12.0 * 2.0 / fs

    def density(fr):
        return dens(fr) + q_density

    t_first = ((n - pre) if not second else (i2 - pre)) / fs
    truth = []
    for f_d, beta, amp, _, q in modes:
        d = mf_snr(amp, beta, t_first, float(density(f_d)))
        cycles = f_d * math.log(max(d, 1.0)) / (2.0 * beta)
        level_db = 20 * math.log10(amp / strongest[2])
        truth.append(
            dict(
                f=f_d,
                beta=beta,
                q=q,
                d_db=10 * math.log10(max(d, 1e-300)),
                cycles=cycles,
                level_db=level_db,
                clear=(10 * math.log10(max(d, 1e-300)) >= 30.0 and cycles >= 10.0),
                taps=2 if second else 1,
            )
        )
    return q16 / scale, fs, truth


def noise_record(rng):
    fs = float(rng.choice(RATES))
    n = int(rng.uniform(1.0, 2.5) * fs)
    if rng.random() < 0.5:
        x = rng.standard_normal(n)
    else:
        x, _ = pink(rng, n, fs, 1.0)
    x = x / np.max(np.abs(x)) * 10 ** (-rng.uniform(1.0, 20.0) / 20.0)
    return np.round(x * 32767.0) / 32767.0, fs


def _tol(m, f):
    return max(3 * m.beta_per_s / math.pi, 3 * (m.f_d_hz_u or 0.0), 0.002 * f)


def _pair(truth: list[dict], modes: list) -> dict:
    """One-to-one pairing of true and reported modes: ``{truth index: mode}``. Candidate pairs are
    those within :func:`_tol`; they are taken in order of ``|f_m - f_true| / tol`` and each true
    and each reported mode is used once (greedy assignment, common practice, no source). A broad
    reported mode's tolerance (3 beta / pi) can span several true modes; it is credited to the
    nearest only, so a mode the analysis did not report is not counted as found through a
    neighbour, nor its error charged to the neighbour's uncertainty."""
    cands = sorted(
        (abs(m.f_d_hz - tr["f"]) / _tol(m, tr["f"]), i, j)
        for i, tr in enumerate(truth)
        for j, m in enumerate(modes)
        if abs(m.f_d_hz - tr["f"]) <= _tol(m, tr["f"])
    )
    pairs: dict = {}
    used: set = set()
    for _, i, j in cands:
        if i not in pairs and j not in used:
            pairs[i] = modes[j]
            used.add(j)
    return pairs


def _describe_miss(i_rec: int, fs: float, tr: dict, modes, rejected, n_hits: int) -> str:
    def near(items, attr):
        return min(items, key=lambda it: abs(getattr(it, attr) - tr["f"]), default=None)

    m = near(modes, "f_d_hz")
    r = near(rejected, "f_hz")
    ms = "-" if m is None else f"{m.f_d_hz:.2f} Hz (Q {m.q:.3g}, {m.fit_path}, {[w.code for w in m.warnings]})"
    rs = "-" if r is None else f"{r.f_hz:.2f} Hz {r.reason}: {r.detail}"
    return (
        f"| {i_rec} | {fs:g} | {n_hits}/{tr['taps']} | {tr['f']:.2f} | {tr['q']:.3g} | {tr['level_db']:.1f} | {tr['d_db']:.1f} | "
        f"{tr['cycles']:.0f} | {ms} | {rs} |"
    )


def main(n_records: int = 60, n_noise: int = 200, seed: int = 20261201, misses: bool = False) -> None:
    rng = np.random.default_rng(seed)
    rows = []
    false_modes = 0
    cover_f, cover_b = [], []
    times = []
    errors = 0
    miss_lines, false_lines, cover_lines, error_lines = [], [], [], []
    for i_rec in range(n_records):
        x, fs, truth = make_record(rng)
        t0 = time.perf_counter()
        try:
            a = ringdown.analyze(x, fs, detection=DETECTION)
            modes = list(a.modes)
            rejected = list(a.rejected)
            n_hits = len(a.hits)
        except ringdown.RingdownError as exc:
            modes, rejected, n_hits = [], [], 0
            errors += 1
            error_lines.append(f"| {i_rec} | {fs:g} | {exc} |")
        times.append(time.perf_counter() - t0)
        pairs = _pair(truth, modes)
        for i_tr, tr in enumerate(truth):
            m = pairs.get(i_tr)
            tr["found"] = m is not None
            rows.append(tr)
            if tr["clear"] and m is None:
                miss_lines.append(_describe_miss(i_rec, fs, tr, modes, rejected, n_hits))
            if m is not None and m.f_d_hz_u and m.beta_per_s_u:
                ok_f = abs(m.f_d_hz - tr["f"]) <= 2 * m.f_d_hz_u
                ok_b = abs(m.beta_per_s - tr["beta"]) <= 2 * m.beta_per_s_u
                cover_f.append(ok_f)
                cover_b.append(ok_b)
                if not (ok_f and ok_b):
                    cover_lines.append(
                        f"| {i_rec} | {tr['f']:.2f} | {tr['q']:.3g} | {tr['d_db']:.1f} | {m.fit_path} | "
                        f"{(m.f_d_hz - tr['f']) / m.f_d_hz_u:+.1f} | {(m.beta_per_s - tr['beta']) / m.beta_per_s_u:+.1f} | "
                        f"{[w.code for w in m.warnings]} |"
                    )
        paired = {id(m) for m in pairs.values()}
        for m in modes:
            if id(m) not in paired:
                false_modes += 1
                tn = min(truth, key=lambda tr: abs(tr["f"] - m.f_d_hz))
                dup = " (a second mode on a paired truth)" if abs(m.f_d_hz - tn["f"]) <= _tol(m, tn["f"]) else ""
                false_lines.append(
                    f"| {i_rec} | {m.f_d_hz:.2f} | {m.q:.3g} | {m.snr_db:.1f} | {m.fit_path} | "
                    f"{tn['f']:.2f} (Q {tn['q']:.3g}, {tn['level_db']:.0f} dB){dup} | {[w.code for w in m.warnings]} |"
                )
    noise_modes = 0
    for _ in range(n_noise):
        x, fs = noise_record(rng)
        try:
            noise_modes += len(ringdown.analyze(x, fs, detection=DETECTION).modes)
        except ringdown.RingdownError:
            pass
    clear = [r for r in rows if r["clear"]]

    def recall(sel):
        return (
            f"{100 * sum(r['found'] for r in sel) / len(sel):.1f} % ({sum(r['found'] for r in sel)}/{len(sel)})"
            if sel
            else "-"
        )

    print(
        f"{n_records} records ({sum(len(r) for r in [rows])} modes, {len(clear)} clearly detectable: matched-filter "
        f"SNR >= 30 dB and >= 10 cycles), seed {seed}; {n_noise} noise-only records.\n"
    )
    print("| population | recall of clearly detectable modes |")
    print("|---|---:|")
    print(f"| all | {recall(clear)} |")
    by_q = defaultdict(list)
    for r in clear:
        by_q[int(math.floor(math.log10(r["q"])))].append(r)
    for dec in sorted(by_q):
        lo = max(3, 10**dec)
        print(f"| Q {lo:g}-{10 ** (dec + 1):g} | {recall(by_q[dec])} |")
    by_lvl = defaultdict(list)
    for r in clear:
        by_lvl[min(int(-r["level_db"] // 10), 4)].append(r)
    for b in sorted(by_lvl):
        print(f"| level {10 * b}-{10 * b + 10} dB below the strongest | {recall(by_lvl[b])} |")
    print()
    print("| figure | value |")
    print("|---|---:|")
    print(f"| false modes per record | {false_modes / n_records:.3f} ({false_modes} in {n_records}) |")
    print(f"| modes in noise-only records | {noise_modes} in {n_noise} |")
    print(f"| coverage of f_d within +-2u | {100 * np.mean(cover_f):.1f} % of {len(cover_f)} |")
    print(f"| coverage of beta within +-2u | {100 * np.mean(cover_b):.1f} % of {len(cover_b)} |")
    print(f"| records with no result | {errors} |")
    print(f"| time per record | median {1e3 * np.median(times):.0f} ms, max {1e3 * np.max(times):.0f} ms |")
    if misses:
        print("\nMissed clearly detectable modes:\n")
        print("| record | fs | hits/taps | f_d Hz | Q | level dB | SNR dB | cycles | nearest mode | nearest rejected |")
        print("|---:|---:|---|---:|---:|---:|---:|---:|---|---|")
        print("\n".join(miss_lines))
        print("\nFalse modes:\n")
        print("| record | f_d Hz | Q | SNR dB | path | nearest truth | warnings |")
        print("|---:|---:|---:|---:|---|---|---|")
        print("\n".join(false_lines))
        print("\nRecords with no result:\n")
        print("| record | fs | error |")
        print("|---:|---:|---|")
        print("\n".join(error_lines))
        print("\nFound modes outside +-2u (error / u):\n")
        print("| record | f_d Hz | Q | SNR dB | path | f_d | beta | warnings |")
        print("|---:|---:|---:|---:|---|---:|---:|---|")
        print("\n".join(cover_lines))


#: Mode search measured: ``--detection model`` for the experimental model-based search.
DETECTION = "spectral"

if __name__ == "__main__":
    argv = sys.argv[1:]
    if "--detection" in argv:
        k = argv.index("--detection")
        DETECTION = argv[k + 1]
        del argv[k : k + 2]
    seed = 20261201
    if "--seed" in argv:
        k = argv.index("--seed")
        seed = int(argv[k + 1])
        del argv[k : k + 2]
    show_misses = "--misses" in argv
    argv = [a for a in argv if a != "--misses"]
    print(f"detection = {DETECTION!r}")
    main(*[int(a) for a in argv], seed=seed, misses=show_misses)
