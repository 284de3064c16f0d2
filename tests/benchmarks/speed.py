"""Speed of a whole analysis against the cost of just reading the file and one FFT of it.

Invented test signal (our own scenario): a 2 s, 48 kHz mono WAV of three decaying modes
(440 Hz, 1370 Hz and 3120 Hz; decay rates 4, 9 and 20 1/s) after 50 ms of noise, written with
soundfile to a temporary directory. Times ``ringdown.analyze_file`` against
``soundfile.read`` + one ``numpy.fft.rfft`` of the whole record, in the same run, and prints the
median of several repeats and their ratio as a markdown table. Asserts nothing.

Run: ``python tests/benchmarks/speed.py [REPEATS]``. Throughput of whole batches (files per second
on the local process pool and on a Dask LocalCluster of 1 and 2 workers) is
``tests/benchmarks/cluster.py``.
"""

from __future__ import annotations

import os

# One BLAS thread: the matrices here are small, and OpenBLAS's thread pool on a shared machine made
# the same run up to ~9x slower (measured while writing this benchmark). Must precede numpy's import.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import soundfile as sf

import ringdown

FS = 48000
MODES = ((0.5, 4.0, 440.0, 0.1), (0.3, 9.0, 1370.0, 1.0), (0.2, 20.0, 3120.0, 2.0))


def _write(path: Path) -> None:
    n_pre = int(0.05 * FS)
    t = np.arange(2 * FS - n_pre) / FS
    x = np.zeros(2 * FS)
    x[n_pre:] = sum(a * np.exp(-b * t) * np.cos(2 * np.pi * f * t + p) for a, b, f, p in MODES)
    x += 1e-4 * np.random.default_rng(0).standard_normal(x.shape[0])
    sf.write(str(path), x, FS, subtype="PCM_24")


def _median_time(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main(repeats: int = 7) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "three_modes.wav"
        _write(path)

        def baseline():
            x, _ = sf.read(str(path))
            np.fft.rfft(x)

        def full():
            an = ringdown.analyze_file(path)
            if an.error is not None:
                raise SystemExit(f"analysis failed: {an.error.message}")
            return an

        an = full()  # warm-up (imports, caches) and a check that it works
        baseline()
        t_base = _median_time(baseline, repeats)
        t_full = _median_time(full, repeats)
    print(f"2 s, {FS} Hz, 3-mode WAV; median of {repeats} runs; {len(an.modes)} modes found.\n")
    print("| step | time ms | ratio |")
    print("|---|---:|---:|")
    print(f"| soundfile.read + one rfft | {1e3 * t_base:.1f} | 1 |")
    print(f"| ringdown.analyze_file | {1e3 * t_full:.1f} | {t_full / t_base:.0f} |")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 7)
