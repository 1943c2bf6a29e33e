"""Reliability sections: the scale's coefficients and each codebook construct's, from one covariance matrix."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..stats.notes import Note, note
from ..stats.reliability import reliability_from_cov
from .answer import ConstructBlock, ReliabilitySection
from .inputs import AnalysisInputs
from .matrices import active_matrices, listwise_covariance, min_pair_n
from .settings import AnalysisSettings

__all__ = ["ScaleCovariance", "construct_blocks", "scale_covariance", "scale_reliability"]

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
    X = inputs.responses[:, idx]
    complete = ~np.isnan(X).any(axis=1)
    notes: list[Note] = []
    if settings.missing == "listwise":
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
        n = int((~np.isnan(X).all(axis=1)).sum())
        n_complete = int(complete.sum())
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


def construct_blocks(inputs: AnalysisInputs, settings: AnalysisSettings, sc: ScaleCovariance
                     ) -> dict[str, ConstructBlock]:
    """The reliability of each codebook construct's active items, in order of first appearance."""
    names = list(settings.items)
    meta = {it.name: it for it in inputs.items}
    by_construct: dict[str, list[int]] = {}
    for j, n in enumerate(names):
        c = meta[n].construct
        if c:
            by_construct.setdefault(c, []).append(j)
    X = inputs.responses[:, inputs.columns(names)]
    out = {}
    for c, js in by_construct.items():
        items = tuple(names[j] for j in js)
        if len(js) < 2:
            out[c] = ConstructBlock(items, None, (note("construct_one_item", f"Construct '{c}' has only one active "
                                                       f"item; no reliability for it.", items),))
            continue
        sub = np.ix_(js, js)
        if settings.missing == "listwise":
            n_c = n_cc = sc.n_complete
        else:
            Xc = X[:, js]
            n_c, n_cc = int((~np.isnan(Xc).all(axis=1)).sum()), int((~np.isnan(Xc).any(axis=1)).sum())
        rel = reliability_from_cov(sc.cov[sub], n=n_c, n_complete=n_cc, means=sc.means[js],
                                   min_pair_n=min_pair_n(sc.n_pair[sub]), names=list(items), missing=settings.missing)
        out[c] = ConstructBlock(items, rel)
    return out
