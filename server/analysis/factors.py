"""Factor sections: correlations, factorability, retention, extraction and rotation, lined up with the
full-pool solution of the same settings.

Factor identity: a solution of some of the items is matched (order and sign, Tucker's congruence) to the
solution of the whole pool with the same settings and number of factors, so a factor keeps its column
however many items are dropped and in whatever order. That reference solution is computed here, from the
pool's matrices, by the stats functions, and kept in the engine's memo (``AnalysisInputs.memo``).
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..stats.correlation import smooth_to_pd, smoothing_note
from ..stats.dimensionality import factorability_summary, retention_summary
from ..stats.efa import EFAResult, cap_factors, check_factor_model, factor_analysis
from ..stats.errors import InputError
from ..stats.notes import Note
from .answer import CorrelationsSection, EfaSection, FactorSections, ItemRow
from .flags import all_flags
from .inputs import AnalysisInputs
from .matrices import PoolUnavailable, active_matrices, listwise_covariance, min_pair_n, pool_warnings_for
from .settings import AnalysisSettings

__all__ = ["FactorInput", "factor_input", "factor_sections", "reference_solution"]


@dataclass(frozen=True)
class FactorInput:
    """The correlation matrix a factor model is fitted to (reverse-scored, smoothed when needed) and its n."""

    R: np.ndarray
    n: int  # smallest pairwise n (listwise: the complete rows): what Bartlett, PA and the ML chi-square use
    smoothed: bool
    warnings: tuple[Note, ...]
    pool_used: bool  # False when the pool could not be formed and the items' own matrix was used


def factor_input(inputs: AnalysisInputs, settings: AnalysisSettings, names: Sequence[str]) -> FactorInput:
    """The reverse-scored correlation matrix of ``names`` under the settings' correlation and missing policy."""
    names = list(names)
    idx = inputs.columns(names)
    mats = active_matrices(inputs.responses, idx, names, correlation=settings.correlation,
                           missing=settings.missing, pool=inputs.pools.get(settings.correlation))
    sign = inputs.signs(names, settings.reverse)
    R = mats.corr * np.outer(sign, sign)
    notes = pool_warnings_for(mats.warnings, R, names, settings.correlation)
    if mats.note is not None:
        notes.append(mats.note)
    R_s, min_eig, changed = smooth_to_pd(R)
    if changed:
        label = "Pearson" if settings.correlation == "pearson" else "polychoric"
        notes.append(smoothing_note(R, R_s, min_eig, "eigen", label=label, names=names))
        R = R_s
    return FactorInput(R=R, n=min_pair_n(mats.n_pair), smoothed=bool(changed), warnings=tuple(notes),
                       pool_used=mats.note is None)


def _constructs(inputs: AnalysisInputs, names: Sequence[str]) -> list[str | None]:
    meta = {it.name: it for it in inputs.items}
    return [meta[n].construct for n in names]


def reference_solution(inputs: AnalysisInputs, settings: AnalysisSettings, n_factors: int) -> dict | None:
    """The whole pool's loadings and factor labels with the same settings and number of factors.

    ``{"loadings": {item: [...]}, "factors": [...]}``, or None when the pool cannot carry the model (too
    few complete rows, fewer respondents than items, an extraction that fails...): the factors are then
    ordered by variance instead.
    """
    pool = inputs.pool_items
    if isinstance(inputs.pools.get("pearson"), PoolUnavailable):
        return None  # the pool's reliability sections cannot be formed either
    try:
        if settings.missing == "listwise":
            listwise_covariance(inputs.responses, inputs.columns(pool), pool)  # the checks of a listwise analysis
        fi = factor_input(inputs, settings, pool)
        check_factor_model(fi.n, len(pool))
        res = factor_analysis(fi.R, n_factors, n=fi.n, names=pool, method=settings.extraction,
                              rotation=settings.rotation, gamma=settings.gamma, constructs=_constructs(inputs, pool),
                              thresholds=settings.thresholds, seed=settings.seed)
    except InputError:
        return None
    out = res.to_dict()
    return {"loadings": out["loadings"], "factors": out["factors"]}


def _reference(inputs: AnalysisInputs, settings: AnalysisSettings, n_factors: int) -> dict | None:
    key = ("reference", settings.correlation, settings.missing, settings.extraction, settings.rotation,
           settings.gamma, settings.seed, settings.reverse, n_factors)
    return inputs.memo(key, lambda: reference_solution(inputs, settings, n_factors))


def factor_sections(inputs: AnalysisInputs, settings: AnalysisSettings, rows: Sequence[ItemRow]
                    ) -> tuple[FactorSections, list[Note]]:
    """Correlations, factorability, retention and the rotated solution of the active items.

    Returns the sections and the warnings they add to the answer's list (in the order they arose). Data
    that cannot carry a factor model (too few respondents or items, a failed extraction) leave the
    factor solution empty with a warning saying why.
    """
    names = list(settings.items)
    fi = factor_input(inputs, settings, names)
    warnings: list[Note] = list(fi.warnings)
    correlations = CorrelationsSection(type=settings.correlation, items=tuple(names), matrix=fi.R,
                                       smoothed=fi.smoothed, n=fi.n, warnings=fi.warnings)
    k = len(names)
    factorability = retention = None
    result: EFAResult | None = None
    efa_warnings: list[Note] = []
    try:
        check_factor_model(fi.n, k, min_items=0)
        factorability = factorability_summary(fi.R, fi.n, names=names)
        check_factor_model(fi.n, k)
        retention = retention_summary(fi.R, fi.n, iterations=settings.pa_iterations, seed=settings.seed,
                                      variant=settings.pa_variant)
        m = settings.n_factors if settings.n_factors is not None else max(1, int(retention["suggested"]))
        m, cut = cap_factors(m, k)
        if cut is not None:
            warnings.append(cut)
        previous = None
        if k != len(inputs.pool_items) and fi.pool_used:
            previous = _reference(inputs, settings, m)
        result = factor_analysis(fi.R, m, n=fi.n, names=names, method=settings.extraction, rotation=settings.rotation,
                                 gamma=settings.gamma, constructs=_constructs(inputs, names), previous=previous,
                                 thresholds=settings.thresholds, item_rest_r=[r.item_rest_r for r in rows],
                                 reverse=[r.reverse for r in rows], seed=settings.seed)
        efa_warnings = list(result.warnings)
    except InputError as exc:  # the data do not support this part: a warning, not a failure
        efa_warnings = [Note(exc.code, exc.message)]
    warnings.extend(efa_warnings)
    flags = all_flags(result.flags if result is not None else [], fi.R, rows, settings.thresholds)
    efa = EfaSection(result=result, flags=flags, warnings=tuple(efa_warnings))
    return FactorSections(correlations, factorability, retention, efa), warnings
