"""Write the invented before/after example recordings of a damping treatment.

Invented scenario (no real part, no real measurement): a small aluminium bracket, tapped three
times before and three times after a constrained-layer damping patch is bonded to it. The patch
adds a little mass, so the first two modes drop by a few percent and damp about three times
faster; the third mode's shape has little strain where the patch sits, so its damping hardly
changes and its frequency rises slightly from the added stiffness.

Each tap is a sum of exponentially decaying sinusoids (viscous modal model,
x(t) = sum A_k exp(-beta_k t) sin(2 pi f_k t)) with beta_k = 2 pi zeta_k f_n,k, convolved with a
0.5 ms half-sine force pulse (a soft hammer tip), plus white noise.
Tap to tap the amplitudes, the damping (log-normal, 4 %) and the frequencies (0.03 %) scatter a
little, as repeat taps on one part do. Written with numpy and soundfile only.

Output: ``example_signals/treatment/before_1.wav ... before_3.wav, after_1.wav ... after_3.wav``,
mono, 16-bit PCM, 16 kHz, 1.5 s each (about 48 kB each, 290 kB in all).

Run: ``python example_signals/make_treatment_examples.py``. Seeded: the files are the same on
every run.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import soundfile as sf

SAMPLE_RATE = 16_000  # Hz
DURATION_S = 1.5
PRE_TRIGGER_S = 0.1  # quiet lead-in before each tap
NOISE_RMS = 1.0e-3  # full scale = 1.0; -60 dBFS, a plain handheld accelerometer and preamp
PULSE_S = 0.5e-3  # duration of the hammer's force pulse
TAPS_PER_CONDITION = 3
SEED = 20240611

# Invented modal data of the bracket: (f_d in Hz, damping ratio zeta, relative amplitude).
CONDITIONS = {
    "before": [(412.0, 0.0025, 1.0), (1187.0, 0.0018, 0.6), (2630.0, 0.0012, 0.35)],
    "after": [(398.0, 0.0080, 1.0), (1162.0, 0.0052, 0.6), (2641.0, 0.00122, 0.35)],
}


def tap(modes, rng) -> np.ndarray:
    """One invented tap: decaying sinusoids after a quiet lead-in, plus white noise."""
    n = int(round(DURATION_S * SAMPLE_RATE))
    t = np.arange(n) / SAMPLE_RATE
    x = np.zeros(n)
    start = int(round(PRE_TRIGGER_S * SAMPLE_RATE))
    tt = t[start:] - t[start]
    peak = rng.uniform(0.35, 0.6)  # how hard this tap was
    for f_d, zeta, rel_amp in modes:
        f = f_d * (1.0 + 3e-4 * rng.standard_normal())
        z = zeta * math.exp(0.04 * rng.standard_normal())
        f_n = f / math.sqrt(1.0 - z * z)
        beta = 2.0 * math.pi * z * f_n
        a = peak * rel_amp * rng.uniform(0.85, 1.15)
        x[start:] += a * np.exp(-beta * tt) * np.sin(2.0 * math.pi * f * tt)
    # The hammer's contact force is a half-sine pulse about 0.5 ms long (an invented, typical
    # soft-tipped tap); the response is the impulse response convolved with it.
    m = int(round(PULSE_S * SAMPLE_RATE))
    pulse = np.sin(np.pi * (np.arange(m) + 0.5) / m)
    x = np.convolve(x, pulse / pulse.sum())[:n]
    x += NOISE_RMS * rng.standard_normal(n)
    return np.clip(x, -1.0, 1.0)


def main(out_dir: Path | None = None) -> list[Path]:
    """Write the six example files and return their paths."""
    out_dir = Path(__file__).resolve().parent / "treatment" if out_dir is None else Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(SEED)
    written = []
    for condition, modes in CONDITIONS.items():
        for k in range(1, TAPS_PER_CONDITION + 1):
            path = out_dir / f"{condition}_{k}.wav"
            sf.write(path, tap(modes, rng), SAMPLE_RATE, subtype="PCM_16")
            written.append(path)
    return written


if __name__ == "__main__":
    for p in main():
        print(p)
