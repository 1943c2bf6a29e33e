"""Faults: all-or-nothing writes, start-up checks and one server per data folder (issue 9, item 3).

* Full disk: a patched writer that raises ENOSPC midway (always runs) and a real 1 MB tmpfs data folder
  (when ``mount`` works here, i.e. as root). The upload answers 507 with no path in the body and leaves
  no dataset folder, no ``*.tmp`` file and no row.
* Read-only folder: ``chmod`` does not stop root, so a tmpfs remounted read-only stands in (skipped when
  ``mount`` is not available; a patched ``mkdir`` raising EROFS always runs). 503 at upload, refusal at start.
* Corrupt header, unreadable database, damaged page, second server: one line with advice, exit status 1,
  no traceback, nothing written.
"""
from __future__ import annotations

import builtins
import errno
import json
import os
import random
import shutil
import signal
import socket
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import httpx
import numpy as np
import pandas as pd
import pytest
from fastapi.testclient import TestClient

import server.store as store_mod
from server.app import create_app
from server.folder_store import DB_FILE
from server.settings import Settings
from server.sqlstore import SqlStore
from server.store import DB_NAME, LOCK_NAME, SQLiteStore, StartupError, StorageError, Store, lock_data_dir

ROOT = Path(__file__).resolve().parent.parent
BASE = "http://127.0.0.1:8765"  # the Host a page on this machine sends


def csv_bytes(rows: int = 60, items: int = 8, seed: int = 5) -> bytes:
    rng = np.random.default_rng(seed)
    f = rng.normal(size=(rows, 1))
    data = np.clip(np.round(3 + f @ np.full((1, items), 0.9) + rng.normal(scale=0.8, size=(rows, items))), 1, 5)
    df = pd.DataFrame(data.astype(int), columns=[f"Q{i}" for i in range(1, items + 1)])
    df.insert(0, "pid", [f"p{i}" for i in range(rows)])
    return df.to_csv(index=False).encode()


def upload(client: TestClient, raw: bytes, codebook: bytes | None = None) -> httpx.Response:
    files = {"file": ("answers.csv", raw, "text/csv")}
    if codebook is not None:
        files["codebook"] = ("codebook.csv", codebook, "text/csv")
    return client.post("/api/datasets", files=files, data={"id_column": "pid"})


CODEBOOK = b"item,text,scale_min,scale_max\n" + b"".join(f"Q{i},Item {i},1,5\n".encode() for i in range(1, 9))


def leftovers(data_dir: Path) -> tuple[list[str], list[str]]:
    """(dataset folders, temp files) under the data folder."""
    folders = sorted(p.name for p in (data_dir / "datasets").iterdir()) if (data_dir / "datasets").exists() else []
    temps = sorted(str(p.relative_to(data_dir)) for p in data_dir.rglob("*")
                   if p.is_file() and (p.suffix in (".tmp", ".part") or p.parent.name == "tmp"))
    return folders, temps


def assert_plain_storage_error(r: httpx.Response, status: int, code: str, data_dir: Path) -> None:
    assert r.status_code == status, r.text
    body = r.json()
    assert body["error"]["code"] == code
    text = r.text
    for secret in (str(data_dir), str(data_dir.resolve()), "/tmp", "datasets/", ".tmp", "Traceback", "Errno"):
        assert secret not in text, f"{secret!r} leaked into {text}"


# ---- a writer that fails midway

class _FailingFile:
    """Stands in for the temp file: writes the first ``allow`` bytes, then raises like a full disk."""

    def __init__(self, path, allow: int, err: int):
        self.path, self.allow, self.err = Path(path), allow, err
        self._fh = builtins.open(path, "wb")  # noqa: SIM115  (closed by __exit__)

    def write(self, data):
        self._fh.write(bytes(data[: self.allow]))
        self._fh.flush()
        assert self.path.stat().st_size > 0  # the temp file really was half-written
        raise OSError(self.err, os.strerror(self.err), str(self.path))

    def __getattr__(self, name):
        return getattr(self._fh, name)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self._fh.close()


def patch_writer(monkeypatch, *, fail_on: int = 1, err: int = errno.ENOSPC) -> list[Path]:
    """Make the ``fail_on``-th temp-file write in server.store fail midway; returns the temp paths opened."""
    opened: list[Path] = []

    def fake_open(path, mode="r", *args, **kwargs):
        if "w" in mode and str(path).endswith(".tmp"):
            opened.append(Path(path))
            if len(opened) == fail_on:
                return _FailingFile(path, allow=10, err=err)
        return builtins.open(path, mode, *args, **kwargs)

    monkeypatch.setattr(store_mod, "open", fake_open, raising=False)
    return opened


def _fail_put(monkeypatch, kind: str, error: Exception) -> None:
    """Make the store's write of an upload's ``kind`` part ("raw" or "codebook") fail after its first part."""
    real_put = SqlStore._put_file

    def put(conn, dataset_id, k, chunks):
        def parts():
            for i, chunk in enumerate(chunks):
                if k == kind and i == 1:
                    raise error
                yield chunk
        return real_put(conn, dataset_id, k, parts())

    monkeypatch.setattr(SqlStore, "_put_file", staticmethod(put))


# The response file is spooled to DATA/tmp, then streamed into the folder's database in 1 MB parts with the
# codebook, in one transaction. A full disk while spooling: tests/api/test_upload_memory.py.
@pytest.mark.parametrize("kind", ["raw", "codebook"])
def test_disk_full_midway_answers_507_and_leaves_nothing(tmp_path, monkeypatch, kind):
    data_dir = tmp_path / "data"
    big = csv_bytes(rows=30_000, items=20)  # more than one part
    codebook = CODEBOOK + b"".join(f"Q{i},{'x' * 2000},1,5\n".encode() for i in range(9, 700))
    assert len(big) > 1 << 20 and len(codebook) > 1 << 20
    with TestClient(create_app(Settings(data_dir=data_dir)), base_url=BASE) as client:
        _fail_put(monkeypatch, kind, sqlite3.OperationalError("database or disk is full"))
        r = upload(client, big, codebook=codebook)
        assert_plain_storage_error(r, 507, "storage_full", data_dir)
        assert "full" in r.json()["error"]["message"]
        assert leftovers(data_dir) == ([], [])
        assert client.get("/api/datasets").json() == []
        con = sqlite3.connect(data_dir / DB_FILE)
        assert con.execute("SELECT count(*) FROM dataset_files").fetchone() == (0,)  # no part of it stayed
        con.close()
        monkeypatch.undo()
        assert upload(client, csv_bytes()).status_code == 201  # and the next upload works


def test_permission_denied_at_upload_answers_503(tmp_path, monkeypatch):
    data_dir = tmp_path / "data"
    with TestClient(create_app(Settings(data_dir=data_dir)), base_url=BASE) as client:
        _fail_put(monkeypatch, "raw", sqlite3.OperationalError("attempt to write a readonly database"))
        r = upload(client, csv_bytes(rows=30_000, items=20))
        assert_plain_storage_error(r, 503, "storage_unavailable", data_dir)
        assert leftovers(data_dir) == ([], [])
        assert client.get("/api/datasets").json() == []


# ---- every failure point of add_dataset and add_snapshot, at the store

class _FailingConnection:
    """A sqlite3 connection whose ``execute`` raises ``error`` for statements starting with ``prefix``."""

    def __init__(self, con, prefix: str, error: Exception):
        self._con, self._prefix, self._error = con, prefix, error

    def execute(self, sql, *args):
        if sql.lstrip().upper().startswith(self._prefix):
            raise self._error
        return self._con.execute(sql, *args)

    def __getattr__(self, name):
        return getattr(self._con, name)


def _fail_sql(monkeypatch, prefix: str, error: Exception) -> None:
    real = SQLiteStore._connect
    monkeypatch.setattr(SQLiteStore, "_connect", lambda self: _FailingConnection(real(self), prefix, error))


def _raise(exc):
    def f(*args, **kwargs):
        raise exc
    return f


FAILURES = {
    "mkdir-full": (lambda mp: mp.setattr(Path, "mkdir", _raise(OSError(errno.ENOSPC, "full"))), 507),
    "mkdir-denied": (lambda mp: mp.setattr(Path, "mkdir", _raise(PermissionError(errno.EACCES, "denied"))), 503),
    "write-raw": (lambda mp: patch_writer(mp, fail_on=1), 507),
    "write-codebook": (lambda mp: patch_writer(mp, fail_on=2), 507),
    "write-quota": (lambda mp: patch_writer(mp, fail_on=1, err=errno.EDQUOT), 507),
    "fsync": (lambda mp: mp.setattr(os, "fsync", _raise(OSError(errno.ENOSPC, "full"))), 507),
    "rename": (lambda mp: mp.setattr(os, "replace", _raise(OSError(errno.EACCES, "denied"))), 503),
    "insert-full": (lambda mp: _fail_sql(mp, "INSERT INTO DATASETS",
                                         sqlite3.OperationalError("database or disk is full")), 507),
    "insert-readonly": (lambda mp: _fail_sql(mp, "INSERT INTO DATASETS",
                                             sqlite3.OperationalError("attempt to write a readonly database")), 503),
    "insert-cantopen": (lambda mp: _fail_sql(mp, "BEGIN", sqlite3.OperationalError("unable to open database file")),
                        503),
    "other-error": (lambda mp: mp.setattr(os, "replace", _raise(RuntimeError("boom"))), None),
}


@pytest.mark.parametrize("where", list(FAILURES))
def test_add_dataset_is_all_or_nothing(tmp_path, monkeypatch, where):
    store = SQLiteStore(tmp_path / "data")
    kept = store.add_dataset(name="kept", raw=b"a,b\n1,2\n", filename="kept.csv")
    patch, status = FAILURES[where]
    patch(monkeypatch)
    with pytest.raises(StorageError if status else RuntimeError) as info:
        store.add_dataset(name="lost", raw=b"x,y\n" * 5000, filename="lost.csv", codebook_raw=b"item\nx\ny\n",
                          codebook_filename="cb.csv")
    monkeypatch.undo()
    if status:
        assert info.value.status == status
        assert str(tmp_path) not in info.value.message
    assert leftovers(tmp_path / "data") == ([kept["id"]], [])
    assert [d["id"] for d in store.list_datasets()] == [kept["id"]]
    assert store.read_raw(kept["id"]) == b"a,b\n1,2\n"


@pytest.mark.parametrize("cross_disk", [False, True], ids=["rename", "copy"])
def test_add_dataset_from_a_file_is_all_or_nothing(tmp_path, monkeypatch, cross_disk):
    """An upload already on disk (``raw_path``): a failed move or copy leaves nothing in the store."""
    store = SQLiteStore(tmp_path / "data")
    src = tmp_path / "upload.part"
    src.write_bytes(b"x,y\n" * 5000)
    real_replace = os.replace

    def replace(a, b):
        if Path(a) == src:
            raise OSError(errno.EXDEV if cross_disk else errno.ENOSPC, "cannot move")
        return real_replace(a, b)

    monkeypatch.setattr(os, "replace", replace)
    opened = patch_writer(monkeypatch, fail_on=1)  # the copy to the temp file beside "raw" fails midway
    with pytest.raises(StorageError) as info:
        store.add_dataset(name="lost", raw_path=src, filename="lost.csv")
    monkeypatch.undo()
    assert info.value.status == 507
    assert len(opened) == (1 if cross_disk else 0)
    assert leftovers(tmp_path / "data") == ([], [])
    assert store.list_datasets() == []
    assert src.read_bytes() == b"x,y\n" * 5000  # the caller's file is untouched after a failure


@pytest.mark.parametrize("message, status", [("database or disk is full", 507),
                                             ("attempt to write a readonly database", 503)])
def test_add_snapshot_failure_saves_no_part(tmp_path, monkeypatch, message, status):
    store = SQLiteStore(tmp_path / "data")
    ds = store.add_dataset(name="d", raw=b"a,b\n1,2\n", filename="d.csv")
    first = store.add_snapshot(ds["id"], {"note": "first"})
    _fail_sql(monkeypatch, "INSERT INTO SNAPSHOTS", sqlite3.OperationalError(message))
    with pytest.raises(StorageError) as info:
        store.add_snapshot(ds["id"], {"note": "second"})
    monkeypatch.undo()
    assert info.value.status == status
    assert store.list_snapshots(ds["id"]) == [first]


# ---- real small and read-only file systems (root with mount; skipped elsewhere)

@pytest.fixture
def tmpfs(tmp_path):
    """``make(name, size)`` mounts a fresh tmpfs under tmp_path; ``remount(path, 'ro'|'rw')``. Unmounted after."""
    if os.geteuid() != 0 or shutil.which("mount") is None:
        pytest.skip("mounting a tmpfs needs root and mount(8); the patched-writer tests cover this case")
    mounted: list[Path] = []

    def make(name: str, size: str = "1m") -> Path:
        target = tmp_path / name
        target.mkdir()
        r = subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size}", "tmpfs", str(target)],
                           capture_output=True, text=True, check=False)
        if r.returncode:
            pytest.skip(f"mount -t tmpfs is not allowed here ({r.stderr.strip()})")
        mounted.append(target)
        return target

    def remount(target: Path, mode: str) -> None:
        subprocess.run(["mount", "-o", f"remount,{mode}", str(target)], check=True, capture_output=True)

    make.remount = remount
    yield make
    for target in reversed(mounted):
        subprocess.run(["umount", "-l", str(target)], capture_output=True, check=False)


def test_real_full_disk_upload_answers_507_and_leaves_nothing(tmpfs):
    data_dir = tmpfs("data", "1m")
    big = csv_bytes(rows=40_000, items=20)
    assert len(big) > 1_500_000  # more than the whole file system
    with TestClient(create_app(Settings(data_dir=data_dir)), base_url=BASE) as client:
        r = upload(client, big)
        assert_plain_storage_error(r, 507, "storage_full", data_dir)
        assert leftovers(data_dir) == ([], [])
        assert client.get("/api/datasets").json() == []
        r = upload(client, csv_bytes())  # the space the failed upload took is free again
        assert r.status_code == 201, r.text
        assert [d["id"] for d in client.get("/api/datasets").json()] == [r.json()["id"]]


def test_real_full_disk_snapshot_saves_nothing(tmpfs):
    data_dir = tmpfs("data", "1m")
    store = Store(data_dir)
    ds = store.add_dataset(name="d", raw=csv_bytes(), filename="d.csv")
    first = store.add_snapshot(ds["id"], {"note": "first"})
    filler = data_dir / "filler"
    with open(filler, "wb", buffering=0) as fh:  # take every free block
        try:
            while True:
                fh.write(b"\0" * 4096)
        except OSError as exc:
            assert exc.errno == errno.ENOSPC
    with pytest.raises(StorageError) as info:
        store.add_snapshot(ds["id"], {"note": "x" * 300_000})
    assert (info.value.status, info.value.code) == (507, "storage_full")  # SQLite: "disk is full" or "disk I/O error"
    filler.unlink()
    assert store.list_snapshots(ds["id"]) == [first]
    con = sqlite3.connect(data_dir / DB_FILE)
    assert con.execute("PRAGMA quick_check").fetchone()[0] == "ok"
    con.close()
    assert store.add_snapshot(ds["id"], {"note": "after"})["note"] == "after"


def test_read_only_folder_upload_503_then_refused_at_start(tmpfs):
    data_dir = tmpfs("data", "8m")
    with TestClient(create_app(Settings(data_dir=data_dir)), base_url=BASE) as client:
        kept = upload(client, csv_bytes())
        assert kept.status_code == 201
        assert client.post(f"/api/datasets/{kept.json()['id']}/analysis", json={}).status_code == 200
        client.app.state.engine.prefetch_idle(60)  # the upload's background work is done
        client.app.state.store.close()  # a file open for writing would stop the remount; the pool reopens it
        tmpfs.remount(data_dir, "ro")
        try:
            r = upload(client, csv_bytes(seed=6))
            assert_plain_storage_error(r, 503, "storage_unavailable", data_dir)
        finally:
            tmpfs.remount(data_dir, "rw")
        assert leftovers(data_dir) == ([], [])
        assert [d["id"] for d in client.get("/api/datasets").json()] == [kept.json()["id"]]
    tmpfs.remount(data_dir, "ro")
    with pytest.raises(StartupError, match=r"is read-only; .*--data-dir pointing at a writable folder"):
        create_app(Settings(data_dir=data_dir))
    result = serve(data_dir)
    assert_refused(result, f"The data folder {data_dir} is read-only")


# ---- start-up checks

def serve(data_dir: Path, port: int | None = None, timeout: float = 60) -> subprocess.CompletedProcess:
    """Run ``scalewright serve`` on a folder the server must refuse; returns the finished process."""
    return subprocess.run([sys.executable, "-m", "server", "serve", "--port", str(port or free_port()),
                           "--data-dir", str(data_dir)], cwd=ROOT, capture_output=True, text=True,
                          timeout=timeout, check=False)


def assert_refused(result: subprocess.CompletedProcess, expected: str) -> None:
    assert result.returncode == 1, (result.returncode, result.stdout, result.stderr)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    assert "Traceback" not in result.stderr
    assert expected in lines[0], lines[0]
    assert "running at" not in result.stdout


def make_store_with_data(data_dir: Path) -> Path:
    """A closed, checkpointed database with many pages (big meta, many snapshots); returns its path."""
    store = SQLiteStore(data_dir)
    for i in range(6):
        rec = store.add_dataset(name=f"d{i}", raw=b"a,b\n1,2\n", filename="d.csv", meta={"blob": "m" * 20_000})
        for j in range(20):
            store.add_snapshot(rec["id"], {"note": "s" * 3000, "j": j})
    db = data_dir / DB_NAME
    con = sqlite3.connect(db)
    con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    con.close()
    assert not (data_dir / (DB_NAME + "-wal")).exists() or (data_dir / (DB_NAME + "-wal")).stat().st_size == 0
    return db


def folder_state(data_dir: Path) -> dict[str, bytes]:
    return {str(p.relative_to(data_dir)): p.read_bytes() for p in sorted(data_dir.rglob("*")) if p.is_file()}


def test_corrupt_header_is_refused_at_start(tmp_path):
    data_dir = tmp_path / "data"
    db = make_store_with_data(data_dir)
    with open(db, "r+b") as fh:
        fh.write(bytes(random.Random(1).randrange(256) for _ in range(100)))
    before = folder_state(data_dir)
    expected = f"The database {db} is not a SQLite database (its header is damaged). Restore it from a backup"
    with pytest.raises(StartupError) as info:
        create_app(Settings(data_dir=data_dir))
    assert expected in str(info.value)
    assert "\n" not in str(info.value)
    assert_refused(serve(data_dir), expected)
    after = folder_state(data_dir)
    after.pop(LOCK_NAME, None)  # the lock file (information only) is the one file a start attempt writes
    assert after == before  # nothing else was written


def _damage_table_root(db: Path, table: str) -> int:
    con = sqlite3.connect(db)
    root = con.execute("SELECT rootpage FROM sqlite_master WHERE name = ?", (table,)).fetchone()[0]
    page_size = con.execute("PRAGMA page_size").fetchone()[0]
    con.close()
    assert root >= 2  # a B-tree page in the middle of the file, not the header page
    data = bytearray(db.read_bytes())
    rng = random.Random(7)
    start = (root - 1) * page_size
    for k in range(start + 12, start + page_size):  # keep the page header, garble cell pointers and cells
        data[k] = rng.randrange(256)
    db.write_bytes(bytes(data))
    return root


@pytest.mark.parametrize("table", ["snapshots", "snapshots_by_dataset", "sqlite_autoindex_datasets_1"])
def test_damaged_page_is_refused_at_start(tmp_path, table):
    data_dir = tmp_path / "data"
    db = make_store_with_data(data_dir)
    assert db.stat().st_size // 4096 > 50  # many pages: the damage sits in the middle of the file
    _damage_table_root(db, table)
    # Without the check the server would serve on: the header is intact and the datasets still list.
    con = sqlite3.connect(db)
    assert con.execute("SELECT count(*) FROM datasets").fetchone()[0] == 6
    con.close()
    with pytest.raises(StartupError) as info:
        SQLiteStore(data_dir)
    message = str(info.value)
    assert message.startswith(f"The database {db} is damaged (quick_check: ")
    assert message.endswith("Restore it from a backup (scalewright restore) or move it aside to start afresh.")
    assert "\n" not in message


@pytest.mark.slow
def test_serve_refuses_damaged_page(tmp_path):
    data_dir = tmp_path / "data"
    db = make_store_with_data(data_dir)
    _damage_table_root(db, "snapshots")
    assert_refused(serve(data_dir), f"The database {db} is damaged (quick_check: ")


def test_unreadable_database_is_refused(tmp_path, monkeypatch):
    # Tests run as root, where chmod 000 does not stop reads: a folder in the database's place, and a
    # patched open() raising PermissionError, stand in for an unreadable file.
    data_dir = tmp_path / "data"
    data_dir.mkdir()
    (data_dir / DB_NAME).mkdir()
    with pytest.raises(StartupError, match=r"The database .* cannot be read \(it is not a regular file\)"):
        create_app(Settings(data_dir=data_dir))
    assert_refused(serve(data_dir), f"The database {data_dir / DB_NAME} cannot be read")

    other = tmp_path / "other"
    db = make_store_with_data(other)
    real_access = os.access

    def denied(path, mode, *args, **kwargs):  # what access(2) answers a non-root user for a mode-000 file
        if Path(str(path)) == db and mode & os.R_OK:
            return False
        return real_access(path, mode, *args, **kwargs)

    monkeypatch.setattr(store_mod.os, "access", denied)
    with pytest.raises(StartupError, match=r"cannot be read \(Permission denied\)\. Check its permissions"):
        SQLiteStore(other)


def test_folder_that_cannot_be_created_is_refused(tmp_path):
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    with pytest.raises(StartupError, match=r"cannot be created .*--data-dir pointing at a writable folder"):
        create_app(Settings(data_dir=blocker / "data"))
    assert_refused(serve(blocker / "data"), f"The data folder {blocker / 'data'} cannot be created")


def test_read_only_folder_is_refused_at_start_patched(tmp_path, monkeypatch):
    # Always runs (no mount needed): os.open of the write probe raises EROFS as on a read-only mount.
    data_dir = tmp_path / "data"
    data_dir.mkdir()
    real = os.open

    def read_only(path, flags, *args, **kwargs):
        if Path(str(path)).parent == data_dir and flags & (os.O_WRONLY | os.O_RDWR):
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(path))
        return real(path, flags, *args, **kwargs)

    monkeypatch.setattr(os, "open", read_only)
    with pytest.raises(StartupError) as info:
        create_app(Settings(data_dir=data_dir))
    assert str(info.value) == (f"The data folder {data_dir} is read-only; Scalewright keeps datasets and "
                               "snapshots there. Start with --data-dir pointing at a writable folder.")
    assert list(data_dir.iterdir()) == []


# ---- one server per data folder

def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_lock_is_exclusive_and_released(tmp_path):
    data_dir = tmp_path / "data"
    first = lock_data_dir(data_dir, port=9001)
    info = json.loads((data_dir / LOCK_NAME).read_text())
    assert info["pid"] == os.getpid() and info["port"] == 9001
    with pytest.raises(StartupError) as err:
        lock_data_dir(data_dir, port=9002)  # flock is per open file: a second open in one process conflicts
    assert str(err.value) == (f"Another Scalewright server (pid {os.getpid()}, port 9001) is already using the "
                              f"data folder {data_dir}; stop it or use another --data-dir.")
    first.release()
    again = lock_data_dir(data_dir, port=9003)
    assert json.loads((data_dir / LOCK_NAME).read_text())["port"] == 9003
    again.release()


def start_server(data_dir: Path, log: Path) -> tuple[subprocess.Popen, int]:
    port = free_port()
    out = open(log, "ab")  # noqa: SIM115  (kept open for the life of the process)
    proc = subprocess.Popen([sys.executable, "-m", "server", "serve", "--port", str(port), "--data-dir",
                             str(data_dir)], cwd=ROOT, stdout=out, stderr=subprocess.STDOUT,
                            env={**os.environ, "PYTHONUNBUFFERED": "1"})
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            pytest.fail(f"server exited with {proc.returncode}: {log.read_text()[-2000:]}")
        try:
            if httpx.get(f"http://127.0.0.1:{port}/api/health", timeout=1).status_code == 200:
                return proc, port
        except httpx.HTTPError:
            pass
        time.sleep(0.1)
    proc.kill()
    pytest.fail(f"server did not start: {log.read_text()[-2000:]}")


@pytest.mark.slow
def test_second_server_on_one_folder_is_refused(tmp_path):
    data_dir = tmp_path / "data"
    first, port = start_server(data_dir, tmp_path / "first.log")
    try:
        second = serve(data_dir)
        assert_refused(second, f"Another Scalewright server (pid {first.pid}, port {port}) is already using "
                               f"the data folder {data_dir}; stop it or use another --data-dir.")
        assert httpx.get(f"http://127.0.0.1:{port}/api/health", timeout=5).status_code == 200  # untouched
    finally:
        first.send_signal(signal.SIGKILL)
        first.wait(timeout=30)
    # The killed server's lock file is still there, naming it; the kernel dropped its lock, so a new one starts.
    assert json.loads((data_dir / LOCK_NAME).read_text())["pid"] == first.pid
    third, port3 = start_server(data_dir, tmp_path / "third.log")
    try:
        assert json.loads((data_dir / LOCK_NAME).read_text()) | {"started_at": None} == {
            "pid": third.pid, "port": port3, "started_at": None}
    finally:
        third.send_signal(signal.SIGTERM)
        third.wait(timeout=30)
