"""Make ``switch_off.wav``: an invented series RLC circuit driven off resonance, then switched off.

Invented demo data, no real measurement: a bench series RLC circuit (L = 1 mH, C = 100 nF,
R = 2 ohm: f_0 = 15.92 kHz, Q = 50) is driven by a 1 V sine generator 6 % below its resonance
(14.96 kHz). The record (the capacitor voltage, as a scope would log it, 500 kHz, float WAV)
starts 2 ms before the generator is switched on; the generator runs 10 ms and is then
switched off, and the circuit rings down freely at its natural frequency for 12 ms. While the
drive runs the circuit follows the drive frequency; only the free decay after the switch-off
tells the circuit's own frequency and damping.

The circuit ``L q'' + R q' + q / C = v(t)`` is integrated with ``scipy.integrate.solve_ivp``
(DOP853), the switch-off being an integration boundary; seeded white noise 60 dB below the
driven voltage is added. Truth: ``omega_0 = 1 / sqrt(L C)``, ``beta = R / (2 L)``,
``f_d = sqrt(omega_0^2 - beta^2) / (2 pi)`` (the source-free series RLC circuit).

Run: ``python example_signals/make_switch_off_example.py`` (numpy, scipy and soundfile).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import soundfile as sf
from scipy.integrate import solve_ivp

HERE = Path(__file__).resolve().parent

L_H, C_F, R_OHM = 1e-3, 100e-9, 2.0
FS = 500_000
PRE_S, DRIVE_S, POST_S = 2e-3, 10e-3, 12e-3
DETUNE = -0.06


def main() -> None:
    w0 = 1.0 / math.sqrt(L_H * C_F)
    beta = R_OHM / (2 * L_H)
    w_drive = w0 * (1 + DETUNE)
    n = int(round((PRE_S + DRIVE_S + POST_S) * FS))
    t = -PRE_S + np.arange(n) / FS
    q = np.zeros(n)
    state = np.zeros(2)
    kw = dict(method="DOP853", rtol=1e-10, atol=1e-20, max_step=2 * math.pi / w_drive / 20)
    for a, b, on in ((0.0, DRIVE_S, True), (DRIVE_S, DRIVE_S + POST_S, False)):
        def rhs(tt, s, on=on):
            v = math.sin(w_drive * tt) if on else 0.0
            return [s[1], (v - R_OHM * s[1] - s[0] / C_F) / L_H]

        sel = (t >= a) & (t < b)
        sol = solve_ivp(rhs, (a, b), state, t_eval=t[sel], dense_output=True, **kw)
        q[sel] = sol.y[0]
        state = sol.sol(b)
    v_c = q / C_F
    driven = v_c[(t >= 0) & (t < DRIVE_S)]
    rms = math.sqrt(float(np.mean(driven**2)))
    v_c = v_c + np.random.default_rng(2026).normal(0.0, rms * 1e-3, n)
    sf.write(HERE / "switch_off.wav", v_c.astype(np.float32), FS, subtype="FLOAT")
    f_d = math.sqrt(w0**2 - beta**2) / (2 * math.pi)
    print(f"switch_off.wav: drive {w_drive / (2 * math.pi):.1f} Hz switched off at {PRE_S + DRIVE_S:.3f} s; "
          f"free decay f_d = {f_d:.1f} Hz, beta = {beta:.1f} 1/s, Q = {w0 * L_H / R_OHM:.1f}")


if __name__ == "__main__":
    main()
