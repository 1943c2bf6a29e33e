"""The engine's caches are bounded by bytes (Settings.cache_mb), least recently used dropped first (issue 9)."""
from __future__ import annotations

import sys

import numpy as np
import pandas as pd
import pytest

from server.app import create_app
from server.engine import _LRU, Engine, footprint
from server.intake import read_responses
from server.settings import Settings
from server.store import SQLiteStore

MB = 1024 * 1024


def block(mb: float) -> np.ndarray:
    return np.zeros(int(mb * MB) // 8)


def sizes(cache: _LRU) -> int:
    return sum(footprint(v) for v in cache.values())


def test_footprint_counts_arrays_strings_and_shared_objects_once():
    a = block(1)
    assert a.nbytes <= footprint(a) < a.nbytes + 1024
    assert footprint(a[::2]) >= a.nbytes  # a view keeps its whole base alive
    assert footprint([a, a, {"again": a}]) < a.nbytes + 4096
    ids = [f"respondent-{i}" for i in range(50_000)]  # long lists are measured on a sample and scaled
    exact = sys.getsizeof(ids) + sum(sys.getsizeof(s) for s in ids)
    assert 0.95 * exact <= footprint(ids) <= 1.05 * exact


def test_lru_drops_least_recently_used_until_the_bytes_fit():
    budget = 3 * MB + 64 * 1024
    cache = _LRU(None, budget)
    for key in "abc":
        cache.get_or(key, lambda: block(1))
    assert list(cache) == ["a", "b", "c"]
    cache.get_or("a", lambda: pytest.fail("'a' is cached"))  # using 'a' makes 'b' the oldest
    cache.get_or("d", lambda: block(1))
    assert list(cache) == ["c", "a", "d"]
    assert cache.nbytes == sizes(cache) <= budget
    rng = np.random.default_rng(9)
    for step in range(200):  # random sizes and hits: the total never exceeds the budget
        key = int(rng.integers(0, 12))
        cache.get_or(key, lambda: block(float(rng.uniform(0.05, 1.5))))
        assert cache.nbytes == sizes(cache) <= budget, step
        assert list(cache)[-1] == key  # the entry just used is the newest


def test_an_entry_larger_than_the_budget_is_kept_alone_until_the_next_one():
    cache = _LRU(None, 1 * MB)
    cache.get_or("small1", lambda: block(0.2))
    cache.get_or("small2", lambda: block(0.2))
    big = cache.get_or("big", lambda: block(5))
    assert list(cache) == ["big"] and cache["big"] is big
    cache.get_or("small3", lambda: block(0.2))
    assert list(cache) == ["small3"]


def test_delete_and_clear_keep_the_byte_count():
    cache = _LRU(10, 100 * MB)
    cache.get_or("a", lambda: block(1))
    cache.get_or("b", lambda: block(2))
    del cache["a"]
    assert cache.nbytes == sizes(cache)
    cache["b"] = block(0.5)  # replacing a value counts the new one only
    assert cache.nbytes == sizes(cache)
    cache.clear()
    assert cache.nbytes == 0 and not cache


def test_a_lazy_cache_counts_an_entry_once_it_is_sized_and_then_keeps_the_budget():
    budget = 3 * MB + 64 * 1024
    cache = _LRU(None, budget, lazy=True)
    for key in "abcd":
        cache.get_or(key, lambda: block(1))
    assert cache.nbytes == 0 and list(cache) == ["a", "b", "c", "d"]  # nothing sized yet: all kept for now
    pending = cache.unsized()
    assert [k for k, _ in pending] == ["a", "b", "c", "d"]
    stale = block(0.5)
    cache["d"] = stale  # replaced before it was sized: the new value waits, the old one is never counted
    for key, value in pending:
        cache.sized(key, value, footprint(value))
    assert [k for k, _ in cache.unsized()] == ["d"]
    cache.sized("d", cache["d"], footprint(cache["d"]))
    assert cache.nbytes == sizes(cache) <= budget and list(cache) == ["b", "c", "d"]  # the oldest dropped
    del cache["b"]
    cache.clear()
    assert cache.nbytes == 0 and not cache.unsized()


def test_the_engine_sizes_its_answers_after_the_answer_and_keeps_their_budget(tmp_path):
    store = SQLiteStore(tmp_path / "data")
    ds = store.add_dataset(name="d", raw=csv_bytes(5, rows=400), filename="d.csv", options={"id_column": "pid"})["id"]
    engine = Engine(store)
    names = engine.pool_items(ds)
    first = engine.analyse(ds, {"items": names[:-1]})
    engine.prefetch_idle(60)  # the background job after the answer sized it
    usage = engine.cache_usage()["answers"]
    assert usage["entries"] == 1 and usage["bytes"] == footprint(first)
    small = Engine(store, cache_bytes=4 * usage["bytes"])  # an answers budget of about one answer
    for j in range(1, 5):
        small.analyse(ds, {"items": names[:-j]})
        small.prefetch_idle(60)
        got = small.cache_usage()["answers"]
        assert got["bytes"] <= got["max_bytes"] or got["entries"] == 1, j


def test_count_bound_still_applies_without_a_byte_budget():
    cache = _LRU(2)
    for key in "abc":
        cache.get_or(key, key.upper)
    assert list(cache) == ["b", "c"] and cache["c"] == "C"


def csv_bytes(seed: int, rows: int = 1500, items: int = 12) -> bytes:
    rng = np.random.default_rng(seed)
    df = pd.DataFrame(rng.integers(1, 6, size=(rows, items)), columns=[f"Q{j + 1}" for j in range(items)])
    df.insert(0, "pid", [f"p{seed}-{i}" for i in range(rows)])
    return df.to_csv(index=False).encode()


def test_engine_evicts_datasets_by_bytes_and_reads_an_evicted_one_again(tmp_path):
    store = SQLiteStore(tmp_path / "data")
    raws = {seed: csv_bytes(seed) for seed in (1, 2, 3)}
    ids = {seed: store.add_dataset(name=f"d{seed}", raw=raw, filename=f"d{seed}.csv",
                                   options={"id_column": "pid"})["id"] for seed, raw in raws.items()}
    one = footprint(read_responses(raws[1], "d1.csv", id_column="pid"))
    assert one > 1500 * 12 * 8  # the responses and the IDs
    budget = int(2.5 * one)
    engine = Engine(store, cache_bytes=budget)
    reads = []
    real_read = store.read_raw
    store.read_raw = lambda dataset_id: reads.append(dataset_id) or real_read(dataset_id)

    a, b, c = ids[1], ids[2], ids[3]
    engine.dataset(a)
    engine.dataset(b)
    engine.dataset(a)  # 'a' used last: 'b' is the oldest now
    engine.dataset(c)
    assert engine.cached_datasets() == [a, c]
    assert engine.cache_usage()["datasets"]["bytes"] <= budget
    assert reads == [a, b, c]

    again = engine.dataset(b)  # evicted: read from disk again, and identical to a fresh reading
    assert reads == [a, b, c, b]
    fresh = read_responses(raws[2], "d2.csv", id_column="pid")
    np.testing.assert_array_equal(again.responses, fresh.responses)
    assert again.item_names == fresh.item_names and again.ids == fresh.ids
    assert engine.cached_datasets() == [c, b] and engine.cache_usage()["datasets"]["bytes"] <= budget
    out = engine.reliability(b, {})
    assert out.reliability.result.alpha is not None  # an analysis on the re-read dataset works


def test_a_dataset_larger_than_the_budget_is_still_served(tmp_path):
    store = SQLiteStore(tmp_path / "data")
    first = store.add_dataset(name="d", raw=csv_bytes(4), filename="d.csv", options={"id_column": "pid"})
    engine = Engine(store, cache_bytes=1024)
    assert engine.dataset(first["id"]).responses.shape == (1500, 12)
    assert engine.cached_datasets() == [first["id"]]  # kept as the only entry


def test_create_app_gives_the_engine_cache_mb(tmp_path):
    app = create_app(Settings(data_dir=tmp_path / "data", cache_mb=3))
    usage = app.state.engine.cache_usage()
    assert usage["datasets"]["max_bytes"] == 3 * MB
    assert usage["pools"]["max_bytes"] == usage["answers"]["max_bytes"] == 3 * MB // 4


def test_an_engine_raises_the_collectors_thresholds_and_never_lowers_them(tmp_path, monkeypatch):
    import gc

    from server.engine import GC_THRESHOLDS
    from server.store import SQLiteStore

    before = gc.get_threshold()
    try:
        gc.set_threshold(700, 10, 10)  # Python's defaults
        Engine(SQLiteStore(tmp_path / "a"))
        assert gc.get_threshold() == GC_THRESHOLDS
        gc.set_threshold(GC_THRESHOLDS[0] * 2, 10, 10)  # an application's own higher young threshold stays
        Engine(SQLiteStore(tmp_path / "b"))
        assert gc.get_threshold() == (GC_THRESHOLDS[0] * 2, *GC_THRESHOLDS[1:])
    finally:
        gc.set_threshold(*before)
