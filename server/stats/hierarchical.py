"""Hierarchical factor structure: the Schmid-Leiman transformation and the omega family built on it.

An oblique solution (pattern ``P``, factor correlations ``Phi``) is turned into an orthogonal one with a
general factor and group factors (Schmid & Leiman 1957); from that and the item correlation matrix come
omega total, omega hierarchical, omega per group factor, explained common variance and construct
replicability (McDonald 1999; Zinbarg et al. 2005; Reise 2012; Hancock & Mueller 2001).

Pure computation on matrices; the first-order solution comes from :mod:`server.stats.efa` and
:mod:`server.stats.rotation`, and the second-order fit of ``Phi`` reuses :func:`server.stats.efa.extract`.

References
----------
Schmid, J., & Leiman, J. M. (1957). The development of hierarchical factor solutions. Psychometrika,
    22(1), 53-61.
McDonald, R. P. (1999). Test theory: A unified treatment. Mahwah, NJ: Erlbaum.
Zinbarg, R. E., Revelle, W., Yovel, I., & Li, W. (2005). Cronbach's alpha, Revelle's beta, and
    McDonald's omega_H. Psychometrika, 70(1), 123-133.
Reise, S. P. (2012). The rediscovery of bifactor measurement models. Multivariate Behavioral Research,
    47(5), 667-696.
Rodriguez, A., Reise, S. P., & Haviland, M. G. (2016). Evaluating bifactor models: Calculating and
    interpreting statistical indices. Psychological Methods, 21(2), 137-150.
Hancock, G. R., & Mueller, R. O. (2001). Rethinking construct reliability within latent variable
    systems. In R. Cudeck, S. du Toit, & D. Sorbom (Eds.), Structural equation modeling: Present and
    future (pp. 195-216). Lincolnwood, IL: Scientific Software International.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike

from . import efa as _efa
from .errors import InputError
from .notes import Note, note

__all__ = [
    "GroupOmega",
    "OmegaCoefficients",
    "SchmidLeimanResult",
    "construct_replicability",
    "omega_coefficients",
    "schmid_leiman",
]


def _num(x) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _labels(n: int, given: Sequence[str] | None, what: str, default: str) -> tuple[str, ...]:
    if given is None:
        return tuple(f"{default} {i + 1}" for i in range(n))
    out = tuple(str(s) for s in given)
    if len(out) != n:
        raise InputError(f"{len(out)} {what} names were given for {n} {what}s.", code="bad_names",
                         details={"names": len(out), "expected": n})
    return out


@dataclass(frozen=True)
class SchmidLeimanResult:
    """An orthogonalised hierarchical solution.

    Attributes
    ----------
    general : ndarray (k,)
        Loadings on the general (second-order) factor.
    group : ndarray (k, m)
        Loadings on the group factors (the first-order factors residualised on the general one).
    communalities, uniquenesses : ndarray (k,)
        ``general² + sum of group²`` per item, and one minus it.
    second_order : ndarray (m,)
        Loadings of the first-order factors on the general factor.
    second_order_method : str
        How ``second_order`` was obtained.
    second_order_rmsr : float
        Root mean square of the off-diagonal residuals of ``Phi - second_order second_order'`` (0 when
        the one-factor model of ``Phi`` is exact, always so for two or three factors).
    names, factors : tuple of str
        Item and group-factor labels.
    warnings : tuple of Note
    """

    general: np.ndarray = field(compare=False)
    group: np.ndarray = field(compare=False)
    communalities: np.ndarray = field(compare=False)
    uniquenesses: np.ndarray = field(compare=False)
    second_order: np.ndarray = field(compare=False)
    second_order_method: str
    second_order_rmsr: float
    names: tuple[str, ...]
    factors: tuple[str, ...]
    warnings: tuple[Note, ...] = ()

    def to_dict(self) -> dict:
        return {
            "general": {n: _num(v) for n, v in zip(self.names, self.general)},
            "group": {n: [_num(v) for v in row] for n, row in zip(self.names, self.group)},
            "communalities": {n: _num(v) for n, v in zip(self.names, self.communalities)},
            "uniquenesses": {n: _num(v) for n, v in zip(self.names, self.uniquenesses)},
            "second_order": [_num(v) for v in self.second_order],
            "second_order_method": self.second_order_method,
            "second_order_rmsr": _num(self.second_order_rmsr),
            "factors": list(self.factors),
            "warnings": [w.to_dict() for w in self.warnings],
        }


def _check_solution(pattern, phi) -> tuple[np.ndarray, np.ndarray]:
    P = np.array(pattern, dtype=float)
    if P.ndim == 1:
        P = P[:, None]
    if P.ndim != 2 or P.shape[0] < 2 or P.shape[1] < 1:
        raise InputError(f"The pattern matrix must be items x factors with at least 2 items; got shape "
                         f"{list(P.shape)}.", code="bad_shape", details={"shape": list(P.shape)})
    if not np.isfinite(P).all():
        raise InputError("The pattern matrix has missing or infinite loadings.", code="bad_value")
    m = P.shape[1]
    F = np.array(phi, dtype=float)
    if F.shape != (m, m):
        raise InputError(f"The factor correlation matrix must be {m} x {m} for {m} factors; got shape "
                         f"{list(F.shape)}.", code="bad_shape", details={"shape": list(F.shape), "factors": m})
    if not np.isfinite(F).all() or np.abs(F - F.T).max() > 1e-8 or np.abs(np.diag(F) - 1).max() > 1e-8:
        raise InputError("The factor correlations must be a finite symmetric matrix with ones on the diagonal.",
                         code="bad_matrix")
    if np.abs(F).max() > 1 + 1e-8:
        i, j = np.unravel_index(int(np.argmax(np.abs(F))), F.shape)
        raise InputError(f"Factors {i + 1} and {j + 1} correlate {F[i, j]:.4f}, outside [-1, 1].",
                         code="bad_matrix", details={"factors": [int(i) + 1, int(j) + 1], "value": float(F[i, j])})
    return P, (F + F.T) / 2


def _three_factor_gamma(Phi: np.ndarray) -> np.ndarray | None:
    r"""The one-factor fit of three factors' correlations in closed form, or None.

    Three correlations and three loadings: the model is just identified and, when the correlations' product is
    positive and the loadings it implies are clear of the uniqueness bound, fits exactly (zero residuals), so it
    is the minres solution :func:`server.stats.efa.extract` iterates to:
    :math:`|\gamma_1| = \sqrt{\phi_{12}\phi_{13}/\phi_{23}}` and likewise, signs with
    :math:`\operatorname{sign}\gamma_i\gamma_j = \operatorname{sign}\phi_{ij}`, summing positive as
    ``extract`` reflects them. None (the caller fits it) when the product is not positive, a correlation is
    near 0, a loading would come near the bound, or the matrix is near singular.
    """
    r12, r13, r23 = float(Phi[0, 1]), float(Phi[0, 2]), float(Phi[1, 2])
    if min(abs(r12), abs(r13), abs(r23)) <= 1e-6 or r12 * r13 * r23 <= 0:
        return None
    g2 = np.array([r12 * r13 / r23, r12 * r23 / r13, r13 * r23 / r12])
    if float(g2.max()) > 0.99 or float(np.linalg.eigvalsh(Phi)[0]) <= 1e-8:
        return None
    gamma = np.sqrt(g2) * np.array([1.0, math.copysign(1.0, r12), math.copysign(1.0, r13)])
    return gamma if gamma.sum() >= 0 else -gamma


def schmid_leiman(pattern: ArrayLike, phi: ArrayLike | None, *, names: Sequence[str] | None = None,
                  factors: Sequence[str] | None = None) -> SchmidLeimanResult:
    """Schmid-Leiman transformation of an oblique factor solution.

    Parameters
    ----------
    pattern : array_like, shape (k, m)
        Oblique pattern loadings (standardized, fitted to a correlation matrix).
    phi : array_like, shape (m, m)
        Factor correlations of that solution.
    names : sequence of str, optional
        Item names (default "item 1", ...).
    factors : sequence of str, optional
        Labels of the first-order (group) factors (default "Factor 1", ...).

    Returns
    -------
    SchmidLeimanResult

    Notes
    -----
    The factor correlations are modelled by one second-order factor, :math:`\\Phi \\approx \\gamma\\gamma' +
    \\operatorname{diag}(1 - \\gamma^2)`; then

    .. math::

        g = P\\gamma, \\qquad F = P\\,\\operatorname{diag}\\bigl(\\sqrt{1 - \\gamma_j^2}\\bigr),

    so that :math:`gg' + FF' = P\\Phi P'` whenever the second-order model of :math:`\\Phi` is exact, and the
    general and group communalities add up to the oblique ones.

    * ``m >= 3``: :math:`\\gamma` is the one-factor minres fit of :math:`\\Phi`
      (:func:`server.stats.efa.extract`), exact for three factors (just identified) unless a loading
      reaches the Heywood bound.
    * ``m == 2``: one correlation cannot identify two second-order loadings; both are set to
      :math:`\\sqrt{\\phi_{12}}` (the usual convention, as ``psych::omega``) and a warning says so. A
      correlation at or below 0 leaves no general factor (:math:`\\gamma = 0`), also with a warning.
    * ``m == 1``: the single factor is the general factor and there are no group factors.

    References
    ----------
    Schmid, J., & Leiman, J. M. (1957). Psychometrika, 22(1), 53-61.
    Wolff, H.-G., & Preising, K. (2005). Exploring item and higher order factor structure with the
    Schmid-Leiman solution. Behavior Research Methods, 37(1), 48-58.
    Revelle, W. psych: Procedures for psychological research (function ``omega``; two-factor convention).
    """
    P, Phi = _check_solution(pattern, phi)
    k, m = P.shape
    nm = _labels(k, names, "item", "item")
    fl = _labels(m, factors, "factor", "Factor")
    warnings: list[Note] = []
    rmsr = 0.0
    if m == 1:
        gamma = np.ones(1)
        method = "one factor: it is the general factor; there are no group factors"
    elif m == 2:
        r = float(Phi[0, 1])
        gamma = np.full(2, math.sqrt(r) if r > 0 else 0.0)
        method = "two factors: both second-order loadings set to sqrt(phi12)"
        if r > 0:
            warnings.append(note("general_not_identified", f"With two factors the general factor is not identified "
                                 f"from their correlation alone; both second-order loadings were set to "
                                 f"sqrt({r:.3f}) = {gamma[0]:.3f}. Treat omega hierarchical as a rough figure; three "
                                 "or more group factors identify it."))
        else:
            warnings.append(note("no_general_factor", f"The two factors correlate {r:.3f}; without a positive "
                                 "correlation there is no general factor, so its loadings are 0 and omega "
                                 "hierarchical is 0."))
    else:
        exact = _three_factor_gamma(Phi) if m == 3 else None
        if exact is not None:
            gamma = exact
        else:
            ex = _efa.extract(Phi, 1, method="minres", names=fl)
            gamma = ex.loadings[:, 0].copy()
            warnings.extend(Note(f"second_order_{w.code}", f"Second-order fit: {w.message}", w.items)
                            for w in ex.warnings)
        method = "one-factor minres fit of the factor correlations"
        iu = np.triu_indices(m, 1)
        rmsr = float(np.sqrt(np.mean((Phi - np.outer(gamma, gamma))[iu] ** 2)))
        if np.any(gamma < 0):
            neg = ", ".join(f"'{fl[j]}'" for j in np.flatnonzero(gamma < 0))
            warnings.append(note("negative_second_order", f"Factor(s) {neg} load negatively on the general factor: "
                                 "they correlate negatively with the others, so a sum over all items mixes opposite "
                                 "directions."))
    gamma = np.clip(gamma, -1.0, 1.0)
    g = P @ gamma
    F = P * np.sqrt(np.maximum(1.0 - gamma ** 2, 0.0))[None, :] if m > 1 else np.zeros((k, 0))
    h2 = g ** 2 + np.sum(F ** 2, axis=1)
    u = 1.0 - h2
    for i in np.flatnonzero(u <= _efa.PSI_LOWER):
        warnings.append(note("heywood", f"Item '{nm[i]}' has a communality of {h2[i]:.3f} in the hierarchical "
                             "solution (Heywood case); the omega coefficients rest on a boundary solution.", [nm[i]]))
    return SchmidLeimanResult(general=g, group=F, communalities=h2, uniquenesses=u, second_order=gamma,
                              second_order_method=method, second_order_rmsr=rmsr, names=nm, factors=fl,
                              warnings=tuple(warnings))


def construct_replicability(loadings: ArrayLike) -> float | None:
    """Hancock & Mueller's (2001) coefficient H of a factor from its standardized loadings.

    Notes
    -----
    :math:`H = 1 \\big/ \\bigl(1 + 1 / \\sum_i \\frac{l_i^2}{1 - l_i^2}\\bigr)`: the squared correlation of
    the factor with its optimally weighted composite. None when a loading is at or beyond +-1 (the term
    is infinite) or every loading is 0.

    References
    ----------
    Hancock, G. R., & Mueller, R. O. (2001), see the module references.
    Rodriguez, A., Reise, S. P., & Haviland, M. G. (2016). Psychological Methods, 21(2), 137-150.
    """
    lam2 = np.asarray(loadings, dtype=float).reshape(-1) ** 2
    if lam2.size == 0 or np.any(lam2 >= 1.0) or not np.all(np.isfinite(lam2)):
        return None
    s = float(np.sum(lam2 / (1.0 - lam2)))
    if s <= 0:
        return None
    return 1.0 / (1.0 + 1.0 / s)


@dataclass(frozen=True)
class GroupOmega:
    """The omega figures of one group factor and the items assigned to it (its subscale).

    Attributes
    ----------
    factor : str
        Group-factor label.
    items : tuple of str
        Items assigned to it.
    omega_hs : float or None
        Share of the subscale's total-score variance due to the group factor alone.
    omega_total : float or None
        Share due to the general and the group factor together (the subscale's omega total).
    h : float or None
        Construct replicability of the group factor (all items' loadings on it).
    """

    factor: str
    items: tuple[str, ...]
    omega_hs: float | None
    omega_total: float | None
    h: float | None

    def to_dict(self) -> dict:
        return {"factor": self.factor, "items": list(self.items), "omega_hs": _num(self.omega_hs),
                "omega_total": _num(self.omega_total), "h": _num(self.h)}


@dataclass(frozen=True)
class OmegaCoefficients:
    """Omega total, omega hierarchical, omega per group factor, ECV and H of a hierarchical solution.

    Attributes
    ----------
    omega_total, omega_hierarchical : float or None
    ecv : float or None
        Explained common variance of the general factor.
    h_general : float or None
        Construct replicability of the general factor.
    omega_subscale : tuple of GroupOmega
        One per group factor.
    total_variance : float
        :math:`\\mathbf 1'R\\mathbf 1`, the denominator of the pool-level coefficients.
    denominator : str
        Which variance the coefficients are shares of.
    warnings : tuple of Note
    """

    omega_total: float | None
    omega_hierarchical: float | None
    ecv: float | None
    h_general: float | None
    omega_subscale: tuple[GroupOmega, ...]
    total_variance: float
    denominator: str
    warnings: tuple[Note, ...] = ()

    def to_dict(self) -> dict:
        return {"omega_total": _num(self.omega_total), "omega_hierarchical": _num(self.omega_hierarchical),
                "ecv": _num(self.ecv), "h": _num(self.h_general),
                "omega_subscale": [g.to_dict() for g in self.omega_subscale],
                "total_variance": _num(self.total_variance), "denominator": self.denominator,
                "warnings": [w.to_dict() for w in self.warnings]}


def _check_corr(R, k: int) -> np.ndarray:
    A = np.array(R, dtype=float)
    if A.shape != (k, k):
        raise InputError(f"The correlation matrix must be {k} x {k} to match the solution's {k} items; got shape "
                         f"{list(A.shape)}.", code="bad_shape", details={"shape": list(A.shape), "items": k})
    if not np.isfinite(A).all() or np.abs(A - A.T).max() > 1e-8 or np.abs(np.diag(A) - 1).max() > 1e-8:
        raise InputError("omega_coefficients needs a finite symmetric correlation matrix (ones on the diagonal).",
                         code="bad_matrix")
    return (A + A.T) / 2


def _default_groups(F: np.ndarray) -> np.ndarray:
    if F.shape[1] == 0:
        return np.full(F.shape[0], -1)
    return np.argmax(np.abs(F), axis=1)


def omega_coefficients(R: ArrayLike, sl: SchmidLeimanResult, *, groups: Sequence[int | None] | None = None
                       ) -> OmegaCoefficients:
    """Omega total, omega hierarchical, omega per group factor, ECV and H from a Schmid-Leiman solution.

    Parameters
    ----------
    R : array_like, shape (k, k)
        The item correlation matrix the solution was fitted to (reverse-keyed items already reversed).
    sl : SchmidLeimanResult
        From :func:`schmid_leiman`.
    groups : sequence of (int or None), optional
        The group factor (column index) each item's subscale belongs to, None to leave an item out of every
        subscale. Default: the group factor with the item's largest absolute loading.

    Returns
    -------
    OmegaCoefficients

    Notes
    -----
    With general loadings :math:`g`, group loadings :math:`F` and :math:`V = \\mathbf 1'R\\mathbf 1` the
    observed variance of the unit-weighted total of the standardized items (McDonald 1999, ch. 6;
    Zinbarg et al. 2005; as ``psych::omega``, which also divides by the observed :math:`V`):

    .. math::

        \\omega_t = \\frac{(\\sum_i g_i)^2 + \\sum_j (\\sum_i F_{ij})^2}{V}, \\qquad
        \\omega_h = \\frac{(\\sum_i g_i)^2}{V}, \\qquad
        \\mathrm{ECV} = \\frac{\\sum_i g_i^2}{\\sum_i g_i^2 + \\sum_{ij} F_{ij}^2}.

    ``omega_total`` is written with the common loadings in the numerator, so with one factor it is exactly
    the unidimensional omega of :func:`server.stats.reliability.mcdonald_omega`; ``psych::omega`` writes
    it as :math:`1 - \\sum_i u_i / V`, which is the same number when the model reproduces :math:`R`.
    For the subscale :math:`G_j` of group factor :math:`j`, with :math:`V_j = \\mathbf 1'R_{G_jG_j}\\mathbf 1`
    (Reise 2012; Rodriguez, Reise & Haviland 2016):

    .. math::

        \\omega_{hs,j} = \\frac{(\\sum_{i\\in G_j} F_{ij})^2}{V_j}, \\qquad
        \\omega_{t,j} = \\frac{(\\sum_{i\\in G_j} g_i)^2 + (\\sum_{i\\in G_j} F_{ij})^2}{V_j}.

    H (Hancock & Mueller 2001, :func:`construct_replicability`) uses every item's loading on the factor.

    References
    ----------
    McDonald (1999); Zinbarg et al. (2005); Reise (2012); Rodriguez, Reise & Haviland (2016);
    Hancock & Mueller (2001); ECV: Ten Berge, J. M. F., & Socan, G. (2004). The greatest lower bound to
    the reliability of a test and the hypothesis of unidimensionality. Psychometrika, 69(4), 613-625.
    """
    if not isinstance(sl, SchmidLeimanResult):
        raise InputError("omega_coefficients needs the result of schmid_leiman.", code="bad_input")
    g, F = sl.general, sl.group
    k, m = F.shape
    A = _check_corr(R, k)
    warnings: list[Note] = list(sl.warnings)
    if groups is None:
        gi = _default_groups(F)
    else:
        if len(groups) != k:
            raise InputError(f"{len(groups)} group assignments were given for {k} items.", code="bad_groups",
                             details={"groups": len(groups), "items": k})
        gi = np.array([-1 if x is None else int(x) for x in groups])
        bad = np.flatnonzero((gi < -1) | (gi >= m))
        if bad.size:
            i = int(bad[0])
            raise InputError(f"Item '{sl.names[i]}' is assigned to group factor {groups[i]}, but there are {m} "
                             f"(numbered 0 to {m - 1}).", code="bad_groups",
                             details={"item": sl.names[i], "group": groups[i], "factors": m})
    V = float(A.sum())
    common = float(np.sum(g ** 2) + np.sum(F ** 2))
    if V <= 0:
        warnings.append(note("total_variance_not_positive", f"The variance of the total score is not positive "
                             f"({V:.3g}); the omega coefficients are undefined (check reverse-keyed items)."))
        omega_t = omega_h = None
    else:
        omega_h = float(g.sum() ** 2 / V)
        omega_t = float((g.sum() ** 2 + np.sum(F.sum(axis=0) ** 2)) / V)
    ecv = float(np.sum(g ** 2) / common) if common > 0 else None
    if np.any(g < 0):
        neg = ", ".join(f"'{sl.names[i]}'" for i in np.flatnonzero(g < 0))
        warnings.append(note("negative_loading", f"Item(s) {neg} load negatively on the general factor; if they are "
                             "reverse-keyed, declare them so they are reverse-scored.",
                             [sl.names[i] for i in np.flatnonzero(g < 0)]))
    h_general = construct_replicability(g)
    if h_general is None:
        warnings.append(note("h_undefined", "Construct replicability H of the general factor is undefined (a "
                             "loading at +-1, or no loading at all)."))
    subs = []
    for j in range(m):
        idx = np.flatnonzero(gi == j)
        h = construct_replicability(F[:, j])
        if idx.size == 0:
            warnings.append(note("empty_group_factor", f"No item is assigned to group factor '{sl.factors[j]}', so "
                                 "it has no subscale omega."))
            subs.append(GroupOmega(sl.factors[j], (), None, None, h))
            continue
        Vj = float(A[np.ix_(idx, idx)].sum())
        sg, sf = float(g[idx].sum()), float(F[idx, j].sum())
        ohs = sf ** 2 / Vj if Vj > 0 else None
        ot = (sg ** 2 + sf ** 2) / Vj if Vj > 0 else None
        subs.append(GroupOmega(sl.factors[j], tuple(sl.names[i] for i in idx), ohs, ot, h))
    denominator = ("observed total-score variance 1'R1 of the standardized items (McDonald 1999; Zinbarg et al. "
                   "2005), and 1'R1 over a subscale's items for its coefficients")
    return OmegaCoefficients(omega_total=omega_t, omega_hierarchical=omega_h, ecv=ecv, h_general=h_general,
                             omega_subscale=tuple(subs), total_variance=V, denominator=denominator,
                             warnings=tuple(warnings))
