"""The analysis runs on one BLAS thread and leaves the caller's thread limits as they were."""

from __future__ import annotations

import numpy as np
import pytest

threadpoolctl = pytest.importorskip("threadpoolctl")

import ringdown
from ringdown.analysis.estimators import pencil
from ringdown.base import _threads


def _blas_threads() -> list[int]:
    return [d["num_threads"] for d in threadpoolctl.threadpool_info() if d["user_api"] == "blas"]


def test_limit_inside_and_restored_after():
    import scipy.linalg  # noqa: F401  (loads scipy's own OpenBLAS too)

    with threadpoolctl.threadpool_limits(2, user_api="blas"):
        before = _blas_threads()
        assert before and all(n == 2 for n in before)  # the caller's choice, set on purpose here
        seen = []

        @_threads.one_blas_thread
        def inner():
            seen.append(_blas_threads())
            with _threads.blas_limit():  # nested: still one thread, and no early restore
                seen.append(_blas_threads())
            seen.append(_blas_threads())

        inner()
        assert all(n == 1 for s in seen for n in s) and len(seen) == 3
        assert _blas_threads() == before


def test_analysis_runs_on_one_thread(monkeypatch):
    # a damped cosine (invented): the pencil fit sees one BLAS thread whatever the caller set
    fs, f, beta = 8000.0, 500.0, 6.0
    t = np.arange(int(1.0 * fs)) / fs
    x = np.zeros(t.size + 400)
    x[400:] = np.exp(-beta * t) * np.cos(2 * np.pi * f * t)
    x += 1e-5 * np.random.default_rng(3).standard_normal(x.size)
    seen = []
    real = pencil._fit

    def spy(*args, **kwargs):
        seen.append(_blas_threads())
        return real(*args, **kwargs)

    monkeypatch.setattr(pencil, "_fit", spy)
    with threadpoolctl.threadpool_limits(2, user_api="blas"):
        an = ringdown.analyze(x, fs)
        assert all(n == 2 for n in _blas_threads())
    assert seen and all(n == 1 for s in seen for n in s)
    # textbook relation: the fitted decay is the one simulated (exact input, high SNR)
    assert an.modes[0].beta_per_s == pytest.approx(beta, rel=1e-3)
