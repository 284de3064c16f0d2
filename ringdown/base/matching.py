"""Pairing two lists of mode frequencies, the one way every part of ringdown does it."""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

__all__ = ["match_frequencies"]


def match_frequencies(f_a_hz: Sequence[float], f_b_hz: Sequence[float], *, tolerance: float) -> list[tuple[int, int]]:
    """Pair two ascending frequency lists without crossing, closest in log frequency.

    Parameters
    ----------
    f_a_hz, f_b_hz : sequence of float, > 0, Hz, ascending
    tolerance : float, > 0
        A pair is allowed when ``|ln(f_b / f_a)| <= ln(1 + tolerance)``: the higher frequency
        exceeds the lower by at most ``tolerance`` (relative).

    Returns
    -------
    list of (int, int)
        Index pairs ``(i, j)``, increasing in both ``i`` and ``j``.

    Notes
    -----
    Minimises the sum of ``|ln(f_b / f_a)|`` over pairs plus ``ln(1 + tolerance)`` for every
    unpaired entry on either side (dynamic programming over the two ordered lists, as in
    Needleman & Wunsch 1970). Any allowed pair costs less than leaving both entries unpaired, so
    the assignment pairs as many modes as the order allows, then the closest ones.
    """
    a = np.log(np.asarray(f_a_hz, dtype=float))
    b = np.log(np.asarray(f_b_hz, dtype=float))
    n, m = a.size, b.size
    gap = math.log1p(tolerance)
    cost = np.zeros((n + 1, m + 1))
    cost[:, 0] = gap * np.arange(n + 1)
    cost[0, :] = gap * np.arange(m + 1)
    move = np.zeros((n + 1, m + 1), dtype=np.int8)  # 0 pair, 1 skip a, 2 skip b
    move[1:, 0] = 1
    move[0, 1:] = 2
    slack = 1e-12  # a pair exactly at the tolerance is allowed despite rounding of the logs
    for i in range(1, n + 1):
        for j in range(1, m + 1):
            best, how = cost[i - 1, j] + gap, 1
            if cost[i, j - 1] + gap < best:
                best, how = cost[i, j - 1] + gap, 2
            d = abs(a[i - 1] - b[j - 1])
            if d <= gap + slack and cost[i - 1, j - 1] + d < best:
                best, how = cost[i - 1, j - 1] + d, 0
            cost[i, j], move[i, j] = best, how
    pairs: list[tuple[int, int]] = []
    i, j = n, m
    while i > 0 or j > 0:
        how = move[i, j]
        if how == 0:
            pairs.append((i - 1, j - 1))
            i, j = i - 1, j - 1
        elif how == 1:
            i -= 1
        else:
            j -= 1
    pairs.reverse()
    return pairs
