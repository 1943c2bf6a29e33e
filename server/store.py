"""Datasets and snapshots on disk: SQLite (WAL) for records, raw files kept byte for byte.

Layout of the data folder::

    scalewright.sqlite3            datasets and snapshots tables (journal_mode=WAL)
    datasets/<id>/raw              the uploaded response file, exactly as received
    datasets/<id>/codebook         the uploaded codebook, when there was one

Snapshots are immutable: the store has no update or delete for them, and SQLite triggers refuse
UPDATE and DELETE on the table.  Each snapshot is saved by one INSERT in one transaction with
``synchronous=FULL``, so a crash (even ``kill -9``) either keeps a whole snapshot or none of it, and
never touches snapshots saved before.  Raw files are written to a temporary file, fsynced and renamed.

No statistics here.  :class:`StoreBackend` is the interface routes and the engine rely on, so another
backend (e.g. a shared database server) can be added later; ``Store = SQLiteStore`` today.
"""
from __future__ import annotations

import datetime as _dt
import hashlib
import json
import os
import shutil
import sqlite3
import threading
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Protocol, runtime_checkable

import numpy as np

__all__ = ["DB_NAME", "SQLiteStore", "Store", "StoreBackend", "new_id", "utc_now"]

DB_NAME = "scalewright.sqlite3"
SCHEMA_VERSION = 1

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS datasets (
    seq INTEGER PRIMARY KEY AUTOINCREMENT,
    id TEXT NOT NULL UNIQUE,
    name TEXT NOT NULL,
    filename TEXT NOT NULL,
    codebook_filename TEXT,
    sha256 TEXT NOT NULL,
    codebook_sha256 TEXT,
    size_bytes INTEGER NOT NULL,
    options TEXT NOT NULL,
    meta TEXT NOT NULL,
    created_at TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS snapshots (
    seq INTEGER PRIMARY KEY AUTOINCREMENT,
    id TEXT NOT NULL UNIQUE,
    dataset_id TEXT NOT NULL,
    created_at TEXT NOT NULL,
    record TEXT NOT NULL
);
CREATE INDEX IF NOT EXISTS snapshots_by_dataset ON snapshots (dataset_id, seq);
CREATE TRIGGER IF NOT EXISTS snapshots_no_update BEFORE UPDATE ON snapshots
BEGIN SELECT RAISE(ABORT, 'snapshots are immutable'); END;
CREATE TRIGGER IF NOT EXISTS snapshots_no_delete BEFORE DELETE ON snapshots
BEGIN SELECT RAISE(ABORT, 'snapshots are immutable'); END;
"""


def new_id() -> str:
    """A random 16-hex-digit id (64 bits of uuid4)."""
    return uuid.uuid4().hex[:16]


def utc_now() -> str:
    """The current time as ISO 8601 UTC with microseconds, e.g. ``2026-12-02T01:40:00.123456Z``."""
    return _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def _json_default(o: Any):
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, np.generic):
        return o.item()
    if isinstance(o, (set, frozenset, tuple)):
        return list(o)
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"Object of type {type(o).__name__} cannot be stored as JSON")


def _dumps(obj: Any) -> str:
    # allow_nan keeps NaN/inf round-tripping exactly; floats are written with repr (exact round trip).
    return json.dumps(obj, default=_json_default, ensure_ascii=False, separators=(",", ":"))


def _fsync_dir(path: Path) -> None:
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:  # pragma: no cover - platforms without directory fds
        return
    try:
        os.fsync(fd)
    except OSError:  # pragma: no cover
        pass
    finally:
        os.close(fd)


def _write_atomic(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` via a temp file in the same folder, fsync, rename, fsync the folder."""
    tmp = path.with_name(f".{path.name}.{uuid.uuid4().hex[:8]}.tmp")
    with open(tmp, "wb") as fh:
        fh.write(data)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)
    _fsync_dir(path.parent)


@runtime_checkable
class StoreBackend(Protocol):
    """What the rest of Scalewright needs from storage. Records are plain JSON-ready dicts."""

    def add_dataset(self, *, name: str, raw: bytes, filename: str, codebook_raw: bytes | None,
                    codebook_filename: str | None, options: dict, meta: dict) -> dict: ...

    def get_dataset(self, dataset_id: str) -> dict | None: ...

    def list_datasets(self) -> list[dict]: ...

    def delete_dataset(self, dataset_id: str) -> bool: ...

    def read_raw(self, dataset_id: str) -> bytes: ...

    def read_codebook(self, dataset_id: str) -> bytes | None: ...

    def add_snapshot(self, dataset_id: str, record: dict) -> dict: ...

    def get_snapshot(self, snapshot_id: str) -> dict | None: ...

    def list_snapshots(self, dataset_id: str) -> list[dict]: ...


class SQLiteStore:
    """Datasets and snapshots in ``data_dir`` (SQLite in WAL mode plus raw files).

    Safe to share between threads: every call opens its own short-lived connection, and SQLite's own
    locking (with a busy timeout) serialises writers.

    Dataset record (``get_dataset``/``list_datasets``/``add_dataset``)::

        {id, name, filename, codebook_filename, sha256, codebook_sha256, size_bytes,
         options: {...the keyword arguments for intake.read_responses...}, meta: {...}, created_at}

    Snapshot record: the dict given to ``add_snapshot`` plus ``id``, ``dataset_id`` and ``created_at``.
    """

    def __init__(self, data_dir: str | os.PathLike):
        self.data_dir = Path(data_dir)
        self.data_dir.mkdir(parents=True, exist_ok=True)
        (self.data_dir / "datasets").mkdir(exist_ok=True)
        self.db_path = self.data_dir / DB_NAME
        self._init_lock = threading.Lock()
        with self._init_lock:
            con = self._connect()
            try:
                con.execute("PRAGMA journal_mode=WAL")
                con.executescript(_SCHEMA)
                con.execute("INSERT OR IGNORE INTO meta (key, value) VALUES ('schema_version', ?)",
                            (str(SCHEMA_VERSION),))
                con.commit()
            finally:
                con.close()

    # ---- connections
    def _connect(self) -> sqlite3.Connection:
        con = sqlite3.connect(self.db_path, timeout=30.0, isolation_level=None, check_same_thread=False)
        con.execute("PRAGMA busy_timeout=30000")
        con.execute("PRAGMA synchronous=FULL")
        return con

    @contextmanager
    def _write(self) -> Iterator[sqlite3.Connection]:
        """One write transaction (BEGIN IMMEDIATE ... COMMIT), rolled back on any error, then closed."""
        con = self._connect()
        try:
            con.execute("BEGIN IMMEDIATE")
            yield con
            con.execute("COMMIT")
        except BaseException:
            if con.in_transaction:
                con.execute("ROLLBACK")
            raise
        finally:
            con.close()

    def journal_mode(self) -> str:
        con = self._connect()
        try:
            return con.execute("PRAGMA journal_mode").fetchone()[0]
        finally:
            con.close()

    def _folder(self, dataset_id: str) -> Path:
        if not dataset_id or not all(ch.isalnum() or ch in "-_" for ch in dataset_id):
            raise KeyError(dataset_id)
        return self.data_dir / "datasets" / dataset_id

    # ---- datasets
    def add_dataset(self, *, name: str, raw: bytes, filename: str, codebook_raw: bytes | None = None,
                    codebook_filename: str | None = None, options: dict | None = None,
                    meta: dict | None = None) -> dict:
        """Keep the raw file(s) byte for byte and record the dataset; returns the stored record."""
        dataset_id = new_id()
        folder = self._folder(dataset_id)
        folder.mkdir(parents=True, exist_ok=False)
        _fsync_dir(folder.parent)
        _write_atomic(folder / "raw", raw)
        cb_sha = None
        if codebook_raw is not None:
            _write_atomic(folder / "codebook", codebook_raw)
            cb_sha = hashlib.sha256(codebook_raw).hexdigest()
        record = {
            "id": dataset_id, "name": str(name), "filename": str(filename),
            "codebook_filename": codebook_filename if codebook_raw is not None else None,
            "sha256": hashlib.sha256(raw).hexdigest(), "codebook_sha256": cb_sha, "size_bytes": len(raw),
            "options": dict(options or {}), "meta": dict(meta or {}), "created_at": utc_now(),
        }
        try:
            with self._write() as con:
                con.execute(
                    "INSERT INTO datasets (id, name, filename, codebook_filename, sha256, codebook_sha256, "
                    "size_bytes, options, meta, created_at) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                    (record["id"], record["name"], record["filename"], record["codebook_filename"],
                     record["sha256"], record["codebook_sha256"], record["size_bytes"],
                     _dumps(record["options"]), _dumps(record["meta"]), record["created_at"]))
        except BaseException:
            shutil.rmtree(folder, ignore_errors=True)
            raise
        return json.loads(_dumps(record))

    _DATASET_COLS = ("id, name, filename, codebook_filename, sha256, codebook_sha256, size_bytes, options, "
                     "meta, created_at")

    @staticmethod
    def _dataset_row(row) -> dict:
        keys = ("id", "name", "filename", "codebook_filename", "sha256", "codebook_sha256", "size_bytes",
                "options", "meta", "created_at")
        rec = dict(zip(keys, row))
        rec["options"] = json.loads(rec["options"])
        rec["meta"] = json.loads(rec["meta"])
        return rec

    def get_dataset(self, dataset_id: str) -> dict | None:
        con = self._connect()
        try:
            row = con.execute(f"SELECT {self._DATASET_COLS} FROM datasets WHERE id = ?",
                              (dataset_id,)).fetchone()
        finally:
            con.close()
        return self._dataset_row(row) if row else None

    def list_datasets(self) -> list[dict]:
        """All datasets, newest first."""
        con = self._connect()
        try:
            rows = con.execute(f"SELECT {self._DATASET_COLS} FROM datasets ORDER BY seq DESC").fetchall()
        finally:
            con.close()
        return [self._dataset_row(r) for r in rows]

    def delete_dataset(self, dataset_id: str) -> bool:
        """Forget a dataset and remove its raw files. Its snapshots stay (they are immutable)."""
        with self._write() as con:
            deleted = con.execute("DELETE FROM datasets WHERE id = ?", (dataset_id,)).rowcount > 0
        if deleted:
            try:
                shutil.rmtree(self._folder(dataset_id), ignore_errors=True)
            except KeyError:  # pragma: no cover - ids in the table are always well formed
                pass
        return deleted

    def read_raw(self, dataset_id: str) -> bytes:
        """The uploaded response file, byte for byte. KeyError if the dataset is unknown."""
        if self.get_dataset(dataset_id) is None:
            raise KeyError(dataset_id)
        return (self._folder(dataset_id) / "raw").read_bytes()

    def read_codebook(self, dataset_id: str) -> bytes | None:
        """The uploaded codebook, byte for byte, or None. KeyError if the dataset is unknown."""
        rec = self.get_dataset(dataset_id)
        if rec is None:
            raise KeyError(dataset_id)
        path = self._folder(dataset_id) / "codebook"
        return path.read_bytes() if rec["codebook_sha256"] is not None and path.exists() else None

    # ---- snapshots
    def add_snapshot(self, dataset_id: str, record: dict) -> dict:
        """Save an immutable snapshot in one transaction; returns the stored record (with id, created_at).

        Raises KeyError if the dataset is unknown.
        """
        stored = dict(record)
        stored["id"] = new_id()
        stored["dataset_id"] = dataset_id
        stored["created_at"] = utc_now()
        text = _dumps(stored)
        with self._write() as con:
            if con.execute("SELECT 1 FROM datasets WHERE id = ?", (dataset_id,)).fetchone() is None:
                raise KeyError(dataset_id)
            con.execute("INSERT INTO snapshots (id, dataset_id, created_at, record) VALUES (?, ?, ?, ?)",
                        (stored["id"], dataset_id, stored["created_at"], text))
        return json.loads(text)

    def get_snapshot(self, snapshot_id: str) -> dict | None:
        con = self._connect()
        try:
            row = con.execute("SELECT record FROM snapshots WHERE id = ?", (snapshot_id,)).fetchone()
        finally:
            con.close()
        return json.loads(row[0]) if row else None

    def list_snapshots(self, dataset_id: str) -> list[dict]:
        """The dataset's snapshots, newest first (by save order)."""
        con = self._connect()
        try:
            rows = con.execute("SELECT record FROM snapshots WHERE dataset_id = ? ORDER BY seq DESC",
                               (dataset_id,)).fetchall()
        finally:
            con.close()
        return [json.loads(r[0]) for r in rows]


Store = SQLiteStore
