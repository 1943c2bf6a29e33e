"""The run service (server/runs.py): progress messages, checks, persistence, shutdown."""
from __future__ import annotations

import io
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from server.engine import Engine
from server.errors import NotFound
from server.intake import read_responses
from server.runs import WORKER_NICE, RunService, default_workers
from server.stats.errors import InputError
from server.store import SQLiteStore, Store


@pytest.fixture
def service(tmp_path):
    rng = np.random.default_rng(0)  # simulated population: one factor, six items
    z = rng.standard_normal((200, 1)) * 0.7 + rng.standard_normal((200, 6)) * 0.7
    frame = pd.DataFrame(np.clip(np.round(z + 3), 1, 5).astype(int), columns=[f"q{j}" for j in range(6)])
    raw = frame.to_csv(index=False).encode()
    store = Store(tmp_path)
    parsed = read_responses(io.BytesIO(raw).getvalue(), "d.csv", scale_min=1, scale_max=5)
    rec = store.add_dataset(name="d", raw=raw, filename="d.csv", codebook_raw=None, codebook_filename=None,
                            options={"scale_min": 1, "scale_max": 5}, meta={"n_rows": parsed.n_rows})
    svc = RunService(Engine(store), tmp_path, workers=1)
    svc.dataset_id = rec["id"]
    yield svc
    svc.shutdown()


def _wait(svc, run_id, timeout=120):
    end = time.monotonic() + timeout
    while svc.get(run_id).state in ("queued", "running") and time.monotonic() < end:
        time.sleep(0.05)
    return svc.get(run_id)


def test_progress_messages_and_result(service):
    messages, done = [], threading.Event()

    def publish(ds, msg):
        messages.append((ds, msg))
        if msg["state"] == "done":
            done.set()

    run = service.start(service.dataset_id, {}, n_resamples=8, publish=publish)
    assert done.wait(120)
    assert all(ds == service.dataset_id and m["action"] == "resampling" and m["run_id"] == run.run_id
               for ds, m in messages)
    counts = [m["done"] for _, m in messages]
    assert counts == sorted(counts) and counts[-1] == 8 and messages[-1][1]["total"] == 8
    assert messages[0][1]["state"] == "running"
    final = service.get(run.run_id)
    assert final.result["n_resamples"] == 8
    if service.shared is None:  # the folder store keeps it as a file; a SQL store in its runs table
        assert (service.folder / f"{run.run_id}.json").exists()
    else:
        assert service.shared.get_run(run.run_id)["state"] == "done"


@pytest.mark.parametrize("n", [1, 2001, True, 3.0])
def test_bad_n_resamples(service, n):
    with pytest.raises(InputError):
        service.start(service.dataset_id, {}, n_resamples=n)


def test_bad_request_and_unknown_dataset_fail_at_once(service):
    with pytest.raises(InputError):
        service.start(service.dataset_id, {"items": ["nope"]}, n_resamples=5)
    with pytest.raises(NotFound):
        service.start("missing", {}, n_resamples=5)
    with pytest.raises(NotFound):
        service.get("missing")


def test_shutdown_cancels_active_runs(service):
    run = service.start(service.dataset_id, {}, n_resamples=2000)
    service.shutdown()
    assert _wait(service, run.run_id, timeout=30).state == "cancelled"
    with pytest.raises(InputError):
        service.start(service.dataset_id, {}, n_resamples=5)


def test_default_workers_one_per_core_below_the_servers_priority(service):
    import os

    assert default_workers() == max(1, os.cpu_count() or 1)
    seen: dict = {}

    def publish(ds, msg):  # read each worker's nice value (field 19 of /proc/PID/stat) while the run computes
        for pid in service.get(msg["run_id"]).pids:
            try:
                stat = Path(f"/proc/{pid}/stat").read_text()
            except OSError:
                continue
            seen[pid] = int(stat.rsplit(")", 1)[1].split()[16])

    run = service.start(service.dataset_id, {}, n_resamples=40, publish=publish)
    assert _wait(service, run.run_id).state == "done"
    assert seen and all(v == min(19, os.nice(0) + WORKER_NICE) for v in seen.values())


def test_serve_takes_the_number_of_run_workers():
    from server.__main__ import build_parser

    assert build_parser().parse_args(["serve", "--run-workers", "3"]).run_workers == 3
    assert build_parser().parse_args(["serve"]).run_workers is None  # one per core


def test_a_run_a_folder_server_left_active_is_interrupted_at_the_next_start(tmp_path):
    """The folder store (one process per data folder) keeps an active run's file from its start, refreshed by the
    heartbeat; a server started on the folder later finds it active, so its process died: marked interrupted."""
    rng = np.random.default_rng(0)  # simulated population: one factor, six items
    z = rng.standard_normal((200, 1)) * 0.7 + rng.standard_normal((200, 6)) * 0.7
    raw = pd.DataFrame(np.clip(np.round(z + 3), 1, 5).astype(int),
                       columns=[f"q{j}" for j in range(6)]).to_csv(index=False).encode()
    store = SQLiteStore(tmp_path)
    dataset_id = store.add_dataset(name="d", raw=raw, filename="d.csv", codebook_raw=None, codebook_filename=None,
                                   options={"scale_min": 1, "scale_max": 5}, meta={"n_rows": 200})["id"]
    first = RunService(Engine(store), tmp_path, workers=1, heartbeat_seconds=0.2)
    assert first.shared is None
    gate, analyse = threading.Event(), first.engine.analyse
    first.engine.analyse = lambda *a, **k: (gate.wait(30), analyse(*a, **k))[1]  # held queued: no progress
    try:
        run = first.start(dataset_id, {}, n_resamples=4)
        path = first.folder / f"{run.run_id}.json"
        assert path.exists() and '"state":"queued"' in path.read_text()  # written at the start
        times = {path.stat().st_mtime_ns}
        end = time.monotonic() + 10
        while len(times) < 3 and time.monotonic() < end:  # the heartbeat rewrites it
            time.sleep(0.05)
            times.add(path.stat().st_mtime_ns)
        assert len(times) >= 3
        second = RunService(Engine(SQLiteStore(tmp_path)), tmp_path, workers=1)  # the next server process
        seen = second.get(run.run_id)
        assert seen.state == "interrupted" and seen.error["code"] == "interrupted"
        assert seen.error["message"].startswith("The server process computing this run stopped at about ")
        assert seen.error["message"].endswith("after 0 of 4 resamples. Start the run again.")
        assert seen.finished_at is not None
        assert second.delete(run.run_id) is True  # no longer active: it can be forgotten
        assert not path.exists()
    finally:
        gate.set()
        first.shutdown()
