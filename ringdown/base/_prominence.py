"""The peaks of a 1-D array that stand a given height above their surroundings, fast.

``scipy.signal.find_peaks(x, prominence=h)`` computes the prominence of every local maximum by
walking from it outwards until a higher sample (``scipy.signal.peak_prominences``), so its cost
is the sum of those walks, up to (maxima x samples) on long slopes. A smoothed spectrum holds
~10^4 ripple maxima of no prominence: 6-25 ms per call on 65 537 bins, and growing faster than
the record on long ones (measured on ``tests/benchmarks/speed.py``'s file).

:func:`prominent_peaks` works on the sequence of local maxima instead of the samples. Between
two consecutive maxima the samples fall and then rise (a rise and fall between them would be a
maximum of its own), so a walk passes whole gaps at once and meets only the neighbouring maxima
and the lowest sample of each gap. A neighbour higher than the peak ends that side's walk in the
gap between them, which is then the base; a base less than ``h`` below the peak rules the peak
out (most ripple maxima: one of their neighbours is higher and the dip between them shallow).
For the rest, the nearest higher maximum on each side comes from binary lifting on a sparse
table of range maxima and the base from one range-minimum query (sparse tables: Bender &
Farach-Colton, "The LCA problem revisited", LATIN 2000 [from memory]): O(n + m log m) for m
maxima; when at most :data:`_DIRECT_WALKS` peaks are left (a caller's ``where`` leaves few), each
walks the maxima directly instead, O(m) apiece. The result equals scipy's bit for bit (the same
minima, the same subtraction; ``tests/test_fast_paths.py``).
"""

from __future__ import annotations

import numpy as np

__all__ = ["prominent_peaks"]


#: At most this many peaks left after the neighbour test are walked directly; more take the
#: sparse tables (their build, ~2 log2(m) passes over the m maxima, outweighs a few O(m) walks).
_DIRECT_WALKS = 8


def _tables(a: np.ndarray, op) -> list[np.ndarray]:
    """Sparse table: ``t[j][i] = op(a[i : i + 2**j])`` for each ``j`` with ``2**j <= len(a)``;
    ``t[j]`` has shape ``(len(a) - 2**j + 1,)``."""
    out = [a]
    w = 1
    while 2 * w <= a.shape[0]:
        out.append(op(out[-1][:-w], out[-1][w:]))
        w *= 2
    return out


def _range_min(t: list[np.ndarray], lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """``min(a[lo[i] : hi[i] + 1])`` for each i from the sparse table ``t`` of ``a`` (lo <= hi)."""
    level = (np.frexp((hi - lo + 1).astype(np.float64))[1] - 1).astype(np.intp)  # floor(log2(length))
    out = np.empty(lo.shape[0])
    for j in np.unique(level):
        k = np.flatnonzero(level == j)
        out[k] = np.minimum(t[j][lo[k]], t[j][hi[k] - (1 << int(j)) + 1])
    return out


def prominent_peaks(
    x: np.ndarray, min_prominence: float, *, where: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Local maxima of ``x`` with a prominence of at least ``min_prominence``, and those prominences.

    Equals ``idx, props = scipy.signal.find_peaks(x, prominence=min_prominence)`` with
    ``props["prominences"]``: local maxima as scipy finds them (the middle of a flat top, never
    the first or last sample); the prominence of a peak of height ``v`` is ``v`` less the higher
    of its two bases, the lowest sample between it and the nearest higher sample on that side (or
    the array's end).

    Parameters
    ----------
    x : (n,) array_like of float, finite
    min_prominence : float, units of ``x``
    where : (n,) ndarray of bool, optional
        Report only the peaks at samples where this is True (the others still bound their
        neighbours' walks, so each prominence is the one without ``where``); a caller that
        drops most peaks by another test passes it to skip their walks.

    Returns
    -------
    idx : (m,) ndarray of int, ascending
    prominences : (m,) ndarray of float, units of ``x``
    """
    from scipy import signal

    x = np.ascontiguousarray(x, dtype=np.float64)
    idx = signal.find_peaks(x)[0]
    m = idx.shape[0]
    if m == 0:
        return idx, np.empty(0)
    v = x[idx]
    # gap[j]: lowest sample between maxima j-1 and j (gap[0] from the start, gap[m] to the end)
    gap = np.empty(m + 1)
    gap[0] = np.min(x[: idx[0] + 1])
    if m > 1:
        gap[1:m] = np.minimum.reduceat(x, idx)[:-1]
    gap[m] = np.min(x[idx[-1] :])
    # a neighbour higher than the peak ends that side's walk in the gap between them: the base
    # is that gap, and a gap less than min_prominence below the peak rules the peak out
    left_end = np.r_[True, v[:-1] > v[1:]]
    right_end = np.r_[v[1:] > v[:-1], True]
    out = (left_end & (v - gap[:-1] < min_prominence)) | (right_end & (v - gap[1:] < min_prominence))
    if where is not None:
        out |= ~np.asarray(where, dtype=bool)[idx]
    live = np.flatnonzero(~out)
    if live.size == 0:
        return idx[:0], np.empty(0)
    if live.size <= _DIRECT_WALKS:
        # a few peaks: walk each directly over the maxima (O(m) apiece), no tables
        prom = np.empty(live.size)
        for a, i in enumerate(live):
            higher_l = np.flatnonzero(v[:i] > v[i])
            higher_r = np.flatnonzero(v[i + 1 :] > v[i])
            jl = int(higher_l[-1]) if higher_l.size else -1
            jr = i + 1 + int(higher_r[0]) if higher_r.size else m
            prom[a] = v[i] - max(np.min(gap[jl + 1 : i + 1]), np.min(gap[i + 1 : jr + 1]))
        keep = prom >= min_prominence
        return idx[live[keep]], prom[keep]
    # the rest: the nearest higher maximum on each side by binary lifting on the range maxima
    # of v, and the lowest gap on the way by one range-minimum query
    vmax, gmin = _tables(v, np.maximum), _tables(gap, np.minimum)
    vl = v[live]
    left, right = live.copy(), live.copy()  # the farthest maxima each walk passes (the peak itself at first)
    for j in range(len(vmax) - 1, -1, -1):
        w = 1 << j
        s = left - w
        ok = np.flatnonzero(s >= 0)
        ok = ok[vmax[j][s[ok]] <= vl[ok]]
        left[ok] = s[ok]
        ok = np.flatnonzero(right + w <= m - 1)
        ok = ok[vmax[j][right[ok] + 1] <= vl[ok]]
        right[ok] += w
    # the walk left from peak i passes maxima left..i-1, so the gaps left..i; right: i+1..right+1
    prom = vl - np.maximum(_range_min(gmin, left, live), _range_min(gmin, live + 1, right + 1))
    keep = prom >= min_prominence
    return idx[live[keep]], prom[keep]
