"""``scalewright serve --database URL [--workers N]``: server processes sharing one database.

Everything that must survive lives in the database, so any number of processes (uvicorn workers, or
``serve`` started several times, on one machine or several) may serve one team from it. The data folder
then holds only what one process has in flight: uploads being received (``tmp/``) and resampling runs
(``runs/``). So that processes started on one data folder never remove each other's files, each takes
its own numbered folder ``DATA/workers/<n>/`` under that folder's exclusive lock (``store.lock_data_dir``),
the first one free, and sweeps the uploads a killed predecessor left there. The data folder itself is
never locked in database mode.

With N > 1 the parent process checks and migrates the database once, then uvicorn starts N worker
processes, each building the app (:func:`worker_app`) from the settings handed down in the environment
variable :data:`SETTINGS_ENV`. Live changes reach every process through PostgreSQL (``server/notify.py``),
so several processes need a PostgreSQL database; one SQLite file serves one process.
"""
from __future__ import annotations

import json
import os
import sys
from dataclasses import fields
from pathlib import Path

from .settings import Settings
from .store import DataDirLock, StartupError, data_dir_holder, lock_data_dir, sweep_upload_leftovers

__all__ = ["SETTINGS_ENV", "WORKERS_DIR", "serve_shared", "start_url", "take_worker_folder", "worker_app"]

SETTINGS_ENV = "SCALEWRIGHT_WORKER_SETTINGS"
WORKERS_DIR = "workers"
MAX_WORKER_FOLDERS = 1024


def start_url(settings: Settings) -> str:
    """The address to open (127.0.0.1 for a server bound to every interface; the token in it when there is
    one, which is also printed on its own line)."""
    shown_host = "127.0.0.1" if settings.host in ("0.0.0.0", "::") else settings.host
    url = f"http://{shown_host}:{settings.port}/"
    if settings.token:
        url += f"?token={settings.token}"
        print(f"Sharing beyond this machine: every request must carry the access token {settings.token}", flush=True)
    return url


def take_worker_folder(data_dir: str | os.PathLike, *, port: int | None = None) -> tuple[Path, DataDirLock]:
    """Lock the first free ``DATA/workers/<n>/`` for this process; returns (folder, lock).

    Raises :class:`StartupError` when the folder cannot be written, or all MAX_WORKER_FOLDERS are taken.
    """
    for n in range(MAX_WORKER_FOLDERS):
        folder = Path(data_dir) / WORKERS_DIR / str(n)
        try:
            return folder, lock_data_dir(folder, port=port)
        except StartupError:
            if data_dir_holder(folder) is None:  # not held by another process: a real fault, say it
                raise
    raise StartupError(f"All {MAX_WORKER_FOLDERS} process folders of {os.path.abspath(data_dir)}/{WORKERS_DIR} "
                       "are in use by running servers.")


def _settings_to_env(settings: Settings) -> str:
    values = {f.name: getattr(settings, f.name) for f in fields(settings)}
    values["data_dir"] = str(settings.data_dir)
    values["allowed_hosts"] = list(settings.allowed_hosts)
    return json.dumps(values)


def _settings_from_env() -> Settings:
    raw = os.environ.get(SETTINGS_ENV)
    if not raw:
        raise StartupError(f"{SETTINGS_ENV} is not set: start the workers with 'scalewright serve --workers N'.")
    return Settings(**json.loads(raw))


def build_process_app(settings: Settings):
    """This process's app on the shared database, with its own worker folder (kept locked while it runs)."""
    from .app import create_app

    folder, lock = take_worker_folder(settings.data_dir, port=settings.port)
    try:
        sweep_upload_leftovers(folder)  # uploads cut short by a killed process that had this folder
        mine = Settings(**{f.name: getattr(settings, f.name) for f in fields(settings)})
        mine.data_dir = folder
        app = create_app(mine)
    except BaseException:
        lock.release()
        raise
    app.state.worker_lock = lock
    return app


def worker_app():
    """The app factory each uvicorn worker calls (``uvicorn ... --factory``)."""
    return build_process_app(_settings_from_env())


def serve_shared(settings: Settings, *, workers: int = 1) -> int:
    """Serve from ``settings.database_url`` in ``workers`` processes; returns the exit status."""
    import uvicorn

    from .sqlstore import SqlStore
    from .store import StorageError

    if workers < 1:
        print(f"--workers must be 1 or more; got {workers}.", file=sys.stderr, flush=True)
        return 1
    try:
        if workers == 1:
            app = build_process_app(settings)
            shown = app.state.store.url.render_as_string(hide_password=True)
        else:
            store = SqlStore(settings.database_url)  # reachable, migrated once before the workers start
            try:
                if store.backend != "postgresql":
                    raise StartupError(f"--workers {workers} needs a PostgreSQL database: the live channel between "
                                       "processes goes through PostgreSQL, and one SQLite file serves one process. "
                                       "Start with --database postgresql://USER@HOST:PORT/DB, or without --workers.")
                shown = store.url.render_as_string(hide_password=True)
            finally:
                store.close()
            Path(settings.data_dir).mkdir(parents=True, exist_ok=True)
    except (StartupError, StorageError, OSError) as exc:
        print(str(exc), file=sys.stderr, flush=True)
        return 1
    url = start_url(settings)
    print(f"Scalewright is running at {url}  (database: {shown}; {workers} process{'es' if workers > 1 else ''}; "
          f"files in flight under {Path(settings.data_dir).resolve() / WORKERS_DIR})", flush=True)
    if workers == 1:
        try:
            uvicorn.run(app, host=settings.host, port=settings.port, log_level="warning")
        finally:
            app.state.worker_lock.release()
        return 0
    os.environ[SETTINGS_ENV] = _settings_to_env(settings)
    uvicorn.run(f"{__name__}:worker_app", factory=True, workers=workers, host=settings.host, port=settings.port,
                log_level="warning")
    return 0
