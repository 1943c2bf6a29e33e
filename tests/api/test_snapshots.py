"""Snapshots through the API: save, list, read, compare, restore, report, exports, restart, bad requests.

Data: 60 invented respondents x 8 items (two constructs, Q4 reverse-keyed), built here with a seeded
generator. Outside references: pingouin.cronbach_alpha for the alpha trail, hashlib for the SHA-256,
pandas.read_csv for the CSV round trips, numpy for reverse scoring (min + max - x).
"""
from __future__ import annotations

import hashlib
import io

import numpy as np
import pandas as pd
import pingouin as pg
import pytest

from server import __version__
from server.app import create_app
from tests.conftest import local_client

ITEMS = [f"Q{i}" for i in range(1, 9)]
SETTINGS = {"n_factors": 2, "pa_iterations": 50, "seed": 3, "rotation": "oblimin"}
KEPT = ["Q1", "Q2", "Q3", "Q5", "Q6", "Q7"]
REMOVED = [
    {"item": "Q8", "reason": "Loads weakly on everything.", "code": "weak"},
    {"item": "Q4", "reason": "Reads like the other construct.", "code": "Belongs elsewhere"},
]


def make_data(n: int = 60, seed: int = 11) -> tuple[pd.DataFrame, bytes, bytes]:
    rng = np.random.default_rng(seed)
    f = rng.normal(size=(n, 2))
    load = np.array([[.8, 0], [.7, 0], [.75, .1], [-.6, 0], [0, .8], [0, .7], [.1, .7], [.25, .2]])
    latent = f @ load.T + rng.normal(scale=.6, size=(n, 8))
    data = np.clip(np.round(3 + 1.1 * latent), 1, 5).astype(int)
    df = pd.DataFrame(data, columns=ITEMS)
    ids = [f"p{i:03d}" for i in range(n)]
    ids[4] = "=1+2"      # formula-like ID: must be neutralised in the responses CSV
    df.insert(0, "pid", ids)
    codebook = pd.DataFrame({
        "item": ITEMS,
        "text": ["I feel at home in the workshop.", "People here know my name.", "=cmd|' /C calc'!A0",
                 "I often feel like an outsider.", "I learn new skills here.", "My work improves.",
                 "I try things I could not do before.", "@SUM(1,2) is my favourite formula."],
        "construct": ["belonging"] * 4 + ["growth"] * 4,
        "reverse": ["no", "no", "no", "yes", "no", "no", "no", "no"],
        "min": [1] * 8, "max": [5] * 8,
    })
    return df, df.to_csv(index=False).encode(), codebook.to_csv(index=False).encode()


@pytest.fixture
def data():
    return make_data()


@pytest.fixture
def dataset_id(client, data):
    _, raw, cb = data
    r = client.post("/api/datasets", files={"file": ("workshop.csv", raw, "text/csv"),
                                            "codebook": ("codebook.csv", cb, "text/csv")},
                    data={"id_column": "pid"})
    assert r.status_code == 201, r.text
    return r.json()["id"]


def save(client, dataset_id, **overrides):
    body = {"name": "After the March meeting", "author": "Team A", "note": "First cut.", "items": KEPT,
            "removed": REMOVED, "settings": SETTINGS}
    body.update(overrides)
    return client.post(f"/api/datasets/{dataset_id}/snapshots", json=body)


def scored_frame(df: pd.DataFrame) -> pd.DataFrame:
    out = df[ITEMS].astype(float).copy()
    out["Q4"] = 1 + 5 - out["Q4"]  # reverse-keyed: min + max - x
    return out


# ----------------------------------------------------------------------------------------------- saving
def test_save_stores_the_record_and_recomputes_everything(client, dataset_id, data):
    _, raw, _ = data
    r = save(client, dataset_id, removed=[{**REMOVED[0], "alpha_after": 0.99, "omega_after": 0.99},
                                          REMOVED[1]])
    assert r.status_code == 201, r.text
    snap = r.json()
    assert snap["id"] and snap["created_at"]
    assert snap["dataset_id"] == dataset_id
    assert snap["dataset_sha256"] == hashlib.sha256(raw).hexdigest()  # hashlib on the uploaded bytes
    assert snap["software_version"] == __version__
    assert snap["items"] == KEPT
    assert [x["item"] for x in snap["removed"]] == ["Q8", "Q4"]  # removal order kept
    assert [x["code"] for x in snap["removed"]] == ["weak", "belongs-elsewhere"]
    assert snap["removed"][0]["alpha_after"] != 0.99  # the browser's numbers are not trusted
    assert snap["settings"] == SETTINGS
    assert snap["parent"] is None
    assert set(snap["analysis"]) >= {"reliability", "items", "efa", "settings"}
    assert client.get(f"/api/snapshots/{snap['id']}").json() == snap


def test_stored_analysis_equals_a_live_analysis_exactly(client, dataset_id):
    snap = save(client, dataset_id).json()
    live = client.post(f"/api/datasets/{dataset_id}/analysis", json={**SETTINGS, "items": KEPT})
    assert live.status_code == 200, live.text
    assert snap["analysis"] == live.json()
    assert snap["analysis"]["reliability"]["alpha"] == live.json()["reliability"]["alpha"]
    assert snap["analysis"]["efa"]["loadings"] == live.json()["efa"]["loadings"]
    # and after a restart of the engine's caches (a fresh app on the same data folder) still the same
    again = client.get(f"/api/snapshots/{snap['id']}").json()
    assert again["analysis"] == live.json()


def test_trail_matches_live_analyses_and_pingouin(client, dataset_id, data):
    df, _, _ = data
    snap = save(client, dataset_id).json()
    trail = snap["trail"]
    pools = [KEPT + ["Q8", "Q4"], KEPT + ["Q4"], KEPT]
    assert [t["n_items"] for t in trail] == [8, 7, 6]
    assert [t["removed"] for t in trail] == [None, "Q8", "Q4"]
    scored = scored_frame(df)
    for step, pool in zip(trail, pools):
        live = client.post(f"/api/datasets/{dataset_id}/analysis", json={**SETTINGS, "items": pool}).json()
        assert step["alpha"] == live["reliability"]["alpha"]
        assert step["omega_total"] == live["reliability"]["omega_unidimensional"]  # the trail's one-factor omega
        alpha_pg, _ = pg.cronbach_alpha(scored[pool])
        assert step["alpha"] == pytest.approx(alpha_pg, abs=1e-9)  # pingouin.cronbach_alpha, same data
    for removed, step in zip(snap["removed"], trail[1:]):
        assert removed["alpha_after"] == step["alpha"]
        assert removed["omega_after"] == step["omega_total"]
        assert removed["n_items_after"] == step["n_items"]
    assert trail[-1]["alpha"] == snap["analysis"]["reliability"]["alpha"]


# ----------------------------------------------------------------------------------- list, compare, restore
def test_list_is_newest_first_and_light(client, dataset_id):
    first = save(client, dataset_id, name="one").json()
    second = save(client, dataset_id, name="two", parent=first["id"]).json()
    r = client.get(f"/api/datasets/{dataset_id}/snapshots")
    assert r.status_code == 200
    listed = r.json()
    assert [s["id"] for s in listed] == [second["id"], first["id"]]
    assert "analysis" not in listed[0]
    assert listed[0]["parent"] == first["id"]
    assert listed[0]["alpha"] == second["analysis"]["reliability"]["alpha"]
    assert client.get("/api/datasets/nope/snapshots").status_code == 404


def test_compare(client, dataset_id):
    a = save(client, dataset_id, name="a", items=KEPT + ["Q4"], removed=[REMOVED[0]]).json()
    b = save(client, dataset_id, name="b", items=[i for i in KEPT if i != "Q7"] + ["Q8"],
             removed=[REMOVED[1], {"item": "Q7", "reason": "Redundant with Q6.", "code": "redundant"}],
             parent=a["id"]).json()
    r = client.get(f"/api/snapshots/{a['id']}/compare/{b['id']}")
    assert r.status_code == 200, r.text
    cmp_ = r.json()
    assert cmp_["items_added"] == ["Q8"]
    assert sorted(cmp_["items_removed"]) == ["Q4", "Q7"]
    ra, rb = a["analysis"]["reliability"], b["analysis"]["reliability"]
    assert cmp_["coefficients"]["alpha"] == {"a": ra["alpha"], "b": rb["alpha"], "change": rb["alpha"] - ra["alpha"]}
    assert cmp_["coefficients"]["omega_total"]["change"] == rb["omega_total"] - ra["omega_total"]
    assert cmp_["coefficients"]["n_items"] == {"a": 7, "b": 6, "change": -1}
    common = {row["item"]: row for row in cmp_["loadings"]}
    assert set(common) == set(KEPT) - {"Q7"}
    for item, row in common.items():
        assert row["a"] == a["analysis"]["efa"]["loadings"][item]
        assert row["b"] == b["analysis"]["efa"]["loadings"][item]
        if row["change"] is not None:
            assert row["change"] == [y - x for x, y in zip(row["a"], row["b"])]
    assert client.get(f"/api/snapshots/{a['id']}/compare/nope").status_code == 404


def test_restore(client, dataset_id):
    snap = save(client, dataset_id).json()
    r = client.get(f"/api/snapshots/{snap['id']}/restore")
    assert r.status_code == 200
    body = r.json()
    assert body["dataset_id"] == dataset_id
    assert body["items"] == KEPT
    assert body["settings"] == SETTINGS
    assert body["removed"] == [{"item": "Q8", "reason": REMOVED[0]["reason"], "code": "weak"},
                               {"item": "Q4", "reason": REMOVED[1]["reason"], "code": "belongs-elsewhere"}]
    # what restore gives reproduces the snapshot's numbers
    live = client.post(f"/api/datasets/{dataset_id}/analysis",
                       json={**body["settings"], "items": body["items"]}).json()
    assert live == snap["analysis"]


def test_unknown_snapshot_is_404(client):
    for path in ("/api/snapshots/nope", "/api/snapshots/nope/restore", "/api/snapshots/nope/report",
                 "/api/snapshots/nope/scoring-key", "/api/snapshots/nope/responses"):
        r = client.get(path)
        assert r.status_code == 404, path
        assert r.json()["error"]["code"] == "not_found"


# ------------------------------------------------------------------------------------------- bad requests
BAD = [
    ("missing_reason", {"removed": [{"item": "Q8"}, REMOVED[1]]}, "Q8"),
    ("missing_reason", {"removed": [{"item": "Q8", "reason": "   "}, REMOVED[1]]}, "Q8"),
    ("missing_reason", {"removed": [REMOVED[0], {"item": "Q4", "reason": ""}]}, "Q4"),
    ("unknown_item", {"items": KEPT + ["Q99"]}, "Q99"),
    ("unknown_item", {"removed": [{"item": "Nope", "reason": "x"}]}, "Nope"),
    ("kept_and_removed", {"removed": [{"item": "Q1", "reason": "x"}]}, "Q1"),
    ("duplicate_item", {"items": KEPT + ["Q2"]}, "Q2"),
    ("duplicate_item", {"removed": [REMOVED[0], {"item": "Q8", "reason": "again"}]}, "Q8"),
    ("unknown_reason_code", {"removed": [{"item": "Q8", "reason": "x", "code": "vibes"}]}, "Q8"),
    ("unknown_parent", {"parent": "no-such-snapshot"}, "no-such-snapshot"),
    ("too_few_items", {"items": ["Q1"], "removed": []}, "2"),
    ("missing_name", {"name": "  "}, "name"),
    ("bad_settings", {"settings": {"rotation": "sideways"}}, "rotation"),
    ("bad_settings", {"settings": {"rotaton": "oblimin"}}, "rotaton"),
]


@pytest.mark.parametrize("code, change, named", BAD)
def test_bad_requests_are_4xx_naming_the_problem(client, dataset_id, code, change, named):
    r = save(client, dataset_id, **change)
    assert r.status_code == 422, r.text
    err = r.json()["error"]
    assert err["code"] == code
    assert named in err["message"]
    assert client.get(f"/api/datasets/{dataset_id}/snapshots").json() == []  # nothing half-saved


def test_malformed_body_and_unknown_dataset(client, dataset_id):
    r = client.post(f"/api/datasets/{dataset_id}/snapshots", json={"name": "x"})
    assert r.status_code == 422 and "items" in r.json()["error"]["message"]
    r = client.post(f"/api/datasets/{dataset_id}/snapshots", json={"name": "x", "items": KEPT, "extra": 1})
    assert r.status_code == 422
    assert save(client, "no-such-dataset").status_code == 404


def test_parent_from_another_dataset_is_refused(client, dataset_id, data):
    _, raw, cb = data
    other = client.post("/api/datasets", files={"file": ("other.csv", raw, "text/csv"),
                                                "codebook": ("codebook.csv", cb, "text/csv")},
                        data={"id_column": "pid"}).json()["id"]
    parent = save(client, other).json()
    r = save(client, dataset_id, parent=parent["id"])
    assert r.status_code == 422
    assert r.json()["error"]["code"] == "parent_other_dataset"


# ------------------------------------------------------------------------------------------------ report
def test_report_escapes_user_text(client, dataset_id):
    evil = "<script>alert('x')</script>"
    snap = save(client, dataset_id, name="Cut " + evil,
                removed=[{"item": "Q8", "reason": "Weak " + evil, "code": "weak"}, REMOVED[1]]).json()
    r = client.get(f"/api/snapshots/{snap['id']}/report")
    assert r.status_code == 200
    assert r.headers["content-type"].startswith("text/html")
    assert r.headers["content-disposition"].startswith("inline")
    page = r.text
    assert "<script" not in page.lower()
    assert "Weak &lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt;" in page
    assert "http://" not in page and "https://" not in page
    assert snap["dataset_sha256"] in page
    assert "<svg" in page
    assert "validity" in page
    assert "script-src" not in r.headers["content-security-policy"]
    assert "default-src 'none'" in r.headers["content-security-policy"]


# ------------------------------------------------------------------------------------------------ exports
def test_scoring_key_csv(client, dataset_id):
    snap = save(client, dataset_id).json()
    r = client.get(f"/api/snapshots/{snap['id']}/scoring-key")
    assert r.status_code == 200
    assert r.headers["content-type"].startswith("text/csv")
    assert r.headers["content-disposition"] == 'attachment; filename="After_the_March_meeting-scoring-key.csv"'
    key = pd.read_csv(io.BytesIO(r.content), keep_default_na=False)
    assert list(key.columns) == ["item", "text", "construct", "reverse", "min", "max"]
    assert key["item"].tolist() == KEPT
    texts = dict(zip(key["item"], key["text"]))
    assert texts["Q1"] == "I feel at home in the workshop."
    assert texts["Q3"] == "'=cmd|' /C calc'!A0"  # neutralised (OWASP CSV injection)
    assert key["construct"].tolist() == ["belonging"] * 3 + ["growth"] * 3
    assert key["reverse"].tolist() == [False] * 6
    assert key["min"].tolist() == [1] * 6 and key["max"].tolist() == [5] * 6


def test_scoring_key_marks_reverse_items(client, dataset_id):
    snap = save(client, dataset_id, items=KEPT + ["Q4"], removed=[REMOVED[0]]).json()
    key = pd.read_csv(io.BytesIO(client.get(f"/api/snapshots/{snap['id']}/scoring-key").content))
    assert dict(zip(key["item"], key["reverse"]))["Q4"] == True  # noqa: E712  (a numpy bool: compared by value)


def test_responses_csv_raw_and_scored(client, dataset_id, data):
    df, _, _ = data
    kept = KEPT + ["Q4"]
    snap = save(client, dataset_id, items=kept, removed=[REMOVED[0]]).json()
    r = client.get(f"/api/snapshots/{snap['id']}/responses")
    assert r.status_code == 200
    assert "attachment" in r.headers["content-disposition"]
    raw = pd.read_csv(io.BytesIO(r.content), dtype={"pid": str})
    assert list(raw.columns) == ["pid"] + kept
    expected_ids = df["pid"].tolist()
    expected_ids[4] = "'=1+2"  # formula-like ID neutralised
    assert raw["pid"].tolist() == expected_ids
    np.testing.assert_array_equal(raw[kept].to_numpy(float), df[kept].to_numpy(float))
    r = client.get(f"/api/snapshots/{snap['id']}/responses?scored=true")
    assert "scored" in r.headers["content-disposition"]
    scored = pd.read_csv(io.BytesIO(r.content), dtype={"pid": str})
    np.testing.assert_array_equal(scored[kept].to_numpy(float), scored_frame(df)[kept].to_numpy(float))
    assert (scored["Q4"] == 6 - df["Q4"]).all()  # min + max - x with min 1, max 5


# ------------------------------------------------------------------------------------------------ restart
def test_everything_survives_a_restart(settings, dataset_id, client):
    a = save(client, dataset_id, name="one").json()
    b = save(client, dataset_id, name="two", parent=a["id"]).json()
    listed = client.get(f"/api/datasets/{dataset_id}/snapshots").json()
    with local_client(create_app(settings)) as fresh:
        assert fresh.get(f"/api/datasets/{dataset_id}/snapshots").json() == listed
        assert fresh.get(f"/api/snapshots/{a['id']}").json() == a
        assert fresh.get(f"/api/snapshots/{b['id']}").json() == b
        assert fresh.get(f"/api/snapshots/{b['id']}/report").status_code == 200
        live = fresh.post(f"/api/datasets/{dataset_id}/analysis", json={**SETTINGS, "items": KEPT}).json()
        assert live == b["analysis"]  # a fresh engine recomputes the same numbers


def test_reverse_override_reaches_the_key_and_the_scored_responses(client, dataset_id, data):
    df, _, _ = data
    kept = KEPT + ["Q4"]
    snap = save(client, dataset_id, items=kept, removed=[REMOVED[0]], settings={**SETTINGS, "reverse": []}).json()
    assert snap["analysis"]["settings"]["reverse"] == []
    key = pd.read_csv(io.BytesIO(client.get(f"/api/snapshots/{snap['id']}/scoring-key").content))
    assert key["reverse"].tolist() == [False] * 7
    scored = pd.read_csv(io.BytesIO(client.get(f"/api/snapshots/{snap['id']}/responses?scored=true").content))
    np.testing.assert_array_equal(scored[kept].to_numpy(float), df[kept].to_numpy(float))  # nothing reversed
    assert client.get(f"/api/snapshots/{snap['id']}/restore").json()["settings"]["reverse"] == []


def test_snapshots_are_immutable_and_outlive_their_dataset(client, dataset_id):
    snap = save(client, dataset_id).json()
    assert client.delete(f"/api/snapshots/{snap['id']}").status_code == 405
    assert client.put(f"/api/snapshots/{snap['id']}", json={"name": "changed"}).status_code == 405
    assert client.delete(f"/api/datasets/{dataset_id}").status_code in (200, 204)
    assert client.get(f"/api/snapshots/{snap['id']}").json() == snap
    assert [s["id"] for s in client.get(f"/api/datasets/{dataset_id}/snapshots").json()] == [snap["id"]]
    report = client.get(f"/api/snapshots/{snap['id']}/report")
    assert report.status_code == 200 and snap["dataset_sha256"] in report.text
    key = client.get(f"/api/snapshots/{snap['id']}/scoring-key")
    assert key.status_code == 200  # the key was stored with the snapshot
    r = client.get(f"/api/snapshots/{snap['id']}/responses")
    assert r.status_code == 404 and r.json()["error"]["details"] == {"dataset": dataset_id}
