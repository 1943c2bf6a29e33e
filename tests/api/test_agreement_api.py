"""POST /api/retest, /api/agreement and /api/agreement/upload: results and every bad input of issue 6 part 4.

Datasets are put in through the app's own store (the same path `POST /api/datasets` takes) and read
back by the app's engine. Expected numbers come from pandas/numpy (matching by ID, Bland-Altman), pingouin
(ICC) and the published Krippendorff (2011) and statsmodels examples.
"""
from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

REF = Path(__file__).resolve().parents[1] / "reference" / "agreement"

W1 = """id,Q1,Q2,Q3,Q4
a,4,5,2,4
b,2,2,4,3
c,5,4,1,5
d,3,3,3,3
e,1,2,5,2
f,4,4,2,5
x,3,3,3,3
"""
W2 = """id,Q1,Q2,Q3,Q4
f,5,4,1,4
e,2,1,4,2
d,3,4,3,3
c,5,5,2,4
b,2,3,5,2
a,4,4,2,5
y,1,1,1,1
z,2,2,2,2
"""
FORM_B = """id,P1,P2
a,4,4
b,2,3
c,5,5
d,3,2
e,1,1
f,5,4
"""


def add(app, csv: str, name: str, **options) -> str:
    options.setdefault("scale_min", 1)
    options.setdefault("scale_max", 5)
    record = app.state.store.add_dataset(name=name, raw=csv.encode(), filename=f"{name}.csv", options=options,
                                         meta={})
    return record["id"]


def totals(csv: str, items: list[str], reverse: tuple[str, ...] = ()) -> pd.Series:
    df = pd.read_csv(io.StringIO(csv), dtype={"id": str}).set_index("id")[items].astype(float)
    for r in reverse:
        df[r] = 1 + 5 - df[r]
    return df.sum(axis=1)


def error(r, status=422) -> dict:
    assert r.status_code == status, r.text
    body = r.json()
    assert set(body["error"]) == {"code", "message", "details"}
    return body["error"]


# ------------------------------------------------------------------------------------------------ retest
def test_retest_matches_by_id_and_reports_who_is_missing(app, client):
    w1, w2 = add(app, W1, "wave1", id_column="id"), add(app, W2, "wave2", id_column="id")
    r = client.post("/api/retest", json={"first": w1, "second": w2, "items": ["Q1", "Q2", "Q4"]})
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["n_matched"] == 6
    assert body["only_first"] == {"count": 1, "ids": ["x"]}
    assert body["only_second"] == {"count": 2, "ids": ["y", "z"]}
    t1, t2 = totals(W1, ["Q1", "Q2", "Q4"]), totals(W2, ["Q1", "Q2", "Q4"])
    ids = ["a", "b", "c", "d", "e", "f"]
    d = (t2[ids] - t1[ids]).to_numpy()
    assert body["mean_difference"] == pytest.approx(d.mean())  # numpy, matched by ID with pandas
    assert body["limits_of_agreement"]["lower"] == pytest.approx(d.mean() - 1.96 * d.std(ddof=1))  # Bland-Altman
    assert body["score_ids"] == ids
    assert body["scores"][0] == [t1["a"], t2["a"]]
    assert set(body["icc"]) >= {"ICC(1,1)", "ICC(A,1)", "ICC(C,1)", "ICC(1,k)", "ICC(A,k)", "ICC(C,k)"}
    assert set(body["icc"]["ICC(A,1)"]) >= {"value", "ci", "f", "df1", "df2", "p"}
    assert len(body["per_item"]) == 3 and body["per_item"][2]["item"] == "Q4"
    for key in ("pearson_r", "spearman_rho", "sem", "mdc95", "interpretation"):
        assert key in body


def test_retest_icc_against_pingouin_and_reverse_scoring_from_snapshot(app, client):
    import pingouin as pg

    w1, w2 = add(app, W1, "wave1", id_column="id"), add(app, W2, "wave2", id_column="id")
    snap = app.state.store.add_snapshot(w1, {"name": "pruned", "items": ["Q1", "Q2", "Q3"],
                                             "settings": {"reverse": ["Q3"]}})
    r = client.post("/api/retest", json={"snapshot": snap["id"], "second": w2})
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["items"] == ["Q1", "Q2", "Q3"] and body["reverse"] == ["Q3"]
    ids = ["a", "b", "c", "d", "e", "f"]
    t1 = totals(W1, ["Q1", "Q2", "Q3"], ("Q3",))[ids]
    t2 = totals(W2, ["Q1", "Q2", "Q3"], ("Q3",))[ids]
    long = pd.DataFrame({"t": ids * 2, "r": [1] * 6 + [2] * 6, "s": np.concatenate([t1, t2])})
    ref = pg.intraclass_corr(long, "t", "r", "s").set_index("Type")
    assert body["icc"]["ICC(A,1)"]["value"] == pytest.approx(ref.loc["ICC(A,1)", "ICC"])  # pingouin
    assert body["icc"]["ICC(C,k)"]["value"] == pytest.approx(ref.loc["ICC(C,k)", "ICC"])  # pingouin


def test_retest_parallel_forms(app, client):
    w1, fb = add(app, W1, "formA", id_column="id"), add(app, FORM_B, "formB", id_column="id")
    r = client.post("/api/retest", json={"first": w1, "second": fb, "items": ["Q1", "Q2"],
                                         "items_second": ["P1", "P2"], "score": "mean"})
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["parallel_forms"] is True and body["n_matched"] == 6
    a = totals(W1, ["Q1", "Q2"])[list("abcdef")] / 2
    b = pd.read_csv(io.StringIO(FORM_B)).set_index("id")[["P1", "P2"]].mean(axis=1)[list("abcdef")]
    assert body["pearson_r"]["value"] == pytest.approx(np.corrcoef(a, b)[0, 1])  # numpy corrcoef
    assert body["per_item"][0]["item_second"] == "P1"


def test_retest_mismatched_items(app, client):
    w1 = add(app, W1, "wave1", id_column="id")
    w2 = add(app, W2.replace("Q4", "Q9"), "wave2", id_column="id")
    e = error(client.post("/api/retest", json={"first": w1, "second": w2}))
    assert e["code"] == "mismatched_items" and e["details"]["items"] == ["Q4"]
    assert "Q4" in e["message"]


def test_retest_no_id_column(app, client):
    w1 = add(app, W1, "wave1", id_column="id")
    no_ids = "Q1,Q2,Q3,Q4\n4,5,2,4\n2,2,4,3\n5,4,1,5\n3,3,3,3\n"
    w2 = add(app, no_ids, "anonymous")
    e = error(client.post("/api/retest", json={"first": w1, "second": w2}))
    assert e["code"] == "no_id_column" and e["details"]["which"] == "second"
    assert "anonymous" in e["message"]


def test_retest_no_overlap(app, client):
    w1 = add(app, W1, "wave1", id_column="id")
    other = W2.replace("\na,", "\nq,").replace("\nb,", "\nr,").replace("\nc,", "\ns,").replace(
        "\nd,", "\nt,").replace("\ne,", "\nu,").replace("\nf,", "\nv,")
    w2 = add(app, other, "wave2", id_column="id")
    e = error(client.post("/api/retest", json={"first": w1, "second": w2}))
    assert e["code"] == "no_overlap" and e["details"]["n_first"] == 7


def test_retest_too_few_matched_unknown_ids_and_snapshot(app, client):
    w1 = add(app, W1, "wave1", id_column="id")
    two = "id,Q1,Q2,Q3,Q4\na,4,5,2,4\nb,2,2,4,3\nq,1,2,3,4\nr,2,3,4,5\n"
    w2 = add(app, two, "wave2", id_column="id")
    e = error(client.post("/api/retest", json={"first": w1, "second": w2}))
    assert e["code"] == "too_few_matched"
    assert error(client.post("/api/retest", json={"first": w1, "second": "nope"}), 404)["code"] == "not_found"
    assert error(client.post("/api/retest", json={"snapshot": "nope", "second": w2}), 404)["code"] == "not_found"
    assert error(client.post("/api/retest", json={"first": w1, "second": w1}))["code"] == "same_dataset"
    assert error(client.post("/api/retest", json={"second": w2}))["code"] == "bad_request"
    assert error(client.post("/api/retest", json={"first": w1, "second": w2, "score": "median"}))[
        "code"] == "bad_request"


# ------------------------------------------------------------------------------------------------ agreement
def krippendorff_rows() -> list[list]:
    df = pd.read_csv(REF / "krippendorff_2011.csv").drop(columns="unit")
    return [[None if pd.isna(v) else float(v) for v in row] for row in df.to_numpy()]


def test_agreement_json_krippendorff_2011(client):
    r = client.post("/api/agreement", json={"ratings": krippendorff_rows(), "level": "ordinal"})
    assert r.status_code == 200, r.text
    body = r.json()
    assert round(body["krippendorff_alpha"]["value"], 3) == 0.815  # Krippendorff (2011), ordinal
    assert body["n_units"] == 12 and body["n_raters"] == 4
    assert body["icc"]["value"] is None and body["icc"]["reason"]


def test_agreement_json_two_raters_statsmodels_table(client):
    table = [[0, 4, 1], [0, 8, 0], [0, 1, 5]]
    rows = [[i, j] for i in range(3) for j in range(3) for _ in range(table[i][j])]
    body = client.post("/api/agreement", json={"ratings": rows, "level": "interval"}).json()
    assert round(body["cohen_kappa"]["value"], 4) == 0.4842  # statsmodels test_inter_rater / SAS printout
    assert round(body["weighted_kappa"]["linear"]["value"], 4) == 0.4701  # statsmodels / SAS printout
    assert body["icc"]["ICC(A,1)"]["value"] is not None
    assert body["cohen_kappa"]["label"] == "moderate"  # Landis & Koch (1977) convention


def test_agreement_upload_with_unit_ids(client):
    csv = pd.read_csv(REF / "krippendorff_2011.csv").to_csv(index=False)
    r = client.post("/api/agreement/upload", files={"file": ("coders.csv", csv.encode(), "text/csv")},
                    data={"level": "interval"})
    assert r.status_code == 200, r.text
    body = r.json()
    assert round(body["krippendorff_alpha"]["value"], 3) == 0.849  # Krippendorff (2011), interval
    assert body["raters"] == ["A", "B", "C", "D"] and body["unit_ids"][:2] == ["1", "2"]


def test_agreement_upload_detects_text_unit_labels(client):
    csv = "log,amira,bo\nL01,1,2\nL02,3,3\nL03,2,2\nL04,4,4\n"
    body = client.post("/api/agreement/upload", files={"file": ("c.csv", csv.encode(), "text/csv")},
                       data={"level": "ordinal"}).json()
    assert body["unit_ids"] == ["L01", "L02", "L03", "L04"] and body["raters"] == ["amira", "bo"]
    assert body["percent_agreement"]["value"] == pytest.approx(0.75)  # common practice: 3 of 4
    forced = client.post("/api/agreement/upload", files={"file": ("c.csv", csv.encode(), "text/csv")},
                         data={"level": "nominal", "id_column": "no"}).json()
    assert forced["n_raters"] == 3 and forced["unit_ids"] is None


def test_agreement_upload_without_ids_semicolons(client):
    csv = "r1;r2\nyes;yes\nno;yes\nno;no\nyes;yes\n"
    body = client.post("/api/agreement/upload", files={"file": ("c.csv", csv.encode(), "text/csv")},
                       data={"level": "nominal"}).json()
    assert body["unit_ids"] is None and body["n_units"] == 4
    assert body["percent_agreement"]["value"] == pytest.approx(0.75)  # common practice: 3 of 4


@pytest.mark.parametrize("ratings,level,code", [
    ([[1], [2], [3]], "interval", "single_rater"),              # a single rater
    ([[2, 2], [2, 2], [2, 2]], "ordinal", "no_variation"),        # all units identical
    ([[1, 2], [3, "four"]], "interval", "not_numeric"),           # text in an interval rating
    ([[1, 2], [3, 4, 5]], "interval", "mismatched_columns"),      # mismatched columns
    ([[1, 2], [3, 4]], "cardinal", "bad_level"),
])
def test_agreement_bad_input(client, ratings, level, code):
    e = error(client.post("/api/agreement", json={"ratings": ratings, "level": level}))
    assert e["code"] == code
    assert e["message"]


def test_agreement_text_error_names_cell(client):
    e = error(client.post("/api/agreement", json={"ratings": [[1, 2], [3, "four"]], "level": "interval"}))
    assert e["details"] == {"row": 2, "column": 2, "value": "four"}


def test_agreement_upload_bad_input_names_file_and_rater(client):
    csv = "unit,ann,bob\nu1,1,2\nu2,3,lots\n"
    e = error(client.post("/api/agreement/upload", files={"file": ("c.csv", csv.encode(), "text/csv")},
                          data={"level": "interval"}))
    assert e["code"] == "not_numeric" and e["details"]["rater"] == "bob"
    assert "'c.csv'" in e["message"] and "u2" in e["message"]
    e = error(client.post("/api/agreement/upload", files={"file": ("c.csv", b"unit,ann\nu1,1\nu2,2\n", "text/csv")},
                          data={"level": "interval"}))
    assert e["code"] == "single_rater"
    e = error(client.post("/api/agreement/upload", files={"file": ("c.csv", b"   ", "text/csv")},
                          data={"level": "interval"}))
    assert e["code"] == "empty_file"
