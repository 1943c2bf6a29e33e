"""Agreement coefficients against published examples and reference libraries.

Sources: Shrout & Fleiss (1979) worked example; pingouin 0.7 (`icc` data set and `intraclass_corr`);
statsmodels 0.15 test tables and their SAS printout; scikit-learn `cohen_kappa_score`;
Krippendorff (2011) and the `krippendorff` package. See tests/reference/agreement/README.md.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from server.stats.agreement import (
    ICC_FORMS,
    agreement_summary,
    cohen_kappa,
    fleiss_kappa,
    icc,
    koo_li_label,
    krippendorff_alpha,
    krippendorff_label,
    landis_koch_label,
    percent_agreement,
    weighted_kappa,
)
from server.stats.errors import InputError

REF = Path(__file__).resolve().parents[1] / "reference" / "agreement"


def shrout_fleiss() -> np.ndarray:  # ratings typed in from memory; checked by the six published ICCs
    return pd.read_csv(REF / "shrout_fleiss_1979.csv").drop(columns="target").to_numpy(float)


def krippendorff_table() -> np.ndarray:
    return pd.read_csv(REF / "krippendorff_2011.csv").drop(columns="unit").to_numpy(float)


def expand(table) -> tuple[list[int], list[int]]:
    """A two-rater contingency table back to one (rater 1, rater 2) pair per unit."""
    a, b = [], []
    for i, row in enumerate(table):
        for j, count in enumerate(row):
            a += [i] * count
            b += [j] * count
    return a, b


# ------------------------------------------------------------------------------------------------ ICC
def test_icc_shrout_fleiss_1979():
    # Mapping of names: Shrout & Fleiss ICC(1,1) = McGraw & Wong ICC(1,1); ICC(2,1) = ICC(A,1);
    # ICC(3,1) = ICC(C,1); ICC(1,4) = ICC(1,k); ICC(2,4) = ICC(A,k); ICC(3,4) = ICC(C,k) with k = 4 judges.
    r = icc(shrout_fleiss())
    assert round(r.form("ICC(1,1)").value, 2) == 0.17  # Shrout & Fleiss 1979, published ICC(1,1)
    assert round(r.form("ICC(A,1)").value, 2) == 0.29  # Shrout & Fleiss 1979, published ICC(2,1)
    assert round(r.form("ICC(C,1)").value, 2) == 0.71  # Shrout & Fleiss 1979, published ICC(3,1)
    assert round(r.form("ICC(1,k)").value, 2) == 0.44  # Shrout & Fleiss 1979, published ICC(1,4)
    assert round(r.form("ICC(A,k)").value, 2) == 0.62  # Shrout & Fleiss 1979, published ICC(2,4)
    assert round(r.form("ICC(C,k)").value, 2) == 0.91  # Shrout & Fleiss 1979, published ICC(3,4)
    assert r.n_units == 6 and r.n_raters == 4 and r.n_dropped == 0
    assert r.form("ICC(1,1)").df1 == 5 and r.form("ICC(1,1)").df2 == 18   # one-way: n-1, n(k-1)
    assert r.form("ICC(A,1)").df2 == 15                                 # two-way: (n-1)(k-1)


def test_icc_pingouin_docs_wine_data():
    import pingouin as pg

    data = pg.read_dataset("icc")
    Y = data.pivot(index="Wine", columns="Judge", values="Scores").to_numpy(float)
    r = icc(Y)
    # pingouin 0.7 intraclass_corr docstring, printed to 3 decimals (ICC, F) and 2 decimals (CI95)
    documented = {"ICC(1,1)": (0.728, 11.680, [0.43, 0.93]), "ICC(A,1)": (0.728, 11.787, [0.43, 0.93]),
                  "ICC(C,1)": (0.729, 11.787, [0.43, 0.93]), "ICC(1,k)": (0.914, 11.680, [0.75, 0.98]),
                  "ICC(A,k)": (0.914, 11.787, [0.75, 0.98]), "ICC(C,k)": (0.915, 11.787, [0.75, 0.98])}
    for form, (value, f, ci) in documented.items():
        assert round(r.form(form).value, 3) == value  # pingouin docs, icc data set
        assert round(r.form(form).f, 3) == f  # pingouin docs, icc data set
        assert [round(x, 2) for x in r.form(form).ci] == ci  # pingouin docs, icc data set


def test_icc_matches_pingouin_intraclass_corr_at_full_precision():
    import pingouin as pg

    rng = np.random.default_rng(3)
    true = rng.normal(size=15)
    Y = true[:, None] + rng.normal(scale=0.7, size=(15, 3)) + np.array([0.0, 0.4, -0.2])
    long = pd.DataFrame([(i, j, Y[i, j]) for i in range(15) for j in range(3)], columns=["t", "r", "s"])
    ref = pg.intraclass_corr(long, "t", "r", "s").set_index("Type")
    r = icc(Y)
    for form in ICC_FORMS:
        assert r.form(form).value == pytest.approx(ref.loc[form, "ICC"], abs=1e-10)  # pingouin.intraclass_corr
        assert [round(x, 2) for x in r.form(form).ci] == list(ref.loc[form, "CI95"])  # pingouin rounds CI95 to .01
        assert r.form(form).p == pytest.approx(ref.loc[form, "pval"], rel=1e-8)  # pingouin.intraclass_corr
        assert r.form(form).df2 == ref.loc[form, "df2"]  # pingouin.intraclass_corr


def test_icc_drops_incomplete_units_and_says_so():
    Y = shrout_fleiss()
    Y_missing = np.vstack([Y, [[3, np.nan, 4, 5]]])
    r = icc(Y_missing)
    assert r.n_dropped == 1 and r.n_units == 6
    assert r.form("ICC(C,k)").value == pytest.approx(icc(Y).form("ICC(C,k)").value)  # same as complete data
    assert [w.code for w in r.warnings] == ["icc_incomplete_units"] and "missing" in r.warnings[0].message


def test_icc_undefined_cases_give_reasons_not_nan():
    same = icc(np.full((5, 3), 4.0))
    assert same.form("ICC(A,1)").value is None and "same" in same.form("ICC(A,1)").reason
    flat_units = icc(np.array([[1.0, 2.0], [1.0, 2.0], [1.0, 2.0]]))
    assert flat_units.reason and flat_units.form("ICC(C,1)").value is None
    one_rater = icc(np.array([[1.0], [2.0], [3.0]]))
    assert one_rater.form("ICC(1,1)").value is None and "two raters" in one_rater.reason


def test_icc_perfect_consistency_has_no_infinities():
    Y = np.array([[1.0, 3.0], [2.0, 4.0], [5.0, 7.0], [3.0, 5.0]])   # rater 2 = rater 1 + 2
    r = icc(Y)
    assert r.form("ICC(C,1)").value == pytest.approx(1.0)  # identity: no residual variance
    assert r.form("ICC(C,1)").f is None and r.form("ICC(A,1)").value < 1


def test_icc_rejects_text():
    with pytest.raises(InputError) as e:
        icc([[1, 2], [3, "x"]])
    assert e.value.details == {"row": 2, "column": 2, "value": "x"}


# ------------------------------------------------------------------------------------------------ kappas
def test_cohen_kappa_statsmodels_table10_sas_printout():
    a, b = expand([[0, 4, 1], [0, 8, 0], [0, 1, 5]])
    r = cohen_kappa(a, b)
    assert round(r.value, 4) == 0.4842  # statsmodels test_inter_rater, SAS printout: Kappa
    assert round(r.se, 4) == 0.1380  # SAS printout: ASE
    assert [round(x, 4) for x in r.ci] == [0.2137, 0.7547]  # SAS printout: 95% confidence limits
    assert round(r.se0, 4) == 0.1484  # SAS printout: ASE under H0
    assert round(r.z, 4) == 3.2626  # SAS printout: Z
    assert round(r.p, 4) == 0.0011  # SAS printout: two-sided Pr > |Z|
    assert r.label == "moderate"  # Landis & Koch (1977) band .41-.60


def test_linear_weighted_kappa_statsmodels_table10_sas_printout():
    a, b = expand([[0, 4, 1], [0, 8, 0], [0, 1, 5]])
    r = weighted_kappa(a, b, weights="linear")
    assert round(r.value, 4) == 0.4701  # statsmodels test_inter_rater, SAS printout: weighted kappa
    assert round(r.se, 4) == 0.1457  # SAS printout: ASE
    assert [round(x, 4) for x in r.ci] == [0.1845, 0.7558]  # SAS printout: 95% confidence limits
    assert round(r.se0, 4) == 0.1426  # SAS printout: ASE under H0


def test_kappas_match_statsmodels_and_sklearn_on_random_ratings():
    from sklearn.metrics import cohen_kappa_score
    from statsmodels.stats.inter_rater import cohens_kappa

    rng = np.random.default_rng(11)
    a = rng.integers(1, 6, size=60)
    b = np.clip(a + rng.integers(-1, 2, size=60), 1, 5)
    for w in ("linear", "quadratic"):
        ours = weighted_kappa(a, b, weights=w).value
        assert ours == pytest.approx(cohen_kappa_score(a, b, weights=w), abs=1e-12)  # scikit-learn
    table = pd.crosstab(a, b).reindex(index=range(1, 6), columns=range(1, 6), fill_value=0).to_numpy()
    sm = cohens_kappa(table, wt="quadratic")
    r = weighted_kappa(a, b, weights="quadratic")
    assert r.se == pytest.approx(math.sqrt(sm.var_kappa), abs=1e-12)  # statsmodels cohens_kappa
    assert cohen_kappa(a, b).value == pytest.approx(cohen_kappa_score(a, b), abs=1e-12)  # scikit-learn


def test_kappa_drops_missing_pairs_and_handles_a_single_category():
    r = cohen_kappa([1, 2, None, 2], [1, 2, 1, float("nan")])
    assert r.n_units == 2 and r.n_dropped == 2
    r = cohen_kappa(["a", "a", "a"], ["a", "a", "a"])
    assert r.value is None and "one category" in r.reason
    with pytest.raises(InputError):
        weighted_kappa(["low", "high"], ["high", "high"])


def test_fleiss_kappa_statsmodels_table1():
    from statsmodels.stats.inter_rater import fleiss_kappa as sm_fleiss
    from statsmodels.stats.tests.test_inter_rater import table1

    r = fleiss_kappa(table1, counts=True)
    assert round(r.value, 3) == 0.210  # statsmodels test_inter_rater (Wikipedia's Fleiss example)
    assert r.value == pytest.approx(sm_fleiss(table1), abs=1e-12)  # statsmodels fleiss_kappa
    assert r.ci[0] < r.value < r.ci[1]
    assert r.n_raters == 14 and r.n_units == 10


def test_fleiss_kappa_fleiss_1971_diagnoses():
    from statsmodels.stats.inter_rater import aggregate_raters
    from statsmodels.stats.inter_rater import fleiss_kappa as sm_fleiss
    from statsmodels.stats.tests.test_inter_rater import diagnoses

    r = fleiss_kappa(diagnoses)
    assert round(r.value, 3) == 0.430  # Fleiss (1971), 30 patients x 6 psychiatrists
    assert r.value == pytest.approx(sm_fleiss(aggregate_raters(diagnoses)[0]), abs=1e-12)  # statsmodels
    assert r.n_units == 30 and r.n_raters == 6


def test_fleiss_kappa_bootstrap_is_reproducible_and_degenerate_case_explained():
    from statsmodels.stats.tests.test_inter_rater import diagnoses

    assert fleiss_kappa(diagnoses).ci == fleiss_kappa(diagnoses).ci  # fixed seed
    r = fleiss_kappa(np.full((4, 3), 2))
    assert r.value is None and "one category" in r.reason


# ------------------------------------------------------------------------------------------------ alpha
@pytest.mark.parametrize("level,published", [("nominal", 0.743), ("ordinal", 0.815), ("interval", 0.849),
                                             ("ratio", 0.797)])
def test_krippendorff_2011_example(level, published):
    import krippendorff

    data = krippendorff_table()
    r = krippendorff_alpha(data, level)
    assert round(r.value, 3) == published  # Krippendorff (2011), 4 observers x 12 units with missing values
    ref = krippendorff.alpha(reliability_data=data.T, level_of_measurement=level)
    assert r.value == pytest.approx(ref, abs=1e-12)  # krippendorff package 0.9.0
    assert r.n_pairable_units == 11  # unit 12 has a single value (Krippendorff 2011)
    assert r.ci[0] <= r.value <= r.ci[1]


def test_krippendorff_random_data_matches_package():
    import krippendorff

    rng = np.random.default_rng(5)
    data = rng.integers(0, 4, size=(25, 3)).astype(float)
    data[rng.random(data.shape) < 0.2] = np.nan
    for level in ("nominal", "ordinal", "interval", "ratio"):
        ref = krippendorff.alpha(reliability_data=data.T, level_of_measurement=level)
        assert krippendorff_alpha(data, level).value == pytest.approx(ref, abs=1e-12)  # krippendorff package


def test_krippendorff_degenerate_and_bad_input():
    r = krippendorff_alpha(np.array([[1.0, 1.0], [1.0, np.nan], [1.0, 1.0]]), "interval")
    assert r.value is None and "no expected" in r.reason
    r = krippendorff_alpha(np.array([[1.0, np.nan], [np.nan, 2.0]]), "nominal")
    assert r.value is None and "pairs" in r.reason
    with pytest.raises(InputError):
        krippendorff_alpha([[1, 2]], "cardinal")
    with pytest.raises(InputError) as e:
        krippendorff_alpha([[1, -2], [3, 4]], "ratio")
    assert e.value.details["row"] == 1 and e.value.details["column"] == 2


# ------------------------------------------------------------------------------------------------ percent
def test_percent_agreement_invented_ten_units():
    # Invented example: 10 units, two raters who agree on all but units 4 and 9.
    first = [1, 2, 3, 1, 2, 3, 1, 2, 3, 1]
    second = [1, 2, 3, 2, 2, 3, 1, 2, 1, 1]
    r = percent_agreement(np.column_stack([first, second]).astype(object))
    assert r.value == pytest.approx(0.80)  # common practice: 8 agreements / 10 possible agreements
    assert r.n_agree == 8


def test_percent_agreement_counts_only_units_rated_by_everyone():
    r = percent_agreement(np.array([[1, 1], [2, None], [3, 2]], dtype=object))
    assert r.value == pytest.approx(0.5) and r.n_dropped == 1  # common practice


# ------------------------------------------------------------------------------------------------ labels
def test_landis_koch_bands():
    # Landis & Koch (1977) convention
    assert [landis_koch_label(v) for v in (-0.1, 0.1, 0.3, 0.5, 0.7, 0.9)] == [
        "poor", "slight", "fair", "moderate", "substantial", "almost perfect"]
    assert landis_koch_label(None) is None


def test_krippendorff_label_bands():
    # Krippendorff (2004) guidance (.800 / .667), a convention
    assert [krippendorff_label(v) for v in (0.85, 0.7, 0.5)] == [
        "reliable", "tentative", "unreliable"]  # from memory


def test_icc_invariances():
    # identities: adding a constant to every rating changes no ICC; a constant per rater changes no
    # consistency ICC but lowers the absolute-agreement ICC
    Y = shrout_fleiss()
    base = icc(Y)
    shifted = icc(Y + 10)
    per_rater = icc(Y + np.array([0.0, 3.0, -2.0, 5.0]))
    for form in ICC_FORMS:
        assert shifted.form(form).value == pytest.approx(base.form(form).value)
    assert per_rater.form("ICC(C,1)").value == pytest.approx(base.form("ICC(C,1)").value)
    assert per_rater.form("ICC(A,1)").value < base.form("ICC(A,1)").value


def test_koo_li_label_reads_the_interval():
    assert koo_li_label([0.83, 0.94]) == "good to excellent"  # Koo & Li (2016) wording, from memory
    assert koo_li_label([0.2, 0.4]) == "poor"  # Koo & Li (2016) bands
    assert koo_li_label(None, 0.6).startswith("moderate")


# ------------------------------------------------------------------------------------------------ summary
def test_summary_two_raters_ordinal():
    a, b = expand([[0, 4, 1], [0, 8, 0], [0, 1, 5]])
    s = agreement_summary(np.column_stack([a, b]).tolist(), "ordinal")
    assert s.n_units == 19 and s.n_raters == 2
    assert round(s.cohen_kappa.value, 4) == 0.4842  # statsmodels / SAS printout
    assert round(s.weighted_kappa.linear.value, 4) == 0.4701  # statsmodels / SAS printout
    assert s.fleiss_kappa.value is None and s.fleiss_kappa.reason
    assert s.icc.value is None and "interval" in s.icc.reason
    assert s.krippendorff_alpha.level == "ordinal"


def test_summary_interval_many_raters_has_icc_and_fleiss():
    data = krippendorff_table()
    rows = [[None if np.isnan(v) else float(v) for v in row] for row in data]
    s = agreement_summary(rows, "interval")
    assert round(s.krippendorff_alpha.value, 3) == 0.849  # Krippendorff (2011)
    assert s.icc.n_units == 8 and s.icc.n_dropped == 4
    assert s.cohen_kappa.value is None
    assert s.fleiss_kappa.n_units == 8
    assert s.recommended == "ICC(A,1)" and s.interpretation
    assert [w.code for w in s.warnings] == ["missing_ratings"]  # the ICC's own missing note is not repeated


def test_summary_nominal_text_labels():
    s = agreement_summary([["yes", "no"], ["yes", "yes"], ["no", "no"], ["no", "no"], [None, "no"]], "nominal")
    assert s.categories == ("no", "yes")
    assert s.percent_agreement.value == pytest.approx(0.75)  # common practice: 3 of 4 complete units
    assert s.weighted_kappa.linear.value is None


@pytest.mark.parametrize("ratings,level,code", [
    ([[1], [2], [3]], "interval", "single_rater"),
    ([[3, 3], [3, 3], [3, None]], "interval", "no_variation"),
    ([[1, 2], [2, "high"]], "interval", "not_numeric"),
    ([[1, 2], [2, 3, 4]], "nominal", "mismatched_columns"),
    ([[1, 2], [2, 3]], "cardinal", "bad_level"),
    ([], "nominal", "empty"),
    ([[1, 2]], "nominal", "too_few_units"),
])
def test_summary_bad_input(ratings, level, code):
    with pytest.raises(InputError) as e:
        agreement_summary(ratings, level)
    assert e.value.code == code


def test_summary_text_error_names_the_cell():
    with pytest.raises(InputError) as e:
        agreement_summary([[1, 2], [2, "high"]], "interval")
    assert e.value.details == {"row": 2, "column": 2, "value": "high"}
    assert "row 2, column 2" in e.value.message.lower()
