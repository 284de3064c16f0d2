"""Whether a later tap changed a component that looked steady: a steady tone (mains hum, a
running drive) is not changed by a tap, a lightly damped mode is excited again.

The test (a linear least-squares fit of the conditioned record with every pole held, and a Wald
test on the changes of one component's phasor at the later taps) is
:func:`phasor_changes`; :mod:`ringdown.analysis.pipeline` uses it on the components it named
steady tones in a record with several taps.

Model, from the first tap's onset to the record's end, each pole ``p = -beta + i 2 pi f`` a real
damped cosine:

* each *tested* component, as the steady tone it would be (``beta = 0``): one phasor through
  every tap, ``Re[(c_0 + c_1 t + c_2 t^2) e^{i 2 pi f t}]`` (the powers of ``t`` take an error of
  its frequency to second order in the phase over the record, and a slow drift of a hum's level
  or frequency; a single hit's fit of a tone can give it a spurious beta of several u, and a
  steady model with that decay left a change for the steps to take), plus a step of its phasor at
  each later tap ``k``, ``Re[s_k e^{i 2 pi f (t - t_k)}] H(t - t_k)``: a step is no smooth
  function of ``t``, so the powers do not take it;
* each *measured mode*: a phasor started at every tap, ``Re[(a_k + b_k (t - t_k)) e^{p (t -
  t_k)}] H(t - t_k)`` (a linear system's response to taps at ``t_k`` is the sum of their free
  decays; ``b_k`` takes the error of its held pole to first order: a strong mode held with a
  pole off by its u left a residual spread over ~1/T around it, which the steps of a component
  near it took, and the statistic of components without any change came out at twice its
  expectation in a record whose strongest mode stood 80 dB above the noise);
* no constant: the data and every column are differenced once (an exact linear model still),
  which takes out the offset and the record's slow wander; left in, the wander leaked into the
  steps through their edges at t_k, and the statistic of frequencies where nothing was came out
  at 2-3 times its expectation below 100 Hz in a record of pink noise.

A steady tone has every ``s_k = 0``. With the white-noise equivalent ``sigma^2 = S(f) fs / 2``
of the residual's own density near ``f`` (a least-squares sinusoid coefficient's variance follows
the noise density at its frequency: Hannan 1973 [from memory]), the Wald statistic
``s^T C^{-1} s`` (``C`` the least-squares covariance of the steps) is chi-square with ``2 (K - 1)``
degrees of freedom under that hypothesis (Wald 1943; K taps); :func:`phasor_changes` divides it
by an empirical null measured beside each tested frequency. Samples of each tap's force (its
burst and one smoothing width) are left out: the force is in no model.
"""

from __future__ import annotations

import math

import numpy as np

#: Bins of the residual's periodogram either side of a tested frequency that set its noise
#: density (their median over ln 2, the median of an exponential of mean 1): enough bins that the
#: median's relative standard error is ~15 % (1.25 / sqrt(64)); few enough that a 1/f density is
#: about as far above the density at f on one side as below on the other (common practice, no
#: source).
DENSITY_BINS = 32
#: Bins around a tested or a held frequency left out of its noise density (the line itself and
#: its Hann window's main lobe, 2 bins each side, plus one).
LINE_BINS = 3
#: Reference frequencies beside each tested one that set its empirical null (its median's
#: relative standard error is ~45 %, 1.25 / sqrt(8): a rough scale, enough to tell a statistic
#: several times its expectation; common practice, no source).
REFERENCES = 8
#: Order of the difference taken of the data and the model before the fit.
DIFFERENCES = 1


def _columns(t: np.ndarray, f_hz: float, beta: float, start: float) -> np.ndarray:
    """(n, 2) real damped cosine and sine of the pole at ``f_hz``, ``beta`` started at ``start`` s (zero before)."""
    tau = t - start
    on = tau >= 0.0
    env = np.where(on, np.exp(-beta * np.where(on, tau, 0.0)), 0.0)
    w = 2.0 * math.pi * f_hz * tau
    return np.stack([env * np.cos(w), env * np.sin(w)], axis=1)


def phasor_changes(
    x: np.ndarray,
    fs: float,
    onsets: list[int],
    skip: int,
    tested: list[tuple[float, float]],
    held: list[tuple[float, float]],
) -> list[tuple[float, int]]:
    """For each tested component ``(f_hz, beta_per_s)`` (its beta is not used: the hypothesis is a
    steady tone), the Wald statistic of the changes of its phasor at the taps after the first,
    over its empirical null, and its degrees of freedom (``2 (len(onsets) - 1)``).

    ``x`` (n,) conditioned samples; ``onsets`` indices into ``x`` of the taps' onsets (increasing,
    at least 2); ``skip`` samples after each onset left out (the tap's force); ``held`` the poles
    ``(f_hz, beta_per_s)`` of the measured modes. The statistic is chi-square with the returned
    degrees of freedom for a steady component in noise (module docstring). What the model lacks
    and the taps change (a broad mode not found, whose free decay after each tap spreads over
    hundreds of Hz) raises the statistic at every frequency near it: it came out 5-7 times its
    expectation at frequencies where the record held nothing. So the same statistic is computed
    at ``REFERENCES`` frequencies beside each tested one (every other resolution bin from
    ``LINE_BINS + 1`` bins away, none within ``LINE_BINS`` bins of a tested or held line), and
    the tested statistic is divided by their median over the median of the chi-square law when
    that ratio exceeds 1 (an empirical null, Efron 2004 [from memory]; never tightened). With
    fewer than ``REFERENCES // 2`` such frequencies the statistic is 0: no evidence claimed."""
    n = x.shape[0] - onsets[0]
    df = fs / max(n, 1)
    lines = [f for f, _ in tested] + [f for f, _ in held]
    refs: list[list[float]] = []
    for f, _ in tested:
        cand = [f + sign * (LINE_BINS + 1 + 2 * j) * df for j in range(REFERENCES) for sign in (-1.0, 1.0)]
        ok = [g for g in cand if g > 2.0 * df and g < 0.5 * fs - 2.0 * df]
        ok = [g for g in ok if all(abs(g - h) > LINE_BINS * df for h in lines)]
        refs.append(sorted(ok, key=lambda g: abs(g - f))[:REFERENCES])
    fit = _Design(x, fs, onsets, skip)
    lines_all = [f for f, _ in tested] + [f for f, _ in held]
    blocks = [fit.tested(f) for f, _ in tested]
    held_cols = fit.held(held)
    held_basis = fit.basis([held_cols])
    w_test = fit.wald(blocks, held_basis, [f for f, _ in tested], lines_all)
    dof = 2 * (len(onsets) - 1)
    med = _chi2_median_even(dof)
    out = []
    for i, r in enumerate(refs):
        if len(r) < REFERENCES // 2:
            out.append((0.0, dof))
            continue
        # each reference in a fit of its own, in place of the tested component (the tested one
        # and the other references, a few bins away, are not orthogonal to its columns); the
        # held modes and the other tested components are projected out once for all of them
        basis = fit.basis([b for j, b in enumerate(blocks) if j != i], prior=held_basis)
        others = [c for j, c in enumerate(tested) if j != i]
        lines = [f for f, _ in others] + [f for f, _ in held]
        w_ref = [fit.wald([fit.tested(g)], basis, [g], [g] + lines)[0] for g in r]
        scale = max(1.0, float(np.median(w_ref)) / med)
        out.append((w_test[i] / scale, dof))
    return out


class _Design:
    """The columns of :func:`_wald`'s model for one record, built block by block, and its Wald
    statistics computed by partial regression: the coefficients and covariance of the tested
    blocks in a least-squares fit with further columns ``H`` equal those of a fit of the tested
    blocks alone after ``H`` is projected out of them and of the data (Frisch & Waugh 1933,
    Lovell 1963 [from memory]), so the held modes (and, for a reference frequency, the other
    tested components) are projected out once for every fit that shares them. Same statistic
    as one least-squares fit of every column (to rounding: ``tests/test_retap.py``), at a fraction
    of its cost: a record with nine tested lines (benchmark seed 20261201, record 29) took 87 s
    with one full fit per statistic, 12 s here."""

    def __init__(self, x: np.ndarray, fs: float, onsets: list[int], skip: int) -> None:
        n0 = onsets[0]
        y = np.asarray(x[n0:], dtype=float)
        self.n = y.shape[0]
        self.fs = fs
        self.t = np.arange(self.n) / fs
        self.starts = [(o - n0) / fs for o in onsets]
        keep = np.ones(self.n, dtype=bool)
        for o in onsets:
            keep[o - n0 : o - n0 + skip] = False
        self.keep = keep[DIFFERENCES:]
        self.tau = self.t / self.t[-1] if self.n > 1 else self.t
        self.y = np.diff(y, n=DIFFERENCES)[self.keep]
        self.k_steps = 2 * (len(onsets) - 1)

    def _prepared(self, cols: list[np.ndarray]) -> np.ndarray:
        phi = np.diff(np.concatenate(cols, axis=1), n=DIFFERENCES, axis=0)[self.keep]
        norm = np.sqrt(np.sum(phi * phi, axis=0))
        norm[norm == 0.0] = 1.0
        return phi / norm

    def tested(self, f: float) -> np.ndarray:
        """The steady phasor (times 1, t, t^2) and its steps at the later taps of a component at
        ``f`` Hz, prepared (differenced, force samples left out, columns scaled); the steps are
        the last ``k_steps`` columns."""
        base = _columns(self.t, f, 0.0, 0.0)
        cols = [base, base * self.tau[:, None], base * (self.tau * self.tau)[:, None]]
        cols.extend(_columns(self.t, f, 0.0, s) for s in self.starts[1:])
        return self._prepared(cols)

    def held(self, held: list[tuple[float, float]]) -> np.ndarray | None:
        """The held modes' columns (a phasor and its first-order pole correction per tap), prepared."""
        cols = []
        for f, beta in held:
            for s in self.starts:
                c = _columns(self.t, f, max(beta, 0.0), s)
                cols.extend([c, c * np.maximum(self.tau - s / self.t[-1], 0.0)[:, None]])
        return self._prepared(cols) if cols else None

    def basis(self, blocks: list[np.ndarray | None], prior: np.ndarray | None = None) -> np.ndarray | None:
        """Orthonormal basis (m, r) of the span of ``blocks`` and of the orthonormal ``prior``
        (kept as its first columns: the blocks are projected off it and only what is left is
        decomposed), from the left singular vectors whose singular values exceed 1e3 times
        ``numpy.linalg.matrix_rank``'s tolerance relative to the blocks' largest column (what the
        projection leaves of a column already in the prior's span is rounding, not a direction);
        None when all are empty."""
        mats = [b for b in blocks if b is not None and b.shape[1]]
        if not mats:
            return prior
        a = np.concatenate(mats, axis=1)
        scale = float(np.sqrt(np.max(np.sum(a * a, axis=0))))
        if prior is not None:
            a = a - prior @ (prior.T @ a)
        u, sv, _ = np.linalg.svd(a, full_matrices=False)
        tol = max(scale, sv.max(initial=0.0)) * max(a.shape) * np.finfo(float).eps * 1e3
        u = u[:, sv > tol]
        return u if prior is None else np.concatenate([prior, u], axis=1)

    def wald(
        self, blocks: list[np.ndarray], basis: np.ndarray | None, freqs: list[float], lines: list[float]
    ) -> list[float]:
        """The Wald statistic of each block's steps in one fit of ``blocks`` with the span of
        ``basis`` (columns fitted and projected out); ``freqs`` the blocks' frequencies (Hz),
        ``lines`` every frequency left out of the noise density."""
        b = np.concatenate(blocks, axis=1)
        y = self.y
        if basis is not None:
            b = b - basis @ (basis.T @ b)
            y = y - basis @ (basis.T @ y)
        coef, *_ = np.linalg.lstsq(b, y, rcond=None)
        resid = np.zeros(self.n - DIFFERENCES)
        resid[self.keep] = y - b @ coef
        gram_inv = np.linalg.pinv(b.T @ b)
        dens = _periodogram(resid, self.fs)
        out = []
        end = 0
        for f, blk in zip(freqs, blocks):
            end += blk.shape[1]
            i = end - self.k_steps
            sigma2 = _local_density(resid, self.fs, f, lines, p=dens) * self.fs / 2.0
            s = coef[i:end]
            cov = sigma2 * gram_inv[i:end, i:end]
            try:
                w = float(s @ np.linalg.solve(cov, s))
            except np.linalg.LinAlgError:
                w = 0.0
            out.append(w)
        return out


def chi2_sf_even(w: float, dof: int) -> float:
    """Upper tail of the chi-square law with an even number ``dof`` of degrees of freedom at
    ``w``: ``exp(-w/2) sum_{j < dof/2} (w/2)^j / j!`` (the Poisson sum; Abramowitz & Stegun
    26.4.21 [from memory])."""
    h = 0.5 * max(w, 0.0)
    term, total = 1.0, 1.0
    for j in range(1, dof // 2):
        term *= h / j
        total += term
    return math.exp(-h) * total


def _chi2_median_even(dof: int) -> float:
    """Median of the chi-square law with an even number ``dof`` of degrees of freedom (bisection
    on :func:`chi2_sf_even`; ``2 ln 2`` for 2)."""
    lo, hi = 0.0, 10.0 * dof + 10.0
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if chi2_sf_even(mid, dof) > 0.5 else (lo, mid)
    return 0.5 * (lo + hi)


def _wald(
    x: np.ndarray,
    fs: float,
    onsets: list[int],
    skip: int,
    tested: list[tuple[float, float]],
    held: list[tuple[float, float]],
) -> list[float]:
    """The Wald statistic of the steps of each tested component (module docstring) in one fit
    with the ``held`` modes, not yet scaled by the empirical null (:func:`phasor_changes`)."""
    fit = _Design(x, fs, onsets, skip)
    lines = [f for f, _ in tested] + [f for f, _ in held]
    blocks = [fit.tested(f) for f, _ in tested]
    return fit.wald(blocks, fit.basis([fit.held(held)]), [f for f, _ in tested], lines)


def _periodogram(r: np.ndarray, fs: float) -> np.ndarray:
    """One-sided Hann-windowed periodogram of ``r`` (n,), units^2/Hz, at the ``rfft`` bins."""
    win = np.hanning(r.shape[0])
    return 2.0 * np.abs(np.fft.rfft(r * win)) ** 2 / (fs * float(np.sum(win * win)))


def _local_density(r: np.ndarray, fs: float, f_hz: float, lines: list[float], *, p: np.ndarray | None = None) -> float:
    """One-sided noise density of ``r`` near ``f_hz``, units^2/Hz: the median of its Hann-windowed
    periodogram (``p`` when already computed, :func:`_periodogram`) over ``DENSITY_BINS`` bins
    either side, over ln 2, leaving out ``LINE_BINS`` around ``f_hz`` and every frequency in
    ``lines``."""
    n = r.shape[0]
    if p is None:
        p = _periodogram(r, fs)
    df = fs / n
    k = int(round(f_hz / df))
    idx = np.arange(max(k - DENSITY_BINS - LINE_BINS, 1), min(k + DENSITY_BINS + LINE_BINS + 1, p.shape[0]))
    ok = np.ones(idx.shape[0], dtype=bool)
    for g in lines:
        ok &= np.abs(idx - g / df) > LINE_BINS
    vals = p[idx[ok]] if np.any(ok) else p[idx]
    return float(np.median(vals)) / math.log(2.0)
