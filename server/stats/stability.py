"""Stability over time (test-retest) and between parallel forms, for total scores and single items.

Input is two respondents x items matrices whose rows are already matched (row i of ``first`` is
the same person as row i of ``second``); matching by ID is the caller's job. Results are frozen
dataclasses (serialised at the API edge); a statistic that cannot be computed has ``None`` and a ``reason``.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats as sps

from .agreement import KOO_LI_SOURCE, IccResult, _num, icc
from .errors import InputError
from .notes import Note, note

SEM_FORMULA = ("SEM = SD_pooled x sqrt(1 - ICC(A,1)), SD_pooled = sqrt((SD_first^2 + SD_second^2) / 2) "
               "(Weir 2005; de Vet et al. 2006)")
MDC_FORMULA = "MDC95 = 1.96 x sqrt(2) x SEM (Weir 2005)"
LOA_FORMULA = ("limits of agreement = mean difference +/- 1.96 x SD of the differences (second - first) "
               "(Bland & Altman 1986)")
RECOMMENDED = "ICC(A,1)"
RECOMMENDED_WHY = ("Two-way, absolute agreement, single measurement: for test-retest a change in level between "
                   "occasions is error, and each person is measured once per occasion (Koo & Li 2016).")


@dataclass(frozen=True)
class Correlation:
    """A correlation between the two occasions with its Fisher-z interval and p value."""

    value: float | None
    ci: tuple[float, float] | None
    p: float | None
    reason: str | None


@dataclass(frozen=True)
class Sem:
    """Standard error of measurement from the recommended ICC (``sd_pooled``, ``icc_used`` when defined)."""

    value: float | None
    reason: str | None
    formula: str
    sd_pooled: float | None = None
    icc_used: str | None = None


@dataclass(frozen=True)
class Mdc:
    """Minimal detectable change at 95%."""

    value: float | None
    reason: str | None
    formula: str


@dataclass(frozen=True)
class LimitsOfAgreement:
    """Bland-Altman limits of agreement (second minus first)."""

    lower: float | None
    upper: float | None
    reason: str | None
    formula: str


@dataclass(frozen=True)
class Formulas:
    """The formulas behind the SEM, MDC95 and limits of agreement."""

    sem: str
    mdc95: str
    limits_of_agreement: str


@dataclass(frozen=True)
class PairStability:
    """Every stability statistic for one pair of score vectors (complete pairs only)."""

    n: int
    n_dropped: int
    mean_first: float | None
    mean_second: float | None
    sd_first: float | None
    sd_second: float | None
    pearson_r: Correlation
    spearman_rho: Correlation
    icc: IccResult
    recommended: str
    recommended_why: str
    interpretation: str | None
    interpretation_source: str
    sem: Sem
    mdc95: Mdc
    mean_difference: float | None
    sd_difference: float | None
    mean_difference_ci: tuple[float, float] | None
    limits_of_agreement: LimitsOfAgreement


@dataclass(frozen=True)
class ItemStability(PairStability):
    """The stability of one item (paired with ``item_second`` of the parallel form)."""

    item: str
    item_second: str


@dataclass(frozen=True)
class RetestResult(PairStability):
    """Stability of the total score, with the plotted scores and the per-item results."""

    score: str
    ci_level: float
    items: tuple[str, ...]
    items_second: tuple[str, ...]
    scores: tuple[tuple[float, float], ...]
    score_ids: tuple[str, ...] | None
    per_item: tuple[ItemStability, ...]
    formulas: Formulas
    warnings: tuple[Note, ...]


def _corr(a: np.ndarray, b: np.ndarray, kind: str, ci: float) -> Correlation:
    name = "Pearson's r" if kind == "pearson" else "Spearman's rho"
    n = a.size
    if n < 3:
        return Correlation(value=None, ci=None, p=None, reason=f"{name} needs at least three pairs; there are {n}.")
    for label, x in (("first", a), ("second", b)):
        if np.ptp(x) == 0:
            return Correlation(value=None, ci=None, p=None, reason=f"Every score in the {label} wave is {x[0]:g}; "
                                                                   f"with no variance {name} is undefined.")
    res = sps.pearsonr(a, b) if kind == "pearson" else sps.spearmanr(a, b)
    r = float(res.statistic)
    interval = None
    if n > 3 and abs(r) < 1:
        # Fisher z interval (for rho with the same large-sample SE; Fieller et al. 1957 is more exact)
        z = math.atanh(r)
        half = sps.norm.ppf(0.5 + ci / 2) / math.sqrt(n - 3)
        interval = (math.tanh(z - half), math.tanh(z + half))
    return Correlation(value=r, ci=interval, p=_num(res.pvalue), reason=None)


def _compare(a: np.ndarray, b: np.ndarray, *, ci: float) -> dict:
    """All stability statistics for one pair of score vectors (complete pairs only): the fields of
    :class:`PairStability`, for the result types that extend it."""
    keep = ~(np.isnan(a) | np.isnan(b))
    n_dropped = int((~keep).sum())
    a, b = a[keep], b[keep]
    n = int(a.size)
    sd_first = _num(a.std(ddof=1)) if n > 1 else None
    sd_second = _num(b.std(ddof=1)) if n > 1 else None
    forms = icc(np.column_stack([a, b]), ci=ci) if n >= 2 else icc(np.empty((0, 2)), ci=ci)
    rec = forms.form(RECOMMENDED)
    # standard error of measurement and smallest detectable change
    if rec.value is None or sd_first is None or sd_second is None:
        why = f"The SEM needs {RECOMMENDED}: {rec.reason or 'Too few pairs.'}"
        sem = Sem(value=None, reason=why, formula=SEM_FORMULA)
        mdc = Mdc(value=None, reason=why, formula=MDC_FORMULA)
    else:
        sd_pooled = math.sqrt((sd_first ** 2 + sd_second ** 2) / 2)
        value = sd_pooled * math.sqrt(max(0.0, 1 - rec.value))
        sem = Sem(value=value, reason=None, formula=SEM_FORMULA, sd_pooled=sd_pooled, icc_used=RECOMMENDED)
        mdc = Mdc(value=1.96 * math.sqrt(2) * value, reason=None, formula=MDC_FORMULA)
    # Bland-Altman
    d = b - a
    if n >= 2:
        sd = float(d.std(ddof=1))
        sd_d: float | None = sd
        md = float(d.mean())
        se_md = sd / math.sqrt(n)
        t = float(sps.t.ppf(0.5 + ci / 2, n - 1))
        md_ci: tuple[float, float] | None = (md - t * se_md, md + t * se_md)
        loa = LimitsOfAgreement(lower=md - 1.96 * sd, upper=md + 1.96 * sd, reason=None,
                                formula=LOA_FORMULA)
    else:
        sd_d = md_ci = None
        loa = LimitsOfAgreement(lower=None, upper=None, formula=LOA_FORMULA,
                                reason=f"Limits of agreement need at least two pairs; there are {n}.")
    return {"n": n, "n_dropped": n_dropped, "mean_first": _num(a.mean()) if n else None,
            "mean_second": _num(b.mean()) if n else None, "sd_first": sd_first, "sd_second": sd_second,
            "pearson_r": _corr(a, b, "pearson", ci), "spearman_rho": _corr(a, b, "spearman", ci), "icc": forms,
            "recommended": RECOMMENDED, "recommended_why": RECOMMENDED_WHY, "interpretation": forms.interpretation,
            "interpretation_source": KOO_LI_SOURCE, "sem": sem, "mdc95": mdc,
            "mean_difference": _num(d.mean()) if n else None, "sd_difference": sd_d, "mean_difference_ci": md_ci,
            "limits_of_agreement": loa}


def retest(first: ArrayLike, second: ArrayLike, *, score: str = "sum", items: list[str] | None = None,
           items_second: list[str] | None = None, ids: list[str] | None = None,
           ci: float = 0.95) -> RetestResult:
    """Test-retest (or parallel-forms) stability of a scale's total score and of each item.

    Parameters
    ----------
    first, second : array_like, shape (n_respondents, k) and (n_respondents, k2)
        Scored responses (reverse items already reversed) of the same respondents in the same row
        order; NaN = missing.
    score : {"sum", "mean"}
        Total score per respondent. A respondent missing any scored item in a wave has no total
        score for that wave and is left out of the total-score comparison (counted).
    items, items_second : list of str, optional
        Item names of the two matrices (for the per-item results); ``items_second`` names the
        parallel form's items, paired with ``items`` by position.
    ids : list of str, optional
        Respondent IDs of the rows, returned beside the plotted scores as ``score_ids``.
    ci : float
        Confidence level.

    Returns
    -------
    RetestResult
        ``n`` (pairs with both totals), ``n_dropped``, ``score``, ``pearson_r``, ``spearman_rho``
        (each ``{value, ci, p, reason}``), ``icc`` (the six forms, see
        :func:`server.stats.agreement.icc`), ``recommended``, ``recommended_why``,
        ``interpretation`` (Koo & Li reading of the recommended ICC's interval), ``sem``,
        ``mdc95``, ``mean_difference``, ``mean_difference_ci``, ``sd_difference``,
        ``limits_of_agreement {lower, upper}``, ``means``/``sds`` per wave, ``scores``
        (``[[first, second], ...]`` per kept respondent), ``score_ids`` (their IDs when given), ``per_item``
        (list with the same statistics per item pair, plus ``item`` and ``item_second``), ``formulas``, ``warnings``.

    Notes
    -----
    SEM = SD_pooled x sqrt(1 - ICC(A,1)) with the pooled SD of the two occasions (Weir 2005,
    de Vet et al. 2006); MDC95 = 1.96 x sqrt(2) x SEM; Bland-Altman limits of agreement = mean
    difference +/- 1.96 SD of the differences, differences taken as second minus first.

    References
    ----------
    Bland, J. M., & Altman, D. G. (1986). Statistical methods for assessing agreement between two
    methods of clinical measurement. The Lancet, 327(8476), 307-310.
    Weir, J. P. (2005). Quantifying test-retest reliability using the intraclass correlation
    coefficient and the SEM. Journal of Strength and Conditioning Research, 19(1), 231-240.
    de Vet, H. C. W., Terwee, C. B., Knol, D. L., & Bouter, L. M. (2006). When to use agreement
    versus reliability measures. Journal of Clinical Epidemiology, 59(10), 1033-1039.
    Koo, T. K., & Li, M. Y. (2016). Journal of Chiropractic Medicine, 15(2), 155-163.
    McGraw, K. O., & Wong, S. P. (1996). Psychological Methods, 1(1), 30-46.
    """
    if score not in ("sum", "mean"):
        raise InputError(f"Unknown score {score!r}; use 'sum' or 'mean'.", code="bad_score",
                         details={"score": score})
    A = np.asarray(first, dtype=float)
    B = np.asarray(second, dtype=float)
    if A.ndim == 1:
        A = A[:, None]
    if B.ndim == 1:
        B = B[:, None]
    if A.ndim != 2 or B.ndim != 2:
        raise InputError("Each wave must be a respondents x items table.", code="bad_shape")
    if A.shape[0] != B.shape[0]:
        raise InputError(f"The two waves have different numbers of matched respondents ({A.shape[0]} and "
                         f"{B.shape[0]}); rows must be matched first.", code="mismatched_rows",
                         details={"n_first": int(A.shape[0]), "n_second": int(B.shape[0])})
    if A.shape[1] == 0 or B.shape[1] == 0:
        raise InputError("No items to score.", code="no_items")
    items = list(items) if items is not None else [f"item{j + 1}" for j in range(A.shape[1])]
    if len(items) != A.shape[1]:
        raise InputError(f"{len(items)} item names were given for {A.shape[1]} columns in the first wave.",
                         code="mismatched_items")
    if items_second is None:
        items_second = items if B.shape[1] == A.shape[1] else [f"item{j + 1}" for j in range(B.shape[1])]
    items_second = list(items_second)
    if len(items_second) != B.shape[1]:
        raise InputError(f"{len(items_second)} item names were given for {B.shape[1]} columns in the second "
                         f"wave.", code="mismatched_items")
    warnings: list[Note] = []
    agg = np.sum if score == "sum" else np.mean
    ta = np.where(np.isnan(A).any(axis=1), np.nan, agg(np.nan_to_num(A), axis=1))
    tb = np.where(np.isnan(B).any(axis=1), np.nan, agg(np.nan_to_num(B), axis=1))
    both = ~(np.isnan(ta) | np.isnan(tb))
    if int(both.sum()) < 3:
        raise InputError(f"Test-retest needs at least three respondents with a complete score in both waves; "
                         f"there are {int(both.sum())}.", code="too_few_matched",
                         details={"n_complete": int(both.sum()), "n_matched": int(A.shape[0])})
    out = _compare(ta, tb, ci=ci)
    if out["n_dropped"]:
        warnings.append(note("retest_incomplete_scores", f"{out['n_dropped']} matched respondent(s) miss at least one "
                             f"item in a wave and have no {score} score there; the total-score results use the "
                             f"{out['n']} complete pairs."))
    if A.shape[1] != B.shape[1]:
        warnings.append(note("forms_unequal_length", f"The forms have different numbers of items ({A.shape[1]} and "
                             f"{B.shape[1]}); absolute agreement of {score} scores is only meaningful on a common "
                             f"metric."))
    score_ids = None
    if ids is not None:
        if len(ids) != A.shape[0]:
            raise InputError(f"{len(ids)} IDs were given for {A.shape[0]} rows.", code="mismatched_rows")
        score_ids = tuple(str(i) for i, keep in zip(ids, both) if keep)
    per_item: list[ItemStability] = []
    if A.shape[1] == B.shape[1]:
        per_item = [ItemStability(**_compare(A[:, j], B[:, j], ci=ci), item=items[j], item_second=items_second[j])
                    for j in range(A.shape[1])]
    else:
        warnings.append(note("per_item_omitted", "Per-item results need the same number of items in both forms; "
                                                 "they are omitted."))
    warnings.extend(out["icc"].warnings)
    return RetestResult(**out, score=score, ci_level=ci, items=tuple(items), items_second=tuple(items_second),
                        scores=tuple((float(x), float(y)) for x, y in zip(ta[both], tb[both])), score_ids=score_ids,
                        per_item=tuple(per_item),
                        formulas=Formulas(sem=SEM_FORMULA, mdc95=MDC_FORMULA, limits_of_agreement=LOA_FORMULA),
                        warnings=tuple(warnings))
