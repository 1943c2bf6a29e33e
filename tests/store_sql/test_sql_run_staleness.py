"""Runs whose computing process died are not "running" forever (server/runs.py heartbeat, SqlStore's
``touch_run`` and ``interrupt_stale_runs``), on SQLite and PostgreSQL: the heartbeat refreshes ``updated_at``
while nothing else is written; a row left active with an old ``updated_at`` is read as ``interrupted`` with a
plain message, claimed by one process only; a SQLite database's leftovers are marked at a server's start; a
process that was only slow stops when it finds its run marked; and a real kill -9 of the computing process."""
from __future__ import annotations

import os
import signal
import subprocess
import sys
import threading
import time

import pytest
import sqlalchemy as sa

from server.engine import Engine
from server.runs import RunService
from server.sqlstore import SqlStore, runs_table
from server.store import utc_now
from tests.serverproc import ROOT
from tests.store_sql.test_sql_runs import _data, _wait


def _dataset(store: SqlStore) -> str:
    raw = _data()
    return store.add_dataset(name="d", raw=raw, filename="d.csv", options={"scale_min": 1, "scale_max": 5},
                             meta={"n_rows": 400})["id"]


def _record(run_id: str, dataset_id: str, state: str = "running", done: int = 7) -> dict:
    """A run's JSON as ``Run.to_dict`` writes it."""
    return {"run_id": run_id, "dataset_id": dataset_id, "state": state, "progress": {"done": done, "total": 200},
            "settings": {"seed": 1}, "n_resamples": 200, "seed": 1, "started_at": utc_now(), "finished_at": None}


def _updated_at(store: SqlStore, run_id: str) -> str:
    with store.engine.connect() as conn:
        return conn.execute(sa.select(runs_table.c.updated_at).where(runs_table.c.id == run_id)).scalar_one()


def _age(store: SqlStore, run_id: str, when: str) -> None:
    """Set a run's ``updated_at`` (as a dead process would have left it)."""
    with store.engine.begin() as conn:
        conn.execute(runs_table.update().where(runs_table.c.id == run_id).values(updated_at=when))


@pytest.fixture
def store(sql_url):
    s = SqlStore(sql_url)
    yield s
    s.close()


def _blocked(svc: RunService) -> threading.Event:
    """Hold the service's runs in their first step (queued, no progress written) until the event is set."""
    gate, analyse = threading.Event(), svc.engine.analyse

    def slow(*args, **kwargs):
        gate.wait(30)
        return analyse(*args, **kwargs)

    svc.engine.analyse = slow
    return gate


def test_the_heartbeat_refreshes_updated_at_while_no_progress_is_written(store, tmp_path):
    dataset_id = _dataset(store)
    svc = RunService(Engine(store), tmp_path, workers=1, heartbeat_seconds=0.2)
    gate = _blocked(svc)
    try:
        run = svc.start(dataset_id, {"seed": 1}, n_resamples=4)
        seen = {_updated_at(store, run.run_id)}
        end = time.monotonic() + 10
        while len(seen) < 4 and time.monotonic() < end:  # each beat writes a later time
            time.sleep(0.1)
            seen.add(_updated_at(store, run.run_id))
        assert len(seen) >= 4, seen
        assert store.run_state(run.run_id) == "queued" and run.done == 0  # no progress: the heartbeat wrote it
        svc.cancel(run.run_id)
    finally:
        gate.set()
    end = time.monotonic() + 30
    while run.finished_at is None and time.monotonic() < end:  # its end written
        time.sleep(0.05)
    time.sleep(0.1)
    assert store.run_state(run.run_id) == "cancelled"
    last = _updated_at(store, run.run_id)
    time.sleep(0.6)  # the heartbeat stopped with the run
    assert _updated_at(store, run.run_id) == last
    svc.shutdown()


def test_a_row_left_running_with_an_old_updated_at_is_read_as_interrupted(store, sql_url, tmp_path):
    dataset_id = _dataset(store)
    svc = RunService(Engine(store), tmp_path, workers=1, stale_seconds=30)
    other = SqlStore(sql_url)  # a second process's store
    try:
        for run_id in ("dead1", "alive1"):
            assert store.save_run(_record(run_id, dataset_id), new=True) == "running"
        _age(store, "dead1", "2026-12-01T14:02:09.000000Z")
        assert svc.get("alive1").state == "running"  # heard from just now
        dead = svc.get("dead1")
        assert dead.state == "interrupted" and dead.done == 7
        assert dead.finished_at == "2026-12-01T14:02:09.000000Z"
        assert dead.error["code"] == "interrupted"
        assert dead.error["message"] == ("The server process computing this run stopped at about 14:02 UTC on "
                                         "2026-12-01 (when it was last heard from), after 7 of 200 resamples. "
                                         "Start the run again.")
        # stored so: every process reads it, the JSON and the column agree, and it can now be forgotten
        assert other.get_run("dead1")["state"] == "interrupted"
        assert other.get_run("dead1")["error"] == dead.error
        assert other.run_state("alive1") == "running"
        assert _updated_at(store, "dead1") == "2026-12-01T14:02:09.000000Z"  # still when it was last heard from
        assert svc.delete("dead1") is True
        # two processes marking at once: the guarded UPDATE lets exactly one claim the row
        store.save_run(_record("dead2", dataset_id), new=True)
        _age(store, "dead2", "2026-12-01T14:02:09.000000Z")
        counts, start = [], threading.Barrier(2)

        def mark(s):
            start.wait()
            counts.append(s.interrupt_stale_runs(30))

        threads = [threading.Thread(target=mark, args=(s,)) for s in (store, other)]
        for t in threads:
            t.start()
        for t in threads:
            t.join(30)
        assert sorted(counts) == [0, 1]
        assert other.get_run("dead2")["state"] == "interrupted"
        # a heartbeat that lands first keeps a run alive; a finished run is never marked
        store.save_run(_record("late1", dataset_id), new=True)
        _age(store, "late1", "2026-12-01T14:02:09.000000Z")
        assert store.touch_run("late1") == "running"
        assert store.interrupt_stale_runs(30) == 0 and store.run_state("late1") == "running"
        store.save_run(_record("done1", dataset_id, state="done"), new=True)
        _age(store, "done1", "2026-12-01T14:02:09.000000Z")
        assert store.interrupt_stale_runs(0) == 2  # late1 and alive1, active both; never done1
        assert store.run_state("done1") == "done" and store.run_state("alive1") == "interrupted"
        assert store.touch_run("late1") == "interrupted" and store.touch_run("nope") is None
    finally:
        svc.shutdown()
        other.close()


def test_a_server_start_marks_what_a_sqlite_database_left_active(store, tmp_path):
    """A SQLite database serves one process: at a server's start its active runs are dead, whatever their age.
    On PostgreSQL another live process may be computing them: only the stale ones are marked."""
    dataset_id = _dataset(store)
    store.save_run(_record("left1", dataset_id), new=True)  # heard from just now
    svc = RunService(Engine(store), tmp_path, workers=1)
    expected = "interrupted" if store.backend == "sqlite" else "running"
    assert store.run_state("left1") == expected
    assert svc.get("left1").state == expected
    svc.shutdown()


def test_a_process_thought_dead_stops_when_it_finds_its_run_interrupted(sql_url, tmp_path):
    """A computing process that was only stalled (its heartbeat not written for the stale limit) comes back,
    finds its run marked and stops without overwriting the mark."""
    stores = [SqlStore(sql_url), SqlStore(sql_url)]
    dataset_id = _dataset(stores[0])
    a = RunService(Engine(stores[0]), tmp_path / "a", workers=1, heartbeat_seconds=60)  # stalled: no beat
    b = RunService(Engine(stores[1]), tmp_path / "b", workers=1, stale_seconds=0.5)
    gate = _blocked(a)
    try:
        run = a.start(dataset_id, {"seed": 1}, n_resamples=50)
        time.sleep(0.8)
        assert b.get(run.run_id).state == "interrupted"
        gate.set()  # A goes on: its next write finds the mark
        end = time.monotonic() + 30
        while run.finished_at is None and time.monotonic() < end:
            time.sleep(0.05)
        assert run.finished_at is not None and run.done < 50
        assert a.get(run.run_id).state == "interrupted"
        assert stores[1].get_run(run.run_id)["error"]["code"] == "interrupted"
    finally:
        gate.set()
        for svc, s in ((a, stores[0]), (b, stores[1])):
            svc.shutdown()
            s.close()


CHILD = """
import sys, time
if __name__ == "__main__":
    from server.engine import Engine
    from server.runs import RunService
    from server.sqlstore import SqlStore

    url, dataset_id, folder = sys.argv[1:4]
    svc = RunService(Engine(SqlStore(url)), folder, workers=1, heartbeat_seconds=0.25)
    svc.warm()
    run = svc.start(dataset_id, {"seed": 2}, n_resamples=2000)
    print(run.run_id, flush=True)
    time.sleep(120)
"""


@pytest.mark.slow  # starts a Python process that computes a run
def test_a_run_whose_process_was_killed_is_interrupted_after_the_stale_limit_and_a_new_run_starts(
        sql_url, tmp_path):
    store = SqlStore(sql_url)
    dataset_id = _dataset(store)
    stale = 1.5
    observer = RunService(Engine(store), tmp_path / "observer", workers=1, stale_seconds=stale)
    observer.warm()  # its fork server starts while the child computes (the new run at the end needs it)
    script = tmp_path / "child.py"
    script.write_text(CHILD)
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    child = subprocess.Popen([sys.executable, str(script), sql_url, dataset_id, str(tmp_path / "child")], cwd=ROOT,
                             env=env, stdout=subprocess.PIPE, text=True, start_new_session=True)
    try:
        run_id = child.stdout.readline().strip()
        assert run_id, "the child process did not start its run"
        assert _wait(observer, run_id, states=("running",), timeout=60).state == "running"
        end = time.monotonic() + 60
        while observer.get(run_id).done == 0 and time.monotonic() < end:  # its workers started and reported
            time.sleep(0.05)
        time.sleep(stale + 0.5)  # alive: its heartbeat keeps the run fresh past the stale limit
        assert observer.get(run_id).state == "running"
        os.killpg(child.pid, signal.SIGKILL)  # the process, its fork server and its workers: as a reboot would
        child.wait(10)
        killed_at = time.monotonic()
        assert observer.get(run_id).state == "running"  # not yet: it may only be slow
        gone = _wait(observer, run_id, states=("interrupted",), timeout=stale + 10)
        waited = time.monotonic() - killed_at
        assert gone.state == "interrupted" and 0 < gone.done < 2000, gone.to_dict()
        assert stale - 0.5 < waited < stale + 5, waited  # the stale limit, counted from the last beat
        assert "stopped at about" in gone.error["message"] and "Start the run again" in gone.error["message"]
        again = observer.start(dataset_id, {"seed": 3}, n_resamples=2)
        assert _wait(observer, again.run_id).state == "done"
    finally:
        if child.poll() is None:
            os.killpg(child.pid, signal.SIGKILL)
            child.wait(10)
        observer.shutdown()
        store.close()
