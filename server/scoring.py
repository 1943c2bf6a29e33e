"""Scoring rules and item statistics of a stored snapshot (``GET /api/snapshots/{id}/scoring-rules`` and
``/item-statistics``).

Pure reading of the stored record (no engine, no API layer): the subscales are the snapshot's constructs
among its kept items, the reverse formula comes from the item ranges (``min + max - x``), the method and the
minimum share of answered items were chosen at save (``Draft.scoring_method``, ``Draft.min_answered_share``;
records saved before they existed read as ``mean`` and 0.8), and the reliability a rule rests on is the stored
analysis's. CSV text goes through :func:`server.exports.write_csv` (formula cells neutralised).
"""
from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

from .exports import write_csv

SCORING_METHODS = ("mean", "sum")
DEFAULT_METHOD = "mean"
#: A person needs answers to at least this share of a subscale's items for a score.
DEFAULT_MIN_ANSWERED_SHARE = 0.8  # common practice
#: The total score is supported when omega hierarchical reaches this value.
OMEGA_H_FOR_TOTAL = 0.5  # common practice (Reise, Bonifay & Haviland, 2013, J Pers Assess 95:129-140)

WHOLE_POOL = "(whole pool)"
TOTAL = "(total)"

RULE_COLUMNS = ("scale", "kind", "supported", "item", "text", "reverse", "formula", "item_min", "item_max",
                "method", "n_items", "min_answered", "score_min", "score_max", "alpha", "alpha_ci_low",
                "alpha_ci_high", "omega_total", "omega_hierarchical", "note")
STAT_COLUMNS = ("subscale", "item", "text", "construct", "reverse", "n", "n_missing", "mean", "sd",
                "item_rest_r", "alpha_if_deleted", "omega_if_deleted", "r_other_max", "r_other_subscale")


def scoring_choice(snap: Mapping[str, Any]) -> dict:
    """The snapshot's scoring method and minimum answered share (defaults for older records)."""
    stored = snap.get("scoring") or {}
    return {"method": stored.get("method") or DEFAULT_METHOD,
            "min_answered_share": stored.get("min_answered_share") or DEFAULT_MIN_ANSWERED_SHARE}


def min_answered(share: float, k: int) -> int:
    """At least ``share`` of ``k`` items, rounded up (0.8 of 5 -> 4; never fewer than 1)."""
    return max(1, math.ceil(round(share * k, 9)))


def _num(value: Any) -> float | None:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    return float(value) if math.isfinite(value) else None


def _fmt(x: float) -> str:
    return f"{x:g}"


def reverse_formula(lo: float | None, hi: float | None, reverse: bool) -> str:
    """``"x"`` for a forward item, ``"6 - x"`` for a reverse-keyed 1-5 item (min + max - x)."""
    if not reverse:
        return "x"
    if lo is None or hi is None:
        return "min + max - x"
    return f"{_fmt(lo + hi)} - x"


def _groups(snap: Mapping[str, Any]) -> list[tuple[str, list[str]]]:
    """(subscale, items) among the kept items: the stored analysis's constructs, else the codebook's."""
    kept = [str(i) for i in snap.get("items") or []]
    constructs = (snap.get("analysis") or {}).get("constructs") or {}
    if constructs:
        return [(str(name), [i for i in (block.get("items") or []) if i in kept])
                for name, block in constructs.items()]
    by: dict[str, list[str]] = {}
    for m in snap.get("item_meta") or []:
        if m.get("construct") and m.get("name") in kept:
            by.setdefault(str(m["construct"]), []).append(str(m["name"]))
    return list(by.items())


def _reliability(rel: Mapping[str, Any]) -> dict:
    ci = rel.get("alpha_ci") or [None, None]
    return {"alpha": _num(rel.get("alpha")), "alpha_ci": [_num(ci[0]), _num(ci[1])],
            "omega_total": _num(rel.get("omega_total")),
            "omega_hierarchical": _num(rel.get("omega_hierarchical"))}


def _rule(name: str, kind: str, items: Sequence[str], meta: Mapping[str, Mapping[str, Any]], method: str,
          share: float, rel: Mapping[str, Any]) -> dict:
    rows: list[dict[str, Any]] = []
    for item in items:
        m = meta.get(item) or {}
        lo, hi = _num(m.get("min")), _num(m.get("max"))
        rows.append({"item": item, "text": m.get("text") or "", "reverse": bool(m.get("reverse")),
                     "formula": reverse_formula(lo, hi, bool(m.get("reverse"))), "min": lo, "max": hi})
    k = len(rows)
    los = [float(r["min"]) for r in rows if r["min"] is not None]
    his = [float(r["max"]) for r in rows if r["max"] is not None]
    known = len(los) == k and len(his) == k
    score_range: list[float | None]
    if method == "sum":
        score_range = [sum(los), sum(his)] if known else [None, None]
    else:
        score_range = [min(los), max(his)] if known and k else [None, None]
    return {"name": name, "kind": kind, "items": rows, "n_items": k, "method": method,
            "min_answered": min_answered(share, k) if k else 0, "score_range": score_range,
            "reliability": _reliability(rel), "supported": True, "note": ""}


def scoring_rules(snap: Mapping[str, Any]) -> dict:
    """How to score the snapshot's scale: one rule per subscale and one for the total.

    ``mean``: the mean of the answered items after reverse scoring; ``sum``: that mean times the number of
    items (a prorated sum, so a skipped answer does not lower the score). A person with fewer than
    ``min_answered`` answered items gets no score. The total is supported when there is one subscale or when
    the stored omega hierarchical is at least .50 (common practice; Reise, Bonifay & Haviland, 2013).
    """
    choice = scoring_choice(snap)
    method, share = choice["method"], float(choice["min_answered_share"])
    meta = {str(m.get("name")): m for m in snap.get("item_meta") or []}
    analysis = snap.get("analysis") or {}
    constructs = analysis.get("constructs") or {}
    groups = [(name, items) for name, items in _groups(snap) if items]
    subscales = [_rule(name, "subscale", items, meta, method, share, constructs.get(name) or {})
                 for name, items in groups]
    pool_rel = analysis.get("reliability") or {}
    total = _rule(TOTAL, "total", [str(i) for i in snap.get("items") or []], meta, method, share, pool_rel)
    omega_h = total["reliability"]["omega_hierarchical"]
    if len(subscales) <= 1:
        total["note"] = "One subscale: the total is that scale."
    elif omega_h is None:
        total["supported"] = False
        total["note"] = ("No omega hierarchical is stored for this snapshot, so nothing supports one total "
                         "score across the subscales; score the subscales.")
    elif omega_h < OMEGA_H_FOR_TOTAL:
        total["supported"] = False
        total["note"] = (f"Omega hierarchical is {omega_h:.2f}, below {OMEGA_H_FOR_TOTAL:.2f} (common practice): "
                         "the general factor is too weak for one total score; score the subscales.")
    else:
        total["note"] = (f"Omega hierarchical is {omega_h:.2f}, at least {OMEGA_H_FOR_TOTAL:.2f} "
                         "(common practice): a total score is supported.")
    return {"snapshot_id": snap.get("id"), "name": snap.get("name"), "method": method,
            "min_answered_share": share, "min_answered_basis": "common practice",
            "rule": ("Reverse-score each reverse-keyed item with its formula, then take the "
                     + ("mean of the answered items times the number of items (prorated sum)" if method == "sum"
                        else "mean of the answered items")
                     + "; a person who answered fewer than min_answered items gets no score."),
            "subscales": subscales, "total": total}


def scoring_rules_csv(rules: Mapping[str, Any]) -> str:
    """The rules as CSV: one row per (scale, item); the scale's columns repeat on each of its rows."""
    out = []
    for scale in [*rules["subscales"], rules["total"]]:
        rel = scale["reliability"]
        for it in scale["items"]:
            out.append([scale["name"], scale["kind"], scale["supported"], it["item"], it["text"], it["reverse"],
                        it["formula"], it["min"], it["max"], scale["method"], scale["n_items"],
                        scale["min_answered"], scale["score_range"][0], scale["score_range"][1], rel["alpha"],
                        rel["alpha_ci"][0], rel["alpha_ci"][1], rel["omega_total"], rel["omega_hierarchical"],
                        scale["note"]])
    return write_csv(RULE_COLUMNS, out)


def _r_other(row: Mapping[str, Any]) -> tuple[float | None, str | None]:
    values = [(v, str(k)) for k, v in (row.get("r_other") or {}).items() if _num(v) is not None]
    if not values:
        return None, None
    value, name = max(values)
    return value, name


def item_statistics(snap: Mapping[str, Any]) -> dict:
    """The snapshot's item table per subscale: the subscale's item-rest r, alpha and omega if deleted and
    highest other-subscale correlation, with the pool-level descriptives. Records without per-construct
    tables (saved before issue 11) give the pool-level rows as one group named ``(whole pool)``."""
    analysis = snap.get("analysis") or {}
    pool = {str(r.get("name")): r for r in analysis.get("items") or []}
    meta = {str(m.get("name")): m for m in snap.get("item_meta") or []}
    kept = [str(i) for i in snap.get("items") or []]

    def row(subscale: str, name: str, sub: Mapping[str, Any]) -> dict:
        p, m = pool.get(name) or {}, meta.get(name) or {}
        r_max, r_name = _r_other(sub)
        source = sub if sub else p
        return {"subscale": subscale, "item": name, "text": m.get("text", p.get("text")) or "",
                "construct": m.get("construct", p.get("construct")) or "",
                "reverse": bool(m.get("reverse", p.get("reverse"))),
                "n": p.get("n"), "n_missing": p.get("n_missing"), "mean": p.get("mean"), "sd": p.get("sd"),
                "item_rest_r": source.get("item_rest_r"), "alpha_if_deleted": source.get("alpha_if_deleted"),
                "omega_if_deleted": source.get("omega_if_deleted"), "r_other_max": r_max,
                "r_other_subscale": r_name}

    groups: list[dict] = []
    covered: set[str] = set()
    for name, block in (analysis.get("constructs") or {}).items():
        table = [r for r in block.get("item_table") or [] if r.get("name") in kept]
        if not table:
            continue
        groups.append({"name": str(name), "items": [row(str(name), str(r["name"]), r) for r in table]})
        covered.update(str(r["name"]) for r in table)
    rest = [i for i in kept if i not in covered]
    if rest:
        groups.append({"name": WHOLE_POOL, "items": [row(WHOLE_POOL, i, {}) for i in rest]})
    return {"snapshot_id": snap.get("id"), "name": snap.get("name"), "subscales": groups}


def item_statistics_csv(stats: Mapping[str, Any]) -> str:
    """The item statistics as CSV, one row per (subscale, item)."""
    return write_csv(STAT_COLUMNS, ([r[c] for c in STAT_COLUMNS] for g in stats["subscales"] for r in g["items"]))
