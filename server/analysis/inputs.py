"""What one analysis reads: the dataset's responses and codebook, and the engine's cached work."""
from __future__ import annotations

from collections.abc import Callable, Hashable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Protocol, TypeVar

import numpy as np

from ..stats.descriptives import ItemDescriptives, item_descriptives
from ..stats.errors import InputError
from ..stats.notes import Note
from .matrices import AnswerPatterns, FullPool, PoolUnavailable, constant_notes, full_pool

__all__ = ["AnalysisInputs", "ItemInfo", "Memo", "no_memo"]

T = TypeVar("T")
#: ``memo(key, make)``: the value cached under ``key``, made by ``make()`` the first time.
Memo = Callable[[Hashable, Callable[[], Any]], Any]


def no_memo(key: Hashable, make: Callable[[], T]) -> T:
    """A :data:`Memo` that caches nothing."""
    return make()


class ItemInfo(Protocol):
    """What the analysis reads of an item's codebook entry."""

    name: str
    text: str
    construct: str | None
    min: float
    max: float


@dataclass(frozen=True)
class AnalysisInputs:
    """Everything an analysis of one dataset reads.

    ``responses`` are raw (reverse-keyed items not reverse-scored), one column per entry of ``items``.
    ``descriptives`` are every item's, after reverse-scoring with the settings' ``reverse``. ``pools``
    holds the full-pool pairwise matrices by correlation type (only the ones the settings need).
    ``memo`` caches the full-pool reference factor solutions across analyses, ``blocks`` the subscale blocks
    (keyed by their matrices' content, so a drop in one subscale reuses the others'). ``patterns``, when given
    (the engine's, formed once per dataset), answers :meth:`answered` without reading the responses.
    """

    dataset_id: str
    name: str
    n_rows: int
    items: Sequence[ItemInfo]
    responses: np.ndarray
    constant: Mapping[str, Note]
    descriptives: Sequence[ItemDescriptives]
    pools: Mapping[str, FullPool | PoolUnavailable]
    memo: Memo = no_memo
    patterns: AnswerPatterns | None = None
    blocks: Memo = no_memo  # each subscale's block by the content of its matrices (construct_blocks)

    @property
    def names(self) -> list[str]:
        return [it.name for it in self.items]

    @property
    def pool_items(self) -> list[str]:
        """Every item that can enter an analysis (those with some variance)."""
        return [it.name for it in self.items if it.name not in self.constant]

    def columns(self, names: Sequence[str]) -> np.ndarray:
        """Column indices of ``names`` in ``responses``."""
        index = {n: j for j, n in enumerate(self.names)}
        return np.array([index[n] for n in names], dtype=int)

    def answered(self, idx: np.ndarray) -> tuple[int, int]:
        """Respondents who answered at least one, and every one, of the items at columns ``idx``."""
        if self.patterns is not None:
            return self.patterns.answered_any(idx), self.patterns.answered_all(idx)
        missing = np.isnan(self.responses[:, idx])
        return int((~missing.all(axis=1)).sum()), int((~missing.any(axis=1)).sum())

    @classmethod
    def from_responses(cls, responses: np.ndarray, items: Sequence[ItemInfo], reverse: Sequence[str], *,
                       dataset_id: str = "responses", name: str = "responses",
                       correlations: Sequence[str] = ("pearson",), memo: Memo = no_memo,
                       zero_cell_correction: float = 0.5) -> AnalysisInputs:
        """Inputs computed afresh (no cache): constant items, descriptives for ``reverse``, the full pools.

        ``correlations`` lists the pools to form (the settings' correlation type and ``"pearson"``);
        ``zero_cell_correction`` is the polychoric pool's (the settings' value).
        """
        X = np.asarray(responses, dtype=float)
        names = [it.name for it in items]
        constant = constant_notes(X, names)
        rev = set(reverse)
        lo = np.array([it.min for it in items], dtype=float)
        hi = np.array([it.max for it in items], dtype=float)
        flip = np.array([n in rev for n in names])
        scored = X.copy()
        scored[:, flip] = (lo + hi)[flip] - scored[:, flip]
        pools: dict[str, FullPool | PoolUnavailable] = {}
        for kind in dict.fromkeys(["pearson", *correlations]):
            try:
                pools[kind] = full_pool(X, names, constant, kind, zero_cell_correction=zero_cell_correction)
            except InputError as exc:
                pools[kind] = PoolUnavailable(exc.message)
        return cls(dataset_id=dataset_id, name=name, n_rows=X.shape[0], items=items, responses=X, constant=constant,
                   descriptives=item_descriptives(scored, names=names, mins=lo, maxs=hi), pools=pools, memo=memo)

    def signs(self, names: Sequence[str], reverse: Sequence[str]) -> np.ndarray:
        """-1 for reverse-keyed items, 1 otherwise (a covariance is reverse-scored by ``outer(s, s)``)."""
        rev = set(reverse)
        return np.array([-1.0 if n in rev else 1.0 for n in names])
