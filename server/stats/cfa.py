"""Confirmatory factor analysis: correlated factors, simple or given structure, maximum likelihood.

The model is ``Sigma = Lambda Phi Lambda' + Theta`` with ``Theta`` diagonal, fitted to the covariance
(or correlation) matrix ``S`` of the observed items by minimising

    F_ML = log|Sigma| + tr(S Sigma^-1) - log|S| - p

with L-BFGS-B on the free loadings, the factor correlations (kept in [-1, 1]) and the uniquenesses
(kept >= 0; a uniqueness at 0 is reported as a Heywood case), using
the analytic gradient ``dF/dSigma = G = W - W S W`` with ``W = Sigma^-1``:
``dF/dLambda = 2 G Lambda Phi``, ``dF/dphi_kl = 2 (Lambda' G Lambda)_kl`` (k != l),
``dF/dtheta_i = G_ii`` (Joreskog 1969; Bollen 1989, ch. 4 and 7).

Every free parameter changes ``Sigma`` by a symmetric rank-two matrix ``dSigma_f = u_f v_f' + v_f u_f'``
(a loading lambda_ik: ``u = e_i``, ``v = (Lambda Phi)_k``; a factor covariance phi_kl: ``u = Lambda_k``,
``v = Lambda_l``; a variance: half of that; a uniqueness theta_i: ``u = e_i``, ``v = e_i / 2``). The
expected second derivative of F_ML is ``H_fg = tr(W dSigma_f W dSigma_g)``, which for rank-two terms
is ``2 [(V'WU)' o (U'WV) + (V'WV) o (U'WU)]`` (o: elementwise product), so standard errors and
modification indices need no p² x p² matrix.

References
----------
Joreskog, K. G. (1969). A general approach to confirmatory maximum likelihood factor analysis.
    Psychometrika, 34, 183-202.
Bollen, K. A. (1989). Structural Equations with Latent Variables. Wiley.
Bentler, P. M. (1990). Comparative fit indexes in structural models. Psychological Bulletin, 107,
    238-246.
Tucker, L. R., & Lewis, C. (1973). A reliability coefficient for maximum likelihood factor analysis.
    Psychometrika, 38, 1-10.
Steiger, J. H. (1990). Structural model evaluation and modification: an interval estimation approach.
    Multivariate Behavioral Research, 25, 173-180.
Sorbom, D. (1989). Model modification. Psychometrika, 54, 371-384.
Saris, W. E., Satorra, A., & Sorbom, D. (1987). The detection and correction of specification errors
    in structural equation models. Sociological Methodology, 17, 105-129.
Hu, L., & Bentler, P. M. (1999). Cutoff criteria for fit indexes in covariance structure analysis.
    Structural Equation Modeling, 6, 1-55.
Rosseel, Y. (2012). lavaan: An R package for structural equation modeling. Journal of Statistical
    Software, 48(2), 1-36.
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import optimize, special, stats

from .efa import rmsea_interval
from .errors import InputError
from .notes import Note, note

__all__ = ["CUTOFFS", "CFAResult", "confirmatory_factor_analysis"]

#: conventional cut-offs for good fit (Hu & Bentler 1999), shown as conventions, not verdicts
CUTOFFS = {
    "cfi": (">=", 0.95, "Hu & Bentler (1999)"),
    "tli": (">=", 0.95, "Hu & Bentler (1999)"),
    "rmsea": ("<=", 0.06, "Hu & Bentler (1999)"),
    "srmr": ("<=", 0.08, "Hu & Bentler (1999)"),
}
IDENTIFICATIONS = ("std_lv", "marker")
LIKELIHOODS = ("wishart", "normal")
_HEYWOOD_TOL = 1e-6  # a uniqueness within this of 0 (on the correlation scale) is at its bound


@dataclass(frozen=True)
class CFAResult:
    """A fitted confirmatory factor model.

    Attributes
    ----------
    names : tuple of str
        The observed items in the model, in the order of ``S``.
    factors : tuple of str
    fitted : bool
        False when the model was not fitted (not identified, singular ``S``); ``warnings`` say why and
        every estimate below is None.
    identification : {"std_lv", "marker"}
        Factor variances fixed at 1, or each factor's first item's loading fixed at 1.
    likelihood : {"wishart", "normal"}
        Which multiplier of ``F_min`` gives the chi-square: ``n - 1`` (Wishart) or ``n`` (normal, lavaan).
    n, n_used : int
        Respondents, and the multiplier of ``F_min`` that was used.
    fit : dict
        ``chisq, df, p, cfi, tli, rmsea, rmsea_ci, srmr, aic, bic, fmin, n_parameters`` and
        ``baseline: {chisq, df, p}`` (the independence model); None where undefined (see warnings).
    loadings, loadings_se : ndarray (p x m)
        Loadings in the chosen identification, and their standard errors (0 where fixed).
    standardized_loadings, standardized_loadings_se : ndarray (p x m)
        Loadings with factor and item variances 1 (``lambda sqrt(phi_kk) / sqrt(sigma_ii)``).
    factor_covariances : ndarray (m x m)
        ``Phi`` in the chosen identification (the correlations when ``std_lv``).
    factor_correlations, factor_correlations_se : ndarray (m x m)
    uniquenesses, uniquenesses_se : ndarray (p,)
        Residual variances ``theta_i``.
    standardized_uniquenesses : ndarray (p,)
        ``theta_i / sigma_ii``.
    residual_correlations : ndarray (p x p)
        Observed minus model-implied correlation.
    largest_residuals : tuple of dict
        The largest ``|r - r_hat|`` pairs: ``{items, observed, implied, residual}``.
    modification_indices : tuple of dict
        Largest first: ``{kind ("loading" or "residual_covariance"), factor, item | items, mi, epc,
        sepc_all}``.
    parameters : tuple of dict
        Every parameter as ``{lhs, op, rhs, est, se, z, p, std, std_se, free}`` (lavaan's table).
    converged : bool
    iterations : int
    heywood : tuple of str
        Items whose uniqueness is at its bound of 0.
    warnings : tuple of Note
    """

    names: tuple[str, ...]
    factors: tuple[str, ...]
    fitted: bool
    identification: str
    likelihood: str
    n: int
    n_used: int
    fit: dict
    loadings: np.ndarray | None = None
    loadings_se: np.ndarray | None = None
    standardized_loadings: np.ndarray | None = None
    standardized_loadings_se: np.ndarray | None = None
    factor_covariances: np.ndarray | None = None
    factor_correlations: np.ndarray | None = None
    factor_correlations_se: np.ndarray | None = None
    uniquenesses: np.ndarray | None = None
    uniquenesses_se: np.ndarray | None = None
    standardized_uniquenesses: np.ndarray | None = None
    residual_correlations: np.ndarray | None = None
    largest_residuals: tuple = ()
    modification_indices: tuple = ()
    parameters: tuple = ()
    converged: bool = False
    iterations: int = 0
    heywood: tuple[str, ...] = ()
    warnings: tuple[Note, ...] = ()


# --------------------------------------------------------------------------- the model

class _Model:
    """Free parameters of Lambda, Phi and Theta as one vector, with Sigma and its derivatives."""

    def __init__(self, pattern: np.ndarray, fixed_loadings: np.ndarray, free_variances: bool):
        self.p, self.m = pattern.shape
        self.pattern = pattern                      # bool, free loadings
        self.fixed = fixed_loadings                 # values of the fixed loadings (0 or a marker's 1)
        self.free_variances = free_variances        # marker method: factor variances are free
        self.lam_idx = np.argwhere(pattern)         # (i, k) rows, item-major
        m = self.m
        self.phi_idx = [(k, k2) for k in range(m) for k2 in range(k, m) if k != k2 or free_variances]
        self.nl, self.nphi = len(self.lam_idx), len(self.phi_idx)
        self.q = self.nl + self.nphi + self.p

    def unpack(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        L = self.fixed.copy()
        L[self.lam_idx[:, 0], self.lam_idx[:, 1]] = x[: self.nl]
        Phi = np.eye(self.m)
        for v, (k, k2) in zip(x[self.nl: self.nl + self.nphi], self.phi_idx):
            Phi[k, k2] = Phi[k2, k] = v
        theta = x[self.nl + self.nphi:]
        return L, Phi, theta

    def pack(self, L: np.ndarray, Phi: np.ndarray, theta: np.ndarray) -> np.ndarray:
        return np.concatenate([L[self.lam_idx[:, 0], self.lam_idx[:, 1]],
                               [Phi[k, k2] for k, k2 in self.phi_idx], theta])

    @staticmethod
    def sigma(L, Phi, theta) -> np.ndarray:
        return L @ Phi @ L.T + np.diag(theta)

    def objective(self, x: np.ndarray, S: np.ndarray, logdet_s: float) -> tuple[float, np.ndarray]:
        """``F_ML`` and its analytic gradient."""
        L, Phi, theta = self.unpack(x)
        Sig = self.sigma(L, Phi, theta)
        try:
            C = np.linalg.cholesky(Sig)
        except np.linalg.LinAlgError:
            return 1e10, np.zeros_like(x)   # outside the model's domain: the line search steps back
        Ci = np.linalg.inv(C)
        W = Ci.T @ Ci
        logdet = 2.0 * np.sum(np.log(np.diag(C)))
        WS = W @ S
        F = logdet + np.trace(WS) - logdet_s - self.p
        G = W - WS @ W
        G = (G + G.T) / 2
        gL = 2.0 * G @ L @ Phi
        LGL = L.T @ G @ L
        gphi = [(LGL[k, k2] if k == k2 else 2.0 * LGL[k, k2]) for k, k2 in self.phi_idx]
        g = np.concatenate([gL[self.lam_idx[:, 0], self.lam_idx[:, 1]], gphi, np.diag(G)])
        return float(F), g

    def uv(self, L: np.ndarray, Phi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """U, V (p x q) with ``dSigma/dx_f = u_f v_f' + v_f u_f'``."""
        p = self.p
        U = np.zeros((p, self.q))
        V = np.zeros((p, self.q))
        LP = L @ Phi
        for f, (i, k) in enumerate(self.lam_idx):
            U[i, f] = 1.0
            V[:, f] = LP[:, k]
        for j, (k, k2) in enumerate(self.phi_idx):
            f = self.nl + j
            U[:, f] = L[:, k]
            V[:, f] = L[:, k2] if k != k2 else L[:, k] / 2
        for i in range(p):
            f = self.nl + self.nphi + i
            U[i, f] = 1.0
            V[i, f] = 0.5
        return U, V


def _info(W, U1, V1, U2, V2) -> np.ndarray:
    """``tr(W dSigma_f W dSigma_g)`` for rank-two ``dSigma`` given by (U1, V1) and (U2, V2)."""
    WU2, WV2 = W @ U2, W @ V2
    return 2.0 * ((V1.T @ WU2) * (U1.T @ WV2) + (V1.T @ WV2) * (U1.T @ WU2))


def _info_diag(W, U, V) -> np.ndarray:
    WU, WV = W @ U, W @ V
    vwu = np.sum(V * WU, axis=0)
    return 2.0 * (vwu ** 2 + np.sum(V * WV, axis=0) * np.sum(U * WU, axis=0))


def _check_inputs(S, structure, n, names) -> tuple[np.ndarray, list[str], dict[str, list[int]]]:
    S = np.asarray(S, dtype=float)
    if S.ndim != 2 or S.shape[0] != S.shape[1] or S.shape[0] < 2:
        raise InputError(f"The matrix must be square with at least 2 items; got shape {S.shape}.",
                         code="bad_matrix", details={"shape": list(S.shape)})
    if not np.all(np.isfinite(S)):
        raise InputError("The matrix contains missing or infinite values.", code="bad_matrix")
    if not np.allclose(S, S.T, atol=1e-8 * max(1.0, float(np.max(np.abs(S))))):
        raise InputError("The matrix is not symmetric.", code="bad_matrix")
    k = S.shape[0]
    nm = [f"item{i + 1}" for i in range(k)] if names is None else [str(x) for x in names]
    if len(nm) != k:
        raise InputError(f"{len(nm)} names were given for a {k} x {k} matrix.", code="bad_names",
                         details={"names": len(nm), "items": k})
    if len(set(nm)) != k:
        dup = sorted({x for x in nm if nm.count(x) > 1})
        raise InputError(f"Item names must be unique; repeated: {', '.join(dup)}.", code="bad_names",
                         details={"repeated": dup})
    bad = [nm[i] for i in range(k) if not S[i, i] > 0]
    if bad:
        raise InputError(f"Item '{bad[0]}' has no variance; it cannot enter a factor model.",
                         code="no_variance", details={"items": bad})
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 2:
        raise InputError(f"The number of respondents must be an integer of at least 2; got {n!r}.",
                         code="bad_n", details={"n": repr(n)})
    if not isinstance(structure, Mapping) or not structure:
        raise InputError("The structure must map each factor to its items, e.g. {'F1': ['q1', 'q2', 'q3']}.",
                         code="bad_structure")
    index = {x: i for i, x in enumerate(nm)}
    struct: dict[str, list[int]] = {}
    for fac, items in structure.items():
        if isinstance(items, str) or not isinstance(items, Sequence):
            raise InputError(f"Factor '{fac}' must list its items; got {items!r}.", code="bad_structure",
                             details={"factor": str(fac)})
        unknown = [str(x) for x in items if str(x) not in index]
        if unknown:
            raise InputError(f"Factor '{fac}' names item '{unknown[0]}', which is not among the items.",
                             code="unknown_item", details={"factor": str(fac), "items": unknown})
        idx = [index[str(x)] for x in items]
        if len(set(idx)) != len(idx):
            raise InputError(f"Factor '{fac}' lists an item twice.", code="bad_structure",
                             details={"factor": str(fac)})
        struct[str(fac)] = idx
    return S, nm, struct


# --------------------------------------------------------------------------- the fit

def confirmatory_factor_analysis(S: ArrayLike, structure: Mapping[str, Sequence[str]], *, n: int,
                                 names: Sequence[str] | None = None, identification: str = "std_lv",
                                 likelihood: str = "wishart", residual_covariances: bool = True,
                                 n_largest: int = 10, max_iter: int = 5000, tol: float = 1e-7) -> CFAResult:
    """Fit a confirmatory factor model with correlated factors by maximum likelihood.

    Parameters
    ----------
    S : array_like (k x k)
        Covariance or correlation matrix of the observed items (fit, standardized values and
        modification indices are the same for either; unstandardized estimates follow the scale of S).
    structure : mapping of str to sequence of str
        ``{factor: [items]}``; an item may load on several factors. Items of ``S`` in no factor are
        left out of the model (with a note).
    n : int
        Respondents behind ``S``.
    names : sequence of str, optional
        Item names in the order of ``S`` (default ``item1``, ``item2``...).
    identification : {"std_lv", "marker"}
        ``std_lv`` fixes each factor's variance at 1; ``marker`` fixes the loading of each factor's
        first listed item at 1 and frees the factor variances (lavaan's default). The fit and the
        standardized solution are the same.
    likelihood : {"wishart", "normal"}
        ``chisq = (n - 1) F_min`` ("wishart", the default, as LISREL, EQS, Mplus with ``n - 1``) or
        ``n F_min`` ("normal", as lavaan and semopy). The same multiplier enters RMSEA, the standard
        errors and the modification indices.
    residual_covariances : bool
        Also give modification indices for freeing residual covariances between items.
    n_largest : int
        How many residual correlations and modification indices to report (largest first).
    max_iter, tol : int, float
        Iterations of L-BFGS-B (restarted up to twice when it stalls), and the largest projected gradient
        of ``F_ML`` accepted as converged (times ``max(1, F_min)``).

    Returns
    -------
    CFAResult

    Notes
    -----
    * ``F_ML = log|Sigma| + tr(S Sigma^-1) - log|S| - p``; ``chisq = n_used F_min``, ``df = p(p+1)/2 - q``
      with q free parameters.
    * Baseline (independence) model ``Sigma_0 = diag(S)``: ``chisq_0 = n_used (log|diag S| - log|S|)``,
      ``df_0 = p(p-1)/2``. CFI ``= 1 - max(chisq - df, 0) / max(chisq_0 - df_0, chisq - df, 0)``
      (Bentler 1990); TLI ``= (chisq_0/df_0 - chisq/df) / (chisq_0/df_0 - 1)`` (Tucker & Lewis 1973).
    * RMSEA ``= sqrt(max(chisq - df, 0) / (df n_used))``, 90 % interval by inverting the noncentral
      chi-square (Steiger 1990).
    * SRMR (Bentler's, lavaan's ``srmr``): ``sqrt(mean over i <= j of ((s_ij - sigma_ij) / sqrt(s_ii s_jj))²)``.
    * AIC ``= chisq + 2q``, BIC ``= chisq + q log(n)``: they differ from ``-2 log L + 2q`` (lavaan) by
      ``-2 log L`` of the saturated model, a constant for given data, so only differences between models
      fitted to the same matrix are meaningful.
    * Standard errors: ``Acov = (2 / n_used) H^-1`` with ``H_fg = tr(W dSigma_f W dSigma_g)`` the expected
      information of ``F_ML`` at the estimate (lavaan's default ``information = "expected"``); the
      standardized values by the delta method with the analytic Jacobian.
    * Modification index of a fixed parameter r (score test, Sorbom 1989):
      ``MI = (n_used / 2) g_r² / (H_rr - H_rf H_ff^-1 H_fr)``, ``g = dF/dx``; expected parameter change
      ``EPC = -g_r / (H_rr - H_rf H_ff^-1 H_fr)`` (Saris, Satorra & Sorbom 1987); ``sepc_all`` is the EPC
      standardized like the parameter (a loading by ``sqrt(phi_kk / sigma_ii)``, a residual covariance by
      ``sqrt(theta_i theta_j)``).
    * Start: loadings ``sqrt(SMC)`` (signed by the item's correlations with its factor's other items),
      uniquenesses ``1 - SMC``, factor correlations of unit-weighted sums; fitted on the correlation
      matrix, then rescaled to ``S`` exactly.

    References
    ----------
    Joreskog, K. G. (1969). Psychometrika, 34, 183-202.
    Bentler, P. M. (1990). Psychological Bulletin, 107, 238-246.
    Tucker, L. R., & Lewis, C. (1973). Psychometrika, 38, 1-10.
    Steiger, J. H. (1990). Multivariate Behavioral Research, 25, 173-180.
    Sorbom, D. (1989). Psychometrika, 54, 371-384.
    Hu, L., & Bentler, P. M. (1999). Structural Equation Modeling, 6, 1-55 (cut-offs in ``CUTOFFS``).
    """
    if identification not in IDENTIFICATIONS:
        raise InputError(f"Unknown identification '{identification}'; choose one of {', '.join(IDENTIFICATIONS)}.",
                         code="bad_option", details={"identification": str(identification)})
    if likelihood not in LIKELIHOODS:
        raise InputError(f"Unknown likelihood '{likelihood}'; choose one of {', '.join(LIKELIHOODS)}.",
                         code="bad_option", details={"likelihood": str(likelihood)})
    S_all, nm_all, struct = _check_inputs(S, structure, n, names)
    n = int(n)
    n_used = n - 1 if likelihood == "wishart" else n
    warnings: list[Note] = []

    used = sorted({i for idx in struct.values() for i in idx})
    left_out = [nm_all[i] for i in range(len(nm_all)) if i not in set(used)]
    if left_out:
        warnings.append(note("items_not_in_structure", f"{len(left_out)} item(s) belong to no factor of the "
                             f"structure and were left out of the model: {', '.join(left_out)}.", left_out))
    pos = {i: j for j, i in enumerate(used)}
    nm = [nm_all[i] for i in used]
    S = S_all[np.ix_(used, used)]
    p = len(nm)
    factors = list(struct)
    m = len(factors)
    pattern = np.zeros((p, m), dtype=bool)
    for k, fac in enumerate(factors):
        pattern[[pos[i] for i in struct[fac]], k] = True
    q = int(pattern.sum()) + m * (m - 1) // 2 + p
    df = p * (p + 1) // 2 - q

    def unfitted(extra: list[Note]) -> CFAResult:
        fit: dict[str, Any] = {key: None for key in ("chisq", "p", "cfi", "tli", "rmsea", "srmr", "aic", "bic", "fmin")}
        fit.update({"df": df, "n_parameters": q, "rmsea_ci": [None, None], "baseline": None})
        return CFAResult(tuple(nm), tuple(factors), False, identification, likelihood, n, n_used, fit,
                         warnings=tuple(warnings + extra))

    # identification
    small = [f for f in factors if pattern[:, factors.index(f)].sum() < (3 if m == 1 else 2)]
    if small or df < 0:
        reasons = []
        if small:
            need = ("3 items when it is the only factor" if m == 1
                    else "at least 2 items (and correlate with another factor)")
            reasons.append(f"factor(s) {', '.join(repr(f) for f in small)} have too few items (a factor needs {need})")
        if df < 0:
            reasons.append(f"the model has {q} free parameters for {p * (p + 1) // 2} variances and covariances "
                           f"(df = {df})")
        return unfitted([note("not_identified", "The model is not identified: " + "; ".join(reasons) + ".",
                              [str(f) for f in small])])
    if n < q or n < 5 * p:
        warnings.append(note("too_few_respondents", f"{n} respondents for {p} items and {q} free parameters: "
                             f"fewer than {'the number of free parameters' if n < q else 'five per item'} "
                             f"(a common rule of thumb), so estimates and fit are unstable.", []))

    d = np.sqrt(np.diag(S))
    R = S / np.outer(d, d)
    sign_r, logdet_r = np.linalg.slogdet(R)
    if sign_r <= 0 or np.linalg.eigvalsh(R)[0] <= 1e-10:
        return unfitted([note("singular_matrix", f"The matrix of the {p} items is singular (smallest eigenvalue "
                              f"{np.linalg.eigvalsh(R)[0]:.2g}); with {n} respondents some items are linear "
                              f"combinations of others, and a maximum-likelihood factor model cannot be fitted.",
                              [])])

    # fit on the correlation matrix, standardized latent variables
    model = _Model(pattern, np.zeros((p, m)), free_variances=False)
    smc = np.clip(1.0 - 1.0 / np.diag(np.linalg.inv(R)), 0.05, 0.95)
    L0 = np.zeros((p, m))
    for k in range(m):
        rows = np.flatnonzero(pattern[:, k])
        for i in rows.tolist():
            others = R[i, rows[rows != i]]
            sgn = -1.0 if others.sum() < 0 else 1.0
            L0[i, k] = sgn * np.sqrt(smc[i] / pattern[i].sum())
    wsum = L0.copy()
    wsum[pattern] = np.sign(L0[pattern])
    cov_sums = wsum.T @ R @ wsum
    sd_sums = np.sqrt(np.diag(cov_sums))
    Phi0 = cov_sums / np.outer(sd_sums, sd_sums)
    x0 = model.pack(L0, Phi0, 1.0 - smc)
    lo = np.r_[np.full(model.nl, -np.inf), np.full(model.nphi, -1.0), np.zeros(p)]
    hi = np.r_[np.full(model.nl, np.inf), np.full(model.nphi, 1.0), np.full(p, np.inf)]
    x0 = np.clip(x0, lo, hi)
    bounds = optimize.Bounds(lo, hi)
    x, n_iter = x0, 0
    for _attempt in range(3):   # a restart clears L-BFGS-B's curvature memory when it stalls
        res = optimize.minimize(model.objective, x, args=(R, logdet_r), jac=True, method="L-BFGS-B",
                                bounds=bounds, options={"maxiter": max_iter - n_iter, "maxfun": 4 * max_iter,
                                                        "ftol": 1e-15, "gtol": tol / 10})
        x, n_iter = res.x, n_iter + res.nit
        Fmin, g = model.objective(x, R, logdet_r)
        pg = g.copy()   # projected gradient: components pushing against an active bound do not count
        pg[(x <= lo + _HEYWOOD_TOL) & (g > 0)] = 0.0
        pg[(x >= hi - _HEYWOOD_TOL) & (g < 0)] = 0.0
        converged = bool(np.max(np.abs(pg)) < tol * max(1.0, Fmin) and Fmin < 1e9)
        if converged or n_iter >= max_iter:
            break
    at_bound = x[model.nl + model.nphi:] <= _HEYWOOD_TOL
    if not converged:
        warnings.append(note("not_converged", f"The maximum-likelihood fit did not converge in {n_iter} "
                             f"iterations (largest gradient {np.max(np.abs(pg)):.2g}); the estimates and fit "
                             f"below are those of the last iteration.", []))
    LR, Phi, thetaR = model.unpack(x)
    heywood = [nm[i] for i in np.flatnonzero(at_bound)]
    if heywood:
        warnings.append(note("heywood", f"Heywood case: the uniqueness of {', '.join(repr(h) for h in heywood)} "
                             f"reached its bound of 0 (the item would be explained entirely by the factors). "
                             f"Too few items per factor, a small sample or a misspecified structure are the "
                             f"usual causes.", heywood))
    if np.linalg.eigvalsh(Phi)[0] <= 1e-8:
        warnings.append(note("phi_not_positive_definite", "The factor correlation matrix is not positive "
                             "definite (a correlation reached +-1 or the correlations contradict each other): "
                             "some factors cannot be told apart.", []))

    # rescale to S, then to the chosen identification (the same Sigma, so the same optimum)
    L = d[:, None] * LR
    theta = thetaR * d ** 2
    if identification == "marker":
        markers = [pos[struct[f][0]] for f in factors]
        c = np.array([L[markers[k], k] for k in range(m)])
        if np.any(np.abs(c) < 1e-8):
            bad = [factors[k] for k in range(m) if abs(c[k]) < 1e-8]
            warnings.append(note("marker_near_zero", f"The marker item of {', '.join(bad)} has a loading of "
                                 f"about 0, so the factor cannot be scaled by it; the factor variances were "
                                 f"fixed at 1 instead.", bad))
            identification = "std_lv"
        else:
            L = L / c[None, :]
            Phi = Phi * np.outer(c, c)
            fixed = np.zeros((p, m))
            pat = pattern.copy()
            for k in range(m):
                fixed[markers[k], k] = 1.0
                pat[markers[k], k] = False
            model = _Model(pat, fixed, free_variances=True)
    x = model.pack(L, Phi, theta)
    Sig = model.sigma(L, Phi, theta)
    W = np.linalg.inv(Sig)
    W = (W + W.T) / 2

    # standard errors from the expected information
    U, V = model.uv(L, Phi)
    H = _info(W, U, V, U, V)
    try:
        Hinv = np.linalg.inv(H)
        acov = (2.0 / n_used) * Hinv
        se = np.sqrt(np.clip(np.diag(acov), 0.0, None))
    except np.linalg.LinAlgError:
        Hinv = None
        acov = None
        se = np.zeros(model.q)
        warnings.append(note("singular_information", "The information matrix is singular (the model is "
                             "empirically not identified), so standard errors and modification indices "
                             "are not given.", []))

    # standardized solution and its delta-method standard errors
    sig_d = np.diag(Sig)
    dsig = 2.0 * U * V                          # d sigma_ii / d x_f (p x q)
    phid = np.diag(Phi)
    Lstd = L * np.sqrt(phid)[None, :] / np.sqrt(sig_d)[:, None]
    Rphi = Phi / np.sqrt(np.outer(phid, phid))
    theta_std = theta / sig_d
    nl, nphi = model.nl, model.nphi
    # Jacobian of standardized loadings (all p x m entries), factor correlations, std uniquenesses
    J_l = np.zeros((p, m, model.q))
    J_l -= (Lstd / (2.0 * sig_d[:, None]))[:, :, None] * dsig[:, None, :]
    for f, (i, k) in enumerate(model.lam_idx.tolist()):
        J_l[i, k, f] += np.sqrt(phid[k] / sig_d[i])
    J_r = np.zeros((m, m, model.q))
    for j, (k, k2) in enumerate(model.phi_idx):
        f = nl + j
        if k != k2:
            J_r[k, k2, f] = J_r[k2, k, f] = 1.0 / np.sqrt(phid[k] * phid[k2])
        else:   # a free factor variance (marker method)
            J_l[:, k, f] += L[:, k] / (2.0 * np.sqrt(phid[k] * sig_d))
            for ll in range(m):
                if ll != k:
                    J_r[k, ll, f] = J_r[ll, k, f] = -Rphi[k, ll] / (2.0 * phid[k])
    J_t = -(theta / sig_d ** 2)[:, None] * dsig
    J_t[np.arange(p), nl + nphi + np.arange(p)] += 1.0 / sig_d

    def delta_se(J: np.ndarray) -> np.ndarray:
        if acov is None:
            return np.zeros(J.shape[:-1])
        return np.sqrt(np.clip(np.sum((J @ acov) * J, axis=-1), 0.0, None))

    Lstd_se = delta_se(J_l)
    Rphi_se = delta_se(J_r)
    np.fill_diagonal(Rphi_se, 0.0)
    theta_std_se = delta_se(J_t)
    L_se = np.zeros((p, m))
    L_se[model.lam_idx[:, 0], model.lam_idx[:, 1]] = se[:nl]
    theta_se = se[nl + nphi:]

    # fit indices
    chisq = float(n_used * Fmin)
    _, logdet_s = np.linalg.slogdet(S)
    chisq0 = float(n_used * (np.sum(np.log(np.diag(S))) - logdet_s))
    df0 = p * (p - 1) // 2
    fit: dict = {"chisq": chisq, "df": df, "fmin": float(Fmin), "n_parameters": q,
                 "baseline": {"chisq": chisq0, "df": df0, "p": float(stats.chi2.sf(chisq0, df0))}}
    resid_std = (S - Sig) / np.outer(d, d)
    fit["srmr"] = float(np.sqrt(np.mean(resid_std[np.triu_indices(p)] ** 2)))
    fit["aic"] = chisq + 2 * q
    fit["bic"] = chisq + q * float(np.log(n))
    den = max(chisq0 - df0, chisq - df, 0.0)
    fit["cfi"] = float(1.0 - max(chisq - df, 0.0) / den) if den > 0 else None
    if den <= 0 or chisq0 <= df0:
        warnings.append(note("baseline_fits", f"The independence model already fits (chi-square {chisq0:.1f} on "
                             f"{df0} df): the items hardly correlate, so CFI and TLI, which compare against it, "
                             f"are undefined or meaningless.", []))
    if df == 0:
        warnings.append(note("just_identified", "The model is just identified (df = 0): it reproduces the "
                             "matrix exactly, so its fit cannot be tested; chi-square p, TLI and RMSEA are "
                             "undefined.", []))
        fit.update({"p": None, "tli": None, "rmsea": None, "rmsea_ci": [None, None]})
    else:
        fit["p"] = float(stats.chi2.sf(chisq, df))
        fit["tli"] = float((chisq0 / df0 - chisq / df) / (chisq0 / df0 - 1.0)) if chisq0 > df0 else None
        fit["rmsea"] = float(np.sqrt(max(chisq - df, 0.0) / (df * n_used)))
        fit["rmsea_ci"] = rmsea_interval(chisq, df, n_used)

    # residual correlations
    rhat = Sig / np.sqrt(np.outer(sig_d, sig_d))
    resid = R - rhat
    np.fill_diagonal(resid, 0.0)
    iu = np.triu_indices(p, 1)
    order = np.argsort(-np.abs(resid[iu]), kind="stable")[:n_largest]
    largest = tuple({"items": (nm[iu[0][o]], nm[iu[1][o]]), "observed": float(R[iu[0][o], iu[1][o]]),
                     "implied": float(rhat[iu[0][o], iu[1][o]]), "residual": float(resid[iu[0][o], iu[1][o]])}
                    for o in order)

    # modification indices for loadings fixed at 0 and (optionally) residual covariances
    mods: list[dict] = []
    if Hinv is not None:
        G = W - W @ S @ W
        LP = L @ Phi
        cand: list[tuple[str, int, int]] = []
        u_cols: list[np.ndarray] = []
        v_cols: list[np.ndarray] = []
        for i in range(p):
            for k in range(m):
                if not pattern[i, k]:
                    u = np.zeros(p)
                    u[i] = 1.0
                    cand.append(("loading", i, k))
                    u_cols.append(u)
                    v_cols.append(LP[:, k])
        if residual_covariances:
            for i, j in zip(*(x.tolist() for x in iu)):
                u, v = np.zeros(p), np.zeros(p)
                u[i], v[j] = 1.0, 1.0
                cand.append(("residual_covariance", i, j))
                u_cols.append(u)
                v_cols.append(v)
        if cand:
            Uc, Vc = np.array(u_cols).T, np.array(v_cols).T
            g_c = 2.0 * np.sum(Uc * (G @ Vc), axis=0)
            H_cf = _info(W, Uc, Vc, U, V)
            h_eff = _info_diag(W, Uc, Vc) - np.sum((H_cf @ Hinv) * H_cf, axis=1)
            with np.errstate(divide="ignore", invalid="ignore"):
                mi = np.where(h_eff > 1e-12, (n_used / 2.0) * g_c ** 2 / h_eff, 0.0)
                epc = np.where(h_eff > 1e-12, -g_c / h_eff, 0.0)
            for (kind, a, b), mi_v, epc_v in zip(cand, mi, epc):
                if kind == "loading":
                    mods.append({"kind": kind, "factor": factors[b], "item": nm[a], "mi": float(mi_v),
                                 "epc": float(epc_v), "sepc_all": float(epc_v * np.sqrt(phid[b] / sig_d[a]))})
                else:
                    den_t = np.sqrt(theta[a] * theta[b])
                    mods.append({"kind": kind, "items": (nm[a], nm[b]), "mi": float(mi_v), "epc": float(epc_v),
                                 "sepc_all": float(epc_v / den_t) if den_t > 0 else None})
            mods.sort(key=lambda r: -r["mi"])

    # the parameter table
    def z_crit(est: float, s: float) -> tuple[float | None, float | None]:
        return (float(est / s), float(2 * special.ndtr(-abs(est / s)))) if s > 0 else (None, None)

    params: list[dict] = []
    for k, fac in enumerate(factors):
        for i in np.flatnonzero(pattern[:, k]).tolist():
            free = bool(model.pattern[i, k])
            s = float(L_se[i, k]) if free else 0.0
            z, pv = z_crit(L[i, k], s) if free else (None, None)
            params.append({"lhs": fac, "op": "=~", "rhs": nm[i], "est": float(L[i, k]), "se": s, "z": z,
                           "p": pv, "std": float(Lstd[i, k]), "std_se": float(Lstd_se[i, k]), "free": free})
    for i in range(p):
        s = float(theta_se[i])
        z, pv = z_crit(theta[i], s)
        params.append({"lhs": nm[i], "op": "~~", "rhs": nm[i], "est": float(theta[i]), "se": s, "z": z, "p": pv,
                       "std": float(theta_std[i]), "std_se": float(theta_std_se[i]), "free": True})
    phi_se = {kl: float(se[nl + j]) for j, kl in enumerate(model.phi_idx)}
    for k in range(m):
        for ll in range(k, m):
            free = (k, ll) in phi_se
            s = phi_se.get((k, ll), 0.0)
            z, pv = z_crit(Phi[k, ll], s) if free else (None, None)
            params.append({"lhs": factors[k], "op": "~~", "rhs": factors[ll], "est": float(Phi[k, ll]), "se": s,
                           "z": z, "p": pv, "std": float(Rphi[k, ll]), "std_se": float(Rphi_se[k, ll]),
                           "free": free})
    std_load_over = [nm[i] for i in range(p) if np.any(np.abs(Lstd[i]) > 1.0)]
    if std_load_over and not heywood:
        warnings.append(note("heywood", f"Standardized loading(s) beyond 1 for {', '.join(std_load_over)} "
                             f"(Heywood case).", std_load_over))

    return CFAResult(
        names=tuple(nm), factors=tuple(factors), fitted=True, identification=identification,
        likelihood=likelihood, n=n, n_used=n_used, fit=fit,
        loadings=L, loadings_se=L_se, standardized_loadings=Lstd, standardized_loadings_se=Lstd_se,
        factor_covariances=Phi, factor_correlations=Rphi, factor_correlations_se=Rphi_se,
        uniquenesses=theta, uniquenesses_se=theta_se, standardized_uniquenesses=theta_std,
        residual_correlations=resid, largest_residuals=largest,
        modification_indices=tuple(mods[:n_largest]), parameters=tuple(params),
        converged=converged, iterations=int(n_iter), heywood=tuple(heywood), warnings=tuple(warnings))
