"""Back up a store into one zip, and restore (or merge) such a zip into a store.

The zip holds::

    manifest.json                  format, software and schema version, creation time, and for every
                                   other member its path, size in bytes and SHA-256
    scalewright.sqlite3            datasets, snapshots and the audit log, as one SQLite file of the earlier
                                   folder store's schema (rollback-journal mode)
    datasets/<id>/raw              each dataset's uploaded file, byte for byte
    datasets/<id>/codebook         its codebook, when there was one
    team.json                      (backups of a store with people) workspaces, people with their token
                                   hashes, memberships, and the workspace of every dataset, snapshot and
                                   audit entry; a restore without it puts everything in the workspace "default"

:func:`backup_database` writes it from any store (the data folder's ``scalewright.db``, another SQLite file,
PostgreSQL) in one read transaction; :func:`backup` from a folder still in the earlier store's layout
(``server/folder_store.py`` imports such a folder through it).

:func:`restore_database` checks everything before it writes anything (:func:`verify`): the manifest lists
exactly the zip's members, every name is one of the forms above (so no ``../`` or absolute path can be
written), every size and SHA-256 matches, the database passes ``PRAGMA quick_check``, is not newer than this
code, and every dataset it records has its files in the zip with the recorded SHA-256.

Merging (``merge=True``) into a store already in use adds what is new and never changes what is there:

- a dataset whose id is not there is added (files and row, same id and creation time); one with the same
  id and the same SHA-256 of raw file and codebook is skipped; the same id with other content is a conflict;
- a snapshot whose id is not there is added with its record unchanged (byte for byte); one with the same
  id and an identical record is skipped; the same id with another record is a conflict;
- the zip's audit entries are not copied (the store's log stays its own); the merge itself is logged.

Any conflict refuses the whole merge (:class:`RestoreConflict`) before anything is written. Datasets
deleted since the backup come back with a merge. Without ``merge`` the store must hold no dataset and no
snapshot; the restore is one transaction.
"""
from __future__ import annotations

import contextlib
import hashlib
import json
import os
import re
import shutil
import sqlite3
import tempfile
import uuid
import zipfile
import zlib
from pathlib import Path

from . import __version__
from .store import (
    DB_NAME,
    SCHEMA_VERSION,
    StartupError,
    _fsync_dir,
    append_audit,
    migrate,
    schema_version,
    utc_now,
)

__all__ = ["FORMAT", "MANIFEST", "BackupError", "RestoreConflict", "backup", "backup_database",
           "restore_database", "verify"]

FORMAT = "scalewright-backup"
FORMAT_VERSION = 1
MANIFEST = "manifest.json"
MAX_MANIFEST_BYTES = 16 * 1024 * 1024
CHUNK = 1024 * 1024
TEAM = "team.json"
_MEMBER = re.compile(r"^(?:scalewright\.sqlite3|team\.json|datasets/([A-Za-z0-9_-]{1,64})/(raw|codebook))$")
_SHA = re.compile(r"^[0-9a-f]{64}$")


class BackupError(Exception):
    """A backup cannot be made, or a zip cannot be restored; the message is one line naming the problem."""

    status = 422
    code = "bad_backup"

    def __init__(self, message: str, details: dict | None = None):
        super().__init__(message)
        self.message, self.details = message, details or {}


class RestoreConflict(BackupError):
    """A merge would change something already in the folder (same id, other content)."""

    status = 409
    code = "restore_conflict"


# ---------------------------------------------------------------- backup

def _copy_into(zf: zipfile.ZipFile, source: Path, name: str) -> tuple[int, str]:
    """Stream ``source`` into the zip member ``name``; returns (size, sha256)."""
    digest, size = hashlib.sha256(), 0
    big = source.stat().st_size >= 2**31
    with open(source, "rb") as src, zf.open(name, "w", force_zip64=big) as out:
        while chunk := src.read(CHUNK):
            digest.update(chunk)
            size += len(chunk)
            out.write(chunk)
    return size, digest.hexdigest()


def backup(data_dir: str | os.PathLike, out_zip: str | os.PathLike, *, who: str | None = None,
           audit: bool = True) -> dict:
    """Write the data folder into one zip at ``out_zip`` (atomically); returns a summary.

    The database is copied with ``sqlite3.Connection.backup`` in one step, so the copy is one consistent
    state even while a server saves snapshots. A dataset deleted while the backup runs is left out of it.
    When ``audit`` is true the backup is appended to the folder's audit log (skipped on a read-only one).
    """
    data_dir, out_zip = Path(data_dir), Path(out_zip)
    db = data_dir / DB_NAME
    if not db.is_file():
        raise BackupError(f"{data_dir} holds no Scalewright database ({DB_NAME}); there is nothing to back up.")
    if not out_zip.parent.is_dir():
        raise BackupError(f"The folder {out_zip.parent} for the backup does not exist.")
    tmp_zip = out_zip.with_name(f".{out_zip.name}.{uuid.uuid4().hex[:8]}.tmp")
    try:
        with tempfile.TemporaryDirectory(prefix="scalewright-backup-") as scratch:
            copy = Path(scratch) / DB_NAME
            src = sqlite3.connect(db, timeout=30.0)
            dst = sqlite3.connect(copy, isolation_level=None)
            try:
                src.execute("PRAGMA busy_timeout=30000")
                src.backup(dst)  # one step (pages=-1): a single consistent read of the live database
            except sqlite3.DatabaseError as exc:
                raise BackupError(f"The data folder's database could not be copied ({exc}).") from None
            finally:
                src.close()
            files, gone = [], []
            with zipfile.ZipFile(tmp_zip, "w", compression=zipfile.ZIP_DEFLATED, compresslevel=6) as zf:
                try:
                    check = dst.execute("PRAGMA quick_check").fetchall()
                    if not check or check[0][0] != "ok":
                        raise BackupError(f"The data folder's database is damaged (quick_check: {check[0][0]}); "
                                          "it was not backed up.")
                    version = schema_version(dst)
                    rows = dst.execute("SELECT id, sha256, codebook_sha256 FROM datasets ORDER BY seq").fetchall()
                    for dataset_id, sha, cb_sha in rows:
                        folder = data_dir / "datasets" / dataset_id
                        try:
                            wanted = [("raw", sha)] + ([("codebook", cb_sha)] if cb_sha else [])
                            added = []
                            for kind, expected in wanted:
                                name = f"datasets/{dataset_id}/{kind}"
                                size, digest = _copy_into(zf, folder / kind, name)
                                if digest != expected:
                                    raise BackupError(f"The {kind} file of dataset {dataset_id} does not match its "
                                                      "recorded SHA-256; the data folder is damaged.",
                                                      {"dataset": dataset_id})
                                added.append({"path": name, "size": size, "sha256": digest})
                            files.extend(added)
                        except FileNotFoundError:  # deleted after the database was copied: leave it out
                            gone.append(dataset_id)
                    for dataset_id in gone:
                        dst.execute("DELETE FROM datasets WHERE id = ?", (dataset_id,))
                    n_datasets = len(rows) - len(gone)
                    n_snapshots = dst.execute("SELECT count(*) FROM snapshots").fetchone()[0]
                    dst.execute("PRAGMA journal_mode=DELETE")  # the copy is one self-contained file
                finally:
                    dst.close()
                size, digest = _copy_into(zf, copy, DB_NAME)
                files.insert(0, {"path": DB_NAME, "size": size, "sha256": digest})
                # Members left over from a dataset deleted mid-backup are harmless but not in the manifest:
                # refuse to finish rather than write a zip that restore would refuse.
                if gone:
                    listed = {f["path"] for f in files} | {MANIFEST}
                    if any(i.filename not in listed for i in zf.infolist()):
                        raise BackupError("A dataset was deleted while the backup ran; run the backup again.")
                manifest = {"format": FORMAT, "format_version": FORMAT_VERSION, "software_version": __version__,
                            "schema_version": version, "created_at": utc_now(), "datasets": n_datasets,
                            "snapshots": n_snapshots, "files": files}
                zf.writestr(MANIFEST, json.dumps(manifest, indent=1))
        with open(tmp_zip, "rb") as fh:
            os.fsync(fh.fileno())
            zip_sha = _sha256_of(fh)
        os.replace(tmp_zip, out_zip)
        _fsync_dir(out_zip.parent)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp_zip)
        raise
    summary = {"path": str(out_zip), "sha256": zip_sha, "size": out_zip.stat().st_size, "datasets": n_datasets,
               "snapshots": n_snapshots, "files": len(files), "schema_version": version}
    if audit:
        summary["audited"] = _audit_quietly(db, "backup", who=who, details={
            "zip_sha256": zip_sha, "zip_size": summary["size"], "datasets": n_datasets, "snapshots": n_snapshots,
            "file": out_zip.name})
    return summary


def _sha256_of(fh) -> str:
    digest = hashlib.sha256()
    while chunk := fh.read(CHUNK):
        digest.update(chunk)
    return digest.hexdigest()


def _connect(db: Path) -> sqlite3.Connection:
    con = sqlite3.connect(db, timeout=30.0, isolation_level=None)
    con.execute("PRAGMA busy_timeout=30000")
    con.execute("PRAGMA synchronous=FULL")
    return con


def _audit_quietly(db: Path, action: str, **kw) -> bool:
    """Append to the audit log of ``db`` when it has one and can be written; True if it was recorded."""
    try:
        con = _connect(db)
        try:
            if (schema_version(con) or 0) < 2:  # an old folder is not migrated just to log a backup
                return False
            con.execute("BEGIN IMMEDIATE")
            append_audit(con, action, **kw)
            con.execute("COMMIT")
            return True
        finally:
            con.close()
    except sqlite3.Error:
        return False


# ---------------------------------------------------------------- verify

class _Verified:
    """What :func:`verify` learnt: the manifest, the zip's SHA-256 and the database copy in scratch."""

    def __init__(self, manifest: dict, zip_sha: str, db_copy: Path, sizes: dict, label: str):
        self.manifest, self.zip_sha, self.db_copy, self.sizes = manifest, zip_sha, db_copy, sizes
        self.label = label
        self.team: dict | None = None  # the checked team.json of a SQL store's backup, when there is one


def _bad(message: str, **details) -> BackupError:
    return BackupError(message, details)


def _read_manifest(zf: zipfile.ZipFile, label: str) -> dict:
    try:
        info = zf.getinfo(MANIFEST)
    except KeyError:
        raise _bad(f"{label} has no {MANIFEST}: it is not a Scalewright backup.") from None
    if info.file_size > MAX_MANIFEST_BYTES:
        raise _bad(f"The {MANIFEST} in {label} is {info.file_size} bytes, too large for a manifest.")
    try:
        manifest = json.loads(zf.read(info).decode("utf-8"))
    except (ValueError, UnicodeDecodeError, zipfile.BadZipFile, zlib.error, EOFError):
        raise _bad(f"The {MANIFEST} in {label} cannot be read as JSON.") from None
    if not isinstance(manifest, dict) or manifest.get("format") != FORMAT:
        raise _bad(f"The {MANIFEST} in {label} is not a Scalewright backup manifest.")
    if manifest.get("format_version") != FORMAT_VERSION:
        raise _bad(f"{label} has backup format version {manifest.get('format_version')!r}; this Scalewright "
                   f"reads version {FORMAT_VERSION}.")
    version = manifest.get("schema_version")
    if not isinstance(version, int) or isinstance(version, bool):
        raise _bad(f"The {MANIFEST} in {label} has no schema version.")
    if version > SCHEMA_VERSION:
        raise _bad(f"{label} was made by a newer Scalewright (schema version {version}; this version knows up "
                   f"to {SCHEMA_VERSION}). Upgrade Scalewright to restore it.", schema_version=version)
    files = manifest.get("files")
    if not isinstance(files, list):
        raise _bad(f"The {MANIFEST} in {label} lists no files.")
    for f in files:
        if not (isinstance(f, dict) and isinstance(f.get("path"), str) and isinstance(f.get("size"), int)
                and not isinstance(f.get("size"), bool) and f["size"] >= 0 and isinstance(f.get("sha256"), str)
                and _SHA.match(f["sha256"])):
            raise _bad(f"The {MANIFEST} in {label} has a malformed entry: {json.dumps(f)[:200]}.")
    return manifest


def _hash_member(zf: zipfile.ZipFile, info: zipfile.ZipInfo, declared: int, out=None, label: str = "the zip") -> str:
    """SHA-256 of a member, read in chunks; stops as soon as it grows past its declared size."""
    digest, size = hashlib.sha256(), 0
    try:
        with zf.open(info) as src:
            while chunk := src.read(CHUNK):
                size += len(chunk)
                if size > declared:
                    raise _bad(f"The member {info.filename} of {label} unpacks to more than the {declared} "
                               "bytes its manifest states.", member=info.filename)
                digest.update(chunk)
                if out is not None:
                    out.write(chunk)
    except (zipfile.BadZipFile, zlib.error, EOFError) as exc:
        raise _bad(f"The member {info.filename} of {label} is damaged ({exc}).", member=info.filename) from None
    if size != declared:
        raise _bad(f"The member {info.filename} of {label} has {size} bytes; its manifest states {declared}.",
                   member=info.filename)
    return digest.hexdigest()


def verify(zip_path: str | os.PathLike, scratch: str | os.PathLike, *, max_bytes: int | None = None,
           label: str | None = None) -> _Verified:
    """Check a backup zip completely, writing only into ``scratch`` (a copy of its database).

    Raises :class:`BackupError` naming the first problem found.
    """
    zip_path, scratch = Path(zip_path), Path(scratch)
    label = label or zip_path.name
    try:
        with open(zip_path, "rb") as fh:
            zip_sha = _sha256_of(fh)
        zf = zipfile.ZipFile(zip_path)
    except FileNotFoundError:
        raise _bad(f"The file {zip_path} does not exist.") from None
    except (zipfile.BadZipFile, OSError, ValueError) as exc:
        raise _bad(f"{label} is not a readable zip file ({exc}).") from None
    with zf:
        infos = zf.infolist()
        names = [i.filename for i in infos]
        if len(set(names)) != len(names):
            dup = sorted({n for n in names if names.count(n) > 1})
            raise _bad(f"{label} holds the member {dup[0]} more than once.", members=dup[:10])
        manifest = _read_manifest(zf, label)
        for name in names:
            if name != MANIFEST and not _MEMBER.match(name):
                raise _bad(f"{label} holds an unexpected member {name!r} (a backup holds only {DB_NAME}, "
                           "datasets/<id>/raw, datasets/<id>/codebook and manifest.json).", member=name[:300])
        listed = {f["path"]: f for f in manifest["files"]}
        if len(listed) != len(manifest["files"]):
            raise _bad(f"The {MANIFEST} in {label} lists a file twice.")
        members = set(names) - {MANIFEST}
        if set(listed) != members:
            missing, extra = sorted(set(listed) - members), sorted(members - set(listed))
            raise _bad(f"The {MANIFEST} in {label} does not list exactly the zip's files "
                       f"(listed but absent: {missing[:5]}; present but not listed: {extra[:5]}).",
                       missing=missing[:50], extra=extra[:50])
        if DB_NAME not in members:
            raise _bad(f"{label} holds no database ({DB_NAME}).")
        by_name = {i.filename: i for i in infos}
        total = 0
        for name, entry in listed.items():
            if by_name[name].file_size != entry["size"]:
                raise _bad(f"The member {name} of {label} has {by_name[name].file_size} bytes; its manifest states "
                           f"{entry['size']}.", member=name)
            total += entry["size"]
        if max_bytes is not None and total > max_bytes:
            err = _bad(f"{label} unpacks to {total} bytes, more than the {max_bytes} bytes allowed here.",
                       total_bytes=total, limit_bytes=max_bytes)
            err.status, err.code = 413, "too_large"
            raise err
        db_copy = scratch / DB_NAME
        for name, entry in sorted(listed.items()):
            if name == DB_NAME:
                with open(db_copy, "wb") as out:
                    digest = _hash_member(zf, by_name[name], entry["size"], out, label)
            else:
                digest = _hash_member(zf, by_name[name], entry["size"], label=label)
            if digest != entry["sha256"]:
                raise _bad(f"The member {name} of {label} does not match its SHA-256 in the manifest: the zip was "
                           "altered or damaged. Nothing was restored.", member=name)
        team = _read_team(zf, listed[TEAM]["size"], label) if TEAM in listed else None
    _check_database(db_copy, listed, label)
    checked = _Verified(manifest, zip_sha, db_copy, {n: e["size"] for n, e in listed.items()}, label)
    checked.team = team
    return checked


_ROLES = ("owner", "analyst", "viewer")


def _read_team(zf: zipfile.ZipFile, size: int, label: str) -> dict:
    """The team.json member, checked field by field (BackupError naming the first bad entry)."""
    if size > MAX_MANIFEST_BYTES:
        raise _bad(f"The {TEAM} in {label} is {size} bytes, too large.")
    try:
        team = json.loads(zf.read(TEAM).decode("utf-8"))
    except (ValueError, UnicodeDecodeError, zipfile.BadZipFile, zlib.error, EOFError):
        raise _bad(f"The {TEAM} in {label} cannot be read as JSON.") from None

    def bad(what, value):
        return _bad(f"The {TEAM} in {label} has a malformed {what}: {json.dumps(value)[:200]}.", member=TEAM)

    def text(v, n=200):
        return isinstance(v, str) and 0 < len(v) <= n and "\x00" not in v

    def hexbytes(v):
        return isinstance(v, str) and len(v) <= 256 and re.fullmatch(r"(?:[0-9a-f]{2})+", v) is not None

    if not isinstance(team, dict):
        raise bad("content", team)
    for key in ("workspaces", "people", "memberships", "audit"):
        if not isinstance(team.get(key), list):
            raise bad(key, team.get(key))
    for key in ("datasets", "snapshots"):
        if not isinstance(team.get(key), dict):
            raise bad(key, team.get(key))
    for w in team["workspaces"]:
        if not (isinstance(w, dict) and text(w.get("id"), 64) and text(w.get("name"))
                and text(w.get("created_at"), 32)):
            raise bad("workspace", w)
    for p in team["people"]:
        if not (isinstance(p, dict) and text(p.get("id"), 64) and text(p.get("name")) and text(p.get("token_key"), 32)
                and hexbytes(p.get("token_salt")) and hexbytes(p.get("token_hash")) and text(p.get("created_at"), 32)):
            raise bad("person", {k: v for k, v in p.items() if k not in ("token_salt", "token_hash")}
                      if isinstance(p, dict) else p)
    known_ws = {w["id"] for w in team["workspaces"]}
    known_people = {p["id"] for p in team["people"]}
    for m in team["memberships"]:
        if not (isinstance(m, dict) and m.get("person_id") in known_people and m.get("workspace_id") in known_ws
                and m.get("role") in _ROLES):
            raise bad("membership", m)
    for key in ("datasets", "snapshots"):
        for ident, ws in team[key].items():
            if ws not in known_ws:
                raise bad(f"workspace of {key[:-1]} {ident}", ws)
    for ws in team["audit"]:
        if ws not in known_ws:
            raise bad("workspace of an audit entry", ws)
    return team


def _check_database(db_copy: Path, listed: dict, label: str) -> None:
    """The copy is a sound database, migrated to this schema, whose datasets match the zip's files."""
    try:
        con = sqlite3.connect(db_copy, isolation_level=None)
        try:
            check = con.execute("PRAGMA quick_check").fetchall()
            if not check or check[0][0] != "ok":
                raise _bad(f"The database in {label} is damaged (quick_check: {check[0][0] if check else '?'}).")
            migrate(con)
            rows = con.execute("SELECT id, sha256, codebook_sha256 FROM datasets").fetchall()
        finally:
            con.close()
    except sqlite3.DatabaseError as exc:
        raise _bad(f"The database in {label} cannot be read ({exc}).") from None
    except StartupError as exc:  # SchemaVersionError: written by a newer Scalewright
        raise _bad(f"The database in {label} cannot be used: {exc}") from None
    known = set()
    for dataset_id, sha, cb_sha in rows:
        for kind, expected in (("raw", sha), ("codebook", cb_sha)):
            path = f"datasets/{dataset_id}/{kind}"
            if expected is None:
                continue
            known.add(path)
            if path not in listed or listed[path]["sha256"] != expected:
                raise _bad(f"The dataset {dataset_id} in {label} lacks its {kind} file, or the file does not match "
                           "the SHA-256 recorded in the database.", dataset=dataset_id)
    orphans = sorted(set(listed) - known - {DB_NAME, TEAM})
    if orphans:
        raise _bad(f"{label} holds {orphans[0]}, which belongs to no dataset in its database.", member=orphans[0])


# ---------------------------------------------------------------- restore

def _free_bytes(path: Path) -> int | None:
    probe = path
    while not probe.exists() and probe != probe.parent:
        probe = probe.parent
    try:
        return shutil.disk_usage(probe).free
    except OSError:
        return None


def _merge_plan(datasets: list, snapshots: list, have_ds: dict, have_snap: dict, where: str
                ) -> tuple[list, list, list, list]:
    """What a merge adds and skips: ``(add_ds, skip_ds, add_snap, skip_snap)``; a backup row whose id is taken
    by different content (datasets: raw and codebook SHA-256; snapshots: the record) raises RestoreConflict."""
    add_ds, skip_ds, add_snap, skip_snap, conflicts = [], [], [], [], []
    for row in datasets:
        if row[0] not in have_ds:
            add_ds.append(row)
        elif have_ds[row[0]] == (row[4], row[5]):
            skip_ds.append(row[0])
        else:
            conflicts.append({"dataset": row[0]})
    for row in snapshots:
        if row[0] not in have_snap:
            add_snap.append(row)
        elif have_snap[row[0]] == row[3]:
            skip_snap.append(row[0])
        else:
            conflicts.append({"snapshot": row[0]})
    if conflicts:
        kind, ident = next(iter(conflicts[0].items()))
        raise RestoreConflict(
            f"The backup's {kind} {ident} has the same id as a different {kind} in this {where} "
            f"({len(conflicts)} conflict{'s' if len(conflicts) != 1 else ''}); nothing was restored.",
            {"conflicts": conflicts[:50]})
    return add_ds, skip_ds, add_snap, skip_snap


def _restore_details(zip_path: Path, checked: _Verified) -> dict:
    m = checked.manifest
    return {"zip_sha256": checked.zip_sha, "file": checked.label, "backup_created_at": m.get("created_at"),
            "backup_software_version": m.get("software_version"), "backup_schema_version": m.get("schema_version")}


_DATASET_COLS = ("id", "name", "filename", "codebook_filename", "sha256", "codebook_sha256", "size_bytes", "options",
                 "meta", "created_at")


# ---------------------------------------------------------------- the SQL store (serve --database URL)
#
# A database backup is the same zip: the database's datasets, snapshots and audit log are written into a
# folder-format SQLite file (scalewright.sqlite3, this code's schema) and each upload, read from the database,
# becomes datasets/<id>/raw and codebook; team.json adds the workspaces, people (token hashes) and memberships,
# and which workspace each dataset, snapshot and audit entry belongs to (a folder restore leaves it out).
# So a folder backup restores into a database and a database backup into a folder, and ``verify`` checks
# both alike.

def _open_sql_store(database: str):
    from .sqlstore import SqlStore

    return SqlStore(database)  # reachable and migrated, or StartupError with one line


def backup_database(database: str, out_zip: str | os.PathLike, *, who: str | None = None,
                    audit: bool = True) -> dict:
    """Write the database named by ``database`` (a URL) into a backup zip at ``out_zip``; returns a summary.

    Everything is read in one transaction (REPEATABLE READ, read only, on PostgreSQL; one read transaction
    of SQLite's WAL), so the copy is one consistent state while servers save snapshots and delete datasets.
    """
    import sqlalchemy as sa

    from .sqlstore import audit_log, dataset_files, datasets, snapshots

    out_zip = Path(out_zip)
    if not out_zip.parent.is_dir():
        raise BackupError(f"The folder {out_zip.parent} for the backup does not exist.")
    store = _open_sql_store(database)
    tmp_zip = out_zip.with_name(f".{out_zip.name}.{uuid.uuid4().hex[:8]}.tmp")
    try:
        with tempfile.TemporaryDirectory(prefix="scalewright-backup-") as scratch:
            copy = Path(scratch) / DB_NAME
            dst = _connect(copy)
            try:
                migrate(dst)
                files = []
                options = {"isolation_level": "REPEATABLE READ", "postgresql_readonly": True} \
                    if store.backend == "postgresql" else {}
                with store.engine.connect().execution_options(**options) as conn, conn.begin(), \
                        zipfile.ZipFile(tmp_zip, "w", compression=zipfile.ZIP_DEFLATED, compresslevel=6) as zf:
                    rows = conn.execute(sa.select(*(datasets.c[k] for k in _DATASET_COLS))
                                        .order_by(datasets.c.seq)).all()
                    snaps = conn.execute(sa.select(snapshots.c.id, snapshots.c.dataset_id, snapshots.c.created_at,
                                                   snapshots.c.record).order_by(snapshots.c.seq)).all()
                    entries = conn.execute(sa.select(audit_log.c.at, audit_log.c.who, audit_log.c.action,
                                                     audit_log.c.dataset_id, audit_log.c.snapshot_id,
                                                     audit_log.c.details).order_by(audit_log.c.seq)).all()
                    team = _team_of(conn)
                    for row in rows:
                        dataset_id, sha, cb_sha = row[0], row[4], row[5]
                        for kind, expected in [("raw", sha)] + ([("codebook", cb_sha)] if cb_sha else []):
                            name = f"datasets/{dataset_id}/{kind}"
                            digest, size = hashlib.sha256(), 0
                            with zf.open(name, "w", force_zip64=True) as out:
                                for (part,) in conn.execute(
                                        sa.select(dataset_files.c.data).where(
                                            dataset_files.c.dataset_id == dataset_id, dataset_files.c.kind == kind)
                                        .order_by(dataset_files.c.part), execution_options={"yield_per": 4}):
                                    part = bytes(part)
                                    digest.update(part)
                                    size += len(part)
                                    out.write(part)
                            if digest.hexdigest() != expected:
                                raise BackupError(f"The {kind} file of dataset {dataset_id} does not match its "
                                                  "recorded SHA-256; the database is damaged.", {"dataset": dataset_id})
                            files.append({"path": name, "size": size, "sha256": expected})
                    dst.execute("BEGIN IMMEDIATE")
                    dst.executemany(f"INSERT INTO datasets ({', '.join(_DATASET_COLS)}) "
                                    f"VALUES ({', '.join('?' * len(_DATASET_COLS))})", [tuple(r) for r in rows])
                    dst.executemany("INSERT INTO snapshots (id, dataset_id, created_at, record) VALUES (?, ?, ?, ?)",
                                    [tuple(r) for r in snaps])
                    dst.executemany("INSERT INTO audit (at, who, action, dataset_id, snapshot_id, details) "
                                    "VALUES (?, ?, ?, ?, ?, ?)", [tuple(r) for r in entries])
                    dst.execute("COMMIT")
                    dst.execute("PRAGMA journal_mode=DELETE")  # the copy is one self-contained file
                    version = schema_version(dst)
                    dst.close()
                    size, digest = _copy_into(zf, copy, DB_NAME)
                    files.insert(0, {"path": DB_NAME, "size": size, "sha256": digest})
                    team_bytes = json.dumps(team, indent=1, sort_keys=True).encode()
                    zf.writestr(TEAM, team_bytes)
                    files.insert(1, {"path": TEAM, "size": len(team_bytes),
                                     "sha256": hashlib.sha256(team_bytes).hexdigest()})
                    manifest = {"format": FORMAT, "format_version": FORMAT_VERSION, "software_version": __version__,
                                "schema_version": version, "created_at": utc_now(), "datasets": len(rows),
                                "snapshots": len(snaps), "files": files, "source": "database"}
                    zf.writestr(MANIFEST, json.dumps(manifest, indent=1))
            finally:
                dst.close()
        with open(tmp_zip, "rb") as fh:
            os.fsync(fh.fileno())
            zip_sha = _sha256_of(fh)
        os.replace(tmp_zip, out_zip)
        _fsync_dir(out_zip.parent)
        summary = {"path": str(out_zip), "sha256": zip_sha, "size": out_zip.stat().st_size, "datasets": len(rows),
                   "snapshots": len(snaps), "files": len(files), "schema_version": version}
        if audit:
            store.audit("backup", who=who, details={"zip_sha256": zip_sha, "zip_size": summary["size"],
                                                    "datasets": len(rows), "snapshots": len(snaps),
                                                    "file": out_zip.name})
            summary["audited"] = True
        return summary
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp_zip)
        raise
    finally:
        store.close()


def _team_of(conn) -> dict:
    """The team.json content of a SQL store, read on ``conn`` (the backup's transaction)."""
    import sqlalchemy as sa

    from .sqlstore import audit_log, datasets, memberships, people, snapshots, workspaces

    return {
        "workspaces": [{"id": r[0], "name": r[1], "created_at": r[2]} for r in conn.execute(
            sa.select(workspaces.c.id, workspaces.c.name, workspaces.c.created_at).order_by(workspaces.c.id))],
        "people": [{"id": r[0], "name": r[1], "token_key": r[2], "token_salt": bytes(r[3]).hex(),
                    "token_hash": bytes(r[4]).hex(), "created_at": r[5]} for r in conn.execute(
            sa.select(people.c.id, people.c.name, people.c.token_key, people.c.token_salt, people.c.token_hash,
                      people.c.created_at).order_by(people.c.id))],
        "memberships": [{"person_id": r[0], "workspace_id": r[1], "role": r[2]} for r in conn.execute(
            sa.select(memberships.c.person_id, memberships.c.workspace_id, memberships.c.role)
            .order_by(memberships.c.person_id))],
        "datasets": dict(conn.execute(sa.select(datasets.c.id, datasets.c.workspace_id)).all()),
        "snapshots": dict(conn.execute(sa.select(snapshots.c.id, snapshots.c.workspace_id)).all()),
        "audit": [r[0] for r in conn.execute(sa.select(audit_log.c.workspace_id).order_by(audit_log.c.seq))],
    }


def _restore_team(conn, team: dict, label: str) -> dict:
    """Add the team's workspaces, people and memberships that the database lacks (same ids); a workspace,
    person or token key that exists with other content is a conflict. Returns {workspace id: id to use}."""
    import sqlalchemy as sa

    from .sqlstore import memberships, people, workspaces

    conflicts = []
    have_ws = {r[0]: r[1] for r in conn.execute(sa.select(workspaces.c.id, workspaces.c.name))}
    by_name = {name: ident for ident, name in have_ws.items()}
    add_ws = []
    for w in team["workspaces"]:
        if w["id"] in have_ws:
            if have_ws[w["id"]] != w["name"]:
                conflicts.append({"workspace": w["id"]})
        elif w["name"] in by_name:
            conflicts.append({"workspace": w["name"]})
        else:
            add_ws.append(w)
    have_people = {r[0]: (r[1], r[2]) for r in conn.execute(sa.select(people.c.id, people.c.token_key,
                                                                      people.c.token_hash))}
    keys = {v[0] for v in have_people.values()}
    add_people = []
    for p in team["people"]:
        if p["id"] in have_people:
            if have_people[p["id"]] != (p["token_key"], bytes.fromhex(p["token_hash"])):
                conflicts.append({"person": p["id"]})
        elif p["token_key"] in keys:
            conflicts.append({"person": p["id"]})
        else:
            add_people.append(p)
    if conflicts:
        kind, ident = next(iter(conflicts[0].items()))
        raise RestoreConflict(f"The backup's {kind} {ident} differs from the one of the same id or name in this "
                              f"database ({len(conflicts)} conflict{'s' if len(conflicts) != 1 else ''}); nothing "
                              "was restored.", {"conflicts": conflicts[:50], "file": label})
    for w in add_ws:
        conn.execute(workspaces.insert().values(**w))
    added = {p["id"] for p in add_people}
    for p in add_people:
        conn.execute(people.insert().values(id=p["id"], name=p["name"], token_key=p["token_key"],
                                            token_salt=bytes.fromhex(p["token_salt"]),
                                            token_hash=bytes.fromhex(p["token_hash"]), created_at=p["created_at"]))
    for m in team["memberships"]:
        if m["person_id"] in added:
            conn.execute(memberships.insert().values(**m))
    return {"workspaces": len(add_ws), "people": len(add_people)}


def restore_database(database: str, zip_path: str | os.PathLike, merge: bool = False, *, who: str | None = None,
                     max_bytes: int | None = None, label: str | None = None) -> dict:
    """Restore a backup zip (of a folder or of a database) into the database named by ``database``.

    Verified first (:func:`verify`). Without ``merge`` the database must hold no dataset and no snapshot;
    the zip's datasets (files included), snapshots and audit log are added, with the workspaces, people
    (their token hashes, so their tokens still sign in) and memberships of a SQL store's backup; a backup
    without them (a folder's, or an older one) puts everything in the workspace ``default``. With ``merge``
    the rules of a folder merge apply (new ids added, identical ones skipped, any conflict refuses
    everything; a workspace or person of the same id or name with other content is a conflict too). One
    transaction: all or nothing. The restore is appended to the database's audit log.
    """
    import sqlalchemy as sa

    from .sqlstore import CHUNK_BYTES, DEFAULT_WORKSPACE, audit_log, datasets, snapshots

    zip_path = Path(zip_path)
    store = _open_sql_store(database)
    try:
        with tempfile.TemporaryDirectory(prefix="scalewright-restore-") as scratch:
            checked = verify(zip_path, scratch, max_bytes=max_bytes, label=label)
            free = _free_bytes(store._folder) if store._folder is not None else None  # a SQLite file's disk
            need = sum(checked.sizes.values())
            if free is not None and need > free:
                raise _bad(f"The backup needs {need} bytes but only {free} are free on the database's disk.")
            src = sqlite3.connect(checked.db_copy)
            try:
                zip_datasets = src.execute(f"SELECT {', '.join(_DATASET_COLS)} FROM datasets ORDER BY seq").fetchall()
                zip_snaps = src.execute("SELECT id, dataset_id, created_at, record FROM snapshots "
                                        "ORDER BY seq").fetchall()
                zip_audit = src.execute("SELECT at, who, action, dataset_id, snapshot_id, details FROM audit "
                                        "ORDER BY seq").fetchall()
            finally:
                src.close()
            with store._write() as conn, zipfile.ZipFile(zip_path) as zf:
                if conn.dialect.name == "postgresql":  # one restore at a time; saves may go on
                    conn.execute(sa.text("LOCK TABLE datasets IN SHARE ROW EXCLUSIVE MODE"))
                have_ds = {r[0]: (r[1], r[2]) for r in conn.execute(
                    sa.select(datasets.c.id, datasets.c.sha256, datasets.c.codebook_sha256))}
                have_snap = dict(conn.execute(sa.select(snapshots.c.id, snapshots.c.record)).all())
                if not merge and (have_ds or have_snap):
                    raise _bad(f"The database {store.url.render_as_string(hide_password=True)} is not empty. "
                               "Restore into an empty database, or add --merge to add the backup's datasets and "
                               "snapshots to the ones there.")
                add_ds, skip_ds, add_snap, skip_snap = _merge_plan(zip_datasets, zip_snaps, have_ds, have_snap,
                                                                   "database")
                team = checked.team
                team_added = _restore_team(conn, team, checked.label) if team is not None else None
                ds_ws = team["datasets"] if team is not None else {}
                snap_ws = team["snapshots"] if team is not None else {}
                audit_ws = team["audit"] if team is not None and len(team["audit"]) == len(zip_audit) else []
                for row in add_ds:
                    conn.execute(datasets.insert().values(**dict(zip(_DATASET_COLS, row)),
                                                          workspace_id=ds_ws.get(row[0], DEFAULT_WORKSPACE)))
                    for kind, sha in (("raw", row[4]), ("codebook", row[5])):
                        if sha is None:
                            continue
                        name = f"datasets/{row[0]}/{kind}"
                        with zf.open(name) as member:
                            digest, _ = store._put_file(conn, row[0], kind,
                                                        iter(lambda m=member: m.read(CHUNK_BYTES), b""))
                        if digest != sha:
                            raise _bad(f"The member {name} changed while it was restored; nothing was restored.",
                                       member=name)
                for row in add_snap:
                    conn.execute(snapshots.insert().values(id=row[0], dataset_id=row[1], created_at=row[2],
                                                           record=row[3],
                                                           workspace_id=snap_ws.get(row[0], DEFAULT_WORKSPACE)))
                if not merge:
                    for i, row in enumerate(zip_audit):
                        conn.execute(audit_log.insert().values(at=row[0], who=row[1], action=row[2],
                                                               dataset_id=row[3], snapshot_id=row[4], details=row[5],
                                                               workspace_id=audit_ws[i] if audit_ws
                                                               else DEFAULT_WORKSPACE))
                summary = {"datasets_added": [r[0] for r in add_ds], "datasets_skipped": skip_ds,
                           "snapshots_added": [r[0] for r in add_snap], "snapshots_skipped": skip_snap}
                details = {**_restore_details(zip_path, checked), "merge": merge,
                           "datasets": len(add_ds), "snapshots": len(add_snap)}
                if team_added is not None:
                    details.update(workspaces_added=team_added["workspaces"], people_added=team_added["people"])
                if merge:
                    details.update(summary, datasets_added_sha256={r[0]: r[4] for r in add_ds})
                conn.execute(audit_log.insert().values(at=utc_now(), who=(str(who).strip()[:80] or None) if who
                                                       else None, action="restore", dataset_id=None,
                                                       snapshot_id=None, details=json.dumps(details)))
        where = store.url.render_as_string(hide_password=True)
        if merge:
            return {"mode": "merge", "database": where, **summary}
        return {"mode": "new", "database": where, "datasets": len(add_ds), "snapshots": len(add_snap),
                "files": len(checked.manifest["files"])}
    finally:
        store.close()
