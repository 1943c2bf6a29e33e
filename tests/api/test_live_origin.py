"""The browser id of a live change: kept with the last change and sent to late joiners (issue 12)."""
from __future__ import annotations

import httpx

from tests.api.test_live import EventReader, live_server  # noqa: F401  (the fixture)


def test_hello_last_carries_the_browser_of_the_change(live_server):  # noqa: F811
    r = httpx.post(f"{live_server.url}/api/datasets/ds1/events",
                   json={"who": "Ana", "action": "drop", "state": {"dropped": ["Q3"]}, "browser": "b-Abc_123"})
    assert r.status_code == 202
    late = EventReader(f"{live_server.url}/api/datasets/ds1/events")
    try:
        last = late.wait_kind("hello", 1)[0]["last"]
        assert last["browser"] == "b-Abc_123"
        assert last["state"] == {"dropped": ["Q3"]}
    finally:
        late.close()
    # a change without a browser id (an older page) is kept with browser null, not the previous one
    r = httpx.post(f"{live_server.url}/api/datasets/ds1/events", json={"action": "restore", "state": {"dropped": []}})
    assert r.status_code == 202
    again = EventReader(f"{live_server.url}/api/datasets/ds1/events")
    try:
        assert again.wait_kind("hello", 1)[0]["last"]["browser"] is None
    finally:
        again.close()


def test_junk_browser_id_is_a_clear_422(live_server):  # noqa: F811
    for junk in ["x" * 65, "<script>", "a b", 42, ["a"], {"a": 1}]:
        r = httpx.post(f"{live_server.url}/api/datasets/ds1/events", json={"action": "drop", "browser": junk})
        assert r.status_code == 422, (junk, r.text)
        err = r.json()["error"]
        assert set(err) == {"code", "message", "details"}
        assert "browser" in err["message"] or "browser" in str(err["details"]), err
    hub = getattr(live_server.app.state, "live", None)  # made on first use
    assert hub is None or hub.last("ds1") is None  # nothing refused was kept
