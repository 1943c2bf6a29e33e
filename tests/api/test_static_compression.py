"""The vendored plotly bundle and compression (issue 14): what is served, compressed, cached, and what is not."""
from __future__ import annotations

import gzip
import hashlib
import re

import pytest

from server.app import PLOTLY_DIR, STATIC_DIR
from tests.conftest import local_client

BUNDLE = PLOTLY_DIR / "plotly-cartesian.min.js"


def test_the_bundle_matches_its_readme_and_version_file():
    readme = (PLOTLY_DIR / "README.txt").read_text()
    version = (PLOTLY_DIR / "VERSION").read_text().strip()
    digest = hashlib.sha256(BUNDLE.read_bytes()).hexdigest()
    assert f"{digest}  plotly-cartesian.min.js" in readme
    assert f"version:   {version}" in readme and "MIT" in readme
    assert f"plotly.js (cartesian - minified) v{version}" in BUNDLE.read_text()[:200]  # the bundle's own banner
    assert "MIT License" in (PLOTLY_DIR / "LICENSE").read_text()
    assert gzip.decompress((PLOTLY_DIR / "plotly-cartesian.min.js.gz").read_bytes()) == BUNDLE.read_bytes()


def test_every_trace_type_the_app_draws_is_in_the_bundle():
    used = set()
    for path in (STATIC_DIR / "js").rglob("*.js"):
        used |= set(re.findall(r'type: "(heatmap|scatter\w*|bar|box|pie|violin|histogram\w*|contour|image|\w+gl|'
                               r'scatterpolar|sunburst|treemap|sankey|table|indicator)"', path.read_text()))
    assert used and used <= {"heatmap", "scatter", "bar"}, used
    readme = (PLOTLY_DIR / "README.txt").read_text()
    for kind in used:
        assert re.search(rf"\b{kind}\b", readme.split("Trace types in this bundle:")[1]), kind


def test_the_page_gets_the_vendored_bundle_gzipped_with_its_version(client):
    r = client.get("/vendor/plotly.min.js", headers={"Accept-Encoding": "gzip"})
    assert r.status_code == 200
    assert r.headers["content-encoding"] == "gzip"
    assert r.content == BUNDLE.read_bytes()  # httpx decodes the gzip body
    assert int(r.headers["content-length"]) < 600_000  # 0.5 MB travel instead of 1.5 MB (4.8 MB before)
    assert r.headers["x-plotly-version"] == (PLOTLY_DIR / "VERSION").read_text().strip()
    assert "max-age=86400" in r.headers["cache-control"]
    assert "Content-Security-Policy" in r.headers
    again = client.get("/vendor/plotly.min.js", headers={"If-None-Match": r.headers["etag"]})
    assert again.status_code == 304 and again.content == b""


def test_a_client_without_gzip_gets_the_plain_bundle(client):
    r = client.get("/vendor/plotly.min.js", headers={"Accept-Encoding": "identity"})
    assert r.status_code == 200 and "content-encoding" not in r.headers
    assert int(r.headers["content-length"]) == BUNDLE.stat().st_size


def test_static_files_are_compressed(client):
    r = client.get("/static/js/main.js", headers={"Accept-Encoding": "gzip"})
    assert r.status_code == 200 and r.headers.get("content-encoding") == "gzip"
    assert r.text == (STATIC_DIR / "js" / "main.js").read_text()


@pytest.mark.parametrize(("peer", "compressed"), [(("192.0.2.7", 5000), True), (("127.0.0.1", 5000), False)])
def test_api_answers_are_compressed_for_other_machines_only(app, peer, compressed):
    with local_client(app, client=peer) as c:
        r = c.get("/api/openapi.json", headers={"Accept-Encoding": "gzip"})
    assert r.status_code == 200 and len(r.content) > 1024
    assert (r.headers.get("content-encoding") == "gzip") is compressed
    assert r.json()["info"]["title"] == "Scalewright"


# text/plain too: the bypass is by the path, whatever Starlette's own list of excluded types holds
@pytest.mark.parametrize("content_type", [b"text/event-stream", b"text/plain"])
def test_the_live_channel_is_never_gzipped(content_type):
    from server.app import Compression

    seen = {}

    async def inner(scope, receive, send):
        await send({"type": "http.response.start", "status": 200,
                    "headers": [(b"content-type", content_type)]})
        await send({"type": "http.response.body", "body": b"event: hello\ndata: {}\n\n" * 100, "more_body": True})
        seen["first"] = True
        await send({"type": "http.response.body", "body": b"", "more_body": False})

    sent = []

    async def send(message):
        sent.append(message)

    async def receive():
        return {"type": "http.request", "body": b"", "more_body": False}

    import asyncio

    scope = {"type": "http", "method": "GET", "path": "/api/datasets/x/events", "client": ("192.0.2.7", 1),
             "headers": [(b"accept-encoding", b"gzip")], "query_string": b""}
    import threading  # a thread of its own: another test's event loop may be running in this one (playwright)

    worker = threading.Thread(target=lambda: asyncio.run(Compression(inner)(scope, receive, send)))
    worker.start()
    worker.join(30)
    start = sent[0]
    assert b"content-encoding" not in dict(start["headers"])
    assert len(sent) == 3 and seen["first"]
    assert sent[1]["body"].startswith(b"event: hello")  # the first event goes out as it was sent, not held back


def test_the_pages_files_have_an_etag_and_a_repeat_gets_304(client):
    r = client.get("/static/js/main.js", headers={"Accept-Encoding": "identity"})
    assert r.status_code == 200 and r.content == (STATIC_DIR / "js" / "main.js").read_bytes()
    assert r.headers["content-type"].startswith("text/javascript") or "javascript" in r.headers["content-type"]
    assert r.headers["cache-control"] == "no-cache"  # revalidated each time: an edited file is seen at once
    again = client.get("/static/js/main.js", headers={"If-None-Match": r.headers["etag"]})
    assert again.status_code == 304 and again.content == b""
    head = client.head("/static/css/app.css", headers={"Accept-Encoding": "identity"})
    size = (STATIC_DIR / "css" / "app.css").stat().st_size
    assert head.status_code == 200 and int(head.headers["content-length"]) == size
    page = client.get("/")
    assert page.status_code == 200 and page.headers["content-type"].startswith("text/html")
    assert "Content-Security-Policy" in page.headers


@pytest.mark.parametrize("path", ["/static/nothing.js", "/static/../server/app.py", "/static/%2e%2e/server/app.py",
                                  "/static/js", "/static/..%2fpyproject.toml"])
def test_a_missing_or_outside_file_is_404_with_its_name(client, path):
    r = client.get(path)
    assert r.status_code == 404
    assert r.json()["error"]["code"] == "not_found"
    assert "import" not in r.text  # no file from outside static/ is ever sent


def test_a_file_changed_on_disk_is_read_again(tmp_path):
    """StaticCache keeps a file in memory and notices an edit (its size or modification time) on the next request."""
    import os

    from starlette.requests import Request

    from server.static_files import StaticCache

    (tmp_path / "a.js").write_text("export const a = 1;\n" * 100)
    cache = StaticCache(tmp_path)

    def get(name, **headers):
        scope = {"type": "http", "method": "GET", "path": f"/static/{name}", "query_string": b"",
                 "headers": [(k.lower().replace("_", "-").encode(), v.encode()) for k, v in headers.items()]}
        return cache.response(Request(scope), name)

    first = get("a.js", accept_encoding="gzip")
    assert first.headers["content-encoding"] == "gzip"
    assert gzip.decompress(first.body) == (tmp_path / "a.js").read_bytes()
    (tmp_path / "a.js").write_text("export const a = 2;\n" * 100)  # same size: the time tells
    os.utime(tmp_path / "a.js", ns=(1, 2_000_000_000))
    second = get("a.js")
    assert second.body == (tmp_path / "a.js").read_bytes() and second.headers["etag"] != first.headers["etag"]
    assert get("../a.js") is None and get("b.js") is None
