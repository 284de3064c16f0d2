"""Finding modes: spectral peaks of a decay that stand clearly above the local noise floor."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..base._prominence import prominent_peaks

__all__ = ["Peak", "find_peaks", "group_bands"]


@dataclass(frozen=True, slots=True)
class Peak:
    """One spectral peak.

    Attributes
    ----------
    f_hz : float
        Peak frequency (parabolic interpolation of the dB spectrum), Hz.
    level_db : float
        Peak level, dB re 1 unit^2.
    prominence_db : float
        Height above the local floor, dB.
    width_hz : float
        Full width at half power (-3 dB), Hz; a rough first guess of ``beta / pi``.
    """

    f_hz: float
    level_db: float
    prominence_db: float
    width_hz: float
    broad: bool = False  #: found by the smoothed search (a peak many bins wide: a fast decay)


def find_peaks(
    x: np.ndarray,
    sample_rate: float,
    *,
    min_prominence_db: float = 15.0,
    max_peaks: int | None = None,
    f_min_hz: float | None = None,
    noise_psd: tuple[np.ndarray, np.ndarray] | None = None,
    noise_margin_db: float | None = None,
    broad: bool = True,
) -> list[Peak]:
    """Spectral peaks of a decay segment that stand above their local floor.

    The segment (onset to end of the decay) gets a half-Hann taper over its last quarter to
    cut truncation side lobes and is zero-padded to a power of two (:func:`spectrum_db`). The local floor is a
    running median of the dB spectrum over 1/8 of the band (wide, so that a moderately damped
    mode does not lift its own floor); a peak must stand ``min_prominence_db`` above it (15 dB:
    common practice, no source) and, when a noise spectrum is given, ``noise_margin_db`` above
    the level that noise alone gives in this spectrum. By default that margin is
    ``10 log10(ln m + 7) + 2`` dB for m bins (about 14 dB): noise periodogram bins are
    exponentially distributed about their mean, so the largest of m sits near ``ln m`` times
    it, and a fixed 10 dB margin lets noise maxima through as false modes [derived].

    Parameters
    ----------
    x : (n,) ndarray of float
        Decay segment.
    sample_rate : float, Hz
    max_peaks : int or None
        Keep the strongest this many.
    f_min_hz : float or None
        Ignore peaks below (default: 3 frequency bins of the unpadded segment, away from DC).
    noise_psd : (f_hz, psd) or None
        One-sided noise power spectral density (units^2/Hz) on its own frequency grid, e.g.
        from :func:`ringdown.condition.noise_psd`.
    broad : bool
        With ``noise_psd``, also search the smoothed spectrum for broad peaks (heavily damped
        modes, see ``_broad_peaks``).

    Returns
    -------
    list of Peak, ascending in frequency.
    """
    from scipy import ndimage

    f, p_db, w2 = _spectrum(x, sample_rate)
    n = x.shape[0]
    if f_min_hz is None:
        f_min_hz = 3.0 * sample_rate / n
    # local maxima first, then the level each must reach at those bins alone (the rest never count)
    inner = p_db[1:-1]
    maxima = np.flatnonzero((inner > p_db[:-2]) & (inner >= p_db[2:])) + 1
    height = _peak_height(f, p_db, n, sample_rate, w2, min_prominence_db, noise_psd, noise_margin_db, at=maxima)
    peaks = _sharp_peaks(f, p_db, maxima[p_db[maxima] >= height], min_prominence_db, f_min_hz, sample_rate)
    if noise_psd is not None and broad:
        # the Welch estimate averaged over 9 of its bins: a short pre-trigger's estimate scatters
        # by ~1.5 dB per bin, as much as a broad peak's margin (as detect.smooth_density)
        pw = np.array(noise_psd[1][1:], dtype=np.float64)
        if pw.shape[0] > 10:
            pw = ndimage.uniform_filter1d(pw, 9, mode="nearest")
        level_s = np.interp(f, noise_psd[0][1:], pw)
        level_s *= sample_rate
        level_s *= w2
        level_s /= 2.0 * n * n
        power = p_db / 10.0
        np.power(10.0, power, out=power)  # = 10 ** (p_db / 10), in place
        broad_found, spikes = _broad_peaks(f, power, level_s, n, sample_rate, peaks)
        gone = {id(q) for q in spikes}
        peaks = [q for q in peaks if id(q) not in gone] + broad_found
        peaks.sort(key=lambda p: p.f_hz)
    if max_peaks is not None and len(peaks) > max_peaks:
        peaks = sorted(peaks, key=lambda p: p.level_db, reverse=True)[:max_peaks]
    return sorted(peaks, key=lambda p: p.f_hz)


def _peak_height(
    f: np.ndarray,
    p_db: np.ndarray,
    n: int,
    sample_rate: float,
    w2: float,
    min_prominence_db: float,
    noise_psd: tuple[np.ndarray, np.ndarray] | None,
    noise_margin_db: float | None,
    *,
    at: np.ndarray,
) -> np.ndarray:
    """The level (dB, one per bin index of ``at``, (m,) ints into ``f``) a sharp peak of the
    spectrum ``p_db`` of ``n`` samples (taper energy ``w2``) must reach: ``min_prominence_db``
    above the running median and, with ``noise_psd``, ``noise_margin_db`` above the level noise
    alone gives (see :func:`find_peaks`). Each bin's value is the one the whole array would hold
    there (``numpy.interp`` and ``log10`` work element by element)."""
    from scipy import ndimage

    # running median over 1/8 of the band, on at most ~4096 evenly spaced bins (then
    # interpolated): the floor varies slowly, and this keeps the median cheap on long records
    step = max(1, f.shape[0] // 4096)
    coarse = p_db[::step]
    width = max(9, (coarse.shape[0] // 8) | 1)
    floor = np.interp(at, np.arange(0, f.shape[0], step), ndimage.median_filter(coarse, size=width, mode="nearest"))
    height = floor + min_prominence_db
    if noise_psd is not None:
        # E|X_k|^2 / n^2 of windowed noise = S(f) fs sum(w^2) / (2 n^2) for one-sided density S
        # the Welch DC bin is emptied by its detrending: hold the first real bin's level below it
        level = np.interp(f[at], noise_psd[0][1:], noise_psd[1][1:])
        level *= sample_rate
        level *= w2
        level /= 2.0 * n * n
        if noise_margin_db is None:
            # periodogram bins of noise are exponentially distributed about their mean: the chance
            # that any of the m bins exceeds (ln m + 7) times the mean is about e^-7 = 1e-3
            # [derived]; 2 dB more for the scatter of the Welch estimate of that mean
            noise_margin_db = 10.0 * math.log10(math.log(f.shape[0]) + 7.0) + 2.0
        # height = max(height, 10 log10(level + 1e-300) + noise_margin_db), in place
        level += 1e-300
        np.log10(level, out=level)
        level *= 10.0
        level += noise_margin_db
        np.maximum(height, level, out=height)
    return height


def _sharp_peaks(
    f: np.ndarray, p_db: np.ndarray, cand: np.ndarray, min_prominence_db: float, f_min_hz: float, sample_rate: float
) -> list[Peak]:
    """The local maxima ``cand`` (bin indices, ascending) of ``p_db`` (dB over the bins ``f``,
    Hz), each reaching its height (:func:`_peak_height`), that stand ``min_prominence_db`` out,
    between ``f_min_hz`` and 0.98 Nyquist, each interpolated (parabola through three bins) and
    given its half-power width."""
    from scipy import signal

    df = f[1] - f[0]
    # local maxima above the height first, then the (costlier) prominence of those alone
    prominences = signal.peak_prominences(p_db, cand)[0] if cand.size else np.empty(0)
    keep = prominences >= min_prominence_db
    peaks: list[Peak] = []
    for k, prom in zip(cand[keep], prominences[keep]):
        if f[k] < f_min_hz or f[k] > 0.98 * sample_rate / 2 or k == 0 or k == f.shape[0] - 1:
            continue
        a, b, c = p_db[k - 1], p_db[k], p_db[k + 1]
        den = a - 2 * b + c
        off = 0.5 * (a - c) / den if den != 0 else 0.0
        off = float(np.clip(off, -0.5, 0.5))
        # half-power width from the power spectrum around the peak
        width_hz = max(_half_power_bins(p_db, k) * df, df)
        peaks.append(
            Peak(
                f_hz=float(f[k] + off * df),
                level_db=float(b - 0.25 * (a - c) * off),
                prominence_db=float(prom),
                width_hz=float(width_hz),
            )
        )
    return peaks


def _half_power_bins(p_db: np.ndarray, k: int) -> int:
    """Bins between the first points either side of bin ``k`` that lie 3 dB (half power) below it."""
    half = p_db[k] - 3.0103
    lo = k
    while lo > 0 and p_db[lo] > half:
        lo -= 1
    hi = k
    while hi < p_db.shape[0] - 1 and p_db[hi] > half:
        hi += 1
    return hi - lo


#: Smoothing widths of the broad-peak search, in bins of the unpadded segment.
BROAD_SCALES = (8, 32, 128)
#: A broad peak must stand this far above the smoothed spectrum's lowest level between it and any
#: higher neighbour, dB: four standard deviations of the smoothed noise spectrum at the finest
#: scale (4.34 / sqrt(8) dB each) [derived], a plain dip in a strong mode's skirt being smooth.
BROAD_PROMINENCE_DB = 6.0
#: A narrower peak inside a broad hump can be a noise ripple of the hump (not a mode of its own)
#: only if the hump is this many times wider than it (as pipeline.WIDTH_MISMATCH; common
#: practice, no source).
SPIKE_WIDTH_RATIO = 4.0


def _broad_peaks(
    f: np.ndarray, p: np.ndarray, noise: np.ndarray, n: int, sample_rate: float, sharp: list[Peak]
) -> tuple[list[Peak], list[Peak]]:
    """Peaks many bins wide (heavily damped modes, Q down to ~3) that the bin-by-bin search
    misses: the running median it compares with sits on a hump that wide.

    At each scale of :data:`BROAD_SCALES`, the power spectrum ``p`` and the noise level
    ``noise`` (the expectation of noise alone in each bin) are averaged over that many bins of
    the unpadded segment; a local maximum of the averaged spectrum is a broad peak when it
    exceeds the averaged noise by the margin that the largest of the independent cells of a
    chi-square average with ``2 m`` degrees of freedom reaches with probability 1e-3 (``ln`` of
    cells over 1e-3, over ``m``, plus the Welch scatter: [derived]), stands
    :data:`BROAD_PROMINENCE_DB` above its surroundings, is at least half the scale wide (else the
    sharper search owns it), and no narrower peak (sharp, or broad at a finer scale) lies within
    its half-power width, unless each such peak is a ripple of the hump itself (:func:`_ripple_of`,
    then dropped: the hump is the mode), or one sharp line stands out on a hump too wide for
    that line to have made (both kept: a lightly damped mode on a heavily damped one).

    Returns ``(broad, ripples)``: the broad peaks, and the peaks of ``sharp`` that are ripples of
    one of them (for the caller to drop).
    """
    from scipy import ndimage

    pad = f.shape[0] / max(n / 2.0, 1.0)  # padded bins per unpadded (independent) bin
    df = f[1] - f[0]
    out: list[Peak] = []
    ripples: list[Peak] = []
    found = list(sharp)
    scale_of = {id(q): 1 for q in sharp}  # bins each peak's level was averaged over
    for m in BROAD_SCALES:
        k = int(math.ceil(m * pad))
        if 8 * k > f.shape[0]:
            break
        ps = ndimage.uniform_filter1d(p, k, mode="nearest")
        ns = ndimage.uniform_filter1d(noise, k, mode="nearest")
        cells = max(f.shape[0] / k, 2.0)
        # 2 dB more for the scatter of the Welch estimate of the noise level, as in find_peaks
        margin = _largest_cell(m, cells) * 10**0.2
        # above the noise's margin and at least 10 cycles over the segment (as detect.MIN_CYCLES:
        # below, drift removal and DC leave humps that are no modes): only those bins' maxima get
        # a prominence (the rest still bound their walks); no such bin, no peak at this scale
        wanted = (ps > margin * ns) & (f >= 10.0 * sample_rate / n) & (f <= 0.98 * sample_rate / 2)
        if not wanted.any():
            continue
        db = ps + 1e-300
        np.log10(db, out=db)
        db *= 10.0  # = 10 log10(ps + 1e-300), in place
        # = signal.find_peaks(db, prominence=BROAD_PROMINENCE_DB) without walking from each of the
        # ~10^4 ripple maxima of a smoothed spectrum (base._prominence)
        for i, prom in zip(*prominent_peaks(db, BROAD_PROMINENCE_DB, where=wanted)):
            width_bins = _half_power_bins(db, i)
            if width_bins < 0.5 * k:
                continue
            # the averaging widens a peak: take its own width out in quadrature
            width_hz = math.sqrt(max(width_bins**2 - k**2 / 3.0, (0.5 * k) ** 2)) * df
            inside = [q for q in found if abs(q.f_hz - f[i]) <= max(0.5 * width_hz, q.width_hz)]
            wide = width_bins >= 2 * k and all(SPIKE_WIDTH_RATIO * q.width_hz <= width_hz for q in inside)
            ripple = [q for q in inside if wide and _ripple_of(q, scale_of[id(q)], ps, ns, f, width_bins, pad)]
            gone = {id(q) for q in ripple}
            lines = [q for q in inside if id(q) not in gone]
            if lines and not (wide and len(lines) == 1 and scale_of[id(lines[0])] == 1):
                continue
            ripples += [q for q in ripple if scale_of[id(q)] == 1]
            out = [q for q in out if id(q) not in gone]
            found = [q for q in found if id(q) not in gone]
            pk = Peak(
                f_hz=float(f[i]), level_db=float(db[i]), prominence_db=float(prom), width_hz=float(width_hz), broad=True
            )
            out.append(pk)
            found.append(pk)
            scale_of[id(pk)] = m
    return out, ripples


def _largest_cell(m: int, cells: float) -> float:
    """Level, over their mean, that the largest of ``cells`` independent averages of ``m``
    exponentially distributed noise bins (chi-square with ``2 m`` degrees of freedom, over
    ``2 m``) stays below with probability 1 - 1e-3: ``1 + (ln(cells / 1e-3) + 3 sqrt(m)) / m``
    [derived: the Chernoff bound of the upper tail, with a Gaussian allowance of three standard
    deviations of the average]."""
    return 1.0 + (math.log(cells / 1e-3) + 3.0 * math.sqrt(m)) / m


def _ripple_of(q: Peak, m_q: int, ps: np.ndarray, ns: np.ndarray, f: np.ndarray, width_bins: int, pad: float) -> bool:
    """Whether the narrower peak ``q`` (its level averaged over ``m_q`` bins: 1 for a sharp peak)
    is a noise ripple on a broad hump, not a mode of its own. ``ps`` and ``ns`` are the power
    spectrum and the noise's expected level averaged at the hump's scale over the bins ``f``;
    the hump is ``width_bins`` bins wide at half power; ``pad`` padded bins per independent bin.

    A hump whose periodogram is noisy has a tallest bin that the bin-by-bin search takes for a
    sharp peak one bin wide, and a finer smoothing leaves ripples on it that stand out as narrower
    broad peaks. A bin is the hump's spectrum ``S`` plus noise ``N``: ``|S + N|^2 = |S|^2 +
    2 Re(S N*) + |N|^2`` (the Rice distribution of a line in noise), so over the hump's ``M``
    independent cells, averaged over ``m_q`` bins, it stays with probability 1 - 1e-3 below
    ``|S|^2 + 2 |S| sigma z / sqrt(m_q) + sigma^2 c``, with ``sigma^2`` the noise level, ``z =
    sqrt(2 ln(M / 1e-3))`` (the largest of ``M`` Gaussian deviates) and ``c`` the largest of ``M``
    chi-square averages (:func:`_largest_cell`) [derived]. ``q`` is a ripple when it stays below
    that bound with ``|S|^2`` taken as the averaged level at ``q`` (noise included, which only
    widens the bound); a line standing higher is a mode on the hump. The caller checks first
    that the hump is too wide for ``q`` to have made.
    """
    j = int(np.clip(np.searchsorted(f, q.f_hz), 0, f.shape[0] - 1))
    cells = max(width_bins / pad / m_q, 1.0)
    z = math.sqrt(2.0 * math.log(cells / 1e-3))
    s2, n2 = max(float(ps[j]), 0.0), max(float(ns[j]), 0.0)  # running means can round below 0
    bound = s2 + 2.0 * math.sqrt(s2 * n2 / m_q) * z + n2 * _largest_cell(m_q, cells)
    return 10 ** (q.level_db / 10) <= bound


def spectrum_db(x: np.ndarray, sample_rate: float) -> tuple[np.ndarray, np.ndarray]:
    """Power spectrum in dB of a decay segment, tapered at its end, zero-padded to a power of 2.

    Returns
    -------
    f_hz : (k,) ndarray of float
    p_db : (k,) ndarray of float, dB re 1 unit^2 (|rfft|^2 scaled by 1/n^2)
    """
    f, p_db, _ = _spectrum(x, sample_rate)
    return f, p_db


def _spectrum(x: np.ndarray, sample_rate: float):
    n = x.shape[0]
    w = np.ones(n)
    q = max(n // 4, 1)
    w[n - q :] = 0.5 * (1 + np.cos(np.pi * np.arange(q) / q))
    nfft = 1 << int(math.ceil(math.log2(n)))
    # x * w zero-padded to nfft, written into one buffer (w is 1 before the taper), and the dB
    # spectrum computed in place: the same numbers as rfft(x * w, nfft) and 10 log10(|.|^2 / n^2)
    buf = np.zeros(nfft)
    buf[:n] = x
    buf[n - q : n] *= w[n - q :]
    p = np.abs(np.fft.rfft(buf))
    p /= n
    np.square(p, out=p)
    p += 1e-300
    np.log10(p, out=p)
    p *= 10.0
    return np.fft.rfftfreq(nfft, 1.0 / sample_rate), p, float(np.sum(w * w))


def group_bands(
    peaks: list[Peak],
    *,
    sample_rate: float,
    resolution_hz: float,
    min_factor: float = 8.0,
    want_factor: float = 80.0,
    barriers_hz=(),
) -> list[tuple[list[Peak], float, float]]:
    """Give each peak a band, merging peaks too close to be filtered apart.

    Each peak needs a half-band of at least ``m = max(min_factor * width_hz, 4 * resolution_hz)``
    and would like ``h = max(want_factor * width_hz, m)``, ``width_hz`` being its half-power
    width (about ``beta / pi``). ``m`` (8 widths) keeps the band well above the 1.8x the mode's
    half-power bandwidth that Jacobsen & Rindel (1987) give for negligible filter bias. ``h``
    (80 widths, about 25 beta) makes the band filter settle within about 0.1 / beta, so that
    the fit loses almost none of the decay to the settling (common practice, no source;
    measured in tests/benchmarks/accuracy.py). Peaks closer than the sum of their ``m`` are one
    group, extracted together (the parametric estimator separates them). A group's band
    reaches ``h`` beyond its outer peaks but never past the midpoint to the next group, and is
    symmetric about its outer peaks (the narrower margin on both sides), since an uneven band
    weights a mode's spectrum unevenly. ``barriers_hz`` (steady tones found before the hit)
    bound bands like neighbouring peaks do, so that no tone sits inside a mode's band.

    Returns
    -------
    list of (peaks, f_lo_hz, f_hi_hz), ascending.
    """
    nyq = sample_rate / 2.0
    need = [max(min_factor * p.width_hz, 4.0 * resolution_hz) for p in peaks]
    want = [max(want_factor * p.width_hz, n) for p, n in zip(peaks, need)]
    groups: list[list[int]] = []
    for i, p in enumerate(peaks):
        if groups:
            j = groups[-1][-1]
            if p.f_hz - peaks[j].f_hz < need[i] + need[j]:
                groups[-1].append(i)
                continue
        groups.append([i])
    out = []
    for g_i, g in enumerate(groups):
        lo = peaks[g[0]].f_hz - want[g[0]]
        hi = peaks[g[-1]].f_hz + want[g[-1]]
        if g_i > 0:
            prev = groups[g_i - 1][-1]
            lo = max(lo, 0.5 * (peaks[prev].f_hz + peaks[g[0]].f_hz))
        if g_i + 1 < len(groups):
            nxt = groups[g_i + 1][0]
            hi = min(hi, 0.5 * (peaks[g[-1]].f_hz + peaks[nxt].f_hz))
        for b in barriers_hz:
            # a tone closer than a peak's minimum half-band cannot be filtered away: ignore it
            if b < peaks[g[0]].f_hz - need[g[0]]:
                lo = max(lo, 0.5 * (b + peaks[g[0]].f_hz))
            elif b > peaks[g[-1]].f_hz + need[g[-1]]:
                hi = min(hi, 0.5 * (b + peaks[g[-1]].f_hz))
        lo = max(lo, 0.0)
        hi = min(hi, nyq)
        margin = min(peaks[g[0]].f_hz - lo, hi - peaks[g[-1]].f_hz)
        out.append(([peaks[i] for i in g], peaks[g[0]].f_hz - margin, peaks[g[-1]].f_hz + margin))
    return out
