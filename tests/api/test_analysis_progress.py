"""A long analysis says what it computes on the live channel (issue 14; server/api/routes_live.run_reported).

A real uvicorn server in a thread (the TestClient cannot read an endless stream), a simulated pool of
150 items x 3,000 respondents with five factors. The reporter's delay is lowered (the module's ``DELAY``, read
when a reporter is made) so the first analysis is certainly "long" on any machine; nothing here is timed.
"""
from __future__ import annotations

import io
import threading
import time

import httpx
import numpy as np
import pytest
import uvicorn

from server import engine as engine_module
from server.analysis import progress
from server.app import create_app
from tests.api.test_live import EventReader, free_port

pytestmark = pytest.mark.slow


def simulated_csv(n: int = 3000, k: int = 150, m: int = 5, seed: int = 14) -> bytes:
    """Five-point answers of n respondents to k items, each loading on one of m factors."""
    rng = np.random.default_rng(seed)
    load = np.zeros((k, m))
    load[np.arange(k), np.arange(k) % m] = rng.uniform(0.45, 0.8, k)
    z = rng.standard_normal((n, m)) @ load.T + rng.standard_normal((n, k)) * np.sqrt(1 - (load ** 2).sum(1))
    x = np.clip(np.round(z * 1.1 + 3), 1, 5).astype(int)
    buf = io.StringIO()
    buf.write(",".join(f"q{j + 1}" for j in range(k)) + "\n")
    np.savetxt(buf, x, fmt="%d", delimiter=",")
    return buf.getvalue().encode()


@pytest.fixture
def pool_server(make_settings, monkeypatch):
    """The server with the simulated pool uploaded (its first analysis not started in the background)."""
    monkeypatch.setattr(engine_module, "BACKGROUND_BUDGET", 0.0)  # the page's own request computes it
    app = create_app(make_settings())
    port = free_port()
    server = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning"))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.time() + 30
    while not server.started and time.time() < deadline:
        time.sleep(0.02)
    assert server.started
    url = f"http://127.0.0.1:{port}"
    r = httpx.post(f"{url}/api/datasets", files={"file": ("pool.csv", simulated_csv(), "text/csv")},
                   data={"scale_min": "1", "scale_max": "5"}, timeout=60)
    assert r.status_code == 201, r.text
    reader = EventReader(f"{url}/api/datasets/{r.json()['id']}/events")
    assert reader.wait_kind("hello", 1, timeout=10)
    yield url, r.json()["id"], app, reader
    reader.close()
    hub = getattr(app.state, "live", None)
    if hub is not None:
        hub.closing = True
    server.should_exit = True
    thread.join(timeout=10)


def progress_of(reader: EventReader, request_id: str) -> list[dict]:
    return [m for m in reader.of("change") if m.get("action") == "analysis_progress" and m.get("request") == request_id]


def wait_final(reader: EventReader, request_id: str, timeout: float = 20.0) -> list[dict]:
    deadline = time.time() + timeout
    while time.time() < deadline:
        got = progress_of(reader, request_id)
        if got and got[-1].get("final"):
            return got
        time.sleep(0.02)
    return progress_of(reader, request_id)


FEWER_DRAWS = {"pa_iterations": 100}  # parallel analysis of 150 items with 500 draws alone takes ~10 s here


def analyse(url: str, ds: str, request_id: str, body: dict | None = None) -> httpx.Response:
    return httpx.post(f"{url}/api/datasets/{ds}/analysis", json=FEWER_DRAWS if body is None else body, timeout=60,
                      headers={"X-Scalewright-Progress": request_id})


def test_first_analysis_of_a_large_pool_publishes_its_stages_then_done(pool_server, monkeypatch):
    url, ds, app, reader = pool_server
    monkeypatch.setattr(progress, "DELAY", 0.05)
    r = analyse(url, ds, "first-fit")
    assert r.status_code == 200, r.text
    assert r.json()["efa"]["n_factors"] >= 2
    got = wait_final(reader, "first-fit")
    assert len(got) >= 2, got  # at least one stage, then done
    *stages, done = got
    assert done["stage"] == "done" and done["final"] is True
    key = progress.key_digest(app.state.engine.settings(ds, FEWER_DRAWS).key())
    for m in got:
        assert m["dataset_id"] == ds and m["key"] == key and m["request"] == "first-fit"
        assert isinstance(m["elapsed_s"], float | int) and m["elapsed_s"] >= 0.05
    known = ("starting", "reading", "descriptives", "Pearson correlations of 150 items", "reliability of 150 items",
             "item table", "pruning path", "correlations of the 150 active items", "parallel analysis of 150 items",
             "extraction (", "the whole pool", "omega hierarchical", "subscales")
    assert all(m["stage"].startswith(known) for m in stages), [m["stage"] for m in stages]
    assert all(not m.get("final") for m in stages)
    # throttled: at most one message per INTERVAL (0.25 s) before the final one
    gaps = np.diff([m["elapsed_s"] for m in stages])
    assert (gaps >= progress.INTERVAL - 0.011).all(), gaps
    assert done["elapsed_s"] >= stages[-1]["elapsed_s"]
    # a progress message is not a change of the shared state: a page joining later is not offered it
    assert app.state.live.last(ds) is None


def test_a_fast_cached_answer_publishes_nothing(pool_server, monkeypatch):
    url, ds, _, reader = pool_server
    monkeypatch.setattr(progress, "DELAY", 0.05)
    assert analyse(url, ds, "compute").status_code == 200
    assert wait_final(reader, "compute")[-1]["final"]
    monkeypatch.setattr(progress, "DELAY", 0.4)  # the product's delay: the cached answer comes well before it
    r = analyse(url, ds, "cached")
    assert r.status_code == 200
    time.sleep(0.6)  # anything a timer could still send would have arrived by now
    assert progress_of(reader, "cached") == []


def test_waiting_for_a_core_or_for_the_same_analysis_is_reported(pool_server, monkeypatch):
    """Every engine slot is held (other analyses): the first request waits for a core, an identical second one
    waits for the first; both say so, then both finish with done."""
    url, ds, app, reader = pool_server
    monkeypatch.setattr(progress, "DELAY", 0.05)
    engine = app.state.engine
    engine.dataset(ds)  # read once, so the wait is the only stage before the slots are freed
    held = 0
    while engine._slots.acquire(blocking=False):
        held += 1
    answers: dict[str, int] = {}
    try:
        first = threading.Thread(target=lambda: answers.update(a=analyse(url, ds, "wait-a").status_code))
        first.start()
        deadline = time.time() + 10
        while not any("every core" in m["stage"] for m in progress_of(reader, "wait-a")) and time.time() < deadline:
            time.sleep(0.02)
        second = threading.Thread(target=lambda: answers.update(b=analyse(url, ds, "wait-b").status_code))
        second.start()
        while not progress_of(reader, "wait-b") and time.time() < deadline:
            time.sleep(0.02)
    finally:
        for _ in range(held):
            engine._slots.release()
    first.join(30)
    second.join(30)
    assert answers == {"a": 200, "b": 200}
    a, b = wait_final(reader, "wait-a"), wait_final(reader, "wait-b")
    assert a[0]["stage"] == "waiting: other analyses are using every core"
    assert b[0]["stage"] == "waiting: another request is computing the same thing"
    assert a[-1]["final"] and b[-1]["final"]
    assert a[0]["key"] == b[0]["key"]
