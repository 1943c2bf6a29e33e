"""Issue 12 item 5: a snapshot's scoring rules and item statistics, as JSON and CSV, reopened with pandas and
checked against a hand computation on the demo's respondent file (demo_data/README.md: C3 is reverse-keyed,
answers 1-5, -9 = skipped)."""
from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from server.demo import ensure_demo_loaded

DEMO = Path(__file__).resolve().parents[2] / "demo_data"


def save(client, ds: str, **extra) -> dict:
    items = client.post(f"/api/datasets/{ds}/analysis", json={}).json()["settings"]["items"]
    body = {"name": "Meeting form", "items": [i for i in items if i != "C7"],
            "removed": [{"item": "C7", "reason": "weak item", "code": "weak"}], **extra}
    r = client.post(f"/api/datasets/{ds}/snapshots", json=body)
    assert r.status_code == 201, r.text
    return r.json()


def csv_frame(text: str) -> pd.DataFrame:
    return pd.read_csv(io.StringIO(text.lstrip("\ufeff")))


def respondents() -> pd.DataFrame:
    """The demo's wave 1 with -9 as missing, and a few answers blanked so the minimum-answered rule bites."""
    df = pd.read_csv(DEMO / "workshop_responses.csv", na_values=[-9]).set_index("respondent")
    df.loc[df.index[0], ["W1", "W2"]] = np.nan      # 6 of 8 welcome answers: below 7 of 8
    df.loc[df.index[1], ["W4"]] = np.nan            # 7 of 8: enough
    df.loc[df.index[2], ["C1", "C2", "C3"]] = np.nan  # 4 of 7 contribution answers
    return df


def score_by_rules(rules: pd.DataFrame, data: pd.DataFrame) -> dict[str, pd.Series]:
    """Apply the CSV rules as a user would: each formula 'a - x' or 'x', then mean or prorated sum."""
    out = {}
    for scale, rows in rules.groupby("scale", sort=False):
        cols = {}
        for _, row in rows.iterrows():
            x = data[row["item"]]
            if row["formula"] == "x":
                cols[row["item"]] = x
            else:
                const, rest = row["formula"].split(" - ")
                assert rest == "x"
                cols[row["item"]] = float(const) - x
        frame = pd.DataFrame(cols)
        answered = frame.notna().sum(axis=1)
        k = int(rows["n_items"].iloc[0])
        score = frame.mean(axis=1) * (k if rows["method"].iloc[0] == "sum" else 1)
        out[scale] = score.where(answered >= int(rows["min_answered"].iloc[0]))
    return out


@pytest.mark.parametrize("method", ["mean", "sum"])
def test_scoring_rules_csv_scores_like_a_hand_computation(app, client, method):
    ds = ensure_demo_loaded(app.state.store)
    snap = save(client, ds, scoring_method=method) if method == "sum" else save(client, ds)
    r = client.get(f"/api/snapshots/{snap['id']}/scoring-rules?format=csv")
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    rules = csv_frame(r.text)
    assert set(rules["scale"]) == {"welcome", "contribution", "ownership", "(total)"}
    assert (rules["method"] == method).all()
    c3 = rules[(rules["scale"] == "contribution") & (rules["item"] == "C3")].iloc[0]
    assert bool(c3["reverse"]) and c3["formula"] == "6 - x"  # demo_data/README.md: C3 reverse-keyed, 1-5
    assert "C7" not in set(rules["item"])

    data = respondents()
    scores = score_by_rules(rules, data)

    # The hand computation, straight from the codebook and the README (not from the rules).
    book = pd.read_csv(DEMO / "workshop_codebook.csv").set_index("item")
    kept = [i for i in book.index if i != "C7"]
    scored = data[kept].copy()
    for item in kept:
        if int(book.loc[item, "reverse"]) == 1:
            scored[item] = book.loc[item, "min"] + book.loc[item, "max"] - scored[item]
    for construct in ("welcome", "contribution", "ownership"):
        items = [i for i in kept if book.loc[i, "construct"] == construct]
        need = math.ceil(0.8 * len(items))  # 80 % of the items, rounded up: 7 of 8, 6 of 7
        part = scored[items]
        total = part.sum(axis=1) / part.notna().sum(axis=1) * (len(items) if method == "sum" else 1)
        expected = total.where(part.notna().sum(axis=1) >= need)
        pd.testing.assert_series_equal(scores[construct], expected, check_names=False)
    assert math.isnan(scores["welcome"].iloc[0]) and not math.isnan(scores["welcome"].iloc[1])
    assert math.isnan(scores["contribution"].iloc[2])


def test_scoring_rules_json(app, client):
    ds = ensure_demo_loaded(app.state.store)
    snap = save(client, ds, min_answered_share=1.0)
    body = client.get(f"/api/snapshots/{snap['id']}/scoring-rules").json()
    assert body["method"] == "mean" and body["min_answered_share"] == 1.0
    assert body["min_answered_basis"] == "common practice"
    by = {s["name"]: s for s in body["subscales"]}
    assert by["contribution"]["n_items"] == 7 and by["contribution"]["min_answered"] == 7
    assert by["welcome"]["score_range"] == [1, 5]
    constructs = snap["analysis"]["constructs"]
    assert by["welcome"]["reliability"]["alpha"] == constructs["welcome"]["alpha"]
    assert by["welcome"]["reliability"]["omega_total"] == constructs["welcome"]["omega_total"]
    total = body["total"]
    omega_h = snap["analysis"]["reliability"]["omega_hierarchical"]
    assert total["reliability"]["omega_hierarchical"] == omega_h
    assert total["supported"] is (omega_h >= 0.5)  # common practice
    assert total["n_items"] == 23 and total["note"]


def test_sum_range_and_default_share(app, client):
    ds = ensure_demo_loaded(app.state.store)
    snap = save(client, ds, scoring_method="sum")
    body = client.get(f"/api/snapshots/{snap['id']}/scoring-rules").json()
    by = {s["name"]: s for s in body["subscales"]}
    assert by["contribution"]["score_range"] == [7, 35] and by["contribution"]["min_answered"] == 6
    assert by["welcome"]["min_answered"] == 7


@pytest.mark.parametrize("extra", [{"scoring_method": "median"}, {"min_answered_share": 0},
                                   {"min_answered_share": 1.5}])
def test_bad_scoring_choice_is_422(app, client, extra):
    ds = ensure_demo_loaded(app.state.store)
    items = ["W1", "W2", "W3"]
    r = client.post(f"/api/datasets/{ds}/snapshots", json={"name": "bad", "items": items, **extra})
    assert r.status_code == 422, r.text
    assert next(iter(extra)) in r.json()["error"]["message"]


def test_unknown_snapshot_and_format(app, client):
    ds = ensure_demo_loaded(app.state.store)
    for path in ("scoring-rules", "item-statistics"):
        r = client.get(f"/api/snapshots/nope/{path}")
        assert r.status_code == 404 and r.json()["error"]["code"] == "not_found"
    snap = save(client, ds)
    r = client.get(f"/api/snapshots/{snap['id']}/item-statistics?format=xml")
    assert r.status_code == 422 and "format" in r.json()["error"]["message"]


def test_item_statistics_csv_matches_the_stored_snapshot(app, client):
    ds = ensure_demo_loaded(app.state.store)
    snap = save(client, ds)
    r = client.get(f"/api/snapshots/{snap['id']}/item-statistics?format=csv")
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    table = csv_frame(r.text)
    analysis = snap["analysis"]
    pool = {row["name"]: row for row in analysis["items"]}
    assert list(table["subscale"].unique()) == list(analysis["constructs"])
    assert len(table) == len(snap["items"])
    for name, block in analysis["constructs"].items():
        rows = table[table["subscale"] == name].set_index("item")
        assert list(rows.index) == block["items"]
        for stored in block["item_table"]:
            got = rows.loc[stored["name"]]
            for col in ("item_rest_r", "alpha_if_deleted", "omega_if_deleted"):
                assert got[col] == pytest.approx(stored[col], rel=1e-12)
            assert got["r_other_max"] == pytest.approx(max(stored["r_other"].values()), rel=1e-12)
            assert got["mean"] == pytest.approx(pool[stored["name"]]["mean"], rel=1e-12)
            assert got["sd"] == pytest.approx(pool[stored["name"]]["sd"], rel=1e-12)
    c3 = table.set_index("item").loc["C3"]
    assert bool(c3["reverse"]) and c3["construct"] == "contribution"


def test_an_old_record_without_item_tables_still_works(app, client):
    ds = ensure_demo_loaded(app.state.store)
    new = save(client, ds)
    old = {k: v for k, v in new.items() if k not in ("id", "created_at", "scoring")}
    analysis = dict(old["analysis"])
    analysis.pop("constructs")
    analysis["reliability"] = {k: v for k, v in analysis["reliability"].items()
                               if k not in ("omega_hierarchical", "omega_basis")}
    old["analysis"] = analysis
    stored = app.state.store.add_snapshot(ds, old)

    r = client.get(f"/api/snapshots/{stored['id']}/item-statistics?format=csv")
    assert r.status_code == 200, r.text
    table = csv_frame(r.text)
    assert set(table["subscale"]) == {"(whole pool)"} and list(table["item"]) == new["items"]
    pool = {row["name"]: row for row in analysis["items"]}
    assert table.set_index("item").loc["W1", "item_rest_r"] == pytest.approx(pool["W1"]["item_rest_r"], rel=1e-12)

    body = client.get(f"/api/snapshots/{stored['id']}/scoring-rules").json()
    assert body["method"] == "mean" and body["min_answered_share"] == 0.8  # the defaults for older records
    assert {s["name"] for s in body["subscales"]} == {"welcome", "contribution", "ownership"}  # from item_meta
    assert body["total"]["supported"] is False and "omega hierarchical" in body["total"]["note"].lower()
    rules = csv_frame(client.get(f"/api/snapshots/{stored['id']}/scoring-rules?format=csv").text)
    assert rules.loc[rules["item"] == "C3", "formula"].iloc[0] == "6 - x"


def test_text_cells_are_neutralised(app, client):
    ds = ensure_demo_loaded(app.state.store)
    new = save(client, ds)
    old = {k: v for k, v in new.items() if k not in ("id", "created_at")}
    old["item_meta"] = [{**m, "text": "=HYPERLINK(\"x\")"} if m["name"] == "W1" else m for m in old["item_meta"]]
    stored = app.state.store.add_snapshot(ds, old)
    for path in ("scoring-rules", "item-statistics"):
        text = client.get(f"/api/snapshots/{stored['id']}/{path}?format=csv").text
        assert "'=HYPERLINK" in text and ",=HYPERLINK" not in text and '"=HYPERLINK' not in text
