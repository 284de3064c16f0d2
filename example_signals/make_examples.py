"""Write the shipped example recordings (invented demo data, seeded, reproducible).

The scenario is invented for ringdown's demos and documentation; no real part or measurement is
behind it:

* ``bracket_tap.wav``: a small cast-aluminium mounting bracket, hung on soft cords and tapped
  once with a plastic-tipped hammer, recorded by a measurement microphone 0.2 s before and
  1.8 s after the tap (48 kHz, 16-bit). Four modes.
* ``bracket_tap.csv``: the same kind of bracket logged by a data recorder as text (time in ms,
  semicolon-separated, decimal commas, two header lines), 20 kHz, accelerometer in m/s^2.
* ``lc_tank.wav``: the voltage across a parallel LC tank after its drive is switched off
  (series loss resistance), 96 kHz, float WAV: one mode.

Each mode is ``A exp(-beta t) cos(2 pi f_d t + phi)`` from the onset, with seeded white noise.
The true values are printed by this script and listed in README.md beside it.

Run: ``python example_signals/make_examples.py`` (numpy and soundfile only).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import soundfile as sf

HERE = Path(__file__).resolve().parent


def ringdown_signal(fs, duration, onset, modes, noise_rms, seed):
    """modes: list of (f_d_hz, zeta, amplitude, phase_rad)."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(round(duration * fs))) / fs
    tt = t - onset
    x = np.zeros_like(t)
    for f_d, zeta, amp, ph in modes:
        w_d = 2 * math.pi * f_d
        w_0 = w_d / math.sqrt(1 - zeta**2)
        beta = zeta * w_0
        x += np.where(tt >= 0, amp * np.exp(-beta * np.clip(tt, 0, None)) * np.cos(w_d * tt + ph), 0.0)
    return t, x + noise_rms * rng.standard_normal(t.shape[0])


BRACKET = [(612.0, 0.0030, 0.30, 0.4), (1587.0, 0.0022, 0.22, 1.9), (2940.0, 0.0016, 0.12, -0.7), (4315.0, 0.0025, 0.08, 2.5)]
BRACKET_CSV = [(598.0, 0.0031, 4.0, 0.1), (1560.0, 0.0023, 2.6, 1.2), (2911.0, 0.0017, 1.5, -2.0)]
LC = [(15915.5, 0.0040, 0.8, 0.0)]  # L = 1 mH, C = 100 nF: f_0 = 15915.5 Hz; R = 0.8 ohm -> zeta = R/2 sqrt(C/L) = 0.004


def main() -> None:
    fs = 48000
    _, x = ringdown_signal(fs, 2.0, 0.2, BRACKET, 2e-4, seed=11)
    sf.write(HERE / "bracket_tap.wav", x, fs, subtype="PCM_16")

    fs = 20000
    t, x = ringdown_signal(fs, 1.0, 0.05, BRACKET_CSV, 5e-3, seed=12)
    with open(HERE / "bracket_tap.csv", "w", encoding="utf-8", newline="\n") as fh:
        fh.write("# invented demo data: aluminium bracket tap, accelerometer, data recorder export\n")
        fh.write("Time [ms];Acceleration [m/s^2]\n")
        for ti, xi in zip(t, x):
            fh.write(f"{ti * 1e3:.3f};{xi:.6f}".replace(".", ",") + "\n")

    fs = 96000
    _, x = ringdown_signal(fs, 0.25, 0.01, LC, 1e-4, seed=13)
    sf.write(HERE / "lc_tank.wav", x, fs, subtype="FLOAT")

    for name, modes in (("bracket_tap.wav", BRACKET), ("bracket_tap.csv", BRACKET_CSV), ("lc_tank.wav", LC)):
        print(name)
        for f_d, zeta, amp, _ in modes:
            beta = zeta * 2 * math.pi * f_d / math.sqrt(1 - zeta**2)
            print(f"  f_d = {f_d:.1f} Hz  zeta = {zeta:.4f}  beta = {beta:.3f} 1/s  Q = {1 / (2 * zeta):.1f}")


if __name__ == "__main__":
    main()
