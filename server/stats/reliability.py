"""Internal-consistency reliability: alpha, its Feldt interval, omega, Guttman's lambdas, split half.

Everything except :func:`cronbach_alpha` works from a covariance matrix, so the engine can keep the
full-pool covariance of a dataset and answer for any set of active items by taking a submatrix:
nothing is recomputed from the raw responses when an item is dropped.

All functions are pure (numpy/scipy/pandas only) and return frozen dataclasses with ``to_dict()``
giving plain JSON types.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import linalg, optimize, special

from .errors import InputError
from .minres import minres_newton
from .notes import Note, note
from .spectra import cholesky, inv

__all__ = [
    "AlphaResult", "GuttmanLambdas", "OmegaResult", "OneFactorFit", "OrdinalAlphaResult",
    "OrdinalOmegaResult", "ReliabilityResult", "cronbach_alpha", "feldt_ci", "guttman_lambdas",
    "alpha_omega", "mcdonald_omega", "one_factor_loadings", "ordinal_alpha", "ordinal_omega", "reliability_from_cov",
    "spearman_brown", "spearman_brown_factor", "split_half_odd_even",
]

# Lower bound of a uniqueness in the bounded (Heywood) one-factor fit, as psych::fa and
# factor_analyzer use for minres.
_PSI_MIN = 0.005
_FIT_TOL = 1e-12  # on the sweep step; the accelerated fit then sits within ~1e-10 of the fixed point
_H = 1.0 - _PSI_MIN  # largest communality before the uniqueness bound is reached
_FIT_MAX_ITER = 1000


def _num(x) -> float | None:
    """A finite float, or None (JSON has no NaN)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


# --------------------------------------------------------------------------------------------
# Input checks
# --------------------------------------------------------------------------------------------

def _item_label(j: int, names) -> str:
    return f"'{names[j]}'" if names is not None else f"number {j + 1}"


def _check_cov(cov, *, names=None, min_items: int = 2, what: str = "covariance matrix") -> np.ndarray:
    S = np.asarray(cov, dtype=float)
    if S.ndim != 2 or S.shape[0] != S.shape[1]:
        raise InputError(f"The {what} must be square; got shape {tuple(S.shape)}.", code="bad_shape",
                         details={"shape": list(S.shape)})
    k = S.shape[0]
    if names is not None and len(names) != k:
        raise InputError(f"Expected {k} item names for a {k} x {k} {what}, got {len(names)}.",
                         code="bad_shape", details={"names": len(names), "items": k})
    if k < min_items:
        raise InputError(f"At least {min_items} items are needed; {k} given.", code="too_few_items",
                         details={"items": k, "needed": min_items})
    bad = ~np.isfinite(S)
    if bad.any():
        i, j = (int(v) for v in np.argwhere(bad)[0])
        if i == j:
            msg = f"Item {_item_label(i, names)} has no usable variance (too few answers)."
        else:
            msg = (f"Items {_item_label(i, names)} and {_item_label(j, names)} were answered together "
                   "by fewer than two respondents, so their covariance is missing.")
        raise InputError(msg, code="missing_covariance",
                         details={"items": [names[i], names[j]] if names is not None else [i, j]})
    d = np.diag(S)
    scale = max(float(np.max(np.abs(d))), 1e-300)
    if float(np.abs(S - S.T).max()) > 1e-8 * scale:
        raise InputError(f"The {what} is not symmetric.", code="bad_matrix")
    flat = np.flatnonzero(d <= 1e-12 * scale)
    if flat.size:
        j = int(flat[0])
        raise InputError(f"Item {_item_label(j, names)} has no variance (every answer is the same); it "
                         "cannot enter a reliability analysis. Leave it out of the active items.",
                         code="no_variance",
                         details={"item": names[j] if names is not None else j})
    return S


def _cov_to_corr(S: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    sd = np.sqrt(np.diag(S))
    R = S / np.outer(sd, sd)
    np.fill_diagonal(R, 1.0)
    return R, sd


# --------------------------------------------------------------------------------------------
# Published single-method functions
# --------------------------------------------------------------------------------------------

def _alpha(S: np.ndarray) -> float:
    k = S.shape[0]
    total = S.sum()
    if total <= 0:
        return float("nan")
    return k / (k - 1) * (1.0 - np.trace(S) / total)


def feldt_ci(alpha: float, k: int, n: int, ci: float = 0.95) -> tuple[float, float]:
    """Feldt's confidence interval for coefficient alpha.

    Parameters
    ----------
    alpha : float
        Sample coefficient alpha.
    k : int
        Number of items (at least 2).
    n : int
        Number of respondents (at least 2).
    ci : float
        Coverage, e.g. 0.95.

    Returns
    -------
    (lower, upper) : tuple of float

    Notes
    -----
    :math:`(1-\\alpha)/(1-\\hat\\alpha)` follows an F distribution with :math:`n-1` and
    :math:`(n-1)(k-1)` degrees of freedom, so

    .. math::

        \\left[\\,1 - (1-\\hat\\alpha) F_{1-(1-c)/2},\\;\\; 1 - (1-\\hat\\alpha) F_{(1-c)/2}\\,\\right].

    This is the interval pingouin and psych report.

    References
    ----------
    Feldt, L. S. (1965). The approximate sampling distribution of Kuder-Richardson reliability
    coefficient twenty. Psychometrika, 30(3), 357-370.
    Feldt, L. S., Woodruff, D. J., & Salih, F. A. (1987). Statistical inference for coefficient
    alpha. Applied Psychological Measurement, 11(1), 93-103.

    Examples
    --------
    >>> [round(v, 3) for v in feldt_ci(0.85, 7, 89)]
    [0.797, 0.893]
    """
    if not 0 < ci < 1:
        raise InputError(f"The confidence level must be between 0 and 1; got {ci}.", code="bad_ci",
                         details={"ci": ci})
    if k < 2 or n < 2:
        raise InputError(f"Feldt's interval needs at least 2 items and 2 respondents; got k={k}, n={n}.",
                         code="too_few", details={"k": k, "n": n})
    df1 = n - 1
    df2 = df1 * (k - 1)
    tail = (1.0 - ci) / 2.0
    # special.fdtri is the F quantile function (scipy.stats.f.ppf without the wrapper's overhead)
    lower = 1.0 - (1.0 - alpha) * special.fdtri(df1, df2, 1.0 - tail)
    upper = 1.0 - (1.0 - alpha) * special.fdtri(df1, df2, tail)
    return float(lower), float(upper)


def spearman_brown(rho: float, factor: float) -> float:
    """Reliability of a test lengthened (or shortened) by ``factor`` with parallel items.

    Notes
    -----
    :math:`\\rho^* = \\dfrac{m\\rho}{1 + (m-1)\\rho}`.

    References
    ----------
    Spearman, C. (1910). Correlation calculated from faulty data. British Journal of Psychology,
    3(3), 271-295.  Brown, W. (1910). Some experimental results in the correlation of mental
    abilities. British Journal of Psychology, 3(3), 296-322.

    Examples
    --------
    >>> round(spearman_brown(0.70, 2), 4)
    0.8235
    """
    if factor <= 0:
        raise InputError(f"The lengthening factor must be positive; got {factor}.", code="bad_factor",
                         details={"factor": factor})
    den = 1.0 + (factor - 1.0) * rho
    if den == 0:
        raise InputError(f"The Spearman-Brown formula is undefined for rho={rho} and factor={factor}.",
                         code="bad_reliability", details={"rho": rho, "factor": factor})
    return float(factor * rho / den)


def spearman_brown_factor(rho: float, target: float) -> float:
    """Factor by which a test with reliability ``rho`` must be lengthened to reach ``target``.

    Notes
    -----
    The Spearman-Brown formula solved for the factor:
    :math:`m = \\dfrac{\\rho^*(1-\\rho)}{\\rho(1-\\rho^*)}`.  Needs :math:`0 < \\rho < 1` and
    :math:`0 < \\rho^* < 1`.

    References
    ----------
    Spearman (1910); Brown (1910), see :func:`spearman_brown`.

    Examples
    --------
    >>> round(spearman_brown_factor(0.70, 0.90), 3)
    3.857
    """
    if not (0 < rho < 1 and 0 < target < 1):
        raise InputError("The Spearman-Brown projection needs a current and a target reliability strictly "
                         f"between 0 and 1; got {rho} and {target}.", code="bad_reliability",
                         details={"rho": rho, "target": target})
    return float(target * (1.0 - rho) / (rho * (1.0 - target)))


@dataclass(frozen=True)
class AlphaResult:
    """Cronbach's alpha with its Feldt interval."""

    alpha: float | None
    ci: tuple[float | None, float | None]
    ci_level: float
    n: int
    k: int
    missing: str

    def to_dict(self) -> dict:
        return {"alpha": _num(self.alpha), "ci": [_num(v) for v in self.ci], "ci_level": self.ci_level,
                "n": self.n, "k": self.k, "missing": self.missing}


def cronbach_alpha(responses: ArrayLike, *, missing: str = "pairwise", ci: float = 0.95) -> AlphaResult:
    """Cronbach's coefficient alpha of a respondents x items table.

    Parameters
    ----------
    responses : pandas.DataFrame or array_like, shape (n, k)
        Numeric answers (reverse-keyed items already reverse-scored), ``NaN`` for missing.
    missing : {"pairwise", "listwise"}
        ``"pairwise"``: each covariance from the respondents who answered both items (pandas'
        ``DataFrame.cov``); ``n`` is then the number of rows.  ``"listwise"``: rows with any missing
        answer are dropped first and ``n`` (for Feldt's interval) is the number of complete rows;
        pingouin 0.7 keeps the original row count there, so its listwise interval is narrower.
    ci : float
        Coverage of Feldt's interval.

    Returns
    -------
    AlphaResult

    Notes
    -----
    .. math::

        \\alpha = \\frac{k}{k-1}\\left(1 - \\frac{\\operatorname{tr} S}{\\mathbf 1' S \\mathbf 1}\\right)

    with :math:`S` the item covariance matrix; the same definition and interval as
    ``pingouin.cronbach_alpha`` and R's ``psych::alpha``.

    References
    ----------
    Cronbach, L. J. (1951). Coefficient alpha and the internal structure of tests.
    Psychometrika, 16(3), 297-334.
    Feldt, L. S. (1965), see :func:`feldt_ci`.
    """
    if missing not in ("pairwise", "listwise"):
        raise InputError(f"The missing-data policy must be 'pairwise' or 'listwise'; got {missing!r}.",
                         code="bad_missing", details={"missing": missing})
    df = responses if isinstance(responses, pd.DataFrame) else pd.DataFrame(np.asarray(responses, float))
    nonnum = [str(c) for c in df.columns if df[c].dtype.kind not in "biuf"]
    if nonnum:
        raise InputError(f"Column '{nonnum[0]}' is not numeric; alpha needs numeric answers.",
                         code="bad_column", details={"column": nonnum[0]})
    if missing == "listwise":
        df = df.dropna(axis=0, how="any")
    n, k = df.shape
    if k < 2:
        raise InputError(f"At least 2 items are needed for alpha; {k} given.", code="too_few_items",
                         details={"items": k})
    if n < 2:
        raise InputError(f"At least 2 respondents are needed for alpha; {n} left.",
                         code="too_few_respondents", details={"respondents": n})
    names = [str(c) for c in df.columns]
    S = _check_cov(df.cov().to_numpy(), names=names)
    a = _alpha(S)
    lo, hi = feldt_ci(a, k, n, ci) if math.isfinite(a) else (None, None)
    return AlphaResult(alpha=_num(a), ci=(lo, hi), ci_level=ci, n=int(n), k=int(k), missing=missing)


@dataclass(frozen=True)
class GuttmanLambdas:
    """Guttman's lower bounds lambda1, lambda2, lambda3 (= alpha) and lambda6."""

    lambda1: float | None
    lambda2: float | None
    lambda3: float | None
    lambda6: float | None
    warnings: list[Note] = field(default_factory=list)

    def to_dict(self) -> dict:
        return {"lambda1": _num(self.lambda1), "lambda2": _num(self.lambda2),
                "lambda3": _num(self.lambda3), "lambda6": _num(self.lambda6),
                "warnings": [w.to_dict() for w in self.warnings]}


def _lambda6(S: np.ndarray, total: float) -> tuple[float | None, Note | None]:
    R, sd = _cov_to_corr(S)
    try:
        chol = cholesky(R)
    except np.linalg.LinAlgError:
        chol = None
    if chol is None or float(np.min(np.diag(chol))) ** 2 < 1e-10:
        return None, note("lambda6_singular", "The item covariance matrix is singular (an item is a linear "
                          "combination of others) or not positive definite, so Guttman's lambda6 is not reported.")
    # residual variance of each item regressed on all the others: 1 / (S^-1)_jj = s_j^2 / (R^-1)_jj
    err = sd ** 2 / np.diag(inv(R))
    return 1.0 - err.sum() / total, None


def guttman_lambdas(cov: ArrayLike) -> GuttmanLambdas:
    """Guttman's (1945) lower bounds to reliability from an item covariance matrix.

    Parameters
    ----------
    cov : array_like, shape (k, k)
        Item covariance matrix (use a correlation matrix for the standardized versions).

    Returns
    -------
    GuttmanLambdas

    Notes
    -----
    With :math:`V = \\mathbf 1'S\\mathbf 1` the variance of the total score,

    .. math::

        \\lambda_1 = 1 - \\frac{\\operatorname{tr} S}{V}, \\quad
        \\lambda_2 = \\lambda_1 + \\frac{\\sqrt{\\tfrac{k}{k-1}\\sum_{i\\ne j}\\sigma_{ij}^2}}{V}, \\quad
        \\lambda_3 = \\frac{k}{k-1}\\lambda_1 = \\alpha, \\quad
        \\lambda_6 = 1 - \\frac{\\sum_j e_j^2}{V},

    where :math:`e_j^2 = 1/(S^{-1})_{jj}` is the residual variance of item :math:`j` regressed
    linearly on all the other items (Guttman's definition, in the covariance metric).  For a
    correlation matrix :math:`e_j^2 = 1 - \\mathrm{SMC}_j`, as in ``psych::alpha``'s "G6(smc)".

    References
    ----------
    Guttman, L. (1945). A basis for analyzing test-retest reliability. Psychometrika, 10(4),
    255-282.
    """
    S = _check_cov(cov)
    k = S.shape[0]
    total = S.sum()
    warnings: list[Note] = []
    if total <= 0:
        warnings.append(note("total_variance_not_positive",
                             "The total-score variance is not positive, so Guttman's lambdas are undefined."))
        return GuttmanLambdas(None, None, None, None, warnings)
    l1 = 1.0 - np.trace(S) / total
    off = S - np.diag(np.diag(S))
    l2 = l1 + math.sqrt(k / (k - 1) * float((off ** 2).sum())) / total
    l3 = k / (k - 1) * l1
    l6, msg = _lambda6(S, total)
    if msg:
        warnings.append(msg)
    return GuttmanLambdas(float(l1), float(l2), float(l3), None if l6 is None else float(l6), warnings)


# --------------------------------------------------------------------------------------------
# One-factor model and omega
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class OneFactorFit:
    """A one-factor minres (unweighted least squares) fit to a correlation matrix."""

    loadings: np.ndarray = field(compare=False)
    uniquenesses: np.ndarray = field(compare=False)
    converged: bool
    n_iter: int
    method: str  # "newton"; "fixed-point" where Newton declined; "lbfgsb" when that did not converge either
    heywood: tuple[int, ...] = ()

    def to_dict(self) -> dict:
        return {"loadings": [float(v) for v in self.loadings],
                "uniquenesses": [float(v) for v in self.uniquenesses],
                "converged": self.converged, "n_iter": self.n_iter, "method": self.method,
                "heywood": list(self.heywood)}


def _off_diagonal(R: np.ndarray) -> np.ndarray:
    Ro = R.copy()
    np.fill_diagonal(Ro, 0.0)
    return Ro


def _top_pair(S: np.ndarray) -> tuple[float, np.ndarray]:
    """The largest eigenvalue of a symmetric matrix and its eigenvector (only that pair: LAPACK dsyevr with an
    index range, a fraction of the whole decomposition's cost at 60 items and more)."""
    k = S.shape[0]
    if k <= 16:
        w, v = linalg.eigh(S, check_finite=False)
        return float(w[-1]), v[:, -1]
    w, v = linalg.eigh(S, subset_by_index=[k - 1, k - 1], driver="evr", check_finite=False)
    return float(w[0]), v[:, 0]


def _pc_start(R: np.ndarray) -> np.ndarray:
    w, v = _top_pair(R)
    lam = v * math.sqrt(max(w, 1e-12))
    return lam if lam.sum() >= 0 else -lam


def _coordinate_update(LR: np.ndarray, L: np.ndarray, pad: np.ndarray, mf: np.ndarray) -> np.ndarray:
    """Each loading's exact minimiser of the bounded minres objective with the others held fixed.

    For item :math:`i` with :math:`a = \\sum_{j\\ne i} l_j^2` and :math:`b = \\sum_{j\\ne i} r_{ij}l_j`
    the objective in :math:`x` is :math:`2\\sum_{j\\ne i}(r_{ij}-xl_j)^2 + \\max(0, x^2-h)^2`
    (:math:`h = 1 - 0.005`): convex, minimised at :math:`b/a` when :math:`(b/a)^2 \\le h`, otherwise at
    the root of :math:`x^3 + (a-h)x - b` between :math:`\\sqrt h` and :math:`b/a` (Newton from
    :math:`b/a`, monotone because the cubic is convex and increasing there).
    """
    sq = L * L
    a = sq.sum(axis=1, keepdims=True) - sq + pad
    b = LR
    U = mf * (b / a)
    over = U * U > _H
    if over.any():
        aa, bb = a[over], np.abs(b[over])
        x = np.abs(U[over])
        for _ in range(30):
            g = x * x * x + (aa - _H) * x - bb
            step = g / (3 * x * x + aa - _H)
            x = np.maximum(x - step, math.sqrt(_H))
            if np.abs(step).max() < 1e-13:
                break
        U[over] = np.sign(b[over]) * x
    return U


def _optimal_scale(U: np.ndarray, UR: np.ndarray) -> np.ndarray:
    """The common factor :math:`c` minimising the bounded minres objective along direction ``U``.

    With :math:`t = c^2`, the derivative :math:`-A + tB + \\sum_i u_i^2\\max(0, tu_i^2-h)` is increasing
    and piecewise linear (:math:`A = \\sum_{i\\ne j} r_{ij}u_iu_j`, :math:`B = \\sum_{i\\ne j}u_i^2u_j^2`);
    its root is found by re-solving the linear piece of the current bounded set.
    """
    u2 = U * U
    s2 = u2.sum(axis=1, keepdims=True)
    A = (UR * U).sum(axis=1, keepdims=True)
    u4 = u2 * u2
    B = s2 * s2 - u4.sum(axis=1, keepdims=True)
    t = A / B
    for _ in range(10):
        act = (t * u2 > _H)
        if not act.any():
            break
        t_new = (A + _H * (u2 * act).sum(axis=1, keepdims=True)) / (B + (u4 * act).sum(axis=1, keepdims=True))
        if np.allclose(t_new, t, rtol=1e-15, atol=0, equal_nan=True):
            t = t_new
            break
        t = t_new
    return np.sqrt(t)


def _objective(L: np.ndarray, LR: np.ndarray) -> np.ndarray:
    """The bounded minres objective of each row, less the constant :math:`\\sum_{i\\ne j}r_{ij}^2`."""
    sq = L * L
    s = sq.sum(axis=1)
    over = np.maximum(sq - _H, 0.0)
    return -2.0 * (LR * L).sum(axis=1) + s * s - (sq * sq).sum(axis=1) + (over * over).sum(axis=1)


def _sweep(L: np.ndarray, LR: np.ndarray, Ro: np.ndarray, pad: np.ndarray, mf: np.ndarray
           ) -> tuple[np.ndarray, np.ndarray]:
    """One rescaled coordinate sweep (the fixed-point map): the new loadings and their product with ``Ro``."""
    U = _coordinate_update(LR, L, pad, mf)
    UR = U @ Ro
    c = _optimal_scale(U, UR)
    return U * c, UR * c


def _fit_batch(Ro: np.ndarray, L0: np.ndarray, mask: np.ndarray, *, tol: float = _FIT_TOL,
               max_iter: int = _FIT_MAX_ITER) -> tuple[np.ndarray, np.ndarray, int]:
    """Minres one-factor fits of many item subsets at once (rescaled fixed point, SQUAREM-accelerated).

    Row ``b`` of ``mask`` selects the items of subset ``b``; ``L0`` holds starting loadings (zero
    outside the subset).  The objective is the bounded minres/ULS criterion of psych and
    factor_analyzer written in the loadings,
    :math:`\\sum_{i\\ne j}(r_{ij}-l_il_j)^2 + \\sum_i \\max(0, l_i^2 - h)^2` with :math:`h = 1 - 0.005`
    (the uniquenesses :math:`\\psi_i \\ge 0.005` minimised out; the second term is zero unless an item
    is a Heywood case).  The fixed-point map :math:`F` replaces every loading by its exact minimiser
    with the others held fixed (:func:`_coordinate_update`), followed by the optimal common rescaling
    (:func:`_optimal_scale`; without it the map oscillates in scale).  A fixed point is a stationary
    point of the objective (checked at the end), i.e. the minres solution.

    Plain sweeps contract slowly on multi-factor item sets (about 0.93 per sweep at 60 items, 0.98 and
    more at 250), so each iteration is one SQUAREM step (Varadhan & Roland 2008, scheme S3, per row):
    from :math:`x_1 = F(x_0)`, :math:`x_2 = F(x_1)`, :math:`r = x_1 - x_0`, :math:`v = x_2 - 2x_1 + x_0`,
    :math:`\\alpha = \\min(-1, -\\lVert r\\rVert/\\lVert v\\rVert)`, the next point is
    :math:`F(x_0 - 2\\alpha r + \\alpha^2 v)`, or :math:`x_2` when that does not lower the objective.
    The map is linear in nothing but its matrix product, which is carried along (three products per
    iteration, one per map).  A row stops when :math:`\\lVert F(x) - x\\rVert_\\infty` < ``tol``; converged
    rows drop out.

    Returns the loadings, a boolean vector of converged rows, and the map evaluations used.

    References
    ----------
    Varadhan, R., & Roland, C. (2008). Simple and globally convergent methods for accelerating the
    convergence of any EM algorithm. Scandinavian Journal of Statistics, 35(2), 335-353.
    """
    mf_all = mask.astype(float)
    L_all = np.where(mask, L0, 0.0)
    act = np.arange(L_all.shape[0])     # rows still iterating; converged rows drop out
    mf = mf_all
    pad = 1.0 - mf                      # keeps denominators of left-out items away from zero
    L = L_all.copy()
    LR = L @ Ro
    evals = 0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        while evals < max_iter:
            X1, R1 = _sweep(L, LR, Ro, pad, mf)
            evals += 1
            step = np.abs(X1 - L).max(axis=1)
            bad = ~np.isfinite(step)
            if bad.any():               # a degenerate row: stop it as it is, the caller falls back
                X1[bad], R1[bad] = L[bad], LR[bad]
                mf_all[act[bad]] = 0.0
                step[bad] = 0.0
            done = step < tol
            if done.any():              # converged rows keep F(x) and drop out
                L_all[act[done]] = X1[done]
                keep = ~done
                if not keep.any():
                    break
                act, L, LR, X1, R1 = act[keep], L[keep], LR[keep], X1[keep], R1[keep]
                mf = mf_all[act]
                pad = 1.0 - mf
            X2, R2 = _sweep(X1, R1, Ro, pad, mf)
            evals += 1
            r = X1 - L
            v = X2 - X1 - r
            nr = np.sqrt((r * r).sum(axis=1, keepdims=True))
            nv = np.sqrt((v * v).sum(axis=1, keepdims=True))
            alpha = np.where(nv > 0, -nr / nv, -1.0)
            alpha = np.minimum(alpha, -1.0)
            alpha = np.where(np.isfinite(alpha), alpha, -1.0)
            XE = L - 2 * alpha * r + alpha * alpha * v
            RE = LR - 2 * alpha * (R1 - LR) + alpha * alpha * (R2 - 2 * R1 + LR)
            X3, R3 = _sweep(XE, RE, Ro, pad, mf)
            evals += 1
            worse = ~(_objective(X3, R3) <= _objective(X2, R2))  # NaN counts as worse
            X3[worse], R3[worse] = X2[worse], R2[worse]
            L, LR = X3, R3
        else:
            L_all[act] = L
        L, mf = L_all, mf_all
        fixed = _coordinate_update(L @ Ro, L, 1.0 - mf, mf)
        resid = (mf * np.abs(fixed - L)).max(axis=1)
    converged = np.isfinite(resid) & (resid < 1e-6) & np.isfinite(L).all(axis=1) & (mf.sum(axis=1) > 0)
    return L, converged, evals


def _fit_bounded(R: np.ndarray, start: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray, bool, int]:
    """Minres over the uniquenesses with L-BFGS-B, uniquenesses bounded to [0.005, 1].

    Objective :math:`f(\\psi) = \\tfrac12\\sum_{m\\ge2}\\mu_m^2` with :math:`\\mu_m` the eigenvalues
    of :math:`R - \\Psi`; analytic gradient :math:`\\partial f/\\partial\\psi_i = l_i^2 - (1-\\psi_i)`.
    """
    k = R.shape[0]

    def fg(psi):
        S = R - np.diag(psi)
        w, v = linalg.eigh(S, check_finite=False)
        top = max(w[-1], 0.0)
        f = 0.5 * (float((S * S).sum()) - top * top)
        g = top * v[:, -1] ** 2 - (1.0 - psi)
        return f, g

    if start is None:
        try:
            smc = 1.0 - 1.0 / np.diag(inv(R))
        except np.linalg.LinAlgError:
            smc = np.full(k, 0.5)
        psi0 = 1.0 - smc
    else:
        psi0 = 1.0 - np.asarray(start) ** 2
    psi0 = np.clip(psi0, _PSI_MIN, 1.0)
    res = optimize.minimize(fg, psi0, jac=True, method="L-BFGS-B", bounds=[(_PSI_MIN, 1.0)] * k,
                            options={"maxiter": 2000, "ftol": 1e-14, "gtol": 1e-10})
    psi = res.x
    w, v = linalg.eigh(R - np.diag(psi), check_finite=False)
    lam = v[:, -1] * math.sqrt(max(w[-1], 0.0))
    if lam.sum() < 0:
        lam = -lam
    return lam, psi, bool(res.success), int(res.nit)


def _newton_loadings(R: np.ndarray, l0: np.ndarray, *, max_iter: int = 30) -> tuple[np.ndarray, int] | None:
    r"""The one-factor minres loadings by Newton's method over the loadings, or None where it declines.

    With :math:`s = l'l` and :math:`R_o` the matrix without its diagonal, a quarter of the gradient of
    :math:`\sum_{i\ne j}(r_{ij} - l_il_j)^2` is :math:`l\circ(s - l^2) - R_ol` and a quarter of its Hessian
    :math:`sI - 3\operatorname{diag}(l^2) + 2ll' - R_o`: a Cholesky solve per step (k^3/3 operations) where the
    step over the uniquenesses needs a whole eigendecomposition. Steps are halved until the criterion falls
    (Armijo). None, for the uniqueness-space solver to take over, when the Hessian is not positive definite,
    no step lowers the criterion, ``max_iter`` steps are not enough, or a communality comes near the bound of
    0.995 (there the bound, which this solver does not know, may be active). Converged, it is the same
    stationary point, a minimum (positive definite Hessian) inside the bounds.
    """
    k = R.shape[0]
    if k < 3 or not np.all(np.isfinite(l0)):
        return None
    Ro = _off_diagonal(R)
    x = np.array(l0, dtype=float)
    if x.sum() < 0:
        x = -x

    def crit(v: np.ndarray) -> float:
        E = Ro - np.outer(v, v)
        np.fill_diagonal(E, 0.0)
        return float(np.sum(E * E))

    f = crit(x)
    for it in range(max_iter + 1):
        sq = x * x
        s = float(sq.sum())
        g = x * (s - sq) - Ro @ x
        if float(np.max(np.abs(g))) < 1e-13 * max(1.0, s):
            break
        if it == max_iter:
            return None
        H = 2.0 * np.outer(x, x) - Ro
        H[np.diag_indices_from(H)] = s - sq  # s - 3 l_i^2 + 2 l_i^2
        try:
            c = linalg.cho_factor(H, check_finite=False)
        except linalg.LinAlgError:
            return None
        step = -linalg.cho_solve(c, g, check_finite=False)
        slope = 4.0 * float(g @ step)  # the criterion's gradient is four times g
        if not slope < 0.0:
            return None
        t = 1.0
        while True:
            new = x + t * step
            f2 = crit(new)
            if f2 <= f + 1e-4 * t * slope or f2 - f <= 1e-15 * max(1.0, f):
                break
            t *= 0.5
            if t < 1e-8:
                return None
        x, f = new, f2
        if float(np.max(np.abs(t * step))) < 1e-14:
            break
    if not np.all(np.isfinite(x)) or float(np.max(x * x)) >= _H - 1e-6:
        return None
    # a minimum: the Hessian at the solution is positive definite
    H = 2.0 * np.outer(x, x) - Ro
    sq = x * x
    H[np.diag_indices_from(H)] = sq.sum() - sq
    try:
        linalg.cho_factor(H, check_finite=False)
    except linalg.LinAlgError:
        return None
    return (x if x.sum() >= 0 else -x), it


def one_factor_loadings(corr: ArrayLike, start: ArrayLike | None = None) -> OneFactorFit:
    """Minres (unweighted least squares) loadings of a one-factor model for a correlation matrix.

    Parameters
    ----------
    corr : array_like, shape (k, k)
        Correlation matrix, ``k >= 3`` (with two items a one-factor model is not identified).
    start : array_like, shape (k,), optional
        Starting loadings (warm start, e.g. the solution for a superset of the items).  Default:
        the first principal component's loadings.

    Returns
    -------
    OneFactorFit
        Loadings (sign chosen so they sum to a positive number), uniquenesses ``1 - l**2`` (not
        clipped, as factor_analyzer reports them), convergence and the indices of Heywood items.

    Notes
    -----
    Minres minimises the sum of squared off-diagonal residuals
    :math:`\\sum_{i<j}(r_{ij} - l_i l_j)^2` (Harman & Jones 1966).  As in ``psych::fa(fm="minres")``
    and factor_analyzer, uniquenesses are bounded below by 0.005: an item whose communality would
    exceed 0.995 (a Heywood case) is held near that bound and listed in ``heywood``.  Solved over the
    uniquenesses by Newton's method with the exact Hessian (:func:`server.stats.minres.minres_newton`,
    two to five steps from a warm start); where that declines, by a rescaled fixed-point iteration over
    the loadings (see ``_fit_batch``), and if that does not converge, by L-BFGS-B with an analytic
    gradient.  As with any minres fit, items that share
    little variance can give the criterion several local minima; the default start (the first
    principal component) finds the usual solution whenever the items have a clear common factor.

    References
    ----------
    Harman, H. H., & Jones, W. H. (1966). Factor analysis by minimizing residuals (minres).
    Psychometrika, 31(3), 351-368.
    """
    R = _check_cov(corr, min_items=3, what="correlation matrix")
    k = R.shape[0]
    if not np.allclose(np.diag(R), 1.0, atol=1e-8):
        raise InputError("one_factor_loadings needs a correlation matrix (ones on the diagonal).",
                         code="bad_matrix")
    l0 = _pc_start(R) if start is None else np.asarray(start, dtype=float).reshape(-1)
    if l0.size != k:
        raise InputError(f"Expected {k} starting loadings, got {l0.size}.", code="bad_shape",
                         details={"start": int(l0.size), "items": k})
    if not np.all(np.isfinite(l0)) or np.abs(l0).sum() == 0:
        l0 = _pc_start(R)
    direct = _newton_loadings(R, l0)
    newton = None if direct is not None else minres_newton(R, 1, np.clip(1.0 - l0 ** 2, _PSI_MIN, 1.0),
                                                           lower=_PSI_MIN)
    if direct is not None:
        lam, it = direct
        method, conv = "newton", np.array([True])
    elif newton is not None:
        psi_n, _f, it = newton
        S = R.copy()
        np.fill_diagonal(S, 1.0 - psi_n)
        w, v = _top_pair(S)
        lam = v * math.sqrt(max(w, 0.0))
        method, conv = "newton", np.array([True])
    else:
        L, conv, it = _fit_batch(_off_diagonal(R), l0[None, :], np.ones((1, k), dtype=bool))
        lam = L[0]
        method = "fixed-point"
    if lam.sum() < 0:
        lam = -lam
    if not conv[0]:
        lam, _psi, ok, it = _fit_bounded(R, None)
        method = "lbfgsb"
        conv = np.array([ok])
    psi = 1.0 - lam ** 2  # not clipped: a Heywood item shows a uniqueness at or below 0.005
    heywood = tuple(int(i) for i in np.flatnonzero(lam ** 2 >= _H - 1e-9))
    return OneFactorFit(loadings=lam, uniquenesses=psi, converged=bool(conv[0]), n_iter=int(it),
                        method=method, heywood=heywood)


@dataclass(frozen=True)
class OmegaResult:
    """McDonald's omega total from a one-factor model."""

    omega_total: float | None
    loadings: tuple[float, ...]            # covariance metric
    standardized_loadings: tuple[float, ...]
    converged: bool
    warnings: list[Note] = field(default_factory=list)

    def to_dict(self) -> dict:
        return {"omega_total": _num(self.omega_total), "loadings": [float(v) for v in self.loadings],
                "standardized_loadings": [float(v) for v in self.standardized_loadings],
                "converged": self.converged, "warnings": [w.to_dict() for w in self.warnings]}


def _omega_from_fit(S: np.ndarray, fit: OneFactorFit, names=None) -> OmegaResult:
    sd = np.sqrt(np.diag(S))
    lam = fit.loadings * sd
    total = float(S.sum())
    omega = float(lam.sum() ** 2 / total) if total > 0 else float("nan")
    warnings: list[Note] = []
    label = [str(names[j]) if names is not None else str(j + 1) for j in range(len(lam))]
    if not fit.converged:
        warnings.append(note("omega_not_converged",
                             "The one-factor model behind omega did not converge; omega is approximate."))
    for j in fit.heywood:
        warnings.append(note("omega_heywood", f"Item {_item_label(j, names)} is a Heywood case in the one-factor "
                             f"model (communality {fit.loadings[j] ** 2:.3f}, at or above the 0.995 bound); omega "
                             "rests on a boundary solution and may be overstated.", [label[j]]))
    neg = [j for j in range(len(lam)) if fit.loadings[j] < 0]
    if neg:
        which = ", ".join(_item_label(j, names) for j in neg)
        warnings.append(note("negative_loading", f"Item(s) {which} load negatively on the common factor; if they "
                             "are reverse-keyed, declare them so they are reverse-scored.", [label[j] for j in neg]))
    return OmegaResult(omega_total=omega, loadings=tuple(float(v) for v in lam),
                       standardized_loadings=tuple(float(v) for v in fit.loadings),
                       converged=fit.converged, warnings=warnings)


def mcdonald_omega(cov: ArrayLike, *, start: ArrayLike | None = None,
                   names: Sequence[str] | None = None) -> OmegaResult:
    """McDonald's omega total from a one-factor minres model.

    Parameters
    ----------
    cov : array_like, shape (k, k)
        Item covariance matrix, ``k >= 3``.
    start : array_like, optional
        Starting standardized loadings for the one-factor fit (warm start).
    names : sequence of str, optional
        Item names, used in warnings.

    Returns
    -------
    OmegaResult

    Notes
    -----
    The one-factor model is fitted by minres to the correlation matrix
    (:func:`one_factor_loadings`) and its loadings are rescaled to the covariance metric,
    :math:`\\lambda_i = l_i s_i`.  Omega total is the share of the observed total-score variance
    due to the common factor,

    .. math::

        \\omega_t = \\frac{(\\sum_i \\lambda_i)^2}{\\mathbf 1' S \\mathbf 1}.

    Under tau-equivalence (equal :math:`\\lambda_i`) and a population covariance matrix this
    equals coefficient alpha.  Fitting on the correlation matrix makes omega independent of the
    items' units, and for a one-factor covariance structure the rescaled loadings are exactly the
    covariance-metric loadings.

    References
    ----------
    McDonald, R. P. (1999). Test theory: A unified treatment. Mahwah, NJ: Erlbaum (ch. 6).
    Revelle, W., & Zinbarg, R. E. (2009). Coefficients alpha, beta, omega, and the glb.
    Psychometrika, 74(1), 145-154.
    """
    S = _check_cov(cov, names=names, min_items=3)
    R, _sd = _cov_to_corr(S)
    return _omega_from_fit(S, one_factor_loadings(R, start=start), names)


# --------------------------------------------------------------------------------------------
# The whole reliability block from a covariance matrix
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class ReliabilityResult:
    """Every internal-consistency statistic of one set of items (see ``reliability_from_cov``)."""

    k: int
    n: int
    n_complete: int
    min_pair_n: int | None
    missing: str | None
    alpha: float | None
    alpha_ci: tuple[float | None, float | None]
    ci_level: float
    alpha_standardized: float | None
    omega_total: float | None
    lambda2: float | None
    lambda6: float | None
    split_half: float | None
    mean_inter_item_r: float | None
    inter_item_r_range: tuple[float | None, float | None]
    scale_mean: float | None
    scale_sd: float | None
    sem: float | None
    items_for_80: int | None
    items_for_90: int | None
    loadings: tuple[float, ...] = field(default=(), compare=False)  # standardized one-factor loadings
    warnings: list[Note] = field(default_factory=list)

    def to_dict(self) -> dict:
        return {
            "k": self.k, "n": self.n, "n_complete": self.n_complete, "min_pair_n": self.min_pair_n,
            "missing": self.missing, "alpha": _num(self.alpha),
            "alpha_ci": [_num(v) for v in self.alpha_ci], "ci_level": self.ci_level,
            "alpha_standardized": _num(self.alpha_standardized), "omega_total": _num(self.omega_total),
            "lambda2": _num(self.lambda2), "lambda6": _num(self.lambda6),
            "split_half": _num(self.split_half), "mean_inter_item_r": _num(self.mean_inter_item_r),
            "inter_item_r_range": [_num(v) for v in self.inter_item_r_range],
            "scale_mean": _num(self.scale_mean), "scale_sd": _num(self.scale_sd), "sem": _num(self.sem),
            "items_for_80": self.items_for_80, "items_for_90": self.items_for_90,
            "loadings": [float(v) for v in self.loadings], "warnings": [w.to_dict() for w in self.warnings],
        }


def _items_needed(alpha: float, k: int, target: float) -> int | None:
    if not (math.isfinite(alpha) and 0 < alpha < 1):
        return None
    m = spearman_brown_factor(alpha, target) * k
    return math.ceil(m - 1e-9)


def split_half_odd_even(S: np.ndarray) -> tuple[float, float]:
    """Odd-even split-half reliability from a covariance matrix, Spearman-Brown corrected.

    The halves are the 1st, 3rd, 5th... and the 2nd, 4th, 6th... items in the given order; returns
    ``(r between half scores, 2r/(1+r))``.
    """
    k = S.shape[0]
    a = np.zeros(k)
    a[0::2] = 1.0
    b = 1.0 - a
    va, vb, cab = a @ S @ a, b @ S @ b, a @ S @ b
    if not va * vb > 0:
        return float("nan"), float("nan")
    r = cab / math.sqrt(va * vb)
    return float(r), float(2 * r / (1 + r)) if r > -1 else float("nan")


def reliability_from_cov(cov: ArrayLike, *, n: int, n_complete: int, means: ArrayLike | None = None, ci: float = 0.95,
                         min_pair_n: int | None = None, names: Sequence[str] | None = None,
                         missing: str | None = "pairwise",
                         start: ArrayLike | None = None) -> ReliabilityResult:
    """All internal-consistency statistics of a set of items from their covariance matrix.

    Parameters
    ----------
    cov : array_like, shape (k, k)
        Item covariance matrix (reverse-keyed items already reverse-scored), typically a submatrix
        of the cached full-pool matrix.
    n : int
        Respondents the covariances rest on (all rows under pairwise deletion, complete rows under
        listwise deletion); used for Feldt's interval, as pingouin and psych do.
    n_complete : int
        Respondents who answered every one of these items (reported).
    means : array_like, shape (k,), optional
        Item means; ``scale_mean`` is their sum (None without them).
    ci : float
        Coverage of Feldt's interval for alpha.
    min_pair_n : int, optional
        Smallest number of respondents behind any covariance (reported; a warning when it is under
        half of ``n``).
    names : sequence of str, optional
        Item names for warnings.
    missing : str, optional
        The missing-data policy used, echoed in the result.
    start : array_like, optional
        Starting standardized loadings for omega's one-factor fit (e.g. the previous solution).

    Returns
    -------
    ReliabilityResult
        ``alpha``, ``alpha_ci`` (Feldt), ``alpha_standardized``, ``omega_total``, ``lambda2``,
        ``lambda6``, ``split_half``, ``mean_inter_item_r``, ``inter_item_r_range``, ``scale_mean``,
        ``scale_sd``, ``sem``, ``n_complete``, ``min_pair_n``, ``items_for_80``/``items_for_90``,
        the standardized one-factor ``loadings``, and ``warnings``.

    Notes
    -----
    * alpha :math:`= \\frac{k}{k-1}(1 - \\operatorname{tr}S/\\mathbf 1'S\\mathbf 1)` (Cronbach 1951);
      Feldt (1965) interval, see :func:`feldt_ci`.
    * Standardized alpha :math:`= k\\bar r/(1 + (k-1)\\bar r)` with :math:`\\bar r` the mean
      off-diagonal correlation of :math:`D^{-1/2}SD^{-1/2}`.
    * omega total: :func:`mcdonald_omega` (needs 3 items; None with 2).
    * lambda2 and lambda6: :func:`guttman_lambdas` (covariance metric).
    * Split half: odd-even halves (1st, 3rd, ... vs 2nd, 4th, ... item in the given order), their
      correlation stepped up by Spearman-Brown :math:`2r/(1+r)`.
    * Scale SD :math:`=\\sqrt{\\mathbf 1'S\\mathbf 1}`; SEM = scale SD :math:`\\sqrt{1-\\alpha}`.
    * Items for .80/.90: :math:`\\lceil k\\, m\\rceil` with :math:`m` from
      :func:`spearman_brown_factor`, assuming added items like the present ones.

    References
    ----------
    Cronbach (1951); Feldt (1965); Guttman (1945); McDonald (1999); Spearman (1910); Brown (1910).
    See the functions named above.
    """
    names, S = _checked(cov, names, n)
    k = S.shape[0]
    warnings: list[Note] = []
    total = float(S.sum())
    R, _sd = _cov_to_corr(S)
    iu = np.triu_indices(k, 1)
    rs = R[iu]
    rbar = float(rs.mean())
    if np.any(np.abs(rs) > 1 + 1e-9):
        warnings.append(note("pairwise_inconsistent", "Some pairwise correlations exceed 1 in absolute value: the "
                             "pairwise-complete covariances are inconsistent (much missing data); consider "
                             "listwise deletion."))

    alpha = _alpha(S)
    avg_cov = float(S[iu].mean())
    if avg_cov < 0:
        warnings.append(note("negative_average_covariance", f"The average inter-item covariance is negative "
                             f"({avg_cov:.3g}), so alpha is negative and meaningless; check whether reverse-keyed "
                             "items have been reverse-scored."))
    lo: float | None
    hi: float | None
    sem: float | None
    if math.isfinite(alpha):
        lo, hi = feldt_ci(alpha, k, n, ci)
        sem = math.sqrt(total) * math.sqrt(1 - alpha) if alpha <= 1 else None
    else:
        warnings.append(note("total_variance_not_positive",
                             "The total-score variance is not positive, so alpha is undefined."))
        lo = hi = sem = None

    alpha_std = k * rbar / (1 + (k - 1) * rbar) if 1 + (k - 1) * rbar != 0 else float("nan")
    lam = guttman_lambdas(S) if total > 0 else GuttmanLambdas(None, None, None, None, [])
    warnings.extend(lam.warnings)

    if k >= 3:
        if start is not None and np.size(start) != k:
            start = None  # loadings of another item set: start afresh
        om = _omega_from_fit(S, one_factor_loadings(R, start=start), names)
        omega, loadings = om.omega_total, om.standardized_loadings
        warnings.extend(om.warnings)
    else:
        omega, loadings = None, ()
        warnings.append(note("omega_too_few_items",
                             "Omega needs at least 3 items (a one-factor model of 2 items is not identified)."))

    _r, sh = split_half_odd_even(S) if total > 0 else (None, None)

    scale_mean = None
    if means is not None:
        mu = np.asarray(means, dtype=float).reshape(-1)
        if mu.size != k:
            raise InputError(f"Expected {k} item means, got {mu.size}.", code="bad_shape",
                             details={"means": int(mu.size), "items": k})
        scale_mean = float(mu.sum())

    if min_pair_n is not None and min_pair_n < 0.5 * n:
        warnings.append(note("few_pairwise", f"Some item pairs were answered together by only {min_pair_n} of {n} "
                             "respondents; their pairwise covariances rest on few cases."))

    return ReliabilityResult(
        k=int(k), n=int(n), n_complete=int(n_complete),
        min_pair_n=None if min_pair_n is None else int(min_pair_n), missing=missing,
        alpha=_num(alpha), alpha_ci=(_num(lo), _num(hi)), ci_level=float(ci),
        alpha_standardized=_num(alpha_std), omega_total=_num(omega),
        lambda2=_num(lam.lambda2), lambda6=_num(lam.lambda6), split_half=_num(sh),
        mean_inter_item_r=_num(rbar), inter_item_r_range=(_num(rs.min()), _num(rs.max())),
        scale_mean=_num(scale_mean), scale_sd=_num(math.sqrt(total)) if total > 0 else None,
        sem=_num(sem), items_for_80=_items_needed(alpha, k, 0.80), items_for_90=_items_needed(alpha, k, 0.90),
        loadings=tuple(float(v) for v in loadings), warnings=warnings,
    )


def _checked(cov: ArrayLike, names: Sequence[str] | None, n: int) -> tuple[list[str] | None, np.ndarray]:
    """The names as strings and the checked covariance matrix; InputError with fewer than 2 respondents."""
    names = None if names is None else [str(s) for s in names]
    S = _check_cov(cov, names=names)
    if n < 2:
        raise InputError(f"At least 2 respondents are needed; got {n}.", code="too_few_respondents",
                         details={"respondents": n})
    return names, S


def alpha_omega(cov: ArrayLike, *, n: int, names: Sequence[str] | None = None,
                start: ArrayLike | None = None, omega: bool = True) -> tuple[float | None, float | None]:
    """Alpha and omega total exactly as :func:`reliability_from_cov` computes them (same checks, same
    errors), without the rest of its result: what a bootstrap resample reads. Omega is None with 2 items
    or when ``omega`` is False (not wanted: its one-factor fit is skipped).
    """
    names, S = _checked(cov, names, n)
    k = S.shape[0]
    alpha = _alpha(S)
    if k < 3 or not omega:
        return _num(alpha), None
    if start is not None and np.size(start) != k:
        start = None  # loadings of another item set: start afresh
    R, _sd = _cov_to_corr(S)
    return _num(alpha), _num(_omega_from_fit(S, one_factor_loadings(R, start=start), names).omega_total)


# --------------------------------------------------------------------------------------------
# Ordinal coefficients (from a polychoric matrix)
# --------------------------------------------------------------------------------------------

_ORDINAL_NOTE = ("computed from polychoric correlations, so it describes the continuous latent responses "
                 "behind the categories, not the observed sum score")


def _check_polychoric(R, names) -> np.ndarray:
    A = _check_cov(R, names=names, what="polychoric matrix")
    if not np.allclose(np.diag(A), 1.0, atol=1e-8) or np.abs(A).max() > 1 + 1e-8:
        raise InputError("An ordinal coefficient needs a polychoric correlation matrix (ones on the diagonal, "
                         "entries in [-1, 1]).", code="bad_matrix")
    return A


@dataclass(frozen=True)
class OrdinalAlphaResult:
    """Ordinal alpha: the standardized alpha formula applied to a polychoric matrix."""

    alpha: float | None
    k: int
    mean_r: float
    note: str = _ORDINAL_NOTE
    warnings: tuple[Note, ...] = ()

    def to_dict(self) -> dict:
        return {"alpha": _num(self.alpha), "k": self.k, "mean_r": _num(self.mean_r), "note": self.note,
                "warnings": [w.to_dict() for w in self.warnings]}


def ordinal_alpha(polychoric_matrix: ArrayLike, *, names: Sequence[str] | None = None) -> OrdinalAlphaResult:
    """Ordinal alpha of Zumbo, Gadermann & Zeisser (2007) from a polychoric correlation matrix.

    Parameters
    ----------
    polychoric_matrix : array_like, shape (k, k)
        Polychoric (tetrachoric) correlations of the items, reverse-keyed items already reversed.
    names : sequence of str, optional
        Item names, used in error messages.

    Returns
    -------
    OrdinalAlphaResult

    Notes
    -----
    The standardized alpha formula on the polychoric matrix :math:`R_p` with mean off-diagonal
    correlation :math:`\\bar r`,

    .. math::

        \\alpha_{ord} = \\frac{k}{k-1}\\Bigl(1 - \\frac{k}{\\mathbf 1'R_p\\mathbf 1}\\Bigr)
        = \\frac{k\\bar r}{1 + (k-1)\\bar r}.

    It is the reliability of the sum of the latent continuous responses, not of the observed sum score.

    References
    ----------
    Zumbo, B. D., Gadermann, A. M., & Zeisser, C. (2007). Ordinal versions of coefficients alpha and
    theta for Likert rating scales. Journal of Modern Applied Statistical Methods, 6(1), 21-29.
    Gadermann, A. M., Guhn, M., & Zumbo, B. D. (2012). Estimating ordinal reliability for Likert-type
    and ordinal item response data. Practical Assessment, Research & Evaluation, 17(3).
    """
    A = _check_polychoric(polychoric_matrix, names)
    k = A.shape[0]
    rbar = float(A[np.triu_indices(k, 1)].mean())
    den = 1.0 + (k - 1) * rbar
    warnings = []
    if rbar < 0:
        warnings.append(note("negative_average_correlation", f"The mean polychoric correlation is negative "
                             f"({rbar:.3f}), so ordinal alpha is meaningless; check whether reverse-keyed items "
                             "have been reversed."))
    alpha = k * rbar / den if den > 0 else None
    return OrdinalAlphaResult(alpha=_num(alpha), k=int(k), mean_r=rbar, warnings=tuple(warnings))


@dataclass(frozen=True)
class OrdinalOmegaResult:
    """Ordinal omega: the one-factor omega of a polychoric matrix."""

    omega: float | None
    loadings: tuple[float, ...]
    converged: bool
    note: str = _ORDINAL_NOTE
    warnings: tuple[Note, ...] = ()

    def to_dict(self) -> dict:
        return {"omega": _num(self.omega), "loadings": [float(v) for v in self.loadings],
                "converged": self.converged, "note": self.note, "warnings": [w.to_dict() for w in self.warnings]}


def ordinal_omega(polychoric_matrix: ArrayLike, *, start: ArrayLike | None = None,
                  names: Sequence[str] | None = None) -> OrdinalOmegaResult:
    """Ordinal omega (Zumbo, Gadermann & Zeisser 2007): McDonald's omega of a polychoric matrix.

    Parameters
    ----------
    polychoric_matrix : array_like, shape (k, k)
        Polychoric correlations, ``k >= 3``.
    start : array_like, optional
        Starting loadings for the one-factor fit.
    names : sequence of str, optional
        Item names for warnings.

    Returns
    -------
    OrdinalOmegaResult

    Notes
    -----
    :func:`mcdonald_omega` applied to the polychoric matrix: a one-factor minres fit and
    :math:`\\omega = (\\sum_i l_i)^2 / \\mathbf 1'R_p\\mathbf 1`. Like ordinal alpha it describes the latent
    responses, not the observed sum.

    References
    ----------
    Zumbo, Gadermann & Zeisser (2007), see :func:`ordinal_alpha`.
    McDonald, R. P. (1999). Test theory: A unified treatment. Mahwah, NJ: Erlbaum.
    """
    A = _check_polychoric(polychoric_matrix, names)
    om = mcdonald_omega(A, start=start, names=names)
    return OrdinalOmegaResult(omega=om.omega_total, loadings=om.standardized_loadings, converged=om.converged,
                              warnings=tuple(om.warnings))
