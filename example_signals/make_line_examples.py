"""Write the end-of-line example recordings under example_signals/line/ (seeded, reproducible).

The scenario is invented: sintered steel gear blanks tapped at an end-of-line test station. A
lumped three-mass, three-spring chain (fixed-free) stands in for a blank's first three modes; its
natural frequencies are the generalised eigenvalues of (K, M) (scipy.linalg.eigh), and each mode
decays with its own damping ratio. Every number here is made up for the example:

* ``good_01`` ... ``good_08``: good parts, with small part-to-part scatter of mass and stiffness;
* ``good_warm``: a good part measured 40 K warmer; steel frequencies drop about 0.014 %/K
  (FIELD.md section 4, from memory), so every mode is 0.56 % low by the same fraction;
* ``crack``: one spring 8 % softer (a crack), and more damping in the mode it moves most;
* ``soft_heat_treat``: a part left soft by a wrong heat treatment (invented effect: every
  stiffness 3 % lower and twice the damping).

Records are 1 s, 24 kHz, 16-bit mono WAV with 50 ms of noise before the tap. Only numpy, scipy
and soundfile are used. Run: ``python example_signals/make_line_examples.py``.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import scipy.linalg
import soundfile as sf

SAMPLE_RATE = 24_000
DURATION_S = 1.0
PRETRIGGER_S = 0.05
#: Nominal chain: masses (kg) and springs (N/m) chosen so that f1 is about 1.5 kHz.
MASS_KG = np.array([0.05, 0.05, 0.05])
STIFFNESS_N_PER_M = np.full(3, 0.05 * (2 * np.pi * 1500.0) ** 2 / 0.1981)
#: Modal damping ratios of a good part (invented; sintered steel damps more than wrought steel).
ZETA = np.array([8e-4, 6e-4, 5e-4])
#: Modal amplitudes seen by the microphone, full scale = 1 (invented: one strong mode, as a
#: microphone near an antinode of the first mode would hear it).
AMPLITUDE = np.array([0.5, 0.12, 0.06])
#: Relative frequency change of steel per kelvin (FIELD.md section 4, from memory).
STEEL_PER_K = -0.014e-2


def chain_frequencies(masses: np.ndarray, springs: np.ndarray) -> np.ndarray:
    """Natural frequencies (Hz) of a fixed-free chain of masses and springs, ascending."""
    k = np.asarray(springs, float)
    n = len(masses)
    K = np.zeros((n, n))
    for i in range(n):
        K[i, i] += k[i]
        if i + 1 < n:
            K[i, i] += k[i + 1]
            K[i, i + 1] -= k[i + 1]
            K[i + 1, i] -= k[i + 1]
    w2, shapes = scipy.linalg.eigh(K, np.diag(masses))
    return np.sqrt(w2) / (2 * np.pi)


def part_modes(rng: np.random.Generator, kind: str = "good", *, warmer_k: float = 40.0):
    """Modal parameters ``[(f_d_hz, zeta, amplitude), ...]`` of one invented part.

    kind: ``"good"``, ``"warm"`` (good, measured ``warmer_k`` kelvin warmer), ``"crack"`` or
    ``"soft"`` (wrong heat treatment).
    """
    m = MASS_KG * rng.normal(1.0, 0.001)  # batch-to-batch density scatter
    k = STIFFNESS_N_PER_M * rng.normal(1.0, 0.0012) * rng.normal(1.0, 0.0015, 3)
    zeta = ZETA * np.exp(rng.normal(0.0, 0.08, 3))
    if kind == "crack":
        k0 = chain_frequencies(m, k)
        k = k * np.array([1.0, 0.92, 1.0])
        moved = np.abs(chain_frequencies(m, k) / k0 - 1.0)
        zeta = zeta * np.where(moved == moved.max(), 3.0, 1.5)
    elif kind == "soft":
        k = k * 0.97
        zeta = zeta * 2.0
    elif kind not in ("good", "warm"):
        raise ValueError(f"unknown kind {kind!r}")
    f_n = chain_frequencies(m, k)
    if kind == "warm":
        f_n = f_n * (1.0 + STEEL_PER_K * warmer_k)
    f_d = f_n * np.sqrt(1.0 - zeta**2)
    amp = AMPLITUDE * rng.uniform(0.8, 1.2, 3)
    return [(float(f), float(z), float(a)) for f, z, a in zip(f_d, zeta, amp)]


def synthesize(modes, rng: np.random.Generator, *, sample_rate: float = SAMPLE_RATE,
               duration_s: float = DURATION_S, noise_rms: float = 3e-4) -> np.ndarray:
    """A tap: pre-trigger noise, then the sum of the modes' exponentially decaying cosines."""
    n = int(round(duration_s * sample_rate))
    n0 = int(round(PRETRIGGER_S * sample_rate))
    t = np.arange(n - n0) / sample_rate
    x = np.zeros(n)
    for f, z, a in modes:
        beta = 2 * np.pi * f / np.sqrt(1 - z * z) * z
        sign = rng.choice([-1.0, 1.0])  # an impulse response: every mode starts from zero together
        x[n0:] += sign * a * np.exp(-beta * t) * np.sin(2 * np.pi * f * t)
    return x + noise_rms * rng.standard_normal(n)


def write_part(path, modes, rng, **kw) -> None:
    sf.write(str(path), synthesize(modes, rng, **kw), SAMPLE_RATE, subtype="PCM_16")


def main(out: Path | None = None) -> list[Path]:
    out = Path(out) if out else Path(__file__).resolve().parent / "line"
    out.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(20240611)
    plan = [(f"good_{i:02d}", "good") for i in range(1, 9)] + [
        ("good_warm", "warm"), ("crack", "crack"), ("soft_heat_treat", "soft")]
    written = []
    for name, kind in plan:
        p = out / f"{name}.wav"
        write_part(p, part_modes(rng, kind), rng)
        written.append(p)
    return written


if __name__ == "__main__":
    files = main(Path(sys.argv[1]) if len(sys.argv) > 1 else None)
    total = sum(p.stat().st_size for p in files)
    print(f"wrote {len(files)} files, {total / 1e6:.2f} MB, to {files[0].parent}")
