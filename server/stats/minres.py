"""Minres (unweighted least squares) factor extraction by Newton's method over the uniquenesses.

Shared by the exploratory extraction (:func:`server.stats.efa.extract`) and the one-factor fits behind
omega (:func:`server.stats.reliability.one_factor_loadings`): the same criterion, solved in a few exact
Newton steps where a quasi-Newton or fixed-point method needs many cheaper ones. Each caller keeps its
previous solver as the fallback for the cases this one declines.
"""
from __future__ import annotations

import numpy as np
from scipy import linalg

__all__ = ["minres_newton"]


def _hessian(lam: np.ndarray, U: np.ndarray, m: int) -> np.ndarray:
    """The minres criterion's Hessian in the uniquenesses, from the eigenpairs of ``R - diag(psi)`` (descending)."""
    A = U[:, m:]
    P = -(U[:, :m] @ U[:, :m].T)  # A A' = I - U_m U_m' (U is orthogonal): k^2 m operations instead of k^3
    P[np.diag_indices_from(P)] += 1.0
    H = 2.0 * P * P
    for p in range(m):
        B = A * U[:, p:p + 1]
        H += 4.0 * (B * (lam[m:] / (lam[m:] - lam[p]))) @ B.T
    return H


def minres_newton(R: np.ndarray, m: int, psi0: np.ndarray, *, lower: float = 0.005, max_iter: int = 50,
                  tol: float = 1e-10) -> tuple[np.ndarray, float, int] | None:
    """Minres by an active-set Newton method with the exact Hessian within the bounds; None if it cannot go on.

    With ``S = R - diag(psi)`` and its eigenpairs ``(lam_j, u_j)`` in descending order, the objective is
    ``f = sum_{j>m} lam_j^2``, its gradient ``g_i = -2 sum_{j>m} lam_j u_ij^2`` and, from the first-order
    perturbation of eigenpairs (Magnus & Neudecker 2019, ch. 8), its Hessian
    ``H = 2 P*P + 4 sum_{p<=m} sum_{j>m} lam_j / (lam_j - lam_p) (u_j*u_p)(u_j*u_p)'`` (``P``: the projector
    on the trailing eigenvectors, ``*`` elementwise). A uniqueness at a bound whose gradient points outwards
    is held there (a Heywood case); the others take the Newton step (damped where the Hessian is not
    positive definite), shortened so that none leaves the bounds, then halved until the objective falls
    enough (Armijo). From a start near the optimum (a warm start, or the SMCs of clean data) it converges in
    two to four steps where L-BFGS-B needs ten to thirty evaluations. None (the caller falls back on its
    previous solver) when the m-th eigenvalue is not positive and separated from the next, a step cannot
    lower the objective, or ``max_iter`` steps were not enough. Returns ``(psi, objective, steps)``.

    References
    ----------
    Harman, H. H., & Jones, W. H. (1966). Factor analysis by minimizing residuals (minres). Psychometrika,
        31, 351-368.
    Bertsekas, D. P. (1982). Projected Newton methods for optimization problems with simple constraints.
        SIAM Journal on Control and Optimization, 20, 221-246.
    Magnus, J. R., & Neudecker, H. (2019). Matrix Differential Calculus with Applications in Statistics and
        Econometrics (3rd ed.). Wiley.
    """
    lo, hi = lower, 1.0

    def parts(p: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
        S = R.copy()
        np.fill_diagonal(S, 1.0 - p)
        # scipy's eigh: numpy's eigenvector routine runs about ten times slower while other processes keep the
        # cores busy (a resampling run, say); numpy's is kept for tiny matrices, where scipy's call overhead wins
        lam, U = linalg.eigh(S, check_finite=False) if len(S) > 16 else np.linalg.eigh(S)
        lam, U = lam[::-1], U[:, ::-1]
        return lam, U, float(np.sum(lam[m:] ** 2))

    psi = np.clip(np.array(psi0, dtype=float), lo, hi)
    lam, U, f = parts(psi)
    for it in range(max_iter + 1):
        if lam[m - 1] <= 0.0 or lam[m - 1] - lam[m] <= 1e-8 * max(1.0, abs(lam[0])):
            return None
        A = U[:, m:]
        g = -2.0 * ((A * A) @ lam[m:])
        held = ((psi <= lo) & (g > 0)) | ((psi >= hi) & (g < 0))
        free = ~held
        if float(np.max(np.abs(g[free]), initial=0.0)) < tol:
            return psi, f, it
        if it == max_iter:
            return None
        H = _hessian(lam, U, m)
        Hf, gf = H[np.ix_(free, free)], g[free]
        mu = 0.0
        while True:
            try:
                c = linalg.cho_factor(Hf + mu * np.eye(len(gf)), check_finite=False)
                break
            except linalg.LinAlgError:
                mu = max(10.0 * mu, 1e-4 * max(1.0, float(np.max(np.abs(np.diag(Hf))))))
                if mu > 1e8:
                    return None
        step = np.zeros_like(psi)
        step[free] = -linalg.cho_solve(c, gf, check_finite=False)
        slope = float(g @ step)
        if slope >= 0.0:
            return None
        with np.errstate(divide="ignore", invalid="ignore"):
            room = np.where(step < 0, (lo - psi) / step, np.where(step > 0, (hi - psi) / step, np.inf))
        t = min(1.0, float(np.min(room)))
        while True:
            new = np.clip(psi + t * step, lo, hi)
            lam2, U2, f2 = parts(new)
            if f2 <= f + 1e-4 * t * slope or f2 - f <= 1e-15 * max(1.0, f):
                break
            t *= 0.5
            if t < 1e-8:
                return None
        psi, lam, U, f = new, lam2, U2, f2
    return None
