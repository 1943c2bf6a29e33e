"""Flag rules on hand-built loading patterns: each rule fires where its published threshold says."""
from __future__ import annotations

import numpy as np
import pytest

from server.stats.errors import InputError
from server.stats.flags import DEFAULT_THRESHOLDS, FLAG_KINDS, flag_items, resolve_thresholds


def kinds(flags):
    return {(f["item"], f["kind"]) for f in flags}


def test_default_thresholds_are_howards():
    # Howard (2016): primary >= .40, secondary < .30, and at least .20 apart
    assert DEFAULT_THRESHOLDS["primary_min"] == 0.40  # Howard 2016
    assert DEFAULT_THRESHOLDS["cross_min"] == 0.30  # Howard 2016
    assert DEFAULT_THRESHOLDS["cross_gap"] == 0.20  # Howard 2016
    assert DEFAULT_THRESHOLDS["communality_min"] == 0.20  # common practice


def test_cross_loading_rule():
    P = np.array([
        [0.45, 0.35],   # second >= .30 and only .10 below: cross-loader (Howard 2016)
        [0.65, 0.35],   # .30 below the primary: clean enough
        [0.45, 0.25],   # second below .30: not a cross-loader
        [-0.50, 0.42],  # signs do not matter, sizes do
    ])
    f = flag_items(P, names=["a", "b", "c", "d"], communalities=[0.5] * 4)
    cross = {item for item, kind in kinds(f) if kind == "cross_loading"}
    assert cross == {"a", "d"}
    msg = next(x["message"] for x in f if x["item"] == "a" and x["kind"] == "cross_loading")
    assert "'a'" in msg and "0.45" in msg and "0.35" in msg and "heuristic" in msg


def test_weak_loading_rule():
    P = np.array([[0.35, 0.05], [0.55, 0.0], [0.60, 0.1]])
    f = flag_items(P, names=["low", "lowh2", "fine"], communalities=[0.13, 0.15, 0.37])
    weak = {item for item, kind in kinds(f) if kind == "weak_loading"}
    assert weak == {"low", "lowh2"}  # primary < .40 (Howard 2016) / communality < .20 (common practice)
    msg = next(x["message"] for x in f if x["item"] == "lowh2")
    assert "communality is 0.15" in msg and "0.20" in msg


def test_misplaced_rule_needs_a_construct_label():
    P = np.array([[0.7, 0.1], [0.1, 0.7], [0.6, 0.05]])
    names = ["a1", "b1", "b2"]
    f = flag_items(P, names=names, factor_labels=["A", "B"], constructs=["A", "B", "B"],
                   communalities=[0.5] * 3)
    assert kinds(f) == {("b2", "misplaced")}
    msg = f[0]["message"]
    assert "'b2'" in msg and "'B'" in msg and "'A'" in msg
    # a factor without a construct label cannot make an item misplaced
    f = flag_items(P, names=names, factor_labels=["Factor 1", "B"], constructs=["A", "B", "B"],
                   communalities=[0.5] * 3)
    assert ("b2", "misplaced") not in kinds(f)


def test_heywood_rule():
    P = np.array([[0.99, 0.0], [0.5, 0.1], [0.6, 0.0]])
    f = flag_items(P, names=["h", "x", "y"], communalities=[0.998, 0.26, 0.36], heywood=["y"])
    assert {item for item, kind in kinds(f) if kind == "heywood"} == {"h", "y"}


def test_reverse_suspect_rule():
    P = np.array([[0.7, 0.0], [0.65, 0.1], [-0.6, 0.05], [0.5, 0.1], [0.05, 0.7], [0.1, 0.6]])
    names = ["a1", "a2", "a3", "a4", "b1", "b2"]
    cons = ["A"] * 4 + ["B"] * 2
    irr = [0.5, 0.5, -0.3, 0.4, 0.45, -0.05]
    f = flag_items(P, names=names, constructs=cons, item_rest_r=irr, communalities=[0.4] * 6)
    rev = {item for item, kind in kinds(f) if kind == "reverse_suspect"}
    assert rev == {"a3", "b2"}  # a3: negative loading and item-rest r; b2: item-rest r below 0
    msg = next(x["message"] for x in f if x["item"] == "a3")
    assert "-0.60" in msg and "-0.30" in msg and "not declared reverse" in msg
    # declared reverse-keyed items are not suspected
    f = flag_items(P, names=names, constructs=cons, item_rest_r=irr, communalities=[0.4] * 6,
                   reverse=[False, False, True, False, False, True])
    assert not any(kind == "reverse_suspect" for _, kind in kinds(f))


def test_thresholds_can_be_overridden_and_are_checked():
    P = np.array([[0.45, 0.35], [0.38, 0.1]])
    f = flag_items(P, names=["a", "b"], communalities=[0.5, 0.3],
                   thresholds={"cross_min": 0.40, "primary_min": 0.30})
    assert kinds(f) == set()
    assert resolve_thresholds({"cross_gap": 0.1})["cross_gap"] == 0.1
    with pytest.raises(InputError, match="Unknown flag threshold 'cross'") as e:
        resolve_thresholds({"cross": 0.3})
    assert e.value.code == "bad_threshold"
    with pytest.raises(InputError, match="between 0 and 1"):
        resolve_thresholds({"primary_min": 1.5})
    with pytest.raises(InputError, match="must be a number"):
        resolve_thresholds({"primary_min": "high"})


def test_every_flag_has_the_contract_shape():
    P = np.array([[0.45, 0.35], [0.2, 0.1], [-0.7, 0.0]])
    f = flag_items(P, names=["a", "b", "c"], communalities=[0.3, 0.05, 0.999], constructs=["A", "A", "A"],
                   factor_labels=["A", "Factor 2"], item_rest_r=[0.3, 0.1, -0.2])
    assert f and all(set(x) == {"item", "kind", "message"} for x in f)
    assert all(x["kind"] in FLAG_KINDS for x in f)


def test_names_must_match_rows():
    with pytest.raises(InputError, match="2 item names were given for 3 rows"):
        flag_items(np.zeros((3, 2)), names=["a", "b"])


def test_item_level_flags_near_duplicate_and_ceiling():
    from server.stats.flags import item_level_flags

    rng = np.random.default_rng(11)
    base = rng.standard_normal(500)
    X = np.column_stack([base + rng.standard_normal(500) * s for s in (0.3, 0.3, 1.5)])
    R = np.corrcoef(X, rowvar=False)  # numpy Pearson
    flags = item_level_flags(R, names=["a", "b", "c"], ceiling=[0.1, 0.55, 0.49], floor=[0, 0, 0])
    kinds = [(f["item"], f["kind"]) for f in flags]
    assert R[0, 1] >= 0.80 and R[0, 2] < 0.80 and R[1, 2] < 0.80
    assert ("a", "near_duplicate") in kinds and ("b", "near_duplicate") in kinds
    assert ("b", "floor_ceiling") in kinds and ("c", "floor_ceiling") not in kinds  # .49 < .50 (common practice)
    tight = item_level_flags(R, names=["a", "b", "c"], thresholds={"redundant_r": 0.99})
    assert not tight
