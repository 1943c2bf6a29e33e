"""The access token: required when the server is shared beyond this machine, not on 127.0.0.1."""
from __future__ import annotations

import pytest

from server.app import create_app
from tests.conftest import local_client


@pytest.fixture
def shared(make_settings):
    with local_client(create_app(make_settings(host="0.0.0.0", token="t"))) as c:
        yield c


@pytest.mark.parametrize("path", ["/", "/api/health", "/api/datasets", "/static/js/main.js",
                                  "/vendor/plotly.min.js"])
def test_without_the_token_a_shared_server_answers_401(shared, path):
    r = shared.get(path)
    assert r.status_code == 401
    assert r.json()["error"]["code"] == "unauthorized"


def test_a_wrong_token_is_refused(shared):
    assert shared.get("/api/health", headers={"X-Scalewright-Token": "nope"}).status_code == 401
    assert shared.get("/api/health", headers={"Authorization": "Bearer nope"}).status_code == 401
    assert shared.get("/api/health?token=tt").status_code == 401


def test_with_the_token_it_works(shared):
    assert shared.get("/api/health", headers={"X-Scalewright-Token": "t"}).status_code == 200
    assert shared.get("/api/health", headers={"Authorization": "Bearer t"}).status_code == 200
    r = shared.get("/?token=t")
    assert r.status_code == 200
    assert "scalewright_token" in r.headers.get("set-cookie", "")
    # the cookie set by ?token= lets the page's own requests through (scripts, API calls)
    assert shared.get("/api/health").status_code == 200
    assert shared.get("/static/js/main.js").status_code == 200


def test_live_events_need_the_token_too(shared):
    r = shared.post("/api/datasets/x/events", json={"action": "drop"})
    assert r.status_code == 401


def test_a_generated_token_when_none_is_given(make_settings):
    s = make_settings(host="0.0.0.0")
    assert s.token and len(s.token) >= 16
    with local_client(create_app(s)) as c:
        assert c.get("/api/health").status_code == 401
        assert c.get("/api/health", headers={"X-Scalewright-Token": s.token}).status_code == 200


def test_on_localhost_no_token_is_needed(make_settings):
    s = make_settings(host="127.0.0.1")
    assert s.token is None
    with local_client(create_app(s)) as c:
        assert c.get("/api/health").status_code == 200
        assert c.get("/").status_code == 200


def test_the_pages_files_are_served_without_looking_anybody_up(make_settings, monkeypatch):
    """Laptop mode without a meeting token: the page's files need no people lookup (one query each before);
    the API still asks, and a shared server (meeting token) asks for every path."""
    from server import people

    asked = []
    real = people.people_defined
    monkeypatch.setattr(people, "people_defined", lambda store: asked.append(1) or real(store))
    with local_client(create_app(make_settings())) as c:
        for path in ("/", "/static/js/main.js", "/vendor/plotly.min.js"):
            assert c.get(path).status_code == 200
        assert asked == []
        assert c.get("/api/health").status_code == 200
        assert asked == [1]
    with local_client(create_app(make_settings(host="0.0.0.0", token="t"))) as c:
        asked.clear()
        assert c.get("/static/js/main.js", headers={"X-Scalewright-Token": "t"}).status_code == 200
        assert asked == [1]
