"""Reliability coefficients against published values and reference libraries.

Sources: pingouin 0.7 docs and data sets (cronbach_alpha, cronbach_wide_missing); Denis (2016) worked
example (tests/reference/reliability/); factor_analyzer 0.5.1 minres loadings; statsmodels OLS for
Guttman's lambda6; issue 2 for the Feldt and Spearman-Brown summary values.
"""
from __future__ import annotations

import json
import math
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pingouin as pg
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st

from server.stats.errors import InputError
from server.stats.reliability import (
    cronbach_alpha,
    feldt_ci,
    guttman_lambdas,
    mcdonald_omega,
    one_factor_loadings,
    reliability_from_cov,
    spearman_brown,
    spearman_brown_factor,
)

REF = Path(__file__).resolve().parents[1] / "reference" / "reliability"


@pytest.fixture(scope="module")
def denis() -> pd.DataFrame:
    return pd.read_csv(REF / "denis2016_cronbach.csv")


def _fa_minres_loadings(data: pd.DataFrame | np.ndarray, *, is_corr: bool = False) -> np.ndarray:
    from factor_analyzer import FactorAnalyzer
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # sklearn deprecation noise inside factor_analyzer
        fa = FactorAnalyzer(n_factors=1, rotation=None, method="minres", is_corr_matrix=is_corr)
        fa.fit(data)
    lam = fa.loadings_[:, 0]
    return lam if lam.sum() >= 0 else -lam


# ------------------------------------------------------------------ pingouin's cronbach_alpha data

def test_pingouin_alpha_and_feldt_ci(pg_alpha_data):
    res = cronbach_alpha(pg_alpha_data)
    assert res.k == 10 and res.n == 15
    assert round(res.alpha, 3) == 0.592  # pingouin docs: cronbach_alpha data -> 0.5917188485995826
    assert res.alpha == pytest.approx(0.5917188485995826, abs=1e-12)  # pingouin docs, full precision
    assert [round(v, 3) for v in res.ci] == [0.195, 0.840]  # pingouin docs: array([0.195, 0.84 ])


def test_pingouin_alpha_from_cov_and_standardized(pg_alpha_data):
    S = pg_alpha_data.cov().to_numpy()
    r = reliability_from_cov(S, n=15, n_complete=15, means=pg_alpha_data.mean().to_numpy(),
                             names=list(pg_alpha_data.columns))
    ref_alpha, ref_ci = pg.cronbach_alpha(pg_alpha_data)
    assert r.alpha == pytest.approx(ref_alpha, abs=1e-12)  # pingouin.cronbach_alpha, same data
    assert [round(v, 3) for v in r.alpha_ci] == list(ref_ci)  # pingouin.cronbach_alpha (rounds to 3)
    assert round(r.alpha_standardized, 3) == 0.634  # issue 2 checks: standardized alpha 0.634
    # standardized alpha is alpha of the z-scored items: pingouin on standardized data
    z = (pg_alpha_data - pg_alpha_data.mean()) / pg_alpha_data.std()
    assert r.alpha_standardized == pytest.approx(pg.cronbach_alpha(z)[0], abs=1e-12)  # pingouin
    assert json.dumps(r.to_dict(), allow_nan=False)


def test_pingouin_wide_missing_pairwise_and_listwise():
    data = pg.read_dataset("cronbach_wide_missing")
    pw = cronbach_alpha(data, missing="pairwise")
    lw = cronbach_alpha(data, missing="listwise")
    assert round(pw.alpha, 4) == 0.7327  # pingouin docs: 0.732660835214447 (psych use="pairwise")
    assert [round(v, 3) for v in pw.ci] == [0.435, 0.909]  # pingouin docs: array([0.435, 0.909])
    assert round(lw.alpha, 4) == 0.8017  # pingouin docs: 0.8016949152542373 (psych use="complete.obs")
    # Our listwise interval uses the 9 complete rows; pingouin's uses all 12 rows (its shape is taken
    # before dropping), so only the point estimate is compared.
    assert lw.n == int(data.dropna().shape[0]) == 9
    # reliability_from_cov on pandas' pairwise covariance gives the same pairwise alpha
    r = reliability_from_cov(data.cov().to_numpy(), n=12, n_complete=9, min_pair_n=9)
    assert r.alpha == pytest.approx(pg.cronbach_alpha(data)[0], abs=1e-12)  # pingouin, pairwise


def test_missing_policy_is_validated(pg_alpha_data):
    with pytest.raises(InputError):
        cronbach_alpha(pg_alpha_data, missing="mean")


# ------------------------------------------------------------------ textbook worked example

def test_denis_2016_worked_example(denis):
    res = cronbach_alpha(denis)
    assert round(res.alpha, 3) == 0.633  # Denis (2016) SPSS output: Cronbach's Alpha 0.633
    S = denis.cov().to_numpy()
    r = reliability_from_cov(S, n=10, n_complete=10, means=denis.mean().to_numpy())
    assert round(r.alpha, 3) == 0.633  # Denis (2016): Cronbach's Alpha 0.633
    assert round(r.alpha_standardized, 3) == 0.691  # Denis (2016): based on standardized items 0.691
    sd = np.sqrt(np.diag(S))
    assert [round(v, 5) for v in sd] == [2.71006, 5.05085, 4.74810, 2.71621, 3.80058]  # Denis (2016)
    # scale mean / variance if Item_1 deleted, from the full-set sums
    assert round(r.scale_mean - denis["Item_1"].mean(), 4) == 34.3000  # Denis (2016): 34.3000
    v_del = S.sum() - 2 * S[0].sum() + S[0, 0]
    assert round(v_del, 3) == 108.900  # Denis (2016): scale variance if Item_1 deleted 108.900


# ------------------------------------------------------------------ summary-value formulas

def test_feldt_ci_from_summary_values():
    lo, hi = feldt_ci(0.85, 7, 89)
    assert round(lo, 3) == 0.797 and round(hi, 3) == 0.893  # issue 2: alpha .85, k 7, n 89 -> [.797, .893]


def test_feldt_ci_matches_pingouin_formula_other_levels(pg_alpha_data):
    # pingouin implements Feldt with the same F quantiles; compare at a 90 % level
    ref = pg.cronbach_alpha(pg_alpha_data, ci=0.90)[1]
    lo, hi = feldt_ci(0.5917188485995826, 10, 15, ci=0.90)
    assert [round(lo, 3), round(hi, 3)] == list(ref)  # pingouin.cronbach_alpha(ci=.90)


def test_spearman_brown():
    assert round(spearman_brown(0.70, 2), 4) == 0.8235  # issue 2: rho .70 doubled -> .8235
    assert round(spearman_brown_factor(0.70, 0.90), 3) == 3.857  # issue 2: .70 -> .90 needs 3.857
    # the two are inverses
    assert spearman_brown(0.70, spearman_brown_factor(0.70, 0.90)) == pytest.approx(0.90, abs=1e-12)
    with pytest.raises(InputError):
        spearman_brown_factor(0.0, 0.9)


def test_items_needed_projection(pg_alpha_data):
    r = reliability_from_cov(pg_alpha_data.cov().to_numpy(), n=15, n_complete=15)
    for target, m in ((0.80, r.items_for_80), (0.90, r.items_for_90)):
        # smallest whole number of items whose Spearman-Brown projection reaches the target
        assert spearman_brown(r.alpha, m / r.k) >= target - 1e-12
        assert spearman_brown(r.alpha, (m - 1) / r.k) < target


# ------------------------------------------------------------------ Guttman's lambdas

def _lambda2_loop(S: np.ndarray) -> float:
    # independent re-derivation of Guttman (1945) lambda2 with explicit loops
    k = len(S)
    V = sum(S[i][j] for i in range(k) for j in range(k))
    sq = sum(S[i][j] ** 2 for i in range(k) for j in range(k) if i != j)
    off = sum(S[i][j] for i in range(k) for j in range(k) if i != j)
    return (off + math.sqrt(k / (k - 1) * sq)) / V


def test_lambdas_against_regressions(holzinger):
    X = holzinger.to_numpy()
    S = np.cov(X, rowvar=False)
    lam = guttman_lambdas(S)
    n = X.shape[0]
    # lambda6: residual variance of each item regressed on the others, via statsmodels OLS
    err = []
    for j in range(X.shape[1]):
        ols = sm.OLS(X[:, j], sm.add_constant(np.delete(X, j, axis=1))).fit()
        err.append(ols.ssr / (n - 1))
    assert lam.lambda6 == pytest.approx(1 - sum(err) / S.sum(), abs=1e-10)  # statsmodels OLS residuals
    assert lam.lambda2 == pytest.approx(_lambda2_loop(S), abs=1e-12)  # loop re-derivation of Guttman
    assert lam.lambda3 == pytest.approx(pg.cronbach_alpha(holzinger)[0], abs=1e-12)  # pingouin alpha
    assert lam.lambda1 == pytest.approx((8 / 9) * lam.lambda3, abs=1e-12)  # lambda1 = (k-1)/k lambda3
    assert lam.lambda2 >= lam.lambda3  # Guttman (1945): lambda2 >= lambda3


def test_lambda6_on_correlations_uses_smc(denis):
    # On a correlation matrix e_j^2 = 1 - SMC_j; Denis (2016) prints SMC of Item_1 as 0.726.
    R = denis.corr().to_numpy()
    smc = 1 - 1 / np.diag(np.linalg.inv(R))
    assert round(smc[0], 3) == 0.726  # Denis (2016): squared multiple correlation of Item_1
    lam = guttman_lambdas(R)
    assert lam.lambda6 == pytest.approx(1 - (1 - smc).sum() / R.sum(), abs=1e-12)  # psych G6(smc) form


def test_lambda6_singular_matrix_is_a_warning():
    rng = np.random.default_rng(3)
    X = rng.normal(size=(50, 3))
    X = np.column_stack([X, X[:, 0] + X[:, 1]])  # item 4 is a sum of items 1 and 2
    lam = guttman_lambdas(np.cov(X, rowvar=False))
    assert lam.lambda6 is None and lam.warnings
    assert lam.lambda2 is not None


# ------------------------------------------------------------------ one-factor model and omega

def test_one_factor_loadings_match_factor_analyzer(holzinger, pg_alpha_data):
    for data in (holzinger, holzinger[["x4", "x5", "x6"]], pg_alpha_data):
        fit = one_factor_loadings(data.corr().to_numpy())
        ref = _fa_minres_loadings(data)
        assert fit.converged and fit.method == "newton"
        # factor_analyzer minres (numerical L-BFGS-B), 3 decimals
        np.testing.assert_allclose(fit.loadings, ref, atol=1e-3)


def test_omega_by_hand_from_factor_analyzer(holzinger):
    S = holzinger.cov().to_numpy()
    lam = _fa_minres_loadings(holzinger) * np.sqrt(np.diag(S))
    ref = lam.sum() ** 2 / S.sum()  # McDonald (1999) omega_t with factor_analyzer minres loadings
    om = mcdonald_omega(S)
    assert round(om.omega_total, 3) == round(ref, 3)  # factor_analyzer loadings -> omega by hand


def test_one_factor_warm_start_gives_same_answer(holzinger):
    R = holzinger.corr().to_numpy()
    cold = one_factor_loadings(R)
    warm = one_factor_loadings(R, start=cold.loadings * 0.9)
    np.testing.assert_allclose(warm.loadings, cold.loadings, atol=1e-7)


def test_heywood_case_is_bounded_and_warned():
    # r12 r13 / r23 = 1.28 > 1: the exact one-factor solution needs a communality above 1
    R = np.array([[1.0, 0.8, 0.8], [0.8, 1.0, 0.5], [0.8, 0.5, 1.0]])
    fit = one_factor_loadings(R)
    assert fit.converged and fit.heywood == (0,)
    ref = _fa_minres_loadings(R, is_corr=True)
    np.testing.assert_allclose(fit.loadings, ref, atol=2e-3)  # factor_analyzer minres, psi >= 0.005
    om = mcdonald_omega(R)
    assert any(w.code == "omega_heywood" and "Heywood" in w.message for w in om.warnings)
    # a larger set: item 0 correlates .6 with seven items that correlate .25 among themselves
    R8 = np.full((8, 8), 0.25)
    R8[0, 1:] = R8[1:, 0] = 0.6
    np.fill_diagonal(R8, 1.0)
    fit8 = one_factor_loadings(R8)
    assert fit8.heywood == (0,) and fit8.converged
    ref8 = _fa_minres_loadings(R8, is_corr=True)
    np.testing.assert_allclose(fit8.loadings, ref8, atol=1e-4)  # factor_analyzer minres, psi >= 0.005
    np.testing.assert_allclose(fit8.uniquenesses, 1 - ref8 ** 2, atol=2e-4)  # factor_analyzer: 1 - h2


def test_omega_needs_three_items():
    S = np.array([[1.0, 0.4], [0.4, 1.0]])
    r = reliability_from_cov(S, n=100, n_complete=100)
    assert r.omega_total is None and any("3 items" in w.message for w in r.warnings)
    with pytest.raises(InputError):
        mcdonald_omega(S)


# ------------------------------------------------------------------ whole block vs raw-data computations

def test_block_against_raw_data(holzinger):
    X = holzinger.to_numpy()
    S = np.cov(X, rowvar=False)
    r = reliability_from_cov(S, n=len(X), n_complete=len(X), means=X.mean(axis=0))
    total = X.sum(axis=1)
    assert r.scale_mean == pytest.approx(total.mean(), rel=1e-12)  # numpy on raw totals
    assert r.scale_sd == pytest.approx(total.std(ddof=1), rel=1e-12)  # numpy on raw totals
    assert r.sem == pytest.approx(total.std(ddof=1) * math.sqrt(1 - r.alpha), rel=1e-12)
    odd, even = X[:, 0::2].sum(axis=1), X[:, 1::2].sum(axis=1)
    rh = np.corrcoef(odd, even)[0, 1]
    assert r.split_half == pytest.approx(2 * rh / (1 + rh), abs=1e-12)  # numpy on raw half scores
    C = np.corrcoef(X, rowvar=False)[np.triu_indices(9, 1)]
    assert r.mean_inter_item_r == pytest.approx(C.mean(), abs=1e-12)  # numpy corrcoef
    assert r.inter_item_r_range == pytest.approx((C.min(), C.max()), abs=1e-12)
    assert r.lambda2 >= r.alpha and r.lambda6 is not None


def test_negative_average_covariance_warns():
    rng = np.random.default_rng(1)
    f = rng.normal(size=400)
    X = np.column_stack([f + rng.normal(size=400), -f + rng.normal(size=400), -f + rng.normal(size=400)])
    r = reliability_from_cov(np.cov(X, rowvar=False), n=400, n_complete=400, names=["a", "b", "c"])
    assert r.alpha < 0
    assert any(w.code == "negative_loading" and "reverse-keyed" in w.message for w in r.warnings)


def test_bad_input_raises_input_error():
    with pytest.raises(InputError) as e:
        reliability_from_cov(np.array([[1.0, 0.0, 0.0], [0.0, 0.0, 0.0], [0.0, 0.0, 1.0]]),
                             n=10, n_complete=10, names=["a", "b", "c"])
    assert e.value.code == "no_variance" and "'b'" in e.value.message
    with pytest.raises(InputError):
        reliability_from_cov(np.ones((2, 3)), n=10, n_complete=10)
    with pytest.raises(InputError) as e:
        reliability_from_cov(np.array([[1.0, np.nan], [np.nan, 1.0]]), n=10, n_complete=0, names=["a", "b"])
    assert e.value.code == "missing_covariance"
    with pytest.raises(InputError):
        reliability_from_cov(np.eye(3), n=10, n_complete=10, names=["a", "b"])
    with pytest.raises(InputError):
        reliability_from_cov(np.eye(1), n=10, n_complete=10)


def test_few_pairs_warning():
    S = np.array([[1.0, 0.5, 0.5], [0.5, 1.0, 0.5], [0.5, 0.5, 1.0]])
    r = reliability_from_cov(S, n=100, n_complete=20, min_pair_n=20)
    assert r.min_pair_n == 20 and any("20 of 100" in w.message for w in r.warnings)


# ------------------------------------------------------------------ property tests

def _random_cov(seed: int, k: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    lam = rng.uniform(0.3, 0.9, size=k)
    A = rng.normal(scale=0.3, size=(k, 2))
    S = np.outer(lam, lam) + A @ A.T + np.diag(rng.uniform(0.2, 1.0, size=k))
    sd = rng.uniform(0.5, 2.0, size=k)
    return S * np.outer(sd, sd)


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10_000), k=st.integers(2, 12))
def test_alpha_does_not_depend_on_item_order(seed, k):
    S = _random_cov(seed, k)
    perm = np.random.default_rng(seed + 1).permutation(k)
    a = reliability_from_cov(S, n=100, n_complete=100)
    b = reliability_from_cov(S[np.ix_(perm, perm)], n=100, n_complete=100)
    assert b.alpha == pytest.approx(a.alpha, abs=1e-12)
    assert b.alpha_standardized == pytest.approx(a.alpha_standardized, abs=1e-12)
    assert b.lambda2 == pytest.approx(a.lambda2, abs=1e-12)
    if k >= 3:
        assert b.omega_total == pytest.approx(a.omega_total, abs=1e-6)


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10_000), k=st.integers(3, 15), lam=st.floats(0.2, 2.0))
def test_omega_equals_alpha_under_tau_equivalence(seed, k, lam):
    # population covariance of a tau-equivalent model: equal loadings, any positive uniquenesses
    rng = np.random.default_rng(seed)
    psi = rng.uniform(0.1, 3.0, size=k) * lam ** 2
    S = np.full((k, k), lam ** 2) + np.diag(psi)
    r = reliability_from_cov(S, n=500, n_complete=500)
    assert r.omega_total == pytest.approx(r.alpha, abs=1e-6)  # McDonald (1999): omega = alpha if tau-equiv.


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), k=st.integers(3, 12))
def test_congeneric_population_loadings_are_recovered(seed, k):
    rng = np.random.default_rng(seed)
    lam = rng.uniform(0.3, 0.9, size=k)
    R = np.outer(lam, lam)
    np.fill_diagonal(R, 1.0)
    fit = one_factor_loadings(R)
    np.testing.assert_allclose(fit.loadings, lam, atol=1e-6)


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10_000), k=st.integers(2, 9), miss=st.floats(0.0, 0.6))
def test_messy_pairwise_input_gives_plain_json_or_input_error(seed, k, miss):
    # heavy pairwise missingness can make the covariance matrix indefinite: never a crash, never NaN in JSON
    from server.stats.items import item_table, pruning_path
    rng = np.random.default_rng(seed)
    X = rng.integers(1, 6, size=(25, k)).astype(float)
    X[rng.random(X.shape) < miss] = np.nan
    S = pd.DataFrame(X).cov().to_numpy()
    names = [f"i{j}" for j in range(k)]
    try:
        r = reliability_from_cov(S, n=25, n_complete=int((~np.isnan(X)).all(axis=1).sum()), names=names)
        rows = item_table(S, names=names, start=r.loadings)
        path = pruning_path(S, names=names, min_items=min(3, k), start=r.loadings)
    except InputError as e:
        assert e.code in {"no_variance", "missing_covariance"}
        return
    assert json.dumps({"r": r.to_dict(), "items": rows, "path": path}, allow_nan=False)
