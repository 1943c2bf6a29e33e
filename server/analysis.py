"""Assemble one analysis answer from cached full-pool matrices (no raw responses on a drop).

Two exceptions (``_pool_or_active``): under listwise deletion the active items' own matrices are computed
from the respondents who answered all of them (cheap: one pass over their columns); and when the whole
pool cannot form a matrix (two items never answered together) the active items' own matrices are used,
so that a problem confined to inactive items does not block the analysis.
"""
from __future__ import annotations

import numpy as np

from . import __version__
from .stats.errors import InputError


def _plain(obj):
    """Convert numpy scalars/arrays and dataclass results into JSON-ready values; NaN becomes None."""
    if hasattr(obj, "to_dict"):
        obj = obj.to_dict()
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _plain(obj.tolist())
    if isinstance(obj, (np.bool_,)):
        return bool(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        f = float(obj)
        return None if not np.isfinite(f) else f
    return obj


def _pair_n(n_pair: np.ndarray) -> int:
    off = n_pair[~np.eye(len(n_pair), dtype=bool)]
    return int(off.min()) if off.size else int(n_pair.min())


def assemble(engine, dataset_id: str, s: dict, *, with_efa: bool = True) -> dict:
    from .stats.items import item_table, pruning_path
    from .stats.reliability import reliability_from_cov

    ds = engine.dataset(dataset_id)
    names_all = [it.name for it in ds.items]
    index = {n: i for i, n in enumerate(names_all)}
    idx = np.array([index[n] for n in s["items"]])
    names = list(s["items"])
    meta = {it.name: it for it in ds.items}
    rev_mask = np.array([n in set(s["reverse"]) for n in names_all])
    sign = np.where(rev_mask, -1.0, 1.0)[idx]
    flip = np.outer(sign, sign)
    constant = engine.constant_items(dataset_id) if s.get("excluded") else {}
    warnings: list[str] = [constant[n] for n in s.get("excluded", [])]

    # ---- covariance for reliability (pairwise: cached full pool; listwise: complete rows of the active set)
    X_raw = ds.responses[:, idx]
    answered = ~np.isnan(X_raw).all(axis=1)
    complete = ~np.isnan(X_raw).any(axis=1)
    n_complete = int(complete.sum())
    if s["missing"] == "listwise":
        from .stats.correlation import pairwise_covariance

        if n_complete < 3:
            raise InputError(f"Only {n_complete} respondent(s) answered every active item, too few for listwise "
                             f"deletion; use pairwise deletion or leave out the items most often skipped.",
                             code="too_few_complete", details={"n_complete": n_complete, "missing": "listwise"})
        cov, n_pair = pairwise_covariance(X_raw[complete])
        n_rel = n_complete
        flat = [n for n, v in zip(names, np.diag(cov)) if not v > 0] if n_complete >= 2 else []
        if flat:
            raise InputError(f"Item '{flat[0]}' has no variance among the {n_complete} respondents who answered every "
                             f"active item (listwise deletion); leave it out or use pairwise deletion.",
                             code="no_variance", details={"item": flat[0], "respondents": n_complete,
                                                          "missing": "listwise"})
    else:
        pool, pool_note = _pool_or_active(engine, dataset_id, "pearson", "pairwise", idx, names, X_raw)
        cov, n_pair = pool.cov[np.ix_(pool.sel, pool.sel)], pool.n_pair[np.ix_(pool.sel, pool.sel)]
        if pool_note:
            warnings.append(pool_note)
        n_rel = int(answered.sum())
    cov = cov * flip
    if n_complete < len(names) + 1 and s["missing"] == "listwise":
        warnings.append(f"Only {n_complete} respondents answered every active item; listwise results rest on "
                        f"few people.")
    desc_all = engine.descriptives(dataset_id, rev_mask)
    desc = {d["name"]: d for d in desc_all}
    means = np.array([desc[n]["mean"] for n in names], dtype=float)
    if s["missing"] == "listwise" and n_complete > 0:
        # the scale mean must rest on the same respondents as the scale SD: the complete rows
        raw_mean = X_raw[complete].mean(axis=0)
        lo = np.array([meta[n].min for n in names], dtype=float)
        hi = np.array([meta[n].max for n in names], dtype=float)
        means = np.where(sign < 0, lo + hi - raw_mean, raw_mean)
    min_pair = _pair_n(n_pair)

    rel = reliability_from_cov(cov, n=n_rel, n_complete=n_complete, means=means, min_pair_n=min_pair,
                               names=names, missing=s["missing"])
    start = getattr(rel, "loadings", None)  # warm start for the omega-if-deleted and pruning-path fits
    reliability = _plain(rel)
    reliability["missing"] = s["missing"]
    reliability["n_items"] = len(names)
    reliability["min_pairwise_n"] = min_pair
    reliability["basis"] = ("Item covariances of the observed (reverse-scored) answers: the coefficients describe the "
                            "sum score people actually get. The correlation setting (Pearson or polychoric) "
                            "applies to the factor sections only.")
    warnings.extend(reliability.get("warnings") or [])

    itab = {r["name"]: r for r in _plain(item_table(cov, names=names, start=start))}
    items_out = []
    for n in names:
        m = meta[n]
        row = {**desc[n], **itab[n], "name": n, "text": m.text, "construct": m.construct,
               "reverse": bool(n in set(s["reverse"])), "min": m.min, "max": m.max}
        items_out.append(row)

    constructs = {}
    by_construct: dict[str, list[int]] = {}
    for j, n in enumerate(names):
        c = meta[n].construct
        if c:
            by_construct.setdefault(c, []).append(j)
    for c, js in by_construct.items():
        if len(js) >= 2:
            sub = np.ix_(js, js)
            Xc = X_raw[:, js]
            if s["missing"] == "listwise":
                n_c = n_cc = n_complete
            else:
                n_c, n_cc = int((~np.isnan(Xc).all(axis=1)).sum()), int((~np.isnan(Xc).any(axis=1)).sum())
            block = _plain(reliability_from_cov(cov[sub], n=n_c, n_complete=n_cc, means=means[js],
                                                min_pair_n=_pair_n(n_pair[sub]), names=[names[j] for j in js],
                                                missing=s["missing"]))
            block["items"] = [names[j] for j in js]
            block["n_items"] = len(js)
        else:
            block = {"items": [names[j] for j in js], "n_items": len(js), "alpha": None,
                     "warnings": [f"Construct '{c}' has only one active item; no reliability for it."]}
        constructs[c] = block

    path = _plain(pruning_path(cov, names=names, min_items=min(3, len(names)), start=start))

    answer = {
        "dataset": {"id": dataset_id, "name": ds.name, "n_rows": ds.n_rows, "n_items_total": len(names_all)},
        "settings": s,
        "version": __version__,
        "reliability": reliability,
        "items": items_out,
        "constructs": constructs,
        "pruning_path": path,
    }
    if with_efa:
        rows = {r["name"]: r for r in items_out}
        answer.update(_factor_sections(engine, dataset_id, s, idx, names, flip, meta, rows, warnings,
                                       n_complete))
    answer["warnings"] = list(dict.fromkeys(warnings))
    return _plain(answer)


def _with_item_flags(flags, R, names, *, rows, thresholds):
    """Add the model-free flags (near-duplicates, floor/ceiling) and keep the board's item order."""
    from .stats.flags import item_level_flags

    extra = item_level_flags(R, names=names, floor=[rows[n].get("floor") for n in names],
                             ceiling=[rows[n].get("ceiling") for n in names], thresholds=thresholds)
    order = {n: i for i, n in enumerate(names)}
    return sorted(flags + extra, key=lambda f: order.get(f["item"], len(order)))


class _Matrices:
    """Covariance, pairwise n and correlation matrices with the rows/columns (``sel``) of the active items."""

    def __init__(self, cov, n_pair, corr, warnings, sel):
        self.cov, self.n_pair, self.corr, self.warnings, self.sel = cov, n_pair, corr, tuple(warnings), sel


def _pool_or_active(engine, dataset_id, correlation, missing, idx, names, X_active):
    """The matrices of the active items: a submatrix of the cached full pool, or their own.

    Pairwise: the cached full-pool matrices (a drop takes a submatrix). Listwise: the active items' own
    matrices from the respondents who answered every active item, so that the correlations, the factor
    sections and the reliability sections rest on the same people (the pool's complete rows would be
    fewer, and would change with items that are not even analysed). When the full pool cannot form a
    matrix (two items never answered together...) a problem confined to inactive items must not block
    the analysis: the active items' own matrix is used and a sentence says so (the same clear error is
    raised if the problem is among them).
    """
    from .stats import correlation as corrmod

    note = None
    if missing == "pairwise":
        try:
            pool = engine.full_pool(dataset_id, correlation)
            return _Matrices(pool.cov, pool.n_pair, pool.corr, pool.warnings, idx), None
        except InputError as exc:
            note = (f"The {correlation} matrix of the whole item pool could not be formed ({exc.message}); "
                    f"this analysis uses the active items' own matrix, recomputed from their responses.")
    X = X_active[~np.isnan(X_active).any(axis=1)] if missing == "listwise" else X_active
    cov, n_pair = corrmod.pairwise_covariance(X)
    make = corrmod.polychoric_matrix if correlation == "polychoric" else corrmod.pearson_matrix
    res = make(X, missing=missing, smooth=None, names=names)
    return _Matrices(cov, n_pair, np.asarray(res.matrix, float), res.warnings, np.arange(len(names))), note


def _active_pool_warnings(pool_warnings, R, names, correlation: str) -> list[str]:
    """The full-pool matrix's warnings that concern the active items.

    Item-level sentences about dropped items are left out; the pool's "left unsmoothed" sentence is left
    out because the active submatrix is smoothed (and reported) here; the +-1 pairs are counted again
    on the active submatrix. Pair counts of sparse polychoric tables still describe the whole pool.
    """
    from .stats.correlation import _warn_perfect

    active = set(names)
    out = []
    for w in pool_warnings:
        if w.startswith("Item '") and "' has fewer than" in w:
            if w[len("Item '"):w.index("' has fewer than")] in active:
                out.append(w)
        elif ("and was left unsmoothed" in w or " of +-1 (for example " in w
              or "estimate is at the boundary" in w):  # pool pairs; +-1 pairs are recounted below
            continue
        else:
            out.append(w)
    if correlation == "polychoric":
        _warn_perfect(R, names, out, "polychoric correlation", "their answers are perfectly ordered together")
    else:
        _warn_perfect(R, names, out, "Pearson correlation", "their answers are exact linear functions of "
                      "each other")
    return out


def _factor_sections(engine, dataset_id, s, idx, names, flip, meta, rows, warnings, n_complete):
    from .stats.correlation import smooth_to_pd, smoothing_message
    from .stats.dimensionality import factorability_summary, retention_summary
    from .stats.efa import factor_analysis

    pool, pool_note = _pool_or_active(engine, dataset_id, s["correlation"], s["missing"], idx, names,
                                      engine.dataset(dataset_id).responses[:, idx])
    sub = np.ix_(pool.sel, pool.sel)
    R = pool.corr[sub] * flip
    corr_warnings = _active_pool_warnings(pool.warnings, R, names, s["correlation"])
    if pool_note:
        corr_warnings.append(pool_note)
    # the n behind this matrix (smallest pairwise n; under listwise deletion the complete rows of the active
    # items), which is what Bartlett's test, parallel analysis and the ML chi-square must use
    n_obs = _pair_n(pool.n_pair[sub])
    R_s, min_eig, changed = smooth_to_pd(R)
    if changed:
        corr_warnings.append(smoothing_message(R, R_s, min_eig, "eigen",
                                               label="Pearson" if s["correlation"] == "pearson" else "polychoric",
                                               names=names))
        R = R_s
    warnings.extend(corr_warnings)
    correlations = {"type": s["correlation"], "items": names, "matrix": R, "smoothed": bool(changed),
                    "n": n_obs, "warnings": corr_warnings}

    k = len(names)
    factorability = retention = None
    efa: dict = {"n_factors": 0, "flags": [], "warnings": []}
    try:
        if n_obs <= k:  # R is then singular (rank below k): Bartlett and KMO would be meaningless too
            raise InputError(f"A factor analysis needs more respondents than items (n = {n_obs}, k = {k}); "
                             f"only the reliability sections are shown.", code="too_few_rows")
        factorability = _plain(factorability_summary(R, n_obs, names=names))
        if k < 3:
            raise InputError("A factor analysis needs at least 3 active items.", code="too_few_items")
        retention = _plain(retention_summary(R, n_obs, iterations=s["pa_iterations"], seed=s["seed"],
                                             variant=s["pa_variant"]))
        m = s["n_factors"] if s["n_factors"] is not None else max(1, int(retention["suggested"]))
        max_m = max(1, k // 2)
        if m > max_m:
            warnings.append(f"{m} factors is too many for {k} items; {max_m} were extracted.")
            m = max_m
        constructs = [meta[n].construct for n in names]
        reverse = [n in set(s["reverse"]) for n in names]
        item_rest = [rows[n].get("item_rest_r") for n in names]
        full_pool = len(names) == len(engine.pool_items(dataset_id))
        previous = None
        if not full_pool and not pool_note:
            try:
                previous = engine.reference_solution(dataset_id, s, m)
            except InputError:  # the full pool cannot be analysed: factors are ordered by variance instead
                previous = None
        res = factor_analysis(R, m, n=n_obs, names=names, method=s["extraction"], rotation=s["rotation"],
                              gamma=s["gamma"], constructs=constructs, previous=previous,
                              thresholds=s["thresholds"], item_rest_r=item_rest, reverse=reverse,
                              seed=s["seed"])
        efa = _plain(res)
    except InputError as exc:
        # The data do not support this part (too few people, a singular matrix...): a warning, not a failure.
        efa["warnings"].append(exc.message)
    warnings.extend(efa.get("warnings") or [])
    efa["flags"] = _with_item_flags(efa.get("flags") or [], R, names, rows=rows, thresholds=s["thresholds"])
    return {"correlations": correlations, "factorability": factorability, "retention": retention, "efa": efa}
