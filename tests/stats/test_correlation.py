"""Pearson and polychoric correlation matrices, bivariate normal probabilities, smoothing."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import optimize
from scipy.stats import multivariate_normal

from server.stats.correlation import (
    CorrelationResult,
    bivariate_normal_cdf,
    listwise_covariance,
    pairwise_covariance,
    pearson_matrix,
    polychoric_matrix,
    polychoric_pair,
    smooth_to_pd,
)
from server.stats.errors import InputError

REF = Path(__file__).resolve().parents[1] / "reference" / "correlation"


def _discretised_normal(rho, n, cuts_x, cuts_y, seed):
    rng = np.random.default_rng(seed)
    z = rng.multivariate_normal([0.0, 0.0], [[1.0, rho], [rho, 1.0]], size=n)
    return np.column_stack([np.digitize(z[:, 0], cuts_x), np.digitize(z[:, 1], cuts_y)]).astype(float)


def _ordinal_pool(n=400, k=8, seed=3, missing=0.0):
    """Two-factor ordinal data (5 categories), optionally with answers missing at random."""
    rng = np.random.default_rng(seed)
    f = rng.standard_normal((n, 2))
    load = np.linspace(0.5, 0.8, k)
    Z = np.empty((n, k))
    for j in range(k):
        Z[:, j] = load[j] * f[:, j % 2] + np.sqrt(1 - load[j] ** 2) * rng.standard_normal(n)
    X = np.digitize(Z, [-1.3, -0.4, 0.4, 1.3]).astype(float) + 1
    if missing:
        X[rng.random(X.shape) < missing] = np.nan
    return X


# ---------------------------------------------------------------------------------------------
# Pearson and covariance

def test_pairwise_covariance_matches_pandas():
    X = _ordinal_pool(missing=0.1)
    cov, n = pairwise_covariance(X)
    df = pd.DataFrame(X)
    np.testing.assert_allclose(cov, df.cov().to_numpy(), rtol=1e-12, atol=1e-12)  # pandas DataFrame.cov
    expected_n = df.notna().astype(int).T @ df.notna().astype(int)
    np.testing.assert_array_equal(n, expected_n.to_numpy())  # pandas notna counts


def test_listwise_covariance_matches_numpy():
    X = _ordinal_pool(missing=0.05)
    cov, n = listwise_covariance(X)
    complete = X[~np.isnan(X).any(axis=1)]
    assert n == complete.shape[0]
    np.testing.assert_allclose(cov, np.cov(complete, rowvar=False), rtol=1e-12)  # numpy.cov


def test_pearson_pairwise_matches_pandas_corr():
    X = _ordinal_pool(missing=0.1)
    res = pearson_matrix(pd.DataFrame(X, columns=[f"Q{j}" for j in range(X.shape[1])]))
    np.testing.assert_allclose(res.matrix, pd.DataFrame(X).corr().to_numpy(), atol=1e-12)  # pandas corr
    assert res.names[0] == "Q0"
    assert isinstance(res, CorrelationResult) and res.method == "pearson"


def test_pearson_listwise_matches_numpy_corrcoef():
    X = _ordinal_pool(missing=0.05)
    res = pearson_matrix(X, missing="listwise")
    complete = X[~np.isnan(X).any(axis=1)]
    np.testing.assert_allclose(res.matrix, np.corrcoef(complete, rowvar=False), atol=1e-12)  # numpy corrcoef
    assert (res.n_pair == complete.shape[0]).all()


def test_pearson_constant_item_is_named():
    X = _ordinal_pool()
    X[:, 2] = 4.0
    with pytest.raises(InputError) as err:
        pearson_matrix(X, names=[f"Q{j}" for j in range(X.shape[1])])
    assert "Q2" in err.value.message and "every answer is 4" in err.value.message
    assert err.value.code == "no_variance"


def test_pearson_bad_option():
    with pytest.raises(InputError):
        pearson_matrix(_ordinal_pool(), missing="sometimes")


# ---------------------------------------------------------------------------------------------
# bivariate normal rectangle probabilities

@pytest.mark.parametrize("rho", [-0.97, -0.6, -0.2, 0.0, 0.35, 0.8, 0.95, 0.995])
def test_bivariate_cdf_matches_scipy(rho):
    grid = np.array([-2.5, -1.0, -0.3, 0.0, 0.4, 1.2, 2.8])
    H, K = np.meshgrid(grid, grid, indexing="ij")
    ours = bivariate_normal_cdf(H, K, rho)
    mvn = multivariate_normal(mean=[0, 0], cov=[[1, rho], [rho, 1]])
    ref = np.array([[mvn.cdf([h, k]) for k in grid] for h in grid])
    np.testing.assert_allclose(ours, ref, atol=1e-5)  # scipy.stats.multivariate_normal.cdf (abseps 1e-5)


def test_bivariate_cdf_known_values_and_infinite_limits():
    # P(X<=0, Y<=0) = 1/4 + asin(rho)/(2 pi)  (Sheppard 1899; from memory)
    for rho in (-0.9, -0.3, 0.5, 0.99):
        assert bivariate_normal_cdf(0.0, 0.0, rho) == pytest.approx(0.25 + np.arcsin(rho) / (2 * np.pi), abs=1e-14)
    from scipy.stats import norm
    assert bivariate_normal_cdf(np.inf, 0.7, 0.4) == pytest.approx(norm.cdf(0.7), abs=1e-15)  # scipy norm.cdf
    assert bivariate_normal_cdf(-np.inf, 0.7, 0.4) == 0.0
    assert bivariate_normal_cdf(0.3, 1.1, 0.0) == pytest.approx(norm.cdf(0.3) * norm.cdf(1.1), abs=1e-14)


def test_each_cell_probability_matches_scipy():
    """The rectangle probabilities the likelihood uses agree with scipy's bivariate normal CDF."""
    from server.stats.correlation import _PairGrid
    table = np.array([[[58, 52, 1], [26, 58, 3], [8, 12, 9]]], dtype=float)
    grid = _PairGrid(table)
    rho = 0.42
    P, _ = grid.cells(np.array([rho]))
    a, b = grid.a[0], grid.b[0]
    mvn = multivariate_normal(mean=[0, 0], cov=[[1, rho], [rho, 1]])

    def F(h, k):
        h, k = np.clip(h, -12, 12), np.clip(k, -12, 12)
        return mvn.cdf([h, k])

    for i in range(3):
        for j in range(3):
            ref = F(a[i + 1], b[j + 1]) - F(a[i], b[j + 1]) - F(a[i + 1], b[j]) + F(a[i], b[j])
            assert P[0, i, j] == pytest.approx(ref, abs=2e-5)  # scipy multivariate_normal.cdf, abseps 1e-5
    assert P.sum() == pytest.approx(1.0, abs=1e-12)


# ---------------------------------------------------------------------------------------------
# polychoric / tetrachoric

OLSSON_TABLE = [[58, 52, 1], [26, 58, 3], [8, 12, 9]]


def test_polychoric_reference_table():
    rho = polychoric_pair(OLSSON_TABLE)
    assert round(rho, 3) == 0.420  # issue 3: two-step estimate of this table (Drasgow 1986 example, from memory)


def test_polychoric_pair_matches_scipy_brute_force():
    """Independent two-step ML with scipy's bivariate normal CDF and a bounded scalar optimiser."""
    from scipy.stats import norm
    t = np.asarray(OLSSON_TABLE, dtype=float)
    n = t.sum()
    a = np.r_[-12, norm.ppf(np.cumsum(t.sum(1))[:-1] / n), 12]
    b = np.r_[-12, norm.ppf(np.cumsum(t.sum(0))[:-1] / n), 12]

    def negll(r):
        mvn = multivariate_normal(mean=[0, 0], cov=[[1, r], [r, 1]])
        F = np.array([[mvn.cdf([h, k]) for k in b] for h in a])
        P = F[1:, 1:] - F[:-1, 1:] - F[1:, :-1] + F[:-1, :-1]
        return -np.sum(t * np.log(np.maximum(P, 1e-300)))

    ref = optimize.minimize_scalar(negll, bounds=(-0.99, 0.99), method="bounded",
                                   options={"xatol": 1e-6}).x
    assert polychoric_pair(t) == pytest.approx(ref, abs=1e-3)  # scipy multivariate_normal + minimize_scalar


@pytest.mark.parametrize("table", [[[40, 10], [10, 40]], [[30, 20], [20, 30]], [[12, 38], [38, 12]],
                                   [[45, 5], [5, 45]]])
def test_tetrachoric_equal_margins_closed_form(table):
    t = np.asarray(table, dtype=float)
    n = t.sum()
    closed = np.sin(np.pi / 2 * (t[0, 0] + t[1, 1] - t[0, 1] - t[1, 0]) / n)  # Pearson 1900 / issue 3 closed form
    assert polychoric_pair(t) == pytest.approx(closed, abs=1e-8)


def test_simulated_rho_recovered():
    X = _discretised_normal(0.5, 20_000, [-1.0, 0.0, 0.8], [-0.5, 0.3, 1.1, 1.7], seed=11)
    res = polychoric_matrix(X)
    assert abs(res.matrix[0, 1] - 0.5) < 0.02  # issue 3: simulated rho .5, n 20,000, within .02


def test_simulated_tetrachoric_recovered():
    X = _discretised_normal(-0.6, 20_000, [0.3], [-0.4], seed=12)
    assert abs(polychoric_matrix(X).matrix[0, 1] + 0.6) < 0.02  # simulation truth rho -.6


def test_matrix_entries_equal_pairwise_tables_and_are_symmetric():
    X = _ordinal_pool(missing=0.08)
    res = polychoric_matrix(X)
    R = res.matrix
    assert np.array_equal(R, R.T)
    assert np.all(np.diag(R) == 1.0)
    assert np.linalg.eigvalsh(R)[0] > 0
    for i, j in [(0, 1), (2, 5), (6, 7)]:
        ok = ~np.isnan(X[:, i]) & ~np.isnan(X[:, j])
        tab = pd.crosstab(X[ok, i], X[ok, j]).to_numpy()
        assert R[i, j] == pytest.approx(polychoric_pair(tab), abs=1e-9)
        assert res.n_pair[i, j] == ok.sum()


def test_reversed_item_is_exactly_minus_rho():
    """Reverse-keying item 0 (min + max - x) negates its row and column bit for bit."""
    X = _ordinal_pool(missing=0.05)
    R = polychoric_matrix(X, smooth=None).matrix
    Xr = X.copy()
    Xr[:, 0] = 6 - X[:, 0]
    Xr[:, 3] = 6 - X[:, 3]
    Rr = polychoric_matrix(Xr, smooth=None).matrix
    s = np.ones(X.shape[1])
    s[[0, 3]] = -1
    assert np.array_equal(Rr, R * s[:, None] * s[None, :])
    t = np.asarray(OLSSON_TABLE)
    assert polychoric_pair(t[::-1]) == -polychoric_pair(t)
    assert polychoric_pair(t[:, ::-1]) == -polychoric_pair(t)
    assert polychoric_pair(t[::-1, ::-1]) == polychoric_pair(t)


def test_polychoric_close_to_pearson_on_continuous_like_items():
    """Many categories from a normal: polychoric approaches the latent correlation."""
    rng = np.random.default_rng(5)
    z = rng.multivariate_normal([0, 0], [[1, 0.7], [0.7, 1]], size=5000)
    cuts = np.linspace(-2, 2, 9)
    X = np.column_stack([np.digitize(z[:, 0], cuts), np.digitize(z[:, 1], cuts)]).astype(float)
    assert abs(polychoric_matrix(X).matrix[0, 1] - np.corrcoef(z.T)[0, 1]) < 0.02  # latent sample r


def test_sparse_category_and_empty_cell_warnings():
    X = _ordinal_pool(n=300)
    X[:3, 1] = 6  # a sixth category with 3 answers
    res = polychoric_matrix(X, names=[f"Q{j}" for j in range(X.shape[1])])
    text = " ".join(w.message for w in res.warnings)
    assert "Item 'Q1' has fewer than 5 answers in category 6 (3)" in text
    assert "empty cell" in text
    sparse = [w for w in res.warnings if w.code == "polychoric_sparse_category"]
    assert [w.items for w in sparse] == [("Q1",)]
    assert any(w.code == "polychoric_empty_cells" and "Q1" in w.items for w in res.warnings)


def test_too_many_categories_and_constant_item():
    rng = np.random.default_rng(1)
    X = rng.integers(1, 13, size=(200, 3)).astype(float)
    with pytest.raises(InputError) as err:
        polychoric_matrix(X, names=["a", "b", "c"])
    assert err.value.code == "too_many_categories" and "'a' has 12" in err.value.message
    X = _ordinal_pool()
    X[:, 4] = 2
    with pytest.raises(InputError) as err:
        polychoric_matrix(X)
    assert err.value.code == "no_variance" and "item5" in err.value.message


def test_duplicated_item_is_warned_and_smoothed():
    X = _ordinal_pool()
    X = np.column_stack([X, X[:, 0]])
    res = polychoric_matrix(X)
    assert res.matrix[0, -1] > 0.999
    assert any(w.code == "perfect_correlation" and "perfectly ordered" in w.message for w in res.warnings)
    assert res.smoothed and np.linalg.eigvalsh(res.matrix)[0] > 0


def test_duplicated_item_named_in_pearson_warning():
    X = _ordinal_pool()
    X = np.column_stack([X, 2 * X[:, 3] + 1])
    res = pearson_matrix(X, smooth=None)
    assert any("'item4' and 'item9'" in w.message and "duplicated item" in w.message for w in res.warnings)
    assert [w.items for w in res.warnings if w.code == "perfect_correlation"] == [("item4", "item9")]


def test_listwise_polychoric_uses_complete_rows():
    X = _ordinal_pool(missing=0.05)
    res = polychoric_matrix(X, missing="listwise")
    complete = ~np.isnan(X).any(axis=1)
    assert (res.n_pair == complete.sum()).all()


def test_reference_json_values():
    """Values written by tests/reference/correlation/make_reference.py (scipy brute force)."""
    data = json.loads((REF / "polychoric_reference.json").read_text())
    for case in data["cases"]:
        assert polychoric_pair(case["table"]) == pytest.approx(case["rho"], abs=1e-5)  # scipy brute force, 5 dp


# ---------------------------------------------------------------------------------------------
# smoothing

def _not_pd():
    R = np.array([[1.0, 0.9, 0.9, -0.6],
                  [0.9, 1.0, 0.9, 0.2],
                  [0.9, 0.9, 1.0, 0.8],
                  [-0.6, 0.2, 0.8, 1.0]])
    assert np.linalg.eigvalsh(R)[0] < 0
    return R


@pytest.mark.parametrize("method", ["eigen", "higham"])
def test_smoothing_gives_pd_correlation_matrix(method):
    R = _not_pd()
    S, lam, changed = smooth_to_pd(R, method=method)
    assert changed and lam == pytest.approx(np.linalg.eigvalsh(R)[0])
    assert np.linalg.eigvalsh(S)[0] > 0
    np.testing.assert_allclose(np.diag(S), 1.0, atol=1e-12)
    np.testing.assert_allclose(S, S.T, atol=0)


def test_higham_is_nearer_than_eigen_and_matches_alternating_projection_fixed_point():
    R = _not_pd()
    H, _, _ = smooth_to_pd(R, method="higham", min_eigenvalue=1e-10)
    E, _, _ = smooth_to_pd(R, method="eigen", min_eigenvalue=1e-10)
    assert np.linalg.norm(H - R) <= np.linalg.norm(E - R) + 1e-9  # Higham 2002: nearest in Frobenius norm
    # the nearest correlation matrix is PSD with unit diagonal and singular here (it lies on the boundary)
    assert np.linalg.eigvalsh(H)[0] == pytest.approx(0.0, abs=1e-6)


def test_pd_matrix_unchanged_and_warning_text():
    R = np.array([[1.0, 0.3], [0.3, 1.0]])
    S, lam, changed = smooth_to_pd(R)
    assert not changed and np.array_equal(S, R) and lam == pytest.approx(0.7)
    pool = np.column_stack([_ordinal_pool()[:, :2]] * 2)  # duplicated columns: singular
    res = pearson_matrix(pool)
    assert res.smoothed
    smooth_msg = [w.message for w in res.warnings if w.code == "smoothed"]
    assert len(smooth_msg) == 1
    assert "was not positive definite (smallest eigenvalue" in smooth_msg[0]
    assert "changed by at most" in smooth_msg[0]


def test_higham_published_example_and_statsmodels():
    A = np.array([[1.0, 1.0, 0.0], [1.0, 1.0, 1.0], [0.0, 1.0, 1.0]])
    H, lam, changed = smooth_to_pd(A, method="higham", min_eigenvalue=1e-12)
    assert changed and round(lam, 4) == -0.4142  # 1 - sqrt(2) (numpy eigvalsh)
    assert round(H[0, 1], 4) == 0.7607 and round(H[1, 2], 4) == 0.7607  # Higham 2002, Section 4 example (from memory)
    assert round(H[0, 2], 4) == 0.1573  # Higham 2002 example (from memory)
    import warnings

    from statsmodels.stats.correlation_tools import corr_clipped, corr_nearest
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = corr_nearest(A, threshold=1e-12, n_fact=1000)
    np.testing.assert_allclose(H, ref, atol=1e-4)  # statsmodels corr_nearest
    E, _, _ = smooth_to_pd(A, method="eigen", min_eigenvalue=1e-12)
    np.testing.assert_allclose(E, corr_clipped(A, threshold=1e-12), atol=1e-8)  # statsmodels corr_clipped


def test_mixed_category_counts_match_pairwise_tables():
    """Binary, 3-, 5- and 7-category items in one matrix (tables padded to 7 x 7 internally)."""
    rng = np.random.default_rng(21)
    f = rng.standard_normal(600)
    Z = 0.7 * f[:, None] + np.sqrt(0.51) * rng.standard_normal((600, 4))
    cuts = [[0.2], [-0.6, 0.5], [-1.3, -0.4, 0.4, 1.3], [-1.5, -0.9, -0.3, 0.3, 0.9, 1.5]]
    X = np.column_stack([np.digitize(Z[:, j], c) for j, c in enumerate(cuts)]).astype(float)
    X[rng.random(X.shape) < 0.04] = np.nan
    R = polychoric_matrix(X).matrix
    for i in range(4):
        for j in range(i + 1, 4):
            ok = ~np.isnan(X[:, i]) & ~np.isnan(X[:, j])
            tab = pd.crosstab(X[ok, i], X[ok, j]).to_numpy()
            assert R[i, j] == pytest.approx(polychoric_pair(tab), abs=1e-9)
            assert abs(R[i, j] - 0.49) < 0.12  # simulation truth 0.7 x 0.7
