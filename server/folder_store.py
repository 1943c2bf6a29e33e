"""The laptop's store: one SQLite file in the data folder, ``DATA/scalewright.db``, behind :class:`SqlStore`.

The same code serves a laptop and a team server (SQLAlchemy Core, Alembic migrations at start); only the URL
differs: ``sqlite:///DATA/scalewright.db`` here, ``postgresql://...`` there. Uploads live inside the file with
their SHA-256, like everything else.

Earlier versions kept a laptop's data in ``DATA/scalewright.sqlite3`` plus the raw files under
``DATA/datasets/<id>/`` (:class:`server.store.SQLiteStore`). On the first start on such a folder its datasets,
snapshots and audit log are copied into ``scalewright.db`` through the backup zip (verified as any restore is,
one transaction: all or nothing), and then the earlier files are moved, unchanged, into
``DATA/earlier-store-<time>/`` with a note saying what happened; nothing is deleted.
"""
from __future__ import annotations

import contextlib
import os
import uuid
from pathlib import Path

import sqlalchemy as sa

from .sqlstore import SqlStore, datasets, snapshots
from .store import DB_NAME, LOCK_NAME, StartupError, _fsync_dir, check_data_dir, utc_now

__all__ = ["DB_FILE", "folder_url", "import_earlier_store", "open_folder_store"]

DB_FILE = "scalewright.db"
_EARLIER_WHO = "Scalewright (import of the data folder's earlier store)"


def folder_url(data_dir: str | os.PathLike) -> str:
    """The database URL of the data folder ``data_dir``: ``sqlite:///<absolute folder>/scalewright.db``."""
    return f"sqlite:///{Path(data_dir).expanduser().resolve() / DB_FILE}"


def open_folder_store(data_dir: str | os.PathLike) -> SqlStore:
    """The data folder's store, migrated, with an earlier store of the folder imported first.

    Raises :class:`StartupError` (one line naming the problem and a fix) for a folder that cannot be written
    or a database file that is unreadable or damaged.
    """
    data_dir = Path(data_dir)
    check_data_dir(data_dir, (DB_NAME, DB_FILE))
    store = SqlStore(folder_url(data_dir))
    try:
        store.imported = import_earlier_store(data_dir, store)  # what the start line reports
    except BaseException:
        store.close()
        raise
    return store


def _counts(store: SqlStore) -> tuple[int, int]:
    with store._read() as conn:
        return (conn.execute(sa.select(sa.func.count()).select_from(datasets)).scalar_one(),
                conn.execute(sa.select(sa.func.count()).select_from(snapshots)).scalar_one())


def import_earlier_store(data_dir: str | os.PathLike, store: SqlStore) -> dict | None:
    """Copy the folder's earlier store (``scalewright.sqlite3`` and ``datasets/``) into ``store``; None if none.

    Into an empty database everything is restored, the audit log included; into one that already holds data
    (an import cut short between its commit and the move) the backup merges: identical ids are skipped, a
    conflict refuses the start with the restore's message. Returns ``{datasets, snapshots, merge, moved_to}``
    (what was added, and the folder now holding the earlier files).
    """
    from .backup import BackupError, backup, restore_database
    from .store import SQLiteStore

    data_dir = Path(data_dir)
    legacy = data_dir / DB_NAME
    if not legacy.is_file():
        return None
    SQLiteStore(data_dir)  # the earlier schema brought up to date in place (a newer one is refused)
    stamp = utc_now()[:19].replace("-", "").replace(":", "").replace("T", "-")
    zip_path = data_dir / f".earlier-store-{uuid.uuid4().hex[:8]}.zip"
    try:
        try:
            backup(data_dir, zip_path, audit=False)
            merge = any(_counts(store))
            summary = restore_database(str(store.url), zip_path, merge, who=_EARLIER_WHO,
                                       label=f"the earlier store in {data_dir.resolve()}")
        except BackupError as exc:
            raise StartupError(f"The data folder {data_dir.resolve()} holds an earlier Scalewright store "
                               f"({DB_NAME}) that could not be copied into {DB_FILE}: {exc} Nothing was changed; "
                               "the earlier files are where they were.") from None
    finally:
        with contextlib.suppress(OSError):
            zip_path.unlink()
    target = data_dir / f"earlier-store-{stamp}"
    n = 1
    while target.exists():
        n += 1
        target = data_dir / f"earlier-store-{stamp}-{n}"
    target.mkdir()
    for name in ("datasets", DB_NAME, f"{DB_NAME}-wal", f"{DB_NAME}-shm"):
        if (data_dir / name).exists():
            os.replace(data_dir / name, target / name)
    datasets_n = summary.get("datasets", len(summary.get("datasets_added", [])))
    snapshots_n = summary.get("snapshots", len(summary.get("snapshots_added", [])))
    (target / "README.txt").write_text(
        f"These are the files of this data folder's earlier Scalewright store ({DB_NAME} and datasets/).\n"
        f"On {utc_now()} their {datasets_n} datasets and {snapshots_n} snapshots, with the audit log, were copied\n"
        f"into ../{DB_FILE}, which Scalewright now reads. Nothing here is read any more; keep this folder as\n"
        "long as you want a second copy, then delete it.\n", encoding="utf-8")
    _fsync_dir(data_dir)
    done = {"datasets": datasets_n, "snapshots": snapshots_n, "merge": summary["mode"] == "merge"}
    store.audit("import_earlier_store", who=_EARLIER_WHO, details={"from": DB_NAME, "moved_to": target.name, **done})
    return {**done, "moved_to": str(target)}


def backup_folder(data_dir: str | os.PathLike, out_zip: str | os.PathLike, *, who: str | None = None,
                  audit: bool = True) -> dict:
    """``scalewright backup --data-dir``: the folder's database into a backup zip (safe while a server runs).

    A folder still in the earlier store's layout (no server of this version has started on it) is backed up
    as it is; the zip format is the same.
    """
    from .backup import backup, backup_database

    if (Path(data_dir) / DB_FILE).is_file():
        return backup_database(folder_url(data_dir), out_zip, who=who, audit=audit)
    return backup(data_dir, out_zip, who=who, audit=audit)


def restore_folder(data_dir: str | os.PathLike, zip_path: str | os.PathLike, merge: bool = False, *,
                   who: str | None = None, max_bytes: int | None = None, label: str | None = None) -> dict:
    """``scalewright restore --data-dir``: a backup zip into the folder's database (empty, or ``merge``).

    The folder and its database are made (an earlier store imported) first; see
    :func:`server.backup.restore_database` for what is checked and added. Returns its summary plus ``data_dir``.
    """
    from .backup import BackupError, restore_database

    data_dir = Path(data_dir).absolute()
    if data_dir.exists() and not data_dir.is_dir():
        raise BackupError(f"{data_dir} is a file, not a folder.")
    existed = data_dir.exists()
    present = {p.name for p in data_dir.iterdir()} - {LOCK_NAME} if existed else set()
    if present and not present & {DB_FILE, DB_NAME}:  # somebody's folder, not a data folder
        if not merge:
            raise BackupError(f"The data folder {data_dir} is not empty. Restore into an empty folder, or add "
                              "--merge to add the backup's datasets and snapshots to the ones there.")
        raise BackupError(f"The folder {data_dir} is not empty and holds no Scalewright database; restore into an "
                          "empty folder instead.")
    try:
        open_folder_store(data_dir).close()
        out = restore_database(folder_url(data_dir), zip_path, merge, who=who, max_bytes=max_bytes, label=label)
    except BaseException:
        if not present:  # the folder was new or empty: leave it as it was
            for name in (DB_FILE, f"{DB_FILE}-wal", f"{DB_FILE}-shm"):
                with contextlib.suppress(OSError):
                    (data_dir / name).unlink()
            if not existed:
                with contextlib.suppress(OSError):
                    data_dir.rmdir()
        raise
    return {**out, "data_dir": str(data_dir)}
