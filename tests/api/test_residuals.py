"""POST /api/datasets/{id}/residuals: residual correlations after the analysis's factor solution (demo data)."""
from __future__ import annotations

import numpy as np
import pytest


@pytest.fixture
def demo(client) -> str:
    r = client.post("/api/demo")
    assert r.status_code == 200, r.text
    return r.json()["id"]


def test_residuals_follow_the_analysis_and_mark_the_planted_near_duplicates(app, client, demo):
    out = client.post(f"/api/datasets/{demo}/residuals", json={})
    assert out.status_code == 200, out.text
    res = out.json()
    # the same request was analysed through the engine and is cached for the analysis route
    assert app.state.engine.has_answer(demo, {})
    ana = client.post(f"/api/datasets/{demo}/analysis", json={}).json()
    items = ana["correlations"]["items"]
    assert res["items"] == items and len(items) == 24  # demo_data/README.md: 24 statements
    E = np.array(res["matrix"], dtype=float)
    assert E.shape == (24, 24) and np.all(np.diag(E) == 0) and np.allclose(E, E.T, atol=1e-12)
    # the rmsr the EFA fit reports is the root mean square of these residuals (efa.fit_indices)
    assert res["rmsr"] == pytest.approx(ana["efa"]["fit"]["rmsr"], abs=1e-12)
    assert res["rmsr"] == pytest.approx(float(np.sqrt(np.mean(E[np.triu_indices(24, 1)] ** 2))), abs=1e-12)
    # R - P Phi P' from the analysis's own pattern, factor correlations and correlation matrix
    R = np.array(ana["correlations"]["matrix"], dtype=float)
    P = np.array([ana["efa"]["loadings"][n] for n in items], dtype=float)
    phi = np.array(ana["efa"]["factor_correlations"], dtype=float)
    ref = R - P @ phi @ P.T
    np.fill_diagonal(ref, 0.0)
    np.testing.assert_allclose(E, ref, atol=1e-9)
    assert res["n_factors"] == ana["efa"]["n_factors"] == 3
    assert res["threshold"] == 0.10  # common practice
    assert "3-factor oblimin minres solution" in res["basis"] and "Pearson" in res["basis"]
    # demo_data/README.md: W2 and W3 are near-duplicates sharing variance beyond the factor
    pairs = [tuple(x["items"]) for x in res["large"]]
    assert ("W2", "W3") in pairs
    w23 = res["large"][pairs.index(("W2", "W3"))]
    assert w23["residual"] >= 0.10 and w23["r"] == pytest.approx(R[items.index("W2"), items.index("W3")])
    assert all(abs(x["residual"]) >= 0.10 for x in res["large"])
    assert [abs(x["residual"]) for x in res["large"]] == sorted((abs(x["residual"]) for x in res["large"]),
                                                                reverse=True)


def test_residuals_are_the_same_for_another_rotation_of_the_same_extraction(client, demo):
    a = client.post(f"/api/datasets/{demo}/residuals", json={"n_factors": 3}).json()
    b = client.post(f"/api/datasets/{demo}/residuals", json={"n_factors": 3, "rotation": "promax"}).json()
    assert "promax" in b["basis"]
    np.testing.assert_allclose(np.array(a["matrix"]), np.array(b["matrix"]), atol=1e-9)  # rotation invariance


def test_dropped_items_leave_the_matrix(client, demo):
    items = client.post(f"/api/datasets/{demo}/residuals", json={}).json()["items"]
    keep = [n for n in items if n not in ("W3", "C7")]
    res = client.post(f"/api/datasets/{demo}/residuals", json={"items": keep}).json()
    assert res["items"] == keep and len(res["matrix"]) == len(keep)


def test_no_factor_solution_is_a_409_with_a_reason(client, demo):
    r = client.post(f"/api/datasets/{demo}/residuals", json={"items": ["W1", "W2"]})
    assert r.status_code == 409
    err = r.json()["error"]
    assert err["code"] == "no_factor_solution" and "no factor solution" in err["message"]
    assert err["details"]["n_items"] == 2
    assert "at least 3 active items" in err["message"]  # the factor section's own reason


def test_a_withheld_rotation_is_a_409_naming_the_reason(client, demo):
    body = {"rotation": "oblimin", "gamma": 0.8, "n_factors": 5}
    ana = client.post(f"/api/datasets/{demo}/analysis", json=body).json()
    assert ana["efa"]["withheld"]["reason"].startswith("The oblimin (gamma 0.8) solution degenerated")
    r = client.post(f"/api/datasets/{demo}/residuals", json=body)
    assert r.status_code == 409 and "degenerated" in r.json()["error"]["message"]


def test_unknown_dataset_and_bad_body(client, demo):
    r = client.post("/api/datasets/nope/residuals", json={})
    assert r.status_code == 404 and r.json()["error"]["code"] == "not_found"
    bad = client.post(f"/api/datasets/{demo}/residuals", json={"rotation": "sideways"})
    assert bad.status_code == 422 and "error" in bad.json()
