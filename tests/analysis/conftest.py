"""Analysis inputs built straight from a data frame (no engine, no HTTP)."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from server.analysis import AnalysisInputs, AnalysisSettings
from server.analysis.matrices import constant_notes


@dataclass(frozen=True)
class Item:
    name: str
    text: str = ""
    construct: str | None = None
    min: float = 1.0
    max: float = 5.0
    reverse: bool = False


def build(frame: pd.DataFrame, request: dict | None = None, *, constructs: dict | None = None, lo: float | None = None,
          hi: float | None = None, memo=None) -> tuple[AnalysisInputs, AnalysisSettings]:
    """Settings checked against ``frame``'s columns and the inputs an analysis of them reads."""
    X = frame.to_numpy(dtype=float)
    lo = float(np.nanmin(X)) if lo is None else lo
    hi = float(np.nanmax(X)) if hi is None else hi
    items = [Item(str(c), construct=(constructs or {}).get(c), min=lo, max=hi) for c in frame.columns]
    names = [it.name for it in items]
    settings = AnalysisSettings.build(request, names=names, constant=list(constant_notes(X, names)))
    kw = {"memo": memo} if memo is not None else {}
    inputs = AnalysisInputs.from_responses(X, items, settings.reverse, correlations=[settings.correlation],
                                           zero_cell_correction=settings.zero_cell_correction, **kw)
    return inputs, settings
