"""SqlStore on SQLite and PostgreSQL: the StoreBackend interface, the same records as SQLiteStore, uploads kept
in the database with their SHA-256 (hashlib on the same bytes), immutable snapshots and an append-only audit
log refused by the database itself, concurrent saves, and kill -9 during saves."""
from __future__ import annotations

import hashlib
import math
import os
import signal
import subprocess
import sys
import threading
from pathlib import Path

import numpy as np
import pytest
import sqlalchemy as sa

from server.sqlstore import CHUNK_BYTES, SqlStore
from server.store import SQLiteStore, StartupError, StorageError, StoreBackend

RAW = b"id,Q1,Q2\r\n1,1,2\r\n2,3,4\r\n3,5,\xe9\r\n"  # CRLF and a Latin-1 byte: must come back unchanged
CODEBOOK = b"item,text\nQ1,I belong\n"
ROOT = Path(__file__).resolve().parents[2]


def _add(store, raw=RAW, **kw):
    args = {"name": "pilot", "raw": raw, "filename": "pilot.csv", "codebook_raw": None, "codebook_filename": None,
            "options": {"missing_codes": [-9.0], "id_column": None}, "meta": {"n_rows": 3}}
    args.update(kw)
    return store.add_dataset(**args)


@pytest.fixture
def store(sql_url):
    s = SqlStore(sql_url)
    yield s
    s.close()


def _same_shape(ours: dict, theirs: dict, differ=("id", "created_at", "dataset_id")) -> None:
    """Field by field: the same keys, equal values but for ids and times, which have the same form."""
    assert list(ours) == list(theirs)
    for key in ours:
        if key in differ:
            assert type(ours[key]) is type(theirs[key]) and len(ours[key]) == len(theirs[key]), key
        else:
            assert ours[key] == theirs[key] or (ours[key] != ours[key] and theirs[key] != theirs[key]), key


def test_implements_the_interface(store):
    assert isinstance(store, StoreBackend)
    assert store.backend in ("sqlite", "postgresql")
    assert store.revision == "0004"


def test_dataset_records_match_sqlite_store_field_by_field(store, tmp_path):
    folder = SQLiteStore(tmp_path / "folder")
    kw = {"codebook_raw": CODEBOOK, "codebook_filename": "cb.csv"}
    ours, theirs = _add(store, **kw), _add(folder, **kw)
    _same_shape(ours, theirs)
    assert ours["sha256"] == hashlib.sha256(RAW).hexdigest()  # hashlib on the same bytes
    assert ours["codebook_sha256"] == hashlib.sha256(CODEBOOK).hexdigest()
    assert ours["created_at"].endswith("Z")
    _same_shape(store.get_dataset(ours["id"]), folder.get_dataset(theirs["id"]))
    assert store.get_dataset(ours["id"]) == ours
    _same_shape(store.list_datasets()[0], folder.list_datasets()[0])
    assert store.read_raw(ours["id"]) == RAW
    assert store.read_codebook(ours["id"]) == CODEBOOK
    plain = _add(store)
    assert store.read_codebook(plain["id"]) is None and plain["codebook_filename"] is None
    _same_shape(plain, _add(folder))


def test_empty_file_and_empty_codebook_are_kept(store):
    rec = _add(store, raw=b"", codebook_raw=b"", codebook_filename="cb.csv")
    assert store.read_raw(rec["id"]) == b"" and store.read_codebook(rec["id"]) == b""
    assert rec["sha256"] == hashlib.sha256(b"").hexdigest() and rec["size_bytes"] == 0


def test_list_newest_first_and_delete(store):
    a, b, c = (_add(store, name=n) for n in "abc")
    assert [d["id"] for d in store.list_datasets()] == [c["id"], b["id"], a["id"]]
    assert store.delete_dataset(b["id"]) is True
    assert store.delete_dataset(b["id"]) is False
    assert store.get_dataset(b["id"]) is None
    with pytest.raises(KeyError):
        store.read_raw(b["id"])
    with pytest.raises(KeyError):
        store.read_codebook(b["id"])
    assert [d["id"] for d in store.list_datasets()] == [c["id"], a["id"]]
    with store.engine.connect() as con:  # its bytes are gone from the database too
        left = con.execute(sa.text("SELECT count(*) FROM dataset_files WHERE dataset_id = :d"),
                           {"d": b["id"]}).scalar()
    assert left == 0


def test_unknown_and_malformed_ids(store):
    assert store.get_dataset("nope") is None
    assert store.get_snapshot("nope") is None
    assert store.list_snapshots("nope") == []
    with pytest.raises(KeyError):
        store.read_raw("../../etc")
    with pytest.raises(KeyError):
        store.add_snapshot("nope", {"name": "x"})
    assert store.list_snapshots("nope") == []


def test_nul_in_ids_and_names_is_no_error(store):
    # PostgreSQL text cannot hold NUL: an id with one names nothing, a name keeps U+FFFD in its place
    bad = "ab\x00cd"
    assert store.get_dataset(bad) is None and store.get_snapshot(bad) is None and store.list_snapshots(bad) == []
    assert store.delete_dataset(bad) is False and store.list_audit(dataset_id=bad) == []
    for call in (store.read_raw, store.read_codebook, lambda i: store.add_snapshot(i, {})):
        with pytest.raises(KeyError):
            call(bad)
    rec = _add(store, name="pi\x00lot", filename="a\x00.csv")
    assert rec["name"] == "pi\ufffdlot" and store.get_dataset(rec["id"]) == rec
    entry = store.audit("upload\x00", who="A\x00na", dataset_id=bad, details={"x": "\x00"})
    assert store.list_audit() == [entry] and entry["who"] == "A\ufffdna" and entry["details"] == {"x": "\x00"}


def test_snapshots_round_trip_like_sqlite_store(store, tmp_path):
    folder = SQLiteStore(tmp_path / "folder")
    ds, fds = _add(store), _add(folder)
    other = _add(store, name="other")
    record = {"name": "v1", "items": ["Q1", "Q2"], "reliability": {"alpha": 0.1 + 0.2, "omega": float("nan")},
              "n": np.int64(3), "loadings": np.array([[0.5, 0.25]]), "text": "caf\u00e9 \u0000 \U0001f600"}
    s1, f1 = store.add_snapshot(ds["id"], record), folder.add_snapshot(fds["id"], record)
    _same_shape(s1, f1)
    s2 = store.add_snapshot(ds["id"], {"name": "v2", "parent": s1["id"]})
    store.add_snapshot(other["id"], {"name": "elsewhere"})
    assert s1["id"] != s2["id"] and s1["dataset_id"] == ds["id"] and s1["created_at"].endswith("Z")
    got = store.get_snapshot(s1["id"])
    _same_shape(got, folder.get_snapshot(f1["id"]))
    assert got["reliability"]["alpha"] == 0.1 + 0.2  # floats round-trip exactly
    assert math.isnan(got["reliability"]["omega"])
    assert got["n"] == 3 and got["loadings"] == [[0.5, 0.25]] and got["text"] == record["text"]
    assert [s["name"] for s in store.list_snapshots(ds["id"])] == ["v2", "v1"]
    assert "id" not in record  # the caller's dict is not changed


def test_snapshots_and_audit_are_refused_changes_by_the_database(store):
    ds = _add(store)
    snap = store.add_snapshot(ds["id"], {"name": "v1"})
    store.audit("upload", who="me", dataset_id=ds["id"])
    assert not hasattr(store, "update_snapshot") and not hasattr(store, "delete_snapshot")
    statements = ["UPDATE snapshots SET record = '{}'", "DELETE FROM snapshots",
                  "UPDATE audit SET who = 'someone else'", "DELETE FROM audit"]
    if store.backend == "postgresql":
        statements += ["TRUNCATE snapshots", "TRUNCATE audit"]
    for sql in statements:
        with pytest.raises(sa.exc.DBAPIError, match="immutable|append-only"), store.engine.begin() as con:
            con.execute(sa.text(sql))
    store.delete_dataset(ds["id"])  # deleting the dataset keeps its snapshots
    assert store.get_snapshot(snap["id"])["name"] == "v1"
    assert [e["action"] for e in store.list_audit()] == ["upload"]


def test_audit_entries_match_sqlite_store(store, tmp_path):
    folder = SQLiteStore(tmp_path / "folder")
    for target in (store, folder):
        target.audit("upload", who="  Ana  ", dataset_id="d1", details={"sha256": "ab", "x": np.float64(0.5)})
        target.audit("delete", who=None, dataset_id="d2")
        target.audit("snapshot", who="", dataset_id="d1", snapshot_id="s1")
    ours, theirs = store.list_audit(), folder.list_audit()
    assert len(ours) == 3
    for a, b in zip(ours, theirs):
        assert list(a) == list(b) and {k: v for k, v in a.items() if k != "at"} == {
            k: v for k, v in b.items() if k != "at"}
    assert [e["action"] for e in store.list_audit(dataset_id="d1")] == ["snapshot", "upload"]
    assert [e["action"] for e in store.list_audit(limit=1)] == ["snapshot"]


def test_restart_sees_everything(sql_url):
    store = SqlStore(sql_url)
    ds = _add(store)
    snap = store.add_snapshot(ds["id"], {"name": "v1"})
    store.close()
    again = SqlStore(sql_url)
    assert again.get_dataset(ds["id"])["sha256"] == hashlib.sha256(RAW).hexdigest()
    assert again.read_raw(ds["id"]) == RAW
    assert again.get_snapshot(snap["id"])["name"] == "v1"
    assert again.list_audit() == []  # no upgrade happened, so nothing to log
    again.close()


def test_concurrent_snapshot_saves_all_land(store):
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


# ---- an upload already on disk is streamed in, part by part, and removed after a success

def test_raw_path_is_streamed_in_parts_with_its_hash(store, tmp_path):
    data = bytes(range(256)) * (CHUNK_BYTES * 5 // 2 // 256 + 1)  # two and a half parts
    src = tmp_path / "upload.part"
    src.write_bytes(data)
    rec = _add(store, raw=None, raw_path=src)
    assert not src.exists()
    assert store.read_raw(rec["id"]) == data
    assert rec["sha256"] == hashlib.sha256(data).hexdigest() and rec["size_bytes"] == len(data)
    with store.engine.connect() as con:
        sizes = con.execute(sa.text("SELECT length(data) FROM dataset_files WHERE dataset_id = :d AND kind = 'raw' "
                                    "ORDER BY part"), {"d": rec["id"]}).scalars().all()
    assert sizes == [CHUNK_BYTES, CHUNK_BYTES, len(data) - 2 * CHUNK_BYTES]


def test_a_failure_midway_leaves_nothing(store, tmp_path, monkeypatch):
    src = tmp_path / "upload.part"
    src.write_bytes(RAW * 1000)
    real = SqlStore._put_file

    def fail_on_codebook(conn, dataset_id, kind, chunks):
        if kind == "codebook":
            raise OSError(28, "No space left on device")
        return real(conn, dataset_id, kind, chunks)

    monkeypatch.setattr(SqlStore, "_put_file", staticmethod(fail_on_codebook))
    with pytest.raises(StorageError) as caught:
        _add(store, raw=None, raw_path=src, codebook_raw=CODEBOOK, codebook_filename="cb.csv")
    assert caught.value.status == 507
    monkeypatch.undo()
    assert src.exists()  # the caller's to remove
    assert store.list_datasets() == []
    with store.engine.connect() as con:
        assert con.execute(sa.text("SELECT count(*) FROM dataset_files")).scalar() == 0


def test_raw_and_raw_path_are_exclusive(store, tmp_path):
    with pytest.raises(TypeError):
        _add(store, raw=RAW, raw_path=tmp_path / "x")
    with pytest.raises(TypeError):
        _add(store, raw=None)
    assert store.list_datasets() == []


# ---- faults at start

def test_unreachable_postgresql_is_one_line(tmp_path):
    with pytest.raises(StartupError) as caught:
        SqlStore(f"postgresql://nobody:secret@/scalewright?host={tmp_path}&connect_timeout=2")
    text = str(caught.value)
    assert "\n" not in text and "cannot be opened" in text and "secret" not in text


def test_other_databases_are_refused():
    with pytest.raises(StartupError, match="neither SQLite nor PostgreSQL"):
        SqlStore("mysql://root@localhost/scalewright")
    with pytest.raises(StartupError, match="cannot be read"):
        SqlStore("not a url")


def test_postgresql_faults_map_to_storage_errors():
    from server.sqlstore import _pg_storage_error

    class Fault(Exception):
        def __init__(self, sqlstate):
            self.sqlstate = sqlstate

    # SQLSTATE codes: PostgreSQL 15 documentation, Appendix A
    assert _pg_storage_error(Fault("53100")).status == 507  # disk_full
    assert _pg_storage_error(Fault("08006")).status == 503  # connection_failure
    assert _pg_storage_error(Fault("25006")).status == 503  # read_only_sql_transaction
    assert _pg_storage_error(Fault("23505")) is None  # unique_violation: not a storage fault


_SAVER = r"""
import sys
sys.path.insert(0, sys.argv[1])
from server.sqlstore import SqlStore
store = SqlStore(sys.argv[2])
i = 0
while True:
    rec = store.add_snapshot(sys.argv[3], {"name": f"s{i}", "payload": [i + j / 7 for j in range(4000)]})
    print(rec["id"], i, flush=True)  # acknowledged only after the transaction committed
    i += 1
"""


def test_kill_9_while_saving_loses_no_acknowledged_snapshot(sql_url):
    ds = _add(SqlStore(sql_url))
    acked: dict[str, int] = {}
    for stop_after in (5, 20):  # kill at two different moments, restarting in between
        child = subprocess.Popen([sys.executable, "-c", _SAVER, str(ROOT), sql_url, ds["id"]],
                                 stdout=subprocess.PIPE, text=True)
        for seen, line in enumerate(child.stdout, start=1):
            sid, i = line.split()
            acked[sid] = int(i)
            if seen >= stop_after:
                os.kill(child.pid, signal.SIGKILL)
                break
        rest, _ = child.communicate(timeout=30)
        for line in rest.splitlines():
            if line.strip():
                sid, i = line.split()
                acked[sid] = int(i)
        assert child.returncode == -signal.SIGKILL
        store = SqlStore(sql_url)  # "restart"
        listed = store.list_snapshots(ds["id"])
        for snap in listed:  # nothing half-written: every stored snapshot is whole
            i = int(snap["name"][1:])
            assert snap["payload"] == [i + j / 7 for j in range(4000)]
        assert set(acked) <= {s["id"] for s in listed}
        store.close()
    assert len(acked) >= 25
