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
from scipy import linalg

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


def _leave_one_out_starts(Ro: np.ndarray, l0: np.ndarray, *, max_iter: int = 12, tol: float = 1e-9) -> np.ndarray:
    r"""Starting loadings for the k leave-one-out one-factor fits, from the full set's solution ``l0``.

    Row ``b`` (item ``b`` left out, its loading 0) takes Newton steps on the minres criterion
    :math:`\sum_{i\ne j}(r_{ij}-l_il_j)^2` of its item set. A quarter of the criterion's Hessian at ``l`` is
    :math:`sI - 3\operatorname{diag}(l^2) + 2ll' - R_o` (:math:`s = l'l`, :math:`R_o`: R without its diagonal),
    restricted to the row's items. Each step uses it with the diagonal term of ``l0``: then it is
    :math:`M_0 - \sigma_b I` (:math:`M_0` the full-set Hessian, :math:`\sigma_b` the change of :math:`s`) plus
    the rank-two change :math:`2(l_bl_b' - l_0l_0')`, solved for all rows at once from one eigendecomposition of
    :math:`M_0`: the left-out item by the bordering identity :math:`(A_{-b,-b})^{-1}v = A^{-1}v -
    A^{-1}e_b\,(A^{-1}v)_b/(A^{-1})_{bb}` and the rank-two change by Woodbury's identity. The first step is
    Newton's; the later ones converge linearly at the ratio of the omitted diagonal change (a few hundredths),
    at O(k^2) per row and step where a sweep of the fixed point (``_fit_batch``) gains far less per step on
    multi-factor item sets. Rows stop stepping once their step is below ``tol``. Each row is judged on its own
    (before, one doubtful row sent every row back to the plain start). A row keeps its Newton point when
    :math:`M_0 - \sigma_bI` stayed positive definite at every step (converged or not, as before), or when it
    converged with a positive definite approximate Hessian, counted by Haynsworth's inertia additivity: the
    negative eigenvalues of :math:`M_0 - \sigma_bI`, less one when the bordering Schur complement
    :math:`1/(A^{-1})_{bb}` is negative, plus the positive eigenvalues of Woodbury's 2 x 2 capacitance matrix,
    less one. Every other row (a step not finite, an indefinite Hessian without convergence, a loading near the
    Heywood bound: typically a row whose one-factor solution moves to another factor once the item is left out)
    keeps the plain start (``l0`` less the item). The caller's ``_fit_batch`` then checks (and if needed
    finishes) every row, so this changes where the fits start, not where they end.
    """
    k = len(l0)
    eye = np.eye(k, dtype=bool)
    plain = np.where(eye, 0.0, l0[None, :])
    if k < 5 or not np.all(np.isfinite(l0)) or float(np.max(l0 * l0)) > _H - 0.05:
        return plain
    s0 = float(l0 @ l0)
    l02 = l0 * l0
    M0 = s0 * np.eye(k) - 3.0 * np.diag(l02) + 2.0 * np.outer(l0, l0) - Ro
    lam, Q = linalg.eigh(M0, check_finite=False, driver="evd")
    ql0 = Q.T @ l0
    l0h = ql0[None, :] - l0[:, None] * Q  # row b: Q'(l0 with item b left out)
    L = plain.copy()
    Lh = l0h.copy()                       # row b: Q'L_b
    act = np.arange(k)                    # rows still stepping
    good = np.zeros(k, dtype=bool)        # rows converged with a positive definite Hessian
    pos = np.ones(k, dtype=bool)          # rows whose shifted M0 stayed positive definite
    with np.errstate(all="ignore"):
        for _ in range(max_iter):
            La, Lha, Qa, l0ha = L[act], Lh[act], Q[act], l0h[act]
            s = (La * La).sum(axis=1, keepdims=True)
            # a quarter of the gradient, L*(s - L^2) - L Ro, in Q's basis (L Ro = s0 L - 3 L l0^2 + 2 (L.l0) l0'
            # - L M0); the left-out item's component is then taken out
            E = La * (s - La * La - s0 + 3.0 * l02)
            gh = E @ Q - 2.0 * (La @ l0)[:, None] * ql0[None, :] + Lha * lam[None, :]
            gh -= (gh * Qa).sum(axis=1, keepdims=True) * Qa
            shift = lam[None, :] - (s0 - s)
            D = 1.0 / shift
            Dq = D * Qa
            ajj = (Qa * Dq).sum(axis=1, keepdims=True)

            def solve(vh: np.ndarray, D: np.ndarray = D, Dq: np.ndarray = Dq, ajj: np.ndarray = ajj,
                      Qa: np.ndarray = Qa) -> np.ndarray:
                Dv = D * vh  # (M0 - sigma I)^-1 v, then bordered: item b's row and column left out
                return Dv - Dq * ((Qa * Dv).sum(axis=1, keepdims=True) / ajj)

            tg, tl, t0 = solve(gh), solve(Lha), solve(l0ha)
            # Woodbury for + 2 L L' - 2 l0 l0': a 2 x 2 system per row
            k11 = 0.5 + (Lha * tl).sum(axis=1)
            k12 = (Lha * t0).sum(axis=1)
            k21 = (l0ha * tl).sum(axis=1)
            k22 = -0.5 + (l0ha * t0).sum(axis=1)
            r1 = (Lha * tg).sum(axis=1)
            r2 = (l0ha * tg).sum(axis=1)
            det = k11 * k22 - k12 * k21
            z1 = (r1 * k22 - k12 * r2) / det
            z2 = (k11 * r2 - k21 * r1) / det
            xh = tg - tl * z1[:, None] - t0 * z2[:, None]
            x = xh @ Q.T
            x[np.arange(act.size), act] = 0.0
            L[act] = La - x
            Lh[act] = Lha - xh
            step = np.abs(x).max(axis=1)
            # negative eigenvalues of the approximate Hessian (see above); the capacitance has 2, 1 or 0
            # positive eigenvalues as its determinant and trace are positive, the determinant negative, or not
            npos = np.where(det < 0, 1, np.where((det > 0) & (k11 + k22 > 0), 2, 0))
            nneg = (shift < 0).sum(axis=1) - (ajj[:, 0] < 0) + npos - 1
            fin = np.isfinite(step) & np.isfinite(det) & (det != 0) & (np.abs(shift).min(axis=1) > 1e-10)
            pos[act] &= fin & (shift > 0).all(axis=1)
            done = fin & (step < tol)
            good[act[done & (nneg == 0)]] = True
            act = act[fin & ~done]
            if not act.size:
                break
    keep = (good | pos) & np.isfinite(L).all(axis=1) & ((L * L).max(axis=1) <= _H - 1e-3)
    return np.where(keep[:, None], L, plain)


_NESTED_RATIO = 0.5  # a new block of nested item sets starts where the set falls below this share of the block's first
_NESTED_MIN = 64     # no new block below this many items (there a batch costs its Python steps, not its products)


def _fit_nested(Ro: np.ndarray, L0: np.ndarray, m: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``_fit_batch`` for item sets that may be nested (the pruning path: each row a subset of the row before).

    Nested rows are fitted in blocks, each on the items of its first row only: a block's fixed-point sweeps
    then cost (its first row's items)^2 per row instead of k^2 (the fits are the same, items outside a row
    are zero throughout). Rows that are not nested are fitted as one batch.
    """
    n = m.shape[0]
    sizes = m.sum(axis=1)
    if n < 2 or not np.all(m[1:] <= m[:-1]) or sizes[0] * _NESTED_RATIO < _NESTED_MIN:
        return _fit_batch(Ro, L0, m)[:2]
    L = np.zeros_like(L0, dtype=float)
    conv = np.zeros(n, dtype=bool)
    r0 = 0
    while r0 < n:
        idx = np.flatnonzero(m[r0])
        r1 = n  # the rows down to the ratio (all of them once the block is small)
        if idx.size * _NESTED_RATIO >= _NESTED_MIN:
            r1 = r0 + 1 + int(np.sum(sizes[r0 + 1:] >= _NESTED_RATIO * idx.size))
        Lb, cb, _ = _fit_batch(Ro[np.ix_(idx, idx)], L0[r0:r1][:, idx], m[r0:r1][:, idx])
        L[r0:r1, idx] = Lb
        conv[r0:r1] = cb
        r0 = r1
    return L, conv


def _omega_subsets(S: np.ndarray, mask: np.ndarray, start: ArrayLike | None = None, *,
                   leave_one_out: bool = False) -> np.ndarray:
    """Omega total for each item subset (rows of ``mask``), fitted as one warm-started batch (nested subsets,
    as on the pruning path, in blocks on their own items: :func:`_fit_nested`).

    ``leave_one_out``: ``mask`` is every item but one, in turn (``~eye``); the fits then start from Newton
    steps (:func:`_leave_one_out_starts`) instead of the full set's loadings.
    """
    R, sd = _cov_to_corr(S)
    start = _start(R, start)
    sizes = mask.sum(axis=1)
    out = np.full(mask.shape[0], np.nan)
    ok_rows = sizes >= 3
    if not ok_rows.any():
        return out
    m = mask[ok_rows]
    Ro = _off_diagonal(R)
    if leave_one_out and ok_rows.all():
        L0 = _leave_one_out_starts(Ro, np.asarray(start, dtype=float))
    else:
        L0 = np.where(m, np.asarray(start, dtype=float)[None, :], 0.0)
    L, conv = _fit_nested(Ro, L0, m) if not leave_one_out else _fit_batch(Ro, L0, m)[:2]
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
    o_del = (_omega_subsets(S, ~np.eye(k, dtype=bool), start, leave_one_out=True) if k >= 4
             else np.full(k, np.nan))
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
