"""Resampling stability: one bootstrap resample of the analysis, and the summary over many.

A resampling run (issue 13, item 1) repeats the dashboard's analysis on bootstrap resamples of the
respondents with the same settings. :func:`make_plan` gathers, once per run, everything a resample needs
and that does not depend on the resample: the active items' raw responses, the full-sample number of
factors and loadings (the alignment target), the subscales, and parallel analysis' random-data thresholds
(they depend on n, k and the seed only). :func:`resample_values` computes one resample with the same
section functions as :func:`server.analysis.pipeline.run`, leaving out what the summary does not read
(the descriptives' display fields are kept, the item table's alpha/omega-if-deleted and the pruning
path's omegas are skipped, alpha and omega come from :func:`alpha_omega`, the scale's one-factor omega only
where it is the answer) and with the number of factors fixed to the full sample's (parallel analysis and MAP
are still computed per resample for their distribution). The extraction and the subscales' one-factor fits
start from the full sample's solution (the same optimum, fewer iterations). :func:`summarize` turns the
values into rates and intervals.

References
----------
Efron, B., & Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman & Hall (ch. 13, 14).
Tucker, L. R. (1951). A method for synthesis of factor analysis studies. Personnel Research Section
    Report No. 984.
"""
from __future__ import annotations

import math
from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
from scipy.linalg import blas

from ..stats.descriptives import ItemDescriptives
from ..stats.dimensionality import install_random_reference, random_reference
from ..stats.errors import InputError
from ..stats.items import item_rest_correlations, pruning_path
from ..stats.reliability import alpha_omega
from ..stats.resampling import Interval, align_factors, bca_interval, percentile_interval
from .answer import AnalysisAnswer, ItemRow
from .factors import factor_sections
from .inputs import AnalysisInputs
from .matrices import AnswerPatterns, FullPool, constant_notes
from .reliability import scale_covariance
from .settings import AnalysisSettings

__all__ = ["ResamplePlan", "install_plan", "jackknife_alpha", "make_plan", "resample_values", "summarize"]

LEVEL = 0.95
RESAMPLE_STARTS = 1  # rotation starts per resample (the identity); the full sample keeps its five
BCA_NOTE = ("BCa intervals are given for alpha (the scale's and each subscale's) when no answer is missing: "
            "their jackknife (each respondent left out in turn) has a closed form. Omega, omega hierarchical "
            "and the loadings would need the whole factor model refitted once per respondent, so they get "
            "percentile intervals only.")


@dataclass(frozen=True)
class ResamplePlan:
    """What every resample of one run shares (sent once to each worker process)."""

    responses: np.ndarray            # raw answers of ``names`` (n x k), reverse-keyed items not reverse-scored
    items: tuple[Any, ...]           # the codebook entries of ``names`` (ItemInfo)
    names: tuple[str, ...]           # the active items of the full-sample analysis
    request: Mapping[str, Any]       # the analysis request (without items, n_factors)
    n_factors: int | None            # the full sample's number of factors (None: no factor model there)
    factor_labels: tuple[str, ...]   # the full sample's factor labels
    reference: np.ndarray | None     # the full sample's pattern (k x m): the alignment target
    groups: Mapping[str, tuple[str, ...]]  # subscale -> items (the full sample's subscales)
    pa: Mapping[str, Any] | None     # the parallel-analysis reference key and values (random normal data)
    min_items: int
    # warm starts (the optimum is the same, reached in fewer iterations): the full sample's uniquenesses of
    # the extraction, and its one-factor loadings of the scale ("") and of each subscale
    psi: np.ndarray | None = None
    one_factor: Mapping[str, tuple[float, ...]] = field(default_factory=dict)


def make_plan(inputs: AnalysisInputs, settings: AnalysisSettings, answer: AnalysisAnswer) -> ResamplePlan:
    """The run's shared part, from the full-sample inputs, settings and answer."""
    names = tuple(settings.items)
    idx = inputs.columns(names)
    meta = {it.name: it for it in inputs.items}
    request = {k: v for k, v in settings.to_dict().items() if k not in ("items", "excluded", "n_factors")}
    request["reverse"] = [r for r in settings.reverse if r in set(names)]
    efa = answer.factors.efa.result if answer.factors is not None else None
    m = efa.n_factors if efa is not None else None
    groups = {g: tuple(b.items) for g, b in answer.constructs.items()}
    pa = None
    X = inputs.responses[:, idx]
    complete = not np.isnan(X).any()
    if m is not None and settings.correlation == "pearson" and complete:
        n, k = X.shape
        key = {"n": n, "k": k, "iterations": settings.pa_iterations, "variant": settings.pa_variant,
               "seed": settings.seed, "percentile": 95.0}
        thr, mean = random_reference(n, k, iterations=settings.pa_iterations, variant=settings.pa_variant,
                                     seed=settings.seed, percentile=95.0)
        pa = {**key, "threshold": thr, "mean": mean}
    one_factor = {g: tuple(b.result.loadings) for g, b in answer.constructs.items() if b.result is not None}
    one_factor[""] = tuple(answer.reliability.result.loadings)
    return ResamplePlan(responses=np.ascontiguousarray(X), items=tuple(meta[n] for n in names), names=names,
                        request=request, n_factors=m, factor_labels=tuple(efa.factors) if efa is not None else (),
                        reference=None if efa is None else np.asarray(efa.pattern, dtype=float), groups=groups,
                        pa=pa, min_items=min(3, len(names)),
                        psi=None if efa is None else np.asarray(efa.uniquenesses, dtype=float), one_factor=one_factor)


def install_plan(plan: ResamplePlan) -> None:
    """Prepare this process for the plan's resamples (parallel analysis' thresholds into its memo)."""
    if plan.pa is not None:
        p = plan.pa
        install_random_reference(p["n"], p["k"], iterations=p["iterations"], variant=p["variant"], seed=p["seed"],
                                 percentile=p["percentile"], threshold=p["threshold"], mean=p["mean"])


def _num(x: Any) -> float | None:
    return None if x is None or not np.isfinite(x) else float(x)


def resample_values(plan: ResamplePlan, rows_idx: np.ndarray | None) -> dict[str, Any]:
    """The statistics the summary reads, on the respondents ``rows_idx`` (None: the full sample).

    Returns ``{"alpha", "omega_total", "omega_hierarchical", "subscales": {g: {"alpha", "omega"}},
    "loadings": k x m (aligned to the full-sample factors, NaN for an item not analysed), "primary": factor
    index per item (-1: none), "flags": {item: [kinds]}, "early": [items], "pa", "map", "error"}``.
    """
    X = plan.responses if rows_idx is None else plan.responses[rows_idx]
    k = len(plan.names)
    m = plan.n_factors
    out: dict[str, Any] = {"alpha": None, "omega_total": None, "omega_hierarchical": None, "subscales": {},
                           "loadings": None, "primary": [-1] * k, "flags": {}, "early": [], "pa": None,
                           "map": None, "error": None}
    inputs = _inputs(plan, X, rows_idx)
    try:
        settings = AnalysisSettings.build({**plan.request, "items": list(plan.names), "n_factors": m},
                                          names=list(plan.names), constant=list(inputs.constant))
        sc = scale_covariance(inputs, settings)
        # alpha and omega as scale_reliability's reliability_from_cov gives them (nothing else of it is read);
        # the one-factor omega only where it is the answer (no factor model, one factor), else only if the
        # omega family falls back on it (below)
        uni_wanted = m is None or m < 2
        out["alpha"], out["omega_total"] = alpha_omega(sc.cov, n=sc.n, names=list(settings.items),
                                                       start=plan.one_factor.get(""), omega=uni_wanted)
    except InputError as exc:
        out["error"] = exc.message
        out["alpha"] = out["omega_total"] = None
        return out
    names = list(settings.items)
    steps = pruning_path(sc.cov, names=names, min_items=min(3, len(names)), with_omega=False)
    removed = [s["removed"] for s in steps[1:]]
    quarter = math.ceil((k - plan.min_items) / 4) if k > plan.min_items else 0
    out["early"] = removed[:quarter]
    position = {n: j for j, n in enumerate(names)}
    for g, members in plan.groups.items():
        js = [position[n] for n in members if n in position]
        if len(js) < 2:
            out["subscales"][g] = {"alpha": None, "omega": None}
            continue
        sub = sc.cov[np.ix_(js, js)]
        try:
            a, o = alpha_omega(sub, n=sc.n, names=[names[j] for j in js], start=plan.one_factor.get(g))
            out["subscales"][g] = {"alpha": a, "omega": o}
        except InputError:
            out["subscales"][g] = {"alpha": None, "omega": None}
    if m is None:
        return out
    r_rest = item_rest_correlations(sc.cov)
    meta = {it.name: it for it in plan.items}
    desc = {d.name: d for d in inputs.descriptives}
    rev = set(settings.reverse)
    rows = tuple(ItemRow(name=n, text=meta[n].text, construct=meta[n].construct, reverse=n in rev,
                         min=meta[n].min, max=meta[n].max, descriptives=desc[n],
                         stats={"item_rest_r": _num(r_rest[j])}) for j, n in enumerate(names))
    # One rotation start (the identity) instead of the full sample's five: the resample is lined up with the
    # full-sample solution anyway, and tests/analysis/test_resample.py checks it reaches the pipeline's solution.
    psi = plan.psi if plan.psi is not None and len(names) == k else None  # the same items: warm start
    factors, _ = factor_sections(inputs, settings, rows, out["omega_total"], random_starts=RESAMPLE_STARTS,
                                 start_psi=psi, with_factorability=False)
    if factors.retention is not None:
        out["pa"] = int(factors.retention["parallel"]["n_factors"])
        out["map"] = int(factors.retention["map"]["n_factors"])
    if factors.omega is not None:
        out["omega_total"] = _num(factors.omega.omega_total)
        out["omega_hierarchical"] = _num(factors.omega.omega_hierarchical)
        if factors.omega.basis != "schmid_leiman" and not uni_wanted:  # the fallback: the one-factor omega
            uni = alpha_omega(sc.cov, n=sc.n, names=names, start=plan.one_factor.get(""))[1]
            out["omega_total"] = uni
            out["omega_hierarchical"] = uni if factors.omega.basis == "one_factor" else None
    flags: dict[str, list[str]] = {}
    for f in factors.efa.flags:
        flags.setdefault(f["item"], []).append(f["kind"])
    out["flags"] = flags
    res = factors.efa.result
    if res is None or plan.reference is None:
        return out
    L = np.full((k, plan.reference.shape[1]), np.nan)
    rows_in = [plan.names.index(n) for n in res.names]
    al = align_factors(res.pattern, plan.reference[rows_in])
    L[rows_in] = al.loadings
    out["loadings"] = L
    A = np.abs(L)
    seen = np.isfinite(A).any(axis=1)
    best = np.argmax(np.where(np.isfinite(A), A, -1.0), axis=1)  # nanargmax of each row with a loading
    out["primary"] = [int(b) if ok else -1 for b, ok in zip(best, seen)]
    return out


_SHARES: list[Any] = [None, None]  # [plan, (floor, ceiling) indicators of its reverse-scored answers]


def _share_indicators(plan: ResamplePlan) -> tuple[np.ndarray, np.ndarray]:
    """Floor and ceiling indicators (n x k, 0/1) of the plan's reverse-scored answers, formed once per plan."""
    if _SHARES[0] is not plan:
        X = plan.responses
        rev = set(plan.request.get("reverse", ()))
        lo = np.array([it.min for it in plan.items], dtype=float)
        hi = np.array([it.max for it in plan.items], dtype=float)
        flip = np.array([nm in rev for nm in plan.names])
        scored = X.copy()
        scored[:, flip] = (lo + hi)[flip] - scored[:, flip]
        _SHARES[:] = [plan, ((scored == lo).astype(float), (scored == hi).astype(float))]
    return _SHARES[1]


def _inputs(plan: ResamplePlan, X: np.ndarray, rows_idx: np.ndarray | None = None) -> AnalysisInputs:
    """The analysis inputs of one resample (``X``: the answers of the respondents ``rows_idx``). Complete
    answers with Pearson correlations take a shortcut: the pairwise pool of complete data is the ordinary
    covariance matrix (one product instead of the pairwise moments, computed twice), the floor and ceiling
    shares are counts weighted by how often each respondent was drawn (exact integer sums), and every
    respondent answered every item (one answer pattern); otherwise :meth:`AnalysisInputs.from_responses` as
    the pipeline would."""
    req = plan.request
    complete = req.get("correlation") == "pearson" and req.get("missing") == "pairwise" and not np.isnan(X).any()
    if not complete:
        return AnalysisInputs.from_responses(X, plan.items, req.get("reverse", ()),
                                             correlations=(req.get("correlation", "pearson"),),
                                             zero_cell_correction=req.get("zero_cell_correction", 0.5))
    names = list(plan.names)
    flat = np.flatnonzero(X.min(axis=0) == X.max(axis=0))  # fewer than two different answers
    constant = constant_notes(X[:, flat], [names[j] for j in flat])
    ok = np.array([n not in constant for n in names])
    n, k = X.shape
    cov = np.full((k, k), np.nan)
    corr = np.full((k, k), np.nan)
    Xo = X if ok.all() else X[:, ok]  # no copy without constant items
    mu = Xo.mean(axis=0)
    Xc = Xo - mu
    c = blas.dsyrk(1.0 / (n - 1), Xc, trans=1)  # np.cov(Xo, rowvar=False): upper triangle, no copies
    c = np.triu(c) + np.triu(c, 1).T
    d = np.sqrt(np.diag(c))
    cov[np.ix_(ok, ok)] = c
    r = c / np.outer(d, d)
    np.fill_diagonal(r, 1.0)
    corr[np.ix_(ok, ok)] = r
    n_pair = np.zeros((k, k))
    n_pair[np.ix_(ok, ok)] = n
    pool = FullPool(cov=cov, n_pair=n_pair, corr=corr, warnings=())
    rev = set(req.get("reverse", ()))
    lo = np.array([it.min for it in plan.items], dtype=float)
    hi = np.array([it.max for it in plan.items], dtype=float)
    flip = np.array([nm in rev for nm in names])
    # only the mean (scale_covariance) and the floor/ceiling shares (flags) are read: the rest is left None
    mean = np.empty(k)
    mean[ok] = mu
    if not ok.all():
        mean[~ok] = X[:, ~ok].mean(axis=0)
    if flip.any():  # reverse-scored means
        mean[flip] = ((lo + hi)[flip] - X[:, flip]).mean(axis=0)
    is_lo, is_hi = _share_indicators(plan)
    draws = (np.ones(n) if rows_idx is None else
             np.bincount(rows_idx, minlength=plan.responses.shape[0]).astype(float))
    floor, ceiling = (draws @ is_lo) / n, (draws @ is_hi) / n
    desc = [ItemDescriptives(name=nm, n=n, n_missing=0, mean=float(mean[j]), sd=None, skew=None, kurtosis=None,
                             min=float(lo[j]), max=float(hi[j]), floor=float(floor[j]), ceiling=float(ceiling[j]))
            for j, nm in enumerate(names)]
    one = AnswerPatterns(np.packbits(np.ones(k, dtype=bool))[None, :], np.array([n], dtype=np.int64), k)
    return AnalysisInputs(dataset_id="resample", name="resample", n_rows=n, items=plan.items, responses=X,
                          constant=constant, descriptives=desc, pools={"pearson": pool}, patterns=one)


def jackknife_alpha(X: np.ndarray) -> np.ndarray:
    """Alpha with each respondent left out in turn, from running sums (complete, reverse-scored answers).

    Alpha is ``k/(k-1) (1 - sum of item variances / variance of the sum)``; leaving respondent i out
    changes each sum and sum of squares by one term, so all n values cost O(nk).
    """
    X = np.asarray(X, dtype=float)
    n, k = X.shape
    T = X.sum(axis=1)

    def loo_var(v: np.ndarray) -> np.ndarray:  # variance (ddof 1) of v without each row, per column
        s, ss = v.sum(axis=0), (v ** 2).sum(axis=0)
        s_i, ss_i = s - v, ss - v ** 2
        return (ss_i - s_i ** 2 / (n - 1)) / (n - 2)

    item_var = loo_var(X).sum(axis=1)
    total_var = loo_var(T[:, None])[:, 0]
    with np.errstate(divide="ignore", invalid="ignore"):
        return k / (k - 1) * (1 - item_var / total_var)


def _interval(i: Interval) -> dict[str, Any]:
    d = asdict(i)
    return {k: d[k] for k in ("low", "high", "level", "method", "n_resamples", "n_dropped", "reason")}


def _coef(values: Sequence[float | None], estimate: float | None, jack: np.ndarray | None = None,
          why_no_bca: str = "") -> dict[str, Any]:
    v = np.array([np.nan if x is None else x for x in values], dtype=float)
    out: dict[str, Any] = {"estimate": estimate, "percentile": _interval(percentile_interval(v, level=LEVEL))}
    if jack is not None:
        out["bca"] = _interval(bca_interval(v, np.nan if estimate is None else estimate, jack, level=LEVEL))
    else:
        out["bca"] = None
        out["bca_reason"] = why_no_bca
    return out


def summarize(plan: ResamplePlan, estimate: Mapping[str, Any], values: Sequence[Mapping[str, Any]], *,
              seed: int | None) -> dict[str, Any]:
    """Per-item rates and overall distributions and intervals over the resamples' :func:`resample_values`."""
    B = len(values)
    k = len(plan.names)
    labels = plan.factor_labels
    ok = [v for v in values if v["error"] is None]
    scored = plan.responses * np.array([-1.0 if n in set(plan.request.get("reverse", ())) else 1.0
                                        for n in plan.names])
    complete = not np.isnan(scored).any() and scored.shape[0] > 2
    no_bca = BCA_NOTE if complete else ("Some answers are missing, so the closed-form jackknife of alpha does not "
                                        "apply; percentile intervals only.")
    jack = jackknife_alpha(scored) if complete else None
    coefficients = {
        "alpha": _coef([v["alpha"] for v in values], estimate["alpha"], jack, no_bca),
        "omega_total": _coef([v["omega_total"] for v in values], estimate["omega_total"], None,
                             "Omega needs the factor model refitted per left-out respondent; percentile only."),
        "omega_hierarchical": _coef([v["omega_hierarchical"] for v in values], estimate["omega_hierarchical"], None,
                                    "Omega hierarchical needs the factor model refitted per left-out respondent; "
                                    "percentile only."),
    }
    position = {n: j for j, n in enumerate(plan.names)}
    subscales = []
    for g, members in plan.groups.items():
        js = [position[n] for n in members if n in position]
        sub_jack = jackknife_alpha(scored[:, js]) if complete and len(js) >= 2 else None
        est = estimate["subscales"].get(g, {})
        subscales.append({
            "name": g, "items": list(members),
            "alpha": _coef([v["subscales"].get(g, {}).get("alpha") for v in values], est.get("alpha"), sub_jack,
                           no_bca),
            "omega": _coef([v["subscales"].get(g, {}).get("omega") for v in values], est.get("omega"), None,
                           "Omega needs the one-factor model refitted per left-out respondent; percentile only.")})
    L = np.stack([v["loadings"] if v["loadings"] is not None else np.full((k, len(labels)), np.nan)
                  for v in values]) if labels else None
    items = []
    for i, name in enumerate(plan.names):
        kinds = Counter(kind for v in values for kind in set(v["flags"].get(name, ())))
        prim = Counter(v["primary"][i] for v in values)
        row: dict[str, Any] = {
            "name": name,
            "flags": {kind: c / B for kind, c in sorted(kinds.items())},
            "flags_full_sample": sorted(set(estimate["flags"].get(name, ()))),
            "primary": {labels[j]: prim.get(j, 0) / B for j in range(len(labels))},
            "primary_none": prim.get(-1, 0) / B,
            "early_removal": sum(name in v["early"] for v in values) / B,
            "loadings": [],
        }
        if L is not None:
            est_L = estimate["loadings"]
            for j, lab in enumerate(labels):
                iv = percentile_interval(L[:, i, j], level=LEVEL)
                row["loadings"].append({"factor": lab, "estimate": None if est_L is None else _num(est_L[i, j]),
                                        "percentile": _interval(iv)})
        items.append(row)
    return {
        "n_resamples": B, "n_failed": B - len(ok), "seed": seed, "level": LEVEL,
        "n_factors": plan.n_factors, "factors": list(labels), "items": items,
        "retention": {
            "parallel": _distribution([v["pa"] for v in values], B),
            "map": _distribution([v["map"] for v in values], B),
            "full_sample": {"parallel": estimate["pa"], "map": estimate["map"]}},
        "coefficients": coefficients, "subscales": subscales,
        "quarter": math.ceil((k - plan.min_items) / 4) if k > plan.min_items else 0,
        "bca_note": no_bca,
        "errors": sorted({v["error"] for v in values if v["error"] is not None}),
    }


def _distribution(counts: Sequence[int | None], B: int) -> list[dict[str, Any]]:
    c = Counter(x for x in counts if x is not None)
    return [{"n_factors": m, "count": c[m], "rate": c[m] / B} for m in sorted(c)]
