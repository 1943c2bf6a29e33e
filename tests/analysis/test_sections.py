"""Each analysis section on its own, without the engine or HTTP, against direct computations.

References: pingouin's documented cronbach_alpha results (its shipped data), numpy/pandas for matrices,
and the stats functions called directly on the same matrix (the sections must only feed them).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pingouin as pg
import pytest

from server.analysis import AnalysisAnswer, run
from server.analysis.factors import factor_input, factor_sections, reference_solution
from server.analysis.flags import all_flags
from server.analysis.items import item_rows, path
from server.analysis.matrices import active_matrices, listwise_covariance, pool_warnings_for
from server.analysis.reliability import construct_blocks, scale_covariance, scale_reliability
from server.stats.efa import factor_analysis
from server.stats.errors import InputError
from server.stats.flags import item_level_flags
from server.stats.notes import Note

from .conftest import build


def test_pairwise_matrices_are_submatrices_of_the_pool(pg_alpha_data):
    inputs, _ = build(pg_alpha_data)
    keep = ["Q2", "Q5", "Q9"]
    m = active_matrices(inputs.responses, inputs.columns(keep), keep, correlation="pearson", missing="pairwise",
                        pool=inputs.pools["pearson"])
    assert np.allclose(m.cov, pg_alpha_data[keep].cov().to_numpy(), atol=1e-12)  # pandas DataFrame.cov
    assert np.allclose(m.corr, pg_alpha_data[keep].corr().to_numpy(), atol=1e-12)  # pandas DataFrame.corr
    assert m.note is None


def test_listwise_matrices_use_the_complete_rows_of_the_active_items():
    wide = pg.read_dataset("cronbach_wide_missing")
    inputs, _ = build(wide)
    keep = list(wide.columns[:4])
    complete = wide[keep].dropna()
    m = active_matrices(inputs.responses, inputs.columns(keep), keep, correlation="pearson", missing="listwise",
                        pool=None)
    assert np.allclose(m.cov, complete.cov().to_numpy(), atol=1e-12)  # pandas on the complete rows
    cov, _, n = listwise_covariance(inputs.responses, inputs.columns(keep), keep)
    assert n == len(complete) and np.allclose(cov, m.cov)


def test_pool_warnings_are_kept_or_left_out_by_code_and_items():
    R = np.eye(3)
    notes = [Note("polychoric_sparse_category", "about a", ("a",)), Note("polychoric_sparse_category", "z", ("z",)),
             Note("polychoric_boundary", "pool pair", ("y", "z")), Note("not_positive_definite", "pool"),
             Note("polychoric_empty_cells", "pool tables", ("a", "z"))]
    kept = pool_warnings_for(notes, R, ["a", "b", "c"], "polychoric")
    assert [n.message for n in kept] == ["about a"]  # a pair note naming an inactive item ('z') is left out
    R[0, 1] = R[1, 0] = 1.0
    assert pool_warnings_for([], R, ["a", "b", "c"], "pearson")[-1].items == ("a", "b")  # recounted here


def test_reliability_and_items_match_pingouin(pg_alpha_data):
    inputs, settings = build(pg_alpha_data)
    sc = scale_covariance(inputs, settings)
    rel = scale_reliability(sc, settings)
    assert round(rel.result.alpha, 3) == 0.592  # pingouin docs, cronbach_alpha data
    rows = item_rows(inputs, settings, sc, rel)
    for row in rows:
        ref = pg.cronbach_alpha(pg_alpha_data.drop(columns=row.name))[0]
        assert row.stats["alpha_if_deleted"] == pytest.approx(ref, abs=1e-10)  # pingouin.cronbach_alpha
    steps = path(settings, sc, rel)
    assert steps[0]["removed"] is None and steps[0]["alpha"] == pytest.approx(rel.result.alpha)


def test_a_reverse_keyed_item_is_scored_min_plus_max_minus_x(pg_alpha_data):
    inputs, settings = build(pg_alpha_data, {"reverse": ["Q2"]}, lo=1, hi=10)
    rel = scale_reliability(scale_covariance(inputs, settings), settings)
    flipped = pg_alpha_data.assign(Q2=11 - pg_alpha_data["Q2"])
    assert rel.result.alpha == pytest.approx(pg.cronbach_alpha(flipped)[0], abs=1e-12)  # pingouin.cronbach_alpha


def test_construct_blocks(pg_alpha_data):
    constructs = {"Q1": "A", "Q2": "A", "Q3": "A", "Q4": "B"}
    inputs, settings = build(pg_alpha_data, constructs=constructs)
    blocks = construct_blocks(inputs, settings, scale_covariance(inputs, settings))
    assert round(blocks["A"].result.alpha, 10) == round(pg.cronbach_alpha(pg_alpha_data[["Q1", "Q2", "Q3"]])[0], 10)
    assert blocks["B"].result is None and blocks["B"].warnings[0].code == "construct_one_item"


def test_listwise_with_too_few_complete_rows_is_an_input_error():
    frame = pd.DataFrame(np.arange(1, 37, dtype=float).reshape(12, 3) % 5 + 1, columns=list("abc"))
    for row in range(12):
        frame.iloc[row, row % 3] = np.nan
    inputs, settings = build(frame, {"missing": "listwise"})
    with pytest.raises(InputError) as err:
        scale_covariance(inputs, settings)
    assert err.value.code == "too_few_complete"


def test_factor_sections_equal_the_stats_called_directly(holzinger):
    inputs, settings = build(holzinger, {"n_factors": 3, "extraction": "ml"})
    rows = item_rows(inputs, settings, sc := scale_covariance(inputs, settings), scale_reliability(sc, settings))
    sections, added = factor_sections(inputs, settings, rows)
    R = holzinger.corr().to_numpy()  # pandas Pearson: no missing answers, so pairwise = complete
    assert np.allclose(sections.correlations.matrix, R, atol=1e-12) and sections.correlations.n == 301
    direct = factor_analysis(R, 3, n=301, names=list(holzinger.columns), method="ml", rotation="oblimin",
                             seed=settings.seed, item_rest_r=[r.item_rest_r for r in rows],
                             reverse=[False] * 9, constructs=[None] * 9)
    assert np.allclose(sections.efa.result.pattern, direct.pattern, atol=1e-10)
    assert round(sections.factorability["kmo"], 3) == 0.752  # issue 3 (Holzinger & Swineford 1939 data)
    assert sections.efa.n_factors == 3 and list(sections.efa.warnings) == list(direct.warnings)
    assert all(w in added for w in direct.warnings)


def test_a_subset_is_matched_to_the_reference_computed_once(holzinger):
    calls = []
    store: dict = {}

    def memo(key, make):
        if key not in store:
            calls.append(key)
            store[key] = make()
        return store[key]

    inputs, full = build(holzinger, {"n_factors": 3}, memo=memo)
    ref = reference_solution(inputs, full, 3)
    cols = {g: int(np.argmax(np.abs(np.array([ref["loadings"][x] for x in g]).sum(axis=0))))
            for g in (("x1", "x2", "x3"), ("x4", "x5", "x6"), ("x7", "x8", "x9"))}
    for drop in ("x1", "x5"):
        keep = [c for c in holzinger.columns if c != drop]
        _, s = build(holzinger, {"n_factors": 3, "items": keep})
        answer = run(inputs, s)
        P = answer.factors.efa.result.pattern
        for g, j in cols.items():
            rows = [keep.index(x) for x in g if x != drop]
            assert int(np.argmax(np.abs(P[rows].sum(axis=0)))) == j and P[rows, j].sum() > 0
    assert len(calls) == 1  # one reference for both subsets


def test_too_few_rows_leave_the_factor_solution_empty_with_a_coded_warning():
    rng = np.random.default_rng(1)
    frame = pd.DataFrame(rng.integers(1, 6, (8, 10)).astype(float), columns=[f"q{i}" for i in range(10)])
    inputs, settings = build(frame)
    answer = run(inputs, settings)
    assert answer.factors.efa.result is None and answer.factors.factorability is None
    assert [w.code for w in answer.factors.efa.warnings] == ["too_few_rows"]
    assert "too_few_rows" in [w.code for w in answer.warnings]


def test_model_free_flags_are_added_in_board_order(pg_alpha_data):
    inputs, settings = build(pg_alpha_data)
    rows = item_rows(inputs, settings, sc := scale_covariance(inputs, settings), scale_reliability(sc, settings))
    R = factor_input(inputs, settings, settings.items).R
    flags = all_flags([], R, rows, {"redundant_r": 0.5})
    direct = item_level_flags(R, names=list(settings.items), floor=[r.descriptives.floor for r in rows],
                              ceiling=[r.descriptives.ceiling for r in rows], thresholds={"redundant_r": 0.5})
    assert sorted(map(str, flags)) == sorted(map(str, direct)) and flags
    order = [list(settings.items).index(f["item"]) for f in flags]
    assert order == sorted(order)


def test_run_without_factors_and_duplicate_warnings_once(pg_alpha_data):
    inputs, settings = build(pg_alpha_data)
    answer = run(inputs, settings, with_factors=False)
    assert isinstance(answer, AnalysisAnswer) and answer.factors is None
    assert "efa" not in answer.to_dict() and answer.reliability.n_items == 10
    assert len(set(answer.warnings)) == len(answer.warnings)
