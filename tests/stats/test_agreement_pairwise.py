"""Pairwise Cohen's kappa for three or more raters, and Light's kappa (their mean).

Sources: scikit-learn 1.7 ``cohen_kappa_score`` and statsmodels 0.15 ``cohens_kappa`` per pair; Light (1971)
defines his kappa as the mean of the pairwise Cohen's kappas.
"""
from __future__ import annotations

from itertools import combinations

import numpy as np
import pytest
from sklearn.metrics import cohen_kappa_score
from statsmodels.stats.inter_rater import cohens_kappa

from server.stats.agreement import pairwise_cohen_kappa
from server.stats.errors import InputError

SK_WEIGHTS = {None: None, "linear": "linear", "quadratic": "quadratic"}


def _three_raters(n=150, seed=8):
    """Ordinal ratings 1..5 by three raters; every rater uses every category."""
    rng = np.random.default_rng(seed)
    truth = rng.integers(1, 6, n)
    Y = np.clip(truth[:, None] + rng.integers(-1, 2, (n, 3)), 1, 5).astype(float)
    Y[:5] = [[1, 1, 1], [5, 5, 5], [1, 1, 1], [5, 5, 5], [3, 2, 4]]  # extremes for every rater
    return Y


def _table(a, b):
    t = np.zeros((5, 5))
    for x, y in zip(a.astype(int), b.astype(int)):
        t[x - 1, y - 1] += 1
    return t


@pytest.mark.parametrize("weights", [None, "linear", "quadratic"])
def test_each_pair_matches_sklearn_and_statsmodels(weights):
    Y = _three_raters()
    res = pairwise_cohen_kappa(Y, weights=weights)
    assert res.n_raters == 3 and len(res.pairs) == 3
    expected = []
    for p, (a, b) in zip(res.pairs, combinations(range(3), 2)):
        assert p.raters == (f"rater {a + 1}", f"rater {b + 1}")
        ref = cohen_kappa_score(Y[:, a], Y[:, b], weights=SK_WEIGHTS[weights])  # scikit-learn
        assert p.kappa == pytest.approx(ref, abs=1e-12)
        sm = cohens_kappa(_table(Y[:, a], Y[:, b]), wt=weights, return_results=False)  # statsmodels
        assert p.kappa == pytest.approx(sm, abs=1e-12)
        expected.append(ref)
    assert res.mean == pytest.approx(np.mean(expected), abs=1e-12)  # Light (1971): mean of pairwise kappas
    assert ("Light" in res.mean_name) == (weights is None)


def test_missing_units_are_left_out_for_every_pair():
    Y = _three_raters()
    Y[10, 1] = np.nan
    res = pairwise_cohen_kappa(Y, raters=["A", "B", "C"])
    keep = ~np.isnan(Y).any(axis=1)
    assert res.n_units == int(keep.sum()) and res.warnings
    assert res.pairs[1].raters == ("A", "C")
    assert res.pairs[1].kappa == pytest.approx(cohen_kappa_score(Y[keep, 0], Y[keep, 2]), abs=1e-12)


def test_text_labels_and_errors():
    Y = [["yes", "yes", "no"], ["no", "no", "no"], ["yes", "no", "yes"], ["no", "no", "yes"]]
    res = pairwise_cohen_kappa(Y)
    for p, (a, b) in zip(res.pairs, combinations(range(3), 2)):
        ref = cohen_kappa_score([r[a] for r in Y], [r[b] for r in Y])  # scikit-learn
        assert p.kappa == pytest.approx(ref, abs=1e-12)
    with pytest.raises(InputError):
        pairwise_cohen_kappa(Y, weights="linear")  # text has no order
    with pytest.raises(InputError):
        pairwise_cohen_kappa([[1], [2]])
    with pytest.raises(InputError):
        pairwise_cohen_kappa(_three_raters(), weights="cubic")


def test_undefined_pair_is_said_and_left_out_of_the_mean():
    Y = np.array([[1, 1, 1], [1, 1, 2], [1, 1, 1], [1, 1, 2]], dtype=float)
    res = pairwise_cohen_kappa(Y)
    assert res.pairs[0].kappa is None and res.pairs[0].reason
    assert res.mean == pytest.approx(np.mean([p.kappa for p in res.pairs[1:]]))
    assert [(w.code, w.items) for w in res.warnings] == [("kappa_undefined", ("rater 1", "rater 2"))]
