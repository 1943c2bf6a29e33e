"""The engine: loads datasets and caches what is expensive; the analysis itself is ``server.analysis``.

What is cached, and by what it depends on (CONVENTIONS 7):

* the parsed dataset, per dataset id, least recently used dropped first beyond ``cache_bytes``;
* the full-pool pairwise covariance and correlation matrices, per (dataset, correlation type), computed
  once on the raw (not reverse-scored) responses (``analysis.matrices.full_pool``). Reverse-keying an item
  multiplies its row and column by -1 (exact for covariances, Pearson and polychoric correlations), and
  dropping items takes a submatrix, so a drop never touches the raw responses;
* per-item descriptives, per (dataset, reverse set);
* the full-pool reference factor solutions (``analysis.factors.reference_solution``), per settings and
  number of factors, through the memo the engine hands to the analysis;
* whole answers, per canonical settings (a repeated identical request is served from memory).

On a store several processes share (the SQL store: ``serve --workers N`` or several machines), another
process may delete a dataset, or a restore bring back another content under its id. Every cached entry
of a dataset then belongs to the version it was made from: each access asks the store for the dataset's
version (``store.dataset_version``: the SHA-256 of its files and its options, one indexed read), answers
:class:`NotFound` when it is gone and drops everything cached of an older version (:meth:`Engine.forget`).
The folder store has no such method: only this process changes it, and its routes call ``forget``.

After each answer the parallel-analysis thresholds of one item fewer (the likely next drop) are drawn on
a background thread (memoised in ``stats.dimensionality``), so a drop seldom waits for them.

One analysis goes down the layers only: :meth:`Engine.analyse` gathers the cached inputs and calls
:func:`server.analysis.run`, which calls the stats; nothing below calls the engine again.
"""
from __future__ import annotations

import concurrent.futures
import gc
import itertools
import logging
import os
import sys
import threading
from collections import OrderedDict
from collections.abc import Callable, Hashable, Mapping
from typing import TYPE_CHECKING, Any

import numpy as np

from .analysis import AnalysisAnswer, AnalysisInputs, AnalysisSettings, run
from .analysis.matrices import AnswerPatterns, FullPool, PoolUnavailable, constant_notes, full_pool
from .analysis.progress import stage, tag
from .errors import NotFound
from .stats.descriptives import ItemDescriptives, item_descriptives
from .stats.dimensionality import has_random_reference, random_reference
from .stats.errors import InputError
from .stats.notes import Note

if TYPE_CHECKING:
    from .intake import ParsedDataset

log = logging.getLogger("scalewright")

# How long the background threshold draw of the likely next drop waits after an answer: the answer is written
# and sent, and the page draws it, without this work on the second core (a 250-item draw is seconds of BLAS).
PREFETCH_DELAY = 0.3
_UNSIZED_MAX = 16  # entries of a lazy cache waiting for their size at most (beyond: sized at once)
DEFAULT_CACHE_BYTES = 2 * 1024 ** 3  # Settings.cache_mb's default, for callers without settings
_DESC_BLOCK = 8  # items per block of the pool's descriptives (a 1,000,000-row file: 64 MB per block)
_SAMPLE = 16  # long containers are measured on a sample of their items and scaled (answers: rows of one shape)


def footprint(obj: object, _seen: set | None = None, _depth: int = 0) -> int:
    """An estimate of the bytes ``obj`` holds: arrays by ``nbytes``, containers and objects recursively.

    Containers longer than ``_SAMPLE`` entries are measured on a sample (lists and tuples: evenly spread
    entries; dicts and sets: the first ones) and scaled; an object reached twice counts once. Meant for cache
    budgets, not exact accounting (on analysis answers of 60 and 250 items it is within 5 % of the whole walk,
    at a seventh of its cost for 250 items).
    """
    seen = set() if _seen is None else _seen
    if id(obj) in seen or _depth > 40:
        return 0
    seen.add(id(obj))
    if isinstance(obj, np.ndarray):
        # getsizeof counts the data of an array that owns it; a view holds on to its base
        return sys.getsizeof(obj) + (footprint(obj.base, seen, _depth + 1) if obj.base is not None else 0)
    size = sys.getsizeof(obj)
    if isinstance(obj, (str, bytes, bytearray, int, float, bool, complex, np.generic)) or obj is None:
        return size
    if isinstance(obj, dict):
        children = list(itertools.islice(obj.items(), _SAMPLE))
        part = sum(footprint(k, seen, _depth + 1) + footprint(v, seen, _depth + 1) for k, v in children)
        return size + (part * len(obj) // len(children) if children else 0)
    if isinstance(obj, (list, tuple)) and len(obj) > _SAMPLE:
        children = list(obj[::-(-len(obj) // _SAMPLE)])  # evenly spread over the list
        part = sum(footprint(c, seen, _depth + 1) for c in children)
        return size + part * len(obj) // len(children)
    if isinstance(obj, (list, tuple, set, frozenset)):
        children = list(itertools.islice(obj, _SAMPLE))
        part = sum(footprint(c, seen, _depth + 1) for c in children)
        return size + (part * len(obj) // len(children) if children else 0)
    attrs = getattr(obj, "__dict__", None)
    if attrs is not None:
        return size + footprint(attrs, seen, _depth + 1)
    if hasattr(obj, "__slots__"):
        return size + sum(footprint(getattr(obj, a, None), seen, _depth + 1) for a in obj.__slots__)
    return size


# The first analysis of an upload starts in the background only below this estimated cost (background_cost),
# up to about 15 s of work on a two-core machine: measured, 200 respondents x 600 items (cost 2.9e8) took 9 s
# and 5,000 x 200 (2.1e8) 15 s, both started; 60 x 1,000 (1.1e9) took 30 s and is left to the page.
BACKGROUND_BUDGET = 3e8


def background_cost(n: int, k: int) -> float:
    """Rough cost of a first analysis: a pairwise n x k covariance pass (n k^2) plus eigendecompositions (k^3)."""
    return float(n) * k * k + float(k) ** 3


class _LRU(OrderedDict):
    """Least-recently-used cache bounded by its number of entries and/or by the bytes they hold.

    Each entry's size is estimated once, when it is stored (:func:`footprint`), or, in a ``lazy`` cache,
    later by :meth:`sized` (the engine sizes its answers after they are sent: about 6 ms of a 60-item drop);
    until then the entry counts 0 bytes and is listed by :meth:`unsized`. The oldest entries are dropped until
    both bounds hold again, except the newest one: an entry larger than the whole byte budget is still kept,
    as the only entry, until the next one arrives.
    """

    def __init__(self, size: int | None, max_bytes: int | None = None, *, lazy: bool = False):
        super().__init__()
        self.size = size
        self.max_bytes = max_bytes
        self.nbytes = 0
        self._sizes: dict = {}
        self.lazy = lazy
        self._unsized: dict = {}  # key -> value whose size is still to be estimated (lazy caches)

    def __setitem__(self, key, value):
        if key in self:
            self.nbytes -= self._sizes.pop(key, 0)
            self._unsized.pop(key, None)
        super().__setitem__(key, value)
        n = 0
        if self.max_bytes is not None:
            if self.lazy:
                self._unsized[key] = value
            else:
                n = footprint(value)
        self._sizes[key] = n
        self.nbytes += n

    def __delitem__(self, key):
        super().__delitem__(key)
        self.nbytes -= self._sizes.pop(key, 0)
        self._unsized.pop(key, None)

    def clear(self):
        super().clear()
        self._sizes.clear()
        self._unsized.clear()
        self.nbytes = 0

    def n_unsized(self) -> int:
        """How many entries wait for their size (a lazy cache)."""
        return len(self._unsized)

    def unsized(self) -> list[tuple[Hashable, Any]]:
        """The entries stored without a size yet (a lazy cache), as (key, value)."""
        return list(self._unsized.items())

    def sized(self, key, value, n: int) -> None:
        """Count ``n`` bytes for ``key`` if it still holds ``value`` unsized, then drop the oldest entries."""
        if key in self._unsized and self._unsized[key] is value:
            del self._unsized[key]
            self._sizes[key] = n
            self.nbytes += n
        self.trim()

    def trim(self) -> None:
        """Drop the oldest entries until both bounds hold (the newest one always stays)."""
        while len(self) > 1 and ((self.size is not None and len(self) > self.size)
                                 or (self.max_bytes is not None and self.nbytes > self.max_bytes)):
            del self[next(iter(self))]

    def get_or(self, key, make):
        if key in self:
            self.move_to_end(key)
            return self[key]
        value = make()
        self[key] = value
        self.trim()
        return value


# Python's cyclic collector, tuned for a process that answers analyses: an analysis allocates tens of thousands
# of small objects, nearly all freed by reference counting, and the caches keep hundreds of thousands alive. With
# the default thresholds (700, 10, 10) a 60-item drop met about 40 young collections and now and then a full one
# of 80-95 ms (measured: 9 drops, 270 ms of collection in all, one drop at 160 ms instead of 70); with these, a
# few young collections of at most about 27 ms over the same drops (105-120 ms in all), no full one.
GC_THRESHOLDS = (50_000, 20, 100)


def tune_gc() -> None:
    """Raise the collector's thresholds to :data:`GC_THRESHOLDS` (never lower them)."""
    now = gc.get_threshold()
    gc.set_threshold(*(max(a, b) for a, b in zip(now, GC_THRESHOLDS)))


class Engine:
    """Loads datasets from the store, caches full-pool work and answers analyses (``server.analysis.run``)."""

    def __init__(self, store, *, cache_bytes: int = DEFAULT_CACHE_BYTES):
        tune_gc()  # this process computes analyses
        self.store = store
        self._lock = threading.RLock()
        # Analyses computing at once: one per core. Twenty requests in twenty threads would share the cores
        # and the interpreter lock and all finish late; bounded, they are answered in turn.
        self._slots = threading.BoundedSemaphore(max(1, os.cpu_count() or 1))
        # Parsed datasets get the whole budget (Settings.cache_mb); the full-pool matrices and whole answers
        # a quarter of it each, the smaller caches a sixteenth each.
        self._datasets: _LRU = _LRU(None, cache_bytes)
        self._pools: _LRU = _LRU(32, cache_bytes // 4)
        self._descriptives: _LRU = _LRU(64, cache_bytes // 16)
        self._answers: _LRU = _LRU(128, cache_bytes // 4, lazy=True)
        self._references: _LRU = _LRU(64, cache_bytes // 16, lazy=True)
        self._blocks: _LRU = _LRU(256, cache_bytes // 16, lazy=True)  # subscale blocks by content (construct_blocks)
        self._lazy = (self._answers, self._blocks, self._references)  # sized after the answer (settle)
        self._key_locks: dict = {}
        self._versions: dict[str, str] = {}  # dataset id -> the store's version the cached entries were made from
        # parallel-analysis thresholds of the next likely drop, drawn after each answer (_prefetch_next)
        self._prefetch = concurrent.futures.ThreadPoolExecutor(max_workers=1, thread_name_prefix="pa-prefetch")
        self._prefetch_job: concurrent.futures.Future | None = None
        self._prefetch_ticket = 0
        self._prefetch_stale = threading.Event()  # set: the waiting job is outdated, wake it at once

    # ------------------------------------------------------------------ datasets
    def dataset(self, dataset_id: str) -> ParsedDataset:
        """The parsed dataset (``ParsedDataset``), read from the store once; :class:`NotFound` if unknown."""
        from .intake import NO_LIMITS, read_responses

        def make():
            record = self.store.get_dataset(dataset_id)
            if record is None:
                raise NotFound("dataset", dataset_id)
            opts = dict(record.get("options") or {})
            stage("reading the responses file")
            parsed = read_responses(
                self.store.read_raw(dataset_id), record.get("filename") or "responses.csv",
                codebook_raw=self.store.read_codebook(dataset_id),
                codebook_filename=record.get("codebook_filename"),
                missing_codes=opts.get("missing_codes"), id_column=opts.get("id_column"),
                scale_min=opts.get("scale_min"), scale_max=opts.get("scale_max"),
                limits=NO_LIMITS)  # accepted at upload: a limit lowered since must not lock the data out
            if record.get("name"):
                parsed.name = record["name"]
            return parsed

        self._check_version(dataset_id)
        # one reading per dataset at a time: an evicted dataset asked for by two requests is read once
        return self._locked(dataset_id, self._datasets, make)

    def _check_version(self, dataset_id: str) -> None:
        """On a shared store: NotFound if the dataset is gone, and forget what was cached of another version."""
        version_of = getattr(self.store, "dataset_version", None)
        if version_of is None:
            return
        version = version_of(dataset_id)
        with self._lock:
            known = self._versions.get(dataset_id)
            if version == known:
                return
            if version is None or known is not None:
                self.forget(dataset_id)
            if version is None:
                raise NotFound("dataset", dataset_id)
            self._versions[dataset_id] = version

    def pool_items(self, dataset_id: str) -> list[str]:
        """Every item that can enter an analysis (the full pool less items without variance)."""
        constant = self.constant_items(dataset_id)
        return [it.name for it in self.dataset(dataset_id).items if it.name not in constant]

    def constant_items(self, dataset_id: str) -> Mapping[str, Note]:
        """Items that cannot enter a covariance matrix (fewer than two different answers), each with why."""
        def make():
            ds = self.dataset(dataset_id)
            return constant_notes(ds.responses, [it.name for it in ds.items])

        return self._locked((dataset_id, "constant"), self._descriptives, make)

    def prime(self, dataset_id: str, parsed: ParsedDataset) -> None:
        """Keep a just-uploaded dataset (already parsed) and start its default analysis in the background.

        The team usually opens the dataset right after the upload; the first analysis (full-pool
        matrices, parallel analysis) is then already under way or done, and the page's request waits
        for it instead of starting it again. A dataset whose first analysis would cost more than
        BACKGROUND_BUDGET (see :func:`background_cost`) is only kept: the page's own request computes it
        when someone opens the dataset.
        """
        with self._lock:
            self._datasets.get_or(dataset_id, lambda: parsed)
        n, k = parsed.responses.shape
        if background_cost(n, k) > BACKGROUND_BUDGET:
            log.info("background analysis of %s skipped: %d respondents x %d items cost about %.2g > %.2g",
                     dataset_id, n, k, background_cost(n, k), BACKGROUND_BUDGET)
            return

        def warm():
            try:
                self.analyse(dataset_id, None)  # the default settings
            except Exception as exc:  # noqa: BLE001  (the page's own request reports it to the user)
                log.info("background analysis of %s stopped: %s", dataset_id, exc)

        threading.Thread(target=warm, name=f"warm-{dataset_id}", daemon=True).start()

    def forget(self, dataset_id: str) -> None:
        """Drop everything cached about a dataset (after it was deleted or replaced)."""
        with self._lock:
            self._versions.pop(dataset_id, None)
            for cache in (self._datasets, self._pools, self._descriptives, self._answers, self._references,
                          self._blocks):
                for key in [k for k in cache if k == dataset_id or (isinstance(k, tuple) and k[0] == dataset_id)]:
                    del cache[key]

    def reverse_mask(self, dataset_id: str, reverse: list[str] | None) -> np.ndarray:
        """Which items are reverse-keyed: the codebook's choice, or the items named in ``reverse``."""
        ds = self.dataset(dataset_id)
        names = [it.name for it in ds.items]
        if reverse is None:
            return np.array([bool(it.reverse) for it in ds.items])
        unknown = [r for r in reverse if r not in names]
        if unknown:
            raise InputError(f"Unknown item(s) in 'reverse': {', '.join(map(str, unknown))}.",
                             code="unknown_item", details={"items": unknown, "field": "reverse"})
        chosen = set(reverse)
        return np.array([n in chosen for n in names])

    def scored(self, dataset_id: str, reverse: list[str] | None = None) -> np.ndarray:
        """Responses with reverse-keyed items scored as min + max - x."""
        ds = self.dataset(dataset_id)
        mask = self.reverse_mask(dataset_id, reverse)
        mins = np.array([it.min for it in ds.items], dtype=float)
        maxs = np.array([it.max for it in ds.items], dtype=float)
        X = ds.responses.copy()
        X[:, mask] = (mins + maxs)[mask] - X[:, mask]
        return X

    # ------------------------------------------------------------------ caches
    def _locked(self, key: Hashable, cache: _LRU, make: Callable[[], Any]) -> Any:
        """The value cached under ``key``, made once: concurrent requests for one key wait for the first."""
        with self._lock:
            if key in cache:
                return cache.get_or(key, make)
            lock = self._key_locks.setdefault(key, threading.Lock())
        if not lock.acquire(blocking=False):  # one computation per key, others wait for it (and say so)
            stage("waiting: another request is computing the same thing")
            lock.acquire()
        try:
            with self._lock:
                if key in cache:
                    return cache.get_or(key, make)
            try:
                value = make()
            except BaseException:
                with self._lock:
                    self._key_locks.pop(key, None)
                raise
            with self._lock:
                cache.get_or(key, lambda: value)
                self._key_locks.pop(key, None)
            return value
        finally:
            lock.release()

    def full_pool(self, dataset_id: str, correlation: str, zero_cell_correction: float = 0.5) -> FullPool:
        """The dataset's full-pool pairwise matrices for one correlation type (cached; InputError if impossible)."""
        pool = self._pool(dataset_id, correlation, zero_cell_correction)
        if isinstance(pool, PoolUnavailable):
            raise InputError(pool.message, code="pool_unavailable", details={"correlation": correlation})
        return pool

    def _pool(self, dataset_id: str, correlation: str, zero_cell_correction: float = 0.5
              ) -> FullPool | PoolUnavailable:
        # the zero-cell correction changes polychoric estimates only: the Pearson pool is one per dataset
        zcc = float(zero_cell_correction) if correlation == "polychoric" else 0.0

        def make():  # a pool that cannot be formed is remembered too, not retried on every request
            ds = self.dataset(dataset_id)
            try:
                return full_pool(ds.responses, [it.name for it in ds.items], self.constant_items(dataset_id),
                                 correlation, zero_cell_correction=zcc)
            except InputError as exc:
                return PoolUnavailable(exc.message)

        key = (dataset_id, correlation) if correlation != "polychoric" else (dataset_id, correlation, zcc)
        return self._locked(key, self._pools, make)

    def descriptives(self, dataset_id: str, mask: np.ndarray) -> list[ItemDescriptives]:
        """Per-item descriptives of the whole pool for one reverse set (cached; a drop picks rows)."""
        def make():
            ds = self.dataset(dataset_id)
            stage(f"descriptives of {len(ds.items)} items")
            flips = np.asarray(mask, dtype=bool)
            out: list[ItemDescriptives] = []
            for s in range(0, len(ds.items), _DESC_BLOCK):  # a few items at a time: no n x k temporaries
                items = ds.items[s:s + _DESC_BLOCK]
                X = np.array(ds.responses[:, s:s + _DESC_BLOCK], dtype=float)
                flip = flips[s:s + _DESC_BLOCK]
                X[:, flip] = np.array([it.min + it.max for it in items], dtype=float)[flip] - X[:, flip]
                out += item_descriptives(X, names=[it.name for it in items], mins=[it.min for it in items],
                                         maxs=[it.max for it in items])
            return out

        return self._locked((dataset_id, "desc", tuple(bool(m) for m in mask)), self._descriptives, make)

    # ------------------------------------------------------------------ analysis
    def settings(self, dataset_id: str, request: Mapping[str, Any] | None = None) -> AnalysisSettings:
        """The request checked against the dataset, with every default filled (``AnalysisSettings.build``)."""
        ds = self.dataset(dataset_id)
        return AnalysisSettings.build(request, names=[it.name for it in ds.items],
                                      declared_reverse=[it.name for it in ds.items if it.reverse],
                                      constant=list(self.constant_items(dataset_id)))

    def _settings(self, dataset_id: str, settings: AnalysisSettings | Mapping[str, Any] | None) -> AnalysisSettings:
        return settings if isinstance(settings, AnalysisSettings) else self.settings(dataset_id, settings)

    def inputs(self, dataset_id: str, settings: AnalysisSettings, *, with_factors: bool = True) -> AnalysisInputs:
        """What the analysis of ``settings`` reads: responses, codebook and the cached pool work it needs."""
        ds = self.dataset(dataset_id)
        names = [it.name for it in ds.items]
        rev = set(settings.reverse)
        pools = {}
        if settings.missing == "pairwise":
            for kind in {"pearson", settings.correlation} if with_factors else {"pearson"}:
                pools[kind] = self._pool(dataset_id, kind, settings.zero_cell_correction)
        return AnalysisInputs(
            dataset_id=dataset_id, name=ds.name, n_rows=ds.n_rows, items=ds.items, responses=ds.responses,
            constant=self.constant_items(dataset_id),
            descriptives=self.descriptives(dataset_id, np.array([n in rev for n in names])), pools=pools,
            memo=lambda key, make: self._locked((dataset_id, key), self._references, make),
            blocks=lambda key, make: self._locked((dataset_id, key), self._blocks, make),
            patterns=self._locked((dataset_id, "patterns"), self._descriptives,  # formed once per dataset
                                  lambda: AnswerPatterns.of(ds.responses)))

    def analyse(self, dataset_id: str, settings: AnalysisSettings | Mapping[str, Any] | None = None
                ) -> AnalysisAnswer:
        """The whole analysis (cached per canonical settings); a mapping is checked by :meth:`settings` first."""
        s = self._settings(dataset_id, settings)
        key = s.key()
        tag(key=key)  # the progress messages say which analysis they are about (a no-op if nobody listens)

        def make() -> AnalysisAnswer:
            if not self._slots.acquire(blocking=False):  # at most one analysis per core computes; more wait their turn
                stage("waiting: other analyses are using every core")
                self._slots.acquire()
            try:
                return run(self.inputs(dataset_id, s), s)
            finally:
                self._slots.release()

        answer = self._locked((dataset_id, key), self._answers, make)
        self._prefetch_next(s, answer)
        return answer

    def _prefetch_next(self, s: AnalysisSettings, answer: AnalysisAnswer) -> None:
        """The work after an answer, in the background: the answers' cache sizes (:meth:`settle`) and the
        parallel-analysis thresholds of the likely next drop (one item fewer).

        The thresholds depend only on (n, k, iterations, variant, seed), never on the data. One job at a time
        on one worker thread; a job not yet started when a newer one arrives is cancelled (stale). A job first
        waits ``PREFETCH_DELAY`` (and gives up if a newer one arrived meanwhile): the answer is written, sent
        and drawn by the page before this work takes the second core.
        """
        draw = None
        if answer.factors is not None and answer.factors.retention is not None and s.correlation != "polychoric":
            n, k = int(answer.reliability.min_pairwise_n), len(s.items) - 1
            args = {"iterations": s.pa_iterations, "variant": s.pa_variant, "seed": s.seed}
            if k >= 3 and n - 1 > k and not has_random_reference(n, k, **args):
                draw = (n, k, args)
        if draw is None and not self._settle_if_backlogged():
            return
        with self._lock:
            if self._prefetch_job is not None:
                self._prefetch_job.cancel()  # a no-op once it runs
            self._prefetch_ticket += 1
            ticket = self._prefetch_ticket

            def job() -> None:
                with self._lock:
                    if ticket != self._prefetch_ticket:  # a newer answer has its own job
                        return
                    self._prefetch_stale.clear()
                self._prefetch_stale.wait(PREFETCH_DELAY)
                with self._lock:
                    if ticket != self._prefetch_ticket:
                        return
                self.settle()
                if draw is not None:
                    random_reference(draw[0], draw[1], **draw[2])

            self._prefetch_stale.set()  # an older job still waiting gives up now
            self._prefetch_job = self._prefetch.submit(job)

    def _settle_if_backlogged(self) -> int:
        """Size the waiting entries now if more than ``_UNSIZED_MAX`` wait (back-to-back calls that never leave
        time for the background job); the number that waited."""
        with self._lock:
            backlog = max(c.n_unsized() for c in self._lazy)
        if backlog > _UNSIZED_MAX:
            self.settle()
        return backlog

    def settle(self) -> None:
        """Estimate the sizes of the entries cached since the last call (answers, subscale blocks, reference
        solutions: the lazy caches) and keep each cache's byte budget."""
        with self._lock:
            pending = [(cache, cache.unsized()) for cache in self._lazy]
        for cache, entries in pending:
            if not entries:
                continue
            sizes = [(key, value, footprint(value)) for key, value in entries]  # outside the lock: ~6 ms an answer
            with self._lock:
                for key, value, n in sizes:
                    cache.sized(key, value, n)

    def preparing(self) -> bool:
        """Whether the background job after the last answer (its cache size, the likely next drop's
        parallel-analysis thresholds) is waiting, queued or running."""
        with self._lock:
            job = self._prefetch_job
        return job is not None and not job.done()

    def prefetch_idle(self, timeout: float | None = None) -> None:
        """Wait until the background job after the last answer, if any, has finished (tests and the bench)."""
        with self._lock:
            job = self._prefetch_job
        if job is not None:
            concurrent.futures.wait([job], timeout=timeout)

    def reliability(self, dataset_id: str, settings: AnalysisSettings | Mapping[str, Any] | None = None
                    ) -> AnalysisAnswer:
        """The analysis without its factor sections (reliability, items, constructs, pruning path)."""
        s = self._settings(dataset_id, settings)
        answer = self._locked((dataset_id, "rel", s.key()), self._answers,
                              lambda: run(self.inputs(dataset_id, s, with_factors=False), s, with_factors=False))
        self._settle_if_backlogged()  # no background job follows this one
        return answer

    # ------------------------------------------------------------------ what is cached (for tests and logs)
    def has_answer(self, dataset_id: str, settings: AnalysisSettings | Mapping[str, Any] | None = None) -> bool:
        """Whether the whole analysis of these settings is in memory (answered without computing)."""
        s = self._settings(dataset_id, settings)
        with self._lock:
            return (dataset_id, s.key()) in self._answers

    def cached_datasets(self) -> list[str]:
        """Ids of the parsed datasets in memory, least recently used first."""
        with self._lock:
            return list(self._datasets)

    def cache_usage(self) -> dict[str, dict[str, int | None]]:
        """Entries, estimated bytes and byte budget of each cache."""
        caches = {"datasets": self._datasets, "pools": self._pools, "descriptives": self._descriptives,
                  "answers": self._answers, "references": self._references, "blocks": self._blocks}
        self.settle()
        with self._lock:
            return {name: {"entries": len(c), "bytes": c.nbytes, "max_bytes": c.max_bytes}
                    for name, c in caches.items()}
