"""The retest service without HTTP: matching the demo's two waves by respondent ID, scoring, refusals.

Sources: demo_data/README.md (144 wave-1 respondents came back, 6 newcomers, 256 missing); pingouin 0.7
intraclass_corr for the ICC of the matched totals; numpy for the Bland-Altman limits.
"""
from __future__ import annotations

import pandas as pd
import pytest

import server  # noqa: F401  (one BLAS thread before numpy work)
from server.demo import DEMO_RETEST_NAME, ensure_demo_loaded
from server.engine import Engine
from server.errors import NotFound
from server.retest import RetestAnswer, RetestQuery, compute_retest
from server.stats.errors import InputError
from server.store import Store


@pytest.fixture
def demo(tmp_path):
    store = Store(tmp_path / "data")
    first = ensure_demo_loaded(store)
    second = next(d["id"] for d in store.list_datasets() if d["name"] == DEMO_RETEST_NAME)
    return Engine(store), store, first, second


def test_demo_waves_are_matched_by_id(demo):
    engine, store, first, second = demo
    r = compute_retest(engine, store, RetestQuery(second=second, first=first))
    assert isinstance(r, RetestAnswer)
    assert r.n_matched == 144  # demo_data/README.md: 144 of the wave-1 respondents came back
    assert r.only_second.count == 6 and set(r.only_second.ids) == {f"R040{i}" for i in range(1, 7)}  # README
    assert r.only_first.count == 256  # demo_data/README.md: 256 wave-1 respondents are missing
    assert r.warnings[0].code == "retest_unmatched"
    assert r.parallel_forms is False and r.first.id == first and r.second.n_rows == 150


def test_totals_agree_with_a_pandas_merge_and_pingouin(demo):
    import pingouin as pg

    engine, store, first, second = demo
    items = ["W1", "W2", "W3", "C1", "C2"]
    r = compute_retest(engine, store, RetestQuery(second=second, first=first, items=items, reverse=[]))
    ds1, ds2 = engine.dataset(first), engine.dataset(second)
    names1, names2 = [i.name for i in ds1.items], [i.name for i in ds2.items]
    t1 = pd.DataFrame(ds1.responses, columns=names1, index=[str(i) for i in ds1.ids])[items].sum(axis=1, min_count=5)
    t2 = pd.DataFrame(ds2.responses, columns=names2, index=[str(i) for i in ds2.ids])[items].sum(axis=1, min_count=5)
    both = pd.concat([t1, t2], axis=1, join="inner").dropna()
    assert r.n == len(both)
    d = (both[1] - both[0]).to_numpy()
    assert r.mean_difference == pytest.approx(d.mean())  # numpy, matched by ID with pandas
    assert r.limits_of_agreement.upper == pytest.approx(d.mean() + 1.96 * d.std(ddof=1))  # Bland & Altman 1986
    long = pd.DataFrame([(i, w, s) for i, pair in enumerate(r.scores) for w, s in enumerate(pair)],
                        columns=["id", "wave", "score"])
    ref = pg.intraclass_corr(long, targets="id", raters="wave", ratings="score").set_index("Type")
    assert r.icc.form("ICC(A,1)").value == pytest.approx(ref.loc["ICC(A,1)", "ICC"], abs=1e-9)  # pingouin


def test_snapshot_gives_items_and_reverse_keying(demo):
    engine, store, first, second = demo
    snap = store.add_snapshot(first, {"name": "short", "items": ["W1", "W2", "W3"], "settings": {"reverse": ["W2"]}})
    r = compute_retest(engine, store, RetestQuery(second=second, snapshot=snap["id"]))
    assert r.items == ("W1", "W2", "W3") and r.reverse == ("W2",) and r.reverse_second == ("W2",)
    plain = compute_retest(engine, store, RetestQuery(second=second, first=first, items=["W1", "W2", "W3"],
                                                      reverse=[]))
    assert r.n == plain.n and r.scores != plain.scores  # reverse keying W2 (6 - x) changes the totals
    w2 = [i.name for i in engine.dataset(first).items].index("W2")
    assert engine.dataset(first).items[w2].max + engine.dataset(first).items[w2].min == 6  # codebook: 1-5


@pytest.mark.parametrize("query, code, status", [
    ({"first": "FIRST", "second": "FIRST"}, "same_dataset", 422),
    ({"second": "SECOND"}, "bad_request", 422),
    ({"first": "FIRST", "second": "SECOND", "items": ["W1", "W1"]}, "duplicate_items", 422),
    ({"first": "FIRST", "second": "SECOND", "items": ["W1", "Z9"]}, "unknown_item", 422),
    ({"first": "FIRST", "second": "SECOND", "items": []}, "no_items", 422),
])
def test_refusals_name_the_problem(demo, query, code, status):
    engine, store, first, second = demo
    query = {k: {"FIRST": first, "SECOND": second}.get(v, v) if isinstance(v, str) else v for k, v in query.items()}
    with pytest.raises(InputError) as e:
        compute_retest(engine, store, RetestQuery(**query))
    assert e.value.code == code and e.value.status == status


def test_unknown_snapshot_is_not_found(demo):
    engine, store, _first, second = demo
    with pytest.raises(NotFound) as e:
        compute_retest(engine, store, RetestQuery(second=second, snapshot="no-such-snapshot"))
    assert (e.value.kind, e.value.ident) == ("snapshot", "no-such-snapshot")


def test_snapshot_of_another_dataset_is_refused(demo):
    engine, store, first, second = demo
    snap = store.add_snapshot(second, {"name": "wave 2", "items": ["W1", "W2"]})
    with pytest.raises(InputError) as e:
        compute_retest(engine, store, RetestQuery(first=first, second=second, snapshot=snap["id"]))
    assert e.value.code == "snapshot_mismatch" and e.value.details["dataset"] == second


def test_waves_without_shared_ids_are_refused(demo, tmp_path):
    engine, store, first, _ = demo
    raw = b"respondent,W1,W2\nX1,1,2\nX2,3,4\nX3,2,2\n"
    other = store.add_dataset(name="strangers", raw=raw, filename="s.csv", codebook_raw=None,
                              codebook_filename=None, options={"id_column": "respondent"}, meta={})
    with pytest.raises(InputError) as e:
        compute_retest(engine, store, RetestQuery(first=first, second=other["id"], items=["W1", "W2"]))
    assert e.value.code == "no_overlap" and e.value.details["second_examples"] == ["X1", "X2", "X3"]
    assert e.value.details["n_first"] == 400  # demo_data/README.md: wave 1 has 400 respondents
