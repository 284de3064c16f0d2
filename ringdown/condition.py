"""Conditioning: offset and drift, the broadband envelope, the noise floor, hits and clipping.

Everything here works on one channel of samples (``(n_samples,) ndarray of float``) and returns
indices or levels; nothing reads files or plots.

Hit detection follows common tap-test practice (no single published source): a hit is a sharp
rise of the smoothed broadband envelope, ``rise_db`` within a few milliseconds, to at least
``min_hit_snr_db`` above the noise floor; a second sharp rise shortly after a hit, before its
decay has set in, is a hammer bounce (double hit).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = [
    "HitSpan",
    "remove_drift",
    "envelope_db",
    "envelope_smoothing",
    "noise_floor_db",
    "find_hits",
    "find_clipping",
    "noise_psd",
    "steady_tones",
]

_EPS = 1e-300


@dataclass(frozen=True, slots=True)
class HitSpan:
    """Sample indices of one hit: onset, envelope peak, end of its decay (exclusive).

    ``bounce`` is the index of a second onset within the hit's first milliseconds (a hammer
    bounce), or ``None``.
    """

    onset: int
    peak: int
    end: int
    bounce: int | None = None


#: Degree of the Legendre polynomial removed as offset and drift.
DRIFT_DEGREE = 5


def remove_drift(x: np.ndarray, sample_rate: float) -> np.ndarray:
    """Remove offset and slow drift by subtracting a least-squares polynomial of degree 5.

    A Legendre series of degree ``DRIFT_DEGREE`` over the whole record
    (``numpy.polynomial.legendre.legfit``) follows offset, linear and slow curved drift (less
    than about one cycle over the record) but cannot follow an oscillation with more than a
    few cycles in the record: its projection on the polynomial falls off quickly with the
    number of cycles, so low modes are not biased. The band extraction rejects what is left
    near 0 Hz.

    Parameters
    ----------
    x : (n_samples,) ndarray of float
    sample_rate : float, Hz (unused; kept so every conditioning step has one signature)
    """
    x = np.asarray(x, dtype=np.float64)
    n = x.shape[0]
    if n < 4 * (DRIFT_DEGREE + 1):
        return x - x.mean()
    u = np.linspace(-1.0, 1.0, n)
    # fit on block means (at most ~4096 blocks): a polynomial of degree 5 is smooth at that
    # scale, and the block means of an oscillation are ~0, so the fit is the same, and cheap
    b = max(1, n // 4096)
    m = (n // b) * b
    coef = np.polynomial.legendre.legfit(u[:m].reshape(-1, b).mean(axis=1), x[:m].reshape(-1, b).mean(axis=1),
                                         DRIFT_DEGREE)
    return x - np.polynomial.legendre.legval(u, coef)


def _smoothing_samples(sample_rate: float, f_dom_hz: float | None = None) -> int:
    # about 1 ms, at least one period of the dominant frequency and 3 samples
    # (common practice, no source)
    t = 1e-3 if not f_dom_hz else max(1e-3, 1.0 / f_dom_hz)
    return max(3, int(round(t * sample_rate)))


def envelope_smoothing(x: np.ndarray, sample_rate: float) -> int:
    """Width in samples of the moving average :func:`envelope_db` uses for ``x``."""
    return _smoothing_samples(sample_rate, dominant_frequency(x, sample_rate))


def dominant_frequency(x: np.ndarray, sample_rate: float) -> float | None:
    """Frequency of the largest spectral magnitude away from DC, Hz (None for silence)."""
    n = x.shape[0]
    spec = np.abs(np.fft.rfft(x))
    k0 = min(3, spec.shape[0] - 1)
    if spec.shape[0] <= k0 + 1 or not np.any(spec[k0:] > 0):
        return None
    k = k0 + int(np.argmax(spec[k0:]))
    return k * sample_rate / n


def envelope_db(x: np.ndarray, sample_rate: float, *, window_s: float | None = None,
                smoothing: int | None = None) -> np.ndarray:
    """Smoothed broadband power in dB (re 1 unit^2), free of pre-ringing.

    ``x^2`` averaged over a centred window of about 1 ms, or one period of the record's
    dominant frequency when that is longer, so that the level does not swing with the
    oscillation itself. A centred moving average spreads an onset by half its width and no
    further (an FFT Hilbert envelope would ring well before the onset).

    Returns
    -------
    (n_samples,) ndarray of float, dB
    """
    w = envelope_smoothing(x, sample_rate) if smoothing is None else int(smoothing)
    if window_s is not None:
        w = max(w, int(round(window_s * sample_rate)))
    c = np.concatenate(([0.0], np.cumsum(x * x)))
    n = x.shape[0]
    lo = np.clip(np.arange(n) - w // 2, 0, n)
    hi = np.clip(np.arange(n) - w // 2 + w, 0, n)
    p = (c[hi] - c[lo]) / np.maximum(hi - lo, 1)
    return 10.0 * np.log10(p + _EPS)


def noise_floor_db(level_db: np.ndarray) -> float:
    """Broadband noise floor: the 5th percentile of the envelope level, dB.

    Robust when at least a few percent of the record is noise only (pre-trigger or the tail
    after the decay); otherwise it is the quietest part of the decay, an upper bound.
    """
    return float(np.percentile(level_db, 5.0))


def find_hits(
    level_db: np.ndarray,
    sample_rate: float,
    *,
    noise_db: float,
    min_hit_snr_db: float = 20.0,
    rise_db: float = 12.0,
    rise_time_s: float = 3e-3,
    hold_off_s: float = 0.05,
    bounce_window_s: float = 0.03,
    bounce_rise_db: float = 10.0,
    smoothing: int = 3,
    slow_level_db: np.ndarray | None = None,
) -> list[HitSpan]:
    """Find every hit in a recording from its envelope level.

    A hit starts where the level rises at least ``rise_db`` within ``rise_time_s``, ends up
    at least ``min_hit_snr_db`` above the noise, and exceeds everything in the preceding
    ``hold_off_s`` by 3 dB (so that beating of modes in a decay is not taken for a new hit).
    Hits closer than ``hold_off_s`` are one hit. Within ``bounce_window_s`` after the first
    maximum, a rise of ``bounce_rise_db`` within ``rise_time_s`` (as fast as an onset), back to
    within 6 dB of that maximum, marks a bounce (a second contact of the hammer). Two modes of
    similar amplitude some 100 Hz apart can beat deeply enough to look like one; a recording
    whose only hits are flagged is still analysed, with the warning. Defaults are
    common practice for hand-held hammer taps, no source.

    Parameters
    ----------
    level_db : (n_samples,) ndarray of float
        From :func:`envelope_db`.
    sample_rate : float, Hz
    noise_db : float
        From :func:`noise_floor_db`.
    smoothing : int
        Width in samples of the smoothing that made ``level_db`` (see :func:`envelope_smoothing`).
    slow_level_db : (n_samples,) ndarray or None
        The level smoothed over about 3 ms. When given, a bounce must also raise it by 3 dB:
        a second contact adds energy, while modes beating faster than the 3 ms window only
        move the energy between them.

    Returns
    -------
    list of HitSpan, in time order; empty when nothing rises above the noise.
    """
    n = level_db.shape[0]
    w = max(2, int(round(rise_time_s * sample_rate)))
    hold = max(w + 1, int(round(hold_off_s * sample_rate)))
    # minimum of the level over the preceding w samples (sliding window minimum)
    from scipy.ndimage import maximum_filter1d, minimum_filter1d

    prev_min = np.empty(n)
    prev_min[:] = np.inf
    m = minimum_filter1d(level_db, size=w, origin=(w - 1) // 2)  # min over [k - w + 1, k]
    prev_min[1:] = m[:-1]
    prev_max = np.full(n, -np.inf)
    span = hold - w
    if span > 0 and n > w:
        mx = maximum_filter1d(level_db, size=span, origin=(span - 1) // 2)  # max over [k - span + 1, k]
        prev_max[w:] = mx[: n - w]
    threshold = noise_db + min_hit_snr_db
    cand = (level_db - prev_min >= rise_db) & (level_db >= threshold) & (level_db >= prev_max + 3.0)
    # The first rise from a quiet start has nothing before it; take the first crossing too.
    idx = np.flatnonzero(cand)
    onsets: list[int] = []
    for k in idx:
        if onsets and k - onsets[-1] < hold:
            continue
        onsets.append(int(k))
    if not onsets:
        above = np.flatnonzero(level_db >= threshold)
        if above.size == 0:
            return []
        onsets = [int(above[0])]
    # The centred smoothing turns a step in power into a ramp one smoothing width long, centred
    # on the step: the onset is where the ramp reaches half (-3 dB) of the level just after it.
    spans: list[HitSpan] = []
    for j, k in enumerate(onsets):
        top = float(np.max(level_db[k : min(n, k + smoothing + 1)]))
        lo_i = max(0, k - smoothing)
        reach = np.flatnonzero(level_db[lo_i : k + smoothing + 1] >= top - 3.0103)
        onset = lo_i + int(reach[0]) if reach.size else k
        end = onsets[j + 1] - max(1, int(round(0.002 * sample_rate))) if j + 1 < len(onsets) else n
        stop = min(end, onset + hold + int(round(bounce_window_s * sample_rate)))
        if stop <= onset:
            continue  # a rise in the record's last samples leaves no decay to measure
        peak = onset + int(np.argmax(level_db[onset:stop]))
        bounce = _find_bounce(level_db, k, sample_rate, bounce_window_s, bounce_rise_db, end, smoothing + w)
        if bounce is not None and slow_level_db is not None and not _energy_step(slow_level_db, k, bounce, sample_rate):
            bounce = None
        spans.append(HitSpan(onset=onset, peak=peak, end=end, bounce=bounce))
    return spans


def _find_bounce(level_db, onset, sample_rate, window_s, rise_db, end, settle=0) -> int | None:
    """Index of a second sharp onset shortly after ``onset``, or None.

    After the first local maximum of the level that follows the onset, a bounce is a rise of
    ``rise_db`` above the lowest level reached since that maximum.
    """
    b = min(end, onset + int(round(window_s * sample_rate)))
    # the level reaches its first maximum within the smoothing width plus the rise window
    d = max(2, int(round(2e-3 * sample_rate)), int(settle))
    if onset + d >= b:
        return None
    k = onset + int(np.argmax(level_db[onset : onset + d]))
    r = max(2, int(round(3e-3 * sample_rate)))  # a bounce rises as fast as an onset
    if b - k <= r:
        return None
    seg = level_db[k:b]
    from scipy.ndimage import minimum_filter1d

    prev_min = minimum_filter1d(seg, size=r, origin=(r - 1) // 2)  # min over [i - r + 1, i]
    rise = np.full(seg.shape[0], -np.inf)
    rise[r:] = seg[r:] - prev_min[r - 1 : -1]
    hits = np.flatnonzero((rise >= rise_db) & (seg >= level_db[k] - 6.0))
    return int(k + hits[0]) if hits.size else None


def _energy_step(slow_db: np.ndarray, onset: int, bounce: int, sample_rate: float) -> bool:
    """Whether the slow level rises 3 dB around ``bounce`` above its lowest since ``onset``."""
    a = onset + int(np.argmax(slow_db[onset:bounce + 1]))
    lo = float(np.min(slow_db[a : bounce + 1]))
    hi = float(np.max(slow_db[bounce : min(slow_db.shape[0], bounce + int(round(6e-3 * sample_rate)) + 1)]))
    return hi - lo >= 3.0


def find_clipping(x: np.ndarray, *, full_scale: float | None, min_run: int = 3) -> np.ndarray:
    """Indices of samples that sit on a clipping level, in runs of at least ``min_run``.

    With a known ``full_scale`` (integer audio) a sample within 0.1 % of it counts; otherwise
    (float audio, text) samples equal to the record's extreme value within 1e-9 relative
    count, which catches the flat tops that an overloaded analogue stage leaves. Three
    samples in a row is common practice, no source.

    Returns
    -------
    (m,) ndarray of int, sorted; empty when nothing is clipped.
    """
    ax = np.abs(x)
    peak = float(ax.max()) if ax.size else 0.0
    if peak <= 0:
        return np.empty(0, dtype=int)
    if full_scale is not None:
        level = 0.999 * min(full_scale, peak) if peak >= 0.999 * full_scale else np.inf
        on = ax >= level
    else:
        on = ax >= peak * (1.0 - 1e-9)
    if not on.any():
        return np.empty(0, dtype=int)
    # keep runs of length >= min_run
    d = np.diff(np.concatenate(([0], on.astype(np.int8), [0])))
    starts = np.flatnonzero(d == 1)
    ends = np.flatnonzero(d == -1)
    keep = (ends - starts) >= min_run
    if not keep.any():
        return np.empty(0, dtype=int)
    return np.concatenate([np.arange(s, e) for s, e in zip(starts[keep], ends[keep])])


def noise_psd(x_noise: np.ndarray, sample_rate: float) -> tuple[np.ndarray, np.ndarray]:
    """One-sided noise power spectral density of a noise-only segment (Welch 1967).

    Parameters
    ----------
    x_noise : (m,) ndarray of float, m >= 16
    sample_rate : float, Hz

    Returns
    -------
    f_hz : (k,) ndarray of float
    psd : (k,) ndarray of float, units^2/Hz
    """
    from scipy import signal

    nper = int(min(x_noise.shape[0], max(256, 2 ** int(math.floor(math.log2(max(x_noise.shape[0] // 4, 16)))))))
    f, p = signal.welch(x_noise, fs=sample_rate, nperseg=nper, detrend="constant")
    return f, p


def steady_tones(f_hz: np.ndarray, psd: np.ndarray, *, min_prominence_db: float = 15.0) -> list[float]:
    """Frequencies of narrow lines in a noise-only spectrum: tones that run whatever the part
    does (mains hum and its harmonics, a running machine), Hz.

    A line is a local maximum of the Welch spectrum at least ``min_prominence_db`` above the
    running median of the spectrum over 9 bins (common practice, no source); its frequency is
    refined by parabolic interpolation of the dB spectrum.

    Parameters
    ----------
    f_hz, psd : (k,) ndarray of float
        From :func:`noise_psd`.
    """
    from scipy import ndimage

    if psd.shape[0] < 9:
        return []
    db = 10.0 * np.log10(psd + 1e-300)
    floor = ndimage.median_filter(db, size=9, mode="nearest")
    inner = db[1:-1]
    k = np.flatnonzero((inner > db[:-2]) & (inner >= db[2:]) & (inner - floor[1:-1] >= min_prominence_db)) + 1
    out = []
    df = f_hz[1] - f_hz[0]
    for i in k:
        if i < 2:  # DC and the bin next to it hold what is left of the offset
            continue
        a, b, c = db[i - 1], db[i], db[i + 1]
        den = a - 2 * b + c
        off = float(np.clip(0.5 * (a - c) / den, -0.5, 0.5)) if den != 0 else 0.0
        out.append(float(f_hz[i] + off * df))
    return out
