"""Parallel analysis for polychoric correlations against permuted ordinal data (Garrido, Abad & Ponsoda 2013).

Sources: simulated ordinal data with a known number of factors (seeded); the marginal-preservation property
checked exactly.
"""
from __future__ import annotations

import numpy as np
import pytest

from server.stats.correlation import polychoric_matrix
from server.stats.dimensionality import (
    parallel_analysis,
    parallel_analysis_polychoric,
    permuted_ordinal_data,
)
from server.stats.errors import InputError


def _ordinal_factors(n, k, m, seed, loading=.65, r=.3):
    """5-point items cut from normal data with m correlated factors, k/m items each."""
    rng = np.random.default_rng(seed)
    per = k // m
    L = np.zeros((k, m))
    for j in range(m):
        L[j * per:(j + 1) * per, j] = loading
    phi = np.full((m, m), r)
    np.fill_diagonal(phi, 1.0)
    F = rng.multivariate_normal(np.zeros(m), phi, size=n)
    Z = F @ L.T + rng.standard_normal((n, k)) * np.sqrt(1 - loading ** 2)
    cuts = np.array([-1.5, -0.5, 0.3, 1.2])
    return 1 + np.searchsorted(cuts, Z).astype(float)


def test_permuted_data_keep_every_marginal_exactly():
    X = _ordinal_factors(300, 6, 2, seed=1)
    X[::7, 2] = np.nan  # missing answers travel with the column
    Y = permuted_ordinal_data(X, seed=4)
    assert Y.shape == X.shape
    for j in range(X.shape[1]):
        assert np.array_equal(np.sort(X[:, j]), np.sort(Y[:, j]), equal_nan=True)  # same answers, same counts
    assert not np.array_equal(X, Y, equal_nan=True)
    assert np.array_equal(Y, permuted_ordinal_data(X, seed=4), equal_nan=True)  # seeded
    # the permutation breaks the correlations
    assert np.abs(np.corrcoef(Y[:, [0, 1]], rowvar=False)[0, 1]) < 0.2


@pytest.mark.parametrize(("m", "seed", "variant"), [(2, 21, "components"), (3, 22, "components"),
                                                    (3, 22, "factors")])
def test_recovers_the_number_of_factors(m, seed, variant):
    X = _ordinal_factors(1000, 12, m, seed=seed)
    res = parallel_analysis_polychoric(X, iterations=20, seed=0, variant=variant)
    assert res.n_factors == m  # simulated with m factors
    assert res.method == "permuted_ordinal" and res.variant == variant


def test_observed_eigenvalues_and_seed():
    X = _ordinal_factors(400, 8, 2, seed=5)
    R = polychoric_matrix(X).matrix
    a = parallel_analysis_polychoric(X, iterations=10, seed=3)
    b = parallel_analysis_polychoric(X, R=R, iterations=10, seed=3)
    np.testing.assert_allclose(a.observed, np.linalg.eigvalsh(R)[::-1])
    np.testing.assert_array_equal(a.threshold, b.threshold)
    assert a.iterations == 10 and a.seed == 3
    assert parallel_analysis(400, 8, R=R, iterations=10, seed=3).method == "random_normal"


def test_bad_options():
    X = _ordinal_factors(100, 4, 1, seed=2)
    with pytest.raises(InputError):
        parallel_analysis_polychoric(X, iterations=0)
    with pytest.raises(InputError):
        parallel_analysis_polychoric(X, variant="both")
    with pytest.raises(InputError):
        parallel_analysis_polychoric(X, R=np.eye(3))
