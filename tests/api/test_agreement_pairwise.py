"""POST /api/agreement(/upload) with three or more raters: ``pairwise_cohen`` (issue 11, item 5).

References: scikit-learn ``cohen_kappa_score`` (unweighted, ``weights="linear"``, ``weights="quadratic"``) and
statsmodels ``inter_rater.cohens_kappa`` per pair; Light's (1971) kappa is the mean of the pairwise kappas.
The data use every category 1-4 for every rater, so scikit-learn's position-based weights equal the
value-based weights of the server.
"""
from __future__ import annotations

from itertools import combinations

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import cohen_kappa_score
from statsmodels.stats.inter_rater import cohens_kappa

from server.demo import DEMO_RATINGS


def four_raters(seed: int = 11, n: int = 60) -> np.ndarray:
    """Simulated 1-4 ratings: a true level plus rater leniency and noise (every rater uses every category)."""
    rng = np.random.default_rng(seed)
    truth = rng.normal(size=n)
    cols = [np.digitize(truth + shift + rng.normal(scale=0.6, size=n), [-0.8, 0.1, 0.9]) + 1
            for shift in (0.0, 0.3, -0.3, 0.1)]
    Y = np.column_stack(cols).astype(float)
    assert all(set(Y[:, j]) == {1.0, 2.0, 3.0, 4.0} for j in range(Y.shape[1]))
    return Y


def statsmodels_kappa(a: np.ndarray, b: np.ndarray) -> float:
    cats = np.union1d(a, b)
    table = np.zeros((cats.size, cats.size))
    for x, y in zip(a, b):
        table[np.searchsorted(cats, x), np.searchsorted(cats, y)] += 1
    return float(cohens_kappa(table).kappa)


def post(client, ratings, level: str) -> dict:
    r = client.post("/api/agreement", json={"ratings": ratings, "level": level})
    assert r.status_code == 200, r.text
    return r.json()


@pytest.mark.parametrize("level", ["ordinal", "interval"])
def test_pairwise_kappas_equal_sklearn_and_statsmodels_per_pair(client, level):
    Y = four_raters()
    pc = post(client, Y.tolist(), level)["pairwise_cohen"]
    pairs = list(combinations(range(Y.shape[1]), 2))
    for key, weights in (("kappa", None), ("linear", "linear"), ("quadratic", "quadratic")):
        block = pc[key]
        assert block["weights"] == weights and block["n_raters"] == 4 and block["n_units"] == len(Y)
        assert [tuple(p["raters"]) for p in block["pairs"]] == [(f"rater {a + 1}", f"rater {b + 1}")
                                                                  for a, b in pairs]
        expected = [cohen_kappa_score(Y[:, a], Y[:, b], weights=weights) for a, b in pairs]
        got = [p["kappa"] for p in block["pairs"]]
        assert got == pytest.approx(expected, abs=1e-12)  # scikit-learn cohen_kappa_score
        assert block["mean"] == pytest.approx(np.mean(expected), abs=1e-12)  # Light (1971): the mean of the pairs
        if weights is None:
            assert got == pytest.approx([statsmodels_kappa(Y[:, a], Y[:, b]) for a, b in pairs], abs=1e-12)


def test_nominal_labels_have_unweighted_pairs_only(client):
    rng = np.random.default_rng(3)
    labels = np.array(["cat", "dog", "fish"])
    base = rng.integers(0, 3, size=40)
    cols = [np.where(rng.random(40) < 0.7, base, rng.integers(0, 3, size=40)) for _ in range(3)]
    table = np.column_stack([labels[c] for c in cols])
    pc = post(client, table.tolist(), "nominal")["pairwise_cohen"]
    expected = [cohen_kappa_score(table[:, a], table[:, b]) for a, b in combinations(range(3), 2)]
    assert [p["kappa"] for p in pc["kappa"]["pairs"]] == pytest.approx(expected, abs=1e-12)  # scikit-learn
    assert pc["kappa"]["mean"] == pytest.approx(np.mean(expected), abs=1e-12)  # Light (1971)
    for key in ("linear", "quadratic"):
        assert pc[key]["value"] is None and "order" in pc[key]["reason"]


def test_two_raters_have_no_pairwise_block(client):
    body = post(client, four_raters()[:, :2].tolist(), "ordinal")
    assert body["pairwise_cohen"] is None
    assert body["cohen_kappa"]["value"] is not None  # the one pair is the summary's own Cohen's kappa


def test_upload_names_the_pairs_by_rater_column_and_uses_complete_units(client):
    """The demo rater table (three coordinators, 7 empty cells): pairs named by column, units rated by all."""
    raw = DEMO_RATINGS.read_bytes()
    r = client.post("/api/agreement/upload", files={"file": ("ratings.csv", raw, "text/csv")},
                    data={"level": "ordinal"})
    assert r.status_code == 200, r.text
    pc = r.json()["pairwise_cohen"]
    table = pd.read_csv(DEMO_RATINGS, index_col=0).dropna()
    names = list(table.columns)  # amira, bo, carmen (demo_data/README.md)
    assert [tuple(p["raters"]) for p in pc["kappa"]["pairs"]] == list(combinations(names, 2))
    assert pc["kappa"]["n_units"] == len(table)
    for key, weights in (("kappa", None), ("linear", "linear"), ("quadratic", "quadratic")):
        for p in pc[key]["pairs"]:
            a, b = (table[name].to_numpy() for name in p["raters"])
            assert set(a) == set(b) == {1.0, 2.0, 3.0, 4.0}  # every code used: sklearn's weights = the server's
            assert p["kappa"] == pytest.approx(cohen_kappa_score(a, b, weights=weights), abs=1e-12)  # scikit-learn


def test_pasted_table_with_one_category_pair_warns_and_keeps_the_rest(client):
    Y = four_raters()[:20, :3]
    Y[:, 0] = Y[:, 1] = 2.0
    Y[0, 2], Y[1, 2] = 1.0, 3.0
    body = post(client, Y.tolist(), "ordinal")
    first = body["pairwise_cohen"]["kappa"]["pairs"][0]
    assert first["raters"] == ["rater 1", "rater 2"] and first["kappa"] is None and first["reason"]
    assert [w["items"] for w in body["warnings"] if w["code"] == "kappa_undefined"] == [["rater 1", "rater 2"]]
    defined = [p["kappa"] for p in body["pairwise_cohen"]["kappa"]["pairs"][1:]]
    assert body["pairwise_cohen"]["kappa"]["mean"] == pytest.approx(np.mean(defined))  # mean of defined pairs
