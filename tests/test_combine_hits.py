"""Combining the modes of several hits: one matcher, one mode of a hit per combined mode.

References: the pairing rule is ringdown.base.matching.match_frequencies (its docstring: the
dynamic programme of Needleman & Wunsch 1970 over two ordered lists); the numbers below are
worked by hand from that rule. The combined value is the inverse-variance weighted mean
(JCGM 100:2008 does not cover pooling; Taylor, An Introduction to Error Analysis, 2nd ed.,
section 7.2, weighted average).
"""

from __future__ import annotations

import math

import pytest

from ringdown.analysis.pipeline import _combine_hits
from ringdown.analysis.quantities import derive
from ringdown.analysis.results import Hit, Mode
from ringdown.base.matching import match_frequencies


def _mode(f_d_hz: float, zeta: float, f_u_hz: float = 0.05) -> Mode:
    # beta = 2 pi zeta f_n with f_n = f_d / sqrt(1 - zeta^2) (Rao, Mechanical Vibrations, ch. 2)
    f_n = f_d_hz / math.sqrt(1.0 - zeta**2)
    beta = 2.0 * math.pi * zeta * f_n
    return Mode(
        index=1,
        derived=derive(f_d_hz, beta, f_d_hz_u=f_u_hz, beta_per_s_u=0.01 * beta),
        amplitude=1.0,
        snr_db=40.0,
        method="pencil",
        fit_start_s=0.0,
        fit_end_s=1.0,
        cycles_fitted=100.0,
        warnings=(),
    )


def _hit(modes: list[Mode], peak_value: float, k: int) -> Hit:
    return Hit(
        start_s=float(k),
        peak_s=k + 0.001,
        peak_value=peak_value,
        snr_db=50.0,
        end_s=k + 1.0,
        used=True,
        warnings=(),
        modes=tuple(modes),
    )


def test_per_entry_tolerance_pairs_each_reference_by_its_own_width():
    # 101.5 / 100 = 1.015 exceeds 1 + 0.01; 1080 / 1000 = 1.08 is within 1 + 0.1 (hand-worked)
    assert match_frequencies([100.0, 1000.0], [101.5, 1080.0], tolerance=[0.01, 0.1]) == [(1, 1)]
    # one tolerance of 0.1 for both: both pairs allowed
    assert match_frequencies([100.0, 1000.0], [101.5, 1080.0], tolerance=0.1) == [(0, 0), (1, 1)]
    # the closer of two candidates wins the one reference: |ln(999.5/1000)| < |ln(1004/1000)|
    assert match_frequencies([1000.0], [999.5, 1004.0], tolerance=[0.006]) == [(0, 0)]


def test_two_modes_of_one_hit_never_merge_into_one_combined_mode():
    # zeta 0.001 at 1 kHz: beta = 6.283 1/s, 3 beta / (pi f) = 0.6 %, so both 1000.2 and 1004 Hz
    # lie within the cluster's tolerance of 1000 Hz; the strongest hit saw only 1000 Hz.
    strong = _hit([_mode(1000.0, 0.001)], peak_value=1.0, k=0)
    weak = _hit([_mode(1000.2, 0.001), _mode(1004.0, 0.001)], peak_value=0.5, k=1)
    modes = _combine_hits([strong, weak])
    assert len(modes) == 2
    # equal u(f_d) = 0.05 Hz: weighted mean (1000 + 1000.2) / 2; chi2 = 2 * (0.1/0.05)^2 = 8,
    # Birge ratio sqrt(8) > 1 scales the internal u 0.05/sqrt(2) = 0.035 Hz to 0.1 Hz
    assert modes[0].f_d_hz == pytest.approx(1000.1, abs=1e-9)
    assert modes[0].f_d_hz_u == pytest.approx(0.05 / math.sqrt(2) * math.sqrt(8), rel=1e-9)
    assert modes[1].f_d_hz == pytest.approx(1004.0, abs=1e-9)
    assert [m.index for m in modes] == [1, 2]


def test_a_mode_outside_every_tolerance_starts_its_own_combined_mode():
    strong = _hit([_mode(500.0, 0.002), _mode(1500.0, 0.002)], peak_value=1.0, k=0)
    weak = _hit([_mode(500.1, 0.002), _mode(900.0, 0.002)], peak_value=0.3, k=1)
    f = [m.f_d_hz for m in _combine_hits([strong, weak])]
    assert f == pytest.approx([500.05, 900.0, 1500.0], abs=1e-9)


def test_lightly_damped_mode_is_not_taken_by_a_broad_neighbour():
    # strongest hit: 67.77 Hz (zeta 5e-5) and 90.10 Hz (zeta 5.6 %: tolerance 3 beta/pi over f
    # = 6 zeta = 0.33); the next hit only 67.80 Hz. In one pass with per-cluster tolerances,
    # leaving the broad cluster unpaired costs ln(1.33) = 0.288 > |ln(67.80/90.10)| + ln(1.005)
    # = 0.284 + 0.005 (hand-worked from match_frequencies' costs), so 67.80 went to 90.10.
    # Within 0.5 % first, it pairs with 67.77 (|ln(67.80/67.77)| = 4e-4).
    sharp, broad, again = _mode(67.77, 5e-5, 0.002), _mode(90.10, 0.056, 0.7), _mode(67.80, 5e-5, 0.013)
    out = _combine_hits([_hit([sharp, broad], 1.0, 0), _hit([again], 0.5, 1)])
    assert [m.n_hits for m in out] == [2, 1]
    assert out[0].f_d_hz == pytest.approx(67.77, abs=0.01)
    assert out[1].f_d_hz == pytest.approx(90.10)
