"""Accuracy of each estimator against the Cramer-Rao bound, for one damped sinusoid in noise.

Invented test signal (our own scenario, not a measured part): one mode
``x(t) = A exp(-beta t) cos(2 pi f t + phi)`` starting after a stretch of pre-trigger noise,
in white Gaussian noise of standard deviation ``sigma``, sampled at 8 kHz. The onset SNR is
``A^2 / (2 sigma^2)`` (FIELD.md section 3). For each onset SNR and decay rate, ``TRIALS``
seeded noise draws are analysed with ``ringdown.analyze`` (method "auto", i.e. the matrix pencil;
the envelope and log-decrement estimators come from the same analysis as its cross-checks), and
the root-mean-square error of beta and f is divided by the Cramer-Rao bound of the same record
(``ringdown.analysis.crlb.crlb_damped_sinusoid`` over the samples from the onset to the end of the record).
The rows "pencil alone, wide band" run the matrix-pencil estimator by itself on a band of
half-width ``2 WIDE beta`` (pass band +- WIDE beta, skirts WIDE beta): that measures the estimator,
not the pipeline's choice of band.

Run: ``python tests/benchmarks/accuracy.py [TRIALS] [--only SNR_DB:BETA] [--seed N]``. Prints a
markdown table; asserts nothing. Each row's noise is seeded from its SNR and beta; ``--seed N``
adds N to every row's seed (other draws of the same population, to tell a row's sampling scatter
from a real excess), ``--only 30:30`` runs that one row.
A ratio of 1 is the best any unbiased estimator can do. Every band-based fit discards the start
of the decay while the band filter settles (``settling_time_s``, about 0.7 / sigma for the
Gaussian mask of standard deviation sigma); that costs a factor of about exp(beta * settling time)
in standard deviation, so a narrow band around a mode (settling ~ 0.5 / beta) ends near 1.6 x the
bound however good the estimator is. The pipeline's bands reach about 25 beta on either side.
"""

from __future__ import annotations

import os

# One BLAS thread: the matrices here are small, and OpenBLAS's thread pool on a shared machine made
# the same run up to ~9x slower (measured while writing this benchmark). Must precede numpy's import.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import math
import sys
import time

import numpy as np

import ringdown
from ringdown.analysis.bands import extract_band, settling_time_s, spectrum_of
from ringdown.analysis.crlb import crlb_damped_sinusoid
from ringdown.analysis.estimators import pencil
from ringdown.analysis.estimators.base import Window
from ringdown.base.errors import FitError

FS = 8000.0  # Hz
F_HZ = 1234.5  # off the FFT bin grid on purpose
PRE_S = 0.1  # pre-trigger noise, s
SNRS_DB = (10.0, 20.0, 30.0, 40.0)
BETAS = (3.0, 10.0, 30.0)  # 1/s: Q ~ 1290, 390, 130 at 1234.5 Hz
METHODS = ("pencil", "envelope", "decrement")
#: Band half-width over beta for the estimator-alone rows: pass band F +- 10 beta, skirts 10 beta,
#: so the band filter settles within 0.12 / beta and costs ~12 % of the bound (see module notes).
WIDE = 10.0


def _duration_s(beta: float) -> float:
    """Record length after the onset: 60 dB of decay (T60 = 6.9 / beta), at most 2 s."""
    return min(6.908 / beta, 2.0)


def _one(rng, beta, snr_db):
    dur = _duration_s(beta)
    n_pre = int(PRE_S * FS)
    n = int(dur * FS)
    a = 1.0
    sigma = a / math.sqrt(2.0 * 10.0 ** (snr_db / 10.0))
    phi = rng.uniform(-math.pi, math.pi)
    t = np.arange(n) / FS
    x = np.zeros(n_pre + n)
    x[n_pre:] = a * np.exp(-beta * t) * np.cos(2 * math.pi * F_HZ * t + phi)
    x += sigma * rng.standard_normal(x.shape[0])
    # default options throughout: at 10 dB the broadband level does not rise the default 20 dB,
    # and the pipeline finds the hit in the mode's own band (warning hits_in_band)
    try:
        an = ringdown.analyze(x, FS, method="auto")
    except ringdown.RingdownError:
        an = None  # counted as not found
    out = {}
    if an is not None and an.ok and an.modes:
        mode = min(an.modes, key=lambda m: abs(m.f_d_hz - F_HZ))
        if abs(mode.f_d_hz - F_HZ) < 0.01 * F_HZ:
            out[mode.method] = (mode.f_d_hz, mode.beta_per_s)
            for name, est in mode.cross_checks.items():
                if est is not None and abs(est.f_d_hz - F_HZ) < 0.01 * F_HZ:
                    out[name] = (est.f_d_hz, est.beta_per_s)
    # the matrix pencil alone on a band sized for it, window from settling to settling before the end
    half = WIDE * beta
    band = extract_band(spectrum_of(x, FS), F_HZ - half, F_HZ + half, skirt_hz=half)
    # noise_rms of |z| = sqrt(2 S B) with S = 2 sigma^2 / FS the one-sided density and B the
    # mask's equivalent noise bandwidth
    band = band.with_noise(math.sqrt(2.0 * 2.0 * sigma**2 / FS * band.width_hz))
    ts = settling_time_s(band)
    try:
        ests = pencil.estimate(band, Window(PRE_S + ts, PRE_S + dur - ts, PRE_S))
        e = min(ests, key=lambda e: abs(e.f_d_hz - F_HZ))
        if abs(e.f_d_hz - F_HZ) < 0.01 * F_HZ:
            out["pencil alone, wide band"] = (e.f_d_hz, e.beta_per_s)
    except FitError:
        pass
    bound = crlb_damped_sinusoid(
        n_samples=n, sample_rate=FS, amplitude=a, beta_per_s=beta, f_hz=F_HZ, phase_rad=phi, noise_sigma=sigma
    )
    return out, bound


def main(trials: int = 100, only: tuple[float, float] | None = None, seed: int = 0) -> None:
    t_start = time.perf_counter()
    rows = []
    for snr_db in SNRS_DB if only is None else (only[0],):
        for beta in BETAS if only is None else (only[1],):
            rng = np.random.default_rng(int(1000 * snr_db + beta) + seed)
            got = {m: [] for m in METHODS + ("pencil alone, wide band",)}
            sd_b, sd_f = [], []
            for _ in range(trials):
                out, bound = _one(rng, beta, snr_db)
                sd_b.append(bound.beta_per_s**2)
                sd_f.append(bound.f_hz**2)
                for m in got:
                    if m in out:
                        got[m].append(out[m])
            crlb_b = math.sqrt(np.mean(sd_b))
            crlb_f = math.sqrt(np.mean(sd_f))
            for m in METHODS + ("pencil alone, wide band",):
                r = np.array(got[m]).reshape(-1, 2)
                found = r.shape[0] / trials
                if r.shape[0] == 0:
                    rows.append((snr_db, beta, m, found, None, None, None, None))
                    continue
                err_f = r[:, 0] - F_HZ
                err_b = r[:, 1] - beta
                rows.append(
                    (
                        snr_db,
                        beta,
                        m,
                        found,
                        math.sqrt(np.mean(err_b**2)) / crlb_b,
                        100.0 * np.mean(err_b) / beta,
                        math.sqrt(np.mean(err_f**2)) / crlb_f,
                        np.mean(err_f),
                    )
                )
    elapsed = time.perf_counter() - t_start

    def fmt(v, spec):
        return "-" if v is None else format(v, spec)

    print(
        f"One damped sinusoid at {F_HZ} Hz, {FS:g} Hz sampling, white Gaussian noise, {trials} trials per row"
        + (f", seeds + {seed}." if seed else ".")
    )
    print("RMSE / CRLB: root-mean-square error over the Cramer-Rao standard deviation of the same record.\n")
    print("| onset SNR dB | beta 1/s | method | found | RMSE(beta)/CRLB | bias(beta) % | RMSE(f)/CRLB | bias(f) Hz |")
    print("|---:|---:|---|---:|---:|---:|---:|---:|")
    for snr_db, beta, m, found, rb, bb, rf, bf in rows:
        print(
            f"| {snr_db:g} | {beta:g} | {m} | {found:.2f} | {fmt(rb, '.2f')} | {fmt(bb, '+.2f')} | "
            f"{fmt(rf, '.2f')} | {fmt(bf, '+.2g')} |"
        )
    print(f"\n({elapsed:.0f} s)")


def _args(argv: list[str]) -> dict:
    out: dict = {}
    rest = list(argv)
    while rest:
        a = rest.pop(0)
        if a == "--only":
            snr, beta = rest.pop(0).split(":")
            out["only"] = (float(snr), float(beta))
        elif a == "--seed":
            out["seed"] = int(rest.pop(0))
        else:
            out["trials"] = int(a)
    return out


if __name__ == "__main__":
    main(**_args(sys.argv[1:]))
