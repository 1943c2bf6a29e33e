"""Agreement between raters or occasions: ICC, kappas, Krippendorff's alpha, percent agreement.

Every coefficient comes back as a frozen dataclass (serialised to JSON at the API edge). A coefficient
that cannot be computed for the data at hand (no variance, a single category, one rater) has
``value: None`` and a ``reason`` sentence saying why, never a silent NaN. Input that cannot be
analysed at all raises :class:`~server.stats.errors.InputError` naming the row, column or value.

Layout of the data everywhere in this module: rows are units (the people, answers or targets that
were rated), columns are raters (or occasions); ``NaN`` (or ``None``) is a missing rating.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats as sps

from .errors import InputError
from .notes import Note, note, unique

ICC_FORMS = ("ICC(1,1)", "ICC(A,1)", "ICC(C,1)", "ICC(1,k)", "ICC(A,k)", "ICC(C,k)")
LEVELS = ("nominal", "ordinal", "interval", "ratio")

ICC_DESCRIPTIONS = {
    "ICC(1,1)": "One-way random effects, single rating (Shrout & Fleiss ICC(1,1)): every unit may be "
                "rated by different raters; rater differences count as error.",
    "ICC(A,1)": "Two-way model, absolute agreement, single rating (Shrout & Fleiss ICC(2,1)): systematic "
                "differences between raters or occasions count as error.",
    "ICC(C,1)": "Two-way model, consistency, single rating (Shrout & Fleiss ICC(3,1)): systematic "
                "differences between raters or occasions are ignored.",
    "ICC(1,k)": "One-way random effects, mean of the k ratings (Shrout & Fleiss ICC(1,k)).",
    "ICC(A,k)": "Two-way model, absolute agreement, mean of the k ratings (Shrout & Fleiss ICC(2,k)).",
    "ICC(C,k)": "Two-way model, consistency, mean of the k ratings (Shrout & Fleiss ICC(3,k)).",
}

LANDIS_KOCH_SOURCE = ("Landis & Koch (1977) bands, a convention rather than a finding: <0 poor, 0-.20 slight, "
                      ".21-.40 fair, .41-.60 moderate, .61-.80 substantial, .81-1 almost perfect")
KRIPPENDORFF_SOURCE = ("Krippendorff (2004) guidance, a convention: alpha >= .800 reliable, .667-.800 tentative "
                       "conclusions only, < .667 unreliable")
KOO_LI_SOURCE = ("Koo & Li (2016) bands applied to the 95% confidence interval: <.50 poor, .50-.75 moderate, "
                 ".75-.90 good, >.90 excellent")

_BOOT = 2000
_CHUNK_CELLS = 2_000_000   # bootstrap weights are drawn in blocks of at most this many cells (16 MB)


def _boot_weights(n: int, n_boot: int, seed: int, width: int | None = None):
    """Blocks of bootstrap weights: row b counts how often each of the n units was drawn in resample b.

    ``width`` is the number of cells each resample needs downstream (default n), which sets the block size.
    """
    rng = np.random.default_rng(seed)
    step = max(1, min(n_boot, _CHUNK_CELLS // max(width or n, n, 1)))
    done = 0
    while done < n_boot:
        size = min(step, n_boot - done)
        yield rng.multinomial(n, np.full(n, 1 / n), size=size).astype(float)
        done += size


def _percentile_ci(reps: np.ndarray, ci: float) -> tuple[float, float] | None:
    reps = reps[np.isfinite(reps)]
    if not reps.size:
        return None
    a = 1 - ci
    return (float(np.quantile(reps, a / 2)), float(np.quantile(reps, 1 - a / 2)))


# --------------------------------------------------------------------------------------------- results
Interval = tuple[float | None, float | None]


@dataclass(frozen=True)
class NotApplicable:
    """A coefficient that does not apply to this table (e.g. Cohen's kappa for three raters), and why."""

    reason: str
    value: None = None
    ci: None = None


@dataclass(frozen=True)
class IccForm:
    """One of the six ICC forms with its F test against 0 and its confidence interval."""

    value: float | None
    ci: Interval | None
    f: float | None
    df1: int | None
    df2: float | None
    p: float | None
    description: str
    reason: str | None


@dataclass(frozen=True)
class IccResult:
    """The six intraclass correlations of a units x raters table (JSON keys ``ICC(1,1)`` ... ``ICC(C,k)``)."""

    icc_1_1: IccForm = field(metadata={"json": "ICC(1,1)"})
    icc_a_1: IccForm = field(metadata={"json": "ICC(A,1)"})
    icc_c_1: IccForm = field(metadata={"json": "ICC(C,1)"})
    icc_1_k: IccForm = field(metadata={"json": "ICC(1,k)"})
    icc_a_k: IccForm = field(metadata={"json": "ICC(A,k)"})
    icc_c_k: IccForm = field(metadata={"json": "ICC(C,k)"})
    n_units: int
    n_raters: int
    n_dropped: int
    recommended: str
    interpretation: str | None
    interpretation_source: str
    reason: str | None
    warnings: tuple[Note, ...]

    def form(self, name: str) -> IccForm:
        """The form named as in :data:`ICC_FORMS`, e.g. ``result.form("ICC(A,1)")``."""
        if name not in _ICC_ATTR:
            raise KeyError(name)
        return getattr(self, _ICC_ATTR[name])


_ICC_ATTR = dict(zip(ICC_FORMS, ("icc_1_1", "icc_a_1", "icc_c_1", "icc_1_k", "icc_a_k", "icc_c_k")))


@dataclass(frozen=True)
class KappaResult:
    """Cohen's kappa or weighted kappa of two raters; the test and interval fields are None when undefined."""

    value: float | None
    ci: Interval | None
    reason: str | None
    n_units: int
    n_dropped: int
    se_method: str
    label_source: str
    se: float | None = None
    se0: float | None = None
    z: float | None = None
    p: float | None = None
    observed_agreement: float | None = None
    expected_agreement: float | None = None
    weights: str | None = None
    categories: tuple | None = None
    label: str | None = None


@dataclass(frozen=True)
class WeightedKappas:
    """Linear and quadratic weighted kappa (each a result or why it does not apply)."""

    linear: KappaResult | NotApplicable
    quadratic: KappaResult | NotApplicable


@dataclass(frozen=True)
class FleissResult:
    """Fleiss' kappa with its z test and bootstrap interval."""

    value: float | None
    ci: Interval | None
    reason: str | None
    n_units: int
    n_raters: int
    n_dropped: int
    n_categories: int
    ci_method: str
    label_source: str
    se0: float | None = None
    z: float | None = None
    p: float | None = None
    label: str | None = None


@dataclass(frozen=True)
class KrippendorffResult:
    """Krippendorff's alpha with its bootstrap interval (``ci_reason`` when no interval could be made)."""

    value: float | None
    ci: Interval | None
    reason: str | None
    level: str
    n_units: int
    n_pairable_units: int
    n_values: int
    ci_method: str
    label_source: str
    label: str | None = None
    ci_reason: str | None = None


@dataclass(frozen=True)
class PercentAgreement:
    """Share of complete units on which every rater gave the same rating."""

    value: float | None
    reason: str | None
    n_agree: int | None
    n_units: int
    n_dropped: int
    ci: None = None


@dataclass(frozen=True)
class Conventions:
    """Where the verbal labels come from."""

    kappa_labels: str
    alpha_labels: str
    icc_labels: str


@dataclass(frozen=True)
class AgreementSummary:
    """Every agreement coefficient that suits a units x raters table at a given level."""

    level: str
    n_units: int
    n_raters: int
    n_complete_units: int
    n_missing: int
    categories: tuple[str, ...] | None
    percent_agreement: PercentAgreement
    cohen_kappa: KappaResult | NotApplicable
    weighted_kappa: WeightedKappas
    fleiss_kappa: FleissResult | NotApplicable
    krippendorff_alpha: KrippendorffResult
    icc: IccResult | NotApplicable
    recommended: str | None
    interpretation: str | None
    conventions: Conventions
    warnings: tuple[Note, ...]
    pairwise_cohen: PairwiseCohen | None = None  # three or more raters only (None with two)


# --------------------------------------------------------------------------------------------- helpers
def _num(x) -> float | None:
    """A finite float, or None (JSON has no NaN or infinity)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _ci_pair(lo, hi) -> Interval | None:
    lo, hi = _num(lo), _num(hi)
    if lo is None and hi is None:
        return None
    return (lo, hi)


def _z(ci: float) -> float:
    if not 0 < ci < 1:
        raise InputError(f"The confidence level must be between 0 and 1 (got {ci}).", code="bad_ci",
                         details={"ci": ci})
    return float(sps.norm.ppf(0.5 + ci / 2))


def _as_matrix(data, *, name: str = "ratings") -> np.ndarray:
    """Units x raters float matrix, NaN for missing; InputError naming the cell that is not a number."""
    try:
        arr = np.asarray(data, dtype=float)
    except (TypeError, ValueError):
        rows = list(data)
        for i, row in enumerate(rows):
            for j, v in enumerate(row):
                if v is None:
                    continue
                try:
                    float(v)
                except (TypeError, ValueError):
                    raise InputError(f"The {name} must be numbers: row {i + 1}, column {j + 1} holds {v!r}.",
                                     code="not_numeric", details={"row": i + 1, "column": j + 1,
                                                                  "value": str(v)}) from None
        raise InputError(f"The {name} are not a rectangular table of numbers.", code="bad_shape") from None
    if arr.ndim != 2:
        raise InputError(f"The {name} must be a table (units in rows, raters in columns); got {arr.ndim} "
                         f"dimension(s).", code="bad_shape", details={"ndim": int(arr.ndim)})
    bad = np.isinf(arr)
    if bad.any():
        i, j = map(int, np.argwhere(bad)[0])
        raise InputError(f"Row {i + 1}, column {j + 1} holds an infinite value.", code="not_finite",
                         details={"row": i + 1, "column": j + 1})
    return arr


# --------------------------------------------------------------------------------------------- labels
def landis_koch_label(value: float | None) -> str | None:
    """Verbal band of a kappa-type coefficient after Landis & Koch (1977).

    These bands are a *convention* the authors offered as "clearly arbitrary" benchmarks, not an
    empirical finding; they are shown because readers expect them.

    Parameters
    ----------
    value : float or None
        A kappa or alpha; None gives None.

    Returns
    -------
    str or None
        ``poor`` (<0), ``slight`` (0-.20), ``fair`` (.21-.40), ``moderate`` (.41-.60),
        ``substantial`` (.61-.80) or ``almost perfect`` (.81-1.00).

    References
    ----------
    Landis, J. R., & Koch, G. G. (1977). The measurement of observer agreement for categorical data.
    Biometrics, 33(1), 159-174.
    """
    if value is None or not math.isfinite(value):
        return None
    if value < 0:
        return "poor"
    for upper, label in ((0.20, "slight"), (0.40, "fair"), (0.60, "moderate"), (0.80, "substantial")):
        if value <= upper:
            return label
    return "almost perfect"


def krippendorff_label(value: float | None) -> str | None:
    """Krippendorff's own reading of alpha (a convention, like every such band).

    Returns ``reliable`` (alpha >= .800), ``tentative`` (.667 <= alpha < .800) or ``unreliable``;
    None for None.

    References
    ----------
    Krippendorff, K. (2004). Content analysis: an introduction to its methodology (2nd ed.).
    Thousand Oaks, CA: Sage.
    """
    if value is None or not math.isfinite(value):
        return None
    if value >= 0.8:
        return "reliable"
    if value >= 0.667:
        return "tentative"
    return "unreliable"


def _koo_li_band(x: float) -> str:
    if x < 0.5:
        return "poor"
    if x < 0.75:
        return "moderate"
    if x <= 0.9:
        return "good"
    return "excellent"


def koo_li_label(ci: Sequence[float | None] | None, value: float | None = None) -> str | None:
    """Verbal reading of an ICC from its confidence interval (Koo & Li 2016).

    Koo and Li advise interpreting the interval, not the point estimate: an ICC whose 95% interval
    runs from .83 to .94 is "good to excellent". Bands: below .50 poor, .50 to .75 moderate, .75 to
    .90 good, above .90 excellent.

    Parameters
    ----------
    ci : [lo, hi] or None
        The confidence interval of the ICC.
    value : float, optional
        Used only when no interval is available (then the label says so).

    Returns
    -------
    str or None
        e.g. ``"good"``, ``"moderate to excellent"``; None when nothing is known.

    References
    ----------
    Koo, T. K., & Li, M. Y. (2016). A guideline of selecting and reporting intraclass correlation
    coefficients for reliability research. Journal of Chiropractic Medicine, 15(2), 155-163.
    """
    if ci is not None and ci[0] is not None and ci[1] is not None:
        lo, hi = _koo_li_band(ci[0]), _koo_li_band(ci[1])
        return lo if lo == hi else f"{lo} to {hi}"
    if value is not None and math.isfinite(value):
        return f"{_koo_li_band(value)} (point estimate only; no interval)"
    return None


# --------------------------------------------------------------------------------------------- ICC
def icc(Y: ArrayLike, *, ci: float = 0.95) -> IccResult:
    """Six intraclass correlations of a units x raters (or units x occasions) table.

    Parameters
    ----------
    Y : array_like, shape (n_units, k)
        Ratings; rows with a missing value are dropped (complete cases) and counted.
    ci : float
        Confidence level of the intervals.

    Returns
    -------
    IccResult
        The six forms (``result.form("ICC(A,1)")``; JSON keys ``ICC(1,1)`` ... ``ICC(C,k)``), each an
        :class:`IccForm` ``{value, ci: (lo, hi), f, df1, df2, p, description, reason}``; plus ``n_units`` (used),
        ``n_raters``, ``n_dropped`` (rows with a missing rating), ``recommended`` (``ICC(A,1)``),
        ``interpretation`` (Koo & Li label of the recommended form's interval),
        ``interpretation_source``, ``reason`` (None, or why no ICC is defined) and ``warnings``.

    Notes
    -----
    From the two-way ANOVA mean squares MSR (units), MSC (raters), MSE (residual) and the one-way
    within-unit MSW:

    ICC(1,1) = (MSR - MSW) / (MSR + (k-1) MSW);
    ICC(A,1) = (MSR - MSE) / (MSR + (k-1) MSE + k (MSC - MSE) / n);
    ICC(C,1) = (MSR - MSE) / (MSR + (k-1) MSE);
    ICC(1,k) = (MSR - MSW) / MSR; ICC(A,k) = (MSR - MSE) / (MSR + (MSC - MSE) / n);
    ICC(C,k) = (MSR - MSE) / MSR.

    The F tests are against an ICC of 0 (F = MSR/MSW or MSR/MSE); the intervals are McGraw & Wong's
    (1996, Tables 7-8) exact F intervals for the one-way and consistency forms and their
    Satterthwaite-approximation interval for absolute agreement. Shrout & Fleiss (1979) call the
    forms ICC(1,1), ICC(2,1), ICC(3,1), ICC(1,k), ICC(2,k), ICC(3,k) in the same order (the
    two-way random and two-way mixed models give the same estimates).

    References
    ----------
    McGraw, K. O., & Wong, S. P. (1996). Forming inferences about some intraclass correlation
    coefficients. Psychological Methods, 1(1), 30-46.
    Shrout, P. E., & Fleiss, J. L. (1979). Intraclass correlations: uses in assessing rater
    reliability. Psychological Bulletin, 86(2), 420-428.
    Koo, T. K., & Li, M. Y. (2016). Journal of Chiropractic Medicine, 15(2), 155-163.
    """
    Y = _as_matrix(Y)
    _z(ci)
    n_all, k = Y.shape
    keep = ~np.isnan(Y).any(axis=1)
    Y = np.asarray(Y[keep])  # (asarray: keeps the type checker on ndarray)
    n = int(Y.shape[0])
    n_dropped = int(n_all - n)
    warnings: list[Note] = []
    if n_dropped:
        warnings.append(note("icc_incomplete_units", f"{n_dropped} unit(s) with a missing rating were left out of "
                                                     f"the ICC (complete cases only); {n} remain."))
    def result(forms: dict[str, IccForm], reason: str | None) -> IccResult:
        rec = forms["ICC(A,1)"]
        interpretation = None if reason else koo_li_label(rec.ci, rec.value)
        return IccResult(**{_ICC_ATTR[f]: forms[f] for f in ICC_FORMS}, n_units=n, n_raters=int(k),
                         n_dropped=n_dropped, recommended="ICC(A,1)", interpretation=interpretation,
                         interpretation_source=KOO_LI_SOURCE, reason=reason, warnings=tuple(warnings))

    def all_undefined(reason: str) -> IccResult:
        return result({form: IccForm(value=None, ci=None, f=None, df1=None, df2=None, p=None,
                                     description=ICC_DESCRIPTIONS[form], reason=reason) for form in ICC_FORMS},
                      reason)

    if k < 2:
        return all_undefined("An ICC needs at least two raters or occasions; there is only one column.")
    if n < 2:
        return all_undefined(f"An ICC needs at least two units rated by every rater; {n} complete unit(s) "
                             f"remain after dropping units with missing ratings.")

    gm = Y.mean()
    sst = float(((Y - gm) ** 2).sum())
    ssr = float(k * ((Y.mean(axis=1) - gm) ** 2).sum())
    ssc = float(n * ((Y.mean(axis=0) - gm) ** 2).sum())
    sse = max(sst - ssr - ssc, 0.0)
    tol = 1e-12 * max(1.0, float((Y ** 2).sum()))
    if sst <= tol:
        return all_undefined(f"Every rating is the same ({Y.flat[0]:g}); with no variance at all an ICC "
                             f"(the share of variance due to units) is undefined.")
    if ssr <= tol:
        return all_undefined("The units do not differ (every unit has the same mean rating), so an ICC, the "
                             "share of variance due to differences between units, is undefined.")
    if sse <= tol:
        sse = 0.0
    df1, dfw, dfe = n - 1, n * (k - 1), (n - 1) * (k - 1)
    msr, msc, mse = ssr / df1, ssc / (k - 1), sse / dfe
    msw = (ssc + sse) / dfw
    a = 1 - ci

    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        v11 = (msr - msw) / (msr + (k - 1) * msw)
        va1 = (msr - mse) / (msr + (k - 1) * mse + k * (msc - mse) / n)
        vc1 = (msr - mse) / (msr + (k - 1) * mse)
        v1k = (msr - msw) / msr
        vak = (msr - mse) / (msr + (msc - mse) / n)
        vck = (msr - mse) / msr
        f1 = msr / msw if msw > 0 else np.inf
        f2 = msr / mse if mse > 0 else np.inf
        p1 = float(sps.f.sf(f1, df1, dfw)) if np.isfinite(f1) else 0.0
        p2 = float(sps.f.sf(f2, df1, dfe)) if np.isfinite(f2) else 0.0
        # one-way and consistency: exact intervals from the F distribution (McGraw & Wong 1996, Table 7)
        f1l = f1 / sps.f.ppf(1 - a / 2, df1, dfw)
        f1u = f1 * sps.f.ppf(1 - a / 2, dfw, df1)
        f3l = f2 / sps.f.ppf(1 - a / 2, df1, dfe)
        f3u = f2 * sps.f.ppf(1 - a / 2, dfe, df1)
        ci11 = ((f1l - 1) / (f1l + k - 1), (f1u - 1) / (f1u + k - 1))
        ci1k = (1 - 1 / f1l, 1 - 1 / f1u)
        cic1 = ((f3l - 1) / (f3l + k - 1), (f3u - 1) / (f3u + k - 1))
        cick = (1 - 1 / f3l, 1 - 1 / f3u)
        # absolute agreement: Satterthwaite degrees of freedom (McGraw & Wong 1996, Table 8, case 2A)
        if mse > 0:
            fj = msc / mse
            vn = dfe * (k * va1 * fj + n * (1 + (k - 1) * va1) - k * va1) ** 2
            vd = df1 * k ** 2 * va1 ** 2 * fj ** 2 + (n * (1 + (k - 1) * va1) - k * va1) ** 2
            v = vn / vd
            fu = sps.f.ppf(1 - a / 2, df1, v)
            fl = sps.f.ppf(1 - a / 2, v, df1)
            la1 = n * (msr - fu * mse) / (fu * (k * msc + (k * n - k - n) * mse) + n * msr)
            ua1 = n * (fl * msr - mse) / (k * msc + (k * n - k - n) * mse + n * fl * msr)
            cia1 = (la1, ua1)
            ciak = (la1 * k / (1 + la1 * (k - 1)), ua1 * k / (1 + ua1 * (k - 1)))
        else:
            cia1 = ciak = (np.nan, np.nan)
    if msw == 0:
        ci11 = ci1k = (1.0, 1.0)
    if mse == 0:
        cic1 = cick = (1.0, 1.0)
        if msc == 0:
            cia1 = ciak = (1.0, 1.0)
        warnings.append(note("icc_no_residual", "There is no residual variance (the raters' scores differ only by "
                                                "constants), so the F statistics are infinite and the consistency "
                                                "intervals collapse to 1."))

    def entry(form, value, interval, fval, d1, d2, p) -> IccForm:
        return IccForm(value=_num(value), ci=_ci_pair(*interval), f=_num(fval), df1=int(d1),
                       df2=_num(d2) if not float(d2).is_integer() else int(d2), p=_num(p),
                       description=ICC_DESCRIPTIONS[form], reason=None)

    out = {
        "ICC(1,1)": entry("ICC(1,1)", v11, ci11, f1, df1, dfw, p1),
        "ICC(A,1)": entry("ICC(A,1)", va1, cia1, f2, df1, dfe, p2),
        "ICC(C,1)": entry("ICC(C,1)", vc1, cic1, f2, df1, dfe, p2),
        "ICC(1,k)": entry("ICC(1,k)", v1k, ci1k, f1, df1, dfw, p1),
        "ICC(A,k)": entry("ICC(A,k)", vak, ciak, f2, df1, dfe, p2),
        "ICC(C,k)": entry("ICC(C,k)", vck, cick, f2, df1, dfe, p2),
    }
    for form in ICC_FORMS:
        value = out[form].value
        if value is not None and value < 0:
            warnings.append(note("icc_negative", f"{form} is negative ({value:.3f}): the ratings vary more within "
                                                 f"units than between them; read it as no reliability."))
    return result(out, None)


# --------------------------------------------------------------------------------------------- kappas
def _pairs(rater1, rater2) -> tuple[np.ndarray, np.ndarray, int]:
    a = np.asarray(rater1, dtype=object).ravel()
    b = np.asarray(rater2, dtype=object).ravel()
    if a.shape != b.shape:
        raise InputError(f"The two raters rated different numbers of units ({a.size} and {b.size}).",
                         code="mismatched_columns", details={"n_first": int(a.size), "n_second": int(b.size)})

    def missing(v):
        return v is None or (isinstance(v, float) and math.isnan(v)) or (isinstance(v, str) and not v.strip())

    keep = np.array([not (missing(x) or missing(y)) for x, y in zip(a, b)], dtype=bool)
    return a[keep], b[keep], int((~keep).sum())


def _category_values(cats: list) -> np.ndarray | None:
    try:
        return np.array([float(c) for c in cats])
    except (TypeError, ValueError):
        return None


def _kappa_from_table(table: np.ndarray, w: np.ndarray, ci: float) -> dict[str, Any] | None:
    """Kappa with agreement weights w (1 on the diagonal) and the Fleiss-Cohen-Everitt (1969) SEs."""
    n = float(table.sum())
    p = table / n
    pr, pc = p.sum(axis=1), p.sum(axis=0)
    po = float((w * p).sum())
    pe = float((w * np.outer(pr, pc)).sum())
    if pe >= 1 - 1e-12:
        return None
    kappa = (po - pe) / (1 - pe)
    wr = w @ pc          # weighted mean over the second rater's margin, per row category
    wc = pr @ w          # per column category
    fac = n * (1 - pe) ** 2
    var = ((p * (w - (wr[:, None] + wc[None, :]) * (1 - kappa)) ** 2).sum() - (kappa - pe * (1 - kappa)) ** 2) / fac
    var0 = ((np.outer(pr, pc) * (w - (wr[:, None] + wc[None, :])) ** 2).sum() - pe ** 2) / fac
    se = math.sqrt(max(var, 0.0))
    se0 = math.sqrt(max(var0, 0.0))
    z = _z(ci)
    zval = kappa / se0 if se0 > 0 else None
    return {"value": float(kappa), "se": se,
            "ci": (max(-1.0, kappa - z * se), min(1.0, kappa + z * se)),
            "se0": se0, "z": _num(zval),
            "p": _num(2 * sps.norm.sf(abs(zval))) if zval is not None else None,
            "observed_agreement": po, "expected_agreement": pe}


def _kappa(rater1, rater2, *, weights: str | None, ci: float) -> KappaResult:
    a, b, dropped = _pairs(rater1, rater2)
    _z(ci)
    n = int(a.size)
    note: dict[str, Any] = {
        "n_units": n, "n_dropped": dropped, "weights": weights,
        "se_method": "asymptotic standard error of Fleiss, Cohen & Everitt (1969), as in SAS PROC FREQ; "
                     "interval = kappa +/- z x SE, clipped to [-1, 1]; p from the SE under kappa = 0",
        "label_source": LANDIS_KOCH_SOURCE}
    if n < 2:
        return KappaResult(value=None, ci=None,
                           reason=f"Kappa needs at least two units rated by both raters; there are {n}.", **note)
    cats = sorted(set(a.tolist()) | set(b.tolist()), key=lambda c: (isinstance(c, str), c))
    if len(cats) < 2:
        return KappaResult(value=None, ci=None, reason=f"Both raters used only one category ({cats[0]!r}) for "
                           f"every unit, so agreement expected by chance is 1 and kappa is undefined.",
                           categories=(cats[0],), **note)
    index = {c: i for i, c in enumerate(cats)}
    c = len(cats)
    table = np.zeros((c, c))
    for x, y in zip(a, b):
        table[index[x], index[y]] += 1
    if weights is None:
        w = np.eye(c)
    else:
        vals = _category_values(cats)
        if vals is None:
            raise InputError("Weighted kappa needs numeric, ordered categories; the ratings include text "
                             f"such as {next(x for x in cats if isinstance(x, str))!r}.", code="not_numeric",
                             details={"categories": [str(x) for x in cats]})
        span = vals.max() - vals.min()
        dist = np.abs(vals[:, None] - vals[None, :]) / span
        if weights == "linear":
            w = 1 - dist
        elif weights == "quadratic":
            w = 1 - dist ** 2
        else:
            raise InputError(f"Unknown kappa weights {weights!r}; use 'linear' or 'quadratic'.",
                             code="bad_weights", details={"weights": weights})
    res = _kappa_from_table(table, w, ci)
    if res is None:
        return KappaResult(value=None, ci=None, reason="Both raters put every unit in the same single category, "
                           "so agreement expected by chance is 1 and kappa is undefined.", **note)
    return KappaResult(**res, **note, reason=None,
                       categories=tuple(c if isinstance(c, str) else float(c) for c in cats),
                       label=landis_koch_label(res["value"]))


def cohen_kappa(rater1: Sequence[Any] | np.ndarray, rater2: Sequence[Any] | np.ndarray, *,
                ci: float = 0.95) -> KappaResult:
    """Cohen's (1960) kappa for two raters.

    Parameters
    ----------
    rater1, rater2 : sequence
        One rating per unit (numbers or category labels); units with a missing rating are dropped.
    ci : float
        Confidence level.

    Returns
    -------
    KappaResult
        ``value, se, ci, se0, z, p, observed_agreement, expected_agreement, n_units, n_dropped,
        categories, label (Landis & Koch), label_source, se_method, reason``.

    Notes
    -----
    kappa = (p_o - p_e) / (1 - p_e). The standard error is the large-sample one of Fleiss, Cohen &
    Everitt (1969); the p value tests kappa = 0 with the standard error under that hypothesis.

    References
    ----------
    Cohen, J. (1960). A coefficient of agreement for nominal scales. Educational and Psychological
    Measurement, 20(1), 37-46.
    Fleiss, J. L., Cohen, J., & Everitt, B. S. (1969). Large sample standard errors of kappa and
    weighted kappa. Psychological Bulletin, 72(5), 323-327.
    """
    return _kappa(rater1, rater2, weights=None, ci=ci)


def weighted_kappa(rater1: Sequence[Any] | np.ndarray, rater2: Sequence[Any] | np.ndarray, *,
                   weights: str = "linear", ci: float = 0.95) -> KappaResult:
    """Cohen's (1968) weighted kappa with linear or quadratic agreement weights.

    Parameters
    ----------
    rater1, rater2 : sequence of numbers
        Ordered numeric ratings; units with a missing rating are dropped.
    weights : {"linear", "quadratic"}
        Agreement weight 1 - |x - y| / (max - min), or 1 - (x - y)^2 / (max - min)^2, where x, y
        are the category values and max, min the largest and smallest category used.
    ci : float
        Confidence level.

    Returns
    -------
    KappaResult
        As :func:`cohen_kappa`, with ``weights``.

    Notes
    -----
    kappa_w = 1 - sum(v_ij p_ij) / sum(v_ij p_i. p_.j) with disagreement weights v = 1 - w. The
    weights use the category values, so with equally spaced codes they equal the usual
    Cicchetti-Allison (linear) and Fleiss-Cohen (quadratic) weights. Quadratic weighted kappa
    approximates the ICC (Fleiss & Cohen 1973).

    References
    ----------
    Cohen, J. (1968). Weighted kappa. Psychological Bulletin, 70(4), 213-220.
    Fleiss, J. L., Cohen, J., & Everitt, B. S. (1969). Psychological Bulletin, 72(5), 323-327.
    """
    if weights not in ("linear", "quadratic"):
        raise InputError(f"Unknown kappa weights {weights!r}; use 'linear' or 'quadratic'.", code="bad_weights",
                         details={"weights": weights})
    return _kappa(rater1, rater2, weights=weights, ci=ci)


@dataclass(frozen=True)
class PairKappa:
    """Cohen's kappa (or weighted kappa) of one pair of raters."""

    raters: tuple[str, str]
    kappa: float | None
    se: float | None
    ci: tuple[float, float] | None
    n_units: int
    reason: str | None



@dataclass(frozen=True)
class PairwiseKappaResult:
    """Cohen's kappa for every pair of raters and their mean (Light's kappa when unweighted)."""

    pairs: tuple[PairKappa, ...]
    mean: float | None
    weights: str | None
    n_raters: int
    n_units: int
    mean_name: str
    warnings: tuple[Note, ...] = ()


@dataclass(frozen=True)
class PairwiseCohen:
    """Pairwise Cohen's kappas of three or more raters: unweighted, and linear/quadratic weighted when ordered."""

    kappa: PairwiseKappaResult
    linear: PairwiseKappaResult | NotApplicable
    quadratic: PairwiseKappaResult | NotApplicable


def _is_missing(v) -> bool:
    return v is None or (isinstance(v, float) and math.isnan(v)) or (isinstance(v, str) and not v.strip())


def pairwise_cohen_kappa(ratings: Sequence[Sequence[Any]] | np.ndarray, *, weights: str | None = None,
                         raters: Sequence[str] | None = None,
                         ci: float = 0.95) -> PairwiseKappaResult:
    """Cohen's kappa for every pair of raters, and their mean (Light's kappa).

    Parameters
    ----------
    ratings : array_like, shape (units, raters)
        One column per rater (at least two); numbers or category labels, None/NaN/"" missing. Units with a
        missing rating from any rater are left out, so every pair rests on the same units.
    weights : {None, "linear", "quadratic"}
        None: Cohen's (1960) kappa. "linear"/"quadratic": Cohen's (1968) weighted kappa with the weights
        of :func:`weighted_kappa` (built from the category values; numeric ratings only).
    raters : sequence of str, optional
        Rater labels (default "rater 1", ...).
    ci : float
        Confidence level of each pair's interval (Fleiss, Cohen & Everitt 1969 standard error).

    Returns
    -------
    PairwiseKappaResult
        ``pairs`` in the order (1, 2), (1, 3), ..., (2, 3), ...; ``mean`` over the pairs whose kappa is
        defined.

    Notes
    -----
    Light's kappa is the arithmetic mean of the :math:`r(r-1)/2` pairwise Cohen's kappas,
    :math:`\\bar\\kappa = \\frac{2}{r(r-1)}\\sum_{a<b}\\kappa_{ab}`. With weights the mean of the
    pairwise weighted kappas is reported. Each pair's categories are those either rater of the pair used;
    weighted kappa uses category values, so it equals the position-based weights of scikit-learn when the
    codes are equally spaced and both raters of the pair use the lowest and highest category.

    References
    ----------
    Cohen, J. (1960). Educational and Psychological Measurement, 20(1), 37-46.
    Cohen, J. (1968). Weighted kappa. Psychological Bulletin, 70(4), 213-220.
    Light, R. J. (1971). Measures of response agreement for qualitative data: Some generalizations and
    alternatives. Psychological Bulletin, 76(5), 365-377.
    Conger, A. J. (1980). Integration and generalization of kappas for multiple raters. Psychological
    Bulletin, 88(2), 322-328.
    """
    if weights not in (None, "linear", "quadratic"):
        raise InputError(f"Unknown kappa weights {weights!r}; use None, 'linear' or 'quadratic'.",
                         code="bad_weights", details={"weights": str(weights)})
    _z(ci)
    try:
        Y = np.array([list(r) for r in ratings], dtype=object)
    except (TypeError, ValueError):
        raise InputError("The ratings must be a table: one row per unit, one column per rater.",
                         code="bad_shape") from None
    if Y.ndim != 2:
        raise InputError("The ratings must be a rectangular table: one row per unit, one column per rater.",
                         code="bad_shape")
    r = Y.shape[1]
    if r < 2:
        raise InputError(f"Pairwise kappa needs at least two raters (columns); the table has {r}.",
                         code="single_rater", details={"n_raters": int(r)})
    labels = [f"rater {j + 1}" for j in range(r)] if raters is None else [str(x) for x in raters]
    if len(labels) != r:
        raise InputError(f"{len(labels)} rater names were given for {r} columns.", code="bad_names",
                         details={"names": len(labels), "raters": int(r)})
    complete = np.array([not any(_is_missing(v) for v in row) for row in Y], dtype=bool)
    Yc = Y[complete]
    warnings: list[Note] = []
    if (~complete).any():
        warnings.append(note("missing_ratings", f"{int((~complete).sum())} unit(s) with a missing rating were left "
                                                f"out; every pair uses the {int(complete.sum())} unit(s) rated by all "
                                                f"raters."))
    pairs = []
    for a in range(r):
        for b in range(a + 1, r):
            res = _kappa(Yc[:, a], Yc[:, b], weights=weights, ci=ci)
            lo, hi = res.ci if res.ci is not None else (None, None)
            pairs.append(PairKappa(raters=(labels[a], labels[b]), kappa=_num(res.value), se=_num(res.se),
                                   ci=None if lo is None or hi is None else (float(lo), float(hi)),
                                   n_units=int(res.n_units), reason=res.reason))
            if res.value is None:
                warnings.append(note("kappa_undefined", f"Kappa of {labels[a]} and {labels[b]} is undefined: "
                                                        f"{res.reason}", (labels[a], labels[b])))
    vals = [p.kappa for p in pairs if p.kappa is not None]
    mean = float(np.mean(vals)) if vals else None
    name = ("Light's kappa (mean of the pairwise Cohen's kappas; Light 1971)" if weights is None else
            f"mean of the pairwise {weights} weighted kappas")
    return PairwiseKappaResult(pairs=tuple(pairs), mean=mean, weights=weights, n_raters=int(r),
                               n_units=int(complete.sum()), mean_name=name, warnings=tuple(warnings))


def _fleiss_from_counts(counts: np.ndarray) -> float:
    N, _ = counts.shape
    m = counts.sum(axis=1)[0]
    pj = counts.sum(axis=0) / (N * m)
    Pi = ((counts ** 2).sum(axis=1) - m) / (m * (m - 1))
    pe = float((pj ** 2).sum())
    return (Pi.mean() - pe) / (1 - pe)


def fleiss_kappa(data: Sequence[Sequence[Any]] | np.ndarray, *, counts: bool = False, ci: float = 0.95,
                 n_boot: int = _BOOT,
                 seed: int = 0) -> FleissResult:
    """Fleiss' (1971) kappa for a fixed number of raters per unit.

    Parameters
    ----------
    data : array_like
        Units x raters ratings (numbers or labels; units missing any rating are dropped), or, with
        ``counts=True``, a units x categories table of how many raters chose each category (every row
        the same total).
    counts : bool
        Whether ``data`` is already a counts table.
    ci : float
        Confidence level of the bootstrap interval.
    n_boot, seed : int
        Bootstrap resamples of units and the seed (fixed, so the interval is reproducible).

    Returns
    -------
    FleissResult
        ``value, ci, ci_method, se0, z, p, n_units, n_raters, n_dropped, n_categories, label,
        label_source, reason``.

    Notes
    -----
    With N units, m raters, n_ij raters putting unit i in category j, p_j = sum_i n_ij / (N m),
    P_i = (sum_j n_ij^2 - m) / (m (m - 1)): kappa = (mean P_i - sum p_j^2) / (1 - sum p_j^2).
    The standard error under kappa = 0 (Fleiss, Nee & Landis 1979) gives the z test; it is not
    valid for an interval, so the interval is a percentile bootstrap over units.

    References
    ----------
    Fleiss, J. L. (1971). Measuring nominal scale agreement among many raters. Psychological
    Bulletin, 76(5), 378-382.
    Fleiss, J. L., Nee, J. C. M., & Landis, J. R. (1979). Large sample variance of kappa in the case
    of different sets of raters. Psychological Bulletin, 86(5), 974-977.
    """
    _z(ci)
    n_dropped = 0
    if counts:
        table = _as_matrix(data, name="counts")
        if np.isnan(table).any() or (table < 0).any():
            raise InputError("A counts table must hold non-negative counts with nothing missing.",
                             code="bad_counts")
        totals = table.sum(axis=1)
        if not np.allclose(totals, totals[0]):
            i = int(np.argmax(~np.isclose(totals, totals[0])))
            raise InputError(f"Every unit needs the same number of ratings; row {i + 1} has {totals[i]:g} "
                             f"and row 1 has {totals[0]:g}.", code="unequal_raters",
                             details={"row": i + 1})
        m = round(float(totals[0])) if table.size else 0
    else:
        arr = np.asarray(data, dtype=object)
        if arr.ndim != 2:
            raise InputError("The ratings must be a units x raters table.", code="bad_shape")
        miss = np.vectorize(lambda v: v is None or (isinstance(v, float) and math.isnan(v)), otypes=[bool])(arr)
        keep = ~miss.any(axis=1)
        n_dropped = int((~keep).sum())
        arr = arr[keep]
        m = int(arr.shape[1])
        cats = sorted(set(arr.ravel().tolist()), key=lambda c: (isinstance(c, str), c))
        index = {c: i for i, c in enumerate(cats)}
        table = np.zeros((arr.shape[0], max(len(cats), 1)))
        for i, row in enumerate(arr):
            for v in row:
                table[i, index[v]] += 1
    N = int(table.shape[0])
    info: dict[str, Any] = {
        "n_units": N, "n_raters": m, "n_dropped": n_dropped, "n_categories": int((table.sum(axis=0) > 0).sum()),
        "ci_method": f"percentile bootstrap over units ({n_boot} resamples, seed {seed})",
        "label_source": LANDIS_KOCH_SOURCE}
    if m < 2:
        return FleissResult(value=None, ci=None, reason="Fleiss' kappa needs at least two raters per unit.", **info)
    if N < 2:
        return FleissResult(value=None, ci=None, reason=f"Fleiss' kappa needs at least two units rated by every "
                                                        f"rater; there are {N}.", **info)
    pj = table.sum(axis=0) / (N * m)
    pe = float((pj ** 2).sum())
    if pe >= 1 - 1e-12:
        return FleissResult(value=None, ci=None, reason="Every rating falls in one category, so agreement expected "
                                                        "by chance is 1 and Fleiss' kappa is undefined.", **info)
    kappa = _fleiss_from_counts(table)
    pq = pj * (1 - pj)
    spq = float(pq.sum())
    var0 = 2 / (N * m * (m - 1)) * (spq ** 2 - float((pq * (1 - 2 * pj)).sum())) / spq ** 2
    se0 = math.sqrt(max(var0, 0.0))
    zval = kappa / se0 if se0 > 0 else None
    # bootstrap: resample units with replacement (weights = multinomial counts), vectorised
    Pi = ((table ** 2).sum(axis=1) - m) / (m * (m - 1))
    reps = []
    for W in _boot_weights(N, n_boot, seed):
        Pbar = W @ Pi / N
        pjb = W @ table / (N * m)
        peb = (pjb ** 2).sum(axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            reps.append((Pbar - peb) / (1 - peb))
    interval = _percentile_ci(np.concatenate(reps), ci)
    return FleissResult(value=float(kappa), ci=interval, reason=None, se0=se0, z=_num(zval),
                        p=_num(2 * sps.norm.sf(abs(zval))) if zval is not None else None,
                        label=landis_koch_label(kappa), **info)


# --------------------------------------------------------------------------------------------- Krippendorff
def _kripp_distance(values: np.ndarray, nv: np.ndarray, level: str) -> np.ndarray:
    """Squared difference function(s) delta^2; nv may be (V,) or (B, V) for bootstrap replicates."""
    c, k = values[:, None], values[None, :]
    if level == "nominal":
        return (c != k).astype(float)
    if level == "interval":
        return (c - k) ** 2
    if level == "ratio":
        s = c + k
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(s != 0, ((c - k) / np.where(s != 0, s, 1)) ** 2, 0.0)
    # ordinal: (sum_{g=c..k} n_g - (n_c + n_k) / 2)^2
    cs = np.cumsum(nv, axis=-1)
    V = values.size
    lo = np.minimum(np.arange(V)[:, None], np.arange(V)[None, :])
    hi = np.maximum(np.arange(V)[:, None], np.arange(V)[None, :])
    before = np.concatenate([np.zeros(nv.shape[:-1] + (1,)), cs], axis=-1)  # before[..., i] = sum_{g<i} n_g
    between = before[..., hi + 1] - before[..., lo]
    return (between - (nv[..., :, None] + nv[..., None, :]) / 2) ** 2


def krippendorff_alpha(data: Sequence[Sequence[Any]] | np.ndarray, level: str = "nominal", *,
                       ci: float = 0.95, n_boot: int = _BOOT,
                       seed: int = 0) -> KrippendorffResult:
    """Krippendorff's alpha for any number of raters, missing ratings allowed.

    Parameters
    ----------
    data : array_like, shape (n_units, n_raters)
        Numeric ratings (code text categories as numbers first, see :func:`agreement_summary`);
        NaN = missing. Units with fewer than two ratings are not pairable and add nothing.
    level : {"nominal", "ordinal", "interval", "ratio"}
        Level of measurement, which picks the difference function.
    ci : float
        Confidence level of the bootstrap interval.
    n_boot, seed : int
        Bootstrap resamples of units and their seed.

    Returns
    -------
    KrippendorffResult
        ``value, ci, ci_method, level, n_units, n_pairable_units, n_values (pairable values),
        label (Krippendorff's reliable/tentative/unreliable), label_source, reason``, and ``ci_reason``
        when no interval could be computed.

    Notes
    -----
    alpha = 1 - D_o / D_e = 1 - (n - 1) sum_ck o_ck d_ck / sum_ck n_c n_k d_ck, where o is the
    coincidence matrix (each pair of values within unit u counts 1 / (m_u - 1)), n_c its margins and
    n the number of pairable values. d_ck: nominal 0/1; ordinal (sum_{g=c}^{k} n_g - (n_c + n_k)/2)^2;
    interval (c - k)^2; ratio ((c - k) / (c + k))^2 (Krippendorff 2011). The interval is a plain
    percentile bootstrap over units, not Hayes & Krippendorff's (2007) algorithm.

    References
    ----------
    Krippendorff, K. (2011). Computing Krippendorff's alpha-reliability. Annenberg School for
    Communication, University of Pennsylvania. https://repository.upenn.edu/asc_papers/43
    Hayes, A. F., & Krippendorff, K. (2007). Answering the call for a standard reliability measure
    for coding data. Communication Methods and Measures, 1(1), 77-89.
    """
    if level not in LEVELS:
        raise InputError(f"Unknown level of measurement {level!r}; use one of {', '.join(LEVELS)}.",
                         code="bad_level", details={"level": level})
    _z(ci)
    Y = _as_matrix(data)
    if level == "ratio" and (Y[~np.isnan(Y)] < 0).any():
        i, j = map(int, np.argwhere(Y < 0)[0])
        raise InputError(f"Ratio data cannot be negative: row {i + 1}, column {j + 1} holds {Y[i, j]:g}.",
                         code="bad_value", details={"row": i + 1, "column": j + 1, "value": float(Y[i, j])})
    m_u = (~np.isnan(Y)).sum(axis=1)
    pairable = m_u >= 2
    P = Y[pairable]
    info: dict[str, Any] = {"level": level, "n_units": int(Y.shape[0]), "n_pairable_units": int(pairable.sum()),
                            "n_values": int(m_u[pairable].sum()),
                            "ci_method": f"percentile bootstrap over units ({n_boot} resamples, seed {seed})",
                            "label_source": KRIPPENDORFF_SOURCE}
    if Y.shape[1] < 2:
        return KrippendorffResult(value=None, ci=None, reason="Krippendorff's alpha needs at least two raters.",
                                  **info)
    if P.shape[0] == 0:
        return KrippendorffResult(value=None, ci=None, reason="No unit was rated by two or more raters, so there "
                                                              "are no pairs to compare.", **info)
    values = np.unique(P[~np.isnan(P)])
    if values.size < 2:
        return KrippendorffResult(value=None, ci=None, reason=f"Every pairable rating is {values[0]:g}: with one "
                                  f"value there is no expected disagreement and alpha is undefined.", **info)
    V = values.size
    U = P.shape[0]
    cnt = np.zeros((U, V))
    rows, cols = np.nonzero(~np.isnan(P))
    np.add.at(cnt, (rows, np.searchsorted(values, P[rows, cols])), 1)
    inv = 1 / (cnt.sum(axis=1) - 1)                       # 1 / (m_u - 1)
    # coincidences o_ck = sum_u (n_uc n_uk - [c = k] n_uc) / (m_u - 1); margins n_c = sum_u n_uc
    o = (cnt * inv[:, None]).T @ cnt - np.diag(inv @ cnt)
    nv = cnt.sum(axis=0)

    def alpha_of(o_: np.ndarray, nv_: np.ndarray) -> np.ndarray:
        d = _kripp_distance(values, nv_, level)
        n = nv_.sum(axis=-1)
        # expected coincidences e_ck = n_c (n_k - [c = k]) / (n - 1); d_cc = 0, so the diagonal drops out
        de = (nv_[..., :, None] * nv_[..., None, :] * d).sum(axis=(-2, -1)) / (n - 1)
        with np.errstate(divide="ignore", invalid="ignore"):
            return 1 - (o_ * d).sum(axis=(-2, -1)) / de

    value = float(alpha_of(o, nv))
    reps = []
    ci_note = None
    if level != "ordinal":
        # the difference function is fixed, so each unit's observed disagreement is one number
        d = _kripp_distance(values, nv, level)
        do_u = ((cnt @ d) * cnt).sum(axis=1) * inv
        for W in _boot_weights(U, n_boot, seed):
            nb = W @ cnt
            de = ((nb @ d) * nb).sum(axis=1) / (nb.sum(axis=1) - 1)
            with np.errstate(divide="ignore", invalid="ignore"):
                reps.append(1 - (W @ do_u) / de)
    elif V <= 60:
        # ordinal distances depend on the margins, so each resample needs its own coincidence matrix
        for W in _boot_weights(U, n_boot, seed, width=4 * V * V):
            ob = np.einsum("bu,uc,uk->bck", W * inv, cnt, cnt, optimize=True)
            ob -= (W @ (cnt * inv[:, None]))[:, :, None] * np.eye(V)
            reps.append(alpha_of(ob, W @ cnt))
    else:
        ci_note = f"No interval: ordinal data with {V} distinct values are too many for the bootstrap."
    interval = _percentile_ci(np.concatenate(reps), ci) if reps else None
    return KrippendorffResult(value=value, ci=interval, reason=None, label=krippendorff_label(value),
                              ci_reason=ci_note, **info)


# --------------------------------------------------------------------------------------------- percent
def percent_agreement(data: Sequence[Sequence[Any]] | np.ndarray) -> PercentAgreement:
    """Share of units on which all raters gave the same rating.

    Parameters
    ----------
    data : array_like, shape (n_units, n_raters)
        Ratings (numbers or labels; None/NaN missing). Only units rated by every rater count.

    Returns
    -------
    PercentAgreement
        ``value, n_agree, n_units (complete units), n_dropped, reason``.

    Notes
    -----
    Agreements divided by the number of possible agreements (common practice); it ignores
    agreement expected by chance, which is why kappa and alpha are reported beside it.
    """
    arr = np.asarray(data, dtype=object)
    if arr.ndim != 2:
        raise InputError("The ratings must be a units x raters table.", code="bad_shape")
    miss = np.vectorize(lambda v: v is None or (isinstance(v, float) and math.isnan(v)), otypes=[bool])(arr) \
        if arr.size else np.zeros(arr.shape, bool)
    keep = ~miss.any(axis=1)
    comp = arr[keep]
    info: dict[str, Any] = {"n_units": int(comp.shape[0]), "n_dropped": int((~keep).sum())}
    if arr.shape[1] < 2:
        return PercentAgreement(value=None, reason="Agreement needs at least two raters.", n_agree=None, **info)
    if comp.shape[0] == 0:
        return PercentAgreement(value=None, reason="No unit was rated by every rater.", n_agree=None, **info)
    agree = int(sum(all(v == row[0] for v in row[1:]) for row in comp))
    return PercentAgreement(value=agree / comp.shape[0], reason=None, n_agree=agree, **info)


# --------------------------------------------------------------------------------------------- summary
_MISSING_TEXT = {"", "na", "n/a", "nan", "null", "none", "."}


def _parse_ratings(ratings, level: str) -> tuple[np.ndarray, list | None]:
    """Validate a list of rows into a float matrix (codes for text categories) and the category labels."""
    if isinstance(ratings, np.ndarray):
        rows = ratings.tolist()
    else:
        try:
            rows = [list(r) for r in ratings]
        except TypeError:
            raise InputError("The ratings must be a list of rows (one per unit), each a list with one rating "
                             "per rater.", code="bad_shape") from None
    if not rows:
        raise InputError("No ratings were given.", code="empty")
    width = len(rows[0])
    cells: list[list] = []
    has_text = False
    for i, row in enumerate(rows):
        if len(row) != width:
            raise InputError(f"Row {i + 1} has {len(row)} rating(s) but row 1 has {width}; every unit needs "
                             f"one column per rater (use null for a missing rating).", code="mismatched_columns",
                             details={"row": i + 1, "expected": width, "found": len(row)})
        out: list[float | str | None] = []
        for j, v in enumerate(row):
            if v is None or (isinstance(v, float) and math.isnan(v)):
                out.append(None)
            elif isinstance(v, bool):
                raise InputError(f"Row {i + 1}, column {j + 1} holds {v!r}; give ratings as numbers or "
                                 f"category labels.", code="bad_value", details={"row": i + 1, "column": j + 1})
            elif isinstance(v, (int, float, np.integer, np.floating)):
                if not math.isfinite(float(v)):
                    raise InputError(f"Row {i + 1}, column {j + 1} holds an infinite value.", code="not_finite",
                                     details={"row": i + 1, "column": j + 1})
                out.append(float(v))
            elif isinstance(v, str):
                s = v.strip()
                if s.lower() in _MISSING_TEXT:
                    out.append(None)
                    continue
                try:
                    x = float(s)
                    if not math.isfinite(x):
                        raise ValueError
                    out.append(x)
                except ValueError:
                    if level != "nominal":
                        raise InputError(f"Row {i + 1}, column {j + 1} holds the text {s!r}, but {level} "
                                         f"ratings must be numbers (only nominal ratings may be text labels).",
                                         code="not_numeric",
                                         details={"row": i + 1, "column": j + 1, "value": s}) from None
                    has_text = True
                    out.append(s)
            else:
                raise InputError(f"Row {i + 1}, column {j + 1} holds a {type(v).__name__}; give a number, a "
                                 f"label or null.", code="bad_value", details={"row": i + 1, "column": j + 1})
        cells.append(out)
    if not has_text:
        return np.array([[np.nan if v is None else v for v in r] for r in cells], dtype=float), None
    labels = sorted({str(v) if isinstance(v, str) else f"{v:g}" for r in cells for v in r if v is not None})
    code = {lab: float(i) for i, lab in enumerate(labels)}
    mat = np.array([[np.nan if v is None else code[v if isinstance(v, str) else f"{v:g}"] for v in r]
                    for r in cells], dtype=float)
    return mat, labels


def _objects(Y: np.ndarray) -> np.ndarray:
    obj = Y.astype(object)
    obj[np.isnan(Y)] = None
    return obj


def _pairwise_cohen(obj: np.ndarray, level: str, *, ci: float, raters: Sequence[str] | None) -> PairwiseCohen:
    """Pairwise Cohen's kappas (labels as rated) and, above the nominal level, weighted kappas (numbers)."""
    if level == "nominal":
        why = NotApplicable("Weighted kappa needs ordered categories; nominal categories have no order.")
        return PairwiseCohen(pairwise_cohen_kappa(obj, raters=raters, ci=ci), why, why)
    return PairwiseCohen(pairwise_cohen_kappa(obj, raters=raters, ci=ci),
                         *(pairwise_cohen_kappa(obj, weights=w, raters=raters, ci=ci)
                           for w in ("linear", "quadratic")))


def agreement_summary(ratings: Sequence[Sequence[Any]] | np.ndarray, level: str = "nominal", *,
                      ci: float = 0.95, raters: Sequence[str] | None = None) -> AgreementSummary:
    """Every agreement coefficient that suits a units x raters table at a given level.

    Parameters
    ----------
    ratings : sequence of rows
        Rows are units, columns raters; None/NaN/"" is missing. Nominal ratings may be text labels;
        ordinal, interval and ratio ratings must be numbers.
    level : {"nominal", "ordinal", "interval", "ratio"}
    ci : float
        Confidence level.
    raters : sequence of str, optional
        Rater names for ``pairwise_cohen`` (default "rater 1", "rater 2", ...).

    Returns
    -------
    AgreementSummary
        ``level, n_units, n_raters, n_complete_units, n_missing, categories (text labels or None),
        percent_agreement, cohen_kappa, weighted_kappa {linear, quadratic}, fleiss_kappa,
        krippendorff_alpha, icc, recommended (ICC form, or None), interpretation (Koo & Li reading of
        its interval), conventions, warnings``. Every coefficient slot has
        ``value`` and ``reason``; a coefficient that does not apply (Cohen's kappa for three raters,
        weighted kappa for nominal data, ICC below interval level) has ``value: None`` and a reason.
        With three or more raters ``pairwise_cohen`` holds :func:`pairwise_cohen_kappa` for every pair
        (``kappa``; ``linear`` and ``quadratic`` weighted above the nominal level) with the mean (Light
        1971); with two raters it is None (``cohen_kappa`` and ``weighted_kappa`` are that pair).

    Raises
    ------
    InputError
        Unknown level, ragged rows, text in numeric ratings, a single rater, fewer than two units,
        or every rating the same value.

    References
    ----------
    See :func:`cohen_kappa`, :func:`weighted_kappa`, :func:`fleiss_kappa`,
    :func:`krippendorff_alpha`, :func:`icc`.
    """
    if level not in LEVELS:
        raise InputError(f"Unknown level of measurement {level!r}; use one of {', '.join(LEVELS)}.",
                         code="bad_level", details={"level": level})
    Y, labels = _parse_ratings(ratings, level)
    n_units, n_raters = Y.shape
    if n_raters < 2:
        raise InputError(f"Agreement needs at least two raters (columns); the table has {n_raters}.",
                         code="single_rater", details={"n_raters": int(n_raters)})
    if n_units < 2:
        raise InputError(f"Agreement needs at least two units (rows); the table has {n_units}.",
                         code="too_few_units", details={"n_units": int(n_units)})
    observed = Y[~np.isnan(Y)]
    if observed.size == 0:
        raise InputError("Every rating is missing.", code="empty")
    if np.unique(observed).size == 1:
        shown = labels[int(observed[0])] if labels else f"{observed[0]:g}"
        raise InputError(f"Every rating is {shown!r}: all units look identical, so chance-corrected agreement "
                         f"(kappa, alpha, ICC) is undefined and percent agreement would trivially be 1.",
                         code="no_variation", details={"value": shown})
    if level == "ratio" and (observed < 0).any():
        i, j = map(int, np.argwhere(Y < 0)[0])
        raise InputError(f"Ratio ratings cannot be negative: row {i + 1}, column {j + 1} holds {Y[i, j]:g}.",
                         code="bad_value", details={"row": i + 1, "column": j + 1, "value": float(Y[i, j])})
    warnings: list[Note] = []
    complete = ~np.isnan(Y).any(axis=1)
    n_missing = int(np.isnan(Y).sum())
    if n_missing:
        warnings.append(note("missing_ratings", f"{n_missing} rating(s) are missing; percent agreement, kappas and "
                                                f"the ICC use the {int(complete.sum())} unit(s) rated by every rater, "
                                                f"Krippendorff's alpha uses every pairable rating."))
    obj = _objects(Y)
    if labels is not None:
        obj = np.array([[None if v is None else labels[int(v)] for v in r] for r in obj], dtype=object)

    cohen: KappaResult | NotApplicable
    fleiss: FleissResult | NotApplicable
    pairwise: PairwiseCohen | None = None
    if n_raters == 2:
        cohen = cohen_kappa(obj[:, 0], obj[:, 1], ci=ci)
        if level == "nominal":
            why = "Weighted kappa needs ordered categories; nominal categories have no order."
            weighted = WeightedKappas(NotApplicable(why), NotApplicable(why))
        else:
            weighted = WeightedKappas(*(weighted_kappa(Y[:, 0], Y[:, 1], weights=w, ci=ci)
                                        for w in ("linear", "quadratic")))
        fleiss = NotApplicable("With two raters Cohen's kappa is reported; Fleiss' kappa is given for three or "
                               "more raters.")
    else:
        why = f"Cohen's kappa compares exactly two raters; there are {n_raters} (see Fleiss' kappa)."
        cohen = NotApplicable(why)
        weighted = WeightedKappas(NotApplicable(why), NotApplicable(why))
        fleiss = fleiss_kappa(obj, ci=ci)
        pairwise = _pairwise_cohen(obj, level, ci=ci, raters=raters)
        # each pair's undefined kappa is worth a warning; the missing-units note repeats the summary's
        warnings.extend(unique(w for res in (pairwise.kappa, pairwise.linear, pairwise.quadratic)
                               if isinstance(res, PairwiseKappaResult)
                               for w in res.warnings if w.code != "missing_ratings"))
    icc_result: IccResult | NotApplicable
    if level in ("interval", "ratio"):
        icc_result = icc(Y, ci=ci)
        recommended: str | None
        interpretation: str | None
        recommended, interpretation = icc_result.recommended, icc_result.interpretation
        # the ICC's own missing-data note repeats the summary's
        warnings.extend(w for w in icc_result.warnings if w.code != "icc_incomplete_units")
    else:
        icc_result = NotApplicable(f"The ICC treats ratings as interval-level numbers; these are {level}.")
        recommended = interpretation = None
    return AgreementSummary(
        level=level, n_units=int(n_units), n_raters=int(n_raters), n_complete_units=int(complete.sum()),
        n_missing=n_missing, categories=None if labels is None else tuple(labels),
        percent_agreement=percent_agreement(obj), cohen_kappa=cohen, weighted_kappa=weighted, fleiss_kappa=fleiss,
        krippendorff_alpha=krippendorff_alpha(Y, level, ci=ci), icc=icc_result, recommended=recommended,
        interpretation=interpretation,
        conventions=Conventions(kappa_labels=LANDIS_KOCH_SOURCE, alpha_labels=KRIPPENDORFF_SOURCE,
                                icc_labels=KOO_LI_SOURCE),
        warnings=tuple(warnings), pairwise_cohen=pairwise)
