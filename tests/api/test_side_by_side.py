"""Issue 12 item 4: two short forms side by side (``GET /api/snapshots/{a}/side-by-side/{b}``, and a snapshot
beside the current view with ``POST /api/snapshots/{a}/side-by-side``) on the demo (demo_data/README.md:
constructs welcome W1-W8, contribution C1-C8, ownership O1-O8; -9 = skipped)."""
from __future__ import annotations

import math

import pandas as pd
import pytest

from server.demo import ensure_demo_loaded


def save(client, ds: str, name: str, drop: list[str]) -> dict:
    items = client.post(f"/api/datasets/{ds}/analysis", json={}).json()["settings"]["items"]
    body = {"name": name, "items": [i for i in items if i not in drop],
            "removed": [{"item": i, "reason": "agreed at the meeting"} for i in drop]}
    r = client.post(f"/api/datasets/{ds}/snapshots", json=body)
    assert r.status_code == 201, r.text
    return r.json()


def primary(row: list[float]) -> tuple[int, float]:
    """The largest absolute loading of a row (written out here, not taken from the server)."""
    best = max(range(len(row)), key=lambda i: abs(row[i]))
    return best, row[best]


def check_form(form: dict, record: dict, subscale: str) -> None:
    """One side of a subscale holds what the record's stored analysis holds for it."""
    analysis = record["analysis"]
    block = analysis["constructs"][subscale]
    assert form["alpha"] == block["alpha"]
    assert form["alpha_ci"] == block["alpha_ci"]
    assert form["omega_total"] == block["omega_total"]
    assert form["k"] == len(block["items"]) == len(form["items"])
    assert [r["name"] for r in form["items"]] == [i for i in block["items"] if i in record["items"]]
    table = {r["name"]: r for r in block["item_table"]}
    meta = {m["name"]: m for m in record["item_meta"]}
    labels = analysis["efa"]["factors"]
    for row in form["items"]:
        assert row["text"] == meta[row["name"]]["text"]
        assert row["reverse"] == meta[row["name"]]["reverse"]
        assert row["item_rest_r"] == table[row["name"]]["item_rest_r"]
        factor, loading = primary(analysis["efa"]["loadings"][row["name"]])
        assert row["loading"] == loading and row["primary_factor"] == labels[factor]


def test_two_snapshots_side_by_side_hold_each_snapshots_numbers(app, client):
    ds = ensure_demo_loaded(app.state.store)
    a = save(client, ds, "Drop C7", ["C7"])
    b = save(client, ds, "Drop W8 and O4", ["W8", "O4"])
    r = client.get(f"/api/snapshots/{a['id']}/side-by-side/{b['id']}")
    assert r.status_code == 200, r.text
    got = r.json()
    assert got["left"] == {"id": a["id"], "name": "Drop C7", "saved_at": a["created_at"], "dataset_id": ds,
                           "n_items": 23}
    assert got["right"]["id"] == b["id"] and got["right"]["n_items"] == 22
    subs = {s["name"]: s for s in got["subscales"]}
    assert list(subs) == ["welcome", "contribution", "ownership"]
    assert subs["welcome"]["only_left"] == ["W8"] and subs["welcome"]["only_right"] == []
    assert subs["contribution"]["only_left"] == [] and subs["contribution"]["only_right"] == ["C7"]
    assert subs["ownership"]["only_left"] == ["O4"] and subs["ownership"]["only_right"] == []
    assert subs["welcome"]["both"] == ["W1", "W2", "W3", "W4", "W5", "W6", "W7"]
    for name in subs:
        check_form(subs[name]["left"], a, name)
        check_form(subs[name]["right"], b, name)
    for side, rec in (("left", a), ("right", b)):
        rel = rec["analysis"]["reliability"]
        total = got["total"][side]
        assert total["alpha"] == rel["alpha"] and total["alpha_ci"] == rel["alpha_ci"]
        assert total["omega_total"] == rel["omega_total"]
        assert total["omega_hierarchical"] == rel["omega_hierarchical"]
        assert total["k"] == len(rec["items"])
    text = " ".join(got["differences"])
    assert "W8" in text and "O4" in text and "C7" in text
    assert "different data sets" not in text


def test_a_subscale_alpha_beside_pingouin(app, client):
    """The contribution alpha of a form, outside the project: pingouin 0.7's cronbach_alpha (pairwise), C3
    reverse-scored as 6 - x (demo_data/README.md)."""
    import pingouin as pg

    ds = ensure_demo_loaded(app.state.store)
    a = save(client, ds, "Drop C7", ["C7"])
    b = save(client, ds, "Drop C1", ["C1"])
    got = client.get(f"/api/snapshots/{a['id']}/side-by-side/{b['id']}").json()
    contribution = next(s for s in got["subscales"] if s["name"] == "contribution")
    dataset = app.state.engine.dataset(ds)  # the parsed responses, -9 already missing
    frame = pd.DataFrame(dataset.responses, columns=[m.name for m in dataset.items])
    frame["C3"] = 6 - frame["C3"]
    for side, drop in (("left", "C7"), ("right", "C1")):
        items = [f"C{i}" for i in range(1, 9) if f"C{i}" != drop]
        ref = pg.cronbach_alpha(frame[items], nan_policy="pairwise")[0]  # pingouin 0.7, Cronbach (1951)
        assert contribution[side]["alpha"] == pytest.approx(ref, abs=1e-6)
    assert contribution["only_left"] == ["C1"] and contribution["only_right"] == ["C7"]


def test_a_snapshot_beside_the_current_view(app, client):
    ds = ensure_demo_loaded(app.state.store)
    a = save(client, ds, "Drop C7", ["C7"])
    view = {"items": ["W1", "W2", "W3", "W4", "W5", "C1", "C2", "C3", "C4", "C7", "O1", "O2", "O3"],
            "n_factors": 3}
    r = client.post(f"/api/snapshots/{a['id']}/side-by-side", json=view)
    assert r.status_code == 200, r.text
    got = r.json()
    fresh = client.post(f"/api/datasets/{ds}/analysis", json=view).json()
    assert got["right"]["id"] == "current" and got["right"]["n_items"] == 13 and got["right"]["dataset_id"] == ds
    subs = {s["name"]: s for s in got["subscales"]}
    assert subs["welcome"]["only_left"] == ["W6", "W7", "W8"] and subs["welcome"]["only_right"] == []
    assert subs["contribution"]["only_right"] == ["C7"]
    assert subs["contribution"]["only_left"] == ["C5", "C6", "C8"]
    for name, sub in subs.items():
        check_form(sub["left"], a, name)
        block = fresh["constructs"][name]
        right = sub["right"]
        assert right["alpha"] == block["alpha"] and right["alpha_ci"] == block["alpha_ci"]
        assert right["omega_total"] == block["omega_total"]
        table = {t["name"]: t for t in block["item_table"]}
        for row in right["items"]:
            assert row["item_rest_r"] == table[row["name"]]["item_rest_r"]
            factor, loading = primary(fresh["efa"]["loadings"][row["name"]])
            assert row["loading"] == loading and row["primary_factor"] == fresh["efa"]["factors"][factor]
    assert got["total"]["right"]["alpha"] == fresh["reliability"]["alpha"]
    assert got["total"]["right"]["omega_hierarchical"] == fresh["reliability"]["omega_hierarchical"]
    assert not math.isnan(got["total"]["right"]["omega_total"])


def test_bad_requests_answer_with_the_error_shape(app, client):
    ds = ensure_demo_loaded(app.state.store)
    a = save(client, ds, "Drop C7", ["C7"])
    for r in (client.get(f"/api/snapshots/{a['id']}/side-by-side/nope"),
              client.get(f"/api/snapshots/nope/side-by-side/{a['id']}"),
              client.post("/api/snapshots/nope/side-by-side", json={})):
        assert r.status_code == 404
        err = r.json()["error"]
        assert err["code"] == "not_found" and "nope" in err["message"]
    r = client.post(f"/api/snapshots/{a['id']}/side-by-side", json={"items": ["W1", "NOPE"]})
    assert 400 <= r.status_code < 500
    assert "NOPE" in r.json()["error"]["message"]
