"""Command line: ``scalewright serve [--host 127.0.0.1] [--port 8765] [--data-dir PATH] [--database URL]
[--workers N] [--demo]``,
``scalewright migrate [--database URL]``, ``scalewright people add|list|remove ... --database URL``,
``scalewright backup --data-dir DIR --out FILE.zip``, ``scalewright restore --data-dir DIR FILE.zip [--merge]``
and ``scalewright analyse FILE [--codebook FILE] [--json]`` (``server.script``)."""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

from .script import add_arguments as add_analyse_arguments
from .script import main as analyse_command
from .settings import Settings


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="scalewright", description="Scalewright: trim a draft item pool together.")
    sub = p.add_subparsers(dest="command", required=True)
    s = sub.add_parser("serve", help="start the dashboard")
    s.add_argument("--host", default="127.0.0.1",
                   help="address to bind (default 127.0.0.1; anything else requires the access token)")
    s.add_argument("--port", type=int, default=8765, help="port (default 8765)")
    s.add_argument("--data-dir", type=Path, default=Path("data"),
                   help="folder for datasets, snapshots and the database (default ./data)")
    s.add_argument("--database", default=None, metavar="URL",
                   help="keep datasets, snapshots and the audit log in this database: postgresql://USER@HOST:PORT/DB "
                        "or sqlite:///PATH (default: the SQLite file scalewright.db in --data-dir)")
    s.add_argument("--workers", type=int, default=1, metavar="N",
                   help="server processes sharing the --database (default 1; more than one needs PostgreSQL)")
    s.add_argument("--demo", action="store_true", help="load the built-in demo data on first start")
    s.add_argument("--max-upload-mb", type=float, default=100.0, help="largest upload in MB (default 100)")
    s.add_argument("--token", default=None,
                   help="access token for network sharing (default: generated when --host is not local)")
    s.add_argument("--allowed-hosts", default="",
                   help="comma-separated extra host names the server answers to (e.g. a LAN name)")
    s.add_argument("--max-items", type=int, default=1000, help="most item columns in a file (default 1000)")
    s.add_argument("--max-xlsx-cells", type=int, default=5_000_000,
                   help="most cells an XLSX sheet may declare (default 5000000)")
    s.add_argument("--max-unpacked-mb", type=float, default=1024.0,
                   help="most megabytes an XLSX may unpack to (default 1024)")
    s.add_argument("--cache-mb", type=float, default=2048.0,
                   help="memory for parsed datasets kept between requests, in MB (default 2048)")
    s.add_argument("--max-import-mb", type=float, default=2048.0,
                   help="largest workspace backup the dashboard imports, in MB (default 2048)")
    s.add_argument("--run-workers", type=int, default=None,
                   help="worker processes of each resampling run (default: one per core, at a lower priority "
                        "than the server)")
    b = sub.add_parser("backup", help="write the whole data folder into one zip (safe while a server runs)")
    b.add_argument("--data-dir", type=Path, default=Path("data"), help="the data folder (default ./data)")
    b.add_argument("--out", type=Path, required=True, help="the zip file to write")
    b.add_argument("--database", default=None, metavar="URL",
                   help="back up this database (postgresql://USER@HOST:PORT/DB or sqlite:///PATH), not --data-dir")
    b.add_argument("--who", default=None, help="your name, for the audit log")
    r = sub.add_parser("restore", help="restore a backup zip into an empty data folder (or --merge)")
    r.add_argument("--data-dir", type=Path, default=Path("data"), help="the data folder (default ./data)")
    r.add_argument("zip", type=Path, help="the backup zip")
    r.add_argument("--database", default=None, metavar="URL",
                   help="restore into this database (empty, or --merge), not --data-dir; a folder's backup will do")
    r.add_argument("--merge", action="store_true",
                   help="add the backup's new datasets and snapshots to a folder already in use")
    r.add_argument("--who", default=None, help="your name, for the audit log")
    m = sub.add_parser("migrate", help="bring the database's schema up to date (the server also does it at start)")
    m.add_argument("--database", default=None, metavar="URL",
                   help="the database: postgresql://USER@HOST:PORT/DB or sqlite:///PATH (default: the data folder's)")
    m.add_argument("--data-dir", type=Path, default=Path("data"),
                   help="the data folder, when no --database is given (default ./data)")
    a = sub.add_parser("analyse", help="analyse a response file and print a summary (or --json, the API's answer)")
    add_analyse_arguments(a)
    _add_people_parser(sub)
    return p


def _add_people_parser(sub) -> None:
    pe = sub.add_parser("people", help="the people of a team server (--database), their workspaces and roles")
    acts = pe.add_subparsers(dest="people_command", required=True)
    for name, text in (("add", "add a person to a workspace and print their access token (shown once)"),
                       ("list", "list the people, their workspaces and roles"),
                       ("remove", "remove a person from a workspace (their token stops working)")):
        q = acts.add_parser(name, help=text)
        if name != "list":
            q.add_argument("name", help="the person's name, as shown beside their changes")
        q.add_argument("--workspace", required=name != "list", default=None,
                       help="the workspace (created by the first 'add' naming it)")
        if name == "add":
            q.add_argument("--role", required=True, choices=("owner", "analyst", "viewer"),
                           help="owner: members and deletions; analyst: upload, drop, save, restore; viewer: read")
        q.add_argument("--database", required=True, metavar="URL",
                       help="the team server's database: postgresql://USER@HOST:PORT/DB or sqlite:///PATH")


def _people_command(args) -> int:
    """``people add|list|remove``: the result on stdout (the token once), or one line of error and exit 1."""
    from .people import PeopleError, add_person, list_people, remove_person
    from .sqlstore import SqlStore
    from .store import StartupError, StorageError

    store = None
    try:
        store = SqlStore(args.database)  # migrates first, as the server does
        if args.people_command == "add":
            person, token = add_person(store, args.name, workspace=args.workspace, role=args.role)
            print(f"Added {person['name']} to the workspace {person['workspace']} as {person['role']}.")
            print("Their personal access token (shown only now; give it to them privately):")
            print(token, flush=True)
        elif args.people_command == "list":
            rows = list_people(store, workspace=args.workspace)
            for row in rows:
                print(f"{row['workspace']}\t{row['name']}\t{row['role']}\t{row['created_at']}")
            if not rows:
                print(f"Nobody in the workspace {args.workspace}." if args.workspace else
                      "Nobody yet: the server runs in laptop mode (no sign-in).", flush=True)
        elif not remove_person(store, args.name, workspace=args.workspace):
            print(f"scalewright people remove: nobody called {args.name!r} in the workspace "
                  f"{args.workspace!r}.", file=sys.stderr, flush=True)
            return 1
        else:
            print(f"Removed {args.name} from the workspace {args.workspace}; their token no longer works.")
        return 0
    except (PeopleError, StartupError, StorageError) as exc:
        message = getattr(exc, "message", None) or str(exc)
    except Exception as exc:  # a driver error (cannot connect, refused): one line, no traceback
        message = f"{type(exc).__name__}: {getattr(exc, 'orig', None) or exc}"
    finally:
        if store is not None:
            store.close()
    print(f"scalewright people {args.people_command}: {' '.join(str(message).split())}", file=sys.stderr,
          flush=True)
    return 1


def _workspace_command(args) -> int:
    """``backup`` and ``restore``: one line of result on stdout, or one line of error on stderr and exit 1."""
    import sqlite3

    from .backup import BackupError
    from .folder_store import backup_folder, restore_folder
    from .store import StartupError, StorageError, data_dir_holder

    try:
        from .backup import backup_database, restore_database  # the SQL store (--database): same zip

        if args.command == "backup":
            out = (backup_database(args.database, args.out, who=args.who) if args.database
                   else backup_folder(args.data_dir, args.out, who=args.who))
            print(f"Backed up {out['datasets']} datasets and {out['snapshots']} snapshots to {out['path']} "
                  f"({out['size']} bytes, SHA-256 {out['sha256']}).", flush=True)
        elif args.database:
            out = restore_database(args.database, args.zip, merge=args.merge, who=args.who)
            out["data_dir"] = out["database"]
        else:
            holder = data_dir_holder(args.data_dir)
            if holder is not None:
                raise StartupError(f"A Scalewright server (pid {holder.get('pid', 'unknown')}, port "
                                   f"{holder.get('port', 'unknown')}) is using the data folder {args.data_dir}; "
                                   "stop it first, or import the backup from its dashboard (Workspace & log).")
            out = restore_folder(args.data_dir, args.zip, merge=args.merge, who=args.who)
        if args.command == "restore" and out["mode"] == "merge":
            print(f"Merged into {out['data_dir']}: added {len(out['datasets_added'])} datasets and "
                  f"{len(out['snapshots_added'])} snapshots; skipped {len(out['datasets_skipped'])} datasets "
                  f"and {len(out['snapshots_skipped'])} snapshots already there.", flush=True)
        elif args.command == "restore":
            print(f"Restored {out['datasets']} datasets and {out['snapshots']} snapshots into {out['data_dir']}.",
                  flush=True)
        return 0
    except (BackupError, StartupError, StorageError) as exc:
        message = getattr(exc, "message", None) or str(exc)
    except (OSError, sqlite3.Error) as exc:
        message = f"{type(exc).__name__}: {exc}"
    print(f"scalewright {args.command}: {' '.join(str(message).split())}", file=sys.stderr, flush=True)
    return 1


def _migrate_command(args) -> int:
    """``migrate``: run the schema migrations alone; one line of result, or one line of error and exit 1."""
    from .store import StartupError, StorageError

    try:
        if args.database:
            from .sqlstore import make_engine, normalise_url, upgrade

            engine = make_engine(args.database)
            try:
                found, now = upgrade(engine)
            finally:
                engine.dispose()
            where = normalise_url(args.database).render_as_string(hide_password=True)
        else:  # the data folder's database (an earlier store of the folder imported into it first)
            from .folder_store import DB_FILE, folder_url, open_folder_store
            from .sqlstore import current_revision, make_engine

            db = Path(args.data_dir) / DB_FILE
            found = None
            if db.is_file():
                engine = make_engine(folder_url(args.data_dir))
                try:
                    with engine.connect() as conn:
                        found = current_revision(conn)
                finally:
                    engine.dispose()
            store = open_folder_store(args.data_dir)
            now, where = store.revision, str(db.resolve())
            store.close()
        if found == now:
            print(f"The database {where} is up to date (schema {now}).", flush=True)
        else:
            print(f"Migrated the database {where} from schema {found or 'none'} to {now}.", flush=True)
        return 0
    except (StartupError, StorageError) as exc:
        message = getattr(exc, "message", None) or str(exc)
    except Exception as exc:  # a driver error (cannot connect, refused): one line, no traceback
        message = f"{type(exc).__name__}: {getattr(exc, 'orig', None) or exc}"
    print(f"scalewright migrate: {' '.join(str(message).split())}", file=sys.stderr, flush=True)
    return 1


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    if args.command == "serve":
        import uvicorn

        from .app import create_app

        settings = Settings(host=args.host, port=args.port, data_dir=args.data_dir, demo=args.demo,
                            database_url=args.database,
                            max_upload_mb=args.max_upload_mb, token=args.token,
                            allowed_hosts=args.allowed_hosts, max_items=args.max_items,
                            max_xlsx_cells=args.max_xlsx_cells, max_unpacked_mb=args.max_unpacked_mb,
                            cache_mb=args.cache_mb, max_import_mb=args.max_import_mb, run_workers=args.run_workers)
        if settings.database_url:  # processes sharing one database, each with its own folder (server/workers.py)
            from .workers import serve_shared

            return serve_shared(settings, workers=args.workers)
        if args.workers != 1:
            print("--workers needs --database: processes share a database, not a data folder.", file=sys.stderr,
                  flush=True)
            return 1
        from .store import StartupError, StorageError, lock_data_dir, sweep_upload_leftovers

        lock = None
        try:  # one server per data folder; a bad folder or database is one line on stderr, no traceback
            lock = lock_data_dir(settings.data_dir, port=settings.port)
            sweep_upload_leftovers(settings.data_dir)  # parts of uploads cut short by a killed server
            app = create_app(settings)
        except (StartupError, StorageError) as exc:
            if lock is not None:
                lock.release()
            print(str(exc), file=sys.stderr, flush=True)
            return 1
        from .workers import start_url

        url = start_url(settings)
        where = (f"database: {app.state.store.url.render_as_string(hide_password=True)}" if settings.database_url
                 else f"data folder: {settings.data_dir.resolve()}")
        imported = getattr(app.state.store, "imported", None)
        if imported:
            print(f"Copied this data folder's earlier store ({imported['datasets']} datasets, {imported['snapshots']} "
                  f"snapshots) into {app.state.store.url.database}; its files are kept, unchanged, in "
                  f"{imported['moved_to']}.", flush=True)
        print(f"Scalewright is running at {url}  ({where})", flush=True)
        try:
            uvicorn.run(app, host=settings.host, port=settings.port, log_level="warning")
        finally:
            lock.release()
        return 0
    if args.command in ("backup", "restore"):
        return _workspace_command(args)
    if args.command == "migrate":
        return _migrate_command(args)
    if args.command == "people":
        return _people_command(args)
    if args.command == "analyse":
        return analyse_command(args)
    return 2


if __name__ == "__main__":
    sys.exit(main())
