"""Finding the modes of one decay from the signal model, judged against the measured noise.

A tap excites modes from Q ~ 3 (a rubber mount, a shock absorber) to Q ~ 1e5 (a quartz or
ceramic resonator). Their spectral peaks range from a broad hump that rises only ~20 log10(Q) dB
above its own skirt to a line one bin wide, so no single peak-prominence rule sees all of them.
This module proposes *candidates* from three searches and judges each one by its matched-filter
signal-to-noise ratio against the noise spectrum measured on the same record:

1. **Early, full-band search** (for fast decays). The real record from the hit onset on, at the
   full rate and at rates lowered by 4x and 16x (exact band-limited decimation by truncating its
   FFT), a few hundred samples each: matrix pencil (Hua & Sarkar 1990) on the real samples, where
   every mode is a pair of conjugate poles. A mode that decays in a few periods is found here
   before any band filter could settle on it, and it starts at the onset, not at the broadband
   level's peak.
2. **Sub-band search** (for weak modes beside strong ones and many modes). Overlapping one-octave
   bands, half an octave apart, cover the spectrum; each band's complex envelope
   (:func:`ringdown.bands.extract_band`) is decimated to its bandwidth and searched by the matrix
   pencil over a window of a few hundred periods. Each band owns the poles that lie in its central
   half octave, so overlapping bands never report a pole twice.
3. **Spectral peaks** of the decay against the noise spectrum (:func:`ringdown.peaks.find_peaks`),
   for the sharpest modes, which a short window cannot resolve.

Model order and stability. In each search the signal subspace holds the singular values of the
Hankel matrix above the Marchenko-Pastur edge of the measured noise (times a margin; the same rule
as :mod:`ringdown.estimators.pencil`). Poles are computed at that order and at two and four more;
a pole is kept when it stays put at the higher orders (the stabilisation diagram of modal
analysis: Peeters & De Roeck 2001), since poles that model noise wander as the order grows.

Significance. A damped cosine ``A exp(-beta t) cos(2 pi f t + phi)`` in noise of one-sided
density ``S(f)`` (units^2/Hz) has a matched-filter (quadrature detector) signal-to-noise ratio

    d = A^2 (1 - exp(-2 beta T)) / (4 beta S(f))

over a decay of length ``T`` [derived: the energy of the analytic signal over the density of its
noise]. Each candidate's ``d`` is measured on the data, not extrapolated: the least-squares
amplitude of its pole over the rest of the decay (the sub-band search) or over its window (the
early search), with the other poles of the same search fitted jointly, over that amplitude's
variance for noise of the measured density at the candidate's frequency (a Wald statistic; it
equals the matched-filter ``d`` for one isolated mode). For noise alone the statistic is
exponentially distributed with mean 1, so the largest of ``M`` independent cells exceeds
``ln(M / p)`` with probability about ``p``. The search covers
about ``M = n_bins * n_rates`` cells (frequency bins of the decay times the octaves of decay rate
it can tell apart), and a candidate must reach ``d >= ln(M / P_FALSE)`` with ``P_FALSE = 1e-3``
per record [derived; the probability is a choice]. A candidate below it is kept as a rejection
(``near_noise``) so that the user sees it.

References
----------
Y. Hua and T. K. Sarkar, IEEE Trans. ASSP 38(5):814-824, 1990 (matrix pencil).
B. Peeters and G. De Roeck, "Stochastic system identification for operational modal analysis: a
review", J. Dyn. Sys. Meas. Control 123(4), 2001, and Mech. Syst. Signal Process. 15(4), 2001
(stabilisation diagrams) [from memory].
V. A. Marchenko and L. A. Pastur, Math. USSR-Sbornik 1(4):457-483, 1967 (edge of the noise
singular values) [from memory].
S. M. Kay, Fundamentals of Statistical Signal Processing II: Detection Theory, 1998, ch. 7
(matched filter, quadrature detector) [from memory].
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..base._lazy import lazy_module
from .bands import Band, extract_band, settling_time_s, spectrum_of

scipy_linalg = lazy_module("scipy.linalg")

__all__ = [
    "Candidate",
    "find_candidates",
    "band_noise_rms",
    "noise_density",
    "mf_snr",
    "snr_threshold",
    "P_FALSE",
    "SV_MARGIN",
]

#: False candidates per record the significance threshold allows (a choice, see module notes).
P_FALSE = 1e-3
#: Margin on the Marchenko-Pastur edge of the noise singular values (as in estimators/pencil.py:
#: common practice, no source).
SV_MARGIN = 4.0
#: Samples of the early full-band search at each rate, and of each sub-band search (the pencil's
#: SVD costs ~ N^3 / 9: a few milliseconds at 384 samples).
EARLY_SAMPLES = 384
BAND_SAMPLES = 256
#: Rate reductions of the early search (1: the full rate only; an FFT-truncation decimation of a
#: segment that starts at full amplitude rings at its start and was found to propose false poles).
EARLY_FACTORS = (1,)
#: Most poles one search may hold (complex poles for a sub-band, pairs for the real search).
MAX_ORDER = 40
#: Extra orders the stability test looks at (the pole must stay put at order + 2 and + 4).
STABILITY_ORDERS = (2, 4)


@dataclass(frozen=True, slots=True)
class Candidate:
    """One mode proposed by a search, before it is measured.

    Attributes
    ----------
    f_hz : float
        Damped frequency, Hz.
    beta_per_s : float or None
        Decay rate, 1/s (None for a spectral peak, which gives only a width).
    width_hz : float
        Half-power bandwidth guess ``beta / pi`` (or the spectral peak's width), at least the
        search's frequency resolution, Hz.
    amplitude : float or None
        Amplitude ``A`` of the real oscillation at the search window's start, recording units.
    snr : float or None
        Matched-filter signal-to-noise ratio ``d`` (power ratio, see module notes).
    source : str
        ``"early"``, ``"band"`` or ``"spectrum"``.
    fit_id : int
        Which search found it (poles of one search are never merged with each other).
    resolution_hz : float
        Frequency resolution of that search (one over its window), Hz.
    """

    f_hz: float
    beta_per_s: float | None
    width_hz: float
    amplitude: float | None
    snr: float | None
    source: str
    fit_id: int = 0
    resolution_hz: float = 0.0

    @property
    def snr_db(self) -> float | None:
        return None if self.snr is None else 10.0 * math.log10(max(self.snr, 1e-300))


def noise_density(f_hz, noise_f: np.ndarray, noise_p: np.ndarray):
    """One-sided noise density at ``f_hz`` (units^2/Hz), interpolated in the measured spectrum
    (the Welch DC bin, emptied by its detrending, is left out)."""
    return np.interp(f_hz, noise_f[1:], noise_p[1:])


#: Fewest cycles a candidate must complete over the decay: below, the record's drift removal (a
#: degree-5 polynomial, which follows up to a few cycles) and DC leave poles that are no modes
#: (common practice, no source).
MIN_CYCLES = 10.0
#: Welch bins averaged for the noise density a candidate is judged against (see smooth_density).
DENSITY_BINS = 9


def smooth_density(noise_p: np.ndarray) -> np.ndarray:
    """The noise PSD averaged over ``DENSITY_BINS`` neighbouring bins (DC left out).

    A Welch estimate from a short pre-trigger averages few segments, so one bin may lie several
    times below the true density (a chi-square variable with few degrees of freedom), and a
    candidate judged against that bin would look far more significant than it is. Averaging 9
    bins multiplies the degrees of freedom by 9 (the density varies little over 9 bins).
    """
    from scipy import ndimage

    out = np.array(noise_p, dtype=np.float64)
    if out.shape[0] > DENSITY_BINS + 1:
        out[1:] = ndimage.uniform_filter1d(out[1:], DENSITY_BINS, mode="nearest")
    return out


def band_noise_rms(band: Band, noise_f: np.ndarray, noise_p: np.ndarray) -> float:
    """RMS of ``|z|`` that the noise alone gives in this band: ``sqrt(2 S B)``, with ``S`` the
    noise density weighted by the squared mask and ``B`` the mask's noise bandwidth.

    A band narrower than two Welch bins takes the density interpolated at its centre.
    """
    f_w, p_w = noise_f[1:], noise_p[1:]
    weight = band.mask(f_w) ** 2
    if weight.sum() >= 2.0:
        s = float(np.sum(weight * p_w) / np.sum(weight))
    else:
        s = float(noise_density(band.centre_hz, noise_f, noise_p))
    return math.sqrt(max(2.0 * s * band.width_hz, 1e-300))  # width_hz = integral of mask^2


def mf_snr(amplitude: float, beta_per_s: float, duration_s: float, density: float) -> float:
    """Matched-filter SNR ``A^2 (1 - exp(-2 beta T)) / (4 beta S)`` of a damped cosine of
    amplitude ``A`` (units), decay rate ``beta`` (1/s) over ``T`` seconds in noise of one-sided
    density ``S`` (units^2/Hz); for ``beta -> 0`` it tends to ``A^2 T / (2 S)``."""
    bt = 2.0 * max(beta_per_s, 0.0) * duration_s
    energy = duration_s if bt < 1e-9 else -math.expm1(-bt) / (2.0 * beta_per_s)
    return amplitude**2 * energy / (2.0 * max(density, 1e-300))


def snr_threshold(n_samples: int, sample_rate: float) -> float:
    """Smallest matched-filter SNR (power ratio) a candidate needs: ``ln(M / P_FALSE)`` with
    ``M`` = frequency bins of the decay times the octaves of decay rate from ``1/T`` to
    ``pi * Nyquist`` (see module notes)."""
    t = n_samples / sample_rate
    n_bins = max(n_samples // 2, 1)
    n_rates = max(math.log2(max(math.pi * sample_rate / 2.0 * t, 2.0)), 1.0)
    return math.log(n_bins * n_rates / P_FALSE)


def _hankel_svd(y: np.ndarray):
    n = y.shape[0]
    lp = max(n // 3, 1)
    rows = n - lp
    hank = scipy_linalg.hankel(y[:rows], y[rows - 1 :])
    try:
        _, sv, vh = scipy_linalg.svd(hank, full_matrices=False, lapack_driver="gesdd")
    except (np.linalg.LinAlgError, ValueError):
        _, sv, vh = scipy_linalg.svd(hank, full_matrices=False, lapack_driver="gesvd")
    return sv, vh, rows, lp


def _poles_at(vh: np.ndarray, order: int, fs: float) -> np.ndarray:
    # H = U S Vh: the rows of Vh span the row space of H, i.e. the vectors (z_k^j)_j themselves
    w = vh[:order].T
    psi, *_ = np.linalg.lstsq(w[:-1], w[1:], rcond=None)
    zk = np.linalg.eigvals(psi)
    zk = zk[np.isfinite(zk) & (np.abs(zk) > 1e-12)]
    with np.errstate(all="ignore"):
        return np.log(zk) * fs


def _stable_poles(y: np.ndarray, fs: float, noise_var: float, g: float, *, step: int) -> np.ndarray:
    """Continuous-time poles (1/s) of ``y`` that are significant and stable across model orders.

    ``noise_var`` is the noise variance per sample of ``y`` (complex variance for a complex
    ``y``), ``g`` the in-band density over the mean density of that noise, ``step`` the singular
    values per mode (1 complex, 2 real).
    """
    sv, vh, rows, lp = _hankel_svd(y)
    edge = rows * noise_var * g * (1.0 + math.sqrt((lp + 1) / rows)) ** 2
    cap = min(MAX_ORDER * step, lp - 1 - step * max(STABILITY_ORDERS), rows - 1 - step * max(STABILITY_ORDERS))
    if cap < step:
        return np.zeros(0, dtype=complex)
    order = int(np.sum(sv[:cap] ** 2 > SV_MARGIN * edge))
    order -= order % step
    if order == 0:
        return np.zeros(0, dtype=complex)
    base = _poles_at(vh, order, fs)
    higher = [_poles_at(vh, order + step * k, fs) for k in STABILITY_ORDERS]
    t_win = y.shape[0] / fs
    keep = []
    for p in base:
        beta = -p.real
        # tolerance: a fifth of the pole's own half-width plus a fifth of the window's resolution
        tol = 0.2 * (abs(beta) + 2.0 * math.pi / t_win)
        if all(h.size and np.min(np.abs(h - p)) <= tol for h in higher):
            keep.append(p)
    return np.array(keep, dtype=complex)


def _wald(phi: np.ndarray, y: np.ndarray, var: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Least-squares amplitudes of the columns ``phi`` (n, K) in ``y`` and each one's
    significance ``|c_k|^2 / var(c_k)`` with ``var(c_k) = var_k [(phi^H phi)^-1]_kk``: the
    matched-filter statistic of a column given the others (exponentially distributed with mean
    1 for noise alone when the noise is white at variance ``var_k`` per sample)."""
    c, *_ = np.linalg.lstsq(phi, y, rcond=None)
    gram = phi.conj().T @ phi
    try:
        diag = np.real(np.diag(np.linalg.inv(gram)))
    except np.linalg.LinAlgError:
        diag = np.real(np.diag(np.linalg.pinv(gram)))
    return c, np.abs(c) ** 2 / np.maximum(var * np.maximum(diag, 1e-300), 1e-300)


def _early(seg: np.ndarray, fs: float, noise_f, noise_p, fit_id0: int) -> list[Candidate]:
    """Real-signal pencil on the first samples of the decay at the full rate and lower rates."""
    out: list[Candidate] = []
    n = seg.shape[0]
    spec = np.fft.rfft(seg)
    nyq = fs / 2.0
    for k, factor in enumerate(EARLY_FACTORS):
        rate = fs / factor
        m = min(n, EARLY_SAMPLES * factor)
        if m < 24 * factor:
            break
        if factor == 1:
            y = seg[:EARLY_SAMPLES]
        else:
            # exact band-limited decimation: keep the bins below the new Nyquist, inverse FFT at
            # the lower rate (the whole segment, then its first samples)
            n_low = n // factor
            if n_low < 24:
                break
            part = spec[: n_low // 2 + 1].copy()
            y = np.fft.irfft(part, n_low)[:EARLY_SAMPLES] * (n_low / n)
        top = rate / 2.0
        # noise variance per real sample below the new Nyquist, and how peaked its density is
        sel = (noise_f > 0) & (noise_f <= top)
        dens = noise_p[sel] if np.any(sel) else noise_p[1:]
        var = float(np.mean(dens)) * top
        g = float(np.max(dens) / max(np.mean(dens), 1e-300)) if dens.size else 1.0
        poles = _stable_poles(y, rate, var, g, step=2)
        poles = poles[(poles.imag > 0) & (-poles.real > 0)]
        if poles.size == 0:
            continue
        t = np.arange(y.shape[0]) / rate
        f_all = poles.imag / (2.0 * math.pi)
        e = np.exp(np.outer(t, poles.real))
        ph = np.outer(t, poles.imag)
        phi = np.concatenate([e * np.cos(ph), e * np.sin(ph)], axis=1)
        # per-sample variance as if the noise were white at its density at each mode
        var_k = np.tile(noise_density(f_all, noise_f, noise_p) * rate / 2.0, 2)
        c, stat = _wald(phi, y, var_k)
        kk = poles.size
        for i, p in enumerate(poles):
            f = f_all[i]
            beta = -p.real
            # the lower-rate passes look for slower modes than the faster pass already saw
            if f >= (0.9 if factor == 1 else 0.8) * top or f <= 0.0 or f > nyq:
                continue
            amp = float(math.hypot(c[i], c[kk + i]))
            d = 0.5 * float(stat[i] + stat[kk + i])
            out.append(Candidate(f, beta, max(beta / math.pi, fs / n), amp, d, "early", fit_id0 + k, rate / y.shape[0]))
    return out


def _sub_bands(spec, fs: float, f_min: float, noise_f, noise_p, fit_id0: int) -> list[Candidate]:
    """Complex-envelope pencil in overlapping one-octave bands (see module notes)."""
    from .estimators.pencil import _noise_acf

    out: list[Candidate] = []
    nyq = fs / 2.0
    fc = f_min * math.sqrt(2.0)
    k = 0
    while fc / math.sqrt(2.0) < 0.98 * nyq:
        lo, hi = fc / math.sqrt(2.0), min(fc * math.sqrt(2.0), nyq)
        core_lo, core_hi = fc * 2**-0.25, fc * 2**0.25
        fc *= math.sqrt(2.0)
        k += 1
        if hi - lo <= 0:
            continue
        skirt = 0.25 * (hi - lo)
        band = extract_band(spec, lo, hi, skirt_hz=min(skirt, lo, max(nyq - hi, 1e-9)) if lo > 0 else skirt)
        noise_rms = band_noise_rms(band, noise_f, noise_p)
        full = (band.f_hi_hz - band.f_lo_hz) + 2.0 * band.skirt_hz
        dec = max(int(math.floor(band.sample_rate / full)), 1)
        z = band.z[::dec]
        rate = band.sample_rate / dec
        peak = float(np.max(np.abs(z))) if z.size else 0.0
        if peak <= 0:
            continue
        level = min(1e-2, max(1e-8, 0.3 * noise_rms / peak))
        i0 = int(math.ceil((settling_time_s(band, level=level)) * rate))
        y = z[i0 : i0 + BAND_SAMPLES]
        if y.shape[0] < 24:
            continue
        r, g = _noise_acf(band, rate, 2)
        poles = _stable_poles(y, rate, noise_rms**2, g, step=1)
        poles = poles[-poles.real > 0]
        if poles.size == 0:
            continue
        # significance over the whole rest of the decay, all of this band's poles jointly
        y_all = z[i0:]
        t = np.arange(y_all.shape[0]) / rate
        phi = np.exp(np.outer(t, poles))
        f_all = band.f_shift_hz + poles.imag / (2.0 * math.pi)
        gain = band.mask(f_all)
        var_k = 2.0 * noise_density(f_all, noise_f, noise_p) * gain**2 * rate
        c, stat = _wald(phi, y_all, var_k)
        for i, p in enumerate(poles):
            f = f_all[i]
            beta = -p.real
            if not (core_lo <= f < core_hi) or beta <= 0 or f >= nyq or gain[i] < 1e-3:
                continue
            if beta / math.pi > 0.5 * band.sigma_hz:
                # a pole as broad as the mask is shaped by it (its frequency pulled to the mask's
                # centre): broad modes are the early search's
                continue
            out.append(
                Candidate(
                    f,
                    beta,
                    max(beta / math.pi, spec.sample_rate / spec.n_samples),
                    float(abs(c[i]) / gain[i]),
                    float(stat[i]),
                    "band",
                    fit_id0 + k,
                    rate / y.shape[0],
                )
            )
    return out


def find_candidates(
    x: np.ndarray,
    sample_rate: float,
    *,
    start: int,
    end: int,
    noise_f: np.ndarray,
    noise_p: np.ndarray,
    spectral: list | None = None,
    parametric: bool = True,
) -> tuple[list[Candidate], list[Candidate]]:
    """Every mode the record's decay from sample ``start`` to ``end`` may hold.

    Parameters
    ----------
    x : (n_samples,) ndarray of float
        Conditioned record (offset and drift removed).
    sample_rate : float, Hz
    start, end : int
        Sample indices of the decay: from the hit onset (or the end of clipping) to the end of
        the hit's segment.
    noise_f, noise_p : (k,) ndarray of float
        Measured one-sided noise PSD (Hz, units^2/Hz), e.g. :func:`ringdown.condition.noise_psd`.
    spectral : list of ringdown.peaks.Peak or None
        Spectral peaks of the same decay, merged in as candidates of source ``"spectrum"``.
    parametric : bool
        Run the early and sub-band searches (the pipeline skips them after clipping: there they
        were found to propose false poles, cause not yet known; only spectral peaks are used).

    Returns
    -------
    (accepted, below) : two lists of Candidate, ascending in frequency
        ``accepted`` passed the significance test (``snr >= snr_threshold``; spectral peaks
        passed their own noise margin), de-duplicated across searches; ``below`` are stable
        poles that did not reach it (reported as ``near_noise`` rejections).
    """
    fs = float(sample_rate)
    seg = np.asarray(x[start:end], dtype=np.float64)
    n = seg.shape[0]
    if n < 64:
        return [], []
    noise_p = smooth_density(noise_p)
    f_min = MIN_CYCLES * fs / n
    cands = []
    if parametric:
        cands = _early(seg, fs, noise_f, noise_p, 0)
        cands += _sub_bands(spectrum_of(seg, fs, t0_s=start / fs), fs, f_min, noise_f, noise_p, 10)
    cands = [c for c in cands if c.f_hz >= f_min]
    thr = snr_threshold(n, fs)
    strong = [c for c in cands if c.snr is not None and c.snr >= thr]
    weak = [c for c in cands if c.snr is None or c.snr < thr]
    for p in spectral or ():
        # a broad peak's width gives a first decay rate (beta ~ pi x half-power width), so that a
        # band too narrow for it sends it to the fit on the record itself
        beta0 = math.pi * p.width_hz if getattr(p, "broad", False) else None
        strong.append(Candidate(p.f_hz, beta0, max(p.width_hz, fs / n), None, None, "spectrum", -1, fs / n))
    accepted = _dedupe(strong)
    below = [c for c in _dedupe(weak) if not any(_same(c, a) for a in accepted)]
    return sorted(accepted, key=lambda c: c.f_hz), sorted(below, key=lambda c: c.f_hz)


def _same(a: Candidate, b: Candidate) -> bool:
    if a.fit_id == b.fit_id and a.source != "spectrum":
        return False  # poles of one fit are distinct modes
    return abs(a.f_hz - b.f_hz) <= max(0.5 * max(a.width_hz, b.width_hz), a.resolution_hz, b.resolution_hz)


def _dedupe(cands: list[Candidate]) -> list[Candidate]:
    """One candidate per mode: the most significant of those that lie within half a width of
    each other and come from different searches (a spectral peak, whose significance is not
    measured, last)."""
    order = sorted(cands, key=lambda c: (c.source == "spectrum", -(c.snr or 0.0)))
    kept: list[Candidate] = []
    for c in order:
        if not any(_same(c, k) for k in kept):
            kept.append(c)
    return kept
