"""Rules that point at items worth a second look after a factor analysis.

Every rule is a heuristic with a threshold a team may change per request; the messages say so.

References
----------
Howard, M. C. (2016). A review of exploratory factor analysis decisions and overview of current
    practices: what we are doing and how can we improve? International Journal of Human-Computer
    Interaction, 32, 51-62.  (The .40 / .30 / .20 cross-loading heuristic.)
Heywood, H. B. (1931). On finite sequences of real numbers. Proceedings of the Royal Society A, 134,
    486-501.
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from .errors import InputError

__all__ = ["DEFAULT_THRESHOLDS", "FLAG_KINDS", "THRESHOLDS", "Threshold", "flag_items", "item_level_flags",
           "resolve_thresholds"]


@dataclass(frozen=True)
class Threshold:
    """One flag threshold: its default, allowed range, the words a person reads and where the value comes from."""

    name: str
    default: float
    min: float
    max: float
    label: str
    source: str
    help: str


#: The flag rules' thresholds (all heuristics, overridable per request); the one home of their defaults.
THRESHOLDS: tuple[Threshold, ...] = (
    Threshold("primary_min", 0.40, 0.0, 1.0, "Weak: primary loading below", "Howard 2016",
              "An item whose largest absolute loading is below this is flagged as weakly explained."),
    Threshold("communality_min", 0.20, 0.0, 1.0, "Weak: communality below", "common practice",
              "An item whose communality (variance shared with the factors) is below this is flagged as weak."),
    Threshold("cross_min", 0.30, 0.0, 1.0, "Cross-loading: a second loading of at least", "Howard 2016",
              "A second loading at least this large (in absolute value) can make a cross-loading."),
    Threshold("cross_gap", 0.20, 0.0, 1.0, "Cross-loading: and less than this below the primary", "Howard 2016",
              "... when it is also less than this below the primary loading."),
    Threshold("item_rest_min", 0.0, -1.0, 1.0, "Reverse suspect: item-rest r below", "common practice",
              "An item not declared reverse-keyed whose item-rest correlation is below this may be miskeyed."),
    Threshold("redundant_r", 0.80, 0.0, 1.0, "Near-duplicate: inter-item r of at least", "Clark & Watson 1995",
              "Two items correlating at least this much may say the same thing twice."),
    Threshold("extreme_share", 0.50, 0.0, 1.0, "Floor/ceiling: share of answers at one end of at least",
              "common practice", "An item with at least this share of answers at one end tells few people apart."),
    Threshold("heywood_communality", 0.995, 0.0, 1.0, "Heywood: communality of at least", "common practice",
              "A communality at or above this (uniqueness at the usual 0.005 bound) is a Heywood case."),
)

#: Default thresholds by name (read from :data:`THRESHOLDS`).
DEFAULT_THRESHOLDS: dict[str, float] = {t.name: t.default for t in THRESHOLDS}
_RANGES = {t.name: (t.min, t.max) for t in THRESHOLDS}

FLAG_KINDS = ("cross_loading", "weak_loading", "misplaced", "heywood", "reverse_suspect", "near_duplicate",
              "floor_ceiling")

_HEURISTIC = "These thresholds are heuristics, not tests."


def resolve_thresholds(thresholds: Mapping[str, float] | None) -> dict[str, float]:
    """Merge overrides into :data:`DEFAULT_THRESHOLDS`, checking names and values."""
    out = dict(DEFAULT_THRESHOLDS)
    if not thresholds:
        return out
    for key, value in thresholds.items():
        if key not in DEFAULT_THRESHOLDS:
            raise InputError(f"Unknown flag threshold '{key}'; known thresholds are "
                             f"{', '.join(DEFAULT_THRESHOLDS)}.", code="bad_threshold",
                             details={"threshold": key})
        try:
            v = float(value)
        except (TypeError, ValueError):
            raise InputError(f"Flag threshold '{key}' must be a number; got {value!r}.",
                             code="bad_threshold", details={"threshold": key, "value": str(value)}) from None
        lo, hi = _RANGES[key]
        if not (lo <= v <= hi) or not np.isfinite(v):
            raise InputError(f"Flag threshold '{key}' must lie between {lo:g} and {hi:g}; got {v:g}.",
                             code="bad_threshold", details={"threshold": key, "value": v})
        out[key] = v
    return out


def _factor_name(labels: Sequence[str], j: int) -> str:
    lab = labels[j]
    generic = f"Factor {j + 1}"
    return lab if lab == generic else f"factor {j + 1} ('{lab}')"


def flag_items(pattern: ArrayLike, *, names: Sequence[str],
               communalities: Sequence[float | None] | np.ndarray | None = None,
               factor_labels: Sequence[str] | None = None,
               constructs: Sequence[str | None] | None = None,
               item_rest_r: Sequence[float | None] | np.ndarray | None = None,
               reverse: Sequence[bool] | None = None, thresholds: Mapping[str, float] | None = None,
               heywood: Sequence[str] | None = None) -> list[dict]:
    """Flag items by the rules of issue 3.

    Parameters
    ----------
    pattern : array_like, shape (k, m)
        Rotated pattern loadings, factors already reflected so each factor's loadings sum positive.
    names : sequence of str
        Item names, one per row.
    communalities : array_like, optional
        Communalities from the unrotated solution.
    factor_labels : sequence of str, optional
        One label per factor; a label equal to a codebook construct means the factor was matched to it.
    constructs : sequence of (str or None), optional
        The codebook construct of each item.
    item_rest_r : array_like, optional
        Item-rest correlations (NaN where unknown).
    reverse : sequence of bool, optional
        Whether each item is declared reverse-keyed (and was reverse-scored before the analysis).
    thresholds : mapping, optional
        Overrides of :data:`DEFAULT_THRESHOLDS`.
    heywood : sequence of str, optional
        Items the extraction reported as Heywood cases.

    Returns
    -------
    list of dict
        ``{"item", "kind", "message"}`` with ``kind`` one of :data:`FLAG_KINDS`, in item order.

    Notes
    -----
    With the primary loading ``p`` (largest absolute loading) and the second-largest ``s``:

    * ``cross_loading``: ``s >= cross_min`` and ``p - s < cross_gap`` (Howard 2016: .30 and .20);
    * ``weak_loading``: ``p < primary_min`` (.40) or communality ``< communality_min`` (.20);
    * ``misplaced``: the primary factor is labelled with a construct other than the item's own;
    * ``heywood``: reported by the extraction, or communality ``>= heywood_communality``;
    * ``reverse_suspect`` (item not declared reverse): item-rest r below ``item_rest_min`` (0), or the
      primary loading (of at least ``cross_min`` in size, so noise-level loadings are ignored) has the
      sign opposite to the median loading of its construct's other items on that factor (opposite to
      the factor's direction, which is positive, when it has no construct-mates there).

    References
    ----------
    Howard, M. C. (2016). International Journal of Human-Computer Interaction, 32, 51-62.
    """
    P = np.asarray(pattern, dtype=float)
    if P.ndim != 2:
        raise InputError(f"The pattern matrix must be items x factors; got shape {P.shape}.",
                         code="bad_loadings", details={"shape": list(P.shape)})
    k, m = P.shape
    names = list(names)
    if len(names) != k:
        raise InputError(f"{len(names)} item names were given for {k} rows of loadings.",
                         code="bad_names", details={"names": len(names), "rows": k})
    th = resolve_thresholds(thresholds)
    labels = list(factor_labels) if factor_labels is not None else [f"Factor {j + 1}" for j in range(m)]
    cons = list(constructs) if constructs is not None else [None] * k
    h2 = np.asarray(communalities, dtype=float) if communalities is not None else np.sum(P * P, axis=1)
    irr = np.asarray(item_rest_r, dtype=float) if item_rest_r is not None else np.full(k, np.nan)
    rev = list(reverse) if reverse is not None else [False] * k
    hey = set(heywood or ())
    construct_set = {c for c in cons if c}

    absP = np.abs(P)
    order = np.argsort(-absP, axis=1, kind="stable")
    prim = order[:, 0]
    by_place: dict[tuple, list[int]] = {}  # (construct, primary factor) -> its items, in order
    for t in range(k):
        if cons[t]:
            by_place.setdefault((cons[t], int(prim[t])), []).append(t)
    flags: list[dict] = []
    for i, name in enumerate(names):
        j = int(prim[i])
        p_load = float(P[i, j])
        p_abs = abs(p_load)
        fac = _factor_name(labels, j)
        # cross-loading
        if m > 1:
            j2 = int(order[i, 1])
            s_abs = float(absP[i, j2])
            if s_abs >= th["cross_min"] and p_abs - s_abs < th["cross_gap"]:
                flags.append({"item": name, "kind": "cross_loading", "message": (
                    f"Item '{name}' loads {p_load:.2f} on {fac} and {P[i, j2]:.2f} on "
                    f"{_factor_name(labels, j2)}: the second loading is at least {th['cross_min']:.2f} and "
                    f"less than {th['cross_gap']:.2f} below the primary (Howard 2016). {_HEURISTIC}")})
        # weak
        reasons = []
        if p_abs < th["primary_min"]:
            reasons.append(f"its largest loading is {p_load:.2f} (on {fac}), below {th['primary_min']:.2f}")
        if np.isfinite(h2[i]) and h2[i] < th["communality_min"]:
            reasons.append(f"its communality is {h2[i]:.2f}, below {th['communality_min']:.2f}")
        if reasons:
            flags.append({"item": name, "kind": "weak_loading", "message": (
                f"Item '{name}' is weakly explained by the factors: {' and '.join(reasons)}. {_HEURISTIC}")})
        # misplaced
        own = cons[i]
        if own and labels[j] in construct_set and labels[j] != own:
            flags.append({"item": name, "kind": "misplaced", "message": (
                f"Item '{name}' is written for '{own}' in the codebook but its primary loading "
                f"({p_load:.2f}) is on factor {j + 1}, which the items of '{labels[j]}' define. "
                f"Primary-loading assignment is a heuristic.")})
        # heywood
        if name in hey or (np.isfinite(h2[i]) and h2[i] >= th["heywood_communality"]):
            flags.append({"item": name, "kind": "heywood", "message": (
                f"Item '{name}' is a Heywood case: its communality is {h2[i]:.3f} (uniqueness "
                f"{1 - h2[i]:.3f}), at or beyond the boundary of 1. Its loadings are not trustworthy; "
                f"it may duplicate another item, or too many factors were extracted.")})
        # reverse suspect
        if not rev[i]:
            why = []
            if np.isfinite(irr[i]) and irr[i] < th["item_rest_min"]:
                why.append(f"its item-rest correlation is {irr[i]:.2f}")
            mates = [t for t in by_place.get((own, j), ()) if t != i] if own else []
            if mates:
                ref_sign = np.sign(np.median(P[mates, j]))
                against = f"the other items of '{own}' on {fac}"
            else:
                ref_sign = 1.0
                against = f"the direction of {fac}"
            if ref_sign != 0 and np.sign(p_load) == -ref_sign and p_abs >= th["cross_min"]:
                why.append(f"its primary loading {p_load:.2f} runs against {against}")
            if why:
                flags.append({"item": name, "kind": "reverse_suspect", "message": (
                    f"Item '{name}' is not declared reverse-keyed, but {' and '.join(why)}: it may be "
                    f"reverse-worded or miskeyed. {_HEURISTIC}")})
    return flags


def item_level_flags(R: ArrayLike, *, names: Sequence[str], floor: Sequence[float | None] | np.ndarray | None = None,
                     ceiling: Sequence[float | None] | np.ndarray | None = None,
                     thresholds: Mapping[str, float] | None = None) -> list[dict]:
    """Flags that need no factor model: near-duplicate pairs and answers piled at one end.

    Parameters
    ----------
    R : array_like, shape (k, k)
        Inter-item correlation matrix of the active items (after reverse-scoring).
    names : sequence of str
    floor, ceiling : array_like, optional
        Share of each item's answers at the bottom / top of its response range.
    thresholds : mapping, optional
        Overrides of :data:`DEFAULT_THRESHOLDS` (``redundant_r``, ``extreme_share``).

    Returns
    -------
    list of dict
        ``{"item", "kind", "message"}``; a near-duplicate pair flags both items, each naming the other.

    Notes
    -----
    Inter-item correlations far above the .15-.50 range that Clark & Watson (1995) recommend for a
    broad construct usually mean two wordings of one statement, which inflate alpha without adding
    information; ``redundant_r`` (.80) marks the pair. An item whose answers pile at one end
    (``extreme_share``, .50) tells few respondents apart. Both cut-offs are rules of thumb.

    References
    ----------
    Clark, L. A., & Watson, D. (1995). Constructing validity: basic issues in objective scale
    development. Psychological Assessment, 7, 309-319.
    """
    A = np.asarray(R, dtype=float)
    names = list(names)
    k = len(names)
    if A.shape != (k, k):
        raise InputError(f"The correlation matrix is {A.shape[0]} x {A.shape[1]} but {k} item names were "
                         f"given.", code="bad_names", details={"names": k, "shape": list(A.shape)})
    th = resolve_thresholds(thresholds)
    flags: list[dict] = []
    off = np.abs(A) - np.eye(k) * 2
    close = off >= th["redundant_r"]
    np.fill_diagonal(close, False)
    shares = [(None if share is None else np.asarray(share, dtype=float), end)
              for share, end in ((floor, "lowest"), (ceiling, "highest"))]
    for i, name in enumerate(names):
        mates = [t for t in np.argsort(-off[i]) if close[i, t]] if close[i].any() else []
        if mates:
            others = ", ".join(f"'{names[t]}' (r = {A[i, t]:.2f})" for t in mates)
            flags.append({"item": name, "kind": "near_duplicate", "message": (
                f"Item '{name}' correlates at least {th['redundant_r']:.2f} with {others}: the two may say the "
                f"same thing twice, which raises alpha without adding information (Clark & Watson 1995). "
                f"{_HEURISTIC}")})
        for share_v, end in shares:
            if share_v is None:
                continue
            v = float(share_v[i])
            if np.isfinite(v) and v >= th["extreme_share"]:
                flags.append({"item": name, "kind": "floor_ceiling", "message": (
                    f"{v:.0%} of the answers to item '{name}' are at the {end} category (at least "
                    f"{th['extreme_share']:.0%}): it tells few respondents apart. {_HEURISTIC}")})
    return flags
