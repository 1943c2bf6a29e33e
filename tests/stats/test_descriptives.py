"""Item descriptives against pandas and scipy; reverse scoring properties.

Sources: pandas (Series.mean/std/skew/kurt, value_counts), scipy.stats.skew/kurtosis(bias=False),
Denis (2016) printed item means and SDs.
"""
from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from server.stats.descriptives import item_descriptives, reverse_score
from server.stats.errors import InputError

REF = Path(__file__).resolve().parents[1] / "reference" / "reliability"


@pytest.fixture(scope="module")
def likert() -> pd.DataFrame:
    rng = np.random.default_rng(11)
    X = rng.choice([1, 2, 3, 4, 5], size=(120, 6), p=[0.1, 0.2, 0.3, 0.25, 0.15]).astype(float)
    X[rng.random(X.shape) < 0.08] = np.nan
    X[:, 5] = np.where(np.isnan(X[:, 5]), np.nan, np.minimum(X[:, 5] + 2, 5))  # ceiling-heavy item
    return pd.DataFrame(X, columns=[f"q{i}" for i in range(1, 7)])


def test_against_pandas_and_scipy(likert):
    d = item_descriptives(likert.to_numpy(), names=list(likert.columns), mins=[1] * 6, maxs=[5] * 6)
    for res, col in zip(d, likert.columns):
        s = likert[col]
        assert res.name == col
        assert res.n == s.count() and res.n_missing == s.isna().sum()  # pandas count
        assert res.mean == pytest.approx(s.mean(), abs=1e-12)  # pandas mean
        assert res.sd == pytest.approx(s.std(), abs=1e-12)  # pandas std (ddof 1)
        assert res.skew == pytest.approx(s.skew(), abs=1e-10)  # pandas skew (G1, bias-corrected)
        assert res.kurtosis == pytest.approx(s.kurt(), abs=1e-10)  # pandas kurt (G2, excess)
        v = s.dropna().to_numpy()
        assert res.skew == pytest.approx(stats.skew(v, bias=False), abs=1e-10)  # scipy bias=False
        assert res.kurtosis == pytest.approx(stats.kurtosis(v, bias=False), abs=1e-10)  # scipy
        counts = s.value_counts()
        assert res.counts == {c: int(counts.get(float(c), 0)) for c in range(1, 6)}  # pandas value_counts
        assert res.floor == pytest.approx(counts.get(1.0, 0) / s.count())
        assert res.ceiling == pytest.approx(counts.get(5.0, 0) / s.count())
    assert d[5].ceiling > 0.3


def test_denis_means_and_sds():
    denis = pd.read_csv(REF / "denis2016_cronbach.csv")
    d = item_descriptives(denis.to_numpy(), names=list(denis.columns), mins=[0] * 5, maxs=[20] * 5)
    assert [round(r.mean, 4) for r in d] == [7.3, 8.8, 9.1, 9.4, 7.0]  # Denis (2016) item statistics
    assert [round(r.sd, 5) for r in d] == [2.71006, 5.05085, 4.74810, 2.71621, 3.80058]  # Denis (2016)


def test_edge_cases():
    X = np.array([[3.0, 1.0, 1.5], [3.0, np.nan, 2.5], [3.0, 2.0, 2.5], [3.0, 7.0, np.nan]])
    d = item_descriptives(X, names=["const", "out", "half"], mins=[1, 1, 1], maxs=[5, 5, 5])
    assert d[0].sd == 0 and d[0].skew is None and d[0].kurtosis is None  # no variance
    assert d[1].n == 3 and d[1].kurtosis is None  # kurtosis needs 4 answers
    assert d[1].counts[7] == 1  # an out-of-range answer is counted, not hidden
    assert d[2].counts == {1.5: 1, 2.5: 2}  # non-integer answers: observed values
    out = json.dumps([r.to_dict() for r in d], allow_nan=False)
    assert '"counts": {"1": 0, "2": 0, "3": 4, "4": 0, "5": 0}' in out
    # to_dict writes the fields as the standard library's dataclasses.asdict does, in its order (without its
    # deep copy, which was most of the cost of writing an answer); only the counts' keys become labels
    for r in d:
        ref = dataclasses.asdict(r)
        ref["counts"] = {(str(int(c)) if float(c).is_integer() else repr(float(c))): v for c, v in r.counts.items()}
        assert list(r.to_dict()) == list(ref) and r.to_dict() == ref
    with pytest.raises(InputError):
        item_descriptives(X, names=["a", "b"], mins=[1, 1, 1], maxs=[5, 5, 5])
    with pytest.raises(InputError):
        item_descriptives(X[:, 0], names=["a"], mins=[1], maxs=[5])


def test_reverse_score_values():
    X = np.array([[1.0, 2.0], [5.0, np.nan], [3.0, 4.0]])
    out = reverse_score(X, [1, 1], [5, 5], [True, False])
    np.testing.assert_array_equal(out[:, 0], [5.0, 1.0, 3.0])  # min + max - x on a 1..5 range
    np.testing.assert_array_equal(out[:, 1], X[:, 1])  # untouched item, NaN kept
    assert X[0, 0] == 1.0  # input not modified
    with pytest.raises(InputError):
        reverse_score(X, [1, 1], [5, 5], [True])


@settings(max_examples=60, deadline=None)
@given(seed=st.integers(0, 10_000), k=st.integers(1, 8), lo=st.integers(-3, 2), width=st.integers(1, 9))
def test_reversing_twice_is_identity(seed, k, lo, width):
    rng = np.random.default_rng(seed)
    X = rng.integers(lo, lo + width + 1, size=(30, k)).astype(float)
    X[rng.random(X.shape) < 0.1] = np.nan
    mask = rng.random(k) < 0.5
    mins, maxs = np.full(k, lo), np.full(k, lo + width)
    once = reverse_score(X, mins, maxs, mask)
    twice = reverse_score(once, mins, maxs, mask)
    np.testing.assert_array_equal(twice, X)
    # reversing keeps variances and reflects means (mean' = min + max - mean)
    d0 = item_descriptives(X, names=[str(i) for i in range(k)], mins=mins, maxs=maxs)
    d1 = item_descriptives(once, names=[str(i) for i in range(k)], mins=mins, maxs=maxs)
    for j in range(k):
        if d0[j].n >= 2:
            assert d1[j].sd == pytest.approx(d0[j].sd, abs=1e-9)
        if mask[j] and d0[j].n >= 1:
            assert d1[j].mean == pytest.approx(mins[j] + maxs[j] - d0[j].mean, abs=1e-9)
            assert d1[j].floor == pytest.approx(d0[j].ceiling)
