"""Zero-cell correction and boundary warnings of tetrachoric/polychoric estimates.

Sources: the two-step tetrachoric of a 2 x 2 table solves Phi2(a, b; rho) = p11 exactly (one parameter, one
free cell; Olsson 1979), computed independently with scipy's bivariate normal cdf and brentq; the 0.5
correction is psych::polychoric's ``correct = .5`` (common practice).
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, stats

from server.stats.correlation import polychoric_matrix, polychoric_pair
from server.stats.errors import InputError

TABLE = np.array([[40, 10], [0, 50]])  # one empty cell


def _data(table):
    rows = []
    for i in range(2):
        for j in range(2):
            rows += [[i, j]] * int(table[i, j])
    return np.array(rows, dtype=float)


def _tetrachoric_scipy(t):
    t = np.asarray(t, float)
    N = t.sum()
    a = stats.norm.ppf(t[0].sum() / N)
    b = stats.norm.ppf(t[:, 0].sum() / N)

    def f(r):
        return stats.multivariate_normal(mean=[0, 0], cov=[[1, r], [r, 1]]).cdf([a, b]) - t[0, 0] / N
    return optimize.brentq(f, -0.999, 0.999, xtol=1e-12)


def test_empty_cell_boundary_without_and_inside_with_correction():
    X = _data(TABLE)
    raw = polychoric_matrix(X)
    assert abs(raw.matrix[0, 1]) >= 0.995
    assert any(w.code == "polychoric_boundary" and "'item1' x 'item2'" in w.message for w in raw.warnings)
    fixed = polychoric_matrix(X, zero_cell_correction=0.5)
    assert -0.995 < fixed.matrix[0, 1] < 0.995
    assert not any(w.code == "polychoric_boundary" for w in fixed.warnings)
    assert any("0.5 was added" in w.message and "'item1' x 'item2'" in w.message for w in fixed.warnings)
    assert any("empty cell" in w.message and "'item1' x 'item2'" in w.message for w in fixed.warnings)


def test_corrected_estimate_matches_an_independent_tetrachoric():
    corrected = np.where(TABLE == 0, 0.5, TABLE)
    ref = _tetrachoric_scipy(corrected)  # scipy bivariate normal cdf + brentq
    assert polychoric_pair(TABLE, zero_cell_correction=0.5) == pytest.approx(ref, abs=1e-5)
    assert polychoric_matrix(_data(TABLE), zero_cell_correction=0.5).matrix[0, 1] == pytest.approx(ref, abs=1e-5)


def test_correction_leaves_full_tables_and_the_default_alone():
    rng = np.random.default_rng(3)
    z = rng.standard_normal((500, 1))
    X = np.searchsorted([-0.8, 0.0, 0.8], 0.6 * z + 0.8 * rng.standard_normal((500, 4))).astype(float)
    a = polychoric_matrix(X).matrix
    b = polychoric_matrix(X, zero_cell_correction=0.5).matrix
    np.testing.assert_array_equal(a, b)  # no empty cell: nothing changes
    assert polychoric_pair(TABLE) == polychoric_pair(TABLE, zero_cell_correction=0.0)


def test_reverse_keying_stays_exact_with_the_correction():
    X = _data(TABLE)
    Xr = X.copy()
    Xr[:, 1] = 1 - Xr[:, 1]
    r = polychoric_matrix(X, zero_cell_correction=0.5).matrix[0, 1]
    rr = polychoric_matrix(Xr, zero_cell_correction=0.5).matrix[0, 1]
    assert rr == -r


@pytest.mark.parametrize("bad", [-0.5, float("nan"), "half", True])
def test_bad_correction(bad):
    with pytest.raises(InputError):
        polychoric_matrix(_data(TABLE), zero_cell_correction=bad)


def test_empty_and_corrected_pair_masks_match_each_pairs_crosstab():
    # the masks the analysis recounts notes from, against pandas' crosstab of every pair (independent count)
    import pandas as pd

    rng = np.random.default_rng(11)
    X = rng.integers(1, 5, size=(60, 5)).astype(float)
    X[:, 3] = np.where(X[:, 0] >= 3, 4.0, 1.0)  # item 3 follows item 0: empty cells in that pair
    X[X[:, 1] == 4, 4] = 1.0                     # item 4 is never 2-4 where item 1 is 4
    res = polychoric_matrix(X, zero_cell_correction=0.5)
    levels = [np.unique(X[:, j]) for j in range(5)]
    for i in range(5):
        for j in range(i + 1, 5):
            tab = pd.crosstab(X[:, i], X[:, j]).reindex(index=levels[i], columns=levels[j], fill_value=0)
            observed = tab.loc[tab.sum(axis=1) > 0, tab.sum(axis=0) > 0]
            assert res.empty_pairs[i, j] == res.empty_pairs[j, i] == bool((tab.values == 0).any())
            assert res.corrected_pairs[i, j] == bool((observed.values == 0).any())
    assert res.empty_pairs[0, 3] and res.empty_pairs[1, 4]
