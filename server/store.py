"""The data folder: its checks and lock, the store interface, storage faults, and the earlier folder store.

Today's layout of the data folder::

    scalewright.db                 datasets with their uploads, snapshots, the audit log, resampling runs:
                                   :class:`server.sqlstore.SqlStore` on SQLite (``server/folder_store.py``)
    scalewright.lock               flock held by the running server; records its pid and port
    tmp/                           uploads in flight (swept at start)
    earlier-store-<time>/          an earlier store's files after their import (kept for the user to delete)

:func:`Store` opens it. :class:`SQLiteStore` is the earlier folder store, kept to read and import such a
folder (and as the tests' builder of one)::

    scalewright.sqlite3            datasets, snapshots and audit tables, meta.schema_version (WAL)
    datasets/<id>/raw              the uploaded response file, exactly as received
    datasets/<id>/codebook         the uploaded codebook, when there was one

Its snapshots are immutable (SQLite triggers refuse UPDATE and DELETE), each saved by one INSERT in one
transaction with ``synchronous=FULL``; raw files are written to a temporary file, fsynced and renamed. Its
schema has a version (``meta.schema_version``); :func:`migrate` runs the :data:`MIGRATIONS` steps a folder
lacks, in one transaction, and refuses a folder written by a newer Scalewright.

No statistics here. :class:`StoreBackend` is the interface routes and the engine rely on.
"""
from __future__ import annotations

import datetime as _dt
import errno
import fcntl
import hashlib
import json
import os
import shutil
import sqlite3
import threading
import uuid
from collections.abc import Iterator
from contextlib import contextmanager, suppress
from pathlib import Path
from typing import Any, Protocol, runtime_checkable

import numpy as np

__all__ = [
    "DB_NAME",
    "LOCK_NAME",
    "MIGRATIONS",
    "SCHEMA_VERSION",
    "DataDirLock",
    "SQLiteStore",
    "SchemaVersionError",
    "StartupError",
    "StorageError",
    "Store",
    "StoreBackend",
    "append_audit",
    "check_data_dir",
    "data_dir_holder",
    "lock_data_dir",
    "migrate",
    "new_id",
    "schema_version",
    "storage_error",
    "sweep_upload_leftovers",
    "utc_now",
]

DB_NAME = "scalewright.sqlite3"
LOCK_NAME = "scalewright.lock"
SCHEMA_VERSION = 2  # the newest schema this code knows; MIGRATIONS lead up to it

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
    try:
        with open(tmp, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        _unlink_quietly(tmp)  # a write that fails midway (disk full) leaves no temp file behind
        raise
    _fsync_dir(path.parent)


def _move_atomic(src: Path, dest: Path) -> tuple[str, int]:
    """Move the file ``src`` to ``dest``, fsynced; returns the SHA-256 and size of the bytes moved.

    A rename when both are on one disk; otherwise a copy to a temp file beside ``dest``, fsync, rename,
    and ``src`` is removed. The file is hashed in 1 MB chunks, never read whole into memory.
    """
    digest, size = hashlib.sha256(), 0
    with open(src, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            digest.update(chunk)
            size += len(chunk)
        os.fsync(fh.fileno())
    try:
        os.replace(src, dest)
    except OSError as exc:
        if exc.errno != errno.EXDEV:
            raise
        tmp = dest.with_name(f".{dest.name}.{uuid.uuid4().hex[:8]}.tmp")
        try:
            with open(src, "rb") as fin, open(tmp, "wb") as fout:
                shutil.copyfileobj(fin, fout, 1 << 20)
                fout.flush()
                os.fsync(fout.fileno())
            os.replace(tmp, dest)
        except BaseException:
            _unlink_quietly(tmp)
            raise
        _unlink_quietly(src)
    _fsync_dir(dest.parent)
    return digest.hexdigest(), size


def _unlink_quietly(path: Path) -> None:
    with suppress(OSError):
        os.unlink(path)


# ---- faults: storage errors, start-up checks, one server per data folder

class StorageError(Exception):
    """The data folder cannot take a write (disk full, read-only, permission). Answered as 507 or 503.

    The message is plain and names no path (it goes into an HTTP body); the cause is chained for the log.
    """

    def __init__(self, status: int, code: str, message: str, details: dict | None = None):
        super().__init__(message)
        self.status, self.code, self.message, self.details = status, code, message, details or {}


class StartupError(Exception):
    """The server cannot start on this data folder; the message is one line with advice."""


_FULL_ERRNOS = {errno.ENOSPC, errno.EDQUOT}
_DENIED_ERRNOS = {errno.EACCES, errno.EPERM, errno.EROFS}
_FULL_MESSAGE = ("The disk holding the data folder is full, so nothing was saved. Free some space "
                 "(or start the server with a --data-dir on another disk) and try again.")
_DENIED_MESSAGE = ("The data folder cannot be written to (it is read-only or permission is denied), so "
                   "nothing was saved. Check the folder's permissions or start the server with a "
                   "writable --data-dir.")
_IO_MESSAGE = ("The disk holding the data folder reported an error while saving, so nothing was saved. "
               "Check the disk and try again.")


def _disk_nearly_full(folder: str | os.PathLike | None) -> bool:
    if folder is None:
        return False
    try:
        st = os.statvfs(folder)
    except OSError:
        return False
    return st.f_bavail * st.f_frsize < 1024 * 1024


def storage_error(exc: BaseException, data_dir: str | os.PathLike | None = None) -> StorageError | None:
    """The :class:`StorageError` an OSError or sqlite3 error stands for, or None for any other failure.

    ENOSPC/EDQUOT and SQLite's "database or disk is full" give 507 ``storage_full``; EACCES/EPERM/EROFS,
    "attempt to write a readonly database" and "unable to open database file" give 503
    ``storage_unavailable``. SQLite's "disk I/O error" (e.g. growing the WAL index on a full disk) gives
    507 when ``data_dir``'s disk has less than 1 MB free, else 503.
    """
    if isinstance(exc, StorageError):
        return exc
    if isinstance(exc, OSError):
        if exc.errno in _FULL_ERRNOS:
            return StorageError(507, "storage_full", _FULL_MESSAGE)
        if exc.errno in _DENIED_ERRNOS:
            return StorageError(503, "storage_unavailable", _DENIED_MESSAGE)
        return None
    if isinstance(exc, sqlite3.Error):
        text = str(exc).lower()
        code = getattr(exc, "sqlite_errorcode", None)
        primary = code & 0xFF if isinstance(code, int) else None
        if primary == sqlite3.SQLITE_FULL or "disk is full" in text:
            return StorageError(507, "storage_full", _FULL_MESSAGE)
        if (primary in (sqlite3.SQLITE_READONLY, sqlite3.SQLITE_CANTOPEN, sqlite3.SQLITE_PERM)
                or "readonly database" in text or "unable to open" in text):
            return StorageError(503, "storage_unavailable", _DENIED_MESSAGE)
        if primary == sqlite3.SQLITE_IOERR or "disk i/o error" in text:
            if _disk_nearly_full(data_dir):
                return StorageError(507, "storage_full", _FULL_MESSAGE)
            return StorageError(503, "storage_unavailable", _IO_MESSAGE)
    return None


def _one_line(text: str, limit: int = 200) -> str:
    text = " ".join(str(text).split())
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _refuse_folder(folder: str, exc: OSError, *, creating: bool) -> StartupError:
    if exc.errno == errno.EROFS:
        what = f"The data folder {folder} is read-only"
    elif exc.errno in (errno.EACCES, errno.EPERM):
        what = f"The data folder {folder} is not writable (permission denied)"
    elif exc.errno in _FULL_ERRNOS:
        what = f"The disk holding the data folder {folder} is full"
    elif creating:
        what = f"The data folder {folder} cannot be created ({_one_line(exc.strerror or exc)})"
    else:
        what = f"The data folder {folder} cannot be written to ({_one_line(exc.strerror or exc)})"
    return StartupError(f"{what}; Scalewright keeps datasets and snapshots there. "
                        "Start with --data-dir pointing at a writable folder.")


def _ensure_writable_folder(data_dir: Path) -> str:
    folder = os.path.abspath(data_dir)
    if data_dir.exists() and not data_dir.is_dir():
        raise StartupError(f"The data folder {folder} is a file, not a folder. "
                           "Start with --data-dir pointing at a writable folder.")
    try:
        data_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise _refuse_folder(folder, exc, creating=True) from None
    probe = data_dir / f".write-check.{uuid.uuid4().hex[:8]}.tmp"
    try:
        fd = os.open(probe, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
        try:
            os.write(fd, b"ok")
        finally:
            os.close(fd)
    except OSError as exc:
        raise _refuse_folder(folder, exc, creating=False) from None
    finally:
        _unlink_quietly(probe)
    return folder


_RESTORE_ADVICE = "Restore it from a backup (scalewright restore) or move it aside to start afresh."


def check_data_dir(data_dir: str | os.PathLike, db_names: tuple[str, ...] = (DB_NAME,)) -> None:
    """Refuse to start on a data folder the server cannot use, with one line naming the problem and a fix.

    Creates the folder if needed and checks it takes a file; when the database exists, checks it can be
    read, starts with SQLite's header and passes ``PRAGMA quick_check`` (damaged pages anywhere in the
    file). Raises :class:`StartupError`.
    """
    data_dir = Path(data_dir)
    _ensure_writable_folder(data_dir)
    for name in db_names:
        check_database_file(data_dir / name)


def check_database_file(db: Path) -> None:
    """Refuse a SQLite file that exists but cannot serve (see :func:`check_data_dir`); a missing one is fine."""
    shown = os.path.abspath(db)
    if not os.path.lexists(db):
        return
    if not db.is_file():
        raise StartupError(f"The database {shown} cannot be read (it is not a regular file). "
                           f"Move it aside to start afresh, or start with --data-dir pointing at another folder.")
    # Only SQLite opens the file: closing a descriptor opened any other way would drop the POSIX locks that
    # this process's open connections to the same file hold (SQLite's "how to corrupt" notes, section 2.2).
    if not os.access(db, os.R_OK):
        raise StartupError(f"The database {shown} cannot be read (Permission denied). "
                           "Check its permissions, or start with --data-dir pointing at another folder.")
    if not os.access(db, os.W_OK):
        raise StartupError(f"The database {shown} is read-only. Check its permissions, "
                           "or start with --data-dir pointing at a writable folder.")
    try:
        con = sqlite3.connect(db, timeout=30.0, isolation_level=None)
        try:
            rows = con.execute("PRAGMA quick_check").fetchall()
        finally:
            con.close()
    except sqlite3.DatabaseError as exc:
        if "file is not a database" in str(exc):
            raise StartupError(f"The database {shown} is not a SQLite database (its header is damaged). "
                               + _RESTORE_ADVICE) from None
        raise StartupError(f"The database {shown} is damaged (quick_check: {_one_line(exc)}). "
                           + _RESTORE_ADVICE) from None
    result = " ".join(str(r[0]) for r in rows[:3])
    if not rows or rows[0][0] != "ok":
        raise StartupError(f"The database {shown} is damaged (quick_check: "
                           f"{_one_line(result.replace('*** in database main ***', ''))}). " + _RESTORE_ADVICE)


class DataDirLock:
    """An exclusive ``flock`` on ``DATA/scalewright.lock``, held until :meth:`release` or process exit.

    The file records the holder's pid and port (information only: the kernel drops the lock when the
    process dies, so a file left by a killed server never blocks the next one).
    """

    def __init__(self, path: Path, fd: int):
        self.path, self._fd = path, fd

    def release(self) -> None:
        if self._fd is None:
            return
        with suppress(OSError):
            os.ftruncate(self._fd, 0)
        os.close(self._fd)  # closing the descriptor drops the flock
        self._fd = None


def lock_data_dir(data_dir: str | os.PathLike, *, port: int | None = None) -> DataDirLock:
    """Take the data folder for this process, or raise :class:`StartupError` naming the server holding it."""
    data_dir = Path(data_dir)
    folder = _ensure_writable_folder(data_dir)
    path = data_dir / LOCK_NAME
    try:
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
    except OSError as exc:
        raise _refuse_folder(folder, exc, creating=False) from None
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError as exc:
        holder = {}
        with suppress(OSError, ValueError):
            holder = json.loads(os.pread(fd, 4096, 0).decode("utf-8") or "{}")
        os.close(fd)
        if exc.errno not in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
            raise StartupError(f"The lock file {os.path.abspath(path)} cannot be locked "
                               f"({_one_line(exc.strerror or exc)}).") from None
        pid = holder.get("pid", "unknown") if isinstance(holder, dict) else "unknown"
        other_port = holder.get("port", "unknown") if isinstance(holder, dict) else "unknown"
        raise StartupError(f"Another Scalewright server (pid {pid}, port {other_port}) is already using the "
                           f"data folder {folder}; stop it or use another --data-dir.") from None
    info = json.dumps({"pid": os.getpid(), "port": port, "started_at": utc_now()}).encode()
    try:
        os.ftruncate(fd, 0)
        os.pwrite(fd, info + b"\n", 0)
    except OSError as exc:
        os.close(fd)
        raise _refuse_folder(folder, exc, creating=False) from None
    return DataDirLock(path, fd)


def sweep_upload_leftovers(data_dir: str | os.PathLike) -> int:
    """Remove the uploads in flight (``DATA/tmp/.upload-*.part``) that a server killed mid-upload left.

    Call it only while holding the folder's lock (no other server can be writing there). Returns how
    many files were removed.
    """
    removed = 0
    for part in (Path(data_dir) / "tmp").glob(".upload-*.part"):
        try:
            part.unlink()
            removed += 1
        except OSError:  # pragma: no cover - gone already or not ours to remove: harmless
            pass
    return removed


def data_dir_holder(data_dir: str | os.PathLike) -> dict | None:
    """The pid and port of a live server holding ``data_dir``'s lock, or None when no server holds it.

    Creates nothing: a folder without a lock file is free, and a lock file left by a process that
    died is free too (the kernel released its ``flock``).
    """
    path = Path(data_dir) / LOCK_NAME
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return None
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
        except OSError:
            try:
                holder = json.loads(os.pread(fd, 4096, 0).decode("utf-8") or "{}")
            except (OSError, ValueError):
                holder = {}
            return holder if isinstance(holder, dict) else {}
        fcntl.flock(fd, fcntl.LOCK_UN)
        return None
    finally:
        os.close(fd)


# ---- schema version and migrations

class SchemaVersionError(StartupError):
    """The database was written by a newer Scalewright (its schema version is higher than this code knows)."""


_AUDIT_V2 = (
    ("CREATE TABLE IF NOT EXISTS audit (seq INTEGER PRIMARY KEY AUTOINCREMENT, at TEXT NOT NULL, who TEXT, "
     "action TEXT NOT NULL, dataset_id TEXT, snapshot_id TEXT, details TEXT NOT NULL DEFAULT '{}')"),
    "CREATE INDEX IF NOT EXISTS audit_by_dataset ON audit (dataset_id, seq)",
    ("CREATE TRIGGER IF NOT EXISTS audit_no_update BEFORE UPDATE ON audit "
     "BEGIN SELECT RAISE(ABORT, 'the audit log is append-only'); END"),
    ("CREATE TRIGGER IF NOT EXISTS audit_no_delete BEFORE DELETE ON audit "
     "BEGIN SELECT RAISE(ABORT, 'the audit log is append-only'); END"),
)

#: (version, SQL statements) in order; a step runs when the database's schema_version is below its version.
#: Version 1 is ``_SCHEMA`` (datasets, snapshots, meta). Add a step, never edit one that has shipped.
MIGRATIONS: tuple[tuple[int, tuple[str, ...]], ...] = (
    (2, _AUDIT_V2),  # the append-only audit log
)
assert MIGRATIONS[-1][0] == SCHEMA_VERSION


def schema_version(con: sqlite3.Connection) -> int | None:
    """The schema version recorded in ``meta``, or None for a database without one (a new file)."""
    has_meta = con.execute("SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = 'meta'").fetchone()
    row = con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone() if has_meta else None
    if row is None:
        return None
    try:
        return int(row[0])
    except (TypeError, ValueError):
        raise SchemaVersionError(f"The database records the schema version {row[0]!r}, which is not a number; "
                                 "it was not written by Scalewright, or it is damaged.") from None


def _refuse_newer(found: int) -> SchemaVersionError:
    return SchemaVersionError(f"The data folder was written by a newer Scalewright (schema version {found}; this "
                              f"version knows up to {SCHEMA_VERSION}). Upgrade Scalewright to open it.")


def migrate(con: sqlite3.Connection) -> tuple[int | None, int]:
    """Bring the database on ``con`` (autocommit mode) to :data:`SCHEMA_VERSION`; returns (found, now).

    A new database gets the version-1 tables, then every step. The steps and the version bump run in one
    transaction, so a crash leaves the old version or the new one. An upgrade is written to the audit log.
    Raises :class:`SchemaVersionError` for a database newer than this code, before writing anything.
    """
    found = schema_version(con)
    if found is not None and found > SCHEMA_VERSION:
        raise _refuse_newer(found)
    if found is None:
        con.executescript(_SCHEMA)  # idempotent (IF NOT EXISTS); executescript commits by itself
    con.execute("BEGIN IMMEDIATE")
    try:
        con.execute("INSERT OR IGNORE INTO meta (key, value) VALUES ('schema_version', '1')")
        current = schema_version(con)  # again, inside the lock: another process may have migrated meanwhile
        if current > SCHEMA_VERSION:
            raise _refuse_newer(current)
        for version, statements in MIGRATIONS:
            if version <= current:
                continue
            for sql in statements:
                con.execute(sql)
            con.execute("UPDATE meta SET value = ? WHERE key = 'schema_version'", (str(version),))
        if found is not None and current < SCHEMA_VERSION:
            append_audit(con, "schema_upgrade", details={"from": current, "to": SCHEMA_VERSION})
        con.execute("COMMIT")
    except BaseException:
        if con.in_transaction:
            con.execute("ROLLBACK")
        raise
    return found, SCHEMA_VERSION


def append_audit(con: sqlite3.Connection, action: str, *, who: str | None = None, dataset_id: str | None = None,
                 snapshot_id: str | None = None, details: dict | None = None) -> dict:
    """Insert one audit row on ``con`` (inside the caller's transaction, if any); returns the entry."""
    entry = {"at": utc_now(), "who": (str(who).strip()[:80] or None) if who is not None else None,
             "action": str(action), "dataset_id": dataset_id, "snapshot_id": snapshot_id,
             "details": json.loads(_dumps(details or {}))}
    cur = con.execute("INSERT INTO audit (at, who, action, dataset_id, snapshot_id, details) "
                      "VALUES (?, ?, ?, ?, ?, ?)", (entry["at"], entry["who"], entry["action"], dataset_id,
                                                    snapshot_id, _dumps(entry["details"])))
    return {"seq": cur.lastrowid, **entry}


@runtime_checkable
class StoreBackend(Protocol):
    """What the rest of Scalewright needs from storage. Records are plain JSON-ready dicts."""

    def add_dataset(self, *, name: str, raw: bytes | None = None, filename: str, codebook_raw: bytes | None,
                    codebook_filename: str | None, options: dict, meta: dict,
                    raw_path: str | os.PathLike | None = None) -> dict: ...

    def get_dataset(self, dataset_id: str) -> dict | None: ...

    def list_datasets(self) -> list[dict]: ...

    def delete_dataset(self, dataset_id: str) -> bool: ...

    def read_raw(self, dataset_id: str) -> bytes: ...

    def read_codebook(self, dataset_id: str) -> bytes | None: ...

    def add_snapshot(self, dataset_id: str, record: dict) -> dict: ...

    def get_snapshot(self, snapshot_id: str) -> dict | None: ...

    def list_snapshots(self, dataset_id: str) -> list[dict]: ...


class SQLiteStore:
    """The earlier folder store: datasets and snapshots in ``data_dir`` (SQLite in WAL mode plus raw files).

    Not the server's store any more (:func:`Store` is): ``server/folder_store.py`` opens one to bring an earlier
    folder's schema up to date before importing it into ``scalewright.db``.

    Safe to share between threads: every call opens its own short-lived connection, and SQLite's own
    locking (with a busy timeout) serialises writers.

    Dataset record (``get_dataset``/``list_datasets``/``add_dataset``)::

        {id, name, filename, codebook_filename, sha256, codebook_sha256, size_bytes,
         options: {...the keyword arguments for intake.read_responses...}, meta: {...}, created_at}

    Snapshot record: the dict given to ``add_snapshot`` plus ``id``, ``dataset_id`` and ``created_at``.
    """

    def __init__(self, data_dir: str | os.PathLike):
        self.data_dir = Path(data_dir)
        check_data_dir(self.data_dir)  # StartupError: read-only folder, unreadable or damaged database
        self.data_dir.mkdir(parents=True, exist_ok=True)
        (self.data_dir / "datasets").mkdir(exist_ok=True)
        self.db_path = self.data_dir / DB_NAME
        self._init_lock = threading.Lock()
        with self._init_lock:
            con = self._connect()
            try:
                con.execute("PRAGMA journal_mode=WAL")
                migrate(con)  # SchemaVersionError when the folder was written by a newer Scalewright
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
    def add_dataset(self, *, name: str, raw: bytes | None = None, filename: str,
                    codebook_raw: bytes | None = None, codebook_filename: str | None = None,
                    options: dict | None = None, meta: dict | None = None,
                    raw_path: str | os.PathLike | None = None) -> dict:
        """Keep the raw file(s) byte for byte and record the dataset; returns the stored record.

        Give the response file as ``raw`` (bytes) or as ``raw_path``, a file (an upload already on disk)
        that is moved into place, so a large upload is never written from memory; after a success it is
        gone from ``raw_path``, after a failure it may still be there (the caller's to remove).

        All or nothing: any failure (disk full, permission, an error midway) removes the dataset's folder
        and temp files and adds no row; storage faults are raised as :class:`StorageError` (507/503).
        """
        if (raw is None) == (raw_path is None):
            raise TypeError("add_dataset takes raw or raw_path, not both or neither")
        dataset_id = new_id()
        folder = self._folder(dataset_id)
        made = False
        try:
            folder.mkdir(parents=True, exist_ok=False)
            made = True
            _fsync_dir(folder.parent)
            if raw_path is not None:
                raw_sha, raw_size = _move_atomic(Path(raw_path), folder / "raw")
            else:
                _write_atomic(folder / "raw", raw)
                raw_sha, raw_size = hashlib.sha256(raw).hexdigest(), len(raw)
            cb_sha = None
            if codebook_raw is not None:
                _write_atomic(folder / "codebook", codebook_raw)
                cb_sha = hashlib.sha256(codebook_raw).hexdigest()
            record = {
                "id": dataset_id, "name": str(name), "filename": str(filename),
                "codebook_filename": codebook_filename if codebook_raw is not None else None,
                "sha256": raw_sha, "codebook_sha256": cb_sha, "size_bytes": raw_size,
                "options": dict(options or {}), "meta": dict(meta or {}), "created_at": utc_now(),
            }
            with self._write() as con:
                con.execute(
                    "INSERT INTO datasets (id, name, filename, codebook_filename, sha256, codebook_sha256, "
                    "size_bytes, options, meta, created_at) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                    (record["id"], record["name"], record["filename"], record["codebook_filename"],
                     record["sha256"], record["codebook_sha256"], record["size_bytes"],
                     _dumps(record["options"]), _dumps(record["meta"]), record["created_at"]))
        except BaseException as exc:
            if made:
                shutil.rmtree(folder, ignore_errors=True)
            err = storage_error(exc, self.data_dir)
            if err is not None and err is not exc:
                raise err from exc
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
        try:
            with self._write() as con:
                deleted = con.execute("DELETE FROM datasets WHERE id = ?", (dataset_id,)).rowcount > 0
        except (OSError, sqlite3.Error) as exc:
            err = storage_error(exc, self.data_dir)
            if err is not None:
                raise err from exc
            raise
        if deleted:
            with suppress(KeyError):  # ids in the table are always well formed
                shutil.rmtree(self._folder(dataset_id), ignore_errors=True)
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
        try:
            with self._write() as con:
                if con.execute("SELECT 1 FROM datasets WHERE id = ?", (dataset_id,)).fetchone() is None:
                    raise KeyError(dataset_id)
                con.execute("INSERT INTO snapshots (id, dataset_id, created_at, record) VALUES (?, ?, ?, ?)",
                            (stored["id"], dataset_id, stored["created_at"], text))
        except (OSError, sqlite3.Error) as exc:  # the transaction rolled back: no partial snapshot
            err = storage_error(exc, self.data_dir)
            if err is not None:
                raise err from exc
            raise
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


    # ---- audit log (append-only: SQL triggers refuse UPDATE and DELETE)
    def audit(self, action: str, *, who: str | None = None, dataset_id: str | None = None,
              snapshot_id: str | None = None, details: dict | None = None) -> dict:
        """Append one entry to the audit log (time, who, action, ids, details such as hashes); returns it."""
        with self._write() as con:
            return append_audit(con, action, who=who, dataset_id=dataset_id, snapshot_id=snapshot_id,
                                details=details)

    def list_audit(self, *, dataset_id: str | None = None, limit: int | None = None) -> list[dict]:
        """Audit entries, newest first (by ``seq``); only those naming ``dataset_id`` when given."""
        sql = "SELECT seq, at, who, action, dataset_id, snapshot_id, details FROM audit"
        args: list = []
        if dataset_id is not None:
            sql += " WHERE dataset_id = ?"
            args.append(dataset_id)
        sql += " ORDER BY seq DESC"
        if limit is not None:
            sql += " LIMIT ?"
            args.append(int(limit))
        con = self._connect()
        try:
            rows = con.execute(sql, args).fetchall()
        finally:
            con.close()
        keys = ("seq", "at", "who", "action", "dataset_id", "snapshot_id", "details")
        return [{**dict(zip(keys, r)), "details": json.loads(r[6])} for r in rows]


def Store(data_dir: str | os.PathLike):  # noqa: N802  (the store of a data folder, named like a class)
    """The data folder's store: :class:`~server.sqlstore.SqlStore` on ``DATA/scalewright.db`` (an earlier
    :class:`SQLiteStore` folder imported into it first; see ``server/folder_store.py``)."""
    from .folder_store import open_folder_store

    return open_folder_store(data_dir)
