"""POST /api/datasets/{id}/analysis end to end: upload, analyse, drop, reverse, errors, cache.

Reference values are pingouin's documented results on its shipped data sets and the Holzinger &
Swineford (1939) data that semopy ships; the engine's cached-submatrix path is also checked against a
direct computation on the raw responses of the same items.
"""
from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pingouin as pg
import pytest


def _upload(client, frame: pd.DataFrame, **form) -> str:
    buf = io.StringIO()
    frame.to_csv(buf, index=False)
    r = client.post("/api/datasets", files={"file": ("data.csv", buf.getvalue().encode(), "text/csv")},
                    data={k: str(v) for k, v in form.items()})
    assert r.status_code == 201, r.text
    return r.json()["id"]


def test_reliability_matches_pingouin_documentation(client, pg_alpha_data):
    ds = _upload(client, pg_alpha_data)
    out = client.post(f"/api/datasets/{ds}/analysis", json={}).json()
    rel = out["reliability"]
    assert round(rel["alpha"], 3) == 0.592  # pingouin docs, cronbach_alpha data
    assert [round(v, 3) for v in rel["alpha_ci"]] == [0.195, 0.840]  # pingouin docs (Feldt interval)
    # alpha if deleted equals pingouin's alpha on the data without that item
    for row in out["items"]:
        ref = pg.cronbach_alpha(pg_alpha_data.drop(columns=row["name"]))[0]
        assert row["alpha_if_deleted"] == pytest.approx(ref, abs=1e-10)  # pingouin.cronbach_alpha


def test_missing_policies_match_pingouin_documentation(client):
    wide = pg.read_dataset("cronbach_wide_missing")
    ds = _upload(client, wide)
    pair = client.post(f"/api/datasets/{ds}/analysis", json={"missing": "pairwise"}).json()
    lst = client.post(f"/api/datasets/{ds}/analysis", json={"missing": "listwise"}).json()
    assert round(pair["reliability"]["alpha"], 4) == 0.7327  # pingouin docs, cronbach_wide_missing
    assert round(lst["reliability"]["alpha"], 4) == 0.8017  # pingouin docs, nan_policy='listwise'
    assert pair["reliability"]["missing"] == "pairwise" and lst["reliability"]["missing"] == "listwise"
    # 12 respondents for 11 items: the factor sections step aside with a warning, not an error
    assert pair["efa"]["n_factors"] == 0
    assert any(w["code"] == "too_few_rows" and "more respondents than items" in w["message"]
               for w in pair["warnings"])


def test_a_drop_uses_the_submatrix_and_equals_a_direct_computation(client, pg_alpha_data):
    ds = _upload(client, pg_alpha_data)
    client.post(f"/api/datasets/{ds}/analysis", json={})  # fills the full-pool cache
    keep = [c for c in pg_alpha_data.columns if c not in ("Q3", "Q7")]
    out = client.post(f"/api/datasets/{ds}/analysis", json={"items": keep}).json()
    assert out["reliability"]["alpha"] == pytest.approx(pg.cronbach_alpha(pg_alpha_data[keep])[0], abs=1e-12)
    assert [r["name"] for r in out["items"]] == keep


def test_reverse_override_scores_min_plus_max_minus_x(client, pg_alpha_data):
    ds = _upload(client, pg_alpha_data, scale_min=1, scale_max=10)
    out = client.post(f"/api/datasets/{ds}/analysis", json={"reverse": ["Q2"]}).json()
    flipped = pg_alpha_data.copy()
    flipped["Q2"] = 1 + 10 - flipped["Q2"]
    assert out["reliability"]["alpha"] == pytest.approx(pg.cronbach_alpha(flipped)[0], abs=1e-12)
    assert out["settings"]["reverse"] == ["Q2"]
    assert [r["reverse"] for r in out["items"] if r["name"] == "Q2"] == [True]


def test_polychoric_reverse_sign_flip_equals_a_fresh_estimate(client):
    from server.stats.correlation import polychoric_matrix

    rng = np.random.default_rng(3)
    z = rng.standard_normal((300, 1)) * 0.8 + rng.standard_normal((300, 5)) * 0.6
    x = pd.DataFrame(np.clip(np.round(z + 3), 1, 5).astype(int), columns=[f"i{j}" for j in range(5)])
    ds = _upload(client, x, scale_min=1, scale_max=5)
    out = client.post(f"/api/datasets/{ds}/analysis",
                      json={"correlation": "polychoric", "reverse": ["i1"], "n_factors": 1}).json()
    flipped = x.to_numpy(float).copy()
    flipped[:, 1] = 6 - flipped[:, 1]
    direct = polychoric_matrix(flipped, smooth=None, zero_cell_correction=0.5).matrix  # the default setting
    assert np.allclose(out["correlations"]["matrix"], direct, atol=1e-12)


def test_holzinger_factor_sections(client, holzinger):
    ds = _upload(client, holzinger)
    out = client.post(f"/api/datasets/{ds}/analysis",
                      json={"extraction": "ml", "rotation": "oblimin", "pa_iterations": 500}).json()
    assert round(out["factorability"]["kmo"], 3) == 0.752  # issue 3 (Holzinger & Swineford 1939 data)
    assert round(out["factorability"]["bartlett"]["chi2"], 1) == 904.1  # issue 3
    assert out["factorability"]["bartlett"]["df"] == 36
    assert out["retention"]["parallel"]["n_factors"] == 3  # issue 3
    assert out["retention"]["map"]["n_factors"] == 2  # issue 3
    efa = out["efa"]
    assert efa["n_factors"] == 3
    cross = {f["item"] for f in efa["flags"] if f["kind"] == "cross_loading"}
    assert "x9" in cross  # issue 3: x9 shows up as a cross-loader
    P = np.array([efa["loadings"][f"x{i}"] for i in range(1, 10)])
    S = np.array([efa["structure"][f"x{i}"] for i in range(1, 10)])
    phi = np.array(efa["factor_correlations"])
    assert np.allclose(S, P @ phi, atol=1e-10)  # structure = pattern @ phi


def test_factors_keep_their_columns_after_a_drop(client, holzinger):
    ds = _upload(client, holzinger)
    full = client.post(f"/api/datasets/{ds}/analysis", json={"n_factors": 3}).json()["efa"]
    # which column holds the factor x1..x3 define, and x4..x6?
    col = {g: int(np.argmax(np.abs(np.array([full["loadings"][x] for x in g]).sum(axis=0))))
           for g in (("x1", "x2", "x3"), ("x4", "x5", "x6"), ("x7", "x8", "x9"))}
    assert sorted(col.values()) == [0, 1, 2]
    for drop in ("x1", "x5", "x9"):
        keep = [f"x{i}" for i in range(1, 10) if f"x{i}" != drop]
        efa = client.post(f"/api/datasets/{ds}/analysis", json={"items": keep, "n_factors": 3}).json()["efa"]
        for g, j in col.items():
            g = [x for x in g if x != drop]
            sums = np.array([efa["loadings"][x] for x in g]).sum(axis=0)
            assert int(np.argmax(np.abs(sums))) == j and sums[j] > 0


def test_model_free_flags_find_a_near_duplicate_and_a_ceiling(client):
    rng = np.random.default_rng(5)
    f = rng.standard_normal(400)
    cols = {f"q{j}": f * 0.7 + rng.standard_normal(400) * 0.7 for j in range(4)}
    cols["dup"] = cols["q0"] + rng.standard_normal(400) * 0.2
    x = pd.DataFrame({k: np.clip(np.round(v + 3), 1, 5) for k, v in cols.items()})
    x["easy"] = np.clip(np.round(f * 0.7 + 5.2 + rng.standard_normal(400) * 0.5), 1, 5)
    ds = _upload(client, x, scale_min=1, scale_max=5)
    out = client.post(f"/api/datasets/{ds}/analysis", json={"n_factors": 1}).json()
    R = x.corr().to_numpy()  # pandas Pearson
    kinds = {(fl["item"], fl["kind"]) for fl in out["efa"]["flags"]}
    assert R[0, 4] > 0.8 and {("q0", "near_duplicate"), ("dup", "near_duplicate")} <= kinds
    assert (x["easy"] == 5).mean() >= 0.5 and ("easy", "floor_ceiling") in kinds
    assert not any(k == "near_duplicate" for i, k in kinds if i in ("q1", "q2", "q3"))


@pytest.mark.parametrize("body, code, word", [
    ({"items": ["Q1", "nope"]}, "unknown_item", "nope"),
    ({"items": ["Q1"]}, "too_few_items", "2"),
    ({"reverse": ["zzz"]}, "unknown_item", "zzz"),
    ({"rotation": "sideways"}, "bad_request", "rotation"),
    ({"n_factors": 0}, "bad_request", "n_factors"),
    ({"thresholds": {"primary_min": 4}}, "bad_threshold", "primary_min"),
    ({"colour": "red"}, "bad_request", "colour"),
])
def test_bad_requests_get_a_clear_4xx(client, pg_alpha_data, body, code, word):
    ds = _upload(client, pg_alpha_data)
    r = client.post(f"/api/datasets/{ds}/analysis", json=body)
    assert 400 <= r.status_code < 500, r.text
    err = r.json()["error"]
    assert err["code"] == code and word in err["message"]


def test_unknown_dataset_is_404(client):
    r = client.post("/api/datasets/nope/analysis", json={})
    assert r.status_code == 404 and r.json()["error"]["code"] == "not_found"


def test_a_repeated_request_is_served_from_the_cache(app, client, pg_alpha_data):
    ds = _upload(client, pg_alpha_data)
    engine = app.state.engine
    first = engine.analyse(ds, {"items": ["Q1", "Q2", "Q3", "Q4"]})
    again = engine.analyse(ds, {"items": ["Q4", "Q3", "Q2", "Q1"]})  # same set, other order
    assert again is first


def test_an_item_without_variance_is_left_out_with_a_warning(client, pg_alpha_data):
    frame = pg_alpha_data.assign(FLAT=4)
    ds = _upload(client, frame)
    out = client.post(f"/api/datasets/{ds}/analysis", json={}).json()
    assert "FLAT" not in [r["name"] for r in out["items"]] and out["settings"]["excluded"] == ["FLAT"]
    assert [w["items"] for w in out["warnings"] if w["code"] == "no_variance"] == [["FLAT"]]
    assert any("'FLAT' has no variance (every answer is 4)" in w["message"] for w in out["warnings"])
    assert round(out["reliability"]["alpha"], 3) == 0.592  # pingouin docs: the same ten items
    # naming it explicitly (as the dashboard does after a drop) gives the same answer, not an error
    keep = [c for c in frame.columns if c != "Q1"]
    r = client.post(f"/api/datasets/{ds}/analysis", json={"items": keep})
    assert r.status_code == 200 and r.json()["efa"]["n_factors"] >= 1
    r = client.post(f"/api/datasets/{ds}/analysis", json={"items": ["Q1", "FLAT"]})
    assert r.status_code == 422 and "FLAT had no variance" in r.json()["error"]["message"]


def test_listwise_with_no_complete_respondent_says_so(client):
    rng = np.random.default_rng(2)
    frame = pd.DataFrame(rng.integers(1, 6, (12, 3)).astype(float), columns=["a", "b", "c"])
    for row in range(12):  # every respondent skipped one item
        frame.iloc[row, row % 3] = np.nan
    ds = _upload(client, frame)
    r = client.post(f"/api/datasets/{ds}/analysis", json={"missing": "listwise"})
    assert r.status_code == 422 and r.json()["error"]["code"] == "too_few_complete"
    assert "Only 0 respondent(s) answered every active item" in r.json()["error"]["message"]
    assert client.post(f"/api/datasets/{ds}/analysis", json={"missing": "pairwise"}).status_code == 200


def test_an_upload_starts_the_first_analysis_in_the_background(app, client, pg_alpha_data):
    import time

    ds = _upload(client, pg_alpha_data)
    engine = app.state.engine
    deadline = time.time() + 30
    while not engine.has_answer(ds):
        assert time.time() < deadline, "the background analysis never finished"
        time.sleep(0.05)
    first = client.post(f"/api/datasets/{ds}/analysis", json={}).json()
    assert round(first["reliability"]["alpha"], 3) == 0.592  # pingouin docs: the same answer, from the cache
