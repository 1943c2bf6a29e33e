"""Polychoric matrix for 60 five-category items x 2,000 respondents (issue 3 speed target).

Measured: ``polychoric_matrix`` (all pair tables from one matrix product, all cells and pairs per
Fisher-scoring step in one array call).  Baseline: the same estimator one pair at a time
(``pandas.crosstab`` + ``polychoric_pair`` in a Python loop), run on a subset of pairs and scaled.
"""
from __future__ import annotations

import time

import numpy as np
import pandas as pd

N, K, BASE_PAIRS = 2000, 60, 120


def _data(seed: int = 3) -> np.ndarray:
    rng = np.random.default_rng(seed)
    load = rng.uniform(0.4, 0.8, K)
    f = rng.standard_normal((N, 3))
    z = np.empty((N, K))
    for j in range(K):
        z[:, j] = load[j] * f[:, j % 3] + np.sqrt(1 - load[j] ** 2) * rng.standard_normal(N)
    x = np.digitize(z, [-1.4, -0.5, 0.4, 1.3]).astype(float) + 1
    x[rng.random(x.shape) < 0.02] = np.nan
    return x


def run() -> list[dict]:
    from server.stats.correlation import polychoric_matrix, polychoric_pair

    X = _data()
    polychoric_matrix(X[:200, :5])  # warm up
    times = []
    for _ in range(3):
        t = time.perf_counter()
        polychoric_matrix(X)
        times.append(time.perf_counter() - t)
    t_fast = min(times)

    iu, ju = np.triu_indices(K, 1)
    pick = np.random.default_rng(0).choice(iu.size, BASE_PAIRS, replace=False)
    t = time.perf_counter()
    for p in pick:
        i, j = iu[p], ju[p]
        ok = ~np.isnan(X[:, i]) & ~np.isnan(X[:, j])
        polychoric_pair(pd.crosstab(X[ok, i], X[ok, j]).to_numpy())
    t_loop = (time.perf_counter() - t) * iu.size / BASE_PAIRS

    ratio = t_loop / t_fast if t_fast > 0 else None
    return [
        {"target": f"polychoric matrix, {K} five-category items x {N} (pairwise, 2% missing)",
         "measured": f"{t_fast:.3f} s (best of 3)",
         "baseline": f"{t_loop:.2f} s (crosstab + polychoric_pair per pair, {BASE_PAIRS} pairs scaled)",
         "ratio": ratio, "goal": "<= 3 s", "ok": bool(t_fast <= 3.0)},
    ]


if __name__ == "__main__":
    for row in run():
        print(row)
