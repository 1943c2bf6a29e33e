"""The analysis engine: loads datasets, caches what is expensive, and assembles one analysis.

What is cached, and by what it depends on (CONVENTIONS 7):

* the parsed dataset, per dataset id, least recently used dropped first beyond ``cache_bytes``;
* the full-pool pairwise covariance and correlation matrices, per (dataset, correlation type), computed
  once on the raw (not reverse-scored) responses (listwise deletion depends on the active items, so its
  matrices are computed per request from their complete rows; see ``analysis._pool_or_active``). Reverse-keying an item multiplies its row and
  column by -1 (exact for covariances, Pearson and polychoric correlations), and dropping items takes a
  submatrix, so a drop never touches the raw responses;
* per-item descriptives, per (dataset, reverse set);
* parallel-analysis thresholds, which depend only on (n, k, iterations, seed, variant);
* whole answers, per canonical request (a repeated identical request is served from memory).

Factor identity: every solution is lined up (order and sign, Tucker's congruence) with the full-pool
solution of the same settings and number of factors, so a factor keeps its column however many items are
dropped and in whatever order.
"""
from __future__ import annotations

import itertools
import json
import logging
import sys
import threading
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np

from .stats.errors import InputError

log = logging.getLogger("scalewright")

CORRELATIONS = ("pearson", "polychoric")
EXTRACTIONS = ("minres", "ml", "paf")
ROTATIONS = ("oblimin", "promax", "geomin", "varimax", "quartimax", "none")
MISSING = ("pairwise", "listwise")

DEFAULTS = {
    "items": None,
    "reverse": None,
    "missing": "pairwise",
    "correlation": "pearson",
    "extraction": "minres",
    "rotation": "oblimin",
    "gamma": 0.0,
    "n_factors": None,
    "thresholds": None,
    "pa_iterations": 500,
    "pa_variant": "components",
    "seed": 20261202,
}


DEFAULT_CACHE_BYTES = 2 * 1024 ** 3  # Settings.cache_mb's default, for callers without settings
_SAMPLE = 1000  # long lists are measured on their first items and scaled


def footprint(obj, _seen: set | None = None, _depth: int = 0) -> int:
    """An estimate of the bytes ``obj`` holds: arrays by ``nbytes``, containers and objects recursively.

    Lists, tuples and dicts longer than a thousand entries are measured on their first thousand and
    scaled; an object reached twice counts once. Meant for cache budgets, not exact accounting.
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

    Each entry's size is estimated once, when it is stored (:func:`footprint`). The oldest entries are
    dropped until both bounds hold again, except the newest one: an entry larger than the whole byte
    budget is still kept, as the only entry, until the next one arrives.
    """

    def __init__(self, size: int | None, max_bytes: int | None = None):
        super().__init__()
        self.size = size
        self.max_bytes = max_bytes
        self.nbytes = 0
        self._sizes: dict = {}

    def __setitem__(self, key, value):
        if key in self:
            self.nbytes -= self._sizes.pop(key, 0)
        super().__setitem__(key, value)
        n = footprint(value) if self.max_bytes is not None else 0
        self._sizes[key] = n
        self.nbytes += n

    def __delitem__(self, key):
        super().__delitem__(key)
        self.nbytes -= self._sizes.pop(key, 0)

    def clear(self):
        super().clear()
        self._sizes.clear()
        self.nbytes = 0

    def get_or(self, key, make):
        if key in self:
            self.move_to_end(key)
            return self[key]
        value = make()
        self[key] = value
        while len(self) > 1 and ((self.size is not None and len(self) > self.size)
                                 or (self.max_bytes is not None and self.nbytes > self.max_bytes)):
            del self[next(iter(self))]
        return value


@dataclass(frozen=True)
class FullPool:
    """Full-pool pairwise matrices for one (dataset, correlation type), on raw responses."""

    cov: np.ndarray          # pairwise covariance, k x k
    n_pair: np.ndarray       # pairwise n, k x k
    corr: np.ndarray         # Pearson or polychoric correlation, k x k
    warnings: tuple[str, ...]


class Engine:
    """Loads datasets from the store and answers analysis requests, caching full-pool work."""

    def __init__(self, store, *, cache_bytes: int = DEFAULT_CACHE_BYTES):
        self.store = store
        self._lock = threading.RLock()
        # Parsed datasets get the whole budget (Settings.cache_mb); the full-pool matrices and whole answers
        # a quarter of it each, the smaller caches a sixteenth each.
        self._datasets: _LRU = _LRU(None, cache_bytes)
        self._pools: _LRU = _LRU(32, cache_bytes // 4)
        self._descriptives: _LRU = _LRU(64, cache_bytes // 16)
        self._pa: _LRU = _LRU(64, cache_bytes // 16)
        self._answers: _LRU = _LRU(128, cache_bytes // 4)
        self._references: _LRU = _LRU(64, cache_bytes // 16)
        self._key_locks: dict = {}
        self._busy = threading.local()

    # ------------------------------------------------------------------ datasets
    def dataset(self, dataset_id: str):
        from .api.errors import not_found
        from .intake import NO_LIMITS, read_responses

        def make():
            record = self.store.get_dataset(dataset_id)
            if record is None:
                raise not_found("dataset", dataset_id)
            opts = dict(record.get("options") or {})
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

        # one reading per dataset at a time: an evicted dataset asked for by two requests is read once
        return self._locked(dataset_id, self._datasets, make)

    def pool_items(self, dataset_id: str) -> list[str]:
        """Every item that can enter an analysis (the full pool less items without variance)."""
        constant = self.constant_items(dataset_id)
        return [it.name for it in self.dataset(dataset_id).items if it.name not in constant]

    def constant_items(self, dataset_id: str) -> dict[str, str]:
        """Items that cannot enter a covariance matrix (fewer than two different answers), with why."""
        def make():
            ds = self.dataset(dataset_id)
            out = {}
            for j, it in enumerate(ds.items):
                col = ds.responses[:, j]
                vals = np.unique(col[~np.isnan(col)])
                if vals.size < 2:
                    why = (f"every answer is {vals[0]:g}" if vals.size == 1 else "it has no answers")
                    out[it.name] = (f"Item '{it.name}' has no variance ({why}); it cannot enter the correlation "
                                    f"matrix and was left out of the analysis.")
            return out

        return self._locked((dataset_id, "constant"), self._descriptives, make)

    def prime(self, dataset_id: str, parsed) -> None:
        """Keep a just-uploaded dataset (already parsed) and start its default analysis in the background.

        The team usually opens the dataset right after the upload; the first analysis (full-pool
        matrices, parallel analysis, the reference factor solution) is then already under way or done,
        and the page's request waits for it instead of starting it again. A dataset whose first analysis
        would cost more than BACKGROUND_BUDGET (see :func:`background_cost`) is only kept: the page's own
        request computes it when someone opens the dataset.
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
                self.analyse(dataset_id, {})
            except Exception as exc:  # noqa: BLE001  (the page's own request reports it to the user)
                log.info("background analysis of %s stopped: %s", dataset_id, exc)

        threading.Thread(target=warm, name=f"warm-{dataset_id}", daemon=True).start()

    def forget(self, dataset_id: str) -> None:
        with self._lock:
            for cache in (self._datasets, self._pools, self._descriptives, self._answers, self._references):
                for key in [k for k in cache if k == dataset_id or (isinstance(k, tuple) and k[0] == dataset_id)]:
                    del cache[key]

    def reverse_mask(self, dataset_id: str, reverse: list[str] | None) -> np.ndarray:
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
    def _locked(self, key, cache: _LRU, make):
        with self._lock:
            if key in cache:
                return cache.get_or(key, make)
            lock = self._key_locks.setdefault(key, threading.Lock())
        busy = self._busy.__dict__.setdefault("keys", set())
        if key in busy:  # a computation that needs itself would wait on its own lock forever
            raise RuntimeError(f"re-entrant computation of {key!r}")
        with lock:  # one computation per key, others wait for it
            with self._lock:
                if key in cache:
                    return cache.get_or(key, make)
            busy.add(key)
            try:
                value = make()
            except BaseException:
                with self._lock:
                    self._key_locks.pop(key, None)
                raise
            finally:
                busy.discard(key)
            with self._lock:
                cache.get_or(key, lambda: value)
                self._key_locks.pop(key, None)
            return value

    def full_pool(self, dataset_id: str, correlation: str) -> FullPool:
        from .stats import correlation as corrmod

        def make():
            ds = self.dataset(dataset_id)
            constant = self.constant_items(dataset_id)
            ok = np.array([it.name not in constant for it in ds.items])
            X, names = ds.responses[:, ok], [it.name for it in ds.items if it.name not in constant]
            cov, n_pair = corrmod.pairwise_covariance(X)
            make_corr = corrmod.polychoric_matrix if correlation == "polychoric" else corrmod.pearson_matrix
            res = make_corr(X, missing="pairwise", smooth=None, names=names)
            # constant items never enter an analysis; their rows and columns stay empty
            k = len(ds.items)
            full = {"cov": np.full((k, k), np.nan), "n_pair": np.zeros((k, k)), "corr": np.full((k, k), np.nan)}
            sub = np.ix_(ok, ok)
            full["cov"][sub], full["n_pair"][sub], full["corr"][sub] = cov, n_pair, np.asarray(res.matrix, float)
            return FullPool(cov=full["cov"], n_pair=full["n_pair"], corr=full["corr"],
                            warnings=tuple(res.warnings))

        def make_or_fail():  # a pool that cannot be formed is remembered too, not retried on every request
            try:
                return make()
            except InputError as exc:
                return exc

        pool = self._locked((dataset_id, correlation), self._pools, make_or_fail)
        if isinstance(pool, InputError):
            raise pool
        return pool

    def descriptives(self, dataset_id: str, mask: np.ndarray) -> list[dict]:
        """Per-item descriptives of the whole pool for one reverse set (cached; a drop picks rows)."""
        from .stats.descriptives import item_descriptives

        def make():
            ds = self.dataset(dataset_id)
            X = self.scored(dataset_id, [it.name for it, m in zip(ds.items, mask) if m])
            rows = item_descriptives(X, names=[it.name for it in ds.items],
                                     mins=[it.min for it in ds.items], maxs=[it.max for it in ds.items])
            return [r.to_dict() if hasattr(r, "to_dict") else dict(r) for r in rows]

        return self._locked((dataset_id, "desc", tuple(mask.tolist())), self._descriptives, make)

    # ------------------------------------------------------------------ analysis
    def resolve(self, dataset_id: str, request: dict) -> dict:
        """Fill defaults and check every option; returns the canonical settings."""
        ds = self.dataset(dataset_id)
        names = [it.name for it in ds.items]
        req = {**DEFAULTS, **{k: v for k, v in (request or {}).items() if v is not None or k == "n_factors"}}
        for field, allowed in (("correlation", CORRELATIONS), ("extraction", EXTRACTIONS),
                               ("rotation", ROTATIONS), ("missing", MISSING)):
            if req[field] not in allowed:
                raise InputError(f"'{field}' must be one of {', '.join(allowed)}; got '{req[field]}'.",
                                 code="bad_option", details={"field": field, "value": req[field]})
        items = req["items"] if req["items"] is not None else names
        unknown = [i for i in items if i not in names]
        if unknown:
            raise InputError(f"Unknown item(s): {', '.join(map(str, unknown))}. The dataset has "
                             f"{len(names)} items.", code="unknown_item", details={"items": unknown})
        if len(set(items)) != len(items):
            dup = sorted({i for i in items if items.count(i) > 1})
            raise InputError(f"Item(s) listed twice: {', '.join(dup)}.", code="duplicate_item",
                             details={"items": dup})
        constant = self.constant_items(dataset_id)
        excluded = [i for i in items if i in constant]
        items = [i for i in items if i not in constant]
        if len(items) < 2:
            raise InputError(f"At least 2 active items with some variance are needed; got {len(items)}"
                             + (f" ({', '.join(excluded)} had no variance)" if excluded else "") + ".",
                             code="too_few_items", details={"n_items": len(items), "excluded": excluded})
        # keep the dataset's column order, whatever order the request used
        order = {n: i for i, n in enumerate(names)}
        items = sorted(items, key=order.__getitem__)
        mask = self.reverse_mask(dataset_id, req["reverse"])
        req["items"] = items
        req["excluded"] = excluded
        req["reverse"] = [n for n, m in zip(names, mask) if m]
        nf = req["n_factors"]
        if nf is not None and (not isinstance(nf, int) or nf < 1):
            raise InputError(f"'n_factors' must be a whole number of at least 1, or null; got {nf!r}.",
                             code="bad_option", details={"field": "n_factors", "value": nf})
        if not (10 <= int(req["pa_iterations"]) <= 5000):
            raise InputError("'pa_iterations' must be between 10 and 5000.", code="bad_option",
                             details={"field": "pa_iterations", "value": req["pa_iterations"]})
        from .stats.flags import resolve_thresholds

        resolve_thresholds(req["thresholds"])  # unknown names or out-of-range values: a 4xx now
        req["pa_iterations"] = int(req["pa_iterations"])
        req["seed"] = int(req["seed"])
        req["gamma"] = float(req["gamma"])
        return req

    def analyse(self, dataset_id: str, request: dict | None = None) -> dict:
        settings = self.resolve(dataset_id, request or {})
        key = (dataset_id, json.dumps(settings, sort_keys=True))
        return self._locked(key, self._answers, lambda: self._analyse(dataset_id, settings))

    def reliability(self, dataset_id: str, request: dict | None = None) -> dict:
        """The analysis without its factor sections (reliability, items, constructs, pruning path)."""
        settings = self.resolve(dataset_id, request or {})
        key = (dataset_id, "rel", json.dumps(settings, sort_keys=True))
        return self._locked(key, self._answers, lambda: self._analyse(dataset_id, settings, with_efa=False))

    def _analyse(self, dataset_id: str, s: dict, *, with_efa: bool = True) -> dict:
        from .analysis import assemble

        return assemble(self, dataset_id, s, with_efa=with_efa)

    def reference_solution(self, dataset_id: str, s: dict, n_factors: int):
        """The full-pool solution with the same settings and number of factors (for factor identity)."""
        ref = {**s, "items": self.pool_items(dataset_id), "n_factors": n_factors}
        key = (dataset_id, "ref", json_key(ref))

        def make():
            out = self.analyse(dataset_id, ref)
            efa = out.get("efa") or {}
            return {"loadings": efa.get("loadings"), "factors": efa.get("factors")} if efa.get("loadings") else None

        return self._locked(key, self._references, make)


def json_key(obj) -> str:
    return json.dumps(obj, sort_keys=True)
