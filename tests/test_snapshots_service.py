"""The snapshot service without HTTP: drafts checked, the trail recomputed, records compared.

Sources: Cronbach (1951) alpha recomputed with pingouin 0.7 for the trail; the demo data (demo_data/README.md).
"""
from __future__ import annotations

import pandas as pd
import pytest

import server  # noqa: F401  (one BLAS thread before numpy work)
from server import snapshots
from server.api.serialize import to_jsonable  # the API edge's serializer: snapshots store what routes send
from server.demo import DEMO_RETEST_NAME, ensure_demo_loaded
from server.engine import Engine
from server.errors import NotFound
from server.retest import RetestQuery
from server.snapshots import AgreementTable, Draft, Removal
from server.stats.errors import InputError
from server.store import Store

KEPT = ["W1", "W2", "W3", "W4", "W5"]


@pytest.fixture
def demo(tmp_path):
    store = Store(tmp_path / "data")
    return Engine(store), store, ensure_demo_loaded(store)


def draft(**change) -> Draft:
    base = {"name": "Short welcome", "author": "Ana", "items": KEPT,
                "removed": [Removal("W6", "weak loading", "weak"), Removal("W7", "wording", "Wording")]}
    return Draft(**{**base, **change})


def test_save_recomputes_the_trail_from_the_responses(demo):
    import pingouin as pg

    engine, store, ds = demo
    rec = snapshots.save(engine, store, ds, draft(), {}, to_jsonable)
    assert rec["id"] and store.get_snapshot(rec["id"])["items"] == KEPT
    assert [t["n_items"] for t in rec["trail"]] == [7, 6, 5]
    assert [r["code"] for r in rec["removed"]] == ["weak", "wording"]  # codes normalised
    d = engine.dataset(ds)
    frame = pd.DataFrame(d.responses, columns=[i.name for i in d.items])
    for step, pool in ((0, KEPT + ["W6", "W7"]), (1, KEPT + ["W7"]), (2, KEPT)):
        ref = pg.cronbach_alpha(frame[pool], nan_policy="pairwise")[0]  # pingouin 0.7, Cronbach (1951)
        assert rec["trail"][step]["alpha"] == pytest.approx(ref, abs=1e-6)
    assert rec["removed"][1]["alpha_after"] == rec["trail"][2]["alpha"] == rec["analysis"]["reliability"]["alpha"]
    assert [m["name"] for m in rec["item_meta"]] == KEPT


def test_save_keeps_retest_and_agreement_as_their_routes_answer(demo):
    engine, store, ds = demo
    second = next(d["id"] for d in store.list_datasets() if d["name"] == DEMO_RETEST_NAME)
    ratings = [[1, 2], [2, 2], [3, 3], [4, 5], [5, 5]]
    rec = snapshots.save(engine, store, ds, draft(retest=RetestQuery(second=second),
                                                  agreement=AgreementTable(ratings, "interval")), {}, to_jsonable)
    kept = rec["stability"]
    assert kept["retest"]["n_matched"] == 144  # demo_data/README.md
    assert kept["retest"]["items"] == KEPT and kept["retest_request"]["first"] == ds
    assert set(kept["retest"]["icc"]) >= {"ICC(1,1)", "ICC(A,1)", "ICC(C,k)"}  # JSON keys as before
    assert kept["agreement"]["n_units"] == 5 and kept["agreement_level"] == "interval"


@pytest.mark.parametrize("change, code", [
    ({"name": "  "}, "missing_name"),
    ({"items": ["W1"]}, "too_few_items"),
    ({"items": ["W1", "W1"]}, "duplicate_item"),
    ({"items": ["W1", "Z9"]}, "unknown_item"),
    ({"removed": [Removal("W1", "x")]}, "kept_and_removed"),
    ({"removed": [Removal("W6", " ")]}, "missing_reason"),
    ({"removed": [Removal("W6", "x", "gone fishing")]}, "unknown_reason_code"),
    ({"parent": "no-such-snapshot"}, "unknown_parent"),
])
def test_bad_drafts_are_refused_naming_the_problem(demo, change, code):
    engine, store, ds = demo
    with pytest.raises(InputError) as e:
        snapshots.save(engine, store, ds, draft(**change), {}, to_jsonable)
    assert e.value.code == code and e.value.status == 422
    assert store.list_snapshots(ds) == []


def test_normalise_code_spellings():
    assert snapshots.normalise_code("Belongs elsewhere") == "belongs-elsewhere"
    assert snapshots.normalise_code("floor/ceiling") == "floor-ceiling"
    assert snapshots.normalise_code("cross_loading") == "cross-loading"
    assert snapshots.normalise_code("  ") is None


def test_compare_lists_changes_between_two_records(demo):
    engine, store, ds = demo
    a = snapshots.save(engine, store, ds, draft(), {}, to_jsonable)
    b = snapshots.save(engine, store, ds, draft(items=KEPT[:4] + ["W6"], removed=[Removal("W5", "redundant")],
                                                parent=a["id"]), {}, to_jsonable)
    c = snapshots.compare(a, b)
    assert c["items_added"] == ["W6"] and c["items_removed"] == ["W5"] and c["items_common"] == KEPT[:4]
    alpha = c["coefficients"]["alpha"]
    assert alpha["change"] == pytest.approx(alpha["b"] - alpha["a"])
    assert c["coefficients"]["n_items"] == {"a": 5, "b": 5, "change": 0}
    assert c["warnings"] == []
    other = {**b, "dataset_id": "elsewhere"}
    assert [w.code for w in snapshots.compare(a, other)["warnings"]] == ["compare_other_dataset"]


def test_compare_treats_a_setting_one_snapshot_did_not_store_as_its_default():
    from server.analysis.settings import OPTIONS

    defaults = {o.name: o.default for o in OPTIONS}
    a = {"items": ["A", "B"], "settings": {"correlation": "pearson"}}  # an older record: the page sent four settings
    b = {"items": ["A", "B"], "settings": dict(defaults)}                # a newer one: every served setting
    assert snapshots.compare(a, b)["settings_changed"] == {}
    c = {"items": ["A", "B"], "settings": {**defaults, "seed": 7}}
    assert snapshots.compare(a, c)["settings_changed"] == {"seed": {"a": defaults["seed"], "b": 7}}


def test_compare_reads_an_older_records_omega_total_as_unidimensional():
    old = {"items": ["A", "B", "C"], "analysis": {"reliability": {"omega_total": 0.80}}}  # saved before issue 11
    new = {"items": ["A", "B", "C"], "analysis": {"reliability": {
        "omega_total": 0.90, "omega_unidimensional": 0.82, "omega_hierarchical": 0.6, "omega_basis": "schmid_leiman"}}}
    coefs = snapshots.compare(old, new)["coefficients"]
    assert coefs["omega_unidimensional"]["a"] == 0.80 and coefs["omega_unidimensional"]["b"] == 0.82
    assert coefs["omega_total"]["a"] is None and coefs["omega_total"]["change"] is None  # not the same quantity
    assert old["analysis"]["reliability"] == {"omega_total": 0.80}  # the stored record itself is untouched


def test_light_restore_and_missing_snapshot(demo):
    engine, store, ds = demo
    rec = snapshots.save(engine, store, ds, draft(), {}, to_jsonable)
    light = snapshots.light(rec)
    assert "analysis" not in light and light["n_items"] == 5 and light["alpha"] == rec["trail"][-1]["alpha"]
    view = snapshots.restore_view(rec)
    assert view["items"] == KEPT and view["removed"][0] == {"item": "W6", "reason": "weak loading", "code": "weak"}
    with pytest.raises(NotFound) as e:
        snapshots.get(store, "nope")
    assert (e.value.kind, e.value.ident) == ("snapshot", "nope")


def _bare(sid: str, dataset: str, items: list[str], alpha: float) -> dict:
    """A record without codebook constructs or factor model (hand-built, as an old or plain upload has it)."""
    return {"id": sid, "name": sid, "dataset_id": dataset, "created_at": "2026-01-01T00:00:00Z", "items": items,
            "analysis": {"reliability": {"alpha": alpha, "alpha_ci": [alpha - 0.05, alpha + 0.05]},
                         "items": [{"name": i, "text": f"<{i}>", "item_rest_r": 0.5} for i in items]},
            "item_meta": [{"name": i, "text": f"<{i}>", "reverse": i == "Q2", "min": 1, "max": 5} for i in items]}


def test_side_by_side_of_forms_without_constructs_and_of_two_data_sets():
    left = _bare("first", "ds1", ["Q1", "Q2", "Q3"], 0.7)
    right = _bare("second", "ds2", ["Q2", "Q3", "Q4"], 0.75)
    got = snapshots.side_by_side(left, right)
    [pool] = got["subscales"]  # no constructs: the whole pool is the one scale, with the total's numbers
    assert pool["only_left"] == ["Q1"] and pool["only_right"] == ["Q4"] and pool["both"] == ["Q2", "Q3"]
    assert pool["left"]["alpha"] == 0.7 and pool["right"]["alpha"] == 0.75 and pool["left"]["k"] == 3
    assert [r["reverse"] for r in pool["left"]["items"]] == [False, True, False]
    assert pool["left"]["items"][0]["text"] == "<Q1>" and pool["left"]["items"][0]["loading"] is None
    assert got["total"]["right"]["alpha"] == 0.75 and got["total"]["right"]["k"] == 3
    assert any("different data sets" in d for d in got["differences"])
    assert any("Q1" in d and "first" in d for d in got["differences"])
    same = snapshots.side_by_side(left, dict(left, id="again"))
    assert same["differences"] == ["Both forms keep the same items."]
