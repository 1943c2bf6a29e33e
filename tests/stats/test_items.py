"""Item-level reliability (item-rest r, alpha/omega if deleted, pruning path) against references.

Sources: pingouin 0.7 (cronbach_alpha on the data without the item), numpy (correlation of each item
with the sum of the others), Denis (2016) worked example, and our own mcdonald_omega on the submatrix
(itself tested against factor_analyzer in test_reliability.py).
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pingouin as pg
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from server.stats.errors import InputError
from server.stats.items import alpha_if_deleted, item_table, pruning_path
from server.stats.reliability import mcdonald_omega, reliability_from_cov

REF = Path(__file__).resolve().parents[1] / "reference" / "reliability"


def test_item_table_against_pingouin_and_numpy(pg_alpha_data):
    names = list(pg_alpha_data.columns)
    rows = item_table(pg_alpha_data.cov().to_numpy(), names=names)
    assert [r["name"] for r in rows] == names
    X = pg_alpha_data.to_numpy(dtype=float)
    for j, row in enumerate(rows):
        rest = np.delete(X, j, axis=1).sum(axis=1)
        ref_r = np.corrcoef(X[:, j], rest)[0, 1]
        assert row["item_rest_r"] == pytest.approx(ref_r, abs=1e-12)  # numpy: item vs sum of the others
        ref_a = pg.cronbach_alpha(pg_alpha_data.drop(columns=names[j]))[0]
        assert row["alpha_if_deleted"] == pytest.approx(ref_a, abs=1e-12)  # pingouin without the item


def test_denis_item_1():
    denis = pd.read_csv(REF / "denis2016_cronbach.csv")
    rows = item_table(denis.cov().to_numpy(), names=list(denis.columns))
    assert round(rows[0]["item_rest_r"], 3) == 0.712  # Denis (2016): corrected item-total r of Item_1


def test_omega_if_deleted_equals_omega_of_submatrix(holzinger, pg_alpha_data):
    for data in (holzinger, pg_alpha_data):
        S = data.cov().to_numpy()
        k = S.shape[0]
        rows = item_table(S, names=list(data.columns))
        for j in range(k):
            keep = [i for i in range(k) if i != j]
            ref = mcdonald_omega(S[np.ix_(keep, keep)]).omega_total
            assert rows[j]["omega_if_deleted"] == pytest.approx(ref, abs=1e-6)


def test_omega_if_deleted_with_a_heywood_subset_equals_omega_after_the_drop():
    # Four weakly related items (invented correlations): leaving out 'a' leaves b, c, d, whose one-factor
    # minres fit is a Heywood case with several minima. Omega if deleted must be the omega the analysis
    # shows once the item is really dropped (mcdonald_omega of the submatrix, default start); a fit
    # warm-started from the four-item loadings used to land in another minimum (.472 instead of .342).
    R = np.array([[1.0, 0.2, 0.08, 0.24], [0.2, 1.0, -0.15, 0.05],
                  [0.08, -0.15, 1.0, -0.06], [0.24, 0.05, -0.06, 1.0]])
    rows = item_table(R, names=list("abcd"))
    for j in range(4):
        keep = [i for i in range(4) if i != j]
        ref = mcdonald_omega(R[np.ix_(keep, keep)]).omega_total
        assert rows[j]["omega_if_deleted"] == pytest.approx(ref, abs=1e-6)  # identity: omega of the subset
    ref_start = reliability_from_cov(R, n=200, n_complete=200).loadings  # the engine's warm start
    warm = item_table(R, names=list("abcd"), start=ref_start)
    assert [r["omega_if_deleted"] for r in warm] == pytest.approx([r["omega_if_deleted"] for r in rows], abs=1e-6)


def test_warm_start_does_not_change_results(holzinger):
    S = holzinger.cov().to_numpy()
    names = list(holzinger.columns)
    cold = item_table(S, names=names)
    rel = reliability_from_cov(S, n=301, n_complete=301)
    for start in (rel.loadings, np.full(9, 0.5), [0.1, 0.2]):  # last one: wrong length, ignored
        warm = item_table(S, names=names, start=start)
        for a, b in zip(cold, warm):
            assert b["omega_if_deleted"] == pytest.approx(a["omega_if_deleted"], abs=1e-7)
        path_warm = pruning_path(S, names=names, start=start)
        path_cold = pruning_path(S, names=names)
        assert [p["omega_total"] for p in path_warm] == pytest.approx([p["omega_total"] for p in path_cold],
                                                                      abs=1e-7)


def test_item_table_small_sets():
    S = np.array([[1.0, 0.4, 0.3], [0.4, 1.0, 0.5], [0.3, 0.5, 1.0]])
    rows = item_table(S, names=["a", "b", "c"])
    assert all(r["omega_if_deleted"] is None for r in rows)  # 2 items left: omega not identified
    assert rows[0]["alpha_if_deleted"] == pytest.approx(2 * 0.5 / 1.5)  # alpha of b, c: 2r/(1+r)
    rows2 = item_table(S[:2, :2], names=["a", "b"])
    assert rows2[0]["alpha_if_deleted"] is None


def test_pruning_path_against_pingouin(pg_alpha_data):
    names = list(pg_alpha_data.columns)
    S = pg_alpha_data.cov().to_numpy()
    path = pruning_path(S, names=names)
    assert path[0]["removed"] is None and path[0]["n_items"] == 10
    assert path[0]["alpha"] == pytest.approx(pg.cronbach_alpha(pg_alpha_data)[0], abs=1e-12)  # pingouin
    assert [p["n_items"] for p in path] == list(range(10, 2, -1))
    kept = list(names)
    for step in path[1:]:
        # the removed item is the one whose removal leaves the highest alpha (pingouin per candidate)
        cand = {c: pg.cronbach_alpha(pg_alpha_data[[x for x in kept if x != c]])[0] for c in kept}
        best = max(cand.values())
        assert cand[step["removed"]] == pytest.approx(best, abs=1e-12)
        kept.remove(step["removed"])
        assert step["alpha"] == pytest.approx(pg.cronbach_alpha(pg_alpha_data[kept])[0], abs=1e-12)
        idx = [names.index(x) for x in kept]
        ref_omega = mcdonald_omega(S[np.ix_(idx, idx)]).omega_total
        assert step["omega_total"] == pytest.approx(ref_omega, abs=1e-6)


def test_pruning_path_min_items(holzinger):
    S = holzinger.cov().to_numpy()
    path = pruning_path(S, names=list(holzinger.columns), min_items=5)
    assert path[-1]["n_items"] == 5 and len(path) == 5
    with pytest.raises(InputError):
        pruning_path(S, names=list(holzinger.columns), min_items=1)
    with pytest.raises(InputError):
        pruning_path(S, names=["too", "few"])


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 10_000), k=st.integers(3, 10))
def test_alpha_if_deleted_equals_alpha_without_item(seed, k):
    rng = np.random.default_rng(seed)
    f = rng.normal(size=(40, 1))
    X = f * rng.uniform(0.0, 1.0, size=k) + rng.normal(size=(40, k))
    df = pd.DataFrame(X, columns=[f"i{j}" for j in range(k)])
    ad = alpha_if_deleted(df.cov().to_numpy())
    for j in range(k):
        without = df.drop(columns=f"i{j}")
        assert ad[j] == pytest.approx(pg.cronbach_alpha(without)[0], abs=1e-10)  # pingouin without j


def test_item_table_json_plain_types(holzinger):
    import json
    rows = item_table(holzinger.cov().to_numpy(), names=list(holzinger.columns))
    path = pruning_path(holzinger.cov().to_numpy(), names=list(holzinger.columns))
    assert json.dumps({"items": rows, "path": path}, allow_nan=False)


def _three_factor_pool(k: int, *, n: int = 1500, seed: int = 0) -> np.ndarray:
    """Simulated 5-point responses: k items, each loading 0.5-0.8 on one of three factors (items interleaved)."""
    rng = np.random.default_rng(seed)
    load = np.zeros((k, 3))
    for j in range(k):
        load[j, j % 3] = rng.uniform(0.5, 0.8)
    z = rng.standard_normal((n, 3)) @ load.T + rng.standard_normal((n, k)) * np.sqrt(1 - (load ** 2).sum(1))
    return np.clip(np.round(z * 1.1 + 3), 1, 5)


def _omega_of_fits(S: np.ndarray, L: np.ndarray, mask: np.ndarray) -> np.ndarray:
    sd = np.sqrt(np.diag(S))
    lam = L * np.sign(L.sum(axis=1, keepdims=True)) * sd[None, :]
    mf = mask.astype(float)
    return lam.sum(axis=1) ** 2 / ((mf @ S) * mf).sum(axis=1)


def test_leave_one_out_newton_starts_row_by_row():
    # Three-factor items: leaving out some of the items with the largest loadings makes the shifted full-set
    # Hessian indefinite for those rows (and moves their one-factor solution towards another factor). Those
    # rows keep the plain start; the other rows keep their Newton starts (before, one such row sent every row
    # back to the plain start). The fits end where the fixed point from the plain starts ends.
    from server.stats import reliability as rel
    from server.stats.items import _leave_one_out_starts

    X = _three_factor_pool(30, seed=0)
    S = np.cov(X, rowvar=False)
    R = np.corrcoef(X, rowvar=False)
    Ro, k = rel._off_diagonal(R), 30
    l0 = rel.one_factor_loadings(R).loadings
    plain = np.where(np.eye(k, dtype=bool), 0.0, l0[None, :])
    starts = _leave_one_out_starts(Ro, l0)
    newton = np.abs(starts - plain).max(axis=1) > 0
    assert 0 < newton.sum() < k  # row by row: some rows Newton, some plain
    mask = ~np.eye(k, dtype=bool)
    L, conv, _ = rel._fit_batch(Ro, starts, mask)
    ref, conv_ref, _ = rel._fit_batch(Ro, plain, mask, tol=1e-14, max_iter=100_000)  # the fixed point, tightly
    assert conv.all() and conv_ref.all()
    L, ref = (M * np.sign(M.sum(axis=1, keepdims=True)) for M in (L, ref))  # a loading vector's sign is free
    np.testing.assert_allclose(L, ref, atol=1e-9, rtol=0)
    at_end = np.abs(starts - ref).max(axis=1) < 1e-8  # rows whose Newton steps converged: started at the end
    assert at_end.sum() >= k // 2 and not at_end[~newton].any()
    got = np.array([r["omega_if_deleted"] for r in item_table(S, names=[f"q{j}" for j in range(k)], start=l0)])
    np.testing.assert_allclose(got, _omega_of_fits(S, ref, mask), atol=1e-9, rtol=0)


def test_pruning_path_nested_blocks_match_one_batch():
    # 150 items: the path's nested item sets are fitted in blocks on their own items (_fit_nested); every
    # omega must be the one of the single batch over all k items, and the first steps McDonald's omega of
    # the remaining items (mcdonald_omega, itself checked against factor_analyzer in test_reliability.py).
    from server.stats import reliability as rel
    from server.stats.items import _fit_nested

    X = _three_factor_pool(150, seed=1)
    S = np.cov(X, rowvar=False)
    R = np.corrcoef(X, rowvar=False)
    names = [f"q{j}" for j in range(150)]
    l0 = rel.one_factor_loadings(R).loadings
    path = pruning_path(S, names=names, start=l0)
    order = [names.index(p["removed"]) for p in path[1:]]
    step_of = np.full(150, len(path))
    step_of[order] = np.arange(1, len(path))
    mask = np.arange(len(path))[:, None] < step_of[None, :]
    mask = mask[mask.sum(axis=1) >= 3]
    Ro = rel._off_diagonal(R)
    L0 = np.where(mask, l0[None, :], 0.0)
    blocks, conv_b = _fit_nested(Ro, L0, mask)
    ref, conv_ref, _ = rel._fit_batch(Ro, L0, mask, tol=1e-14, max_iter=100_000)
    assert conv_b.all() and conv_ref.all()
    np.testing.assert_allclose(blocks, ref, atol=1e-9, rtol=0)
    omega = np.array([p["omega_total"] for p in path[:len(mask)]])
    np.testing.assert_allclose(omega, _omega_of_fits(S, ref, mask), atol=1e-9, rtol=0)
    for step in (0, 1, 40, 100):
        idx = np.flatnonzero(mask[step])
        assert omega[step] == pytest.approx(mcdonald_omega(S[np.ix_(idx, idx)]).omega_total, abs=1e-6)
