"""POST /api/retest with ``by_construct: true``: one stability block per codebook construct (issue 11, item 5).

Sources: demo_data/README.md (three constructs welcome/contribution/ownership of eight items each, C3
reverse-keyed, 144 wave-1 respondents came back); pingouin 0.7 ``intraclass_corr`` on construct sum scores
computed with pandas from the demo CSV files as the outside reference.
"""
from __future__ import annotations

import pandas as pd
import pingouin as pg
import pytest

from server.demo import DEMO_DIR, ensure_demo_loaded
from tests.api.test_agreement_api import FORM_B, W1, add, error

CONSTRUCTS = {"welcome": [f"W{i}" for i in range(1, 9)], "contribution": [f"C{i}" for i in range(1, 9)],
              "ownership": [f"O{i}" for i in range(1, 9)]}  # demo_data/README.md


@pytest.fixture
def waves(app, client):
    first = ensure_demo_loaded(app.state.store)
    second = next(d["id"] for d in client.get("/api/datasets").json() if d["id"] != first)
    return first, second


def retest(client, **body) -> dict:
    r = client.post("/api/retest", json=body)
    assert r.status_code == 200, r.text
    return r.json()


def test_each_block_equals_a_retest_of_that_constructs_items(client, waves):
    first, second = waves
    whole = retest(client, first=first, second=second, by_construct=True)
    plain = retest(client, first=first, second=second)
    assert plain["by_construct"] is None  # not asked
    assert {k: v for k, v in whole.items() if k != "by_construct"} == {k: v for k, v in plain.items()
                                                                        if k != "by_construct"}
    blocks = whole["by_construct"]
    assert list(blocks) == list(CONSTRUCTS)  # the first wave's codebook, in item order
    for construct, items in CONSTRUCTS.items():
        alone = retest(client, first=first, second=second, items=items)
        block = blocks[construct]
        assert tuple(block["items"]) == tuple(items)
        for key, value in block.items():
            if key != "warnings":
                assert value == alone[key], (construct, key)
        # the block keeps its own notes; who came back is said once, in the whole answer
        assert block["warnings"] == [w for w in alone["warnings"] if w["code"] != "retest_unmatched"]
        assert set(block) | {"first", "second", "snapshot", "parallel_forms", "reverse", "reverse_second",
                             "n_matched", "only_first", "only_second", "by_construct"} == set(alone)


def test_contribution_block_icc_against_pingouin_on_sum_scores(client, waves):
    first, second = waves
    block = retest(client, first=first, second=second, by_construct=True)["by_construct"]["contribution"]
    items = CONSTRUCTS["contribution"]
    book = pd.read_csv(DEMO_DIR / "workshop_codebook.csv").set_index("item")

    def sums(name: str) -> pd.Series:
        df = pd.read_csv(DEMO_DIR / name, dtype={"respondent": str}).set_index("respondent")[items].astype(float)
        df = df.mask(df == -9)  # demo_data/README.md: skipped answers are -9
        for item in items:
            if book.loc[item, "reverse"] == 1:  # C3 is reverse-keyed (README)
                df[item] = book.loc[item, "min"] + book.loc[item, "max"] - df[item]
        return df.sum(axis=1, min_count=len(items))

    both = pd.concat([sums("workshop_responses.csv"), sums("workshop_retest.csv")], axis=1, join="inner").dropna()
    assert block["n"] == len(both)
    long = pd.DataFrame({"id": list(both.index) * 2, "wave": [1] * len(both) + [2] * len(both),
                         "score": list(both[0]) + list(both[1])})
    ref = pg.intraclass_corr(long, targets="id", raters="wave", ratings="score").set_index("Type")
    for form in ("ICC(1,1)", "ICC(A,1)", "ICC(C,1)"):
        assert block["icc"][form]["value"] == pytest.approx(ref.loc[form, "ICC"], abs=1e-9)  # pingouin
    d = (both[1] - both[0]).to_numpy()
    assert block["mean_difference"] == pytest.approx(d.mean())  # numpy, Bland & Altman 1986


def test_one_item_construct_gets_a_block_with_a_note(client, waves):
    first, second = waves
    body = retest(client, first=first, second=second, items=["W1", "C1", "C2", "O1", "O2"], by_construct=True)
    blocks = body["by_construct"]
    assert list(blocks) == ["welcome", "contribution", "ownership"]
    welcome = blocks["welcome"]
    assert welcome["items"] == ["W1"]
    assert [w["items"] for w in welcome["warnings"] if w["code"] == "construct_one_item"] == [["W1"]]
    # the total of one item is that item
    assert welcome["icc"]["ICC(A,1)"]["value"] == pytest.approx(welcome["per_item"][0]["icc"]["ICC(A,1)"]["value"])
    assert not any(w["code"] == "construct_one_item" for w in blocks["contribution"]["warnings"])


def test_items_without_construct_are_in_no_block(app, client):
    W2 = W1.replace("x,3,3,3,3", "e2,3,3,3,3")  # the same respondents; wave 2 of the small test table
    w1, w2 = add(app, W1, "wave1", id_column="id"), add(app, W2, "wave2", id_column="id")
    body = retest(client, first=w1, second=w2, by_construct=True)
    assert body["by_construct"] == {}
    assert [w["code"] for w in body["warnings"]].count("no_constructs") == 1


def test_unequal_parallel_forms_are_refused_by_construct(app, client):
    w1, fb = add(app, W1, "formA", id_column="id"), add(app, FORM_B, "formB", id_column="id")
    e = error(client.post("/api/retest", json={"first": w1, "second": fb, "items": ["Q1", "Q2", "Q3"],
                                               "items_second": ["P1", "P2"], "by_construct": True}))
    assert e["code"] == "by_construct_unequal_forms" and e["details"] == {"n_first": 3, "n_second": 2}
    # without by_construct the same comparison still answers
    assert client.post("/api/retest", json={"first": w1, "second": fb, "items": ["Q1", "Q2", "Q3"],
                                            "items_second": ["P1", "P2"]}).status_code == 200


def test_bad_by_construct_value_is_a_4xx(client, waves):
    first, second = waves
    e = error(client.post("/api/retest", json={"first": first, "second": second, "by_construct": "maybe"}))
    assert "by_construct" in str(e["details"])


def test_a_snapshot_keeps_the_per_construct_blocks(client, waves):
    first, second = waves
    items = [i for group in CONSTRUCTS.values() for i in group if i != "C7"]
    r = client.post(f"/api/datasets/{first}/snapshots",
                    json={"name": "per construct", "items": items,
                          "stability": {"retest": {"second": second, "by_construct": True}}})
    assert r.status_code == 201, r.text
    stored = r.json()["stability"]["retest"]
    live = retest(client, first=first, second=second, items=items, by_construct=True)
    assert stored["by_construct"]["contribution"]["items"] == [i for i in CONSTRUCTS["contribution"] if i != "C7"]
    assert stored["by_construct"] == live["by_construct"]
