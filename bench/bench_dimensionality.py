"""Parallel analysis, 1,000 iterations at n 2,000 and k 60 (issue 3 speed target).

Measured: ``random_correlation_eigenvalues`` (Wishart draws by the Bartlett decomposition,
eigenvalues of stacked batches) plus the percentile, as ``parallel_analysis`` does on a cache miss.
Baseline: the straightforward loop (simulate n x k normal data, ``np.corrcoef``, ``eigvalsh``), run for
fewer iterations in the same process and scaled to 1,000.
"""
from __future__ import annotations

import time

import numpy as np

N, K, ITER, NAIVE_ITER = 2000, 60, 1000, 100


def _naive(iterations: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    out = np.empty((iterations, K))
    for i in range(iterations):
        out[i] = np.linalg.eigvalsh(np.corrcoef(rng.standard_normal((N, K)), rowvar=False))[::-1]
    return out


def run() -> list[dict]:
    from server.stats.dimensionality import random_correlation_eigenvalues

    random_correlation_eigenvalues(N, K, iterations=50, seed=0)  # warm up
    fast = []
    for rep in range(3):
        t = time.perf_counter()
        eig = random_correlation_eigenvalues(N, K, iterations=ITER, seed=rep)
        np.percentile(eig, 95, axis=0)
        fast.append(time.perf_counter() - t)
    t_fast = min(fast)

    t = time.perf_counter()
    _naive(NAIVE_ITER, seed=1)
    t_naive = (time.perf_counter() - t) * ITER / NAIVE_ITER

    t = time.perf_counter()
    random_correlation_eigenvalues(N, K, iterations=ITER, seed=9, variant="factors")
    t_factors = time.perf_counter() - t

    ratio = t_naive / t_fast if t_fast > 0 else None
    return [
        {"target": f"parallel analysis, {ITER} iterations, n {N}, k {K} (components)",
         "measured": f"{t_fast:.3f} s (best of 3)",
         "baseline": f"{t_naive:.3f} s (simulate + corrcoef + eigvalsh loop, {NAIVE_ITER} its scaled)",
         "ratio": ratio, "goal": "<= 0.5 s and >= 4x",
         "ok": bool(t_fast <= 0.5 and ratio is not None and ratio >= 4)},
        {"target": f"parallel analysis, {ITER} iterations, n {N}, k {K} (factors: SMC diagonal)",
         "measured": f"{t_factors:.3f} s",
         "baseline": "-", "ratio": None, "goal": "(information)", "ok": True},
    ]


if __name__ == "__main__":
    for row in run():
        print(row)
