"""Write the elastic-moduli example recordings (invented demo data, seeded, reproducible).

The scenario is invented for ringdown's documentation; no real alloy, part or measurement is
behind it: a test bar of "Norvale 17", an invented precipitation-hardened stainless alloy, ground
to 120 x 30 x 8 mm (224.64 g, density 7800 kg/m^3), with true dynamic moduli E = 196 GPa and
G = 76 GPa (Poisson's ratio 196 / 152 - 1 = 0.2895).

* ``moduli/norvale_flex.wav``: the bar on two threads at 0.224 L from its ends, tapped at the
  centre of a face; microphone. The fundamental flexural mode rings, with a faint torsional mode.
* ``moduli/norvale_torsion.wav``: the bar on crossed threads at its centre, tapped at a corner;
  the torsional mode rings, with some of the flexural fundamental.

The frequencies come from the physics, not from ringdown: the flexural one from free-free
Timoshenko beam theory (transfer matrix expm(A L), Cowper's 1966 shear coefficient
10(1+mu)/(12+11mu)), the torsional one from Saint-Venant torsion of a rectangle
(I_p / K_t, K_t from the series in Timoshenko & Goodier sec. 109) with the finite-length terms of
the E1876 torsion factor R, G = 4 L m f_t^2 R / (b t).
Each mode is A exp(-beta t) cos(2 pi f_d t + phi) from the tap, plus seeded white noise;
24 kHz, 16-bit, 1 s (48 kB each).

Run: ``python example_signals/make_moduli_examples.py`` (numpy, scipy and soundfile).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import soundfile as sf
from scipy.linalg import expm
from scipy.optimize import brentq

HERE = Path(__file__).resolve().parent / "moduli"

E, G, RHO = 196e9, 76e9, 7800.0        # Pa, Pa, kg/m^3 (invented)
L, B, T = 0.120, 0.030, 0.008          # m
MU = E / (2 * G) - 1
ETA_FLEX, ETA_TORS = 1.0e-3, 1.4e-3     # loss factors (invented)
FS = 24000


def flexural_hz() -> float:
    """First free-free bending frequency of the Timoshenko beam, Hz."""
    A, I = B * T, B * T**3 / 12
    kga = 10 * (1 + MU) / (12 + 11 * MU) * G * A

    def det(w):
        a = np.array([[0, 1, 1 / kga, 0], [0, 0, 0, 1 / (E * I)], [-RHO * A * w**2, 0, 0, 0],
                      [0, -RHO * I * w**2, -1, 0]], float)
        return np.linalg.det(expm(a * L)[2:4, 0:2])

    w_eb = 4.73004074**2 * math.sqrt(E * I / (RHO * A * L**4))
    grid = np.linspace(0.5 * w_eb, 1.01 * w_eb, 200)
    vals = [det(w) for w in grid]
    for a, b, va, vb in zip(grid[:-1], grid[1:], vals[:-1], vals[1:]):
        if np.sign(va) != np.sign(vb):
            return brentq(det, a, b, xtol=1e-10) / (2 * math.pi)
    raise RuntimeError("no bending root found")


def torsional_hz() -> float:
    """First free-free torsional frequency, Hz: Saint-Venant torsion times E1876's length terms.

    For this short, wide bar (L/b = 4) the finite-length terms of the E1876 factor R (Spinner &
    Valore 1958, measured on real bars) change G by 1.3 %, so they are applied here too.
    """
    n = np.arange(1, 400, 2)
    a = B / T
    beta = (1 - 192 / (math.pi**5 * a) * np.sum(np.tanh(n * math.pi * a / 2) / n**5)) / 3
    r_inf = (B * T * (B**2 + T**2) / 12) / (beta * B * T**3)  # I_p / K_t
    r = r_inf * (1 + 0.00851 * (B / L) ** 2) - 0.060 * (B / L) ** 1.5 * (B / T - 1) ** 2
    return math.sqrt(G * B * T / (4 * L * RHO * L * B * T * r))


def tap(modes, seed, duration=1.0, onset=0.05, noise=3e-4):
    """modes: [(f_n Hz, loss factor, amplitude, phase)]; returns float samples."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(duration * FS)) / FS - onset
    x = np.zeros_like(t)
    for f_n, eta, amp, ph in modes:
        zeta = eta / 2
        beta = zeta * 2 * math.pi * f_n
        f_d = f_n * math.sqrt(1 - zeta**2)
        x += np.where(t >= 0, amp * np.exp(-beta * np.clip(t, 0, None)) * np.cos(2 * math.pi * f_d * t + ph), 0.0)
    return x + noise * rng.standard_normal(t.size)


def main() -> None:
    HERE.mkdir(exist_ok=True)
    ff, ft = flexural_hz(), torsional_hz()
    sf.write(HERE / "norvale_flex.wav", tap([(ff, ETA_FLEX, 0.5, 0.3), (ft, ETA_TORS, 0.02, 1.1)], seed=161),
             FS, subtype="PCM_16")
    sf.write(HERE / "norvale_torsion.wav", tap([(ft, ETA_TORS, 0.45, 2.0), (ff, ETA_FLEX, 0.12, -0.4)], seed=162),
             FS, subtype="PCM_16")
    print(f"Norvale 17 bar {L * 1e3:g} x {B * 1e3:g} x {T * 1e3:g} mm, {RHO * L * B * T * 1e3:.2f} g")
    print(f"  true E = {E / 1e9:g} GPa, G = {G / 1e9:g} GPa, Poisson's ratio = {MU:.4f}")
    print(f"  flexural f_n = {ff:.3f} Hz (loss factor {ETA_FLEX:g}), torsional f_n = {ft:.3f} Hz "
          f"(loss factor {ETA_TORS:g})")


if __name__ == "__main__":
    main()
