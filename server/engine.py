"""The analysis engine: loads datasets, caches what is expensive, and assembles one analysis.

What is cached, and by what it depends on (CONVENTIONS 7):

* the parsed dataset, per dataset id;
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

import json
import logging
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


class _LRU(OrderedDict):
    def __init__(self, size: int):
        super().__init__()
        self.size = size

    def get_or(self, key, make):
        if key in self:
            self.move_to_end(key)
            return self[key]
        value = make()
        self[key] = value
        while len(self) > self.size:
            self.popitem(last=False)
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

    def __init__(self, store):
        self.store = store
        self._lock = threading.RLock()
        self._datasets: _LRU = _LRU(16)
        self._pools: _LRU = _LRU(32)
        self._descriptives: _LRU = _LRU(64)
        self._pa: _LRU = _LRU(64)
        self._answers: _LRU = _LRU(128)
        self._references: _LRU = _LRU(64)
        self._key_locks: dict = {}
        self._busy = threading.local()

    # ------------------------------------------------------------------ datasets
    def dataset(self, dataset_id: str):
        from .api.errors import not_found
        from .intake import read_responses

        with self._lock:
            if dataset_id in self._datasets:
                return self._datasets.get_or(dataset_id, lambda: None)
        record = self.store.get_dataset(dataset_id)
        if record is None:
            raise not_found("dataset", dataset_id)
        opts = dict(record.get("options") or {})
        parsed = read_responses(
            self.store.read_raw(dataset_id), record.get("filename") or "responses.csv",
            codebook_raw=self.store.read_codebook(dataset_id),
            codebook_filename=record.get("codebook_filename"),
            missing_codes=opts.get("missing_codes"), id_column=opts.get("id_column"),
            scale_min=opts.get("scale_min"), scale_max=opts.get("scale_max"))
        if record.get("name"):
            parsed.name = record["name"]
        with self._lock:
            return self._datasets.get_or(dataset_id, lambda: parsed)

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
        and the page's request waits for it instead of starting it again.
        """
        with self._lock:
            self._datasets.get_or(dataset_id, lambda: parsed)

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
