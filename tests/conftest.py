"""Shared test helpers: a seeded multi-mode ring-down generator and a WAV writer.

The signals are analytic sums of exponentially decaying cosines (FIELD.md section 1,
``x(t) = A exp(-beta t) cos(2 pi f_d t + phi)``) with seeded white Gaussian noise; the WAV files
are written with soundfile, never by the code under test.
"""

from __future__ import annotations

import importlib.util
import math
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf


def ringdown_modes(
    modes: Sequence[tuple[float, float, float] | tuple[float, float, float, float]],
    *,
    sample_rate: float = 16000.0,
    duration_s: float = 1.0,
    pre_s: float = 0.05,
    snr_db: float | None = 60.0,
    seed: int = 0,
) -> np.ndarray:
    """Sum of damped cosines after ``pre_s`` seconds of silence, plus seeded white noise.

    Parameters
    ----------
    modes : sequence of (f_d_hz, beta_per_s, amplitude[, phase_rad])
    sample_rate : float, Hz
    duration_s : float, s
        Total length including the pre-trigger.
    pre_s : float, s
        Zeros before the onset (the pre-trigger).
    snr_db : float or None
        Initial signal power (sum of A^2/2 over the modes) over the noise variance, dB;
        ``None`` for no noise.
    seed : int
        Seed of ``numpy.random.default_rng`` for the noise.

    Returns
    -------
    (n_samples,) ndarray of float64
    """
    n = int(round(duration_s * sample_rate))
    n_pre = int(round(pre_s * sample_rate))
    t = np.arange(n - n_pre) / sample_rate
    x = np.zeros(n)
    power = 0.0
    for m in modes:
        f, beta, amp = m[0], m[1], m[2]
        phase = m[3] if len(m) > 3 else 0.0
        x[n_pre:] += amp * np.exp(-beta * t) * np.cos(2 * math.pi * f * t + phase)
        power += amp**2 / 2
    if snr_db is not None:
        sigma = math.sqrt(power / 10 ** (snr_db / 10))
        x += np.random.default_rng(seed).normal(0.0, sigma, n)
    return x


def write_wav(path, x: np.ndarray, sample_rate: float, *, peak: float = 0.5, subtype: str = "PCM_24") -> str:
    """Write ``x`` scaled to ``peak`` of full scale as a mono WAV file (soundfile); return the path."""
    y = np.asarray(x, dtype=np.float64)
    y = y * (peak / float(np.max(np.abs(y))))
    sf.write(str(path), y, int(sample_rate), subtype=subtype)
    return str(path)


@pytest.fixture
def two_mode_wav(tmp_path):
    """A 1 s, 16 kHz WAV of two well-separated light modes (invented test signal)."""
    fs = 16000.0
    x = ringdown_modes([(440.0, 12.0, 1.0), (1250.0, 20.0, 0.6, 0.4)], sample_rate=fs, duration_s=1.0, seed=11)
    return write_wav(tmp_path / "two_modes.wav", x, fs)


#: example_signals/make_line_examples.py (numpy/scipy/soundfile only), loaded once: the invented
#: gear-blank line whose parts the limits, check, fault and Parquet tests use.
_LINE_SPEC = importlib.util.spec_from_file_location(
    "make_line_examples", Path(__file__).resolve().parents[1] / "example_signals" / "make_line_examples.py"
)
line_sim = importlib.util.module_from_spec(_LINE_SPEC)
_LINE_SPEC.loader.exec_module(line_sim)


def make_parts(
    folder: Path, n: int, *, seed: int, duration_s: float = 0.5, prefix: str = "SN-", kind: str = "good"
) -> list[str]:
    """``n`` seeded parts of the invented line (``line_sim``) written as WAVs into ``folder``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    out = []
    for i in range(n):
        p = folder / f"{prefix}{i:04d}.wav"
        line_sim.write_part(p, line_sim.part_modes(rng, kind), rng, duration_s=duration_s)
        out.append(str(p))
    return out


#: Headless Chromium as the browser tests run it: offline-minded (no background networking,
#: component updates or sync), a fresh profile given by the caller, and no GPU or /dev/shm needs.
CHROMIUM_FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-dev-shm-usage",
)

#: Names under which a Chromium or Chrome may be installed, in the order they are tried.
BROWSER_NAMES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")


def find_tool(*names: str) -> str | None:
    """The path of the first of ``names`` found on PATH, or None."""
    import shutil

    for name in names:
        found = shutil.which(name)
        if found:
            return found
    return None
