"""Resampling runs through the API: 202, progress, result shape, cancel, 404, 422 (issue 13, item 1)."""
from __future__ import annotations

import io
import time

import numpy as np
import pandas as pd
import pytest


def _frame(n=300, seed=3) -> pd.DataFrame:
    """A simulated two-factor pool of 10 five-point items (# simulated population)."""
    rng = np.random.default_rng(seed)
    L = np.zeros((10, 2))
    L[:5, 0] = 0.7
    L[5:, 1] = 0.7
    z = rng.standard_normal((n, 2)) @ L.T + rng.standard_normal((n, 10)) * np.sqrt(1 - (L ** 2).sum(1))
    x = np.clip(np.round(z * 1.1 + 3), 1, 5).astype(int)
    return pd.DataFrame(x, columns=[f"q{j + 1}" for j in range(10)])


def _upload(client, frame: pd.DataFrame) -> str:
    buf = io.StringIO()
    frame.to_csv(buf, index=False)
    r = client.post("/api/datasets", files={"file": ("data.csv", buf.getvalue().encode(), "text/csv")})
    assert r.status_code == 201, r.text
    return r.json()["id"]


def _wait(client, run_id, states=("done", "failed", "cancelled"), timeout=120):
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        body = client.get(f"/api/runs/{run_id}").json()
        if body["state"] in states:
            return body
        time.sleep(0.1)
    raise AssertionError(f"run {run_id} still {body['state']} after {timeout} s")


def test_lifecycle_and_result_shape(client):
    ds = _upload(client, _frame())
    r = client.post(f"/api/datasets/{ds}/resampling", json={"n_resamples": 12, "seed": 5})
    assert r.status_code == 202, r.text
    run = r.json()
    assert run["state"] in ("queued", "running") and run["progress"]["total"] == 12
    body = _wait(client, run["run_id"])
    assert body["state"] == "done", body
    assert body["progress"] == {"done": 12, "total": 12}
    assert body["dataset_id"] == ds and body["n_resamples"] == 12 and body["seed"] == 5
    assert body["started_at"] and body["finished_at"]
    res = body["result"]
    assert res["n_resamples"] == 12 and res["seed"] == 5
    assert len(res["items"]) == 10
    item = res["items"][0]
    assert set(item) >= {"name", "flags", "primary", "early_removal", "loadings"}
    assert sum(item["primary"].values()) + item["primary_none"] == pytest.approx(1.0)
    assert len(item["loadings"]) == res["n_factors"] == 2
    for key in ("alpha", "omega_total", "omega_hierarchical"):
        iv = res["coefficients"][key]["percentile"]
        assert iv["low"] <= iv["high"]
    assert res["coefficients"]["alpha"]["bca"]["method"] == "bca"
    assert sum(d["count"] for d in res["retention"]["parallel"]) == 12
    # kept on disk: a fresh service (a restarted server) reads it back
    from server.runs import RunService
    again = RunService(client.app.state.engine, client.app.state.settings.data_dir).get(run["run_id"])
    assert again.state == "done" and again.result["n_resamples"] == 12
    # a finished run can be forgotten: 204, then 404
    assert client.delete(f"/api/runs/{run['run_id']}").status_code == 204
    assert client.get(f"/api/runs/{run['run_id']}").status_code == 404


def test_same_seed_same_result(client):
    ds = _upload(client, _frame())
    out = []
    for _ in range(2):
        r = client.post(f"/api/datasets/{ds}/resampling", json={"n_resamples": 6, "seed": 11})
        out.append(_wait(client, r.json()["run_id"])["result"])
    assert out[0] == out[1]


def test_cancel_stops_workers(client):
    ds = _upload(client, _frame(n=2000))
    r = client.post(f"/api/datasets/{ds}/resampling", json={"n_resamples": 2000, "seed": 1})
    run_id = r.json()["run_id"]
    service = client.app.state.runs
    _wait(client, run_id, states=("running",))
    end = time.monotonic() + 60
    while not service.get(run_id).pids and time.monotonic() < end:
        time.sleep(0.05)
    pids = service.get(run_id).pids
    assert pids
    d = client.delete(f"/api/runs/{run_id}")
    assert d.status_code == 200 and d.json()["state"] == "cancelled"
    body = _wait(client, run_id, states=("cancelled",), timeout=10)
    assert body["progress"]["done"] < 2000
    end = time.monotonic() + 10
    alive = list(pids)
    while alive and time.monotonic() < end:
        alive = [p for p in pids if _alive(p)]
        time.sleep(0.05)
    assert not alive, f"worker processes {alive} of the cancelled run remain"


def _alive(pid: int) -> bool:
    """A process exists and is not a zombie (/proc)."""
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().split(")")[-1].split()[0] != "Z"
    except FileNotFoundError:
        return False


def test_unknown_run_is_404(client):
    for method in ("get", "delete"):
        r = getattr(client, method)("/api/runs/nope123")
        assert r.status_code == 404
        assert r.json()["error"]["code"] == "not_found"


@pytest.mark.parametrize("n", [1, 5000, "many", 2.5])
def test_n_resamples_out_of_range_is_422(client, n):
    ds = _upload(client, _frame(n=50))
    r = client.post(f"/api/datasets/{ds}/resampling", json={"n_resamples": n})
    assert r.status_code == 422
    assert set(r.json()["error"]) == {"code", "message", "details"}


@pytest.mark.parametrize("body", [[], "x", {"items": "q1"}, {"items": ["nope"]}, {"rotation": "spin"},
                                  {"unknown": 1}, {"seed": "a"}, None])
def test_junk_bodies_are_4xx(client, body):
    ds = _upload(client, _frame(n=50))
    r = client.post(f"/api/datasets/{ds}/resampling", json=body)
    assert 400 <= r.status_code < 500, r.text
    assert "error" in r.json()


def test_unknown_dataset_is_404(client):
    r = client.post("/api/datasets/nope/resampling", json={})
    assert r.status_code == 404


# ---- a finished run kept with a snapshot (issue 13, item 3)
def _save(client, ds, items, **extra):
    return client.post(f"/api/datasets/{ds}/snapshots", json={"name": "with a run", "items": items, **extra})


def test_a_finished_run_is_kept_with_the_snapshot_and_its_report(client):
    ds = _upload(client, _frame())
    items = [f"q{j + 1}" for j in range(10)]
    run_id = client.post(f"/api/datasets/{ds}/resampling", json={"n_resamples": 8, "seed": 4}).json()["run_id"]
    run = _wait(client, run_id)
    assert run["state"] == "done"
    r = _save(client, ds, items, resampling_run_id=run_id)
    assert r.status_code == 201, r.text
    kept = r.json()["resampling"]
    assert kept["run_id"] == run_id and kept["n_resamples"] == 8 and kept["seed"] == 4 and kept["same_items"]
    assert [row["name"] for row in kept["items"]] == items
    assert kept["items"][0]["flags"] == run["result"]["items"][0]["flags"]
    assert "loadings" not in kept["items"][0]  # compact: the loading intervals stay with the run
    assert kept["coefficients"] == run["result"]["coefficients"]
    # the copy outlives the run
    assert client.delete(f"/api/runs/{run_id}").status_code == 204
    snap = client.get(f"/api/snapshots/{r.json()['id']}").json()
    assert snap["resampling"]["run_id"] == run_id
    page = client.get(f"/api/snapshots/{r.json()['id']}/report").text
    assert "Resampling stability" in page and "(seed 4)" in page
    # a run of fewer items is kept, and said to be for another item set
    run2 = client.post(f"/api/datasets/{ds}/resampling",
                       json={"n_resamples": 4, "seed": 1, "items": items[:8]}).json()["run_id"]
    assert _wait(client, run2)["state"] == "done"
    r2 = _save(client, ds, items, resampling_run_id=run2)
    assert r2.status_code == 201 and r2.json()["resampling"]["same_items"] is False


def test_attaching_an_unknown_foreign_or_unfinished_run_is_422(client):
    ds = _upload(client, _frame())
    other = _upload(client, _frame(seed=9))
    items = [f"q{j + 1}" for j in range(10)]
    r = _save(client, ds, items, resampling_run_id="nope123")
    assert r.status_code == 422 and r.json()["error"]["code"] == "unknown_run"
    assert r.json()["error"]["details"] == {"resampling_run_id": "nope123"}
    foreign = client.post(f"/api/datasets/{other}/resampling", json={"n_resamples": 4}).json()["run_id"]
    assert _wait(client, foreign)["state"] == "done"
    r = _save(client, ds, items, resampling_run_id=foreign)
    assert r.status_code == 422 and r.json()["error"]["code"] == "run_other_dataset"
    busy = client.post(f"/api/datasets/{ds}/resampling", json={"n_resamples": 2000}).json()["run_id"]
    try:
        r = _save(client, ds, items, resampling_run_id=busy)
        assert r.status_code == 422 and r.json()["error"]["code"] == "run_not_done"
    finally:
        client.delete(f"/api/runs/{busy}")
    r = _save(client, ds, items, resampling_run_id=busy)  # cancelled is not done either
    assert r.status_code == 422 and r.json()["error"]["details"]["state"] == "cancelled"
    assert client.get(f"/api/datasets/{ds}/snapshots").json() == []  # nothing was stored
