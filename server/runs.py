"""Resampling runs: a registry of runs, each computed by its own pool of worker processes (issue 13, item 1).

``RunService.start`` checks the request, answers at once with a queued run and computes it in a thread:
the full-sample analysis (the engine's, cached), the run's shared part (:func:`analysis.resample.make_plan`),
then the resamples in a ``ProcessPoolExecutor`` (``forkserver`` context: workers fork from a clean server
process, never from this threaded one) whose initializer receives the plan once per worker; tasks carry only
row indices, a few resamples each, so progress arrives at least about every second. Cancelling cancels the
queued tasks and terminates the pool's processes. Finished runs (done, cancelled, failed) are written as
JSON files in ``DATA/runs/`` and read back after a restart. On the SQL store (``serve --database``) runs live
in its ``runs`` table instead (revision 0004): the computing process writes the run at start, about every
:data:`SYNC_SECONDS` of progress and at its end, so every process sharing the database reads it; a cancel
through another process marks the row, and the computing process stops when its next write finds it so.

A run whose computing process died (kill -9, a reboot) must not look active forever. While a run is active a
small heartbeat thread keeps its record fresh: on the SQL store it sets the row's ``updated_at`` whenever no
write has done so for :data:`HEARTBEAT_SECONDS`; on the folder store it rewrites ``DATA/runs/<id>.json`` (written
from the start) as often. An active row not heard from for ``stale_seconds`` (:data:`STALE_SECONDS`) is marked
``interrupted`` with a plain message (``SqlStore.interrupt_stale_runs``, one guarded UPDATE) when a run is read
and when one starts; at a server's start, the runs that the folder store or a SQLite database (one process
each) left active are marked at once.
"""
from __future__ import annotations

import contextlib
import multiprocessing
import os
import threading
import time
from collections.abc import Callable, Mapping
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .analysis.resample import ResamplePlan, install_plan, make_plan, resample_values, summarize
from .engine import Engine
from .errors import NotFound
from .sqlstore import run_cutoff, run_interrupted_error
from .stats.errors import InputError
from .stats.resampling import bootstrap_indices
from .store import StorageError, new_id, utc_now

__all__ = ["HEARTBEAT_SECONDS", "MAX_RESAMPLES", "MIN_RESAMPLES", "STALE_SECONDS", "Run", "RunService",
           "default_workers"]

MIN_RESAMPLES, MAX_RESAMPLES, DEFAULT_RESAMPLES = 2, 2000, 200
ACTIVE = ("queued", "running")
SYNC_SECONDS = 0.5  # on the SQL store: the computing process writes progress (and checks for a cancel) this often
HEARTBEAT_SECONDS = 5.0  # an active run's record is refreshed at least this often, progress or not
STALE_SECONDS = 30.0  # an active run not heard from for this long is taken as interrupted (its process died)

_PLAN: ResamplePlan | None = None  # the plan of this worker process (set by the initializer)


WORKER_NICE = 10  # the workers' scheduling priority below the server's (Linux nice: 0 normal, 19 lowest)


def default_workers() -> int:
    """One worker per core. They run at a lower priority than the server (:data:`WORKER_NICE`), so a drop
    answered during a run takes the core it needs and the run uses every core the server leaves idle."""
    return max(1, os.cpu_count() or 1)


def _init_worker(plan: ResamplePlan) -> None:
    global _PLAN
    _PLAN = plan
    with contextlib.suppress(OSError, AttributeError):  # no nice() (not POSIX): the normal priority
        os.nice(WORKER_NICE)
    install_plan(plan)


def _work(rows: np.ndarray | None, start: int) -> tuple[int, list[dict]]:
    """Resamples ``start, start+1, ...`` of this worker's plan (``rows``: their indices; None: the full sample)."""
    assert _PLAN is not None
    if rows is None:
        return -1, [resample_values(_PLAN, None)]
    return start, [resample_values(_PLAN, r) for r in rows]


@dataclass
class Run:
    """One run's state (the JSON of ``GET /api/runs/{id}`` is :meth:`to_dict`)."""

    run_id: str
    dataset_id: str
    settings: dict
    n_resamples: int
    seed: int
    state: str = "queued"
    done: int = 0
    started_at: str | None = None
    finished_at: str | None = None
    result: dict | None = None
    error: dict | None = None
    cancel_event: threading.Event = field(default_factory=threading.Event)
    pool: ProcessPoolExecutor | None = None
    pids: tuple[int, ...] = ()
    synced: float = 0.0  # when the run was last written to the SQL store (time.monotonic)
    beat: float = 0.0  # when the run's row was last written or touched (its updated_at; time.monotonic)
    beating: threading.Event | None = None  # set to stop the run's heartbeat thread
    write_lock: threading.Lock = field(default_factory=threading.Lock)  # the folder store's JSON writes

    def to_dict(self) -> dict:
        out = {"run_id": self.run_id, "dataset_id": self.dataset_id, "state": self.state,
               "progress": {"done": self.done, "total": self.n_resamples}, "settings": self.settings,
               "n_resamples": self.n_resamples, "seed": self.seed, "started_at": self.started_at,
               "finished_at": self.finished_at}
        if self.result is not None:
            out["result"] = self.result
        if self.error is not None:
            out["error"] = self.error
        return out


Publish = Callable[[str, dict], None]


class RunService:
    """The runs of one server: start, look up, cancel, keep (see the module docstring)."""

    def __init__(self, engine: Engine, data_dir: os.PathLike | str, *, workers: int | None = None,
                 chunk_seconds: float = 0.5, heartbeat_seconds: float = HEARTBEAT_SECONDS,
                 stale_seconds: float = STALE_SECONDS):
        from pathlib import Path
        self.engine = engine
        self.folder = Path(data_dir) / "runs"
        self.workers = workers or default_workers()
        self.chunk_seconds = chunk_seconds
        self._runs: dict[str, Run] = {}
        self._lock = threading.Lock()
        self.shared = engine.store if hasattr(engine.store, "save_run") else None  # the SQL store's runs table
        self._ctx = multiprocessing.get_context("forkserver" if "forkserver" in
                                                multiprocessing.get_all_start_methods() else "spawn")
        self.closed = False
        self.heartbeat_seconds = heartbeat_seconds
        self.stale_seconds = stale_seconds  # tests shorten it; keep it well above heartbeat_seconds
        self._interrupt_leftovers()

    def _interrupt_leftovers(self) -> None:
        """At a server's start: runs left active by a process that shared nothing with this one are dead. The folder
        store and a SQLite database serve one process (``lock_data_dir``; ``--workers`` needs PostgreSQL), so their
        active runs are marked ``interrupted`` now; on PostgreSQL other live processes may be computing theirs,
        which are judged by their heartbeat (:meth:`_interrupt_stale`)."""
        if self.shared is not None:
            if getattr(self.shared, "backend", None) == "sqlite":
                with contextlib.suppress(Exception):  # a read-only or busy database: they are judged stale later
                    self.shared.interrupt_stale_runs(0.0)
            return
        try:
            paths = sorted(self.folder.glob("*.json"))
        except OSError:
            return
        import json
        for path in paths:
            with contextlib.suppress(OSError, ValueError, KeyError, TypeError):
                with path.open("rb") as fh:  # the state comes third in the JSON, before settings and result
                    head = fh.read(4096)
                if b'"state":"queued"' not in head and b'"state":"running"' not in head:
                    continue
                record = json.loads(path.read_text(encoding="utf-8"))
                if record["state"] not in ACTIVE:
                    continue
                run = self._from_dict(record)
                heard = _iso(path.stat().st_mtime)  # the heartbeat rewrote the file: last heard from then
                run.state, run.finished_at = "interrupted", heard
                run.error = run_interrupted_error(heard, run.done, run.n_resamples)
                self._write_file(run)

    def _interrupt_stale(self) -> None:
        """On the SQL store: mark the active runs not heard from for ``stale_seconds`` as interrupted."""
        if self.shared is not None:
            self.shared.interrupt_stale_runs(self.stale_seconds)

    def warm(self) -> None:
        """Start the fork server now (it imports the analysis once), so a run's first workers start fast."""
        if self._ctx.get_start_method() == "forkserver":
            from multiprocessing import forkserver
            self._ctx.set_forkserver_preload(["server", "server.analysis.resample", "server.runs"])
            forkserver.ensure_running()  # started once per server process; imports in the background

    # ---- starting
    def start(self, dataset_id: str, request: Mapping[str, Any], *, n_resamples: int = DEFAULT_RESAMPLES,
              publish: Publish | None = None) -> Run:
        """Check the request (InputError, NotFound) and start a run computing in the background."""
        if isinstance(n_resamples, bool) or not isinstance(n_resamples, int) or not (
                MIN_RESAMPLES <= n_resamples <= MAX_RESAMPLES):
            raise InputError(f"n_resamples must be a whole number from {MIN_RESAMPLES} to {MAX_RESAMPLES}; got "
                             f"{n_resamples!r}.", code="bad_option", details={"n_resamples": repr(n_resamples)})
        if self.closed:
            raise InputError("The server is shutting down; no new run can start.", code="shutting_down")
        settings = self.engine.settings(dataset_id, request)
        run = Run(run_id=new_id(), dataset_id=dataset_id, settings=settings.to_dict(), n_resamples=n_resamples,
                  seed=settings.seed, started_at=utc_now())
        with self._lock:
            self._runs[run.run_id] = run
        if self.shared is not None:  # in this request (its workspace); a storage fault answers the request
            try:
                self._interrupt_stale()  # runs of dead processes stop counting as active
                self._sync(run, force=True, quiet=False)
            except BaseException:
                with self._lock:
                    self._runs.pop(run.run_id, None)
                raise
        else:
            self._save(run)  # kept from the start: a server killed meanwhile finds it active at its next start
        run.beating = threading.Event()
        threading.Thread(target=self._heartbeat, args=(run, run.beating), name=f"run-beat-{run.run_id}",
                         daemon=True).start()
        threading.Thread(target=self._compute, args=(run, dict(request), publish), name=f"run-{run.run_id}",
                         daemon=True).start()
        return run

    def _sync(self, run: Run, *, force: bool = False, quiet: bool = True) -> None:
        """On the SQL store: write the run (at most every SYNC_SECONDS unless ``force``); a run cancelled
        through another process is cancelled here."""
        if self.shared is None or (not force and time.monotonic() - run.synced < SYNC_SECONDS):
            return
        run.synced = run.beat = time.monotonic()
        try:
            stored = self.shared.save_run(run.to_dict(), new=not quiet)
        except Exception:  # noqa: BLE001 - the database back later: the next write catches up
            if not quiet:
                raise
            return
        if stored in ("cancelled", "interrupted") and run.state in ACTIVE:
            run.cancel_event.set()

    def _heartbeat(self, run: Run, stop: threading.Event) -> None:
        """While the run is active: its record refreshed at least every ``heartbeat_seconds`` (SQL store: the row's
        ``updated_at``, unless a progress write just did it; folder store: its JSON file). Ends with the run."""
        while run.state in ACTIVE and not stop.is_set():
            if self.shared is None:
                if stop.wait(self.heartbeat_seconds):
                    return
                self._save(run, only_active=True)
                continue
            due = run.beat + self.heartbeat_seconds - time.monotonic()
            if due > 0:
                if stop.wait(due):
                    return
                continue
            run.beat = time.monotonic()
            try:
                stored = self.shared.touch_run(run.run_id)
            except Exception:  # noqa: BLE001 - the database back later: the next beat catches up
                continue
            if stored not in ACTIVE and run.state in ACTIVE:  # cancelled, interrupted or deleted elsewhere
                run.cancel_event.set()

    def _tell(self, run: Run, publish: Publish | None) -> None:
        self._sync(run, force=run.done == 0)
        if publish is not None:
            with contextlib.suppress(Exception):  # a closed live channel never stops a run
                publish(run.dataset_id, {"action": "resampling", "run_id": run.run_id, "done": run.done,
                                         "total": run.n_resamples, "state": run.state})

    def _compute(self, run: Run, request: dict, publish: Publish | None) -> None:
        try:
            settings = self.engine.settings(run.dataset_id, request)
            answer = self.engine.analyse(run.dataset_id, settings)
            plan = make_plan(self.engine.inputs(run.dataset_id, settings), settings, answer)
            if run.cancel_event.is_set():
                return self._finish(run, "cancelled", publish)
            run.state = "running"
            self._tell(run, publish)
            values = self._resample(run, plan, publish)
            if values is None:
                return self._finish(run, "cancelled", publish)
            estimate, draws = values
            run.result = summarize(plan, estimate, draws, seed=run.seed)
            self._finish(run, "done", publish)
        except InputError as exc:
            run.error = {"code": exc.code, "message": exc.message, "details": exc.details}
            self._finish(run, "failed", publish)
        except NotFound as exc:
            run.error = {"code": "not_found", "message": exc.message, "details": {exc.kind: exc.ident}}
            self._finish(run, "failed", publish)
        except Exception as exc:  # noqa: BLE001 - a failed run says why instead of vanishing
            run.error = {"code": "run_failed", "message": f"The run stopped: {type(exc).__name__}: {exc}",
                         "details": {}}
            self._finish(run, "cancelled" if run.cancel_event.is_set() else "failed", publish)
        finally:
            if run.beating is not None:
                run.beating.set()

    def _resample(self, run: Run, plan: ResamplePlan, publish: Publish | None
                  ) -> tuple[dict, list[dict]] | None:
        idx = bootstrap_indices(plan.responses.shape[0], run.n_resamples, seed=run.seed)
        # a few resamples per task: about chunk_seconds of work each, judged from the data's size
        cost = plan.responses.shape[0] * len(plan.names) ** 2 / 3.6e8  # rough seconds per resample (60 x 5,000: .05)
        per = int(max(1, min(25, self.chunk_seconds / max(cost, 1e-3))))
        pool = ProcessPoolExecutor(max_workers=self.workers, mp_context=self._ctx, initializer=_init_worker,
                                   initargs=(plan,))
        run.pool = pool
        draws: list[dict | None] = [None] * run.n_resamples
        estimate: dict | None = None
        try:
            # one resample per worker first (the first progress comes soon), then chunks of ``per``
            head = min(self.workers, run.n_resamples)
            starts = [*range(head), *range(head, run.n_resamples, per)]
            ends = [*starts[1:], run.n_resamples]
            futures: set[Future] = {pool.submit(_work, idx[a:b], a) for a, b in zip(starts, ends)}
            futures.add(pool.submit(_work, None, -1))
            run.pids = tuple(pool._processes or {})  # the pool's worker processes (for cancelling and checks)
            while futures:
                if run.cancel_event.is_set():
                    return None
                finished, futures = wait(futures, timeout=0.2, return_when=FIRST_COMPLETED)
                run.pids = tuple(pool._processes or {})
                for f in finished:
                    start, vals = f.result()
                    if start < 0:
                        estimate = vals[0]
                        continue
                    draws[start:start + len(vals)] = vals
                    run.done += len(vals)
                if finished:
                    self._tell(run, publish)
        finally:
            self._stop_pool(run)
        assert estimate is not None
        return estimate, [d for d in draws if d is not None]

    def _stop_pool(self, run: Run) -> None:
        pool = run.pool
        if pool is None:
            return
        procs = list((pool._processes or {}).values())
        pool.shutdown(wait=False, cancel_futures=True)
        for p in procs:
            if p.is_alive():
                p.terminate()
        for p in procs:
            p.join(timeout=5)
        run.pool = None

    def _finish(self, run: Run, state: str, publish: Publish | None) -> None:
        run.state = state
        run.finished_at = utc_now()
        self._save(run)
        self._tell(run, publish)

    # ---- looking up, cancelling, keeping
    def get(self, run_id: str) -> Run:
        if self.shared is not None:  # the table is the truth (and limits to the acting person's workspace)
            stored = self.shared.get_run(run_id)
            with self._lock:
                local = self._runs.get(run_id)
            if stored is None:
                raise NotFound("run", run_id)
            if (stored["state"] in ACTIVE and (local is None or local.state not in ACTIVE)
                    and str(stored.get("updated_at") or "") < run_cutoff(self.stale_seconds)):
                with contextlib.suppress(StorageError):  # a database refusing writes: shown as last written
                    self._interrupt_stale()  # its computing process is not heard from: marked interrupted
                    stored = self.shared.get_run(run_id) or stored
            if local is None:
                return self._from_dict(stored)
            if local.state in ACTIVE and stored["state"] in ("cancelled", "interrupted"):  # through another process
                self._cancel_local(local)
            if stored["state"] == "interrupted":
                return self._from_dict(stored)
            return local
        with self._lock:
            run = self._runs.get(run_id)
        if run is not None:
            return run
        stored = self._load(run_id)
        if stored is None:
            raise NotFound("run", run_id)
        return stored

    def cancel(self, run_id: str) -> Run:
        """Cancel an active run: its queued tasks are dropped and its worker processes terminated."""
        run = self.get(run_id)
        if run.state in ACTIVE:
            self._cancel_local(run)
        return run

    @staticmethod
    def _cancel_local(run: Run) -> None:
        run.cancel_event.set()
        pool = run.pool
        if pool is not None:  # stop the workers now, not when the run's thread looks again
            for p in list((pool._processes or {}).values()):
                if p.is_alive():
                    p.terminate()
        run.state = "cancelled"

    def delete(self, run_id: str) -> bool:
        """Forget a finished run (memory and disk). Returns False when the run was active (it is cancelled)."""
        run = self.get(run_id)
        if run.state in ACTIVE:
            self.cancel(run_id)
            if self.shared is not None:  # computed here or by another process: every process sees it cancelled
                self.shared.cancel_run(run_id)
            return False
        with self._lock:
            self._runs.pop(run_id, None)
        if self.shared is not None:
            self.shared.delete_run(run_id)
            return True
        path = self._path(run_id)
        if path is not None and path.exists():
            path.unlink()
        return True

    def shutdown(self) -> None:
        """Cancel every active run (server stop)."""
        self.closed = True
        with self._lock:
            active = [r for r in self._runs.values() if r.state in ACTIVE]
        for r in active:
            self._cancel_local(r)

    def _path(self, run_id: str):
        if not run_id or not all(ch.isalnum() or ch in "-_" for ch in run_id):
            return None
        return self.folder / f"{run_id}.json"

    def _save(self, run: Run, *, only_active: bool = False) -> None:
        if self.shared is not None:
            return self._sync(run, force=True)
        with run.write_lock:  # a heartbeat's write never lands after the final one
            if only_active and run.state not in ACTIVE:
                return
            with contextlib.suppress(OSError):  # the run stays in memory; it is only not kept across a restart
                self._write_file(run)

    def _write_file(self, run: Run) -> None:
        from .store import _dumps, _write_atomic
        self.folder.mkdir(parents=True, exist_ok=True)
        _write_atomic(self.folder / f"{run.run_id}.json", _dumps(run.to_dict()).encode("utf-8"))

    def _load(self, run_id: str) -> Run | None:
        import json
        path = self._path(run_id)
        if path is None or not path.exists():
            return None
        run = self._from_dict(json.loads(path.read_text(encoding="utf-8")))
        with self._lock:
            self._runs[run_id] = run
        return run

    @staticmethod
    def _from_dict(d: dict) -> Run:
        """A run from its JSON (``Run.to_dict``), as kept on disk or in the SQL store."""
        return Run(run_id=d["run_id"], dataset_id=d["dataset_id"], settings=d["settings"],
                  n_resamples=d["n_resamples"], seed=d["seed"], state=d["state"], done=d["progress"]["done"],
                  started_at=d["started_at"], finished_at=d["finished_at"], result=d.get("result"),
                  error=d.get("error"))


def _iso(timestamp: float) -> str:
    """A POSIX time as ``utc_now`` writes it."""
    import datetime as _dt
    return _dt.datetime.fromtimestamp(timestamp, _dt.UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")
