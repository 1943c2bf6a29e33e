"""Factorability and how many factors to keep: KMO/MSA, Bartlett, parallel analysis, MAP, Kaiser.

All functions take a correlation matrix (and the sample size where a test needs it); none
needs the raw responses, so the engine can work from its cached full-pool matrix.
"""
from __future__ import annotations

import math
import threading
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike
from scipy import linalg, stats
from scipy.linalg import blas

from .correlation import polychoric_matrix
from .errors import InputError
from .spectra import eigvalsh, inv, slogdet

__all__ = [
    "KMOResult",
    "MAPResult",
    "ParallelResult",
    "bartlett_sphericity",
    "factorability_summary",
    "has_random_reference",
    "kaiser_count",
    "kmo",
    "parallel_analysis",
    "parallel_analysis_polychoric",
    "permuted_ordinal_data",
    "random_correlation_eigenvalues",
    "retention_summary",
    "smc",
    "velicer_map",
]

_BATCH = 128  # random matrices decomposed per batch; fixed so a seed gives the same draws


@dataclass(frozen=True)
class KMOResult:
    """Kaiser-Meyer-Olkin measure of sampling adequacy.

    Attributes
    ----------
    kmo : float
        Overall measure.
    msa : ndarray (k,)
        Measure of sampling adequacy per item.
    """

    kmo: float
    msa: np.ndarray


@dataclass(frozen=True)
class ParallelResult:
    """Horn's parallel analysis.

    Attributes
    ----------
    n_factors : int
        Number of leading observed eigenvalues above their random threshold.
    observed : ndarray (k,)
        Observed eigenvalues (of R, or of the reduced matrix for ``variant="factors"``).
    threshold : ndarray (k,)
        The ``percentile`` of the random eigenvalues at each position.
    variant : str
        ``"components"`` or ``"factors"``.
    random_mean : ndarray (k,)
        Mean random eigenvalue at each position.
    iterations : int
    percentile : float
    seed : int or None
    method : str
        The reference data: ``"random_normal"`` (uncorrelated normal data, :func:`parallel_analysis`) or
        ``"permuted_ordinal"`` (each item's observed answers permuted independently, polychoric
        correlations; :func:`parallel_analysis_polychoric`).
    """

    n_factors: int
    observed: np.ndarray
    threshold: np.ndarray
    variant: str
    random_mean: np.ndarray = field(default_factory=lambda: np.empty(0))
    iterations: int = 0
    percentile: float = 95.0
    seed: int | None = None
    method: str = "random_normal"


@dataclass(frozen=True)
class MAPResult:
    """Velicer's minimum average partial test.

    Attributes
    ----------
    n_factors : int
        Number of components at the minimum average squared partial correlation.
    values : ndarray (k,)
        Average squared partial correlation after removing 0, 1, ..., k-1 components.
    values4 : ndarray (k,)
        The same with fourth powers (O'Connor 2000).
    n_factors4 : int
        Number of components at the minimum of ``values4``.
    """

    n_factors: int
    values: np.ndarray
    values4: np.ndarray
    n_factors4: int = 0


# ----------------------------------------------------------------------------------------------
# helpers

def _corr(R, names=None) -> np.ndarray:
    A = np.asarray(R, dtype=float)
    if A.ndim != 2 or A.shape[0] != A.shape[1]:
        raise InputError(f"Expected a square correlation matrix, got shape {list(A.shape)}.", code="bad_shape",
                         details={"shape": list(A.shape)})
    if A.shape[0] < 2:
        raise InputError(f"At least 2 items are needed; got {A.shape[0]}.", code="too_few_items",
                         details={"items": int(A.shape[0])})
    if not np.isfinite(A).all():
        raise InputError("The correlation matrix has missing or infinite entries.", code="bad_value")
    if not np.allclose(A, A.T, atol=1e-8):
        raise InputError("The correlation matrix is not symmetric.", code="bad_value")
    return (A + A.T) / 2


def _det(A: np.ndarray) -> float:
    """The determinant (``numpy.linalg.det``) from :func:`~server.stats.spectra.slogdet`."""
    sign, logdet = slogdet(A)
    return sign * float(np.exp(logdet)) if sign != 0 else 0.0


def _inverse(R: np.ndarray, names=None) -> np.ndarray:
    """Inverse of a correlation matrix, or an InputError naming what makes it singular."""
    lam = eigvalsh(R)[0]
    if lam <= 1e-10 * R.shape[0]:
        k = R.shape[0]
        names = list(names) if names is not None else [f"item{j + 1}" for j in range(k)]
        off = np.abs(R - np.eye(k))
        i, j = np.unravel_index(np.argmax(off), off.shape)
        if off[i, j] > 0.9999:
            msg = (f"Items '{names[i]}' and '{names[j]}' are perfectly correlated (r = {R[i, j]:.4f}), "
                   "probably duplicates; the correlation matrix is singular. Drop one of them.")
            details = {"items": [names[i], names[j]], "r": float(R[i, j])}
        else:
            msg = (f"The correlation matrix is singular (smallest eigenvalue {lam:.3g}): some item is an "
                   "exact combination of others. Drop a redundant item.")
            details = {"smallest_eigenvalue": float(lam)}
        raise InputError(msg, code="singular_matrix", details=details)
    return inv(R)


def smc(R: ArrayLike) -> np.ndarray:
    """Squared multiple correlation of each item with all others: ``1 - 1 / diag(R^-1)``."""
    A = _corr(R)
    return 1.0 - 1.0 / np.diag(_inverse(A))


def kaiser_count(eigs: ArrayLike) -> int:
    """Number of eigenvalues greater than 1 (Kaiser 1960), for comparison only.

    References
    ----------
    Kaiser, H. F. (1960). The application of electronic computers to factor analysis.
    Educational and Psychological Measurement, 20(1), 141-151.
    """
    return int(np.sum(np.asarray(eigs, dtype=float) > 1.0))


# ----------------------------------------------------------------------------------------------
# factorability

def kmo(R: ArrayLike, *, names: Sequence[str] | None = None) -> KMOResult:
    """Kaiser-Meyer-Olkin measure of sampling adequacy, overall and per item.

    Parameters
    ----------
    R : array-like (k, k)
        Correlation matrix (positive definite).

    Returns
    -------
    KMOResult

    Notes
    -----
    With ``q_ij = -(R^-1)_ij / sqrt((R^-1)_ii (R^-1)_jj)`` the partial (anti-image) correlations,
    ``KMO = sum_{i!=j} r_ij^2 / (sum_{i!=j} r_ij^2 + sum_{i!=j} q_ij^2)`` and ``MSA_i`` is the same
    ratio over row ``i``.

    References
    ----------
    Kaiser, H. F. (1970). A second generation little jiffy. Psychometrika, 35(4), 401-415.
    Kaiser, H. F., & Rice, J. (1974). Little jiffy, mark IV. Educational and Psychological
    Measurement, 34(1), 111-117.
    """
    A = _corr(R)
    inv = _inverse(A, names)
    d = np.sqrt(np.diag(inv))
    Q = -inv / d[:, None] / d[None, :]
    off = ~np.eye(A.shape[0], dtype=bool)
    r2 = np.where(off, A * A, 0.0)
    q2 = np.where(off, Q * Q, 0.0)
    msa = r2.sum(axis=1) / (r2.sum(axis=1) + q2.sum(axis=1))
    overall = r2.sum() / (r2.sum() + q2.sum())
    return KMOResult(kmo=float(overall), msa=msa)


def bartlett_sphericity(R: ArrayLike, n: int, *, names: Sequence[str] | None = None) -> tuple[float, int, float]:
    """Bartlett's test that the population correlation matrix is the identity.

    Parameters
    ----------
    R : array-like (k, k)
        Correlation matrix.
    n : int
        Number of respondents.

    Returns
    -------
    (chi2, df, p)

    Notes
    -----
    ``chi2 = -(n - 1 - (2k + 5) / 6) ln |R|`` on ``k (k - 1) / 2`` degrees of freedom.

    References
    ----------
    Bartlett, M. S. (1951). The effect of standardization on a chi-square approximation in
    factor analysis. Biometrika, 38(3/4), 337-344.
    """
    A = _corr(R)
    k = A.shape[0]
    n = _check_n(n, k)
    sign, logdet = slogdet(A)
    if sign <= 0 or not np.isfinite(logdet):
        _inverse(A, names)  # raises a message naming the cause
        raise InputError("The correlation matrix has a non-positive determinant.", code="singular_matrix")
    chi2 = -(n - 1 - (2 * k + 5) / 6.0) * logdet
    df = k * (k - 1) // 2
    return float(chi2), int(df), float(stats.chi2.sf(chi2, df))


def _check_n(n, k):
    if isinstance(n, (float, np.floating)) and float(n).is_integer():
        n = int(n)
    if not isinstance(n, (int, np.integer)) or isinstance(n, bool) or n < 3:
        raise InputError(f"The number of respondents must be an integer of at least 3; got {n!r}.",
                         code="too_few_rows", details={"n": n if isinstance(n, (int, float)) else str(n)})
    return int(n)


# ----------------------------------------------------------------------------------------------
# parallel analysis

def random_correlation_eigenvalues(n: int, k: int, *, iterations: int = 500, variant: str = "components",
                                   seed: int | None = None) -> np.ndarray:
    """Eigenvalues (descending) of ``iterations`` correlation matrices of n x k normal data.

    Returns an array (iterations, k).

    Notes
    -----
    The cross-product matrix of n centred normal observations is Wishart(n - 1, I).  It is drawn
    directly by the Bartlett decomposition ``W = L L'`` with ``L`` lower triangular,
    ``L_ii^2 ~ chi2(n - 1 - i)`` (i = 0..k-1) and ``L_ij ~ N(0, 1)`` below the diagonal, then
    scaled to a correlation matrix; batches are decomposed by one stacked ``eigvalsh``.  This
    avoids simulating and correlating n x k data, and its cost does not grow with n.  For the
    ``"factors"`` variant the diagonal is replaced by the squared multiple correlations,
    ``1 - 1 / diag(R^-1)``, where ``diag(R^-1)_i = W_ii * sum_j (L^-1)_ji^2``.

    References
    ----------
    Bartlett, M. S. (1933). On the theory of statistical regression. Proceedings of the Royal
    Society of Edinburgh, 53, 260-283.
    """
    if variant not in ("components", "factors"):
        raise InputError(f"Unknown parallel-analysis variant {variant!r}; use 'components' or 'factors'.",
                         code="bad_option", details={"variant": variant})
    if not isinstance(iterations, (int, np.integer)) or iterations < 1:
        raise InputError(f"iterations must be a positive integer; got {iterations!r}.", code="bad_option",
                         details={"iterations": str(iterations)})
    if n - 1 < k:
        raise InputError(f"Parallel analysis needs more respondents than items (n = {n}, k = {k}).",
                         code="too_few_rows", details={"n": int(n), "k": int(k)})
    rng = np.random.default_rng(seed)
    dof = (n - 1) - np.arange(k)
    il = np.tril_indices(k, -1)
    out = np.empty((iterations, k))
    for start in range(0, iterations, _BATCH):
        b = min(_BATCH, iterations - start)
        L = np.zeros((b, k, k))
        L[:, np.arange(k), np.arange(k)] = np.sqrt(rng.chisquare(dof, size=(b, k)))
        L[:, il[0], il[1]] = rng.standard_normal((b, il[0].size))
        W = L @ L.transpose(0, 2, 1)
        d = 1.0 / np.sqrt(np.einsum("bii->bi", W))
        R = W * d[:, :, None] * d[:, None, :]
        if variant == "factors":
            Linv = np.linalg.inv(L)
            diag_winv = np.einsum("bji,bji->bi", Linv, Linv)
            rinv_diag = diag_winv / (d * d)
            idx = np.arange(k)
            R[:, idx, idx] = 1.0 - 1.0 / rinv_diag
        out[start:start + b] = np.linalg.eigvalsh(R)[:, ::-1]
    return out


_REFERENCE_CACHE: dict = {}
_REFERENCE_CACHE_SIZE = 64
_REFERENCE_LOCK = threading.Lock()
_REFERENCE_INFLIGHT: dict = {}


def _remember(key, threshold, mean) -> None:
    with _REFERENCE_LOCK:
        while len(_REFERENCE_CACHE) >= _REFERENCE_CACHE_SIZE:
            _REFERENCE_CACHE.pop(next(iter(_REFERENCE_CACHE)))
        _REFERENCE_CACHE[key] = (threshold, mean)


def _random_reference(n, k, iterations, variant, seed, percentile):
    """Percentile and mean of the random eigenvalues; memoised for integer seeds (same draws).

    Thread-safe: a key being drawn in another thread (e.g. a background prefetch) is waited for, not
    drawn twice.
    """
    key = (n, k, iterations, variant, seed, percentile)
    seeded = isinstance(seed, (int, np.integer)) and not isinstance(seed, bool)
    if not seeded:
        rand = random_correlation_eigenvalues(n, k, iterations=iterations, variant=variant, seed=seed)
        return np.percentile(rand, percentile, axis=0), rand.mean(axis=0)
    with _REFERENCE_LOCK:
        hit = _REFERENCE_CACHE.get(key)
        lock = None if hit is not None else _REFERENCE_INFLIGHT.setdefault(key, threading.Lock())
    if lock is not None:
        with lock:  # one drawing per key; a second caller waits for it
            with _REFERENCE_LOCK:
                hit = _REFERENCE_CACHE.get(key)
            if hit is None:
                try:
                    rand = random_correlation_eigenvalues(n, k, iterations=iterations, variant=variant, seed=seed)
                    hit = (np.percentile(rand, percentile, axis=0), rand.mean(axis=0))
                    _remember(key, *hit)
                finally:
                    with _REFERENCE_LOCK:
                        _REFERENCE_INFLIGHT.pop(key, None)
    threshold, mean = hit  # type: ignore[misc]  # set by the drawing above or by another thread
    return threshold.copy(), mean.copy()


def has_random_reference(n: int, k: int, *, iterations: int = 500, variant: str = "components", seed: int = 0,
                         percentile: float = 95) -> bool:
    """Whether :func:`random_reference` of these arguments is memoised (answered without drawing)."""
    with _REFERENCE_LOCK:
        return (int(n), int(k), int(iterations), variant, seed, float(percentile)) in _REFERENCE_CACHE


def random_reference(n: int, k: int, *, iterations: int = 500, variant: str = "components", seed: int = 0,
                     percentile: float = 95) -> tuple[np.ndarray, np.ndarray]:
    """The random-data thresholds and means :func:`parallel_analysis` compares with (memoised, integer seeds)."""
    return _random_reference(int(n), int(k), int(iterations), variant, seed, float(percentile))


def install_random_reference(n: int, k: int, *, iterations: int, variant: str, seed: int, percentile: float,
                             threshold: ArrayLike, mean: ArrayLike) -> None:
    """Put thresholds made elsewhere (:func:`random_reference` in another process) into this process' memo.

    They depend only on (n, k, iterations, variant, seed, percentile), never on the data: a resampling run
    computes them once and hands them to each worker process.
    """
    _remember((int(n), int(k), int(iterations), variant, seed, float(percentile)),
              np.array(threshold, dtype=float), np.array(mean, dtype=float))


def parallel_analysis(n: int, k: int, *, observed_eigenvalues: ArrayLike | None = None,
                      R: ArrayLike | None = None, iterations: int = 500,
                      percentile: float = 95, variant: str = "components", seed: int | None = None
                      ) -> ParallelResult:
    """Horn's parallel analysis against random normal data of the same size.

    Parameters
    ----------
    n, k : int
        Respondents and items.
    observed_eigenvalues : array-like (k,), optional
        Observed eigenvalues; used as given (they must match ``variant``).
    R : array-like (k, k), optional
        Observed correlation matrix; when given, the observed eigenvalues are computed from it
        for the chosen variant (``observed_eigenvalues`` is then ignored).
    iterations : int
        Number of random matrices.
    percentile : float
        Threshold percentile of the random eigenvalues at each position (Glorfeld 1995: 95).
    variant : {"components", "factors"}
        ``"components"``: eigenvalues of R.  ``"factors"``: eigenvalues of the reduced matrix
        with squared multiple correlations on the diagonal, for observed and random alike.
    seed : int, optional
        Seed for ``numpy.random.default_rng``; the same seed gives the same result.  With an
        integer seed the random thresholds are memoised per (n, k, iterations, variant, seed,
        percentile), so a repeated request does not redraw them.

    Returns
    -------
    ParallelResult
        ``n_factors`` counts the leading observed eigenvalues that exceed their threshold,
        stopping at the first that does not.

    References
    ----------
    Horn, J. L. (1965). A rationale and test for the number of factors in factor analysis.
    Psychometrika, 30(2), 179-185.
    Glorfeld, L. W. (1995). An improvement on Horn's parallel analysis methodology for selecting
    the correct number of factors to retain. Educational and Psychological Measurement, 55(3),
    377-393.
    """
    if variant not in ("components", "factors"):
        raise InputError(f"Unknown parallel-analysis variant {variant!r}; use 'components' or 'factors'.",
                         code="bad_option", details={"variant": variant})
    if not (0 < percentile < 100):
        raise InputError(f"percentile must be between 0 and 100; got {percentile!r}.", code="bad_option",
                         details={"percentile": percentile})
    n = _check_n(n, k)
    if not isinstance(iterations, (int, np.integer)) or isinstance(iterations, bool) or iterations < 1:
        raise InputError(f"iterations must be a positive integer; got {iterations!r}.", code="bad_option",
                         details={"iterations": str(iterations)})
    if R is not None:
        A = _corr(R)
        if A.shape[0] != k:
            raise InputError(f"R has {A.shape[0]} items but k = {k}.", code="bad_shape")
        if variant == "factors":
            A = A.copy()
            np.fill_diagonal(A, smc(A))
        observed = eigvalsh(A)[::-1]
    elif observed_eigenvalues is not None:
        observed = np.sort(np.asarray(observed_eigenvalues, dtype=float))[::-1]
        if observed.shape != (k,):
            raise InputError(f"Expected {k} observed eigenvalues; got {observed.size}.", code="bad_shape")
    else:
        raise InputError("Parallel analysis needs the observed eigenvalues or the correlation matrix.",
                         code="bad_input")
    threshold, random_mean = _random_reference(int(n), int(k), int(iterations), variant, seed,
                                               float(percentile))
    above = observed > threshold
    n_factors = int(k if above.all() else np.argmin(above))
    return ParallelResult(n_factors=n_factors, observed=observed, threshold=threshold, variant=variant,
                          random_mean=random_mean, iterations=int(iterations),
                          percentile=float(percentile), seed=seed)


def permuted_ordinal_data(X: ArrayLike, *, seed: int | np.random.Generator | None = None) -> np.ndarray:
    """Random ordinal data with exactly the observed marginal distributions.

    Each column of ``X`` (respondents x items, NaN for missing) is permuted independently, so every item
    keeps its answers (and its missing count) while the items become independent.  ``seed`` is passed to
    ``numpy.random.default_rng`` (a Generator is used as it is).

    References
    ----------
    Garrido, L. E., Abad, F. J., & Ponsoda, V. (2013). A new look at Horn's parallel analysis with
    ordinal variables. Psychological Methods, 18(4), 454-474.
    """
    arr = np.asarray(X, dtype=float)
    if arr.ndim != 2:
        raise InputError(f"Expected a respondents x items table, got {arr.ndim} dimension(s).", code="bad_shape",
                         details={"shape": list(arr.shape)})
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    return rng.permuted(arr, axis=0)


def _polychoric_eigenvalues(X: np.ndarray, variant: str, missing: str, max_categories: int,
                            R=None, zero_cell_correction: float = 0.0) -> np.ndarray:
    A = (polychoric_matrix(X, missing=missing, max_categories=max_categories,
                           zero_cell_correction=zero_cell_correction).matrix if R is None else R)
    if variant == "factors":
        A = A.copy()
        np.fill_diagonal(A, smc(A))
    return np.linalg.eigvalsh(A)[::-1]


def parallel_analysis_polychoric(X: ArrayLike, *, R: ArrayLike | None = None, iterations: int = 100,
                                 percentile: float = 95,
                                 variant: str = "components", seed: int | None = None,
                                 missing: str = "pairwise", max_categories: int = 10,
                                 zero_cell_correction: float = 0.0) -> ParallelResult:
    """Parallel analysis for polychoric correlations against permuted ordinal data.

    Parameters
    ----------
    X : array-like or DataFrame (n, k)
        Ordinal responses, NaN for missing.
    R : array-like (k, k), optional
        The observed polychoric matrix of ``X`` (e.g. a cached one); computed from ``X`` when omitted.
    iterations : int
        Number of random data sets (each needs a polychoric matrix, so fewer than for normal data).
    percentile : float
        Threshold percentile of the random eigenvalues at each position.
    variant : {"components", "factors"}
        Eigenvalues of the correlation matrices, or of the reduced matrices with squared multiple
        correlations on the diagonal (observed and random alike).
    seed : int, optional
        Seed for ``numpy.random.default_rng``; the same seed gives the same result.
    missing : {"pairwise", "listwise"}
        Missing-data policy of the polychoric matrices; listwise drops incomplete rows before permuting.
    max_categories, zero_cell_correction :
        Passed to :func:`server.stats.correlation.polychoric_matrix` (use the observed matrix's correction).

    Returns
    -------
    ParallelResult
        With ``method = "permuted_ordinal"``; ``n_factors`` counts the leading observed eigenvalues above
        their threshold, stopping at the first that is not.

    Notes
    -----
    Each random data set permutes every item's column independently (:func:`permuted_ordinal_data`): the
    marginal distributions are kept exactly and the items are independent in the population.  Its
    polychoric matrix (smoothed to positive definite as the observed one) gives the reference
    eigenvalues, so the reference carries the same sampling behaviour of polychoric estimates, sparse
    categories included, instead of that of Pearson correlations of normal data (Garrido, Abad &
    Ponsoda 2013).

    References
    ----------
    Horn, J. L. (1965). Psychometrika, 30(2), 179-185.
    Garrido, L. E., Abad, F. J., & Ponsoda, V. (2013). A new look at Horn's parallel analysis with
    ordinal variables. Psychological Methods, 18(4), 454-474.
    """
    if variant not in ("components", "factors"):
        raise InputError(f"Unknown parallel-analysis variant {variant!r}; use 'components' or 'factors'.",
                         code="bad_option", details={"variant": variant})
    if not (0 < percentile < 100):
        raise InputError(f"percentile must be between 0 and 100; got {percentile!r}.", code="bad_option",
                         details={"percentile": percentile})
    if not isinstance(iterations, (int, np.integer)) or isinstance(iterations, bool) or iterations < 1:
        raise InputError(f"iterations must be a positive integer; got {iterations!r}.", code="bad_option",
                         details={"iterations": str(iterations)})
    if missing not in ("pairwise", "listwise"):
        raise InputError(f"Unknown missing-data policy {missing!r}; use 'pairwise' or 'listwise'.",
                         code="bad_option", details={"missing": missing})
    try:
        arr = np.asarray(X.to_numpy(dtype=float, na_value=np.nan) if hasattr(X, "to_numpy") else X, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError("The responses contain values that are not numbers.", code="not_numeric") from exc
    if arr.ndim != 2:
        raise InputError(f"Expected a respondents x items table, got {arr.ndim} dimension(s).", code="bad_shape",
                         details={"shape": list(arr.shape)})
    if missing == "listwise":
        arr = arr[~np.isnan(arr).any(axis=1)]
    k = arr.shape[1]
    _check_n(arr.shape[0], k)
    if R is not None:
        R = _corr(R)
        if R.shape[0] != k:
            raise InputError(f"R has {R.shape[0]} items but the responses have {k}.", code="bad_shape",
                             details={"items_R": int(R.shape[0]), "items": int(k)})
    observed = _polychoric_eigenvalues(arr, variant, missing, max_categories, R, zero_cell_correction)
    rng = np.random.default_rng(seed)
    rand = np.empty((int(iterations), k))
    for b in range(int(iterations)):
        rand[b] = _polychoric_eigenvalues(permuted_ordinal_data(arr, seed=rng), variant, missing, max_categories,
                                          zero_cell_correction=zero_cell_correction)
    threshold = np.percentile(rand, percentile, axis=0)
    above = observed > threshold
    n_factors = int(k if above.all() else np.argmin(above))
    return ParallelResult(n_factors=n_factors, observed=observed, threshold=threshold, variant=variant,
                          random_mean=rand.mean(axis=0), iterations=int(iterations),
                          percentile=float(percentile), seed=seed, method="permuted_ordinal")


# ----------------------------------------------------------------------------------------------
# MAP

_MAP_BLOCK = 2_000_000  # numbers in one stack of partial covariances (MAP)
_MAP_SEQUENTIAL = 100  # above this many items MAP goes one m at a time (_map_values_sequential), below in stacks


def _map_values(A: np.ndarray, load: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """MAP's mean squared and fourth-power off-diagonal partial correlations for m = 0..k-1 components.

    Many m at once: within a block of m the partial covariances ``A - A_m A_m'`` are a cumulative sum of the
    components' outer products (blocks keep the stack near 2 million numbers). From the first m with a
    partial variance <= 1e-12 on, the values are NaN.
    """
    k = A.shape[0]
    if k > _MAP_SEQUENTIAL:
        return _map_values_sequential(A, load)
    denom = k * (k - 1)
    values = np.full(k, np.nan)
    values4 = np.full(k, np.nan)
    off = ~np.eye(k, dtype=bool)
    values[0] = np.sum(np.where(off, A, 0.0) ** 2) / denom  # m = 0: R itself
    values4[0] = np.sum(np.where(off, A, 0.0) ** 4) / denom
    idx = np.arange(k)
    step = max(1, _MAP_BLOCK // (k * k))
    for m0 in range(1, k, step):
        m1 = min(k, m0 + step)
        # C[j] = A - load[:, :m0 + j] load[:, :m0 + j]'  (m = m0 + j)
        comps = load[:, m0 - 1:m1 - 1].T
        C = comps[:, :, None] * comps[:, None, :]
        if m0 > 1:
            C[0] += load[:, :m0 - 1] @ load[:, :m0 - 1].T
        for j in range(1, m1 - m0):  # the cumulative sum (np.cumsum along the first axis is slower)
            C[j] += C[j - 1]
        np.subtract(A, C, out=C)
        d = np.diagonal(C, axis1=1, axis2=2).copy()
        bad = np.flatnonzero(np.any(d <= 1e-12, axis=1))
        stop = int(bad[0]) if bad.size else m1 - m0
        s = 1.0 / np.sqrt(d[:stop])
        P = C[:stop]
        P *= s[:, :, None]
        P *= s[:, None, :]
        P *= P
        P[:, idx, idx] = 0.0
        values[m0:m0 + stop] = P.sum(axis=(1, 2)) / denom
        P *= P
        values4[m0:m0 + stop] = P.sum(axis=(1, 2)) / denom
        if bad.size:
            break
    return values, values4


def _map_values_sequential(A: np.ndarray, load: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_map_values` for many items: one m at a time, in place, with matrix-vector products.

    ``C`` loses one component's outer product per m (BLAS ``dger``, in place); with ``w = 1 / diag(C)`` the
    squared partial correlations are ``C*C`` scaled by ``w_i w_j``, so their sum is ``w'(C*C)w`` and the sum of
    fourth powers ``(w*w)'(C*C)^2(w*w)``, less the diagonal's ones: five passes over a k x k matrix per m, where
    the stacked form makes and scales a k x k matrix per m in memory (about five times slower at 250 items).
    The last m (``C`` of rank one: every partial correlation is +-1, and its value is rounding) is computed as
    the stacked form computes it, so its digits stay those of :func:`_map_values`.
    """
    k = A.shape[0]
    denom = k * (k - 1)
    values = np.full(k, np.nan)
    values4 = np.full(k, np.nan)
    C = np.array(A, dtype=float, order="F")
    Q = np.empty_like(C)
    for m in range(k - 1):
        if m:
            a = load[:, m - 1]
            C = blas.dger(-1.0, a, a, a=C, overwrite_a=1)
        d = np.diagonal(C).copy()
        if m and np.any(d <= 1e-12):
            return values, values4
        w = 1.0 / d
        one = d * w  # the diagonal's partial correlations: ones, up to rounding
        one *= one
        np.multiply(C, C, out=Q)
        values[m] = (w @ (Q @ w) - one.sum()) / denom
        np.multiply(Q, Q, out=Q)
        w *= w
        values4[m] = (w @ (Q @ w) - (one * one).sum()) / denom
    # m = k - 1 as the stacked form: A less (the block start's product + the block's outer products in turn)
    m = k - 1
    step = max(1, _MAP_BLOCK // (k * k))
    m0 = 1 + ((m - 1) // step) * step
    T = np.outer(load[:, m0 - 1], load[:, m0 - 1])
    if m0 > 1:
        T += load[:, :m0 - 1] @ load[:, :m0 - 1].T
    for j in range(m0, m):
        T = np.outer(load[:, j], load[:, j]) + T
    P = np.subtract(A, T)[None]
    d = np.diagonal(P, axis1=1, axis2=2).copy()
    if np.any(d <= 1e-12):
        return values, values4
    s = 1.0 / np.sqrt(d)
    P *= s[:, :, None]
    P *= s[:, None, :]
    P *= P
    P[:, np.arange(k), np.arange(k)] = 0.0
    values[m] = P.sum(axis=(1, 2))[0] / denom
    P *= P
    values4[m] = P.sum(axis=(1, 2))[0] / denom
    return values, values4


def velicer_map(R: ArrayLike) -> MAPResult:
    """Velicer's minimum average partial (MAP) test, squared and fourth-power versions.

    Parameters
    ----------
    R : array-like (k, k)
        Correlation matrix.

    Returns
    -------
    MAPResult

    Notes
    -----
    With ``A_m`` the loadings of the first m principal components (eigenvectors times the square
    roots of their eigenvalues), the partial covariance is ``C_m = R - A_m A_m'`` and the partial
    correlations ``C_m,ij / sqrt(C_m,ii C_m,jj)``.  ``values[m]`` is the mean squared
    off-diagonal partial correlation (m = 0 is R itself), for m = 0..k-1; the number of
    components is the m at the minimum (O'Connor's 2000 programs).  ``values4`` uses fourth
    powers (Velicer, Eaton & Fava 2000).

    References
    ----------
    Velicer, W. F. (1976). Determining the number of components from the matrix of partial
    correlations. Psychometrika, 41(3), 321-327.
    O'Connor, B. P. (2000). SPSS and SAS programs for determining the number of components using
    parallel analysis and Velicer's MAP test. Behavior Research Methods, Instruments, &
    Computers, 32(3), 396-402.
    """
    A = _corr(R)
    # scipy's eigh: numpy's eigenvector routine slows down tenfold and more while other processes keep the
    # cores busy (measured interleaved at 60 items: 18 ms against 1.7 ms)
    w, V = linalg.eigh(A, check_finite=False)
    order = np.argsort(w)[::-1]
    w, V = w[order], V[:, order]
    load = V * np.sqrt(np.maximum(w, 0.0))
    values, values4 = _map_values(A, load)
    return MAPResult(n_factors=int(np.nanargmin(values)), values=values, values4=values4,
                     n_factors4=int(np.nanargmin(values4)))


# ----------------------------------------------------------------------------------------------
# JSON-ready summaries for the analysis endpoint

def _floats(a, nd=6):
    return [round(x, nd) if math.isfinite(x) else None for x in np.asarray(a, dtype=float).ravel().tolist()]


def retention_summary(R: ArrayLike, n: int, *, iterations: int = 500, seed: int | None = None,
                      variant: str = "components", percentile: float = 95,
                      parallel: ParallelResult | None = None) -> dict:
    """How many factors: parallel analysis, MAP and Kaiser, ready for JSON.

    ``parallel``: a parallel analysis already made (e.g. :func:`parallel_analysis_polychoric`) used instead
    of :func:`parallel_analysis` against random normal data; ``parallel.method`` says which it was.

    Returns
    -------
    dict
        ``{"parallel": {"n_factors", "observed", "threshold", "random_mean", "variant",
        "iterations", "percentile", "seed"}, "map": {"n_factors", "values", "n_factors4",
        "values4"}, "kaiser": {"n_factors", "eigenvalues"}, "suggested": int}`` where
        ``suggested`` is parallel analysis's count, at least 1.
    """
    A = _corr(R)
    k = A.shape[0]
    pa = parallel if parallel is not None else parallel_analysis(n, k, R=A, iterations=iterations,
                                                                 percentile=percentile, variant=variant, seed=seed)
    mp = velicer_map(A)
    eigs = eigvalsh(A)[::-1]
    return {
        "parallel": {"n_factors": pa.n_factors, "observed": _floats(pa.observed),
                     "threshold": _floats(pa.threshold), "random_mean": _floats(pa.random_mean),
                     "variant": pa.variant, "iterations": pa.iterations, "percentile": pa.percentile,
                     "seed": pa.seed if parallel is not None else seed, "method": pa.method},
        "map": {"n_factors": mp.n_factors, "values": _floats(mp.values, 8),
                "n_factors4": mp.n_factors4, "values4": _floats(mp.values4, 8)},
        "kaiser": {"n_factors": kaiser_count(eigs), "eigenvalues": _floats(eigs)},
        "suggested": max(1, pa.n_factors),
    }


def factorability_summary(R: ArrayLike, n: int, *, names: Sequence[str] | None = None) -> dict:
    """KMO, MSA per item, Bartlett's test and the determinant, ready for JSON.

    Returns
    -------
    dict
        ``{"kmo": float, "msa": {item: float} (list when names is None),
        "bartlett": {"chi2", "df", "p"}, "determinant": float}``.
    """
    A = _corr(R)
    k_res = kmo(A, names=names)
    chi2, df, p = bartlett_sphericity(A, n, names=names)
    msa = _floats(k_res.msa)
    if names is not None:
        msa = dict(zip([str(s) for s in names], msa))
    return {
        "kmo": round(k_res.kmo, 6),
        "msa": msa,
        "bartlett": {"chi2": round(chi2, 4), "df": df, "p": float(p)},
        "determinant": _det(A),
    }
