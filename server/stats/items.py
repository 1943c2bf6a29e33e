"""Item-level reliability: corrected item-total correlations, alpha/omega if deleted, pruning path.

Everything works from a covariance matrix (a submatrix of the cached full-pool matrix), in closed
form where one exists: with :math:`V = \\mathbf 1'S\\mathbf 1`, :math:`c = S\\mathbf 1` and
:math:`t = \\operatorname{tr}S`, removing item :math:`j` leaves total variance
:math:`V_{-j} = V - 2c_j + s_{jj}` and trace :math:`t - s_{jj}`, so alpha-if-deleted, the item-rest
correlation and each greedy pruning step are O(k) vector operations.  The one-factor fits behind
omega-if-deleted are run as one batch, warm-started from the full-set solution.
"""
from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike

from .errors import InputError
from .reliability import _H, _check_cov, _cov_to_corr, _fit_batch, _num, _off_diagonal, one_factor_loadings

__all__ = ["alpha_if_deleted", "item_rest_correlations", "item_table", "pruning_path"]


def _names(names, k: int) -> list[str]:
    names = [str(s) for s in names]
    if len(names) != k:
        raise InputError(f"Expected {k} item names, got {len(names)}.", code="bad_shape",
                         details={"names": len(names), "items": k})
    return names


def alpha_if_deleted(cov: ArrayLike) -> np.ndarray:
    """Cronbach's alpha of the remaining items after deleting each item in turn (closed form).

    Notes
    -----
    :math:`\\alpha_{-j} = \\frac{k-1}{k-2}\\left(1 - \\frac{t - s_{jj}}{V - 2c_j + s_{jj}}\\right)`.
    NaN when ``k < 3`` (alpha needs two remaining items).

    References
    ----------
    Cronbach, L. J. (1951). Coefficient alpha and the internal structure of tests.
    Psychometrika, 16(3), 297-334.
    """
    S = _check_cov(cov)
    k = S.shape[0]
    if k < 3:
        return np.full(k, np.nan)
    d = np.diag(S)
    c = S.sum(axis=1)
    V = S.sum()
    Vj = V - 2 * c + d
    with np.errstate(divide="ignore", invalid="ignore"):
        out = (k - 1) / (k - 2) * (1.0 - (d.sum() - d) / Vj)
    return np.where(Vj > 0, out, np.nan)


def item_rest_correlations(cov: ArrayLike) -> np.ndarray:
    """Corrected item-total correlation: each item with the sum of the other items.

    Notes
    -----
    :math:`r_{j,\\text{rest}} = \\dfrac{c_j - s_{jj}}{\\sqrt{s_{jj}\\,(V - 2c_j + s_{jj})}}`.

    References
    ----------
    Nunnally, J. C., & Bernstein, I. H. (1994). Psychometric theory (3rd ed.). McGraw-Hill.
    """
    S = _check_cov(cov)
    d = np.diag(S)
    c = S.sum(axis=1)
    Vj = S.sum() - 2 * c + d
    with np.errstate(divide="ignore", invalid="ignore"):
        r = (c - d) / np.sqrt(d * Vj)
    return np.where(Vj > 0, r, np.nan)


def _start(R: np.ndarray, start) -> np.ndarray:
    """Usable starting loadings: ``start`` if it has one finite value per item, else a fresh fit."""
    if start is not None:
        st = np.asarray(start, dtype=float).reshape(-1)
        if st.size == R.shape[0] and np.all(np.isfinite(st)) and np.abs(st).sum() > 0:
            return st
    return one_factor_loadings(R).loadings


def _omega_subsets(S: np.ndarray, mask: np.ndarray, start: ArrayLike | None = None) -> np.ndarray:
    """Omega total for each item subset (rows of ``mask``), fitted as one warm-started batch."""
    R, sd = _cov_to_corr(S)
    start = _start(R, start)
    sizes = mask.sum(axis=1)
    out = np.full(mask.shape[0], np.nan)
    ok_rows = sizes >= 3
    if not ok_rows.any():
        return out
    m = mask[ok_rows]
    L0 = np.where(m, np.asarray(start, dtype=float)[None, :], 0.0)
    L, conv, _ = _fit_batch(_off_diagonal(R), L0, m)
    # Rows that did not converge, and rows whose warm-started fit sits on the Heywood bound (there the
    # minres criterion can have several minima and the warm start may find another one than a fresh
    # fit), are fitted on their own from the default start: exactly what mcdonald_omega, and so the
    # analysis after the item is really dropped, computes for that item set.
    heywood = ((L * L) >= _H - 1e-9).any(axis=1)
    redo = np.flatnonzero(~conv | heywood)
    for b in redo:
        idx = np.flatnonzero(m[b])
        fit = one_factor_loadings(R[np.ix_(idx, idx)])
        L[b] = 0.0
        L[b, idx] = fit.loadings
    signs = np.sign(L.sum(axis=1, keepdims=True))
    signs[signs == 0] = 1.0
    lam = L * signs * sd[None, :]
    mf = m.astype(float)
    V = ((mf @ S) * mf).sum(axis=1)
    out[ok_rows] = lam.sum(axis=1) ** 2 / V
    return out


def item_table(cov: ArrayLike, *, names: Sequence[str] | None, start: ArrayLike | None = None) -> list[dict]:
    """Item-rest correlation, alpha if deleted and omega if deleted for every item.

    Parameters
    ----------
    cov : array_like, shape (k, k)
        Covariance matrix of the active items (reverse-keyed items already reverse-scored).
    names : sequence of str
        Item names.
    start : array_like, shape (k,), optional
        Standardized one-factor loadings of the full set (e.g. ``ReliabilityResult.loadings``),
        used to warm-start the leave-one-out fits; fitted here when absent.

    Returns
    -------
    list of dict
        ``{"name", "item_rest_r", "alpha_if_deleted", "omega_if_deleted"}`` per item, in order;
        values are floats or None (alpha if deleted needs 3 items, omega if deleted 4).

    Notes
    -----
    Item-rest r and alpha if deleted in closed form (:func:`item_rest_correlations`,
    :func:`alpha_if_deleted`); omega if deleted as in
    :func:`server.stats.reliability.mcdonald_omega` for each leave-one-out set.

    References
    ----------
    Cronbach (1951); McDonald, R. P. (1999). Test theory: A unified treatment. Erlbaum.
    """
    S = _check_cov(cov, names=names)
    k = S.shape[0]
    names = _names(names, k)
    r_rest = item_rest_correlations(S)
    a_del = alpha_if_deleted(S)
    o_del = _omega_subsets(S, ~np.eye(k, dtype=bool), start) if k >= 4 else np.full(k, np.nan)
    return [{"name": names[j], "item_rest_r": _num(r_rest[j]), "alpha_if_deleted": _num(a_del[j]),
             "omega_if_deleted": _num(o_del[j])} for j in range(k)]


def pruning_path(cov: ArrayLike, *, names: Sequence[str] | None, min_items: int = 3,
                 start: ArrayLike | None = None, with_omega: bool = True) -> list[dict]:
    """Greedy backward elimination by alpha: the curve the dashboard draws.

    Parameters
    ----------
    cov : array_like, shape (k, k)
        Covariance matrix of the active items.
    names : sequence of str
        Item names.
    min_items : int
        Stop when this many items are left (at least 2).
    start : array_like, optional
        Standardized one-factor loadings of the full set, to warm-start the omega fits.
    with_omega : bool
        False leaves ``omega_total`` None on every step (only the order and alpha are wanted: resampling).

    Returns
    -------
    list of dict
        ``{"removed", "n_items", "alpha", "omega_total"}``; the first row has ``removed: None`` and
        describes the full set, each later row removes the item whose removal leaves the highest
        alpha (ties: the earlier item).  ``omega_total`` is None for fewer than 3 items.

    Notes
    -----
    Each step uses the closed form of :func:`alpha_if_deleted` on running sums (removing item
    :math:`j` updates :math:`c \\leftarrow c - S_{\\cdot j}`, :math:`V \\leftarrow V - 2c_j + s_{jj}`),
    so the whole path costs O(k^2).  Omega for every step's item set is then fitted in one batch.
    Alpha-greedy elimination maximises alpha stepwise only; it is a guide, not an optimum.

    References
    ----------
    Cronbach (1951); McDonald (1999).
    """
    S = _check_cov(cov, names=names)
    k = S.shape[0]
    names = _names(names, k)
    if min_items < 2:
        raise InputError(f"The pruning path must keep at least 2 items; min_items={min_items}.",
                         code="bad_min_items", details={"min_items": min_items})
    d = np.diag(S).copy()
    V = float(S.sum())
    t = float(d.sum())
    m = k
    alphas = [m / (m - 1) * (1 - t / V) if V > 0 else math.nan]
    removed: list[int | None] = [None]
    # Removing j leaves total variance V - e_j with e = 2 S1 - diag(S), and trace t - d_j.  Alpha
    # without j is (m-1)/(m-2) (1 - (t - d_j) / (V - e_j)); the largest alpha is the largest
    # (V - e_j) / (t - d_j).  Removed items get t - d_j = inf, so their score is 0 and never wins.
    e = 2.0 * S.sum(axis=1) - d
    tn = t - d
    S2 = 2.0 * S
    with np.errstate(divide="ignore", invalid="ignore"):
        while m > min_items:
            Vj = V - e
            score = Vj / tn
            j = int(np.argmax(score))
            if not (Vj[j] > 0 and tn[j] > 0):
                break
            alphas.append((m - 1) / (m - 2) * (1.0 - tn[j] / Vj[j]))
            V = float(Vj[j])
            tn -= d[j]
            tn[j] = np.inf
            e -= S2[j]
            m -= 1
            removed.append(j)
    step_of = np.full(k, len(removed))  # the step at which each item leaves (never: past the end)
    for s_, j in enumerate([r for r in removed if r is not None], start=1):  # removed[0] is None
        step_of[j] = s_
    masks = np.arange(len(removed))[:, None] < step_of[None, :]
    omegas = (_omega_subsets(S, masks, start) if k >= 3 and with_omega
              else np.full(len(masks), np.nan))
    return [{"removed": None if r is None else names[r], "n_items": int(mk.sum()), "alpha": _num(a),
             "omega_total": _num(o)} for r, mk, a, o in zip(removed, masks, alphas, omegas)]
