"""Store: the data folder's SQLite file in WAL mode, uploads byte for byte, immutable snapshots, restarts."""
from __future__ import annotations

import hashlib
import math
import sqlite3
import threading

import numpy as np
import pytest

from server.folder_store import DB_FILE
from server.sqlstore import SqlStore
from server.store import Store, StoreBackend

RAW = b"id,Q1,Q2\r\n1,1,2\r\n2,3,4\r\n3,5,\xe9\r\n"  # CRLF and a Latin-1 byte: must come back unchanged


def _add(store, raw=RAW, **kw):
    args = {"name": "pilot", "raw": raw, "filename": "pilot.csv", "codebook_raw": None, "codebook_filename": None,
                "options": {"missing_codes": [-9.0], "id_column": None}, "meta": {"n_rows": 3}}
    args.update(kw)
    return store.add_dataset(**args)


def test_store_is_sqlite_behind_the_interface(tmp_path):
    store = Store(tmp_path)
    assert isinstance(store, SqlStore) and store.backend == "sqlite"  # the same code as a team server's
    assert isinstance(store, StoreBackend)
    assert (tmp_path / DB_FILE).exists()
    assert str(store.url) == f"sqlite:///{tmp_path.resolve() / DB_FILE}"


def test_wal_mode_is_on(tmp_path):
    Store(tmp_path)
    # A fresh connection from outside sees WAL (it is stored in the database file).
    con = sqlite3.connect(tmp_path / DB_FILE)
    assert con.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    con.close()


def test_dataset_round_trip_keeps_bytes_and_hash(tmp_path):
    store = Store(tmp_path)
    rec = _add(store, codebook_raw=b"item,text\nQ1,I belong\n", codebook_filename="cb.csv")
    assert rec["sha256"] == hashlib.sha256(RAW).hexdigest()  # hashlib on the same bytes
    assert rec["codebook_sha256"] == hashlib.sha256(b"item,text\nQ1,I belong\n").hexdigest()
    assert store.read_raw(rec["id"]) == RAW
    assert store.read_codebook(rec["id"]) == b"item,text\nQ1,I belong\n"
    got = store.get_dataset(rec["id"])
    assert got == rec
    assert got["options"] == {"missing_codes": [-9.0], "id_column": None}
    assert got["meta"] == {"n_rows": 3}
    assert got["created_at"].endswith("Z")


def test_no_codebook_reads_none(tmp_path):
    store = Store(tmp_path)
    rec = _add(store)
    assert store.read_codebook(rec["id"]) is None
    assert rec["codebook_filename"] is None


def test_list_newest_first_and_delete(tmp_path):
    store = Store(tmp_path)
    a, b, c = (_add(store, name=n) for n in "abc")
    assert [d["id"] for d in store.list_datasets()] == [c["id"], b["id"], a["id"]]
    assert store.delete_dataset(b["id"]) is True
    assert store.delete_dataset(b["id"]) is False
    assert store.get_dataset(b["id"]) is None
    assert not (tmp_path / "datasets" / b["id"]).exists()
    with pytest.raises(KeyError):
        store.read_raw(b["id"])
    assert [d["id"] for d in store.list_datasets()] == [c["id"], a["id"]]


def test_unknown_and_malformed_ids(tmp_path):
    store = Store(tmp_path)
    assert store.get_dataset("nope") is None
    assert store.get_snapshot("nope") is None
    assert store.list_snapshots("nope") == []
    with pytest.raises(KeyError):
        store.read_raw("../../etc")
    with pytest.raises(KeyError):
        store.add_snapshot("nope", {"name": "x"})


def test_snapshots_list_newest_first_and_round_trip(tmp_path):
    store = Store(tmp_path)
    ds = _add(store)
    other = _add(store, name="other")
    record = {"name": "v1", "items": ["Q1", "Q2"], "reliability": {"alpha": 0.1 + 0.2, "omega": float("nan")},
              "n": np.int64(3), "loadings": np.array([[0.5, 0.25]])}
    s1 = store.add_snapshot(ds["id"], record)
    s2 = store.add_snapshot(ds["id"], {"name": "v2", "parent": s1["id"]})
    store.add_snapshot(other["id"], {"name": "elsewhere"})
    assert s1["id"] != s2["id"]
    assert s1["dataset_id"] == ds["id"] and s1["created_at"].endswith("Z")
    got = store.get_snapshot(s1["id"])
    assert set(got) == set(s1) and got["id"] == s1["id"] and got["items"] == ["Q1", "Q2"]
    assert got["reliability"]["alpha"] == 0.1 + 0.2  # floats round-trip exactly
    assert math.isnan(got["reliability"]["omega"])
    assert got["n"] == 3 and got["loadings"] == [[0.5, 0.25]]
    assert [s["name"] for s in store.list_snapshots(ds["id"])] == ["v2", "v1"]
    assert "id" not in record  # the caller's dict is not changed


def test_snapshots_are_immutable_even_through_sql(tmp_path):
    store = Store(tmp_path)
    ds = _add(store)
    snap = store.add_snapshot(ds["id"], {"name": "v1"})
    assert not hasattr(store, "update_snapshot") and not hasattr(store, "delete_snapshot")
    con = sqlite3.connect(tmp_path / DB_FILE)
    with pytest.raises(sqlite3.DatabaseError, match="immutable"):
        con.execute("UPDATE snapshots SET record = '{}' WHERE id = ?", (snap["id"],))
    with pytest.raises(sqlite3.DatabaseError, match="immutable"):
        con.execute("DELETE FROM snapshots WHERE id = ?", (snap["id"],))
    con.close()
    # Deleting the dataset keeps its snapshots.
    store.delete_dataset(ds["id"])
    assert store.get_snapshot(snap["id"])["name"] == "v1"


def test_restart_sees_everything(tmp_path):
    store = Store(tmp_path)
    ds = _add(store)
    snap = store.add_snapshot(ds["id"], {"name": "v1"})
    del store
    again = Store(tmp_path)
    assert again.get_dataset(ds["id"])["sha256"] == hashlib.sha256(RAW).hexdigest()
    assert again.read_raw(ds["id"]) == RAW
    assert again.get_snapshot(snap["id"])["name"] == "v1"


def test_concurrent_snapshot_saves_all_land(tmp_path):
    store = Store(tmp_path)
    ds = _add(store)
    ids: list[str] = []
    lock = threading.Lock()

    def work(t):
        for i in range(10):
            s = store.add_snapshot(ds["id"], {"name": f"{t}-{i}"})
            with lock:
                ids.append(s["id"])

    threads = [threading.Thread(target=work, args=(t,)) for t in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    listed = store.list_snapshots(ds["id"])
    assert len(listed) == 40 and len(set(ids)) == 40
    assert {s["id"] for s in listed} == set(ids)


def test_no_temp_files_left(tmp_path):
    store = Store(tmp_path)
    _add(store)
    store.close()
    assert {p.name for p in tmp_path.rglob("*")} <= {DB_FILE, f"{DB_FILE}-wal", f"{DB_FILE}-shm"}


_SAVER = r"""
import sys
sys.path.insert(0, sys.argv[1])
from server.store import Store
store = Store(sys.argv[2])
dataset_id = sys.argv[3]
i = 0
while True:
    rec = store.add_snapshot(dataset_id, {"name": f"s{i}", "payload": [i + j / 7 for j in range(4000)]})
    print(rec["id"], i, flush=True)  # acknowledged only after the transaction committed
    i += 1
"""


def test_kill_9_while_saving_loses_no_acknowledged_snapshot(tmp_path):
    import os
    import signal
    import subprocess
    import sys
    from pathlib import Path

    root = Path(__file__).resolve().parent.parent
    ds = _add(Store(tmp_path))
    acked: dict[str, int] = {}
    for stop_after in (5, 20, 40):  # kill at a few different moments, restarting in between
        child = subprocess.Popen([sys.executable, "-c", _SAVER, str(root), str(tmp_path), ds["id"]],
                                 stdout=subprocess.PIPE, text=True)
        for seen, line in enumerate(child.stdout, start=1):
            sid, i = line.split()
            acked[sid] = int(i)
            if seen >= stop_after:
                os.kill(child.pid, signal.SIGKILL)
                break
        rest, _ = child.communicate(timeout=30)
        for line in rest.splitlines():  # acknowledgements printed before the kill landed
            if line.strip():
                sid, i = line.split()
                acked[sid] = int(i)
        assert child.returncode == -signal.SIGKILL
        store = Store(tmp_path)  # "restart"
        con = sqlite3.connect(tmp_path / DB_FILE)
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        con.close()
        listed = store.list_snapshots(ds["id"])
        for snap in listed:  # nothing half-written: every stored snapshot is whole
            i = int(snap["name"][1:])
            assert snap["payload"] == [i + j / 7 for j in range(4000)]
        stored_ids = {s["id"] for s in listed}
        assert set(acked) <= stored_ids
        for sid, i in acked.items():
            assert store.get_snapshot(sid)["name"] == f"s{i}"
    assert len(acked) >= 65


# ---- a response file given as a path (an upload already on disk) is moved, not written from memory

def test_raw_path_is_moved_into_place_with_its_hash(tmp_path):
    store = Store(tmp_path / "data")
    src = tmp_path / "data" / "upload.part"
    src.write_bytes(RAW * 1000)
    rec = _add(store, raw=None, raw_path=src)
    assert not src.exists()
    assert store.read_raw(rec["id"]) == RAW * 1000
    assert rec["sha256"] == hashlib.sha256(RAW * 1000).hexdigest() and rec["size_bytes"] == len(RAW) * 1000
    assert store.get_dataset(rec["id"])["sha256"] == rec["sha256"]


def test_raw_path_on_another_disk_is_copied_then_removed(tmp_path, monkeypatch):
    import errno
    import os

    store = Store(tmp_path / "data")
    src = tmp_path / "elsewhere.part"
    src.write_bytes(RAW)
    real_replace = os.replace

    def cross_device(a, b):
        if os.fspath(a) == os.fspath(src):
            raise OSError(errno.EXDEV, "Invalid cross-device link")
        return real_replace(a, b)

    monkeypatch.setattr(os, "replace", cross_device)
    rec = _add(store, raw=None, raw_path=src)
    assert not src.exists() and store.read_raw(rec["id"]) == RAW
    assert not list((tmp_path / "data" / "datasets" / rec["id"]).glob(".*.tmp"))


def test_raw_path_failure_midway_leaves_no_row_and_no_part(tmp_path, monkeypatch):
    store = Store(tmp_path / "data")
    src = tmp_path / "data" / "upload.part"
    src.write_bytes(RAW * 400_000)  # several 1 MB parts
    real_put = SqlStore._put_file

    def fail_after_two_parts(conn, dataset_id, kind, chunks):
        def some():
            for i, chunk in enumerate(chunks):
                if i == 2:
                    raise sqlite3.OperationalError("database is locked")
                yield chunk
        return real_put(conn, dataset_id, kind, some())

    monkeypatch.setattr(SqlStore, "_put_file", staticmethod(fail_after_two_parts))
    with pytest.raises(sqlite3.OperationalError):
        _add(store, raw=None, raw_path=src)
    monkeypatch.undo()
    assert store.list_datasets() == [] and src.exists()  # the upload stays the caller's to remove
    con = sqlite3.connect(tmp_path / "data" / DB_FILE)
    assert con.execute("SELECT count(*) FROM dataset_files").fetchone() == (0,)
    con.close()


def test_raw_and_raw_path_are_exclusive(tmp_path):
    store = Store(tmp_path / "data")
    with pytest.raises(TypeError):
        _add(store, raw=RAW, raw_path=tmp_path / "x")
    with pytest.raises(TypeError):
        _add(store, raw=None)
    assert store.list_datasets() == []


def test_upload_leftovers_are_swept_and_nothing_else(tmp_path):
    from server.store import sweep_upload_leftovers

    store = Store(tmp_path / "d")
    rec = store.add_dataset(name="x", raw=b"a,b\n1,2\n2,1\n", filename="x.csv")
    tmp = tmp_path / "d" / "tmp"
    tmp.mkdir(exist_ok=True)
    (tmp / ".upload-abc.part").write_bytes(b"half an upload")
    (tmp / "keep.txt").write_bytes(b"not an upload part")
    assert sweep_upload_leftovers(tmp_path / "d") == 1
    assert sorted(p.name for p in tmp.iterdir()) == ["keep.txt"]
    assert store.read_raw(rec["id"]) == b"a,b\n1,2\n2,1\n"
