"""Issue 11 through HTTP: the subscale, omega and warning fields of the analysis, the new settings, and a
snapshot that carries no warning about items it left out (demo data, demo_data/README.md)."""
from __future__ import annotations

from server.demo import ensure_demo_loaded

POLY = {"correlation": "polychoric", "pa_iterations_polychoric": 10}


def test_analysis_fields_of_issue_11(app, client):
    ds = ensure_demo_loaded(app.state.store)
    r = client.post(f"/api/datasets/{ds}/analysis", json={})
    assert r.status_code == 200, r.text
    body = r.json()
    rel = body["reliability"]
    assert {"omega_unidimensional", "omega_total", "omega_hierarchical", "omega_subscale", "ecv", "h",
            "omega_basis", "omega_note"} <= set(rel)
    assert rel["omega_basis"] == "schmid_leiman" and rel["omega_total"] >= rel["omega_hierarchical"]
    assert body["items_scope"] == "pool" and body["grouping"]["used"] == "construct"
    assert body["retention"]["parallel"]["method"] == "random_normal"
    for block in body["constructs"].values():
        assert [row["name"] for row in block["item_table"]] == block["items"]
        assert {"item_rest_r", "alpha_if_deleted", "omega_if_deleted", "r_other"} <= set(block["item_table"][0])
        assert block["pruning_path"][0]["n_items"] == len(block["items"])
        assert set(block["one_factor_fit"]) == {"rmsr", "largest_residual"}


def test_bad_new_settings_are_4xx(app, client):
    ds = ensure_demo_loaded(app.state.store)
    for bad in ({"grouping": "items"}, {"zero_cell_correction": -1}, {"pa_iterations_polychoric": 0}):
        r = client.post(f"/api/datasets/{ds}/analysis", json=bad)
        assert r.status_code in (400, 422), r.text  # the request schema is built from OPTIONS
        err = r.json()["error"]
        assert err["code"] in ("bad_option", "bad_request") and next(iter(bad)) in err["message"]


def test_a_snapshot_carries_no_warning_about_items_it_left_out(app, client):
    ds = ensure_demo_loaded(app.state.store)
    full = client.post(f"/api/datasets/{ds}/analysis", json=POLY).json()
    named = sorted({i for w in full["warnings"] if w["code"] == "polychoric_sparse_category" for i in w["items"]})
    assert named  # demo_data: a sparse category
    keep = [i for i in full["settings"]["items"] if i not in named]
    body = {"name": "without sparse items", "items": keep, "settings": POLY,
            "removed": [{"item": n, "reason": "sparse", "code": "other"} for n in named]}
    r = client.post(f"/api/datasets/{ds}/snapshots", json=body)
    assert r.status_code == 201, r.text
    stored = r.json()["analysis"]
    for w in stored["warnings"] + stored["correlations"]["warnings"]:
        assert set(w["items"]) <= set(keep), w
        assert not any(f"'{n}'" in w["message"] for n in named)
