"""Factor rotations: gradient projection (oblimin family, geomin, quartimax), varimax and promax.

Every rotation takes an unrotated loading matrix ``A`` (items x factors) and returns a
:class:`RotationResult` in one convention, the one of Bernaards & Jennrich (2005)::

    pattern = A @ inv(T).T        phi = T.T @ T        structure = pattern @ phi

For orthogonal rotations ``T`` is orthogonal, so ``pattern = A @ T`` and ``phi`` is the identity.
Promax is expressed in the same convention (``T = inv(U).T`` for the promax transformation ``U``).

References
----------
Jennrich, R. I. (2001). A simple general procedure for orthogonal rotation. Psychometrika, 66, 289-306.
Jennrich, R. I. (2002). A simple general method for oblique rotation. Psychometrika, 67, 7-19.
Bernaards, C. A., & Jennrich, R. I. (2005). Gradient projection algorithms and software for arbitrary
    rotation criteria in factor analysis. Educational and Psychological Measurement, 65, 676-696.
Kaiser, H. F. (1958). The varimax criterion for analytic rotation in factor analysis. Psychometrika,
    23, 187-200.
Hendrickson, A. E., & White, P. O. (1964). Promax: a quick method for rotation to oblique simple
    structure. British Journal of Statistical Psychology, 17, 65-70.
Browne, M. W. (2001). An overview of analytic rotation in exploratory factor analysis. Multivariate
    Behavioral Research, 36, 111-150.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike

from .errors import InputError
from .notes import Note, note

__all__ = [
    "OBLIQUE",
    "ROTATIONS",
    "RotationResult",
    "geomin",
    "oblimin",
    "promax",
    "quartimax",
    "rotate",
    "varimax",
]

#: rotation names accepted by :func:`rotate`
ROTATIONS = ("oblimin", "quartimin", "geomin", "quartimax", "varimax", "promax", "none")
#: the oblique ones (factors may correlate)
OBLIQUE = ("oblimin", "quartimin", "geomin", "promax")

_MAX_ITER = 1000
_TOL = 1e-6


@dataclass(frozen=True)
class RotationResult:
    """A rotated solution.

    Attributes
    ----------
    pattern : ndarray (k x m)
        Rotated pattern loadings (regression weights of items on factors).
    phi : ndarray (m x m)
        Factor correlations (identity for orthogonal rotations).
    T : ndarray (m x m)
        Rotation matrix, ``pattern = A @ inv(T).T`` and ``phi = T.T @ T``.
    converged : bool
    iterations : int
        Iterations of the best start (of the varimax step for promax).
    criterion : float
        Value of the rotation criterion at the solution (NaN for promax, which has none).
    warnings : list of Note
    method : str
    """

    pattern: np.ndarray
    phi: np.ndarray
    T: np.ndarray
    converged: bool
    iterations: int
    criterion: float
    warnings: list[Note] = field(default_factory=list)
    method: str = ""

    @property
    def structure(self) -> np.ndarray:
        """Structure loadings (item-factor correlations), ``pattern @ phi``."""
        return self.pattern @ self.phi


# --------------------------------------------------------------------------- criteria
# Each returns (Q, dQ/dL).  Formulas as in GPArotation (Bernaards & Jennrich 2005).

def _vgq_oblimin(L: np.ndarray, gamma: float) -> tuple[float, np.ndarray]:
    L2 = L * L
    X = L2.sum(axis=1, keepdims=True) - L2  # L2 (11' - I): each row's sum over the other factors
    if gamma != 0:
        X = X - gamma * X.mean(axis=0, keepdims=True)
    return float(np.sum(L2 * X) / 4.0), L * X


def _vgq_geomin(L: np.ndarray, epsilon: float) -> tuple[float, np.ndarray]:
    m = L.shape[1]
    L2 = L * L + epsilon
    pro = np.exp(np.log(L2).sum(axis=1) / m)
    return float(pro.sum()), (2.0 / m) * L / L2 * pro[:, None]


def _vgq_quartimax(L: np.ndarray) -> tuple[float, np.ndarray]:
    return float(-np.sum(L ** 4) / 4.0), -(L ** 3)


# --------------------------------------------------------------------------- GPA engines

def _gpa_orthogonal(A: np.ndarray, vgq: Callable, T0: np.ndarray, max_iter: int, tol: float):
    """Jennrich (2001) gradient projection, orthogonal (GPForth)."""
    T = T0
    L = A @ T
    Q, Gq = vgq(L)
    G = A.T @ Gq
    al = 1.0
    converged = False
    it = 0
    for it in range(max_iter + 1):  # noqa: B007  (the count is read after the loop)
        M = T.T @ G
        S = (M + M.T) / 2.0
        Gp = G - T @ S
        s = float(np.sqrt(np.sum(Gp * Gp)))
        if s < tol:
            converged = True
            break
        al *= 2.0
        for _ in range(11):
            U, _d, Vt = np.linalg.svd(T - al * Gp)
            Tt = U @ Vt
            Lt = A @ Tt
            Qt, Gqt = vgq(Lt)
            if Qt < Q - 0.5 * s * s * al:
                break
            al /= 2.0
        T, L, Q = Tt, Lt, Qt
        G = A.T @ Gqt
    return T, L, Q, converged, it


def _gpa_oblique(A: np.ndarray, vgq: Callable, T0: np.ndarray, max_iter: int, tol: float):
    """Jennrich (2002) gradient projection, oblique (GPFoblq)."""
    T = T0
    Ti = np.linalg.inv(T)
    L = A @ Ti.T
    Q, Gq = vgq(L)
    G = -(L.T @ Gq @ Ti).T
    al = 1.0
    converged = False
    it = 0
    for it in range(max_iter + 1):  # noqa: B007  (the count is read after the loop)
        Gp = G - T * np.sum(T * G, axis=0)[None, :]
        s = float(np.sqrt(np.sum(Gp * Gp)))
        if s < tol:
            converged = True
            break
        al *= 2.0
        for _ in range(11):
            X = T - al * Gp
            Tt = X / np.sqrt(np.sum(X * X, axis=0))[None, :]
            try:
                Tti = np.linalg.inv(Tt)
            except np.linalg.LinAlgError:
                al /= 2.0
                continue
            Lt = A @ Tti.T
            Qt, Gqt = vgq(Lt)
            if Qt < Q - 0.5 * s * s * al:
                break
            al /= 2.0
        T, Ti, L, Q = Tt, Tti, Lt, Qt
        G = -(L.T @ Gqt @ Ti).T
    return T, L, Q, converged, it


def _random_orthogonal(rng: np.random.Generator, m: int) -> np.ndarray:
    q, r = np.linalg.qr(rng.standard_normal((m, m)))
    return q * np.sign(np.diag(r))[None, :]


def _check_loadings(A) -> np.ndarray:
    A = np.asarray(A, dtype=float)
    if A.ndim != 2 or A.shape[0] < 1 or A.shape[1] < 1:
        raise InputError(f"A loading matrix must be items x factors; got shape {A.shape}.",
                         code="bad_loadings", details={"shape": list(A.shape)})
    if not np.all(np.isfinite(A)):
        bad = np.argwhere(~np.isfinite(A))[0]
        raise InputError(f"The loading matrix has a missing or infinite value (row {int(bad[0])}, "
                         f"factor {int(bad[1])}).", code="bad_loadings",
                         details={"row": int(bad[0]), "factor": int(bad[1])})
    return A


def _kaiser_weights(A: np.ndarray) -> np.ndarray:
    w = np.sqrt(np.sum(A * A, axis=1))
    return np.where(w > 0, w, 1.0)


def _warm_rotation(An: np.ndarray, target: np.ndarray, rows: np.ndarray | None) -> np.ndarray | None:
    """An oblique start ``T`` whose pattern ``An @ inv(T).T`` is the least-squares fit of ``target`` (a
    solution of similar items, e.g. the whole pool's, rows ``rows`` of ``An``); columns of unit length.
    None when the fit is degenerate."""
    X = An if rows is None else An[rows]
    if target.shape != (X.shape[0], An.shape[1]) or not np.all(np.isfinite(target)):
        return None
    B = np.linalg.lstsq(X, target, rcond=None)[0]  # inv(T).T
    if not np.all(np.isfinite(B)) or np.linalg.cond(B) > 1e8:
        return None
    T = np.linalg.inv(B).T
    norms = np.sqrt(np.sum(T * T, axis=0))
    return T / norms[None, :] if np.all(norms > 0) else None


_WARM_MAX_STEPS = 100  # iterations within which the identity and warm starts must converge to skip the others


def _same_loadings(L1: np.ndarray, L2: np.ndarray, atol: float = 1e-4) -> bool:
    """Whether two rotated loading matrices are one solution, up to the order and sign of their columns."""
    m = L1.shape[1]
    n1 = np.sqrt(np.sum(L1 * L1, axis=0))
    n2 = np.sqrt(np.sum(L2 * L2, axis=0))
    if not (np.all(n1 > 0) and np.all(n2 > 0)):
        return False
    C = (L1.T @ L2) / np.outer(n1, n2)
    match = np.argmax(np.abs(C), axis=1)
    if len(set(match.tolist())) != m:
        return False
    signs = np.sign(C[np.arange(m), match])
    return bool(np.abs(L1 - L2[:, match] * signs[None, :]).max() <= atol)


def _gpa(A, vgq, *, oblique: bool, name: str, normalize: bool, random_starts: int, seed: int,
         max_iter: int, tol: float, warm: tuple[np.ndarray, np.ndarray | None] | None = None) -> RotationResult:
    A = _check_loadings(A)
    k, m = A.shape
    if m == 1:
        return RotationResult(A.copy(), np.eye(1), np.eye(1), True, 0, float(vgq(A)[0]), [], name)
    w = _kaiser_weights(A) if normalize else np.ones(k)
    An = A / w[:, None]
    rng = np.random.default_rng(seed)
    starts = [np.eye(m)] + [_random_orthogonal(rng, m) for _ in range(max(0, random_starts - 1))]
    engine = _gpa_oblique if oblique else _gpa_orthogonal
    done = {}
    if warm is not None and oblique and len(starts) > 1:
        # The identity start, then one from a solution of similar items (the whole pool's, say). When both
        # converge quickly (a well-defined optimum: a flat criterion takes hundreds of steps) to the same
        # loadings, up to the order and sign of the factors, the random starts are left out and the identity
        # start's solution is kept, as the random starts keep it unless one finds a lower criterion; otherwise
        # every start runs as usual.
        target, rows = warm
        T_w = _warm_rotation(An, np.asarray(target, dtype=float) / (w if rows is None else w[rows])[:, None], rows)
        if T_w is not None:
            first = engine(An, vgq, starts[0], max_iter, tol)
            done[0] = first
            if first[3] and first[4] <= _WARM_MAX_STEPS:
                _, L_w, Q_w, conv_w, it_w = engine(An, vgq, T_w, max_iter, tol)
                if (conv_w and it_w <= _WARM_MAX_STEPS and not Q_w < first[2] - 1e-9 * (1.0 + abs(first[2]))
                        and _same_loadings(first[1], L_w)):
                    starts = starts[:1]
    best = None
    n_conv = 0
    for s_, T0 in enumerate(starts):
        T, L, Q, conv, it = done[s_] if s_ in done else engine(An, vgq, T0, max_iter, tol)
        n_conv += conv
        # prefer converged starts, then a clearly lower criterion (ties keep the earlier start, so the
        # identity start wins among reflections/permutations of the same optimum)
        if (best is None or (conv and not best[4])
                or (conv == best[4] and Q < best[3] - 1e-9 * (1.0 + abs(best[3])))):
            best = (None, T, L, Q, conv, it)
    assert best is not None  # at least one start always runs
    _, T, L, Q, conv, it = best
    warnings: list[Note] = []
    if not conv:
        warnings.append(note("rotation_not_converged", f"The {name} rotation did not converge in {max_iter} "
                             f"iterations from any of {len(starts)} starts; the loadings shown are from the best "
                             f"start and may not be a true optimum."))
    elif n_conv < len(starts):
        warnings.append(note("rotation_some_starts_failed", f"The {name} rotation converged from {n_conv} of "
                             f"{len(starts)} starts; the best converged start is shown."))
    pattern = L * w[:, None]
    phi = T.T @ T if oblique else np.eye(m)
    return RotationResult(pattern, phi, T, bool(conv), int(it), float(Q), warnings, name)


# --------------------------------------------------------------------------- public rotations

def oblimin(A: ArrayLike, gamma: float = 0.0, *, normalize: bool = False, random_starts: int = 5, seed: int = 0,
            max_iter: int = _MAX_ITER, tol: float = _TOL,
            warm: tuple[np.ndarray, np.ndarray | None] | None = None) -> RotationResult:
    """Direct oblimin rotation by gradient projection; ``gamma=0`` is quartimin.

    Parameters
    ----------
    A : array_like, shape (k, m)
        Unrotated loadings.
    gamma : float
        Obliqueness parameter (0 = quartimin, 0.5 = biquartimin, 1 = covarimin).
    normalize : bool
        Kaiser row normalisation before rotating (off by default, as in GPArotation).
    random_starts : int
        Number of starts: the identity plus ``random_starts - 1`` random orthogonal matrices (seeded).
        The start with the lowest criterion among the converged ones is kept.
    seed : int
    max_iter, tol : int, float
        Iteration limit and tolerance on the norm of the projected gradient.
    warm : (target, rows), optional
        A rotated solution of similar items (``target``: its pattern on rows ``rows`` of ``A``, or on every
        row when ``rows`` is None), e.g. the whole pool's. A start fitted to it runs after the identity start;
        when both converge and it finds no lower criterion, the random starts are skipped (see ``_gpa``).

    Returns
    -------
    RotationResult

    Notes
    -----
    Criterion (Jennrich 2002): ``Q(L) = 1/4 * sum(L² * ((I - gamma/k * 11') L² N))`` with
    ``N = 11' - I``; gradient ``L * ((I - gamma/k 11') L² N)``.

    References
    ----------
    Jennrich, R. I. (2002). Psychometrika, 67, 7-19.
    Bernaards, C. A., & Jennrich, R. I. (2005). Educational and Psychological Measurement, 65, 676-696.
    """
    name = "quartimin" if gamma == 0 else f"oblimin (gamma {gamma:g})"
    return _gpa(A, lambda L: _vgq_oblimin(L, gamma), oblique=True, name=name, normalize=normalize,
                random_starts=random_starts, seed=seed, max_iter=max_iter, tol=tol, warm=warm)


def geomin(A: ArrayLike, epsilon: float = 0.01, *, normalize: bool = False, random_starts: int = 5, seed: int = 0,
           max_iter: int = _MAX_ITER, tol: float = _TOL,
           warm: tuple[np.ndarray, np.ndarray | None] | None = None) -> RotationResult:
    """Oblique geomin rotation by gradient projection.

    Notes
    -----
    Criterion (Yates 1987; Browne 2001): ``Q(L) = sum_i (prod_j (L_ij² + epsilon))^(1/m)``.
    Geomin has many local optima, hence the random starts.

    References
    ----------
    Browne, M. W. (2001). Multivariate Behavioral Research, 36, 111-150.
    Bernaards, C. A., & Jennrich, R. I. (2005). Educational and Psychological Measurement, 65, 676-696.
    """
    if epsilon <= 0:
        raise InputError(f"Geomin's epsilon must be positive; got {epsilon}.", code="bad_option",
                         details={"epsilon": epsilon})
    return _gpa(A, lambda L: _vgq_geomin(L, epsilon), oblique=True, name="geomin", normalize=normalize,
                random_starts=random_starts, seed=seed, max_iter=max_iter, tol=tol, warm=warm)


def quartimax(A: ArrayLike, *, normalize: bool = False, max_iter: int = _MAX_ITER, tol: float = _TOL) -> RotationResult:
    """Orthogonal quartimax rotation by gradient projection.

    Notes
    -----
    Criterion: ``Q(L) = -1/4 * sum(L⁴)`` (Carroll 1953; Neuhaus & Wrigley 1954).

    References
    ----------
    Jennrich, R. I. (2001). Psychometrika, 66, 289-306.
    """
    return _gpa(A, _vgq_quartimax, oblique=False, name="quartimax", normalize=normalize,
                random_starts=1, seed=0, max_iter=max_iter, tol=tol)


def varimax(A: ArrayLike, normalize: bool = True, *, max_iter: int = 2000, tol: float = 1e-13) -> RotationResult:
    """Varimax rotation (Kaiser 1958), with Kaiser row normalisation by default.

    Uses the classic SVD iteration (as R's ``stats::varimax``): with ``z = A T``,
    ``B = A'(z³ - z diag(1'z²)/k)``, ``T = U V'`` from the SVD of ``B``, until the sum of singular
    values stops growing by more than ``tol`` (relative).

    References
    ----------
    Kaiser, H. F. (1958). Psychometrika, 23, 187-200.
    """
    A = _check_loadings(A)
    k, m = A.shape
    if m == 1:
        return RotationResult(A.copy(), np.eye(1), np.eye(1), True, 0, float("nan"), [], "varimax")
    w = _kaiser_weights(A) if normalize else np.ones(k)
    X = A / w[:, None]
    T = np.eye(m)
    d = 0.0
    converged = False
    it = 0
    for it in range(1, max_iter + 1):  # noqa: B007  (the count is read after the loop)
        z = X @ T
        B = X.T @ (z ** 3 - z * (np.sum(z * z, axis=0) / k)[None, :])
        U, s, Vt = np.linalg.svd(B)
        T = U @ Vt
        d_old, d = d, float(np.sum(s))
        if d < d_old * (1 + tol):
            converged = True
            break
    z = X @ T
    crit = -float(np.sum((z ** 2 - np.mean(z ** 2, axis=0)) ** 2)) / 4.0
    warnings = [] if converged else [note("rotation_not_converged",
                                          f"The varimax rotation did not converge in {max_iter} iterations.")]
    return RotationResult(z * w[:, None], np.eye(m), T, converged, it, crit, warnings, "varimax")


def promax(A: ArrayLike, power: int = 4, *, normalize: bool = True, max_iter: int = _MAX_ITER) -> RotationResult:
    """Promax rotation (Hendrickson & White 1964) from a Kaiser-normalised varimax solution.

    Notes
    -----
    With ``V`` the varimax loadings of the row-normalised matrix, the target is
    ``P = V * |V|^(power-1)``; ``U = (V'V)^-1 V'P`` is rescaled so ``diag((U'U)^-1) = 1``;
    pattern ``= A T_v U`` (de-normalised), ``phi = U^-1 U^-T``. This follows SPSS and
    ``psych::kaiser(..., rotate="Promax")``: the target is built from the normalised loadings.

    References
    ----------
    Hendrickson, A. E., & White, P. O. (1964). British Journal of Statistical Psychology, 17, 65-70.
    """
    A = _check_loadings(A)
    k, m = A.shape
    if power < 1:
        raise InputError(f"The promax power must be at least 1; got {power}.", code="bad_option",
                         details={"power": power})
    if m == 1:
        return RotationResult(A.copy(), np.eye(1), np.eye(1), True, 0, float("nan"), [], "promax")
    w = _kaiser_weights(A) if normalize else np.ones(k)
    vm = varimax(A / w[:, None], normalize=False, max_iter=max_iter)
    V = vm.pattern
    P = V * np.abs(V) ** (power - 1)
    U = np.linalg.lstsq(V, P, rcond=None)[0]
    d = np.diag(np.linalg.pinv(U.T @ U))
    U = U * np.sqrt(d)[None, :]
    pattern = (V @ U) * w[:, None]
    Ufull = vm.T @ U              # A_normalised @ Ufull = pattern_normalised
    T = np.linalg.inv(Ufull).T    # so that pattern = A @ inv(T).T
    Ui = np.linalg.inv(U)
    phi = Ui @ Ui.T
    return RotationResult(pattern, phi, T, vm.converged, vm.iterations, float("nan"), list(vm.warnings),
                          "promax")


def rotate(A: ArrayLike, method: str = "oblimin", *, gamma: float = 0.0, epsilon: float = 0.01, power: int = 4,
           random_starts: int = 5, seed: int = 0,
           warm: tuple[np.ndarray, np.ndarray | None] | None = None) -> RotationResult:
    """Dispatch by name: one of :data:`ROTATIONS` (``"none"`` returns ``A`` unchanged); ``warm``: see
    :func:`oblimin` (used by oblimin, quartimin and geomin)."""
    A = _check_loadings(A)
    m = A.shape[1]
    if method == "none":
        return RotationResult(A.copy(), np.eye(m), np.eye(m), True, 0, float("nan"), [], "none")
    if method in ("oblimin", "quartimin"):
        return oblimin(A, gamma=gamma if method == "oblimin" else 0.0, random_starts=random_starts,
                       seed=seed, warm=warm)
    if method == "geomin":
        return geomin(A, epsilon=epsilon, random_starts=random_starts, seed=seed, warm=warm)
    if method == "quartimax":
        return quartimax(A)
    if method == "varimax":
        return varimax(A)
    if method == "promax":
        return promax(A, power=power)
    raise InputError(f"Unknown rotation '{method}'; choose one of {', '.join(ROTATIONS)}.",
                     code="bad_option", details={"rotation": method})
