"""The one builder of covariance and correlation matrices: the full item pool, and the active items.

Pairwise deletion takes a submatrix of the full pool (computed once per dataset and correlation type on
the raw responses, cached by the engine), so a drop never goes back to the responses. Listwise deletion
computes the active items' own matrices from the respondents who answered every one of them, so that the
correlations, the factor sections and the reliability sections rest on the same people. When the full
pool cannot form a matrix (two items never answered together...), a problem confined to inactive items
must not block the analysis: the active items' own matrix is used and a warning says so (the same clear
error is raised when the problem is among them).

The pool's pairwise sums are read in blocks of respondents (:func:`pool_moments`), once for the covariance
and the Pearson matrix alike, so a million respondents cost a few blocks of memory, not copies of the matrix.
"""
from __future__ import annotations

from collections.abc import Collection, Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from ..stats import correlation as corrmod
from ..stats.errors import InputError
from ..stats.notes import Note, note
from .progress import stage

__all__ = ["ActiveMatrices", "AnswerPatterns", "FullPool", "PoolUnavailable", "active_matrices", "full_pool",
           "listwise_covariance", "min_pair_n", "pool_warnings_for"]


@dataclass(frozen=True)
class FullPool:
    """Pairwise matrices of every item of a dataset on raw responses (items without variance: NaN rows)."""

    cov: np.ndarray      # pairwise covariance, k x k
    n_pair: np.ndarray   # pairwise n, k x k
    corr: np.ndarray     # Pearson or polychoric correlation, k x k
    warnings: tuple[Note, ...]
    empty: np.ndarray | None = None      # polychoric: k x k, the pair's table has an empty cell
    corrected: np.ndarray | None = None  # polychoric: k x k, the zero-cell correction filled a cell of it
    correction: float = 0.0              # the zero-cell correction the polychoric estimates used


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
    from_pool: bool = False     # the matrices are a submatrix of the pool (its warnings name pool items)
    empty: np.ndarray | None = None      # the pool's empty-cell pairs, restricted to the active items
    corrected: np.ndarray | None = None
    correction: float = 0.0


@dataclass(frozen=True)
class AnswerPatterns:
    """Which items each respondent answered, as the distinct patterns and how many respondents share each.

    Formed once per dataset (:meth:`of`), it answers "how many respondents answered at least one / every
    item of this set" in O(patterns x items / 8), so a drop never goes back to the responses. Data without
    missing answers have a single pattern.
    """

    packed: np.ndarray  # patterns x ceil(k / 8) uint8, np.packbits of "answered" along the items
    counts: np.ndarray  # respondents with each pattern (int64)
    k: int

    @classmethod
    def of(cls, responses: np.ndarray, *, chunk: int = 65536) -> AnswerPatterns:
        """The distinct answer patterns of ``responses`` (NaN = not answered), read in row chunks."""
        n, k = responses.shape
        width = max(1, -(-k // 8))
        if n == 0:
            return cls(np.empty((0, width), dtype=np.uint8), np.zeros(0, dtype=np.int64), k)
        full = np.packbits(np.ones((1, k), dtype=bool), axis=1) if k else np.zeros((1, width), dtype=np.uint8)
        parts, n_full = [full], 0  # the complete rows are only counted; the full pattern stands for them once
        for s in range(0, n, chunk):
            answered = ~np.isnan(responses[s:s + chunk])
            complete = answered.all(axis=1)
            n_full += int(complete.sum())
            if not complete.all():
                parts.append(np.packbits(answered[~complete], axis=1))
        packed = np.concatenate(parts)
        rows = np.ascontiguousarray(packed).view(np.dtype((np.void, width))).ravel()
        uniq, counts = np.unique(rows, return_counts=True)
        counts = counts.astype(np.int64)
        at = int(np.flatnonzero(uniq == rows[0])[0])  # the full pattern, counted once above
        counts[at] += n_full - 1
        keep = counts > 0
        return cls(uniq.view(np.uint8).reshape(-1, width)[keep].copy(), counts[keep], k)

    def _mask(self, idx: np.ndarray) -> np.ndarray:
        flags = np.zeros(self.k, dtype=bool)
        flags[np.asarray(idx, dtype=int)] = True
        return np.packbits(flags) if self.k else np.zeros(1, dtype=np.uint8)

    def answered_any(self, idx: np.ndarray) -> int:
        """Respondents who answered at least one of the items at positions ``idx``."""
        hit = (self.packed & self._mask(idx)).any(axis=1)
        return int(self.counts[hit].sum())

    def answered_all(self, idx: np.ndarray) -> int:
        """Respondents who answered every item at positions ``idx``."""
        m = self._mask(idx)
        hit = ((self.packed & m) == m).all(axis=1)
        return int(self.counts[hit].sum())


POOL_ROWS = 16384  # respondents per block of the pool's moments: a few blocks of k columns in memory, not n x k


@dataclass(frozen=True)
class PoolMoments:
    """Pairwise sums of a response matrix, centred on each item's mean (as ``stats.correlation``'s moments).

    ``n[i, j]`` respondents answered both items; over them, ``sx[i, j]`` sums item i's centred answers,
    ``sxx[i, j]`` their squares and ``sxy[i, j]`` the products of items i and j.
    """

    n: np.ndarray  # int
    sx: np.ndarray
    sxx: np.ndarray
    sxy: np.ndarray

    @property
    def cxy(self) -> np.ndarray:
        """Co-deviations of each pair over the respondents who answered both."""
        with np.errstate(invalid="ignore", divide="ignore"):
            return self.sxy - self.sx * self.sx.T / self.n

    @property
    def ssx(self) -> np.ndarray:
        """``ssx[i, j]``: squared deviations of item i over the respondents who answered i and j."""
        with np.errstate(invalid="ignore", divide="ignore"):
            return self.sxx - self.sx * self.sx / self.n

    @property
    def cov(self) -> np.ndarray:
        """Pairwise covariance (divisor n_ij - 1; NaN where fewer than 2 respondents are shared)."""
        with np.errstate(invalid="ignore", divide="ignore"):
            cov = self.cxy / (self.n - 1)
        cov[self.n < 2] = np.nan
        return cov


def pool_moments(X: np.ndarray, *, rows: int = POOL_ROWS) -> PoolMoments:
    """:class:`PoolMoments` of ``X`` (NaN = missing), read ``rows`` respondents at a time.

    The same sums as ``stats.correlation.pairwise_covariance`` forms in one pass, without its n x k
    temporaries: a block without missing answers costs one product (its pairwise counts and sums are
    the column totals), a block with missing answers the four products of the pairwise formula.
    """
    n_rows, k = X.shape
    total, count = np.zeros(k), np.zeros(k)
    for s in range(0, n_rows, rows):
        block = X[s:s + rows]
        present = ~np.isnan(block)
        total += np.where(present, block, 0.0).sum(axis=0)
        count += present.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        centre = np.nan_to_num(total / count)
    n, sx, sxx, sxy = (np.zeros((k, k)) for _ in range(4))
    for s in range(0, n_rows, rows):
        block = np.ascontiguousarray(X[s:s + rows])
        present = ~np.isnan(block)
        X0 = block - centre
        if present.all():
            n += len(block)
            sx += X0.sum(axis=0)[:, None]
            sxx += (X0 * X0).sum(axis=0)[:, None]
        else:
            X0[~present] = 0.0
            M = present.astype(float)
            n += M.T @ M
            sx += X0.T @ M
            sxx += (X0 * X0).T @ M
        sxy += X0.T @ X0
    return PoolMoments(n.astype(int), sx, sxx, sxy)


def _pearson_pool(X: np.ndarray, names: list[str], moments: PoolMoments) -> tuple[np.ndarray, list[Note]]:
    """``stats.correlation.pearson_matrix(X, missing="pairwise", smooth=None)``'s matrix and warnings, from the
    pool's moments. A pool it would refuse (an item without variance, a pair with too few respondents or
    without variance) is handed to it, so the error is its own."""
    n, cxy, ssx = moments.n, moments.cxy, moments.ssx
    lo, hi = _column_range(X)
    with np.errstate(invalid="ignore", divide="ignore"):
        R = cxy / np.sqrt(ssx * ssx.T)
    off = ~np.eye(len(names), dtype=bool)
    if not np.all(lo < hi) or (off & (n < 3)).any() or (off & ~np.isfinite(R)).any():
        res = corrmod.pearson_matrix(X, missing="pairwise", smooth=None, names=names)  # raises its InputError
        return np.asarray(res.matrix, float), list(res.warnings)
    R = np.clip((R + R.T) / 2, -1.0, 1.0)
    np.fill_diagonal(R, 1.0)
    warnings: list[Note] = []
    perfect = corrmod.perfect_pairs_note(R, names, "pearson")
    if perfect is not None:
        warnings.append(perfect)
    R, _, _ = corrmod._maybe_smooth(R, None, "Pearson", names, warnings)  # the not-positive-definite note
    return R, warnings


def full_pool(responses: np.ndarray, names: Sequence[str], constant: Collection[str], correlation: str, *,
              zero_cell_correction: float = 0.0) -> FullPool:
    """The pairwise matrices of every item with some variance, on the raw responses.

    Polychoric estimates add ``zero_cell_correction`` to the empty cells of each pair's table; the pool
    also keeps which pairs have empty cells, so the notes about them can be recounted for any subset.

    Raises :class:`InputError` when the pool cannot form a matrix (two items never answered together...).
    """
    ok = np.array([n not in constant for n in names])
    X = responses if ok.all() else responses[:, ok]  # no copy of a large pool without constant items
    kept = [n for n in names if n not in constant]
    stage(f"{'polychoric' if correlation == 'polychoric' else 'Pearson'} correlations of {len(kept)} items")
    moments = pool_moments(X)
    cov, n_pair = moments.cov, moments.n
    if correlation == "polychoric":
        res = corrmod.polychoric_matrix(X, missing="pairwise", smooth=None, names=kept,
                                        zero_cell_correction=zero_cell_correction)
        R, warnings = np.asarray(res.matrix, float), list(res.warnings)
    else:
        R, warnings = _pearson_pool(X, kept, moments)
    k = len(names)
    full_cov, full_n, full_corr = np.full((k, k), np.nan), np.zeros((k, k)), np.full((k, k), np.nan)
    sub = np.ix_(ok, ok)
    full_cov[sub], full_n[sub], full_corr[sub] = cov, n_pair, R
    empty = corrected = None
    if correlation == "polychoric":
        empty, corrected = np.zeros((k, k), dtype=bool), np.zeros((k, k), dtype=bool)
        empty[sub], corrected[sub] = res.empty_pairs, res.corrected_pairs
    return FullPool(cov=full_cov, n_pair=full_n, corr=full_corr, warnings=tuple(warnings), empty=empty,
                    corrected=corrected, correction=float(zero_cell_correction) if correlation == "polychoric" else 0.0)


def active_matrices(responses: np.ndarray, idx: np.ndarray, names: Sequence[str], *, correlation: str,
                    missing: str, pool: FullPool | PoolUnavailable | None,
                    zero_cell_correction: float = 0.0) -> ActiveMatrices:
    """The matrices of the active items (columns ``idx`` of ``responses``, called ``names``).

    Pairwise: the submatrix of ``pool`` (the cached full pool of this correlation type), or, when it is
    :class:`PoolUnavailable`, the items' own matrices with a ``pool_unavailable`` note. Listwise: the
    items' own matrices from their complete rows (``pool`` is not used).
    """
    note_ = None
    if missing == "pairwise":
        if isinstance(pool, FullPool):
            sub = np.ix_(idx, idx)
            return ActiveMatrices(pool.cov[sub], pool.n_pair[sub], pool.corr[sub], pool.warnings, None, True,
                                  None if pool.empty is None else pool.empty[sub],
                                  None if pool.corrected is None else pool.corrected[sub], pool.correction)
        if isinstance(pool, PoolUnavailable):
            note_ = note("pool_unavailable", f"The {correlation} matrix of the whole item pool could not be formed "
                         f"({pool.message}); this analysis uses the active items' own matrix, recomputed from their "
                         f"responses.")
    X = responses[:, idx]
    if missing == "listwise":
        X = X[~np.isnan(X).any(axis=1)]
    cov, n_pair = corrmod.pairwise_covariance(X)
    make = corrmod.polychoric_matrix if correlation == "polychoric" else corrmod.pearson_matrix
    kw = {"zero_cell_correction": zero_cell_correction} if correlation == "polychoric" else {}
    res = make(X, missing=missing, smooth=None, names=list(names), **kw)
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
# Notes about pairs of the pool, recounted on the active items when the pool keeps its pair flags.
_PAIR_CODES = frozenset({"polychoric_empty_cells", "polychoric_zero_cell_correction", "polychoric_boundary"})
_BOUNDARY = 0.995  # as server.stats.correlation: an estimate this close to +-1 is a boundary estimate
_NAMED_PAIRS = 5


def _pairs_text(pairs: list[tuple[int, int]], names: Sequence[str], R: np.ndarray | None = None) -> str:
    parts = [f"'{names[i]}' x '{names[j]}'" + ("" if R is None else f" (r = {R[i, j]:.4f})")
             for i, j in pairs[:_NAMED_PAIRS]]
    more = f" and {len(pairs) - _NAMED_PAIRS} more" if len(pairs) > _NAMED_PAIRS else ""
    return ", ".join(parts) + more


def _pair_notes(R: np.ndarray, names: Sequence[str], empty: np.ndarray, corrected: np.ndarray,
                correction: float) -> list[Note]:
    """The empty-cell, zero-cell-correction and boundary notes of the active items' pairs (as polychoric_matrix)."""
    k = len(names)
    iu, ju = np.triu_indices(k, 1)
    out = []

    def items_of(pairs):
        return [names[i] for i in sorted({i for p in pairs for i in p})]

    e = [(int(i), int(j)) for i, j in zip(iu, ju) if empty[i, j]]
    if e:
        out.append(note("polychoric_empty_cells", f"{len(e)} of {len(iu)} item pairs have at least one empty cell in "
                        f"their contingency table ({_pairs_text(e, names)}); their polychoric correlations rest on "
                        "sparse tables.", items_of(e)))
    c = [(int(i), int(j)) for i, j in zip(iu, ju) if corrected[i, j]]
    if correction > 0 and c:
        out.append(note("polychoric_zero_cell_correction", f"{correction:g} was added to the empty cells of {len(c)} "
                        f"pair(s) before estimation (zero-cell correction, common practice): "
                        f"{_pairs_text(c, names)}.", items_of(c)))
    b = [(int(i), int(j)) for i, j in zip(iu, ju) if abs(R[i, j]) >= _BOUNDARY]
    if b:
        out.append(note("polychoric_boundary", f"The polychoric estimate is at the boundary (|r| >= {_BOUNDARY}) for "
                        f"{len(b)} pair(s), {_pairs_text(b, names, R)}: an empty cell or a duplicated item can push "
                        "the estimate to +-1, and such a value is not a trustworthy correlation.", items_of(b)))
    return out


def pool_warnings_for(warnings: Sequence[Note], R: np.ndarray, names: Sequence[str], correlation: str, *,
                      empty: np.ndarray | None = None, corrected: np.ndarray | None = None,
                      correction: float = 0.0) -> list[Note]:
    """The matrix warnings that concern the active items ``names`` (with ``R`` their correlation matrix).

    Per-item notes about inactive items and the pool-only notes (:data:`_POOL_ONLY`) are left out, and
    the +-1 pairs are counted on ``R``. With the pool's pair flags (``empty``, ``corrected``: the active
    items' submatrices) the empty-cell, zero-cell-correction and boundary notes are recounted on the
    active pairs; without them, a pair note naming an inactive item is left out.
    """
    active = set(names)
    recount = empty is not None and corrected is not None
    out = [w for w in warnings
           if w.code not in _POOL_ONLY and not (recount and w.code in _PAIR_CODES)
           and ((w.code not in _PER_ITEM and w.code not in _PAIR_CODES) or active.issuperset(w.items))]
    if empty is not None and corrected is not None:  # recount
        out.extend(_pair_notes(R, list(names), empty, corrected, correction))
    perfect = corrmod.perfect_pairs_note(R, list(names), correlation)
    if perfect is not None:
        out.append(perfect)
    return out


def constant_notes(responses: np.ndarray, names: Sequence[str]) -> Mapping[str, Note]:
    """Items with fewer than two different answers, each with a ``no_variance`` note saying why."""
    out = {}
    lo, hi = _column_range(responses)  # fewer than two different answers <=> not (min < max)
    for j, name in enumerate(names):
        if not lo[j] < hi[j]:
            why = f"every answer is {lo[j]:g}" if lo[j] == hi[j] else "it has no answers"
            out[name] = note("no_variance", f"Item '{name}' has no variance ({why}); it cannot enter the correlation "
                             f"matrix and was left out of the analysis.", [name])
    return out


def _column_range(X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Each column's smallest and largest answer, NaN for a column without answers (one pass, no copy)."""
    if X.shape[0] == 0:
        return np.full(X.shape[1], np.nan), np.full(X.shape[1], np.nan)
    with np.errstate(invalid="ignore"):
        return np.fmin.reduce(X, axis=0), np.fmax.reduce(X, axis=0)
