"""Datasets, snapshots and the audit log in one SQL database (SQLite or PostgreSQL), via SQLAlchemy Core.

``SqlStore(url)`` is the :class:`~server.store.StoreBackend` for a database named by a URL:
``sqlite:///path/scalewright.db`` or ``postgresql+psycopg://USER@HOST:PORT/DB`` (``postgresql://`` means
the same, through psycopg 3). Everything lives in the database, so several processes or machines can share
it without a shared folder:

- ``datasets``: one row per dataset, the same fields as :class:`~server.store.SQLiteStore` records;
- ``dataset_files``: the uploaded response file and codebook byte for byte, in parts of at most 1 MB
  (an upload is streamed in and never held whole in memory), with their SHA-256 in ``datasets``;
- ``snapshots``: the immutable records; triggers refuse UPDATE and DELETE (and TRUNCATE on PostgreSQL);
- ``audit``: the append-only log, protected the same way;
- ``workspaces``, ``people``, ``memberships`` (revision 0003; ``server/people.py``): datasets, snapshots and
  audit entries carry a ``workspace_id``. While a request acts as a signed-in person (:data:`ACTING`, set by
  ``server/auth.py``) every read is limited to their workspace, new rows go to it, and the audit log and a
  snapshot's author name that person; otherwise (laptop mode, the command line) nothing is limited and new
  rows go to the workspace ``default``.

The schema is made and upgraded by the Alembic revisions in ``server/migrations/`` (:func:`upgrade`, run by
``SqlStore()`` and by ``scalewright migrate``), in one transaction that holds a lock, so two processes
starting together migrate once. Records are the same dicts as :class:`~server.store.SQLiteStore` returns.
"""
from __future__ import annotations

import hashlib
import json
import os
from collections.abc import Iterator
from contextlib import contextmanager, suppress
from contextvars import ContextVar
from dataclasses import dataclass
from pathlib import Path

import sqlalchemy as sa
from sqlalchemy import event
from sqlalchemy.engine import URL, Connection, Engine, make_url
from sqlalchemy.pool import StaticPool

from .store import (
    SchemaVersionError,
    StartupError,
    StorageError,
    _dumps,
    new_id,
    storage_error,
    utc_now,
)

__all__ = ["ACTING", "CHUNK_BYTES", "DEFAULT_WORKSPACE", "MIGRATIONS_DIR", "Actor", "SqlStore", "current_revision",
           "head_revision", "normalise_url", "upgrade"]

MIGRATIONS_DIR = Path(__file__).resolve().parent / "migrations"
CHUNK_BYTES = 1 << 20  # one row of dataset_files holds at most this many bytes of an upload
_PG_MIGRATION_LOCK = 0x5C41_E0A1  # pg_advisory_xact_lock key held while migrating

_meta = sa.MetaData()
datasets = sa.Table(
    "datasets", _meta,
    sa.Column("seq", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), primary_key=True),
    sa.Column("id", sa.String(64)), sa.Column("name", sa.Text), sa.Column("filename", sa.Text),
    sa.Column("codebook_filename", sa.Text), sa.Column("sha256", sa.String(64)),
    sa.Column("codebook_sha256", sa.String(64)), sa.Column("size_bytes", sa.BigInteger),
    sa.Column("options", sa.Text), sa.Column("meta", sa.Text), sa.Column("created_at", sa.String(32)),
    sa.Column("workspace_id", sa.String(64)),
)
dataset_files = sa.Table(
    "dataset_files", _meta,
    sa.Column("dataset_id", sa.String(64), primary_key=True), sa.Column("kind", sa.String(16), primary_key=True),
    sa.Column("part", sa.Integer, primary_key=True), sa.Column("data", sa.LargeBinary),
)
snapshots = sa.Table(
    "snapshots", _meta,
    sa.Column("seq", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), primary_key=True),
    sa.Column("id", sa.String(64)), sa.Column("dataset_id", sa.String(64)),
    sa.Column("created_at", sa.String(32)), sa.Column("record", sa.Text), sa.Column("workspace_id", sa.String(64)),
)
audit_log = sa.Table(
    "audit", _meta,
    sa.Column("seq", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), primary_key=True),
    sa.Column("at", sa.String(32)), sa.Column("who", sa.Text), sa.Column("action", sa.Text),
    sa.Column("dataset_id", sa.String(64)), sa.Column("snapshot_id", sa.String(64)), sa.Column("details", sa.Text),
    sa.Column("workspace_id", sa.String(64)),
)
# revision 0003: people, workspaces and memberships (server/people.py reads and writes them)
workspaces = sa.Table(
    "workspaces", _meta,
    sa.Column("id", sa.String(64), primary_key=True), sa.Column("name", sa.Text),
    sa.Column("created_at", sa.String(32)),
)
people = sa.Table(
    "people", _meta,
    sa.Column("id", sa.String(64), primary_key=True), sa.Column("name", sa.Text),
    sa.Column("token_key", sa.String(32)), sa.Column("token_salt", sa.LargeBinary),
    sa.Column("token_hash", sa.LargeBinary), sa.Column("created_at", sa.String(32)),
)
memberships = sa.Table(
    "memberships", _meta,
    sa.Column("person_id", sa.String(64), primary_key=True), sa.Column("workspace_id", sa.String(64)),
    sa.Column("role", sa.String(16)),
)
# revision 0004: resampling runs (server/runs.py writes them on a SQL store)
runs_table = sa.Table(
    "runs", _meta,
    sa.Column("id", sa.String(64), primary_key=True), sa.Column("dataset_id", sa.String(64)),
    sa.Column("workspace_id", sa.String(64)), sa.Column("state", sa.String(16)), sa.Column("done", sa.Integer),
    sa.Column("total", sa.Integer), sa.Column("settings", sa.Text), sa.Column("record", sa.Text),
    sa.Column("updated_at", sa.String(32)),
)
_RUN_ACTIVE = ("queued", "running")


def run_interrupted_error(last_heard: str | None, done: int, total: int) -> dict:
    """The error of a run whose computing process stopped (state ``interrupted``): when it was last heard from
    (ISO 8601 UTC, as ``utc_now``), in plain words."""
    import datetime as _dt

    try:
        at = _dt.datetime.strptime(str(last_heard), "%Y-%m-%dT%H:%M:%S.%fZ")
        when = f"{at:%H:%M} UTC on {at:%Y-%m-%d}"
    except ValueError:
        when = "an unknown time"
    return {"code": "interrupted", "details": {"last_heard": last_heard},
            "message": f"The server process computing this run stopped at about {when} (when it was last heard "
                       f"from), after {done} of {total} resamples. Start the run again."}


def run_cutoff(stale_seconds: float) -> str:
    """The ``updated_at`` before which an active run is stale: ``stale_seconds`` ago, formatted as ``utc_now``."""
    import datetime as _dt

    at = _dt.datetime.now(_dt.UTC) - _dt.timedelta(seconds=max(0.0, float(stale_seconds)))
    return at.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
DEFAULT_WORKSPACE = "default"  # rows written without a signed-in person (laptop mode, earlier revisions)


@dataclass(frozen=True)
class Actor:
    """The signed-in person a request acts as: their id and name, their workspace and role there."""

    person_id: str
    name: str
    workspace_id: str
    workspace: str
    role: str


# The person the current request acts as (set by server.auth for its duration); None: laptop mode, the
# command line, or a background job, which see every workspace and write to DEFAULT_WORKSPACE.
ACTING: ContextVar[Actor | None] = ContextVar("scalewright_acting", default=None)


def _scoped(query, table: sa.Table):
    """``query`` restricted to the acting person's workspace (unchanged when nobody is signed in)."""
    actor = ACTING.get()
    return query if actor is None else query.where(table.c.workspace_id == actor.workspace_id)


def _workspace_now() -> str:
    actor = ACTING.get()
    return DEFAULT_WORKSPACE if actor is None else actor.workspace_id

_DATASET_KEYS = ("id", "name", "filename", "codebook_filename", "sha256", "codebook_sha256", "size_bytes",
                 "options", "meta", "created_at")
_AUDIT_KEYS = ("seq", "at", "who", "action", "dataset_id", "snapshot_id", "details")


def normalise_url(url: str | URL) -> URL:
    """The SQLAlchemy URL for ``url``: ``postgresql://`` and ``postgres://`` go through psycopg 3.

    Raises :class:`StartupError` for anything but SQLite or PostgreSQL.
    """
    try:
        parsed = make_url(url)
    except sa.exc.ArgumentError:
        raise StartupError(f"The database URL {str(url)!r} cannot be read; give e.g. "
                           "postgresql://USER@HOST:PORT/DB or sqlite:///path/scalewright.db.") from None
    backend = parsed.get_backend_name()
    if backend in ("postgres", "postgresql"):
        return parsed.set(drivername="postgresql+psycopg")
    if backend != "sqlite":
        raise StartupError(f"The database {parsed.render_as_string(hide_password=True)} is neither SQLite nor "
                           "PostgreSQL; Scalewright stores its data in one of those two.")
    return parsed


def _shown(url: URL) -> str:
    return url.render_as_string(hide_password=True)


def make_engine(url: str | URL) -> Engine:
    """An engine for ``url``. SQLite: WAL, ``synchronous=FULL``, a 30 s busy timeout, and write transactions
    opened with ``BEGIN IMMEDIATE`` (execution option ``sqlite_begin``) so writers queue instead of failing."""
    url = normalise_url(url)
    if url.get_backend_name() != "sqlite":
        return sa.create_engine(url, pool_pre_ping=True)
    memory = url.database in (None, "", ":memory:")
    if not memory:
        Path(url.database).expanduser().resolve().parent.mkdir(parents=True, exist_ok=True)
    engine = sa.create_engine(url, connect_args={"check_same_thread": False, "timeout": 30.0},
                              **({"poolclass": StaticPool} if memory else {}))

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_con, _record):
        dbapi_con.isolation_level = None  # the driver never begins by itself: _on_begin does
        for pragma in ("journal_mode=WAL", "busy_timeout=30000", "synchronous=FULL"):
            dbapi_con.execute(f"PRAGMA {pragma}")

    @event.listens_for(engine, "begin")
    def _on_begin(conn):
        conn.exec_driver_sql(f"BEGIN {conn.get_execution_options().get('sqlite_begin', 'DEFERRED')}")

    return engine


def _alembic_config(connection: Connection):
    from alembic.config import Config

    cfg = Config()
    cfg.set_main_option("script_location", str(MIGRATIONS_DIR))
    cfg.attributes["connection"] = connection
    return cfg


def head_revision() -> str:
    """The newest revision this code knows (``server/migrations/versions``)."""
    from alembic.script import ScriptDirectory

    return ScriptDirectory(str(MIGRATIONS_DIR)).get_current_head()


def current_revision(connection: Connection) -> str | None:
    """The revision recorded in the database (Alembic's ``alembic_version``), or None for a new database."""
    from alembic.migration import MigrationContext

    return MigrationContext.configure(connection).get_current_revision()


def upgrade(engine: Engine, revision: str = "head") -> tuple[str | None, str]:
    """Run the revisions ``engine``'s database lacks up to ``revision``, in one locked transaction.

    Returns (found, now). A database written by a newer Scalewright (a revision this code does not know) is
    refused with :class:`SchemaVersionError` before anything is written. An upgrade of a database that had
    a revision is written to the audit log (when the log exists by then), as the SQLite folder store does.
    """
    from alembic import command
    from alembic.script import ScriptDirectory

    script = ScriptDirectory(str(MIGRATIONS_DIR))
    with engine.connect().execution_options(sqlite_begin="IMMEDIATE") as conn, conn.begin():
        if conn.dialect.name == "postgresql":  # two processes starting together: one migrates, one waits
            conn.execute(sa.text("SELECT pg_advisory_xact_lock(:key)"), {"key": _PG_MIGRATION_LOCK})
        found = current_revision(conn)
        if found is not None:
            try:
                script.get_revision(found)
            except Exception:
                raise SchemaVersionError(
                    f"The database {_shown(engine.url)} was written by a newer Scalewright (schema revision "
                    f"{found}; this version knows up to {script.get_current_head()}). Upgrade Scalewright to "
                    "open it.") from None
        command.upgrade(_alembic_config(conn), revision)
        now = current_revision(conn)
        if found is not None and now != found and sa.inspect(conn).has_table("audit"):
            has_workspace = any(c["name"] == "workspace_id" for c in sa.inspect(conn).get_columns("audit"))
            _append_audit(conn, "schema_upgrade", details={"from": found, "to": now}, workspace=has_workspace)
    return found, now


def _append_audit(conn: Connection, action: str, *, who: str | None = None, dataset_id: str | None = None,
                  snapshot_id: str | None = None, details: dict | None = None, workspace: bool = True) -> dict:
    actor = ACTING.get()
    if actor is not None:  # a signed-in person: their name, never a typed one
        who = actor.name
    entry = {"at": utc_now(), "who": _text((str(who).strip()[:80] or None) if who is not None else None),
             "action": _text(str(action)), "dataset_id": _text(dataset_id), "snapshot_id": _text(snapshot_id),
             "details": json.loads(_dumps(details or {}))}
    row = {**entry, "details": _dumps(entry["details"])}
    if workspace:  # the column exists from revision 0003 on
        row["workspace_id"] = _workspace_now()
    result = conn.execute(audit_log.insert().values(**row))
    return {"seq": result.inserted_primary_key[0], **entry}


def _is_id(value) -> bool:
    """Whether ``value`` can name a row: a string without NUL (PostgreSQL text cannot hold one)."""
    return isinstance(value, str) and "\x00" not in value


def _text(value: str | None) -> str | None:
    """Text for a column: NUL (which PostgreSQL text cannot hold) becomes U+FFFD, on both backends alike."""
    return None if value is None else str(value).replace("\x00", "\ufffd")


def _pg_storage_error(exc: BaseException) -> StorageError | None:
    state = getattr(exc, "sqlstate", None) or ""
    if state.startswith("53"):  # insufficient resources: disk full, out of memory, too many connections
        return StorageError(507 if state == "53100" else 503,
                            "storage_full" if state == "53100" else "storage_unavailable",
                            "The database server is full, so nothing was saved. Ask its administrator to "
                            "free some space, and try again." if state == "53100" else
                            "The database server cannot take the request now (it is out of resources), "
                            "so nothing was saved. Try again shortly.")
    if state.startswith("08") or state.startswith("57P") or state in ("25006", "42501"):
        return StorageError(503, "storage_unavailable", "The database server cannot be reached or does not "
                            "accept writes now, so nothing was saved. Try again shortly.")
    return None


class SqlStore:
    """Datasets, snapshots and the audit log in the database at ``url`` (SQLite or PostgreSQL).

    Safe to share between threads (a connection pool; each call takes one connection for one transaction).
    Runs the migrations at start. Raises :class:`StartupError` when the database cannot be reached.
    """

    def __init__(self, url: str | URL):
        self.url = normalise_url(url)
        self.engine = make_engine(self.url)
        self._writer = self.engine.execution_options(sqlite_begin="IMMEDIATE")
        self._folder = (Path(self.url.database).expanduser().resolve().parent
                        if self.backend == "sqlite" and self.url.database not in (None, "", ":memory:") else None)
        try:
            self.revision = upgrade(self.engine)[1]
        except (SchemaVersionError, StartupError):
            self.engine.dispose()
            raise
        except sa.exc.DBAPIError as exc:
            self.engine.dispose()
            reason = " ".join(str(exc.orig).split())[:200]
            raise StartupError(f"The database {_shown(self.url)} cannot be opened ({reason}). Check that the "
                               "server is running and the URL, user and database are right.") from None

    @property
    def backend(self) -> str:
        """``"sqlite"`` or ``"postgresql"``."""
        return self.url.get_backend_name()

    def close(self) -> None:
        """Close the pooled connections."""
        self.engine.dispose()

    # ---- transactions and faults
    def _storage_error(self, exc: BaseException) -> StorageError | None:
        cause = exc.orig if isinstance(exc, sa.exc.DBAPIError) else exc
        if self.backend == "postgresql":
            return _pg_storage_error(cause) if not isinstance(cause, OSError) else storage_error(cause)
        return storage_error(cause, self._folder)

    @contextmanager
    def _write(self) -> Iterator[Connection]:
        """One write transaction, rolled back on any error; storage faults raised as StorageError."""
        try:
            with self._writer.begin() as conn:
                yield conn
        except (OSError, sa.exc.DBAPIError) as exc:
            err = self._storage_error(exc)
            if err is not None:
                raise err from exc
            raise

    @contextmanager
    def _read(self) -> Iterator[Connection]:
        """One connection for reading; a database that cannot be reached is raised as StorageError (503)."""
        try:
            with self.engine.connect() as conn:
                yield conn
        except sa.exc.DBAPIError as exc:
            err = self._storage_error(exc)
            if err is not None:
                raise err from exc
            raise

    # ---- datasets
    def add_dataset(self, *, name: str, raw: bytes | None = None, filename: str,
                    codebook_raw: bytes | None = None, codebook_filename: str | None = None,
                    options: dict | None = None, meta: dict | None = None,
                    raw_path: str | os.PathLike | None = None) -> dict:
        """Keep the raw file(s) byte for byte in the database and record the dataset; returns the record.

        Give the response file as ``raw`` (bytes) or ``raw_path`` (an upload on disk, streamed in 1 MB parts
        and removed after a success). All or nothing: one transaction; storage faults raise StorageError.
        """
        if (raw is None) == (raw_path is None):
            raise TypeError("add_dataset takes raw or raw_path, not both or neither")
        dataset_id = new_id()
        record = {"id": dataset_id, "name": _text(name), "filename": _text(filename),
                  "codebook_filename": _text(codebook_filename) if codebook_raw is not None else None,
                  "sha256": None, "codebook_sha256": None, "size_bytes": 0,
                  "options": dict(options or {}), "meta": dict(meta or {}), "created_at": utc_now()}
        try:
            with self._write() as conn:
                conn.execute(datasets.insert().values(
                    id=dataset_id, name=record["name"], filename=record["filename"],
                    codebook_filename=record["codebook_filename"], sha256="", codebook_sha256=None,
                    size_bytes=0, options=_dumps(record["options"]), meta=_dumps(record["meta"]),
                    created_at=record["created_at"], workspace_id=_workspace_now()))
                if raw_path is not None:
                    with open(raw_path, "rb") as fh:
                        record["sha256"], record["size_bytes"] = self._put_file(
                            conn, dataset_id, "raw", iter(lambda: fh.read(CHUNK_BYTES), b""))
                else:
                    record["sha256"], record["size_bytes"] = self._put_file(
                        conn, dataset_id, "raw", (raw[i:i + CHUNK_BYTES] for i in range(0, len(raw), CHUNK_BYTES)))
                if codebook_raw is not None:
                    record["codebook_sha256"], _ = self._put_file(
                        conn, dataset_id, "codebook",
                        (codebook_raw[i:i + CHUNK_BYTES] for i in range(0, len(codebook_raw), CHUNK_BYTES)))
                conn.execute(datasets.update().where(datasets.c.id == dataset_id).values(
                    sha256=record["sha256"], codebook_sha256=record["codebook_sha256"],
                    size_bytes=record["size_bytes"]))
        except OSError as exc:  # reading raw_path
            err = storage_error(exc)
            if err is not None:
                raise err from exc
            raise
        if raw_path is not None:
            with suppress(OSError):
                os.unlink(raw_path)
        return json.loads(_dumps(record))

    @staticmethod
    def _put_file(conn: Connection, dataset_id: str, kind: str, chunks) -> tuple[str, int]:
        digest, size, part = hashlib.sha256(), 0, 0
        for chunk in chunks:
            digest.update(chunk)
            size += len(chunk)
            conn.execute(dataset_files.insert().values(dataset_id=dataset_id, kind=kind, part=part, data=chunk))
            part += 1
        if part == 0:  # an empty file is one empty part, so "present" and "empty" stay apart
            conn.execute(dataset_files.insert().values(dataset_id=dataset_id, kind=kind, part=0, data=b""))
        return digest.hexdigest(), size

    @staticmethod
    def _dataset_row(row) -> dict:
        rec = dict(zip(_DATASET_KEYS, row))
        rec["options"] = json.loads(rec["options"])
        rec["meta"] = json.loads(rec["meta"])
        return rec

    def _dataset_query(self):
        return sa.select(*(datasets.c[k] for k in _DATASET_KEYS))

    def get_dataset(self, dataset_id: str) -> dict | None:
        if not _is_id(dataset_id):
            return None
        with self._read() as conn:
            row = conn.execute(_scoped(self._dataset_query().where(datasets.c.id == dataset_id), datasets)).first()
        return self._dataset_row(row) if row else None

    def dataset_version(self, dataset_id: str) -> str | None:
        """What a cached copy of the dataset depends on (the SHA-256 of its files and its options), in one
        indexed read; None when it is not (or no longer) in the database. The engine checks it on access."""
        if not _is_id(dataset_id):
            return None
        with self._read() as conn:
            row = conn.execute(sa.select(datasets.c.sha256, datasets.c.codebook_sha256, datasets.c.options)
                               .where(datasets.c.id == dataset_id)).first()
        return None if row is None else f"{row[0]}:{row[1] or ''}:{hashlib.sha256(row[2].encode()).hexdigest()}"

    def list_datasets(self) -> list[dict]:
        """All datasets, newest first."""
        with self._read() as conn:
            rows = conn.execute(_scoped(self._dataset_query(), datasets).order_by(datasets.c.seq.desc())).all()
        return [self._dataset_row(r) for r in rows]

    def delete_dataset(self, dataset_id: str) -> bool:
        """Forget a dataset and its uploaded bytes. Its snapshots stay (they are immutable)."""
        if not _is_id(dataset_id):
            return False
        with self._write() as conn:
            if conn.execute(_scoped(sa.select(datasets.c.seq).where(datasets.c.id == dataset_id), datasets)).first() \
                    is None:
                return False
            conn.execute(dataset_files.delete().where(dataset_files.c.dataset_id == dataset_id))
            return conn.execute(datasets.delete().where(datasets.c.id == dataset_id)).rowcount > 0

    def _read_file(self, dataset_id: str, kind: str) -> bytes | None:
        if not _is_id(dataset_id):
            raise KeyError(dataset_id)
        with self._read() as conn:
            if conn.execute(_scoped(sa.select(datasets.c.seq).where(datasets.c.id == dataset_id),
                                    datasets)).first() is None:
                raise KeyError(dataset_id)
            rows = conn.execute(sa.select(dataset_files.c.data).where(
                dataset_files.c.dataset_id == dataset_id, dataset_files.c.kind == kind)
                .order_by(dataset_files.c.part)).all()
        return b"".join(bytes(r[0]) for r in rows) if rows else None

    def read_raw(self, dataset_id: str) -> bytes:
        """The uploaded response file, byte for byte. KeyError if the dataset is unknown."""
        data = self._read_file(dataset_id, "raw")
        if data is None:
            raise KeyError(dataset_id)
        return data

    def read_codebook(self, dataset_id: str) -> bytes | None:
        """The uploaded codebook, byte for byte, or None. KeyError if the dataset is unknown."""
        return self._read_file(dataset_id, "codebook")

    # ---- snapshots
    def add_snapshot(self, dataset_id: str, record: dict) -> dict:
        """Save an immutable snapshot in one transaction; returns the stored record (with id, created_at).

        Raises KeyError if the dataset is unknown.
        """
        if not _is_id(dataset_id):
            raise KeyError(dataset_id)
        stored = dict(record)
        actor = ACTING.get()
        if actor is not None:  # the signed-in person is the author, whatever name was typed
            stored["author"] = actor.name
        stored["id"] = new_id()
        stored["dataset_id"] = dataset_id
        stored["created_at"] = utc_now()
        text = _dumps(stored)
        with self._write() as conn:
            # FOR SHARE on PostgreSQL: a delete of the dataset waits until this snapshot is in
            found = conn.execute(_scoped(sa.select(datasets.c.workspace_id).where(datasets.c.id == dataset_id),
                                         datasets).with_for_update(read=True)).first()
            if found is None:
                raise KeyError(dataset_id)
            conn.execute(snapshots.insert().values(id=stored["id"], dataset_id=dataset_id,
                                                   created_at=stored["created_at"], record=text,
                                                   workspace_id=found[0]))
        return json.loads(text)

    def get_snapshot(self, snapshot_id: str) -> dict | None:
        if not _is_id(snapshot_id):
            return None
        with self._read() as conn:
            row = conn.execute(_scoped(sa.select(snapshots.c.record).where(snapshots.c.id == snapshot_id),
                                       snapshots)).first()
        return json.loads(row[0]) if row else None

    def list_snapshots(self, dataset_id: str) -> list[dict]:
        """The dataset's snapshots, newest first (by save order)."""
        if not _is_id(dataset_id):
            return []
        with self._read() as conn:
            rows = conn.execute(_scoped(sa.select(snapshots.c.record).where(snapshots.c.dataset_id == dataset_id),
                                        snapshots).order_by(snapshots.c.seq.desc())).all()
        return [json.loads(r[0]) for r in rows]

    # ---- audit log (append-only: triggers refuse UPDATE and DELETE)
    def audit(self, action: str, *, who: str | None = None, dataset_id: str | None = None,
              snapshot_id: str | None = None, details: dict | None = None) -> dict:
        """Append one entry to the audit log (time, who, action, ids, details such as hashes); returns it."""
        with self._write() as conn:
            return _append_audit(conn, action, who=who, dataset_id=dataset_id, snapshot_id=snapshot_id,
                                 details=details)

    def list_audit(self, *, dataset_id: str | None = None, limit: int | None = None) -> list[dict]:
        """Audit entries, newest first (by ``seq``); only those naming ``dataset_id`` when given."""
        query = _scoped(sa.select(*(audit_log.c[k] for k in _AUDIT_KEYS)), audit_log).order_by(audit_log.c.seq.desc())
        if dataset_id is not None:
            if not _is_id(dataset_id):
                return []
            query = query.where(audit_log.c.dataset_id == dataset_id)
        if limit is not None:
            query = query.limit(int(limit))
        with self._read() as conn:
            rows = conn.execute(query).all()
        return [{**dict(zip(_AUDIT_KEYS, r)), "details": json.loads(r[6])} for r in rows]

    # ---- resampling runs (revision 0004; written by the process computing the run, read by every process)
    def save_run(self, record: dict, *, new: bool = False) -> str:
        """Write a run's JSON (``RunService``'s ``Run.to_dict()``); returns the state now stored.

        A run another process cancelled stays cancelled: the write is skipped (the stored state, ``cancelled``,
        is returned, so the computing process stops) unless it says ``cancelled`` too; so does a run deleted
        meanwhile (not written again) and one marked ``interrupted`` (:meth:`interrupt_stale_runs`). A ``new``
        run is added, in its dataset's workspace. Every write sets ``updated_at``: the run's heartbeat.
        """
        values = {"state": record["state"], "done": int(record["progress"]["done"]),
                  "total": int(record["progress"]["total"]), "settings": _dumps(record["settings"]),
                  "record": _dumps(record), "updated_at": utc_now()}
        with self._write() as conn:
            found = conn.execute(sa.select(runs_table.c.state).where(runs_table.c.id == record["run_id"])
                                 .with_for_update()).first()
            if found is None:
                if not new:
                    return "cancelled"
                ws = conn.execute(sa.select(datasets.c.workspace_id)
                                  .where(datasets.c.id == record["dataset_id"])).first()
                conn.execute(runs_table.insert().values(id=record["run_id"], dataset_id=record["dataset_id"],
                                                        workspace_id=ws[0] if ws else _workspace_now(), **values))
                return values["state"]
            if found[0] not in _RUN_ACTIVE and found[0] != values["state"]:
                return found[0]
            conn.execute(runs_table.update().where(runs_table.c.id == record["run_id"]).values(**values))
            return values["state"]

    def get_run(self, run_id: str) -> dict | None:
        """A run's JSON as last written, with the stored state and ``updated_at`` (when its computing process was
        last heard from), in the acting person's workspace; or None."""
        if not _is_id(run_id):
            return None
        with self._read() as conn:
            row = conn.execute(_scoped(sa.select(runs_table.c.record, runs_table.c.state, runs_table.c.updated_at)
                                       .where(runs_table.c.id == run_id), runs_table)).first()
        return None if row is None else {**json.loads(row[0]), "state": row[1], "updated_at": row[2]}

    def touch_run(self, run_id: str) -> str | None:
        """The computing process's heartbeat: set an active run's ``updated_at`` to now (one small UPDATE, no
        JSON). Returns the stored state (``running`` or ``queued`` when touched), or None when the run is gone."""
        with self._write() as conn:
            conn.execute(runs_table.update().where(runs_table.c.id == run_id, runs_table.c.state.in_(_RUN_ACTIVE))
                         .values(updated_at=utc_now()))
            row = conn.execute(sa.select(runs_table.c.state).where(runs_table.c.id == run_id)).first()
        return None if row is None else row[0]

    def interrupt_stale_runs(self, stale_seconds: float) -> int:
        """Mark ``interrupted`` every active run not heard from (``updated_at``) for ``stale_seconds``: its computing
        process died (kill -9, a reboot). Returns how many this call marked.

        One UPDATE guarded by the condition (active AND updated_at < cutoff) claims the rows, so two processes
        doing this at once never mark a run twice, and a heartbeat that lands first keeps its run alive; the
        claimed rows' JSON then gets the state, the last-heard time as ``finished_at`` and a plain message, in the
        same transaction. ``updated_at`` is left as it was: when the process was last heard from. All workspaces.
        """
        cutoff = run_cutoff(stale_seconds)
        with self._write() as conn:
            claimed = conn.execute(runs_table.update()
                                   .where(runs_table.c.state.in_(_RUN_ACTIVE), runs_table.c.updated_at < cutoff)
                                   .values(state="interrupted")
                                   .returning(runs_table.c.id, runs_table.c.record, runs_table.c.updated_at)).all()
            for run_id, raw, heard in claimed:
                record = json.loads(raw)
                progress = record.get("progress") or {}
                record.update(state="interrupted", finished_at=heard,
                              error=run_interrupted_error(heard, int(progress.get("done") or 0),
                                                          int(progress.get("total") or 0)))
                conn.execute(runs_table.update().where(runs_table.c.id == run_id).values(record=_dumps(record)))
        return len(claimed)

    def run_state(self, run_id: str) -> str | None:
        """Only the stored state of a run (the computing process's cancel check), or None."""
        with self._read() as conn:
            row = conn.execute(sa.select(runs_table.c.state).where(runs_table.c.id == run_id)).first()
        return None if row is None else row[0]

    def cancel_run(self, run_id: str) -> dict | None:
        """Mark an active run ``cancelled`` (the computing process stops at its next check); returns the run's
        JSON, or None when unknown (in the acting person's workspace)."""
        if not _is_id(run_id):
            return None
        with self._write() as conn:
            row = conn.execute(_scoped(sa.select(runs_table.c.state).where(runs_table.c.id == run_id), runs_table)
                               .with_for_update()).first()
            if row is None:
                return None
            if row[0] in _RUN_ACTIVE:
                conn.execute(runs_table.update().where(runs_table.c.id == run_id)
                             .values(state="cancelled", updated_at=utc_now()))
        return self.get_run(run_id)

    def delete_run(self, run_id: str) -> bool:
        """Forget a finished run; False when unknown or still active."""
        if not _is_id(run_id):
            return False
        with self._write() as conn:
            return conn.execute(_scoped(runs_table.delete().where(runs_table.c.id == run_id,
                                                                  runs_table.c.state.notin_(_RUN_ACTIVE)),
                                        runs_table)).rowcount > 0
