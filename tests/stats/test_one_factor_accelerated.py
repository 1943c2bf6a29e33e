"""The SQUAREM-accelerated one-factor minres fit (``reliability._fit_batch``) against the plain sweeps it replaced.

Reference: the rescaled fixed-point sweeps as they were before issue 14 (copied below, run to a tight
tolerance), factor_analyzer 0.5.1 unrotated one-factor minres where it applies (3 decimals, as in
test_reliability.py).
"""
from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from server.stats import reliability as rel
from server.stats.items import item_table, pruning_path

DEMO = Path(__file__).resolve().parents[2] / "demo_data" / "workshop_responses.csv"


def _plain_sweeps(Ro, L0, mask, tol, max_iter):
    """The solver before issue 14: one rescaled coordinate sweep per iteration, no acceleration."""
    mf = mask.astype(float)
    L = np.where(mask, L0, 0.0)
    LR = L @ Ro
    for _ in range(max_iter):
        U = rel._coordinate_update(LR, L, 1.0 - mf, mf)
        UR = U @ Ro
        c = rel._optimal_scale(U, UR)
        new = U * c
        step = np.abs(new - L).max()
        L, LR = new, UR * c
        if step < tol:
            break
    return L


def _pool(k: int, n: int = 5000, m: int = 3, seed: int = 7) -> np.ndarray:
    rng = np.random.default_rng(seed)
    load = np.zeros((k, m))
    for j in range(k):
        load[j, j % m] = rng.uniform(0.5, 0.8)
    z = rng.standard_normal((n, m)) @ load.T + rng.standard_normal((n, k)) * np.sqrt(1 - (load ** 2).sum(1))
    return np.clip(np.round(z * 1.1 + 3), 1, 5)


def _demo_corr() -> np.ndarray:
    X = pd.read_csv(DEMO).filter(regex=r"^[WCO]\d$").to_numpy(float)
    return pd.DataFrame(X).corr().to_numpy()


def _leave_one_out(R):
    k = R.shape[0]
    mask = np.vstack([np.ones(k, bool), ~np.eye(k, dtype=bool)])
    return mask, np.where(mask, rel._pc_start(R)[None, :], 0.0)


@pytest.mark.parametrize("which", ["demo", "pool60", "pool250"])
def test_same_solution_as_the_plain_sweeps(which):
    R = _demo_corr() if which == "demo" else np.corrcoef(_pool(int(which[4:])), rowvar=False)
    Ro = rel._off_diagonal(R)
    mask, L0 = _leave_one_out(R)
    L, conv, evals = rel._fit_batch(Ro, L0, mask)
    ref = _plain_sweeps(Ro, L0, mask, tol=1e-14, max_iter=100_000)  # the fixed point, tightly
    assert conv.all()
    np.testing.assert_allclose(L, ref, atol=1e-9, rtol=0)  # the old solver's fixed point
    assert evals < rel._FIT_MAX_ITER  # no 1,000-sweep limit reached (the old solver hit it at 250 items)


def test_omega_if_deleted_unchanged_on_a_250_item_pool():
    X = _pool(250)
    S = np.cov(X, rowvar=False)
    R = np.corrcoef(X, rowvar=False)
    names = [f"q{j}" for j in range(250)]
    rows = item_table(S, names=names)
    Ro, sd = rel._off_diagonal(R), np.sqrt(np.diag(S))
    mask, L0 = _leave_one_out(R)
    ref = _plain_sweeps(Ro, L0, mask, tol=1e-14, max_iter=100_000)[1:]
    lam = ref * sd[None, :]
    mf = mask[1:].astype(float)
    omega = lam.sum(axis=1) ** 2 / ((mf @ S) * mf).sum(axis=1)
    got = np.array([r["omega_if_deleted"] for r in rows])
    np.testing.assert_allclose(got, omega, atol=1e-9, rtol=0)  # the fixed point of the old sweeps
    path = pruning_path(S, names=names, min_items=240)
    assert all(p["omega_total"] is not None for p in path)


def test_matches_factor_analyzer_one_factor_minres():
    pytest.importorskip("factor_analyzer")
    from factor_analyzer import FactorAnalyzer

    X = _pool(24, n=2000, seed=3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fa = FactorAnalyzer(n_factors=1, method="minres", rotation=None).fit(X)
    ref = fa.loadings_[:, 0] * np.sign(fa.loadings_[:, 0].sum())
    fit = rel.one_factor_loadings(np.corrcoef(X, rowvar=False))
    assert fit.converged and fit.method == "newton"
    np.testing.assert_allclose(fit.loadings, ref, atol=1e-3)  # factor_analyzer minres (numerical), 3 decimals


def test_heywood_rows_still_converge_on_the_bound():
    R = np.full((6, 6), 0.5)
    R[0, 1:] = R[1:, 0] = 0.8
    R[1, 2:] = R[2:, 1] = 0.75
    np.fill_diagonal(R, 1.0)
    R[0, 1] = R[1, 0] = 0.999
    fit = rel.one_factor_loadings(R)
    L = _plain_sweeps(rel._off_diagonal(R), rel._pc_start(R)[None, :], np.ones((1, 6), bool), 1e-14, 100_000)[0]
    np.testing.assert_allclose(fit.loadings, L, atol=1e-9)
