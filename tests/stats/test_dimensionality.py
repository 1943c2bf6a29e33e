"""Factorability (KMO, Bartlett) and factor retention (parallel analysis, MAP, Kaiser)."""
from __future__ import annotations

import json
import os

import numpy as np
import pandas as pd
import pytest
import scipy.linalg

from server.stats.correlation import pearson_matrix
from server.stats.dimensionality import (
    bartlett_sphericity,
    factorability_summary,
    kaiser_count,
    kmo,
    parallel_analysis,
    random_correlation_eigenvalues,
    retention_summary,
    smc,
    velicer_map,
)
from server.stats.errors import InputError

HS_ITEMS = [f"x{i}" for i in range(1, 10)]


@pytest.fixture(scope="module")
def hs():
    """Holzinger & Swineford (1939), 301 pupils, tests x1..x9, as shipped by semopy."""
    import semopy
    path = os.path.join(os.path.dirname(semopy.__file__), "examples", "holzinger_swineford39_data.csv")
    return pd.read_csv(path)[HS_ITEMS]


@pytest.fixture(scope="module")
def hs_R(hs):
    return pearson_matrix(hs).matrix


def _factor_data(n, loadings, seed):
    rng = np.random.default_rng(seed)
    L = np.asarray(loadings, float)
    F = rng.standard_normal((n, L.shape[1]))
    U = np.sqrt(1 - (L ** 2).sum(axis=1))
    return F @ L.T + rng.standard_normal((n, L.shape[0])) * U


def _three_factor_loadings():
    L = np.zeros((12, 3))
    for j in range(12):
        L[j, j // 4] = 0.7
    return L


# ---------------------------------------------------------------------------------------------
# KMO and Bartlett

def test_hs_kmo(hs, hs_R):
    res = kmo(hs_R)
    assert round(res.kmo, 3) == 0.752  # issue 3: Holzinger & Swineford KMO 0.752
    from factor_analyzer.factor_analyzer import calculate_kmo
    msa_ref, kmo_ref = calculate_kmo(hs)
    assert res.kmo == pytest.approx(kmo_ref, abs=1e-10)  # factor_analyzer 0.5.1 calculate_kmo
    np.testing.assert_allclose(res.msa, msa_ref, atol=1e-10)  # factor_analyzer calculate_kmo per item


def test_hs_bartlett(hs, hs_R):
    chi2, df, p = bartlett_sphericity(hs_R, 301)
    assert round(chi2, 1) == 904.1 and df == 36  # issue 3: Bartlett chi-square 904.1 on 36 df
    from factor_analyzer.factor_analyzer import calculate_bartlett_sphericity
    chi_ref, p_ref = calculate_bartlett_sphericity(hs)
    assert chi2 == pytest.approx(chi_ref, rel=1e-10)  # factor_analyzer calculate_bartlett_sphericity
    assert p == pytest.approx(p_ref, rel=1e-6)  # factor_analyzer calculate_bartlett_sphericity


def test_factorability_summary_shape(hs_R):
    out = factorability_summary(hs_R, 301, names=HS_ITEMS)
    assert set(out) == {"kmo", "msa", "bartlett", "determinant"}
    assert list(out["msa"]) == HS_ITEMS
    assert set(out["bartlett"]) == {"chi2", "df", "p"}
    assert out["determinant"] == pytest.approx(np.linalg.det(hs_R))  # numpy.linalg.det
    json.dumps(out)
    assert isinstance(factorability_summary(hs_R, 301)["msa"], list)


def test_identity_matrix_is_unfactorable():
    chi2, df, p = bartlett_sphericity(np.eye(5), 100)
    assert chi2 == pytest.approx(0.0, abs=1e-12) and df == 10 and p == pytest.approx(1.0)  # |I| = 1


def test_duplicated_item_gives_clear_message():
    R = np.array([[1.0, 0.5, 0.5], [0.5, 1.0, 1.0], [0.5, 1.0, 1.0]])
    with pytest.raises(InputError) as err:
        kmo(R, names=["a", "b", "c"])
    assert err.value.code == "singular_matrix"
    assert "'b' and 'c' are perfectly correlated" in err.value.message
    with pytest.raises(InputError):
        bartlett_sphericity(R, 50, names=["a", "b", "c"])


def test_smc_matches_regression_r2(hs):
    """SMC of x1 equals the R^2 of regressing x1 on x2..x9 (statsmodels OLS)."""
    import statsmodels.api as sm
    R = pearson_matrix(hs).matrix
    fit = sm.OLS(hs["x1"], sm.add_constant(hs[HS_ITEMS[1:]])).fit()
    assert smc(R)[0] == pytest.approx(fit.rsquared, abs=1e-10)  # statsmodels OLS rsquared


# ---------------------------------------------------------------------------------------------
# parallel analysis

def test_hs_parallel_analysis_keeps_three(hs_R):
    for seed in (1, 2):
        pa = parallel_analysis(301, 9, R=hs_R, iterations=500, seed=seed)
        assert pa.n_factors == 3  # issue 3: parallel analysis keeps 3 for Holzinger & Swineford
        assert pa.variant == "components"
    np.testing.assert_allclose(pa.observed, np.sort(np.linalg.eigvalsh(hs_R))[::-1], atol=1e-12)  # numpy eigvalsh
    pf = parallel_analysis(301, 9, R=hs_R, iterations=500, seed=1, variant="factors")
    assert pf.n_factors == 3  # reduced-matrix variant agrees on these data
    assert kaiser_count(pa.observed) == 3  # eigenvalues 3.216, 1.639, 1.365 > 1 (numpy eigvalsh)


def test_parallel_analysis_same_seed_same_result(hs_R):
    a = parallel_analysis(301, 9, R=hs_R, iterations=200, seed=42)
    b = parallel_analysis(301, 9, R=hs_R, iterations=200, seed=42)
    c = parallel_analysis(301, 9, R=hs_R, iterations=200, seed=43)
    assert np.array_equal(a.threshold, b.threshold) and a.n_factors == b.n_factors
    assert not np.array_equal(a.threshold, c.threshold)
    # the draws themselves are reproducible (not only the memoised thresholds)
    e1 = random_correlation_eigenvalues(301, 9, iterations=300, seed=7)
    e2 = random_correlation_eigenvalues(301, 9, iterations=300, seed=7)
    assert np.array_equal(e1, e2)
    # a memoised result is a copy: changing it does not change the next answer
    a.threshold[:] = 0
    assert np.array_equal(parallel_analysis(301, 9, R=hs_R, iterations=200, seed=42).threshold, b.threshold)


def _naive_eigenvalues(n, k, iterations, seed, variant="components"):
    rng = np.random.default_rng(seed)
    out = np.empty((iterations, k))
    for i in range(iterations):
        R = np.corrcoef(rng.standard_normal((n, k)), rowvar=False)
        if variant == "factors":
            np.fill_diagonal(R, 1 - 1 / np.diag(np.linalg.inv(R)))
        out[i] = np.linalg.eigvalsh(R)[::-1]
    return out


@pytest.mark.parametrize("variant", ["components", "factors"])
def test_wishart_eigenvalues_match_naive_simulation(variant):
    """Bartlett-decomposition draws have the same eigenvalue distribution as simulate-correlate.

    A small n makes the check sensitive: drawing with n instead of n - 1 degrees of freedom
    moves the means by 3 to 10 standard errors here."""
    n, k, it = 12, 6, 3000
    fast = random_correlation_eigenvalues(n, k, iterations=it, variant=variant, seed=1)
    slow = _naive_eigenvalues(n, k, it, seed=2, variant=variant)
    se = np.sqrt(fast.var(axis=0) / it + slow.var(axis=0) / it)
    assert np.all(np.abs(fast.mean(axis=0) - slow.mean(axis=0)) < 4 * se)  # Monte-Carlo error, 4 SE
    # spread agrees too (ratio of SDs near 1)
    assert np.all(np.abs(fast.std(axis=0) / slow.std(axis=0) - 1) < 0.12)
    if variant == "components":
        np.testing.assert_allclose(fast.sum(axis=1), k, atol=1e-10)  # trace of a correlation matrix


def test_parallel_analysis_recovers_three_simulated_factors():
    X = _factor_data(500, _three_factor_loadings(), seed=4)
    R = np.corrcoef(X, rowvar=False)
    assert parallel_analysis(500, 12, R=R, iterations=300, seed=0).n_factors == 3  # simulation truth
    assert parallel_analysis(500, 12, R=R, iterations=300, seed=0, variant="factors").n_factors == 3
    assert velicer_map(R).n_factors == 3  # simulation truth


def test_parallel_analysis_random_data_keeps_none():
    X = np.random.default_rng(9).standard_normal((400, 10))
    R = np.corrcoef(X, rowvar=False)
    assert parallel_analysis(400, 10, R=R, iterations=300, seed=0).n_factors == 0  # pure noise


def test_parallel_analysis_accepts_eigenvalues_and_checks_input(hs_R):
    eig = np.linalg.eigvalsh(hs_R)
    a = parallel_analysis(301, 9, observed_eigenvalues=eig, iterations=100, seed=3)
    b = parallel_analysis(301, 9, R=hs_R, iterations=100, seed=3)
    assert a.n_factors == b.n_factors and np.array_equal(a.threshold, b.threshold)
    with pytest.raises(InputError):
        parallel_analysis(301, 9, iterations=100)
    with pytest.raises(InputError):
        parallel_analysis(301, 9, R=hs_R, variant="pcs")
    with pytest.raises(InputError):
        parallel_analysis(8, 9, R=hs_R)
    with pytest.raises(InputError):
        parallel_analysis(301, 9, R=hs_R, iterations=0)
    assert bartlett_sphericity(hs_R, 301.0) == bartlett_sphericity(hs_R, 301)  # integral float n accepted


# ---------------------------------------------------------------------------------------------
# MAP

def test_hs_map_keeps_two(hs_R):
    res = velicer_map(hs_R)
    assert res.n_factors == 2  # issue 3: MAP keeps 2 for Holzinger & Swineford
    assert res.values.shape == (9,) and res.values4.shape == (9,)
    off = hs_R[~np.eye(9, dtype=bool)]
    assert res.values[0] == pytest.approx(np.mean(off ** 2))  # step 0 is the mean squared correlation
    assert res.values4[0] == pytest.approx(np.mean(off ** 4))


def test_map_partial_correlations_match_regression_residuals():
    """After m components, MAP's partial correlation equals the correlation of residuals from
    regressing two items on the first m component scores (statsmodels OLS)."""
    import statsmodels.api as sm
    X = _factor_data(300, _three_factor_loadings(), seed=8)
    Z = (X - X.mean(0)) / X.std(0, ddof=1)
    R = np.corrcoef(Z, rowvar=False)
    w, V = np.linalg.eigh(R)
    V = V[:, ::-1]
    m = 2
    scores = Z @ V[:, :m]
    e0 = sm.OLS(Z[:, 0], scores).fit().resid
    e5 = sm.OLS(Z[:, 5], scores).fit().resid
    ref = np.corrcoef(e0, e5)[0, 1]
    load = V[:, :m] * np.sqrt(w[::-1][:m])
    C = R - load @ load.T
    ours = C[0, 5] / np.sqrt(C[0, 0] * C[5, 5])
    assert ours == pytest.approx(ref, abs=1e-10)  # statsmodels OLS residual correlation
    res = velicer_map(R)
    s = 1 / np.sqrt(np.diag(C))
    P = C * s[:, None] * s[None, :]
    assert res.values[m] == pytest.approx(np.mean(P[~np.eye(12, dtype=bool)] ** 2))


def _map_reference(R):
    """The loop velicer_map used before it computed all m at once (kept here as the reference)."""
    A = np.asarray(R, dtype=float)
    k = A.shape[0]
    w, V = scipy.linalg.eigh(A, check_finite=False)  # the decomposition velicer_map uses
    order = np.argsort(w)[::-1]
    w, V = w[order], V[:, order]
    load = V * np.sqrt(np.maximum(w, 0.0))
    off = ~np.eye(k, dtype=bool)
    denom = k * (k - 1)
    values, values4 = np.empty(k), np.empty(k)
    values[0] = np.sum(np.where(off, A, 0.0) ** 2) / denom
    values4[0] = np.sum(np.where(off, A, 0.0) ** 4) / denom
    for m in range(1, k):
        C = A - load[:, :m] @ load[:, :m].T
        d = np.diag(C)
        if np.any(d <= 1e-12):
            values[m:] = np.nan
            values4[m:] = np.nan
            break
        s = 1.0 / np.sqrt(d)
        P = C * s[:, None] * s[None, :]
        P2 = np.where(off, P * P, 0.0)
        values[m] = P2.sum() / denom
        values4[m] = np.sum(P2 * P2) / denom
    return values, values4


def _random_corr(k, seed):
    rng = np.random.default_rng(seed)
    m = max(1, k // 8)
    L = rng.uniform(0.2, 0.8, (k, m)) * (rng.random((k, m)) < 0.5)
    X = rng.standard_normal((max(3 * k, 200), m)) @ L.T + rng.standard_normal((max(3 * k, 200), k))
    return np.corrcoef(X, rowvar=False)


def _demo_R():
    import pandas as pd
    raw = pd.read_csv("demo_data/workshop_responses.csv")
    book = pd.read_csv("demo_data/workshop_codebook.csv")
    names = [n for n in book["item"] if n in raw.columns]
    return np.corrcoef(raw[names].to_numpy(dtype=float), rowvar=False)


@pytest.mark.parametrize("case", ["hs", "demo", *[f"random{k}" for k in (5, 6, 9, 17, 30, 60, 80)]])
def test_map_all_m_at_once_equals_the_loop(case, hs_R, monkeypatch):
    R = hs_R if case == "hs" else _demo_R() if case == "demo" else _random_corr(int(case[6:]), int(case[6:]))
    ref, ref4 = _map_reference(R)
    import server.stats.dimensionality as dim
    res = velicer_map(R)
    monkeypatch.setattr(dim, "_MAP_BLOCK", 7 * R.shape[0] ** 2)  # the same in blocks of seven m
    small = velicer_map(R)
    for got in (res, small):
        # m < k - 4 to 1e-12; the last few m divide by partial variances that shrink toward zero, and the two
        # ways of summing differ there by rounding (2.5e-12 seen at k = 80), so those get 1e-11; at m = k - 1 the
        # partial correlations of the rank-one rest are exactly +-1 (both values are 1) and the rounding error
        # is 1e-11 to 1e-9
        k = R.shape[0]
        for a, b in ((got.values, ref), (got.values4, ref4)):
            np.testing.assert_allclose(a[:max(0, k - 4)], b[:max(0, k - 4)], rtol=0, atol=1e-12)
            np.testing.assert_allclose(a[max(0, k - 4):-1], b[max(0, k - 4):-1], rtol=0, atol=1e-11)
        np.testing.assert_allclose([got.values[-1], ref[-1]], 1.0, rtol=0, atol=1e-8)
        np.testing.assert_allclose([got.values4[-1], ref4[-1]], 1.0, rtol=0, atol=1e-8)
        assert (got.n_factors, got.n_factors4) == (int(np.nanargmin(ref)), int(np.nanargmin(ref4)))


def test_map_stops_at_a_vanishing_partial_variance():
    rng = np.random.default_rng(4)
    X = rng.standard_normal((100, 5))
    X = np.column_stack([X, X[:, 0] + X[:, 1]])  # a singular matrix: the last partial variance vanishes
    R = np.corrcoef(X, rowvar=False)
    ref, ref4 = _map_reference(R)
    res = velicer_map(R)
    assert np.array_equal(np.isnan(res.values), np.isnan(ref)) and np.isnan(ref).any()
    np.testing.assert_allclose(res.values, ref, rtol=0, atol=1e-12)
    np.testing.assert_allclose(res.values4, ref4, rtol=0, atol=1e-12)


# ---------------------------------------------------------------------------------------------
# summaries

def test_retention_summary(hs_R):
    out = retention_summary(hs_R, 301, iterations=200, seed=5)
    assert set(out) == {"parallel", "map", "kaiser", "suggested"}
    assert out["suggested"] == out["parallel"]["n_factors"] == 3  # issue 3: parallel analysis keeps 3
    assert out["map"]["n_factors"] == 2  # issue 3: MAP keeps 2
    assert out["kaiser"]["n_factors"] == 3
    assert len(out["parallel"]["threshold"]) == 9
    json.dumps(out)
    assert out == retention_summary(hs_R, 301, iterations=200, seed=5)


def test_suggested_is_at_least_one():
    X = np.random.default_rng(9).standard_normal((400, 6))
    out = retention_summary(np.corrcoef(X, rowvar=False), 400, iterations=100, seed=1)
    assert out["parallel"]["n_factors"] == 0 and out["suggested"] == 1
