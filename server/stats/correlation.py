"""Correlation matrices for item pools: Pearson and polychoric/tetrachoric, and smoothing.

Everything here works on a respondents x items array (or DataFrame) with NaN for a missing
answer and returns plain numpy arrays inside frozen dataclasses.  The polychoric estimator
is vectorised over all item pairs at once: the contingency tables of every pair come from one
matrix product of one-hot codes, the bivariate normal rectangle probabilities of all cells of
all pairs are evaluated in one array call (Owen's T function), and a bracketed Fisher-scoring
iteration updates rho for every pair simultaneously.

Reverse-keying
--------------
Reverse-scoring one item (``min + max - x``) changes the sign of its Pearson correlations and,
for the polychoric estimator here, changes the sign of its correlations *exactly* (bit for
bit): each pair's table is first brought to a canonical orientation (the lexicographically
largest of the table, its row flip, its column flip and both flips), estimated there, and the
sign restored.  A cached full-pool matrix can therefore be reverse-keyed by negating an item's
row and column instead of being recomputed.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy.special import ndtr, ndtri, owens_t

from .errors import InputError
from .notes import Note, note
from .spectra import eigvalsh

__all__ = [
    "CorrelationResult",
    "bivariate_normal_cdf",
    "listwise_covariance",
    "pairwise_covariance",
    "pearson_matrix",
    "perfect_pairs_note",
    "polychoric_matrix",
    "polychoric_pair",
    "smooth_to_pd",
    "smoothing_note",
]

_RHO_BOUND = 1.0 - 1e-7
_SPARSE_CATEGORY = 5  # common practice: fewer than 5 answers in a category makes its threshold unstable
_BOUNDARY = 0.995  # an estimate this close to +-1 is reported as a boundary estimate
_NAMED_PAIRS = 5  # pairs named in one warning sentence


@dataclass(frozen=True)
class CorrelationResult:
    """A correlation matrix with its pairwise sample sizes.

    Attributes
    ----------
    matrix : ndarray (k, k)
        The correlation matrix (smoothed to positive definite when ``smoothed``).
    n_pair : ndarray (k, k) of int
        Number of respondents behind each entry (diagonal: answers to the item).
    warnings : list of Note
        Soft problems with their codes (sparse categories, empty cells, smoothing).
    names : list of str
        Item names, in matrix order.
    method : str
        ``"pearson"`` or ``"polychoric"``.
    missing : str
        ``"pairwise"`` or ``"listwise"``.
    smoothed : bool
        Whether the raw estimate was not positive definite and was smoothed.
    min_eigenvalue : float
        Smallest eigenvalue of the raw (unsmoothed) estimate.
    thresholds : list of ndarray or None
        Polychoric only: each item's thresholds from its own margin (all its answers).
    empty_pairs, corrected_pairs : ndarray (k, k) of bool, or None
        Polychoric only: pairs with an empty cell among the two items' categories (what the
        ``polychoric_empty_cells`` note counts), and pairs with an empty cell inside the rows and
        columns observed in their table (the cells a zero-cell correction fills). They let a caller
        recount those notes for a subset of items without estimating again.
    """

    matrix: np.ndarray
    n_pair: np.ndarray
    warnings: list = field(default_factory=list)
    names: list = field(default_factory=list)
    method: str = "pearson"
    missing: str = "pairwise"
    smoothed: bool = False
    min_eigenvalue: float = float("nan")
    thresholds: list | None = None
    empty_pairs: np.ndarray | None = None
    corrected_pairs: np.ndarray | None = None

    def to_dict(self) -> dict:
        """JSON-ready ``{items, matrix, n_pair, method, missing, smoothed, min_eigenvalue, warnings}``."""
        return {
            "items": list(self.names),
            "matrix": np.round(self.matrix, 6).tolist(),
            "n_pair": self.n_pair.astype(int).tolist(),
            "method": self.method,
            "missing": self.missing,
            "smoothed": bool(self.smoothed),
            "min_eigenvalue": float(self.min_eigenvalue),
            "warnings": [w.to_dict() for w in self.warnings],
        }


# ----------------------------------------------------------------------------------------------
# input handling

def _as_matrix(X, names=None) -> tuple[np.ndarray, list[str]]:
    if isinstance(X, pd.DataFrame):
        cols = [str(c) for c in X.columns]
        try:
            arr = X.to_numpy(dtype=float, na_value=np.nan)
        except (TypeError, ValueError) as exc:
            raise InputError("The responses contain values that are not numbers; every answer must be "
                             "numeric or missing.", code="not_numeric") from exc
        names = list(names) if names is not None else cols
    else:
        try:
            arr = np.asarray(X, dtype=float)
        except (TypeError, ValueError) as exc:
            raise InputError("The responses contain values that are not numbers; every answer must be "
                             "numeric or missing.", code="not_numeric") from exc
    if arr.ndim != 2:
        raise InputError(f"Expected a respondents x items table, got an array with {arr.ndim} dimension(s).",
                         code="bad_shape", details={"shape": list(arr.shape)})
    _n, k = arr.shape
    if names is None:
        names = [f"item{j + 1}" for j in range(k)]
    names = [str(s) for s in names]
    if len(names) != k:
        raise InputError(f"Got {len(names)} item names for {k} columns.", code="bad_shape",
                         details={"names": len(names), "columns": k})
    if k < 2:
        raise InputError(f"A correlation matrix needs at least 2 items; got {k}.", code="too_few_items",
                         details={"items": k})
    if np.isinf(arr).any():
        r, c = np.argwhere(np.isinf(arr))[0]
        raise InputError(f"Item '{names[c]}' has an infinite value in row {r + 1}.", code="bad_value",
                         details={"item": names[c], "row": int(r + 1)})
    return arr, names


def _listwise(arr: np.ndarray, names: list[str]) -> np.ndarray:
    keep = ~np.isnan(arr).any(axis=1)
    if keep.sum() < 3:
        raise InputError(f"Only {int(keep.sum())} respondents answered every item; listwise deletion needs "
                         "at least 3.", code="too_few_rows", details={"complete_rows": int(keep.sum())})
    return arr[keep]


def _check_missing(missing: str) -> None:
    if missing not in ("pairwise", "listwise"):
        raise InputError(f"Unknown missing-data policy {missing!r}; use 'pairwise' or 'listwise'.",
                         code="bad_option", details={"missing": missing})


# ----------------------------------------------------------------------------------------------
# Pearson

def pairwise_covariance(X: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Covariance matrix from pairwise-complete observations (as ``pandas.DataFrame.cov``).

    Parameters
    ----------
    X : array-like (n, k)
        Responses, NaN for missing.

    Returns
    -------
    cov : ndarray (k, k)
        Each entry uses the rows where both items are present, with means taken over those
        rows and divisor ``n_ij - 1``; NaN where fewer than 2 rows are shared.
    n_pair : ndarray (k, k) of int
        The number of shared rows.

    Notes
    -----
    ``cov_ij = (sum x_i x_j - sum x_i sum x_j / n_ij) / (n_ij - 1)`` over the shared rows, computed
    with matrix products after centring each column on its available mean (for accuracy).
    """
    arr = np.asarray(X, dtype=float)
    return _pairwise_moments(arr)[:2]


def _pairwise_moments(arr: np.ndarray):
    present = ~np.isnan(arr)
    M = present.astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        centre = np.nanmean(np.where(present, arr, np.nan), axis=0)
    centre = np.nan_to_num(centre)
    X0 = np.where(present, arr - centre, 0.0)
    n = M.T @ M
    sx = X0.T @ M              # sum of x_i over rows where x_j is present
    sxx = (X0 * X0).T @ M      # sum of x_i^2 over rows where x_j is present
    sxy = X0.T @ X0
    with np.errstate(invalid="ignore", divide="ignore"):
        cxy = sxy - sx * sx.T / n
        ssx = sxx - sx * sx / n
        cov = cxy / (n - 1)
    cov[n < 2] = np.nan
    return cov, n.astype(int), cxy, ssx


def listwise_covariance(X: ArrayLike) -> tuple[np.ndarray, int]:
    """Covariance matrix (divisor n - 1) of the rows with no missing answer.

    Returns
    -------
    cov : ndarray (k, k)
    n : int
        Number of complete rows used.
    """
    arr = np.asarray(X, dtype=float)
    keep = ~np.isnan(arr).any(axis=1)
    sub = arr[keep]
    if sub.shape[0] < 2:
        return np.full((arr.shape[1], arr.shape[1]), np.nan), int(sub.shape[0])
    return np.cov(sub, rowvar=False, ddof=1), int(sub.shape[0])


def pearson_matrix(X: ArrayLike, *, missing: str = "pairwise", names: Sequence[str] | None = None,
                   smooth: str | None = "eigen"
                   ) -> CorrelationResult:
    """Pearson product-moment correlation matrix of the items.

    Parameters
    ----------
    X : array-like or DataFrame (n, k)
        Responses, NaN for missing.  Column names of a DataFrame become item names.
    missing : {"pairwise", "listwise"}
        Pairwise: every pair uses the rows where both items are present (means and standard
        deviations over those rows, as ``pandas.DataFrame.corr``).  Listwise: only rows with no
        missing answer.
    names : list of str, optional
        Item names (default: the DataFrame's columns or ``item1..itemk``).
    smooth : {"eigen", "higham", None}
        A pairwise matrix can fail to be positive definite; it is then smoothed with
        :func:`smooth_to_pd` and a warning says by how much.  ``None`` leaves it as is.

    Returns
    -------
    CorrelationResult

    Raises
    ------
    InputError
        For an item with no variance, a pair of items with fewer than 3 shared answers, or an
        unknown option.

    References
    ----------
    Pearson, K. (1896). Mathematical contributions to the theory of evolution III: Regression,
    heredity and panmixia. Philosophical Transactions of the Royal Society A, 187, 253-318.
    """
    _check_missing(missing)
    arr, names = _as_matrix(X, names)
    if missing == "listwise":
        arr = _listwise(arr, names)
    _check_variance(arr, names)
    _cov, n, cxy, ssx = _pairwise_moments(arr)
    bad = np.argwhere(np.triu(n < 3, 1))
    if len(bad):
        i, j = bad[0]
        raise InputError(f"Items '{names[i]}' and '{names[j]}' share only {n[i, j]} respondents; a "
                         "correlation needs at least 3.", code="too_few_pairs",
                         details={"items": [names[i], names[j]], "n": int(n[i, j])})
    with np.errstate(invalid="ignore", divide="ignore"):
        R = cxy / np.sqrt(ssx * ssx.T)
    flat = np.argwhere(np.triu(~np.isfinite(R), 1))
    if len(flat):
        i, j = flat[0]
        raise InputError(f"Items '{names[i]}' and '{names[j]}' have no variance on the respondents who "
                         "answered both; their correlation is undefined.", code="no_variance",
                         details={"items": [names[i], names[j]]})
    R = np.clip((R + R.T) / 2, -1.0, 1.0)
    np.fill_diagonal(R, 1.0)
    warnings: list[Note] = []
    perfect = perfect_pairs_note(R, names, "pearson")
    if perfect is not None:
        warnings.append(perfect)
    R, smoothed, lam = _maybe_smooth(R, smooth, "Pearson", names, warnings)
    return CorrelationResult(matrix=R, n_pair=n, warnings=warnings, names=names, method="pearson",
                             missing=missing, smoothed=smoothed, min_eigenvalue=lam)


def perfect_pairs_note(R: np.ndarray, names: Sequence[str], method: str) -> Note | None:
    """The ``perfect_correlation`` warning for item pairs correlating +-1 in ``R`` (None when there are none).

    ``method`` is ``"pearson"`` or ``"polychoric"``; ``items`` lists every item of such a pair.
    """
    label, why = (("polychoric correlation", "their answers are perfectly ordered together")
                  if method == "polychoric" else
                  ("Pearson correlation", "their answers are exact linear functions of each other"))
    A = np.asarray(R, dtype=float)
    iu, ju = np.triu_indices(A.shape[0], 1)
    edge = np.abs(A[iu, ju]) > 0.9999
    if not edge.any():
        return None
    f = np.nonzero(edge)[0][0]
    involved = sorted(set(iu[edge]) | set(ju[edge]))
    return note("perfect_correlation",
                f"{int(edge.sum())} item pair(s) have a {label} of +-1 (for example '{names[iu[f]]}' "
                f"and '{names[ju[f]]}', r = {A[iu[f], ju[f]]:.4f}): {why}, which often means a "
                "duplicated item. Drop one of each such pair.", [names[i] for i in involved])


def _check_variance(arr: np.ndarray, names: list[str]) -> None:
    for j, name in enumerate(names):
        col = arr[:, j]
        col = col[~np.isnan(col)]
        if col.size == 0:
            raise InputError(f"Item '{name}' has no answers; it cannot enter the correlation matrix.",
                             code="no_variance", details={"item": name})
        if np.all(col == col[0]):
            raise InputError(f"Item '{name}' has no variance (every answer is {col[0]:g}); it cannot enter "
                             "the correlation matrix.", code="no_variance",
                             details={"item": name, "value": float(col[0])})


def _maybe_smooth(R, smooth, label, names, warnings):
    lam = float(eigvalsh(R)[0])
    if smooth is None:
        if lam <= 0:
            warnings.append(note("not_positive_definite", f"The {label} matrix is not positive definite "
                                 f"(smallest eigenvalue {lam:.3g}) and was left unsmoothed."))
        return R, False, lam
    R_s, lam, changed = smooth_to_pd(R, method=smooth)
    if changed:
        warnings.append(smoothing_note(R, R_s, lam, smooth, label=label, names=names))
    return R_s, changed, lam


# ----------------------------------------------------------------------------------------------
# bivariate normal

def bivariate_normal_cdf(h: ArrayLike, k: ArrayLike, rho: ArrayLike) -> np.ndarray:
    """P(X <= h, Y <= k) for a standard bivariate normal with correlation rho, elementwise.

    Broadcasts ``h``, ``k`` and ``rho``; ``h`` and ``k`` may be +-inf; ``|rho| < 1``.

    Notes
    -----
    Owen's (1956) formula through his T function,

    ``Phi2(h, k; r) = Phi(h)/2 + Phi(k)/2 - T(h, a_h) - T(k, a_k) - beta``,
    ``a_h = (k - r h) / (h sqrt(1 - r^2))``, ``a_k = (h - r k) / (k sqrt(1 - r^2))``,
    ``beta = 0`` if ``hk > 0`` or (``hk = 0`` and ``h + k >= 0``), else ``1/2``;
    the limits at ``h = 0`` or ``k = 0`` are taken from the side ``h -> 0+``.  ``T`` is
    ``scipy.special.owens_t`` (Patefield & Tandy 2000), evaluated for all cells in one call.

    References
    ----------
    Owen, D. B. (1956). Tables for computing bivariate normal probabilities. Annals of
    Mathematical Statistics, 27(4), 1075-1090.
    Patefield, M., & Tandy, D. (2000). Fast and accurate calculation of Owen's T function.
    Journal of Statistical Software, 5(5).
    """
    h, k, rho = np.broadcast_arrays(np.asarray(h, float), np.asarray(k, float), np.asarray(rho, float))
    out = np.empty(h.shape)
    fin = np.isfinite(h) & np.isfinite(k)
    out[~fin] = _cdf_infinite(h[~fin], k[~fin])
    if fin.any():
        out[fin] = _owen_bvn(h[fin], k[fin], rho[fin])
    return out


def _cdf_infinite(h, k):
    res = np.where(h == np.inf, ndtr(k), np.where(k == np.inf, ndtr(h), 0.0))
    return np.where((h == -np.inf) | (k == -np.inf), 0.0, res)


def _owen_a(h, k, rho, s):
    """a_h = (k - rho h) / (h s), with the h -> 0+ limits."""
    num = k - rho * h
    with np.errstate(divide="ignore", invalid="ignore"):
        a = num / (h * s)
    zero = h == 0
    if zero.any():
        both = zero & (k == 0)
        a = np.where(zero, np.where(k >= 0, np.inf, -np.inf), a)
        a = np.where(both, np.sqrt((1 - rho) / (1 + rho)), a)
    return a


def _owen_bvn(h, k, rho):
    s = np.sqrt((1.0 - rho) * (1.0 + rho))
    a_h = _owen_a(h, k, rho, s)
    a_k = _owen_a(k, h, rho, s)
    hk = h * k
    beta = np.where((hk > 0) | ((hk == 0) & (h + k >= 0)), 0.0, 0.5)
    p = 0.5 * ndtr(h) + 0.5 * ndtr(k) - owens_t(h, a_h) - owens_t(k, a_k) - beta
    return np.clip(p, 0.0, 1.0)


def _bvn_density(h, k, rho):
    """Bivariate standard normal density; 0 where h or k is infinite."""
    fin = np.isfinite(h) & np.isfinite(k)
    hh = np.where(fin, h, 0.0)
    kk = np.where(fin, k, 0.0)
    one_r2 = (1.0 - rho) * (1.0 + rho)
    q = (hh * hh - 2.0 * rho * hh * kk + kk * kk) / (2.0 * one_r2)
    return np.where(fin, np.exp(-q) / (2.0 * np.pi * np.sqrt(one_r2)), 0.0)


# ----------------------------------------------------------------------------------------------
# polychoric core (vectorised over pairs)

def _thresholds_from_margins(counts: np.ndarray) -> np.ndarray:
    """(P, m) category counts -> (P, m + 1) thresholds with -inf / +inf at the ends."""
    tot = counts.sum(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        cum = np.cumsum(counts, axis=1) / tot
    cum = np.clip(cum, 0.0, 1.0)
    inner = ndtri(cum[:, :-1])  # 0 -> -inf, 1 -> +inf
    P = counts.shape[0]
    return np.concatenate([np.full((P, 1), -np.inf), inner, np.full((P, 1), np.inf)], axis=1)


def _flip_index(c: np.ndarray, m: int) -> np.ndarray:
    a = np.arange(m)[None, :]
    c = c[:, None]
    return np.where(a < c, c - 1 - a, a)


def _canonical(tables: np.ndarray, ci: np.ndarray, cj: np.ndarray):
    """Bring each (m x m) table to the lexicographically largest of its four flips.

    Returns the canonical tables and the sign (+1 / -1) that maps their rho back.
    """
    P, m, _ = tables.shape
    fi = _flip_index(ci, m)[:, :, None]
    fj = _flip_index(cj, m)[:, None, :]
    rows = np.take_along_axis(tables, np.broadcast_to(fi, tables.shape), axis=1)
    cols = np.take_along_axis(tables, np.broadcast_to(fj, tables.shape), axis=2)
    both = np.take_along_axis(rows, np.broadcast_to(fj, tables.shape), axis=2)
    best = tables.reshape(P, -1).copy()
    sign = np.ones(P)
    for cand, s in ((rows, -1.0), (cols, -1.0), (both, 1.0)):
        flat = cand.reshape(P, -1)
        diff = flat - best
        nz = diff != 0
        first = np.argmax(nz, axis=1)
        val = diff[np.arange(P), first]
        take = val > 0
        best[take] = flat[take]
        sign[take] = s
    return best.reshape(P, m, m), sign


class _PairGrid:
    """Fixed parts of the likelihood of many tables: thresholds and the finite grid points."""

    def __init__(self, tables: np.ndarray):
        self.tables = tables
        P, m, _ = tables.shape
        self.N = tables.sum(axis=(1, 2))
        self.a = _thresholds_from_margins(tables.sum(axis=2))  # rows, (P, m+1)
        self.b = _thresholds_from_margins(tables.sum(axis=1))  # cols
        H = np.broadcast_to(self.a[:, :, None], (P, m + 1, m + 1))
        K = np.broadcast_to(self.b[:, None, :], (P, m + 1, m + 1))
        self.fin = np.isfinite(H) & np.isfinite(K)
        self.base = np.where(self.fin, 0.0, _cdf_infinite(H, K))
        self.H = H
        self.K = K
        self.occupied = tables > 0

    def cells(self, rho: np.ndarray, idx: np.ndarray | None = None):
        """Cell probabilities and their rho-derivatives for pairs ``idx`` at ``rho``."""
        sel = slice(None) if idx is None else idx
        H, K, fin = self.H[sel], self.K[sel], self.fin[sel]
        r = np.broadcast_to(rho[:, None, None], H.shape)
        G = self.base[sel].copy()
        G[fin] = _owen_bvn(H[fin], K[fin], r[fin])
        D = _bvn_density(H, K, r)
        P = G[:, 1:, 1:] - G[:, :-1, 1:] - G[:, 1:, :-1] + G[:, :-1, :-1]
        dP = D[:, 1:, 1:] - D[:, :-1, 1:] - D[:, 1:, :-1] + D[:, :-1, :-1]
        return P, dP

    def score_info(self, rho, idx):
        P, dP = self.cells(rho, idx)
        n = self.tables[idx]
        Pc = np.maximum(P, 1e-300)
        used = P > 1e-300
        score = np.where(self.occupied[idx], n * dP / Pc, 0.0).sum(axis=(1, 2))
        info = self.N[idx] * np.where(used, dP * dP / Pc, 0.0).sum(axis=(1, 2))
        return score, info

    def loglik(self, rho, idx=None):
        P, _ = self.cells(rho, idx)
        n = self.tables if idx is None else self.tables[idx]
        return np.where(n > 0, n * np.log(np.maximum(P, 1e-300)), 0.0).sum(axis=(1, 2))


def _start_values(tables: np.ndarray) -> np.ndarray:
    """Pearson correlation of the category ranks, a safe start for the iteration."""
    _P, m, _ = tables.shape
    s = np.arange(m, dtype=float)
    N = tables.sum(axis=(1, 2))
    pr = tables.sum(axis=2) / N[:, None]
    pc = tables.sum(axis=1) / N[:, None]
    mr = pr @ s
    mc = pc @ s
    vr = pr @ (s * s) - mr ** 2
    vc = pc @ (s * s) - mc ** 2
    exy = np.einsum("pab,a,b->p", tables, s, s) / N
    with np.errstate(invalid="ignore", divide="ignore"):
        r = (exy - mr * mc) / np.sqrt(vr * vc)
    return np.clip(np.nan_to_num(r), -0.95, 0.95)


def _estimate_rho(tables: np.ndarray, ci: np.ndarray, cj: np.ndarray, *, tol: float = 1e-10,
                  max_iter: int = 100) -> tuple[np.ndarray, np.ndarray]:
    """Two-step ML rho for each of P tables (P, m, m); returns (rho, converged)."""
    canon, sign = _canonical(tables.astype(float), ci, cj)
    grid = _PairGrid(canon)
    P = canon.shape[0]
    rho = _start_values(canon)
    lo = np.full(P, -_RHO_BOUND)
    hi = np.full(P, _RHO_BOUND)
    active = np.arange(P)
    converged = np.zeros(P, dtype=bool)
    for _ in range(max_iter):
        if active.size == 0:
            break
        r = rho[active]
        score, info = grid.score_info(r, active)
        up = score > 0
        lo[active] = np.where(up, r, lo[active])
        hi[active] = np.where(up, hi[active], r)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = score / info
        new = r + step
        lo_a, hi_a = lo[active], hi[active]
        outside = ~np.isfinite(new) | (new <= lo_a) | (new >= hi_a)
        new = np.where(outside, 0.5 * (lo_a + hi_a), new)
        done = (np.abs(new - r) < tol) | (hi_a - lo_a < tol)
        rho[active] = new
        converged[active[done]] = True
        active = active[~done]
    return sign * rho, converged


def _codes(arr: np.ndarray, names: list[str], max_categories: int):
    """Integer category codes 0..c-1 per item (-1 = missing) and the category values."""
    n, k = arr.shape
    codes = np.full((n, k), -1, dtype=np.int64)
    levels = []
    for j in range(k):
        col = arr[:, j]
        ok = ~np.isnan(col)
        vals, inv = np.unique(col[ok], return_inverse=True)
        if vals.size == 0:
            raise InputError(f"Item '{names[j]}' has no answers; it cannot enter the correlation matrix.",
                             code="no_variance", details={"item": names[j]})
        if vals.size == 1:
            raise InputError(f"Item '{names[j]}' has no variance (every answer is {vals[0]:g}); it cannot "
                             "enter the correlation matrix.", code="no_variance",
                             details={"item": names[j], "value": float(vals[0])})
        if vals.size > max_categories:
            raise InputError(f"Item '{names[j]}' has {vals.size} different answers; polychoric "
                             f"correlations need ordinal items with at most {max_categories} categories. "
                             "Use Pearson correlations for this pool.", code="too_many_categories",
                             details={"item": names[j], "categories": int(vals.size),
                                      "max_categories": max_categories})
        codes[ok, j] = inv
        levels.append(vals)
    return codes, levels


def _all_tables(codes: np.ndarray, m: int) -> np.ndarray:
    """(k, k, m, m) contingency tables of every pair, pairwise complete, via one matrix product."""
    n, k = codes.shape
    onehot = np.zeros((n, k, m), dtype=np.float32)  # integer counts < 2**24 are exact in float32
    r, c = np.nonzero(codes >= 0)
    onehot[r, c, codes[r, c]] = 1.0
    flat = onehot.reshape(n, k * m)
    T = (flat.T @ flat).astype(np.float64)
    return T.reshape(k, m, k, m).transpose(0, 2, 1, 3)


def _check_correction(value) -> float:
    try:
        c = float(value)
    except (TypeError, ValueError):
        c = float("nan")
    if isinstance(value, bool) or not np.isfinite(c) or c < 0:
        raise InputError(f"zero_cell_correction must be a number of at least 0; got {value!r}.", code="bad_option",
                         details={"zero_cell_correction": str(value)})
    return c


def _correct_zero_cells(tables: np.ndarray, value: float) -> tuple[np.ndarray, np.ndarray]:
    """Add ``value`` to the empty cells inside each table's observed rows and columns.

    Returns the corrected tables and, per table, whether it had such an empty cell.
    """
    inside = (tables.sum(axis=2) > 0)[:, :, None] & (tables.sum(axis=1) > 0)[:, None, :]
    empty = inside & (tables == 0)
    if value > 0:
        tables = np.where(empty, value, tables)
    return tables, empty.any(axis=(1, 2))


def polychoric_pair(table: ArrayLike, *, zero_cell_correction: float = 0.0) -> float:
    """Two-step polychoric (tetrachoric for 2 x 2) correlation of one contingency table.

    Parameters
    ----------
    table : array-like (r, c)
        Counts; rows are the ordered categories of the first item, columns of the second.
    zero_cell_correction : float
        Added to the empty cells before estimation (see Notes); 0 leaves the table as it is.

    Returns
    -------
    float
        The ML estimate of rho given thresholds fixed at ``Phi^-1`` of the cumulative margins.

    Notes
    -----
    Olsson's two-step estimator: thresholds ``a_i = Phi^-1(P(X <= i))`` and ``b_j`` from the
    margins, then rho maximises ``sum n_ij log pi_ij(rho)`` with ``pi_ij`` the bivariate normal
    probability of the rectangle ``(a_{i-1}, a_i] x (b_{j-1}, b_j]``.  The score is
    ``sum n_ij pi'_ij / pi_ij`` with ``pi'_ij`` the same rectangle sum of the bivariate normal
    density; it is solved by Fisher scoring kept inside a bisection bracket.

    With ``zero_cell_correction > 0`` that value is added to every empty cell inside the observed
    rows and columns before estimation (thresholds then come from the corrected margins), the
    continuity correction of ``psych::polychoric(correct = .5)``; 0 leaves the table as it is.

    References
    ----------
    Olsson, U. (1979). Maximum likelihood estimation of the polychoric correlation coefficient.
    Psychometrika, 44(4), 443-460.
    """
    t = np.asarray(table, dtype=float)
    if t.ndim != 2 or min(t.shape) < 2:
        raise InputError("A polychoric correlation needs a table with at least 2 rows and 2 columns.",
                         code="bad_shape", details={"shape": list(t.shape)})
    if (t < 0).any() or not np.isfinite(t).all():
        raise InputError("Contingency table counts must be finite and non-negative.", code="bad_value")
    corr = _check_correction(zero_cell_correction)
    rows = t.sum(axis=1) > 0
    cols = t.sum(axis=0) > 0
    t = t[rows][:, cols]
    if min(t.shape) < 2:
        raise InputError("One of the two items has only one observed category in this table; its "
                         "correlation is undefined.", code="no_variance")
    r, c = t.shape
    m = max(r, c)
    padded = np.zeros((1, m, m))
    padded[0, :r, :c] = t
    padded, _ = _correct_zero_cells(padded, corr)
    rho, _ = _estimate_rho(padded, np.array([r]), np.array([c]))
    return float(rho[0])


def polychoric_matrix(X: ArrayLike, *, missing: str = "pairwise", max_categories: int = 10,
                      names: Sequence[str] | None = None,
                      smooth: str | None = "eigen", zero_cell_correction: float = 0.0) -> CorrelationResult:
    """Polychoric (tetrachoric for binary items) correlation matrix, all pairs at once.

    Parameters
    ----------
    X : array-like or DataFrame (n, k)
        Ordinal responses, NaN for missing; each item's distinct answers are its ordered
        categories.
    missing : {"pairwise", "listwise"}
        Pairwise: each pair's table uses the rows where both items are answered, and that
        table's margins give the thresholds.  Listwise: only rows with every item answered.
    max_categories : int
        Items with more distinct answers than this raise ``InputError`` (use Pearson).
    names : list of str, optional
        Item names (default: DataFrame columns or ``item1..itemk``).
    smooth : {"eigen", "higham", None}
        Smoothing of a matrix that is not positive definite, see :func:`smooth_to_pd`.
    zero_cell_correction : float
        Added to the empty cells (inside the observed rows and columns) of a pair's table before
        that pair is estimated; 0 (default) estimates the tables as they are. 0.5 is common
        practice (``psych::polychoric``'s ``correct``).

    Returns
    -------
    CorrelationResult
        ``thresholds`` holds each item's thresholds from all its answers (for display).

    Notes
    -----
    The tables of all ``k(k-1)/2`` pairs come from one product of one-hot codes; every pair is
    estimated as in :func:`polychoric_pair` with the iteration vectorised over pairs.  Warnings
    name categories with fewer than 5 answers, pairs whose table has empty cells (and whether they
    were corrected) and pairs whose estimate is at the boundary (``|r| >= .995``).

    References
    ----------
    Olsson, U. (1979). Maximum likelihood estimation of the polychoric correlation coefficient.
    Psychometrika, 44(4), 443-460.
    """
    _check_missing(missing)
    correction = _check_correction(zero_cell_correction)
    arr, names = _as_matrix(X, names)
    if not isinstance(max_categories, (int, np.integer)) or max_categories < 2:
        raise InputError(f"max_categories must be an integer of at least 2; got {max_categories!r}.",
                         code="bad_option", details={"max_categories": max_categories})
    if missing == "listwise":
        arr = _listwise(arr, names)
    codes, levels = _codes(arr, names, int(max_categories))
    k = arr.shape[1]
    ncat = np.array([len(v) for v in levels])
    m = int(ncat.max())
    tables = _all_tables(codes, m)
    iu, ju = np.triu_indices(k, 1)
    pair_tables = tables[iu, ju]
    n_pair = np.rint(tables.sum(axis=(2, 3))).astype(int)
    # a pair whose shared rows leave one item with a single category has no correlation
    row_cats = (pair_tables.sum(axis=2) > 0).sum(axis=1)
    col_cats = (pair_tables.sum(axis=1) > 0).sum(axis=1)
    bad = np.nonzero((row_cats < 2) | (col_cats < 2) | (n_pair[iu, ju] < 3))[0]
    if bad.size:
        i, j = iu[bad[0]], ju[bad[0]]
        raise InputError(f"Items '{names[i]}' and '{names[j]}' share too few answers ({n_pair[i, j]} "
                         "respondents) or no variation on the respondents who answered both; their "
                         "correlation is undefined.", code="too_few_pairs",
                         details={"items": [names[i], names[j]], "n": int(n_pair[i, j])})
    ci = ncat[iu]
    cj = ncat[ju]
    pair_tables_est, had_empty = _correct_zero_cells(pair_tables, correction)
    rho, conv = _estimate_rho(pair_tables_est, ci, cj)
    R = np.eye(k)
    R[iu, ju] = rho
    R[ju, iu] = rho

    warnings: list[Note] = []
    diag_counts = tables[np.arange(k), np.arange(k)].diagonal(axis1=1, axis2=2)  # (k, m)
    thresholds = []
    for j in range(k):
        cnt = diag_counts[j, : ncat[j]]
        thresholds.append(_thresholds_from_margins(cnt[None, :])[0, 1:-1])
        sparse = [f"{levels[j][c]:g} ({int(cnt[c])})" for c in range(ncat[j]) if cnt[c] < _SPARSE_CATEGORY]
        if sparse:
            warnings.append(note("polychoric_sparse_category",
                                 f"Item '{names[j]}' has fewer than {_SPARSE_CATEGORY} answers in category "
                                 f"{', '.join(sparse)}; its thresholds and polychoric correlations are unstable "
                                 "(consider merging sparse categories).", [names[j]]))
    valid = (np.arange(m)[None, :, None] < ci[:, None, None]) & (np.arange(m)[None, None, :] < cj[:, None, None])
    empty = ((pair_tables == 0) & valid).any(axis=(1, 2))
    if empty.any():
        warnings.append(note("polychoric_empty_cells",
                             f"{int(empty.sum())} of {len(iu)} item pairs have at least one empty cell in their "
                             f"contingency table ({_pair_list(np.nonzero(empty)[0], iu, ju, names)}); "
                             "their polychoric correlations rest on sparse tables.",
                             _pair_items(np.nonzero(empty)[0], iu, ju, names)))
    if correction > 0 and had_empty.any():
        idx = np.nonzero(had_empty)[0]
        warnings.append(note("polychoric_zero_cell_correction",
                             f"{correction:g} was added to the empty cells of {len(idx)} pair(s) before estimation "
                             f"(zero-cell correction, common practice): {_pair_list(idx, iu, ju, names)}.",
                             _pair_items(idx, iu, ju, names)))
    edge = np.nonzero(np.abs(rho) >= _BOUNDARY)[0]
    if edge.size:
        warnings.append(note("polychoric_boundary",
                             f"The polychoric estimate is at the boundary (|r| >= {_BOUNDARY}) for {edge.size} "
                             f"pair(s), {_pair_list(edge, iu, ju, names, rho)}: an empty cell or a duplicated item "
                             "can push the estimate to +-1, and such a value is not a trustworthy correlation.",
                             _pair_items(edge, iu, ju, names)))
    if not conv.all():
        first = np.nonzero(~conv)[0][0]
        warnings.append(note("polychoric_not_converged",
                             f"The polychoric estimate did not converge for {int((~conv).sum())} item pair(s) "
                             f"(for example '{names[iu[first]]}' x '{names[ju[first]]}').",
                             _pair_items(np.nonzero(~conv)[0], iu, ju, names)))
    perfect = perfect_pairs_note(R, names, "polychoric")
    if perfect is not None:
        warnings.append(perfect)
    R, smoothed, lam = _maybe_smooth(R, smooth, "polychoric", names, warnings)
    empty_pairs, corrected_pairs = np.zeros((k, k), dtype=bool), np.zeros((k, k), dtype=bool)
    empty_pairs[iu, ju], corrected_pairs[iu, ju] = empty, had_empty
    return CorrelationResult(matrix=R, n_pair=n_pair, warnings=warnings, names=names, method="polychoric",
                             missing=missing, smoothed=smoothed, min_eigenvalue=lam,
                             thresholds=thresholds, empty_pairs=empty_pairs | empty_pairs.T,
                             corrected_pairs=corrected_pairs | corrected_pairs.T)


def _pair_items(idx, iu, ju, names) -> list[str]:
    """The items of the pairs in ``idx``, each once, in matrix order."""
    return [names[i] for i in sorted(set(iu[idx]) | set(ju[idx]))]


def _pair_list(idx, iu, ju, names, rho=None) -> str:
    """'a' x 'b', ... for the first few pairs in ``idx`` (with r when given), and how many more."""
    parts = []
    for p in idx[:_NAMED_PAIRS]:
        txt = f"'{names[iu[p]]}' x '{names[ju[p]]}'"
        parts.append(txt if rho is None else f"{txt} (r = {rho[p]:.4f})")
    more = f" and {len(idx) - _NAMED_PAIRS} more" if len(idx) > _NAMED_PAIRS else ""
    return ", ".join(parts) + more


# ----------------------------------------------------------------------------------------------
# smoothing

def smooth_to_pd(R: ArrayLike, *, method: str = "eigen", min_eigenvalue: float = 1e-6, max_iter: int = 200,
                 tol: float = 1e-10) -> tuple[np.ndarray, float, bool]:
    """Make a correlation matrix positive definite, if it is not.

    Parameters
    ----------
    R : array-like (k, k)
        Symmetric matrix with unit diagonal.
    method : {"eigen", "higham"}
        ``"eigen"``: eigenvalues below ``min_eigenvalue`` are raised to it, the eigenvalues are
        rescaled to sum to k, the matrix is rebuilt and rescaled to unit diagonal (the
        eigenvalue method, as ``psych::cor.smooth``).  ``"higham"``: the nearest correlation
        matrix in the Frobenius norm by alternating projections with Dykstra's correction
        (Higham 2002), with its eigenvalues then floored at ``min_eigenvalue``.
    min_eigenvalue : float
        A matrix whose smallest eigenvalue is at least this is returned unchanged.

    Returns
    -------
    R_smoothed : ndarray (k, k)
    smallest_eigenvalue : float
        Smallest eigenvalue of the input.
    changed : bool

    References
    ----------
    Higham, N. J. (2002). Computing the nearest correlation matrix - a problem from finance.
    IMA Journal of Numerical Analysis, 22(3), 329-343.
    Wothke, W. (1993). Nonpositive definite matrices in structural modeling. In K. A. Bollen &
    J. S. Long (Eds.), Testing structural equation models (pp. 256-293). Sage.
    """
    A = np.asarray(R, dtype=float)
    if A.ndim != 2 or A.shape[0] != A.shape[1] or not np.isfinite(A).all():
        raise InputError("Smoothing needs a finite square correlation matrix.", code="bad_shape",
                         details={"shape": list(A.shape)})
    if method not in ("eigen", "higham"):
        raise InputError(f"Unknown smoothing method {method!r}; use 'eigen' or 'higham'.", code="bad_option",
                         details={"method": method})
    A = (A + A.T) / 2
    lam = float(eigvalsh(A)[0])
    if lam >= min_eigenvalue:
        return A, lam, False
    k = A.shape[0]
    if method == "eigen":
        w, V = np.linalg.eigh(A)
        w = np.maximum(w, min_eigenvalue)
        w = w * k / w.sum()
        out = (V * w) @ V.T
    else:
        Y = A.copy()
        dS = np.zeros_like(A)
        for _ in range(max_iter):
            Rk = Y - dS
            w, V = np.linalg.eigh(Rk)
            X = (V * np.maximum(w, 0.0)) @ V.T
            dS = X - Rk
            Y_new = X.copy()
            np.fill_diagonal(Y_new, 1.0)
            delta = float(np.linalg.norm(Y_new - Y)) / max(float(np.linalg.norm(Y)), 1e-300)
            Y = Y_new
            if delta < tol:
                break
        w, V = np.linalg.eigh((Y + Y.T) / 2)
        out = (V * np.maximum(w, min_eigenvalue)) @ V.T
    d = np.sqrt(np.diag(out))
    out = out / d[:, None] / d[None, :]
    out = (out + out.T) / 2
    np.fill_diagonal(out, 1.0)
    return out, lam, True


def smoothing_note(R_before: np.ndarray, R_after: np.ndarray, smallest: float, method: str, *,
                   label: str = "correlation",
                   names: Sequence[str] | None = None) -> Note:
    """The ``smoothed`` warning for a smoothed matrix: smallest eigenvalue and the largest change."""
    diff = np.abs(np.asarray(R_after) - np.asarray(R_before))
    i, j = (int(v) for v in np.unravel_index(np.argmax(diff), diff.shape))
    how = "eigenvalue method" if method == "eigen" else "nearest correlation matrix (Higham 2002)"
    pair = [names[i], names[j]] if names is not None and diff[i, j] > 0 else []
    where = f" ('{pair[0]}' with '{pair[1]}')" if pair else ""
    return note("smoothed", f"The {label} matrix was not positive definite (smallest eigenvalue {smallest:.3g}) "
                f"and was smoothed by the {how}; correlations changed by at most {diff[i, j]:.3f}{where}.",
                pair)
