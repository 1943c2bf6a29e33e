"""The one builder of covariance and correlation matrices: the full item pool, and the active items.

Pairwise deletion takes a submatrix of the full pool (computed once per dataset and correlation type on
the raw responses, cached by the engine), so a drop never goes back to the responses. Listwise deletion
computes the active items' own matrices from the respondents who answered every one of them, so that the
correlations, the factor sections and the reliability sections rest on the same people. When the full
pool cannot form a matrix (two items never answered together...), a problem confined to inactive items
must not block the analysis: the active items' own matrix is used and a warning says so (the same clear
error is raised when the problem is among them).
"""
from __future__ import annotations

from collections.abc import Collection, Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from ..stats import correlation as corrmod
from ..stats.errors import InputError
from ..stats.notes import Note, note

__all__ = ["ActiveMatrices", "FullPool", "PoolUnavailable", "active_matrices", "full_pool", "listwise_covariance",
           "min_pair_n", "pool_warnings_for"]


@dataclass(frozen=True)
class FullPool:
    """Pairwise matrices of every item of a dataset on raw responses (items without variance: NaN rows)."""

    cov: np.ndarray      # pairwise covariance, k x k
    n_pair: np.ndarray   # pairwise n, k x k
    corr: np.ndarray     # Pearson or polychoric correlation, k x k
    warnings: tuple[Note, ...]


@dataclass(frozen=True)
class PoolUnavailable:
    """Why the full pool's matrix could not be formed (the InputError's message)."""

    message: str


@dataclass(frozen=True)
class ActiveMatrices:
    """Covariance, pairwise n and correlation matrices of the active items (raw, not reverse-scored)."""

    cov: np.ndarray
    n_pair: np.ndarray
    corr: np.ndarray
    warnings: tuple[Note, ...]  # of the matrix they were taken from (the pool's or their own)
    note: Note | None           # set when the pool could not be formed and the items' own matrix was used


def full_pool(responses: np.ndarray, names: Sequence[str], constant: Collection[str], correlation: str) -> FullPool:
    """The pairwise matrices of every item with some variance, on the raw responses.

    Raises :class:`InputError` when the pool cannot form a matrix (two items never answered together...).
    """
    ok = np.array([n not in constant for n in names])
    X = responses[:, ok]
    kept = [n for n in names if n not in constant]
    cov, n_pair = corrmod.pairwise_covariance(X)
    make = corrmod.polychoric_matrix if correlation == "polychoric" else corrmod.pearson_matrix
    res = make(X, missing="pairwise", smooth=None, names=kept)
    k = len(names)
    full_cov, full_n, full_corr = np.full((k, k), np.nan), np.zeros((k, k)), np.full((k, k), np.nan)
    sub = np.ix_(ok, ok)
    full_cov[sub], full_n[sub], full_corr[sub] = cov, n_pair, np.asarray(res.matrix, float)
    return FullPool(cov=full_cov, n_pair=full_n, corr=full_corr, warnings=tuple(res.warnings))


def active_matrices(responses: np.ndarray, idx: np.ndarray, names: Sequence[str], *, correlation: str,
                    missing: str, pool: FullPool | PoolUnavailable | None) -> ActiveMatrices:
    """The matrices of the active items (columns ``idx`` of ``responses``, called ``names``).

    Pairwise: the submatrix of ``pool`` (the cached full pool of this correlation type), or, when it is
    :class:`PoolUnavailable`, the items' own matrices with a ``pool_unavailable`` note. Listwise: the
    items' own matrices from their complete rows (``pool`` is not used).
    """
    note_ = None
    if missing == "pairwise":
        if isinstance(pool, FullPool):
            sub = np.ix_(idx, idx)
            return ActiveMatrices(pool.cov[sub], pool.n_pair[sub], pool.corr[sub], pool.warnings, None)
        if isinstance(pool, PoolUnavailable):
            note_ = note("pool_unavailable", f"The {correlation} matrix of the whole item pool could not be formed "
                         f"({pool.message}); this analysis uses the active items' own matrix, recomputed from their "
                         f"responses.")
    X = responses[:, idx]
    if missing == "listwise":
        X = X[~np.isnan(X).any(axis=1)]
    cov, n_pair = corrmod.pairwise_covariance(X)
    make = corrmod.polychoric_matrix if correlation == "polychoric" else corrmod.pearson_matrix
    res = make(X, missing=missing, smooth=None, names=list(names))
    return ActiveMatrices(cov, n_pair, np.asarray(res.matrix, float), tuple(res.warnings), note_)


def listwise_covariance(responses: np.ndarray, idx: np.ndarray, names: Sequence[str]) -> tuple[np.ndarray, np.ndarray,
                                                                                                  int]:
    """Covariances of the active items on the respondents who answered all of them, and how many did.

    Raises :class:`InputError` with fewer than 3 such respondents (``too_few_complete``) or when an item
    has no variance among them (``no_variance``).
    """
    X = responses[:, idx]
    complete = ~np.isnan(X).any(axis=1)
    n_complete = int(complete.sum())
    if n_complete < 3:
        raise InputError(f"Only {n_complete} respondent(s) answered every active item, too few for listwise "
                         f"deletion; use pairwise deletion or leave out the items most often skipped.",
                         code="too_few_complete", details={"n_complete": n_complete, "missing": "listwise"})
    cov, n_pair = corrmod.pairwise_covariance(X[complete])
    flat = [n for n, v in zip(names, np.diag(cov)) if not v > 0]
    if flat:
        raise InputError(f"Item '{flat[0]}' has no variance among the {n_complete} respondents who answered every "
                         f"active item (listwise deletion); leave it out or use pairwise deletion.",
                         code="no_variance", details={"item": flat[0], "respondents": n_complete,
                                                      "missing": "listwise"})
    return cov, n_pair, n_complete


def min_pair_n(n_pair: np.ndarray) -> int:
    """The smallest number of respondents behind an off-diagonal entry (the diagonal's for one item)."""
    off = n_pair[~np.eye(len(n_pair), dtype=bool)]
    return int(off.min()) if off.size else int(n_pair.min())


# Codes of the pool's warnings that concern pairs of the pool, not of the active items: +-1 pairs are
# counted again on the active submatrix, and the active submatrix is smoothed (and reported) by the
# factor sections, so the pool's "left unsmoothed" note does not apply.
_POOL_ONLY = frozenset({"not_positive_definite", "perfect_correlation", "polychoric_boundary"})
_PER_ITEM = frozenset({"polychoric_sparse_category"})


def pool_warnings_for(warnings: Sequence[Note], R: np.ndarray, names: Sequence[str], correlation: str) -> list[Note]:
    """The matrix warnings that concern the active items ``names`` (with ``R`` their correlation matrix).

    Per-item notes about inactive items and the pool-only notes (:data:`_POOL_ONLY`) are left out, and
    the +-1 pairs are counted on ``R``; the counts of sparse polychoric tables still describe the pool.
    """
    active = set(names)
    out = [w for w in warnings
           if w.code not in _POOL_ONLY and (w.code not in _PER_ITEM or active.issuperset(w.items))]
    perfect = corrmod.perfect_pairs_note(R, list(names), correlation)
    if perfect is not None:
        out.append(perfect)
    return out


def constant_notes(responses: np.ndarray, names: Sequence[str]) -> Mapping[str, Note]:
    """Items with fewer than two different answers, each with a ``no_variance`` note saying why."""
    out = {}
    for j, name in enumerate(names):
        col = responses[:, j]
        vals = np.unique(col[~np.isnan(col)])
        if vals.size < 2:
            why = f"every answer is {vals[0]:g}" if vals.size == 1 else "it has no answers"
            out[name] = note("no_variance", f"Item '{name}' has no variance ({why}); it cannot enter the correlation "
                             f"matrix and was left out of the analysis.", [name])
    return out
