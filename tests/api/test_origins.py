"""Host and Origin checks: no answer to a rebound name, no change sent by another web site."""
from __future__ import annotations

from pathlib import Path

import httpx
import pytest

from server.api.origins import host_is_allowed, is_cross_origin, split_host
from server.app import create_app
from tests.conftest import local_client
from tests.serverproc import free_port, lan_address, running_server

ROOT = Path(__file__).resolve().parents[2]
CSV = b"id,Q1,Q2,Q3\nr1,1,2,3\nr2,2,3,4\nr3,3,4,5\nr4,4,5,1\nr5,5,1,2\n"


def _upload(client, **headers):
    return client.post("/api/datasets", files={"file": ("r.csv", CSV, "text/csv")}, data={"id_column": "id"},
                       headers=headers)


def _error(response, status: int, code: str) -> dict:
    assert response.status_code == status, response.text
    body = response.json()
    assert body["error"]["code"] == code
    return body["error"]


@pytest.mark.parametrize("path", ["/api/datasets", "/api/health", "/"])
def test_a_foreign_host_gets_421(client, path):
    error = _error(client.get(path, headers={"Host": "attacker.example:8765"}), 421, "misdirected_host")
    assert "attacker.example" in error["message"] and "allowed_hosts" in error["message"]
    assert error["details"] == {"host": "attacker.example:8765"}


def test_the_raw_responses_export_is_refused_to_a_foreign_host(client):
    dataset = _upload(client).json()
    snap = client.post(f"/api/datasets/{dataset['id']}/snapshots",
                       json={"name": "s", "items": ["Q1", "Q2", "Q3"], "settings": {"pa_iterations": 10}})
    assert snap.status_code == 201, snap.text
    url = f"/api/snapshots/{snap.json()['id']}/responses"
    assert client.get(url).status_code == 200
    r = client.get(url, headers={"Host": "attacker.example:8765"})
    _error(r, 421, "misdirected_host")
    assert "Q1" not in r.text


@pytest.mark.parametrize("host", ["localhost:8765", "127.0.0.1:8765", "[::1]:8765", "LOCALHOST", "127.0.0.1",
                                  "localhost.:8765"])
def test_local_names_are_fine(client, host):
    assert client.get("/api/health", headers={"Host": host}).status_code == 200


@pytest.mark.parametrize("host", ["127.0.0.1:9999", "localhost:80", "127.0.0.1:", "127.0.0.1:x",
                                  "127.0.0.1.attacker.example:8765", "localhost@attacker.example", ""])
def test_a_wrong_port_or_a_malformed_host_is_refused(client, host):
    _error(client.get("/api/health", headers={"Host": host}), 421, "misdirected_host")


def test_allowed_hosts_adds_names(make_settings):
    s = make_settings(allowed_hosts="scales.lab.example, 10.1.2.3")
    with local_client(create_app(s)) as c:
        assert c.get("/api/health", headers={"Host": "scales.lab.example:8765"}).status_code == 200
        assert c.get("/api/health", headers={"Host": "10.1.2.3:8765"}).status_code == 200
        _error(c.get("/api/health", headers={"Host": "other.lab.example:8765"}), 421, "misdirected_host")


def test_the_bound_address_is_accepted(make_settings):
    s = make_settings(host="192.0.2.7", token="t")
    with local_client(create_app(s)) as c:
        ok = c.get("/api/health", headers={"Host": "192.0.2.7:8765", "X-Scalewright-Token": "t"})
        assert ok.status_code == 200
        _error(c.get("/api/health", headers={"Host": "192.0.2.8:8765", "X-Scalewright-Token": "t"}),
               421, "misdirected_host")


def test_the_host_check_comes_before_the_token(make_settings):
    s = make_settings(host="0.0.0.0", token="t")
    with local_client(create_app(s)) as c:
        _error(c.get("/api/datasets?token=t", headers={"Host": "attacker.example:8765"}), 421, "misdirected_host")
        _error(c.get("/api/datasets"), 401, "unauthorized")
        assert c.get("/api/datasets?token=t").status_code == 200


# ---- the pure decision, for addresses a TestClient cannot present

def test_split_host():
    assert split_host("[::1]:8765") == ("::1", 8765)
    assert split_host("Example.ORG.") == ("example.org", None)
    assert split_host("10.0.0.5:80") == ("10.0.0.5", 80)
    for bad in ("", "a b", "[::1", "[::1]x", "h:0", "h:70000", "a/b", "u@h"):
        assert split_host(bad) is None, bad


def test_a_wildcard_bind_accepts_the_address_the_connection_arrived_on():
    # Bound to every interface, a LAN page at http://192.168.1.20:8765/ reaches the server through the
    # socket whose local end is 192.168.1.20: accepted. A rebinding page names its own host: refused.
    lan = ("192.168.1.20", 8765)
    assert host_is_allowed("192.168.1.20:8765", bound="0.0.0.0", port=8765, local=lan)
    assert host_is_allowed("192.168.1.20", bound="::", port=8765, local=lan)
    assert not host_is_allowed("attacker.example:8765", bound="0.0.0.0", port=8765, local=lan)
    assert not host_is_allowed("192.168.1.21:8765", bound="0.0.0.0", port=8765, local=lan)
    assert not host_is_allowed("192.168.1.20:8765", bound="127.0.0.1", port=8765, local=lan)
    # a local end that is a name (only a test client does that) is not taken as an address
    assert not host_is_allowed("testserver", bound="0.0.0.0", port=80, local=("testserver", 80))
    # the actual port of the connection counts as the server's port (a server started on port 0)
    assert host_is_allowed("localhost:40001", bound="127.0.0.1", port=8765, local=("127.0.0.1", 40001))
    assert not host_is_allowed("localhost:40002", bound="127.0.0.1", port=8765, local=("127.0.0.1", 40001))
    assert host_is_allowed("[fe80::1]:8765", bound="::", port=8765, local=("fe80::1", 8765))


def test_is_cross_origin():
    own = {"host": "127.0.0.1:8765"}
    assert not is_cross_origin("POST", own, "http")
    assert not is_cross_origin("POST", {**own, "origin": "http://127.0.0.1:8765"}, "http")
    assert not is_cross_origin("DELETE", {**own, "sec-fetch-site": "same-origin"}, "http")
    assert not is_cross_origin("POST", {**own, "sec-fetch-site": "same-site"}, "http")
    assert not is_cross_origin("GET", {**own, "origin": "https://attacker.example"}, "http")
    for origin in ("null", "https://attacker.example", "http://127.0.0.1:9999", "https://127.0.0.1:8765",
                   "http://localhost:8765", "http://127.0.0.1:8765/x", "not a url"):
        assert is_cross_origin("POST", {**own, "origin": origin}, "http"), origin
    assert is_cross_origin("PUT", {**own, "sec-fetch-site": "cross-site"}, "http")
    assert not is_cross_origin("POST", {"host": "example.org", "origin": "http://example.org:80"}, "http")


# ---- state changes from other web sites

def test_same_origin_upload_works(client):
    r = _upload(client, Origin="http://127.0.0.1:8765", **{"Sec-Fetch-Site": "same-origin"})
    assert r.status_code == 201, r.text
    assert _upload(client).status_code == 201  # no Origin: curl, scripts


@pytest.mark.parametrize("headers", [{"Origin": "https://attacker.example"},
                                     {"Origin": "http://127.0.0.1:9999"},
                                     {"Origin": "null"},
                                     {"Sec-Fetch-Site": "cross-site"},
                                     {"Origin": "http://127.0.0.1:8765", "Sec-Fetch-Site": "cross-site"}])
def test_cross_origin_upload_gets_403_and_stores_nothing(client, headers):
    error = _error(_upload(client, **headers), 403, "cross_origin")
    assert "another web site" in error["message"]
    assert client.get("/api/datasets").json() == []


def test_cross_origin_delete_and_snapshot_are_refused(client):
    dataset = _upload(client).json()
    evil = {"Origin": "https://attacker.example"}
    _error(client.delete(f"/api/datasets/{dataset['id']}", headers=evil), 403, "cross_origin")
    _error(client.post(f"/api/datasets/{dataset['id']}/snapshots", headers=evil,
                       json={"name": "s", "items": ["Q1", "Q2"]}), 403, "cross_origin")
    assert client.get(f"/api/datasets/{dataset['id']}").status_code == 200
    # reading is not a change: a GET with a foreign Origin is answered (the browser keeps it from the page)
    assert client.get("/api/datasets", headers=evil).status_code == 200


# ---- a real server bound to every interface, reached on this machine's own non-loopback address

@pytest.fixture
def wildcard_server(tmp_path):
    """``python -m server serve --host 0.0.0.0 --token t`` on a free port; yields the port."""
    port = free_port()
    with running_server(tmp_path / "d", "--host", "0.0.0.0", port=port, token="t"):
        yield port


@pytest.mark.slow
def test_a_wildcard_server_answers_its_lan_address_with_the_token(wildcard_server):
    port = wildcard_server
    lan = lan_address()
    if lan is None:
        pytest.skip("This machine has no non-loopback IPv4 address to reach the server on.")
    base = f"http://{lan}:{port}"
    with httpx.Client(base_url=base, timeout=30, trust_env=False) as c:
        assert c.get("/api/health").status_code == 401
        assert c.get("/api/health?token=t").status_code == 200
        r = c.post("/api/datasets?token=t", files={"file": ("r.csv", CSV, "text/csv")},
                   headers={"Origin": base, "Sec-Fetch-Site": "same-origin"})
        assert r.status_code == 201, r.text
        foreign = c.get("/api/datasets?token=t", headers={"Host": f"attacker.example:{port}"})
        assert foreign.status_code == 421
        assert foreign.json()["error"]["code"] == "misdirected_host"
        cross = c.post("/api/datasets?token=t", files={"file": ("r.csv", CSV, "text/csv")},
                       headers={"Origin": "http://attacker.example"})
        assert cross.status_code == 403
