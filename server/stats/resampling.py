"""Bootstrap helpers: reproducible resamples, percentile and BCa intervals, factor alignment.

References
----------
Efron, B. (1979). Bootstrap methods: another look at the jackknife. Annals of Statistics, 7, 1-26.
Efron, B. (1987). Better bootstrap confidence intervals. Journal of the American Statistical
    Association, 82, 171-185.
Efron, B., & Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman & Hall (ch. 13, 14).
Tucker, L. R. (1951). A method for synthesis of factor analysis studies. Personnel Research Section
    Report No. 984. Department of the Army.
Kuhn, H. W. (1955). The Hungarian method for the assignment problem. Naval Research Logistics
    Quarterly, 2, 83-97.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import optimize, special

from .efa import congruence
from .errors import InputError

__all__ = ["Alignment", "Interval", "align_factors", "bca_interval", "bootstrap_indices", "percentile_interval"]


@dataclass(frozen=True)
class Interval:
    """A bootstrap confidence interval.

    Attributes
    ----------
    low, high : float or None
        None when the interval is undefined; ``reason`` then says why.
    level : float
    method : {"percentile", "bca"}
    n_resamples : int
        Finite resample values used.
    n_dropped : int
        Resample values left out because they were missing or infinite (an undefined statistic).
    reason : str or None
    bias_correction, acceleration : float or None
        BCa's ``z0`` and ``a`` (None for the percentile interval).
    """

    low: float | None
    high: float | None
    level: float
    method: str
    n_resamples: int
    n_dropped: int = 0
    reason: str | None = None
    bias_correction: float | None = None
    acceleration: float | None = None


@dataclass(frozen=True)
class Alignment:
    """A resample's factors lined up with the reference factors.

    Attributes
    ----------
    loadings : ndarray (k x m_ref)
        Column j is the resample's factor matched to reference factor j, reflected to agree in sign;
        NaN in a column whose reference factor found no partner (listed in ``unmatched_reference``).
    phi : ndarray (m_ref x m_ref) or None
        The factor correlations reordered and reflected the same way (when given).
    order : tuple of (int or None)
        For each reference factor, the resample column matched to it (None if none).
    signs : tuple of float
        +1 or -1 per reference factor (1 when unmatched).
    congruence : tuple of (float or None)
        Tucker's congruence of each matched pair after reflection (None if unmatched).
    unmatched : tuple of int
        Resample columns matched to no reference factor (the resample had more factors).
    unmatched_reference : tuple of int
    """

    loadings: np.ndarray
    phi: np.ndarray | None
    order: tuple
    signs: tuple
    congruence: tuple
    unmatched: tuple = ()
    unmatched_reference: tuple = ()


def bootstrap_indices(n: int, n_resamples: int, *, seed: int | None) -> np.ndarray:
    """Row indices of ``n_resamples`` bootstrap resamples of ``n`` respondents (with replacement).

    Returns an ``(n_resamples, n)`` integer array drawn by ``numpy.random.default_rng(seed).integers``;
    the same seed gives the same resamples (the draws scipy.stats.bootstrap makes with that generator).

    References
    ----------
    Efron, B. (1979). Annals of Statistics, 7, 1-26.
    """
    for name, v, least in (("n", n, 1), ("n_resamples", n_resamples, 1)):
        if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < least:
            raise InputError(f"{name} must be a positive integer; got {v!r}.", code="bad_option",
                             details={name: repr(v)})
    rng = np.random.default_rng(seed)
    return rng.integers(0, n, size=(int(n_resamples), int(n)))


def _check_level(level: float) -> float:
    if not isinstance(level, (int, float)) or isinstance(level, bool) or not 0 < level < 1:
        raise InputError(f"The confidence level must lie strictly between 0 and 1; got {level!r}.",
                         code="bad_option", details={"level": repr(level)})
    return float(level)


def _finite(values) -> tuple[np.ndarray, int]:
    v = np.asarray(values, dtype=float).ravel()
    ok = np.isfinite(v)
    return v[ok], int((~ok).sum())


def percentile_interval(values: ArrayLike, *, level: float = 0.95) -> Interval:
    """Efron's percentile interval: the ``(1 - level)/2`` and ``(1 + level)/2`` quantiles of the resamples.

    Quantiles are interpolated linearly between order statistics (numpy's and scipy's default, type 7
    of Hyndman & Fan 1996). Missing or infinite resample values (the statistic undefined in that
    resample) are left out and counted in ``n_dropped``; with fewer than two left the interval is None.

    References
    ----------
    Efron, B., & Tibshirani, R. J. (1993). An Introduction to the Bootstrap, ch. 13.
    """
    level = _check_level(level)
    v, dropped = _finite(values)
    if v.size < 2:
        return Interval(None, None, level, "percentile", int(v.size), dropped,
                        f"{v.size} finite resample value(s); an interval needs at least 2.")
    alpha = (1 - level) / 2
    lo, hi = np.quantile(v, [alpha, 1 - alpha])
    return Interval(float(lo), float(hi), level, "percentile", int(v.size), dropped)


def bca_interval(values: ArrayLike, estimate: float, jackknife_values: ArrayLike, *, level: float = 0.95) -> Interval:
    """Efron's (1987) bias-corrected and accelerated (BCa) interval.

    Parameters
    ----------
    values : array_like
        The statistic in each bootstrap resample.
    estimate : float
        The statistic in the full sample.
    jackknife_values : array_like
        The statistic with each respondent left out in turn (for the acceleration).
    level : float

    Returns
    -------
    Interval
        ``low``/``high`` are None, with ``reason``, when BCa is undefined: the estimate or a jackknife
        value is missing, every resample lies on one side of the estimate (``z0`` infinite), the
        jackknife values do not vary (``a`` is 0/0), or ``1 - a (z0 + z)`` is not positive.

    Notes
    -----
    ``z0 = Phi^-1(p)`` with ``p`` the share of resamples below the estimate, ties counted half (as
    scipy.stats.bootstrap); ``a = sum(d³) / (6 (sum(d²))^1.5)`` with ``d = mean(jack) - jack``;
    the interval is the ``alpha_1, alpha_2`` quantiles of the resamples with
    ``alpha_i = Phi(z0 + (z0 + z_i) / (1 - a (z0 + z_i)))``, ``z_i = Phi^-1((1 -+ level)/2)``.
    Missing or infinite resample values are left out (``n_dropped``).

    References
    ----------
    Efron, B. (1987). Journal of the American Statistical Association, 82, 171-185.
    Efron, B., & Tibshirani, R. J. (1993). An Introduction to the Bootstrap, ch. 14.3.
    """
    level = _check_level(level)
    v, dropped = _finite(values)
    jack = np.asarray(jackknife_values, dtype=float).ravel()

    def undefined(reason: str, z0=None, a=None) -> Interval:
        return Interval(None, None, level, "bca", int(v.size), dropped, reason, z0, a)

    if v.size < 2:
        return undefined(f"{v.size} finite resample value(s); an interval needs at least 2.")
    if estimate is None or not np.isfinite(estimate):
        return undefined("The full-sample estimate is undefined.")
    if jack.size < 2 or not np.all(np.isfinite(jack)):
        return undefined("The jackknife values are missing or undefined for some respondent, so the "
                         "acceleration cannot be computed.")
    below = (np.count_nonzero(v < estimate) + np.count_nonzero(v <= estimate)) / (2.0 * v.size)
    if below <= 0 or below >= 1:
        return undefined("Every resample lies on one side of the estimate, so the bias correction z0 "
                         "is infinite.")
    z0 = float(special.ndtri(below))
    d = jack.mean() - jack
    ss = float(np.sum(d ** 2))
    if ss <= 0:
        return undefined("The jackknife values do not vary, so the acceleration is undefined (0/0).", z0)
    a = float(np.sum(d ** 3) / (6.0 * ss ** 1.5))
    alpha = (1 - level) / 2
    qs = []
    for z in (special.ndtri(alpha), special.ndtri(1 - alpha)):
        den = 1.0 - a * (z0 + z)
        if den <= 0:
            return undefined(f"The acceleration ({a:.3g}) is too large for this level: "
                             f"1 - a (z0 + z) = {den:.3g} is not positive.", z0, a)
        qs.append(float(special.ndtr(z0 + (z0 + z) / den)))
    lo, hi = np.quantile(v, qs)
    return Interval(float(lo), float(hi), level, "bca", int(v.size), dropped, None, z0, a)


def align_factors(loadings: ArrayLike, reference: ArrayLike, *, phi: ArrayLike | None = None) -> Alignment:
    """Reorder and reflect a resample's factors to match the reference factors.

    Factors are paired by the Hungarian assignment (Kuhn 1955) maximising the summed absolute Tucker
    congruence (Tucker 1951; :func:`server.stats.efa.congruence`) between their loading columns, the
    same matching the live view uses against the previous solution; each matched factor is reflected
    so its congruence with the reference is positive.

    Parameters
    ----------
    loadings : array_like (k x m)
        The resample's loadings (rows: the same items as ``reference``).
    reference : array_like (k x m_ref)
    phi : array_like (m x m), optional
        The resample's factor correlations, reordered and reflected along.
    """
    A = np.asarray(loadings, dtype=float)
    B = np.asarray(reference, dtype=float)
    if A.ndim != 2 or B.ndim != 2 or A.shape[0] != B.shape[0]:
        raise InputError(f"Loadings of shape {A.shape} cannot be aligned with a reference of shape "
                         f"{B.shape}; both need one row per item.", code="bad_shape",
                         details={"loadings": list(A.shape), "reference": list(B.shape)})
    m, m_ref = A.shape[1], B.shape[1]
    C = congruence(A, B)
    rows, cols = optimize.linear_sum_assignment(-np.abs(C))
    out = np.full((A.shape[0], m_ref), np.nan)
    order: list = [None] * m_ref
    signs = [1.0] * m_ref
    congr: list = [None] * m_ref
    for r, c in zip(rows, cols):
        s = -1.0 if C[r, c] < 0 else 1.0
        out[:, c] = A[:, r] * s
        order[c], signs[c], congr[c] = int(r), s, float(abs(C[r, c]))
    P = None
    if phi is not None:
        ph = np.asarray(phi, dtype=float)
        if ph.shape != (m, m):
            raise InputError(f"phi has shape {ph.shape}; it must be {m} x {m} like the loadings' factors.",
                             code="bad_shape", details={"phi": list(ph.shape), "factors": m})
        P = np.full((m_ref, m_ref), np.nan)
        for c1 in range(m_ref):
            for c2 in range(m_ref):
                if order[c1] is not None and order[c2] is not None:
                    P[c1, c2] = ph[order[c1], order[c2]] * signs[c1] * signs[c2]
    matched = {int(r) for r in rows}
    return Alignment(out, P, tuple(order), tuple(signs), tuple(congr),
                     tuple(j for j in range(m) if j not in matched),
                     tuple(c for c in range(m_ref) if order[c] is None))
