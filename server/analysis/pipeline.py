"""One analysis, section by section: reliability, items, constructs, pruning path, then the factor sections.

Each step is a plain function of the inputs (gathered and cached by the engine) and the settings; nothing
here calls the engine.
"""
from __future__ import annotations

from dataclasses import replace

from .. import __version__
from ..stats.notes import Note, unique
from .answer import ORDINAL_NOTE, AnalysisAnswer, DatasetInfo, FactorSections
from .factors import factor_sections
from .inputs import AnalysisInputs
from .items import item_rows, path
from .progress import stage
from .reliability import (
    construct_blocks,
    ordinal_coefficients,
    scale_covariance,
    scale_reliability,
    subscale_groups,
)
from .settings import AnalysisSettings

__all__ = ["run"]


def run(inputs: AnalysisInputs, settings: AnalysisSettings, *, with_factors: bool = True) -> AnalysisAnswer:
    """The analysis answer of ``settings`` on ``inputs`` (``with_factors=False``: reliability sections only).

    Raises :class:`~server.stats.errors.InputError` when the reliability sections cannot be computed
    (too few complete respondents under listwise deletion...); a factor model the data cannot carry
    is reported as a warning instead.
    """
    warnings: list[Note] = [inputs.constant[n] for n in settings.excluded]
    stage(f"reliability of {len(settings.items)} items (alpha, omega)")
    sc = scale_covariance(inputs, settings)
    warnings.extend(sc.notes)
    rel = scale_reliability(sc, settings)
    warnings.extend(rel.warnings)
    stage("item table: alpha and omega with each item left out")
    rows = item_rows(inputs, settings, sc, rel)
    stage("pruning path")
    pruning = path(settings, sc, rel)
    factors = None
    R_ordinal = None
    if with_factors:
        factors, more = factor_sections(inputs, settings, rows, rel.result.omega_total)
        warnings.extend(more)
        ordinal = None
        if settings.correlation == "polychoric":
            R_ordinal = factors.correlations.matrix
            ordinal, more = ordinal_coefficients(R_ordinal, settings.items)
            ordinal["ordinal_note"] = ORDINAL_NOTE
            warnings.extend(more)
        rel = replace(rel, omega=factors.omega, ordinal=ordinal)
    stage("subscales and constructs")
    groups, grouping = subscale_groups(inputs, settings, factors.efa.result if factors else None,
                                       factors_run=with_factors)
    constructs = construct_blocks(inputs, settings, sc, groups, R_ordinal)
    allowed = {*settings.items, *settings.excluded}
    if factors is not None:
        factors = _only_about(factors, allowed)
    return AnalysisAnswer(
        dataset=DatasetInfo(id=inputs.dataset_id, name=inputs.name, n_rows=inputs.n_rows,
                            n_items_total=len(inputs.items)),
        settings=settings, version=__version__, reliability=rel, items=rows, constructs=constructs,
        pruning_path=pruning, factors=factors, grouping=grouping,
        warnings=tuple(w for w in unique(warnings) if allowed.issuperset(w.items)))


def _only_about(factors: FactorSections, allowed: set[str]) -> FactorSections:
    """The factor sections without any warning that names an item outside ``allowed`` (the analysis' items)."""
    c = factors.correlations
    keep = tuple(w for w in c.warnings if allowed.issuperset(w.items))
    if len(keep) == len(c.warnings):
        return factors
    return replace(factors, correlations=replace(c, warnings=keep))
