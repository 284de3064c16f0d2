"""Invented long recordings for the block engine's tests and benchmark (tests/benchmarks/longfile.py).

The scenario is invented: a monitoring session at a bench where a small steel bracket is tapped
every ``period_s`` seconds and the microphone records the whole session as one file. Each tap is
an impulse response of two modes, exactly ``a exp(-beta t) sin(2 pi f_d t)`` with
``beta = zeta * 2 pi f_n`` and ``f_d = f_n sqrt(1 - zeta^2)`` (the textbook damped oscillator,
FIELD.md section 1), in Gaussian noise. The file is written block by block, so that writing it
needs no more memory than one block.
"""

from __future__ import annotations

import math

import numpy as np

#: (f_n Hz, zeta, amplitude full scale) of the two modes (invented).
MODES = ((800.0, 0.003, 0.30), (2100.0, 0.002, 0.12))
NOISE_RMS = 1e-4


def damped(f_n: float, zeta: float) -> tuple[float, float]:
    """(f_d Hz, beta 1/s) of a mode: beta = zeta w_n, f_d = f_n sqrt(1 - zeta^2) (textbook relations)."""
    return f_n * math.sqrt(1.0 - zeta * zeta), zeta * 2.0 * math.pi * f_n


def tap_times(duration_s: float, period_s: float | None, first_s: float = 0.5) -> list[float]:
    """Tap times: every ``period_s`` from ``first_s``; one tap at ``first_s`` when ``period_s`` is None."""
    if period_s is None:
        return [first_s]
    return [float(t) for t in np.arange(first_s, duration_s - period_s / 2, period_s)]


def write_long_record(
    path,
    *,
    duration_s: float,
    sample_rate: float = 16_000.0,
    period_s: float | None = 2.0,
    seed: int = 17,
    block_s: float = 4.0,
    subtype: str = "PCM_16",
) -> list[float]:
    """Write the session as a mono WAV, block by block; return the tap times in s."""
    import soundfile as sf

    rng = np.random.default_rng(seed)
    taps = tap_times(duration_s, period_s)
    n = int(round(duration_s * sample_rate))
    blk = int(round(block_s * sample_rate))
    params = [damped(f, z) + (a,) for f, z, a in MODES]
    # after 30 time constants of the slowest mode a tap is exp(-30) ~ 1e-13 of its start: far
    # below the 16-bit step, so it is not computed further
    horizon = 30.0 / min(beta for _, beta, _ in params)
    with sf.SoundFile(str(path), "w", samplerate=int(sample_rate), channels=1, subtype=subtype) as fh:
        for k in range(0, n, blk):
            t = (k + np.arange(min(blk, n - k))) / sample_rate
            x = NOISE_RMS * rng.standard_normal(t.shape[0])
            for t0 in taps:
                if t0 > t[-1] or t0 + horizon < t[0]:
                    continue
                tau = t - t0
                on = tau >= 0
                for f_d, beta, a in params:
                    x[on] += a * np.exp(-beta * tau[on]) * np.sin(2 * np.pi * f_d * tau[on])
            fh.write(x)
    return taps


if __name__ == "__main__":
    import sys

    if len(sys.argv) < 3:
        raise SystemExit("usage: python tests/long_records.py OUT.wav MINUTES [PERIOD_S | one]")
    period = None if len(sys.argv) > 3 and sys.argv[3] == "one" else float(sys.argv[3]) if len(sys.argv) > 3 else 2.0
    written = write_long_record(
        sys.argv[1], duration_s=60.0 * float(sys.argv[2]), sample_rate=48_000.0, period_s=period
    )
    print(f"wrote {sys.argv[1]}: {float(sys.argv[2]):g} min at 48 kHz, {len(written)} taps")
