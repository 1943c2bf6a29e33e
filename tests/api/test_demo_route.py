"""POST /api/demo opens the invented demo from the Start page, once."""
import pytest

from server.demo import DEMO_NAME, DEMO_RETEST_NAME


def test_demo_route_adds_both_waves_once(client):
    first = client.post("/api/demo")
    assert first.status_code == 200 and first.json()["name"] == DEMO_NAME
    assert len(first.json()["items"]) == 24  # demo_data/README.md: 24 statements
    again = client.post("/api/demo")
    assert again.json()["id"] == first.json()["id"]
    names = sorted(d["name"] for d in client.get("/api/datasets").json())
    assert names == sorted([DEMO_NAME, DEMO_RETEST_NAME])


def test_demo_rater_table_is_served_and_analysable(client):
    import io

    import krippendorff
    import pandas as pd

    text = client.get("/api/demo/ratings").text
    table = pd.read_csv(io.StringIO(text), index_col=0)
    assert table.shape == (40, 3)  # demo_data/README.md: 3 coordinators, 40 logs
    ratings = [[None if pd.isna(v) else float(v) for v in row] for row in table.to_numpy()]
    out = client.post("/api/agreement", json={"ratings": ratings, "level": "ordinal"}).json()
    ref = krippendorff.alpha(reliability_data=table.T.to_numpy(float), level_of_measurement="ordinal")
    assert out["krippendorff_alpha"]["value"] == pytest.approx(ref, abs=1e-9)  # krippendorff package
