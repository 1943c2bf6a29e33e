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
           "ItemRow", "OmegaFamily", "ReliabilitySection"]

ITEMS_NOTE = ("Item-rest r, alpha and omega if deleted in 'items' are whole-pool figures (every active item as "
              "one scale); each subscale's own figures are in constructs[name].item_table.")
ORDINAL_NOTE = ("Ordinal alpha and omega come from the polychoric correlations: they describe the continuous "
                "latent responses behind the answer categories, not the observed sum score (Zumbo, Gadermann & "
                "Zeisser 2007).")
ONE_FACTOR_ONLY = ("Reliability-only answer: no factor model was fitted, so omega total is the one-factor "
                   "(unidimensional) omega and there is no omega hierarchical.")


@dataclass(frozen=True)
class OmegaFamily:
    """The pool's omega family from the retained factor model (``basis``: schmid_leiman, one_factor, unavailable)."""

    omega_total: float | None
    omega_hierarchical: float | None
    omega_subscale: Mapping[str, float | None]
    omega_groups: tuple[Mapping[str, Any], ...]
    ecv: float | None
    h: float | None
    basis: str
    note: str
    source: str  # which solution and matrix the figures come from

    def to_dict(self) -> dict:
        return {"omega_total": self.omega_total, "omega_hierarchical": self.omega_hierarchical,
                "omega_subscale": dict(self.omega_subscale), "omega_groups": list(self.omega_groups),
                "ecv": self.ecv, "h": self.h, "omega_basis": self.basis, "omega_note": self.note,
                "omega_source": self.source}


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
    omega: OmegaFamily | None = None  # None: reliability-only answer (omega_basis "one_factor_only")
    ordinal: Mapping[str, Any] | None = None  # alpha_ordinal, omega_ordinal (polychoric correlations)

    @property
    def warnings(self) -> list[Note]:
        return list(self.result.warnings)

    def to_dict(self) -> dict:
        uni = self.result.omega_total
        out = {**self.result.to_dict(), "missing": self.missing, "n_items": self.n_items,
               "min_pairwise_n": self.min_pairwise_n, "basis": self.basis, "omega_unidimensional": uni}
        if self.omega is None:
            out.update(omega_total=uni, omega_hierarchical=None, omega_subscale={}, omega_groups=[], ecv=None, h=None,
                       omega_basis="one_factor_only", omega_note=ONE_FACTOR_ONLY)
        else:
            out.update(self.omega.to_dict())
        if self.ordinal is not None:
            out.update(self.ordinal)
        return out


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
    """One subscale (a codebook construct or a factor's items): its reliability (``result`` None below two
    items), its own item table and pruning path, the one-factor fit and, with polychoric correlations, its
    ordinal coefficients."""

    items: tuple[str, ...]
    result: ReliabilityResult | None
    warnings: tuple[Note, ...] = ()
    item_table: tuple[Mapping[str, Any], ...] = ()  # name, item_rest_r, alpha/omega_if_deleted, r_other
    pruning_path: tuple[Mapping[str, Any], ...] = ()
    one_factor_fit: Mapping[str, Any] | None = None  # rmsr, largest_residual {r, items}
    ordinal: Mapping[str, Any] | None = None  # alpha_ordinal, omega_ordinal

    def to_dict(self) -> dict:
        own = {"items": list(self.items), "n_items": len(self.items), "item_table": list(self.item_table),
               "pruning_path": list(self.pruning_path), "one_factor_fit": self.one_factor_fit}
        if self.ordinal is not None:
            own.update(self.ordinal)
        if self.result is None:
            return {**own, "alpha": None, "omega_unidimensional": None, "warnings": list(self.warnings)}
        out = {**self.result.to_dict(), **own, "omega_unidimensional": self.result.omega_total}
        out["warnings"] = [*out["warnings"], *self.warnings]
        return out


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
    withheld: Mapping[str, Any] | None = None  # a degenerate solution not shown: n_factors, rotation, gamma, reason

    @property
    def n_factors(self) -> int:
        return 0 if self.result is None else self.result.n_factors

    def to_dict(self) -> dict:
        base = {"n_factors": 0} if self.result is None else self.result.to_dict()
        out = {**base, "flags": list(self.flags), "warnings": list(self.warnings)}
        if self.withheld is not None:
            out["withheld"] = dict(self.withheld)
        return out


@dataclass(frozen=True)
class FactorSections:
    """Correlations, factorability, retention and the factor solution."""

    correlations: CorrelationsSection
    factorability: Mapping[str, Any] | None
    retention: Mapping[str, Any] | None
    efa: EfaSection
    omega: OmegaFamily | None = None


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
    grouping: Mapping[str, Any] | None = None  # requested, used, note

    def to_dict(self) -> dict:
        out: dict[str, Any] = {"dataset": self.dataset, "settings": self.settings, "version": self.version,
                               "reliability": self.reliability, "items": list(self.items), "items_scope": "pool",
                               "items_note": ITEMS_NOTE, "grouping": None if self.grouping is None else
                               dict(self.grouping), "constructs": dict(self.constructs),
                               "pruning_path": list(self.pruning_path)}
        if self.factors is not None:
            out.update(correlations=self.factors.correlations, factorability=self.factors.factorability,
                       retention=self.factors.retention, efa=self.factors.efa)
        out["warnings"] = list(self.warnings)
        return out
