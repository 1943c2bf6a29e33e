"""Background thresholds for the next drop, and the full-pool reference kept from the first analysis."""
from __future__ import annotations

import io

import numpy as np

from server.analysis import factors as factors_section
from server.engine import Engine
from server.stats import dimensionality as dim
from server.store import SQLiteStore


def _engine(tmp_path, holzinger):
    store = SQLiteStore(tmp_path / "data")
    buf = io.StringIO()
    holzinger.to_csv(buf, index=False)
    record = store.add_dataset(name="hs", raw=buf.getvalue().encode(), filename="hs.csv", options={})
    return Engine(store), record["id"], store


def test_thresholds_of_one_item_fewer_are_drawn_after_an_answer(tmp_path, holzinger):
    engine, ds, _ = _engine(tmp_path, holzinger)
    s = engine.settings(ds, {"seed": 4242})
    assert not engine.preparing()
    answer = engine.analyse(ds, s)
    engine.prefetch_idle(60)
    assert not engine.preparing()  # what /api/health reports as "preparing"
    n, k = answer.reliability.min_pairwise_n, len(s.items) - 1
    assert dim.has_random_reference(n, k, iterations=s.pa_iterations, variant=s.pa_variant, seed=4242)
    drop = engine.analyse(ds, {"seed": 4242, "items": list(s.items[:-1])})
    fresh = dim.random_correlation_eigenvalues(n, k, iterations=s.pa_iterations, variant=s.pa_variant, seed=4242)
    thr = [round(float(v), 6) for v in np.percentile(fresh, 95, axis=0)]
    assert drop.factors.retention["parallel"]["threshold"] == thr  # the same values as a fresh draw


def test_first_drop_reuses_the_full_pool_solution(tmp_path, holzinger, monkeypatch):
    engine, ds, store = _engine(tmp_path, holzinger)
    names = engine.pool_items(ds)
    engine.analyse(ds, {})
    calls = []
    real = factors_section.reference_solution
    monkeypatch.setattr(factors_section, "reference_solution", lambda *a: calls.append(1) or real(*a))
    kept = engine.analyse(ds, {"items": names[:-1]}).to_dict()
    assert calls == []  # the first analysis' own solution was kept
    other = Engine(store)  # no first analysis: the reference is fitted by reference_solution
    refit = other.analyse(ds, {"items": names[:-1]}).to_dict()
    assert calls == [1]
    a, b = kept["efa"].result, refit["efa"].result
    np.testing.assert_array_equal(a.pattern, b.pattern)
    assert a.factors == b.factors


def test_preparing_while_the_next_thresholds_are_drawn(tmp_path, holzinger, monkeypatch):
    import threading

    engine, ds, _ = _engine(tmp_path, holzinger)
    release = threading.Event()
    real = dim.random_reference
    monkeypatch.setattr("server.engine.random_reference", lambda *a, **kw: release.wait(60) and real(*a, **kw))
    monkeypatch.setattr("server.engine.has_random_reference", lambda *a, **kw: False)  # drawn in another test
    engine.analyse(ds, {"seed": 99})
    assert engine.preparing()  # the job for one item fewer is waiting on the event
    release.set()
    engine.prefetch_idle(60)
    assert not engine.preparing()


def test_the_draw_waits_after_an_answer_and_a_newer_drop_supersedes_a_waiting_one(tmp_path, holzinger, monkeypatch):
    """The next drop's thresholds are drawn PREFETCH_DELAY after the answer (the page draws it first); a job still
    waiting when another answer arrives gives up, and only the newest item count is drawn."""
    import time

    from server import engine as engine_module

    engine, ds, _ = _engine(tmp_path, holzinger)
    drawn: list[tuple[int, float]] = []
    monkeypatch.setattr(engine_module, "PREFETCH_DELAY", 2.0)
    monkeypatch.setattr("server.engine.random_reference", lambda n, k, **kw: drawn.append((k, time.monotonic())))
    monkeypatch.setattr("server.engine.has_random_reference", lambda *a, **kw: False)
    names = engine.pool_items(ds)
    answered = time.monotonic()
    engine.analyse(ds, {"seed": 5})
    engine.analyse(ds, {"seed": 5, "items": names[:-1]})  # within the first job's wait
    assert engine.preparing()
    engine.prefetch_idle(30)
    assert [k for k, _ in drawn] == [len(names) - 2]  # the first job (k - 1) gave up
    assert drawn[0][1] - answered >= 2.0
