"""Answer counts from the cached answer patterns equal the counts on the responses, and so do whole answers."""
from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from server.analysis import AnalysisInputs, AnalysisSettings, run
from server.analysis.matrices import AnswerPatterns, constant_notes
from server.api.serialize import dumps
from server.intake import read_responses

from .conftest import Item

ROOT = Path(__file__).resolve().parents[2]


def _multi_factor(n: int, k: int, *, missing: float, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    load = np.zeros((k, 3))
    load[np.arange(k), np.arange(k) % 3] = rng.uniform(0.5, 0.8, k)
    z = rng.standard_normal((n, 3)) @ load.T + rng.standard_normal((n, k)) * np.sqrt(1 - (load ** 2).sum(1))
    X = np.clip(np.round(z * 1.1 + 3), 1, 5)
    X[rng.random((n, k)) < missing] = np.nan
    X[rng.random(n) < 0.3, : k // 2] = np.nan  # a branch: a block of items skipped together
    return X


@pytest.mark.parametrize(("k", "missing"), [(1, 0.2), (7, 0.0), (8, 0.3), (13, 0.1), (70, 0.05), (70, 0.0)])
def test_counts_equal_the_counts_on_the_responses(k, missing):
    X = _multi_factor(400, k, missing=missing, seed=k)
    X[5] = np.nan  # a respondent who answered nothing
    pat = AnswerPatterns.of(X, chunk=64)  # several chunks
    assert pat.counts.sum() == len(X)
    rng = np.random.default_rng(1)
    for _ in range(30):
        idx = np.sort(rng.choice(k, size=rng.integers(1, k + 1), replace=False))
        miss = np.isnan(X[:, idx])
        assert pat.answered_any(idx) == int((~miss.all(axis=1)).sum())
        assert pat.answered_all(idx) == int((~miss.any(axis=1)).sum())


def test_complete_data_have_one_pattern():
    pat = AnswerPatterns.of(np.ones((50, 20)))
    assert pat.counts.tolist() == [50]
    assert pat.answered_any([3]) == pat.answered_all(np.arange(20)) == 50


def _inputs(X: np.ndarray, items, request: dict) -> tuple[AnalysisInputs, AnalysisSettings]:
    names = [it.name for it in items]
    s = AnalysisSettings.build(request, names=names, declared_reverse=[it.name for it in items if it.reverse],
                               constant=list(constant_notes(X, names)))
    return AnalysisInputs.from_responses(X, items, s.reverse, correlations=[s.correlation],
                                         zero_cell_correction=s.zero_cell_correction), s


def _same_answer(X, items, request):
    old, s = _inputs(X, items, request)  # no patterns: counted on the responses, as before
    new = dataclasses.replace(old, patterns=AnswerPatterns.of(X))
    assert dumps(run(new, s)) == dumps(run(old, s))


@pytest.mark.parametrize("missing", ["pairwise", "listwise"])
def test_answers_are_identical_on_a_simulated_pool_with_missing_answers(missing):
    X = _multi_factor(600, 24, missing=0.04, seed=3)
    items = [Item(f"q{j + 1}", construct=f"c{j % 3}") for j in range(24)]
    names = [it.name for it in items]
    for request in ({"missing": missing}, {"missing": missing, "items": names[:-1]},
                    {"missing": missing, "items": names[:20], "reverse": ["q2"], "grouping": "factor"}):
        _same_answer(X, items, request)


@pytest.mark.parametrize("missing", ["pairwise", "listwise"])
def test_answers_are_identical_on_the_demo(missing):
    d = ROOT / "demo_data"
    parsed = read_responses((d / "workshop_responses.csv").read_bytes(), "workshop_responses.csv",
                            codebook_raw=(d / "workshop_codebook.csv").read_bytes(),
                            codebook_filename="workshop_codebook.csv")
    names = parsed.item_names
    for request in ({"missing": missing}, {"missing": missing, "items": names[2:]}):
        _same_answer(parsed.responses, parsed.items, request)


@pytest.mark.parametrize("missing", ["pairwise", "listwise"])
def test_a_column_major_matrix_gives_the_same_answer(missing):
    """A large file's responses stay column-major after intake (no second copy): same numbers."""
    X = _multi_factor(600, 24, missing=0.04, seed=5)
    items = [Item(f"q{j + 1}", construct=f"c{j % 3}") for j in range(24)]
    request = {"missing": missing, "items": [it.name for it in items][1:]}
    c, s = _inputs(np.ascontiguousarray(X), items, request)
    f, _ = _inputs(np.asfortranarray(X), items, request)
    assert f.responses.flags.f_contiguous and not f.responses.flags.c_contiguous
    assert dumps(run(f, s)) == dumps(run(c, s))


@pytest.mark.parametrize("correlation", ["pearson", "polychoric"])
def test_the_full_pool_reads_the_responses_without_copying_or_changing_them(correlation):
    from server.analysis.matrices import full_pool

    X = _multi_factor(300, 9, missing=0.05, seed=4)
    before = X.copy()
    names = [f"q{j + 1}" for j in range(9)]
    pool = full_pool(X, names, {}, correlation, zero_cell_correction=0.5)
    assert np.array_equal(X, before, equal_nan=True)
    sub = full_pool(np.ascontiguousarray(X), names, {"q9": None}, correlation, zero_cell_correction=0.5)
    assert np.array_equal(pool.corr[:8, :8], sub.corr[:8, :8], equal_nan=True)  # the copy path: same numbers
