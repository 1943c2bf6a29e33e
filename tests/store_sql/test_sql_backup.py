"""Backup and restore of the SQL store (issue 15, item 4), on SQLite and PostgreSQL: the database's backup is the
folder backup's zip format, so it restores into a folder or a database, and a folder's backup restores into a
database. Outside reference: hashlib for the SHA-256 of the bytes."""
from __future__ import annotations

import hashlib
import subprocess
import sys
import zipfile

import pytest

from server.backup import BackupError, backup_database, restore_database, verify
from server.folder_store import backup_folder, restore_folder
from server.sqlstore import SqlStore
from server.store import Store

RAW = b"pid,Q1,Q2,Q3\np1,1,2,3\np2,3,2,1\np3,2,2,2\n" * 50
CODEBOOK = "item,text\nQ1,Caf\u00e9 \u2615\nQ2,Two\nQ3,Three\n".encode()
BIG = bytes(range(256)) * 9000  # more than one 1 MB part in the database


@pytest.fixture
def other_url(request, sql_url, tmp_path) -> str:
    """A second empty database on the same backend as ``sql_url``."""
    if sql_url.startswith("sqlite"):
        return f"sqlite:///{tmp_path / 'db2' / 'scalewright.db'}"
    return request.getfixturevalue("pg_cluster").new_database()


def _fill(store) -> dict:
    kept = store.add_dataset(name="Wave 1", raw=RAW, filename="w1.csv", codebook_raw=CODEBOOK,
                             codebook_filename="cb.csv", options={"id_column": "pid"}, meta={"n": 150})
    big = store.add_dataset(name="Big", raw=BIG, filename="big.csv")
    gone = store.add_dataset(name="Gone", raw=b"x\n1\n", filename="gone.csv")
    s1 = store.add_snapshot(kept["id"], {"name": "first", "items": ["Q1", "Q2"]})
    s2 = store.add_snapshot(gone["id"], {"name": "outlives its dataset"})
    store.delete_dataset(gone["id"])
    store.audit("note", who="Ana", details={"x": 1})
    return {"kept": kept, "big": big, "snapshots": [s1, s2]}


def _contents(store) -> dict:
    datasets = {d["id"]: d for d in store.list_datasets()}
    return {"datasets": datasets,
            "raw": {i: hashlib.sha256(store.read_raw(i)).hexdigest() for i in datasets},  # hashlib
            "codebook": {i: store.read_codebook(i) for i in datasets},
            "snapshots": {i: store.list_snapshots(i) for i in datasets}}


def test_a_database_backup_restores_into_a_folder_and_a_database(sql_url, other_url, tmp_path):
    store = SqlStore(sql_url)
    filled = _fill(store)
    before = _contents(store)
    out = backup_database(sql_url, tmp_path / "b.zip", who="Ana")
    assert out["datasets"] == 2 and out["snapshots"] == 2
    assert store.list_audit(limit=1)[0]["action"] == "backup"
    gone_snapshot = filled["snapshots"][1]
    store.close()
    checked = verify(tmp_path / "b.zip", tmp_path)  # the folder format's own checks
    assert {f["path"] for f in checked.manifest["files"]} >= {f"datasets/{filled['big']['id']}/raw"}
    with zipfile.ZipFile(tmp_path / "b.zip") as zf:
        assert zf.read(f"datasets/{filled['big']['id']}/raw") == BIG

    restore_folder(tmp_path / "folder", tmp_path / "b.zip")  # into a folder
    folder = Store(tmp_path / "folder")
    assert _contents(folder) == before
    assert folder.get_snapshot(gone_snapshot["id"]) == gone_snapshot
    assert {"note", "restore"} <= {e["action"] for e in folder.list_audit()}  # the backup is logged after its copy

    out = restore_database(other_url, tmp_path / "b.zip", who="Ben")  # into another database
    assert out["mode"] == "new" and out["datasets"] == 2 and out["snapshots"] == 2
    again = SqlStore(other_url)
    try:
        assert _contents(again) == before
        assert again.get_snapshot(gone_snapshot["id"]) == gone_snapshot
        actions = [e["action"] for e in again.list_audit()]
        assert actions[0] == "restore" and "note" in actions
        with pytest.raises(BackupError, match="not empty"):
            restore_database(other_url, tmp_path / "b.zip")
        merged = restore_database(other_url, tmp_path / "b.zip", merge=True)
        assert merged["datasets_added"] == [] and len(merged["snapshots_skipped"]) == 2
        assert _contents(again) == before
    finally:
        again.close()


def test_a_folder_backup_restores_into_a_database_and_merges_add_only_what_is_new(sql_url, tmp_path):
    folder = Store(tmp_path / "folder")
    _fill(folder)
    before = _contents(folder)
    backup_folder(tmp_path / "folder", tmp_path / "f.zip")
    restore_database(sql_url, tmp_path / "f.zip")
    store = SqlStore(sql_url)
    try:
        assert _contents(store) == before
        # a dataset deleted since the backup comes back with a merge; nothing else changes
        victim = next(iter(before["datasets"]))
        store.delete_dataset(victim)
        merged = restore_database(sql_url, tmp_path / "f.zip", merge=True)
        assert merged["datasets_added"] == [victim]
        assert _contents(store) == before
    finally:
        store.close()
    # another folder's backup merges in: its dataset (a new id) is added
    other = Store(tmp_path / "other")
    other.add_dataset(name="x", raw=b"a\n1\n", filename="x.csv")
    backup_folder(tmp_path / "other", tmp_path / "o.zip")
    with zipfile.ZipFile(tmp_path / "o.zip") as zf:
        assert any(n.startswith("datasets/") for n in zf.namelist())
    store = SqlStore(sql_url)
    try:
        n_before = len(store.list_datasets())
        restore_database(sql_url, tmp_path / "o.zip", merge=True)  # new ids: added
        assert len(store.list_datasets()) == n_before + 1
    finally:
        store.close()


@pytest.mark.slow  # runs the command twice
def test_backup_and_restore_commands_take_a_database(pg_cluster, tmp_path):
    from tests.serverproc import ROOT

    source, target = pg_cluster.new_database(), pg_cluster.new_database()
    store = SqlStore(source)
    _fill(store)
    before = _contents(store)
    store.close()
    run = subprocess.run([sys.executable, "-m", "server", "backup", "--database", source, "--out",
                          str(tmp_path / "c.zip"), "--who", "Ana"], cwd=ROOT, capture_output=True, text=True,
                         timeout=120)
    assert run.returncode == 0, run.stderr
    assert "Backed up 2 datasets and 2 snapshots" in run.stdout
    run = subprocess.run([sys.executable, "-m", "server", "restore", "--database", target, str(tmp_path / "c.zip")],
                         cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stderr
    assert "Restored 2 datasets and 2 snapshots" in run.stdout
    again = SqlStore(target)
    try:
        assert _contents(again) == before
    finally:
        again.close()
    run = subprocess.run([sys.executable, "-m", "server", "restore", "--database", target, str(tmp_path / "c.zip")],
                         cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert run.returncode == 1 and run.stderr.count("\n") == 1 and "not empty" in run.stderr


from tests.store_sql.test_people_api import bearer, team  # noqa: E402,F401  (the team fixture)


def test_a_team_servers_backup_keeps_people_workspaces_and_tokens(team, other_url, tmp_path):  # noqa: F811
    """People, two workspaces, their datasets and snapshots survive backup -> restore into an empty database:
    the same tokens sign in and see the same datasets; another workspace's ids are still 404."""
    from server.app import create_app
    from server.settings import Settings
    from tests.conftest import local_client

    _, tokens, ids, url = team
    backup_database(url, tmp_path / "t.zip")
    with zipfile.ZipFile(tmp_path / "t.zip") as zf:
        stored = zf.read("team.json")
    assert tokens["Ana"].encode() not in stored and tokens["Ana"].split("_")[-1].encode() not in stored
    out = restore_database(other_url, tmp_path / "t.zip")
    assert out["datasets"] == 2 and out["snapshots"] == 2
    app = create_app(Settings(data_dir=tmp_path / "data2", database_url=other_url))
    with local_client(app) as client:
        ana, otto, vic = bearer(tokens["Ana"]), bearer(tokens["Otto"]), bearer(tokens["Vic"])
        assert [d["id"] for d in client.get("/api/datasets", headers=ana).json()] == [ids["lab"]]
        assert [d["id"] for d in client.get("/api/datasets", headers=vic).json()] == [ids["lab"]]
        assert [d["id"] for d in client.get("/api/datasets", headers=otto).json()] == [ids["other"]]
        assert client.get(f"/api/snapshots/{ids['lab_snap']}", headers=ana).json()["author"] == "Ana"
        assert client.get(f"/api/datasets/{ids['lab']}", headers=otto).status_code == 404
        assert client.get(f"/api/snapshots/{ids['lab_snap']}", headers=otto).status_code == 404
        assert client.get(f"/api/snapshots/{ids['other_snap']}", headers=ana).status_code == 404
        assert client.get("/api/session", headers=vic).json()["role"] == "viewer"
        assert client.get("/api/datasets", headers=bearer(tokens["Ana"][:-1] + "!")).status_code == 401
        audit = client.get("/api/audit", headers=otto).json()
        assert audit and {e["dataset_id"] for e in audit} == {ids["other"]}
    # the same zip into a folder (which has no people): the datasets, and no team.json in the folder
    restore_folder(tmp_path / "folder", tmp_path / "t.zip")
    assert sorted(d["id"] for d in Store(tmp_path / "folder").list_datasets()) == sorted([ids["lab"], ids["other"]])
    assert not (tmp_path / "folder" / "team.json").exists()
    # merging the backup again adds nothing and keeps one Ana
    again = SqlStore(other_url)
    try:
        merged = restore_database(other_url, tmp_path / "t.zip", merge=True)
        assert merged["datasets_added"] == [] and len(merged["snapshots_skipped"]) == 2
        from server.people import list_people
        assert sorted(p["name"] for p in list_people(again)) == ["Ana", "Olga", "Otto", "Vic"]
    finally:
        again.close()


def test_a_malformed_team_member_is_refused_before_anything_is_written(sql_url, other_url, tmp_path):
    import json

    store = SqlStore(sql_url)
    _fill(store)
    store.close()
    backup_database(sql_url, tmp_path / "b.zip")
    with zipfile.ZipFile(tmp_path / "b.zip") as zf:
        members = {n: zf.read(n) for n in zf.namelist()}
    team_json = json.loads(members["team.json"])
    team_json["memberships"].append({"person_id": "nobody", "workspace_id": "default", "role": "owner"})
    members["team.json"] = json.dumps(team_json).encode()
    manifest = json.loads(members["manifest.json"])
    for f in manifest["files"]:
        if f["path"] == "team.json":
            f["size"], f["sha256"] = len(members["team.json"]), hashlib.sha256(members["team.json"]).hexdigest()
    members["manifest.json"] = json.dumps(manifest).encode()
    with zipfile.ZipFile(tmp_path / "bad.zip", "w") as zf:
        for name, data in members.items():
            zf.writestr(name, data)
    with pytest.raises(BackupError, match="malformed membership"):
        restore_database(other_url, tmp_path / "bad.zip")
    again = SqlStore(other_url)
    try:
        assert again.list_datasets() == []
    finally:
        again.close()
