"""A snapshot can keep its stability and agreement results, and the report shows them (issue 6)."""
from __future__ import annotations

import pandas as pd
import pingouin as pg
import pytest

from server.demo import DEMO_RATINGS, ensure_demo_loaded


@pytest.fixture
def waves(app, client):
    first = ensure_demo_loaded(app.state.store)
    second = next(d["id"] for d in client.get("/api/datasets").json() if d["id"] != first)
    return first, second


def test_snapshot_keeps_retest_and_agreement_and_the_report_shows_them(client, waves):
    first, second = waves
    items = [i["name"] for i in client.get(f"/api/datasets/{first}").json()["items"] if i["name"] != "C7"]
    table = pd.read_csv(DEMO_RATINGS, index_col=0)
    ratings = [[None if pd.isna(v) else float(v) for v in row] for row in table.to_numpy()]
    body = {"name": "With stability <i>", "author": "Bo", "items": items,
            "removed": [{"item": "C7", "reason": "weak", "code": "weak"}],
            "stability": {"retest": {"second": second}, "agreement": {"ratings": ratings, "level": "ordinal"}}}
    r = client.post(f"/api/datasets/{first}/snapshots", json=body)
    assert r.status_code == 201, r.text
    snap = r.json()
    live = client.post("/api/retest", json={"first": first, "second": second, "items": items}).json()
    stored = snap["stability"]["retest"]
    assert stored["icc"]["ICC(A,1)"]["value"] == live["icc"]["ICC(A,1)"]["value"]  # same code path as the route
    assert stored["n_matched"] == live["n_matched"] == 144  # demo_data/README.md: 144 came back

    # the stored ICC(A,1) agrees with pingouin's ICC2 on the matched total scores
    long = pd.DataFrame([(i, w, s) for i, pair in enumerate(stored["scores"]) for w, s in enumerate(pair)],
                        columns=["id", "wave", "score"])
    ref = pg.intraclass_corr(long, targets="id", raters="wave", ratings="score").set_index("Type")
    assert stored["icc"]["ICC(A,1)"]["value"] == pytest.approx(ref.loc["ICC(A,1)", "ICC"], abs=1e-9)  # pingouin

    html = client.get(f"/api/snapshots/{snap['id']}/report").text
    assert "Stability and agreement" in html and "Krippendorff" in html
    assert f"{stored['icc']['ICC(A,1)']['value']:.3f}".removeprefix("0") in html  # written .812, as the dashboard does
    assert "With stability &lt;i&gt;" in html


def test_snapshot_stability_errors_are_4xx(client, waves):
    first, _ = waves
    items = [i["name"] for i in client.get(f"/api/datasets/{first}").json()["items"]]
    r = client.post(f"/api/datasets/{first}/snapshots",
                    json={"name": "x", "items": items, "stability": {"retest": {"second": first}}})
    assert r.status_code == 422 and r.json()["error"]["code"] == "same_dataset"
    r = client.post(f"/api/datasets/{first}/snapshots",
                    json={"name": "x", "items": items, "stability": {"agreement": {"ratings": [[1], [2]],
                                                                                   "level": "ordinal"}}})
    assert r.status_code == 422 and r.json()["error"]["code"] == "single_rater"
