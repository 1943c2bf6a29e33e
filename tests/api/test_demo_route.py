"""POST /api/demo opens the invented demo from the Start page, once."""
from server.demo import DEMO_NAME, DEMO_RETEST_NAME


def test_demo_route_adds_both_waves_once(client):
    first = client.post("/api/demo")
    assert first.status_code == 200 and first.json()["name"] == DEMO_NAME
    assert len(first.json()["items"]) == 24  # demo_data/README.md: 24 statements
    again = client.post("/api/demo")
    assert again.json()["id"] == first.json()["id"]
    names = sorted(d["name"] for d in client.get("/api/datasets").json())
    assert names == sorted([DEMO_NAME, DEMO_RETEST_NAME])
