"""The parallel-analysis threshold memo: the same values as a fresh draw, thread-safe, drawn once per key."""
from __future__ import annotations

import threading

import numpy as np

from server.stats import dimensionality as dim


def test_memoised_thresholds_equal_a_fresh_draw():
    n, k = 5000, 37
    th, mean = dim.random_reference(n, k, iterations=200, seed=11)
    rand = dim.random_correlation_eigenvalues(n, k, iterations=200, seed=11)
    np.testing.assert_array_equal(th, np.percentile(rand, 95, axis=0))
    np.testing.assert_array_equal(mean, rand.mean(axis=0))
    assert dim.has_random_reference(n, k, iterations=200, seed=11)
    th2, _ = dim.random_reference(n, k, iterations=200, seed=11)
    np.testing.assert_array_equal(th, th2)
    pa = dim.parallel_analysis(n, k, observed_eigenvalues=np.linspace(3, 0.1, k), iterations=200, seed=11)
    np.testing.assert_array_equal(pa.threshold, th)


def test_concurrent_callers_draw_once(monkeypatch):
    calls = []
    real = dim.random_correlation_eigenvalues

    def counted(*a, **kw):
        calls.append(1)
        return real(*a, **kw)

    monkeypatch.setattr(dim, "random_correlation_eigenvalues", counted)
    out = []
    threads = [threading.Thread(target=lambda: out.append(dim.random_reference(900, 23, iterations=300, seed=5)[0]))
               for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert len(calls) == 1 and len(out) == 4
    for th in out[1:]:
        np.testing.assert_array_equal(th, out[0])


def test_installed_thresholds_are_used():
    dim.install_random_reference(777, 9, iterations=50, variant="components", seed=3, percentile=95,
                                 threshold=np.arange(9.0), mean=np.ones(9))
    th, mean = dim.random_reference(777, 9, iterations=50, seed=3)
    np.testing.assert_array_equal(th, np.arange(9.0))
