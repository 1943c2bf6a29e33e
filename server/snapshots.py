"""Snapshots as a service: check a draft, build the record (removal trail, analysis, stability), compare two.

A snapshot is immutable. Saving recomputes everything on the server (the removal trail and the full
analysis of the kept items) so the record never depends on what a browser sent as numbers. The record
is stored as plain JSON: ``to_json`` (the API edge's serializer, passed in by the route, which keeps this
module free of the API layer) turns the typed answers into the same JSON the live routes send.
Bad drafts raise :class:`~server.stats.errors.InputError` naming the item or field; an unknown id
raises :class:`~server.errors.NotFound`.
"""
from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any

from . import __version__
from .analysis.settings import OPTIONS
from .engine import Engine
from .errors import NotFound
from .retest import RetestQuery, compute_retest
from .scoring import WHOLE_POOL, item_statistics, scoring_rules
from .stats.agreement import agreement_summary
from .stats.errors import InputError
from .stats.notes import Note, note
from .store import StoreBackend

#: Our own small vocabulary of reasons for removing an item (the free-text reason is always required).
REASON_CODES = ("cross-loading", "weak", "belongs-elsewhere", "redundant", "wording", "floor-ceiling", "other")

MAX_NAME = 200
MAX_TEXT = 20_000

COMPARED_COEFFICIENTS = ("alpha", "alpha_standardized", "omega_total", "omega_unidimensional", "omega_hierarchical",
                         "lambda2", "lambda6", "split_half",
                         "mean_inter_item_r", "scale_mean", "scale_sd", "sem", "n_complete")

ToJson = Callable[[Any], Any]


@dataclass(frozen=True)
class Removal:
    """One removed item as the user gave it (``alpha_after``/``omega_after`` are recomputed, never taken)."""

    item: str
    reason: str | None = None
    code: str | None = None


@dataclass(frozen=True)
class AgreementTable:
    """A rater table to compute and keep with the snapshot."""

    ratings: Sequence[Sequence[Any]]
    level: str


@dataclass(frozen=True)
class Draft:
    """A snapshot to save, as received (checked by :func:`check_draft`)."""

    name: str
    items: Sequence[str]
    author: str = ""
    note: str = ""
    removed: Sequence[Removal] = ()
    settings: Mapping[str, Any] | None = None
    parent: str | None = None
    retest: RetestQuery | None = None
    agreement: AgreementTable | None = None
    resampling_run_id: str | None = None          # a finished resampling run to keep a summary of
    resampling_run: Mapping[str, Any] | None = None  # that run as ``GET /api/runs/{id}`` gives it (None: not found)
    scoring_method: str = "mean"
    min_answered_share: float = 0.8  # common practice


def _bad(code: str, message: str, **details: Any) -> InputError:
    return InputError(message, code=code, details=details)


def normalise_code(code: str | None) -> str | None:
    """'Belongs elsewhere', 'floor/ceiling', 'cross_loading' -> the vocabulary's spelling."""
    if code is None or not code.strip():
        return None
    return "-".join(code.strip().lower().replace("/", " ").replace("_", " ").replace("-", " ").split())


def check_draft(draft: Draft, known: Sequence[str]) -> list[dict]:
    """Explicit checks that name the offending item; returns the cleaned ``removed`` list."""
    if not draft.name.strip():
        raise _bad("missing_name", "The snapshot needs a name.")
    if len(draft.name) > MAX_NAME:
        raise _bad("name_too_long", f"The snapshot name has {len(draft.name)} characters; at most {MAX_NAME}.")
    for field_name in ("author", "note"):
        if len(getattr(draft, field_name)) > MAX_TEXT:
            raise _bad("text_too_long", f"The {field_name} is longer than {MAX_TEXT} characters.", field=field_name)
    known_set = set(known)
    seen: set[str] = set()
    for item in draft.items:
        if item not in known_set:
            raise _bad("unknown_item", f"Kept item '{item}' is not an item of this data set.", item=item)
        if item in seen:
            raise _bad("duplicate_item", f"Item '{item}' is listed twice among the kept items.", item=item)
        seen.add(item)
    if len(draft.items) < 2:
        raise _bad("too_few_items", f"A snapshot needs at least 2 kept items; {len(draft.items)} given.",
                   n_items=len(draft.items))
    if draft.scoring_method not in ("mean", "sum"):
        raise _bad("bad_scoring_method", f"The scoring method '{draft.scoring_method}' is not known; use 'mean' or "
                   "'sum'.", scoring_method=draft.scoring_method)
    share = draft.min_answered_share
    if isinstance(share, bool) or not isinstance(share, (int, float)) or not 0 < share <= 1:
        raise _bad("bad_min_answered_share", f"The minimum answered share is {share!r}; it must be above 0 and "
                   "at most 1 (e.g. 0.8 for 80 % of a subscale's items).", min_answered_share=share)
    removed = []
    removed_seen: set[str] = set()
    for position, r in enumerate(draft.removed):
        if r.item not in known_set:
            raise _bad("unknown_item", f"Removed item '{r.item}' is not an item of this data set.",
                       item=r.item, position=position)
        if r.item in seen:
            raise _bad("kept_and_removed", f"Item '{r.item}' is listed both as kept and as removed.", item=r.item)
        if r.item in removed_seen:
            raise _bad("duplicate_item", f"Item '{r.item}' is listed twice among the removed items.", item=r.item)
        removed_seen.add(r.item)
        reason = (r.reason or "").strip()
        if not reason:
            raise _bad("missing_reason", f"Removed item '{r.item}' needs a reason (a sentence the team agreed on).",
                       item=r.item, position=position)
        if len(reason) > MAX_TEXT:
            raise _bad("text_too_long", f"The reason for removing '{r.item}' is longer than {MAX_TEXT} characters.",
                       item=r.item)
        code = normalise_code(r.code)
        if code is not None and code not in REASON_CODES:
            raise _bad("unknown_reason_code", f"Removed item '{r.item}' has the code '{r.code}'; use one of "
                       + ", ".join(REASON_CODES) + " (or none).", item=r.item, reason_code=r.code,
                       allowed=list(REASON_CODES))
        removed.append({"item": r.item, "reason": reason, "code": code})
    return removed


def _finite(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def coefficients(analysis: Mapping[str, Any]) -> dict:
    """Alpha and the one-factor omega of an analysis answer (JSON form), as every step of the trail has it.

    The trail's ``omega_total`` is the unidimensional omega (``omega_unidimensional`` since issue 11): the
    reliability-only steps have no factor model, so the last step must not switch to a Schmid-Leiman omega.
    """
    rel = analysis.get("reliability") or {}
    return {"alpha": _finite(rel.get("alpha")),
            "omega_total": _finite(rel.get("omega_unidimensional", rel.get("omega_total")))}


def light(snap: Mapping[str, Any]) -> dict:
    """A snapshot without its full analysis, for lists."""
    rel = (snap.get("analysis") or {}).get("reliability") or {}
    return {
        "id": snap.get("id"),
        "dataset_id": snap.get("dataset_id"),
        "name": snap.get("name"),
        "author": snap.get("author"),
        "note": snap.get("note"),
        "created_at": snap.get("created_at"),
        "parent": snap.get("parent"),
        "items": snap.get("items"),
        "n_items": len(snap.get("items") or []),
        "removed": removals(snap),
        "alpha": rel.get("alpha"),
        "omega_total": rel.get("omega_total"),
        "dataset_sha256": snap.get("dataset_sha256"),
        "software_version": snap.get("software_version"),
    }


def removals(snap: Mapping[str, Any]) -> list[dict]:
    """The removed items with reason and code, as a restore or a list shows them."""
    return [{"item": r.get("item"), "reason": r.get("reason"), "code": r.get("code")}
            for r in snap.get("removed") or []]


def restore_view(snap: Mapping[str, Any]) -> dict:
    """The snapshot's items, settings and removal record, ready for the dashboard to load."""
    return {"snapshot_id": snap.get("id"), "dataset_id": snap.get("dataset_id"), "name": snap.get("name"),
            "items": snap.get("items"), "settings": snap.get("settings") or {}, "removed": removals(snap)}


def get(store: StoreBackend, snapshot_id: str) -> dict:
    """The stored snapshot; 404 when there is none with this id."""
    snap = store.get_snapshot(snapshot_id)
    if snap is None:
        raise NotFound("snapshot", snapshot_id)
    return snap


def item_meta(dataset: Any, items: Sequence[str], reverse: Sequence[str] | None, to_json: ToJson) -> list[dict]:
    """Codebook facts of the kept items, with the reverse keying the analysis used (for the scoring key)."""
    by_name = {m.name: m for m in dataset.items}
    out = []
    for name in items:
        m = by_name[name]
        d = to_json(m.to_dict() if hasattr(m, "to_dict") else dict(vars(m)))
        d["codebook_reverse"] = bool(m.reverse)
        d["reverse"] = bool(name in reverse) if reverse is not None else bool(m.reverse)
        out.append(d)
    return out


def effective_reverse(analysis: Mapping[str, Any], settings: Mapping[str, Any]) -> list[str] | None:
    """The reverse-keyed items the analysis used: the resolved setting, else the request's, else None
    (= the codebook)."""
    for source in ((analysis.get("settings") or {}), settings):
        rev = source.get("reverse")
        if isinstance(rev, list):
            return [str(r) for r in rev]
    return None


def stability(engine: Engine, store: StoreBackend, draft: Draft, dataset_id: str, kept: list[str],
              reverse: list[str] | None, to_json: ToJson) -> dict | None:
    """The stability and agreement results a snapshot includes (the same code as their routes)."""
    if draft.retest is None and draft.agreement is None:
        return None
    out: dict[str, Any] = {}
    if draft.retest is not None:
        query = replace(draft.retest, first=dataset_id, snapshot=None, items=list(draft.retest.items or kept),
                        reverse=draft.retest.reverse if draft.retest.reverse is not None else reverse)
        out["retest"] = to_json(compute_retest(engine, store, query))
        out["retest_request"] = to_json(query)
    if draft.agreement is not None:
        out["agreement"] = to_json(agreement_summary(draft.agreement.ratings, draft.agreement.level))
        out["agreement_level"] = draft.agreement.level
    return out


def resampling_summary(draft: Draft, dataset_id: str, kept: list[str]) -> dict | None:
    """A compact copy of the draft's resampling run (per-item rates, factor counts, coefficient intervals).

    Refuses (422) an unknown run, a run of another data set and a run that has not finished. The loading
    intervals are left out: the copy keeps what the report shows, and it outlives the run (runs can be deleted).
    """
    if draft.resampling_run_id is None:
        return None
    run_id = draft.resampling_run_id
    run = draft.resampling_run
    if run is None:
        raise _bad("unknown_run", f"There is no resampling run with id '{run_id}'.", resampling_run_id=run_id)
    if run.get("dataset_id") != dataset_id:
        raise _bad("run_other_dataset", f"The resampling run '{run_id}' belongs to another data set.",
                   resampling_run_id=run_id, run_dataset_id=run.get("dataset_id"))
    if run.get("state") != "done" or not run.get("result"):
        raise _bad("run_not_done", f"The resampling run '{run_id}' is {run.get('state')}, not done; only a "
                   "finished run can be kept with a snapshot.", resampling_run_id=run_id, state=run.get("state"))
    result = run["result"]
    settings = run.get("settings") or {}
    run_items = list(settings.get("items") or [r["name"] for r in result.get("items", [])])
    keep = ("n_resamples", "n_failed", "seed", "level", "n_factors", "factors", "retention", "coefficients",
            "subscales", "quarter", "bca_note", "errors")
    return {
        "run_id": run_id, "finished_at": run.get("finished_at"),
        "settings": {k: settings.get(k) for k in ("correlation", "extraction", "rotation", "missing", "n_factors",
                                                  "seed")},
        "run_items": run_items, "same_items": sorted(run_items) == sorted(kept),
        **{k: result.get(k) for k in keep},
        "items": [{k: row.get(k) for k in ("name", "flags", "flags_full_sample", "primary", "primary_none",
                                           "early_removal")} for row in result.get("items", [])],
    }


def trail(engine: Engine, dataset_id: str, payload: Mapping[str, Any], kept: list[str], removed: list[dict],
          analysis: Mapping[str, Any], to_json: ToJson) -> list[dict]:
    """Alpha and omega from kept + every removed item, taking the removed items out one at a time in order.

    The last step is ``analysis`` itself (the kept items); each ``removed`` entry gets the coefficients
    after its removal (``alpha_after``, ``omega_after``, ``n_items_after``).
    """
    removed_items = [r["item"] for r in removed]
    steps = []
    for step in range(len(removed) + 1):
        pool = kept + removed_items[step:]
        result = analysis if step == len(removed) else \
            to_json(engine.reliability(dataset_id, {**payload, "items": pool}))
        steps.append({"step": step, "removed": removed_items[step - 1] if step else None, "n_items": len(pool),
                      **coefficients(result)})
    for r, t in zip(removed, steps[1:]):
        r.update({"alpha_after": t["alpha"], "omega_after": t["omega_total"], "n_items_after": t["n_items"]})
    return steps


def save(engine: Engine, store: StoreBackend, dataset_id: str, draft: Draft, payload: Mapping[str, Any],
         to_json: ToJson) -> dict:
    """Check the draft, recompute the trail, the analysis of the kept items and any stability, and store it.

    ``payload`` is the checked analysis request (the settings as the analysis route hands them to the
    engine); ``draft.settings`` is kept as the user gave it, for restore. Returns the stored record.
    """
    dataset = engine.dataset(dataset_id)  # 404 if unknown
    record = store.get_dataset(dataset_id) or {}
    removed = check_draft(draft, [m.name for m in dataset.items])
    if draft.parent is not None:
        parent = store.get_snapshot(draft.parent)
        if parent is None:
            raise _bad("unknown_parent", f"The parent snapshot '{draft.parent}' does not exist.", parent=draft.parent)
        if parent.get("dataset_id") != dataset_id:
            raise _bad("parent_other_dataset", f"The parent snapshot '{draft.parent}' belongs to another data set.",
                       parent=draft.parent, parent_dataset_id=parent.get("dataset_id"))
    settings = dict(draft.settings or {})
    kept = list(draft.items)
    resampling = resampling_summary(draft, dataset_id, kept)  # checked before the long part of the work
    # The full analysis of the kept items, exactly as POST /api/datasets/{id}/analysis would answer it.
    analysis = to_json(engine.analyse(dataset_id, {**payload, "items": kept}))
    steps = trail(engine, dataset_id, payload, kept, removed, analysis, to_json)
    reverse = effective_reverse(analysis, settings)
    snapshot = {
        "dataset_id": dataset_id,
        "dataset_name": record.get("name") or getattr(dataset, "name", None),
        "dataset_sha256": record.get("sha256"),
        "name": draft.name.strip(),
        "author": draft.author.strip(),
        "note": draft.note,
        "items": kept,
        "removed": removed,
        "trail": steps,
        "settings": settings,
        "item_meta": item_meta(dataset, kept, reverse, to_json),
        "id_column": getattr(dataset, "id_column", None),
        "analysis": analysis,
        "software_version": __version__,
        "parent": draft.parent,
        "stability": stability(engine, store, draft, dataset_id, kept, reverse, to_json),
        "resampling": resampling,
        "scoring": {"method": draft.scoring_method, "min_answered_share": float(draft.min_answered_share)},
    }
    try:
        return store.add_snapshot(dataset_id, snapshot)
    except KeyError:  # the data set was deleted while we computed
        raise NotFound("dataset", dataset_id) from None


def _change(a: Any, b: Any) -> Any:
    if isinstance(a, (int, float)) and isinstance(b, (int, float)) and not isinstance(a, bool) \
            and not isinstance(b, bool):
        return b - a
    return None


def _loadings_by_item(analysis: Mapping[str, Any]) -> tuple[dict, list]:
    efa = analysis.get("efa") or {}
    loadings = efa.get("loadings")
    labels = efa.get("factors") or []
    if isinstance(loadings, dict):
        return {str(k): list(v) for k, v in loadings.items()}, labels
    if isinstance(loadings, list):
        return dict(zip(efa.get("items") or analysis.get("settings", {}).get("items") or [], loadings)), labels
    return {}, labels


def _primary(row: list) -> dict | None:
    vals = [(abs(v), i, v) for i, v in enumerate(row) if isinstance(v, (int, float)) and math.isfinite(v)]
    if not vals:
        return None
    _, i, v = max(vals)
    return {"factor": i, "loading": v}


def _omega_labelled(rel: Mapping[str, Any]) -> Mapping[str, Any]:
    """A record saved before issue 11 (no ``omega_basis``): its ``omega_total`` was the one-factor omega, so it
    is compared as ``omega_unidimensional`` and not with a later Schmid-Leiman omega total."""
    if "omega_basis" in rel or "omega_total" not in rel:
        return rel
    return {**rel, "omega_unidimensional": rel["omega_total"], "omega_total": None}


def compare(sa: Mapping[str, Any], sb: Mapping[str, Any]) -> dict:
    """What changed from snapshot ``sa`` to snapshot ``sb``: items, coefficients, loadings, settings."""
    items_a, items_b = list(sa.get("items") or []), list(sb.get("items") or [])
    set_a, set_b = set(items_a), set(items_b)
    rel_a = _omega_labelled((sa.get("analysis") or {}).get("reliability") or {})
    rel_b = _omega_labelled((sb.get("analysis") or {}).get("reliability") or {})
    coefs: dict[str, dict] = {"n_items": {"a": len(items_a), "b": len(items_b), "change": len(items_b) - len(items_a)}}
    for key in COMPARED_COEFFICIENTS:
        if key in rel_a or key in rel_b:
            va, vb = rel_a.get(key), rel_b.get(key)
            coefs[key] = {"a": va, "b": vb, "change": _change(va, vb)}
    load_a, labels_a = _loadings_by_item(sa.get("analysis") or {})
    load_b, labels_b = _loadings_by_item(sb.get("analysis") or {})
    same_shape = bool(load_a) and bool(load_b) and labels_a == labels_b
    loadings = []
    for item in [i for i in items_b if i in set_a]:
        la, lb = load_a.get(item), load_b.get(item)
        change = None
        if same_shape and la is not None and lb is not None and len(la) == len(lb):
            change = [_change(x, y) for x, y in zip(la, lb)]
        loadings.append({"item": item, "a": la, "b": lb, "change": change,
                         "primary_a": _primary(la) if la else None, "primary_b": _primary(lb) if lb else None})
    # a setting a snapshot did not store was at its default (older snapshots and API clients store only
    # what they chose), so it differs only when the other snapshot chose something else
    defaults = {opt.name: opt.default for opt in OPTIONS}
    settings_a = {**defaults, **(sa.get("settings") or {})}
    settings_b = {**defaults, **(sb.get("settings") or {})}
    settings_changed = {k: {"a": settings_a.get(k), "b": settings_b.get(k)}
                        for k in sorted(set(settings_a) | set(settings_b)) if settings_a.get(k) != settings_b.get(k)}
    warnings: list[Note] = []
    if sa.get("dataset_id") != sb.get("dataset_id"):
        warnings.append(note("compare_other_dataset", "The two snapshots come from different data sets; their "
                                                      "numbers are not directly comparable."))
    if load_a and load_b and not same_shape:
        warnings.append(note("compare_factors_differ", "The two factor solutions have different factors (number "
                                                       "or labels), so loading changes are shown side by side "
                                                       "without differences."))
    return {
        "a": {"id": sa.get("id"), "name": sa.get("name"), "created_at": sa.get("created_at"),
              "dataset_id": sa.get("dataset_id"), "factors": labels_a},
        "b": {"id": sb.get("id"), "name": sb.get("name"), "created_at": sb.get("created_at"),
              "dataset_id": sb.get("dataset_id"), "factors": labels_b},
        "items_added": [i for i in items_b if i not in set_a],
        "items_removed": [i for i in items_a if i not in set_b],
        "items_common": [i for i in items_b if i in set_a],
        "coefficients": coefs,
        "loadings": loadings,
        "settings_changed": settings_changed,
        "warnings": warnings,
    }


CURRENT = "current"


def current_view(engine: Engine, store: StoreBackend, dataset_id: str, payload: Mapping[str, Any],
                 to_json: ToJson) -> dict:
    """The current view as a snapshot-shaped record (id ``"current"``), computed by the engine exactly as
    ``POST /api/datasets/{id}/analysis`` answers ``payload``; nothing is stored."""
    dataset = engine.dataset(dataset_id)  # 404 if unknown
    analysis = to_json(engine.analyse(dataset_id, dict(payload)))
    items = [str(i) for i in (analysis.get("settings") or {}).get("items") or [m.name for m in dataset.items]]
    record = store.get_dataset(dataset_id) or {}
    return {"id": CURRENT, "name": "Current view", "created_at": None, "dataset_id": dataset_id,
            "dataset_name": record.get("name"), "items": items, "analysis": analysis,
            "settings": {k: v for k, v in payload.items() if k != "items"},
            "item_meta": item_meta(dataset, items, effective_reverse(analysis, payload), to_json)}


def _form_subscales(snap: Mapping[str, Any]) -> dict[str, dict]:
    """Per subscale of one form: its items (wording, reverse, primary factor and loading, item-rest r) and its
    coefficients, read with the scoring readers (``scoring.item_statistics``, ``scoring.scoring_rules``)."""
    analysis = snap.get("analysis") or {}
    loadings, labels = _loadings_by_item(analysis)
    rules = scoring_rules(snap)
    coef = {s["name"]: s["reliability"] for s in rules["subscales"]}
    out: dict[str, dict] = {}
    for group in item_statistics(snap)["subscales"]:
        rows = []
        for r in group["items"]:
            primary = _primary(loadings[r["item"]]) if loadings.get(r["item"]) else None
            factor = None
            if primary is not None:
                i = primary["factor"]
                factor = str(labels[i]) if i < len(labels) else f"F{i + 1}"
            rows.append({"name": r["item"], "text": r["text"], "reverse": r["reverse"], "primary_factor": factor,
                         "loading": primary["loading"] if primary else None, "item_rest_r": r["item_rest_r"]})
        # a form without codebook constructs is one scale: its coefficients are the whole pool's
        rel = coef.get(group["name"]) or (rules["total"]["reliability"] if group["name"] == WHOLE_POOL
                                           and not coef else {})
        out[group["name"]] = {"items": rows, "alpha": rel.get("alpha"),
                              "alpha_ci": rel.get("alpha_ci") or [None, None],
                              "omega_total": rel.get("omega_total"),
                              "omega_hierarchical": rel.get("omega_hierarchical"), "k": len(rows)}
    return out


def _total(snap: Mapping[str, Any]) -> dict:
    rel = scoring_rules(snap)["total"]["reliability"]
    return {**rel, "k": len(snap.get("items") or [])}


def _head(snap: Mapping[str, Any]) -> dict:
    return {"id": snap.get("id"), "name": snap.get("name"), "saved_at": snap.get("created_at"),
            "dataset_id": snap.get("dataset_id"), "n_items": len(snap.get("items") or [])}


def _three(x: Any) -> str:
    return "–" if x is None else f"{x:.3f}".replace("0.", ".", 1)


def _names(items: Sequence[str]) -> str:
    return ", ".join(items[:8]) + (f" and {len(items) - 8} more" if len(items) > 8 else "")


def side_by_side(left: Mapping[str, Any], right: Mapping[str, Any]) -> dict:
    """Two forms (stored snapshots, or one of them the :func:`current_view`) subscale by subscale: each form's
    items with wording, loading and item-rest r, each subscale's coefficients, and what differs in words.
    Items are matched by name, so forms of different data sets can be set beside each other (said so)."""
    subs_l, subs_r = _form_subscales(left), _form_subscales(right)
    empty = {"items": [], "alpha": None, "alpha_ci": [None, None], "omega_total": None,
             "omega_hierarchical": None, "k": 0}
    names = list(subs_l) + [n for n in subs_r if n not in subs_l]
    subscales, differences = [], []
    if left.get("dataset_id") != right.get("dataset_id"):
        differences.append("The two forms come from different data sets: items are matched by name and their "
                           "numbers are not directly comparable.")
    for name in names:
        a, b = subs_l.get(name, empty), subs_r.get(name, empty)
        in_a, in_b = [r["name"] for r in a["items"]], [r["name"] for r in b["items"]]
        only_l = [i for i in in_a if i not in in_b]
        only_r = [i for i in in_b if i not in in_a]
        both = [i for i in in_a if i in in_b]
        subscales.append({"name": name, "left": a, "right": b, "only_left": only_l, "only_right": only_r,
                          "both": both})
        if only_l:
            differences.append(f"{name}: only in “{left.get('name')}”: {_names(only_l)}.")
        if only_r:
            differences.append(f"{name}: only in “{right.get('name')}”: {_names(only_r)}.")
        if a["k"] and b["k"] and a["alpha"] is not None and b["alpha"] is not None \
                and round(a["alpha"], 3) != round(b["alpha"], 3):
            differences.append(f"{name}: alpha {_three(a['alpha'])} ({a['k']} items) beside "
                               f"{_three(b['alpha'])} ({b['k']} items).")
    total = {"left": _total(left), "right": _total(right)}
    if not any(s["only_left"] or s["only_right"] for s in subscales):
        differences.append("Both forms keep the same items.")
    for key, label in (("omega_hierarchical", "omega hierarchical"), ("alpha", "total alpha")):
        va, vb = total["left"].get(key), total["right"].get(key)
        if va is not None and vb is not None and round(va, 3) != round(vb, 3):
            differences.append(f"Whole form: {label} {_three(va)} beside {_three(vb)}.")
    return {"left": _head(left), "right": _head(right), "subscales": subscales, "total": total,
            "differences": differences}
