"""Item sections: one row per active item (descriptives, item-rest r, alpha and omega if deleted), and the
pruning path."""
from __future__ import annotations

from collections.abc import Sequence

from ..stats.items import item_table, pruning_path
from .answer import ItemRow, ReliabilitySection
from .inputs import AnalysisInputs
from .reliability import ScaleCovariance
from .settings import AnalysisSettings

__all__ = ["item_rows", "path"]


def item_rows(inputs: AnalysisInputs, settings: AnalysisSettings, sc: ScaleCovariance,
              rel: ReliabilitySection) -> tuple[ItemRow, ...]:
    """The board's rows, in the dataset's column order; the one-factor fit of ``rel`` warm-starts omega."""
    names = list(settings.items)
    stats = {r["name"]: r for r in item_table(sc.cov, names=names, start=rel.result.loadings)}
    desc = {d.name: d for d in inputs.descriptives}
    meta = {it.name: it for it in inputs.items}
    rev = set(settings.reverse)
    return tuple(ItemRow(name=n, text=meta[n].text, construct=meta[n].construct, reverse=n in rev, min=meta[n].min,
                         max=meta[n].max, descriptives=desc[n],
                         stats={k: v for k, v in stats[n].items() if k != "name"}) for n in names)


def path(settings: AnalysisSettings, sc: ScaleCovariance, rel: ReliabilitySection) -> Sequence[dict]:
    """Greedy backward elimination by alpha down to 3 items (``pruning_path``)."""
    names = list(settings.items)
    return pruning_path(sc.cov, names=names, min_items=min(3, len(names)), start=rel.result.loadings)
