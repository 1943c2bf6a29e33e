"""Issue 11 in the analysis pipeline: per-subscale item analysis, the omega family, ordinal coefficients,
polychoric parallel analysis and the warnings that protect the decision.

References: pingouin.cronbach_alpha and numpy.corrcoef on the same columns (item analysis); the stats
functions called directly on the same matrices (schmid_leiman, omega_coefficients, mcdonald_omega: the
sections must only feed them); the standardized alpha formula (Zumbo, Gadermann & Zeisser 2007).
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pingouin as pg
import pytest

from server.analysis import run
from server.api.serialize import dumps
from server.stats.hierarchical import omega_coefficients, schmid_leiman
from server.stats.reliability import mcdonald_omega

from .conftest import build

DEMO = Path(__file__).resolve().parents[2] / "demo_data"


@pytest.fixture(scope="module")
def demo():
    book = pd.read_csv(DEMO / "workshop_codebook.csv")
    frame = pd.read_csv(DEMO / "workshop_responses.csv")[list(book["item"])]
    constructs = dict(zip(book["item"], book["construct"]))
    reverse = list(book.loc[book["reverse"] == 1, "item"])
    return frame, constructs, reverse


def answer(frame, request=None, *, constructs=None, with_factors=True, memo=None) -> dict:
    inputs, settings = build(frame, request, constructs=constructs, lo=1, hi=5, memo=memo)
    return json.loads(dumps(run(inputs, settings, with_factors=with_factors)))


def three_factor(seed: int = 3, n: int = 1000, loads=(0.75, 0.7, 0.65, 0.6)) -> pd.DataFrame:
    """12 items on 1-5, three uncorrelated factors of four items each."""
    rng = np.random.default_rng(seed)
    F = rng.normal(size=(n, 3))
    L = np.zeros((12, 3))
    for j in range(3):
        L[4 * j:4 * j + 4, j] = loads
    Y = F @ L.T + rng.normal(size=(n, 12)) * np.sqrt(1 - (L ** 2).sum(1))
    return pd.DataFrame(np.clip(np.round(Y * 1.2 + 3), 1, 5), columns=[f"Q{i + 1}" for i in range(12)])


def test_subscale_item_table_matches_a_direct_computation_on_its_items(demo):
    frame, constructs, reverse = demo
    out = answer(frame, {"missing": "listwise", "reverse": reverse}, constructs=constructs, with_factors=False)
    scored = frame.dropna().copy()  # listwise: the rows complete on every active item
    scored[reverse] = 6 - scored[reverse]
    groups = {c: [i for i in frame.columns if constructs[i] == c] for c in dict.fromkeys(constructs.values())}
    assert out["grouping"] == {"requested": "construct", "used": "construct", "note": None}
    assert set(out["constructs"]) == set(groups)
    for c, items in groups.items():
        block = out["constructs"][c]
        assert block["items"] == items and [r["name"] for r in block["item_table"]] == items
        for row in block["item_table"]:
            rest = [i for i in items if i != row["name"]]
            ref_alpha = pg.cronbach_alpha(scored[rest])[0]
            assert row["alpha_if_deleted"] == pytest.approx(ref_alpha, abs=1e-10)  # pingouin on the other items
            ref_r = np.corrcoef(scored[row["name"]], scored[rest].sum(axis=1))[0, 1]
            assert row["item_rest_r"] == pytest.approx(ref_r, abs=1e-10)  # numpy: item vs rest sum
            assert set(row["r_other"]) == set(groups) - {c}
            for other, r in row["r_other"].items():
                ref = np.corrcoef(scored[row["name"]], scored[groups[other]].sum(axis=1))[0, 1]
                assert r == pytest.approx(ref, abs=1e-10)  # numpy: item vs the other subscale's sum
        assert block["alpha"] == pytest.approx(pg.cronbach_alpha(scored[items])[0], abs=1e-10)  # pingouin
        path = block["pruning_path"]
        assert path[0]["removed"] is None and path[0]["n_items"] == len(items) and path[-1]["n_items"] == 3
        drop = path[1]["removed"]
        assert path[1]["alpha"] == pytest.approx(pg.cronbach_alpha(scored[[i for i in items if i != drop]])[0],
                                                 abs=1e-10)  # pingouin on the subscale less its first removal
        # the one-factor fit behind the subscale's omega: residuals of its correlation matrix
        R = np.corrcoef(scored[items].to_numpy(), rowvar=False)
        om = mcdonald_omega(np.cov(scored[items].to_numpy(), rowvar=False))
        lam = np.asarray(om.standardized_loadings)
        res = (R - np.outer(lam, lam))[np.tril_indices(len(items), -1)]
        fit = block["one_factor_fit"]
        assert fit["rmsr"] == pytest.approx(np.sqrt(np.mean(res ** 2)), abs=1e-5)
        assert abs(fit["largest_residual"]["r"]) == pytest.approx(np.abs(res).max(), abs=1e-5)
        assert block["omega_unidimensional"] == pytest.approx(om.omega_total, abs=1e-6)
    assert out["items_scope"] == "pool" and "whole-pool" in out["items_note"]
    assert len(out["items"]) == frame.shape[1]  # the pool-level rows stay


def test_pool_omega_family_is_the_schmid_leiman_of_the_shown_solution(demo):
    frame, constructs, reverse = demo
    out = answer(frame, {"reverse": reverse}, constructs=constructs)
    rel = out["reliability"]
    assert rel["omega_basis"] == "schmid_leiman" and out["efa"]["n_factors"] == 3
    assert rel["omega_total"] >= rel["omega_hierarchical"] > 0 and 0 < rel["ecv"] < 1 and 0 < rel["h"] < 1
    names = out["correlations"]["items"]
    P = np.array([out["efa"]["loadings"][n] for n in names])
    sl = schmid_leiman(P, np.array(out["efa"]["factor_correlations"]), names=names, factors=out["efa"]["factors"])
    om = omega_coefficients(np.array(out["correlations"]["matrix"]), sl)
    assert rel["omega_hierarchical"] == pytest.approx(om.omega_hierarchical, abs=1e-12)  # the stats function
    assert rel["omega_total"] == pytest.approx(om.omega_total, abs=1e-12)
    assert rel["omega_subscale"] == pytest.approx({g.factor: g.omega_hs for g in om.omega_subscale}, abs=1e-12)
    assert f"{rel['omega_hierarchical']:.3f}".replace("0.", ".", 1) in rel["omega_note"]  # the dashboard's number style
    # orthogonal rotation: the omega family comes from quartimin on the same extraction, and says so
    vm = answer(frame, {"reverse": reverse, "rotation": "varimax"}, constructs=constructs)
    assert vm["reliability"]["omega_hierarchical"] == pytest.approx(rel["omega_hierarchical"], abs=1e-6)
    assert any(w["code"] == "omega_from_quartimin" for w in vm["warnings"])


def test_one_factor_and_reliability_only_omega(demo):
    frame, constructs, reverse = demo
    one = answer(frame, {"reverse": reverse, "n_factors": 1}, constructs=constructs)["reliability"]
    assert one["omega_basis"] == "one_factor"
    assert one["omega_total"] == one["omega_unidimensional"] == one["omega_hierarchical"]
    only = answer(frame, {"reverse": reverse}, constructs=constructs, with_factors=False)["reliability"]
    assert only["omega_basis"] == "one_factor_only" and only["omega_hierarchical"] is None
    assert only["omega_total"] == only["omega_unidimensional"] == one["omega_unidimensional"]


def test_degenerate_oblimin_is_withheld_with_a_coded_warning():
    out = answer(three_factor(), {"n_factors": 3, "gamma": 1.0})
    codes = [w["code"] for w in out["warnings"]]
    assert "rotation_degenerate" in codes
    msg = next(w["message"] for w in out["warnings"] if w["code"] == "rotation_degenerate")
    assert "gamma 0" in msg and out["efa"]["withheld"]["n_factors"] == 3
    assert "loadings" not in out["efa"] and "factor_correlations" not in out["efa"]
    model_kinds = {"cross_loading", "weak_loading", "misplaced", "heywood", "reverse_suspect"}
    assert not any(f["kind"] in model_kinds for f in out["efa"]["flags"])  # flags of the withheld model

    def numbers(x):
        if isinstance(x, dict):
            return [v for y in x.values() for v in numbers(y)]
        if isinstance(x, list):
            return [v for y in x for v in numbers(y)]
        return [x] if isinstance(x, float) else []
    assert max(abs(v) for v in numbers(out["efa"]) + numbers(out["reliability"]["loadings"])) <= 1.5
    ok = answer(three_factor(), {"n_factors": 3, "gamma": 0.0})
    assert "rotation_degenerate" not in [w["code"] for w in ok["warnings"]] and ok["efa"]["n_factors"] == 3


def test_a_factor_with_fewer_than_three_salient_loadings_is_named():
    rng = np.random.default_rng(8)
    n = 800
    F = rng.normal(size=(n, 2))
    L = np.zeros((8, 2))
    L[:6, 0] = 0.7
    L[6:, 1] = 0.8
    Y = F @ L.T + rng.normal(size=(n, 8)) * np.sqrt(1 - (L ** 2).sum(1))
    frame = pd.DataFrame(np.clip(np.round(Y * 1.2 + 3), 1, 5), columns=[f"Q{i + 1}" for i in range(8)])
    out = answer(frame, {"n_factors": 2})
    few = [w for w in out["warnings"] if w["code"] == "factor_few_items"]
    assert len(few) == 1 and few[0]["items"] == ["Q7", "Q8"]
    assert not any(w["code"] == "factor_few_items" for w in answer(three_factor(), {"n_factors": 3})["warnings"])


def test_grouping_by_factor_and_pool():
    frame = three_factor()
    out = answer(frame, {"n_factors": 3})  # no codebook constructs: construct grouping falls back to factors
    g = out["grouping"]
    assert g["requested"] == "construct" and g["used"] == "factor" and "no constructs" in g["note"]
    assert sorted(sorted(b["items"]) for b in out["constructs"].values()) == sorted(
        sorted(f"Q{4 * j + i + 1}" for i in range(4)) for j in range(3))
    assert set(out["constructs"]) == set(out["efa"]["factors"])
    pool = answer(frame, {"n_factors": 3, "grouping": "pool"})
    assert pool["constructs"] == {} and pool["grouping"]["used"] == "pool"
    rel_only = answer(frame, {"grouping": "factor"}, with_factors=False)
    assert rel_only["constructs"] == {} and rel_only["grouping"]["used"] == "pool" and rel_only["grouping"]["note"]


def _binary_with_an_empty_cell(n: int = 300) -> pd.DataFrame:
    """Four 0/1 items; 'b' is 1 whenever 'a' is: the 2 x 2 table of a and b has an empty cell."""
    rng = np.random.default_rng(4)
    z = rng.normal(size=n)
    X = (z[:, None] + rng.normal(size=(n, 4)) > 0).astype(float)
    X[X[:, 0] == 1, 1] = 1
    return pd.DataFrame(X, columns=list("abcd"))


def test_zero_cell_correction_keeps_the_tetrachoric_estimate_inside_and_says_so():
    frame = _binary_with_an_empty_cell()
    req = {"correlation": "polychoric", "n_factors": 1, "pa_iterations_polychoric": 10}
    corrected = answer(frame, req)
    r_ab = corrected["correlations"]["matrix"][0][1]
    assert -0.995 < r_ab < 0.995
    note = next(w for w in corrected["warnings"] if w["code"] == "polychoric_zero_cell_correction")
    assert note["items"] == ["a", "b"] and "'a' x 'b'" in note["message"]
    raw = answer(frame, {**req, "zero_cell_correction": 0})
    assert any(w["code"] == "polychoric_boundary" and w["items"] == ["a", "b"] for w in raw["warnings"])
    assert not any(w["code"] == "polychoric_zero_cell_correction" for w in raw["warnings"])


def test_zero_cell_correction_changes_no_pearson_answer(demo):
    frame, constructs, reverse = demo
    a = answer(frame, {"reverse": reverse, "zero_cell_correction": 0}, constructs=constructs)
    b = answer(frame, {"reverse": reverse}, constructs=constructs)
    a.pop("settings"), b.pop("settings")
    assert a == b


def test_a_dropped_item_never_appears_in_the_warnings(demo):
    frame, constructs, reverse = demo
    req = {"reverse": reverse, "correlation": "polychoric", "pa_iterations_polychoric": 10}
    full = answer(frame, req, constructs=constructs)
    named = sorted({i for w in full["warnings"] if w["code"].startswith("polychoric_sparse") for i in w["items"]})
    assert named  # demo_data: W1 has a sparse category
    keep = [c for c in frame.columns if c not in named]
    part = answer(frame, {**req, "items": keep}, constructs=constructs)
    everything = part["warnings"] + part["correlations"]["warnings"] + part["efa"]["warnings"] + [
        w for b in part["constructs"].values() for w in b["warnings"]]
    for w in everything:
        assert set(w["items"]) <= set(keep)
        assert not any(f"'{n}'" in w["message"] for n in named)
    # the empty-cell notes were recounted on the active pairs, not dropped
    assert any(w["code"] == "polychoric_empty_cells" for w in part["warnings"])


def test_ordinal_coefficients_and_polychoric_parallel_analysis(demo):
    frame, constructs, reverse = demo
    calls = []
    cache: dict = {}

    def memo(key, make):
        if key not in cache:
            calls.append(key)
            cache[key] = make()
        return cache[key]

    req = {"reverse": reverse, "correlation": "polychoric", "pa_iterations_polychoric": 20}
    out = answer(frame, req, constructs=constructs, memo=memo)
    R = np.array(out["correlations"]["matrix"])
    k = len(R)
    rbar = R[np.triu_indices(k, 1)].mean()
    rel = out["reliability"]
    assert rel["alpha_ordinal"] == pytest.approx(k * rbar / (1 + (k - 1) * rbar), abs=1e-12)  # Zumbo et al. 2007
    assert rel["omega_ordinal"] == pytest.approx(mcdonald_omega(R).omega_total, abs=1e-6)
    assert "latent" in rel["ordinal_note"]
    names = out["correlations"]["items"]
    for block in out["constructs"].values():
        idx = [names.index(i) for i in block["items"]]
        Rc = R[np.ix_(idx, idx)]
        rb = Rc[np.triu_indices(len(idx), 1)].mean()
        assert block["alpha_ordinal"] == pytest.approx(len(idx) * rb / (1 + (len(idx) - 1) * rb), abs=1e-12)
    par = out["retention"]["parallel"]
    assert par["method"] == "permuted_ordinal" and par["iterations"] == 20
    assert sum(1 for key in calls if key[0] == "pa_polychoric") == 1
    answer(frame, req, constructs=constructs, memo=memo)  # the same items and settings: from the cache
    assert sum(1 for key in calls if key[0] == "pa_polychoric") == 1
    pearson = answer(frame, {"reverse": reverse}, constructs=constructs)
    assert pearson["retention"]["parallel"]["method"] == "random_normal" and "alpha_ordinal" not in pearson[
        "reliability"]
