"""Hold-out confirmation: explore on one half of the respondents, confirm the structure on the other.

The service behind ``POST /api/datasets/{id}/confirmation`` (issue 13, item 2). Respondents with at least
one answer on the chosen items are split by a seeded permutation; the exploration half gets the
dashboard's own analysis (``analysis.pipeline.run`` on that half's responses, same settings); the
structure (the codebook's constructs, each item's primary factor in the exploration half, or an explicit
``{factor: [items]}``) is fitted as a confirmatory factor model with correlated factors by maximum
likelihood (:func:`server.stats.cfa.confirmatory_factor_analysis`) on the covariance matrix of the
confirmation half's complete rows. The same exploratory analysis on the confirmation half gives Tucker's
congruence of the two halves' loadings. Split-sample exploration and confirmation follow Boateng et al.
(2018) and Goretzko, Pham & Buhner (2021); fit cut-offs are Hu & Bentler's (1999) conventions.

References
----------
Boateng, G. O., et al. (2018). Best practices for developing and validating scales for health, social,
    and behavioral research: a primer. Frontiers in Public Health, 6, 149.
Goretzko, D., Pham, T. T. H., & Buhner, M. (2021). Exploratory factor analysis: current use,
    methodological developments and recommendations for good practice. Current Psychology, 40, 3510-3521.
Lorenzo-Seva, U., & ten Berge, J. M. F. (2006). Tucker's congruence coefficient as a meaningful index
    of factor similarity. Methodology, 2, 57-64.
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .analysis.inputs import AnalysisInputs
from .analysis.pipeline import run
from .analysis.settings import AnalysisSettings
from .engine import Engine
from .stats.cfa import CUTOFFS, CFAResult, confirmatory_factor_analysis
from .stats.efa import EFAResult
from .stats.errors import InputError
from .stats.notes import Note, note, unique
from .stats.resampling import align_factors

__all__ = ["ConfirmationAnswer", "ConfirmationQuery", "confirm"]

#: Tucker's congruence of at least .95 means the factors are equal, .85-.94 fairly similar (a convention)
CONGRUENCE_CUTOFF = (">=", 0.95, "Lorenzo-Seva & ten Berge (2006)")
PEARSON_NOTE = ("The settings ask for polychoric correlations: the exploration halves use them, but the "
                "confirmatory model is fitted to the Pearson covariance matrix (maximum likelihood for "
                "continuous answers); an ordinal estimator may come later.")
COVARIANCE_BASIS = ("Covariance matrix of the confirmation half's respondents who answered every item of the "
                    "structure (listwise), divisor n; chi-square = n F_min (normal-theory maximum likelihood).")


@dataclass(frozen=True)
class ConfirmationQuery:
    """What to confirm: the structure, the split and the analysis request (items, settings) for exploration."""

    structure: str | Mapping[str, Sequence[str]] = "codebook"
    split: float | None = 0.5
    request: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class ConfirmationAnswer:
    """The confirmatory fit of a structure on held-out respondents, with how it was set up."""

    seed: int
    split: float | None
    n_respondents: int
    n_exploration: int | None
    n_confirmation: int
    n_confirmation_complete: int
    covariance: str
    structure_source: str
    structure: dict[str, list[str]]
    fitted: bool
    converged: bool
    fit: dict
    cutoffs: dict
    loadings: list[dict]
    factor_correlations: dict | None
    largest_residuals: list[dict]
    modification_indices: list[dict]
    congruence: list[dict] | None
    heywood: list[str]
    warnings: tuple[Note, ...]


def _half_settings(settings: AnalysisSettings, inputs: AnalysisInputs, *, n_factors: int | None = None
                   ) -> AnalysisSettings:
    """The same request checked against one half (items without variance there are left out)."""
    request = {k: v for k, v in settings.to_dict().items() if k != "excluded"}
    if n_factors is not None:
        request["n_factors"] = n_factors
    return AnalysisSettings.build(request, names=inputs.names, declared_reverse=settings.reverse,
                                  constant=list(inputs.constant))


def _explore(X: np.ndarray, items: Sequence[Any], settings: AnalysisSettings, which: str,
             n_factors: int | None = None) -> tuple[EFAResult | None, list[Note]]:
    """The dashboard's analysis of one half: its rotated factor solution (None when there is none) and why."""
    inputs = AnalysisInputs.from_responses(X, items, settings.reverse, dataset_id=which, name=which,
                                           correlations=(settings.correlation,),
                                           zero_cell_correction=settings.zero_cell_correction)
    try:
        s = _half_settings(settings, inputs, n_factors=n_factors)
        answer = run(inputs, s)
    except InputError as exc:
        return None, [note(f"{which}_unavailable", f"No factor solution in the {which} half: {exc.message}")]
    efa = answer.factors.efa.result if answer.factors is not None else None
    if efa is None:
        why = "; ".join(w.message for w in answer.warnings if w.code != "no_variance") or "no solution"
        return None, [note(f"{which}_unavailable", f"No factor solution in the {which} half: {why}")]
    return efa, []


def _primary_structure(efa: EFAResult, wanted: Sequence[str]) -> dict[str, list[str]]:
    prim = np.argmax(np.abs(efa.pattern), axis=1)
    out: dict[str, list[str]] = {f: [] for f in efa.factors}
    for name, k in zip(efa.names, prim):
        if name in wanted:
            out[efa.factors[int(k)]].append(name)
    return {f: its for f, its in out.items() if its}


def _codebook_structure(items: Sequence[Any], active: Sequence[str]) -> tuple[dict[str, list[str]], list[str]]:
    construct = {it.name: it.construct for it in items}
    out: dict[str, list[str]] = {}
    loose = []
    for name in active:
        c = construct.get(name)
        if c:
            out.setdefault(str(c), []).append(name)
        else:
            loose.append(name)
    return out, loose


def _explicit_structure(given: Mapping[str, Sequence[str]], names: Sequence[str], active: Sequence[str]
                        ) -> dict[str, list[str]]:
    if not given:
        raise InputError("The structure must map each factor to its items, e.g. {'F1': ['q1', 'q2', 'q3']}.",
                         code="bad_structure", details={"field": "structure"})
    known, act = set(names), set(active)
    out = {str(f): [str(i) for i in its] for f, its in given.items()}
    listed = [i for its in out.values() for i in its]
    unknown = [i for i in dict.fromkeys(listed) if i not in known]
    if unknown:
        raise InputError(f"Unknown item(s) in 'structure': {', '.join(unknown[:10])}. The dataset has "
                         f"{len(names)} items.", code="unknown_item", details={"items": unknown, "field": "structure"})
    twice = [f for f, its in out.items() if len(set(its)) != len(its)]
    if twice:
        raise InputError(f"Factor '{twice[0]}' of 'structure' lists an item twice.", code="bad_structure",
                         details={"factor": twice[0], "field": "structure"})
    inactive = [i for i in dict.fromkeys(listed) if i not in act]
    if inactive:
        raise InputError(f"Item(s) {', '.join(inactive[:10])} of 'structure' are not among the analysis' active "
                         f"items (left out by 'items', or without variance).", code="inactive_item",
                         details={"items": inactive, "field": "structure"})
    return out


def _congruence(exp: EFAResult, conf: EFAResult) -> list[dict]:
    """Tucker's congruence per exploration factor with its best-matched factor of the confirmation half."""
    common = [n for n in exp.names if n in set(conf.names)]
    ie = [exp.names.index(n) for n in common]
    ic = [conf.names.index(n) for n in common]
    al = align_factors(conf.pattern[ic], exp.pattern[ie])
    return [{"factor": f, "congruence": c, "matched": None if o is None else conf.factors[o]}
            for f, c, o in zip(exp.factors, al.congruence, al.order)]


def _df(structure: Mapping[str, Sequence[str]], p: int) -> int:
    """Degrees of freedom of the correlated-factors model: p(p+1)/2 - (loadings + factor correlations + p)."""
    m = len(structure)
    return p * (p + 1) // 2 - (sum(len(its) for its in structure.values()) + m * (m - 1) // 2 + p)


def confirm(engine: Engine, dataset_id: str, query: ConfirmationQuery) -> ConfirmationAnswer:
    """The hold-out confirmation of ``query`` on the dataset (InputError when nothing can be fitted).

    Raises :class:`~server.errors.NotFound` for an unknown dataset and
    :class:`~server.stats.errors.InputError` for unknown items, an exploration structure without an
    exploration half, or a confirmation half too small to form a covariance matrix.
    """
    settings = engine.settings(dataset_id, query.request)
    ds = engine.dataset(dataset_id)
    names = [it.name for it in ds.items]
    active = list(settings.items)
    split = query.split
    if split is not None and not 0.0 < split < 1.0:
        raise InputError(f"'split' must be between 0 and 1 (the exploration half's share), or null; got {split}.",
                         code="bad_option", details={"field": "split", "value": split})
    if split is None and query.structure == "exploration":
        raise InputError("The 'exploration' structure needs an exploration half: give a 'split' between 0 and 1, "
                         "or use 'codebook' or an explicit structure with split null.",
                         code="no_exploration_half", details={"field": "structure"})
    notes: list[Note] = []
    if isinstance(query.structure, Mapping):
        structure, source = _explicit_structure(query.structure, names, active), "explicit"
    elif query.structure == "codebook":
        structure, loose = _codebook_structure(ds.items, active)
        source = "codebook"
        if not structure:
            raise InputError("The codebook names no construct for the chosen items, so there is no codebook "
                             "structure to confirm; give 'exploration' or an explicit structure.",
                             code="no_constructs", details={"field": "structure"})
        if loose:
            notes.append(note("items_without_construct", f"{len(loose)} item(s) have no construct in the codebook "
                              f"and were left out of the model: {', '.join(loose)}.", loose))
    elif query.structure == "exploration":
        structure, source = {}, "exploration"
    else:
        raise InputError(f"'structure' must be 'codebook', 'exploration' or {{factor: [items]}}; "
                         f"got {query.structure!r}.", code="bad_structure", details={"field": "structure"})

    col = {n: j for j, n in enumerate(names)}
    answered = ~np.all(np.isnan(ds.responses[:, [col[n] for n in active]]), axis=1)
    rows = np.flatnonzero(answered)
    n_resp = int(rows.size)
    if n_resp < ds.n_rows:
        notes.append(note("respondents_without_answers", f"{ds.n_rows - n_resp} respondent(s) answered none of "
                          f"the chosen items and were left out before the split.", []))
    perm = np.random.default_rng(settings.seed).permutation(rows)
    if split is None:
        exp_rows, conf_rows = perm[:0], perm
    else:
        n_exp = int(round(split * n_resp))
        exp_rows, conf_rows = np.sort(perm[:n_exp]), np.sort(perm[n_exp:])

    exp_efa = None
    if split is not None:
        exp_efa, more = _explore(ds.responses[exp_rows], ds.items, settings, "exploration")
        notes.extend(more)
        if source == "exploration":
            if exp_efa is None:
                raise InputError("The exploration half gave no factor solution, so there is no structure to "
                                 "confirm. " + " ".join(n.message for n in more),
                                 code="no_exploration_solution", details={"n_exploration": int(exp_rows.size)})
            structure = _primary_structure(exp_efa, active)

    model_items = [n for n in names if any(n in its for its in structure.values())]
    scored = engine.scored(dataset_id, list(settings.reverse))
    Y = scored[np.ix_(conf_rows, np.array([col[n] for n in model_items], dtype=int))]
    complete = Y[~np.any(np.isnan(Y), axis=1)]
    n_complete = int(complete.shape[0])
    if n_complete < 2:
        raise InputError(f"The confirmation half has {n_complete} respondent(s) who answered every item of the "
                         f"structure; at least 2 are needed for a covariance matrix (far more for a stable fit).",
                         code="half_too_small",
                         details={"n_confirmation": int(conf_rows.size), "n_complete": n_complete})
    if n_complete < conf_rows.size:
        notes.append(note("confirmation_listwise", f"{conf_rows.size - n_complete} respondent(s) of the "
                          f"confirmation half skipped an item of the structure and were left out of its "
                          f"covariance matrix (listwise).", []))
    if len(model_items) < 2:  # a one-item model: nothing to estimate (cfa refuses a 1 x 1 matrix)
        res = CFAResult(tuple(model_items), tuple(structure), False, "std_lv", "normal", n_complete, n_complete,
                        {**dict.fromkeys(("chisq", "p", "cfi", "tli", "rmsea", "srmr", "aic", "bic", "fmin")),
                         "df": _df(structure, len(model_items)), "rmsea_ci": [None, None],
                         "baseline": None},
                        warnings=(note("not_identified", f"The model is not identified: the structure holds "
                                       f"{len(model_items)} item(s); a factor needs at least 3 items when it is "
                                       f"the only factor.", list(structure)),))
    else:
        S = np.cov(complete.T, ddof=0)
        res = confirmatory_factor_analysis(S, structure, n=n_complete, names=model_items, likelihood="normal")
    if settings.correlation == "polychoric":
        notes.append(note("confirmation_pearson", PEARSON_NOTE, []))

    congruence = None
    if exp_efa is not None:
        conf_efa, more = _explore(ds.responses[conf_rows], ds.items, settings, "confirmation",
                                  n_factors=exp_efa.n_factors)
        notes.extend(more)
        if conf_efa is not None:
            congruence = _congruence(exp_efa, conf_efa)

    loadings: list[dict] = []
    factor_correlations = None
    if res.fitted and res.standardized_loadings is not None:
        std, se = res.standardized_loadings, res.standardized_loadings_se
        for k, fac in enumerate(res.factors):
            for i, item in enumerate(res.names):
                if item in structure[fac]:
                    loadings.append({"item": item, "factor": fac, "std": float(std[i, k]),
                                     "se": None if se is None else float(se[i, k])})
        factor_correlations = {"factors": list(res.factors), "matrix": res.factor_correlations,
                               "se": res.factor_correlations_se}
    cutoffs = {key: {"op": op, "value": v, "source": src, "kind": "convention"}
               for key, (op, v, src) in [*CUTOFFS.items(), ("congruence", CONGRUENCE_CUTOFF)]}
    return ConfirmationAnswer(
        seed=settings.seed, split=split, n_respondents=n_resp,
        n_exploration=None if split is None else int(exp_rows.size), n_confirmation=int(conf_rows.size),
        n_confirmation_complete=n_complete, covariance=COVARIANCE_BASIS, structure_source=source,
        structure={f: list(its) for f, its in structure.items()}, fitted=res.fitted, converged=res.converged,
        fit=res.fit, cutoffs=cutoffs, loadings=loadings, factor_correlations=factor_correlations,
        largest_residuals=list(res.largest_residuals), modification_indices=list(res.modification_indices[:10]),
        congruence=congruence, heywood=list(res.heywood), warnings=tuple(unique([*notes, *res.warnings])))
