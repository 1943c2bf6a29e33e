"""Outside-reference checks through HTTP of how the analysis feeds the statistics (n, reverse-keying,
missing data, pool warnings).

Each check computes the same quantity with a reference library on the raw responses the server saw,
so a wrong sample size, sign flip or submatrix in ``server/analysis/`` shows up as a mismatch.
"""
from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pingouin as pg
import pytest


def _upload(client, frame: pd.DataFrame) -> str:
    buf = io.StringIO()
    frame.to_csv(buf, index=False)
    r = client.post("/api/datasets", files={"file": ("data.csv", buf.getvalue().encode(), "text/csv")})
    assert r.status_code == 201, r.text
    return r.json()["id"]


def _two_factor_items(seed: int = 5, n: int = 400) -> pd.DataFrame:
    """Eight 1-5 items, two correlated factors, Q3 reverse-worded, 8 % of answers missing at random."""
    rng = np.random.default_rng(seed)
    f = rng.normal(size=(n, 2))
    f[:, 1] = 0.4 * f[:, 0] + np.sqrt(1 - 0.16) * f[:, 1]
    L = np.zeros((8, 2))
    L[:4, 0] = [0.7, 0.6, 0.65, 0.5]
    L[4:, 1] = [0.7, 0.6, 0.55, 0.5]
    Y = f @ L.T + rng.normal(size=(n, 8)) * np.sqrt(1 - (L ** 2).sum(1))
    X = np.clip(np.round(Y * 1.2 + 3), 1, 5)
    X[:, 2] = 6 - X[:, 2]
    X[rng.random(X.shape) < 0.08] = np.nan
    return pd.DataFrame(X, columns=[f"Q{i + 1}" for i in range(8)])


def test_listwise_sections_all_rest_on_the_rows_complete_on_the_active_items(client):
    # Listwise deletion means: the respondents who answered every analysed item. After Q4 is dropped
    # more respondents are complete on the active items; the correlations, the factor sections and the
    # reliability sections all rest on them, and Bartlett's test uses their n.
    from factor_analyzer.factor_analyzer import calculate_bartlett_sphericity

    data = _two_factor_items()
    ds = _upload(client, data)
    keep = [c for c in data.columns if c != "Q4"]
    out = client.post(f"/api/datasets/{ds}/analysis",
                      json={"missing": "listwise", "items": keep, "reverse": ["Q3"], "n_factors": 2}).json()
    complete = data[keep].dropna()
    assert len(complete) > len(data.dropna())  # the drop really lets more respondents in
    assert out["correlations"]["n"] == len(complete)  # pandas dropna on the active items
    assert out["reliability"]["n_complete"] == len(complete)
    scored = complete.copy()
    scored["Q3"] = 6 - scored["Q3"]
    assert np.allclose(out["correlations"]["matrix"], scored.corr().to_numpy(), atol=1e-12)  # pandas Pearson
    chi2_ref, p_ref = calculate_bartlett_sphericity(complete.to_numpy())
    bart = out["factorability"]["bartlett"]
    # the analysis reports chi2 to 4 decimals
    assert bart["chi2"] == round(float(chi2_ref), 4)  # factor_analyzer calculate_bartlett_sphericity
    assert bart["p"] == pytest.approx(p_ref, rel=1e-4, abs=1e-12)  # factor_analyzer, same call


def test_pairwise_reliability_with_a_reverse_keyed_item_matches_pingouin(client):
    # the engine reverse-keys by flipping the sign of Q3's row and column of the cached covariance;
    # pingouin gets the responses reverse-scored as 6 - x, with the same pairwise deletion
    data = _two_factor_items()
    ds = _upload(client, data)
    keep = ["Q1", "Q2", "Q3", "Q5", "Q6", "Q7"]
    out = client.post(f"/api/datasets/{ds}/analysis",
                      json={"items": keep, "reverse": ["Q3"], "n_factors": 2}).json()
    scored = data[keep].copy()
    scored["Q3"] = 6 - scored["Q3"]
    alpha_ref, ci_ref = pg.cronbach_alpha(scored, nan_policy="pairwise")
    rel = out["reliability"]
    assert rel["alpha"] == pytest.approx(alpha_ref, abs=1e-12)  # pingouin.cronbach_alpha, pairwise
    # pingouin's Feldt interval uses every row; the engine uses rows with at least one answer, here the same
    assert [round(v, 3) for v in rel["alpha_ci"]] == list(ci_ref)  # pingouin.cronbach_alpha, 3 decimals
    # item-rest r of the reverse-keyed item: pandas on complete rows (where the item-rest r computed
    # from the covariance matrix is exactly the correlation with the rest score)
    raw_complete = data[keep].dropna()
    out_c = client.post(f"/api/datasets/{_upload(client, raw_complete)}/analysis",
                        json={"reverse": ["Q3"], "n_factors": 1}).json()
    scored_c = scored.loc[raw_complete.index]
    rest = scored_c.drop(columns="Q3").sum(axis=1)
    r_ref = scored_c["Q3"].corr(rest)  # pandas Series.corr (Pearson)
    row = next(r for r in out_c["items"] if r["name"] == "Q3")
    assert r_ref > 0.2  # reverse-scored, Q3 goes with its construct again
    assert row["item_rest_r"] == pytest.approx(r_ref, abs=1e-12)  # pandas Series.corr


def test_listwise_scale_mean_and_sd_rest_on_the_same_complete_rows(client):
    # the scale mean and SD of the listwise reliability block are those of the sum score of the
    # respondents who answered every active item (Q3 reverse-scored as 6 - x), as pandas gives them
    data = _two_factor_items()
    ds = _upload(client, data)
    keep = ["Q1", "Q2", "Q3", "Q4"]
    rel = client.post(f"/api/datasets/{ds}/analysis",
                      json={"missing": "listwise", "items": keep, "reverse": ["Q3"], "n_factors": 1}
                      ).json()["reliability"]
    scored = data[keep].dropna()
    scored["Q3"] = 6 - scored["Q3"]
    total = scored.sum(axis=1)
    assert rel["scale_mean"] == pytest.approx(total.mean(), abs=1e-10)  # pandas Series.mean
    assert rel["scale_sd"] == pytest.approx(total.std(ddof=1), abs=1e-10)  # pandas Series.std
    assert rel["alpha"] == pytest.approx(pg.cronbach_alpha(scored)[0], abs=1e-12)  # pingouin.cronbach_alpha


def test_correlation_warnings_concern_the_active_items(client):
    # items e and f are duplicates: the full-pool matrix warns about them, an analysis without them must not
    rng = np.random.default_rng(1)
    f = rng.normal(size=(200, 1))
    X = np.clip(np.round(f @ np.full((1, 6), 0.7) + rng.normal(size=(200, 6)) * 0.7 + 3), 1, 5)
    X[:, 5] = X[:, 4]
    ds = _upload(client, pd.DataFrame(X, columns=list("abcdef")))
    full = client.post(f"/api/datasets/{ds}/analysis", json={"n_factors": 1}).json()
    assert any("'e' and 'f'" in w["message"] for w in full["correlations"]["warnings"])
    assert not any(w["code"] == "not_positive_definite" for w in full["warnings"])  # the analysis smooths
    assert any(w["code"] == "smoothed" for w in full["correlations"]["warnings"])  # ... and says so
    part = client.post(f"/api/datasets/{ds}/analysis", json={"items": list("abcd"), "n_factors": 1}).json()
    assert not any("'e'" in w["message"] or "'f'" in w["message"] for w in part["warnings"])
    assert part["correlations"]["smoothed"] is False


def test_a_pool_problem_outside_the_active_items_does_not_block_the_analysis(client):
    # d and e were never answered together (a planned-missing design): the whole pool cannot form a
    # pairwise matrix, but an analysis without one of them can, and must equal pingouin on those items
    rng = np.random.default_rng(1)
    f = rng.normal(size=(100, 1))
    X = np.clip(np.round(f @ np.full((1, 5), 0.7) + rng.normal(size=(100, 5)) * 0.7 + 3), 1, 5)
    X[:50, 4] = np.nan
    X[50:, 3] = np.nan
    data = pd.DataFrame(X, columns=list("abcde"))
    ds = _upload(client, data)
    both = client.post(f"/api/datasets/{ds}/analysis", json={})
    assert both.status_code == 422 and "'d' and 'e'" in both.json()["error"]["message"]
    for keep in (list("abcd"), list("abce")):
        r = client.post(f"/api/datasets/{ds}/analysis", json={"items": keep, "n_factors": 1})
        assert r.status_code == 200, r.text
        out = r.json()
        assert out["reliability"]["alpha"] == pytest.approx(pg.cronbach_alpha(data[keep])[0], abs=1e-12)  # pingouin
        R_ref = data[keep].corr().to_numpy()  # pandas pairwise Pearson
        np.testing.assert_allclose(out["correlations"]["matrix"], R_ref, atol=1e-12)
        assert out["efa"]["n_factors"] == 1
        assert any(w["code"] == "pool_unavailable" for w in out["warnings"])
    # listwise: an item constant among the pool's complete rows blocks only analyses that include it
    Y = X.copy()  # d missing in rows 50+; e is 3 in rows 0-49 except 2 where a is missing
    Y[:50, 4] = 3.0
    Y[50:, 4] = np.nan
    Y[:5, 4] = 2.0
    Y[:5, 0] = np.nan
    ds2 = _upload(client, pd.DataFrame(Y, columns=list("abcde")))
    r = client.post(f"/api/datasets/{ds2}/analysis", json={"missing": "listwise", "items": list("abcd"),
                                                           "n_factors": 1})
    assert r.status_code == 200, r.text
    complete = pd.DataFrame(Y, columns=list("abcde"))[list("abcd")].dropna()
    assert r.json()["correlations"]["n"] == len(complete)  # pandas dropna on the active items


def test_listwise_no_variance_message_says_among_whom(client):
    # 'c' varies over all respondents but not among those who answered every item
    data = pd.DataFrame({"a": [1, 2, 3, 4, 5, 2, None, None], "b": [2, 2, 3, 5, 4, 1, 3, 4],
                         "c": [3, 3, 3, 3, 3, 3, 1, 5]})
    ds = _upload(client, data)
    r = client.post(f"/api/datasets/{ds}/analysis", json={"missing": "listwise"})
    assert r.status_code == 422
    err = r.json()["error"]
    assert err["code"] == "no_variance" and "'c'" in err["message"] and "6 respondents" in err["message"]


def test_no_factorability_numbers_when_respondents_do_not_exceed_items(client):
    # 5 respondents, 6 items: the correlation matrix has rank at most 4 (numpy matrix_rank), so Bartlett's
    # chi-square (its multiplier n - 1 - (2k + 5)/6 is even negative here) and KMO are not reported
    rng = np.random.default_rng(2)
    data = pd.DataFrame(rng.integers(1, 6, size=(5, 6)).astype(float), columns=list("abcdef"))
    assert np.linalg.matrix_rank(np.corrcoef(data.to_numpy(), rowvar=False)) <= 4  # numpy
    out = client.post(f"/api/datasets/{_upload(client, data)}/analysis", json={}).json()
    assert out["factorability"] is None
    assert any(w["code"] == "too_few_rows" for w in out["warnings"])
    assert out["reliability"]["alpha"] == pytest.approx(pg.cronbach_alpha(data)[0], abs=1e-12)  # pingouin
