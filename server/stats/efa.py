"""Exploratory factor analysis from a correlation matrix: extraction, fit, rotation, factor identity.

Extraction methods
------------------
* ``minres`` (unweighted least squares; Harman & Jones 1966): minimise the sum of squared residuals
  over the uniquenesses ``psi``; for a given ``psi`` the loadings are the leading eigenvectors of
  ``R - diag(psi)`` scaled by the square roots of their eigenvalues.
* ``ml`` (maximum likelihood; Joreskog 1967, as R's ``factanal``): minimise
  ``F(psi) = -sum_{j>m} (log e_j - e_j) - m + k`` where ``e`` are the eigenvalues of
  ``psi^-1/2 R psi^-1/2``; loadings ``psi^1/2 V_m (E_m - I)^1/2``.
* ``paf`` (iterated principal axis factoring): squared multiple correlations on the diagonal,
  leading eigenvectors, new communalities, until they settle.

Both ``minres`` and ``ml`` use L-BFGS-B on ``psi`` in ``[0.005, 1]`` with analytic gradients
(``2 diag(LL' + psi - R)`` and ``diag(LL' + psi - R) / psi²``).

References
----------
Harman, H. H., & Jones, W. H. (1966). Factor analysis by minimizing residuals (minres).
    Psychometrika, 31, 351-368.
Joreskog, K. G. (1967). Some contributions to maximum likelihood factor analysis. Psychometrika, 32,
    443-482.
Lawley, D. N., & Maxwell, A. E. (1971). Factor Analysis as a Statistical Method (2nd ed.).
    Butterworths.
Harman, H. H. (1976). Modern Factor Analysis (3rd ed.). University of Chicago Press.
Bartlett, M. S. (1950). Tests of significance in factor analysis. British Journal of Psychology
    (Statistical Section), 3, 77-85.
Steiger, J. H. (1990). Structural model evaluation and modification: an interval estimation approach.
    Multivariate Behavioral Research, 25, 173-180.
Tucker, L. R., & Lewis, C. (1973). A reliability coefficient for maximum likelihood factor analysis.
    Psychometrika, 38, 1-10.
Tucker, L. R. (1951). A method for synthesis of factor analysis studies. Personnel Research Section
    Report No. 984. Department of the Army.  (Congruence coefficient.)
Kuhn, H. W. (1955). The Hungarian method for the assignment problem. Naval Research Logistics
    Quarterly, 2, 83-97.
"""
from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import linalg, optimize, stats

from . import flags as _flags
from . import rotation as _rotation
from .errors import InputError
from .minres import minres_newton
from .notes import Note, note
from .spectra import eigvalsh, inv, slogdet

__all__ = [
    "METHODS",
    "PSI_LOWER",
    "EFAResult",
    "Extraction",
    "cap_factors",
    "check_factor_model",
    "congruence",
    "extract",
    "factor_analysis",
    "fit_indices",
    "largest_residuals",
    "max_factors",
    "residual_correlations",
]

METHODS = ("minres", "ml", "paf")
#: lower bound of the uniquenesses in minres/ML (as R's factanal, psych::fa and factor_analyzer)
PSI_LOWER = 0.005


@dataclass(frozen=True)
class Extraction:
    """An unrotated factor solution.

    Attributes
    ----------
    loadings : ndarray (k x m)
        Unrotated loadings.
    communalities : ndarray (k,)
        Row sums of squared loadings (rotation-invariant).
    uniquenesses : ndarray (k,)
        ``1 - communalities`` (negative for an ultra-Heywood case; never clipped).
    converged : bool
    iterations : int
    heywood : list of int
        Indices of Heywood items: communality at or above 1, or the uniqueness at its lower bound.
    warnings : list of Note
    method : str
    objective : float
        Value of the fitting function at the solution (NaN for paf).
    """

    loadings: np.ndarray
    communalities: np.ndarray
    uniquenesses: np.ndarray
    converged: bool
    iterations: int
    heywood: list[int]
    warnings: list[Note] = field(default_factory=list)
    method: str = "minres"
    objective: float = float("nan")


# --------------------------------------------------------------------------- when a factor model applies

def check_factor_model(n: int, k: int, *, min_items: int = 3) -> None:
    """Raise :class:`InputError` when ``n`` respondents and ``k`` items cannot carry a factor model.

    With ``n <= k`` the correlation matrix is singular (its rank is below ``k``), so Bartlett's test, KMO
    and any extraction are meaningless (code ``too_few_rows``); with ``min_items=3`` (the default) fewer
    than 3 items give no identified common factor (code ``too_few_items``). Pass ``min_items=0`` to
    check the rows alone.
    """
    if n <= k:
        raise InputError(f"A factor analysis needs more respondents than items (n = {n}, k = {k}); "
                         f"only the reliability sections are shown.", code="too_few_rows",
                         details={"n": int(n), "k": int(k)})
    if k < min_items:
        raise InputError(f"A factor analysis needs at least {min_items} active items.", code="too_few_items",
                         details={"k": int(k)})


def max_factors(k: int) -> int:
    """The most factors extracted from ``k`` items: ``k // 2`` (at least 1), so each factor has two items.

    A factor defined by fewer than two (better three) items is not a common factor (common practice;
    Fabrigar, Wegener, MacCallum & Strahan 1999, Psychological Methods 4, 272-299).
    """
    return max(1, int(k) // 2)


def cap_factors(m: int, k: int) -> tuple[int, Note | None]:
    """``m`` limited to :func:`max_factors` of ``k``, with a ``too_many_factors`` warning when it was cut."""
    top = max_factors(k)
    if m <= top:
        return m, None
    return top, note("too_many_factors", f"{m} factors is too many for {k} items; {top} were extracted.")


# --------------------------------------------------------------------------- input checks

def _item_names(k: int, names: Sequence[str] | None) -> list[str]:
    if names is None:
        return [f"item {i + 1}" for i in range(k)]
    names = [str(x) for x in names]
    if len(names) != k:
        raise InputError(f"{len(names)} item names were given for a {k} x {k} correlation matrix.",
                         code="bad_names", details={"names": len(names), "items": k})
    return names


def _check_R(R, names: Sequence[str] | None) -> tuple[np.ndarray, list[str], list[Note]]:
    """Validate a correlation matrix; return it, the names and warnings about near-duplicates."""
    R = np.array(R, dtype=float)
    if R.ndim != 2 or R.shape[0] != R.shape[1]:
        raise InputError(f"A correlation matrix must be square; got shape {R.shape}.",
                         code="bad_matrix", details={"shape": list(R.shape)})
    k = R.shape[0]
    nm = _item_names(k, names)
    bad = ~np.isfinite(R)
    if bad.any():
        i, j = (int(x) for x in np.argwhere(bad)[0])
        raise InputError(f"The correlation between '{nm[i]}' and '{nm[j]}' is missing; an item with no "
                         f"variance or too few shared answers cannot enter a factor analysis.",
                         code="bad_matrix", details={"item": nm[i], "other": nm[j]})
    if np.max(np.abs(R - R.T)) > 1e-8:
        i, j = (int(x) for x in np.unravel_index(np.argmax(np.abs(R - R.T)), R.shape))
        raise InputError(f"The correlation matrix is not symmetric ('{nm[i]}' with '{nm[j]}').",
                         code="bad_matrix", details={"item": nm[i], "other": nm[j]})
    if np.max(np.abs(np.diag(R) - 1.0)) > 1e-8:
        i = int(np.argmax(np.abs(np.diag(R) - 1.0)))
        raise InputError(f"The diagonal of a correlation matrix must be 1; '{nm[i]}' has {R[i, i]:.4g}.",
                         code="bad_matrix", details={"item": nm[i], "value": float(R[i, i])})
    R = (R + R.T) / 2.0
    np.fill_diagonal(R, 1.0)
    warnings: list[Note] = []
    iu = np.triu_indices(k, 1)
    dup = np.abs(R[iu]) > 0.9999
    for a, b in zip(iu[0][dup], iu[1][dup]):
        warnings.append(note("duplicate_items", f"Items '{nm[a]}' and '{nm[b]}' correlate {R[a, b]:.4f}: one "
                             f"duplicates the other. Drop one of them; together they make the correlation "
                             f"matrix singular.", [nm[a], nm[b]]))
    return R, nm, warnings


def _smc(R: np.ndarray) -> np.ndarray:
    """Squared multiple correlations ``1 - 1/diag(R^-1)`` (pseudo-inverse if R is singular)."""
    try:
        d = np.diag(inv(R))
        if not np.all(np.isfinite(d)) or np.any(d <= 0):
            raise np.linalg.LinAlgError
    except np.linalg.LinAlgError:
        d = np.diag(np.linalg.pinv(R))
    with np.errstate(divide="ignore"):
        smc = 1.0 - 1.0 / d
    return np.clip(np.nan_to_num(smc, nan=0.0), 0.0, 1.0)


# --------------------------------------------------------------------------- objectives

def _top_eig(S: np.ndarray, m: int) -> tuple[np.ndarray, np.ndarray]:
    """The leading m eigenvalues (descending) and eigenvectors of a symmetric matrix.

    Only the m leading pairs are computed (LAPACK dsyevr with an index range), which is what keeps a
    fit of 60 items fast: the objectives below need nothing else.
    """
    k = S.shape[0]
    if k <= 16:  # a small matrix: the whole decomposition costs less than the index-range call's overhead
        vals, vecs = np.linalg.eigh(S)
        return vals[:k - m - 1:-1], vecs[:, :k - m - 1:-1]
    vals, vecs = linalg.eigh(S, subset_by_index=[k - m, k - 1], driver="evr", check_finite=False)
    return vals[::-1], vecs[:, ::-1]


def _uls_loadings(psi: np.ndarray, R: np.ndarray, m: int) -> np.ndarray:
    S = R.copy()
    np.fill_diagonal(S, 1.0 - psi)
    vals, V = _top_eig(S, m)
    return V * np.sqrt(np.maximum(vals, 0.0))[None, :]


def _uls_fun(psi: np.ndarray, R: np.ndarray, m: int) -> tuple[float, np.ndarray]:
    # ||S - LL'||² = ||S||² - sum of the retained positive eigenvalues squared;
    # gradient -2 diag(S - LL')
    S = R.copy()
    np.fill_diagonal(S, 1.0 - psi)
    vals, V = _top_eig(S, m)
    pos = np.maximum(vals, 0.0)
    L2 = (V * V) @ pos
    f = float(np.sum(S * S) - np.sum(pos * pos))
    return f, -2.0 * (1.0 - psi - L2)


def _ml_loadings(psi: np.ndarray, R: np.ndarray, m: int) -> np.ndarray:
    sc = 1.0 / np.sqrt(psi)
    vals, V = _top_eig(R * sc[:, None] * sc[None, :], m)
    return np.sqrt(psi)[:, None] * V * np.sqrt(np.maximum(vals - 1.0, 0.0))[None, :]


def _ml_fun(psi: np.ndarray, R: np.ndarray, m: int, logdet_r: float) -> tuple[float, np.ndarray]:
    # factanal's criterion -(sum_{j>m} (log e_j - e_j)) - m + k, with the sums over the trailing
    # eigenvalues of S* = psi^-1/2 R psi^-1/2 taken as totals minus the m leading ones:
    # sum log e = log|R| - sum log psi, sum e = tr(S*) = sum 1/psi
    k = R.shape[0]
    sc = 1.0 / np.sqrt(psi)
    vals, V = _top_eig(R * sc[:, None] * sc[None, :], m)
    if np.any(vals <= 0):
        return float("inf"), np.zeros(k)
    sum_log = logdet_r - np.sum(np.log(psi)) - np.sum(np.log(vals))
    sum_e = np.sum(1.0 / psi) - np.sum(vals)
    f = -(sum_log - sum_e) + m - k
    L2 = psi * ((V * V) @ np.maximum(vals - 1.0, 0.0))
    g = (L2 + psi - 1.0) / psi ** 2
    return float(f), g


def _ml_discrepancy(R: np.ndarray, L: np.ndarray, psi: np.ndarray) -> float:
    """``F_ML = log|Sigma| - log|R| + tr(R Sigma^-1) - k`` with ``Sigma = LL' + diag(psi)``."""
    k = R.shape[0]
    Sigma = L @ L.T + np.diag(psi)
    s1, ld_sigma = np.linalg.slogdet(Sigma)
    s2, ld_r = np.linalg.slogdet(R)
    if s1 <= 0 or s2 <= 0:
        return float("nan")
    return float(ld_sigma - ld_r + np.trace(np.linalg.solve(Sigma, R)) - k)


# --------------------------------------------------------------------------- extraction

def _lbfgsb(fun: Callable[..., tuple[float, np.ndarray]], start: np.ndarray, args: tuple[Any, ...], k: int,
            max_iter: int, tol: float | None) -> tuple[np.ndarray, float, int, bool, str]:
    """L-BFGS-B within the uniqueness bounds: ``(psi, objective, iterations, converged, message)``."""
    res = optimize.minimize(fun, start, args=args, jac=True, method="L-BFGS-B", bounds=[(PSI_LOWER, 1.0)] * k,
                            options={"maxiter": max_iter, "ftol": 1e-14, "gtol": 1e-8 if tol is None else tol})
    psi = res.x
    it = int(res.nit)
    # L-BFGS-B can stop on a line-search failure at an optimum; accept that when the projected
    # gradient (zero where a bound is active and the gradient points outwards) has vanished
    g = np.asarray(res.jac, dtype=float)
    pg = np.where(((psi <= PSI_LOWER) & (g > 0)) | ((psi >= 1.0) & (g < 0)), 0.0, g)
    converged = bool(res.success) or (it < max_iter and float(np.max(np.abs(pg))) < 1e-6)
    return psi, float(res.fun), it, converged, str(res.message)



def extract(R: ArrayLike, n_factors: int, *, method: str = "minres", n: int | None = None,
            max_iter: int = 1000, tol: float | None = None, names: Sequence[str] | None = None,
            start_psi: ArrayLike | None = None) -> Extraction:
    """Extract ``n_factors`` unrotated factors from a correlation matrix.

    Parameters
    ----------
    R : array_like, shape (k, k)
        Correlation matrix.
    n_factors : int
        Number of factors, ``1 <= n_factors < k``.
    method : {"minres", "ml", "paf"}
    n : int, optional
        Sample size (not needed for the estimates; kept for symmetry with :func:`fit_indices`).
    max_iter : int
        Iteration limit of the optimiser (minres, ML) or of the principal-axis iteration.
    tol : float, optional
        Gradient tolerance of L-BFGS-B (minres, ML; default 1e-8) or the largest change of a communality
        between principal-axis iterations (paf; default 1e-6).
    names : sequence of str, optional
        Item names, used in warnings.
    start_psi : array_like, shape (k,), optional
        Starting uniquenesses of minres and ML (warm start, e.g. a solution of similar data); default
        ``1 - SMC``. The optimum is the same; ignored by paf and when not k finite values.

    Returns
    -------
    Extraction

    Notes
    -----
    Starting uniquenesses are ``1 - SMC``. A Heywood case (communality at or above 1, or a uniqueness
    at its lower bound of 0.005) is reported in ``heywood`` and ``warnings``; nothing is clipped
    beyond the optimiser's bound, and principal-axis communalities above 1 are kept as they are.

    References
    ----------
    Harman, H. H., & Jones, W. H. (1966). Psychometrika, 31, 351-368.
    Joreskog, K. G. (1967). Psychometrika, 32, 443-482.
    Harman, H. H. (1976). Modern Factor Analysis (3rd ed.), chapter 8 (principal factors).

    Examples
    --------
    >>> R = np.array([[1, .6, .5], [.6, 1, .4], [.5, .4, 1]])
    >>> round(float(extract(R, 1, method="ml").communalities[0]), 2)
    0.75
    """
    R, nm, warnings = _check_R(R, names)
    k = R.shape[0]
    if isinstance(max_iter, bool) or int(max_iter) != max_iter or max_iter < 1:
        raise InputError(f"The iteration limit must be a positive whole number; got {max_iter}.",
                         code="bad_option", details={"max_iter": max_iter})
    if method not in METHODS:
        raise InputError(f"Unknown extraction method '{method}'; choose one of {', '.join(METHODS)}.",
                         code="bad_option", details={"extraction": method})
    if isinstance(n_factors, bool) or int(n_factors) != n_factors or not 1 <= n_factors < k:
        raise InputError(f"The number of factors must be a whole number from 1 to {k - 1} for {k} items; "
                         f"got {n_factors}.", code="bad_n_factors",
                         details={"n_factors": n_factors, "items": k})
    m = int(n_factors)
    min_eig = float(eigvalsh(R)[0])
    if method == "ml" and min_eig <= 1e-10:
        raise InputError(f"Maximum likelihood needs a positive definite correlation matrix; this one's "
                         f"smallest eigenvalue is {min_eig:.3g} (some items are exact combinations of "
                         f"others, for instance duplicates). Drop such items or use minres.",
                         code="singular_matrix", details={"min_eigenvalue": min_eig})
    if method != "ml" and min_eig <= 1e-10:
        warnings.append(note("singular_matrix", f"The correlation matrix is singular (smallest eigenvalue "
                             f"{min_eig:.2g}); some items are exact combinations of others and their loadings "
                             f"are not trustworthy."))
    if method == "ml" and ((k - m) ** 2 - (k + m)) < 0:
        warnings.append(note("ml_not_identified", f"With {k} items, {m} factors leave negative degrees of "
                             f"freedom; the ML solution is not identified. Extract fewer factors."))

    warm = None if start_psi is None else np.asarray(start_psi, dtype=float).reshape(-1)
    if warm is not None and not (warm.size == k and np.isfinite(warm).all()):
        warm = None  # uniquenesses of another item set: start from the SMCs
    heywood: list[int] = []
    if method == "paf":
        h2 = _smc(R)
        converged = False
        it = 0
        for it in range(1, max_iter + 1):  # noqa: B007  (the count is read after the loop)
            S = R.copy()
            np.fill_diagonal(S, h2)
            vals, vecs = _top_eig(S, m)
            L = vecs * np.sqrt(np.maximum(vals, 0.0))[None, :]
            new = np.sum(L * L, axis=1)
            delta = float(np.max(np.abs(new - h2)))
            h2 = new
            if delta < (1e-6 if tol is None else max(tol, 1e-12)):
                converged = True
                break
        objective = float("nan")
        if not converged:
            warnings.append(note("not_converged", f"Principal axis factoring did not converge in {max_iter} "
                                 f"iterations (last change of a communality {delta:.2g})."))
        heywood = [i for i in range(k) if h2[i] >= 1.0 - 1e-9]
    else:
        fun: Callable[..., tuple[float, np.ndarray]]
        args: tuple[Any, ...]
        if method == "ml":
            fun, args = _ml_fun, (R, m, slogdet(R)[1])
        else:
            fun, args = _uls_fun, (R, m)
        start = np.clip(1.0 - _smc(R) if warm is None else warm, PSI_LOWER, 1.0)
        newton = None if method == "ml" else minres_newton(R, m, start, lower=PSI_LOWER,
                                                            max_iter=min(int(max_iter), 50),
                                                            tol=1e-2 * (1e-8 if tol is None else tol))
        if newton is not None:
            psi, objective, it = newton
            converged = True
        else:
            psi, objective, it, converged, message = _lbfgsb(fun, start, args, k, max_iter, tol)
        L = _ml_loadings(psi, R, m) if method == "ml" else _uls_loadings(psi, R, m)
        h2 = np.sum(L * L, axis=1)
        if not converged:
            warnings.append(note("not_converged", f"The {'ML' if method == 'ml' else 'minres'} fit stopped "
                                 f"after {it} iterations without converging ({message}); treat its loadings "
                                 f"with caution."))
        heywood = [i for i in range(k) if psi[i] <= PSI_LOWER * (1 + 1e-6) or h2[i] >= 1.0 - 1e-9]
    # canonical sign: each unrotated factor's loadings sum positive
    sgn = np.where(L.sum(axis=0) < 0, -1.0, 1.0)
    L = L * sgn[None, :]
    for i in heywood:
        warnings.append(note("heywood", f"Item '{nm[i]}' is a Heywood case: its communality reached {h2[i]:.3f} "
                             f"(uniqueness {1 - h2[i]:.3f}), at the boundary of 1. It was reported, not corrected; "
                             f"too many factors, a duplicated item or a small sample are the usual causes.",
                             [nm[i]]))
    return Extraction(L, h2, 1.0 - h2, converged, it, heywood, warnings, method, objective)


def rmsea_interval(chisq: float, df: float, n_used: float, level: float = 0.90) -> list[float]:
    """Steiger's (1990) interval for the RMSEA: the noncentrality parameters at which the observed
    chi-square is the (1 + level)/2 and (1 - level)/2 quantile of the noncentral chi-square, each
    divided by ``df * n_used`` under a square root (0 when even the central chi-square is below).
    """
    def bound(target: float) -> float:
        if stats.chi2.cdf(chisq, df) <= target:
            return 0.0
        hi = max(chisq, 1.0)
        while stats.ncx2.cdf(chisq, df, hi) > target:
            hi *= 2.0
        return float(optimize.brentq(lambda lam: stats.ncx2.cdf(chisq, df, lam) - target, 0.0, hi,
                                     xtol=1e-10))

    lo, hi = bound((1 + level) / 2), bound((1 - level) / 2)
    return [float(np.sqrt(lo / (df * n_used))), float(np.sqrt(hi / (df * n_used)))]


def fit_indices(R: np.ndarray, loadings: np.ndarray, uniquenesses: np.ndarray, n: int | None, method: str) -> dict:
    """Fit of a factor solution to the correlation matrix.

    Returns
    -------
    dict
        ``rmsr`` always: root mean square of the off-diagonal residuals of ``R - LL' - diag(psi)``.
        For ``method == "ml"`` with ``n``: ``chi2`` (Bartlett-corrected, named in
        ``chi2_correction``), ``df``, ``p``, ``rmsea``, ``rmsea_ci`` (90 %), ``tli``, ``bic``.

    Notes
    -----
    * ``chi2 = (n - 1 - (2k + 5)/6 - 2m/3) F_ML`` (Bartlett 1950), ``F_ML = log|S| - log|R| +
      tr(R S^-1) - k``; ``df = ((k - m)² - (k + m)) / 2``.
    * RMSEA ``= sqrt(max(chi2 - df, 0) / (df (n - 1)))``; its 90 % interval inverts the noncentral
      chi-square distribution at .95 and .05 (Steiger 1990).
    * TLI ``= (chi2_0/df_0 - chi2/df) / (chi2_0/df_0 - 1)`` against the independence model,
      ``chi2_0 = (n - 1 - (2k + 5)/6) (-log|R|)``, ``df_0 = k(k - 1)/2`` (Tucker & Lewis 1973).
    * BIC ``= chi2 - df log(n)`` (as psych::fa).

    References
    ----------
    Bartlett, M. S. (1950). British Journal of Psychology (Statistical Section), 3, 77-85.
    Steiger, J. H. (1990). Multivariate Behavioral Research, 25, 173-180.
    Tucker, L. R., & Lewis, C. (1973). Psychometrika, 38, 1-10.
    """
    R = np.asarray(R, dtype=float)
    L = np.asarray(loadings, dtype=float)
    psi = np.asarray(uniquenesses, dtype=float)
    k, m = L.shape
    resid = R - L @ L.T - np.diag(psi)
    iu = np.triu_indices(k, 1)
    out: dict = {"rmsr": float(np.sqrt(np.mean(resid[iu] ** 2))) if k > 1 else 0.0}
    if method != "ml" or n is None:
        return out
    if n <= 1:
        raise InputError(f"The sample size must be at least 2; got {n}.", code="bad_n", details={"n": n})
    df = ((k - m) ** 2 - (k + m)) / 2.0
    F = _ml_discrepancy(R, L, np.maximum(psi, 1e-12))
    scale = n - 1 - (2 * k + 5) / 6.0 - 2 * m / 3.0
    chi2 = float(scale * F) if np.isfinite(F) else float("nan")
    out.update({"chi2": chi2, "df": df, "chi2_correction":
                "Bartlett (1950): (n - 1 - (2k + 5)/6 - 2m/3) times the ML discrepancy"})
    if df <= 0 or not np.isfinite(chi2):
        out.update({"p": None, "rmsea": None, "rmsea_ci": [None, None], "tli": None, "bic": None})
        return out
    out["p"] = float(stats.chi2.sf(chi2, df))
    out["rmsea"] = float(np.sqrt(max(chi2 - df, 0.0) / (df * (n - 1))))
    out["rmsea_ci"] = rmsea_interval(chi2, df, n - 1)
    s_r, ld_r = slogdet(R)
    chi0 = (n - 1 - (2 * k + 5) / 6.0) * (-ld_r) if s_r > 0 else float("nan")
    df0 = k * (k - 1) / 2.0
    denom = chi0 / df0 - 1.0
    out["tli"] = float((chi0 / df0 - chi2 / df) / denom) if np.isfinite(chi0) and denom != 0 else None
    out["bic"] = float(chi2 - df * np.log(n))
    return out


# --------------------------------------------------------------------------- factor identity

def congruence(A: ArrayLike, B: ArrayLike) -> np.ndarray:
    """Tucker's congruence coefficients between the columns of A and of B (same rows).

    ``phi(a, b) = sum(a b) / sqrt(sum(a²) sum(b²))`` (Tucker 1951).
    """
    A = np.asarray(A, dtype=float)
    B = np.asarray(B, dtype=float)
    na = np.sqrt(np.sum(A * A, axis=0))
    nb = np.sqrt(np.sum(B * B, axis=0))
    den = np.outer(na, nb)
    with np.errstate(invalid="ignore", divide="ignore"):
        C = (A.T @ B) / den
    return np.nan_to_num(C)


def _variance(pattern: np.ndarray, structure: np.ndarray) -> np.ndarray:
    return np.sum(pattern * structure, axis=0)


@dataclass(frozen=True)
class EFAResult:
    """A rotated exploratory factor analysis, ready for the ``efa`` section of the analysis JSON.

    Attributes
    ----------
    names : list of str
    factors : list of str
        Factor labels (codebook construct, or "Factor j").
    pattern, structure : ndarray (k x m)
    phi : ndarray (m x m)
        Factor correlations.
    communalities, uniquenesses : ndarray (k,)
        From the unrotated solution (rotation-invariant).
    variance : dict
        ``ss_loadings``, ``proportion``, ``cumulative`` and ``basis`` (how it was computed).
    fit : dict
        From :func:`fit_indices`.
    converged : bool
        Extraction and rotation both converged.
    warnings : list of Note
    flags : list of dict
        From :func:`server.stats.flags.flag_items`.
    rotation, method : str
    match : str
        How factor order and signs were settled.
    extraction : Extraction
    rotation_result : RotationResult
    thresholds : dict
        The flag thresholds used.
    """

    names: list[str]
    factors: list[str]
    pattern: np.ndarray
    structure: np.ndarray
    phi: np.ndarray
    communalities: np.ndarray
    uniquenesses: np.ndarray
    variance: dict
    fit: dict
    converged: bool
    warnings: list[Note]
    flags: list[dict]
    rotation: str
    method: str
    match: str
    extraction: Extraction
    rotation_result: _rotation.RotationResult
    thresholds: dict

    @property
    def n_factors(self) -> int:
        return int(self.pattern.shape[1])

    def to_dict(self) -> dict:
        """The JSON of issue 3's ``efa`` section (plain floats, lists and dicts)."""
        def f(x):
            return None if x is None or not np.isfinite(x) else float(x)

        def rows(A) -> list:  # plain floats, None where not finite (tolist gives the same floats, at C speed)
            A = np.asarray(A, dtype=float)
            return A.tolist() if np.isfinite(A).all() else [[f(v) for v in row] for row in A]

        return {
            "n_factors": self.n_factors,
            "factors": list(self.factors),
            "loadings": dict(zip(self.names, rows(self.pattern))),
            "structure": dict(zip(self.names, rows(self.structure))),
            "factor_correlations": rows(self.phi),
            "communalities": dict(zip(self.names, rows(np.reshape(self.communalities, (1, -1)))[0])),
            "uniquenesses": dict(zip(self.names, rows(np.reshape(self.uniquenesses, (1, -1)))[0])),
            "variance": {key: ([f(v) for v in val] if isinstance(val, list) else val)
                         for key, val in self.variance.items()},
            "fit": {key: (f(v) if isinstance(v, float) else v) for key, v in self.fit.items()},
            "converged": bool(self.converged),
            "warnings": [w.to_dict() for w in self.warnings],
            "flags": [dict(x) for x in self.flags],
            "rotation": self.rotation,
            "method": self.method,
            "extraction": self.method,
            "match": self.match,
            "heywood": [self.names[i] for i in self.extraction.heywood],
            "thresholds": dict(self.thresholds),
        }


def _previous_matrix(previous, names: list[str]) -> tuple[np.ndarray | None, list[int], list[str]]:
    """The previous pattern restricted to the common items (rows in current order)."""
    if previous is None:
        return None, [], []
    if isinstance(previous, EFAResult):
        prev = {"loadings": {n: list(r) for n, r in zip(previous.names, previous.pattern)},
                "factors": previous.factors}
    elif isinstance(previous, Mapping):
        prev = dict(previous)
    else:
        raise InputError("The previous solution must be an earlier EFA result or its JSON.",
                         code="bad_previous", details={})
    loads = prev.get("loadings") or {}
    if not isinstance(loads, Mapping):
        raise InputError("The previous solution's loadings must map item names to lists.",
                         code="bad_previous", details={})
    rows = [i for i, n in enumerate(names) if n in loads]
    if not rows:
        return None, [], []
    try:
        M = np.array([[np.nan if v is None else float(v) for v in loads[names[i]]] for i in rows], dtype=float)
    except (TypeError, ValueError):
        raise InputError("The previous solution's loadings must be lists of numbers of one length, one "
                         "list per item.", code="bad_previous", details={}) from None
    if M.ndim != 2 or M.shape[1] == 0 or not np.all(np.isfinite(M)):
        return None, [], []
    labels = list(prev.get("factors") or [f"Factor {j + 1}" for j in range(M.shape[1])])
    return M, rows, labels


def _label_factors(pattern: np.ndarray, constructs: Sequence[str | None] | None) -> list[str]:
    k, m = pattern.shape
    labels = [f"Factor {j + 1}" for j in range(m)]
    if not constructs:
        return labels
    cons = sorted({c for c in constructs if c})
    if not cons:
        return labels
    prim = np.argmax(np.abs(pattern), axis=1)
    score = np.zeros((m, len(cons)))
    for i in range(k):
        c = constructs[i]
        if c:
            score[prim[i], cons.index(c)] += pattern[i, prim[i]] ** 2
    rows, cols = optimize.linear_sum_assignment(-score)
    for r, c in zip(rows, cols):
        if score[r, c] > 0:
            labels[r] = cons[c]
    return labels


def factor_analysis(R: ArrayLike, n_factors: int, *, n: int | None = None, names: Sequence[str] | None = None,
                    method: str = "minres", rotation: str = "oblimin", gamma: float = 0.0,
                    constructs: Sequence[str | None] | None = None, previous: EFAResult | Mapping[str,
                    Any] | None = None,
                    thresholds: Mapping[str, float] | None = None,
                    item_rest_r: Sequence[float | None] | np.ndarray | None = None,
                    reverse: Sequence[bool] | None = None, seed: int = 0, random_starts: int = 5,
                    max_iter: int = 1000, start_psi: ArrayLike | None = None) -> EFAResult:
    """Extract, rotate, order, reflect, label and flag: the whole ``efa`` section of issue 3.

    Parameters
    ----------
    R : array_like (k x k)
        Correlation matrix of the active items.
    n_factors : int
    n : int, optional
        Sample size (for the ML fit indices).
    names : sequence of str
    method : {"minres", "ml", "paf"}
    rotation : {"oblimin", "quartimin", "geomin", "promax", "varimax", "quartimax", "none"}
    gamma : float
        Oblimin's gamma (0 = quartimin).
    constructs : sequence of (str or None), optional
        Codebook construct of each item, used to label factors and to flag misplaced items.
    previous : EFAResult or dict, optional
        An earlier result (or its ``to_dict()``): factors are reordered and reflected to match it. Its pattern
        also gives oblimin/geomin a second start after the identity; when both converge to the same criterion
        value the random starts are skipped (``rotation._gpa``).
    thresholds : mapping, optional
        Overrides of :data:`server.stats.flags.DEFAULT_THRESHOLDS`.
    item_rest_r : array_like, optional
        Item-rest correlations for the reverse-keying rule.
    reverse : sequence of bool, optional
        Declared reverse-keyed items.
    seed, random_starts : int
        Random starts of oblimin/geomin (seeded; the identity is always the first start).
    start_psi : array_like, optional
        Starting uniquenesses of the extraction (see :func:`extract`).

    Returns
    -------
    EFAResult

    Notes
    -----
    * Variance explained per factor is ``sum_i P_ij S_ij`` (pattern times structure), the factor's
      direct plus joint contribution (Harman 1976; as psych::fa for oblique solutions). For orthogonal
      rotations it is the usual sum of squared loadings; across factors it sums to the total
      communality, and proportions are of the number of items.
    * Order: factors are sorted by that variance, then, when ``previous`` is given, matched to the
      previous factors by Tucker's congruence over the common items with the Hungarian assignment
      (Kuhn 1955) and reflected to agree in sign; otherwise reflected so loadings sum positive.
    * Labels: each factor gets the codebook construct whose items' squared primary loadings on it sum
      highest, one construct per factor (again an assignment); others are "Factor j".

    References
    ----------
    Tucker, L. R. (1951). Personnel Research Section Report No. 984.
    Lorenzo-Seva, U., & ten Berge, J. M. F. (2006). Tucker's congruence coefficient as a meaningful
        index of factor similarity. Methodology, 2, 57-64.
    Kuhn, H. W. (1955). Naval Research Logistics Quarterly, 2, 83-97.
    """
    R, nm, _ = _check_R(R, names)
    k = R.shape[0]
    if rotation not in _rotation.ROTATIONS:
        raise InputError(f"Unknown rotation '{rotation}'; choose one of {', '.join(_rotation.ROTATIONS)}.",
                         code="bad_option", details={"rotation": rotation})
    if constructs is not None and len(constructs) != k:
        raise InputError(f"{len(constructs)} constructs were given for {k} items.", code="bad_constructs",
                         details={"constructs": len(constructs), "items": k})
    th = _flags.resolve_thresholds(thresholds)
    ex = extract(R, n_factors, method=method, n=n, max_iter=max_iter, names=nm, start_psi=start_psi)
    warnings = list(ex.warnings)
    prevM, rows, _prev_labels = _previous_matrix(previous, nm)
    warm = None
    if prevM is not None and prevM.shape[1] == ex.loadings.shape[1] and len(rows) > prevM.shape[1]:
        warm = (prevM, np.asarray(rows))  # the previous rotation as a start (random starts only when needed)
    rot = _rotation.rotate(ex.loadings, rotation, gamma=gamma, random_starts=random_starts, seed=seed, warm=warm)
    warnings += rot.warnings
    P, phi = rot.pattern.copy(), rot.phi.copy()
    m = P.shape[1]

    # sort by variance explained
    var = _variance(P, P @ phi)
    order = np.argsort(-var, kind="stable")
    P, phi = P[:, order], phi[np.ix_(order, order)]
    # reflect so each factor's loadings sum positive
    sgn = np.where(P.sum(axis=0) < 0, -1.0, 1.0)
    match = "Factors are ordered by variance explained and reflected so their loadings sum positive."
    if previous is not None and prevM is None:
        match += " The previous solution shares no items with this one, so it was not used."
    if prevM is not None:
        P = P * sgn[None, :]
        phi = phi * np.outer(sgn, sgn)
        C = congruence(P[rows], prevM)
        r_idx, c_idx = optimize.linear_sum_assignment(-np.abs(C))
        m_prev = prevM.shape[1]
        # new order: matched factors in the previous order, then the unmatched ones by variance
        perm: list[int | None] = [None] * m_prev
        for r, c in zip(r_idx, c_idx):
            perm[c] = r
        new_order = [int(r) for r in perm if r is not None] + [j for j in range(m) if j not in set(r_idx)]
        sgn = np.ones(m)
        for r, c in zip(r_idx, c_idx):
            if C[r, c] < 0:
                sgn[r] = -1.0
        congr = [abs(C[r, c]) for r, c in zip(r_idx, c_idx)]
        P, phi = P[:, new_order], phi[np.ix_(new_order, new_order)]
        sgn = sgn[new_order]
        match = (f"Factors were matched to the previous solution by Tucker's congruence over {len(rows)} "
                 f"common items (lowest congruence {min(congr):.2f}) and reflected to agree in sign.")
        if m != m_prev:
            match += f" The previous solution had {m_prev} factors, this one has {m}."
        if min(congr) < 0.85:
            warnings.append(note("factor_changed", f"A factor changed substantially from the previous solution "
                                 f"(Tucker's congruence {min(congr):.2f}, below .85, Lorenzo-Seva & ten Berge "
                                 f"2006)."))
    P = P * sgn[None, :]
    phi = phi * np.outer(sgn, sgn)
    S = P @ phi
    var = _variance(P, S)
    labels = _label_factors(P, constructs)
    fit = fit_indices(R, ex.loadings, ex.uniquenesses, n, method)
    variance = {
        "ss_loadings": [float(v) for v in var],
        "proportion": [float(v / k) for v in var],
        "cumulative": [float(v) for v in np.cumsum(var) / k],
        "basis": ("sum of squared loadings" if rotation not in _rotation.OBLIQUE else
                  "sum over items of pattern x structure (each factor's direct and joint contribution; "
                  "sums to the total communality)"),
    }
    flag_list = _flags.flag_items(P, names=nm, communalities=ex.communalities, factor_labels=labels,
                                  constructs=constructs, item_rest_r=item_rest_r, reverse=reverse,
                                  thresholds=th, heywood=[nm[i] for i in ex.heywood])
    return EFAResult(names=nm, factors=labels, pattern=P, structure=S, phi=phi,
                     communalities=ex.communalities, uniquenesses=ex.uniquenesses, variance=variance,
                     fit=fit, converged=bool(ex.converged and rot.converged), warnings=warnings,
                     flags=flag_list, rotation=rotation, method=method, match=match, extraction=ex,
                     rotation_result=rot, thresholds=th)


# --------------------------------------------------------------------------- residual correlations

#: residuals at least this large (in absolute value) are listed as large
RESIDUAL_THRESHOLD = 0.10  # common practice


def residual_correlations(R: ArrayLike, loadings: ArrayLike, phi: ArrayLike | None = None) -> np.ndarray:
    """Residual correlations of a factor model: the off-diagonal part of ``R - L Phi L'``.

    Parameters
    ----------
    R : array_like (k x k)
        The correlation matrix the model was fitted to.
    loadings : array_like (k x m)
        Pattern loadings (rotated or not).
    phi : array_like (m x m), optional
        Factor correlations (default: identity, an orthogonal or unrotated solution).

    Returns
    -------
    ndarray (k x k)
        ``R - L Phi L'`` with the diagonal set to 0 (the diagonal is the uniqueness, not a residual).

    Notes
    -----
    ``L Phi L'`` is the correlation matrix the common factors reproduce; it is the same for every
    rotation of one extraction (``P Phi P' = A A'`` for unrotated loadings ``A``), so the residuals are
    too. Their root mean square is the ``rmsr`` of :func:`fit_indices`.

    References
    ----------
    Harman, H. H. (1976). Modern Factor Analysis (3rd ed.), ch. 2. University of Chicago Press.
    """
    R = np.asarray(R, dtype=float)
    L = np.asarray(loadings, dtype=float)
    if R.ndim != 2 or R.shape[0] != R.shape[1]:
        raise InputError(f"The correlation matrix must be square; got shape {R.shape}.", code="bad_matrix",
                         details={"shape": list(R.shape)})
    if L.ndim != 2 or L.shape[0] != R.shape[0]:
        raise InputError(f"The loadings must have one row per item ({R.shape[0]}); got shape {L.shape}.",
                         code="bad_loadings", details={"shape": list(L.shape), "items": R.shape[0]})
    m = L.shape[1]
    P = np.eye(m) if phi is None else np.asarray(phi, dtype=float)
    if P.shape != (m, m):
        raise InputError(f"The factor correlations must be {m} x {m}; got shape {P.shape}.", code="bad_phi",
                         details={"shape": list(P.shape), "factors": m})
    resid = R - L @ P @ L.T
    np.fill_diagonal(resid, 0.0)
    return resid


def largest_residuals(residuals: ArrayLike, names: Sequence[str], *, R: ArrayLike | None = None,
                      threshold: float = RESIDUAL_THRESHOLD) -> list[dict]:
    """The item pairs whose absolute residual correlation is at least ``threshold``, largest first.

    Returns a list of ``{"items": [a, b], "residual": float, "r": float | None}`` (``r`` from ``R`` when
    given), ``a`` before ``b`` in the order of ``names``; ties keep that order.
    """
    E = np.asarray(residuals, dtype=float)
    k = E.shape[0] if E.ndim == 2 else -1
    if E.ndim != 2 or E.shape[1] != k or len(names) != k:
        raise InputError(f"The residual matrix ({E.shape}) and the {len(names)} item names do not match.",
                         code="bad_matrix", details={"shape": list(E.shape), "names": len(names)})
    Rm = None if R is None else np.asarray(R, dtype=float)
    iu, ju = np.triu_indices(k, 1)
    vals = E[iu, ju]
    keep = np.flatnonzero(np.abs(vals) >= threshold)
    keep = keep[np.argsort(-np.abs(vals[keep]), kind="stable")]
    return [{"items": [names[iu[t]], names[ju[t]]], "residual": float(vals[t]),
             "r": None if Rm is None else float(Rm[iu[t], ju[t]])} for t in keep]
