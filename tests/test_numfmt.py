"""The one number formatter (ringdown.base.numfmt), checked against cases worked by hand.

Rule: JCGM 100:2008 (GUM) 7.2.2 (concise form "value(u)" with u in units of the last digit)
and 7.2.6 (at most two significant digits for u, the value rounded to the same place).
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from ringdown.base.numfmt import MISSING, fmt_fixed, fmt_interval, fmt_pm, fmt_value, fmt_values


@pytest.mark.parametrize(
    "v, u, expected",
    [
        # worked by hand: u -> 2 significant digits, v to the same place
        (611.999885, 0.000083, "611.999885(83)"),  # GUM 7.2.2 style: 100.02147(35)
        (100.02147, 0.00035, "100.02147(35)"),  # the GUM's own example, JCGM 100:2008 7.2.2
        (0.000779699, 4.0e-7, "7.7970(40)e-4"),  # zeta from the issue: (7.79699 +- 0.0040)e-4
        (166.66484, 0.0075, "166.6648(75)"),
        (1500.0, 12.0, "1500(12)"),  # last digit at the units place: still plain
        (12345.0, 230.0, "1.235(23)e4"),  # u's last digit left of the units: e notation
        (0.5, 0.0004, "0.50000(40)"),
        (2.0e7, 3.0, "2.00000000(30)e7"),  # magnitude >= 1e6: e notation
        (1.0, 0.0996, "1.00(10)"),  # 0.0996 rounds to 0.10, one place up
        (-3.25, 0.012, "-3.250(12)"),
        (0.001, 0.05, "0.001(50)"),  # u larger than v: v to u's place
        (9.9996, 0.00002, "9.999600(20)"),
    ],
)
def test_fmt_pm_hand_worked(v, u, expected):
    assert fmt_pm(v, u) == expected


@pytest.mark.parametrize(
    "v, digits, expected",
    [
        (15915.494, 5, "15915"),  # the overview legend writes 15915 Hz like the rest of the figure
        (612.00263, 7, "612.0026"),
        (0.000779699, 4, "7.797e-4"),
        (1234567.0, 4, "1.235e6"),
        (999.96, 4, "1000"),  # rounding crosses a decade
        (9.99996e-5, 3, "1e-4"),  # trailing zeros dropped, as %g does
        (8000.0, 7, "8000"),
        (1040.4, 3, "1040"),  # plain below 1e6 even past the digits asked for (no 1.04e3 for a Q)
        (0.0, 6, "0"),
        (-0.01234, 3, "-0.0123"),
    ],
)
def test_fmt_value_hand_worked(v, digits, expected):
    assert fmt_value(v, digits) == expected


@pytest.mark.parametrize("bad", [None, float("nan"), float("inf"), "x"])
def test_missing(bad):
    assert fmt_pm(bad, 0.1) == MISSING
    assert fmt_value(bad) == MISSING
    assert fmt_fixed(bad, 1) == MISSING
    assert fmt_pm(bad, 0.1, missing="-") == "-"


def test_interval_ends_keep_their_digits_and_signs():
    assert fmt_value(1.2, 3, trim=False) == "1.20" and fmt_value(1.2, 3) == "1.2"
    assert fmt_value(2.5e-5, 3, trim=False) == "2.50e-5"
    assert fmt_fixed(0.389, 2, sign=True) == "+0.39" and fmt_fixed(-3.5, 2, sign=True) == "-3.50"
    assert fmt_interval(-3.42, -3.5, -3.34, decimals=2, sign=True) == "-3.42 [-3.50, -3.34]"
    assert fmt_interval(1.03, 0.887, 1.2) == "1.03 [0.887, 1.20]" and fmt_interval(2.77) == "2.77"


def test_values_side_by_side_share_one_notation():
    # worked by hand: the larger number decides the notation, the smaller keeps 3 digits
    assert fmt_values([0.00139, 0.000774]) == ["0.001390", "0.000774"]
    assert fmt_values([9.28e-4, 7.95e-4]) == ["9.28e-4", "7.95e-4"]
    assert fmt_values([1496.05, 1503.95], 6) == ["1496.05", "1503.95"]
    assert fmt_values([1720.0, 1765.0], 6) == ["1720.00", "1765.00"]
    assert fmt_values([None, 2.0]) == [MISSING, "2.00"] and fmt_values([0.0, None]) == ["0", MISSING]


def test_no_usable_uncertainty_gives_plain_value():
    assert fmt_pm(612.00263, None, digits=7) == "612.0026"
    assert fmt_pm(612.00263, 0.0, digits=7) == "612.0026"
    assert fmt_pm(612.00263, float("nan"), digits=7) == "612.0026"


def _parse(text: str) -> tuple[float, float]:
    """Read 'm(ud)eE' back: value and uncertainty."""
    exp = 0
    if "e" in text:
        text, e = text.split("e")
        exp = int(e)
    m, ud = text[:-1].split("(")
    dec = len(m.split(".")[1]) if "." in m else 0
    return float(m) * 10.0**exp, int(ud) * 10.0 ** (exp - dec)


@given(
    st.floats(min_value=-1e12, max_value=1e12, allow_nan=False).filter(lambda v: abs(v) > 1e-12),
    st.floats(min_value=1e-12, max_value=1e12),
)
def test_round_trip_within_rounding(v, u):
    text = fmt_pm(v, u)
    assert " " not in text  # never wraps
    vv, uu = _parse(text)
    # u written with two significant digits: relative rounding error at most 5 % (0.5 in 10)
    assert math.isclose(uu, u, rel_tol=0.051)
    assert 10 <= int(text.split("(")[1].split(")")[0]) <= 99
    # v rounded to u's second digit: off by at most half of that place (plus float slack)
    assert abs(vv - v) <= 0.51 * uu / (int(text.split("(")[1].split(")")[0])) + 1e-9 * abs(v)
