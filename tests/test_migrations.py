"""Schema version and migrations of the earlier folder store (server.store.SQLiteStore): a data folder written by
version 1 (tests/reference/store/v1_data, made by the committed code of c7dc338) is upgraded in place and keeps
its dataset and snapshot; the server then imports it into the folder's scalewright.db (server/folder_store.py)."""
from __future__ import annotations

import hashlib
import shutil
import sqlite3
from pathlib import Path

import pytest

import server.store as store_mod
from server.app import create_app
from server.settings import Settings
from server.store import DB_NAME, SCHEMA_VERSION, SchemaVersionError, SQLiteStore, StartupError
from tests.conftest import local_client

V1 = Path(__file__).parent / "reference" / "store" / "v1_data"
V1_DATASET = "81fe862131c743d5"  # tests/reference/store/README.md
V1_SHA256 = "173065e3a5f69f671d4149fd5dc56b7dcab84d2fa4e3c8420f18c5fcd70c6fe6"


@pytest.fixture
def v1_dir(tmp_path) -> Path:
    target = tmp_path / "v1"
    shutil.copytree(V1, target)
    return target


def _sql(folder: Path, query: str, args=()):
    con = sqlite3.connect(folder / DB_NAME)
    try:
        return con.execute(query, args).fetchall()
    finally:
        con.close()


def _tables(folder: Path) -> set[str]:
    return {r[0] for r in _sql(folder, "SELECT name FROM sqlite_master WHERE type IN ('table', 'trigger')")}


def test_fixture_is_version_1_without_wal_files():
    assert {p.name for p in V1.iterdir()} == {DB_NAME, "datasets"}
    assert _sql(V1, "SELECT value FROM meta WHERE key = 'schema_version'") == [("1",)]
    assert "audit" not in _tables(V1)


def test_v1_folder_is_upgraded_and_keeps_its_data(v1_dir):
    snap_before = _sql(v1_dir, "SELECT id, dataset_id, created_at, record FROM snapshots")
    ds_before = _sql(v1_dir, "SELECT * FROM datasets")
    store = SQLiteStore(v1_dir)
    assert _sql(v1_dir, "SELECT value FROM meta WHERE key = 'schema_version'") == [(str(SCHEMA_VERSION),)]
    assert {"audit", "audit_no_update", "audit_no_delete"} <= _tables(v1_dir)
    # the version-1 rows are untouched, byte for byte
    assert _sql(v1_dir, "SELECT id, dataset_id, created_at, record FROM snapshots") == snap_before
    assert _sql(v1_dir, "SELECT * FROM datasets") == ds_before
    (entry,) = store.list_audit()
    assert entry["action"] == "schema_upgrade" and entry["details"] == {"from": 1, "to": SCHEMA_VERSION}
    # opening again does not migrate again
    SQLiteStore(v1_dir)
    assert [e["action"] for e in SQLiteStore(v1_dir).list_audit()] == ["schema_upgrade"]
    assert hashlib.sha256(store.read_raw(V1_DATASET)).hexdigest() == V1_SHA256


def test_v1_folder_is_analysable_through_the_api(v1_dir):
    app = create_app(Settings(data_dir=v1_dir))
    with local_client(app) as c:
        (ds,) = c.get("/api/datasets").json()
        assert (ds["id"], ds["name"], ds["sha256"]) == (V1_DATASET, "v1 pilot", V1_SHA256)
        (snap,) = c.get(f"/api/datasets/{V1_DATASET}/snapshots").json()
        assert snap["name"] == "v1 snapshot"
        full = c.get(f"/api/snapshots/{snap['id']}").json()
        assert full["items"] == ["Q1", "Q2", "Q3"] and full["removed"][0]["item"] == "Q4"
        r = c.post(f"/api/datasets/{V1_DATASET}/analysis", json={"items": ["Q1", "Q2", "Q3"]})
        assert r.status_code == 200
        # the snapshot's stored alpha is what today's code computes for the same items
        assert r.json()["reliability"]["alpha"] == pytest.approx(full["analysis"]["reliability"]["alpha"], abs=1e-12)
        assert c.get(f"/api/snapshots/{snap['id']}/report").status_code == 200
        assert c.get(f"/api/snapshots/{snap['id']}/responses").status_code == 200
        # newest first: the import into scalewright.db, the restore it made, the earlier store's own upgrade
        assert [e["action"] for e in c.get("/api/audit").json()] == ["import_earlier_store", "restore",
                                                                     "schema_upgrade"]
    (moved,) = v1_dir.glob("earlier-store-*")  # the earlier files, kept unchanged beside the new database
    assert {p.name for p in moved.iterdir()} == {DB_NAME, "datasets", "README.txt"}
    assert not (v1_dir / DB_NAME).exists() and (v1_dir / "scalewright.db").is_file()


def test_new_folder_starts_at_the_current_version(tmp_path):
    store = SQLiteStore(tmp_path / "new")
    assert _sql(tmp_path / "new", "SELECT value FROM meta WHERE key = 'schema_version'") == [(str(SCHEMA_VERSION),)]
    assert store.list_audit() == []  # a new folder is not an upgrade


def test_audit_table_is_append_only(tmp_path):
    store = SQLiteStore(tmp_path / "d")
    store.audit("upload", who="Ana", dataset_id="abc", details={"sha256": "0" * 64})
    con = sqlite3.connect(tmp_path / "d" / DB_NAME)
    try:
        for sql in ("UPDATE audit SET who = 'Eve'", "DELETE FROM audit"):
            with pytest.raises(sqlite3.IntegrityError, match="append-only"):
                con.execute(sql)
    finally:
        con.close()
    assert [(e["who"], e["action"]) for e in store.list_audit()] == [("Ana", "upload")]


def test_newer_schema_is_refused_before_anything_is_written(v1_dir):
    con = sqlite3.connect(v1_dir / DB_NAME)
    con.execute("UPDATE meta SET value = '99' WHERE key = 'schema_version'")
    con.commit()
    con.close()
    with pytest.raises(SchemaVersionError, match=r"newer Scalewright \(schema version 99; this version knows up "
                                                 rf"to {SCHEMA_VERSION}\)") as info:
        SQLiteStore(v1_dir)
    assert isinstance(info.value, StartupError)
    assert "audit" not in _tables(v1_dir)


def test_newer_schema_stops_the_server_with_one_line(v1_dir, capsys):
    from server.__main__ import main

    con = sqlite3.connect(v1_dir / DB_NAME)
    con.execute("UPDATE meta SET value = '7' WHERE key = 'schema_version'")
    con.commit()
    con.close()
    assert main(["serve", "--data-dir", str(v1_dir), "--port", "0"]) == 1
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "schema version 7" in err and "Traceback" not in err


def test_a_failing_step_rolls_back_the_whole_migration(v1_dir, monkeypatch):
    SQLiteStore(v1_dir)  # now at version 2
    monkeypatch.setattr(store_mod, "SCHEMA_VERSION", 3)
    monkeypatch.setattr(store_mod, "MIGRATIONS", store_mod.MIGRATIONS + ((3, ("CREATE TABLE t3 (x)", "NOT SQL")),))
    with pytest.raises(sqlite3.OperationalError):
        SQLiteStore(v1_dir)
    assert _sql(v1_dir, "SELECT value FROM meta WHERE key = 'schema_version'") == [("2",)]
    assert "t3" not in _tables(v1_dir)
    monkeypatch.setattr(store_mod, "MIGRATIONS", store_mod.MIGRATIONS[:-1] + ((3, ("CREATE TABLE t3 (x)",)),))
    SQLiteStore(v1_dir)
    assert "t3" in _tables(v1_dir)
    assert _sql(v1_dir, "SELECT value FROM meta WHERE key = 'schema_version'") == [("3",)]
