def test_health(client):
    r = client.get("/api/health")
    assert r.status_code == 200
    assert r.json()["status"] == "ok"


def test_error_shape_for_unknown_route(client):
    r = client.get("/api/no-such-thing")
    assert r.status_code == 404
    body = r.json()
    assert set(body["error"]) == {"code", "message", "details"}


def test_plotly_is_served_locally(client):
    r = client.get("/vendor/plotly.min.js")
    assert r.status_code == 200
    assert len(r.content) > 100_000
    assert "Content-Security-Policy" in r.headers


def test_no_page_loads_anything_from_outside(client):
    import re

    for path in ("/", "/api/docs", "/api/redoc"):
        r = client.get(path)
        if r.status_code == 200:
            assert not re.search(r"""(src|href)=["']?(https?:)?//""", r.text), path
    assert client.get("/api/docs").status_code == 404  # FastAPI's Swagger page would load a CDN script
    assert client.get("/api/openapi.json").status_code == 200
