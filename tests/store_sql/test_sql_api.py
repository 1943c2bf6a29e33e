"""The API on the SQL store (settings.database_url), on SQLite and PostgreSQL: upload, analyse, save a snapshot,
the audit log, delete, and a restart of the app on the same database. Outside references: hashlib for the
SHA-256 of the uploaded bytes, pingouin.cronbach_alpha for alpha."""
from __future__ import annotations

import hashlib

import pingouin as pg
import pytest

from server.app import create_app
from server.settings import Settings
from server.sqlstore import SqlStore
from tests.api.test_snapshots import ITEMS, KEPT, make_data, save, scored_frame
from tests.conftest import local_client


@pytest.fixture
def sql_settings(sql_url, tmp_path):
    return Settings(data_dir=tmp_path / "data", database_url=sql_url)


def test_round_trip_through_the_api(sql_settings):
    df, raw, cb = make_data()
    app = create_app(sql_settings)
    assert isinstance(app.state.store, SqlStore)
    with local_client(app) as client:
        r = client.post("/api/datasets", files={"file": ("workshop.csv", raw, "text/csv"),
                                                "codebook": ("codebook.csv", cb, "text/csv")},
                        data={"id_column": "pid"})
        assert r.status_code == 201, r.text
        dataset_id = r.json()["id"]
        assert app.state.store.get_dataset(dataset_id)["sha256"] == hashlib.sha256(raw).hexdigest()  # hashlib
        assert app.state.store.read_raw(dataset_id) == raw
        live = client.post(f"/api/datasets/{dataset_id}/analysis", json={"items": ITEMS, "n_factors": 2,
                                                                        "pa_iterations": 20, "seed": 1})
        assert live.status_code == 200, live.text
        alpha_pg, _ = pg.cronbach_alpha(scored_frame(df)[ITEMS])
        assert live.json()["reliability"]["alpha"] == pytest.approx(alpha_pg, abs=1e-9)  # pingouin, same data
        snap = save(client, dataset_id)
        assert snap.status_code == 201, snap.text
        snap = snap.json()
        assert snap["dataset_sha256"] == hashlib.sha256(raw).hexdigest() and snap["items"] == KEPT
        assert client.get(f"/api/snapshots/{snap['id']}").json() == snap
        assert [s["id"] for s in client.get(f"/api/datasets/{dataset_id}/snapshots").json()] == [snap["id"]]
        assert client.delete(f"/api/datasets/{dataset_id}").status_code in (200, 204)
        assert client.get(f"/api/datasets/{dataset_id}").status_code == 404
        assert client.get(f"/api/snapshots/{snap['id']}").json() == snap  # snapshots outlive the dataset
    app.state.store.close()
    again = create_app(sql_settings)  # a restart on the same database
    with local_client(again) as client:
        assert client.get(f"/api/snapshots/{snap['id']}").json() == snap
        assert client.get("/api/datasets").json() == []
    assert {"upload", "delete"} <= {e["action"] for e in again.state.store.list_audit()}
    again.state.store.close()


@pytest.mark.slow  # starts a server process
def test_serve_with_database_flag_keeps_uploads_in_the_database(pg_url, tmp_path):
    import httpx

    from tests.serverproc import running_server

    _, raw, _ = make_data()
    with running_server(tmp_path / "data", "--database", pg_url) as (_, base):
        r = httpx.post(f"{base}/api/datasets", files={"file": ("w.csv", raw, "text/csv")},
                       data={"id_column": "pid"}, trust_env=False, timeout=60)
        assert r.status_code == 201, r.text
        dataset_id = r.json()["id"]
    store = SqlStore(pg_url)  # the server is gone; its upload is in the database, byte for byte
    assert store.read_raw(dataset_id) == raw
    assert store.get_dataset(dataset_id)["sha256"] == hashlib.sha256(raw).hexdigest()  # hashlib
    store.close()
    assert not (tmp_path / "data" / "datasets").exists()  # nothing of it in the folder


@pytest.mark.slow  # starts a server process
def test_serve_with_an_unreachable_database_stops_with_one_line(tmp_path):
    import subprocess
    import sys

    from tests.serverproc import ROOT, free_port

    run = subprocess.run([sys.executable, "-m", "server", "serve", "--port", str(free_port()), "--data-dir",
                          str(tmp_path / "data"), "--database", f"postgresql://nobody@/x?host={tmp_path}"],
                         cwd=ROOT, capture_output=True, text=True, timeout=60)
    assert run.returncode == 1
    assert run.stderr.count("\n") == 1 and "cannot be opened" in run.stderr
