"""Eigenvalues of a symmetric matrix, remembered for the few matrices decomposed last.

One analysis asks for the eigenvalues of the same correlation matrix in several sections (smoothing to positive
definite, the extraction's singularity check, KMO's inverse, parallel analysis, the Kaiser count). They are
computed once per content: a matrix equal to one of the last few decomposed, entry for entry, gets a copy of the
same eigenvalues (``numpy.linalg.eigvalsh``, so the digits are those of a fresh call).
"""
from __future__ import annotations

import threading

import numpy as np
from numpy.typing import ArrayLike

__all__ = ["eigvalsh"]

_KEEP = 4        # matrices remembered
_MIN_SIZE = 32   # below this a decomposition costs less than looking it up
_lock = threading.Lock()
_recent: list[tuple[np.ndarray, np.ndarray]] = []


def eigvalsh(A: ArrayLike) -> np.ndarray:
    """``numpy.linalg.eigvalsh(A)`` (ascending), computed once for a matrix of the same content."""
    M = np.asarray(A, dtype=float)
    if M.ndim != 2 or M.shape[0] < _MIN_SIZE:
        return np.linalg.eigvalsh(M)
    with _lock:
        for i, (seen, w) in enumerate(_recent):
            if seen.shape == M.shape and np.array_equal(seen, M):
                _recent.insert(0, _recent.pop(i))
                return w.copy()
    w = np.linalg.eigvalsh(M)
    with _lock:
        _recent.insert(0, (M.copy(), w.copy()))
        del _recent[_KEEP:]
    return w
