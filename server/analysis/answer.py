"""The analysis answer as a tree of frozen dataclasses; the API edge's one serializer writes it as JSON.

A class whose JSON merges a stats result with a few fields of its own says so in ``to_dict`` (a shallow
dictionary of typed values; the serializer turns what is inside into JSON).
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..stats.descriptives import ItemDescriptives
from ..stats.efa import EFAResult
from ..stats.notes import Note
from ..stats.reliability import ReliabilityResult
from .settings import AnalysisSettings

__all__ = ["AnalysisAnswer", "ConstructBlock", "CorrelationsSection", "DatasetInfo", "EfaSection", "FactorSections",
           "ItemRow", "ReliabilitySection"]


@dataclass(frozen=True)
class DatasetInfo:
    """Which dataset was analysed: ``{"id", "name", "n_rows", "n_items_total"}``."""

    id: str
    name: str
    n_rows: int
    n_items_total: int


@dataclass(frozen=True)
class ReliabilitySection:
    """The scale's reliability (``ReliabilityResult``) with the missing-data policy and its basis."""

    result: ReliabilityResult
    missing: str
    n_items: int
    min_pairwise_n: int
    basis: str

    @property
    def warnings(self) -> list[Note]:
        return list(self.result.warnings)

    def to_dict(self) -> dict:
        return {**self.result.to_dict(), "missing": self.missing, "n_items": self.n_items,
                "min_pairwise_n": self.min_pairwise_n, "basis": self.basis}


@dataclass(frozen=True)
class ItemRow:
    """One active item: its descriptives, item-total statistics and codebook entry."""

    name: str
    text: str
    construct: str | None
    reverse: bool
    min: float
    max: float
    descriptives: ItemDescriptives
    stats: Mapping[str, float | None]  # item_rest_r, alpha_if_deleted, omega_if_deleted

    @property
    def item_rest_r(self) -> float | None:
        return self.stats.get("item_rest_r")

    def to_dict(self) -> dict:
        return {**self.descriptives.to_dict(), **self.stats, "name": self.name, "text": self.text,
                "construct": self.construct, "reverse": self.reverse, "min": self.min, "max": self.max}


@dataclass(frozen=True)
class ConstructBlock:
    """The reliability of one codebook construct's active items (``result`` None below two items)."""

    items: tuple[str, ...]
    result: ReliabilityResult | None
    warnings: tuple[Note, ...] = ()

    def to_dict(self) -> dict:
        if self.result is None:
            return {"items": list(self.items), "n_items": len(self.items), "alpha": None,
                    "warnings": list(self.warnings)}
        return {**self.result.to_dict(), "items": list(self.items), "n_items": len(self.items)}


@dataclass(frozen=True)
class CorrelationsSection:
    """The correlation matrix the factor sections used (reverse-scored, smoothed when needed)."""

    type: str
    items: tuple[str, ...]
    matrix: np.ndarray
    smoothed: bool
    n: int
    warnings: tuple[Note, ...]


@dataclass(frozen=True)
class EfaSection:
    """The factor solution (``result`` None when the data cannot carry one) and every item flag."""

    result: EFAResult | None
    flags: tuple[dict, ...]
    warnings: tuple[Note, ...]

    @property
    def n_factors(self) -> int:
        return 0 if self.result is None else self.result.n_factors

    def to_dict(self) -> dict:
        base = {"n_factors": 0} if self.result is None else self.result.to_dict()
        return {**base, "flags": list(self.flags), "warnings": list(self.warnings)}


@dataclass(frozen=True)
class FactorSections:
    """Correlations, factorability, retention and the factor solution."""

    correlations: CorrelationsSection
    factorability: Mapping[str, Any] | None
    retention: Mapping[str, Any] | None
    efa: EfaSection


@dataclass(frozen=True)
class AnalysisAnswer:
    """One analysis: what ``POST /api/datasets/{id}/analysis`` answers (``factors`` None: reliability only)."""

    dataset: DatasetInfo
    settings: AnalysisSettings
    version: str
    reliability: ReliabilitySection
    items: tuple[ItemRow, ...]
    constructs: Mapping[str, ConstructBlock]
    pruning_path: Sequence[Mapping[str, Any]]
    factors: FactorSections | None
    warnings: tuple[Note, ...]

    def to_dict(self) -> dict:
        out: dict[str, Any] = {"dataset": self.dataset, "settings": self.settings, "version": self.version,
                               "reliability": self.reliability, "items": list(self.items),
                               "constructs": dict(self.constructs), "pruning_path": list(self.pruning_path)}
        if self.factors is not None:
            out.update(correlations=self.factors.correlations, factorability=self.factors.factorability,
                       retention=self.factors.retention, efa=self.factors.efa)
        out["warnings"] = list(self.warnings)
        return out
