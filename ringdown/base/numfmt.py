"""The one way ringdown writes a number for people: terminal tables, HTML reports, figure labels.

Machine outputs (JSON, CSV) keep full precision and do not pass through here.

The rule (JCGM 100:2008, GUM 7.2.2 and 7.2.6: give an uncertainty with at most two significant
digits, the value rounded to the same place, in the concise "value(uncertainty)" form):

1. The standard uncertainty ``u`` is rounded to two significant digits; the value is rounded to
   the place of the second digit.
2. The figures are written plainly when the larger of ``|v|`` and ``u`` lies in
   [1e-3, 1e6) and the uncertainty's last digit is at or right of the units place; otherwise a
   power of ten is factored out (``e`` notation, the exponent of the leading digit).
3. The uncertainty follows in parentheses, in units of the value's last digit:
   ``611.999885(83)`` means 611.999885 ± 0.000083; ``7.7970(40)e-4`` means
   (7.7970 ± 0.0040) × 10^-4.

A value without an uncertainty gets a fixed number of significant digits under the same
exponent rule (:func:`fmt_value`). Nothing written here holds a space, so a cell never wraps.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from typing import Any

__all__ = ["MISSING", "fmt_fixed", "fmt_interval", "fmt_pm", "fmt_value", "fmt_values"]

#: What a missing value (None, NaN, inf) is written as.
MISSING = "–"

#: Plain notation for magnitudes in [_PLAIN_LO, _PLAIN_HI); a power of ten outside.
_PLAIN_LO = 1e-3
_PLAIN_HI = 1e6


def _number(v: Any) -> float | None:
    if v is None or isinstance(v, bool):
        return None
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def _exp10(x: float) -> int:
    """Exponent of the leading digit of ``x`` > 0 (robust to float error at exact powers)."""
    e = int(math.floor(math.log10(x)))
    if 10.0 ** (e + 1) <= x:
        e += 1
    elif 10.0**e > x:
        e -= 1
    return e


def _round_half_away(y: float) -> float:
    """Round to a whole number, halves away from zero (12345 to tens is 12350, as by hand)."""
    return math.copysign(math.floor(abs(y) + 0.5), y)


def _suffix(e: int) -> str:
    return f"e{e}" if e else ""


def _trim(text: str) -> str:
    """Drop trailing zeros after the decimal point (and the point itself), as ``%g`` does."""
    return text.rstrip("0").rstrip(".") if "." in text else text


def fmt_value(v: Any, digits: int = 6, *, missing: str = MISSING, trim: bool = True) -> str:
    """``v`` to at most ``digits`` significant digits, plain in [1e-3, 1e6), else with ``e``
    notation; trailing zeros are dropped (a value without an uncertainty claims no digit places)
    unless ``trim=False`` (the ends of an interval keep their digits: ``[0.887, 1.20]``).

    >>> fmt_value(15915.494, 5)
    '15915'
    >>> fmt_value(0.000779699, 4)
    '7.797e-4'
    >>> fmt_value(0.0)
    '0'
    """
    x = _number(v)
    if x is None:
        return missing
    if x == 0:
        return "0"
    digits = max(1, int(digits))
    e = _exp10(abs(x))
    # round first: 999.96 to 4 digits is 1000, one decade up
    r = round(x, digits - 1 - e)
    if r != 0 and _exp10(abs(r)) != e:
        e = _exp10(abs(r))
    if _PLAIN_LO <= abs(r) < _PLAIN_HI:  # 1040 rather than 1.04e3 for Q to 3 digits
        text = f"{r:.{max(0, digits - 1 - e)}f}"
        return _trim(text) if trim else text
    m = x / 10.0**e
    text = f"{m:.{digits - 1}f}"
    if text.lstrip("-").startswith("10"):  # 9.9996 -> 10.000: one decade up
        e += 1
        text = f"{x / 10.0**e:.{digits - 1}f}"
    return (_trim(text) if trim else text) + _suffix(e)


def fmt_values(values: Iterable[Any], digits: int = 3, *, missing: str = MISSING) -> list[str]:
    """Numbers written side by side (a window, a value against its limit) in one notation: the
    largest magnitude decides plain or ``e`` notation and the exponent; each keeps at least
    ``digits`` significant digits, all with the same number of decimals.

    >>> fmt_values([0.00139, 0.000774])
    ['0.001390', '0.000774']
    >>> fmt_values([9.28e-4, 7.95e-4])
    ['9.28e-4', '7.95e-4']
    """
    xs = [_number(v) for v in values]
    finite = [abs(x) for x in xs if x is not None and x != 0]
    if not finite:
        return [missing if x is None else "0" for x in xs]
    big = max(finite)
    e = 0 if _PLAIN_LO <= big < _PLAIN_HI else _exp10(big)
    decimals = max(0, max(digits - 1 - (_exp10(a) - e) for a in finite))
    return [missing if x is None else f"{x / 10.0**e:.{decimals}f}{_suffix(e)}" for x in xs]


def fmt_fixed(v: Any, decimals: int, *, missing: str = MISSING, sign: bool = False) -> str:
    """``v`` with a fixed number of decimals (SNR in dB, times in s, shifts in %), or ``missing``;
    ``sign=True`` writes ``+`` before a positive value."""
    x = _number(v)
    return missing if x is None else f"{x:{'+' if sign else ''}.{decimals}f}"


def fmt_interval(
    v: Any,
    low: Any = None,
    high: Any = None,
    *,
    digits: int = 3,
    decimals: int | None = None,
    sign: bool = False,
    missing: str = MISSING,
) -> str:
    """``v [low, high]`` (the interval left out when ``low`` is None): ``digits`` significant
    digits each, or ``decimals`` fixed decimals (with ``sign``, ``+`` before positive values).

    >>> fmt_interval(-3.42, -3.5, -3.34, decimals=2, sign=True)
    '-3.42 [-3.50, -3.34]'
    >>> fmt_interval(1.03, 0.887, 1.2)
    '1.03 [0.887, 1.20]'
    """

    def one(x):
        if decimals is not None:
            return fmt_fixed(x, decimals, missing=missing, sign=sign)
        return fmt_value(x, digits, missing=missing, trim=False)

    text = one(v)
    return text if low is None else f"{text} [{one(low)}, {one(high)}]"


def fmt_pm(v: Any, u: Any, *, digits: int = 6, missing: str = MISSING) -> str:
    """``v`` with its standard uncertainty ``u`` in the concise form (see the module rule).

    Without a usable ``u`` (None, <= 0, not finite) this is :func:`fmt_value` with ``digits``.

    >>> fmt_pm(611.999885, 0.000083)
    '611.999885(83)'
    >>> fmt_pm(0.000779699, 4.0e-7)
    '7.7970(40)e-4'
    >>> fmt_pm(12345.0, 230.0)
    '1.235(23)e4'
    """
    x = _number(v)
    if x is None:
        return missing
    s = _number(u)
    if s is None or s <= 0:
        return fmt_value(x, digits, missing=missing)
    p = _exp10(s) - 1  # place of the uncertainty's second significant digit
    if _round_half_away(s / 10.0**p) >= 100:  # 0.0996 rounds to 0.100: two digits are 10 one place up
        p += 1
    big = max(abs(x), s)
    e = _exp10(big)
    plain = _PLAIN_LO <= big < _PLAIN_HI and p <= 0
    if plain:
        e = 0
    # value rounded to place p; the exponent follows a rounded value that gains a digit
    r = _round_half_away(x / 10.0**p) * 10.0**p
    if not plain and r != 0 and _exp10(abs(r)) > e:
        e = _exp10(abs(r))
    decimals = max(0, e - p)
    mant = r / 10.0**e
    ud = int(_round_half_away(s / 10.0**p))
    return f"{mant:.{decimals}f}({ud}){_suffix(e)}"
