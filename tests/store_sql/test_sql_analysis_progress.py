"""A long analysis computed by one process says its stages to a page served by another (issue 14): the stage
messages go through PostgreSQL's NOTIFY like a resampling run's progress (server/notify.py)."""
from __future__ import annotations

import threading

import httpx
import pytest

from tests.browser.test_analysis_stage import pool_csv
from tests.store_sql.test_sql_processes import live_changes, two_servers  # noqa: F401  (the fixture)


@pytest.mark.slow  # starts two server processes
def test_the_stages_of_an_analysis_on_one_process_reach_a_stream_on_the_other(two_servers):  # noqa: F811
    _, (_, a), (_, b) = two_servers
    r = httpx.post(f"{a}/api/datasets", files={"file": ("pool.csv", pool_csv(), "text/csv")},
                   data={"scale_min": "1", "scale_max": "5"}, trust_env=False, timeout=120)
    assert r.status_code == 201, r.text
    dataset_id = r.json()["id"]
    got: list[dict] = []
    hello = threading.Event()

    def listen():
        for msg in live_changes(b, dataset_id, hello):
            if msg.get("action") == "analysis_progress":
                got.append(msg)
                if msg.get("final"):
                    return

    thread = threading.Thread(target=listen, daemon=True)
    thread.start()
    assert hello.wait(30)
    # 5,000 parallel-analysis draws of 70 items: seconds of work, past the reporter's 0.4 s on any machine
    r = httpx.post(f"{a}/api/datasets/{dataset_id}/analysis", json={"pa_iterations": 5000}, trust_env=False,
                   timeout=120, headers={"X-Scalewright-Progress": "from-a"})
    assert r.status_code == 200, r.text
    thread.join(20)
    assert got and got[-1]["final"] and got[-1]["stage"] == "done", got
    assert len(got) >= 2 and all(m["request"] == "from-a" and m["dataset_id"] == dataset_id for m in got)
    assert all(isinstance(m["stage"], str) and m["stage"] for m in got) and all(not m.get("final") for m in got[:-1])
