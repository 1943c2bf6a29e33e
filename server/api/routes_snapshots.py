"""Snapshots: save a pruned scale with the reason for every removed item; list, read, compare, restore;
export the report, the scoring key and the kept items' responses.

A snapshot is immutable. Saving recomputes everything on the server (the removal trail and the full
analysis of the kept items) so the record never depends on what a browser sent as numbers.
"""
from __future__ import annotations

import math
from typing import Any

from fastapi import APIRouter, Request
from fastapi.encoders import jsonable_encoder
from fastapi.responses import HTMLResponse, JSONResponse, Response
from pydantic import BaseModel, ConfigDict, Field

from .. import __version__
from ..exports import responses_csv, safe_filename, scoring_key_csv
from ..report import render_report
from ..stats.agreement import agreement_summary
from .errors import ApiError, not_found
from .openapi import error_responses
from .routes_agreement import AgreementRequest, RetestRequest, compute_retest
from .routes_workspace import audit_snapshot

router = APIRouter(tags=["snapshots"])

#: Our own small vocabulary of reasons for removing an item (the free-text reason is always required).
REASON_CODES = ("cross-loading", "weak", "belongs-elsewhere", "redundant", "wording", "floor-ceiling", "other")

MAX_NAME = 200
MAX_TEXT = 20_000


class RemovedIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    item: str
    reason: str | None = Field(default=None, description="Why the item went (required, free text).")
    code: str | None = Field(default=None, description="Optional code: " + ", ".join(REASON_CODES))
    alpha_after: float | None = Field(default=None, description="Ignored: the server recomputes it.")
    omega_after: float | None = Field(default=None, description="Ignored: the server recomputes it.")


class StabilityIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    retest: RetestRequest | None = Field(default=None, description="A test-retest or parallel-forms comparison "
                                         "to compute and keep: `first` is this dataset, `items` default to the "
                                         "kept items, reverse scoring to the snapshot's.")
    agreement: AgreementRequest | None = Field(default=None, description="A rater table to compute and keep.")


class SnapshotIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    name: str = Field(description="A name for the snapshot, e.g. 'After the March meeting'.")
    author: str = ""
    note: str = ""
    items: list[str] = Field(description="The kept items, in scale order.")
    removed: list[RemovedIn] = Field(default_factory=list, description="Removed items, in removal order.")
    settings: dict[str, Any] = Field(default_factory=dict, description="The analysis settings.")
    parent: str | None = Field(default=None, description="Id of the snapshot this one revises.")
    stability: StabilityIn | None = Field(default=None, description="Stability and agreement results to include.")


def _bad(code: str, message: str, **details) -> ApiError:
    return ApiError(422, code, message, details)


def normalise_code(code: str | None) -> str | None:
    """'Belongs elsewhere', 'floor/ceiling', 'cross_loading' -> the vocabulary's spelling."""
    if code is None or not code.strip():
        return None
    return "-".join(code.strip().lower().replace("/", " ").replace("_", " ").replace("-", " ").split())


def _validate(body: SnapshotIn, known: list[str]) -> list[dict]:
    """Explicit checks that name the offending item; returns the cleaned ``removed`` list."""
    if not body.name.strip():
        raise _bad("missing_name", "The snapshot needs a name.")
    if len(body.name) > MAX_NAME:
        raise _bad("name_too_long", f"The snapshot name has {len(body.name)} characters; at most {MAX_NAME}.")
    for field in ("author", "note"):
        if len(getattr(body, field)) > MAX_TEXT:
            raise _bad("text_too_long", f"The {field} is longer than {MAX_TEXT} characters.", field=field)
    known_set = set(known)
    seen: set[str] = set()
    for item in body.items:
        if item not in known_set:
            raise _bad("unknown_item", f"Kept item '{item}' is not an item of this data set.", item=item)
        if item in seen:
            raise _bad("duplicate_item", f"Item '{item}' is listed twice among the kept items.", item=item)
        seen.add(item)
    if len(body.items) < 2:
        raise _bad("too_few_items", f"A snapshot needs at least 2 kept items; {len(body.items)} given.",
                   n_items=len(body.items))
    removed = []
    removed_seen: set[str] = set()
    for position, r in enumerate(body.removed):
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


def _finite(value):
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _coefficients(analysis: dict) -> dict:
    rel = analysis.get("reliability") or {}
    return {"alpha": _finite(rel.get("alpha")), "omega_total": _finite(rel.get("omega_total"))}


def _analysis_payload(settings: dict) -> tuple[dict, dict]:
    """Check the settings exactly as ``POST /api/datasets/{id}/analysis`` does.

    Returns the settings as the user gave them (for restore) and the payload the analysis route would
    hand to the engine (so the stored numbers are those of a live analysis)."""
    from pydantic import ValidationError

    from .routes_analysis import AnalysisRequest

    given = {k: v for k, v in settings.items() if k != "items"}
    try:
        model = AnalysisRequest.model_validate(given)
    except ValidationError as exc:
        problems = []
        for e in exc.errors():
            where = ".".join(str(p) for p in e.get("loc", ()))
            problems.append(f"settings.{where}: {e.get('msg')}" if where else f"settings: {e.get('msg')}")
        raise _bad("bad_settings", "The analysis settings are not valid: " + "; ".join(problems),
                   problems=problems) from None
    payload = model.model_dump(exclude_unset=False)
    if payload.get("seed") is None:
        payload.pop("seed")
    return given, payload


def _light(snap: dict) -> dict:
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
        "removed": [{"item": r.get("item"), "reason": r.get("reason"), "code": r.get("code")}
                    for r in snap.get("removed") or []],
        "alpha": rel.get("alpha"),
        "omega_total": rel.get("omega_total"),
        "dataset_sha256": snap.get("dataset_sha256"),
        "software_version": snap.get("software_version"),
    }


def _get_snapshot(request: Request, snapshot_id: str) -> dict:
    snap = request.app.state.store.get_snapshot(snapshot_id)
    if snap is None:
        raise not_found("snapshot", snapshot_id)
    return snap


def _item_meta(dataset, items: list[str], reverse: list[str] | None) -> list[dict]:
    by_name = {m.name: m for m in dataset.items}
    out = []
    for name in items:
        m = by_name[name]
        d = m.to_dict() if hasattr(m, "to_dict") else dict(vars(m))
        d = jsonable_encoder(d)
        d["codebook_reverse"] = bool(m.reverse)
        d["reverse"] = bool(name in reverse) if reverse is not None else bool(m.reverse)
        out.append(d)
    return out


def _effective_reverse(analysis: dict, settings: dict) -> list[str] | None:
    """The reverse-keyed items the analysis used: the resolved setting, else the request's, else None
    (= the codebook)."""
    for source in ((analysis.get("settings") or {}), settings):
        rev = source.get("reverse")
        if isinstance(rev, list):
            return [str(r) for r in rev]
    return None


def _stability(app, given: StabilityIn | None, dataset_id: str, kept: list[str], reverse) -> dict | None:
    """Compute the stability and agreement results a snapshot includes (the same code as their routes)."""
    if given is None or (given.retest is None and given.agreement is None):
        return None
    out = {}
    if given.retest is not None:
        rt = given.retest.model_copy(update={
            "first": dataset_id, "snapshot": None, "items": given.retest.items or kept,
            "reverse": given.retest.reverse if given.retest.reverse is not None else reverse})
        out["retest"] = jsonable_encoder(compute_retest(app, rt))
        out["retest_request"] = jsonable_encoder(rt)
    if given.agreement is not None:
        out["agreement"] = jsonable_encoder(agreement_summary(given.agreement.ratings, given.agreement.level))
        out["agreement_level"] = given.agreement.level
    return out


@router.post("/datasets/{dataset_id}/snapshots", status_code=201)
def save_snapshot(dataset_id: str, body: SnapshotIn, request: Request):
    """Save a snapshot: recompute the trail and the full analysis of the kept items, then store it."""
    engine = request.app.state.engine
    store = request.app.state.store
    dataset = engine.dataset(dataset_id)  # 404 if unknown
    record = store.get_dataset(dataset_id) or {}
    removed = _validate(body, [m.name for m in dataset.items])
    if body.parent is not None:
        parent = store.get_snapshot(body.parent)
        if parent is None:
            raise _bad("unknown_parent", f"The parent snapshot '{body.parent}' does not exist.", parent=body.parent)
        if parent.get("dataset_id") != dataset_id:
            raise _bad("parent_other_dataset", f"The parent snapshot '{body.parent}' belongs to another data set.",
                       parent=body.parent, parent_dataset_id=parent.get("dataset_id"))
    settings, payload = _analysis_payload(body.settings)
    kept = list(body.items)

    # The full analysis of the kept items, exactly as POST /api/datasets/{id}/analysis would answer it.
    analysis = jsonable_encoder(engine.analyse(dataset_id, {**payload, "items": kept}))

    # The trail: start from kept + every removed item, then take them out one at a time in the given order.
    removed_items = [r["item"] for r in removed]
    trail = []
    for step in range(len(removed) + 1):
        pool = kept + removed_items[step:]
        if step == len(removed):
            result = analysis
        else:
            result = jsonable_encoder(engine.reliability(dataset_id, {**payload, "items": pool}))
        coef = _coefficients(result)
        trail.append({"step": step, "removed": removed_items[step - 1] if step else None,
                      "n_items": len(pool), **coef})
    for r, t in zip(removed, trail[1:]):
        r.update({"alpha_after": t["alpha"], "omega_after": t["omega_total"], "n_items_after": t["n_items"]})

    reverse = _effective_reverse(analysis, settings)
    stability = _stability(request.app, body.stability, dataset_id, kept, reverse)
    snapshot = {
        "dataset_id": dataset_id,
        "dataset_name": record.get("name") or getattr(dataset, "name", None),
        "dataset_sha256": record.get("sha256"),
        "name": body.name.strip(),
        "author": body.author.strip(),
        "note": body.note,
        "items": kept,
        "removed": removed,
        "trail": trail,
        "settings": settings,
        "item_meta": _item_meta(dataset, kept, reverse),
        "id_column": getattr(dataset, "id_column", None),
        "analysis": analysis,
        "software_version": __version__,
        "parent": body.parent,
        "stability": stability,
    }
    try:
        stored = store.add_snapshot(dataset_id, snapshot)
    except KeyError:  # the data set was deleted while we computed
        raise not_found("dataset", dataset_id) from None
    audit_snapshot(request, "snapshot", stored, who=body.author)
    return JSONResponse(jsonable_encoder(stored), status_code=201)


@router.get("/datasets/{dataset_id}/snapshots")
def list_snapshots(dataset_id: str, request: Request):
    """The data set's snapshots, newest first, without their full analyses."""
    store = request.app.state.store
    snaps = store.list_snapshots(dataset_id)
    if not snaps and store.get_dataset(dataset_id) is None:
        raise not_found("dataset", dataset_id)
    return [_light(s) for s in snaps]


@router.get("/snapshots/{snapshot_id}")
def get_snapshot(snapshot_id: str, request: Request):
    """One snapshot with everything stored at save time."""
    return _get_snapshot(request, snapshot_id)


def _change(a, b):
    if isinstance(a, (int, float)) and isinstance(b, (int, float)) and not isinstance(a, bool) \
            and not isinstance(b, bool):
        return b - a
    return None


COMPARED_COEFFICIENTS = ("alpha", "alpha_standardized", "omega_total", "lambda2", "lambda6", "split_half",
                         "mean_inter_item_r", "scale_mean", "scale_sd", "sem", "n_complete")


def _loadings_by_item(analysis: dict) -> tuple[dict, list]:
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


@router.get("/snapshots/{a}/compare/{b}")
def compare_snapshots(a: str, b: str, request: Request):
    """What changed from snapshot ``a`` to snapshot ``b``: items, coefficients, loadings."""
    sa, sb = _get_snapshot(request, a), _get_snapshot(request, b)
    items_a, items_b = list(sa.get("items") or []), list(sb.get("items") or [])
    set_a, set_b = set(items_a), set(items_b)
    rel_a = (sa.get("analysis") or {}).get("reliability") or {}
    rel_b = (sb.get("analysis") or {}).get("reliability") or {}
    coefficients = {"n_items": {"a": len(items_a), "b": len(items_b), "change": len(items_b) - len(items_a)}}
    for key in COMPARED_COEFFICIENTS:
        if key in rel_a or key in rel_b:
            va, vb = rel_a.get(key), rel_b.get(key)
            coefficients[key] = {"a": va, "b": vb, "change": _change(va, vb)}
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
    settings_a, settings_b = sa.get("settings") or {}, sb.get("settings") or {}
    settings_changed = {k: {"a": settings_a.get(k), "b": settings_b.get(k)}
                        for k in sorted(set(settings_a) | set(settings_b)) if settings_a.get(k) != settings_b.get(k)}
    warnings = []
    if sa.get("dataset_id") != sb.get("dataset_id"):
        warnings.append("The two snapshots come from different data sets; their numbers are not directly "
                        "comparable.")
    if load_a and load_b and not same_shape:
        warnings.append("The two factor solutions have different factors (number or labels), so loading "
                        "changes are shown side by side without differences.")
    return {
        "a": {"id": sa.get("id"), "name": sa.get("name"), "created_at": sa.get("created_at"),
              "dataset_id": sa.get("dataset_id"), "factors": labels_a},
        "b": {"id": sb.get("id"), "name": sb.get("name"), "created_at": sb.get("created_at"),
              "dataset_id": sb.get("dataset_id"), "factors": labels_b},
        "items_added": [i for i in items_b if i not in set_a],
        "items_removed": [i for i in items_a if i not in set_b],
        "items_common": [i for i in items_b if i in set_a],
        "coefficients": coefficients,
        "loadings": loadings,
        "settings_changed": settings_changed,
        "warnings": warnings,
    }


@router.get("/snapshots/{snapshot_id}/restore")
def restore_snapshot(snapshot_id: str, request: Request):
    """The snapshot's items, settings and removal record, ready for the dashboard to load."""
    snap = _get_snapshot(request, snapshot_id)
    audit_snapshot(request, "snapshot_restore", snap)
    return {
        "snapshot_id": snap.get("id"),
        "dataset_id": snap.get("dataset_id"),
        "name": snap.get("name"),
        "items": snap.get("items"),
        "settings": snap.get("settings") or {},
        "removed": [{"item": r.get("item"), "reason": r.get("reason"), "code": r.get("code")}
                    for r in snap.get("removed") or []],
    }


@router.get("/snapshots/{snapshot_id}/report", response_class=HTMLResponse)
def snapshot_report(snapshot_id: str, request: Request):
    """The printable HTML report of a snapshot (no scripts, inline SVG charts)."""
    snap = _get_snapshot(request, snapshot_id)
    dataset = request.app.state.store.get_dataset(snap.get("dataset_id")) or {}
    page = render_report(snap, dataset)
    filename = safe_filename(snap.get("name") or "snapshot", "report", suffix=".html")
    return HTMLResponse(page, headers={
        "Content-Disposition": f"inline; filename=\"{filename}\"",
        # The report never needs scripts or anything from elsewhere: say so to the browser too.
        "Content-Security-Policy": "default-src 'none'; style-src 'unsafe-inline'; img-src data:; "
                                   "base-uri 'none'; form-action 'none'; frame-ancestors 'none'",
    })


def _csv_response(text: str, filename: str) -> Response:
    return Response(text.encode("utf-8"), media_type="text/csv; charset=utf-8",
                    headers={"Content-Disposition": f"attachment; filename=\"{filename}\""})


@router.get("/snapshots/{snapshot_id}/scoring-key")
def snapshot_scoring_key(snapshot_id: str, request: Request):
    """CSV of the kept items: item, text, construct, reverse, min, max."""
    snap = _get_snapshot(request, snapshot_id)
    meta = snap.get("item_meta")
    if not meta:
        dataset = request.app.state.engine.dataset(snap["dataset_id"])
        meta = _item_meta(dataset, snap.get("items") or [], (snap.get("settings") or {}).get("reverse"))
    return _csv_response(scoring_key_csv(meta), safe_filename(snap.get("name") or "snapshot", "scoring-key",
                                                              suffix=".csv"))


@router.get("/snapshots/{snapshot_id}/responses", responses=error_responses(409))
def snapshot_responses(snapshot_id: str, request: Request, scored: bool = False):
    """CSV of the kept items' responses, raw or (``?scored=true``) with reverse items scored as min+max-x."""
    snap = _get_snapshot(request, snapshot_id)
    engine = request.app.state.engine
    dataset_id = snap["dataset_id"]
    dataset = engine.dataset(dataset_id)  # 404 when the data set has been deleted since
    record = request.app.state.store.get_dataset(dataset_id) or {}
    if snap.get("dataset_sha256") and record.get("sha256") and record["sha256"] != snap["dataset_sha256"]:
        raise ApiError(409, "dataset_changed", "The data set's file no longer matches the one this snapshot was "
                       "saved from (different SHA-256).", {"snapshot": snapshot_id, "dataset": dataset_id})
    names = [m.name for m in dataset.items]
    kept = list(snap.get("items") or [])
    columns = [names.index(i) for i in kept]
    if scored:
        meta = snap.get("item_meta") or []
        reverse = [m["name"] for m in meta if m.get("reverse")] if meta else \
            (snap.get("settings") or {}).get("reverse")
        matrix = engine.scored(dataset_id, reverse)
    else:
        matrix = dataset.responses
    text = responses_csv(matrix[:, columns], kept, ids=dataset.ids, id_column=dataset.id_column)
    kind = "scored-responses" if scored else "responses"
    return _csv_response(text, safe_filename(snap.get("name") or "snapshot", kind, suffix=".csv"))
