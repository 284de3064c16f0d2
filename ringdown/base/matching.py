"""Pairing two lists of mode frequencies, the one way every part of ringdown does it."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = ["match_frequencies"]


def match_frequencies(
    f_a_hz: Sequence[float], f_b_hz: Sequence[float], *, tolerance: float | Sequence[float]
) -> list[tuple[int, int]]:
    """Pair two ascending frequency lists without crossing, closest in log frequency.

    Parameters
    ----------
    f_a_hz, f_b_hz : sequence of float, > 0, Hz, ascending
    tolerance : float > 0, or sequence of float > 0 with one entry per ``f_a_hz``
        A pair is allowed when ``|ln(f_b / f_a)| <= ln(1 + tolerance)``: the higher frequency
        exceeds the lower by at most ``tolerance`` (relative). A sequence gives each entry of
        ``f_a_hz`` its own tolerance (e.g. one that grows with the mode's bandwidth).

    Returns
    -------
    list of (int, int)
        Index pairs ``(i, j)``, increasing in both ``i`` and ``j``.

    Notes
    -----
    Minimises the sum of ``|ln(f_b / f_a)|`` over pairs plus ``ln(1 + tolerance)`` for every
    unpaired entry on either side (dynamic programming over the two ordered lists, as in
    Needleman & Wunsch 1970). Any allowed pair costs less than leaving both entries unpaired, so
    the assignment pairs as many modes as the order allows, then the closest ones. With one
    tolerance per entry of ``f_a_hz``, an unpaired ``f_a`` entry costs its own ``ln(1 + tol)``
    and an unpaired ``f_b`` entry the smallest one, which keeps that property.
    """
    a = np.log(np.asarray(f_a_hz, dtype=float))
    b = np.log(np.asarray(f_b_hz, dtype=float))
    n, m = a.size, b.size
    tol = np.broadcast_to(np.asarray(tolerance, dtype=float), (n,))
    gap_a = np.log1p(tol)
    gap_b = float(gap_a.min()) if n else 0.0
    cost = np.zeros((n + 1, m + 1))
    cost[1:, 0] = np.cumsum(gap_a)
    cost[0, :] = gap_b * np.arange(m + 1)
    move = np.zeros((n + 1, m + 1), dtype=np.int8)  # 0 pair, 1 skip a, 2 skip b
    move[1:, 0] = 1
    move[0, 1:] = 2
    slack = 1e-12  # a pair exactly at the tolerance is allowed despite rounding of the logs
    for i in range(1, n + 1):
        for j in range(1, m + 1):
            gap = gap_a[i - 1]
            best, how = cost[i - 1, j] + gap, 1
            if cost[i, j - 1] + gap_b < best:
                best, how = cost[i, j - 1] + gap_b, 2
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
