"""Factor sections: correlations, factorability, retention, extraction and rotation, lined up with the
full-pool solution of the same settings.

Factor identity: a solution of some of the items is matched (order and sign, Tucker's congruence) to the
solution of the whole pool with the same settings and number of factors, so a factor keeps its column
however many items are dropped and in whatever order. That reference solution is computed here, from the
pool's matrices, by the stats functions, and kept in the engine's memo (``AnalysisInputs.memo``).
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..stats.correlation import smooth_to_pd, smoothing_note
from ..stats.dimensionality import factorability_summary, parallel_analysis_polychoric, retention_summary
from ..stats.efa import EFAResult, cap_factors, check_factor_model, factor_analysis
from ..stats.errors import InputError
from ..stats.flags import resolve_thresholds
from ..stats.hierarchical import construct_replicability, omega_coefficients, schmid_leiman
from ..stats.notes import Note, note
from ..stats.rotation import OBLIQUE
from .answer import CorrelationsSection, EfaSection, FactorSections, ItemRow, OmegaFamily
from .flags import all_flags
from .inputs import AnalysisInputs
from .matrices import PoolUnavailable, active_matrices, listwise_covariance, min_pair_n, pool_warnings_for
from .progress import stage
from .settings import AnalysisSettings

__all__ = ["FactorInput", "degenerate_reason", "factor_input", "factor_sections", "few_item_notes", "omega_family",
           "reference_solution"]

PHI_MAX = 0.95      # common practice: factors correlating beyond this are not distinct factors
LOADING_MAX = 1.5   # common practice: a standardized pattern loading beyond this is a runaway solution


@dataclass(frozen=True)
class FactorInput:
    """The correlation matrix a factor model is fitted to (reverse-scored, smoothed when needed) and its n."""

    R: np.ndarray
    n: int  # smallest pairwise n (listwise: the complete rows): what Bartlett, PA and the ML chi-square use
    smoothed: bool
    warnings: tuple[Note, ...]
    pool_used: bool  # False when the pool could not be formed and the items' own matrix was used


def factor_input(inputs: AnalysisInputs, settings: AnalysisSettings, names: Sequence[str]) -> FactorInput:
    """The reverse-scored correlation matrix of ``names`` under the settings' correlation and missing policy."""
    names = list(names)
    idx = inputs.columns(names)
    mats = active_matrices(inputs.responses, idx, names, correlation=settings.correlation,
                           missing=settings.missing, pool=inputs.pools.get(settings.correlation),
                           zero_cell_correction=settings.zero_cell_correction)
    sign = inputs.signs(names, settings.reverse)
    R = mats.corr * np.outer(sign, sign)
    notes = pool_warnings_for(mats.warnings, R, names, settings.correlation, empty=mats.empty,
                              corrected=mats.corrected, correction=mats.correction)
    if mats.note is not None:
        notes.append(mats.note)
    R_s, min_eig, changed = smooth_to_pd(R)
    if changed:
        label = "Pearson" if settings.correlation == "pearson" else "polychoric"
        notes.append(smoothing_note(R, R_s, min_eig, "eigen", label=label, names=names))
        R = R_s
    return FactorInput(R=R, n=min_pair_n(mats.n_pair), smoothed=bool(changed), warnings=tuple(notes),
                       pool_used=mats.note is None)


def _constructs(inputs: AnalysisInputs, names: Sequence[str]) -> list[str | None]:
    meta = {it.name: it for it in inputs.items}
    return [meta[n].construct for n in names]


def reference_solution(inputs: AnalysisInputs, settings: AnalysisSettings, n_factors: int) -> dict | None:
    """The whole pool's loadings and factor labels with the same settings and number of factors.

    ``{"loadings": {item: [...]}, "factors": [...]}``, or None when the pool cannot carry the model (too
    few complete rows, fewer respondents than items, an extraction that fails...): the factors are then
    ordered by variance instead.
    """
    pool = inputs.pool_items
    if isinstance(inputs.pools.get("pearson"), PoolUnavailable):
        return None  # the pool's reliability sections cannot be formed either
    try:
        if settings.missing == "listwise":
            listwise_covariance(inputs.responses, inputs.columns(pool), pool)  # the checks of a listwise analysis
        fi = factor_input(inputs, settings, pool)
        check_factor_model(fi.n, len(pool))
        res = factor_analysis(fi.R, n_factors, n=fi.n, names=pool, method=settings.extraction,
                              rotation=settings.rotation, gamma=settings.gamma, constructs=_constructs(inputs, pool),
                              thresholds=settings.thresholds, seed=settings.seed, random_starts=REFERENCE_STARTS)
    except InputError:
        return None
    return _reference_of(res)


REFERENCE_STARTS = 5  # rotation starts of the reference solution (factor_analysis's default)


def _reference_of(res: EFAResult) -> dict:
    out = res.to_dict()
    return {"loadings": out["loadings"], "factors": out["factors"], "uniquenesses": out["uniquenesses"]}


def _reference_key(settings: AnalysisSettings, n_factors: int) -> tuple:
    return ("reference", settings.correlation, settings.missing, settings.extraction, settings.rotation,
            settings.gamma, settings.seed, settings.reverse, n_factors)


def _reference(inputs: AnalysisInputs, settings: AnalysisSettings, n_factors: int) -> dict | None:
    return inputs.memo(_reference_key(settings, n_factors), lambda: reference_solution(inputs, settings, n_factors))


def degenerate_reason(res: EFAResult) -> str | None:
    """Why a rotated solution cannot be trusted (factor correlations near +-1, runaway loadings, a rotation
    that did not converge), or None."""
    why = []
    P, phi, m = res.pattern, res.phi, res.n_factors
    if not (np.isfinite(P).all() and np.isfinite(phi).all()):
        why.append("some loadings or factor correlations are not finite")
    if m > 1:
        off = np.abs(phi - np.eye(m))
        i, j = np.unravel_index(int(np.nanargmax(off)), off.shape)
        if off[i, j] > PHI_MAX:
            why.append(f"factors '{res.factors[i]}' and '{res.factors[j]}' correlate {phi[i, j]:.3f} (beyond "
                       f"+-{PHI_MAX})")
    big = np.abs(P) > LOADING_MAX
    if big.any():
        why.append(f"{int(big.sum())} loading(s) fall outside [-{LOADING_MAX}, {LOADING_MAX}] (largest "
                   f"{float(np.nanmax(np.abs(P))):.2f})")
    if not res.rotation_result.converged:
        why.append("the rotation did not converge")
    return "; ".join(why) or None


def few_item_notes(res: EFAResult, thresholds) -> list[Note]:
    """A ``factor_few_items`` note for each factor with fewer than three salient loadings (|loading| at least
    the ``primary_min`` threshold), naming the items that do load on it."""
    cut = resolve_thresholds(thresholds)["primary_min"]
    out = []
    for j, label in enumerate(res.factors):
        salient = [n for n, v in zip(res.names, res.pattern[:, j]) if abs(v) >= cut]
        if len(salient) < 3:
            which = f" ({', '.join(salient)})" if salient else ""
            out.append(note("factor_few_items", f"Factor '{label}' has {len(salient)} salient loading(s) "
                            f"(|loading| >= {cut:.2f}){which}; a factor needs at least three to be identified and "
                            "interpretable (common practice): consider fewer factors or more items for it.", salient))
    return out


def _coef(x: float) -> str:
    """A coefficient as the dashboard writes it: three decimals, no leading zero (.577, -.120)."""
    text = f"{x:.3f}"
    return text.replace("0.", ".", 1) if abs(x) < 1 else text


def _omega_note(oh: float | None, ot: float | None) -> str:
    if oh is None:
        return "Omega hierarchical is undefined for this solution."
    # .50 and .80 are rules of thumb (common practice; .80: Reise, Bonifay & Haviland 2013, from memory)
    tail = ("below about .50 a single total score is hard to defend: score the subscales (common practice)"
            if oh < 0.5 else
            "at .80 or more the total can be read as essentially one dimension (Reise, Bonifay & Haviland 2013)"
            if oh >= 0.8 else
            "between about .50 and .80 the total score mixes the general factor with the subscales: report the "
            "subscales beside it (common practice)")
    tot = "" if ot is None else f" (omega total {_coef(ot)}: all common factors together)"
    return (f"Omega hierarchical {_coef(oh)}: about {round(100 * oh)} % of the total score's variance reflects one "
            f"general factor{tot}; {tail}.")


def omega_family(fi: FactorInput, settings: AnalysisSettings, inputs: AnalysisInputs, names: Sequence[str],
                 result: EFAResult | None, m: int | None, uni: float | None, *,
                 random_starts: int = 5) -> tuple[OmegaFamily, list[Note]]:
    """The pool's omega family from the retained model: a Schmid-Leiman transformation of the oblique solution
    (an orthogonal or withheld one is replaced by quartimin on the same extraction), or the one-factor omega.

    References: Schmid & Leiman (1957); McDonald (1999); Zinbarg et al. (2005); Hancock & Mueller (2001).
    """
    label = "Pearson" if settings.correlation == "pearson" else "polychoric"

    def unavailable(why: str) -> tuple[OmegaFamily, list[Note]]:
        msg = (f"{why} Omega total is the one-factor (unidimensional) omega, kept for continuity; there is no "
               "omega hierarchical.")
        return (OmegaFamily(uni, None, {}, (), None, None, "unavailable", msg, "none"),
                [note("omega_hierarchical_unavailable", msg)])

    if m is None:
        return unavailable("No factor model could be fitted to these data.")
    if m == 1:
        h = construct_replicability(result.pattern[:, 0]) if result is not None else None
        msg = _omega_note(uni, uni) + (" One factor was retained, so omega total and omega hierarchical are the "
                                       "one-factor omega.")
        return OmegaFamily(uni, uni, {}, (), 1.0, h, "one_factor", msg, "one-factor omega of the observed "
                           "covariances"), []
    notes: list[Note] = []
    source = f"the {settings.rotation} solution"
    if result is not None and settings.rotation in OBLIQUE:
        src = result
    else:
        try:
            src = factor_analysis(fi.R, m, n=fi.n, names=list(names), method=settings.extraction, rotation="oblimin",
                                  gamma=0.0, constructs=_constructs(inputs, names), previous=result,
                                  thresholds=settings.thresholds, seed=settings.seed, random_starts=random_starts)
        except InputError as exc:
            return unavailable(f"The quartimin solution for the Schmid-Leiman transformation failed ({exc.message}).")
        if degenerate_reason(src) is not None:
            return unavailable("The quartimin solution for the Schmid-Leiman transformation is degenerate.")
        source = "a quartimin (oblimin, gamma 0) rotation of the same extraction"
        why = "is orthogonal" if result is not None else "was not shown"
        notes.append(note("omega_from_quartimin", f"The Schmid-Leiman transformation needs an oblique solution; the "
                          f"{settings.rotation} solution {why}, so the omega family comes from {source}."))
    try:
        sl = schmid_leiman(src.pattern, src.phi, names=list(names), factors=src.factors)
        om = omega_coefficients(fi.R, sl)
    except InputError as exc:
        return unavailable(f"The Schmid-Leiman transformation failed ({exc.message}).")
    notes.extend(om.warnings)
    groups = tuple(g.to_dict() for g in om.omega_subscale)
    return (OmegaFamily(om.omega_total, om.omega_hierarchical, {g.factor: g.omega_hs for g in om.omega_subscale},
                        groups, om.ecv, om.h_general, "schmid_leiman", _omega_note(om.omega_hierarchical,
                                                                                   om.omega_total),
                        f"Schmid-Leiman transformation of {source}, {m} factors, {label} correlations "
                        "(standardized items)"), notes)


def _retention(inputs: AnalysisInputs, settings: AnalysisSettings, fi: FactorInput, names: Sequence[str]) -> dict:
    """Retention: polychoric correlations are compared with permuted ordinal data (Garrido, Abad & Ponsoda
    2013), cached per (dataset, items, settings that change it); Pearson ones with random normal data."""
    if settings.correlation != "polychoric":
        return retention_summary(fi.R, fi.n, iterations=settings.pa_iterations, seed=settings.seed,
                                 variant=settings.pa_variant)
    key = ("pa_polychoric", tuple(names), settings.missing, settings.pa_variant, settings.pa_iterations_polychoric,
           settings.seed, settings.zero_cell_correction)
    pa = inputs.memo(key, lambda: parallel_analysis_polychoric(  # the responses are read only when not cached
        inputs.responses[:, inputs.columns(names)], R=fi.R, iterations=settings.pa_iterations_polychoric,
        variant=settings.pa_variant, seed=settings.seed, missing=settings.missing,
        zero_cell_correction=settings.zero_cell_correction))
    return retention_summary(fi.R, fi.n, seed=settings.seed, variant=settings.pa_variant, parallel=pa)


def factor_sections(inputs: AnalysisInputs, settings: AnalysisSettings, rows: Sequence[ItemRow],
                    uni: float | None = None, *, random_starts: int = 5,
                    start_psi: np.ndarray | None = None,
                    with_factorability: bool = True) -> tuple[FactorSections, list[Note]]:
    """Correlations, factorability, retention and the rotated solution of the active items.

    Returns the sections and the warnings they add to the answer's list (in the order they arose). Data
    that cannot carry a factor model (too few respondents or items, a failed extraction) leave the
    factor solution empty with a warning saying why; a degenerate rotated solution is withheld
    (``rotation_degenerate``). ``uni`` is the pool's one-factor omega, the omega family's fallback.
    ``random_starts``: starts of an oblimin/geomin rotation (a resample uses 1, the identity start).
    ``start_psi``: starting uniquenesses of the extraction (a resample starts from the full sample's; a drop from
    the whole pool's reference solution, when there is one).
    ``with_factorability=False`` leaves KMO and Bartlett's test out (None; a resample does not read them).
    """
    names = list(settings.items)
    stage(f"correlations of the {len(names)} active items")
    fi = factor_input(inputs, settings, names)
    warnings: list[Note] = list(fi.warnings)
    correlations = CorrelationsSection(type=settings.correlation, items=tuple(names), matrix=fi.R,
                                       smoothed=fi.smoothed, n=fi.n, warnings=fi.warnings)
    k = len(names)
    factorability = retention = None
    result: EFAResult | None = None
    efa_warnings: list[Note] = []
    m: int | None = None
    withheld = None
    try:
        check_factor_model(fi.n, k, min_items=0)
        if with_factorability:
            factorability = factorability_summary(fi.R, fi.n, names=names)
        check_factor_model(fi.n, k)
        stage(f"parallel analysis of {k} items against random data")
        retention = _retention(inputs, settings, fi, names)
        m = settings.n_factors if settings.n_factors is not None else max(1, int(retention["suggested"]))
        m, cut = cap_factors(m, k)
        if cut is not None:
            warnings.append(cut)
        previous = None
        if k != len(inputs.pool_items) and fi.pool_used:
            stage(f"the whole pool's solution with {m} factors (to line the factors up)")
            previous = _reference(inputs, settings, m)
            u = (previous or {}).get("uniquenesses") or {}
            if start_psi is None and all(u.get(n) is not None for n in names):
                # the whole pool's uniquenesses of these items: a start a few Newton steps from this optimum
                start_psi = np.array([u[n] for n in names], dtype=float)
        stage(f"extraction ({settings.extraction}) and {settings.rotation} rotation of {m} factors")
        result = factor_analysis(fi.R, m, n=fi.n, names=names, method=settings.extraction, rotation=settings.rotation,
                                 gamma=settings.gamma, constructs=_constructs(inputs, names), previous=previous,
                                 thresholds=settings.thresholds, item_rest_r=[r.item_rest_r for r in rows],
                                 reverse=[r.reverse for r in rows], seed=settings.seed, random_starts=random_starts,
                                 start_psi=start_psi)
        if names == list(inputs.pool_items) and fi.pool_used and random_starts == REFERENCE_STARTS:
            # the whole pool's own solution is the reference the drops line up with: keep it, not refit it
            ref = _reference_of(result)
            inputs.memo(_reference_key(settings, m), lambda: ref)
        efa_warnings = list(result.warnings)
        why = degenerate_reason(result)
        if why is not None:
            rot = settings.rotation + (f" (gamma {settings.gamma:g})" if settings.rotation == "oblimin" else "")
            advice = ("use gamma 0 (quartimin)" if settings.rotation == "oblimin" and settings.gamma != 0
                      else "use another rotation or fewer factors")
            msg = f"The {rot} solution degenerated: {why}. It is not shown; {advice}."
            withheld = {"n_factors": result.n_factors, "rotation": settings.rotation, "gamma": settings.gamma,
                        "reason": msg}
            efa_warnings = [note("rotation_degenerate", msg)]
            result = None
        else:
            efa_warnings.extend(few_item_notes(result, settings.thresholds))
    except InputError as exc:  # the data do not support this part: a warning, not a failure
        efa_warnings = [Note(exc.code, exc.message)]
        m = None
    warnings.extend(efa_warnings)
    flags = all_flags(result.flags if result is not None else [], fi.R, rows, settings.thresholds)
    efa = EfaSection(result=result, flags=flags, warnings=tuple(efa_warnings), withheld=withheld)
    stage("omega hierarchical (Schmid-Leiman)")
    omega, more = omega_family(fi, settings, inputs, names, result, m, uni, random_starts=random_starts)
    warnings.extend(more)
    return FactorSections(correlations, factorability, retention, efa, omega), warnings
