"""The full pool's moments read in blocks of respondents give the matrices of the one-pass formula."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from server.analysis import matrices
from server.analysis.matrices import AnswerPatterns, constant_notes, full_pool, pool_moments
from server.stats import correlation as corrmod
from server.stats.errors import InputError


def _data(n=700, k=7, *, missing=0.1, seed=0, complete_rows=0):
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((n, 1))
    X = np.clip(np.round(3 + z + rng.standard_normal((n, k))), 1, 5)
    X[rng.random((n, k)) < missing] = np.nan
    X[:complete_rows] = np.clip(np.round(3 + rng.standard_normal((complete_rows, k))), 1, 5)
    return X


@pytest.mark.parametrize("rows", [1, 64, 100, 10_000])
@pytest.mark.parametrize("missing,complete_rows", [(0.0, 0), (0.1, 0), (0.1, 250), (0.6, 0)])
def test_block_moments_match_pandas_and_the_one_pass_formula(rows, missing, complete_rows):
    X = _data(missing=missing, complete_rows=complete_rows, seed=rows)
    m = pool_moments(X, rows=rows)
    cov, n = corrmod.pairwise_covariance(X)  # the one-pass formula of stats.correlation
    assert np.array_equal(m.n, n)
    np.testing.assert_allclose(m.cov, cov, rtol=1e-12, atol=1e-14)
    # pandas' pairwise covariance (DataFrame.cov, min_periods 2) as the outside reference
    np.testing.assert_allclose(m.cov, pd.DataFrame(X).cov(min_periods=2).to_numpy(), rtol=1e-10, atol=1e-13)


@pytest.mark.parametrize("missing", [0.0, 0.15])
def test_the_pearson_pool_matches_pearson_matrix_and_pandas(missing, monkeypatch):
    monkeypatch.setattr(matrices, "POOL_ROWS", 97)  # several blocks, some complete, some not
    X = _data(n=900, k=8, missing=missing, seed=3)
    names = [f"q{j}" for j in range(8)]
    pool = full_pool(X, names, {}, "pearson")
    ref = corrmod.pearson_matrix(X, missing="pairwise", smooth=None, names=names)
    np.testing.assert_allclose(pool.corr, ref.matrix, rtol=1e-12, atol=1e-14)
    assert [w.code for w in pool.warnings] == [w.code for w in ref.warnings]
    np.testing.assert_allclose(pool.corr, pd.DataFrame(X).corr(min_periods=3).to_numpy(), rtol=1e-10, atol=1e-13)
    np.testing.assert_allclose(pool.cov, pd.DataFrame(X).cov(min_periods=2).to_numpy(), rtol=1e-10, atol=1e-13)


def test_a_duplicated_item_gives_the_same_perfect_correlation_note():
    X = _data(n=300, k=5, missing=0.0, seed=5)
    X[:, 4] = X[:, 0]
    names = list("abcde")
    pool = full_pool(X, names, {}, "pearson")
    ref = corrmod.pearson_matrix(X, missing="pairwise", smooth=None, names=names)
    assert [(w.code, w.items) for w in pool.warnings] == [(w.code, w.items) for w in ref.warnings]
    perfect = [w.message for w in pool.warnings if w.code == "perfect_correlation"]
    assert perfect == [w.message for w in ref.warnings if w.code == "perfect_correlation"] and perfect


def _error(f):
    try:
        f()
    except InputError as exc:
        return exc.code, exc.message, exc.details
    return None


@pytest.mark.parametrize("case", ["never_together", "no_variance_together", "constant", "empty"])
def test_a_pool_that_cannot_be_formed_raises_the_error_of_pearson_matrix(case):
    X = _data(n=60, k=4, missing=0.0, seed=1)
    if case == "never_together":
        X[:30, 1], X[30:, 2] = np.nan, np.nan
    elif case == "no_variance_together":
        X[:30, 1] = np.nan
        X[30:, 2] = np.nan
        X[:30, 2], X[30:, 1] = 3.0, 4.0
        X[:2, 1] = [1.0, 2.0]  # two shared answers: a pair of three or more respondents with one of them flat
        X[:2, 2] = np.nan
    elif case == "constant":
        X[:, 3] = 2.0
    else:
        X[:, 0] = np.nan
    names = list("abcd")
    want = _error(lambda: corrmod.pearson_matrix(X, missing="pairwise", smooth=None, names=names))
    assert want is not None
    assert _error(lambda: full_pool(X, names, {}, "pearson")) == want


def test_constant_notes_match_a_count_of_distinct_answers():
    X = _data(n=50, k=5, missing=0.2, seed=2)
    X[:, 1] = 4.0
    X[::2, 1] = np.nan
    X[:, 3] = np.nan
    names = list("abcde")
    notes = constant_notes(X, names)
    for j, name in enumerate(names):
        vals = np.unique(X[~np.isnan(X[:, j]), j])  # numpy's distinct values as the reference
        assert (name in notes) == (vals.size < 2)
    assert "every answer is 4" in notes["b"].message and "it has no answers" in notes["d"].message
    assert constant_notes(np.empty((0, 2)), ["a", "b"]).keys() == {"a", "b"}


@pytest.mark.parametrize("missing", [0.0, 0.02, 0.3, 1.0])
@pytest.mark.parametrize("k", [0, 3, 8, 13])
def test_answer_patterns_count_complete_rows_without_packing_them(missing, k):
    X = _data(n=500, k=max(k, 1), missing=missing, seed=k)[:, :k]
    got = AnswerPatterns.of(X, chunk=64)
    # the reference: numpy's distinct rows of the packed "answered" flags, every row packed
    packed = np.packbits(~np.isnan(X), axis=1) if k else np.zeros((len(X), 1), dtype=np.uint8)
    uniq, counts = np.unique(packed, axis=0, return_counts=True)
    assert np.array_equal(got.packed, uniq) and np.array_equal(got.counts, counts) and got.k == k
    assert AnswerPatterns.of(X[:0]).counts.size == 0
