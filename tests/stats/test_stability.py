"""Test-retest statistics against numpy, scipy and pingouin.

Sources: Bland & Altman (1986) limits = mean difference +/- 1.96 SD of the differences (checked with
numpy); scipy.stats pearsonr/spearmanr; pingouin 0.7 intraclass_corr for the ICC of total scores;
Weir (2005) SEM and MDC formulas (identities, checked with numpy).
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps

from server.stats.errors import InputError
from server.stats.stability import retest


def two_waves(n=40, k=5, seed=1):
    rng = np.random.default_rng(seed)
    trait = rng.normal(size=n)
    first = np.clip(np.round(3 + trait[:, None] + rng.normal(scale=0.8, size=(n, k))), 1, 5)
    second = np.clip(np.round(3.2 + trait[:, None] + rng.normal(scale=0.8, size=(n, k))), 1, 5)
    return first, second


def test_total_scores_bland_altman_against_numpy():
    first, second = two_waves()
    r = retest(first, second)
    d = second.sum(axis=1) - first.sum(axis=1)
    assert r.mean_difference == pytest.approx(d.mean(), abs=1e-12)  # numpy: mean of differences
    lo = d.mean() - 1.96 * d.std(ddof=1)
    hi = d.mean() + 1.96 * d.std(ddof=1)
    assert r.limits_of_agreement.lower == pytest.approx(lo, abs=1e-12)  # Bland & Altman 1986 via numpy
    assert r.limits_of_agreement.upper == pytest.approx(hi, abs=1e-12)  # Bland & Altman 1986 via numpy
    assert r.n == 40 and r.n_dropped == 0
    assert r.scores[0] == (first[0].sum(), second[0].sum())


def test_correlations_against_scipy():
    first, second = two_waves(seed=2)
    r = retest(first, second, score="mean")
    a, b = first.mean(axis=1), second.mean(axis=1)
    assert r.pearson_r.value == pytest.approx(sps.pearsonr(a, b).statistic, abs=1e-12)  # scipy.stats
    assert r.spearman_rho.value == pytest.approx(sps.spearmanr(a, b).statistic, abs=1e-12)  # scipy.stats
    lo, hi = r.pearson_r.ci
    ref = sps.pearsonr(a, b).confidence_interval(0.95)  # scipy: Fisher z interval
    assert (lo, hi) == pytest.approx((ref.low, ref.high), abs=1e-10)


def test_icc_of_totals_against_pingouin_and_sem_mdc_identities():
    import pingouin as pg

    first, second = two_waves(seed=4)
    r = retest(first, second)
    a, b = first.sum(axis=1), second.sum(axis=1)
    long = pd.DataFrame({"t": np.tile(np.arange(a.size), 2), "r": np.repeat([0, 1], a.size),
                         "s": np.concatenate([a, b])})
    ref = pg.intraclass_corr(long, "t", "r", "s").set_index("Type")
    for form in ("ICC(1,1)", "ICC(A,1)", "ICC(C,1)", "ICC(1,k)", "ICC(A,k)", "ICC(C,k)"):
        assert r.icc.form(form).value == pytest.approx(ref.loc[form, "ICC"], abs=1e-10)  # pingouin
    sd_pooled = math.sqrt((a.var(ddof=1) + b.var(ddof=1)) / 2)
    sem = sd_pooled * math.sqrt(1 - r.icc.form("ICC(A,1)").value)
    assert r.recommended == "ICC(A,1)"
    assert r.sem.value == pytest.approx(sem, abs=1e-12)  # Weir (2005) SEM formula via numpy
    assert r.mdc95.value == pytest.approx(1.96 * math.sqrt(2) * sem, abs=1e-12)  # Weir (2005) MDC95
    assert r.interpretation


def test_per_item_results_and_item_names():
    first, second = two_waves(k=3)
    r = retest(first, second, items=["Q1", "Q2", "Q3"])
    assert [p.item for p in r.per_item] == ["Q1", "Q2", "Q3"]
    d = second[:, 1] - first[:, 1]
    assert r.per_item[1].mean_difference == pytest.approx(d.mean())  # numpy
    assert r.per_item[1].limits_of_agreement.upper == pytest.approx(
        d.mean() + 1.96 * d.std(ddof=1))  # Bland & Altman 1986 via numpy


def test_missing_items_drop_the_total_but_not_the_other_items():
    first, second = two_waves(k=3)
    first[0, 2] = np.nan
    r = retest(first, second)
    assert r.n == 39 and r.n_dropped == 1
    assert r.per_item[0].n == 40 and r.per_item[2].n == 39
    assert "retest_incomplete_scores" in [w.code for w in r.warnings]


def test_parallel_forms_with_different_item_counts():
    first, second = two_waves(k=4)
    r = retest(first, second[:, :3], items=["a1", "a2", "a3", "a4"], items_second=["b1", "b2", "b3"])
    assert r.per_item == ()
    assert {"forms_unequal_length", "per_item_omitted"} <= {w.code for w in r.warnings}


def test_no_variance_gives_reasons():
    first = np.ones((5, 2))
    second = np.ones((5, 2))
    r = retest(first, second)
    assert r.pearson_r.value is None and "no variance" in r.pearson_r.reason
    assert r.icc.form("ICC(A,1)").value is None and r.icc.reason
    assert r.sem.value is None and r.sem.reason
    assert r.limits_of_agreement.lower == 0.0  # identical scores: differences all zero


def test_bad_input():
    first, second = two_waves(n=10)
    with pytest.raises(InputError) as e:
        retest(first, second[:9])
    assert e.value.code == "mismatched_rows"
    with pytest.raises(InputError) as e:
        retest(first, second, score="median")
    assert e.value.code == "bad_score"
    with pytest.raises(InputError) as e:
        retest(first[:2], second[:2])
    assert e.value.code == "too_few_matched"
