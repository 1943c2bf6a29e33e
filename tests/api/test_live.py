"""Live collaboration over server-sent events (server/api/routes_live.py).

The relay tests run a real uvicorn server in a thread (Starlette's TestClient buffers whole
responses, so it cannot read an endless stream); the shutdown test runs the real CLI in a
subprocess and stops it with SIGINT while a stream is open.
"""
from __future__ import annotations

import contextlib
import json
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path
from types import SimpleNamespace

import httpx
import pytest
import uvicorn

from server.app import create_app

ROOT = Path(__file__).resolve().parents[2]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class StubStore:
    """Only what the live routes use: get_dataset(id) -> record | None."""

    def __init__(self, real, known):
        self.real, self.known = real, set(known)

    def get_dataset(self, ident):
        return {"id": ident} if ident in self.known else None

    def __getattr__(self, name):
        return getattr(self.real, name)


@pytest.fixture
def live_server(make_settings):
    app = create_app(make_settings())
    app.state.store = StubStore(app.state.store, {"ds1", "ds2"})
    port = free_port()
    server = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning"))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.time() + 30  # the machine is shared; allow a slow start
    while not server.started and time.time() < deadline:
        time.sleep(0.02)
    assert server.started
    yield SimpleNamespace(url=f"http://127.0.0.1:{port}", app=app, server=server)
    hub = getattr(app.state, "live", None)
    if hub is not None:  # end open streams so uvicorn can stop
        hub.closing = True
    server.should_exit = True
    thread.join(timeout=10)


class EventReader:
    """Reads SSE events over a plain socket in a background thread; close() hangs up for real."""

    def __init__(self, url: str):
        self.events: list[tuple[str, dict]] = []
        self.done = threading.Event()
        self.status = None
        self.headers: dict[str, str] = {}
        u = httpx.URL(url)
        self._sock = socket.create_connection((u.host, u.port), timeout=10)
        self._sock.sendall(f"GET {u.raw_path.decode()} HTTP/1.1\r\nHost: {u.host}\r\n"
                           "Accept: text/event-stream\r\n\r\n".encode())
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()

    def _run(self):
        try:
            self._sock.settimeout(None)
            f = self._sock.makefile("rb")
            self.status = int(f.readline().split()[1])
            while (line := f.readline().decode().rstrip("\r\n")):
                k, _, v = line.partition(":")
                self.headers[k.strip().lower()] = v.strip()
            event, data = None, []
            for raw in f:
                line = raw.decode().rstrip("\r\n")
                if line.startswith("event:"):
                    event = line[6:].strip()
                elif line.startswith("data:"):
                    data.append(line[5:].strip())
                elif line == "" and data:
                    self.events.append((event, json.loads("\n".join(data))))
                    event, data = None, []
        except (OSError, ValueError, IndexError):
            pass
        finally:
            self.done.set()

    def wait_for(self, n: int, timeout: float = 5.0) -> list[tuple[str, dict]]:
        deadline = time.time() + timeout
        while len(self.events) < n and time.time() < deadline:
            time.sleep(0.02)
        return list(self.events)

    def of(self, kind: str) -> list[dict]:
        return [data for event, data in self.events if event == kind]

    def wait_kind(self, kind: str, n: int, timeout: float = 5.0) -> list[dict]:
        deadline = time.time() + timeout
        while len(self.of(kind)) < n and time.time() < deadline:
            time.sleep(0.02)
        return self.of(kind)

    def close(self):
        with contextlib.suppress(OSError):
            self._sock.shutdown(socket.SHUT_RDWR)
        self._sock.close()


def test_stream_says_hello_with_its_listener_id(live_server):
    reader = EventReader(f"{live_server.url}/api/datasets/ds1/events")
    try:
        events = reader.wait_for(1)
        assert reader.status == 200
        assert reader.headers["content-type"].startswith("text/event-stream")
        assert events[0][0] == "hello"
        assert events[0][1]["dataset"] == "ds1"
        assert len(events[0][1]["listener"]) >= 8
    finally:
        reader.close()


def test_change_reaches_other_pages_of_the_same_dataset_only(live_server):
    a = EventReader(f"{live_server.url}/api/datasets/ds1/events")
    a_id = a.wait_kind("hello", 1)[0]["listener"]
    b = EventReader(f"{live_server.url}/api/datasets/ds1/events")
    other = EventReader(f"{live_server.url}/api/datasets/ds2/events")
    try:
        b.wait_kind("hello", 1)
        other.wait_kind("hello", 1)
        state = {"items": ["Q1", "Q2", "Q4"], "settings": {"rotation": "oblimin"}}
        r = httpx.post(f"{live_server.url}/api/datasets/ds1/events",
                       json={"who": "Ana", "action": "drop", "state": state, "sender": a_id, "detail": "Q3"})
        assert r.status_code == 202
        assert r.json()["delivered"] == 1  # b only: the sender is skipped
        assert r.json()["listeners"] == 2
        got = b.wait_kind("change", 1)
        msg = got[0]
        assert (msg["who"], msg["action"], msg["state"], msg["sender"]) == ("Ana", "drop", state, a_id)
        assert msg["seq"] == r.json()["seq"]
        time.sleep(0.3)
        assert a.of("change") == []  # no echo to the sender
        assert other.of("change") == []  # another dataset hears nothing
    finally:
        for reader in (a, b, other):
            reader.close()


def test_presence_and_the_last_change_for_late_joiners(live_server):
    a = EventReader(f"{live_server.url}/api/datasets/ds1/events")
    try:
        hello = a.wait_kind("hello", 1)[0]
        assert hello["peers"] == 0 and hello["last"] is None
        b = EventReader(f"{live_server.url}/api/datasets/ds1/events")
        assert a.wait_kind("presence", 1)[0]["listeners"] == 2  # b joined
        b.wait_kind("hello", 1)
        r = httpx.post(f"{live_server.url}/api/datasets/ds1/events",
                       json={"who": "Bo", "action": "drop", "state": {"dropped": ["Q3"]}})
        assert r.status_code == 202
        b.close()
        assert a.wait_kind("presence", 2)[-1]["listeners"] == 1  # b left
        late = EventReader(f"{live_server.url}/api/datasets/ds1/events")
        try:
            last = late.wait_kind("hello", 1)[0]["last"]
            assert (last["who"], last["action"], last["state"]) == ("Bo", "drop", {"dropped": ["Q3"]})
        finally:
            late.close()
    finally:
        a.close()


def test_closed_page_is_forgotten(live_server):
    a = EventReader(f"{live_server.url}/api/datasets/ds1/events")
    a.wait_for(1)
    hub = live_server.app.state.live
    assert hub.count("ds1") == 1
    a.close()
    deadline = time.time() + 5
    while hub.count("ds1") and time.time() < deadline:
        time.sleep(0.05)
    assert hub.count("ds1") == 0
    r = httpx.post(f"{live_server.url}/api/datasets/ds1/events", json={"action": "restore"})
    assert r.json()["delivered"] == 0


def test_unknown_dataset_and_bad_messages_are_refused(live_server):
    r = httpx.get(f"{live_server.url}/api/datasets/nope/events")
    assert r.status_code == 404
    assert r.json()["error"]["code"] == "not_found"
    r = httpx.post(f"{live_server.url}/api/datasets/nope/events", json={"action": "drop"})
    assert r.status_code == 404
    r = httpx.post(f"{live_server.url}/api/datasets/ds1/events", json={"who": "Ana"})
    assert r.status_code == 422  # no action
    assert set(r.json()["error"]) == {"code", "message", "details"}
    big = {"x": "y" * 70_000}
    r = httpx.post(f"{live_server.url}/api/datasets/ds1/events", json={"action": "drop", "state": big})
    assert r.status_code == 413


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
def test_open_stream_does_not_block_shutdown(tmp_path, sig):
    """Ctrl+C or a service stop ends open streams and the real server exits promptly."""
    port = free_port()
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    proc = subprocess.Popen([sys.executable, "-m", "server", "serve", "--port", str(port),
                             "--data-dir", str(tmp_path / "data")], cwd=ROOT, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.STDOUT)
    try:
        base = f"http://127.0.0.1:{port}"
        deadline = time.time() + 90  # a loaded machine (CI with other jobs) can take tens of seconds to import
        while True:
            assert time.time() < deadline, "the server did not start"
            try:
                if httpx.get(f"{base}/api/health", timeout=5).status_code == 200:
                    break
            except httpx.HTTPError:
                time.sleep(0.1)
        csv = b"Q1,Q2,Q3\n1,2,3\n2,3,4\n3,4,5\n4,5,5\n2,2,3\n"
        r = httpx.post(f"{base}/api/datasets", files={"file": ("tiny.csv", csv, "text/csv")})
        assert r.status_code == 201, r.text
        reader = EventReader(f"{base}/api/datasets/{r.json()['id']}/events")
        assert reader.wait_for(1)[0][0] == "hello"
        proc.send_signal(sig)
        assert proc.wait(timeout=30) is not None  # would hang without closing the stream (seconds when it works)
        assert reader.done.wait(10)
        reader.close()
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
