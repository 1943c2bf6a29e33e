"""The flag section: the factor model's flags plus the model-free ones (near-duplicates, floor/ceiling)."""
from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from ..stats.flags import item_level_flags
from .answer import ItemRow

__all__ = ["all_flags"]


def all_flags(model_flags: Sequence[dict], R: np.ndarray, rows: Sequence[ItemRow],
              thresholds: Mapping[str, float] | None) -> tuple[dict, ...]:
    """``model_flags`` with the model-free flags of ``R`` (the active items' correlations), in board order."""
    names = [r.name for r in rows]
    extra = item_level_flags(R, names=names, floor=[r.descriptives.floor for r in rows],
                             ceiling=[r.descriptives.ceiling for r in rows], thresholds=thresholds)
    order = {n: i for i, n in enumerate(names)}
    return tuple(sorted([*model_flags, *extra], key=lambda f: order.get(f["item"], len(order))))
