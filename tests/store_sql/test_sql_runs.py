"""Resampling runs on the SQL store (revision 0004's ``runs`` table), on SQLite and PostgreSQL: a run computed by
one run service (one process) is read by another sharing the database, with the same result; a cancel through the
other is noticed by the computing one; another workspace's run is 404; finished runs are forgotten everywhere."""
from __future__ import annotations

import io
import time

import numpy as np
import pandas as pd
import pytest

from server.engine import Engine
from server.errors import NotFound
from server.intake import read_responses
from server.runs import RunService
from server.sqlstore import ACTING, Actor, SqlStore


def _data() -> bytes:
    rng = np.random.default_rng(0)  # simulated population: one factor, six items
    z = rng.standard_normal((400, 1)) * 0.7 + rng.standard_normal((400, 6)) * 0.7
    frame = pd.DataFrame(np.clip(np.round(z + 3), 1, 5).astype(int), columns=[f"q{j}" for j in range(6)])
    return frame.to_csv(index=False).encode()


@pytest.fixture
def services(sql_url, tmp_path):
    """Two run services (as two processes would have), each with its own store and folder, on one database."""
    raw = _data()
    stores = [SqlStore(sql_url), SqlStore(sql_url)]
    parsed = read_responses(io.BytesIO(raw).getvalue(), "d.csv", scale_min=1, scale_max=5)
    rec = stores[0].add_dataset(name="d", raw=raw, filename="d.csv", options={"scale_min": 1, "scale_max": 5},
                                meta={"n_rows": parsed.n_rows})
    svcs = [RunService(Engine(s), tmp_path / f"p{i}", workers=1) for i, s in enumerate(stores)]
    yield svcs, rec["id"]
    for svc, store in zip(svcs, stores):
        svc.shutdown()
        store.close()


def _wait(svc, run_id, states=("done", "failed", "cancelled"), timeout=120):
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        run = svc.get(run_id)
        if run.state in states:
            return run
        time.sleep(0.05)
    raise AssertionError(f"run {run_id} still {run.state} after {timeout} s")


def test_a_run_is_read_through_another_process_with_the_same_result(services, tmp_path):
    (a, b), dataset_id = services
    run = a.start(dataset_id, {"seed": 5}, n_resamples=6)
    seen = b.get(run.run_id)  # written at start: known to B at once
    assert seen.run_id == run.run_id and seen.dataset_id == dataset_id and seen.n_resamples == 6
    done_b = _wait(b, run.run_id)
    done_a = _wait(a, run.run_id)
    assert done_b.state == done_a.state == "done"
    assert done_b.to_dict() == done_a.to_dict()  # the result JSON as the computing process has it
    assert done_b.result["n_resamples"] == 6
    assert not (tmp_path / "p0" / "runs").exists()  # the SQL store keeps runs in its table, not in the folder
    assert b.delete(run.run_id) is True
    for svc in (a, b):
        with pytest.raises(NotFound):
            svc.get(run.run_id)


def test_a_cancel_through_another_process_stops_the_computing_one(services):
    (a, b), dataset_id = services
    run = a.start(dataset_id, {"seed": 1}, n_resamples=2000)
    _wait(a, run.run_id, states=("running",))
    assert b.delete(run.run_id) is False  # active: cancelled, not forgotten
    assert b.get(run.run_id).state == "cancelled"
    end = time.monotonic() + 20
    while run.finished_at is None and time.monotonic() < end:  # A's next progress write finds it cancelled
        time.sleep(0.05)
    assert run.state == "cancelled" and run.finished_at is not None and run.done < 2000
    end = time.monotonic() + 10  # then writes its end (set just before the write)
    while b.get(run.run_id).finished_at is None and time.monotonic() < end:
        time.sleep(0.05)
    assert b.get(run.run_id).to_dict() == run.to_dict()


def test_another_workspaces_run_is_404(services):
    (a, b), dataset_id = services
    run = a.start(dataset_id, {"seed": 2}, n_resamples=4)
    _wait(a, run.run_id)
    token = ACTING.set(Actor(person_id="p", name="Otto", workspace_id="elsewhere", workspace="other",
                             role="analyst"))
    try:
        with pytest.raises(NotFound):
            b.get(run.run_id)
        with pytest.raises(NotFound):
            a.get(run.run_id)
    finally:
        ACTING.reset(token)
    # A's own view says done as it writes its end; the other process reads it once written
    assert _wait(b, run.run_id, timeout=30).state == "done"
