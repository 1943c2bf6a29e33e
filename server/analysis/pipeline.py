"""One analysis, section by section: reliability, items, constructs, pruning path, then the factor sections.

Each step is a plain function of the inputs (gathered and cached by the engine) and the settings; nothing
here calls the engine.
"""
from __future__ import annotations

from .. import __version__
from ..stats.notes import Note, unique
from .answer import AnalysisAnswer, DatasetInfo
from .factors import factor_sections
from .inputs import AnalysisInputs
from .items import item_rows, path
from .reliability import construct_blocks, scale_covariance, scale_reliability
from .settings import AnalysisSettings

__all__ = ["run"]


def run(inputs: AnalysisInputs, settings: AnalysisSettings, *, with_factors: bool = True) -> AnalysisAnswer:
    """The analysis answer of ``settings`` on ``inputs`` (``with_factors=False``: reliability sections only).

    Raises :class:`~server.stats.errors.InputError` when the reliability sections cannot be computed
    (too few complete respondents under listwise deletion...); a factor model the data cannot carry
    is reported as a warning instead.
    """
    warnings: list[Note] = [inputs.constant[n] for n in settings.excluded]
    sc = scale_covariance(inputs, settings)
    warnings.extend(sc.notes)
    rel = scale_reliability(sc, settings)
    warnings.extend(rel.warnings)
    rows = item_rows(inputs, settings, sc, rel)
    constructs = construct_blocks(inputs, settings, sc)
    pruning = path(settings, sc, rel)
    factors = None
    if with_factors:
        factors, more = factor_sections(inputs, settings, rows)
        warnings.extend(more)
    return AnalysisAnswer(
        dataset=DatasetInfo(id=inputs.dataset_id, name=inputs.name, n_rows=inputs.n_rows,
                            n_items_total=len(inputs.items)),
        settings=settings, version=__version__, reliability=rel, items=rows, constructs=constructs,
        pruning_path=pruning, factors=factors, warnings=tuple(unique(warnings)))
