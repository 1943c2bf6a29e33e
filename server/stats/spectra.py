"""Linear algebra of one item matrix: eigenvalues (remembered for the few matrices decomposed last), inverse,
Cholesky factor and log-determinant, by scipy's LAPACK above a few items.

One analysis asks for the eigenvalues of the same correlation matrix in several sections (smoothing to positive
definite, the extraction's singularity check, KMO's inverse, parallel analysis, the Kaiser count). They are
computed once per content: a matrix equal to one of the last few decomposed, entry for entry, gets a copy of the
same eigenvalues (the digits of a fresh call).

Why scipy: numpy's bundled LAPACK runs ten to a hundred times slower while other threads or processes keep
the cores busy (measured on this project's two-core machine: a 400 x 400 ``numpy.linalg.eigh`` next to one
busy Python thread, 6.6 s a call against 0.05 s for scipy's), and an analysis runs its factor and item sections
in two threads. Below ``_SMALL`` items numpy's lower call overhead wins and the slowdown does not show.
"""
from __future__ import annotations

import threading
import warnings

import numpy as np
from numpy.typing import ArrayLike
from scipy import linalg

__all__ = ["cholesky", "eigvalsh", "inv", "slogdet"]

_KEEP = 4        # matrices remembered
_MIN_SIZE = 32   # below this a decomposition costs less than looking it up
_SMALL = 17      # from this many rows on, scipy's LAPACK
_lock = threading.Lock()
_recent: list[tuple[np.ndarray, np.ndarray]] = []


def _eigvalsh(M: np.ndarray) -> np.ndarray:
    if M.ndim != 2 or M.shape[0] < _SMALL:
        return np.linalg.eigvalsh(M)
    return linalg.eigh(M, eigvals_only=True, check_finite=False)


def inv(A: ArrayLike) -> np.ndarray:
    """The inverse of a square matrix (``numpy.linalg.inv``); raises ``numpy.linalg.LinAlgError`` if singular."""
    M = np.asarray(A, dtype=float)
    if M.ndim != 2 or M.shape[0] < _SMALL:
        return np.linalg.inv(M)
    return linalg.inv(M, check_finite=False)


def cholesky(A: ArrayLike) -> np.ndarray:
    """The lower Cholesky factor (``numpy.linalg.cholesky``); ``numpy.linalg.LinAlgError`` if not positive
    definite."""
    M = np.asarray(A, dtype=float)
    if M.ndim != 2 or M.shape[0] < _SMALL:
        return np.linalg.cholesky(M)
    return linalg.cholesky(M, lower=True, check_finite=False)


def slogdet(A: ArrayLike) -> tuple[float, float]:
    """Sign and natural log of the absolute determinant (``numpy.linalg.slogdet``), from an LU factorisation:
    ``(0.0, -inf)`` for a singular matrix."""
    M = np.asarray(A, dtype=float)
    if M.ndim != 2 or M.shape[0] < _SMALL:
        sign, logdet = np.linalg.slogdet(M)
        return float(sign), float(logdet)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # scipy warns of an exactly singular matrix; the zero sign says it
        lu, piv = linalg.lu_factor(M, check_finite=False)
    d = np.diag(lu)
    if not np.all(d != 0):
        return 0.0, float("-inf")
    swaps = int(np.count_nonzero(piv != np.arange(len(piv))))
    sign = (-1.0) ** swaps * float(np.prod(np.sign(d)))
    return sign, float(np.sum(np.log(np.abs(d))))


def eigvalsh(A: ArrayLike) -> np.ndarray:
    """The eigenvalues of a symmetric matrix (ascending, ``numpy.linalg.eigvalsh``), computed once for a matrix
    of the same content."""
    M = np.asarray(A, dtype=float)
    if M.ndim != 2 or M.shape[0] < _MIN_SIZE:
        return _eigvalsh(M)
    with _lock:
        for i, (seen, w) in enumerate(_recent):
            if seen.shape == M.shape and np.array_equal(seen, M):
                _recent.insert(0, _recent.pop(i))
                return w.copy()
    w = _eigvalsh(M)
    with _lock:
        _recent.insert(0, (M.copy(), w.copy()))
        del _recent[_KEEP:]
    return w
