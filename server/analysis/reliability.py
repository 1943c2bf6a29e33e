"""Reliability sections: the scale's coefficients and each codebook construct's, from one covariance matrix."""
from __future__ import annotations

import functools
import hashlib
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..stats.efa import EFAResult
from ..stats.items import item_table, pruning_path
from ..stats.notes import Note, note
from ..stats.reliability import ordinal_alpha, ordinal_omega, reliability_from_cov
from .answer import ConstructBlock, ReliabilitySection
from .inputs import AnalysisInputs
from .matrices import active_matrices, listwise_covariance, min_pair_n
from .settings import AnalysisSettings

__all__ = ["ScaleCovariance", "construct_blocks", "one_factor_fit", "ordinal_coefficients", "r_other",
           "scale_covariance", "scale_reliability", "subscale_groups"]

BASIS = ("Item covariances of the observed (reverse-scored) answers: the coefficients describe the sum score "
         "people actually get. The correlation setting (Pearson or polychoric) applies to the factor sections only.")


@dataclass(frozen=True)
class ScaleCovariance:
    """The reverse-scored covariance matrix of the active items and the respondents behind it."""

    cov: np.ndarray
    n_pair: np.ndarray
    n: int            # respondents behind the coefficients (answered at least one item; listwise: complete)
    n_complete: int   # respondents who answered every active item
    means: np.ndarray  # item means (reverse-scored) on the same respondents
    notes: tuple[Note, ...]


def scale_covariance(inputs: AnalysisInputs, settings: AnalysisSettings) -> ScaleCovariance:
    """Covariances of the active items: pairwise from the cached Pearson pool, listwise from complete rows."""
    names = list(settings.items)
    idx = inputs.columns(names)
    sign = inputs.signs(names, settings.reverse)
    notes: list[Note] = []
    if settings.missing == "listwise":
        X = inputs.responses[:, idx]
        complete = ~np.isnan(X).any(axis=1)
        cov, n_pair, n_complete = listwise_covariance(inputs.responses, idx, names)
        n = n_complete
        if n_complete < len(names) + 1:
            notes.append(note("listwise_few", f"Only {n_complete} respondents answered every active item; listwise "
                              f"results rest on few people."))
        meta = {it.name: it for it in inputs.items}
        raw_mean = X[complete].mean(axis=0)  # the scale mean rests on the same respondents as its SD
        lo = np.array([meta[n].min for n in names], dtype=float)
        hi = np.array([meta[n].max for n in names], dtype=float)
        means = np.where(sign < 0, lo + hi - raw_mean, raw_mean)
    else:
        mats = active_matrices(inputs.responses, idx, names, correlation="pearson", missing="pairwise",
                               pool=inputs.pools.get("pearson"))
        cov, n_pair = mats.cov, mats.n_pair
        if mats.note is not None:
            notes.append(mats.note)
        n, n_complete = inputs.answered(idx)  # from the cached answer patterns: no pass over the responses
        desc = {d.name: d for d in inputs.descriptives}
        means = np.array([np.nan if desc[n_].mean is None else desc[n_].mean for n_ in names], dtype=float)
    return ScaleCovariance(cov=cov * np.outer(sign, sign), n_pair=n_pair, n=n, n_complete=n_complete, means=means,
                           notes=tuple(notes))


def scale_reliability(sc: ScaleCovariance, settings: AnalysisSettings) -> ReliabilitySection:
    """Alpha, omega, lambdas and the rest for the active items (``reliability_from_cov``)."""
    min_pair = min_pair_n(sc.n_pair)
    rel = reliability_from_cov(sc.cov, n=sc.n, n_complete=sc.n_complete, means=sc.means, min_pair_n=min_pair,
                               names=list(settings.items), missing=settings.missing)
    return ReliabilitySection(result=rel, missing=settings.missing, n_items=len(settings.items),
                              min_pairwise_n=min_pair, basis=BASIS)


def _by_construct(inputs: AnalysisInputs, names: Sequence[str]) -> dict[str, list[int]]:
    meta = {it.name: it for it in inputs.items}
    out: dict[str, list[int]] = {}
    for j, n in enumerate(names):
        c = meta[n].construct
        if c:
            out.setdefault(c, []).append(j)
    return out


def subscale_groups(inputs: AnalysisInputs, settings: AnalysisSettings, efa: EFAResult | None, *,
                    factors_run: bool = True) -> tuple[dict[str, list[int]], dict[str, Any]]:
    """The subscales of the ``grouping`` setting (name -> positions in ``settings.items``) and what was used.

    ``construct``: the codebook's constructs (without any, the items' primary factors); ``factor``: each item
    under the factor of its largest absolute pattern loading in ``efa``, named by the factor labels (without
    a factor solution: no groups); ``pool``: no groups. Returns ``{"requested", "used", "note"}`` beside.
    """
    names = list(settings.items)
    requested = used = settings.grouping
    why = None
    if used == "construct":
        groups = _by_construct(inputs, names)
        if groups:
            return groups, {"requested": requested, "used": "construct", "note": None}
        used = "factor"
        why = "The codebook names no constructs for the active items, so the subscales are the items' primary factors."
    if used == "factor":
        if efa is not None:
            prim = np.argmax(np.abs(efa.pattern), axis=1)
            groups = {}
            for j in np.argsort(prim, kind="stable"):
                groups.setdefault(efa.factors[int(prim[j])], []).append(int(j))
            return groups, {"requested": requested, "used": "factor", "note": why}
        reason = ("no factor model was fitted in this answer" if not factors_run
                  else "there is no factor solution to group them by")
        why = (why + " " if why else "") + f"No subscales: {reason}; the item analysis is the whole pool's."
        used = "pool"
    return {}, {"requested": requested, "used": used, "note": why}


def r_other(cov: np.ndarray, i: int, groups: Mapping[str, Sequence[int]], own: str) -> dict[str, float | None]:
    r"""Correlation of item ``i`` with the sum score of every other group, from the covariance matrix.

    :math:`r = \sum_{j\in G} S_{ij} / \sqrt{S_{ii}\,\mathbf 1'S_{GG}\mathbf 1}` (the correlation of an item
    with a sum of other items; a high value for another subscale is the classic sign that an item belongs
    there).
    """
    out: dict[str, float | None] = {}
    for g, js in groups.items():
        if g == own:
            continue
        v = float(cov[np.ix_(js, js)].sum())
        den = cov[i, i] * v
        out[g] = float(cov[i, js].sum() / math.sqrt(den)) if den > 0 else None
    return out


def _r_others(cov: np.ndarray, groups: Mapping[str, Sequence[int]]) -> list[dict[str, float | None]]:
    """:func:`r_other` of every item at once (its own group: the one whose positions hold the item)."""
    k = cov.shape[0]
    names = list(groups)
    G = np.zeros((k, len(names)))
    own = np.full(k, -1)
    for g, js in enumerate(groups.values()):
        G[list(js), g] = 1.0
        own[list(js)] = g
    C = cov @ G  # C[i, g] = sum of S_ij over j in group g
    V = np.array([float(cov[np.ix_(js, js)].sum()) for js in groups.values()])
    den = np.diag(cov)[:, None] * V[None, :]
    with np.errstate(divide="ignore", invalid="ignore"):
        r = C / np.sqrt(den)
    ok = den > 0
    return [{name: (float(r[i, g]) if ok[i, g] else None) for g, name in enumerate(names) if g != own[i]}
            for i in range(k)]


def one_factor_fit(cov: np.ndarray, loadings: Sequence[float], names: Sequence[str]) -> dict[str, Any] | None:
    """RMSR and the largest residual correlation of the one-factor model behind omega (None below 3 items).

    Residuals are ``R - (l l' + diag(u))`` off the diagonal, with ``R`` the correlation matrix of ``cov`` and
    ``l`` the standardized one-factor loadings; RMSR is the root mean square of the lower-triangle residuals
    (each pair once; the diagonal left out), as ``psych::fa``'s ``rms``.
    """
    k = len(names)
    lam = np.asarray(loadings, dtype=float)
    if k < 3 or lam.size != k:
        return None
    d = np.sqrt(np.diag(cov))
    R = cov / np.outer(d, d)
    il = np.tril_indices(k, -1)
    resid = (R - np.outer(lam, lam))[il]
    p = int(np.argmax(np.abs(resid)))
    return {"rmsr": float(np.sqrt(np.mean(resid ** 2))),
            "largest_residual": {"r": float(resid[p]), "items": [names[il[1][p]], names[il[0][p]]]}}


def ordinal_coefficients(R: np.ndarray, names: Sequence[str]) -> tuple[dict[str, Any], list[Note]]:
    """``alpha_ordinal`` and ``omega_ordinal`` of a polychoric matrix (Zumbo, Gadermann & Zeisser 2007)."""
    a = ordinal_alpha(R, names=list(names))
    o = ordinal_omega(R, names=list(names)) if len(names) >= 3 else None
    notes = [*a.warnings, *(o.warnings if o is not None else ())]
    return {"alpha_ordinal": a.alpha, "omega_ordinal": None if o is None else o.omega}, notes


def construct_blocks(inputs: AnalysisInputs, settings: AnalysisSettings, sc: ScaleCovariance,
                     groups: Mapping[str, Sequence[int]] | None = None, R_ordinal: np.ndarray | None = None
                     ) -> dict[str, ConstructBlock]:
    """Each subscale's reliability, item table, pruning path and one-factor fit.

    ``groups`` maps a subscale to positions in ``settings.items`` (default: the codebook constructs, in
    order of first appearance); ``R_ordinal``, the active items' polychoric matrix, adds the ordinal
    coefficients. Everything is computed within the subscale's own items (``r_other``: with the others').
    """
    names = list(settings.items)
    by_construct = _by_construct(inputs, names) if groups is None else {g: list(js) for g, js in groups.items()}
    idx = inputs.columns(names)
    others = _r_others(sc.cov, by_construct) if by_construct else []
    out = {}
    for c, js in by_construct.items():
        items = tuple(names[j] for j in js)
        if len(js) < 2:
            row = {"name": items[0], "item_rest_r": None, "alpha_if_deleted": None, "omega_if_deleted": None,
                   "r_other": others[js[0]]}
            out[c] = ConstructBlock(items, None, (note("construct_one_item", f"Construct '{c}' has only one active "
                                                       f"item; no reliability for it.", items),), item_table=(row,))
            continue
        sub = np.ix_(js, js)
        if settings.missing == "listwise":
            n_c = n_cc = sc.n_complete
        else:
            n_c, n_cc = inputs.answered(idx[js])
        S, means, mpn = sc.cov[sub], sc.means[js], min_pair_n(sc.n_pair[sub])
        R_sub = None if R_ordinal is None else R_ordinal[sub]
        # Everything but r_other is a function of the subscale's own matrices and counts: a drop elsewhere in the
        # pool leaves them (and so this part of the block) unchanged, and the memo finds it by their content.
        key = ("construct_block", items, settings.missing, n_c, n_cc, mpn, _digest(S, means, R_sub))
        rel, table, steps, ordinal, more, fit = inputs.blocks(
            key, functools.partial(_block, S, means, mpn, R_sub, n_c, n_cc, items, settings.missing))
        table = tuple({**r, "r_other": others[j]} for r, j in zip(table, js))
        out[c] = ConstructBlock(items, rel, more, item_table=table, pruning_path=steps, one_factor_fit=fit,
                                ordinal=ordinal)
    return out


def _digest(*arrays: np.ndarray | None) -> bytes:
    """A digest of the arrays' shapes and values (a memo key that is exact, not approximate)."""
    h = hashlib.blake2b(digest_size=20)
    for a in arrays:
        if a is None:
            h.update(b"none")
            continue
        a = np.ascontiguousarray(a, dtype=float)
        h.update(repr(a.shape).encode())
        h.update(a.tobytes())
    return h.digest()


def _block(S: np.ndarray, means: np.ndarray, mpn: int, R_sub: np.ndarray | None, n_c: int, n_cc: int,
           items: tuple[str, ...], missing: str) -> tuple:
    """A subscale's reliability, item table (without r_other), pruning path, ordinal coefficients, notes and
    one-factor fit, from its own covariance matrix (and polychoric matrix) and counts."""
    rel = reliability_from_cov(S, n=n_c, n_complete=n_cc, means=means, min_pair_n=mpn, names=list(items),
                               missing=missing)
    start = rel.loadings if len(rel.loadings) == len(items) else None
    table = tuple(item_table(S, names=list(items), start=start))
    steps = tuple(pruning_path(S, names=list(items), min_items=min(3, len(items)), start=start))
    ordinal, more = (None, []) if R_sub is None else ordinal_coefficients(R_sub, items)
    return rel, table, steps, ordinal, tuple(more), one_factor_fit(S, rel.loadings, items)
