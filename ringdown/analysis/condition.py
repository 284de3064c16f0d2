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
from dataclasses import dataclass, replace

import numpy as np

__all__ = [
    "HitSpan",
    "remove_drift",
    "remove_drift_and_step",
    "envelope_db",
    "envelope_smoothing",
    "noise_floor_db",
    "find_hits",
    "free_decay_start",
    "free_decay_starts",
    "find_clipping",
    "noise_psd",
    "steady_tones",
]

_EPS = 1e-300


@dataclass(frozen=True, slots=True)
class HitSpan:
    """Sample indices of one hit: onset, envelope peak, end of its decay (exclusive).

    ``bounce`` is the index of a second onset shortly after the hit (a hammer bounce), or
    ``None``. ``onset`` is where the free decay starts; ``kind`` says how it was found:
    ``"impulse"`` (a sharp rise, then the decay), ``"switch-off"`` (a steady oscillation, the
    forced response to a drive, stops and the level falls from its plateau) or ``"release"`` (a
    held static deflection let go). ``rise`` is the first sharp rise of the level (the tap, or
    the start of the drive; equal to ``onset`` for an impulse). ``doubt`` says why the start is
    uncertain, or is ``None``. ``from_innovation`` is True for a hit that only the prediction
    error showed (:func:`innovation`).
    """

    onset: int
    peak: int
    end: int
    bounce: int | None = None
    kind: str = "impulse"
    rise: int | None = None
    doubt: str | None = None
    from_innovation: bool = False


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
    sample_rate : float, Hz
    """
    x = np.asarray(x, dtype=np.float64)
    n = x.shape[0]
    if n < 4 * (DRIFT_DEGREE + 1):
        return x - x.mean()
    u = np.linspace(-1.0, 1.0, n)
    # fit on block means (at most ~4096 blocks): a polynomial of degree 5 is smooth at that
    # scale, and the means of an oscillation over whole periods are ~0, so the fit is the same,
    # and cheap. A block is a whole number of periods of the dominant frequency: a block of a
    # fraction of a period would keep the oscillation's partial cycles, whose projection on the
    # polynomials (~ amplitude / cycles in the record) leaks a slow drift into the record
    f_dom = dominant_frequency(x - x.mean(), sample_rate)
    period = max(1, int(round(sample_rate / f_dom))) if f_dom else 1
    b = period * max(1, -(-n // (4096 * period)))
    if n // b < 4 * (DRIFT_DEGREE + 1):
        b = max(1, n // 4096)
    m = (n // b) * b
    ub, xb = u[:m].reshape(-1, b).mean(axis=1), x[:m].reshape(-1, b).mean(axis=1)
    coef = np.polynomial.legendre.legfit(ub, xb, DRIFT_DEGREE)
    return x - _legval(u, coef)


def _legval(u: np.ndarray, coef: np.ndarray) -> np.ndarray:
    """``numpy.polynomial.legendre.legval(u, coef)`` for a low degree on ``[-1, 1]``, by Horner's
    rule on the power-series coefficients (``leg2poly``) in place: the same values to rounding
    (the conversion is exact in rational arithmetic and well conditioned at degree 5 on
    ``|u| <= 1``), at a quarter of the time on long records (legval's Clenshaw recursion allocates
    several arrays per degree)."""
    c = np.polynomial.legendre.leg2poly(coef)
    out = np.full(u.shape, c[-1])
    for a in c[-2::-1]:
        out *= u
        out += a
    return out


#: A step in the mean explains at least this fraction of what the drift polynomial leaves in the
#: block means (common practice, no source) ...
STEP_FRACTION = 0.9
#: ... and is at least this fraction of the record's largest excursion from the drift.
STEP_SIZE = 0.1


def remove_drift_and_step(x: np.ndarray, sample_rate: float) -> tuple[np.ndarray, int | None, float | None]:
    """Remove offset, slow drift and one step of the mean: a held deflection let go.

    A part held deflected and then released (or a sensor resting at another offset before the
    part moves) has a mean that steps at the release. A smooth polynomial cannot follow a step
    and leaves slow wiggles of a tenth of it on both sides, which hide the release in the
    level. After :func:`remove_drift`'s degree-5 fit to the block means, the step regressor
    ``H(i - j)`` that best explains the remaining block means is found in one pass (the
    residual's and the polynomial basis' suffix sums give each candidate's least-squares gain);
    it is kept when it explains :data:`STEP_FRACTION` of the residual and is at least
    :data:`STEP_SIZE` of the record's excursion. Then the polynomial and the step are fitted
    jointly, the step is placed to the sample (least squares within a block either side of the
    best block edge), and both are subtracted.

    Parameters
    ----------
    x : (n_samples,) ndarray of float
    sample_rate : float, Hz

    Returns
    -------
    y : (n_samples,) ndarray of float
        ``x`` less the drift (and the step).
    step : int or None
        Index of the first sample after the step, or ``None`` when there is none.
    dominant_hz : float or None
        :func:`dominant_frequency` of ``y`` (the FFT it needs is done here anyway; pass it to
        :func:`envelope_smoothing`).
    """
    x = np.asarray(x, dtype=np.float64)
    y = remove_drift(x, sample_rate)
    n = x.shape[0]
    f_dom = dominant_frequency(y, sample_rate)
    if n < 16 * (DRIFT_DEGREE + 1):
        return y, None, f_dom
    period = max(1, int(round(sample_rate / f_dom))) if f_dom else 1
    b = period * max(1, -(-n // (4096 * period)))
    nb = n // b
    if nb < 8 * (DRIFT_DEGREE + 1):
        return y, None, f_dom
    m = nb * b
    u = np.linspace(-1.0, 1.0, n)
    ub, xb = u[:m].reshape(-1, b).mean(axis=1), x[:m].reshape(-1, b).mean(axis=1)
    v = np.polynomial.legendre.legvander(ub, DRIFT_DEGREE)
    q, _ = np.linalg.qr(v)
    r = xb - q @ (q.T @ xb)
    r0 = float(r @ r)
    if r0 <= 0:
        return y, None, f_dom
    # gain of a step at block j (1 for blocks >= j): (sum_{i>=j} r_i)^2 / ((nb - j) - |sum_{i>=j} q_i|^2)
    sr = np.cumsum(r[::-1])[::-1]
    sq = np.cumsum(q[::-1], axis=0)[::-1]
    den = (nb - np.arange(nb)) - np.sum(sq * sq, axis=1)
    j_ok = np.arange(2, nb - 2)
    gain = np.where(den[j_ok] > 1e-9, sr[j_ok] ** 2 / np.maximum(den[j_ok], 1e-300), 0.0)
    j = int(j_ok[int(np.argmax(gain))])
    if float(np.max(gain)) < STEP_FRACTION * r0:
        return y, None, f_dom
    h = (np.arange(nb) >= j).astype(np.float64)
    sol, *_ = np.linalg.lstsq(np.column_stack([v, h]), xb, rcond=None)
    c = float(sol[-1])
    drift = _legval(u, sol[:-1])
    e = x - drift
    if abs(c) < STEP_SIZE * float(np.max(np.abs(e - np.median(e)))):
        return y, None, f_dom
    # the step to the sample: least squares of e - c H(i - k) over a block either side
    lo, hi = max(0, (j - 1) * b), min(n, (j + 1) * b)
    w = e[lo:hi]
    before = np.concatenate(([0.0], np.cumsum(w * w)))
    after = np.concatenate((np.cumsum(((w - c) ** 2)[::-1])[::-1], [0.0]))
    k = lo + int(np.argmin(before + after))
    step = (np.arange(n) >= k).astype(np.float64)
    out = e - c * step
    return out, k, dominant_frequency(out, sample_rate)


#: Every time span of hit detection is a multiple of the level's smoothing width ``W`` (one
#: period of the record's dominant frequency, at least 3 samples), so that the detection scales
#: with the record and not with the clock: the same samples declared at any sample rate give
#: the same hits. The multiples reproduce the former millisecond defaults for a ~700 Hz part at
#: 16-48 kHz, where W is ~1.4-1.6 ms (common practice for hand-held hammer taps, no source).
RISE_WIDTHS = 2.0  #: a hit rises within 2 W (~3 ms)
HOLD_OFF_WIDTHS = 35.0  #: hits closer than 35 W (~50 ms) are one hit
BOUNCE_WIDTHS = 20.0  #: a hammer bounce comes within 20 W (~30 ms) of the hit
ENERGY_STEP_WIDTHS = 4.0  #: a bounce raises the slow level within 4 W (~6 ms)


def _smoothing_samples(sample_rate: float, f_dom_hz: float | None = None) -> int:
    # one period of the dominant frequency, at least 3 samples: the level then does not swing
    # with the oscillation itself (common practice, no source). No absolute minimum in seconds:
    # a fast decay at a high sample rate must not be smoothed over its whole length.
    if not f_dom_hz or not math.isfinite(f_dom_hz) or f_dom_hz <= 0:
        return 3
    return max(3, int(round(sample_rate / f_dom_hz)))


def envelope_smoothing(x: np.ndarray, sample_rate: float, *, dominant_hz: float | None = None) -> int:
    """Width in samples of the moving average :func:`envelope_db` uses for ``x``.

    ``dominant_hz``: :func:`dominant_frequency` of ``x`` when already known (saves its FFT).
    """
    f = dominant_frequency(x, sample_rate) if dominant_hz is None else dominant_hz
    return _smoothing_samples(sample_rate, f)


def dominant_frequency(x: np.ndarray, sample_rate: float) -> float | None:
    """Frequency of the largest spectral magnitude away from DC, Hz (None for silence)."""
    n = x.shape[0]
    spec = np.abs(np.fft.rfft(x))
    k0 = min(3, spec.shape[0] - 1)
    if spec.shape[0] <= k0 + 1 or not np.any(spec[k0:] > 0):
        return None
    k = k0 + int(np.argmax(spec[k0:]))
    return k * sample_rate / n


def envelope_db(x: np.ndarray, sample_rate: float, *, smoothing: int | None = None) -> np.ndarray:
    """Smoothed broadband power in dB (re 1 unit^2), free of pre-ringing.

    ``x^2`` averaged over a centred window of ``smoothing`` samples (default
    :func:`envelope_smoothing`: one period of the record's dominant frequency), so that the
    level does not swing with the oscillation itself. A centred moving average spreads an onset
    by half its width and no further (an FFT Hilbert envelope would ring well before the onset).

    Returns
    -------
    (n_samples,) ndarray of float, dB
    """
    w = envelope_smoothing(x, sample_rate) if smoothing is None else max(1, int(smoothing))
    c = np.concatenate(([0.0], np.cumsum(x * x)))
    n = x.shape[0]
    # the window of sample i is [i - h, i - h + w) clipped to [0, n): c[hi] - c[lo] from slices
    # of c (the clipped ends hold c[0] and c[n]), the counts from the clipped ends alone
    h = w // 2
    a = w - h  # >= 1: hi = i + a, at most n
    k_lo, k_hi = min(h, n), max(n - a + 1, 0)  # lo = 0 below k_lo; hi = n from k_hi on
    s = np.empty(n)
    s[:k_hi] = c[a : a + k_hi]
    s[k_hi:] = c[n]
    s[k_lo:] -= c[: n - k_lo]
    s[:k_lo] -= c[0]
    count = np.full(n, w)
    count[:k_lo] -= np.arange(h, h - k_lo, -1)  # h - i samples before the record's start
    if k_hi < n:
        count[k_hi:] -= np.arange(k_hi + a - n, a)  # i + a - n samples past its end
    s /= np.maximum(count, 1)
    s += _EPS
    np.log10(s, out=s)
    s *= 10.0  # = 10 log10(mean + _EPS), in place
    return s


#: Blocks of the level over which :func:`noise_floor_db` takes medians, in smoothing widths.
NOISE_BLOCK_WIDTHS = 8
#: The record's first this many smoothing widths also count as a block (a short pre-trigger): two
#: widths hold about two independent values of the level, whose median is still within a few dB
#: of the noise's mean level, far inside the 20 dB a hit must rise (common practice, no source).
LEAD_BLOCK_WIDTHS = 2


def noise_floor_db(level_db: np.ndarray, smoothing: int = 3) -> float:
    """Broadband noise floor: the median level of the quietest stretch of the record, dB.

    The level is cut into blocks of ``8 smoothing`` samples (at least 32); the floor is the
    lowest block median, or the median of the record's first ``2 smoothing`` samples (a
    pre-trigger shorter than a block) when that is lower. Any stretch of that length where only noise is (a short pre-trigger,
    the tail after the decay) sets it, however little of the record it is; a percentile of the
    whole level would sit on the ringing of a lightly damped mode that fills the record. When no
    block is noise only, the floor is the quietest part of the decay: an upper bound.

    Parameters
    ----------
    level_db : (n_samples,) ndarray of float
        From :func:`envelope_db`.
    smoothing : int
        The smoothing width (samples) that made ``level_db``.
    """
    n = level_db.shape[0]
    b = max(32, NOISE_BLOCK_WIDTHS * int(smoothing))
    # the record's leading stretch of LEAD_BLOCK_WIDTHS W: a pre-trigger shorter than one block
    # (a slow dominant mode makes W long) still sets the floor
    lead = float(np.median(level_db[: max(16, LEAD_BLOCK_WIDTHS * int(smoothing))]))
    if n < 2 * b:
        return min(float(np.median(level_db)), lead)
    m = (n // b) * b
    med = np.median(level_db[:m].reshape(-1, b), axis=1)
    if m < n:
        med = np.append(med, np.median(level_db[n - b :]))
    return min(float(np.min(med)), lead)


#: Order of the linear predictor whose prediction error shows a new hit on a ringing record: it
#: cancels up to ORDER / 2 steady or slowly decaying modes (common practice, no source).
INNOVATION_ORDER = 32


def innovation(x: np.ndarray, order: int = INNOVATION_ORDER) -> np.ndarray:
    """Prediction error of ``x`` under its own linear predictor (Yule-Walker, autocorrelation method).

    Modes still ringing from an earlier hit are predictable from the samples before, so they
    cancel; the force of a new tap is not, so it stands out however loud the ringing is (the
    innovation of the autoregressive model is the excitation of a linear system: Makhoul,
    "Linear prediction: a tutorial review", Proc. IEEE 63(4), 1975 [from memory]).

    Parameters
    ----------
    x : (n,) ndarray of float
        Conditioned record.
    order : int
        Predictor order (at most n / 8).

    Returns
    -------
    (n,) ndarray of float, the prediction error (the first ``order`` samples use the zeros
    before the record).
    """
    from scipy import linalg, signal

    n = x.shape[0]
    p = int(min(order, n // 8))
    if p < 2:
        return np.array(x, dtype=np.float64)
    # the biased autocorrelation at lags 0..p: p + 1 dot products (O(n p)) cost less than the
    # two FFTs of twice the record's length that give every lag (and are as exact)
    xd = np.asarray(x, dtype=np.float64)
    r = np.array([np.dot(xd[: n - k], xd[k:]) for k in range(p + 1)]) / n
    if not r[0] > 0:
        return np.array(x, dtype=np.float64)
    r[0] *= 1.0 + 1e-9  # white-noise regularisation of an (almost) noiseless record
    try:
        a = linalg.solve_toeplitz(r[:p], r[1 : p + 1])
    except (np.linalg.LinAlgError, ValueError):
        return np.array(x, dtype=np.float64)
    return signal.lfilter(np.concatenate(([1.0], -a)), [1.0], x)


#: The burst of a tap in the prediction error spans the samples within this many dB of its
#: largest one (the -20 dB width of a pulse; common practice, no source).
BURST_DB = 20.0


def burst_length(e: np.ndarray) -> int:
    """Length in samples of the largest burst of the prediction error ``e`` (n,): the samples
    around the largest ``|e|`` within ``BURST_DB`` of it (at least 1). A tap's force lasts about
    this long (one sample for an ideal impulse, the contact time of a real hammer)."""
    if e.shape[0] == 0:
        return 1
    p = e * e
    k = int(np.argmax(p))
    if not p[k] > 0:
        return 1
    low = p < p[k] * 10.0 ** (-BURST_DB / 10.0)
    before = np.flatnonzero(low[:k])
    after = np.flatnonzero(low[k:])
    lo = int(before[-1]) + 1 if before.size else 0
    hi = k + int(after[0]) if after.size else e.shape[0]
    return max(1, hi - lo)


def innovation_smoothing(e: np.ndarray, smoothing: int) -> int:
    """Width in samples over which to average the prediction error ``e`` (n,) for its level.

    A tap's force is a burst in the prediction error as long as the force lasts (one sample for
    an ideal impulse, the contact time of a real hammer), while the broadband level's
    ``smoothing`` (one period of the dominant frequency) can be hundreds of samples: averaged that
    long, a short burst is diluted by ``10 log10(smoothing / burst)`` dB and a second tap over
    loud ringing can drown in the predictor's residual. The width is therefore the record's own
    burst (:func:`burst_length`), at least 3 samples and at most ``smoothing``.
    """
    return int(min(max(3, burst_length(e)), max(3, int(smoothing))))


def find_hits(
    level_db: np.ndarray,
    sample_rate: float,
    *,
    noise_db: float,
    min_hit_snr_db: float = 20.0,
    rise_db: float = 12.0,
    smoothing: int = 3,
    rise_samples: int | None = None,
    hold_off_samples: int | None = None,
    bounce_window_samples: int | None = None,
    bounce_rise_db: float = 10.0,
    slow_level_db: np.ndarray | None = None,
    innovation_level_db: np.ndarray | None = None,
) -> list[HitSpan]:
    """Find every hit in a recording from its envelope level.

    A hit starts where the level rises at least ``rise_db`` within ``rise_samples``, ends up
    at least ``min_hit_snr_db`` above the noise, and exceeds everything in the preceding
    ``hold_off_samples`` by 3 dB (so that beating of modes in a decay is not taken for a new
    hit). Hits closer than ``hold_off_samples`` are one hit. Within ``bounce_window_samples``
    after the first maximum, a rise of ``bounce_rise_db`` within ``rise_samples`` (as fast as
    an onset), back to within 6 dB of that maximum, marks a bounce (a second contact of the
    hammer). Two modes of similar amplitude some 100 Hz apart can beat deeply enough to look
    like one; a recording whose only hits are flagged is still analysed, with the warning.
    Every span is in samples, by default a multiple of ``smoothing`` (:data:`RISE_WIDTHS`,
    :data:`HOLD_OFF_WIDTHS`, :data:`BOUNCE_WIDTHS`), so that detection does not depend on the
    declared sample rate. Defaults are common practice for hand-held hammer taps, no source.

    Parameters
    ----------
    level_db : (n_samples,) ndarray of float
        From :func:`envelope_db`.
    sample_rate : float, Hz (unused: every span is in samples; kept for the common signature)
    noise_db : float
        From :func:`noise_floor_db`.
    smoothing : int
        Width in samples of the smoothing that made ``level_db`` (see :func:`envelope_smoothing`).
    rise_samples, hold_off_samples, bounce_window_samples : int or None
        Spans in samples; ``None`` for the multiples of ``smoothing`` above.
    slow_level_db : (n_samples,) ndarray or None
        The level smoothed over twice ``smoothing``. When given, a bounce must also raise it by
        3 dB: a second contact adds energy, while modes beating faster than that window only
        move the energy between them.
    innovation_level_db : (n_samples,) ndarray or None
        The level of :func:`innovation` of the record (averaged over
        :func:`innovation_smoothing`). When given, a rise of it by the same rules, against its
        own noise floor, is a hit too (a second tap while
        modes of the first still ring barely raises the broadband level, but it raises the
        prediction error as much as the first tap did).

    Returns
    -------
    list of HitSpan, in time order; empty when nothing rises above the noise.
    """
    n = level_db.shape[0]
    sm = max(1, int(smoothing))
    w = max(2, int(rise_samples) if rise_samples is not None else int(round(RISE_WIDTHS * sm)))
    hold = max(w + 1, int(hold_off_samples) if hold_off_samples is not None else int(round(HOLD_OFF_WIDTHS * sm)))
    bw = int(bounce_window_samples) if bounce_window_samples is not None else int(round(BOUNCE_WIDTHS * sm))
    w = min(w, max(2, n - 1))
    onsets = _level_onsets(level_db, w, hold, rise_db, noise_db + min_hit_snr_db)
    if not onsets:
        return []
    inn = level_db
    from_innovation: set[int] = set()
    if innovation_level_db is not None:
        inn = np.asarray(innovation_level_db, dtype=np.float64)
        kept = _innovation_onsets(inn, onsets, w, hold, rise_db, noise_floor_db(inn, sm) + min_hit_snr_db)
        from_innovation = set(kept)
        onsets = sorted(onsets + kept)
    rules = _HitRules(sm, w, hold, bw, bounce_rise_db)
    return [
        sp
        for j, k in enumerate(onsets)
        for sp in [_span_at(level_db, inn if k in from_innovation else level_db, onsets, j, rules, slow_level_db)]
        if sp is not None
    ]


@dataclass(frozen=True, slots=True)
class _HitRules:
    """The spans :func:`find_hits` works with, in samples."""

    sm: int  #: smoothing width W
    w: int  #: a rise happens within this many samples
    hold: int  #: hits closer than this are one
    bw: int  #: a bounce comes within this many samples
    bounce_rise_db: float  #: a bounce rises this much, dB


def _span_at(
    level_db: np.ndarray,
    ref: np.ndarray,
    onsets: list[int],
    j: int,
    rules: _HitRules,
    slow_level_db: np.ndarray | None,
) -> HitSpan | None:
    """The span of the hit that rises at ``onsets[j]``, timed on ``ref`` (the level that showed
    it: a hit over ringing on the prediction error's); None when the record ends before it
    leaves any decay. The centred smoothing turns a step in power into a ramp one smoothing
    width long, centred on the step: the onset is where the ramp reaches half (-3 dB) of the
    level just after it."""
    n, sm, k = level_db.shape[0], rules.sm, onsets[j]
    top = float(np.max(ref[k : min(n, k + sm + 1)]))
    lo_i = max(0, k - sm)
    reach = np.flatnonzero(ref[lo_i : k + sm + 1] >= top - 3.0103)
    onset = lo_i + int(reach[0]) if reach.size else k
    end = onsets[j + 1] - sm if j + 1 < len(onsets) else n
    stop = min(end, onset + rules.hold + rules.bw)
    if stop <= onset:
        return None  # a rise in the record's last samples leaves no decay to measure
    bounce = _find_bounce(level_db, k, rules.bw, rules.w, rules.bounce_rise_db, end, sm + rules.w)
    if bounce is not None and slow_level_db is not None and not _energy_step(slow_level_db, k, bounce, sm):
        bounce = None
    # the peak: the level's maximum (after a bounce, the one after it). Free decays only fall
    # once the force has ended, so with no bounce a later maximum within half power (3 dB) of
    # the first is the ripple or beating of lightly damped modes: it put the peak at the
    # record's end and left no decay to measure. The peak is then the largest level within the
    # smoothing width plus the rise window (as for the bounce search) of the first sample that
    # reaches half the maximum's power (as the onset is timed on the ramp's half power).
    peak = onset + int(np.argmax(level_db[onset:stop]))
    if bounce is None:
        first = onset + int(np.flatnonzero(level_db[onset : peak + 1] >= level_db[peak] - 3.0103)[0])
        peak = first + int(np.argmax(level_db[first : min(peak, first + sm + rules.w) + 1]))
    return HitSpan(onset=onset, peak=peak, end=end, bounce=bounce, from_innovation=ref is not level_db)


def _level_onsets(level_db: np.ndarray, w: int, hold: int, rise_db: float, threshold: float) -> list[int]:
    """Indices of the sharp rises of ``level_db`` (:func:`_rises`), one per ``hold`` samples;
    the first crossing of ``threshold`` when there is none (the first rise from a quiet start
    has nothing before it); empty when the level never reaches ``threshold``."""
    onsets: list[int] = []
    for k in _rises(level_db, w, hold, rise_db, threshold):
        if onsets and k - onsets[-1] < hold:
            continue
        onsets.append(int(k))
    if not onsets:
        above = np.flatnonzero(level_db >= threshold)
        if above.size:
            onsets = [int(above[0])]
    return onsets


def _innovation_onsets(
    inn_db: np.ndarray, onsets: list[int], w: int, hold: int, rise_db: float, threshold: float
) -> list[int]:
    """Rises of the prediction error's level ``inn_db`` (:func:`_rises`) after the first of
    ``onsets`` and at least ``hold`` samples from every onset: the hits only it shows."""
    kept: list[int] = []
    for k in _rises(inn_db, w, hold, rise_db, threshold):
        if all(abs(int(k) - o) >= hold for o in onsets + kept) and int(k) > onsets[0]:
            kept.append(int(k))
    return kept


def _rises(level_db: np.ndarray, w: int, hold: int, rise_db: float, threshold: float) -> np.ndarray:
    """Indices where ``level_db`` rises ``rise_db`` within ``w`` samples, reaches ``threshold``
    and exceeds everything in the preceding ``hold`` samples by 3 dB."""
    from scipy.ndimage import maximum_filter1d, minimum_filter1d

    n = level_db.shape[0]
    prev_min = np.full(n, np.inf)
    # constant borders: a reflecting border would bring later samples (the hit itself) into the
    # window of the record's first samples
    m = minimum_filter1d(level_db, size=w, origin=(w - 1) // 2, mode="constant", cval=np.inf)  # min over [k - w + 1, k]
    prev_min[1:] = m[:-1]
    cand = np.flatnonzero((level_db - prev_min >= rise_db) & (level_db >= threshold))
    span = min(hold - w, n)
    if not (span > 0 and n > w) or cand.size == 0:
        return cand  # nothing precedes by more than w samples: the 3 dB test passes (-inf)
    # the maximum over [k - w - span + 1, k - w] (-inf before k = w) at the candidates alone: the
    # running maximum of each cluster of candidates (gaps <= span) over the samples its windows
    # cover, the same numbers as over the whole level (a window never reaches past its cluster's)
    prev_max = np.full(cand.size, -np.inf)
    need = np.flatnonzero(cand >= w)
    if need.size:
        ks = cand[need]
        cuts = np.flatnonzero(np.diff(ks) > span) + 1
        for part, k_part in zip(np.split(need, cuts), np.split(ks, cuts)):
            lo = max(0, int(k_part[0]) - w - span + 1)
            mx = maximum_filter1d(
                level_db[lo : int(k_part[-1]) - w + 1], size=span, origin=(span - 1) // 2, mode="constant", cval=-np.inf
            )  # max over [j - span + 1, j], from lo
            prev_max[part] = mx[k_part - w - lo]
    return cand[level_db[cand] >= prev_max + 3.0]


def _find_bounce(level_db, onset, window, rise, rise_db, end, settle=0) -> int | None:
    """Index of a second sharp onset within ``window`` samples after ``onset``, or None.

    After the first local maximum of the level that follows the onset (within ``settle``
    samples: the smoothing width plus the rise window), a bounce is a rise of ``rise_db``
    within ``rise`` samples (as fast as an onset) above the lowest level reached since that
    maximum.
    """
    b = min(end, onset + int(window))
    d = max(2, int(settle))
    if onset + d >= b:
        return None
    k = onset + int(np.argmax(level_db[onset : onset + d]))
    r = max(2, int(rise))
    if b - k <= r:
        return None
    seg = level_db[k:b]
    from scipy.ndimage import minimum_filter1d

    prev_min = minimum_filter1d(
        seg, size=r, origin=(r - 1) // 2, mode="constant", cval=np.inf
    )  # min over [i - r + 1, i]
    rise_arr = np.full(seg.shape[0], -np.inf)
    rise_arr[r:] = seg[r:] - prev_min[r - 1 : -1]
    hits = np.flatnonzero((rise_arr >= rise_db) & (seg >= level_db[k] - 6.0))
    return int(k + hits[0]) if hits.size else None


def _energy_step(slow_db: np.ndarray, onset: int, bounce: int, smoothing: int) -> bool:
    """Whether the slow level rises 3 dB around ``bounce`` (within 4 smoothing widths) above
    its lowest since ``onset``."""
    a = onset + int(np.argmax(slow_db[onset : bounce + 1]))
    lo = float(np.min(slow_db[a : bounce + 1]))
    reach = int(round(ENERGY_STEP_WIDTHS * smoothing))
    hi = float(np.max(slow_db[bounce : min(slow_db.shape[0], bounce + reach + 1)]))
    return hi - lo >= 3.0


#: The plateau of a driven response may fall at most this fraction of the rate at which the
#: level falls after it (common practice, no source): an impulse response falls at one rate
#: from its peak, a switched-off drive holds its level and then falls.
PLATEAU_SLOPE_RATIO = 0.25
#: A plateau must last at least this many smoothing widths (common practice, no source).
PLATEAU_WIDTHS = 4
#: ... and the level must fall this far below it afterwards (dB; common practice, no source).
FALL_DB = 20.0


def free_decay_starts(
    x: np.ndarray, level_db: np.ndarray, spans: list[HitSpan], *, smoothing: int, noise_db: float
) -> list[HitSpan]:
    """:func:`free_decay_start` of every hit of :func:`find_hits`, in order.

    The end of a drive is an innovation too (the force stops), so the prediction error shows a
    hit where a switch-off or release starts a free decay. A hit that only the prediction error
    showed is therefore joined to the hit before it when the two together are a switch-off or
    release whose free decay starts within ``HOLD_OFF_WIDTHS`` smoothing widths of it.
    """
    sm = max(1, int(smoothing))
    hold = int(round(HOLD_OFF_WIDTHS * sm))
    out: list[HitSpan] = []
    prev: HitSpan | None = None
    for sp in spans:
        if sp.from_innovation and prev is not None:
            joined = free_decay_start(
                x, level_db, replace(prev, end=sp.end, from_innovation=False), smoothing=sm, noise_db=noise_db
            )
            if joined.kind != "impulse" and abs(joined.onset - sp.onset) <= hold:
                out[-1] = joined
                prev = replace(prev, end=sp.end)
                continue
        out.append(free_decay_start(x, level_db, sp, smoothing=sm, noise_db=noise_db))
        prev = sp
    return out


def free_decay_start(x: np.ndarray, level_db: np.ndarray, span: HitSpan, *, smoothing: int, noise_db: float) -> HitSpan:
    """Where the free decay of a hit starts: at the hit itself, or where a steady drive stops.

    A forced response (an RLC circuit or a part driven by a shaker) holds its level while the
    drive runs, and the free decay at the natural frequency starts only when the drive stops;
    before that, the record holds the drive frequency, which is not a mode. The level from the
    hit's rise (two smoothing widths on) is split at ``k_last``, the last sample within 10 dB of
    the hit's highest level. The part
    before it is a plateau when it lasts at least :data:`PLATEAU_WIDTHS` smoothing widths, falls
    (least-squares slope of the dB level) at less than :data:`PLATEAU_SLOPE_RATIO` of the rate
    of the next 10 dB of fall, and the level afterwards falls at least :data:`FALL_DB` below the
    plateau (or to within 6 dB of the noise). Then the free decay starts two smoothing widths
    after the last sample within 1 dB of the plateau's median level: never before the drive
    stopped (the centred smoothing starts to fall one width early), at the cost of a little of
    the decay. The start is a ``"release"`` when the plateau is a static deflection (the
    variance of the raw samples about their mean there is less than a tenth of that of the
    first two smoothing widths of the free decay: common practice, no source) and a
    ``"switch-off"`` (a forced oscillation stopped) otherwise. An impulse whose rise is the first sample of the record is marked uncertain: the
    record may start after the decay did.

    Parameters
    ----------
    x : (n_samples,) ndarray of float
        The samples before offset and drift removal (a held deflection is an offset there).
    level_db : (n_samples,) ndarray of float
        The level of the conditioned samples smoothed over twice ``smoothing`` (:func:`envelope_db`).
    span : HitSpan
        From :func:`find_hits`.
    smoothing : int
        Smoothing width of :func:`envelope_smoothing`, samples.
    noise_db : float
        Broadband noise floor, dB.

    Returns
    -------
    HitSpan
        ``span`` with ``onset``/``peak`` moved to the free decay's start for a switch-off or
        release, ``kind``, ``rise`` and ``doubt`` set.
    """
    sm = max(1, int(smoothing))
    span = HitSpan(span.onset, span.peak, span.end, span.bounce, "impulse", span.onset, None)
    # from two widths after the rise (past the smoothing's ramp) to the end of the hit
    a, b = min(span.onset + 2 * sm, span.peak), span.end
    seg = level_db[a:b]
    if seg.shape[0] < 4 * PLATEAU_WIDTHS * sm:
        return _start_doubt(span)
    top = float(np.max(seg))
    near = np.flatnonzero(seg >= top - 10.0)
    k_last = int(near[-1])
    after = seg[k_last:]
    fell = np.flatnonzero(after <= seg[k_last] - 10.0)
    if k_last < PLATEAU_WIDTHS * sm or fell.size == 0:
        return _start_doubt(span)
    plateau = seg[:k_last]
    level_p = float(np.median(plateau))
    lowest = float(np.min(after))
    if lowest > level_p - FALL_DB and lowest > noise_db + 6.0:
        return _start_doubt(span)
    if not _plateau_then_fall(seg, k_last, k_last + int(fell[0])):
        return _start_doubt(span)
    high = np.flatnonzero(seg[: k_last + 1] >= level_p - 1.0)
    k_off = int(high[-1]) if high.size else 0
    start = a + k_off + 2 * sm
    if start >= b - 4 * sm:
        return _start_doubt(span)
    xp = x[a : a + k_off + 1]
    xd = x[start : min(b, start + 2 * sm)]
    p_decay = float(np.var(xd)) if xd.size > 1 else 0.0
    kind = "release" if xp.size > 1 and float(np.var(xp)) < 0.1 * p_decay else "switch-off"
    doubt = None
    scatter = float(np.std(plateau))
    if scatter > 3.0:
        doubt = (
            f"the level before the {kind} was not steady (scatter {scatter:.1f} dB); "
            "the free decay's start is uncertain"
        )
    peak = start + int(np.argmax(level_db[start : min(b, start + 2 * sm + 1)]))
    return HitSpan(start, peak, b, span.bounce, kind, span.onset, doubt)


def _plateau_then_fall(seg: np.ndarray, k_last: int, k_fall: int) -> bool:
    """Whether the level ``seg`` (dB) holds a plateau before ``k_last`` and then falls (to
    ``k_fall``): the least-squares slope of the fall is negative and that of the plateau more than
    ``PLATEAU_SLOPE_RATIO`` of it (so falls at less than that fraction of the rate)."""
    plateau = seg[:k_last]
    u = np.arange(plateau.shape[0], dtype=np.float64)
    slope_p = float(np.polyfit(u, plateau, 1)[0]) if plateau.shape[0] >= 3 else 0.0
    fall = seg[k_last : k_fall + 1]
    slope_f = (
        float(np.polyfit(np.arange(fall.shape[0], dtype=np.float64), fall, 1)[0])
        if fall.shape[0] >= 3
        else (float(seg[k_fall]) - float(seg[k_last])) / max(k_fall - k_last, 1)
    )
    return slope_f < 0 and slope_p > PLATEAU_SLOPE_RATIO * slope_f


def _start_doubt(span: HitSpan) -> HitSpan:
    if span.onset > 0:
        return span
    return HitSpan(
        span.onset,
        span.peak,
        span.end,
        span.bounce,
        span.kind,
        span.rise,
        "the level is already high at the first sample: the record may start after the decay did, "
        "so its start is not in the record",
    )


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
